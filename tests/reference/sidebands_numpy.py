"""Slow, obvious spinning-sideband intensities, two independent ways.

Twin of ``powderspin.engine._kernels._sideband_intensities`` (via
``powderspin.engine.spinning.rotor_lines``).  A trajectory is given as a callable
``nu(phi)`` of the rotor phase ``phi`` in radians (vectorised, Hz); a sampled
trajectory is turned into one by :func:`trig_interpolant`.

1. :func:`sideband_intensities`: evaluate ``nu`` on a fine grid over one
   rotor period, integrate ``xi(t) = 2 pi int_0^t (nu(t') - nu_bar) dt'``
   numerically (cumulative Simpson rule, scipy), form ``exp(i xi)`` and take
   its Fourier coefficients with ``numpy.fft``: ``I_n = |F_n|^2``.
2. :func:`gamma_averaged_fid`: the gamma average done explicitly.  For each
   of ``n_gamma`` equally spaced initial rotor phases gamma the free
   induction decay ``s_gamma(t) = exp(i 2 pi int_0^t nu(t' + gamma) dt')`` is
   computed over several rotor periods; the average over gamma is Fourier
   transformed; band n is read at the FFT bin of frequency ``nu_bar + n nu_r``.

Both rest on: M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300;
M. H. Levitt, J. Magn. Reson. 82 (1989) 427 (the gamma average leaves
|F_n|^2).
"""

from __future__ import annotations

import numpy as np
from scipy.integrate import cumulative_simpson

__all__ = ["trig_interpolant", "sideband_intensities", "gamma_averaged_fid", "band_index"]


def band_index(n, p):
    """Index of band n in an array of P bands stored in FFT order."""
    return n % p


def trig_interpolant(samples):
    """Band-limited (trigonometric) interpolant of P equally spaced samples over one period.

    Coefficients by an explicit discrete Fourier sum (no FFT); the Nyquist
    term, if any, is dropped (it is zero for the trajectories used here).
    Returns a callable of the rotor phase (radians).
    """
    y = np.asarray(samples, dtype=float)
    p = y.size
    j = np.arange(p)
    kmax = (p - 1) // 2
    coeffs = {k: np.sum(y * np.exp(-2j * np.pi * j * k / p)) / p for k in range(0, kmax + 1)}

    def nu(phi):
        phi = np.asarray(phi, dtype=float)
        val = np.full(phi.shape, coeffs[0].real)
        for k in range(1, kmax + 1):
            val = val + 2.0 * np.real(coeffs[k] * np.exp(1j * k * phi))
        return val

    return nu


def sideband_intensities(nu, rate_hz, samples_per_period=16384):
    """Centre-band position and |F_n|^2 by fine numerical integration of the phase.

    Returns (mean_hz, intensities) with intensities in FFT order (band n at
    index n mod samples_per_period).
    """
    m = samples_per_period
    period = 1.0 / rate_hz
    t = np.arange(m + 1) * (period / m)  # closed grid, t_M = one period
    f = nu(2 * np.pi * rate_hz * t)
    mean = np.mean(f[:-1])  # trapezoid rule over a full period (exact for a trig polynomial)
    xi = 2 * np.pi * cumulative_simpson(f - mean, x=t, initial=0.0)
    g = np.exp(1j * xi[:-1])
    fn = np.fft.fft(g) / m
    return mean, np.abs(fn) ** 2


def gamma_averaged_fid(nu, rate_hz, bands, n_gamma=64, periods=4, samples_per_period=4096):
    """Band intensities from the explicitly gamma-averaged FID.

    Parameters
    ----------
    nu : callable
        Offset (Hz) as a function of rotor phase (radians).
    rate_hz : float
    bands : int
        Return bands n = -bands ... bands.
    n_gamma : int
        Equally spaced initial phases (``samples_per_period`` must be a
        multiple of it so each gamma lies on the time grid).
    periods : int
        Rotor periods in the FID.

    Returns
    -------
    mean_hz : float
    intensities : dict n -> complex amplitude of band n (real |F_n|^2 in theory)
    off_band : float
        Largest |amplitude| at FFT bins that are not bands (should be ~0).
    """
    m = samples_per_period
    assert m % n_gamma == 0
    dt = 1.0 / (rate_hz * m)
    n_t = periods * m
    # phase integral on a grid covering gamma + t for every gamma: (periods + 1) periods
    t = np.arange(n_t + m + 1) * dt
    f = nu(2 * np.pi * rate_hz * t)
    mean = np.mean(f[:m])
    big_phi = 2 * np.pi * cumulative_simpson(f - mean, x=t, initial=0.0)
    s = np.zeros(n_t, dtype=complex)
    for g in range(n_gamma):
        j0 = g * (m // n_gamma)
        s += np.exp(1j * (big_phi[j0:j0 + n_t] - big_phi[j0]))
    s /= n_gamma
    # the carrier exp(i 2 pi mean t) is removed above (mean subtracted), so band n sits at
    # frequency n nu_r = FFT bin n * periods
    spec = np.fft.fft(s) / n_t
    out = {n: complex(spec[(n * periods) % n_t]) for n in range(-bands, bands + 1)}
    mask = np.ones(n_t, dtype=bool)
    mask[(np.arange(-bands, bands + 1) * periods) % n_t] = False
    return mean, out, float(np.max(np.abs(spec[mask])))
