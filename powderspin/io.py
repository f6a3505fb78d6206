"""Model files out: write a Model back as TOML in the model-file keys.

Reading is :func:`powderspin.model.load_model`; this module writes the same
format (design.md section 4 keys), so a model built in Python, or one a fit
produces later, can be saved, edited and simulated from the command line.
Free parameters are written back as inline tables ``{ start, min, max }``.
"""

from __future__ import annotations

import math
from pathlib import Path

import tomli_w

from .model import MAGIC_ANGLE_DEG, Measurement, Model
from .spectrum import write_text_safely

__all__ = ["model_to_toml", "write_model"]


def _measurement_table(meas: Measurement) -> dict:
    t: dict = {"field_tesla": meas.field_tesla}
    t["spinning_hz"] = "inf" if math.isinf(meas.spinning_hz) else meas.spinning_hz
    if abs(meas.rotor_angle_deg - MAGIC_ANGLE_DEG) > 1e-12:
        t["rotor_angle_deg"] = meas.rotor_angle_deg
    tr = meas.transitions
    t["transitions"] = tr if isinstance(tr, str) else list(tr)
    t["method"] = meas.method
    t["points"] = meas.points
    if meas.center_ppm is not None:
        t["center_ppm"] = meas.center_ppm
    if meas.width_ppm is not None:
        t["width_ppm"] = meas.width_ppm
    t["orientations"] = meas.orientations
    t["binning"] = meas.binning
    t["rotor_phases"] = meas.rotor_phases
    t["lorentz_hz"] = meas.lorentz_hz
    t["gauss_hz"] = meas.gauss_hz
    return t


def _site_table(site) -> dict:
    t: dict = {"label": site.label, "weight": site.weight, "shift_ppm": site.shift.iso_ppm}
    if site.cq_mhz != 0.0:
        t["cq_mhz"] = site.cq_mhz
        t["eta_q"] = site.eta_q
    if not site.shift.is_isotropic:
        t["aniso_ppm"] = site.shift.aniso_ppm
        t["eta_cs"] = site.shift.eta
    if any(site.euler_deg):
        t["euler_deg"] = list(site.euler_deg)
    if site.lorentz_hz:
        t["lorentz_hz"] = site.lorentz_hz
    if site.gauss_hz:
        t["gauss_hz"] = site.gauss_hz
    return t


def model_to_toml(model: Model) -> str:
    """The model as TOML text in the model-file keys.

    The shift tensor is written in the Haeberlen form (``aniso_ppm``,
    ``eta_cs``), which is how it is stored; free parameters come back as
    ``{ start, min, max }`` inline tables.

    Parameters
    ----------
    model : Model

    Returns
    -------
    str
        TOML text that :func:`powderspin.model.parse_model` reads back to an
        equal model.

    References
    ----------
    TOML v1.0.0 specification (toml.io); U. Haeberlen, Adv. Magn. Reson. Suppl. 1
    (1976) for the shift-tensor parameters.

    Examples
    --------
    >>> import tomllib
    >>> from powderspin.model import make_model, parse_model
    >>> m = make_model("27Al", {"field_tesla": 14.1}, [{"cq_mhz": 3.0, "eta_q": 0.4, "span_ppm": 40.0, "skew": 0.2}])
    >>> parse_model(tomllib.loads(model_to_toml(m))).sites == m.sites
    True
    """
    data = {
        "nucleus": model.nucleus.name,
        "measurement": _measurement_table(model.measurement),
        "site": [_site_table(s) for s in model.sites],
    }
    for fp in model.free:
        where, key = fp.where.rsplit(".", 1)
        entry = {"start": fp.start}
        if math.isfinite(fp.min):
            entry["min"] = fp.min
        if math.isfinite(fp.max):
            entry["max"] = fp.max
        if where == "measurement":
            data["measurement"][key] = entry
            continue
        label = where.split("'", 2)[1] if "'" in where else None
        for s, t in zip(model.sites, data["site"]):
            if s.label == label:
                t[key] = entry
    header = "# powderspin model file (TOML); keys as in the README\n"
    return header + tomli_w.dumps(data)


def write_model(model: Model, path, *, force: bool = False) -> Path:
    """Write a model file; never overwrites an existing file unless ``force``.

    Parameters
    ----------
    model : Model
    path : str or pathlib.Path
    force : bool
        Overwrite an existing file.

    Returns
    -------
    pathlib.Path

    References
    ----------
    TOML v1.0.0 specification (toml.io).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from powderspin.model import load_model, make_model
    >>> m = make_model("31P", {"field_tesla": 9.4}, [{"span_ppm": 100.0, "skew": 0.5}])
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_model(m, pathlib.Path(d) / "m.toml")
    ...     load_model(p).sites == m.sites
    True
    """
    return write_text_safely(path, model_to_toml(model), force=force)
