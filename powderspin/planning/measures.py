"""The small measures of a plan: overlaps, resolutions, widths, Voigt widths and candidate rates.

The module notes of :mod:`powderspin.planning.planner` define each measure.
"""

from __future__ import annotations

import math

import numpy as np

from ..engine.lineshape import Axis, voigt_fwhm  # noqa: F401  (re-exported: the planner's width measure)
from ..model.schema import PLAN_DEFAULT_MIN_RATE_HZ, PLAN_DEFAULT_RATE_COUNT
from .rotors import PlanError

__all__ = ["overlap_fraction", "resolution_overlap", "central_width_hz", "voigt_fwhm", "candidate_rates",
           "WIDTH_FRACTION"]

#: share of a lineshape's intensity its width holds (the central 99 %)
WIDTH_FRACTION = 0.99


def overlap_fraction(covering, covered) -> float:
    """Share of ``covered``'s area that lies under ``covering``: ``sum(min(a, b)) / sum(b)``.

    Both are non-negative lineshapes on one axis (negative values, from
    rounding, count as zero).

    Parameters
    ----------
    covering : array_like
        E.g. a site's sideband manifold.
    covered : array_like
        E.g. a site's centreband.

    Returns
    -------
    float
        In [0, 1]; 0 when ``covered`` has no area.

    Examples
    --------
    >>> overlap_fraction([0.0, 1.0, 1.0], [1.0, 1.0, 0.0])
    0.5
    """
    a = np.clip(np.asarray(covering, dtype=float), 0.0, None)
    b = np.clip(np.asarray(covered, dtype=float), 0.0, None)
    total = float(b.sum())
    if total <= 0.0:
        return 0.0
    return float(np.minimum(a, b).sum() / total)


def central_width_hz(y, axis: Axis, fraction: float = WIDTH_FRACTION) -> float:
    """Width (Hz) of the central span holding ``fraction`` of a lineshape's intensity.

    Each point's intensity is spread evenly over its bin; the positions
    below which ``(1 - fraction)/2`` and ``(1 + fraction)/2`` of the
    intensity lie are interpolated linearly.

    Parameters
    ----------
    y : array_like
        Lineshape on ``axis`` (negative values count as zero).
    axis : Axis
    fraction : float, optional
        In (0, 1); default 0.99.

    Returns
    -------
    float
        NaN for a lineshape without intensity.

    Examples
    --------
    >>> ax = Axis(center_hz=0.0, width_hz=1000.0, points=10, nu_ref_hz=100e6)
    >>> round(central_width_hz([0, 0, 1, 1, 1, 1, 1, 1, 0, 0], ax, 1.0), 6)
    600.0
    """
    y = np.clip(np.asarray(y, dtype=float), 0.0, None)
    c = np.concatenate([[0.0], np.cumsum(y)])
    total = c[-1]
    if not total > 0:
        return math.nan
    edges = axis.hz[0] - 0.5 * axis.dx_hz + axis.dx_hz * np.arange(y.size + 1)
    lo_q, hi_q = 0.5 * (1 - fraction) * total, 0.5 * (1 + fraction) * total
    # first and last edges where the cumulative intensity passes each level (plateaus skipped)
    lo = _cross(c, edges, lo_q, first=True)
    hi = _cross(c, edges, hi_q, first=False)
    return float(max(0.0, hi - lo))


def _cross(c, edges, level, first: bool) -> float:
    if first:
        k = int(np.searchsorted(c, level, side="right"))
        k = min(max(k, 1), c.size - 1)
    else:
        k = int(np.searchsorted(c, level, side="left"))
        k = min(max(k, 1), c.size - 1)
    c0, c1 = c[k - 1], c[k]
    t = 0.0 if c1 == c0 else (level - c0) / (c1 - c0)
    return float(edges[k - 1] + t * (edges[k] - edges[k - 1]))


def resolution_overlap(a, b) -> float:
    """Shared area of two lineshapes over the smaller one: ``sum(min(a, b)) / min(sum(a), sum(b))``.

    Parameters
    ----------
    a, b : array_like
        Non-negative lineshapes on one axis (negative values count as zero).

    Returns
    -------
    float
        In [0, 1]; 0 when either has no area.

    Examples
    --------
    >>> resolution_overlap([1.0, 1.0, 0.0], [0.0, 1.0, 1.0])
    0.5
    """
    a = np.clip(np.asarray(a), 0.0, None)
    b = np.clip(np.asarray(b), 0.0, None)
    small = min(float(a.sum()), float(b.sum()))
    if small <= 0:
        return 0.0
    return float(np.minimum(a, b).sum() / small)


def candidate_rates(top_hz: float, count: int = PLAN_DEFAULT_RATE_COUNT,
                    low_hz: float = PLAN_DEFAULT_MIN_RATE_HZ) -> tuple:
    """A grid of spinning rates: ``count`` values spaced evenly in log(rate) from ``low_hz`` to ``top_hz``.

    Values below ``top_hz`` are rounded as a spectroscopist sets rates: to
    100 Hz below 10 kHz, 500 Hz below 50 kHz and 1 kHz above; the top is
    kept exactly.

    Parameters
    ----------
    top_hz : float
        Fastest rate (Hz).
    count : int, optional
        Number of rates (at least 2).
    low_hz : float, optional
        Slowest rate (Hz).

    Returns
    -------
    tuple of float
        Ascending, without repeats (so possibly fewer than ``count``).

    Examples
    --------
    >>> candidate_rates(24000.0, 6)
    (2000.0, 3300.0, 5400.0, 8900.0, 14500.0, 24000.0)
    """
    if not (top_hz > low_hz > 0):
        raise PlanError(f"rates: the fastest candidate rate {top_hz:g} Hz must exceed the slowest {low_hz:g} Hz")
    count = int(count)
    if count < 2:
        raise PlanError(f"rate count {count} must be at least 2")
    raw = np.geomspace(low_hz, top_hz, count)
    out = []
    for k, r in enumerate(raw):
        if k == count - 1:
            v = float(top_hz)
        else:
            d = 100.0 if r < 1e4 else (500.0 if r < 5e4 else 1000.0)
            v = float(max(d, round(r / d) * d))
        if not out or v > out[-1]:
            out.append(v)
    return tuple(out)
