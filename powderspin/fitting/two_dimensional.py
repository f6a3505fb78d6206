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

Excitation is ideal (each site's 2D integral is its weight).  Measured MQMAS
intensities are not quantitative (the multiple-quantum excitation and
conversion depend on C_Q and the RF field), so free weights in a fit to 2D
data give a warning.
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
from ..model.values import Model
from ..simulator import as_model
from ..uncertainty import covariance_from_jacobian, standard_errors
from .data import FitError, point_noise
from .problem import FitProblem

__all__ = ["TwoDimensionalFit", "fit_two_dimensional"]

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

    __reduce__ = reduce_through_init  # picklable: to and from Dask workers (powderspin.frozen)

    def __post_init__(self):
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


def fit_two_dimensional(model, data: Mapping, *, noise: Mapping | None = None,
                        max_evaluations: int | None = None) -> TwoDimensionalFit:
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

    Returns
    -------
    TwoDimensionalFit

    Raises
    ------
    powderspin.fitting.data.FitError
        No free parameters, data for a measurement of the other kind, axes that
        do not match the model's nucleus and field, a flat spectrum.

    References
    ----------
    G. H. Golub, V. Pereyra, SIAM J. Numer. Anal. 10 (1973) 413 (variable projection); L. Frydman,
    J. S. Harwood, J. Am. Chem. Soc. 117 (1995) 5367 (MQMAS).
    """
    from scipy.optimize import least_squares

    from .fitter import _free_parameters

    model = as_model(model, "fit")
    params, notes = _free_parameters(model)
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
        else:
            if not isinstance(item, MeasuredSpectrum):
                raise FitError(f"measurement {j + 1} is a 1D spectrum: its data must be a MeasuredSpectrum "
                               "(powderspin.io.spectra.read_spectrum)")
            axes.append(Axis.from_points(item.hz, nu_ref, rtol=1e-3))
            y = np.asarray(item.intensity, dtype=float)
            sig = point_noise(y) if noise is None or j not in noise else float(noise[j])
        if not (math.isfinite(sig) and sig > 0):
            raise FitError(f"measurement {j + 1}: the noise level is {sig!r}; give noise = {{{j}: value}} "
                           "(data units) for a noiseless spectrum")
        ys.append(y)
        masks.append(np.ones(y.shape, dtype=bool))
        sigmas.append(sig)
    if any(m.is_two_dimensional for m in model.measurements) and any(
            p.address.table == "site" and p.address.key == "weight" for p in params):
        warnings.append("site weights fitted to MQMAS/STMAS data: the simulation assumes ideal excitation, but "
                        "measured multiple-quantum intensities depend on C_Q and the RF field; the populations are "
                        "not quantitative unless the excitation is modelled (fit them to a 1D spectrum instead)")
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
    return TwoDimensionalFit(fitted, dict(zip(names, map(float, sol.x))), dict(zip(names, map(float, err))), chi2, red,
                             bool(sol.success), str(sol.message), int(problem.n_evaluations), tuple(warnings),
                             tuple(float(c[0]) for c in e.coefs))
