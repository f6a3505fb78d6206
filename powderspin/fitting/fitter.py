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
- **One Simulator per measurement** (:class:`powderspin.simulator.Simulator`)
  makes every choice of the pipeline once, at the start values: each site's
  producer (so the objective does not jump between producers),
  ``orientations = "auto"`` and ``rotor_phases = "auto"`` (pinned to what the
  start values get, the largest over the sites, and written to the result
  file).  At the end the producers and phases are checked at the fitted
  values; if ``"auto"`` would choose otherwise, the fit is refined with the
  new choice, so that simulating the result file gives the fitted curve.
- **Linear parameters.** The intensity scale of each measurement and the
  coefficients of an optional polynomial baseline (``baseline_order``) are
  solved by linear least squares at every evaluation (variable projection:
  G. H. Golub, V. Pereyra, SIAM J. Numer. Anal. 10 (1973) 413).
- **Optimiser.** :func:`scipy.optimize.least_squares` (trust-region
  reflective, bounds from each parameter's ``min``/``max``) on the residual
  ``(data - model) / sigma`` over the fit regions, with a forward-difference
  Jacobian through the Simulators' memos.  Whether it converged is part of
  the result (``success``, ``message``); a fit that stopped early says so.
- **Global search** (``global_search=True``, :mod:`powderspin.fitting.search`):
  the user's start plus candidates from a lineshape-library scan (one
  non-negative least-squares problem over every site's kernels) where it
  applies, else from differential evolution with a stated budget; every
  start refined by least squares; every distinct minimum within a stated
  chi-square margin of the best is reported (``FitResult.minima``).
- **Equivalent values** (:mod:`powderspin.fitting.symmetry`): Euler angles
  are folded into one documented fundamental domain and, with only the
  central transition, C_Q to its absolute value; the notes say so.
- **Curvature** (:mod:`powderspin.fitting.curvature`): predicted and actual
  chi-square rises at one standard error are compared; where they differ,
  profile-likelihood intervals are reported with a warning.
- **Noise.** With a signal-free noise region, sigma is the standard deviation
  of the data there (a straight line removed).  Without one, sigma is the
  root-mean-square residual of the fit (per measurement; the fit starts from
  a point-to-point estimate of the noise and re-weights the measurements
  once it knows the residuals).
- **Uncertainties.** Covariance ``(J^T J)^-1`` of the whitened residual,
  with J the Jacobian with respect to the free parameters *and* the linear
  ones, so the standard errors include what the scale and baseline absorb;
  parameters the data do not determine follow the one rule of
  :mod:`powderspin.uncertainty`.  ``posterior=True`` samples the posterior
  with emcee (:mod:`powderspin.fitting.posterior`).
- **Site weights** may be free.  Weights are relative: the scale of each
  measurement absorbs their sum, so when every weight is free (or tied) the
  first free one is held at its start value.  Weights are reported
  normalised to sum 1, and each measurement's scale is reported multiplied
  by the sum of the weights, so that the product (the fitted curve) is
  unchanged.

The fitted model keeps the scale and baseline (measurement keys ``scale``
and ``baseline``), so :func:`~powderspin.simulator.simulate` of it, or of the
result file written by :func:`powderspin.io.results.write_result`, reproduces
the fitted curve.

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
import time
from dataclasses import replace

import numpy as np

from ..disorder.summary import distribution_summary
from ..engine.threads import kernel_threads
from ..model.values import FitSettings, FreeParameter, Model, ParameterAddress
from ..simulator import SimulationCache, Simulator, as_model
from ..uncertainty import correlation, covariance_from_jacobian, standard_errors
from .curvature import curvature_check, profile_interval
from .data import (
    MIN_NOISE_POINTS,
    FitError,
    check_overlap,
    check_region,
    data_axis,
    data_items,
    noise_from_region,
    point_noise,
    read_measured,
    region_mask,
)
from .posterior import DEFAULT_STEPS, MIN_AUTOCORRELATION_TIMES, sample_posterior
from .problem import FitProblem
from .reported import NATURAL_RANGE, fitted_model, parameter_warnings, reported_values, stderr_tables
from .result import FitResult
from .search import MINIMA_MARGIN
from .search import global_search as global_search_
from .symmetry import fold_vector, skew_switch_notes

__all__ = ["fit", "FitError", "DEFAULT_STEPS"]


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


def _pinned_choices(model: Model, axes, kernel_store, cache: SimulationCache) -> tuple[Model, dict, list]:
    """Pin what a simulation would choose by itself at the start values, so the objective cannot jump.

    ``orientations = "auto"`` becomes the accuracy level (subdivisions) of the
    triangulated sets the sites got (the largest), and ``rotor_phases =
    "auto"`` under finite-rate spinning the largest number of phases any site
    needs.  Both are written to the result, so simulating it makes the same
    choice.  Returns the model, the measurements whose phases were pinned, and
    each measurement's producers.
    """
    phases = {}
    methods = []
    for j, meas in enumerate(model.measurements):
        sim = Simulator(model, j, axis=axes[j], kernel_store=kernel_store, cache=cache)
        methods.append(list(sim.methods))
        finite = meas.spinning_hz > 0 and math.isfinite(meas.spinning_hz)
        changes = {}
        found = [p for p, s in zip(sim.rotor_phases, sim.orientation_sets) if s is not None and p > 0]
        if meas.rotor_phases == "auto" and finite and found:  # distributed sites choose their own phases
            changes["rotor_phases"] = phases[j] = max(found)
        if meas.orientations == "auto":
            names = [s.name for s in sim.orientation_sets if s is not None]
            levels = [int(n.rsplit("-", 1)[1]) for n in names if n.startswith("tri-") and n.rsplit("-", 1)[1].isdigit()]
            if levels and len(levels) == len(names):
                changes["orientations"] = max(levels)
        if changes:
            model = model.with_measurement(j, **changes)
    return model, phases, methods


def _least_squares(problem: FitProblem, x0, max_evaluations: int | None):
    from scipy.optimize import least_squares

    x0 = np.clip(np.asarray(x0, dtype=float), problem.lo, problem.hi)
    return least_squares(problem.residual, x0, jac=problem.jacobian, bounds=(problem.lo, problem.hi),
                         method="trf", x_scale="jac", max_nfev=max_evaluations)


def _schema_span(p: FreeParameter) -> float:
    s = p.address.spec()
    return s.high - s.low


def _verdict(sol, max_evaluations) -> tuple[bool, str]:
    """Whether the optimiser converged, and its verdict in words."""
    if sol.status > 0:
        return True, f"converged: {sol.message}"
    if sol.status == 0:
        return False, (f"the optimiser stopped after {sol.nfev} evaluations (max_evaluations = {max_evaluations}) "
                       "before meeting its convergence test; the values are not a minimum")
    return False, f"the optimiser failed: {sol.message}"


def fit(model, data=None, *, regions=None, noise_region=None, baseline_order=None, axis: str | None = None,
        global_search: bool = False, starts: int | None = None, seed: int = 0, posterior: bool = False,
        walkers: int | None = None, steps: int = DEFAULT_STEPS, burn: int | None = None,
        max_steps: int | None = None, progress=None,
        max_evaluations: int | None = None, threads: int | None = 1, kernel_store=None,
        profile: str = "auto") -> FitResult:
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
        Global search (:func:`powderspin.fitting.search.global_search`): the
        model's start plus candidates from a lineshape-library scan or
        differential evolution, each refined; keep the best and list every
        distinct minimum within chi-square 9 of it.
    starts : int, optional
        Least-squares starts of a global search, the model's included
        (default ``1 + max(8, 3 p)``, p free parameters).
    seed : int, optional
        Seed of the global search and of the posterior sampler.
    posterior : bool, optional
        Also sample the posterior with emcee from the least-squares solution.
    walkers, steps, burn : int, optional
        Posterior sampling: walkers (default ``max(16, 4 p)``, even), steps
        per walker (default :data:`DEFAULT_STEPS`) and discarded steps
        (default a quarter of ``steps``).
    max_steps : int, optional
        The posterior chain is extended beyond ``steps`` until it spans 50
        integrated autocorrelation times, up to ``max_steps`` steps per
        walker (default 5 x ``steps``); a chain still too short is reported.
    progress : callable, optional
        Subscriber of the progress protocol (:mod:`powderspin.progress`):
        stage ``"fit"`` (evaluations, with the lowest chi-square as the
        value), ``"posterior"`` (steps), ``"lines"`` and ``"kernels"``.
    max_evaluations : int, optional
        Limit on the objective evaluations of each least-squares run; a run
        that reaches it is reported with ``success = False``.
    threads : int or None, optional
        Threads of the compiled kernels during the fit (default 1; None
        keeps numba's setting).  A fit makes thousands of small kernel
        calls, for which starting parallel work costs more than it saves,
        badly so on a busy machine (``benchmarks/bench_fit.py`` measures
        both).
    kernel_store : powderspin.disorder.store.KernelStore, optional
        Where the kernels of sites with an EFG distribution are kept (default
        the store of the lineshape library folder).  Each evaluation of such
        a site is a weighted sum of kernels built once for the whole range of
        its free parameters (:mod:`powderspin.disorder`).
    profile : {"auto", "all", "none"}, optional
        Profile-likelihood intervals (:mod:`powderspin.fitting.curvature`):
        ``"auto"`` for the parameters along which chi-square is not quadratic
        within one standard error, ``"all"`` for every free parameter except
        weights, ``"none"`` for none (the curvature check still runs).

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
    powderspin.io.results.write_result : write the result as a model file (plus CSV).
    powderspin.simulator.Simulator : the forward model.

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
    >>> truth = ps.make_model("31P", {"field_tesla": 9.4, "points": 256, "center_ppm": 0.0,
    ...                                "width_ppm": 40.0}, [{"label": "P", "shift_ppm": 3.0, "lorentz_hz": 300.0}])
    >>> s = ps.simulate(truth)
    >>> y = 5.0 * s.intensity + np.random.default_rng(1).normal(0.0, 0.01, s.hz.size)
    >>> data = ps.MeasuredSpectrum(s.hz, s.ppm, y, None, s.nu_ref_hz, "synthetic")
    >>> start = ps.make_model("31P", {"field_tesla": 9.4},
    ...                       [{"label": "P", "shift_ppm": {"start": 0.0, "min": -10.0, "max": 10.0},
    ...                         "lorentz_hz": {"start": 200.0, "min": 10.0, "max": 2000.0}}])
    >>> r = ps.fit(start, [data])
    >>> r.success, abs(r.values["P.shift_ppm"] - 3.0) < 3 * r.stderr["P.shift_ppm"]
    (True, True)
    >>> round(r.scales[0], 1)
    5.0
    >>> ps.fit(start, [data], max_evaluations=3).success
    False
    """
    if profile not in ("auto", "all", "none"):
        raise FitError(f"profile = {profile!r} must be one of 'auto', 'all', 'none'")
    with kernel_threads(threads):
        return _fit(model, data, regions, noise_region, baseline_order, axis, global_search, starts, seed,
                    posterior, walkers, steps, burn, progress, max_evaluations, kernel_store, profile, max_steps)


def _fit(model, data, regions, noise_region, baseline_order, axis, global_search, starts, seed, posterior,
         walkers, steps, burn, progress, max_evaluations, kernel_store=None, profile="auto",
         max_steps=None) -> FitResult:
    t_start = time.perf_counter()
    model = as_model(model, "fit")
    n_meas = len(model.measurements)

    def where(j):
        return "measurement" if n_meas == 1 else f"measurement {j + 1}"

    free, notes = _free_parameters(model)
    warns: list[str] = []
    # -- settings: arguments override the model's [fit] table
    fs = model.fit
    regs = fs.regions if regions is None else tuple(check_region(r, f"region {i + 1}") for i, r in enumerate(regions))
    noise_reg = fs.noise_region if noise_region is None else check_region(noise_region, "noise region")
    order = fs.baseline_order if baseline_order is None else baseline_order
    settings = FitSettings(tuple(regs), noise_reg, order)  # validates the order
    order = settings.baseline_order
    # -- data
    specs, paths = [], []
    for j, item in enumerate(data_items(model, data)):
        sp, path, w = read_measured(item, model, j, axis)
        specs.append(sp)
        paths.append(path)
        warns.extend(w)
    axes, centers, widths = [], [], []
    for j, sp in enumerate(specs):
        nu_ref = model.nucleus.larmor_hz(model.measurements[j].field_tesla)
        ax, c, w = data_axis(sp, nu_ref, where(j))
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
    masks = [region_mask(ax.ppm, regs) for ax in axes]
    for j, mk in enumerate(masks):
        if not mk.any():
            raise FitError(f"{where(j)}: no data point lies in the fit regions "
                           f"{[list(r) for r in regs]} (the data cover {axes[j].ppm.max():.6g} to "
                           f"{axes[j].ppm.min():.6g} ppm)")
    if noise_reg is not None:
        sigmas = []
        for j, ax in enumerate(axes):
            k = int(((ax.ppm <= noise_reg[0]) & (ax.ppm >= noise_reg[1])).sum())
            if k < MIN_NOISE_POINTS:
                raise FitError(f"{where(j)}: the noise region [{noise_reg[0]:g}, {noise_reg[1]:g}] ppm holds {k} data "
                               f"point(s); it needs at least {MIN_NOISE_POINTS} (the data cover "
                               f"{ax.ppm.max():.6g} to {ax.ppm.min():.6g} ppm)")
            sigmas.append(noise_from_region(ys[j], ax.ppm, noise_reg))
        noise_source = "noise region"
    else:
        sigmas = [point_noise(y) for y in ys]
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
    # -- the model for fitting: data axes, scale 1, no baseline; its choices pinned at the start values
    base = model
    for j in range(n_meas):
        base = base.with_measurement(j, scale=1.0, baseline=(), center_ppm=None, width_ppm=None)
    check_overlap(base, axes, where)
    n_jobs = len(model.sites) * n_meas
    cache = SimulationCache(lines=4 * (len(free) + 3) * n_jobs, rendered=4 * (len(free) + 3) * n_jobs)
    base, fixed_phases, methods = _pinned_choices(base, axes, kernel_store, cache)
    problem = FitProblem(base, free, axes, ys, masks, sigmas, methods, order, progress, kernel_store, cache)
    x0 = np.array([p.start for p in free], dtype=float)
    # -- least squares (local or multi-start)
    n_starts, at_best = 1, 1
    search = None
    if global_search:
        unbounded = [p.name for p in free if (p.max - p.min) >= 0.5 * _schema_span(p)
                     and p.address.key not in NATURAL_RANGE and p.address.key != "euler_deg"]
        if unbounded:
            warns.append("global search over the whole allowed range of " + ", ".join(unbounded)
                         + ": give min and max to search where the value can physically be")
        search = global_search_(problem, x0, refinements=None if starts is None else int(starts) - 1, seed=seed,
                                local=lambda v, n: _least_squares(problem, v, max_evaluations if n is None else n),
                                fold=lambda v: fold_vector(free, v, problem.lo, problem.hi, problem.model)[0],
                                kernel_store=kernel_store)
        sol = search.best
        n_starts, at_best = search.starts, search.starts_at_best
    else:
        sol = _least_squares(problem, x0, max_evaluations)
    x = sol.x
    success, message = _verdict(sol, max_evaluations)
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
            problem.forget()
            if n_meas == 1 or max(ratio) / min(ratio) < 1.1:
                break
            sol = _least_squares(problem, x, max_evaluations)
            x = sol.x
            success, message = _verdict(sol, max_evaluations)
    # -- the producers and rotor phases must be what a simulation would choose at the fitted values
    if success:
        for _ in range(2):
            fitted = problem.model_at(x)
            again = [list(Simulator(fitted, j, axis=axes[j], kernel_store=kernel_store, cache=cache).methods)
                     for j in range(n_meas)] if _any_auto_method(fitted) else problem.methods
            refine = again != problem.methods
            new_model = problem.model
            if refine:
                notes.append("the frequency producer chosen for the fitted values differs from the start's; the fit "
                             "was refined with it")
            for j in fixed_phases:
                spec = Simulator(fitted, j, axis=axes[j], methods=again[j], kernel_store=kernel_store,
                                 cache=cache).spectrum()
                if any("aliasing" in t for t in spec.metadata["notes"]):
                    p = 2 * new_model.measurements[j].rotor_phases
                    new_model = new_model.with_measurement(j, rotor_phases=p)
                    fixed_phases[j] = p
                    refine = True
                    notes.append(f"{where(j)}: rotor_phases raised to {p} for the fitted values; the fit was refined")
            if not refine:
                break
            problem.set_model(new_model, again)
            sol = _least_squares(problem, x, max_evaluations)
            x = sol.x
            success, message = _verdict(sol, max_evaluations)
    if not success:
        warns.insert(0, message)
    # -- one answer per minimum: equivalent values folded to the documented representative
    x, fold_notes = fold_vector(free, x, problem.lo, problem.hi, problem.model)
    notes.extend(fold_notes)
    # -- statistics
    e = problem.evaluate(x)
    chi2 = float(e.residual @ e.residual)
    jfull, _ = problem.full_jacobian(x)
    cov = covariance_from_jacobian(jfull)
    p = len(free)
    derived = reported_values(problem, x, e, cov)
    names = tuple(fp.name for fp in free)
    q_cov = derived["cov"]
    q_err = standard_errors(q_cov)
    values = {n: float(v) for n, v in zip(names, derived["values"][:p])}
    stderr = {n: float(s) for n, s in zip(names, q_err[:p])}
    corr = correlation(q_cov[:p, :p])
    dist_derived = distribution_summary(problem.model_at, free, x, cov[:p, :p])
    red = chi2 / dof
    warns += parameter_warnings(free, x, values, stderr, corr, names, getattr(sol, "active_mask", None))
    notes.extend(skew_switch_notes(problem.model, free, values, stderr))
    # -- does the quadratic picture hold within one standard error?  Profile intervals where it does not
    jp = problem.jacobian(x)
    curv = curvature_check(problem, x, jp, cov[:p, :p], names)
    profiles = {}
    failed = [row for row in curv if not row.quadratic]
    if profile != "none":
        todo = set()
        for row in curv:
            if profile == "all" or not row.quadratic:
                todo |= {n for n, w in row.loadings.items() if abs(w) >= 0.3}
        sd_free = np.sqrt(np.clip(np.diag(cov[:p, :p]), 0.0, None))
        for i, fp in enumerate(free):
            if fp.name not in todo or fp.address.key == "weight" or not (np.isfinite(sd_free[i]) and sd_free[i] > 0):
                continue
            lo_, hi_, f_lo, f_hi, lowest = profile_interval(problem, x, i, float(sd_free[i]), _profile_local)
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
    minima = ()
    if search is not None:
        minima = []
        for mn in search.minima:  # chi-square at the final noise levels
            v = np.array([mn.values[n] for n in names])
            ev = problem.evaluate(v)
            minima.append(replace(mn, chi_square=float(ev.residual @ ev.residual)))
        minima = tuple(sorted(minima, key=lambda mn: mn.chi_square))
        notes.append(f"global search: {search.method}")
        if at_best == 1 and n_starts > 1:
            warns.append(f"the best fit was reached by one start only (of {n_starts}): a lower minimum may exist "
                         "that no start reached; run again with more starts (--starts) or another seed")
        others = [mn for mn in minima[1:]]
        if others:
            lines = "; ".join(f"chi-square +{mn.chi_square - minima[0].chi_square:.3g}: "
                              + ", ".join(f"{n} = {v:.6g}" for n, v in mn.values.items()) for mn in others)
            warns.append(f"{len(others)} other distinct minimum/minima lie within chi-square {MINIMA_MARGIN:g} of the "
                         f"best and fit the data almost as well: {lines}")
    if noise_source == "noise region" and red > 2.0:
        warns.append(f"the reduced chi-square is {red:.3g}: the model does not describe the data within the noise "
                     "(missing sites, wrong broadening or baseline); the standard errors are then too small")
    if noise_source == "residual":
        for j in range(n_meas):
            pn = point_noise(ys[j])
            if pn > 0 and problem.sigmas[j] > 1.5 * pn:
                warns.append(f"{where(j)}: the residual is {problem.sigmas[j] / pn:.2g} times the point-to-point "
                             "noise: the model misses features of the data (look at the residual)")
        notes.append("no noise region: the noise level is the residual's, so the reduced chi-square is 1 by "
                     "construction; give a signal-free noise region to judge the fit")
    # -- the fitted model: values, normalised weights, scale and baseline, data axes
    fitted = fitted_model(problem, x, e, axes, centers, widths, paths, settings, model)
    spectra = tuple(Simulator(fitted, j, kernel_store=kernel_store, cache=cache).spectrum() for j in range(n_meas))
    site_err, meas_err = stderr_tables(fitted, free, q_err, derived)
    post = None
    if posterior:
        post = sample_posterior(problem, x, free, cov[:p, :p], walkers, steps, burn, seed, progress, max_steps)
        if not post.converged:
            warns.append(f"the posterior chain is too short even after extending it to {post.steps} steps: "
                         f"{post.steps - post.burn} kept steps per walker are fewer than {MIN_AUTOCORRELATION_TIMES} "
                         f"integrated autocorrelation times (longest {max(post.autocorrelation_steps):.3g} steps); "
                         "the posterior intervals are not reliable: raise max_steps (--max-steps)")
        elif post.steps > int(steps):
            notes.append(f"the posterior chain was extended from {int(steps)} to {post.steps} steps to span "
                         f"{MIN_AUTOCORRELATION_TIMES} autocorrelation times")
    return FitResult(
        model=fitted, names=names, values=values, stderr=stderr, covariance=q_cov[:p, :p], correlation=corr,
        success=success, message=message, n_evaluations=problem.n_evaluations, reduced_chi_square=red,
        chi_square=chi2, degrees_of_freedom=dof, spectra=spectra, data=tuple(specs), data_paths=tuple(paths),
        masks=tuple(masks), noise=tuple(problem.sigmas), noise_source=noise_source,
        scales=tuple(fitted.measurements[j].scale for j in range(n_meas)),
        scale_stderr=tuple(derived["scale_err"]), baselines=tuple(m.baseline for m in fitted.measurements),
        baseline_stderr=tuple(derived["baseline_err"]), site_stderr=site_err, measurement_stderr=meas_err,
        warnings=tuple(warns), notes=tuple(notes), time_s=time.perf_counter() - t_start, starts=n_starts,
        starts_at_best=at_best, posterior=post, derived=dist_derived, minima=minima, curvature=tuple(curv),
        profile_intervals={n: (a, b) for n, (a, b, _, _) in profiles.items()})


def _profile_local(fun, jac, z0, lo, hi):
    from scipy.optimize import least_squares

    return least_squares(fun, np.clip(z0, lo, hi), jac=jac, bounds=(lo, hi), method="trf", x_scale="jac",
                         max_nfev=50 * (z0.size + 1))


def _any_auto_method(model: Model) -> bool:
    return any(m.method == "auto" for m in model.measurements)
