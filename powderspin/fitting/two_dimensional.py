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

from ..engine.lineshape import Axis
from ..frozen import reduce_through_init
from ..io.spectra import MeasuredSpectrum
from ..io.spectra2d import MeasuredSpectrum2D
from ..model.values import FitSettings, Model
from ..simulator import as_model
from ..uncertainty import covariance_from_jacobian, standard_errors
from .data import FitError, point_noise, region_mask
from .problem import FitProblem

__all__ = ["TwoDimensionalFit", "fit_two_dimensional", "selection_mask_2d"]

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
        The regions, F1 regions and slices used (ppm).
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

    __reduce__ = reduce_through_init  # picklable: to and from Dask workers (powderspin.frozen)

    def __post_init__(self):
        object.__setattr__(self, "selection", MappingProxyType(dict(self.selection)))
        object.__setattr__(self, "values", MappingProxyType(dict(self.values)))
        object.__setattr__(self, "stderr", MappingProxyType(dict(self.stderr)))

    def summary(self) -> str:
        """Plain text: verdict, values with standard errors, chi-square, scales and warnings.

        Returns
        -------
        str
        """
        lines = [f"fit {'converged' if self.success else 'did NOT converge'}: {self.message}",
                 f"{'parameter':<24} {'value':>14} {'std. error':>12}"]
        for k, v in self.values.items():
            lines.append(f"{k:<24} {v:>14.6g} {self.stderr[k]:>12.3g}")
        lines.append(f"chi-square {self.chi_square:.6g}, reduced {self.reduced_chi_square:.4g}, "
                     f"{self.n_evaluations} evaluations")
        lines.append("scale per measurement: " + ", ".join(f"{c:.6g}" for c in self.scales))
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
                        slice_f1_ppm=None) -> TwoDimensionalFit:
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
        Noise level (data units) per measurement; default the robust
        point-to-point estimate along F2.
    max_evaluations : int, optional
        Limit on the optimiser's evaluations.
    regions : sequence of (ppm_hi, ppm_lo), optional
        F2 ranges of 2D data (the axis of 1D data) to fit; default the model's
        ``[fit] regions``, else everything.
    f1_regions : sequence of (ppm_hi, ppm_lo), optional
        F1 ranges of 2D data whose F2 slices are fitted; default ``[fit] f1_regions``.
    slice_f1_ppm : sequence of float, optional
        F1 positions of single F2 slices to fit; default ``[fit] slice_f1_ppm``.

    Returns
    -------
    TwoDimensionalFit

    Raises
    ------
    powderspin.fitting.data.FitError
        No free parameters, data for a measurement of the other kind, axes that
        do not match the model's nucleus and field, a flat spectrum, a
        selection that holds no data point or fewer points than parameters.

    See Also
    --------
    selection_mask_2d, powderspin.io.results.write_result_2d

    References
    ----------
    G. H. Golub, V. Pereyra, SIAM J. Numer. Anal. 10 (1973) 413 (variable projection); L. Frydman,
    J. S. Harwood, J. Am. Chem. Soc. 117 (1995) 5367 (MQMAS).
    """
    from scipy.optimize import least_squares

    from .fitter import _free_parameters

    model = as_model(model, "fit")
    params, notes = _free_parameters(model)
    fs = model.fit
    try:
        regs = fs.regions if regions is None else FitSettings(regions=tuple(regions)).regions
        f1_regs = fs.f1_regions if f1_regions is None else FitSettings(f1_regions=tuple(f1_regions)).f1_regions
        cuts = fs.slice_f1_ppm if slice_f1_ppm is None else FitSettings(slice_f1_ppm=tuple(slice_f1_ppm)).slice_f1_ppm
    except (TypeError, ValueError) as e:
        raise FitError(str(e)) from None
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
            sig = point_noise(y.ravel()) if noise is None or j not in noise else float(noise[j])
            try:
                mask = selection_mask_2d(item.f1_ppm, item.f2_ppm, regs, f1_regs, cuts)
            except FitError as e:
                raise FitError(f"measurement {j + 1}: {e}") from None
        else:
            if not isinstance(item, MeasuredSpectrum):
                raise FitError(f"measurement {j + 1} is a 1D spectrum: its data must be a MeasuredSpectrum "
                               "(powderspin.io.spectra.read_spectrum)")
            axes.append(Axis.from_points(item.hz, nu_ref, rtol=1e-3))
            y = np.asarray(item.intensity, dtype=float)
            sig = point_noise(y) if noise is None or j not in noise else float(noise[j])
            mask = region_mask(np.asarray(item.ppm, dtype=float), list(regs))
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
    if any(m.is_two_dimensional and m.mq_pulses == "ideal" for m in model.measurements) and any(
            p.address.table == "site" and p.address.key == "weight" for p in params):
        warnings.append("site weights fitted to MQMAS/STMAS data: the simulation assumes ideal excitation, but "
                        "measured multiple-quantum intensities depend on C_Q and the RF field; the populations are "
                        "not quantitative unless the excitation is modelled (mq_pulses) (or fit them to a 1D spectrum)")
    n_points = sum(int(m.sum()) for m in masks)
    if n_points <= len(params) + len(masks):
        raise FitError(f"the fit regions hold {n_points} data point(s) for {len(params)} free and {len(masks)} "
                       "linear parameters; widen the regions or choose more slices")
    problem = FitProblem(model, params, axes, ys, masks, sigmas, None, None)
    x0 = np.clip([p.start for p in params], problem.lo, problem.hi)
    sol = least_squares(problem.residual, x0, jac=problem.jacobian, bounds=(problem.lo, problem.hi),
                        method="trf", x_scale="jac", max_nfev=max_evaluations)
    e = problem.evaluate(sol.x)
    chi2 = float(np.einsum("i,i->", e.residual, e.residual))
    jfull, n_lin = problem.full_jacobian(sol.x)
    dof = max(1, e.residual.size - sol.x.size - sum(n_lin))
    red = chi2 / dof
    cov = covariance_from_jacobian(jfull) * max(1.0, red)
    err = standard_errors(cov)[:sol.x.size]
    names = [p.name for p in params]
    fitted = problem.model_at(sol.x)
    scales = tuple(float(c[0]) for c in e.coefs)
    result = TwoDimensionalFit(fitted, dict(zip(names, map(float, sol.x))), dict(zip(names, map(float, err))), chi2,
                               red, bool(sol.success), str(sol.message), int(problem.n_evaluations), tuple(warnings),
                               scales, tuple(masks), tuple(data[j] for j in idx), (),
                               {"regions": [list(r) for r in regs], "f1_regions": [list(r) for r in f1_regs],
                                "slice_f1_ppm": list(cuts)})
    return replace(result, spectra=_fitted_spectra(result.fitted_model(), axes))


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
