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

import functools
import math
import time
from dataclasses import replace

import numpy as np

from ..checks import check_memory, show, whole_number
from ..disorder.summary import distribution_summary
from ..engine.pulses import regime_note
from ..engine.site_lines import site_job
from ..engine.threads import kernel_threads
from ..model.values import FitSettings, FreeParameter, Model, ModelError, ParameterAddress
from ..simulator import SimulationCache, Simulator, as_model
from ..uncertainty import correlation, covariance_from_jacobian, standard_errors
from .curvature import curvature_report
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
from .posterior import DEFAULT_STEPS, posterior_messages, sample_posterior
from .problem import FitProblem
from .reported import NATURAL_RANGE, fitted_model, parameter_warnings, reported_values, stderr_tables
from .result import FitResult
from .search import global_search as global_search_
from .search import minima_report
from .symmetry import fold_vector, skew_switch_notes

__all__ = ["fit", "FitError", "DEFAULT_STEPS", "CONVERGED_CHI2", "check_sampler_memory", "sampler_memory_bytes"]

#: a start has reached the best fit when its chi-square is within this of the lowest
CONVERGED_CHI2 = 1.0


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


def _limit(user: int | None, search: int | None) -> int | None:
    """The evaluation limit of a run: the user's and the search's, the smaller (None: none)."""
    return search if user is None else (user if search is None else min(user, search))


def _run_from(problem: FitProblem, max_evaluations, x0):
    """One least-squares run of a global search on a copy of the problem (a task of ``map_starts``).

    Returns the optimiser's result and the evaluations it made.
    """
    problem.n_evaluations = 0
    sol = _least_squares(problem, x0, max_evaluations)
    return sol, problem.n_evaluations


def _detached(problem: FitProblem) -> FitProblem:
    """A copy of the problem to ship to another process: no progress subscriber, empty memos and kernel memory.

    The copy's kernel store reads the same lineshape library folder; its
    memory and the simulation memos start empty (they only save work), so
    that a task does not carry what is held here.
    """
    import pickle

    from ..disorder.store import KernelStore

    saved = (problem.progress, problem.kernel_store, problem.cache,
             [(s.progress, s.kernel_store, s.cache) for s in problem.sims])
    store = None if problem.kernel_store is None else KernelStore(problem.kernel_store.library)
    empty = SimulationCache(lines=problem.cache.lines.size, rendered=problem.cache.rendered.size)
    try:
        problem.progress, problem.kernel_store, problem.cache = None, store, None
        for s in problem.sims:
            s.progress, s.kernel_store, s.cache = None, store, None
        copy = pickle.loads(pickle.dumps(problem))
    finally:
        problem.progress, problem.kernel_store, problem.cache, sims = saved
        for s, (pg, ks, ca) in zip(problem.sims, sims):
            s.progress, s.kernel_store, s.cache = pg, ks, ca
    copy.cache = empty
    for s in copy.sims:
        s.cache = empty
    return copy


def _sobol_starts(lo, hi, n: int, seed: int) -> np.ndarray:
    from scipy.stats import qmc

    m = int(math.ceil(math.log2(max(2, n))))
    pts = qmc.Sobol(d=lo.size, scramble=True, seed=seed).random_base2(m)[:n]
    return qmc.scale(pts, lo, hi)


def _schema_span(p: FreeParameter) -> float:
    s = p.address.spec()
    return s.high - s.low


def solve(problem: FitProblem, x0, global_search: bool, starts, seed: int, max_evaluations, kernel_store=None,
          map_starts=None):
    """The least-squares solution of a fit's problem: one local run, or the global search.

    Parameters
    ----------
    problem : FitProblem
    x0 : numpy.ndarray
        The user's start.
    global_search : bool
    starts, seed, max_evaluations, kernel_store, map_starts
        As for :func:`run_global_search`.

    Returns
    -------
    tuple
        ``(solution, search, starts, starts_at_best, warnings)``: the scipy solution, the search outcome (None
        for a local run), the number of starts and how many reached the best, the search's warnings.
    """
    if not global_search:
        return _least_squares(problem, x0, max_evaluations), None, 1, 1, []
    search, warns = run_global_search(problem, x0, starts, seed, max_evaluations, kernel_store, map_starts)
    return search.best, search, search.starts, search.starts_at_best, warns


def run_global_search(problem: FitProblem, x0, starts, seed: int, max_evaluations, kernel_store=None,
                      map_starts=None):
    """The global search of a fit (1D, 2D or joint) on its problem: the warning on unbounded ranges, then the search.

    Parameters
    ----------
    problem : FitProblem
    x0 : numpy.ndarray
        The user's start.
    starts : int or None
        Least-squares starts, the user's included (None: the default).
    seed : int
    max_evaluations : int or None
        The user's limit on each least-squares run.
    kernel_store : KernelStore, optional
    map_starts : callable, optional
        As for :func:`fit`.

    Returns
    -------
    (powderspin.fitting.search.SearchOutcome, list of str)
        The outcome and the warnings.
    """
    free = problem.params
    warns = []
    unbounded = [p.name for p in free if (p.max - p.min) >= 0.5 * _schema_span(p)
                 and p.address.key not in NATURAL_RANGE and p.address.key != "euler_deg"]
    if unbounded:
        warns.append("global search over the whole allowed range of " + ", ".join(unbounded)
                     + ": give min and max to search where the value can physically be")
    map_runs = None
    if map_starts is not None:
        def map_runs(pts, cap):
            done = map_starts(functools.partial(_run_from, _detached(problem), _limit(max_evaluations, cap)), pts)
            problem.n_evaluations += sum(n for _, n in done)
            return [run for run, _ in done]

    search = global_search_(problem, x0, refinements=None if starts is None else int(starts) - 1, seed=seed,
                            local=lambda v, n: _least_squares(problem, v, _limit(max_evaluations, n)),
                            fold=lambda v: fold_vector(free, v, problem.lo, problem.hi, problem.model)[0],
                            kernel_store=kernel_store, map_runs=map_runs)
    return search, warns


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
        accept_mismatch: bool = False, map_starts=None, profile: str = "auto") -> FitResult:
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
        Without it, a headerless text file's unit is taken from the data
        where only one unit puts the data's signal among the model's lines
        (a note says which); otherwise the file is refused.
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
    accept_mismatch : bool, optional
        Fit data files whose own header states another nucleus, or a field
        (or reference frequency) 1 % or more away from the model's; refused
        by default (:class:`~powderspin.fitting.data.MismatchError`), since
        C_Q values fitted at the wrong field are wrong.
    kernel_store : powderspin.disorder.store.KernelStore, optional
        Where the kernels of sites with an EFG distribution are kept (default
        the store of the lineshape library folder).  Each evaluation of such
        a site is a weighted sum of kernels built once for the whole range of
        its free parameters (:mod:`powderspin.disorder`).
    map_starts : callable, optional
        How the least-squares runs of a global search are run:
        ``map_starts(function, starts)`` returns ``[function(x0) for x0 in
        starts]`` computed anywhere, e.g. on a Dask client
        (``powderspin fit --global --workers N``).  Each run gets its own copy
        of the problem (picklable; without progress reports), so the fitted
        values are the serial run's (``n_evaluations`` may differ by the few
        evaluations the serial runs find in each other's memo).  Default: one
        after the other, here.
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
        data that do not overlap the model or a region, too few points,
        constant data, or data whose tallest feature is no taller than
        noise alone reaches (sqrt(2 ln n) + 2 times the point-to-point noise
        for n points: no signal).
    powderspin.fitting.data.MismatchError
        A data file states another nucleus or field than the model (a
        ``FitError``; see ``accept_mismatch``).
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
                    posterior, walkers, steps, burn, progress, max_evaluations, kernel_store, accept_mismatch,
                    map_starts, profile, max_steps)


#: a noise region whose scatter exceeds the point-to-point noise this many times holds more than noise
NOISE_REGION_EXCESS = 3.0
#: most starts of a global search (each one is a whole least-squares run)
MAX_STARTS = 100_000


def _check_arguments(global_search, starts, seed, posterior, walkers, steps, burn, max_evaluations, axis):
    """The keyword arguments of :func:`fit`, checked as strictly as the command line checks its flags."""
    for name, v in (("global_search", global_search), ("posterior", posterior)):
        if not isinstance(v, (bool, np.bool_)):
            raise FitError(f"{name} must be True or False, got {show(v)}")
    out = {}
    out["starts"] = None if starts is None else whole_number(starts, "starts", FitError, low=1, high=MAX_STARTS)
    out["seed"] = whole_number(seed, "seed", FitError, low=0)
    out["walkers"] = None if walkers is None else whole_number(walkers, "walkers", FitError, low=2)
    out["steps"] = whole_number(steps, "steps", FitError, low=10)
    out["burn"] = None if burn is None else whole_number(burn, "burn", FitError, low=0)
    out["max_evaluations"] = (None if max_evaluations is None
                              else whole_number(max_evaluations, "max_evaluations", FitError, low=1))
    if axis is not None and axis not in ("ppm", "hz", "khz"):
        raise FitError(f"axis = {show(axis)} must be 'ppm', 'hz' or 'khz' (or None when the files name their axis)")
    return out


def sampler_memory_bytes(n_free: int, walkers: int | None, steps: int) -> float:
    """Memory a posterior sample holds: walkers x steps x (3 parameters + 1) doubles.

    The sampler keeps the chain (walkers x steps x parameters) and the log-probabilities (walkers x
    steps); the flattened kept chain and the copies the summaries make add about two chains more.

    Parameters
    ----------
    n_free : int
        Free parameters.
    walkers : int or None
        Walkers (None: the default ``max(16, 4 n_free)``).
    steps : int
        Steps per walker.

    Returns
    -------
    float
        Bytes.

    Examples
    --------
    >>> sampler_memory_bytes(3, 16, 2000) / 1e6
    2.56
    """
    nw = walkers if walkers is not None else max(16, 4 * n_free)
    return float(nw) * float(steps) * (3 * n_free + 1) * 8.0


def check_sampler_memory(n_free: int, walkers, steps, starts, names=None) -> None:
    """Refuse posterior and global-search sizes that cannot fit in memory, before any work.

    Parameters
    ----------
    n_free : int
    walkers, steps, starts : int or None
    names : dict, optional
        How to name the settings in the message: the command line passes its
        flags (``{"walkers": "--walkers", ...}``); the default names the
        keywords of :func:`fit`.

    Raises
    ------
    FitError
    """
    names = {"walkers": "walkers", "steps": "steps", "starts": "starts", **(names or {})}
    if walkers is not None or steps is not None:
        nw = walkers if walkers is not None else max(16, 4 * n_free)
        check_memory(sampler_memory_bytes(n_free, walkers, steps if steps is not None else DEFAULT_STEPS),
                     f"the posterior sample ({names['walkers']} {nw} x {names['steps']} {steps} x "
                     f"{n_free + 1} values)", FitError)
    if starts is not None:
        check_memory(float(starts) * (8 * n_free + 136),  # each start: its point (an array) and its chi-square
                     f"the global search ({names['starts']} {starts} with {n_free} free parameters)", FitError)


def _fit(model, data, regions, noise_region, baseline_order, axis, global_search, starts, seed, posterior,
         walkers, steps, burn, progress, max_evaluations, kernel_store=None, accept_mismatch=False,
         map_starts=None, profile="auto", max_steps=None) -> FitResult:
    t_start = time.perf_counter()
    args = _check_arguments(global_search, starts, seed, posterior, walkers, steps, burn, max_evaluations, axis)
    starts, seed, walkers, steps, burn, max_evaluations = (args[k] for k in ("starts", "seed", "walkers", "steps",
                                                                              "burn", "max_evaluations"))
    model = as_model(model, "fit")
    n_meas = len(model.measurements)

    def where(j):
        return "measurement" if n_meas == 1 else f"measurement {j + 1}"

    for j, m in enumerate(model.measurements):
        if m.is_two_dimensional:
            raise FitError(f"{where(j)}: experiment = {m.experiment!r}: 2D data are fitted with "
                           "powderspin.fit_two_dimensional (its result holds the 2D spectra; the command line "
                           "chooses it by itself); this fit takes 1D spectra only")
    free, notes = _free_parameters(model)
    check_sampler_memory(len(free), walkers if posterior else None, steps if posterior else None,
                         starts if global_search else None)
    warns: list[str] = []
    # -- settings: arguments override the model's [fit] table
    fs = model.fit
    if regions is not None and (isinstance(regions, (str, bytes)) or not hasattr(regions, "__iter__")):
        raise FitError(f"regions = {show(regions)} must be a list of (ppm, ppm) pairs, e.g. [(90, 40), (20, -10)]")
    regs = fs.regions if regions is None else tuple(check_region(r, f"region {i + 1}") for i, r in enumerate(regions))
    noise_reg = fs.noise_region if noise_region is None else check_region(noise_region, "noise region")
    order = fs.baseline_order if baseline_order is None else baseline_order
    try:
        settings = FitSettings(tuple(regs), noise_reg, order)  # validates the order
    except ModelError as e:  # a keyword of fit(): the fit's own error type
        raise FitError(str(e).removeprefix("fit: ")) from None
    order = settings.baseline_order
    # -- data
    specs, paths = [], []
    for j, item in enumerate(data_items(model, data)):
        sp, path, w, said = read_measured(item, model, j, axis, bool(accept_mismatch))
        specs.append(sp)
        paths.append(path)
        warns.extend(w)
        notes.extend(said)
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
    for j, y in enumerate(ys):
        if float(np.ptp(y)) == 0.0:
            raise FitError(f"{where(j)}: every data point is {y[0]:.6g}: the data hold no signal to fit")
    masks = [region_mask(ax.ppm, regs) for ax in axes]
    for j, mk in enumerate(masks):
        if mk.sum() >= MIN_NOISE_POINTS:  # the data themselves: a feature that noise alone would not make
            seen = ys[j][mk]
            pn = point_noise(seen)
            tallest = float(np.max(np.abs(seen - np.median(seen))))
            # the largest of n standard normal values is about sqrt(2 ln n) (H. Cramér, Mathematical Methods of
            # Statistics, Princeton 1946, the extreme-value limit; from memory); 2 more keeps noise from passing
            needed = math.sqrt(2.0 * math.log(seen.size)) + 2.0
            if pn > 0 and tallest < needed * pn:
                raise FitError(f"{where(j)}: no signal: the data's tallest feature in the fit regions is "
                               f"{tallest / pn:.2g} times the point-to-point noise, which noise alone reaches (a "
                               f"signal needs more than {needed:.2g}); the data cannot determine the values: check "
                               "the data file, its axis and the fit regions")
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
            pn = point_noise(ys[j])
            if pn > 0 and sigmas[-1] > NOISE_REGION_EXCESS * pn:
                warns.append(f"{where(j)}: the noise region [{noise_reg[0]:g}, {noise_reg[1]:g}] ppm varies "
                             f"{sigmas[-1] / pn:.3g} times more than the point-to-point noise of the data: it holds "
                             "signal or baseline structure, so the standard errors are about that many times too "
                             "large; choose a signal-free region")
        noise_source = "noise region"
    else:
        sigmas = [point_noise(y) for y in ys]
        noise_source = "residual"
    for j, s in enumerate(sigmas):
        if not s > 0:
            sigmas[j] = max(1e-12 * float(np.max(np.abs(ys[j]))), 1e-300)
    phase_free = [phase_refined(sp, ax) for sp, ax in zip(specs, axes)]
    n_lin = n_meas * (1 + (0 if order is None else order + 1)) + 2 * sum(phase_free)
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
    problem = FitProblem(base, free, axes, ys, masks, sigmas, methods, order, progress, kernel_store, cache,
                         phase_free=phase_free)
    x0 = np.array([p.start for p in free], dtype=float)
    # -- least squares (local or multi-start)
    sol, search, n_starts, at_best, search_warns = solve(problem, x0, global_search, starts, seed, max_evaluations,
                                                         kernel_store, map_starts)
    warns += search_warns
    x = sol.x
    success, message = _verdict(sol, max_evaluations)
    # -- without a noise region: sigma from the residual, measurements re-weighted
    if noise_source == "residual":
        for _ in range(3):
            e = problem.evaluate(x)
            new = []
            for j, c2 in enumerate(problem.chi2_by_measurement(e)):
                nj = int(masks[j].sum())
                share = nj - (1 + len(problem.basis[j]) + 2 * phase_free[j]) - len(free) * nj / n_points
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
    jfull, n_lin_each = problem.full_jacobian(x)
    cov = covariance_from_jacobian(jfull)
    p = len(free)
    if any(phase_free):  # the phase columns come last: the others' covariance (phase uncertainty included)
        keep = p + sum(n_lin_each)
        phase_err = np.sqrt(np.clip(np.diag(cov)[keep:], 0.0, None))
        cov = cov[:keep, :keep]
        specs = _record_phase_refinement(problem, e, specs, phase_free, phase_err, notes, where)
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
    curv, profiles, curv_warns = curvature_report(problem, x, cov[:p, :p], free, chi2, profile, _profile_local)
    warns += curv_warns
    minima = ()
    if search is not None:
        minima, search_notes, search_warns = minima_report(search, problem, names, n_starts, at_best)
        notes += search_notes
        warns += search_warns
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
    excitation = excitation_report(fitted, spectra, site_err)
    for j, meas in enumerate(fitted.measurements):
        if meas.pulse_sequence != "ideal":
            text = regime_note(fitted.nucleus.spin, site_job(fitted.sites[0], meas, fitted.nucleus,
                                                             "perturbation").pulse)
            if text:
                warns.append(f"{where(j)}: {text}")
    post = None
    if posterior:
        post = sample_posterior(problem, x, free, cov[:p, :p], walkers, steps, burn, seed, progress, max_steps)
        post_warns, post_notes = posterior_messages(post, steps)
        warns += post_warns
        notes += post_notes
    return FitResult(
        model=fitted, names=names, values=values, stderr=stderr, covariance=q_cov[:p, :p], correlation=corr,
        success=success, message=message, n_evaluations=problem.n_evaluations, reduced_chi_square=red,
        chi_square=chi2, degrees_of_freedom=dof, spectra=spectra, data=tuple(specs), data_paths=tuple(paths),
        masks=tuple(masks), noise=tuple(problem.sigmas), noise_source=noise_source,
        scales=tuple(fitted.measurements[j].scale for j in range(n_meas)),
        scale_stderr=tuple(derived["scale_err"]), baselines=tuple(m.baseline for m in fitted.measurements),
        baseline_stderr=tuple(derived["baseline_err"]), site_stderr=site_err, measurement_stderr=meas_err,
        warnings=tuple(warns), notes=tuple(notes), time_s=time.perf_counter() - t_start, starts=n_starts,
        starts_at_best=at_best, posterior=post, derived=dist_derived, excitation=excitation, minima=minima,
        curvature=tuple(curv), profile_intervals={n: (a, b) for n, (a, b, _, _) in profiles.items()})


def phase_refined(spectrum, axis) -> bool:
    """True when a fit refines the residual phase of these data (:mod:`powderspin.fitting.problem` notes).

    Data processed by :func:`powderspin.processing.process` with automatic
    phasing (``phase = "auto"`` or ``"entropy"``) of a FID or a half echo
    (causal signals: a whole echo's phase error only scales its absorption),
    not an echo train, with ``fit_phase = "refine"`` (the default), on the
    whole window of the transform.

    Parameters
    ----------
    spectrum : MeasuredSpectrum
    axis : Axis
        The data axis of the fit.

    Returns
    -------
    bool

    Examples
    --------
    >>> from powderspin.io.spectra import MeasuredSpectrum
    >>> import numpy as np
    >>> s = MeasuredSpectrum(hz=np.arange(8.0), ppm=np.arange(8.0) * 1e-2, intensity=np.ones(8), imag=None,
    ...                      nu_ref_hz=1e8, source="memory")
    >>> phase_refined(s, None)          # a spectrum that was not processed here
    False
    """
    import json

    text = (getattr(spectrum, "metadata", None) or {}).get("processing")
    if not text or isinstance(axis, tuple):
        return False
    rec = json.loads(text)
    if "combination" in rec or rec.get("options", {}).get("fit_phase", "refine") != "refine":
        return False
    if rec.get("phase", {}).get("mode") not in ("auto", "entropy"):
        return False
    if rec.get("echo", {}).get("mode") == "whole" or "echo_train" in rec:
        return False
    points = rec.get("transform", {}).get("points")
    return points is not None and axis is not None and int(points) == axis.points


def _record_phase_refinement(problem, e, specs, phase_free, phase_err, notes, where) -> list:
    """Add the phase the fit refined to each spectrum's processing record and say it in the notes."""
    import json

    out = list(specs)
    found = problem.phase_correction_deg(e)
    k = 0
    for j, corr in enumerate(found):
        if corr is None:
            continue
        # the columns' coefficients are c phi0 and c phi1 (c the scale): errors of the angles, to first order
        c0 = abs(float(e.coefs[j][0])) or 1.0
        err0, err1 = (math.degrees(v / c0) for v in phase_err[k:k + 2])
        k += 2
        rec = json.loads(out[j].metadata["processing"])
        rec["phase"]["refined_by_fit"] = {"phase0_deg": corr[0], "phase0_stderr_deg": err0, "phase1_deg": corr[1],
                                          "phase1_stderr_deg": err1}
        meta = dict(out[j].metadata)
        changes = {}
        if out[j].imag is not None:  # the result's data carry the refined phase, so data - fit is the residual
            n = out[j].intensity.size
            x = (np.arange(n) - n // 2) / n
            z = (np.asarray(out[j].intensity) + 1j * np.asarray(out[j].imag)) \
                * np.exp(1j * np.deg2rad(corr[0] + corr[1] * x))
            changes = {"intensity": z.real.copy(), "imag": z.imag.copy()}
            rec["phase"]["refined_by_fit"]["applied_to_the_result_data"] = True
        meta["processing"] = json.dumps(rec, separators=(",", ":"))
        out[j] = replace(out[j], metadata=meta, **changes)
        notes.append(f"{where(j)}: the automatic phase was refined with the fit (zero order {corr[0]:+.3g} +- "
                     f"{err0:.2g} deg, first order {corr[1]:+.3g} +- {err1:.2g} deg; their uncertainty is in the "
                     "standard errors); fit_phase = \"keep\" in [processing] takes the processed phase as exact")
    return out


def excitation_report(fitted: Model, spectra, site_err) -> dict:
    """Populations corrected for excitation, beside what an ideal-excitation reading would have given.

    With the pulses modelled (``pulse_sequence`` "single" or "echo"), a site's fitted weight is its population:
    the simulation already scales each site by its excited fraction (its observed intensity relative to a hard
    90 degree pulse).  The apparent population is what the integrated intensities say,
    ``w_i f_i / sum_j w_j f_j``; its error follows from the weights' standard errors by the delta method
    (correlations between weights neglected).

    Parameters
    ----------
    fitted : Model
        The fitted model (weights normalised).
    spectra : sequence of Spectrum
        The fitted spectra (their metadata carry the excited fractions).
    site_err : sequence of Mapping
        Standard errors per site.

    Returns
    -------
    dict
        Empty when no measurement models its pulses; else, per measurement index (as text), per site label:
        ``excited_fraction``, ``population``, ``population_stderr``, ``apparent_population``,
        ``apparent_population_stderr``.

    References
    ----------
    A. Samoson, E. Lippmaa, Phys. Rev. B 28 (1983) 6565 (excitation of quadrupolar nuclei) (from memory).

    Examples
    --------
    See ``tests/fitting/test_fit_pulses.py``.
    """
    out: dict = {}
    w = np.array([s.weight for s in fitted.sites], dtype=float)
    w_sum = w.sum()
    if w_sum <= 0:
        return out
    pop = w / w_sum
    err = np.array([float(e.get("weight", 0.0)) if e else 0.0 for e in site_err]) / w_sum
    for j, spec in enumerate(spectra):
        exc = spec.metadata.get("excitation")
        if not exc:
            continue
        f = np.array([exc["excited_fraction"].get(s.label, 1.0) for s in fitted.sites], dtype=float)
        tot = float((pop * f).sum())
        if tot <= 0:
            continue
        app = pop * f / tot
        # d app_i / d pop_k = f_i delta_ik / tot - pop_i f_i f_k / tot^2
        jac = np.diag(f / tot) - np.outer(pop * f, f) / tot ** 2
        app_err = np.sqrt((jac ** 2) @ (err ** 2))
        out[str(j)] = {s.label: {"excited_fraction": float(f[i]), "population": float(pop[i]),
                                 "population_stderr": float(err[i]), "apparent_population": float(app[i]),
                                 "apparent_population_stderr": float(app_err[i])}
                       for i, s in enumerate(fitted.sites)}
    return out


def _profile_local(fun, jac, z0, lo, hi):
    from scipy.optimize import least_squares

    return least_squares(fun, np.clip(z0, lo, hi), jac=jac, bounds=(lo, hi), method="trf", x_scale="jac",
                         max_nfev=50 * (z0.size + 1))


def _any_auto_method(model: Model) -> bool:
    return any(m.method == "auto" for m in model.measurements)
