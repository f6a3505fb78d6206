"""Global search of a fit: where the starts come from, and every distinct minimum that fits about as well.

A local least-squares fit finds the minimum of chi-square nearest its start.
Powder patterns have several: a quadrupolar pattern with the wrong C_Q and
eta can match the main edges of the right one, and with shift anisotropy at
a general relative orientation there are many more.  :func:`global_search`
looks for the lowest minimum in three steps.

1. **Candidates.**  Where it applies (one measurement, static or infinitely
   fast spinning, the central transition of half-integer spins, sites without
   shift anisotropy or distributions, free parameters among the shifts, C_Q,
   eta_Q, weights and widths) each site's (C_Q, eta_Q) range is covered by a
   grid of line-shape kernels from the lineshape library
   (:class:`powderspin.disorder.site.DistributedSite`, the scaled path: one
   unit pattern per eta, exact at every C_Q), translated over a grid of
   isotropic shifts and broadened with the start's widths.  One
   non-negative least-squares problem over all kernels of all sites at once
   (C. L. Lawson, R. J. Hanson, *Solving Least Squares Problems*, Prentice-
   Hall 1974, ch. 23; :func:`scipy.optimize.nnls`) says which (C_Q, eta,
   shift) cells carry the intensity; the strongest distinct cells of each
   site are the candidates.  Elsewhere, scipy's differential evolution
   (R. Storn, K. Price, J. Global Optim. 11 (1997) 341) runs with a stated
   budget (:data:`DE_POPULATION_PER_PARAMETER` members per free parameter,
   :data:`DE_GENERATIONS` generations, Sobol initial population, the user's
   start as a member); half the candidates are its best distinct members,
   the other half a scrambled Sobol set over the same box (diversity: the
   evolved population gathers in the widest valleys).  Free Euler angles are
   searched in their fundamental domain (:mod:`powderspin.fitting.symmetry`).
2. **Refinement.**  Local least squares, to convergence, from the user's
   start (always) and from every candidate; the number of candidates grows
   with the number of free parameters (``max(8, 3 p)`` by default).  (Short
   screening runs that finish only the most promising candidates were tried
   and lost the lowest minimum more often on the hard static cases.)
3. **Minima.**  The refined solutions are folded to one representative of
   their symmetry class (:mod:`powderspin.fitting.symmetry`) and grouped: two
   solutions are one minimum when every parameter agrees within
   :data:`SAME_MINIMUM_FRACTION` of its range, or when chi-square on the
   straight path between them (at a quarter, half and three quarters) never
   rises more than :data:`SAME_MINIMUM_CHI2` above the higher of the two (no
   barrier: one valley, e.g. along a poorly determined direction).  Every
   minimum within
   :data:`MINIMA_MARGIN` of the lowest is reported with its values.
4. **Restarts across the skew switch.**  The Euler angles of a shift tensor
   refer to its Haeberlen axes, which jump at skew 0, so a local fit cannot
   cross skew = 0 (:func:`switch_restarts`).  From each of the
   :data:`SWITCH_MINIMA` lowest minima, every free skew (or shift
   anisotropy) is reversed and a local fit run from there; repeated from
   the new lowest minima while that lowers the best chi-square (at most
   :data:`SWITCH_ROUNDS` rounds), then the minima are grouped again.  On the
   hard static cases of ``tests/fitting/test_search.py`` the lowest minimum
   was a near-degenerate twin, skew -0.6 beside the truth's +0.3 at chi-square
   +0.4, that no candidate reached and the restart finds.

References
----------
.. [1] R. Storn, K. Price, J. Global Optim. 11 (1997) 341 (differential
   evolution).
.. [2] C. L. Lawson, R. J. Hanson, Solving Least Squares Problems
   (Prentice-Hall, 1974), ch. 23 (non-negative least squares).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ..model.values import Model, selected_transitions
from .data import FitError
from .problem import FitProblem

__all__ = ["global_search", "SearchOutcome", "Minimum", "MINIMA_MARGIN", "SAME_MINIMUM_CHI2",
           "SAME_MINIMUM_FRACTION", "DE_POPULATION_PER_PARAMETER", "DE_GENERATIONS", "default_refinements",
           "switch_restarts", "run_evaluations"]

#: minima whose chi-square exceeds the lowest by less than this are reported (a chi-square difference of 9 is the
#: three-standard-error contour of one parameter: such a minimum cannot be ruled out by the data; common practice)
MINIMA_MARGIN = 9.0
#: two refined solutions are one minimum when chi-square between them rises less than this above the higher ...
SAME_MINIMUM_CHI2 = 0.5
#: ... or when every parameter agrees within this fraction of its range (after folding equivalent values)
SAME_MINIMUM_FRACTION = 0.01
#: differential evolution: population members per free parameter
DE_POPULATION_PER_PARAMETER = 10
#: differential evolution: generations (the budget is members x (generations + 1) evaluations)
DE_GENERATIONS = 5
#: share of the candidates taken from a scrambled Sobol set instead of the evolved population (diversity)
SOBOL_SHARE = 0.5
#: a refinement's first run takes at most this many residual evaluations per free parameter (plus one), see
#: run_evaluations
RUN_EVALUATIONS_PER_PARAMETER = 10
#: restarts across the skew switch: from this many of the lowest distinct minima ...
SWITCH_MINIMA = 3
#: ... repeated (from the new lowest minima) while a round lowers the best chi-square, at most this many rounds
SWITCH_ROUNDS = 2
#: library scan: C_Q nodes (uniform in C_Q^2, the pattern's width), eta nodes, at most this many shift nodes
SCAN_CQ_NODES = 24
SCAN_ETA_NODES = 6
SCAN_MAX_SHIFT_NODES = 32

_SCAN_SITE_KEYS = frozenset({"shift_ppm", "cq_mhz", "eta_q", "weight", "lorentz_hz", "gauss_hz"})
_SCAN_MEAS_KEYS = frozenset({"lorentz_hz", "gauss_hz"})


@dataclass(frozen=True)
class Minimum:
    """One distinct minimum found by a global search.

    Attributes
    ----------
    chi_square : float
        Its chi-square (at the noise levels of the search).
    values : dict
        Free parameter name -> value (folded to the documented domain).
    starts : int
        How many refined starts ended in it.
    """

    chi_square: float
    values: dict
    starts: int


@dataclass(frozen=True)
class SearchOutcome:
    """What :func:`global_search` found.

    Attributes
    ----------
    best : scipy.optimize.OptimizeResult
        The least-squares run with the lowest chi-square.
    runs : tuple
        Every refined run (the user's start first).
    minima : tuple of Minimum
        Distinct minima within :data:`MINIMA_MARGIN` of the lowest, lowest first.
    starts : int
        Refined starts (the user's and the candidates).
    starts_at_best : int
        Runs (starts and restarts) that ended in the best minimum.
    method : str
        How the candidates were found, with the budget, in words.
    restarts : int
        Further least-squares runs from the lowest minima across the skew
        switch (:func:`switch_restarts`), besides the ``starts``; their runs
        are in ``runs`` and count in ``starts_at_best``.
    """

    best: object
    runs: tuple
    minima: tuple
    starts: int
    starts_at_best: int
    method: str
    restarts: int = 0


def run_evaluations(n_free: int) -> int:
    """Residual evaluations a global search's refinement may take before it is judged: ``10 (p + 1)``.

    Counted as :func:`scipy.optimize.least_squares` counts them (``max_nfev``:
    residuals, not the p further spectra each Jacobian costs).  Runs that
    converge take a few dozen on the hard static cases (eight or nine free
    parameters); a few wander for hundreds into poor minima.  A run that
    reaches the limit is continued only when it is already within
    :data:`MINIMA_MARGIN` of the lowest converged run.

    Parameters
    ----------
    n_free : int

    Returns
    -------
    int

    Examples
    --------
    >>> run_evaluations(9)
    100
    """
    return RUN_EVALUATIONS_PER_PARAMETER * (int(n_free) + 1)


def default_refinements(n_free: int) -> int:
    """Candidates refined by a global search: grows with the free parameters, ``max(8, 3 p)``.

    Parameters
    ----------
    n_free : int

    Returns
    -------
    int

    Examples
    --------
    >>> default_refinements(2), default_refinements(9)
    (8, 27)
    """
    return max(8, 3 * int(n_free))


def switch_restarts(problem: FitProblem, x) -> list:
    """Restarts of a minimum across the skew switch: each free skew (or anisotropy) reversed, the rest kept.

    The Euler angles of a shift tensor refer to its Haeberlen axes, whose z
    axis is the principal axis furthest from the isotropic value: d33 for
    skew > 0, d11 for skew < 0 (U. Haeberlen, *High Resolution NMR in
    Solids*, Adv. Magn. Reson. Suppl. 1, 1976; J. Mason, Solid State Nucl.
    Magn. Reson. 2 (1993) 285).  As the skew passes 0 the axes the angles
    refer to jump, so chi-square jumps there too and a local fit started on
    one side stays on it.  With the shift anisotropy beside a quadrupolar
    coupling at a general orientation, a minimum on the other side can fit
    as well or better; reversing the skew at the same span (the anisotropic
    part of the principal values reversed: in the Haeberlen parameters
    ``aniso -> -aniso`` at the same eta) with the angles kept starts a local
    fit there.

    Parameters
    ----------
    problem : FitProblem
    x : numpy.ndarray
        A minimum (free-parameter values).

    Returns
    -------
    list of numpy.ndarray
        One restart per free skew or ``aniso_ppm`` whose reversed value lies
        within its bounds (none at skew 0).

    Examples
    --------
    See ``tests/fitting/test_search.py``.
    """
    out = []
    for k, fp in enumerate(problem.params):
        a = fp.address
        if a.table != "site" or a.item is not None or a.key not in ("skew", "aniso_ppm"):
            continue
        v = -float(x[k])
        if abs(v) > 1e-9 * (problem.hi[k] - problem.lo[k]) and problem.lo[k] <= v <= problem.hi[k]:
            y = np.array(x, dtype=float)
            y[k] = v
            out.append(y)
    return out


# ---------------------------------------------------------------------------
# the library scan


def scan_applies(model: Model, free) -> bool:
    """Whether the kernel-library scan can propose starts for this model (see the module notes).

    Parameters
    ----------
    model : Model
    free : sequence of FreeParameter

    Returns
    -------
    bool
    """
    if len(model.measurements) != 1 or model.tied:
        return False
    meas = model.measurements[0]
    if meas.is_two_dimensional:  # the library holds 1D lineshapes
        return False
    if not (meas.is_static or meas.is_infinite_rate) or meas.method == "exact":
        return False
    spin = model.nucleus.spin
    if spin == 0.5 or spin != math.floor(spin) + 0.5:
        return False
    try:
        if selected_transitions(spin, meas.transitions) != (0.5,):
            return False
    except ValueError:
        return False
    for s in model.sites:
        if s.czjzek_sigma_mhz > 0 or s.cq_distribution_mhz is not None or s.eta_distribution is not None:
            return False
        if not s.shift.is_isotropic:
            return False
    for p in free:
        a = p.address
        if a.item is not None:
            return False
        if a.table == "site" and a.key not in _SCAN_SITE_KEYS:
            return False
        if a.table != "site" and a.key not in _SCAN_MEAS_KEYS:
            return False
    return any(p.address.table == "site" and p.address.key in ("cq_mhz", "eta_q") for p in free)


def _range(model: Model, free, index: int, key: str, value: float) -> tuple[float, float]:
    for p in free:
        if p.address.table == "site" and p.address.index == index and p.address.key == key:
            return float(p.min), float(p.max)
    return float(value), float(value)


def _translation_matrix(kset, axis, shift_hz: float):
    """Sparse matrix sharing the kernel points, translated by ``shift_hz``, onto the output axis (hat sharing)."""
    from scipy.sparse import csr_matrix

    q = kset.oversampling
    d = (kset.first_edge_hz + shift_hz - axis.left_edge_hz) / kset.step_hz
    p = (d + np.arange(kset.points) + 0.5) / q - 0.5
    k0 = np.floor(p)
    frac = p - k0
    k0 = k0.astype(np.int64)
    rows, cols, vals = [], [], []
    m = np.arange(kset.points)
    for k, share in ((k0, 1.0 - frac), (k0 + 1, frac)):
        ok = (k >= 0) & (k < axis.points)
        rows.append(m[ok])
        cols.append(k[ok])
        vals.append(share[ok])
    return csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                      shape=(kset.points, axis.points))


def _scan_candidates(problem: FitProblem, x0, n_wanted: int, kernel_store):
    """Starts from one non-negative least-squares problem over the kernels of every site."""
    from scipy.optimize import nnls

    from ..disorder.site import DistributedSite
    from ..disorder.store import KernelStore
    from ..engine.lineshape import broaden

    free = problem.params
    model = problem.model_at(x0)
    meas = model.measurements[0]
    axis = problem.axes[0]
    mk = problem.masks[0]
    sigma = problem.sigmas[0]
    nu_ref = model.nucleus.larmor_hz(meas.field_tesla)
    store = kernel_store if kernel_store is not None else KernelStore(None)
    columns, info = [], []
    for i, site in enumerate(model.sites):
        c_lo, c_hi = _range(model, free, i, "cq_mhz", site.cq_mhz)
        c_lo, c_hi = sorted((abs(c_lo), abs(c_hi))) if c_lo * c_hi >= 0 else (0.0, max(abs(c_lo), abs(c_hi)))
        e_lo, e_hi = _range(model, free, i, "eta_q", site.eta_q)
        s_lo, s_hi = _range(model, free, i, "shift_ppm", site.shift.iso_ppm)
        cqs = np.sqrt(np.linspace(c_lo ** 2, c_hi ** 2, SCAN_CQ_NODES)) if c_hi > c_lo else np.array([c_lo])
        cqs = np.unique(np.maximum(cqs, 1e-3))
        etas = np.linspace(e_lo, e_hi, SCAN_ETA_NODES) if e_hi > e_lo else np.array([e_lo])
        lorentz = site.lorentz_hz + meas.lorentz_hz
        gauss = math.hypot(site.gauss_hz, meas.gauss_hz)
        fwhm = max(lorentz + gauss, axis.dx_hz)
        n_shift = 1 if s_hi <= s_lo else int(min(SCAN_MAX_SHIFT_NODES,
                                                 max(2, math.ceil((s_hi - s_lo) * nu_ref * 1e-6 / (0.5 * fwhm)) + 1)))
        shifts = np.linspace(s_lo, s_hi, n_shift) if n_shift > 1 else np.array([s_lo])
        tmpl = replace(site, label=site.label, weight=1.0, cq_mhz=0.0, eta_q=0.0, lorentz_hz=0.0, gauss_hz=0.0,
                       cq_distribution_mhz=(tuple(map(float, cqs)), (1.0,) * cqs.size),
                       eta_distribution=(tuple(map(float, etas)), (1.0,) * etas.size))
        lo_ppm, hi_ppm = float(shifts.min()), float(shifts.max())
        scan_model = Model(model.nucleus, (replace(meas, lorentz_hz=0.0, gauss_hz=0.0),),
                           (replace(tmpl, shift=replace(site.shift, iso_ppm=0.5 * (lo_ppm + hi_ppm))),),
                           source=model.source)
        ds = DistributedSite(scan_model, 0, 0)
        ds.shift_range_hz = lambda lo=lo_ppm, hi=hi_ppm, off=meas.shift_offset_ppm: (
            (lo + off) * nu_ref * 1e-6, (hi + off) * nu_ref * 1e-6)
        kset = ds.kernels(axis, store)
        k, mm = kset.grid.shape
        for si, sh in enumerate(shifts):
            t = kset.matrix @ _translation_matrix(kset, axis, (sh + meas.shift_offset_ppm) * nu_ref * 1e-6)
            t = np.asarray(t) / axis.dx_ppm
            t = broaden(t, axis.dx_hz, lorentz, gauss) if (lorentz > 0 or gauss > 0) else t
            for row in range(t.shape[0]):
                j, ic = divmod(row, k)
                columns.append(t[row, mk] / sigma)
                info.append((i, float(kset.grid.cq_mhz[ic]), float(kset.grid.eta[j]), float(sh), ic, j, si))
    if not columns:
        return [], "no kernels"
    a = np.array(columns).T
    lin = [b / sigma for b in problem.basis[0]]
    if lin:
        a = np.hstack([a] + [np.column_stack([u, -u]) for u in lin])
    b = problem.ys[0][mk] / sigma
    norms = np.linalg.norm(a, axis=0)
    norms[norms == 0] = 1.0
    coef, _ = nnls(a / norms, b, maxiter=50 * a.shape[1])
    coef = coef / norms
    coef = coef[:len(info)]
    n_sites = len(model.sites)
    per_site = []
    for i in range(n_sites):
        idx = [c for c in range(len(info)) if info[c][0] == i and coef[c] > 0]
        idx.sort(key=lambda c: -coef[c])
        per_site.append(idx)
    site_total = np.array([sum(coef[c] for c in per_site[i]) for i in range(n_sites)])
    starts = []
    used = set()
    for r in range(n_wanted):
        x = np.array(x0, dtype=float)
        chosen = []
        for i in range(n_sites):
            picked = None
            rank = 0
            for c in per_site[i]:
                ci = info[c]
                near = any(abs(ci[4] - o[4]) <= 1 and abs(ci[5] - o[5]) <= 1 and abs(ci[6] - o[6]) <= 1
                           for o in chosen)
                if near:
                    continue
                if rank == r or (rank > r and picked is None):
                    picked = c
                    break
                rank += 1
            if picked is None and per_site[i]:
                picked = per_site[i][0]
            if picked is None:
                continue
            chosen.append(info[picked])
            _, cq, eta, sh, *_ = info[picked]
            for kk, p in enumerate(free):
                a_ = p.address
                if a_.table != "site" or a_.index != i:
                    continue
                if a_.key == "cq_mhz":
                    x[kk] = math.copysign(cq, p.start if p.start != 0 else 1.0)
                elif a_.key == "eta_q":
                    x[kk] = eta
                elif a_.key == "shift_ppm":
                    x[kk] = sh
        fixed_w = [i for i in range(n_sites) if not any(p.address.table == "site" and p.address.index == i
                                                        and p.address.key == "weight" for p in free)]
        if fixed_w and site_total[fixed_w[0]] > 0:
            ref = fixed_w[0]
            for kk, p in enumerate(free):
                a_ = p.address
                if a_.table == "site" and a_.key == "weight":
                    x[kk] = model.sites[ref].weight * site_total[a_.index] / site_total[ref]
        x = np.clip(x, problem.lo, problem.hi)
        key = tuple(np.round(x, 9))
        if key not in used:
            used.add(key)
            starts.append(x)
    method = (f"kernel-library scan: non-negative least squares over {len(info)} kernels "
              f"({SCAN_CQ_NODES} C_Q x {SCAN_ETA_NODES} eta nodes x up to {SCAN_MAX_SHIFT_NODES} shifts per site)")
    return starts, method


# ---------------------------------------------------------------------------
# differential evolution


def _search_box(problem: FitProblem):
    """Bounds of the candidate search: free Euler angles cut to the fundamental domain where their ranges hold it."""
    lo, hi = problem.lo.copy(), problem.hi.copy()
    by_site: dict = {}
    for k, fp in enumerate(problem.params):
        a = fp.address
        if a.table == "site" and a.key == "euler_deg" and a.item is not None:
            by_site.setdefault(a.index, {})[a.item] = k
    top = {0: 90.0, 1: 90.0, 2: 180.0}
    for items in by_site.values():
        if len(items) == 3 and all(lo[k] <= 0.0 and hi[k] >= top[i] for i, k in items.items()):
            for i, k in items.items():
                lo[k], hi[k] = 0.0, top[i]
    return lo, hi


def _de_candidates(problem: FitProblem, x0, n_wanted: int, seed: int, budget: int | None):
    from scipy.optimize import differential_evolution

    p = x0.size
    pop = DE_POPULATION_PER_PARAMETER
    gens = DE_GENERATIONS
    if budget is not None:
        gens = max(1, int(budget) // (pop * p) - 1)

    def cost(theta):
        try:
            r = problem.residual(theta)
        except FitError:
            return 1e300
        return float(r @ r)

    lo, hi = _search_box(problem)
    res = differential_evolution(cost, list(zip(lo, hi)), popsize=pop, maxiter=gens, init="sobol",
                                 seed=seed, polish=False, tol=0.0, updating="immediate",
                                 x0=np.clip(x0, lo, hi))
    order = np.argsort(res.population_energies)
    span = np.where(hi > lo, hi - lo, 1.0)
    picked: list = []
    n_de = n_wanted - int(n_wanted * SOBOL_SHARE)
    for k in order:
        xk = res.population[k]
        if all(np.max(np.abs(xk - q) / span) > 0.05 for q in picked):
            picked.append(xk)
        if len(picked) >= n_de:
            break
    if n_wanted > len(picked):  # diversity: the rest uniformly spread (scrambled Sobol) over the search box
        from scipy.stats import qmc

        n_s = n_wanted - len(picked)
        pts = qmc.Sobol(d=p, scramble=True, seed=seed + 1).random_base2(max(1, math.ceil(math.log2(n_s))))[:n_s]
        picked += list(qmc.scale(pts, lo, np.where(hi > lo, hi, lo + 1e-12)))
    cut = " (Euler angles searched in their fundamental domain)" if np.any(hi < problem.hi) else ""
    method = (f"differential evolution: {res.nfev} evaluations (population {pop * p} = {pop} per free parameter, "
              f"{gens} generations, Sobol initial population with the start as a member){cut}; its "
              f"{n_de} best distinct members and {len(picked) - n_de} Sobol points")
    return picked, method


# ---------------------------------------------------------------------------


def global_search(problem: FitProblem, x0, *, refinements: int | None, seed: int, local, fold=None,
                  kernel_store=None, budget: int | None = None, map_runs=None) -> SearchOutcome:
    """Find the lowest minimum: candidates (library scan or differential evolution), local refinements, minima.

    Parameters
    ----------
    problem : FitProblem
    x0 : numpy.ndarray
        The user's start (always refined).
    refinements : int or None
        Local refinements besides the user's start (default
        :func:`default_refinements`).
    seed : int
        Seed of the differential evolution.
    local : callable
        ``local(x, max_evaluations) -> OptimizeResult``: one local
        least-squares run (``None``: to convergence).  Each start is first
        run with at most :func:`run_evaluations` evaluations; the runs that
        stop there (optimiser status 0) are continued to convergence when
        their chi-square is within :data:`MINIMA_MARGIN` of the lowest
        converged run, and otherwise dropped as wanderers far above it.
    fold : callable, optional
        ``fold(x) -> x``: the representative of x's symmetry class.
    kernel_store : KernelStore, optional
    budget : int, optional
        Evaluations of the differential evolution (default
        ``DE_POPULATION_PER_PARAMETER * p * (DE_GENERATIONS + 1)``).
    map_runs : callable, optional
        ``map_runs(starts, max_evaluations) -> [OptimizeResult, ...]``: the
        local refinements computed elsewhere (e.g. on a Dask client), each
        with that limit (None: to convergence); the same runs as ``local``
        would make, in order.

    Returns
    -------
    SearchOutcome
    """
    x0 = np.clip(np.asarray(x0, dtype=float), problem.lo, problem.hi)
    p = x0.size
    n_ref = default_refinements(p) if refinements is None else int(refinements)
    if n_ref < 0:
        raise FitError(f"starts = {n_ref + 1} must be at least 1")
    method = "the start only"
    cands: list = []
    if n_ref == 0:
        pass
    elif scan_applies(problem.model, problem.params):
        try:
            cands, method = _scan_candidates(problem, x0, n_ref, kernel_store)
        except Exception as e:  # a scan that cannot be built falls back to differential evolution
            if isinstance(e, KeyboardInterrupt):
                raise
            cands, method = [], None
    if not cands and n_ref > 0:
        cands, method = _de_candidates(problem, x0, n_ref, seed, budget)
    elif 0 < len(cands) < n_ref:  # the scan found fewer distinct cells than starts wanted: Sobol points fill up
        from scipy.stats import qmc

        lo, hi = _search_box(problem)
        n_s = n_ref - len(cands)
        pts = qmc.Sobol(d=p, scramble=True, seed=seed).random_base2(max(1, math.ceil(math.log2(n_s))))[:n_s]
        cands = list(cands) + list(qmc.scale(pts, lo, np.where(hi > lo, hi, lo + 1e-12)))
        method += f", and {n_s} Sobol points"
    starts = [x0] + list(cands[:n_ref])

    cap = run_evaluations(p)

    def run_all(points):
        if map_runs is not None and len(points) > 1:
            return list(map_runs(points, cap))
        return [local(c, cap) for c in points]

    def finish(all_runs):
        """Runs stopped by the cap that could still reach a minimum within the margin are run to convergence."""
        done = [r.cost for r in all_runs if r.status != 0]
        capped = [k for k, r in enumerate(all_runs) if r.status == 0]
        if not done:  # every run stopped at the limit: the lowest is continued
            capped = sorted(capped, key=lambda k: all_runs[k].cost)[:1]
        top = 2.0 * min(done) + MINIMA_MARGIN if done else math.inf
        todo = [k for k in capped if 2.0 * all_runs[k].cost <= top]
        if todo:
            for k, r in zip(todo, run_all_unbounded([all_runs[k].x for k in todo])):
                all_runs[k] = r
        return all_runs

    def run_all_unbounded(points):
        if map_runs is not None and len(points) > 1:
            return list(map_runs(points, None))
        return [local(c, None) for c in points]

    runs = finish(run_all(starts))
    n_starts = len(runs)
    fold = fold or (lambda v: v)
    span = np.where(problem.hi > problem.lo, problem.hi - problem.lo, 1.0)

    def chi2(v):
        try:
            r = problem.residual(v)
        except FitError:
            return math.inf
        return float(r @ r)

    def same_basin(xa, ca, xb, cb) -> bool:
        if np.max(np.abs(xa - xb) / span) <= SAME_MINIMUM_FRACTION:
            return True
        top = max(ca, cb) + SAME_MINIMUM_CHI2
        return all(chi2(xa + t * (xb - xa)) <= top for t in (0.25, 0.5, 0.75))

    def grouped(all_runs):
        chi = np.array([2.0 * r.cost for r in all_runs])
        groups: list = []  # [chi2, x, count]
        for k in np.argsort(chi, kind="stable"):
            xf = np.clip(np.asarray(fold(all_runs[k].x), dtype=float), problem.lo, problem.hi)
            for g in groups:
                if same_basin(xf, chi[k], g[1], g[0]):
                    g[2] += 1
                    break
            else:
                groups.append([float(chi[k]), xf, 1])
        return groups, chi

    # restarts across the skew switch from the lowest minima (local least squares cannot cross it)
    groups, chi = grouped(runs)
    n_restarts = 0
    tried: list = []
    for _ in range(SWITCH_ROUNDS):
        todo = []
        for g in groups[:SWITCH_MINIMA]:
            for y in switch_restarts(problem, g[1]):
                if not any(np.max(np.abs(y - t) / span) <= SAME_MINIMUM_FRACTION for t in tried):
                    tried.append(y)
                    todo.append(y)
        if not todo:
            break
        best_before = groups[0][0]
        runs = finish(runs + run_all(todo))
        n_restarts += len(todo)
        groups, chi = grouped(runs)
        if not groups[0][0] < best_before - SAME_MINIMUM_CHI2:
            break
    order = np.argsort(chi, kind="stable")
    best = runs[int(order[0])]
    names = [fp.name for fp in problem.params]
    minima = tuple(Minimum(g[0], {n: float(v) for n, v in zip(names, g[1])}, g[2]) for g in groups
                   if g[0] <= groups[0][0] + MINIMA_MARGIN)
    method = f"{method}; then least squares from the start and {n_starts - 1} candidates"
    if n_restarts:
        method += (f", and {n_restarts} restarts of the lowest minima with the skew (or anisotropy) of the shift "
                   "tensor reversed, across the switch of its principal axes at skew 0 that local fits cannot cross")
    return SearchOutcome(best, tuple(runs), minima, n_starts, groups[0][2], method, n_restarts)


def minima_report(search: SearchOutcome, problem: FitProblem, names, n_starts: int, at_best: int):
    """The minima of a search with their chi-square at the problem's present noise levels, and what to say of them.

    Parameters
    ----------
    search : SearchOutcome
    problem : FitProblem
        The fit's problem (1D, 2D or joint), with its final noise levels.
    names : sequence of str
        The free parameters' names, in order.
    n_starts, at_best : int
        Starts run, and how many reached the best fit.

    Returns
    -------
    (tuple of Minimum, list of str, list of str)
        The minima (lowest first), the notes and the warnings.
    """
    minima = []
    for mn in search.minima:  # chi-square at the final noise levels
        v = np.array([mn.values[n] for n in names])
        ev = problem.evaluate(v)
        minima.append(replace(mn, chi_square=float(ev.residual @ ev.residual)))
    minima = tuple(sorted(minima, key=lambda mn: mn.chi_square))
    notes = [f"global search: {search.method}"]
    warns = []
    if at_best == 1 and n_starts > 1:
        warns.append(f"the best fit was reached by one start only (of {n_starts}): a lower minimum may exist "
                     "that no start reached; run again with more starts (--starts) or another seed")
    others = list(minima[1:])
    if others:
        lines = "; ".join(f"chi-square +{mn.chi_square - minima[0].chi_square:.3g}: "
                          + ", ".join(f"{n} = {v:.6g}" for n, v in mn.values.items()) for mn in others)
        warns.append(f"{len(others)} other distinct minimum/minima lie within chi-square {MINIMA_MARGIN:g} of the "
                     f"best and fit the data almost as well: {lines}")
    return minima, notes, warns
