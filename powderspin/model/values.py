"""Sites, measurements and models: the values a simulation or a fit is made from.

The values are frozen dataclasses checked against the key table of
:mod:`powderspin.model.schema` (units, ranges, defaults).  Reading and writing model
files is :mod:`powderspin.model.modelfile`; building values from Python dicts with
the same keys is :func:`powderspin.model.modelfile.make_model` / :func:`powderspin.model.modelfile.make_site`.

Free and tied parameters
------------------------
A model may mark parameters free (start value and bounds) or tie one to
another.  Each has a structured :class:`ParameterAddress` (which table, which
site or measurement, which key), and :meth:`Model.with_parameters` returns a
new model with new values, ties applied.

All frequencies are in Hz, shifts in ppm, C_Q in MHz, angles in degrees in
files and values (radians inside the engine).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from fractions import Fraction
from typing import Any, Mapping

import numpy as np

from ..checks import show
from ..physics.distributions import DistributionError, explicit_axis
from ..physics.multiple_quantum import two_dimensional_scale
from ..physics.nuclides import Nuclide
from ..physics.orientations import OrientationSetError, orientation_set_by_name
from ..physics.tensors import ShiftTensor, TensorError
from .schema import KEYS, field_hint, key_spec

__all__ = [
    "SHIFT_KEYS",
    "ModelError",
    "MAGIC_ANGLE_DEG",
    "ParameterAddress",
    "FreeParameter",
    "TiedParameter",
    "Site",
    "Measurement",
    "FitSettings",
    "Model",
    "parse_transition",
    "selected_transitions",
    "fittable_keys",
]

#: The magic angle arccos(1/sqrt 3) in degrees (about 54.7356), the default
#: rotor angle (E. R. Andrew, A. Bradbury, R. G. Eades, Nature 182 (1958) 1659).
MAGIC_ANGLE_DEG = math.degrees(math.acos(1.0 / math.sqrt(3.0)))

#: finest axis point spacing a model may ask for (Hz): far below the width of
#: any solid-state NMR line, and still printed distinctly in the CSV output
MIN_POINT_SPACING_HZ = 0.01


class ModelError(ValueError):
    """A model value is missing, unknown or outside its allowed range.

    A ``ValueError`` subclass whose message names the key, the value and the
    allowed range (or the allowed keys).

    Parameters
    ----------
    message : str
        Where the problem is (``"site 'AlO4': eta_q"``), the value and the
        allowed range.

    Examples
    --------
    >>> try:
    ...     Site(eta_q=1.5)
    ... except ModelError as e:
    ...     print(e)
    site 'site': eta_q = 1.5 is outside the allowed range [0, 1] (|V_zz| >= |V_yy| >= |V_xx| by convention)
    """


def check_number(where: str, key: str, value, table: str) -> float:
    """Check a number against the key table; return it as float.

    Parameters
    ----------
    where : str
        Where the key is, for the message (``"site 'AlO4'"``, ``"measurement"``).
    key : str
        The key (its range comes from :mod:`powderspin.model.schema`).
    value : object
        The value.
    table : {"measurement", "site", "fit"}

    Returns
    -------
    float

    Raises
    ------
    ModelError
        For a non-number, NaN or a value outside the key's range; the message
        names the key, the value, the range and why.

    Examples
    --------
    >>> check_number("measurement", "field_tesla", 9.4, "measurement")
    9.4
    """
    spec = key_spec(table, key)
    if isinstance(value, (bool, np.bool_)):
        raise ModelError(f"{where}: {key} must be a number ({spec.unit or 'dimensionless'}), got {show(value)}")
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ModelError(f"{where}: {key} must be a number ({spec.unit or 'dimensionless'}), got "
                         f"{show(value)}") from None
    low_bad = v <= spec.low if spec.low_open else v < spec.low
    if math.isnan(v) or low_bad or v > spec.high:
        why = f" ({spec.why})" if spec.why else ""
        hint = field_hint(v) if key == "field_tesla" else ""
        raise ModelError(f"{where}: {key} = {show(value)} is outside the allowed range {spec.range_text()}{why}{hint}")
    return v


# ---------------------------------------------------------------------------
# parameter addresses


@dataclass(frozen=True, order=True)
class ParameterAddress:
    """Where a parameter lives: a site or measurement (by index) and a key.

    Parameters
    ----------
    table : {"site", "measurement"}
    index : int
        Index of the site or measurement (0-based, model order).
    key : str
        Model-file key, e.g. ``"cq_mhz"``.
    item : int or None
        Component of a list-valued key (``euler_deg``: 0, 1, 2).

    Examples
    --------
    >>> a = ParameterAddress("site", 0, "cq_mhz")
    >>> a.key, a.index
    ('cq_mhz', 0)
    """

    table: str
    index: int
    key: str
    item: int | None = None

    def __post_init__(self):
        if self.table not in ("site", "measurement"):
            raise ModelError(f"parameter address: table = {self.table!r} is not one of 'site', 'measurement'")
        allowed = fittable_keys(self.table)
        if self.key not in allowed:
            raise ModelError(
                f"parameter address: {self.table} key {self.key!r} cannot be a fit parameter; "
                f"allowed keys are {', '.join(sorted(allowed))}"
            )
        if (self.key == "euler_deg") != (self.item is not None):
            raise ModelError("parameter address: euler_deg needs an item 0, 1 or 2; other keys take none")
        if self.item is not None and self.item not in (0, 1, 2):
            raise ModelError(f"parameter address: item = {self.item!r} must be 0, 1 or 2")

    def spec(self):
        """The key's row of the schema (:class:`powderspin.model.schema.KeySpec`: unit, range, default).

        Returns
        -------
        KeySpec

        Examples
        --------
        >>> ParameterAddress("site", 0, "eta_q").spec().range_text()
        '[0, 1]'
        """
        return key_spec(self.table, self.key)

    def name(self, model: "Model | None" = None) -> str:
        """A readable name: ``"AlO4.cq_mhz"``, ``"AlO4.euler_deg[1]"``, ``"measurement 2.gauss_hz"``.

        Parameters
        ----------
        model : Model, optional
            Gives the site label; without it the site is named by index.

        Returns
        -------
        str

        Examples
        --------
        >>> ParameterAddress("measurement", 0, "gauss_hz").name()
        'measurement 1.gauss_hz'
        """
        item = f"[{self.item}]" if self.item is not None else ""
        if self.table == "measurement":
            return f"measurement {self.index + 1}.{self.key}{item}"
        if model is not None and self.index < len(model.sites):
            return f"{model.sites[self.index].label}.{self.key}{item}"
        return f"site {self.index + 1}.{self.key}{item}"


def fittable_keys(table: str) -> frozenset:
    """The keys of a table that may be free or tied parameters (``free=True`` in :data:`powderspin.model.schema.KEYS`).

    Parameters
    ----------
    table : {"site", "measurement"}

    Returns
    -------
    frozenset of str

    Examples
    --------
    >>> sorted(fittable_keys("measurement"))
    ['gauss_hz', 'lorentz_hz', 'shift_offset_ppm']
    """
    return frozenset(k.name for k in KEYS if k.table == table and k.free)


@dataclass(frozen=True)
class FreeParameter:
    """A parameter marked free: start value and bounds.

    Parameters
    ----------
    address : ParameterAddress
        Which parameter.
    start : float
        Start value, in the unit of that key (MHz, ppm, Hz, degrees, ...);
        simulations use it.
    min, max : float
        Bounds in the same unit (default: the key's allowed range).
    name : str
        Readable name (``"AlO4.cq_mhz"``), for tables and messages.

    Examples
    --------
    >>> from powderspin.model.modelfile import make_model
    >>> m = make_model("27Al", {"field_tesla": 9.4},
    ...                [{"label": "A", "cq_mhz": {"start": 3.0, "min": 0.5, "max": 8.0}}])
    >>> fp = m.free[0]
    >>> fp.name, fp.start, fp.min, fp.max
    ('A.cq_mhz', 3.0, 0.5, 8.0)
    """

    address: ParameterAddress
    start: float
    min: float = -math.inf
    max: float = math.inf
    name: str = ""


@dataclass(frozen=True)
class TiedParameter:
    """A parameter that takes another one's value (``{ same_as = "LABEL.key" }``).

    Parameters
    ----------
    address : ParameterAddress
        The tied parameter.
    source : ParameterAddress
        The parameter it follows (same key).
    name, source_name : str
        Readable names.

    Examples
    --------
    >>> from powderspin.model.modelfile import make_model
    >>> m = make_model("27Al", {"field_tesla": 9.4},
    ...                [{"label": "A", "gauss_hz": 100.0},
    ...                 {"label": "B", "gauss_hz": {"same_as": "A.gauss_hz"}}])
    >>> m.tied[0].name, m.tied[0].source_name, m.sites[1].gauss_hz
    ('B.gauss_hz', 'A.gauss_hz', 100.0)
    """

    address: ParameterAddress
    source: ParameterAddress
    name: str = ""
    source_name: str = ""


# ---------------------------------------------------------------------------
# values


_SHIFT_FORMS = ("iso", "span_skew", "haeberlen", "principal")


@dataclass(frozen=True)
class Site:
    """One crystallographic site.

    Parameters
    ----------
    label : str
        Name shown in plots and tables; unique within a model.
    weight : float
        Relative population (>= 0); the site's selected transitions integrate
        to it.
    shift : ShiftTensor
        Chemical-shift tensor (ppm).
    cq_mhz : float
        Quadrupolar coupling constant C_Q = e^2 q Q / h (MHz); 0 for spin 1/2.
    eta_q : float
        Quadrupolar asymmetry in [0, 1].
    euler_deg : tuple of float
        ZYZ active Euler angles (degrees) of the shift principal frame relative
        to the EFG principal frame.
    lorentz_hz, gauss_hz : float
        Extra Lorentzian / Gaussian broadening of this site (FWHM, Hz).
    shift_form : {"iso", "span_skew", "haeberlen", "principal"}
        How the shift tensor was given (it is written back the same way).
    shift_given : tuple of float
        The values as given in that form ((span, skew), (aniso, eta) or the
        three principal values), so that they are written back exactly;
        empty when the tensor was given as a :class:`ShiftTensor`.
    shift_fwhm_ppm : float
        FWHM (ppm) of a Gaussian distribution of the isotropic shift: a
        Gaussian broadening of ``shift_fwhm_ppm * nu_ref * 1e-6`` Hz that
        scales with the field (:mod:`powderspin.disorder.site`).
    czjzek_sigma_mhz : float
        Width sigma (MHz) of a Czjzek distribution of EFG tensors; with
        ``cq_mhz = 0`` the pure model, otherwise the extended model around
        (``cq_mhz``, ``eta_q``).
    cq_distribution_mhz, eta_distribution : tuple or None
        Explicit distributions ``(values, weights)`` of C_Q (MHz) and eta_Q;
        each replaces ``cq_mhz`` / ``eta_q``.  Given as mappings
        ``{"values": [...], "weights": [...]}`` or pairs of sequences.

    References
    ----------
    J. Mason, Solid State Nucl. Magn. Reson. 2 (1993) 285 (shift-tensor
    conventions).

    Examples
    --------
    >>> s = Site(label="AlO4", cq_mhz=3.0, eta_q=0.4)
    >>> s.cq_hz, s.shift.iso_ppm
    (3000000.0, 0.0)
    """

    label: str = "site"
    weight: float = 1.0
    shift: ShiftTensor = field(default_factory=lambda: ShiftTensor(0.0))
    cq_mhz: float = 0.0
    eta_q: float = 0.0
    euler_deg: tuple[float, float, float] = (0.0, 0.0, 0.0)
    lorentz_hz: float = 0.0
    gauss_hz: float = 0.0
    shift_form: str = "haeberlen"
    shift_given: tuple = ()
    shift_fwhm_ppm: float = 0.0
    czjzek_sigma_mhz: float = 0.0
    cq_distribution_mhz: tuple | None = None
    eta_distribution: tuple | None = None

    def __post_init__(self):
        if not isinstance(self.label, str) or not self.label.strip():
            raise ModelError(f"site: label = {self.label!r} must be a non-empty text")
        if any(c in self.label for c in "\n\r\t"):
            raise ModelError(f"site: label = {self.label!r} must be one line of text")
        where = f"site '{self.label}'"
        for key in _SITE_NUMBERS:
            object.__setattr__(self, key, check_number(where, key, getattr(self, key), "site"))
        try:
            e = tuple(float(x) for x in self.euler_deg)
        except (TypeError, ValueError):
            raise ModelError(f"{where}: euler_deg must be 3 angles in degrees, got {self.euler_deg!r}") from None
        if len(e) != 3:
            raise ModelError(f"{where}: euler_deg must be 3 angles in degrees, got {self.euler_deg!r}")
        e = tuple(check_number(where, "euler_deg", x, "site") for x in e)
        object.__setattr__(self, "euler_deg", e)
        if not isinstance(self.shift, ShiftTensor):
            raise ModelError(f"{where}: shift must be a ShiftTensor")
        for key, v in (("shift_ppm", self.shift.iso_ppm), ("aniso_ppm", self.shift.aniso_ppm)):
            check_number(where, key, v, "site")
        if self.shift_form not in _SHIFT_FORMS:
            raise ModelError(f"{where}: shift_form = {self.shift_form!r} is not one of {', '.join(_SHIFT_FORMS)}")
        _check_site_distributions(self, where)

    def as_keys(self) -> dict:
        """The site's values under its model-file keys, shift tensor in the form it was given.

        Returns
        -------
        dict
            ``weight``, ``cq_mhz``, ``eta_q``, ``euler_deg``, ``lorentz_hz``,
            ``gauss_hz``, ``shift_fwhm_ppm``, ``czjzek_sigma_mhz``, the explicit
            distributions when set (``{"values": [...], "weights": [...]}``) and
            the shift keys of its form (``shift_ppm`` with ``span_ppm`` +
            ``skew``, ``aniso_ppm`` + ``eta_cs``, or ``principal_ppm``).

        See Also
        --------
        Site.from_keys : the way back.

        Examples
        --------
        >>> s = Site.from_keys({"shift_ppm": 5.0, "span_ppm": 100.0, "skew": 0.5}, label="P")
        >>> v = s.as_keys()
        >>> v["shift_ppm"], round(v["span_ppm"], 9), round(v["skew"], 9), s.shift_form
        (5.0, 100.0, 0.5, 'span_skew')
        """
        t = self.shift
        g = self.shift_given
        out = {k: getattr(self, k) for k in sorted(_SITE_FIELDS)}
        out["euler_deg"] = tuple(self.euler_deg)
        for key in ("cq_distribution_mhz", "eta_distribution"):
            d = getattr(self, key)
            if d is not None:
                out[key] = {"values": list(d[0]), "weights": list(d[1])}
        if self.shift_form == "principal":
            out["principal_ppm"] = tuple(g) if len(g) == 3 else tuple(t.principal_iupac)
            return out
        out["shift_ppm"] = t.iso_ppm
        if self.shift_form == "span_skew":
            out["span_ppm"], out["skew"] = g if len(g) == 2 else (t.span_ppm, t.skew)
        elif self.shift_form == "haeberlen":
            out["aniso_ppm"], out["eta_cs"] = g if len(g) == 2 else (t.aniso_ppm, t.eta)
        return out

    @classmethod
    def from_keys(cls, values: Mapping, label: str = "site", shift_form: str | None = None) -> "Site":
        """A site from model-file keys; missing keys take their schema defaults.

        Parameters
        ----------
        values : mapping
            Site keys and values (see the README's key reference).
        label : str, optional
        shift_form : {"iso", "span_skew", "haeberlen", "principal"}, optional
            How the shift tensor is given; by default from the keys present.

        Returns
        -------
        Site

        Raises
        ------
        ModelError
            A value outside its range, or shift keys of two forms.

        See Also
        --------
        Site.as_keys

        Examples
        --------
        >>> Site.from_keys({"cq_mhz": 3.0, "aniso_ppm": 40.0, "eta_cs": 0.2}).shift.aniso_ppm
        40.0
        """
        where = f"site '{label}'"
        if shift_form is None:
            forms = [f for f, ks in (("span_skew", ("span_ppm", "skew")), ("haeberlen", ("aniso_ppm", "eta_cs")),
                                     ("principal", ("principal_ppm",))) if any(k in values for k in ks)]
            if len(forms) > 1:
                raise ModelError(f"{where}: give the shift anisotropy one way only: span_ppm + skew, "
                                 "aniso_ppm + eta_cs, or principal_ppm")
            shift_form = forms[0] if forms else "iso"
            if shift_form == "span_skew" and "span_ppm" in values and values.get("skew") is None:
                raise ModelError(f"{where}: span_ppm needs skew (from -1 to 1; +1 and -1 are axially symmetric "
                                 "tensors, 0 lies midway): give skew as well, e.g. skew = 0.0, so that no shape is "
                                 "assumed for you")

        def get(key):
            v = values.get(key)
            return key_spec("site", key).default if v is None else v

        given: tuple = ()
        try:
            if shift_form == "principal":
                given = tuple(check_number(where, "principal_ppm", x, "site") for x in values["principal_ppm"])
                shift = ShiftTensor.from_principal(given)
            else:
                iso = check_number(where, "shift_ppm", get("shift_ppm"), "site")
                if shift_form == "span_skew":
                    given = (check_number(where, "span_ppm", values["span_ppm"], "site"),
                             check_number(where, "skew", values.get("skew", 0.0), "site"))
                    shift = ShiftTensor.from_span_skew(iso, *given)
                elif shift_form == "haeberlen":
                    given = (check_number(where, "aniso_ppm", values["aniso_ppm"], "site"),
                             check_number(where, "eta_cs", values.get("eta_cs", 0.0), "site"))
                    shift = ShiftTensor(iso, *given)
                else:
                    shift = ShiftTensor(iso)
        except TensorError as e:
            raise ModelError(f"{where}: {e}") from None
        plain = {k: get(k) for k in _SITE_FIELDS}
        plain["euler_deg"] = tuple(plain["euler_deg"])
        return cls(label=label, shift=shift, shift_form=shift_form, shift_given=given,
                   cq_distribution_mhz=values.get("cq_distribution_mhz"),
                   eta_distribution=values.get("eta_distribution"), **plain)

    def with_values(self, changes: Mapping) -> "Site":
        """A copy with some parameter values changed (shift keys in the site's own form).

        Parameters
        ----------
        changes : mapping of str to float or tuple
            Fittable site keys (``cq_mhz``, ``span_ppm``, ``euler_deg`` as 3 angles, ...).

        Returns
        -------
        Site
            Validated like any site; the shift tensor is rebuilt only when a
            shift key changes.

        Raises
        ------
        ModelError
            A key the site's shift form does not have, or a value out of range.

        Examples
        --------
        >>> s = Site.from_keys({"span_ppm": 100.0, "skew": 0.0}, label="P")
        >>> round(s.with_values({"skew": 0.5}).shift.skew, 9), s.with_values({"weight": 2.0}).weight
        (0.5, 2.0)
        """
        shift_keys = {"shift_ppm": "iso", "span_ppm": "span_skew", "skew": "span_skew", "aniso_ppm": "haeberlen",
                      "eta_cs": "haeberlen"}
        current = {} if self.shift_form == "principal" else {"shift_ppm": self.shift.iso_ppm}
        if self.shift_form in ("span_skew", "haeberlen") and self.shift_given is not None:
            names = ("span_ppm", "skew") if self.shift_form == "span_skew" else ("aniso_ppm", "eta_cs")
            current.update(zip(names, self.shift_given))
        plain, shift = {}, {}
        for k, v in changes.items():
            if k in current and current[k] == v or k in _SITE_FIELDS and getattr(self, k) == (
                    tuple(v) if k == "euler_deg" else v):
                continue  # unchanged: nothing to rebuild (a fit step changes one value of many)
            if k in shift_keys:
                form = shift_keys[k]
                if self.shift_form == "principal" or (form != "iso" and form != self.shift_form):
                    raise ModelError(f"site '{self.label}': its shift tensor is given as {self.shift_form}, "
                                     f"which has no {k}")
                shift[k] = v
            elif k in _SITE_FIELDS:
                plain[k] = tuple(v) if k == "euler_deg" else v
            else:
                raise ModelError(f"site '{self.label}': {k} is not a site parameter")
        if shift:
            keys = self.as_keys()
            keys.update(shift)
            new_shift = Site.from_keys(keys, self.label, self.shift_form)
            plain.update(shift=new_shift.shift, shift_given=new_shift.shift_given)
        return replace(self, **plain) if plain else self

    @property
    def has_efg_distribution(self) -> bool:
        """True when the site has a distribution of EFG tensors (Czjzek or explicit grids).

        Returns
        -------
        bool

        Examples
        --------
        >>> Site(czjzek_sigma_mhz=2.0).has_efg_distribution, Site(shift_fwhm_ppm=5.0).has_efg_distribution
        (True, False)
        """
        return self.czjzek_sigma_mhz > 0 or self.cq_distribution_mhz is not None or self.eta_distribution is not None

    @property
    def euler_rad(self) -> tuple[float, float, float]:
        """The ZYZ Euler angles of the shift frame relative to the EFG frame, radians.

        Returns
        -------
        tuple of 3 float

        Examples
        --------
        >>> [round(a, 6) for a in Site(euler_deg=(0.0, 90.0, 180.0)).euler_rad]
        [0.0, 1.570796, 3.141593]
        """
        return tuple(math.radians(x) for x in self.euler_deg)

    @property
    def cq_hz(self) -> float:
        """Quadrupolar coupling constant C_Q = e^2 q Q / h in Hz.

        Returns
        -------
        float
            ``cq_mhz * 1e6``.

        Examples
        --------
        >>> Site(cq_mhz=2.5).cq_hz
        2500000.0
        """
        return self.cq_mhz * 1e6


#: site keys that describe the shift tensor (handled through :class:`~powderspin.physics.tensors.ShiftTensor`)
SHIFT_KEYS = frozenset({"shift_ppm", "span_ppm", "skew", "aniso_ppm", "eta_cs", "principal_ppm"})
#: site keys that are plain fields of Site, from the schema: every number (and the angles) but the shift keys
_SITE_FIELDS = frozenset(k.name for k in KEYS if k.table == "site" and k.kind in ("number", "angles")
                         and k.name not in SHIFT_KEYS)
#: the plain numeric fields (checked against their schema row when a Site is made)
_SITE_NUMBERS = tuple(sorted(k for k in _SITE_FIELDS if k != "euler_deg"))


def _check_site_distributions(site: "Site", where: str) -> None:
    """Check and normalise the distribution keys of a site (:mod:`powderspin.disorder.site` uses them)."""
    for key, high in (("cq_distribution_mhz", key_spec("site", "cq_distribution_mhz").high), ("eta_distribution", 1.0)):
        d = getattr(site, key)
        if d is None:
            continue
        if isinstance(d, Mapping):
            spec = d
        elif isinstance(d, (tuple, list)) and len(d) == 2:
            spec = {"values": d[0], "weights": d[1]}
        else:
            raise ModelError(f"{where}: {key} must be a table {{ values = [...], weights = [...] }}, got {d!r}")
        try:
            explicit_axis(key, spec, 0.0, high)
        except DistributionError as e:
            raise ModelError(f"{where}: {e}") from None
        object.__setattr__(site, key, (tuple(float(x) for x in spec["values"]),
                                       tuple(float(x) for x in spec["weights"])))
    if site.czjzek_sigma_mhz > 0:
        for key in ("cq_distribution_mhz", "eta_distribution"):
            if getattr(site, key) is not None:
                raise ModelError(f"{where}: czjzek_sigma_mhz and {key} both describe the EFG distribution; "
                                 "give one of them (czjzek_sigma_mhz with cq_mhz/eta_q for the extended model)")
    if site.cq_distribution_mhz is not None and site.cq_mhz != 0.0:
        raise ModelError(f"{where}: cq_distribution_mhz replaces cq_mhz = {site.cq_mhz:g}; give one of them")
    if site.eta_distribution is not None and site.eta_q != 0.0:
        raise ModelError(f"{where}: eta_distribution replaces eta_q = {site.eta_q:g}; give one of them")


@dataclass(frozen=True)
class Measurement:
    """How a spectrum is recorded and computed.

    Parameters
    ----------
    field_tesla : float
        Magnetic field B0 (T), in [0.1, 40]; required.
    spinning_hz : float
        Spinning rate (Hz): 0 = static, ``math.inf`` = infinitely fast,
        otherwise at most 200 kHz.
    rotor_angle_deg : float
        Angle between rotor axis and B0 (degrees), default the magic angle.
    transitions : str or tuple of str
        ``"central"``, ``"all"`` or transitions ``"m1:m2"`` such as ``"3/2:1/2"``.
    method : str
        ``"auto"``, ``"perturbation"`` or ``"exact"``.
    points : int
        Number of points of the spectral axis.
    center_ppm, width_ppm : float or None
        Axis centre and full width (ppm); chosen from the lines when None.
    orientations : str or int
        ``"auto"``, ``"coarse"``, ``"medium"``, ``"fine"``, an accuracy level
        (subdivisions per octahedron edge, 1 to 1024) or a set name.
    binning : str
        ``"interpolate"`` (triangle interpolation) or ``"histogram"``.
    rotor_phases : str or int
        ``"auto"`` or the number of rotor phases per period (a power of 2,
        16 to 65536).
    lorentz_hz, gauss_hz : float
        Broadening applied to every site (FWHM, Hz).
    shift_offset_ppm : float
        Referencing offset added to every shift of this measurement (ppm).
    data : str or None
        Measured spectrum for fitting (path, relative to the model file).
    scale : float
        Factor applied to the simulated spectrum (data units per density per
        ppm); 1 by default.  A fit solves it and writes it to its result file,
        so that simulating the result gives the fitted curve.
    baseline : tuple of float
        Coefficients (b0, b1, ...) of a polynomial baseline added to the
        spectrum, ``sum_k b_k u**k`` with ``u = (nu - nu_c) / (W / 2)`` running
        from -1 to 1 across the axis (centre nu_c, full width W); empty for
        none.  Written by a fit.
    pulse_sequence : str
        ``"ideal"`` (default: small-tip intensities, no pulse modelled), ``"single"`` or ``"echo"``
        (finite pulses, :mod:`powderspin.engine.pulses`).
    pulse_us, echo_pulse_us : float or None
        Pulse lengths (microseconds); the echo's refocusing pulse defaults to twice ``pulse_us``.
    rf_khz : float or None
        RF field strength nu1 (kHz).
    carrier_ppm : float or None
        Transmitter position (ppm); None: each site on resonance for the pulses, the axis centre for an
        echo train.
    echo_train_period_us : float or None
        Echo period tau of a (Q)CPMG echo train (microseconds); None: no echo train.
    echo_train_echoes : int
        Echoes in the train.
    echo_train_t2_ms : float or None
        Decay time constant of the echo tops (ms); None: no decay.
    echo_train_output : str
        ``"spikelets"`` (the comb) or ``"envelope"`` (the curve through the spikelet tops).
    mq_pulses : str
        MQMAS excitation: ``"ideal"`` (default), ``"two-pulse"`` or ``"z-filter"``
        (:class:`powderspin.engine.pulses.MultipleQuantumPulses`).
    mq_rf_khz, mq_excite_us, mq_convert_us : float or None
        RF field (kHz) and lengths (us) of the MQMAS excitation and conversion pulses.
    mq_pathway : str
        ``"echo"``, ``"antiecho"`` or ``"both"``.
    zfilter_rf_khz, zfilter_pulse_us : float or None
        RF field (kHz) and length (us) of the z-filter's selective pulse (length: the selective 90 degree
        pulse when None).

    References
    ----------
    E. R. Andrew, A. Bradbury, R. G. Eades, Nature 182 (1958) 1659 and
    I. J. Lowe, Phys. Rev. Lett. 2 (1959) 285 (magic-angle spinning).

    Examples
    --------
    >>> meas = Measurement(field_tesla=14.1, spinning_hz=12500.0)
    >>> round(meas.rotor_angle_deg, 4), meas.is_static, meas.transitions
    (54.7356, False, 'central')
    """

    field_tesla: float
    spinning_hz: float = 0.0
    rotor_angle_deg: float = MAGIC_ANGLE_DEG
    transitions: Any = "central"
    method: str = "auto"
    points: int = 2048
    center_ppm: float | None = None
    width_ppm: float | None = None
    orientations: Any = "auto"
    binning: str = "interpolate"
    rotor_phases: Any = "auto"
    lorentz_hz: float = 0.0
    gauss_hz: float = 0.0
    shift_offset_ppm: float = 0.0
    data: str | None = None
    scale: float = 1.0
    baseline: tuple = ()
    pulse_sequence: str = "ideal"
    pulse_us: float | None = None
    echo_pulse_us: float | None = None
    rf_khz: float | None = None
    carrier_ppm: float | None = None
    echo_train_period_us: float | None = None
    echo_train_echoes: int = 32
    echo_train_t2_ms: float | None = None
    echo_train_output: str = "spikelets"
    experiment: str = "1d"
    mq_order: int = 3
    f1_points: int = 256
    f1_center_ppm: float | None = None
    f1_width_ppm: float | None = None
    f1_lorentz_hz: float = 0.0
    f1_gauss_hz: float = 0.0
    t1_mode: str = "synchronised"
    f1_referencing: str | None = None
    mq_pulses: str = "ideal"
    mq_rf_khz: float | None = None
    mq_excite_us: float | None = None
    mq_convert_us: float | None = None
    mq_pathway: str = "echo"
    zfilter_rf_khz: float | None = None
    zfilter_pulse_us: float | None = None

    def __post_init__(self):
        w = "measurement"
        _check_acquisition(self)
        object.__setattr__(self, "field_tesla", check_number(w, "field_tesla", self.field_tesla, w))
        sp = self.spinning_hz
        if isinstance(sp, str) and sp.strip().lower() in ("inf", "infinite", "infinity"):
            sp = math.inf
        if not (isinstance(sp, (int, float, np.floating, np.integer)) and not isinstance(sp, bool)
                and math.isinf(sp) and sp > 0):
            sp = check_number(w, "spinning_hz", sp, w)
            if 0.0 < sp < 10.0:
                raise ModelError(
                    f"measurement: spinning_hz = {self.spinning_hz!r} is below 10 Hz; give 0 for a static sample "
                    "(allowed: 0, 10 to 200000, or \"inf\")"
                )
        object.__setattr__(self, "spinning_hz", float(sp))
        object.__setattr__(self, "rotor_angle_deg",
                           check_number(w, "rotor_angle_deg", self.rotor_angle_deg, w))
        for key in ("method", "binning"):
            choices = key_spec(w, key).choices
            if getattr(self, key) not in choices:
                raise ModelError(
                    f"measurement: {key} = {getattr(self, key)!r} is not one of "
                    + ", ".join(repr(c) for c in choices)
                )
        spec = key_spec(w, "points")
        pts = self.points
        if isinstance(pts, bool) or not isinstance(pts, (int, np.integer)) or not (spec.low <= pts <= spec.high):
            raise ModelError(
                f"measurement: points = {show(pts)} must be an integer in [{spec.low:g}, {spec.high:g}] ({spec.why})"
            )
        object.__setattr__(self, "points", int(pts))
        for key in ("center_ppm", "width_ppm"):
            if getattr(self, key) is not None:
                object.__setattr__(self, key, check_number(w, key, getattr(self, key), w))
        for key in ("lorentz_hz", "gauss_hz", "shift_offset_ppm"):
            object.__setattr__(self, key, check_number(w, key, getattr(self, key), w))
        rp = self.rotor_phases
        if rp != "auto":
            spec = key_spec(w, "rotor_phases")
            if (isinstance(rp, bool) or not isinstance(rp, (int, np.integer)) or rp < spec.low or rp > spec.high
                    or (rp & (rp - 1))):
                raise ModelError(
                    f"measurement: rotor_phases = {rp!r} must be 'auto' or a power of 2 in "
                    f"[{spec.low:g}, {spec.high:g}] ({spec.why})"
                )
            object.__setattr__(self, "rotor_phases", int(rp))
        object.__setattr__(self, "orientations", _check_orientations(self.orientations))
        if self.binning == "interpolate" and isinstance(self.orientations, str) and self.orientations not in \
                key_spec(w, "orientations").choices:
            if not orientation_set_by_name(self.orientations).has_triangles:
                raise ModelError(
                    f"measurement: orientations = {self.orientations!r} has no triangles, which binning = "
                    "'interpolate' needs; use binning = \"histogram\" or a \"tri-...\" set"
                )
        object.__setattr__(self, "transitions", _check_transitions(self.transitions))
        if self.data is not None and not isinstance(self.data, str):
            raise ModelError(f"measurement: data = {self.data!r} must be a file path (text)")
        object.__setattr__(self, "scale", check_number(w, "scale", self.scale, w))
        object.__setattr__(self, "baseline", _check_baseline(self.baseline))
        self._check_two_dimensional()

    def _check_two_dimensional(self) -> None:
        """The keys of a 2D experiment (MQMAS, STMAS); the spin's own orders are checked by the Model."""
        w = "measurement"
        for key in ("experiment", "t1_mode", "f1_referencing"):
            choices = key_spec(w, key).choices
            if key == "f1_referencing" and self.f1_referencing is None:
                continue
            if getattr(self, key) not in choices:
                raise ModelError(f"measurement: {key} = {getattr(self, key)!r} is not one of "
                                 + ", ".join(repr(c) for c in choices))
        for key in ("mq_order", "f1_points"):
            spec = key_spec(w, key)
            v = getattr(self, key)
            if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or not (spec.low <= v <= spec.high):
                raise ModelError(f"measurement: {key} = {v!r} must be an integer in [{spec.low:g}, {spec.high:g}] "
                                 f"({spec.why})")
            object.__setattr__(self, key, int(v))
        for key in ("f1_center_ppm", "f1_width_ppm"):
            if getattr(self, key) is not None:
                object.__setattr__(self, key, check_number(w, key, getattr(self, key), w))
        for key in ("f1_lorentz_hz", "f1_gauss_hz"):
            object.__setattr__(self, key, check_number(w, key, getattr(self, key), w))
        self._check_mq_pulses()
        if self.experiment == "1d":
            return
        if self.spinning_hz == 0.0:
            raise ModelError(f"measurement: experiment = {self.experiment!r} needs a spinning sample; "
                             "spinning_hz must be 10 to 200000 Hz or \"inf\" (it is 0, static)")
        if self.transitions != "central":
            raise ModelError(f"measurement: transitions = {self.transitions!r} cannot be chosen for experiment = "
                             f"{self.experiment!r} (the experiment fixes them: F2 is the central transition); "
                             "leave transitions out or set it to \"central\"")
        if self.binning != "interpolate":
            raise ModelError(f"measurement: binning = {self.binning!r} is not available for experiment = "
                             f"{self.experiment!r}; the allowed value is \"interpolate\"")

    def _check_mq_pulses(self) -> None:
        """The finite-pulse MQMAS keys: all or none, and only for experiment = "mqmas"."""
        w = "measurement"
        for key in ("mq_pulses", "mq_pathway"):
            choices = key_spec(w, key).choices
            if getattr(self, key) not in choices:
                raise ModelError(f"measurement: {key} = {getattr(self, key)!r} is not one of "
                                 + ", ".join(repr(c) for c in choices))
        if self.experiment != "1d" and self.pulse_sequence != "ideal":
            raise ModelError(f"measurement: pulse_sequence = {self.pulse_sequence!r} is for 1D spectra; the pulses of "
                             "an MQMAS experiment are mq_pulses, mq_rf_khz, mq_excite_us and mq_convert_us")
        numbers = ("mq_rf_khz", "mq_excite_us", "mq_convert_us", "zfilter_rf_khz", "zfilter_pulse_us")
        for key in numbers:
            if getattr(self, key) is not None:
                object.__setattr__(self, key, check_number(w, key, getattr(self, key), w))
        given = [k for k in numbers if getattr(self, k) is not None]
        if self.mq_pulses == "ideal":
            if given:
                raise ModelError(f"measurement: {', '.join(given)} given with mq_pulses = \"ideal\"; set mq_pulses = "
                                 "\"two-pulse\" or \"z-filter\" to model the MQMAS pulses, or remove them")
            return
        if self.experiment != "mqmas":
            raise ModelError(f"measurement: mq_pulses = {self.mq_pulses!r} is for experiment = \"mqmas\" (this one is "
                             f"{self.experiment!r}); finite-pulse excitation is not modelled for other experiments")
        missing = [k for k in ("mq_rf_khz", "mq_excite_us", "mq_convert_us") if getattr(self, k) is None]
        if self.mq_pulses == "z-filter" and self.zfilter_rf_khz is None:
            missing.append("zfilter_rf_khz")
        if missing:
            raise ModelError(f"measurement: mq_pulses = {self.mq_pulses!r} needs {', '.join(missing)} (RF fields in "
                             "kHz, pulse lengths in microseconds)")
        extra = [k for k in ("zfilter_rf_khz", "zfilter_pulse_us") if getattr(self, k) is not None]
        if self.mq_pulses == "two-pulse" and extra:
            raise ModelError(f"measurement: {', '.join(extra)} is for mq_pulses = \"z-filter\"; a two-pulse sequence "
                             "has no selective pulse")

    @property
    def is_two_dimensional(self) -> bool:
        """True for an MQMAS or STMAS measurement (experiment != "1d").

        Returns
        -------
        bool

        Examples
        --------
        >>> Measurement(9.4).is_two_dimensional
        False
        >>> Measurement(9.4, spinning_hz="inf", experiment="mqmas").is_two_dimensional
        True
        """
        return self.experiment != "1d"

    @property
    def is_static(self) -> bool:
        """True for a static sample (spinning_hz == 0 Hz).

        Returns
        -------
        bool

        Examples
        --------
        >>> Measurement(9.4).is_static, Measurement(9.4, spinning_hz=5000.0).is_static
        (True, False)
        """
        return self.spinning_hz == 0.0

    @property
    def is_infinite_rate(self) -> bool:
        """True for the infinitely-fast-spinning limit (spinning_hz = inf Hz).

        Returns
        -------
        bool
            Only the rotor-averaged (centre-band) lines remain.

        References
        ----------
        M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300.

        Examples
        --------
        >>> Measurement(9.4, spinning_hz=math.inf).is_infinite_rate
        True
        """
        return math.isinf(self.spinning_hz)


#: the finite-pulse MQMAS keys at "ideal": with ``experiment="1d"``, what makes a 2D measurement its 1D twin
IDEAL_MQ_PULSES = {"mq_pulses": "ideal", "mq_rf_khz": None, "mq_excite_us": None, "mq_convert_us": None,
                   "zfilter_rf_khz": None, "zfilter_pulse_us": None}

#: most coefficients a baseline may have (order 5, as ``[fit] baseline_order``)
MAX_BASELINE_COEFFICIENTS = 6


def _check_acquisition(meas) -> None:
    """Check the finite-pulse and echo-train keys of a measurement (in place on the frozen value)."""
    w = "measurement"
    for key in ("pulse_sequence", "echo_train_output"):
        choices = key_spec(w, key).choices
        if getattr(meas, key) not in choices:
            raise ModelError(f"measurement: {key} = {getattr(meas, key)!r} is not one of "
                             + ", ".join(repr(c) for c in choices))
    for key in ("pulse_us", "echo_pulse_us", "rf_khz", "carrier_ppm", "echo_train_period_us", "echo_train_t2_ms"):
        if getattr(meas, key) is not None:
            object.__setattr__(meas, key, check_number(w, key, getattr(meas, key), w))
    n = meas.echo_train_echoes
    spec = key_spec(w, "echo_train_echoes")
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or not (spec.low <= n <= spec.high):
        raise ModelError(f"measurement: echo_train_echoes = {n!r} must be an integer in "
                         f"[{spec.low:g}, {spec.high:g}] ({spec.why})")
    object.__setattr__(meas, "echo_train_echoes", int(n))
    if meas.pulse_sequence == "ideal":
        given = [k for k in ("pulse_us", "echo_pulse_us", "rf_khz") if getattr(meas, k) is not None]
        if given:
            raise ModelError(f"measurement: {', '.join(given)} given with pulse_sequence = \"ideal\"; set "
                             "pulse_sequence = \"single\" or \"echo\" to model the pulses, or remove them")
        return
    missing = [k for k in ("pulse_us", "rf_khz") if getattr(meas, k) is None]
    if missing:
        raise ModelError(f"measurement: pulse_sequence = {meas.pulse_sequence!r} needs "
                         f"{' and '.join(missing)} (the pulse length in microseconds and the RF field nu1 in kHz)")
    if meas.pulse_sequence == "single" and meas.echo_pulse_us is not None:
        raise ModelError("measurement: echo_pulse_us is for pulse_sequence = \"echo\"; a single pulse has one length")


def _check_baseline(b) -> tuple:
    if b is None:
        return ()
    if isinstance(b, (str, bytes)) or not hasattr(b, "__len__"):
        raise ModelError(f"measurement: baseline = {b!r} must be a list of numbers [b0, b1, ...]")
    if len(b) > MAX_BASELINE_COEFFICIENTS:
        raise ModelError(f"measurement: baseline has {len(b)} coefficients; allowed are at most "
                         f"{MAX_BASELINE_COEFFICIENTS} (order 5)")
    return tuple(check_number("measurement", "baseline", x, "measurement") for x in b)


def _check_orientations(o):
    spec = key_spec("measurement", "orientations")
    if isinstance(o, bool):
        raise ModelError(f"measurement: orientations = {o!r} must be a word, a number or a set name")
    if isinstance(o, (int, np.integer)):
        if not (1 <= o <= 1024):
            raise ModelError(
                f"measurement: orientations = {o!r} is outside the allowed range [1, 1024] "
                "(an accuracy level: subdivisions per octahedron edge)"
            )
        return int(o)
    if isinstance(o, float):
        raise ModelError(f"measurement: orientations = {o!r} must be a whole number of subdivisions in [1, 1024]")
    if not isinstance(o, str):
        raise ModelError(f"measurement: orientations = {o!r} must be a word, a number or a set name")
    if o in spec.choices:
        return o
    try:
        return orientation_set_by_name(o).name
    except OrientationSetError as e:
        raise ModelError(
            f"measurement: orientations = {o!r} is not one of {', '.join(repr(c) for c in spec.choices)} "
            f"nor a valid set name ({e})"
        ) from None


def _check_transitions(t):
    if isinstance(t, str):
        if t in ("central", "all"):
            return t
        parse_transition(t, None)
        return (t,)
    if isinstance(t, (list, tuple)):
        if len(t) == 0:
            raise ModelError(
                "measurement: transitions = [] selects nothing; give 'central', 'all' or a list of 'm1:m2'"
            )
        for s in t:
            if not isinstance(s, str):
                raise ModelError(f"measurement: transitions entry {s!r} must be a string 'm1:m2'")
            parse_transition(s, None)
        if len(t) == 1 and t[0] in ("central", "all"):
            return t[0]
        return tuple(t)
    raise ModelError(f"measurement: transitions = {t!r} must be 'central', 'all' or a list of 'm1:m2'")


@dataclass(frozen=True)
class FitSettings:
    """The ``[fit]`` table: regions, noise region and baseline.

    Parameters
    ----------
    regions : tuple of (float, float)
        Fit regions (ppm_hi, ppm_lo); empty means the whole data axis.
    noise_region : (float, float) or None
        A signal-free region (ppm_hi, ppm_lo) for the noise level.
    baseline_order : int or None
        Order of the polynomial baseline solved with the scale; None for none.
    f1_regions : tuple of (float, float)
        2D data: F1 regions (ppm_hi, ppm_lo) whose F2 slices are fitted.
    slice_f1_ppm : tuple of float
        2D data: F1 positions (ppm) of single F2 slices to fit.

    Examples
    --------
    >>> FitSettings(regions=((90.0, 40.0),)).regions
    ((90.0, 40.0),)
    """

    regions: tuple = ()
    noise_region: tuple | None = None
    baseline_order: int | None = None
    f1_regions: tuple = ()
    slice_f1_ppm: tuple = ()

    def __post_init__(self):
        regs = []
        for i, r in enumerate(self.regions):
            regs.append(_check_region(f"fit: regions[{i}]", r))
        object.__setattr__(self, "regions", tuple(regs))
        object.__setattr__(self, "f1_regions", tuple(_check_region(f"fit: f1_regions[{i}]", r)
                                                     for i, r in enumerate(self.f1_regions)))
        spec = key_spec("fit", "slice_f1_ppm")
        cuts = []
        for i, v in enumerate(self.slice_f1_ppm):
            if isinstance(v, bool) or not isinstance(v, (int, float, np.integer, np.floating)) or not math.isfinite(v) \
                    or not (spec.low <= v <= spec.high):
                raise ModelError(f"fit: slice_f1_ppm[{i}] = {show(v)} must be a shift in [{spec.low:g}, {spec.high:g}] "
                                 f"ppm ({spec.why})")
            cuts.append(float(v))
        object.__setattr__(self, "slice_f1_ppm", tuple(cuts))
        if self.noise_region is not None:
            object.__setattr__(self, "noise_region", _check_region("fit: noise_region", self.noise_region))
        if self.baseline_order is not None:
            b = self.baseline_order
            spec = key_spec("fit", "baseline_order")
            if isinstance(b, bool) or not isinstance(b, (int, np.integer)) or not (spec.low <= b <= spec.high):
                raise ModelError(
                    f"fit: baseline_order = {show(b)} must be an integer in [{spec.low:g}, {spec.high:g}] ({spec.why})"
                )
            object.__setattr__(self, "baseline_order", int(b))


def _check_region(where, r):
    try:
        a, b = r
        a, b = float(a), float(b)
    except (TypeError, ValueError):
        raise ModelError(f"{where} = {r!r} must be two shifts [ppm_hi, ppm_lo]") from None
    if not (math.isfinite(a) and math.isfinite(b)) or a == b:
        raise ModelError(f"{where} = {r!r} must be two different finite shifts [ppm_hi, ppm_lo]")
    return (max(a, b), min(a, b))


@dataclass(frozen=True)
class Model:
    """A nucleus, one or more measurements and one or more sites.

    Parameters
    ----------
    nucleus : Nuclide
        The observed nucleus (:func:`powderspin.physics.nuclides.get_nuclide`).
    measurements : sequence of Measurement
        At least one; site parameters are shared by all of them.
    sites : sequence of Site
        At least one, with unique labels and at least one weight > 0;
        ``cq_mhz`` must be 0 for a spin-1/2 nucleus.
    free : tuple of FreeParameter, optional
        Parameters marked free.
    tied : tuple of TiedParameter, optional
        Parameters tied to another one.
    fit : FitSettings, optional
        The ``[fit]`` table.
    source : str, optional
        Where the model came from (a file path), recorded in the metadata;
        relative ``data`` paths are resolved against its folder.
    processing : tuple of (str, value), optional
        The ``[processing]`` table (how raw time-domain data become the
        spectrum a fit reads; :mod:`powderspin.processing`), as sorted
        (key, value) pairs.

    Examples
    --------
    >>> from powderspin.model.modelfile import make_model
    >>> m = make_model("27Al", {"field_tesla": 14.1}, [{"cq_mhz": 3.0}])
    >>> m.nucleus.name, len(m.sites), m.measurement.field_tesla
    ('27Al', 1, 14.1)
    """

    nucleus: Nuclide
    measurements: tuple
    sites: tuple
    free: tuple = ()
    tied: tuple = ()
    fit: FitSettings = field(default_factory=FitSettings)
    source: str = ""
    processing: tuple = ()

    def __post_init__(self):
        if isinstance(self.measurements, Measurement):
            object.__setattr__(self, "measurements", (self.measurements,))
        meas = tuple(self.measurements)
        if not meas:
            raise ModelError("model: a [measurement] table with field_tesla is required")
        for m in meas:
            if not isinstance(m, Measurement):
                raise ModelError(f"model: measurements must be Measurement values, got {type(m).__name__}")
        object.__setattr__(self, "measurements", meas)
        sites = tuple(self.sites)
        if not sites:
            raise ModelError("model: at least one [[site]] is needed")
        for s in sites:
            if not isinstance(s, Site):
                raise ModelError(f"model: sites must be Site values, got {type(s).__name__}")
        object.__setattr__(self, "sites", sites)
        object.__setattr__(self, "free", tuple(self.free))
        object.__setattr__(self, "tied", tuple(self.tied))
        seen: dict[str, int] = {}
        for i, s in enumerate(sites):
            if s.label in seen:
                raise ModelError(
                    f"site '{s.label}': the label is used by sites {seen[s.label] + 1} and {i + 1}; "
                    "labels must be unique (they name each site's results)"
                )
            seen[s.label] = i
        if all(s.weight == 0.0 for s in sites):
            raise ModelError("model: every site has weight = 0; at least one weight must be > 0")
        nuc = self.nucleus
        if not nuc.is_quadrupolar:
            for s in sites:
                if s.cq_mhz != 0.0:
                    raise ModelError(
                        f"site '{s.label}': cq_mhz = {s.cq_mhz} but {nuc.name} has spin 1/2 "
                        "(no quadrupole moment); the allowed value is 0"
                    )
        check_model_distributions(self)
        for j, m in enumerate(meas):
            where = "measurement" if len(meas) == 1 else f"measurement {j + 1}"
            if m.is_two_dimensional:
                try:
                    two_dimensional_scale(nuc.spin, m.experiment, m.mq_order)
                except ValueError as e:
                    raise ModelError(f"{where}: {e} ({nuc.name})") from None
            try:
                selected_transitions(nuc.spin, m.transitions)
            except ModelError as e:
                raise ModelError(str(e).replace("measurement:", f"{where}:", 1)) from None
            widest = max(s.lorentz_hz + m.lorentz_hz + math.hypot(s.gauss_hz, m.gauss_hz) for s in sites)
            if m.width_ppm is not None:
                width_hz = m.width_ppm * nuc.larmor_hz(m.field_tesla) * 1e-6
                if width_hz / m.points < MIN_POINT_SPACING_HZ:
                    raise ModelError(
                        f"{where}: width_ppm = {m.width_ppm:g} over {m.points} points is "
                        f"{width_hz / m.points:.3g} Hz per point, finer than {MIN_POINT_SPACING_HZ:g} Hz (far below "
                        f"any solid-state line); the allowed width is at least "
                        f"{MIN_POINT_SPACING_HZ * m.points / (nuc.larmor_hz(m.field_tesla) * 1e-6):.3g} ppm"
                    )
                if widest > width_hz:
                    raise ModelError(
                        f"{where}: the broadening ({widest:g} Hz FWHM, site plus measurement) is wider than the "
                        f"axis (width_ppm = {m.width_ppm:g} ppm = {width_hz:.4g} Hz); the allowed broadening is "
                        f"below the axis width"
                    )
        n_s, n_m = len(sites), len(meas)
        for p in self.free + self.tied:
            for a in (p.address,) + ((p.source,) if isinstance(p, TiedParameter) else ()):
                limit = n_s if a.table == "site" else n_m
                if not (0 <= a.index < limit):
                    raise ModelError(f"parameter {a.name()}: no {a.table} with index {a.index}")

    @property
    def measurement(self) -> Measurement:
        """The first (usually the only) measurement.

        Returns
        -------
        Measurement

        Examples
        --------
        >>> from powderspin.model.modelfile import make_model
        >>> make_model("23Na", {"field_tesla": 11.7}, [{"cq_mhz": 2.0}]).measurement.field_tesla
        11.7
        """
        return self.measurements[0]

    @property
    def larmor_hz(self) -> float:
        """Reference frequency nu_ref (Hz) of the nucleus at the first measurement's field.

        Returns
        -------
        float

        Examples
        --------
        >>> from powderspin.model.modelfile import make_model
        >>> round(make_model("1H", {"field_tesla": 9.4}, [{}]).larmor_hz / 1e6, 1)
        400.2
        """
        return self.nucleus.larmor_hz(self.measurement.field_tesla)

    def with_measurement(self, index: int = 0, **changes) -> "Model":
        """A copy of the model with some fields of one measurement changed.

        Parameters
        ----------
        index : int, optional
            Which measurement (default the first).
        **changes
            :class:`Measurement` fields and new values, e.g.
            ``field_tesla=18.8`` (T) or ``spinning_hz=20000.0`` (Hz); they are
            validated as in :class:`Measurement`.

        Returns
        -------
        Model
            A new model; this one is unchanged.

        Examples
        --------
        >>> from powderspin.model.modelfile import make_model
        >>> m = make_model("27Al", {"field_tesla": 14.1}, [{"cq_mhz": 3.0}])
        >>> m.with_measurement(field_tesla=18.8).measurement.field_tesla, m.measurement.field_tesla
        (18.8, 14.1)
        """
        meas = list(self.measurements)
        meas[index] = replace(meas[index], **changes)
        return replace(self, measurements=tuple(meas))

    def with_sites(self, sites) -> "Model":
        """A copy of the model with other sites (free and tied parameters dropped).

        Parameters
        ----------
        sites : sequence of Site

        Returns
        -------
        Model

        Examples
        --------
        >>> from powderspin.model.modelfile import make_model
        >>> m = make_model("27Al", {"field_tesla": 14.1}, [{"cq_mhz": 3.0}])
        >>> m.with_sites([Site(label="x", cq_mhz=5.0)]).sites[0].cq_mhz
        5.0
        """
        return replace(self, sites=tuple(sites), free=(), tied=())

    def parameter_value(self, address: ParameterAddress) -> float:
        """The current value of a parameter.

        Parameters
        ----------
        address : ParameterAddress

        Returns
        -------
        float
            In the key's unit.

        Examples
        --------
        >>> from powderspin.model.modelfile import make_model
        >>> m = make_model("27Al", {"field_tesla": 14.1}, [{"cq_mhz": 3.0}])
        >>> m.parameter_value(ParameterAddress("site", 0, "cq_mhz"))
        3.0
        """
        if address.table == "measurement":
            return float(getattr(self.measurements[address.index], address.key))
        site = self.sites[address.index]
        if address.key in _SITE_FIELDS:
            v = getattr(site, address.key)
            return float(v[address.item]) if address.item is not None else float(v)
        vals = site.as_keys()
        if address.key not in vals:
            raise ModelError(
                f"parameter {address.name(self)}: the site gives its shift tensor as "
                f"{self.sites[address.index].shift_form}, which has no {address.key}"
            )
        v = vals[address.key]
        return float(v[address.item]) if address.item is not None else float(v)

    def address_of(self, name: str) -> ParameterAddress:
        """The address of a parameter from its name, as fit results spell it.

        Parameters
        ----------
        name : str
            ``"LABEL.key"``, ``"LABEL.euler_deg[1]"`` or ``"measurement N.key"`` (N from 1).

        Returns
        -------
        ParameterAddress

        Raises
        ------
        ModelError
            An unknown site, measurement or key, naming what exists.

        Examples
        --------
        >>> from powderspin.model.modelfile import make_model
        >>> m = make_model("27Al", {"field_tesla": 9.4}, [{"label": "A", "cq_mhz": 3.0}])
        >>> m.address_of("A.cq_mhz"), m.address_of("measurement 1.gauss_hz").table
        (ParameterAddress(table='site', index=0, key='cq_mhz', item=None), 'measurement')
        """
        if not isinstance(name, str) or "." not in name:
            raise ModelError(f"parameter {name!r}: give 'LABEL.key' (e.g. 'AlO4.cq_mhz') or 'measurement N.key'")
        owner, _, key = name.rpartition(".")
        item = None
        if key.endswith("]") and "[" in key:
            key, _, idx = key[:-1].partition("[")
            try:
                item = int(idx)
            except ValueError:
                raise ModelError(f"parameter {name!r}: {idx!r} is not an index 0, 1 or 2") from None
        if owner.startswith("measurement "):
            try:
                j = int(owner.split()[1]) - 1
            except (ValueError, IndexError):
                raise ModelError(f"parameter {name!r}: 'measurement N' needs a number N from 1") from None
            if not 0 <= j < len(self.measurements):
                raise ModelError(f"parameter {name!r}: the model has {len(self.measurements)} measurement(s)")
            return ParameterAddress("measurement", j, key, item)
        labels = [s.label for s in self.sites]
        if owner not in labels:
            raise ModelError(f"parameter {name!r}: there is no site '{owner}'; sites are "
                             + ", ".join(repr(x) for x in labels))
        return ParameterAddress("site", labels.index(owner), key, item)

    def with_parameters(self, values: Mapping) -> "Model":
        """A new model with new parameter values (ties applied).

        Parameters
        ----------
        values : mapping of ParameterAddress to float
            New values in each key's unit.  A tied parameter follows its
            source and may not be set directly.

        Returns
        -------
        Model
            Same free and tied parameters; the values are checked as usual.

        Examples
        --------
        >>> from powderspin.model.modelfile import make_model
        >>> m = make_model("27Al", {"field_tesla": 9.4},
        ...                [{"label": "A", "cq_mhz": {"start": 3.0, "min": 1.0, "max": 9.0},
        ...                  "gauss_hz": 50.0},
        ...                 {"label": "B", "gauss_hz": {"same_as": "A.gauss_hz"}}])
        >>> a_gauss = ParameterAddress("site", 0, "gauss_hz")
        >>> m2 = m.with_parameters({m.free[0].address: 4.5, a_gauss: 80.0})
        >>> m2.sites[0].cq_mhz, m2.sites[1].gauss_hz, m.sites[0].cq_mhz
        (4.5, 80.0, 3.0)
        """
        tied_targets = {t.address for t in self.tied}
        site_changes: dict[int, dict] = {}
        meas_changes: dict[int, dict] = {}

        def put(addr, v):
            if addr.table == "measurement":
                meas_changes.setdefault(addr.index, {})[addr.key] = float(v)
            else:
                d = site_changes.setdefault(addr.index, {})
                if addr.item is not None:
                    e = list(d.get("euler_deg", self.sites[addr.index].euler_deg))
                    e[addr.item] = float(v)
                    d["euler_deg"] = tuple(e)
                else:
                    d[addr.key] = float(v)

        for addr, v in values.items():
            if not isinstance(addr, ParameterAddress):
                raise ModelError(f"with_parameters: keys must be ParameterAddress values, got {addr!r}")
            if addr in tied_targets:
                raise ModelError(f"parameter {addr.name(self)} is tied to another one and cannot be set directly")
            put(addr, v)
        for t in self.tied:
            src = t.source
            if src.table == "measurement":
                v = meas_changes.get(src.index, {}).get(src.key, self.parameter_value(src))
            elif src.item is not None:
                v = site_changes.get(src.index, {}).get("euler_deg", self.sites[src.index].euler_deg)[src.item]
            else:
                v = site_changes.get(src.index, {}).get(src.key, self.parameter_value(src))
            put(t.address, v)
        sites = list(self.sites)
        for i, ch in site_changes.items():
            sites[i] = sites[i].with_values(ch)
        meas = list(self.measurements)
        for j, ch in meas_changes.items():
            meas[j] = replace(meas[j], **ch)
        return replace(self, sites=tuple(sites), measurements=tuple(meas))


# ---------------------------------------------------------------------------
# distributions: settings that make no sense together

_DIST_KEYS = ("czjzek_sigma_mhz", "cq_distribution_mhz", "eta_distribution")


# --------------------------------------------------------------------------- model-level checks


def _address_set(model: Model, kind: str) -> set:
    return {(p.address.table, p.address.index, p.address.key) for p in getattr(model, kind)}


def is_variable(model: Model, index: int, key: str) -> bool:
    """Whether a site key is free or tied in a model (so a fit may change it).

    Parameters
    ----------
    model : Model
    index : int
        The site (0-based).
    key : str

    Returns
    -------
    bool

    Examples
    --------
    >>> from powderspin.model.modelfile import make_model
    >>> m = make_model("27Al", {"field_tesla": 9.4}, [{"cq_mhz": {"start": 3.0, "min": 1.0, "max": 5.0}}])
    >>> is_variable(m, 0, "cq_mhz"), is_variable(m, 0, "eta_q")
    (True, False)
    """
    a = ("site", index, key)
    return a in _address_set(model, "free") or a in _address_set(model, "tied")


def check_model_distributions(model: Model) -> None:
    """Refuse distribution settings that make no sense; name the keys.

    Called by :class:`~powderspin.model.values.Model` when it is built.

    Parameters
    ----------
    model : Model

    Raises
    ------
    ModelError
        An EFG distribution on a spin-1/2 nucleus; a Czjzek distribution
        with an integer spin or with transitions other than the central one
        (its grid follows the central-transition pattern); a free or tied
        ``czjzek_sigma_mhz`` together with an explicit grid; a free
        ``cq_mhz`` / ``eta_q`` together with the explicit grid that replaces
        it.

    Examples
    --------
    >>> from powderspin.model.modelfile import make_model
    >>> try:
    ...     make_model("31P", {"field_tesla": 9.4}, [{"label": "P", "czjzek_sigma_mhz": 1.0}])
    ... except ModelError as e:
    ...     print(e)
    site 'P': czjzek_sigma_mhz describes a distribution of EFG tensors, but 31P has spin 1/2 (no quadrupole
    moment); remove czjzek_sigma_mhz or use shift_fwhm_ppm for a shift distribution
    """
    nuc = model.nucleus
    for i, s in enumerate(model.sites):
        where = f"site '{s.label}'"
        sigma_var = is_variable(model, i, "czjzek_sigma_mhz")
        given = [k for k in _DIST_KEYS if (getattr(s, k) not in (None, 0.0)) or (k == "czjzek_sigma_mhz" and sigma_var)]
        if not given:
            continue
        names = " and ".join(given)
        if not nuc.is_quadrupolar:
            raise ModelError(
                f"{where}: {names} describe{'s' if len(given) == 1 else ''} a distribution of EFG tensors, but "
                f"{nuc.name} has spin 1/2 (no quadrupole moment); remove {names} or use shift_fwhm_ppm for a shift "
                "distribution")
        explicit = s.cq_distribution_mhz is not None or s.eta_distribution is not None
        if sigma_var and explicit:
            raise ModelError(f"{where}: czjzek_sigma_mhz is a fit parameter, but the site has an explicit "
                             "cq_distribution_mhz/eta_distribution; give one kind of distribution")
        for key, dist in (("cq_mhz", "cq_distribution_mhz"), ("eta_q", "eta_distribution")):
            if getattr(s, dist) is not None and is_variable(model, i, key):
                raise ModelError(f"{where}: {key} is a fit parameter, but {dist} replaces it; "
                                 f"remove one of them")
        if s.czjzek_sigma_mhz > 0 or sigma_var:
            spin = nuc.spin
            if abs(spin - round(spin)) < 1e-9:
                raise ModelError(
                    f"{where}: czjzek_sigma_mhz needs a half-integer spin (its grid follows the central "
                    f"transition); {nuc.name} has spin {int(round(spin))}; use cq_distribution_mhz/eta_distribution")
            for j, m in enumerate(model.measurements):
                if selected_transitions(spin, m.transitions) != (0.5,):
                    wm = "measurement" if len(model.measurements) == 1 else f"measurement {j + 1}"
                    raise ModelError(
                        f"{where}: czjzek_sigma_mhz needs transitions = \"central\" in {wm} (its grid spacing "
                        "follows the central-transition pattern); for satellites give cq_distribution_mhz/"
                        "eta_distribution")


# --------------------------------------------------------------------------- ranges of (possibly free) values


# ---------------------------------------------------------------------------
# transitions


def parse_transition(text: str, spin: float | None) -> tuple[float, float]:
    """Parse ``"m1:m2"`` (e.g. ``"3/2:1/2"``, ``"-1/2:-3/2"``) into (m1, m2).

    Single-quantum transitions need ``m1 - m2 = +-1``; symmetric
    multiple-quantum transitions ``m:-m`` are also accepted.  Returns the pair
    ordered as (upper m, lower m).

    Parameters
    ----------
    text : str
        ``"m1:m2"`` with half-integer magnetic quantum numbers (``"3/2"``,
        ``"-1/2"``, ``"1"``).
    spin : float or None
        Nuclear spin I to check ``|m| <= I`` against; None skips that check.

    Returns
    -------
    tuple of 2 float
        (upper m, lower m).

    Raises
    ------
    ModelError
        If the text is malformed, the transition is neither single-quantum
        nor symmetric, or ``|m| > I``.

    References
    ----------
    L. Frydman, J. S. Harwood, J. Am. Chem. Soc. 117 (1995) 5367 (symmetric
    multiple-quantum transitions).

    Examples
    --------
    >>> parse_transition("1/2:3/2", 2.5)
    (1.5, 0.5)
    >>> parse_transition("3/2:-3/2", 1.5)
    (1.5, -1.5)
    """
    try:
        a, b = text.split(":")
        m1, m2 = float(Fraction(a.strip())), float(Fraction(b.strip()))
    except (ValueError, ZeroDivisionError, AttributeError):
        raise ModelError(
            f"measurement: transition {text!r} is not of the form 'm1:m2' with m in half-integers, e.g. '3/2:1/2'"
        ) from None
    for m in (m1, m2):
        if abs(2 * m - round(2 * m)) > 1e-12:
            raise ModelError(f"measurement: transition {text!r}: {m} is not a multiple of 1/2")
    hi, lo = max(m1, m2), min(m1, m2)
    if not (abs(hi - lo - 1.0) < 1e-12 or abs(hi + lo) < 1e-12) or hi == lo:
        raise ModelError(
            f"measurement: transition {text!r} must be single-quantum (m1 - m2 = 1) or symmetric (m:-m)"
        )
    if spin is not None and (hi > spin + 1e-12 or lo < -spin - 1e-12):
        s = Fraction(spin).limit_denominator(2)
        raise ModelError(
            f"measurement: transition {text!r} needs |m| <= I = {s}; allowed m range is [-{s}, {s}]"
        )
    return hi, lo


def selected_transitions(spin: float, transitions) -> tuple[float, ...]:
    """Upper m of each selected single-quantum transition m -> m-1.

    Parameters
    ----------
    spin : float
        Nuclear spin I.
    transitions : str or sequence of str
        ``"central"`` (half-integer spins only: there is no central
        transition for an integer spin), ``"all"`` or ``"m1:m2"`` strings.

    Returns
    -------
    tuple of float

    Raises
    ------
    ModelError
        For ``"central"`` with an integer spin, a multiple-quantum transition
        or ``|m| > I``.

    Examples
    --------
    >>> selected_transitions(2.5, "central"), selected_transitions(1.0, "all")
    ((0.5,), (1.0, 0.0))
    """
    if transitions == "central" or transitions == ("central",):
        if abs(spin - round(spin)) < 1e-12:
            raise ModelError(
                f"measurement: transitions = 'central' but spin {int(round(spin))} has no central transition "
                "(its single-quantum transitions are +-1 <-> 0 for spin 1); use transitions = \"all\" or list "
                "them, e.g. [\"1:0\", \"0:-1\"]"
            )
        return (0.5,)
    if transitions == "all" or transitions == ("all",):
        return tuple(float(spin - k) for k in range(int(round(2 * spin))))
    out = []
    for t in transitions:
        hi, lo = parse_transition(t, spin)
        if abs(hi - lo - 1.0) > 1e-12:
            raise ModelError(
                f"measurement: transition {t!r} is multiple-quantum; spectra take single-quantum "
                "transitions 'm:m-1' only"
            )
        if hi not in out:
            out.append(hi)
    return tuple(out)
