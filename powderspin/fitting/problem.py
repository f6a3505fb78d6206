"""The objective of a fit: free parameters -> whitened residual, with the linear parameters solved.

Each measurement is simulated by its own :class:`~powderspin.simulator.Simulator`
on its data axis.  The intensity scale and the coefficients of an optional
polynomial baseline enter each spectrum linearly and are solved by linear
least squares at every evaluation (variable projection: G. H. Golub,
V. Pereyra, SIAM J. Numer. Anal. 10 (1973) 413), so the nonlinear optimiser
sees only the physical parameters.

A measurement whose data were phased automatically (a FID or half echo processed
by :func:`powderspin.processing.process`) may carry a small residual phase
error phi(x) = phi0 + phi1 x (x = offset from the carrier / spectral width).
Its real part is then ``A cos phi + D sin phi``, where ``A`` is the absorption
spectrum and ``D`` the dispersion, the Hilbert transform of ``A`` (for a causal
signal the two are a Kramers-Kronig pair: R. R. Ernst, G. Bodenhausen,
A. Wokaun, "Principles of Nuclear Magnetic Resonance in One and Two
Dimensions", Oxford (1987), section 4.2; from memory).  To first order in phi
the data are ``c (A + phi0 D + phi1 x D)``: two more linear columns, ``D`` and
``x D``, solved with the scale (``phase_free``).  Their uncertainty enters the
covariance of the other parameters (:meth:`FitProblem.full_jacobian` appends
them after the linear parameters).  ``D`` is computed on the data axis, which
must be the whole window of the transform (periodic), as processing gives it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from ..model.values import FreeParameter, Model, ModelError
from ..progress import emit
from ..simulator import SimulationCache, Simulator
from .data import FitError

__all__ = ["FitProblem", "Evaluation", "dispersion"]


def dispersion(absorption: np.ndarray) -> np.ndarray:
    """The dispersion spectrum of a causal signal whose absorption spectrum is given (discrete Hilbert transform).

    Parameters
    ----------
    absorption : ndarray
        Real spectrum on the points of a discrete transform in ascending
        frequency, the carrier at index ``n // 2`` (the whole window).

    Returns
    -------
    ndarray
        ``Im F[c]``, where ``c`` is the causal part of the inverse transform
        of the absorption (``t = 0`` once, ``0 < t < n/2`` doubled), so that
        ``absorption + i dispersion`` is the transform of a signal that is zero
        at negative times.

    Examples
    --------
    A Lorentzian line of half width 5 points at the carrier: its dispersion
    is ``-x / (1 + x^2)`` (the standard pair; common practice; the sign is that of
    ``numpy.fft.fft`` of a signal ``exp(+2 pi i f t)``), nearly, on 4096 points:

    >>> n = 4096
    >>> x = (np.arange(n) - n // 2) / 5.0
    >>> d = dispersion(1.0 / (1.0 + x ** 2))
    >>> bool(abs(d[n // 2 + 5] + 0.5) < 0.01 and abs(d[n // 2]) < 1e-9)
    True
    """
    a = np.asarray(absorption, dtype=float)
    n = a.size
    c = np.fft.ifft(np.fft.ifftshift(a))
    c[1:(n + 1) // 2] *= 2.0
    c[(n + 1) // 2:] = 0.0
    return np.fft.fftshift(np.fft.fft(c)).imag


@dataclass
class Evaluation:
    """One evaluation of the objective.

    Attributes
    ----------
    theta : ndarray
        The free parameters.
    totals : list of ndarray
        Unscaled model spectra (points,) per measurement.
    sites : list of ndarray
        Per-site spectra (n_sites, points) per measurement.
    coefs : list of ndarray
        Linear coefficients per measurement: [scale, b0, b1, ...].
    residual : ndarray
        Whitened residual over the fit regions, measurements concatenated.
    logdet : float
        log det(A_w^T A_w) of the linear problem, for the marginal likelihood.
    phase_coefs : list of ndarray
        Per measurement, the coefficients of the dispersion columns (D, x D),
        empty where the phase is not free (module notes).
    """

    theta: np.ndarray
    totals: list
    sites: list
    coefs: list
    residual: np.ndarray
    logdet: float
    phase_coefs: list


class FitProblem:
    """Free parameters -> whitened residual ``(data - A c) / sigma`` over the fit regions.

    Parameters
    ----------
    model : Model
        The model to fit (its measurements carry the data axes' pinned choices).
    params : sequence of FreeParameter
        The free parameters, in the order of the vectors.
    axes : sequence of Axis or (Axis, Axis)
        The data axis of each measurement; (F2 axis, F1 axis) for a 2D one
        (its data, mask and model are then (n1, n2) arrays, and it has no baseline).
    ys : sequence of ndarray
        The data of each measurement.
    masks : sequence of ndarray of bool
        The fit regions of each measurement.
    sigmas : sequence of float
        The noise level of each measurement.
    methods : sequence of sequence of str or None
        Each measurement's producers per site (None: decided by the Simulator).
    order : int or None
        Baseline order (None: no baseline).
    progress : callable, optional
        Subscriber of the progress protocol (stage ``"fit"`` after each
        evaluation; the Simulators' ``"lines"`` and ``"kernels"``).
    kernel_store : KernelStore, optional
    cache : SimulationCache, optional
        Memos shared with earlier Simulators of this fit.
    phase_free : sequence of bool, optional
        Per measurement: a residual zero- and first-order phase of the data is
        solved with the scale (module notes).  Default: none.

    Examples
    --------
    See :func:`powderspin.fitting.fitter.fit`.
    """

    def __init__(self, model: Model, params: Sequence[FreeParameter], axes, ys, masks, sigmas, methods,
                 order: int | None, progress=None, kernel_store=None, cache: SimulationCache | None = None,
                 phase_free=None):
        self.params = list(params)
        self.axes = list(axes)
        self.ys = ys
        self.masks = masks
        self.sigmas = list(sigmas)
        self.order = order
        self.progress = progress
        self.kernel_store = kernel_store
        n_jobs = len(model.sites) * len(model.measurements)
        self.cache = cache if cache is not None else SimulationCache(lines=4 * (len(self.params) + 3) * n_jobs,
                                                                     rendered=4 * (len(self.params) + 3) * n_jobs)
        self.lo = np.array([p.min for p in self.params], dtype=float)
        self.hi = np.array([p.max for p in self.params], dtype=float)
        self.basis = []
        for ax, mk in zip(self.axes, masks):
            if isinstance(ax, tuple):  # a 2D measurement (F2 axis, F1 axis): no baseline
                self.basis.append([])
                continue
            u = (ax.hz - ax.center_hz) / (0.5 * ax.width_hz)
            self.basis.append([] if order is None else [u[mk] ** k for k in range(order + 1)])
        self.phase_x = []
        for j, (ax, mk) in enumerate(zip(self.axes, masks)):
            free_j = bool(phase_free[j]) if phase_free is not None else False
            if free_j and isinstance(ax, tuple):
                raise FitError("a residual phase is refined for 1D data only")
            n = 0 if isinstance(ax, tuple) else ax.points
            self.phase_x.append((np.arange(n) - n // 2)[mk] / n if free_j else None)
        self.n_evaluations = 0
        self.best_cost = math.inf
        self._recent: list[Evaluation] = []
        self.set_model(model, methods)

    def set_model(self, model: Model, methods) -> None:
        """(Re)build the Simulators for a model and producers (a fit refines with new choices this way)."""
        self.model = model
        def axes_of(j):
            a = self.axes[j]
            return {"axis": a[0], "f1_axis": a[1]} if isinstance(a, tuple) else {"axis": a}

        self.sims = [Simulator(model, j, methods=None if methods is None else methods[j],
                               parameters=[p.address for p in self.params], kernel_store=self.kernel_store,
                               progress=self.progress, cache=self.cache, **axes_of(j))
                     for j in range(len(self.axes))]
        self.methods = [list(s.methods) for s in self.sims]
        self._recent = []

    # -- the model at theta

    def model_at(self, theta) -> Model:
        """The model at a free-parameter vector (ties applied)."""
        return self.sims[0].model_at(np.asarray(theta, dtype=float))

    def _simulate(self, theta) -> list:
        try:
            out = [sim.site_intensities(theta) for sim in self.sims]
        except ModelError as e:
            vals = ", ".join(f"{p.name} = {v:.6g}" for p, v in zip(self.params, theta))
            raise FitError(f"the model cannot be simulated at {vals}: {e}; narrow the parameters' min/max") from None
        self.n_evaluations += 1
        return out

    def evaluate(self, theta) -> Evaluation:
        """Simulate, solve the linear parameters, whiten; the last two evaluations are remembered."""
        theta = np.asarray(theta, dtype=float)
        for e in self._recent:
            if np.array_equal(e.theta, theta):
                return e
        sites = self._simulate(theta)
        totals = [s.sum(axis=0) for s in sites]
        coefs, phase_coefs, res, logdet = [], [], [], 0.0
        for j, tot in enumerate(totals):
            mk = self.masks[j]
            a = np.column_stack([tot[mk]] + self._phase_columns(j, tot) + self.basis[j]) / self.sigmas[j]
            b = self.ys[j][mk] / self.sigmas[j]
            c, *_ = np.linalg.lstsq(a, b, rcond=None)
            k = 0 if self.phase_x[j] is None else 2
            coefs.append(np.concatenate([c[:1], c[1 + k:]]))
            phase_coefs.append(c[1:1 + k])
            # einsum, not a threaded BLAS call: a 2D measurement has tens of thousands of rows, where BLAS
            # threads cost milliseconds per call on a busy machine
            res.append(b - np.einsum("ij,j->i", a, c))
            sign, ld = np.linalg.slogdet(np.einsum("ki,kj->ij", a, a))
            logdet += ld if sign > 0 else 700.0
        r = np.concatenate(res)
        e = Evaluation(theta.copy(), totals, sites, coefs, r, logdet, phase_coefs)
        self._recent = ([e] + self._recent)[:2]
        self.best_cost = min(self.best_cost, float(np.einsum("i,i->", r, r)))
        emit(self.progress, "fit", self.n_evaluations, unit="evaluations", value=self.best_cost)
        return e

    def _phase_columns(self, j: int, spectrum) -> list:
        """The dispersion columns (D, x D) on measurement j's fit points (none where the phase is fixed)."""
        x = self.phase_x[j]
        if x is None:
            return []
        d = dispersion(spectrum)[self.masks[j]]
        return [d, x * d]

    def phase_correction_deg(self, e: Evaluation) -> list:
        """Per measurement, the correction (phase0, phase1) in degrees that the fit adds to the processed phase.

        ``(phase0, phase1)`` in the convention of
        :func:`powderspin.processing.phasing.apply_phase`; None where the
        phase is not free.  The zero order is exact (``A cos phi + D sin phi``
        is linear in ``(cos phi, sin phi)``); the first order is to first order.
        """
        out = []
        for j, pc in enumerate(e.phase_coefs):
            if self.phase_x[j] is None:
                out.append(None)
                continue
            c0 = e.coefs[j][0]
            p0 = math.atan2(pc[0], c0)
            p1 = pc[1] / math.hypot(c0, pc[0]) if (c0 or pc[0]) else 0.0
            out.append((math.degrees(p0), math.degrees(p1)))
        return out

    def forget(self) -> None:
        """Forget the remembered evaluations (after a change of the noise levels)."""
        self._recent = []

    def residual(self, theta) -> np.ndarray:
        """The whitened residual (the optimiser's objective)."""
        return self.evaluate(theta).residual

    def steps(self, theta) -> np.ndarray:
        """Forward-difference steps: 1e-6 of the value, or of 1 % of the range near zero; backward at an upper bound."""
        theta = np.asarray(theta, dtype=float)
        span = np.where(np.isfinite(self.hi - self.lo), self.hi - self.lo, 1.0)
        h = 1e-6 * np.maximum(np.abs(theta), 0.01 * span)
        return np.where(theta + h > self.hi, -h, h)

    def jacobian(self, theta, full: bool = False):
        """Forward-difference Jacobian of the projected residual (``full``: also of the model, linear parts fixed)."""
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
                    part = e0.coefs[j][0] * (tk[mk] - t0[mk])
                    for col, cp in zip(self._phase_columns(j, tk - t0), e0.phase_coefs[j]):
                        part = part + cp * col
                    parts.append(part / (h[k] * self.sigmas[j]))
                dmodel[:, k] = np.concatenate(parts)
        if not full:
            return jac
        return jac, dmodel

    def full_jacobian(self, theta):
        """Jacobian of the whitened residual with respect to (free parameters, linear parameters, phase columns).

        The phase columns (two per measurement whose phase is free) come last,
        so the covariance of the first ``p + sum(n_lin)`` parameters is its
        leading block.
        """
        e0 = self.evaluate(theta)
        _, dmodel = self.jacobian(theta, full=True)
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
        extra = []
        r0 = 0
        for j, tot in enumerate(e0.totals):
            for col in self._phase_columns(j, tot):
                full = np.zeros(sum(rows))
                full[r0:r0 + rows[j]] = col / self.sigmas[j]
                extra.append(full)
            r0 += rows[j]
        lin = np.column_stack([lin] + extra) if extra else lin
        return np.hstack([-dmodel, -lin]), n_lin

    def chi2_by_measurement(self, e: Evaluation) -> list[float]:
        """Each measurement's share of chi-square."""
        out, r0 = [], 0
        for mk in self.masks:
            n = int(mk.sum())
            out.append(float(e.residual[r0:r0 + n] @ e.residual[r0:r0 + n]))
            r0 += n
        return out
