"""Is the chi-square surface quadratic where the standard errors say it is?  And profile intervals where it is not.

Standard errors from the covariance ``(J^T J)^-1`` assume that chi-square is
quadratic in the parameters over the interval they describe.  With Euler
angles, eta near its ends or a pattern that changes shape with C_Q, it often
is not.  :func:`curvature_check` compares, for a step of one standard error
along each parameter (the others held) and along each principal direction of
the covariance (in units of the standard errors), the chi-square change the
covariance predicts, ``d^T J^T J d``, with the actual change, on both sides.
Where they disagree by more than :data:`QUADRATIC_TOLERANCE` (relative), the
quadratic picture fails, and :func:`profile_interval` scans the parameter,
re-optimising all the others at every step, to the points where chi-square
has risen by 1 (the profile-likelihood interval; W. H. Press et al.,
*Numerical Recipes*, 3rd ed., Cambridge 2007, sec. 15.6; D. J. Venzon,
S. H. Moolgavkar, Appl. Statist. 37 (1988) 87).

J is the Jacobian of the residual with the scale and baseline solved at
every point (variable projection), so the covariance it gives is that of the
free parameters with the linear ones profiled out, matching the profile.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .data import FitError
from .problem import FitProblem

__all__ = ["CurvatureRow", "curvature_check", "profile_interval", "QUADRATIC_TOLERANCE", "PROFILE_STEPS"]

#: the quadratic picture fails where the actual chi-square change at one standard error differs from the predicted
#: one by more than this fraction (either side)
QUADRATIC_TOLERANCE = 0.3
#: the profile scan steps outwards at these multiples of the standard error (until chi-square has risen by 1)
PROFILE_STEPS = (0.5, 1.0, 1.5, 2.0, 3.0, 4.5, 7.0, 10.0)


@dataclass(frozen=True)
class CurvatureRow:
    """One direction of the curvature check.

    Attributes
    ----------
    label : str
        A parameter name, or ``"principal k"`` (largest variance first).
    loadings : dict
        Parameter name -> component of the unit direction in standard-error units.
    predicted : float
        Chi-square change the covariance predicts for the step (1 along a principal direction or a parameter's
        profile; ``stderr^2 (J^T J)_ii`` with the others held).
    minus, plus : float
        Actual chi-square changes at minus and plus the step (nan where the step leaves the bounds).
    quadratic : bool
        Both within :data:`QUADRATIC_TOLERANCE` of the prediction.
    """

    label: str
    loadings: dict
    predicted: float
    minus: float
    plus: float
    quadratic: bool


def _chi2(problem: FitProblem, theta) -> float:
    try:
        r = problem.residual(theta)
    except FitError:
        return math.inf
    return float(r @ r)


def curvature_check(problem: FitProblem, x, jac, cov, names) -> list:
    """Predicted against actual chi-square changes at one standard error along parameters and principal directions.

    Parameters
    ----------
    problem : FitProblem
    x : numpy.ndarray
        The solution.
    jac : numpy.ndarray (n, p)
        Jacobian of the (projected) residual at ``x``.
    cov : numpy.ndarray (p, p)
        Covariance of the free parameters (inf where undetermined).
    names : sequence of str

    Returns
    -------
    list of CurvatureRow
    """
    x = np.asarray(x, dtype=float)
    h = jac.T @ jac
    chi0 = _chi2(problem, x)
    sd = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    ok = np.isfinite(sd) & (sd > 0)
    rows = []

    def probe(d):
        out = []
        for sgn in (-1.0, 1.0):
            t = x + sgn * d
            if np.any(t < problem.lo - 1e-12) or np.any(t > problem.hi + 1e-12):
                out.append(float("nan"))
            else:
                out.append(_chi2(problem, t) - chi0)
        return out

    def verdict(pred, m, p_):
        vals = [v for v in (m, p_) if math.isfinite(v)]
        return all(abs(v / pred - 1.0) <= QUADRATIC_TOLERANCE for v in vals) if pred > 0 else True

    for i in np.flatnonzero(ok):
        d = np.zeros_like(x)
        d[i] = sd[i]
        pred = float(d @ h @ d)
        m, p_ = probe(d)
        rows.append(CurvatureRow(names[i], {names[i]: 1.0}, pred, m, p_, verdict(pred, m, p_)))
    idx = np.flatnonzero(ok)
    if idx.size >= 2:
        c = cov[np.ix_(idx, idx)] / np.outer(sd[idx], sd[idx])
        lam, u = np.linalg.eigh(0.5 * (c + c.T))
        for k in np.argsort(lam)[::-1]:
            if not lam[k] > 0:
                continue
            d = np.zeros_like(x)
            d[idx] = sd[idx] * u[:, k] * math.sqrt(lam[k])
            pred = float(d @ h @ d)
            m, p_ = probe(d)
            load = {names[j]: float(u[n, k]) for n, j in enumerate(idx) if abs(u[n, k]) >= 0.1}
            rows.append(CurvatureRow(f"principal {len(rows) - idx.size + 1}", load, pred, m, p_,
                                     verdict(pred, m, p_)))
    return rows


def profile_interval(problem: FitProblem, x, i: int, stderr: float, local, *, delta: float = 1.0):
    """The profile-likelihood interval of parameter i: where the re-optimised chi-square has risen by ``delta``.

    Parameters
    ----------
    problem : FitProblem
    x : numpy.ndarray
        The solution.
    i : int
        The parameter.
    stderr : float
        Its standard error (sets the scan's steps, :data:`PROFILE_STEPS`).
    local : callable
        ``local(fun, jac, z0, lo, hi) -> OptimizeResult``: least squares of the other parameters.
    delta : float, optional
        Chi-square rise (1: one standard error).

    Returns
    -------
    (float, float, bool, bool, float)
        Lower and upper end, whether each end was found (False: it lies at
        or beyond the bound or the last step), and the lowest chi-square met
        (below the solution's when the scan found a better fit).
    """
    x = np.asarray(x, dtype=float)
    chi0 = _chi2(problem, x)
    keep = [k for k in range(x.size) if k != i]
    lo_o, hi_o = problem.lo[keep], problem.hi[keep]
    lowest = chi0
    ends, found = [], []
    for side in (-1.0, 1.0):
        z = x[keep].copy()
        prev_t, prev_d = 0.0, 0.0
        end, got = None, False
        for f in PROFILE_STEPS:
            t = f * stderr
            v = x[i] + side * t
            at_bound = False
            if v < problem.lo[i] or v > problem.hi[i]:
                v = min(max(v, problem.lo[i]), problem.hi[i])
                t = abs(v - x[i])
                at_bound = True
            if t <= prev_t:
                break

            def full(zz, v=v):
                th = np.empty_like(x)
                th[keep] = zz
                th[i] = v
                return th

            if keep:
                sol = local(lambda zz: problem.residual(full(zz)),
                            lambda zz: problem.jacobian(full(zz))[:, keep], z, lo_o, hi_o)
                z = sol.x
                c = 2.0 * sol.cost
            else:
                c = _chi2(problem, full(z))
            lowest = min(lowest, c)
            d = c - chi0
            if d >= delta:
                a, b = math.sqrt(max(prev_d, 0.0)), math.sqrt(d)
                end = x[i] + side * (prev_t + (math.sqrt(delta) - a) / (b - a) * (t - prev_t))
                got = True
                break
            prev_t, prev_d = t, d
            if at_bound:
                break
        if end is None:
            end = x[i] + side * prev_t
        ends.append(float(end))
        found.append(got)
    return ends[0], ends[1], found[0], found[1], lowest


def curvature_report(problem: FitProblem, x, cov, free, chi2: float, profile: str, local):
    """The curvature check at a solution, profile intervals where it fails (or for all), and the warnings to give.

    Parameters
    ----------
    problem : FitProblem
        A 1D or a 2D (or joint) fit's problem.
    x : numpy.ndarray
        The solution.
    cov : numpy.ndarray (p, p)
        Covariance of the free parameters.
    free : sequence of FreeParameter
    chi2 : float
        Chi-square at ``x``.
    profile : {"auto", "all", "none"}
        Which parameters get profile intervals: those along which the check
        fails (with loading at least 0.3), every one but weights, or none.
    local : callable
        As for :func:`profile_interval`.

    Returns
    -------
    (list of CurvatureRow, dict, list of str)
        The rows, the profile intervals by name ``(low, high, low found,
        high found)``, and the warnings.
    """
    names = [fp.name for fp in free]
    x = np.asarray(x, dtype=float)
    curv = curvature_check(problem, x, problem.jacobian(x), cov, names)
    warns = []
    profiles = {}
    failed = [row for row in curv if not row.quadratic]
    if profile != "none":
        todo = set()
        for row in curv:
            if profile == "all" or not row.quadratic:
                todo |= {n for n, w in row.loadings.items() if abs(w) >= 0.3}
        sd_free = np.sqrt(np.clip(np.diag(cov), 0.0, None))
        for i, fp in enumerate(free):
            if fp.name not in todo or fp.address.key == "weight" or not (np.isfinite(sd_free[i]) and sd_free[i] > 0):
                continue
            lo_, hi_, f_lo, f_hi, lowest = profile_interval(problem, x, i, float(sd_free[i]), local)
            profiles[fp.name] = (lo_, hi_, f_lo, f_hi)
            if lowest < chi2 - 0.05:
                warns.append(f"scanning {fp.name} found a chi-square {chi2 - lowest:.3g} lower than the fit's: the fit "
                             "did not reach the minimum (try --global)")
    if failed:
        worst = []
        for row in failed:
            acts = [v for v in (row.minus, row.plus) if math.isfinite(v)]
            what = row.label if row.label in row.loadings else (row.label + " (" + ", ".join(
                f"{n} {w:+.2f}" for n, w in sorted(row.loadings.items(), key=lambda t: -abs(t[1]))[:3]) + ")")
            worst.append(f"{what}: chi-square rose by {' and '.join(f'{v:.3g}' for v in acts)} at -+1 standard "
                         f"error, {row.predicted:.3g} predicted")
        text = ("the chi-square surface is not quadratic within one standard error, so the standard errors "
                "misstate the uncertainty along " + "; ".join(worst))
        if profiles:
            text += ("; read the profile-likelihood intervals (chi-square + 1, the other parameters re-optimised) "
                     "instead: " + ", ".join(f"{n} in [{a:.6g}, {b:.6g}]" + ("" if fa and fb else " (open)")
                                             for n, (a, b, fa, fb) in profiles.items()))
        warns.append(text)
    return curv, profiles, warns
