"""From per-orientation lines to a spectrum: axis, binning and broadening.

Binning
-------
The spectrum is a row of points x_k = x0 + (k + 1/2) dx, the bin centres
(``Axis.hz``).  Every contribution is shared among the points by their
linear "hat" functions h_k(f) = max(0, 1 - |f - x_k| / dx): a sharp line at
f gives h_k(f) of its weight to point k, i.e. it is split linearly between
the two points around it (linear interpolation, "cloud in cell"; R. W.
Hockney, J. W. Eastwood, Computer Simulation Using Particles (1981), from
memory).  The hats add up to 1 and sum_k x_k h_k(f) = f, so every line keeps
its area and its first moment (centre of gravity) wherever it sits between
two points; the spectrum's moments follow the lines, not the grid.

``"interpolate"``: each triangle of the orientation mesh, with vertex
frequencies f1 <= f2 <= f3 and weight w (its solid-angle fraction times the
mean vertex intensity), contributes a triangular density rising from f1 to a
peak at f2 and falling to f3 with area w (D. W. Alderman, M. S. Solum, D. M.
Grant, J. Chem. Phys. 84 (1986) 3717), so a few thousand orientations give a
pattern free of orientation noise.  Each point gets the integral of that
density times its hat, exactly (a piecewise-cubic function of the vertex
positions), so area and first moment are kept for tents of every width:
where the density is straight over a hat the point gets the density's value
there; a tent that lies between two points is split from its centroid
(f1 + f2 + f3) / 3.  Integrating the tent over bins instead (each bin's mass
put at its centre) keeps the area but moves the centre of gravity, measured
over sub-step positions, by up to 0.5 step for a sharp line and 0.33, 0.17,
0.11, 0.08 and 0.06 step for tents 0.5, 1, 1.5, 2 and 3 steps wide (worst
shape, a one-sided ramp); splitting only the tents that fit inside one bin
would leave all but the sharp lines as they were, since a narrow tent mostly
straddles a bin edge.  With the hats the error is at rounding level for
every width, and the result changes continuously as a tent moves or widens.
``"histogram"``: each orientation's line is split linearly between its two
neighbouring points.

The price of the hats is a little extra smoothing: a sharp line gets the
variance r (1 - r) dx^2 (r its fractional position between the points)
instead of none, and a smooth pattern is smoothed as by a triangle of
half-width dx (variance dx^2 / 6) where whole-bin integrals smooth as by a
box of width dx (variance dx^2 / 12).  The share of a line or tent that falls
to points beyond either end of the axis is lost.

Broadening
----------
Lorentzian (FWHM L) and Gaussian (FWHM G) line shapes are applied together
as a Voigt profile by multiplying the time-domain signal by
``exp(-pi L |t|) exp(-(pi G t)^2 / (4 ln 2))`` (the Fourier transforms of the
unit-area Lorentzian and Gaussian), with zero padding so the convolution does
not wrap around.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from . import _kernels as _k
from .threads import split_work

__all__ = ["Axis", "make_axis", "bin_lines", "broaden", "baseline_values"]


@dataclass(frozen=True)
class Axis:
    """A uniform spectral axis: ``points`` bins of ``width_hz / points``.

    Attributes
    ----------
    center_hz, width_hz : float
        Centre and full width (Hz offsets from nu_ref).
    points : int
        Number of bins; intensity i belongs to the bin centred at ``hz[i]``.
    nu_ref_hz : float
        Reference frequency used for the ppm scale.

    References
    ----------
    R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (the ppm scale
    delta = 1e6 offset / nu_ref).

    Examples
    --------
    >>> ax = Axis(center_hz=0.0, width_hz=1000.0, points=4, nu_ref_hz=100e6)
    >>> ax.hz.tolist(), ax.ppm.tolist()
    ([-375.0, -125.0, 125.0, 375.0], [-3.75, -1.25, 1.25, 3.75])
    """

    center_hz: float
    width_hz: float
    points: int
    nu_ref_hz: float

    @classmethod
    def from_points(cls, hz, nu_ref_hz: float, rtol: float = 1e-6) -> "Axis":
        """The axis whose point centres are ``hz`` (uniform, ascending; e.g. a measured spectrum's).

        Parameters
        ----------
        hz : array_like
            Point positions (Hz offsets from nu_ref), ascending and uniform.
        nu_ref_hz : float
            Reference frequency (Hz).
        rtol : float, optional
            Allowed deviation from uniform spacing, relative to the step.

        Returns
        -------
        Axis

        Raises
        ------
        ValueError
            For fewer than 2 points or a non-uniform or descending axis.

        Examples
        --------
        >>> ax = Axis.from_points([-375.0, -125.0, 125.0, 375.0], 100e6)
        >>> ax.center_hz, ax.width_hz, ax.points
        (0.0, 1000.0, 4)
        """
        h = np.asarray(hz, dtype=float)
        if h.ndim != 1 or h.size < 2:
            raise ValueError(f"an axis needs at least 2 points, got shape {h.shape}")
        step = (h[-1] - h[0]) / (h.size - 1)
        if not step > 0 or np.max(np.abs(np.diff(h) - step)) > rtol * step:
            raise ValueError("the points must be ascending and uniformly spaced")
        return cls(float(0.5 * (h[0] + h[-1])), float(step * h.size), int(h.size), float(nu_ref_hz))

    @property
    def dx_hz(self) -> float:
        """Bin width (Hz).

        Returns
        -------
        float
            ``width_hz / points``.

        References
        ----------
        R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795.

        Examples
        --------
        >>> Axis(0.0, 1000.0, 4, 100e6).dx_hz
        250.0
        """
        return self.width_hz / self.points

    @property
    def left_edge_hz(self) -> float:
        """Low-frequency edge of the first bin (Hz).

        Returns
        -------
        float
            ``center_hz - width_hz / 2``.

        Examples
        --------
        >>> Axis(0.0, 1000.0, 4, 100e6).left_edge_hz
        -500.0
        """
        return self.center_hz - self.width_hz / 2.0

    @property
    def hz(self) -> np.ndarray:
        """Bin centres (Hz offsets from nu_ref), ascending.

        Returns
        -------
        numpy.ndarray, shape (points,)

        Examples
        --------
        >>> Axis(0.0, 1000.0, 4, 100e6).hz.tolist()
        [-375.0, -125.0, 125.0, 375.0]
        """
        return self.left_edge_hz + (np.arange(self.points) + 0.5) * self.dx_hz

    @property
    def ppm(self) -> np.ndarray:
        """Bin centres in ppm, ``1e6 * hz / nu_ref_hz``.

        Returns
        -------
        numpy.ndarray, shape (points,)

        Examples
        --------
        >>> Axis(0.0, 1000.0, 4, 100e6).ppm.tolist()
        [-3.75, -1.25, 1.25, 3.75]
        """
        return self.hz / self.nu_ref_hz * 1e6

    @property
    def dx_ppm(self) -> float:
        """Bin width (ppm).

        Returns
        -------
        float
            ``1e6 * dx_hz / nu_ref_hz``.

        Examples
        --------
        >>> Axis(0.0, 1000.0, 4, 100e6).dx_ppm
        2.5
        """
        return self.dx_hz / self.nu_ref_hz * 1e6


def make_axis(points: int, nu_ref_hz: float, center_ppm=None, width_ppm=None, span_hz=None) -> Axis:
    """Build an axis from explicit ppm values or from the range the lines cover.

    Parameters
    ----------
    points : int
        Number of points.
    nu_ref_hz : float
        Reference frequency (Hz).
    center_ppm, width_ppm : float or None
        Explicit centre / full width (ppm).
    span_hz : (float, float) or None
        Lowest and highest frequency that must be on the axis when the
        centre or width is not given (a 10 % margin is added each side).

    Returns
    -------
    Axis
        Centre and width in Hz; with neither ppm values nor a span, a small
        axis about 0 Hz.

    References
    ----------
    R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (ppm scale).

    Examples
    --------
    >>> make_axis(1024, 100e6, center_ppm=0.0, width_ppm=50.0).width_hz   # 50 ppm at 100 MHz
    5000.0
    >>> ax = make_axis(1024, 100e6, span_hz=(-1000.0, 3000.0))
    >>> round(ax.center_hz, 6), round(ax.width_hz, 6)
    (1000.0, 4800.0)
    """
    if span_hz is not None:
        lo, hi = float(span_hz[0]), float(span_hz[1])
    else:
        lo = hi = 0.0
    auto_w = max(hi - lo, 1e-9) * 1.2
    auto_w = max(auto_w, 20.0 * points / 2048.0, 1e-3 * nu_ref_hz * 1e-6 * 100)
    w = width_ppm * nu_ref_hz * 1e-6 if width_ppm is not None else auto_w
    if center_ppm is not None:
        c = center_ppm * nu_ref_hz * 1e-6
        if width_ppm is None and span_hz is not None:
            w = max(2.0 * max(abs(hi - c), abs(c - lo)) * 1.1, auto_w)
    else:
        c = 0.5 * (lo + hi)
    return Axis(c, w, int(points), nu_ref_hz)


def tent_binned(axis: Axis, mean: np.ndarray, amp: np.ndarray, weights_t: np.ndarray, tris: np.ndarray,
                tri_w: np.ndarray, rate_hz: float, cutoff: float) -> np.ndarray:
    """Triangle interpolation of contiguous line arrays (the kernel behind :func:`bin_lines`).

    Part of the engine's internal interface; the triangles are shared among threads
    (:func:`~powderspin.engine.threads.split_work`) and their results added.
    """
    ext = _k._band_extent(amp)
    x0, dx, nb = axis.left_edge_hz, axis.dx_hz, axis.points

    def part(a, b):
        return _k._bin_tent(mean, amp, weights_t, ext, tris[a:b], tri_w[a:b], float(rate_hz), x0, dx, nb,
                            float(cutoff))

    # a part of at least 2048 triangles (starting a thread costs about as much as binning a few hundred)
    parts = split_work(part, tris.shape[0], grain=2048)
    out = parts[0]
    for y in parts[1:]:
        out += y
    return out


def bin_lines(axis: Axis, mean, amp, weights_t, orientation_set, binning: str, rate_hz: float = 0.0,
              cutoff: float = 0.0) -> np.ndarray:
    """Bin lines onto the axis; returns the intensity fraction per bin.

    Parameters
    ----------
    axis : Axis
    mean : ndarray (n_v, n_t)
        Line centres (Hz) for each orientation and transition.
    amp : ndarray (n_v, n_t, P)
        Sideband intensities (P = 1 without sidebands), summing to ~1 over P.
    weights_t : ndarray (n_v, n_t)
        Transition weights (sum over transitions ~1).
    orientation_set : OrientationSet
        Vectors, weights and (for ``"interpolate"``) triangles.
    binning : {"interpolate", "histogram"}
    rate_hz : float
        Spinning rate; sideband n sits at ``mean + n * rate_hz``.
    cutoff : float
        Triangle-line contributions at or below this weight are skipped.

    Returns
    -------
    numpy.ndarray, shape (axis.points,)
        Fraction of the weighted intensity at each point ``axis.hz``
        (dimensionless).  Each line or tent is shared among the points by
        their linear hat functions, which keeps its area and first moment
        (see the module notes); the share of points beyond the axis ends is
        lost.

    References
    ----------
    D. W. Alderman, M. S. Solum, D. M. Grant, J. Chem. Phys. 84 (1986) 3717
    (triangle interpolation); R. W. Hockney, J. W. Eastwood, Computer
    Simulation Using Particles (1981) (linear "cloud in cell" sharing, from
    memory).

    Examples
    --------
    Points at -375, -125, 125 and 375 Hz; a line on a point stays there, a
    line between two points is split so that its centre of gravity stays put:

    >>> import numpy as np
    >>> from powderspin.physics.orientations import OrientationSet, triangulated
    >>> ax = Axis(0.0, 1000.0, 4, 100e6)
    >>> poles = OrientationSet("two-poles", "sphere", np.array([[0., 0., 1.], [0., 0., -1.]]),
    ...                        np.array([0.5, 0.5]))
    >>> bin_lines(ax, [[-375.0], [0.0]], np.ones((2, 1, 1)), np.ones((2, 1)), poles,
    ...           "histogram").tolist()
    [0.5, 0.25, 0.25, 0.0]
    >>> tri = triangulated(2, "octant")          # same line everywhere: 100 Hz
    >>> n = tri.size
    >>> y = bin_lines(ax, np.full((n, 1), 100.0), np.ones((n, 1, 1)), np.ones((n, 1)), tri, "interpolate")
    >>> np.round(y, 12).tolist(), round(float(ax.hz @ y), 9)
    ([0.0, 0.1, 0.9, 0.0], 100.0)
    """
    mean = np.ascontiguousarray(mean, dtype=float)
    amp = np.ascontiguousarray(amp, dtype=float)
    wt = np.ascontiguousarray(weights_t, dtype=float)
    if binning == "interpolate":
        if not orientation_set.has_triangles:
            raise ValueError(
                f"binning = 'interpolate' needs a triangulated orientation set; "
                f"'{orientation_set.name}' has none (use binning = 'histogram')"
            )
        tris = np.ascontiguousarray(orientation_set.triangles, dtype=np.int64)
        tw = np.ascontiguousarray(orientation_set.triangle_weights, dtype=float)
        return tent_binned(axis, mean, amp, wt, tris, tw, rate_hz, cutoff)
    if binning == "histogram":
        vw = np.ascontiguousarray(orientation_set.weights, dtype=float)
        return _k._bin_histogram(mean, amp, wt, vw, float(rate_hz), axis.left_edge_hz, axis.dx_hz, axis.points)
    raise ValueError(f"binning = {binning!r} is not one of 'interpolate', 'histogram'")


def broaden(y: np.ndarray, dx_hz: float, lorentz_hz: float = 0.0, gauss_hz: float = 0.0) -> np.ndarray:
    """Convolve a spectrum with a unit-area Voigt profile (FWHM in Hz).

    Parameters
    ----------
    y : ndarray
        Spectrum on a uniform axis of spacing ``dx_hz``.
    dx_hz : float
        Axis spacing (Hz).
    lorentz_hz, gauss_hz : float
        Full widths at half maximum (Hz), >= 0.

    Returns
    -------
    numpy.ndarray
        The broadened spectrum, same shape as ``y`` (a copy when both widths
        are 0).

    References
    ----------
    R. R. Ernst, G. Bodenhausen, A. Wokaun, *Principles of NMR in One and Two
    Dimensions* (1987), sec. 4.2 (line shapes and their Fourier transforms).

    Examples
    --------
    >>> import numpy as np
    >>> y = np.zeros(256); y[128] = 1.0
    >>> round(float(broaden(y, 1.0, lorentz_hz=4.0).sum()), 2)  # a little of the tails lies off the axis
    0.99
    """
    if lorentz_hz < 0 or gauss_hz < 0:
        raise ValueError(f"broadening FWHM must be >= 0 Hz, got lorentz_hz={lorentz_hz}, gauss_hz={gauss_hz}")
    if lorentz_hz == 0 and gauss_hz == 0:
        return np.array(y, dtype=float)
    n = y.shape[-1]
    pad = 1 << int(math.ceil(math.log2(4 * n)))
    f = np.fft.rfft(y, n=pad)
    full = np.fft.irfft(f * _voigt_envelope(pad, float(dx_hz), float(lorentz_hz), float(gauss_hz)), n=pad)
    # circular convolution with a kernel centred at index 0; with pad >= 4n the
    # first n points are the linear convolution on the axis (intensity pushed
    # beyond the axis edges is lost, as for lines outside the axis)
    return full[..., :n].copy()


@functools.lru_cache(maxsize=32)
def _voigt_envelope(pad: int, dx_hz: float, lorentz_hz: float, gauss_hz: float) -> np.ndarray:
    """The Voigt profile's Fourier transform on the padded grid (read-only; remembered: a fit's Jacobian broadens
    with the same widths in most of its columns)."""
    t = np.fft.rfftfreq(pad, d=dx_hz)  # "time" conjugate to the frequency axis
    env = np.exp(-math.pi * lorentz_hz * t) * np.exp(-((math.pi * gauss_hz * t) ** 2) / (4.0 * math.log(2.0)))
    env.flags.writeable = False
    return env


def baseline_values(coefficients, axis: Axis) -> np.ndarray:
    """A polynomial baseline on an axis: ``sum_k b_k u**k``, u from -1 to 1 across the axis.

    Parameters
    ----------
    coefficients : sequence of float
        (b0, b1, ...), in the units of the spectrum's intensity.
    axis : Axis
        ``u = (hz - center_hz) / (width_hz / 2)``: -1 and 1 at the axis
        edges, whatever its unit or position.

    Returns
    -------
    numpy.ndarray, shape (axis.points,)

    Examples
    --------
    >>> ax = Axis(center_hz=0.0, width_hz=4.0, points=4, nu_ref_hz=100e6)
    >>> baseline_values([1.0, 2.0], ax).tolist()   # u = -0.75, -0.25, 0.25, 0.75
    [-0.5, 0.5, 1.5, 2.5]
    """
    u = (axis.hz - axis.center_hz) / (0.5 * axis.width_hz)
    out = np.zeros(axis.points)
    for b in reversed(tuple(coefficients)):  # Horner
        out = out * u + float(b)
    return out


#: a simulated point is the continuous (broadened) spectrum at its frequency: a site is rendered on an internally
#: finer axis when its narrowest line (the smallest broadening FWHM it can have) spans fewer than this many points
POINTS_PER_FWHM = 20
#: at most this factor finer (odd, so that every output point is a point of the fine axis)
MAX_OVERSAMPLING = 31


def voigt_fwhm(lorentz_hz: float, gauss_hz: float) -> float:
    """FWHM (Hz) of a Voigt profile, to 0.02 %: ``0.5346 L + sqrt(0.2166 L^2 + G^2)``.

    Parameters
    ----------
    lorentz_hz, gauss_hz : float
        Lorentzian and Gaussian FWHM (Hz).

    Returns
    -------
    float

    References
    ----------
    J. J. Olivero, R. L. Longbothum, J. Quant. Spectrosc. Radiat. Transfer 17
    (1977) 233.

    Examples
    --------
    >>> voigt_fwhm(0.0, 100.0), round(voigt_fwhm(100.0, 0.0), 2)
    (100.0, 100.0)
    """
    return 0.5346 * lorentz_hz + math.sqrt(0.2166 * lorentz_hz ** 2 + gauss_hz ** 2)


def hat_corrected_gauss(gauss_hz: float, dx_hz: float) -> float:
    """The Gaussian FWHM to apply after hat binning so that points are values of the continuous spectrum.

    Sharing lines between neighbouring points by linear hats convolves the
    spectrum with a triangle of half-width ``dx`` (variance ``dx^2 / 6``).  A
    Gaussian of variance ``s^2 - dx^2 / 6`` after it gives the variance ``s^2``
    asked for, so the second-order error of the sampling vanishes (what is
    left is of order ``(dx / FWHM)^4``).  Where the Gaussian is narrower than
    that, it is left as it is (the oversampling rule then keeps the error
    small).

    Parameters
    ----------
    gauss_hz : float
        Gaussian FWHM asked for (Hz).
    dx_hz : float
        Step of the axis the lines are binned on (Hz).

    Returns
    -------
    float

    Examples
    --------
    >>> round(hat_corrected_gauss(300.0, 15.0), 3), hat_corrected_gauss(0.0, 15.0)
    (299.653, 0.0)
    """
    var = gauss_hz ** 2 - 8.0 * math.log(2.0) * dx_hz ** 2 / 6.0
    return math.sqrt(var) if gauss_hz > 0 and var > 0.25 * gauss_hz ** 2 else gauss_hz


def sampling_oversampling(dx_hz: float, fwhm_hz: float) -> int:
    """How much finer (odd factor q) to render so that a point is the continuous spectrum at its frequency.

    The binning shares each line between the two nearest points by linear
    hats, which smooths the spectrum with a triangle of half-width one step h
    (variance h^2/6).  For a Gaussian line of FWHM w this widens it by a
    relative ``(4 ln 2 / 6) (h / w)^2 = 0.46 (h / w)^2`` and lowers its peak
    by as much.  With ``h <= w / POINTS_PER_FWHM`` (20 points per FWHM) that
    is below 0.12 % before, and of order 1e-6 after, the Gaussian is narrowed
    by the hats' variance (:func:`hat_corrected_gauss`); the fine axis has
    ``q`` times the points, centred so that every ``q``-th fine point is an
    output point, and the output takes those.

    Parameters
    ----------
    dx_hz : float
        Output step (Hz).
    fwhm_hz : float
        The narrowest line's FWHM (Hz); 0 (no broadening) gives 1: an
        unbroadened spectrum has no values at points, only bin averages.

    Returns
    -------
    int
        1, 3, 5, ... up to :data:`MAX_OVERSAMPLING`.

    Examples
    --------
    >>> sampling_oversampling(103.0, 300.0), sampling_oversampling(10.0, 300.0), sampling_oversampling(10.0, 0.0)
    (7, 1, 1)
    """
    if not (fwhm_hz > 0) or dx_hz * POINTS_PER_FWHM <= fwhm_hz:
        return 1
    q = int(math.ceil(dx_hz * POINTS_PER_FWHM / fwhm_hz))
    q += 1 - q % 2
    return min(q, MAX_OVERSAMPLING)
