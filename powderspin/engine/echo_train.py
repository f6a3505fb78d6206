"""The spectrum of a (Q)CPMG echo train: the powder pattern sampled at spikelets 1/tau apart.

An echo train acquires N whole echoes, the k-th centred at ``k tau`` after the first, each a copy of the
first scaled by ``r^k``, ``r = exp(-tau / T2)``.  By the Fourier shift theorem its spectrum is the single
echo's spectrum (the powder pattern with its broadening) times

    G(nu) = sum_{k=0}^{N-1} r^k exp(-i 2 pi (nu - nu_c) k tau),

nu_c the carrier.  The pattern being absorptive, the absorptive spikelet spectrum is the pattern times the
real comb

    C(nu) = sum_{k=0}^{N-1} r^k cos(2 pi (nu - nu_c) k tau),

whose peaks (spikelets) sit at nu_c + j / tau with height ``sum r^k`` and whose average over one period
1/tau is 1 (only k = 0 survives), so the spikelet spectrum keeps the pattern's area.  On the axis each
point receives the comb's average over its bin, ``cos(...) sinc(k tau dx)``, so narrow spikelets keep their
area on a coarse axis.  The envelope through the spikelet tops is the pattern times ``sum r^k``.

References
----------
F. H. Larsen, H. J. Jakobsen, P. D. Ellis, N. C. Nielsen, J. Phys. Chem. A 101 (1997) 8597 (QCPMG:
spikelets 1/tau apart whose envelope follows the static powder pattern) (from memory); R. N. Bracewell,
*The Fourier Transform and Its Applications* (1965), shift theorem (from memory).
"""

from __future__ import annotations

import math

import numpy as np

from .lineshape import Axis

__all__ = ["echo_train_comb", "spikelet_positions_hz"]

#: comb terms evaluated at once (points x echoes), to bound memory
_BLOCK = 1 << 22


def echo_train_comb(axis: Axis, carrier_hz: float, period_s: float, echoes: int, t2_s: float | None = None,
                    output: str = "spikelets") -> np.ndarray:
    """The factor that turns a powder pattern on ``axis`` into an echo train's spectrum.

    Parameters
    ----------
    axis : Axis
        The spectral axis (offsets from nu_ref in Hz at its points).
    carrier_hz : float
        Carrier (transmitter) offset from nu_ref (Hz): the spikelets sit at ``carrier_hz + j / period_s``.
    period_s : float
        Echo period tau (s).
    echoes : int
        Number of echoes N (>= 1).
    t2_s : float or None, optional
        Decay time constant of the echo tops (s); None: no decay.
    output : {"spikelets", "envelope"}
        The comb (bin-averaged) or the constant height of its spikelets.

    Returns
    -------
    numpy.ndarray, shape (points,)

    See Also
    --------
    spikelet_positions_hz

    References
    ----------
    F. H. Larsen, H. J. Jakobsen, P. D. Ellis, N. C. Nielsen, J. Phys. Chem. A 101 (1997) 8597 (from memory).

    Examples
    --------
    >>> from powderspin.engine.lineshape import make_axis
    >>> ax = make_axis(1000, 100e6, center_ppm=0.0, width_ppm=100.0)     # 10 Hz per point
    >>> c = echo_train_comb(ax, 0.0, 1e-3, 8)
    >>> round(float(c.mean()), 6)        # the comb's mean over whole periods is 1
    1.0
    """
    if output not in ("spikelets", "envelope"):
        raise ValueError(f"output = {output!r} is not one of 'spikelets', 'envelope'")
    if not (period_s > 0 and math.isfinite(period_s)):
        raise ValueError(f"period_s = {period_s!r} must be a positive number of seconds")
    n = int(echoes)
    if n < 1:
        raise ValueError(f"echoes = {echoes!r} must be at least 1")
    r = 1.0 if t2_s is None else math.exp(-period_s / t2_s)
    k = np.arange(n, dtype=float)
    amp = r ** k
    if output == "envelope":
        return np.full(axis.points, float(amp.sum()))
    x = axis.hz - float(carrier_hz)
    dx = abs(axis.dx_hz)
    out = np.zeros(axis.points)
    block = max(1, _BLOCK // max(1, axis.points))
    for a in range(0, n, block):
        kk = k[a:a + block]
        coef = amp[a:a + block] * np.sinc(kk * period_s * dx)
        out += np.cos(2.0 * np.pi * np.outer(x, kk * period_s)) @ coef
    return out


def spikelet_positions_hz(axis: Axis, carrier_hz: float, period_s: float) -> np.ndarray:
    """Spikelet positions ``carrier_hz + j / period_s`` (Hz) inside the axis.

    Parameters
    ----------
    axis : Axis
    carrier_hz : float
    period_s : float

    Returns
    -------
    numpy.ndarray

    Examples
    --------
    >>> from powderspin.engine.lineshape import make_axis
    >>> ax = make_axis(1000, 100e6, center_ppm=0.0, width_ppm=100.0)
    >>> spikelet_positions_hz(ax, 0.0, 1e-3)[:3].tolist()
    [-4000.0, -3000.0, -2000.0]
    """
    lo, hi = float(min(axis.hz[0], axis.hz[-1])), float(max(axis.hz[0], axis.hz[-1]))
    j = np.arange(math.ceil((lo - carrier_hz) * period_s), math.floor((hi - carrier_hz) * period_s) + 1)
    return carrier_hz + j / period_s
