"""The precision a plan predicts: parameters, Fisher information, standard errors and the ranking criterion.

The precision of an experiment is the Cramer-Rao bound of the fitting
model: with J the Jacobian of the simulated spectrum with respect to the
parameters and the intensity scale (solved linearly, as the fit does) and
sigma = max(spectrum) / SNR, the Fisher information is ``F = J^T J /
sigma^2``; the scale is profiled out and the covariance follows the one rule
of :mod:`powderspin.uncertainty`.  The module notes of
:mod:`powderspin.planning.planner` define the relative errors and the
criterion.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from types import MappingProxyType
from typing import Mapping

import numpy as np

from ..model.values import Model, ParameterAddress
from ..uncertainty import covariance_from_fisher, propagate, standard_errors

__all__ = ["PARAMETER_REFERENCES", "DIFF_STEP", "PrecisionParameter", "precision_parameters", "parameter_step",
           "reported", "fisher_information", "errors", "criterion", "log_det", "with_precision", "reference_floor"]

#: relative forward-difference step of the Jacobian (of max(|value|, floor))
DIFF_STEP = 1e-5

#: For each key: (kind, floor).  Relative standard error = stderr / max(|value|, floor) for
#: kind "scale" (a natural zero), stderr / floor for kind "location".  The floors are the
#: precision to which such values are usually quoted (common practice).
PARAMETER_REFERENCES: Mapping[str, tuple[str, float]] = MappingProxyType({
    "weight": ("scale", 0.01),
    "cq_mhz": ("scale", 0.1),
    "eta_q": ("scale", 0.1),
    "span_ppm": ("scale", 10.0),
    "aniso_ppm": ("scale", 10.0),
    "eta_cs": ("scale", 0.1),
    "lorentz_hz": ("scale", 10.0),
    "gauss_hz": ("scale", 10.0),
    "shift_ppm": ("location", 1.0),
    "shift_offset_ppm": ("location", 1.0),
    "skew": ("location", 0.1),
    "euler_deg": ("location", 10.0),
})


@dataclass(frozen=True)
class PrecisionParameter:
    """A parameter of the precision analysis.

    Attributes
    ----------
    address : ParameterAddress
    name : str
        As fit results name it (``"AlO4.cq_mhz"``).
    value : float
        The model's value (the precision is computed there).
    lo, hi : float
        Its range (a free parameter's own, else the key's allowed range).
    unit : str

    Examples
    --------
    >>> a = ParameterAddress("site", 0, "cq_mhz")
    >>> PrecisionParameter(a, "A.cq_mhz", 3.0, 0.0, 1000.0, "MHz").unit
    'MHz'
    """

    address: ParameterAddress
    name: str
    value: float
    lo: float
    hi: float
    unit: str


def precision_parameters(model: Model) -> tuple[list, str]:
    """The parameters whose precision a plan predicts, and a sentence saying which and why.

    Parameters
    ----------
    model : Model

    Returns
    -------
    list of PrecisionParameter
        The model's free parameters of its first measurement and its sites
        (one weight held when all are free: the scale absorbs their sum); a
        model without free parameters uses each site's physically relevant
        ones (see :mod:`powderspin.planning.planner`).
    str

    Examples
    --------
    >>> import powderspin as ps
    >>> m = ps.make_model("27Al", {"field_tesla": 9.4}, [{"label": "A", "cq_mhz": 3.0, "eta_q": 0.2}])
    >>> [q.name for q in precision_parameters(m)[0]]
    ['A.shift_ppm', 'A.cq_mhz', 'A.eta_q']
    """
    if model.free:
        free = list(model.free)
        other = [q.name for q in free if q.address.table == "measurement" and q.address.index != 0]
        free = [q for q in free if not (q.address.table == "measurement" and q.address.index != 0)]
        weights = [p for p in free if p.address.table == "site" and p.address.key == "weight"]
        tied_w = {t.address.index for t in model.tied if t.address.table == "site" and t.address.key == "weight"}
        fixed = [i for i in range(len(model.sites))
                 if not any(p.address.index == i for p in weights) and i not in tied_w]
        text = "the model's free parameters"
        if other:
            text += " (" + ", ".join(other) + " left out: they belong to other measurements than the one planned)"
        if not free:
            return [], text + "; none is left"
        if weights and not fixed:
            free.remove(weights[0])
            text += (f" ({weights[0].name} held at its value: weights are relative and the scale absorbs their "
                     "sum)")
        out = [PrecisionParameter(p.address, p.name, float(model.parameter_value(p.address)), p.min, p.max,
                                  p.address.spec().unit) for p in free]
        return out, text
    out = []
    nuc = model.nucleus
    for i, s in enumerate(model.sites):
        keys = []
        if s.shift_form != "principal":
            keys.append("shift_ppm")
        if nuc.spin > 0.5 and s.cq_mhz != 0.0:
            keys += ["cq_mhz", "eta_q"]
        if not s.shift.is_isotropic:
            if s.shift_form == "span_skew":
                keys += ["span_ppm", "skew"]
            elif s.shift_form == "haeberlen":
                keys += ["aniso_ppm", "eta_cs"]
        if i > 0:
            keys.append("weight")
        for k in keys:
            a = ParameterAddress("site", i, k)
            spec = a.spec()
            out.append(PrecisionParameter(a, a.name(model), float(model.parameter_value(a)), spec.low, spec.high,
                                          spec.unit))
    text = ("the model has no free parameters; each site's physically relevant ones are used: shift_ppm, "
            "cq_mhz and eta_q (quadrupolar sites), span_ppm and skew (or aniso_ppm and eta_cs) where the shift is "
            "anisotropic, and the weight of every site but the first (relative weights; the scale absorbs their "
            "sum); broadening is taken as known")
    return out, text


def reference_floor(key: str) -> tuple[str, float]:
    """(kind, floor) of a key for relative errors (:data:`PARAMETER_REFERENCES`; others: a scale with floor 1).

    Parameters
    ----------
    key : str

    Returns
    -------
    tuple of (str, float)

    Examples
    --------
    >>> reference_floor("shift_ppm")
    ('location', 1.0)
    """
    return PARAMETER_REFERENCES.get(key, ("scale", 1.0))


def parameter_step(p: PrecisionParameter) -> float:
    """Forward-difference step: DIFF_STEP of max(|value|, floor), backward at the upper bound.

    Parameters
    ----------
    p : PrecisionParameter

    Returns
    -------
    float

    Examples
    --------
    >>> a = ParameterAddress("site", 0, "eta_q")
    >>> parameter_step(PrecisionParameter(a, "A.eta_q", 1.0, 0.0, 1.0, ""))
    -1e-05
    """
    _, fl = reference_floor(p.address.key)
    h = DIFF_STEP * max(abs(p.value), fl)
    return -h if p.value + h > p.hi else h


def reported(model: Model, params: list) -> tuple[list, np.ndarray]:
    """Reported quantities (weights as fractions of the total) and their Jacobian with respect to the parameters.

    Parameters
    ----------
    model : Model
    params : list of PrecisionParameter

    Returns
    -------
    list of (name, value, unit, key)
    numpy.ndarray, shape (n_reported, n_params)
    """
    p = len(params)
    weight_cols = {q.address.index: k for k, q in enumerate(params)
                   if q.address.table == "site" and q.address.key == "weight"}
    names, values, units, keys = [], [], [], []
    rows = []
    for k, q in enumerate(params):
        if k in weight_cols.values():
            continue
        names.append(q.name)
        values.append(q.value)
        units.append(q.unit)
        keys.append(q.address.key if q.address.item is None else "euler_deg")
        r = np.zeros(p)
        r[k] = 1.0
        rows.append(r)
    if weight_cols:
        w = np.array([s.weight for s in model.sites], dtype=float)
        total = w.sum()
        for i, s in enumerate(model.sites):
            r = np.zeros(p)
            for j, k in weight_cols.items():
                r[k] = ((1.0 if i == j else 0.0) * total - w[i]) / total ** 2
            names.append(f"{s.label}.weight")
            values.append(w[i] / total if total > 0 else math.nan)
            units.append("")
            keys.append("weight")
            rows.append(r)
    return list(zip(names, values, units, keys)), np.array(rows).reshape(len(rows), p)


def fisher_information(jac: np.ndarray, spectrum: np.ndarray, sigma: float) -> np.ndarray:
    """Fisher information of the parameters with the intensity scale profiled out.

    Parameters
    ----------
    jac : numpy.ndarray, shape (points, p)
        Derivatives of the spectrum with respect to the parameters.
    spectrum : numpy.ndarray, shape (points,)
        The spectrum: the derivative with respect to the scale.
    sigma : float
        Noise standard deviation per point.

    Returns
    -------
    numpy.ndarray, shape (p, p)
        ``F_tt - F_ts F_st / F_ss`` of ``F = [J, y]^T [J, y] / sigma^2``.

    Examples
    --------
    >>> fisher_information(np.array([[1.0], [0.0]]), np.array([0.0, 1.0]), 1.0).tolist()
    [[1.0]]
    """
    full_j = np.column_stack([jac, spectrum])
    full = full_j.T @ full_j / sigma ** 2
    p = jac.shape[1]
    f_tt, f_ts, f_ss = full[:p, :p], full[:p, p], full[p, p]
    f = f_tt - np.outer(f_ts, f_ts) / f_ss if f_ss > 0 else f_tt
    return 0.5 * (f + f.T)


def errors(cov_theta: np.ndarray, info: list, g: np.ndarray, refs: dict) -> tuple[dict, dict]:
    """Standard errors of the reported quantities (delta method) and the relative errors.

    Parameters
    ----------
    cov_theta : numpy.ndarray
        Covariance of the parameters.
    info : list of (name, value, unit, key)
    g : numpy.ndarray
        Jacobian of the reported quantities (:func:`reported`).
    refs : dict
        Name -> the reference the standard error is divided by.

    Returns
    -------
    stderr, relative : dict
    """
    err = standard_errors(propagate(cov_theta, g))
    stderr = {n: float(e) for (n, *_), e in zip(info, err)}
    rel = {n: float(stderr[n] / refs[n]) for n, *_ in info}
    return stderr, rel


def criterion(rel: Mapping, skip: set) -> tuple[float, str]:
    """The largest relative error (and its parameter) of those not skipped.

    Parameters
    ----------
    rel : mapping of name to float
    skip : set of str

    Returns
    -------
    tuple of (float, str)

    Examples
    --------
    >>> criterion({"a": 0.1, "b": 0.3, "c": 9.0}, {"c"})
    (0.3, 'b')
    """
    worst, name = -1.0, ""
    for n, v in rel.items():
        if n in skip:
            continue
        vv = math.inf if not math.isfinite(v) else v
        if vv > worst:
            worst, name = vv, n
    return (worst if worst >= 0 else math.nan), name


def log_det(cov: np.ndarray, refs: list) -> float:
    """log det of the covariance of the parameters scaled by their references (a tie-breaker; inf if undetermined).

    Parameters
    ----------
    cov : numpy.ndarray
    refs : sequence of float

    Returns
    -------
    float

    Examples
    --------
    >>> round(log_det(np.diag([4.0, 1.0]), [2.0, 1.0]), 12)
    0.0
    """
    r = np.asarray(refs, dtype=float)
    if not np.all(np.isfinite(np.diag(cov))):
        return math.inf
    s = cov / np.outer(r, r)
    sign, ld = np.linalg.slogdet(s)
    return float(ld) if sign > 0 else math.inf


def with_precision(r, info, g, refs, skip, prefs):
    """A candidate's result with its standard errors, relative errors and criteria filled in.

    Parameters
    ----------
    r : RateResult
        With its Fisher information.
    info, g, refs
        As :func:`errors`.
    skip : set of str
        Parameters left out of the criterion.
    prefs : sequence of float
        References of the parameters (for :func:`log_det`).

    Returns
    -------
    RateResult
    """
    if r.fisher is None:
        return r
    cov = covariance_from_fisher(r.fisher)
    stderr, rel = errors(cov, info, g, refs)
    crit, name = criterion(rel, skip)
    ld = log_det(cov, prefs)
    rc = crit / r.relative_signal if r.relative_signal > 0 else math.inf
    return replace(r, stderr=stderr, relative=rel, criterion=crit, worst_parameter=name, log_det=ld,
                   rotor_criterion=rc)
