"""Zero- and first-order phase: applying a correction, and finding one automatically by minimum entropy.

Convention
----------
A correction (phase0, phase1) in degrees multiplies the complex spectrum by
``exp(i (phase0 + phase1 * x) * pi / 180)``, where ``x = f / SW`` is the
offset ``f`` of each point from the carrier in units of the spectral width
``SW`` (x runs from -1/2 to 1/2 across the window).  So phase1 is the change
of the correction from the low- to the high-frequency edge of the window, and
the carrier's point is corrected by phase0 alone.

Automatic phasing, first criterion: causality (``phase = "auto"``)
------------------------------------------------------------------
A FID is causal: nothing before the excitation.  A first-order phase is a
time shift, ``exp(i 2 pi f tau)`` (phase1 = 360 tau / dw degrees); shifting a
signal that starts with a jump by a fraction of a point spreads the jump's
band-limited ringing to negative times.  So the time origin is the shift tau,
within half a dwell time of the start (phase1 within +-180 degrees: a whole
point of delay also leaves negative times empty), that leaves the least power
at negative times (the last points of the
zero-filled transform's inverse, next to t = 0); this is the causality of the
response (the Kramers-Kronig relations between absorption and dispersion;
e.g. R. R. Ernst, G. Bodenhausen, A. Wokaun, "Principles of Nuclear Magnetic
Resonance in One and Two Dimensions", Oxford (1987), section 4.2; from
memory).  Then the zero order: for a spectrum g >= 0 (every line in
absorption), the signal s(t) = sum g e^{2 pi i f t} has its largest modulus at
t = 0, where it is real and positive (|s(t)| <= sum g = s(0)); so phase0 is
minus the phase of the signal at the time origin, i.e. of the sum of the
spectrum.  That phase is read from the first points of the signal, whose phase
is phi0 + a t + b t^3 + ... (odd powers only: the mean frequency and the third
cumulant of the spectrum), fitted by weighted least squares, so that the
noise of several points averages out.  A whole echo (which is not causal)
gets the zero order only, from the sum of its spectrum.

Automatic phasing, second criterion: minimum entropy (``phase = "entropy"``)
--------------------------------------------------------------------------
The criterion is the entropy of the absolute first derivative of the real
part, with a penalty on negative intensity (L. Chen, Z. Weng, L. Goh,
M. Garland, "An efficient algorithm for automatic phase correction of NMR
spectra based on entropy minimization", J. Magn. Reson. 158 (2002) 164):

    h_k = |R_{k+1} - R_k| / sum_j |R_{j+1} - R_j|,   E = -sum_k h_k ln h_k,
    P   = gamma * sum_{R_k < 0} R_k^2 / sum_k R_k^2,

minimised over (phase0, phase1).  A well-phased absorption spectrum has the
most concentrated derivative (lowest entropy); the penalty chooses between
the two corrections 180 degrees apart, which have the same entropy.  The
penalty weight gamma (``NEGATIVE_PENALTY``) is ours: it is relative to the
spectrum's total power, so it does not depend on the data's units.

The search: a grid over phase0 (every 5 degrees) and phase1 (every 10 degrees
within ``phase1_range_deg``) on the spectrum averaged over blocks of points
(at most ``COARSE_POINTS``), then Nelder-Mead (scipy.optimize.minimize) on
block means of at most ``FINE_POINTS`` points from the two best grid cells.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import minimize

__all__ = ["apply_phase", "auto_phase", "causal_phase", "entropy_criterion", "NEGATIVE_PENALTY", "COARSE_POINTS",
           "CAUSAL_POINTS"]

#: weight of the negative-intensity penalty relative to the entropy (ours; see the module notes)
NEGATIVE_PENALTY = 20.0
#: points of the block-averaged spectrum used by the coarse grid search
COARSE_POINTS = 4096
#: points of the block-averaged spectrum used by the refinement (Nelder-Mead)
FINE_POINTS = 16384
#: points just before t = 0 whose power the causality criterion minimises
CAUSAL_POINTS = 32
#: length of the signal segment (about t = 0) the causality criterion transforms for each trial shift
SHORT_POINTS = 16384


def _taper(n: int) -> np.ndarray:
    """1 over the first three quarters, then a half cosine down to 0 (keeps a cut signal from ringing)."""
    w = np.ones(n)
    q = n // 4
    if q > 0:
        w[n - q:] = 0.5 * (1 + np.cos(np.pi * (np.arange(q) + 1) / q))
    return w


def _x(n: int) -> np.ndarray:
    """Offset of each point from the carrier in units of the spectral width (fftshift order)."""
    return (np.arange(n) - n // 2) / n


def apply_phase(spectrum: np.ndarray, phase0_deg: float, phase1_deg: float) -> np.ndarray:
    """The spectrum times ``exp(i (phase0 + phase1 x))`` (module notes).

    Parameters
    ----------
    spectrum : ndarray of complex
        Points in ascending frequency, the carrier at index ``n // 2``
        (``numpy.fft.fftshift`` order).
    phase0_deg, phase1_deg : float
        The correction (degrees).

    Returns
    -------
    ndarray of complex

    Examples
    --------
    >>> s = np.full(8, 1j)
    >>> np.round(apply_phase(s, -90.0, 0.0).real, 12)
    array([1., 1., 1., 1., 1., 1., 1., 1.])
    """
    s = np.asarray(spectrum, dtype=complex)
    return s * np.exp(1j * np.deg2rad(phase0_deg + phase1_deg * _x(s.size)))


def entropy_criterion(real: np.ndarray, gamma: float = NEGATIVE_PENALTY) -> float:
    """Entropy of the normalised absolute first derivative plus the negative-intensity penalty.

    Parameters
    ----------
    real : ndarray
        The real part of a phased spectrum.
    gamma : float, optional
        Penalty weight.

    Returns
    -------
    float

    References
    ----------
    .. [1] L. Chen et al., J. Magn. Reson. 158 (2002) 164.

    Examples
    --------
    >>> x = np.linspace(-1, 1, 201)
    >>> line = 1 / (1 + (x / 0.05) ** 2)
    >>> entropy_criterion(line) < entropy_criterion(-line)
    True
    """
    return float(_criterion(np.asarray(real, dtype=float)[None, :], gamma)[0])


def _criterion(r: np.ndarray, gamma: float) -> np.ndarray:
    """Rows of real spectra -> criterion per row."""
    d = np.abs(np.diff(r, axis=1))
    total = d.sum(axis=1, keepdims=True)
    total[total == 0] = 1.0
    h = d / total
    with np.errstate(divide="ignore", invalid="ignore"):
        ent = -np.sum(np.where(h > 0, h * np.log(np.where(h > 0, h, 1.0)), 0.0), axis=1)
    power = np.sum(r * r, axis=1)
    power[power == 0] = 1.0
    neg = np.sum(np.minimum(r, 0.0) ** 2, axis=1) / power
    return ent + gamma * neg


def auto_phase(spectrum: np.ndarray, *, phase1_range_deg: float = 180.0,
               gamma: float = NEGATIVE_PENALTY) -> tuple[float, float]:
    """The zero- and first-order correction that minimises the entropy criterion.

    Parameters
    ----------
    spectrum : ndarray of complex
        Points in ascending frequency, the carrier at index ``n // 2``.
    phase1_range_deg : float, optional
        The first-order correction is searched in [-range, range] (degrees);
        0 searches the zero order only.
    gamma : float, optional
        Weight of the negative-intensity penalty.

    Returns
    -------
    phase0_deg, phase1_deg : float
        phase0 in (-180, 180].

    See Also
    --------
    apply_phase

    References
    ----------
    .. [1] L. Chen, Z. Weng, L. Goh, M. Garland, J. Magn. Reson. 158 (2002) 164.

    Examples
    --------
    Two Lorentzian lines (absorption + i dispersion), given a zero-order phase
    error of 50 degrees:

    >>> f = np.fft.fftshift(np.fft.fftfreq(2048, 1e-4))
    >>> lines = sum(1 / (1 - 1j * (f - f0) / 40.0) for f0 in (-2500.0, 1500.0))
    >>> p0, p1 = auto_phase(apply_phase(lines, 50.0, 0.0), phase1_range_deg=0.0)
    >>> bool(abs(p0 + 50.0) < 5.0), p1          # within a few degrees: see causal_phase for better
    (True, 0.0)
    """
    s = np.asarray(spectrum, dtype=complex)
    n = s.size
    x = _x(n)
    scale = np.max(np.abs(s))
    if not scale > 0:
        return 0.0, 0.0
    s = s / scale
    # coarse: block averages (the block centres' x keep the first-order phase right)
    m = max(1, int(np.ceil(n / COARSE_POINTS)))
    k = n // m
    sc = s[: k * m].reshape(k, m).mean(axis=1)
    xc = x[: k * m].reshape(k, m).mean(axis=1)
    p0_grid = np.deg2rad(np.arange(0.0, 360.0, 5.0))
    p1_grid = np.deg2rad(np.arange(-phase1_range_deg, phase1_range_deg + 1e-9, 10.0)) if phase1_range_deg > 0 \
        else np.zeros(1)
    rot0 = np.exp(1j * p0_grid)[:, None]
    best = []
    for p1 in p1_grid:
        t = sc * np.exp(1j * p1 * xc)
        vals = _criterion((rot0 * t[None, :]).real, gamma)
        for i in np.argsort(vals)[:2]:
            best.append((vals[i], p0_grid[i], p1))
    best.sort(key=lambda b: b[0])

    # refinement on block means of at most FINE_POINTS points (the full resolution changes the answer by far
    # less than the criterion's own bias, at a fraction of the cost)
    mf = max(1, int(np.ceil(n / FINE_POINTS)))
    kf = n // mf
    sf = s[: kf * mf].reshape(kf, mf).mean(axis=1)
    xf = x[: kf * mf].reshape(kf, mf).mean(axis=1)

    def objective(p):
        r = (sf * np.exp(1j * (p[0] + p[1] * xf))).real
        return _criterion(r[None, :], gamma)[0]

    found = None
    for _, p0, p1 in best[:2]:
        start = np.array([p0, p1])
        if phase1_range_deg > 0:
            res = minimize(objective, start, method="Nelder-Mead",
                           options={"xatol": 1e-4, "fatol": 1e-10, "initial_simplex":
                                    [start, start + [np.deg2rad(4.0), 0.0], start + [0.0, np.deg2rad(8.0)]]})
            cand = (res.fun, res.x[0], res.x[1])
        else:
            res = minimize(lambda q: objective([q[0], 0.0]), start[:1], method="Nelder-Mead",
                           options={"xatol": 1e-4, "fatol": 1e-10, "initial_simplex": [[p0], [p0 + np.deg2rad(4.0)]]})
            cand = (res.fun, res.x[0], 0.0)
        if found is None or cand[0] < found[0]:
            found = cand
    p0 = float(np.rad2deg(found[1]))
    p0 = (p0 + 180.0) % 360.0 - 180.0
    if p0 == -180.0:
        p0 = 180.0
    return p0, float(np.rad2deg(found[2]))


def causal_phase(spectrum: np.ndarray, *, whole_echo: bool = False) -> tuple[float, float]:
    """Zero- and first-order correction from causality and the signal at the time origin (module notes).

    Parameters
    ----------
    spectrum : ndarray of complex
        Transform of a zero-filled FID (at least twice its length, so that
        negative times hold no data), ascending, carrier at ``n // 2``.
    whole_echo : bool, optional
        The data are a whole echo (not causal): the zero order only.

    Returns
    -------
    phase0_deg, phase1_deg : float

    Examples
    --------
    >>> n = 4096
    >>> t = np.arange(n // 2)
    >>> fid = np.exp((2j * np.pi * 0.05 - 0.01) * t) + 0.5 * np.exp((-2j * np.pi * 0.12 - 0.02) * t)
    >>> fid[0] *= 0.5
    >>> spec = np.fft.fftshift(np.fft.fft(np.concatenate([fid, np.zeros(n // 2)])))
    >>> p0, p1 = causal_phase(apply_phase(spec, 70.0, -40.0))
    >>> round(p0, 3), round(p1, 3)
    (-70.0, 40.0)
    """
    from scipy.optimize import minimize_scalar

    s = np.asarray(spectrum, dtype=complex)
    n = s.size
    if whole_echo:
        p0 = -np.angle(np.sum(s))
        return float(np.rad2deg(p0)), 0.0
    # The leak depends on the signal near t = 0: work on the first and last SHORT_POINTS / 2 of the signal
    # (the far part of the FID tapered off smoothly), so that each trial shift costs a short transform.
    c_full = np.fft.ifft(np.fft.ifftshift(s))
    short = min(n, SHORT_POINTS)
    if short < n:
        half = short // 2
        head = c_full[:half] * _taper(half)
        tail = c_full[n - half // 2:]
        c_short = np.concatenate([head, np.zeros(short - half - tail.size, complex), tail])
        spec_u = np.fft.fft(c_short)
        n = short
    else:
        spec_u = np.fft.ifftshift(s)              # back to numpy's order for the inverse transform
    x_u = np.fft.ifftshift(_x(n))
    k = min(CAUSAL_POINTS, n // 4)

    def leak(p1):
        c = np.fft.ifft(spec_u * np.exp(1j * p1 * x_u))
        return float(np.sum(np.abs(c[n - k:]) ** 2) / np.sum(np.abs(c[:k]) ** 2))

    # within half a dwell time of the start: a whole-point delay also leaves negative times empty, so the
    # origin is only defined modulo one point (a first-order correction modulo 360 degrees)
    grid = np.linspace(-1.25 * np.pi, 1.25 * np.pi, 21)   # a little beyond +-half a point, so +-180 deg is inside
    vals = np.array([leak(g) for g in grid])
    # every local minimum of the grid, refined; a whole point of delay also leaves negative times empty, so of
    # the shifts that leak (about) the least, the one with the most signal at the origin is the start
    cands = []
    for i in range(grid.size):
        if (i == 0 or vals[i] <= vals[i - 1]) and (i == grid.size - 1 or vals[i] <= vals[i + 1]):
            lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
            res = minimize_scalar(leak, bounds=(lo, hi), method="bounded", options={"xatol": 1e-7})
            c = np.fft.ifft(spec_u * np.exp(1j * res.x * x_u))
            cands.append((float(res.fun), abs(c[0]) / max(np.max(np.abs(c[:4])), 1e-300), float(res.x)))
    least = min(f for f, _, _ in cands)
    p1 = max((cand for cand in cands if cand[0] <= 4.0 * least + 1e-12), key=lambda cand: cand[1])[2]
    c = np.fft.ifft(spec_u * np.exp(1j * p1 * x_u))
    p0 = -_origin_phase(c)
    p0 = float(np.rad2deg((p0 + np.pi) % (2 * np.pi) - np.pi))
    return p0, float(np.rad2deg(p1))


def _origin_phase(c: np.ndarray) -> float:
    """Phase of the signal at t = 0 from its first points: phase(t) = phi0 + a t + b t^3 fitted with weights |c|^2.

    The phase of s(t) = sum g e^{2 pi i f t} has only odd powers of t beyond the constant (its cumulant expansion:
    the mean frequency, then the third cumulant; the even cumulants change only the modulus), so the fit is
    unbiased to order t^5 and averages the noise of several points instead of one.
    """
    a = np.abs(c)
    k = 1
    while k < min(a.size, 64) and a[k] > 0.8 * max(a[0], a[1]):
        k += 1
    if k < 4:
        return float(np.angle(c[0]))
    t = np.arange(k, dtype=float)
    ph = np.unwrap(np.angle(c[:k]))
    w = a[:k] ** 2
    basis = np.vstack([np.ones(k), t, t ** 3]).T
    coef = np.linalg.lstsq(basis * np.sqrt(w)[:, None], ph * np.sqrt(w), rcond=None)[0]
    return float(coef[0])
