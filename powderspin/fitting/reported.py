"""From the optimiser's solution to what a fit reports: values, errors, warnings and the fitted model.

Site weights are relative (each measurement's scale absorbs their sum), so
they are reported normalised to sum 1 and each scale is multiplied by the
weight sum; the covariance of what is reported follows by the delta method
(:func:`powderspin.uncertainty.propagate`).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ..model.values import FitSettings, Model, ParameterAddress
from ..uncertainty import propagate, standard_errors
from .problem import Evaluation, FitProblem

__all__ = ["reported_values", "stderr_tables", "parameter_warnings", "fitted_model", "CORRELATION_WARNING",
           "SCALE_LIKE", "NATURAL_RANGE"]

#: |correlation| above which two parameters are reported as trading off
CORRELATION_WARNING = 0.95
#: keys whose allowed range is their whole physical range: a value at its end is a value, and searching all of it
#: is what a global search should do
NATURAL_RANGE = frozenset({"eta_q", "skew", "eta_cs"})
#: keys whose value has a natural zero (a standard error larger than the value itself means the data cannot tell
#: the value from zero); location-like keys (shifts, angles) are judged against their range only
SCALE_LIKE = frozenset({"weight", "cq_mhz", "eta_q", "span_ppm", "aniso_ppm", "eta_cs", "lorentz_hz", "gauss_hz",
                        "shift_fwhm_ppm", "czjzek_sigma_mhz"})


def _weights(model: Model) -> np.ndarray:
    return np.array([s.weight for s in model.sites])


def reported_values(problem: FitProblem, x, e: Evaluation, cov) -> dict:
    """Reported values (weights normalised, scales times the weight sum) and their covariance (delta method).

    Parameters
    ----------
    problem : FitProblem
    x : numpy.ndarray
        The free parameters at the solution.
    e : Evaluation
        The evaluation at ``x``.
    cov : numpy.ndarray
        Covariance of (free parameters, linear parameters).

    Returns
    -------
    dict
        ``values`` (free parameters as reported, then scales, weights and
        linear coefficients), ``cov`` (their covariance), ``scale_err``,
        ``weight_err``, ``baseline_err``, ``scales``, ``weights``,
        ``weights_free`` and ``baselines``.
    """
    p = x.size
    lin = np.concatenate(e.coefs)
    n_lin = [len(c) for c in e.coefs]
    starts = np.cumsum([0] + n_lin[:-1])
    weight_idx = {fp.address.index: k for k, fp in enumerate(problem.params)
                  if fp.address.table == "site" and fp.address.key == "weight"}

    def g(z):
        th, cl = z[:p], z[p:]
        m = problem.model_at(th) if weight_idx else problem.model
        w = _weights(m)
        ssum = w.sum()
        vals = th.copy()
        for i, k in weight_idx.items():
            vals[k] = w[i] / ssum
        scales = np.array([cl[s0] * ssum for s0 in starts])
        return np.concatenate([vals, scales, w / ssum, cl])

    z0 = np.concatenate([x, lin])
    v0 = g(z0)
    if weight_idx:
        gj = np.empty((v0.size, z0.size))
        for k in range(z0.size):
            h = 1e-7 * max(abs(z0[k]), 1e-3 if k < p else abs(z0[k]) + 1e-300)
            if k < p and z0[k] + h > problem.hi[k]:  # backward at an upper bound (eta_q = 1 may not be exceeded)
                h = -h
            z = z0.copy()
            z[k] += h
            gj[:, k] = (g(z) - v0) / h
    else:
        gj = np.zeros((v0.size, z0.size))
        gj[:p, :p] = np.eye(p)
        ssum = _weights(problem.model).sum()
        for jj, s0 in enumerate(starts):
            gj[p + jj, p + s0] = ssum
        gj[p + len(starts) + len(problem.model.sites):, p:] = np.eye(lin.size)
    qc = propagate(cov, gj)
    err = standard_errors(qc)
    n_meas = len(e.coefs)
    n_sites = len(problem.model.sites)
    o = p + n_meas
    bl_err = []
    off = o + n_sites
    for jj, s0 in enumerate(starts):
        bl_err.append(tuple(float(err[off + s0 + k]) for k in range(1, n_lin[jj])))
    return {"values": v0, "cov": qc, "scale_err": [float(err[p + jj]) for jj in range(n_meas)],
            "weight_err": [float(err[o + i]) for i in range(n_sites)], "baseline_err": bl_err,
            "scales": [float(v0[p + jj]) for jj in range(n_meas)],
            "weights": [float(v) for v in v0[o:o + n_sites]], "weights_free": bool(weight_idx),
            "baselines": [tuple(float(v) for v in c[1:]) for c in e.coefs]}


def stderr_tables(fitted: Model, free, q_err, derived) -> tuple[tuple, tuple]:
    """Standard errors by model-file key, per site and per measurement (the result file's ``stderr`` tables).

    Parameters
    ----------
    fitted : Model
    free : sequence of FreeParameter
    q_err : numpy.ndarray
        Standard errors of the reported values, free parameters first.
    derived : dict
        As :func:`reported_values`.

    Returns
    -------
    tuple of 2 tuple of dict
    """
    sites = [dict() for _ in fitted.sites]
    meas = [dict() for _ in fitted.measurements]
    for k, fp in enumerate(free):
        a = fp.address
        if a.table == "site":
            d = sites[a.index]
            if a.item is not None:
                e = d.setdefault("euler_deg", [0.0, 0.0, 0.0])
                e[a.item] = float(q_err[k])
            else:
                d[a.key] = float(q_err[k])
        else:
            meas[a.index][a.key] = float(q_err[k])
    if derived["weights_free"]:
        for i, err in enumerate(derived["weight_err"]):
            sites[i]["weight"] = float(err)
    for j, err in enumerate(derived["scale_err"]):
        meas[j]["scale"] = float(err)
        if derived["baseline_err"][j]:
            meas[j]["baseline"] = list(derived["baseline_err"][j])
    return tuple(sites), tuple(meas)


def parameter_warnings(free, x, values, stderr, corr, names, active_mask=None) -> list[str]:
    """Plain-language warnings: parameters at a bound, not determined, or trading off against each other.

    Parameters
    ----------
    free : sequence of FreeParameter
    x : numpy.ndarray
        The free parameters at the solution.
    values, stderr : mapping of name to float
    corr : numpy.ndarray
    names : sequence of str
    active_mask : numpy.ndarray, optional
        The optimiser's active bounds (-1 lower, +1 upper, 0 none).

    Returns
    -------
    list of str
    """
    out = []
    for k, fp in enumerate(free):
        n = fp.name
        v, s = values[n], stderr[n]
        span = fp.max - fp.min
        tol = 1e-6 * span if math.isfinite(span) else 1e-9
        spec = fp.address.spec()
        at_low = x[k] - fp.min <= tol or (active_mask is not None and active_mask[k] < 0)
        at_high = not at_low and (fp.max - x[k] <= tol or (active_mask is not None and active_mask[k] > 0))
        if fp.address.key in NATURAL_RANGE and ((at_low and fp.min <= spec.low) or (at_high and fp.max >= spec.high)):
            pass  # the end of the physical range (eta_q = 0 or 1, skew = +-1): a value, not a limit of the search
        elif at_low:
            out.append(f"{n} stopped at its lower bound min = {fp.min:g}: the best value may lie beyond it; widen "
                       "the range if that is physical, or read the value as a limit")
        elif at_high:
            out.append(f"{n} stopped at its upper bound max = {fp.max:g}: the best value may lie beyond it; widen "
                       "the range if that is physical, or read the value as a limit")
        if not math.isfinite(s):
            out.append(f"{n} is not determined by the data: changing it does not change the fitted spectrum "
                       "(fix it, or tie it to another parameter)")
        elif math.isfinite(span) and s > span:
            out.append(f"{n} is not determined by the data: its standard error ({s:.3g}) exceeds its whole "
                       f"range ({fp.min:g} to {fp.max:g})")
        elif fp.address.key in SCALE_LIKE and v != 0 and s > abs(v):
            out.append(f"{n} is not determined by the data: its standard error ({s:.3g}) exceeds its value "
                       f"({v:.3g}), so the data cannot tell it from zero")
    p = len(names)
    for a in range(p):
        for b in range(a + 1, p):
            if abs(corr[a, b]) > CORRELATION_WARNING:
                out.append(f"{names[a]} and {names[b]} trade off against each other (correlation {corr[a, b]:+.3f}): "
                           "the data fix a combination of them rather than each one")
    return out


def fitted_model(problem: FitProblem, x, e: Evaluation, axes, centers, widths, paths, settings: FitSettings,
                 original: Model) -> Model:
    """The fitted model: values set, weights normalised, data axes, scale and baseline, pinned choices.

    Parameters
    ----------
    problem : FitProblem
    x : numpy.ndarray
    e : Evaluation
        The evaluation at ``x``.
    axes, centers, widths : sequences
        Each measurement's data axis and its ``center_ppm``/``width_ppm``.
    paths : sequence of str or None
        Where each measurement's data were read from.
    settings : FitSettings
    original : Model
        The model as given (its ``data`` keys are kept where no path was read).

    Returns
    -------
    Model
        Simulating it gives the fitted curves.
    """
    m = problem.model_at(x)
    w = _weights(m)
    ssum = float(w.sum())
    tied = {t.address for t in m.tied}
    vals = {ParameterAddress("site", i, "weight"): s.weight / ssum for i, s in enumerate(m.sites)
            if ParameterAddress("site", i, "weight") not in tied}
    m = m.with_parameters(vals)
    m = replace(m, free=(), fit=settings)
    for j, ax in enumerate(axes):
        c = e.coefs[j]
        data = original.measurements[j].data
        if paths[j] is not None:
            data = str(paths[j])
        m = m.with_measurement(j, points=ax.points, center_ppm=centers[j], width_ppm=widths[j],
                               scale=float(c[0] * ssum), baseline=tuple(float(v) for v in c[1:]), data=data,
                               rotor_phases=problem.model.measurements[j].rotor_phases,
                               orientations=problem.model.measurements[j].orientations)
    return m
