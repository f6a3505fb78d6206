"""Fitting measured spectra: free parameters -> least squares -> values, errors and a result model.

A model marks some parameters free (``{ start, min, max }``) or tied
(``{ same_as = "LABEL.key" }``); :func:`fit` adjusts the free ones so that the
simulated spectra match one or more measured spectra of the same sample.

How a fit works
---------------
- **Axis.** Each measurement is simulated on its data's own axis: the data's
  ppm scale is taken as referenced, converted to Hz with the model's
  reference frequency, and the axis is written to the result as ``points``,
  ``center_ppm`` and ``width_ppm`` (the model's own values are ignored).
- **Linear parameters.** The intensity scale of each measurement and the
  coefficients of an optional polynomial baseline (``baseline_order``) enter
  the spectrum linearly.  They are solved by linear least squares at every
  evaluation (variable projection: G. H. Golub, V. Pereyra, SIAM J. Numer.
  Anal. 10 (1973) 413), so the nonlinear optimiser sees only the physical
  parameters.
- **Optimiser.** :func:`scipy.optimize.least_squares` (trust-region
  reflective, bounds from each parameter's ``min``/``max``) on the residual
  ``(data - model) / sigma`` over the fit regions.  The Jacobian is computed
  by forward differences through the ``SiteJob -> SiteLines`` memo, so a
  column for a parameter that only translates, weighs or broadens a site
  re-renders lines without recomputing frequencies.  The frequency producer
  of each site and the number of rotor phases are fixed at the start (so
  the objective does not jump between producers) and checked again at the
  end: if ``method = "auto"`` would choose otherwise at the fitted values, the
  fit is refined with the new choice, so that simulating the result file
  gives the fitted curve.  ``orientations = "auto"`` and ``rotor_phases =
  "auto"`` are pinned at the start to what the start values get (the
  largest over the sites) and written to the result file.
- **Global search** (``global_search=True``): least squares from a seeded
  scrambled Sobol set of starts within the bounds (scipy.stats.qmc; I. M.
  Sobol', USSR Comput. Math. Math. Phys. 7 (1967) 86), plus the model's own
  start; the best is kept and the number of starts that reached it (chi-square
  within 1 of the lowest) is reported.
- **Noise.** With a signal-free noise region, sigma is the standard deviation
  of the data there (a straight line removed).  Without one, sigma is the
  root-mean-square residual of the fit (per measurement; the fit starts from
  a point-to-point estimate of the noise and re-weights the measurements
  once it knows the residuals).
- **Uncertainties.** Covariance ``(J^T J)^-1`` of the whitened residual,
  with J the Jacobian with respect to the free parameters *and* the linear
  ones, so the standard errors include what the scale and baseline absorb.
  With a noise region this is the covariance for the measured noise; without
  one, sigma is the residual, i.e. the covariance is scaled by the residual
  variance.  Standard errors, the correlation matrix and the reduced
  chi-square ``chi^2 / (N - p - q)`` (N points, p free and q linear
  parameters) are reported, with a plain-language warning for each
  parameter the data do not determine.  ``posterior=True`` samples the
  posterior with emcee (D. Foreman-Mackey et al., Publ. Astron. Soc. Pac.
  125 (2013) 306): uniform priors inside the bounds, a Gaussian likelihood
  with the noise level, the scale and baseline integrated out analytically
  (flat priors on them).
- **Site weights** may be free.  Weights are relative: the scale of each
  measurement absorbs their sum, so when every weight is free (or tied) the
  first free one is held at its start value.  Weights are reported
  normalised to sum 1, and each measurement's scale is reported multiplied
  by the sum of the weights, so that the product (the fitted curve) is
  unchanged: the scale is then the fitted spectrum's integrated intensity
  (data units times ppm), lost tails aside.

The fitted model keeps the scale and baseline (measurement keys ``scale``
and ``baseline``), so :func:`~powderspin.simulator.simulate` of it, or of the
result file written by :func:`write_result`, reproduces the fitted curve.

References
----------
.. [1] G. H. Golub, V. Pereyra, SIAM J. Numer. Anal. 10 (1973) 413
   (variable projection).
.. [2] M. A. Branch, T. F. Coleman, Y. Li, SIAM J. Sci. Comput. 21 (1999) 1
   (trust-region reflective least squares, the scipy method).
.. [3] D. Foreman-Mackey, D. W. Hogg, D. Lang, J. Goodman, Publ. Astron. Soc.
   Pac. 125 (2013) 306 (emcee).
"""

from __future__ import annotations

import math
import os
import time
import warnings as _warnings
from dataclasses import dataclass, field, replace
from pathlib import Path
from types import MappingProxyType
from typing import Mapping, Sequence

import numpy as np

from ..engine.lineshape import Axis, make_axis
from ..io.spectra import DataError, compare_with_model, read_spectrum
from ..model.values import FitSettings, FreeParameter, Model, ModelError, ParameterAddress
from ..simulator import simulate

__all__ = [
    "FitError",
    "FitResult",
    "PosteriorSummary",
    "fit",
    "read_spectrum",
    "result_to_dict",
    "result_to_toml",
    "write_result",
    "fit_csv_text",
    "DEFAULT_STEPS",
    "CONVERGED_CHI2",
    "CORRELATION_WARNING",
]

#: default length of a posterior chain (steps per walker)
DEFAULT_STEPS = 2000
#: a start has reached the best fit when its chi-square is within this of the lowest
CONVERGED_CHI2 = 1.0
#: |correlation| above which two parameters are reported as trading off
CORRELATION_WARNING = 0.95
#: keys whose value has a natural zero (a standard error larger than the value
#: itself means the data cannot tell the value from zero); location-like
#: keys (shifts, angles) are judged against their range only
_SCALE_LIKE = {"weight", "cq_mhz", "eta_q", "span_ppm", "aniso_ppm", "eta_cs", "lorentz_hz", "gauss_hz"}
#: relative forward-difference step of the Jacobian (of the parameter, or of
#: 1 % of its range when the parameter is near zero)
_DIFF_STEP = 1e-6
#: fewest points a noise region must hold in every measurement
_MIN_NOISE_POINTS = 8


class FitError(ValueError):
    """A fit cannot be set up or run with the given model, data and options.

    A ``ValueError`` subclass; the message is one line that names the
    measurement, file, region or parameter and what is allowed.

    Parameters
    ----------
    message : str

    Examples
    --------
    >>> str(FitError("no free parameters"))
    'no free parameters'
    """


# ---------------------------------------------------------------------------
# results


@dataclass(frozen=True)
class PosteriorSummary:
    """Posterior samples of the free parameters (emcee) and their summary.

    Attributes
    ----------
    names : tuple of str
        The free parameters, in the order of the columns of ``samples``.
    median, low, high : tuple of float
        Median and 16 % / 84 % quantiles of each parameter (weights
        normalised to sum 1, as reported).
    samples : ndarray (n, p)
        The chain after burn-in, walkers merged (read-only).
    walkers, steps, burn : int
        Walkers, steps per walker and discarded steps per walker.
    autocorrelation_steps : tuple of float
        Integrated autocorrelation time of each parameter (steps).
    converged : bool
        The kept chain is at least 50 autocorrelation times long.
    acceptance : float
        Mean acceptance fraction.

    Examples
    --------
    >>> s = PosteriorSummary(("a",), (1.0,), (0.9,), (1.1,), np.zeros((4, 1)), 2, 4, 2, (1.0,), False, 0.4)
    >>> s.interval("a")
    (0.9, 1.1)
    """

    names: tuple
    median: tuple
    low: tuple
    high: tuple
    samples: np.ndarray
    walkers: int
    steps: int
    burn: int
    autocorrelation_steps: tuple
    converged: bool
    acceptance: float

    def __post_init__(self):
        a = np.array(self.samples, dtype=float)
        a.flags.writeable = False
        object.__setattr__(self, "samples", a)

    def interval(self, name: str) -> tuple[float, float]:
        """The 16 % and 84 % quantiles of one parameter.

        Parameters
        ----------
        name : str

        Returns
        -------
        tuple of 2 float

        Examples
        --------
        >>> s = PosteriorSummary(("a",), (1.0,), (0.9,), (1.1,), np.zeros((4, 1)), 2, 4, 2, (1.0,), True, 0.4)
        >>> s.interval("a")[1]
        1.1
        """
        k = self.names.index(name)
        return (self.low[k], self.high[k])


@dataclass(frozen=True)
class FitResult:
    """What a fit found.

    Attributes
    ----------
    model : Model
        The fitted model: free parameters replaced by their fitted values
        (ties kept), weights normalised to sum 1, each measurement's axis set
        to its data's (``points``, ``center_ppm``, ``width_ppm``) and its
        solved ``scale`` and ``baseline`` set, so that
        :func:`~powderspin.simulator.simulate` gives the fitted curve.
    names : tuple of str
        The free parameters (``"AlO4.cq_mhz"``, ``"measurement 1.gauss_hz"``).
    values, stderr : Mapping of str to float
        Fitted values and standard errors (weights normalised to sum 1).
    correlation : ndarray (p, p)
        Correlation matrix of the free parameters, in the order of ``names``.
    reduced_chi_square, chi_square : float
        ``chi^2 / dof`` and ``chi^2 = sum ((data - fit) / sigma)^2`` over the
        fit regions.
    degrees_of_freedom : int
        Points in the fit regions less free and linear parameters.
    spectra : tuple of Spectrum
        The best fit of each measurement on its data axis (scale and
        baseline applied; site columns scaled).
    data : tuple
        The measured spectra (:class:`powderspin.io.spectra.MeasuredSpectrum`).
    data_paths : tuple of str or None
        Where each measured spectrum was read from.
    masks : tuple of ndarray of bool
        Which points of each measurement the fit used.
    noise : tuple of float
        The noise level sigma of each measurement (data units).
    noise_source : {"noise region", "residual"}
        Where sigma came from (see the module notes).
    scales, scale_stderr : tuple of float
        Each measurement's scale as written in ``model`` (data units per
        density per ppm, multiplied by the sum of the weights) and its error.
    baselines, baseline_stderr : tuple of tuple of float
        Each measurement's baseline coefficients (``u`` from -1 to 1 across
        the axis) and their errors.
    site_stderr, measurement_stderr : tuple of Mapping
        Standard errors by model-file key, per site and per measurement
        (``euler_deg`` as a list of 3, 0 for components that were fixed).
    warnings : tuple of str
        Plain-language warnings (parameters the data do not determine, ...).
    notes : tuple of str
        What else the user should know (a held weight, a refined method, ...).
    evaluations : int
        Simulations of the model (every measurement) the fit made.
    time_s : float
        Wall time of the fit (s).
    starts, starts_at_best : int
        Least-squares starts and how many reached the best chi-square.
    posterior : PosteriorSummary or None
        The posterior samples, when asked for.
    derived : Mapping of str to (float, float)
        Quantities derived from the fitted values, with standard errors by
        the delta method: for each site with an EFG distribution its mean
        C_Q and mean P_Q = C_Q (1 + eta^2/3)^(1/2) (``"LABEL.mean_cq_mhz"``,
        ``"LABEL.mean_pq_mhz"``; :func:`powderspin.disorder.sites.distribution_summary`).

    Examples
    --------
    See :func:`fit`.
    """

    model: Model
    names: tuple
    values: Mapping
    stderr: Mapping
    correlation: np.ndarray
    reduced_chi_square: float
    chi_square: float
    degrees_of_freedom: int
    spectra: tuple
    data: tuple
    data_paths: tuple
    masks: tuple
    noise: tuple
    noise_source: str
    scales: tuple
    scale_stderr: tuple
    baselines: tuple
    baseline_stderr: tuple
    site_stderr: tuple
    measurement_stderr: tuple
    warnings: tuple
    notes: tuple
    evaluations: int
    time_s: float
    starts: int = 1
    starts_at_best: int = 1
    posterior: PosteriorSummary | None = None
    derived: Mapping = field(default_factory=dict)

    def __post_init__(self):
        for k in ("values", "stderr", "derived"):
            object.__setattr__(self, k, MappingProxyType(dict(getattr(self, k))))
        c = np.array(self.correlation, dtype=float)
        c.flags.writeable = False
        object.__setattr__(self, "correlation", c)
        object.__setattr__(self, "site_stderr", tuple(MappingProxyType(dict(d)) for d in self.site_stderr))
        object.__setattr__(self, "measurement_stderr",
                           tuple(MappingProxyType(dict(d)) for d in self.measurement_stderr))

    def residual(self, measurement: int = 0) -> np.ndarray:
        """Data minus fit of one measurement, on its whole axis (data units).

        Parameters
        ----------
        measurement : int, optional

        Returns
        -------
        numpy.ndarray

        Examples
        --------
        See :func:`fit`.
        """
        return np.asarray(self.data[measurement].intensity) - self.spectra[measurement].intensity

    def summary(self) -> str:
        """The fitted values, errors and warnings as a few lines of text.

        Returns
        -------
        str

        Examples
        --------
        See :func:`fit`.
        """
        lines = []
        w = max((len(n) for n in self.names), default=4)
        for n in self.names:
            v, e = self.values[n], self.stderr[n]
            line = f"  {n:<{w}}  {_fmt_value(v, e)}"
            if self.posterior is not None:
                lo, hi = self.posterior.interval(n)
                med = self.posterior.median[self.posterior.names.index(n)]
                line += f"   posterior median {med:.6g}, 16-84 %: [{lo:.6g}, {hi:.6g}]"
            lines.append(line)
        head = (f"fit: reduced chi-square {self.reduced_chi_square:.4g} ({self.degrees_of_freedom} degrees of "
                f"freedom; noise from the {self.noise_source}), {self.evaluations} evaluations, {self.time_s:.2f} s")
        if self.starts > 1:
            head += f", {self.starts_at_best} of {self.starts} starts reached the best fit"
        out = [head] + lines
        for n, (v, e) in self.derived.items():
            out.append(f"  {n:<{w}}  {_fmt_value(v, e)}   (derived)")
        if self.posterior is not None:
            p = self.posterior
            out.append(f"posterior: {p.walkers} walkers x {p.steps} steps, first {p.burn} discarded; longest "
                       f"autocorrelation time {max(p.autocorrelation_steps):.3g} steps; acceptance {p.acceptance:.2f}")
        out += [f"note: {t}" for t in self.notes]
        out += [f"warning: {t}" for t in self.warnings]
        return "\n".join(out) + "\n"


def _fmt_value(v: float, e: float) -> str:
    if not math.isfinite(e) or e <= 0:
        return f"{v:.6g} +- {e:.3g}"
    digits = max(0, 1 - int(math.floor(math.log10(e))))
    if digits > 10 or abs(v) >= 1e7:
        return f"{v:.6g} +- {e:.2g}"
    return f"{v:.{digits}f} +- {e:.{digits}f}"


# ---------------------------------------------------------------------------
# data


def _is_spectrum(x) -> bool:
    return all(hasattr(x, a) for a in ("hz", "ppm", "intensity", "nu_ref_hz"))


def _data_paths(model: Model, data) -> list:
    n = len(model.measurements)
    if data is not None and not isinstance(data, (list, tuple)):
        data = [data]
    if data:
        if len(data) != n:
            raise FitError(f"{len(data)} data file(s) given for {n} measurement(s); give one per measurement, "
                           "in the order of the [[measurement]] tables")
        return list(data)
    out = []
    base = Path(model.source).parent if model.source else Path(".")
    for j, m in enumerate(model.measurements):
        where = "measurement" if n == 1 else f"measurement {j + 1}"
        if m.data is None:
            raise FitError(f"{where} has no data: give data = \"FILE\" in the model file or the data file(s) "
                           "after the model on the command line")
        p = Path(m.data)
        out.append(p if p.is_absolute() else base / p)
    return out


def _read_one(item, model: Model, j: int, axis_unit: str | None):
    if _is_spectrum(item):
        return item, None
    path = str(item)
    meas = model.measurements[j]
    if not Path(path).exists():
        raise FitError(f"data file {path!r} (measurement {j + 1}) does not exist")
    nuc = model.nucleus.name
    try:
        return read_spectrum(path, axis=axis_unit, nucleus=nuc), path
    except DataError as first:
        try:  # the file may not state its reference frequency: take it from the model's field
            return read_spectrum(path, axis=axis_unit, nucleus=nuc, field_tesla=meas.field_tesla), path
        except DataError:
            raise first from None


def _compare(spec, model: Model, j: int) -> list[str]:
    return [f"measurement {j + 1}: {t}" for t in compare_with_model(spec, model.nucleus.name,
                                                                       model.measurements[j].field_tesla)]


def _data_axis(spec, nu_ref: float, where: str) -> tuple[Axis, float, float]:
    """The uniform axis (model Hz) of a measured spectrum; its ppm scale is taken as referenced."""
    ppm = np.asarray(spec.ppm, dtype=float)
    n = ppm.size
    if n < 16:
        raise FitError(f"{where}: the data have {n} points; a fit needs at least 16")
    hz = ppm * nu_ref * 1e-6
    step = (hz[-1] - hz[0]) / (n - 1)
    if not step > 0 or np.max(np.abs(np.diff(hz) - step)) > 2e-3 * step:
        raise FitError(f"{where}: the data axis is not uniform (steps differ by more than 0.2 %); "
                       "resample the spectrum onto a uniform axis first")
    center_ppm = float(0.5 * (ppm[0] + ppm[-1]))
    width_ppm = float(step * n / nu_ref * 1e6)
    return make_axis(n, nu_ref, center_ppm, width_ppm), center_ppm, width_ppm


def _region_mask(ppm: np.ndarray, regions) -> np.ndarray:
    if not regions:
        return np.ones(ppm.size, dtype=bool)
    mask = np.zeros(ppm.size, dtype=bool)
    for hi, lo in regions:
        mask |= (ppm <= hi) & (ppm >= lo)
    return mask


def _noise_from_region(y: np.ndarray, ppm: np.ndarray, region) -> float:
    sel = (ppm <= region[0]) & (ppm >= region[1])
    x, v = ppm[sel], y[sel]
    a = np.vstack([np.ones_like(x), x - x.mean()]).T
    coef, *_ = np.linalg.lstsq(a, v, rcond=None)
    r = v - a @ coef
    return float(np.sqrt(np.sum(r * r) / max(1, r.size - 2)))


def _point_noise(y: np.ndarray) -> float:
    """Noise estimate from point-to-point differences (median absolute deviation, robust to lines)."""
    d = np.diff(y)
    mad = np.median(np.abs(d - np.median(d)))
    return float(1.4826 * mad / math.sqrt(2.0))


# ---------------------------------------------------------------------------
# the problem


class _Memo(dict):
    """``SiteJob -> SiteLines`` memo that forgets its oldest entries beyond a size."""

    def __init__(self, size: int):
        super().__init__()
        self.size = max(4, int(size))

    def __setitem__(self, key, value):
        super().__setitem__(key, value)
        while len(self) > self.size:
            del self[next(iter(self))]


@dataclass
class _Eval:
    theta: np.ndarray
    totals: list          # unscaled model spectra (points,) per measurement
    sites: list           # per-site (n_sites, points) per measurement
    coefs: list           # linear coefficients per measurement [scale, b0, b1, ...]
    residual: np.ndarray  # whitened residual over the masks
    logdet: float         # log det(A_w^T A_w), for the marginal likelihood


class _Problem:
    """The objective of a fit: free parameters -> whitened residual with the linear parameters solved."""

    def __init__(self, model: Model, params: Sequence[FreeParameter], axes, ys, masks, sigmas, methods,
                 order: int | None, progress=None, kernel_store=None):
        self.model = model
        self.kernel_store = kernel_store
        self.params = list(params)
        self.axes = axes
        self.ys = ys
        self.masks = masks
        self.sigmas = list(sigmas)
        self.methods = methods
        self.order = order
        self.lo = np.array([p.min for p in self.params], dtype=float)
        self.hi = np.array([p.max for p in self.params], dtype=float)
        n_jobs = len(model.sites) * len(model.measurements)
        self.memo = _Memo(4 * (len(self.params) + 3) * n_jobs)
        self.render_memo = _Memo(4 * (len(self.params) + 3) * n_jobs)
        self.basis = []
        for ax, mk in zip(axes, masks):
            u = (ax.hz - ax.center_hz) / (0.5 * ax.width_hz)
            cols = [] if order is None else [u[mk] ** k for k in range(order + 1)]
            self.basis.append(cols)
        self.evaluations = 0
        self.progress = progress
        self.best_cost = math.inf
        self._cache: list[_Eval] = []

    def _kernel_progress(self, label, done, total):
        """Forward the building of a distributed site's kernel grid (the first evaluation) as stage "kernels"."""
        if self.progress is not None and str(label).endswith(": kernel grid"):
            self.progress("kernels", done, total)

    # -- model at theta
    def model_at(self, theta) -> Model:
        return self.model.with_parameters({p.address: float(v) for p, v in zip(self.params, theta)})

    def _simulate(self, theta):
        try:
            m = self.model_at(theta)
            specs = [simulate(m, measurement=j, axis=self.axes[j], lines_memo=self.memo, methods=self.methods[j],
                              render_memo=self.render_memo, kernel_store=self.kernel_store,
                              progress=self._kernel_progress) for j in range(len(self.axes))]
        except ModelError as e:
            vals = ", ".join(f"{p.name} = {v:.6g}" for p, v in zip(self.params, theta))
            raise FitError(f"the model cannot be simulated at {vals}: {e}; narrow the parameters' min/max") from None
        self.evaluations += 1
        return [np.asarray(s.site_intensities) for s in specs]

    def evaluate(self, theta) -> _Eval:
        theta = np.asarray(theta, dtype=float)
        for e in self._cache:
            if np.array_equal(e.theta, theta):
                return e
        sites = self._simulate(theta)
        totals = [s.sum(axis=0) for s in sites]
        coefs, res, logdet = [], [], 0.0
        for j, tot in enumerate(totals):
            mk = self.masks[j]
            a = np.column_stack([tot[mk]] + self.basis[j]) / self.sigmas[j]
            b = self.ys[j][mk] / self.sigmas[j]
            c, *_ = np.linalg.lstsq(a, b, rcond=None)
            coefs.append(c)
            res.append(b - a @ c)
            sign, ld = np.linalg.slogdet(a.T @ a)
            logdet += ld if sign > 0 else 700.0
        r = np.concatenate(res)
        e = _Eval(theta.copy(), totals, sites, coefs, r, logdet)
        self._cache = ([e] + self._cache)[: 2]
        cost = float(r @ r)
        self.best_cost = min(self.best_cost, cost)
        if self.progress is not None:
            self.progress("fit", self.evaluations, self.best_cost)
        return e

    def residual(self, theta) -> np.ndarray:
        return self.evaluate(theta).residual

    def steps(self, theta) -> np.ndarray:
        span = np.where(np.isfinite(self.hi - self.lo), self.hi - self.lo, 1.0)
        h = _DIFF_STEP * np.maximum(np.abs(theta), 0.01 * span)
        return np.where(theta + h > self.hi, -h, h)

    def jacobian(self, theta, full: bool = False):
        """Forward-difference Jacobian of the projected residual.

        With ``full``, also of the model at fixed linear parameters.
        """
        theta = np.asarray(theta, dtype=float)
        e0 = self.evaluate(theta)
        h = self.steps(theta)
        jac = np.empty((e0.residual.size, theta.size))
        dmodel = np.empty_like(jac)
        for k in range(theta.size):
            t = theta.copy()
            t[k] += h[k]
            ek = self.evaluate(t)
            jac[:, k] = (ek.residual - e0.residual) / h[k]
            if full:
                parts = []
                for j, (tk, t0) in enumerate(zip(ek.totals, e0.totals)):
                    mk = self.masks[j]
                    parts.append(e0.coefs[j][0] * (tk[mk] - t0[mk]) / (h[k] * self.sigmas[j]))
                dmodel[:, k] = np.concatenate(parts)
        if not full:
            return jac
        return jac, dmodel

    def full_jacobian(self, theta):
        """Jacobian of the whitened residual with respect to (free parameters, linear parameters)."""
        e0 = self.evaluate(theta)
        _, dmodel = self.jacobian(theta, full=True)
        blocks = []
        n_lin = [1 + len(b) for b in self.basis]
        rows = [int(m.sum()) for m in self.masks]
        lin = np.zeros((sum(rows), sum(n_lin)))
        r0 = c0 = 0
        for j, tot in enumerate(e0.totals):
            mk = self.masks[j]
            a = np.column_stack([tot[mk]] + self.basis[j]) / self.sigmas[j]
            lin[r0:r0 + rows[j], c0:c0 + n_lin[j]] = a
            r0 += rows[j]
            c0 += n_lin[j]
        blocks.append(-dmodel)
        blocks.append(-lin)
        return np.hstack(blocks), n_lin

    def chi2_by_measurement(self, e: _Eval) -> list[float]:
        out, r0 = [], 0
        for mk in self.masks:
            n = int(mk.sum())
            out.append(float(e.residual[r0:r0 + n] @ e.residual[r0:r0 + n]))
            r0 += n
        return out


# ---------------------------------------------------------------------------
# the fit


def _as_model(model) -> Model:
    if isinstance(model, Model):
        return model
    if isinstance(model, (str, os.PathLike)):
        from ..model.modelfile import load_model

        return load_model(model)
    raise FitError(f"fit: expected a Model or the path of a model file, got {type(model).__name__}")


def _check_region(r, what: str):
    try:
        a, b = (float(x) for x in r)
    except (TypeError, ValueError):
        raise FitError(f"{what} = {r!r} must be two shifts (ppm), e.g. (90, 40)") from None
    if not (math.isfinite(a) and math.isfinite(b)) or a == b:
        raise FitError(f"{what} = {r!r} must be two different finite shifts (ppm)")
    return (max(a, b), min(a, b))


def _free_parameters(model: Model) -> tuple[list[FreeParameter], list[str]]:
    notes = []
    free = list(model.free)
    if not free:
        raise FitError("the model has no free parameters: mark at least one as { start = ..., min = ..., max = ... }, "
                       "e.g. cq_mhz = { start = 3.0, min = 1.0, max = 8.0 }")
    fixed_weight = [i for i in range(len(model.sites))
                    if not any(p.address == ParameterAddress("site", i, "weight") for p in free)
                    and not any(t.address == ParameterAddress("site", i, "weight") for t in model.tied)]
    free_weights = [p for p in free if p.address.key == "weight" and p.address.table == "site"]
    if free_weights and not fixed_weight:
        held = free_weights[0]
        free.remove(held)
        notes.append(f"{held.name} is held at its start value {held.start:g}: site weights are relative and the "
                     "scale absorbs their sum, so one of them must stay fixed (weights are reported normalised)")
        if not free:
            raise FitError("the model's only free parameter is a site weight, which the scale absorbs; free "
                           "another parameter or fix the weight")
    for p in free:
        if not (p.min < p.max):
            raise FitError(f"{p.name}: min = {p.min:g} must be below max = {p.max:g}")
    return free, notes


def _overlap_check(model: Model, axes, where) -> None:
    from ..engine.site_lines import estimate_span_hz

    for j, ax in enumerate(axes):
        meas = model.measurements[j]
        nu_ref = ax.nu_ref_hz
        off = meas.shift_offset_ppm * nu_ref * 1e-6
        lo = hi = None
        for s in model.sites:
            a, b = estimate_span_hz(s, meas, model.nucleus)
            wide = s.lorentz_hz + meas.lorentz_hz + 2 * math.hypot(s.gauss_hz, meas.gauss_hz)
            a, b = a + off - 3 * wide, b + off + 3 * wide
            if meas.spinning_hz > 0 and math.isfinite(meas.spinning_hz):
                a, b = a - 4 * meas.spinning_hz, b + 4 * meas.spinning_hz
            lo = a if lo is None else min(lo, a)
            hi = b if hi is None else max(hi, b)
        d_lo, d_hi = ax.hz[0], ax.hz[-1]
        if hi < d_lo or lo > d_hi:
            raise FitError(
                f"{where(j)}: the data cover {d_hi / nu_ref * 1e6:.6g} to {d_lo / nu_ref * 1e6:.6g} ppm but the "
                f"model's lines (at the start values) lie between {hi / nu_ref * 1e6:.6g} and "
                f"{lo / nu_ref * 1e6:.6g} ppm: check the nucleus, field_tesla, shift_ppm and the data file")


def _fixed_choices(model: Model, axes, methods, kernel_store=None) -> tuple[Model, dict]:
    """Pin what a simulation would choose by itself at the start values, so the objective cannot jump.

    ``orientations = "auto"`` becomes the accuracy level (subdivisions) of the
    triangulated sets the sites got (the largest), and ``rotor_phases =
    "auto"`` under finite-rate spinning the largest number of phases any site
    needs.  Both are written to the result, so simulating it makes the same
    choice.  Returns the model and the measurements whose phases were pinned.
    """
    memo: dict = {}
    phases = {}
    for j, meas in enumerate(model.measurements):
        finite = meas.spinning_hz > 0 and math.isfinite(meas.spinning_hz)
        pin_phases = meas.rotor_phases == "auto" and finite
        pin_sets = meas.orientations == "auto"
        if not (pin_phases or pin_sets):
            continue
        spec = simulate(model, measurement=j, axis=axes[j], lines_memo=memo, methods=methods[j],
                        kernel_store=kernel_store)
        changes = {}
        found = [int(v) for v in spec.metadata["rotor_phases"].values()]
        if pin_phases and found:  # (sites with an EFG distribution have no entry: their kernels choose their own)
            changes["rotor_phases"] = phases[j] = max(found)
        if pin_sets:
            names = [str(v).split(" ")[0] for v in spec.metadata["orientations"].values()]
            levels = [int(n.rsplit("-", 1)[1]) for n in names if n.startswith("tri-") and n.rsplit("-", 1)[1].isdigit()]
            if levels and len(levels) == len(names):
                changes["orientations"] = max(levels)
        if changes:
            model = model.with_measurement(j, **changes)
    return model, phases


def _methods_at(model: Model, axes) -> list[list[str]]:
    from ..engine.site_lines import choose_method

    return [[choose_method(s, model.measurements[j], model.nucleus, 0.5 * ax.dx_hz)[0] for s in model.sites]
            for j, ax in enumerate(axes)]


def _least_squares(problem: _Problem, x0, max_nfev: int | None):
    from scipy.optimize import least_squares

    x0 = np.clip(np.asarray(x0, dtype=float), problem.lo, problem.hi)
    return least_squares(problem.residual, x0, jac=problem.jacobian, bounds=(problem.lo, problem.hi),
                         method="trf", x_scale="jac", max_nfev=max_nfev)


def _sobol_starts(lo, hi, n: int, seed: int) -> np.ndarray:
    from scipy.stats import qmc

    m = int(math.ceil(math.log2(max(2, n))))
    pts = qmc.Sobol(d=lo.size, scramble=True, seed=seed).random_base2(m)[:n]
    return qmc.scale(pts, lo, hi)


def fit(model, data=None, *, regions=None, noise_region=None, baseline_order=None, axis: str | None = None,
        global_search: bool = False, starts: int | None = None, seed: int = 0, posterior: bool = False,
        walkers: int | None = None, steps: int = DEFAULT_STEPS, burn: int | None = None, progress=None,
        max_evaluations: int | None = None, threads: int | None = 1, kernel_store=None) -> FitResult:
    """Fit a model with free parameters to one or more measured spectra.

    Parameters
    ----------
    model : Model or str or pathlib.Path
        A model with free (``{start, min, max}``) and possibly tied
        parameters, or the path of a model file.  Site parameters are shared
        by all measurements; broadening, ``shift_offset_ppm`` and the scale
        belong to each measurement.
    data : sequence of (path or powderspin.io.spectra.MeasuredSpectrum), optional
        One measured spectrum per measurement, in model order; by default
        each measurement's ``data`` file (relative to the model file).
    regions : sequence of (ppm, ppm), optional
        Fit regions; by default the model's ``[fit] regions``, else the
        whole data axis.
    noise_region : (ppm, ppm), optional
        A signal-free region for the noise level; by default the model's
        ``[fit] noise_region``, else the noise comes from the residual.
    baseline_order : int, optional
        Order (0-5) of a polynomial baseline solved with the scale; by
        default the model's ``[fit] baseline_order``, else none.
    axis : {"ppm", "hz", "khz"}, optional
        Unit of a data file's axis column when the file does not name it.
    global_search : bool, optional
        Least squares from a seeded Sobol set of starts within the bounds
        (and the model's own start); keep the best.
    starts : int, optional
        Number of starts of a global search (default ``max(8, 4 p)``,
        p free parameters).
    seed : int, optional
        Seed of the Sobol starts and of the posterior sampler.
    posterior : bool, optional
        Also sample the posterior with emcee from the least-squares solution.
    walkers, steps, burn : int, optional
        Posterior sampling: walkers (default ``max(16, 4 p)``, even), steps
        per walker (default :data:`DEFAULT_STEPS`) and discarded steps
        (default a quarter of ``steps``).
    progress : callable, optional
        ``progress(stage, done, value)``: ``("fit", evaluations, lowest
        chi-square)`` during least squares, ``("posterior", step, steps)``
        while sampling, ``("kernels", line shapes, total)`` while the kernel
        grid of a site with an EFG distribution is built.
    max_evaluations : int, optional
        Limit on the objective evaluations of each least-squares run.
    threads : int or None, optional
        Threads of the compiled kernels during the fit (default 1; None
        keeps numba's setting).  A fit makes thousands of small kernel
        calls, for which starting parallel work costs more than it saves,
        badly so on a busy machine (``benchmarks/bench_fit.py`` measures
        both).
    kernel_store : powderspin.disorder.sites.KernelStore, optional
        Where the kernels of sites with an EFG distribution are kept (default
        the process-wide store of the lineshape library).  Each evaluation
        of such a site is a weighted sum of kernels built once for the whole
        range of its free parameters (:mod:`powderspin.disorder.sites`).

    Returns
    -------
    FitResult

    Raises
    ------
    FitError
        No free parameters, no data or a data file per measurement missing,
        data that do not overlap the model or a region, too few points.
    powderspin.io.spectra.DataError
        An unreadable data file.

    See Also
    --------
    write_result : write the result as a model file (plus CSV).
    powderspin.simulator.simulate : the forward model.

    References
    ----------
    G. H. Golub, V. Pereyra, SIAM J. Numer. Anal. 10 (1973) 413 (variable
    projection); M. A. Branch, T. F. Coleman, Y. Li, SIAM J. Sci. Comput. 21
    (1999) 1 (trust-region reflective); D. Foreman-Mackey et al., Publ.
    Astron. Soc. Pac. 125 (2013) 306 (emcee).

    Examples
    --------
    A synthetic 31P line (made here; noise with a fixed seed), its shift and
    width fitted:

    >>> import numpy as np
    >>> import powderspin as ps
    >>> from powderspin.io.spectra import MeasuredSpectrum
    >>> truth = ps.make_model("31P", {"field_tesla": 9.4, "points": 256, "center_ppm": 0.0,
    ...                                "width_ppm": 40.0}, [{"label": "P", "shift_ppm": 3.0, "lorentz_hz": 300.0}])
    >>> s = ps.simulate(truth)
    >>> y = 5.0 * s.intensity + np.random.default_rng(1).normal(0.0, 0.01, s.hz.size)
    >>> data = MeasuredSpectrum(s.hz, s.ppm, y, None, s.nu_ref_hz, "synthetic")
    >>> start = ps.make_model("31P", {"field_tesla": 9.4},
    ...                       [{"label": "P", "shift_ppm": {"start": 0.0, "min": -10.0, "max": 10.0},
    ...                         "lorentz_hz": {"start": 200.0, "min": 10.0, "max": 2000.0}}])
    >>> r = ps.fit(start, [data])
    >>> abs(r.values["P.shift_ppm"] - 3.0) < 3 * r.stderr["P.shift_ppm"]
    True
    >>> round(r.scales[0], 1)
    5.0
    """
    if threads is None:
        return _fit(model, data, regions, noise_region, baseline_order, axis, global_search, starts, seed,
                    posterior, walkers, steps, burn, progress, max_evaluations, kernel_store)
    import numba

    before = numba.get_num_threads()
    numba.set_num_threads(max(1, min(int(threads), numba.config.NUMBA_NUM_THREADS)))
    try:
        return _fit(model, data, regions, noise_region, baseline_order, axis, global_search, starts, seed,
                    posterior, walkers, steps, burn, progress, max_evaluations, kernel_store)
    finally:
        numba.set_num_threads(before)


def _fit(model, data, regions, noise_region, baseline_order, axis, global_search, starts, seed, posterior,
         walkers, steps, burn, progress, max_evaluations, kernel_store=None) -> FitResult:
    t_start = time.perf_counter()
    model = _as_model(model)
    n_meas = len(model.measurements)

    def where(j):
        return "measurement" if n_meas == 1 else f"measurement {j + 1}"

    free, notes = _free_parameters(model)
    warns: list[str] = []
    # -- settings: arguments override the model's [fit] table
    fs = model.fit
    regs = fs.regions if regions is None else tuple(_check_region(r, f"region {i + 1}") for i, r in enumerate(regions))
    noise_reg = fs.noise_region if noise_region is None else _check_region(noise_region, "noise region")
    order = fs.baseline_order if baseline_order is None else baseline_order
    settings = FitSettings(tuple(regs), noise_reg, order)  # validates the order
    order = settings.baseline_order
    # -- data
    items = _data_paths(model, data)
    specs, paths = [], []
    for j, item in enumerate(items):
        sp, path = _read_one(item, model, j, axis)
        specs.append(sp)
        paths.append(path)
        warns.extend(_compare(sp, model, j))
    axes, centers, widths = [], [], []
    for j, sp in enumerate(specs):
        nu_ref = model.nucleus.larmor_hz(model.measurements[j].field_tesla)
        ax, c, w = _data_axis(sp, nu_ref, where(j))
        axes.append(ax)
        centers.append(c)
        widths.append(w)
    ys = [np.asarray(sp.intensity, dtype=float) for sp in specs]
    for j, y in enumerate(ys):
        if not np.all(np.isfinite(y)):
            raise FitError(f"{where(j)}: the data hold NaN or infinite values")
    # -- regions and noise
    for i, (hi, lo) in enumerate(regs):
        if not any((ax.ppm.min() <= hi) and (ax.ppm.max() >= lo) for ax in axes):
            covers = "; ".join(f"{where(j)}: {ax.ppm.max():.6g} to {ax.ppm.min():.6g} ppm" for j, ax in enumerate(axes))
            raise FitError(f"fit region {i + 1} [{hi:g}, {lo:g}] ppm lies outside the data ({covers})")
    masks = [_region_mask(ax.ppm, regs) for ax in axes]
    for j, mk in enumerate(masks):
        if not mk.any():
            raise FitError(f"{where(j)}: no data point lies in the fit regions "
                           f"{[list(r) for r in regs]} (the data cover {axes[j].ppm.max():.6g} to "
                           f"{axes[j].ppm.min():.6g} ppm)")
    if noise_reg is not None:
        sigmas = []
        for j, ax in enumerate(axes):
            k = int(((ax.ppm <= noise_reg[0]) & (ax.ppm >= noise_reg[1])).sum())
            if k < _MIN_NOISE_POINTS:
                raise FitError(f"{where(j)}: the noise region [{noise_reg[0]:g}, {noise_reg[1]:g}] ppm holds {k} data "
                               f"point(s); it needs at least {_MIN_NOISE_POINTS} (the data cover "
                               f"{ax.ppm.max():.6g} to {ax.ppm.min():.6g} ppm)")
            sigmas.append(_noise_from_region(ys[j], ax.ppm, noise_reg))
        noise_source = "noise region"
    else:
        sigmas = [_point_noise(y) for y in ys]
        noise_source = "residual"
    for j, s in enumerate(sigmas):
        if not s > 0:
            sigmas[j] = max(1e-12 * float(np.max(np.abs(ys[j]))), 1e-300)
    n_lin = n_meas * (1 + (0 if order is None else order + 1))
    n_points = int(sum(m.sum() for m in masks))
    dof = n_points - len(free) - n_lin
    if dof < 1:
        raise FitError(f"the fit regions hold {n_points} data point(s) for {len(free)} free and {n_lin} linear "
                       "parameters; widen the regions or free fewer parameters")
    # -- the model for fitting: data axes, scale 1, no baseline
    base = model
    for j in range(n_meas):
        base = base.with_measurement(j, scale=1.0, baseline=(), center_ppm=None, width_ppm=None)
    _overlap_check(base, axes, where)
    methods = _methods_at(base, axes)
    base, fixed_phases = _fixed_choices(base, axes, methods, kernel_store)
    problem = _Problem(base, free, axes, ys, masks, sigmas, methods, order, progress, kernel_store)
    x0 = np.array([p.start for p in free], dtype=float)
    # -- least squares (local or multi-start)
    n_starts, at_best = 1, 1
    if global_search:
        n_starts = int(starts) if starts is not None else max(8, 4 * len(free))
        if n_starts < 1:
            raise FitError(f"starts = {n_starts} must be at least 1")
        unbounded = [p.name for p in free if (p.max - p.min) >= 0.5 * _schema_span(p)]
        if unbounded:
            warns.append("global search over the whole allowed range of " + ", ".join(unbounded)
                         + ": give min and max to search where the value can physically be")
        pts = [x0] + list(_sobol_starts(problem.lo, problem.hi, n_starts - 1, seed)) if n_starts > 1 else [x0]
        runs = [_least_squares(problem, p, max_evaluations) for p in pts]
        costs = np.array([2.0 * r.cost for r in runs])
        best = int(np.argmin(costs))
        at_best = int(np.sum(costs <= costs[best] + CONVERGED_CHI2))
        sol = runs[best]
    else:
        sol = _least_squares(problem, x0, max_evaluations)
    x = sol.x
    # -- without a noise region: sigma from the residual, measurements re-weighted
    if noise_source == "residual":
        for _ in range(3):
            e = problem.evaluate(x)
            new = []
            for j, c2 in enumerate(problem.chi2_by_measurement(e)):
                nj = int(masks[j].sum())
                share = nj - (1 + len(problem.basis[j])) - len(free) * nj / n_points
                new.append(problem.sigmas[j] * math.sqrt(c2 / max(share, 1.0)))
            ratio = [a / b for a, b in zip(new, problem.sigmas)]
            problem.sigmas = new
            problem._cache = []
            if n_meas == 1 or max(ratio) / min(ratio) < 1.1:
                break
            sol = _least_squares(problem, x, max_evaluations)
            x = sol.x
    # -- the producers and rotor phases must be what simulate would choose at the fitted values
    for _ in range(2):
        fitted = problem.model_at(x)
        again = _methods_at(fitted, axes)
        refine = again != problem.methods
        if refine:
            notes.append("the frequency producer chosen for the fitted values differs from the start's; the fit "
                         "was refined with it")
            problem.methods = again
        for j in fixed_phases:
            spec = simulate(fitted, measurement=j, axis=axes[j], lines_memo=problem.memo, methods=problem.methods[j],
                            kernel_store=kernel_store)
            if any("aliasing" in t for t in spec.metadata["notes"]):
                p = 2 * problem.model.measurements[j].rotor_phases
                problem.model = problem.model.with_measurement(j, rotor_phases=p)
                fixed_phases[j] = p
                refine = True
                notes.append(f"{where(j)}: rotor_phases raised to {p} for the fitted values; the fit was refined")
        if not refine:
            break
        problem._cache = []
        sol = _least_squares(problem, x, max_evaluations)
        x = sol.x
    # -- statistics
    e = problem.evaluate(x)
    chi2 = float(e.residual @ e.residual)
    jfull, n_lin_j = problem.full_jacobian(x)
    cov = _covariance(jfull)
    p = len(free)
    reported, derived = _reported(problem, x, e, cov)
    names = tuple(fp.name for fp in free)
    q_cov = derived["cov"]
    q_err = np.sqrt(np.clip(np.diag(q_cov), 0.0, None))
    q_err = np.where(np.isfinite(np.diag(q_cov)), q_err, np.inf)
    values = {n: float(v) for n, v in zip(names, derived["values"][:p])}
    stderr = {n: float(s) for n, s in zip(names, q_err[:p])}
    corr = _correlation(q_cov[:p, :p])
    from ..disorder.sites import distribution_summary

    dist_derived = distribution_summary(problem.model_at, free, x, cov[:p, :p])
    red = chi2 / dof
    warns += _parameter_warnings(free, x, values, stderr, corr, names, sol)
    if noise_source == "noise region" and red > 2.0:
        warns.append(f"the reduced chi-square is {red:.3g}: the model does not describe the data within the noise "
                     "(missing sites, wrong broadening or baseline); the standard errors are then too small")
    if noise_source == "residual":
        for j in range(n_meas):
            pn = _point_noise(ys[j])
            if pn > 0 and problem.sigmas[j] > 1.5 * pn:
                warns.append(f"{where(j)}: the residual is {problem.sigmas[j] / pn:.2g} times the point-to-point "
                             "noise: the model misses features of the data (look at the residual)")
        notes.append("no noise region: the noise level is the residual's, so the reduced chi-square is 1 by "
                     "construction; give a signal-free noise region to judge the fit")
    # -- the fitted model: values, normalised weights, scale and baseline, data axes
    fitted = _fitted_model(problem, x, e, derived, axes, centers, widths, paths, settings, model)
    spectra = tuple(simulate(fitted, measurement=j, kernel_store=kernel_store) for j in range(n_meas))
    site_err, meas_err = _stderr_tables(fitted, free, q_err, derived)
    post = None
    if posterior:
        post = _sample_posterior(problem, x, free, cov[:p, :p], derived, walkers, steps, burn, seed, progress)
        if not post.converged:
            warns.append(f"the posterior chain is short: {post.steps - post.burn} kept steps per walker, fewer than "
                         f"50 autocorrelation times (longest {max(post.autocorrelation_steps):.3g} steps); run more "
                         "steps before trusting the intervals")
    return FitResult(
        model=fitted, names=names, values=values, stderr=stderr, correlation=corr, reduced_chi_square=red,
        chi_square=chi2, degrees_of_freedom=dof, spectra=spectra, data=tuple(specs), data_paths=tuple(paths),
        masks=tuple(masks), noise=tuple(problem.sigmas), noise_source=noise_source,
        scales=tuple(fitted.measurements[j].scale for j in range(n_meas)),
        scale_stderr=tuple(derived["scale_err"]), baselines=tuple(m.baseline for m in fitted.measurements),
        baseline_stderr=tuple(derived["baseline_err"]), site_stderr=site_err, measurement_stderr=meas_err,
        warnings=tuple(warns), notes=tuple(notes), evaluations=problem.evaluations,
        time_s=time.perf_counter() - t_start, starts=n_starts, starts_at_best=at_best, posterior=post,
        derived=dist_derived)


def _schema_span(p: FreeParameter) -> float:
    from ..model.schema import key_spec

    s = key_spec(p.address.table, p.address.key)
    return s.high - s.low


def _covariance(j: np.ndarray) -> np.ndarray:
    """(J^T J)^-1 with columns scaled for conditioning; inf on the diagonal for undetermined directions."""
    norms = np.sqrt(np.sum(j * j, axis=0))
    dead = norms == 0
    norms = np.where(dead, 1.0, norms)
    js = j / norms
    u, s, vt = np.linalg.svd(js, full_matrices=False)
    keep = s > s.max() * 1e-10 if s.size else s
    inv = (vt[keep].T / s[keep] ** 2) @ vt[keep]
    cov = inv / np.outer(norms, norms)
    if not keep.all() or dead.any():
        # directions the data do not fix: infinite variance for the parameters along them
        null = vt[~keep]
        bad = np.any(np.abs(null) > 1e-6, axis=0) | dead
        cov[bad, :] = 0.0
        cov[:, bad] = 0.0
        cov[bad, bad] = np.inf
    return cov


def _correlation(cov: np.ndarray) -> np.ndarray:
    d = np.sqrt(np.diag(cov))
    with np.errstate(invalid="ignore", divide="ignore"):
        c = cov / np.outer(d, d)
    c = np.where(np.isfinite(c), c, 0.0)
    np.fill_diagonal(c, 1.0)
    return np.clip(c, -1.0, 1.0)


def _weights(model: Model) -> np.ndarray:
    return np.array([s.weight for s in model.sites])


def _reported(problem: _Problem, x, e: _Eval, cov):
    """Reported values (weights normalised, scales times the weight sum) and their covariance (delta method)."""
    p = x.size
    lin = np.concatenate(e.coefs)
    n_lin = [len(c) for c in e.coefs]
    starts = np.cumsum([0] + n_lin[:-1])
    weight_idx = {i: k for k, fp in enumerate(problem.params)
                  if fp.address.table == "site" and fp.address.key == "weight" for i in [fp.address.index]}

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
    finite = np.isfinite(np.diag(cov))
    c = np.where(np.outer(finite, finite), cov, 0.0)
    qc = gj @ c @ gj.T
    inf_rows = np.any((np.abs(gj[:, ~finite]) > 0), axis=1) if (~finite).any() else np.zeros(v0.size, bool)
    for r in np.flatnonzero(inf_rows):
        qc[r, r] = np.inf
    err = np.sqrt(np.clip(np.diag(qc), 0.0, None))
    n_meas = len(e.coefs)
    n_sites = len(problem.model.sites)
    o = p + n_meas
    scale_err = [float(err[p + jj]) for jj in range(n_meas)]
    weight_err = [float(err[o + i]) for i in range(n_sites)]
    bl_err = []
    off = o + n_sites
    for jj, s0 in enumerate(starts):
        bl_err.append(tuple(float(err[off + s0 + k]) for k in range(1, n_lin[jj])))
    return v0, {"values": v0, "cov": qc, "scale_err": scale_err, "weight_err": weight_err,
                "baseline_err": bl_err, "scales": [float(v0[p + jj]) for jj in range(n_meas)],
                "weights": [float(v) for v in v0[o:o + n_sites]], "weights_free": bool(weight_idx),
                "baselines": [tuple(float(v) for v in c[1:]) for c in e.coefs]}


def _parameter_warnings(free, x, values, stderr, corr, names, sol) -> list[str]:
    out = []
    for k, fp in enumerate(free):
        n = fp.name
        v, s = values[n], stderr[n]
        span = fp.max - fp.min
        tol = 1e-6 * span if math.isfinite(span) else 1e-9
        active = getattr(sol, "active_mask", None)
        if x[k] - fp.min <= tol or (active is not None and active[k] < 0):
            out.append(f"{n} stopped at its lower bound min = {fp.min:g}: the best value may lie beyond it; widen "
                       "the range if that is physical, or read the value as a limit")
        elif fp.max - x[k] <= tol or (active is not None and active[k] > 0):
            out.append(f"{n} stopped at its upper bound max = {fp.max:g}: the best value may lie beyond it; widen "
                       "the range if that is physical, or read the value as a limit")
        if not math.isfinite(s):
            out.append(f"{n} is not determined by the data: changing it does not change the fitted spectrum "
                       "(fix it, or tie it to another parameter)")
        elif math.isfinite(span) and s > span:
            out.append(f"{n} is not determined by the data: its standard error ({s:.3g}) exceeds its whole "
                       f"range ({fp.min:g} to {fp.max:g})")
        elif fp.address.key in _SCALE_LIKE and v != 0 and s > abs(v):
            out.append(f"{n} is not determined by the data: its standard error ({s:.3g}) exceeds its value "
                       f"({v:.3g}), so the data cannot tell it from zero")
    p = len(names)
    for a in range(p):
        for b in range(a + 1, p):
            if abs(corr[a, b]) > CORRELATION_WARNING:
                out.append(f"{names[a]} and {names[b]} trade off against each other (correlation {corr[a, b]:+.3f}): "
                           "the data fix a combination of them rather than each one")
    return out


def _fitted_model(problem: _Problem, x, e: _Eval, derived, axes, centers, widths, paths, settings, original):
    m = problem.model_at(x)
    w = _weights(m)
    ssum = float(w.sum())
    # weights normalised to sum 1 (ties follow their sources)
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


def _stderr_tables(fitted: Model, free, q_err, derived):
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


# ---------------------------------------------------------------------------
# posterior


def _sample_posterior(problem: _Problem, x, free, cov, derived, walkers, steps, burn, seed, progress):
    import emcee

    p = x.size
    nw = int(walkers) if walkers is not None else max(16, 4 * p)
    nw += nw % 2
    if nw < 2 * p:
        raise FitError(f"walkers = {nw} must be at least twice the number of free parameters ({p})")
    steps = int(steps)
    burn = steps // 4 if burn is None else int(burn)
    if steps < 10 or not (0 <= burn < steps):
        raise FitError(f"posterior: steps = {steps} must be at least 10 and burn = {burn} in [0, steps)")
    lo, hi = problem.lo, problem.hi

    interrupted = []

    def log_prob(theta):
        if interrupted or np.any(theta < lo) or np.any(theta > hi):
            return -np.inf
        try:
            ev = problem.evaluate(theta)
        except KeyboardInterrupt:  # raised again outside the sampler, which would print a traceback
            interrupted.append(True)
            return -np.inf
        return -0.5 * float(ev.residual @ ev.residual) - 0.5 * ev.logdet

    rng = np.random.default_rng(seed)
    sd = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    span = np.where(np.isfinite(hi - lo), hi - lo, 1.0)
    sd = np.where(np.isfinite(sd) & (sd > 0), sd, 1e-3 * span)
    p0 = x + 0.1 * sd * rng.standard_normal((nw, p))
    p0 = np.clip(p0, lo + 1e-9 * span, hi - 1e-9 * span)
    sampler = emcee.EnsembleSampler(nw, p, log_prob)
    sampler.random_state = np.random.RandomState(seed).get_state()
    for i, _ in enumerate(sampler.sample(p0, iterations=steps)):
        if interrupted:
            raise KeyboardInterrupt
        if progress is not None:
            progress("posterior", i + 1, steps)
    chain = sampler.get_chain(discard=burn, flat=True)
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore")
        import logging

        logger = logging.getLogger("emcee.autocorr")
        level = logger.level
        logger.setLevel(logging.ERROR)
        try:
            tau = sampler.get_autocorr_time(discard=burn, quiet=True)
        finally:
            logger.setLevel(level)
    tau = np.where(np.isfinite(tau), tau, float(steps))
    # report weights normalised, like the least-squares values
    weight_idx = [k for k, fp in enumerate(free) if fp.address.table == "site" and fp.address.key == "weight"]
    if weight_idx:
        rep = chain.copy()
        for r in range(chain.shape[0]):
            w = _weights(problem.model_at(chain[r]))
            for k in weight_idx:
                rep[r, k] = w[free[k].address.index] / w.sum()
        chain = rep
    med = np.median(chain, axis=0)
    q16, q84 = np.percentile(chain, [16.0, 84.0], axis=0)
    return PosteriorSummary(tuple(fp.name for fp in free), tuple(map(float, med)), tuple(map(float, q16)),
                            tuple(map(float, q84)), chain, nw, steps, burn, tuple(map(float, tau)),
                            bool(steps - burn >= 50 * float(np.max(tau))), float(np.mean(sampler.acceptance_fraction)))


# ---------------------------------------------------------------------------
# result files


def result_to_dict(result: FitResult, path=None) -> dict:
    """The fit result as the nested dict of a model file with result tables.

    Parameters
    ----------
    result : FitResult
    path : str or pathlib.Path, optional
        Where the result file will be written: ``data`` paths are written
        relative to its folder.

    Returns
    -------
    dict
        :func:`powderspin.model.modelfile.model_to_dict` of the fitted model plus a
        ``stderr`` (and after sampling ``interval``) table in each fitted
        site and measurement, and ``[fit.result]``.

    See Also
    --------
    write_result

    Examples
    --------
    See :func:`write_result`.
    """
    from ..model.modelfile import model_to_dict

    d = model_to_dict(result.model)
    meas = d["measurement"] if isinstance(d["measurement"], list) else [d["measurement"]]
    base = Path(path).resolve().parent if path is not None else None
    for j, t in enumerate(meas):
        if result.data_paths[j] is not None and base is not None:
            t["data"] = os.path.relpath(Path(result.data_paths[j]).resolve(), base)
        if result.measurement_stderr[j]:
            t["stderr"] = dict(result.measurement_stderr[j])
    for i, t in enumerate(d["site"]):
        if result.site_stderr[i]:
            t["stderr"] = dict(result.site_stderr[i])
    if result.posterior is not None:
        _intervals(result, d, meas)
    fit = d.setdefault("fit", {})
    res: dict = {
        "reduced_chi_square": float(result.reduced_chi_square),
        "chi_square": float(result.chi_square),
        "degrees_of_freedom": int(result.degrees_of_freedom),
        "noise_source": result.noise_source,
        "noise": [float(s) for s in result.noise],
        "evaluations": int(result.evaluations),
        "time_s": round(float(result.time_s), 3),
        "parameters": list(result.names),
        "correlation": [[round(float(v), 6) for v in row] for row in result.correlation],
        "scales": [float(s) for s in result.scales],
        "baselines": [list(b) for b in result.baselines],
        "warnings": list(result.warnings),
        "notes": list(result.notes),
    }
    if result.derived:
        res["derived"] = {n: float(v) for n, (v, _) in result.derived.items()}
        res["derived_stderr"] = {n: float(e) for n, (_, e) in result.derived.items()}
    if result.starts > 1:
        res["starts"] = int(result.starts)
        res["starts_at_best"] = int(result.starts_at_best)
    if result.posterior is not None:
        post = result.posterior
        res["posterior"] = {"walkers": post.walkers, "steps": post.steps, "burn": post.burn,
                            "autocorrelation_steps": [float(t) for t in post.autocorrelation_steps],
                            "converged": post.converged, "acceptance": round(post.acceptance, 4)}
    fit["result"] = res
    return d


def _intervals(result: FitResult, d: dict, meas: list) -> None:
    post = result.posterior
    addr = {n: a for n, a in _addresses(result)}
    for k, n in enumerate(post.names):
        a = addr.get(n)
        if a is None:
            continue
        target = (d["site"][a.index] if a.table == "site" else meas[a.index]).setdefault("interval", {})
        pair = [float(post.low[k]), float(post.high[k])]
        if a.item is not None:
            e = target.setdefault("euler_deg", [[0.0, 0.0], [0.0, 0.0], [0.0, 0.0]])
            e[a.item] = pair
        else:
            target[a.key] = pair


def _addresses(result: FitResult):
    """(name, address) of every free parameter, recovered from the names."""
    labels = [s.label for s in result.model.sites]
    out = []
    for n in result.names:
        owner, _, key = n.rpartition(".")
        item = None
        if key.endswith("]"):
            key, _, idx = key[:-1].partition("[")
            item = int(idx)
        if owner.startswith("measurement "):
            out.append((n, ParameterAddress("measurement", int(owner.split()[1]) - 1, key, item)))
        elif owner in labels:
            out.append((n, ParameterAddress("site", labels.index(owner), key, item)))
    return out


def result_to_toml(result: FitResult, path=None) -> str:
    """The fit result as the text of a model file (TOML).

    Parameters
    ----------
    result : FitResult
    path : str or pathlib.Path, optional
        Where it will be written (for relative ``data`` paths).

    Returns
    -------
    str

    Examples
    --------
    See :func:`write_result`.
    """
    import tomli_w

    head = ("# powderspin fit result: a model file with the fitted values (simulate it to get the fitted curve),\n"
            "# standard errors in [site.stderr] / [measurement.stderr] and the fit's statistics in [fit.result]\n")
    return head + tomli_w.dumps(result_to_dict(result, path))


def fit_csv_text(result: FitResult, measurement: int = 0) -> str:
    """The data, fit, site components, baseline and residual of one measurement as CSV text.

    Parameters
    ----------
    result : FitResult
    measurement : int, optional

    Returns
    -------
    str
        ``#`` comment lines, then the header ``ppm,hz,data,fit,<site labels>,baseline,residual,in_fit`` and
        one row per data point in ascending hz (``in_fit`` is 1 inside the fit regions).

    Examples
    --------
    See :func:`write_result`.
    """
    import csv
    import io

    from ..simulator import baseline_values

    spec = result.spectra[measurement]
    data = np.asarray(result.data[measurement].intensity, dtype=float)
    meas = result.model.measurements[measurement]
    axis = make_axis(meas.points, spec.nu_ref_hz, meas.center_ppm, meas.width_ppm)
    bl = baseline_values(meas.baseline, axis) if meas.baseline else np.zeros(spec.hz.size)
    lines = [f"# powderspin fit: measurement {measurement + 1} of {len(result.spectra)}",
             f"# data: {result.data_paths[measurement] or result.data[measurement].source}",
             f"# nucleus: {result.model.nucleus.name}",
             f"# field_tesla: {meas.field_tesla}",
             f"# nu_ref_hz: {spec.nu_ref_hz}",
             f"# scale: {meas.scale}",
             f"# noise: {result.noise[measurement]} ({result.noise_source})",
             "# columns: data, fit (= sites + baseline), each site (scaled), baseline, residual (data - fit)"]
    head = io.StringIO()
    csv.writer(head, lineterminator="").writerow(["ppm", "hz", "data", "fit", *spec.site_labels, "baseline",
                                                   "residual", "in_fit"])
    lines.append(head.getvalue())
    cols = [spec.ppm, spec.hz, data, spec.intensity, *spec.site_intensities, bl, data - spec.intensity]
    mk = result.masks[measurement]
    for i in range(spec.hz.size):
        lines.append(",".join(f"{c[i]:.12g}" for c in cols) + f",{int(mk[i])}")
    return "\n".join(lines) + "\n"


def csv_paths(result_path, n_measurements: int) -> list[Path]:
    """The CSV file(s) written beside a result file: same stem, ``.csv`` (``-m1.csv``, ... for several).

    Parameters
    ----------
    result_path : str or pathlib.Path
    n_measurements : int

    Returns
    -------
    list of pathlib.Path

    Examples
    --------
    >>> [p.name for p in csv_paths("out/fit.toml", 2)]
    ['fit-m1.csv', 'fit-m2.csv']
    """
    p = Path(result_path)
    if n_measurements == 1:
        return [p.with_suffix(".csv")]
    return [p.with_name(f"{p.stem}-m{j + 1}.csv") for j in range(n_measurements)]


def write_result(result: FitResult, path, *, force: bool = False, protect=()) -> list[Path]:
    """Write the result file (a model file) and the CSV file(s) beside it, atomically.

    Parameters
    ----------
    result : FitResult
    path : str or pathlib.Path
        The result file (``.toml``).  The CSV of each measurement goes
        beside it (:func:`csv_paths`).
    force : bool, optional
        Replace existing files.
    protect : iterable of path, optional
        Inputs never to overwrite (the model and data files are always
        protected).

    Returns
    -------
    list of pathlib.Path
        The files written.  If any write fails, those already written by
        this call are removed.

    See Also
    --------
    result_to_toml, fit_csv_text

    Examples
    --------
    >>> import tempfile, pathlib
    >>> import numpy as np
    >>> import powderspin as ps
    >>> from powderspin.io.spectra import MeasuredSpectrum
    >>> truth = ps.make_model("31P", {"field_tesla": 9.4, "points": 128, "center_ppm": 0.0, "width_ppm": 40.0},
    ...                       [{"label": "P", "shift_ppm": 2.0, "lorentz_hz": 400.0}])
    >>> s = ps.simulate(truth)
    >>> y = s.intensity + np.random.default_rng(2).normal(0.0, 0.002, s.hz.size)
    >>> start = ps.make_model("31P", {"field_tesla": 9.4},
    ...                       [{"label": "P", "shift_ppm": {"start": 0.0, "min": -5.0, "max": 5.0},
    ...                         "lorentz_hz": 400.0}])
    >>> r = ps.fit(start, [MeasuredSpectrum(s.hz, s.ppm, y, None, s.nu_ref_hz, "synthetic")])
    >>> with tempfile.TemporaryDirectory() as d:
    ...     files = write_result(r, pathlib.Path(d) / "fit.toml")
    ...     again = ps.simulate(ps.load_model(files[0]))
    ...     print([f.name for f in files], float(np.max(np.abs(again.intensity - r.spectra[0].intensity))) < 1e-12)
    ['fit.toml', 'fit.csv'] True
    """
    from ..files import check_outputs, write_text_atomic

    p = Path(path)
    csvs = csv_paths(p, len(result.spectra))
    protect = list(protect) + [q for q in result.data_paths if q is not None]
    if result.model.source:
        protect.append(result.model.source)
    check_outputs([(p, "result file")] + [(c, "fit CSV") for c in csvs], force=force, protect=protect)
    texts = [(p, result_to_toml(result, p), "result file")]
    texts += [(c, fit_csv_text(result, j), "fit CSV") for j, c in enumerate(csvs)]
    written: list[Path] = []
    try:
        for q, text, role in texts:
            write_text_atomic(q, text, force=force, protect=protect, role=role)
            written.append(q)
    except BaseException:
        for q in written:
            try:
                q.unlink()
            except OSError:
                pass
        raise
    return written
