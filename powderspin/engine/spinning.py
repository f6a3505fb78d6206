"""Sample spinning: rotor averages and gamma-averaged sideband intensities.

For a crystallite whose rotor axis is fixed, the offset of a transition is a
periodic function nu(t) of the rotor phase.  Writing
``nu(t) = nu_bar + sum_{k != 0} c_k exp(i k w_r t)``, the accumulated phase is
``xi(t) = sum_k c_k / (i k nu_r) exp(i k w_r t)`` and, after averaging over
the initial rotor phase gamma, the spectrum of the crystallite is a comb of
lines at ``nu_bar + n nu_r`` with intensities ``|F_n|^2``, where F_n are the
Fourier coefficients of ``exp(i xi(t))`` over one period (they sum to 1).
The sampled trajectory (P phases) gives the c_k exactly when the offset is a
trigonometric polynomial of degree < P/2 (degree 2 at first order, 4 at
second order); exp(i xi) is not band-limited, so P is chosen so that the
intensity aliased into the outermost bands stays below a tolerance.

References
----------
M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300; J. Herzfeld,
A. E. Berger, J. Chem. Phys. 73 (1980) 6021; M. H. Levitt, J. Magn. Reson. 82
(1989) 427 (why the gamma average leaves |F_n|^2 and one common phase).
"""

from __future__ import annotations

import math

import numpy as np

from . import _kernels as _k
from .frequencies import checked_directions, kernel_geometry, upper_level_indices
from .threads import split_work

__all__ = [
    "rotor_lines",
    "choose_rotor_phases",
    "outer_band_fraction",
    "perturbative_sidebands",
    "rotor_fourier_components",
    "trajectory_sidebands",
]


def _check_rotor_angle(rotor_angle_rad: float) -> float:
    a = float(rotor_angle_rad)
    if not (0.0 <= a <= math.pi / 2 + 1e-12):
        raise ValueError(f"rotor_angle_rad = {rotor_angle_rad!r} is outside the allowed range [0, pi/2]")
    return a

#: largest number of rotor phases (the automatic choice and the rotor_phases
#: key); beyond it the sideband manifold is refused rather than aliased
MAX_ROTOR_PHASES = 65536


def rotor_lines(traj: np.ndarray, rate_hz: float) -> tuple[np.ndarray, np.ndarray]:
    """Rotor averages and sideband intensities from sampled trajectories.

    Parameters
    ----------
    traj : ndarray, shape (N, T, P)
        Offsets (Hz) at P equally spaced rotor phases (P a power of 2).
    rate_hz : float
        Spinning rate nu_r (Hz), > 0 and finite.

    Returns
    -------
    mean : ndarray (N, T)
        Rotor-period averages (the centre band positions).
    amp : ndarray (N, T, P)
        |F_n|^2 with band n at index ``n mod P``; each row sums to 1.

    References
    ----------
    M. H. Levitt, J. Magn. Reson. 82 (1989) 427.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(16) / 16.0
    >>> traj = (1000.0 * np.cos(2 * np.pi * t))[None, None, :]
    >>> mean, amp = rotor_lines(traj, 1000.0)   # modulation index 1
    >>> round(float(amp[0, 0, 0]), 4)           # J0(1)^2
    0.5855
    """
    p = traj.shape[-1]
    if p & (p - 1):
        raise ValueError(f"rotor phases = {p} must be a power of 2")
    if not (rate_hz > 0 and math.isfinite(rate_hz)):
        raise ValueError(f"spinning_hz = {rate_hz!r} must be finite and > 0 here")
    return _k._sideband_intensities(np.ascontiguousarray(traj, dtype=float), float(rate_hz))


def outer_band_fraction(amp: np.ndarray, weights: np.ndarray | None = None) -> float:
    """Intensity in the outer quarter of the bands (|n| > 3P/8).

    Those bands hold what aliasing would corrupt first; a small value means P
    phases resolve the sideband manifold.

    Parameters
    ----------
    amp : ndarray (N, T, P)
        Sideband intensities, each (N, T) row summing to 1.
    weights : ndarray (N, T), optional
        Powder and transition weights.  Given, the result is the fraction of
        the total (weighted) intensity in the outer bands; omitted, it is the
        largest fraction over all crystallites and transitions.

    Returns
    -------
    float
        Fraction (dimensionless, 0 ... 1) of the intensity in bands with
        ``|n| > 3P/8``; 0.0 when P < 8.

    References
    ----------
    M. H. Levitt, J. Magn. Reson. 82 (1989) 427 (sideband intensities
    |F_n|^2); E. O. Brigham, *The Fast Fourier Transform and Its
    Applications* (1988) (aliasing of sampled spectra) (from memory).

    Examples
    --------
    >>> import numpy as np
    >>> outer_band_fraction(np.full((1, 1, 16), 1.0 / 16))   # bands 7, -7, -8 of 16
    0.1875
    >>> centre = np.zeros((1, 1, 16)); centre[..., 0] = 1.0
    >>> outer_band_fraction(centre)
    0.0
    """
    p = amp.shape[-1]
    if p < 8:
        return 0.0
    n = np.fft.fftfreq(p, 1.0 / p)
    outer = amp[..., np.abs(n) > 3 * p / 8].sum(axis=-1)
    if weights is None:
        return float(outer.max())
    w = np.asarray(weights, dtype=float)
    return float((w * outer).sum() / w.sum())


def choose_rotor_phases(spread_hz: float, rate_hz: float) -> int:
    """A first guess for the number of rotor phases from the trajectory spread.

    Parameters
    ----------
    spread_hz : float
        Largest |nu(t) - nu_bar| over all crystallites (Hz).
    rate_hz : float
        Spinning rate (Hz).

    Returns
    -------
    int
        A power of 2, at least 16: about four times the number of bands that
        carry intensity by Carson's bandwidth rule for frequency modulation
        (2 (deviation/rate + harmonics)).  It may exceed
        :data:`MAX_ROTOR_PHASES`; the caller refuses such a manifold.

    References
    ----------
    J. R. Carson, Proc. IRE 10 (1922) 57 (bandwidth of frequency modulation).

    Examples
    --------
    >>> choose_rotor_phases(5000.0, 1000.0)   # 5 kHz spread at 1 kHz spinning
    64
    >>> choose_rotor_phases(0.0, 20000.0)
    16
    """
    bands = 2.0 * (spread_hz / rate_hz + 4.0)
    p = 16
    while p < 2.0 * bands and p < (1 << 40):
        p *= 2
    return p


def perturbative_sidebands(frame, directions, m_upper, *, rotor_angle_rad: float, phases: int, rate_hz: float,
                           second_order: bool = True, adaptive: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """Rotor averages and sideband intensities for perturbative frequencies (fast path).

    Equivalent to ``rotor_lines(perturbative_offsets(...), rate_hz)`` (checked
    in the tests) but computes the trajectories' Fourier components k = 0..4
    from 16 samples and sums the phase from them.

    Parameters
    ----------
    frame : powderspin.engine.frequencies.SiteFrame
    directions : ndarray (N, 3)
        Rotor-axis directions in the crystallite frame.
    m_upper : sequence of float
        Upper levels m of the transitions m -> m-1.
    rotor_angle_rad : float
        Angle between rotor axis and B0 (radians), in [0, pi/2].
    phases : int
        P, a power of 2 (>= 16).
    rate_hz : float
        Spinning rate nu_r (Hz), > 0 and finite.
    second_order : bool, optional
        Include the second-order quadrupolar term.
    adaptive : bool, optional
        Compute each block of 8 crystallites of one transition at the fewest
        phases P' <= P its own manifold needs (first guess from its spread by
        Carson's rule, doubled while more than 1e-12 of a line's intensity lies
        in the outer quarter of its bands); its bands beyond P'/2 are zero.  A
        slow-spinning manifold is as wide as its widest crystallites, and most
        are narrower.  False: every line at P phases.

    Returns
    -------
    mean : ndarray (N, T)
        Rotor-period averages (Hz), the centre-band positions.
    amp : ndarray (N, T, P)
        |F_n|^2 with band n at index ``n mod P``; each row sums to 1.

    References
    ----------
    M. H. Levitt, J. Magn. Reson. 82 (1989) 427.

    Examples
    --------
    >>> import numpy as np
    >>> from powderspin.engine.frequencies import site_frame
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> from powderspin.physics.tensors import ShiftTensor
    >>> f = site_frame(Site(shift=ShiftTensor(0.0, 50.0, 0.3)), get_nuclide("31P"), 9.4)
    >>> mean, amp = perturbative_sidebands(f, [[0.0, 0.0, 1.0]], [0.5], rotor_angle_rad=0.9553,
    ...                                    phases=64, rate_hz=2000.0)
    >>> round(float(amp.sum()), 12)
    1.0
    """
    p = int(phases)
    if p < 16 or p & (p - 1):
        raise ValueError(f"rotor phases = {p} must be a power of 2 >= 16")
    if not (rate_hz > 0 and math.isfinite(rate_hz)):
        raise ValueError(f"spinning_hz = {rate_hz!r} must be finite and > 0 here")
    rotor_angle_rad = _check_rotor_angle(rotor_angle_rad)
    d = checked_directions(directions)
    upper_level_indices(frame.spin, m_upper)
    geo = kernel_geometry(frame, d, rotor_angle_rad, p)
    rest = (np.ascontiguousarray(m_upper, dtype=float), float(frame.spin), bool(second_order), float(rate_hz),
            bool(adaptive))
    parts = split_work(lambda a, b: _k._perturbative_sidebands(geo[0][a:b], *geo[1:], *rest), geo[0].shape[0],
                       grain=_k._LANES * max(1, 4096 // p))
    if len(parts) == 1:
        return parts[0]
    return np.concatenate([q[0] for q in parts]), np.concatenate([q[1] for q in parts])


def rotor_fourier_components(frame, directions, m_upper, *, rotor_angle_rad: float) -> np.ndarray:
    """Fourier components k = -4..4 of each transition's offset over one rotor period.

    The offset of a crystallite whose rotor axis is ``n`` is, at rotor phase
    phi, ``nu(phi) = sum_k c_k exp(i k phi)`` with ``|k| <= 2`` for the
    first-order (rank-2) terms and ``|k| <= 4`` once the second-order
    quadrupolar (rank-0, 2 and 4) terms are included.  The engine evaluates the
    offset at 16 equally spaced phases (``b(phi)`` on the cone about ``n``;
    see :mod:`powderspin.engine._kernels`), which gives these components exactly;
    ``tests/engine/test_spinning_fourier.py`` checks them against an independent
    spherical-tensor route with Wigner rotations principal frame -> rotor
    frame -> laboratory.

    Parameters
    ----------
    frame : powderspin.engine.frequencies.SiteFrame
    directions : array_like (N, 3)
        Rotor-axis directions in the crystallite frame.
    m_upper : sequence of float
        Upper levels m of the transitions m -> m-1.
    rotor_angle_rad : float
        Angle between rotor axis and B0.

    Returns
    -------
    ndarray, complex, shape (N, T, 9)
        ``c[..., k + 4]`` for k = -4..4 (Hz).  The phase origin is the
        direction ``u`` of :func:`powderspin.engine._kernels._perp3`.

    References
    ----------
    M. Mehring, *Principles of High Resolution NMR in Solids* (1983), ch. 2 and
    app. B; A. Samoson, E. Lippmaa, A. Pines, Mol. Phys. 65 (1988) 1013 (rank-4
    terms under sample rotation).

    Examples
    --------
    >>> import math
    >>> from powderspin.engine.frequencies import site_frame
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> from powderspin.physics.tensors import ShiftTensor
    >>> f = site_frame(Site(shift=ShiftTensor(0.0, 50.0, 0.0)), get_nuclide("31P"), 9.4)
    >>> c = rotor_fourier_components(f, [[0, 0, 1]], [0.5], rotor_angle_rad=math.acos(3 ** -0.5))
    >>> bool(abs(c[0, 0, 4]) < 1e-9)   # rotor axis along the unique axis: MAS average is zero
    True
    """
    from .frequencies import perturbative_offsets

    rotor_angle_rad = _check_rotor_angle(rotor_angle_rad)
    traj = perturbative_offsets(frame, directions, m_upper, rotor_angle_rad=rotor_angle_rad, phases=16)
    c = np.fft.fft(traj, axis=2) / 16.0  # c_k exp(i k phi) convention: numpy's forward DFT
    k = np.arange(-4, 5)
    return c[..., k % 16]


def trajectory_sidebands(traj: np.ndarray, rate_hz: float, phases: int, *, adaptive: bool = True
                         ) -> tuple[np.ndarray, np.ndarray]:
    """Rotor averages and sideband intensities at ``phases`` phases from a band-limited trajectory.

    ``traj`` samples each line's offset at Q equally spaced rotor phases; when
    the offset is a trigonometric polynomial of degree below Q/2 these samples
    hold it exactly, and the phase xi is then summed from its Fourier
    components at any number P of output phases (the exact route samples its
    trajectory at a few dozen phases and needs thousands of bands at slow
    spinning).  With P = Q this is :func:`rotor_lines` (checked in the tests).

    Parameters
    ----------
    traj : ndarray, shape (N, T, Q)
        Offsets (Hz) at Q equally spaced phases, Q a power of 2.
    rate_hz : float
        Spinning rate nu_r (Hz), > 0 and finite.
    phases : int
        P, a power of 2: the number of bands computed.
    adaptive : bool, optional
        Each block of lines at the fewest phases it needs, as in
        :func:`perturbative_sidebands`.

    Returns
    -------
    mean : ndarray (N, T)
        Rotor-period averages (Hz).
    amp : ndarray (N, T, P)
        |F_n|^2 with band n at index ``n mod P``; each row sums to 1.

    References
    ----------
    M. H. Levitt, J. Magn. Reson. 82 (1989) 427.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(16) / 16.0
    >>> traj = (1000.0 * np.cos(2 * np.pi * t))[None, None, :]
    >>> mean, amp = trajectory_sidebands(traj, 1000.0, 64)   # modulation index 1
    >>> round(float(amp[0, 0, 0]), 4), amp.shape             # J0(1)^2
    (0.5855, (1, 1, 64))
    """
    q = traj.shape[-1]
    p = int(phases)
    if q & (q - 1) or q < 2:
        raise ValueError(f"trajectory samples = {q} must be a power of 2 >= 2")
    if p < 1 or p & (p - 1):
        raise ValueError(f"rotor phases = {p} must be a power of 2")
    if not (rate_hz > 0 and math.isfinite(rate_hz)):
        raise ValueError(f"spinning_hz = {rate_hz!r} must be finite and > 0 here")
    n, nt = traj.shape[:2]
    c = np.fft.fft(traj, axis=-1) / q  # nu(phi) = sum_k c_k e^{i k phi}
    mean = c[..., 0].real.copy()
    k = np.arange(1, q // 2)
    g = (c[..., 1:q // 2] / (1j * k * rate_hz)).reshape(n * nt, -1)
    if g.shape[1] == 0:
        amp = np.zeros((n * nt, p))
        amp[:, 0] = 1.0
    else:
        gr, gi = np.ascontiguousarray(g.real), np.ascontiguousarray(g.imag)
        parts = split_work(lambda a, b: _k._harmonic_sidebands(gr[a:b], gi[a:b], p, bool(adaptive)), gr.shape[0],
                           grain=_k._LANES * max(1, 4096 // p))
        amp = parts[0] if len(parts) == 1 else np.concatenate(parts)
    return mean, amp.reshape(n, nt, p)
