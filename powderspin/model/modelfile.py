"""Model files: reading and writing TOML with one key table.

A model file is TOML (keys, units and ranges in :mod:`powderspin.model.schema`; the
README has the full reference)::

    nucleus = "27Al"

    [measurement]              # or several [[measurement]] tables
    field_tesla = 14.1         # required
    spinning_hz = 12500        # 0 = static, "inf" = infinite rate
    transitions = "central"
    lorentz_hz = 150.0

    [[site]]
    label = "AlO4"             # unique
    shift_ppm = 61.0
    cq_mhz = { start = 4.0, min = 1.0, max = 8.0 }     # a free parameter
    eta_q = 0.35
    gauss_hz = { same_as = "AlO6.gauss_hz" }          # a tied parameter

    [fit]
    regions = [[90.0, 40.0], [20.0, -30.0]]
    baseline_order = 1

Reading and writing use the same key table, so a written model reads back to
an equal model (free and tied parameters, the shift-tensor form and every
measurement included).
"""

from __future__ import annotations

import difflib
import math
import re
import tomllib
from dataclasses import replace
from pathlib import Path
from typing import Any

import tomli_w

from ..checks import is_real, path_argument, show
from ..files import write_text_atomic
from ..physics.nuclides import Nuclide, get_nuclide
from .schema import FREE_TABLE_KEYS, KEYS, TIE_KEY, key_spec, keys_of
from .values import (
    MAGIC_ANGLE_DEG,
    SHIFT_KEYS,
    FitSettings,
    FreeParameter,
    Measurement,
    Model,
    ModelError,
    ParameterAddress,
    Site,
    TiedParameter,
    check_number,
    fittable_keys,
)

__all__ = ["load_model", "parse_model", "make_model", "make_site", "model_from_tables", "parse_site_table",
           "model_to_dict", "parse_processing", "reconcile_linked_keys",
           "model_to_toml", "write_model", "MAX_MODEL_BYTES"]

#: largest model file read (bytes); a model file is a few kB of text
MAX_MODEL_BYTES = 4 * 1024 * 1024


def _unknown(keys, allowed, where):
    extra = sorted(set(keys) - set(allowed))
    if extra:
        hints = []
        for k in extra:
            close = difflib.get_close_matches(str(k), sorted(allowed), n=1)
            hints.append(f"'{k}'" + (f" (did you mean '{close[0]}'?)" if close else ""))
        raise ModelError(f"{where}: unknown key {', '.join(hints)}; allowed keys are {', '.join(sorted(allowed))}")


def _is_number(v) -> bool:
    return is_real(v)  # int, float and every numpy integer and floating type; never bool or text


def _parameter(table: dict, key: str, where: str, kind_table: str, free: list, tied: list, item=None):
    """The value of a number key: plain, free ``{start, min, max}`` or tied ``{same_as}``.

    Records free and tied entries as (key, item, ...) and returns the start
    value (None for a tied one, filled in later).
    """
    v = table[key] if item is None else table[key][item]
    name = key if item is None else f"{key}[{item}]"
    if isinstance(v, dict):
        if key not in fittable_keys(kind_table):
            raise ModelError(f"{where}: {name} cannot be a fit parameter; give a number")
        if TIE_KEY in v:
            _unknown(v.keys(), {TIE_KEY}, f"{where}.{name}")
            src = v[TIE_KEY]
            if not isinstance(src, str) or "." not in src:
                raise ModelError(f"{where}.{name}: same_as = {src!r} must be \"LABEL.{key}\" (a site label and a key)")
            tied.append((key, item, src))
            return None
        _unknown(v.keys(), FREE_TABLE_KEYS, f"{where}.{name}")
        if "start" not in v:
            raise ModelError(f"{where}.{name}: a free parameter needs 'start', "
                             "e.g. { start = 3.0, min = 1.0, max = 8.0 }")
        spec = key_spec(kind_table, key)
        st = check_number(where, key, v["start"], kind_table)
        lo = check_number(where, key, v["min"], kind_table) if "min" in v else spec.low
        hi = check_number(where, key, v["max"], kind_table) if "max" in v else spec.high
        if not lo < hi:
            raise ModelError(f"{where}.{name}: min = {lo:g} must be below max = {hi:g}")
        if not (lo <= st <= hi):
            raise ModelError(f"{where}.{name}: start = {st:g} is outside its own range [{lo:g}, {hi:g}]")
        free.append((key, item, st, lo, hi))
        return st
    if not _is_number(v):
        spec = key_spec(kind_table, key)
        raise ModelError(f"{where}: {name} must be a number ({spec.unit or 'dimensionless'}), got {show(v)}")
    return float(v)


def parse_site_table(i: int, t: Any, where_default: str | None = None):
    """Read one ``[[site]]`` table.

    Parameters
    ----------
    i : int
        Index of the site (0-based); the default label is ``"site {i+1}"``.
    t : dict
        The table.
    where_default : str, optional
        Name for messages before the label is known.

    Returns
    -------
    site : Site
        Tied values hold the key's default until the model applies the ties.
    free : list of tuple
        ``(key, item, start, min, max)`` of each free parameter.
    tied : list of tuple
        ``(key, item, "LABEL.key")`` of each tied parameter.

    Examples
    --------
    >>> site, free, tied = parse_site_table(0, {"label": "A", "cq_mhz": {"start": 2.0, "max": 5.0}})
    >>> site.cq_mhz, free
    (2.0, [('cq_mhz', None, 2.0, -1000.0, 5.0)])
    """
    where = where_default or f"site {i + 1}"
    if not isinstance(t, dict):
        raise ModelError(f"{where} must be a table of site keys, got {type(t).__name__}")
    allowed = keys_of("site")
    _unknown(t.keys(), allowed, where)
    for k in ("stderr", "interval"):
        if k in t:
            _check_written_table(t[k], f"{where_default or f'site {i + 1}'}.{k}")
    label = t.get("label", f"site {i + 1}")
    if not isinstance(label, str) or not label.strip():
        raise ModelError(f"{where}: label = {label!r} must be a non-empty text")
    where = f"site '{label}'"
    free: list = []
    tied: list = []

    def num(key, default=None):
        if default is None:
            default = key_spec("site", key).default  # the one place site defaults live
        if key not in t:
            return default
        v = _parameter(t, key, where, "site", free, tied)
        return default if v is None else v

    forms = [f for f, ks in (("span_skew", ("span_ppm", "skew")), ("haeberlen", ("aniso_ppm", "eta_cs")),
                             ("principal", ("principal_ppm",))) if any(k in t for k in ks)]
    if len(forms) > 1:
        raise ModelError(
            f"{where}: give the shift anisotropy one way only: span_ppm + skew, aniso_ppm + eta_cs, or principal_ppm"
        )
    form = forms[0] if forms else "iso"
    # every plain number of the schema's site table (the shift keys are read below, by form)
    vals: dict = {k.name: num(k.name) for k in keys_of("site").values()
                  if k.kind == "number" and k.name not in SHIFT_KEYS}
    for key in ("cq_distribution_mhz", "eta_distribution"):  # inline tables {values, weights}; checked by Site
        if key in t:
            if not isinstance(t[key], dict):
                raise ModelError(f"{where}: {key} must be a table {{ values = [...], weights = [...] }}, "
                                 f"got {t[key]!r}")
            if set(t[key]) & set(FREE_TABLE_KEYS + (TIE_KEY,)):
                raise ModelError(f"{where}: {key} cannot be a fit parameter (czjzek_sigma_mhz, cq_mhz and eta_q "
                                 "can); give { values = [...], weights = [...] }")
            vals[key] = t[key]
    e = t.get("euler_deg", [0.0, 0.0, 0.0])
    if not isinstance(e, list) or len(e) != 3:
        raise ModelError(f"{where}: euler_deg must be a list of 3 angles in degrees, e.g. [0, 30, 0]")
    angles = [0.0, 0.0, 0.0]
    if "euler_deg" in t:
        for k in range(3):
            v = _parameter(t, "euler_deg", where, "site", free, tied, item=k)
            angles[k] = 0.0 if v is None else v
    vals["euler_deg"] = tuple(angles)
    if form == "principal":
        p = t["principal_ppm"]
        if not isinstance(p, list) or len(p) != 3 or not all(_is_number(x) for x in p):
            raise ModelError(f"{where}: principal_ppm must be a list of 3 numbers (ppm), e.g. [40.0, 10.0, -20.0]")
        if "shift_ppm" in t:
            raise ModelError(f"{where}: principal_ppm fixes the isotropic shift; do not also give shift_ppm")
        vals["principal_ppm"] = tuple(float(x) for x in p)
    else:
        vals["shift_ppm"] = num("shift_ppm")
        if form == "span_skew":
            if "span_ppm" not in t:
                raise ModelError(f"{where}: skew needs span_ppm (the span Omega in ppm)")
            if "skew" not in t:
                raise ModelError(f"{where}: span_ppm needs skew (from -1 to 1; +1 and -1 are axially symmetric "
                                 "tensors, 0 lies midway): give skew as well, e.g. skew = 0.0, so that no shape is "
                                 "assumed for you")
            vals["span_ppm"] = num("span_ppm", 0.0)
            vals["skew"] = num("skew", 0.0)
        elif form == "haeberlen":
            if "aniso_ppm" not in t:
                raise ModelError(f"{where}: eta_cs needs aniso_ppm (d_zz - d_iso in ppm)")
            vals["aniso_ppm"] = num("aniso_ppm", 0.0)
            vals["eta_cs"] = num("eta_cs", 0.0)
    # range checks of free-parameter bounds use the key's own range
    return Site.from_keys(vals, label, form), free, tied


def _parse_measurement(j: int, t: Any, where: str, free: list):
    if not isinstance(t, dict):
        raise ModelError(f"{where} must be a table of measurement keys, got {type(t).__name__}")
    _unknown(t.keys(), keys_of("measurement"), where)
    if "field_tesla" not in t:
        raise ModelError(
            f"{where}: field_tesla is required (the magnetic field in tesla, e.g. field_tesla = 14.1); "
            "no default can guess it"
        )
    kw: dict[str, Any] = {}
    for k, v in t.items():
        spec = key_spec("measurement", k)
        if spec.kind in ("number",):
            if k == "spinning_hz" and isinstance(v, str):
                if v.strip().lower() not in ("inf", "infinite", "infinity"):
                    raise ModelError(f"{where}: spinning_hz = {v!r}: give a number of Hz or \"inf\"")
                kw[k] = math.inf
                continue
            if isinstance(v, dict):
                sub: list = []
                tied_here: list = []
                val = _parameter(t, k, where, "measurement", sub, tied_here)
                if tied_here:
                    raise ModelError(f"{where}: {k}: same_as is for site keys; measurement keys may be free only")
                for key, item, st, lo, hi in sub:
                    free.append(FreeParameter(ParameterAddress("measurement", j, key), st, lo, hi,
                                              ParameterAddress("measurement", j, key).name()))
                kw[k] = val
                continue
            if not _is_number(v):
                raise ModelError(f"{where}: {k} must be a number ({spec.unit or 'dimensionless'}), got {show(v)}")
            kw[k] = v
        elif spec.kind == "transitions":
            kw[k] = tuple(v) if isinstance(v, list) else v
        elif spec.kind in ("orientations", "rotor_phases", "integer"):
            kw[k] = v
        elif spec.kind in ("choice", "text"):
            if not isinstance(v, str):
                what = "a file path (text), e.g. data = \"spectrum.csv\"" if k == "data" else "text"
                raise ModelError(f"{where}: {k} = {v!r} must be {what}")
            kw[k] = v
        elif spec.kind == "numbers":
            if not isinstance(v, list) or not all(_is_number(x) for x in v):
                raise ModelError(f"{where}: {k} must be a list of numbers, e.g. [0.0, 1.5], got {v!r}")
            kw[k] = tuple(float(x) for x in v)
        elif spec.kind == "table":
            _check_written_table(v, f"{where}.{k}")
        else:  # pragma: no cover - every measurement kind is handled above
            kw[k] = v
    try:
        return Measurement(**kw)
    except ModelError as e:
        msg = str(e)
        if where != "measurement" and msg.startswith("measurement:"):
            msg = where + msg[len("measurement"):]
        raise ModelError(msg) from None


def _exact_values(fit: Any, meas_list: list, sites_t: list) -> tuple[list, list]:
    """Put back the full values of a result file's rounded fitted values, where the file still holds them.

    A result file shows each fitted value to the digits its standard error
    supports; ``[fit.result] exact_values`` keeps, per parameter name,
    ``[written, full]``.  Where the table's value is still the written one,
    the full value is used, so that simulating a result file gives the fitted
    curve exactly; a value the user has since edited is left as edited.
    """
    try:
        exact = fit["result"]["exact_values"]
    except (TypeError, KeyError):
        return meas_list, sites_t
    if not isinstance(exact, dict):
        return meas_list, sites_t
    meas_list = [dict(t) if isinstance(t, dict) else t for t in meas_list]
    sites_t = [dict(t) if isinstance(t, dict) else t for t in sites_t]
    labels = [t.get("label") if isinstance(t, dict) else None for t in sites_t]
    for name, pair in exact.items():
        if not (isinstance(name, str) and isinstance(pair, list) and len(pair) == 2
                and all(_is_number(x) for x in pair)):
            continue
        owner, _, key = name.rpartition(".")
        item = None
        if key.endswith("]") and "[" in key:
            key, _, idx = key[:-1].partition("[")
            item = int(idx) if idx.isdigit() else None
            if item is None:
                continue
        if owner.startswith("measurement ") and owner.split()[-1].isdigit():
            j = int(owner.split()[-1]) - 1
            table = meas_list[j] if 0 <= j < len(meas_list) else None
        else:
            table = sites_t[labels.index(owner)] if owner in labels else None
        if not isinstance(table, dict) or key not in table:
            continue
        written, full = pair
        value = table[key]
        if item is None and _is_number(value) and value == written:
            table[key] = full
        elif item is not None and isinstance(value, list) and item < len(value) and value[item] == written:
            table[key] = value[:item] + [full] + value[item + 1:]
    return meas_list, sites_t


def _check_written_table(v: Any, where: str) -> None:
    """A sub-table a fit writes (stderr, interval, result): accepted on reading, not used."""
    if not isinstance(v, dict):
        raise ModelError(f"{where} must be a table (it holds what a fit wrote), got {type(v).__name__}")


def _parse_fit(t: Any) -> FitSettings:
    if not isinstance(t, dict):
        raise ModelError(f"[fit] must be a table, got {type(t).__name__}")
    _unknown(t.keys(), keys_of("fit"), "fit")
    if "result" in t:
        _check_written_table(t["result"], "fit.result")
    regions = t.get("regions", [])
    if not isinstance(regions, list) or not all(isinstance(r, list) for r in regions):
        raise ModelError("fit: regions must be a list of [ppm_hi, ppm_lo] pairs, e.g. [[90.0, 40.0], [20.0, -30.0]]")
    for r in regions:
        if len(r) != 2 or not all(_is_number(x) for x in r):
            raise ModelError(f"fit: regions entry {r!r} must be two numbers [ppm_hi, ppm_lo]")
    noise = t.get("noise_region")
    if noise is not None and (not isinstance(noise, list) or len(noise) != 2 or not all(_is_number(x) for x in noise)):
        raise ModelError(f"fit: noise_region = {noise!r} must be two numbers [ppm_hi, ppm_lo]")
    f1_regions = t.get("f1_regions", [])
    if not isinstance(f1_regions, list) or not all(isinstance(r, list) for r in f1_regions):
        raise ModelError("fit: f1_regions must be a list of [ppm_hi, ppm_lo] pairs, e.g. [[70.0, 60.0]]")
    for r in f1_regions:
        if len(r) != 2 or not all(_is_number(x) for x in r):
            raise ModelError(f"fit: f1_regions entry {r!r} must be two numbers [ppm_hi, ppm_lo]")
    cuts = t.get("slice_f1_ppm", [])
    if not isinstance(cuts, list) or not all(_is_number(x) for x in cuts):
        raise ModelError(f"fit: slice_f1_ppm = {cuts!r} must be a list of F1 shifts (ppm), e.g. [64.5, 53.0]")
    return FitSettings(tuple(tuple(r) for r in regions), tuple(noise) if noise is not None else None,
                       t.get("baseline_order"), tuple(tuple(r) for r in f1_regions), tuple(cuts))


def parse_processing(t: Any) -> tuple:
    """The ``[processing]`` table as sorted (key, value) pairs, each key and value checked against the schema.

    Parameters
    ----------
    t : dict

    Returns
    -------
    tuple of (str, value)

    Raises
    ------
    ModelError
        Not a table, an unknown key, a value of the wrong kind or out of range.

    Examples
    --------
    >>> parse_processing({"exponential_hz": 50, "phase": "auto"})
    (('exponential_hz', 50.0), ('phase', 'auto'))
    """
    if not isinstance(t, dict):
        raise ModelError(f"[processing] must be a table, got {type(t).__name__}")
    specs = keys_of("processing")
    _unknown(t.keys(), specs, "processing")
    out = []
    for key in sorted(t):
        spec, v = specs[key], t[key]
        if spec.kind == "choice":
            if v not in spec.choices:
                allowed = ", ".join(f'"{c}"' for c in spec.choices)
                raise ModelError(f"processing: {key} = {v!r} must be one of {allowed}")
        else:
            if not _is_number(v):
                raise ModelError(f"processing: {key} = {v!r} must be a number ({spec.doc})")
            if spec.kind == "integer":
                if float(v) != int(v):
                    raise ModelError(f"processing: {key} = {v!r} must be a whole number")
                v = int(v)
            else:
                v = float(v)
            low_ok = v > spec.low if spec.low_open else v >= spec.low
            if not (low_ok and v <= spec.high):
                raise ModelError(f"processing: {key} = {v!r} must be in {spec.range_text()} {spec.unit} ({spec.why})")
        out.append((key, v))
    return tuple(out)


def _resolve_tie(text: str, key: str, item, sites, n_meas: int, where: str) -> ParameterAddress:
    owner, _, src_key = text.rpartition(".")
    src_item = item
    if src_key.endswith("]") and "[" in src_key:
        src_key, _, idx = src_key[:-1].partition("[")
        try:
            src_item = int(idx)
        except ValueError:
            raise ModelError(f"{where}: same_as = {text!r}: {idx!r} is not an index 0, 1 or 2") from None
    if src_key != key:
        raise ModelError(f"{where}: same_as = {text!r} must name the same key ({key}) of another site")
    labels = [s.label for s in sites]
    if owner not in labels:
        close = difflib.get_close_matches(owner, labels, n=1)
        hint = f" (did you mean '{close[0]}'?)" if close else ""
        raise ModelError(f"{where}: same_as = {text!r}: there is no site '{owner}'{hint}; sites are "
                         + ", ".join(repr(x) for x in labels))
    return ParameterAddress("site", labels.index(owner), key, src_item)


def model_from_tables(nucleus, measurements: list, sites: list, fit: dict, source: str = "") -> Model:
    """Build a :class:`Model` from parsed tables (the common path of files and Python dicts).

    Parameters
    ----------
    nucleus : Nuclide
    measurements : list of dict or Measurement
    sites : list of dict or Site
    fit : dict
        ``[fit]`` keys (may be empty).
    source : str, optional
        The model file, if any.

    Returns
    -------
    Model

    Examples
    --------
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> m = model_from_tables(get_nuclide("31P"), [{"field_tesla": 9.4}], [{"span_ppm": 100.0, "skew": 0.2}], {})
    >>> m.sites[0].shift_form
    'span_skew'
    """
    free: list[FreeParameter] = []
    meas = []
    n_meas = len(measurements)
    for j, t in enumerate(measurements):
        where = "measurement" if n_meas == 1 else f"measurement {j + 1}"
        meas.append(t if isinstance(t, Measurement) else _parse_measurement(j, t, where, free))
    built: list[Site] = []
    pending_free: list = []
    pending_tied: list = []
    for i, t in enumerate(sites):
        if isinstance(t, Site):
            built.append(t)
            continue
        if not isinstance(t, dict):
            raise ModelError(f"sites[{i}] must be a dict of site keys (or a Site), got {type(t).__name__}")
        site, f, tt = parse_site_table(i, t)
        built.append(site)
        pending_free += [(i, e) for e in f]
        pending_tied += [(i, e) for e in tt]
    # addresses, now that every label is known
    for i, (key, item, st, lo, hi) in pending_free:
        a = ParameterAddress("site", i, key, item)
        free.append(FreeParameter(a, st, lo, hi, _name(a, built)))
    order = {(k.table, k.name): n for n, k in enumerate(KEYS)}
    free.sort(key=lambda f: (f.address.table != "measurement", f.address.index,
                             order[(f.address.table, f.address.key)], f.address.item or 0))
    tied: list[TiedParameter] = []
    for i, (key, item, text) in pending_tied:
        a = ParameterAddress("site", i, key, item)
        where = f"site '{built[i].label}'"
        src = _resolve_tie(text, key, item, built, n_meas, where)
        if src == a:
            raise ModelError(f"{where}: {key} is tied to itself (same_as = {text!r})")
        tied.append(TiedParameter(a, src, _name(a, built), _name(src, built)))
    tied_addrs = {t.address for t in tied}
    for t in tied:
        if t.source in tied_addrs:
            raise ModelError(f"parameter {t.name} follows {t.source_name}, which is itself tied; "
                             "tie both to the same free or fixed parameter")
    model = Model(nucleus, tuple(meas), tuple(built), tuple(free), tuple(tied),
                  fit if isinstance(fit, FitSettings) else _parse_fit(fit), source)
    return model.with_parameters({}) if tied else model


def _name(a: ParameterAddress, sites) -> str:
    item = f"[{a.item}]" if a.item is not None else ""
    return f"{sites[a.index].label}.{a.key}{item}"


def parse_model(data: Any, source: str = "") -> Model:
    """Build a :class:`Model` from a parsed TOML mapping, validating every key.

    Parameters
    ----------
    data : dict
        The parsed file: ``nucleus``, one ``measurement`` table (or a list of
        them), ``site`` tables and an optional ``fit`` table, with the keys of
        :mod:`powderspin.model.schema` (field in tesla, spinning rate in Hz, shifts
        in ppm, C_Q in MHz, angles in degrees).
    source : str, optional
        Where the mapping came from (recorded in the model and the metadata).

    Returns
    -------
    Model

    Raises
    ------
    ModelError
        For a missing, unknown or out-of-range key.

    References
    ----------
    TOML v1.0.0 specification (toml.io).

    Examples
    --------
    >>> m = parse_model({"nucleus": "27Al", "measurement": {"field_tesla": 14.1},
    ...                  "site": [{"cq_mhz": 3.0, "eta_q": 0.5}]})
    >>> m.sites[0].cq_mhz
    3.0
    """
    if not isinstance(data, dict):
        raise ModelError(f"model: expected a table of keys, got {type(data).__name__}")
    _unknown(data.keys(), {"nucleus", "measurement", "site", "fit", "processing"}, "model")
    if "nucleus" not in data:
        raise ModelError("model: 'nucleus' is required, e.g. nucleus = \"27Al\"")
    if not isinstance(data["nucleus"], str):
        raise ModelError(f"model: nucleus = {data['nucleus']!r} must be text, e.g. \"27Al\"")
    try:
        nuc = get_nuclide(data["nucleus"])
    except ValueError as e:
        raise ModelError(f"model: nucleus: {e}") from None
    if "measurement" not in data:
        raise ModelError(
            "model: a [measurement] table with field_tesla is required (the magnetic field in tesla, "
            "e.g. field_tesla = 14.1); no default can guess it"
        )
    meas_t = data["measurement"]
    meas_list = meas_t if isinstance(meas_t, list) else [meas_t]
    if not meas_list:
        raise ModelError("model: [[measurement]] is empty; give at least one table with field_tesla")
    sites_t = data.get("site", [])
    if isinstance(sites_t, dict):
        sites_t = [sites_t]
    if not isinstance(sites_t, list):
        raise ModelError("model: 'site' must be [[site]] tables")
    meas_list, sites_t = _exact_values(data.get("fit"), meas_list, sites_t)
    processing = None
    if "processing" in data:
        processing = dict(parse_processing(data["processing"]))
        meas_list, processing = reconcile_linked_keys(meas_list, processing)
    model = model_from_tables(nuc, meas_list, sites_t, data.get("fit", {}), source)
    if processing is not None:
        model = replace(model, processing=tuple(sorted(processing.items())))
    return model


def _linked_pairs():
    """(processing key, measurement key) of every pair the schema marks as one quantity."""
    return [(k.name, k.linked_to.split(".", 1)[1]) for k in KEYS
            if k.table == "processing" and k.linked_to.startswith("measurement.")]


def reconcile_linked_keys(measurements: list, processing: dict) -> tuple[list, dict]:
    """One value for each pair of keys the schema links (``KeySpec.linked_to``): refused when written twice apart.

    The ``[processing]`` echo-train keys say how the data were made into a
    spectrum; the ``[measurement]`` echo-train keys simulate that spectrum.
    ``echo_period_us`` is ``echo_train_period_us`` (the echo period tau, the
    spikelets 1/tau apart); ``echo_count`` is ``echo_train_echoes`` (the
    echoes transformed into spikelets).  The rules:

    - written in both places: they must agree (else one :class:`ModelError`
      naming both and saying what to write);
    - with ``echo_train = "spikelets"`` a measurement without its key takes
      the processing's value (it then simulates the spikelets the processing
      makes); a processing without ``echo_period_us`` (or, for spikelets,
      ``echo_count``) takes the measurements' value when they agree;
    - ``echo_train = "coadd"`` makes one pattern without spikelets: a
      measurement simulating the spikelet comb is refused (``echo_train_output
      = "envelope"`` gives the pattern).

    Parameters
    ----------
    measurements : list of dict
        The raw ``[measurement]`` tables (not changed; changed copies are returned).
    processing : dict
        The checked ``[processing]`` table.

    Returns
    -------
    measurements, processing : list of dict, dict

    Raises
    ------
    ModelError

    Examples
    --------
    >>> m, p = reconcile_linked_keys([{"field_tesla": 9.4}], {"echo_train": "spikelets", "echo_period_us": 200.0})
    >>> m[0]["echo_train_period_us"]
    200.0
    >>> reconcile_linked_keys([{"field_tesla": 9.4, "echo_train_period_us": 250.0}],
    ...                       {"echo_train": "spikelets", "echo_period_us": 200.0})
    Traceback (most recent call last):
    ...
    powderspin.model.values.ModelError: measurement: echo_train_period_us = 250 but [processing] echo_period_us = 200: \
one value (the echo period), written twice; write it once, in [processing] echo_period_us (the measurement takes it \
from there)
    """
    meas = [dict(m) if isinstance(m, dict) else m for m in measurements]
    proc = dict(processing)
    mode = proc.get("echo_train", "none")
    n = len(meas)

    def where(j):
        return "measurement" if n == 1 else f"measurement {j + 1}"

    for p_key, m_key in _linked_pairs():
        what = key_spec("processing", p_key)
        label = "the echo period" if p_key == "echo_period_us" else "the number of echoes"
        pv = proc.get(p_key)
        given = [(j, m[m_key]) for j, m in enumerate(meas) if isinstance(m, dict) and m_key in m]
        for j, mv in given:
            if pv is not None and _is_number(mv) and not math.isclose(float(mv), float(pv), rel_tol=1e-9):
                raise ModelError(f"{where(j)}: {m_key} = {mv:g} but [processing] {p_key} = {pv:g}: one value "
                                 f"({label}), written twice; write it once, in [processing] {p_key} (the "
                                 "measurement takes it from there)")
        if mode == "none":
            continue
        count_key = p_key == "echo_count"
        if pv is None and given and (mode == "spikelets" or not count_key):
            values = {float(mv) for _, mv in given if _is_number(mv)}
            if len(values) > 1:
                shown = ", ".join(f"{v:g}" for v in sorted(values))
                raise ModelError(f"the measurements give different {m_key} ({shown}) but one [processing] table "
                                 f"(echo_train = \"{mode}\") processes all their data; fit them from separate model "
                                 "files")
            if values:
                v = values.pop()
                proc[p_key] = int(v) if what.kind == "integer" else v
        elif pv is not None and mode == "spikelets":
            for m in meas:
                if isinstance(m, dict) and m_key not in m:
                    m[m_key] = pv
    if mode == "coadd":
        for j, m in enumerate(meas):
            if isinstance(m, dict) and "echo_train_period_us" in m and m.get("echo_train_output",
                                                                              "spikelets") == "spikelets":
                raise ModelError(f"{where(j)}: [processing] echo_train = \"coadd\" co-adds the echoes into one "
                                 "pattern without spikelets, but echo_train_period_us simulates the spikelet comb; "
                                 "write echo_train_output = \"envelope\" in the measurement (or process with "
                                 "echo_train = \"spikelets\")")
    return meas, proc


def load_model(path) -> Model:
    """Read and validate a TOML model file.

    Parameters
    ----------
    path : str or pathlib.Path
        Model file (UTF-8 TOML).

    Returns
    -------
    Model
        The validated model; its ``source`` is ``path``.

    Raises
    ------
    ModelError
        If the file is missing, a folder, not a regular file, not UTF-8 text,
        not valid TOML, or a value is wrong; the message names the file.

    See Also
    --------
    write_model : the other direction.

    References
    ----------
    TOML v1.0.0 specification (toml.io).

    Examples
    --------
    >>> from pathlib import Path
    >>> m = load_model(Path(__file__).parents[1] / "data" / "demo.toml")
    >>> m.nucleus.name
    '27Al'
    """
    p = path_argument(path, "model file", ModelError)
    name = str(p)
    if not p.exists():
        raise ModelError(f"model file {name!r} does not exist")
    if p.is_dir():
        raise ModelError(f"model file {name!r} is a directory, not a model file")
    if not p.is_file():
        raise ModelError(f"model file {name!r} is not a regular file (a device or pipe?); give a TOML file")
    try:
        size = p.stat().st_size
        if size > MAX_MODEL_BYTES:
            raise ModelError(f"model file {name!r} is {size} bytes; a model file is text of at most "
                             f"{MAX_MODEL_BYTES} bytes")
        raw = p.read_bytes()
    except OSError as e:
        raise ModelError(f"model file {name!r} cannot be read: {e.strerror or e}") from None
    if b"\x00" in raw:
        raise ModelError(f"model file {name!r} is binary, not TOML text")
    try:
        text = raw.decode("utf-8-sig")  # a byte-order mark, as some editors write, is not part of the text
    except UnicodeDecodeError as e:
        raise ModelError(f"model file {name!r} is not UTF-8 text (byte 0x{raw[e.start]:02x} at position {e.start})") \
            from None
    if not text.strip():
        raise ModelError(f"model file {name!r} is empty; it needs nucleus, [measurement] and [[site]]")
    data = read_toml_text(text, f"model file {name!r}", ModelError)
    try:
        return parse_model(data, name)
    except ModelError as e:
        raise ModelError(f"{name}: {e}") from None


#: deepest nesting of arrays and inline tables a model file may have (a model needs three)
MAX_TOML_NESTING = 32


def _nesting_too_deep(text: str, limit: int) -> int | None:
    """The line (1-based) where brackets or braces outside strings nest deeper than ``limit``, else None."""
    depth = 0
    quote = None
    line = 1
    i = 0
    n = len(text)
    while i < n:
        c = text[i]
        if c == "\n":
            line += 1
            if quote in ('"', "'"):
                quote = None  # a one-line string ends at its line (an error the TOML reader reports)
        elif quote is not None:
            if c == "\\" and quote in ('"', '"""'):
                i += 1
            elif text.startswith(quote, i):
                i += len(quote) - 1
                quote = None
        elif c == "#":
            j = text.find("\n", i)
            i = n if j < 0 else j
            continue
        elif c in "\"'":
            quote = c * 3 if text.startswith(c * 3, i) else c
            i += len(quote) - 1
        elif c in "[{":
            depth += 1
            if depth > limit:
                return line
        elif c in "]}":
            depth = max(depth - 1, 0)
        i += 1
    return None


_STRING = re.compile(r'"(?:\\.|[^"\\])*"|\'[^\']*\'')
_NUMBER_TOKEN = re.compile(r"(?<![\w.])[+-]?\d[\d_]*(?:\.[\d_]+)?(?:[eE][+-]?[\d_]+)?(?![\w.])")


def _overflowing_number(text: str) -> tuple[int, str] | None:
    """(line, text) of the first number literal too large for a double ('1e309'), outside strings and comments."""
    for lineno, line in enumerate(text.splitlines(), 1):
        bare = _STRING.sub('""', line).split("#", 1)[0]
        for m in _NUMBER_TOKEN.finditer(bare):
            token = m.group(0)
            try:
                value = float(token.replace("_", ""))
            except ValueError:
                continue
            if math.isinf(value):
                return lineno, token
    return None


def read_toml_text(text: str, what: str, error=None) -> dict:
    """Parse TOML text, every failure one error naming ``what`` (and the line where it can).

    Parameters
    ----------
    text : str
        The file's text (without a byte-order mark).
    what : str
        The file, for messages (e.g. ``"model file 'a.toml'"``).
    error : type, optional
        The exception type to raise (default :class:`ModelError`).

    Returns
    -------
    dict

    Raises
    ------
    ModelError (or ``error``)
        Not valid TOML, or arrays/inline tables nested deeper than
        ``MAX_TOML_NESTING`` (which would exhaust the reader's recursion).

    Examples
    --------
    >>> read_toml_text("a = 1", "test")["a"]
    1
    >>> try:
    ...     read_toml_text("a = " + "[" * 2000 + "]" * 2000, "model file 'deep.toml'")
    ... except ModelError as e:
    ...     print(e)
    model file 'deep.toml' line 1: arrays or tables nested more than 32 deep; a model file needs at most 3
    """
    error = ModelError if error is None else error
    big = _overflowing_number(text)
    if big is not None:
        raise error(f"{what} line {big[0]}: {big[1]!r} is beyond the largest number (about 1.8e308); write a "
                    "finite value (or inf where a key allows it)")
    line = _nesting_too_deep(text, MAX_TOML_NESTING)
    if line is not None:
        raise error(f"{what} line {line}: arrays or tables nested more than {MAX_TOML_NESTING} deep; "
                    "a model file needs at most 3")
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise error(f"{what} is not valid TOML: {e}") from None
    except RecursionError:
        raise error(f"{what}: arrays or tables nested too deep for a model file") from None



# ---------------------------------------------------------------------------
# writing


#: measurement keys of a two-dimensional experiment, written only when experiment != "1d"
_TWO_D_KEYS = ("experiment", "mq_order", "f1_points", "f1_center_ppm", "f1_width_ppm", "f1_lorentz_hz",
               "f1_gauss_hz", "t1_mode", "f1_referencing")


def _measurement_table(meas: Measurement) -> dict:
    t: dict = {}
    for k, spec in keys_of("measurement").items():
        if spec.kind == "table":
            continue
        if k in _TWO_D_KEYS and not meas.is_two_dimensional:
            continue
        if k == "mq_order" and meas.experiment != "mqmas":
            continue
        v = getattr(meas, k)
        if k == "spinning_hz":
            t[k] = "inf" if math.isinf(v) else v
            continue
        if k == "rotor_angle_deg":
            if abs(v - MAGIC_ANGLE_DEG) > 1e-12:
                t[k] = v
            continue
        if v is None:
            continue
        if k == "transitions":
            t[k] = v if isinstance(v, str) else list(v)
            continue
        if k in ("shift_offset_ppm",) and v == 0.0:
            continue
        if k in ("pulse_sequence", "echo_train_echoes", "echo_train_output") and v == spec.default:
            continue
        if k == "scale" and v == 1.0:
            continue
        if k == "baseline":
            if v:
                t[k] = list(v)
            continue
        t[k] = v
    return t


def _site_table(site: Site) -> dict:
    vals = site.as_keys()
    t: dict = {"label": site.label}
    for k in keys_of("site"):
        if k == "label" or k not in vals:
            continue
        v = vals[k]
        if k == "euler_deg":
            if any(v):
                t[k] = list(v)
            continue
        if k == "principal_ppm":
            t[k] = list(v)
            continue
        if k in ("cq_mhz", "eta_q") and site.cq_mhz == 0.0 and site.eta_q == 0.0:
            continue
        if k in ("lorentz_hz", "gauss_hz", "shift_fwhm_ppm", "czjzek_sigma_mhz") and v == 0.0:
            continue
        t[k] = v
    return t


def model_to_dict(model: Model) -> dict:
    """The model as the nested dict of a model file (free and tied parameters as inline tables).

    Parameters
    ----------
    model : Model

    Returns
    -------
    dict
        ``nucleus``, ``measurement`` (a table, or a list of tables when there
        are several), ``site`` (list of tables) and ``fit`` when set.  Callers
        may add tables (e.g. fit results) before writing with ``tomli_w``.

    Examples
    --------
    >>> from powderspin.model.modelfile import make_model
    >>> d = model_to_dict(make_model("27Al", {"field_tesla": 9.4}, [{"label": "A", "cq_mhz": 3.0}]))
    >>> d["site"][0]["cq_mhz"], d["measurement"]["field_tesla"]
    (3.0, 9.4)
    """
    meas = [_measurement_table(m) for m in model.measurements]
    sites = [_site_table(s) for s in model.sites]
    for fp in model.free:
        a = fp.address
        entry = {"start": fp.start, "min": fp.min, "max": fp.max}
        target = meas[a.index] if a.table == "measurement" else sites[a.index]
        if a.item is not None:
            target.setdefault("euler_deg", [0.0, 0.0, 0.0])[a.item] = entry
        else:
            target[a.key] = entry
    for tp in model.tied:
        a = tp.address
        src = f"{model.sites[tp.source.index].label}.{tp.source.key}"
        if tp.source.item is not None and tp.source.item != a.item:
            src += f"[{tp.source.item}]"
        target = sites[a.index]
        if a.item is not None:
            target.setdefault("euler_deg", [0.0, 0.0, 0.0])[a.item] = {"same_as": src}
        else:
            target[a.key] = {"same_as": src}
    data: dict = {"nucleus": model.nucleus.name,
                  "measurement": meas[0] if len(meas) == 1 else meas,
                  "site": sites}
    f = model.fit
    fit: dict = {}
    if f.regions:
        fit["regions"] = [list(r) for r in f.regions]
    if f.noise_region is not None:
        fit["noise_region"] = list(f.noise_region)
    if f.baseline_order is not None:
        fit["baseline_order"] = f.baseline_order
    if f.f1_regions:
        fit["f1_regions"] = [list(r) for r in f.f1_regions]
    if f.slice_f1_ppm:
        fit["slice_f1_ppm"] = list(f.slice_f1_ppm)
    if fit:
        data["fit"] = fit
    if model.processing:
        data["processing"] = dict(model.processing)
    return data


def model_to_toml(model: Model, header: str = "") -> str:
    """The model as TOML text in the model-file keys.

    The shift tensor is written in the form it was given (span/skew,
    Haeberlen or principal values); free parameters come back as
    ``{ start, min, max }`` and tied ones as ``{ same_as = "LABEL.key" }``.

    Parameters
    ----------
    model : Model
    header : str, optional
        Comment lines to put first (each starting with ``#``).

    Returns
    -------
    str
        TOML text that :func:`parse_model` reads back to an equal model.

    See Also
    --------
    write_model, load_model

    References
    ----------
    TOML v1.0.0 specification (toml.io).

    Examples
    --------
    >>> import tomllib
    >>> from powderspin.model.modelfile import make_model
    >>> m = make_model("27Al", {"field_tesla": 14.1}, [{"cq_mhz": 3.0, "eta_q": 0.4, "span_ppm": 40.0, "skew": 0.2}])
    >>> parse_model(tomllib.loads(model_to_toml(m))).sites == m.sites
    True
    """
    head = header or "# powderspin model file (TOML); the README lists every key\n"
    if not head.endswith("\n"):
        head += "\n"
    return head + tomli_w.dumps(model_to_dict(model))


def write_model(model: Model, path, *, force: bool = False, protect=(), header: str = "") -> Path | None:
    """Write a model file atomically; never overwrites an existing file unless ``force``.

    Parameters
    ----------
    model : Model
    path : str or pathlib.Path
        Output file (``"-"``: standard output).
    force : bool
        Overwrite an existing file.
    protect : iterable of path, optional
        Input files that must never be overwritten.
    header : str, optional
        Comment lines to put first.

    Returns
    -------
    pathlib.Path or None

    See Also
    --------
    load_model : the other direction.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from powderspin.model.modelfile import make_model
    >>> m = make_model("31P", {"field_tesla": 9.4}, [{"span_ppm": 100.0, "skew": 0.5}])
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_model(m, pathlib.Path(d) / "m.toml")
    ...     load_model(p).sites == m.sites
    True
    """
    return write_text_atomic(path, model_to_toml(model, header), force=force, protect=protect, role="model file")


# ---------------------------------------------------------------------------
# building models from Python dicts (the same keys as model files)


def make_site(**keys) -> Site:
    """Build a :class:`Site` from the model-file keys (same names, same checks).

    Parameters
    ----------
    **keys
        ``[[site]]`` keys: ``label``, ``weight``, ``shift_ppm``, ``cq_mhz``,
        ``eta_q``, one of ``span_ppm`` + ``skew`` / ``aniso_ppm`` + ``eta_cs``
        / ``principal_ppm`` (ppm), ``euler_deg`` (degrees), ``lorentz_hz``,
        ``gauss_hz`` (Hz).

    Returns
    -------
    Site

    References
    ----------
    J. Mason, Solid State Nucl. Magn. Reson. 2 (1993) 285; J. Herzfeld,
    A. E. Berger, J. Chem. Phys. 73 (1980) 6021 (shift-tensor conventions).

    Examples
    --------
    >>> s = make_site(label="AlO6", shift_ppm=8.0, cq_mhz=5.5, eta_q=0.6, span_ppm=20.0, skew=0.1)
    >>> round(s.shift.span_ppm, 6)
    20.0
    """
    site, free, tied = parse_site_table(0, dict(keys), "site")
    if free or tied:
        raise ModelError("make_site: free or tied parameters need a model; use make_model")
    return site


def make_model(nucleus, measurement=None, sites=(), fit=None) -> Model:
    """Build a :class:`Model` from a nucleus name, measurement keys and site key dicts.

    Parameters
    ----------
    nucleus : str or Nuclide
        e.g. ``"27Al"``.
    measurement : dict or Measurement or list of them
        ``[measurement]`` keys (``field_tesla`` is required); a list gives
        several measurements of one sample.
    sites : sequence of dict or Site
        Site keys as in a model file (free ``{start, min, max}`` and tied
        ``{same_as = "LABEL.key"}`` values allowed), or ready :class:`Site`
        values.
    fit : dict, optional
        ``[fit]`` keys.

    Returns
    -------
    Model

    Examples
    --------
    >>> m = make_model("23Na", {"field_tesla": 11.7}, [{"cq_mhz": 2.0}])
    >>> m.measurement.field_tesla, m.sites[0].label
    (11.7, 'site 1')
    """
    nuc = nucleus if isinstance(nucleus, Nuclide) else get_nuclide(str(nucleus))
    if measurement is None:
        raise ModelError("model: a measurement with field_tesla is required, e.g. {\"field_tesla\": 14.1}")
    if isinstance(measurement, (dict, Measurement)):
        measurement = [measurement]
    if isinstance(sites, (dict, Site)):
        raise ModelError(
            "make_model: sites must be a list of site dicts (or Site values), e.g. [{\"cq_mhz\": 3.0}]; "
            "got a single " + ("dict" if isinstance(sites, dict) else "Site") + " - wrap it in a list"
        )
    if isinstance(sites, str):
        raise ModelError("make_model: sites must be a list of site dicts, got a string")
    return model_from_tables(nuc, list(measurement), list(sites), fit or {}, source="")
