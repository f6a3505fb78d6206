"""Fitting 2D (MQMAS, STMAS) spectra, alone or jointly with 1D spectra of the same sample.

Every measurement is simulated by its own :class:`~powderspin.simulator.Simulator`
on its data axes (F2 and F1 for a 2D measurement) through the same
:class:`~powderspin.fitting.problem.FitProblem` as a 1D fit: the free
parameters are shared by all measurements, each measurement's intensity scale
is solved linearly at every evaluation (variable projection), and the
optimiser is :func:`scipy.optimize.least_squares` within each parameter's
``min``/``max``.  Standard errors come from the Jacobian of the whitened
residual with respect to the free and the linear parameters together
(:func:`powderspin.uncertainty.covariance_from_jacobian`), scaled by the
reduced chi-square when it exceeds 1.

A 2D spectrum separates sites that overlap in 1D: F1 spreads them by their
isotropic frequency, which depends on delta_iso and on C_Q^2 (1 + eta^2/3)
differently from the F2 centre of gravity, so C_Q and delta_iso of each site
are fixed together (F1 and F2 centres of
:mod:`powderspin.physics.multiple_quantum`).

Parts of the data: ``regions`` (ppm ranges, as for a 1D fit) limit F2 of a
2D spectrum (and the axis of a 1D one); ``f1_regions`` (F1 ppm ranges) and
``slice_f1_ppm`` (single F1 positions, the nearest data row each) choose the
F2 slices that are fitted.  Both default to the model's ``[fit]`` table; with
neither, every F1 row is fitted.

Excitation is ideal (each site's 2D integral is its weight) unless the
measurement models its MQMAS pulses (``mq_pulses``).  Measured MQMAS
intensities are not quantitative (the multiple-quantum excitation and
conversion depend on C_Q and the RF field), so free weights in a fit to 2D
data with ideal excitation give a warning.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from types import MappingProxyType
from typing import Mapping

import numpy as np

from ..checks import whole_number
from ..engine.lineshape import Axis
from ..frozen import reduce_through_init
from ..io.spectra import MeasuredSpectrum
from ..io.spectra2d import MeasuredSpectrum2D
from ..model.values import FitSettings, Model
from ..simulator import as_model
from ..uncertainty import covariance_from_jacobian, standard_errors
from .curvature import curvature_report
from .data import MIN_NOISE_POINTS, FitError, check_region, noise_from_region, point_noise, region_mask
from .posterior import DEFAULT_STEPS, posterior_messages, sample_posterior
from .problem import FitProblem
from .result import interval_text, posterior_interval_tables, posterior_line, search_tables
from .search import minima_report
from .symmetry import fold_vector

__all__ = ["TwoDimensionalFit", "check_noise_region", "fit_two_dimensional", "noise_from_region_2d",
           "selection_mask_2d"]

#: a data axis may differ from uniform by this fraction of its step
_AXIS_RTOL = 1e-6


@dataclass(frozen=True)
class TwoDimensionalFit:
    """The result of :func:`fit_two_dimensional`.

    Attributes
    ----------
    model : Model
        The model at the fitted values.
    values, stderr : Mapping of str to float
        Fitted free parameters and their standard errors, by name (``"A.cq_mhz"``).
    chi_square, reduced_chi_square : float
    success : bool
    message : str
        The optimiser's verdict.
    n_evaluations : int
    warnings : tuple of str
    scales : tuple of float
        Each measurement's solved intensity scale.
    masks : tuple of ndarray of bool
        Each measurement's fitted points ((n1, n2) for 2D data).
    data : tuple
        The measured spectra, by measurement.
    spectra : tuple
        The fitted model simulated on each measurement's data axes, its scale
        applied (Spectrum2D or Spectrum).
    selection : Mapping
        The regions, F1 regions and slices used (ppm), and the noise region.
    noise : tuple of float
        Each measurement's noise level (data units).
    noise_source : str
        ``"noise region"`` or ``"point-to-point"`` (the robust estimate along F2).
    notes : tuple of str
    starts, starts_at_best : int
        Least-squares starts of a global search, and how many reached the best fit.
    minima : tuple of powderspin.fitting.search.Minimum
        After a global search: every distinct minimum within the margin of the best.
    curvature : tuple of powderspin.fitting.curvature.CurvatureRow
        Predicted and actual chi-square rises at one standard error.
    profile_intervals : Mapping of str to (float, float)
        Profile-likelihood intervals where the curvature check asked for them.
    posterior : powderspin.fitting.result.PosteriorSummary or None
        The posterior sample, when asked for.
    """

    model: Model
    values: Mapping
    stderr: Mapping
    chi_square: float
    reduced_chi_square: float
    success: bool
    message: str
    n_evaluations: int
    warnings: tuple = ()
    scales: tuple = field(default=())
    masks: tuple = field(default=())
    data: tuple = field(default=())
    spectra: tuple = field(default=())
    selection: Mapping = field(default_factory=dict)
    noise: tuple = ()
    noise_source: str = "point-to-point"
    notes: tuple = ()
    starts: int = 1
    starts_at_best: int = 1
    minima: tuple = ()
    curvature: tuple = ()
    profile_intervals: Mapping = field(default_factory=dict)
    posterior: object = None

    __reduce__ = reduce_through_init  # picklable: to and from Dask workers (powderspin.frozen)

    def __post_init__(self):
        object.__setattr__(self, "selection", MappingProxyType(dict(self.selection)))
        object.__setattr__(self, "values", MappingProxyType(dict(self.values)))
        object.__setattr__(self, "stderr", MappingProxyType(dict(self.stderr)))
        object.__setattr__(self, "profile_intervals", MappingProxyType(dict(self.profile_intervals)))

    def summary(self) -> str:
        """Plain text: verdict, values with standard errors, chi-square, scales and warnings.

        Returns
        -------
        str
        """
        lines = [f"fit {'converged' if self.success else 'did NOT converge'}: {self.message}",
                 f"{'parameter':<24} {'value':>14} {'std. error':>12}"]
        for k, v in self.values.items():
            lines.append(f"{k:<24} {v:>14.6g} {self.stderr[k]:>12.3g}"
                         + interval_text(k, self.posterior, self.profile_intervals))
        head = (f"chi-square {self.chi_square:.6g}, reduced {self.reduced_chi_square:.4g} (noise from the "
                f"{self.noise_source}), {self.n_evaluations} evaluations")
        if self.starts > 1:
            head += f", {self.starts_at_best} of {self.starts} starts reached the best fit"
        lines.append(head)
        lines.append("scale per measurement: " + ", ".join(f"{c:.6g}" for c in self.scales))
        if self.posterior is not None:
            lines.append(posterior_line(self.posterior))
        lines.extend(f"note: {t}" for t in self.notes)
        lines.extend(f"warning: {w}" for w in self.warnings)
        return "\n".join(lines) + "\n"

    def fitted_model(self) -> Model:
        """The fitted model with each measurement's solved scale written in (simulating it gives the fit).

        Returns
        -------
        Model
        """
        m = self.model
        for j, c in enumerate(self.scales):
            m = m.with_measurement(j, scale=float(c))
        # the free parameters start where the fit ended (a model file writes a free parameter's start)
        free = tuple(replace(p, start=min(max(float(self.values.get(p.name, p.start)), p.min), p.max))
                     for p in m.free)
        return replace(m, free=free)

    def to_dict(self) -> dict:
        """The result as the nested dict of a result file: the fitted model plus ``[fit.result]``.

        ``[fit.result]`` holds the verdict, chi-square, noise and scales, and
        (as a 1D fit's result file does: :func:`powderspin.fitting.result.search_tables`)
        the minima of a global search, the curvature check, profile intervals
        and the posterior summary; a posterior also puts each parameter's
        16-84 % interval into an ``interval`` table of its site or measurement.

        Returns
        -------
        dict

        See Also
        --------
        powderspin.io.results.write_result_2d
        """
        from ..model.modelfile import model_to_dict

        fitted = self.fitted_model()
        d = model_to_dict(fitted)
        meas = d["measurement"] if isinstance(d["measurement"], list) else [d["measurement"]]
        if self.posterior is not None:
            posterior_interval_tables(fitted, self.posterior, d, meas)
        res = {"success": bool(self.success), "message": str(self.message),
               "chi_square": float(f"{self.chi_square:.6g}"),
               "reduced_chi_square": float(f"{self.reduced_chi_square:.4g}"),
               "noise_source": self.noise_source, "noise": [float(f"{v:.4g}") for v in self.noise],
               "evaluations": int(self.n_evaluations), "parameters": list(self.values),
               "stderr": {k: float(v) for k, v in self.stderr.items()},
               "scales": [float(c) for c in self.scales], "warnings": list(self.warnings), "notes": list(self.notes)}
        if self.starts > 1:
            res["starts"] = int(self.starts)
            res["starts_at_best"] = int(self.starts_at_best)
        res.update(search_tables(self.minima, self.curvature, self.profile_intervals, self.posterior))
        d.setdefault("fit", {})["result"] = res
        return d


def _axis_2d(item: MeasuredSpectrum2D, nu_ref: float, j: int) -> tuple[Axis, Axis]:
    if abs(item.nu_ref_hz - nu_ref) > 1e-6 * nu_ref:
        raise FitError(f"measurement {j + 1}: the data's nu_ref = {item.nu_ref_hz:.9g} Hz differs from the model's "
                       f"{nu_ref:.9g} Hz (nucleus or field)")
    try:
        return (Axis.from_points(item.f2_hz, nu_ref, rtol=1e-3), Axis.from_points(item.f1_hz, nu_ref, rtol=1e-3))
    except ValueError as e:
        raise FitError(f"measurement {j + 1}: the 2D data's axes: {e}") from None


def selection_mask_2d(f1_ppm, f2_ppm, regions=(), f1_regions=(), slice_f1_ppm=()) -> np.ndarray:
    """The points of a 2D spectrum a fit uses: chosen F2 slices (F1 regions, single rows) within F2 regions.

    Parameters
    ----------
    f1_ppm : array_like (n1,)
        F1 axis (ascending).
    f2_ppm : array_like (n2,)
        F2 axis.
    regions : sequence of (ppm_hi, ppm_lo), optional
        F2 ranges; all of F2 when empty.
    f1_regions : sequence of (ppm_hi, ppm_lo), optional
        F1 ranges whose rows (F2 slices) are fitted.
    slice_f1_ppm : sequence of float, optional
        F1 positions; the row nearest each is fitted.  With neither
        ``f1_regions`` nor ``slice_f1_ppm`` every row is.

    Returns
    -------
    numpy.ndarray of bool, shape (n1, n2)

    Raises
    ------
    powderspin.fitting.data.FitError
        A slice position outside the F1 axis (more than half a point beyond it).

    Examples
    --------
    >>> m = selection_mask_2d(np.arange(5.0), np.arange(4.0), regions=[(2.5, 0.5)], slice_f1_ppm=[3.2])
    >>> m.astype(int).tolist()
    [[0, 0, 0, 0], [0, 0, 0, 0], [0, 0, 0, 0], [0, 1, 1, 0], [0, 0, 0, 0]]
    """
    f1 = np.asarray(f1_ppm, dtype=float)
    f2 = np.asarray(f2_ppm, dtype=float)
    cols = region_mask(f2, list(regions))
    if not f1_regions and not slice_f1_ppm:
        rows = np.ones(f1.size, dtype=bool)
    else:
        rows = region_mask(f1, list(f1_regions)) if f1_regions else np.zeros(f1.size, dtype=bool)
        half = 0.5 * abs(float(f1[1] - f1[0])) if f1.size > 1 else 0.0
        lo, hi = float(f1.min()), float(f1.max())
        for v in slice_f1_ppm:
            if not lo - half <= v <= hi + half:
                raise FitError(f"slice_f1_ppm = {v:g} lies outside the data's F1 axis [{lo:.6g}, {hi:.6g}] ppm")
            rows[int(np.argmin(np.abs(f1 - v)))] = True
    return rows[:, None] & cols[None, :]


def fit_two_dimensional(model, data: Mapping, *, noise: Mapping | None = None,
                        max_evaluations: int | None = None, regions=None, f1_regions=None,
                        slice_f1_ppm=None, noise_region=None, global_search: bool = False, starts: int | None = None,
                        seed: int = 0, posterior: bool = False, walkers: int | None = None,
                        steps: int = DEFAULT_STEPS, burn: int | None = None, max_steps: int | None = None,
                        progress=None, map_starts=None, profile: str = "auto") -> TwoDimensionalFit:
    """Fit a model to 2D spectra, or to 2D and 1D spectra of the same sample together.

    Parameters
    ----------
    model : Model or path
        Its free parameters are fitted; each measurement named in ``data``
        is simulated as it says (``experiment = "mqmas"``/``"stmas"`` for 2D data).
    data : mapping of int to MeasuredSpectrum2D or MeasuredSpectrum
        Measured spectrum of each measurement index (0-based); a 2D measurement
        takes a :class:`~powderspin.io.spectra2d.MeasuredSpectrum2D`, a 1D one a
        :class:`~powderspin.io.spectra.MeasuredSpectrum`.
    noise : mapping of int to float, optional
        Noise level (data units) per measurement; default from ``noise_region``,
        else the robust point-to-point estimate along F2.
    max_evaluations : int, optional
        Limit on the optimiser's evaluations (of each run of a global search).
    regions : sequence of (ppm_hi, ppm_lo), optional
        F2 ranges of 2D data (the axis of 1D data) to fit; default the model's
        ``[fit] regions``, else everything.
    f1_regions : sequence of (ppm_hi, ppm_lo), optional
        F1 ranges of 2D data whose F2 slices are fitted; default ``[fit] f1_regions``.
    slice_f1_ppm : sequence of float, optional
        F1 positions of single F2 slices to fit; default ``[fit] slice_f1_ppm``.
    noise_region : (ppm_hi, ppm_lo), optional
        A signal-free F2 range (default the model's ``[fit] noise_region``): the
        noise level of 2D data is the scatter of every F1 row's points there,
        each row's straight line removed and the variances pooled; of 1D data
        as :func:`powderspin.fitting.fitter.fit` takes it.  With a noise
        region the standard errors are not scaled by the reduced chi-square
        (a reduced chi-square above 2 is warned about instead).
    global_search, starts, seed : optional
        Global search (:func:`powderspin.fitting.search.global_search`, the
        same as :func:`powderspin.fitting.fitter.fit`'s): the model's start
        plus differential-evolution candidates, each refined; the minima
        within chi-square 9 of the best are listed (``minima``).
    posterior, walkers, steps, burn, max_steps : optional
        Sample the posterior with emcee from the solution
        (:func:`powderspin.fitting.posterior.sample_posterior`), as ``fit`` does.
    progress : callable, optional
        Subscriber of the progress protocol (stages ``"fit"`` and ``"posterior"``).
    map_starts : callable, optional
        How the runs of a global search are run (as for ``fit``).
    profile : {"auto", "all", "none"}, optional
        Profile-likelihood intervals (:func:`powderspin.fitting.curvature.curvature_report`).

    Returns
    -------
    TwoDimensionalFit

    Raises
    ------
    powderspin.fitting.data.FitError
        No free parameters, data for a measurement of the other kind, axes that
        do not match the model's nucleus and field, a flat spectrum, a
        selection that holds no data point or fewer points than parameters, a
        noise region with fewer than ``MIN_NOISE_POINTS`` points in a row, or
        bad sampler or search settings (as ``fit`` refuses them).

    See Also
    --------
    selection_mask_2d, powderspin.io.results.write_result_2d, powderspin.fitting.fitter.fit

    References
    ----------
    G. H. Golub, V. Pereyra, SIAM J. Numer. Anal. 10 (1973) 413 (variable projection); L. Frydman,
    J. S. Harwood, J. Am. Chem. Soc. 117 (1995) 5367 (MQMAS); D. Foreman-Mackey, D. W. Hogg, D. Lang,
    J. Goodman, Publ. Astron. Soc. Pac. 125 (2013) 306 (emcee).

    Examples
    --------
    See ``tests/fitting/test_two_dimensional_fit.py`` and ``tests/fitting/test_two_dimensional_search.py``.
    """
    from .fitter import (
        _check_arguments,
        _free_parameters,
        _profile_local,
        _verdict,
        check_sampler_memory,
        solve,
    )

    if profile not in ("auto", "all", "none"):
        raise FitError(f"profile = {profile!r} must be one of 'auto', 'all', 'none'")
    args = _check_arguments(global_search, starts, seed, posterior, walkers, steps, burn, max_evaluations, None)
    starts, seed, walkers, steps, burn, max_evaluations = (args[k] for k in ("starts", "seed", "walkers", "steps",
                                                                              "burn", "max_evaluations"))
    if max_steps is not None:
        max_steps = whole_number(max_steps, "max_steps", FitError, low=10)
    model = as_model(model, "fit")
    params, notes = _free_parameters(model)
    check_sampler_memory(len(params), walkers if posterior else None, steps if posterior else None,
                         starts if global_search else None)
    fs = model.fit
    try:
        regs = fs.regions if regions is None else FitSettings(regions=tuple(regions)).regions
        f1_regs = fs.f1_regions if f1_regions is None else FitSettings(f1_regions=tuple(f1_regions)).f1_regions
        cuts = fs.slice_f1_ppm if slice_f1_ppm is None else FitSettings(slice_f1_ppm=tuple(slice_f1_ppm)).slice_f1_ppm
    except (TypeError, ValueError) as e:
        raise FitError(str(e)) from None
    noise_reg = fs.noise_region if noise_region is None else check_region(noise_region, "noise_region")
    if (f1_regs or cuts) and not any(m.is_two_dimensional for m in model.measurements):
        raise FitError("f1_regions / slice_f1_ppm choose F2 slices of 2D data; the model has no 2D measurement")
    if not data:
        raise FitError("data: give the measured spectrum of at least one measurement")
    idx = sorted(int(j) for j in data)
    for j in idx:
        if not 0 <= j < len(model.measurements):
            raise FitError(f"data: measurement index {j} is not in [0, {len(model.measurements) - 1}]")
    if idx != list(range(len(model.measurements))):
        raise FitError("data: give a spectrum for every measurement of the model (indices "
                       f"0 to {len(model.measurements) - 1}); got {idx}")
    axes, ys, masks, sigmas = [], [], [], []
    warnings = list(notes)
    notes = []
    given = noise is not None
    for j in idx:
        meas = model.measurements[j]
        item = data[j]
        nu_ref = model.nucleus.larmor_hz(meas.field_tesla)
        if meas.is_two_dimensional:
            if not isinstance(item, MeasuredSpectrum2D):
                raise FitError(f"measurement {j + 1} is experiment = {meas.experiment!r}: its data must be a 2D "
                               "spectrum (powderspin.io.spectra2d.read_spectrum_2d)")
            axes.append(_axis_2d(item, nu_ref, j))
            y = np.asarray(item.intensity, dtype=float)
            try:
                mask = selection_mask_2d(item.f1_ppm, item.f2_ppm, regs, f1_regs, cuts)
            except FitError as e:
                raise FitError(f"measurement {j + 1}: {e}") from None
            f2 = np.asarray(item.f2_ppm, dtype=float)
        else:
            if not isinstance(item, MeasuredSpectrum):
                raise FitError(f"measurement {j + 1} is a 1D spectrum: its data must be a MeasuredSpectrum "
                               "(powderspin.io.spectra.read_spectrum)")
            axes.append(Axis.from_points(item.hz, nu_ref, rtol=1e-3))
            y = np.asarray(item.intensity, dtype=float)
            mask = region_mask(np.asarray(item.ppm, dtype=float), list(regs))
            f2 = np.asarray(item.ppm, dtype=float)
        if given and j in noise:
            sig = float(noise[j])
        elif noise_reg is not None:
            sig = noise_from_region_2d(y, f2, noise_reg, f"measurement {j + 1}")
        else:
            sig = point_noise(y.ravel())
        if not (math.isfinite(sig) and sig > 0):
            raise FitError(f"measurement {j + 1}: the noise level is {sig!r}; give noise = {{{j}: value}} "
                           "(data units) for a noiseless spectrum")
        if not mask.any():
            raise FitError(f"measurement {j + 1}: no data point lies in the fit regions (regions {list(regs)}"
                           + (f", f1_regions {list(f1_regs)}, slice_f1_ppm {list(cuts)}" if y.ndim == 2 else "")
                           + "); check them against the data's axes")
        ys.append(y)
        masks.append(mask)
        sigmas.append(sig)
    noise_source = "noise region" if noise_reg is not None else "point-to-point"
    if any(m.is_two_dimensional and m.mq_pulses == "ideal" for m in model.measurements) and any(
            p.address.table == "site" and p.address.key == "weight" for p in params):
        warnings.append("site weights fitted to MQMAS/STMAS data: the simulation assumes ideal excitation, but "
                        "measured multiple-quantum intensities depend on C_Q and the RF field; the populations are "
                        "not quantitative unless the excitation is modelled (mq_pulses) (or fit them to a 1D spectrum)")
    n_points = sum(int(m.sum()) for m in masks)
    if n_points <= len(params) + len(masks):
        raise FitError(f"the fit regions hold {n_points} data point(s) for {len(params)} free and {len(masks)} "
                       "linear parameters; widen the regions or choose more slices")
    problem = FitProblem(model, params, axes, ys, masks, sigmas, None, None, progress)
    x0 = np.clip([p.start for p in params], problem.lo, problem.hi)
    sol, search, n_starts, at_best, search_warns = solve(problem, x0, global_search, starts, seed, max_evaluations,
                                                         None, map_starts)
    warnings += search_warns
    success, message = _verdict(sol, max_evaluations)
    x, fold_notes = fold_vector(params, sol.x, problem.lo, problem.hi, problem.model)
    notes.extend(fold_notes)
    e = problem.evaluate(x)
    chi2 = float(np.einsum("i,i->", e.residual, e.residual))
    jfull, n_lin = problem.full_jacobian(x)
    dof = max(1, e.residual.size - x.size - sum(n_lin))
    red = chi2 / dof
    cov = covariance_from_jacobian(jfull)
    if noise_source == "noise region":
        if red > 2.0:
            warnings.append(f"the reduced chi-square is {red:.3g}: the model does not describe the data within the "
                            "noise (missing sites, wrong broadening); the standard errors are then too small")
    else:
        cov = cov * max(1.0, red)
    p = x.size
    err = standard_errors(cov)[:p]
    names = [fp.name for fp in params]
    curv, profiles, curv_warns = curvature_report(problem, x, cov[:p, :p], params, chi2, profile, _profile_local)
    warnings += curv_warns
    minima = ()
    if search is not None:
        minima, search_notes, search_warns = minima_report(search, problem, names, n_starts, at_best)
        notes += search_notes
        warnings += search_warns
    post = None
    if posterior:
        post = sample_posterior(problem, x, params, cov[:p, :p], walkers, steps, burn, seed, progress, max_steps)
        post_warns, post_notes = posterior_messages(post, steps)
        warnings += post_warns
        notes += post_notes
    if not success:
        warnings.insert(0, message)
    fitted = problem.model_at(x)
    scales = tuple(float(c[0]) for c in e.coefs)
    result = TwoDimensionalFit(fitted, dict(zip(names, map(float, x))), dict(zip(names, map(float, err))), chi2,
                               red, bool(success), str(sol.message), int(problem.n_evaluations), tuple(warnings),
                               scales, tuple(masks), tuple(data[j] for j in idx), (),
                               {"regions": [list(r) for r in regs], "f1_regions": [list(r) for r in f1_regs],
                                "slice_f1_ppm": list(cuts),
                                "noise_region": None if noise_reg is None else list(noise_reg)},
                               tuple(float(v) for v in problem.sigmas), noise_source, tuple(notes), n_starts, at_best,
                               minima, tuple(curv), {n: (a, b) for n, (a, b, _, _) in profiles.items()}, post)
    return replace(result, spectra=_fitted_spectra(result.fitted_model(), axes))


def check_noise_region(axis_ppm, region, where: str = "measurement", axis: str = "F2 axis",
                       option: str = "noise_region") -> None:
    """Refuse a noise region that holds fewer than ``MIN_NOISE_POINTS`` points of a data axis.

    Parameters
    ----------
    axis_ppm : array_like
        The axis (F2 of 2D data).
    region : (ppm_hi, ppm_lo)
    where : str, optional
        The measurement's name.
    axis : str, optional
        The axis's name in the message.
    option : str, optional
        How the message names the setting (``"--noise-region"`` on the command line).

    Raises
    ------
    powderspin.fitting.data.FitError
        Naming the option, the points found and the axis's range.

    Examples
    --------
    >>> check_noise_region(np.linspace(30.0, -30.0, 64), (25.0, 15.0))
    """
    f2 = np.asarray(axis_ppm, dtype=float)
    k = int(((f2 <= region[0]) & (f2 >= region[1])).sum())
    if k < MIN_NOISE_POINTS:
        raise FitError(f"{where}: {option} [{region[0]:g}, {region[1]:g}] ppm holds {k} point(s) of the data's "
                       f"{axis}; it needs at least {MIN_NOISE_POINTS} (the {axis} covers {f2.max():.6g} to "
                       f"{f2.min():.6g} ppm)")


def noise_from_region_2d(y, f2_ppm, region, where: str = "measurement") -> float:
    """Noise level from a signal-free F2 range: every row's straight line removed, the variances pooled.

    For 1D data (one row) this is :func:`powderspin.fitting.data.noise_from_region`.

    Parameters
    ----------
    y : numpy.ndarray, (n1, n2) or (n2,)
        The data.
    f2_ppm : numpy.ndarray (n2,)
        The F2 (or 1D) axis.
    region : (ppm_hi, ppm_lo)
    where : str, optional
        The measurement's name for the message.

    Returns
    -------
    float

    Raises
    ------
    powderspin.fitting.data.FitError
        Fewer than ``MIN_NOISE_POINTS`` points of the axis in the region
        (the message names the option and the data's axis range).

    Examples
    --------
    >>> rows = np.random.default_rng(3).normal(0.0, 0.5, (40, 200)) + np.linspace(0, 1, 200)
    >>> round(noise_from_region_2d(rows, np.linspace(100.0, -100.0, 200), (100.0, 0.0)), 1)
    0.5
    """
    y = np.atleast_2d(np.asarray(y, dtype=float))
    f2 = np.asarray(f2_ppm, dtype=float)
    check_noise_region(f2, region, where, "F2 axis" if y.shape[0] > 1 else "axis")
    # each row's scatter about its own straight line (noise_from_region), pooled over the rows (equal counts)
    var = [noise_from_region(row, f2, region) ** 2 for row in y]
    return float(math.sqrt(float(np.mean(var))))


def _fitted_spectra(model: Model, axes) -> tuple:
    """The fitted model (scales written in) simulated on each measurement's data axes."""
    from ..simulator import Simulator

    out = []
    for j, ax in enumerate(axes):
        if isinstance(ax, tuple):
            out.append(Simulator(model, j, axis=ax[0], f1_axis=ax[1]).spectrum())
        else:
            out.append(Simulator(model, j, axis=ax).spectrum())
    return tuple(out)
