"""Slow, independent reference spectra for the fitting tests (numpy and scipy only, nothing from powderspin).

The fits are tested on synthetic data made here, never by the fast engine
being tested.  Each spectrum is built from the definitions:

1. Line positions per crystallite from the high-field formulas of
   ``tests/reference/time_domain.py`` (explicit 3x3 rotations, design.md
   section 2), on a dense Gauss-Legendre x uniform powder grid
   (scipy.special.roots_legendre; ``time_domain.powder_grid``):
   static (rotor angle 0, one phase), infinitely fast MAS (the average over
   8 equally spaced rotor phases, exact for a trigonometric polynomial of
   degree 4) or finite-rate MAS (sidebands below).
2. Finite-rate sidebands of a crystallite: the phase
   ``xi(t) = 2 pi int (nu - nu_bar) dt`` on a fine grid over one rotor
   period (cumulative Simpson rule, scipy), ``|F_n|^2`` from the FFT of
   ``exp(i xi)`` (M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300;
   the gamma average leaves ``|F_n|^2``, M. H. Levitt, J. Magn. Reson. 82
   (1989) 427).  Shift-anisotropy sidebands can instead come from the
   Bessel-function form of ``tests/reference/herzfeld_berger.py``.
3. The spectrum at the axis points ``x_k`` (uniform, step dx): every line
   of weight ``w`` at ``f`` is shared between its two neighbouring points by
   linear interpolation (``x_j <= f < x_j+1``, ``r = (f - x_j) / dx``:
   ``w (1 - r)`` to point j and ``w r`` to point j+1; "cloud in cell",
   R. W. Hockney, J. W. Eastwood, *Computer Simulation Using Particles*
   (1981), from memory), which is the engine's rule for placing intensity
   on the axis; the point array is then convolved with the unit-area
   Gaussian of the given FWHM sampled at the points (numpy.convolve).
   Lines off the axis are dropped.

Intensities are in arbitrary units (a fit solves the scale).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.integrate import cumulative_simpson

from . import time_domain as td

__all__ = ["crystallite_lines", "sideband_lines", "spectrum_from_lines", "MAGIC"]

MAGIC = math.acos(1.0 / math.sqrt(3.0))


def _tensors(eta_q, shift_principal_ppm):
    efg = np.diag([-(1 - eta_q) / 2, -(1 + eta_q) / 2, 1.0])
    return efg, np.diag(np.asarray(shift_principal_ppm, dtype=float))


def crystallite_lines(spin, nu0_hz, cq_hz, eta_q, shift_principal_ppm, *, mode, grid=(200, 200), m=0.5,
                      chunk=4000):
    """Line position (Hz) and weight of every crystallite of a dense octant grid: static or infinite-rate MAS.

    ``shift_principal_ppm`` are the shift tensor's values along the EFG axes
    (x, y, z), isotropic part included.  Returns (positions (N,), weights (N,)).
    """
    beta, alpha, w = td.powder_grid(grid[0], grid[1], "octant")
    efg, shift = _tensors(eta_q, shift_principal_ppm)
    if mode == "static":
        tau, theta = np.zeros(1), 0.0
    elif mode == "infinite":
        tau, theta = 2 * np.pi * np.arange(8) / 8, MAGIC
    else:
        raise ValueError(f"mode = {mode!r} must be 'static' or 'infinite'")
    out = np.empty(beta.size)
    for lo in range(0, beta.size, chunk):
        sl = slice(lo, lo + chunk)
        nu = td.transition_offsets_hz(spin, m, nu0_hz, cq_hz, efg, shift, beta[sl], alpha[sl], tau, theta)
        out[sl] = nu.mean(axis=1)
    return out, w


def sideband_lines(spin, nu0_hz, cq_hz, eta_q, shift_principal_ppm, rate_hz, *, grid=(60, 60), phases=256,
                   bands=24, m=0.5, chunk=800):
    """Finite-rate MAS lines: positions (N, 2B+1) and weights (N, 2B+1) of bands -B..B of every crystallite."""
    beta, alpha, w = td.powder_grid(grid[0], grid[1], "octant")
    efg, shift = _tensors(eta_q, shift_principal_ppm)
    tau = 2 * np.pi * np.arange(phases + 1) / phases
    orders = np.arange(-bands, bands + 1)
    pos = np.empty((beta.size, orders.size))
    inten = np.empty_like(pos)
    period = 1.0 / rate_hz
    for lo in range(0, beta.size, chunk):
        sl = slice(lo, lo + chunk)
        nu = td.transition_offsets_hz(spin, m, nu0_hz, cq_hz, efg, shift, beta[sl], alpha[sl], tau, MAGIC)
        nubar = nu[:, :-1].mean(axis=1)
        xi = 2 * np.pi * cumulative_simpson(nu - nubar[:, None], dx=period / phases, axis=1, initial=0.0)
        f = np.fft.fft(np.exp(1j * xi[:, :-1]), axis=1) / phases
        amp = np.abs(f) ** 2
        inten[sl] = amp[:, orders % phases] * w[sl, None]
        pos[sl] = nubar[:, None] + orders[None, :] * rate_hz
    return pos, inten


def spectrum_from_lines(axis_hz, positions, weights, fwhm_hz) -> np.ndarray:
    """The continuous spectrum at the axis points: each line a unit-area Gaussian evaluated there (no binning).

    A point of a measured (Fourier-transformed) spectrum is a sample of the continuous spectrum, and so is a point
    of powderspin's simulated spectra; the sum of Gaussian densities at the points is that sample, written out.
    Units: intensity per Hz times the point spacing (so that the points sum to the lines' total weight).
    """
    x = np.asarray(axis_hz, dtype=float)
    dx = (x[-1] - x[0]) / (x.size - 1)
    f = np.asarray(positions, dtype=float).ravel()
    wt = np.asarray(weights, dtype=float).ravel()
    s = fwhm_hz / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    out = np.zeros(x.size)
    chunk = max(1, 4_000_000 // x.size)
    for a in range(0, f.size, chunk):
        u = (x[None, :] - f[a:a + chunk, None]) / s
        out += wt[a:a + chunk] @ np.exp(-0.5 * u * u)
    return out * dx / (s * math.sqrt(2.0 * math.pi))
