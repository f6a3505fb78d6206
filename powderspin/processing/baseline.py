"""Baseline correction through automatically found signal-free regions.

How the signal-free points are found (our procedure)
----------------------------------------------------
1. The spectrum is smoothed with a moving average of ``w`` points
   (w = n / 512, at least 5).  The differences d_k of the smoothed spectrum
   ``w`` points apart give its noise: sigma_d = 1.4826 median(|d - median d|)
   (the median absolute deviation, robust against the lines; common
   practice), and sigma_d / sqrt 2 is the noise of one smoothed point.
   Differences ``w`` apart stay independent when apodisation has correlated
   neighbouring points, which differences of neighbours would not.
2. First pass: where |d_k| exceeds ``THRESHOLD`` sigma_d there is signal (an
   offset or a gentle tilt of the baseline changes little over w points).
   Signal is widened by ``2 w`` points on each side (the wings of lines).
3. Then a baseline of the chosen kind is fitted through the free points; the
   residual is smoothed the same way, every point whose smoothed residual
   exceeds ``THRESHOLD`` sigma_d / sqrt 2 is signal (widened as before), and
   the baseline is fitted again through the rest, until the set stops
   changing (by more than 0.1 % of the points; at most 12 passes).  The
   polynomial is fitted to the means of the free points in blocks of w
   points, weighted by their number.
4. A baseline lies under the spectrum: if more than ``MIN_FREE_FRACTION`` of
   the (smoothed) points lie below it by more than the threshold, the
   candidate points were on the signal (the flat top of a pattern that fills
   the window) and no baseline is subtracted.
5. If fewer than ``MIN_FREE_FRACTION`` of the points stay free, no baseline is
   subtracted and the result says so: the spectrum has no room for one
   (wideline patterns that fill the window).

The regions found are returned as ranges of point indices (the pipeline
reports them in ppm).  Kinds: a polynomial of the given degree in
``u`` from -1 to 1 across the window (numpy.polynomial.Polynomial.fit), or a
smoothing spline whose smoothness is chosen by generalised cross-validation
(scipy.interpolate.make_smoothing_spline; G. Wahba, "Spline models for
observational data", SIAM (1990)), fitted through the free points averaged in
blocks of w points.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import maximum_filter1d, uniform_filter1d

__all__ = ["BaselineResult", "correct_baseline", "noise_level", "THRESHOLD", "MIN_FREE_FRACTION"]

#: a smoothed residual beyond this many of its standard deviations is signal
THRESHOLD = 3.0
#: the least fraction of points that must stay signal-free for a baseline to be fitted
MIN_FREE_FRACTION = 0.1


@dataclass(frozen=True)
class BaselineResult:
    """A baseline and the signal-free points it was fitted through.

    Attributes
    ----------
    baseline : ndarray
        The baseline at every point (zeros when none was fitted).
    free : ndarray of bool
        The signal-free points.
    regions : tuple of (int, int)
        Runs of free points as (first, last) indices, inclusive.
    fitted : bool
        False when too few points were free (the baseline is then zero).
    note : str
        What was done, in words.
    """

    baseline: np.ndarray
    free: np.ndarray
    regions: tuple
    fitted: bool
    note: str


def noise_level(y: np.ndarray) -> float:
    """Robust noise standard deviation from point-to-point differences (module notes).

    Parameters
    ----------
    y : ndarray

    Returns
    -------
    float

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> round(noise_level(rng.normal(0.0, 2.0, 20000)), 1)
    2.0
    """
    d = np.diff(np.asarray(y, dtype=float))
    return float(1.4826 * np.median(np.abs(d - np.median(d))) / np.sqrt(2.0))


def _runs(mask: np.ndarray) -> tuple:
    m = np.concatenate([[False], mask, [False]]).astype(np.int8)
    edges = np.flatnonzero(np.diff(m))
    return tuple((int(a), int(b) - 1) for a, b in zip(edges[0::2], edges[1::2]))


def _fit(kind: str, degree: int, u: np.ndarray, y: np.ndarray, free: np.ndarray, w: int) -> np.ndarray:
    if kind == "polynomial":
        # least squares on the means of the free points in blocks of w (weights: their counts), which is the
        # same fit to within the baseline's variation over a block, and w times cheaper
        nb = u.size // w
        cnt = free[: nb * w].reshape(nb, w).sum(axis=1)
        keep = cnt > 0
        if keep.sum() <= degree + 1:
            p = np.polynomial.Polynomial.fit(u[free], y[free], degree)
            return p(u)
        fy = np.where(free, y, 0.0)[: nb * w].reshape(nb, w).sum(axis=1)[keep] / cnt[keep]
        fu = np.where(free, u, 0.0)[: nb * w].reshape(nb, w).sum(axis=1)[keep] / cnt[keep]
        p = np.polynomial.Polynomial.fit(fu, fy, degree, w=np.sqrt(cnt[keep]))
        return p(u)
    from scipy.interpolate import make_smoothing_spline
    idx = np.flatnonzero(free)
    blocks = np.array_split(idx, max(4, idx.size // w))
    bu = np.array([u[b].mean() for b in blocks if b.size])
    by = np.array([y[b].mean() for b in blocks if b.size])
    if bu.size < 5:
        return np.polynomial.Polynomial.fit(u[free], y[free], 1)(u)
    spline = make_smoothing_spline(bu, by)
    return spline(u)


def correct_baseline(y: np.ndarray, kind: str = "polynomial", degree: int = 1) -> BaselineResult:
    """Find the signal-free points and fit a baseline through them (module notes).

    Parameters
    ----------
    y : ndarray
        Real spectrum.
    kind : {"polynomial", "spline"}
    degree : int, optional
        Polynomial degree (0 to 8).

    Returns
    -------
    BaselineResult

    Examples
    --------
    >>> u = np.linspace(-1, 1, 4096)
    >>> line = np.exp(-(u / 0.05) ** 2)
    >>> rng = np.random.default_rng(0)
    >>> y = line + 0.3 + 0.2 * u + rng.normal(0, 0.002, u.size)
    >>> res = correct_baseline(y, "polynomial", 1)
    >>> res.fitted, bool(np.max(np.abs(res.baseline - (0.3 + 0.2 * u))) < 0.003)
    (True, True)
    """
    y = np.asarray(y, dtype=float)
    n = y.size
    u = np.linspace(-1.0, 1.0, n)
    w = max(5, n // 512)
    ys = uniform_filter1d(y, w, mode="nearest")
    # the noise of the smoothed spectrum, from its differences w points apart (apodisation correlates
    # neighbouring points, so differences of neighbours would understate it)
    d = ys[2 * w:] - ys[w:-w] if n > 4 * w else np.diff(ys)
    sigma_d = 1.4826 * float(np.median(np.abs(d - np.median(d))))
    if not sigma_d > 0:
        sigma_d = 1e-12 * max(1.0, float(np.max(np.abs(y))))
    need = max(MIN_FREE_FRACTION * n, degree + 2)

    def grow(signal):
        return maximum_filter1d(signal.astype(np.int8), 4 * w + 1) > 0

    # first pass: the change of the smoothed spectrum over w points (independent of any offset or gentle tilt)
    slope = np.zeros(n)
    if n > 4 * w:
        slope[w:-w] = np.abs(d)
    free = ~grow(slope > THRESHOLD * sigma_d)
    free[: w] = free[-w:] = free[w] if n > 2 * w else True  # the moving average is biased at the ends
    if free.sum() < need:
        return BaselineResult(np.zeros(n), free, _runs(free), False,
                              f"no baseline: only {int(free.sum())} of {n} points are free of signal "
                              f"(at least {MIN_FREE_FRACTION:.0%} are needed)")
    # then: the residual from the baseline through the free points, until the set stops changing
    for _ in range(12):
        base = _fit(kind, degree, u, y, free, w)
        r = uniform_filter1d(y - base, w, mode="nearest")
        new = ~grow(np.abs(r) > THRESHOLD * sigma_d / np.sqrt(2.0))
        if new.sum() < need or np.count_nonzero(new != free) <= 1e-3 * n:
            break
        free = new
    base = _fit(kind, degree, u, y, free, w)
    # a baseline lies under the spectrum: "free" points on the top of a pattern that fills the window would
    # give a "baseline" with most of the spectrum below it
    below = np.count_nonzero(ys < base - THRESHOLD * sigma_d / np.sqrt(2.0))
    if below > MIN_FREE_FRACTION * n:
        return BaselineResult(np.zeros(n), free, _runs(free), False,
                              f"no baseline: {below} of {n} points lie below the curve through the "
                              "candidate signal-free points, which must be on the signal itself")
    what = f"polynomial of degree {degree}" if kind == "polynomial" else "smoothing spline (GCV)"
    return BaselineResult(base, free, _runs(free), True,
                          f"{what} through {int(free.sum())} signal-free points in {len(_runs(free))} regions")
