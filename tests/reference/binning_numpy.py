"""Slow, obvious binning: triangle interpolation by brute force, and line splitting.

Twin of ``powderspin.engine._kernels._bin_tent`` and ``_bin_histogram``.

The axis is a row of equally spaced points p_k (the bin centres).  Every
contribution is shared among the points by their linear "hat" functions
h_k(f) = max(0, 1 - |f - p_k| / dx): a sharp line at f gives h_k(f) of its
weight to point k, i.e. it is split linearly between the two points around
it (linear interpolation, "cloud in cell"; R. W. Hockney, J. W. Eastwood,
Computer Simulation Using Particles (1981), from memory).  The hats sum to 1
and sum_k p_k h_k(f) = f between the first and the last point, so area and
first moment are kept.  The share of the points beyond either end of the
axis is lost.

Triangle interpolation (D. W. Alderman, M. S. Solum, D. M. Grant, J. Chem.
Phys. 84 (1986) 3717) takes the frequency to vary linearly over each triangle
of the orientation mesh and the intensity to be spread uniformly over the
triangle's area.  Each point's share, the area-average of its hat over the
triangle, is computed here directly from that definition, never from the
resulting "tent" density:

* :func:`triangle_weights_sampled`: random points uniform in the triangle
  (barycentric coordinates from the standard square-root construction), each
  split between its two neighbouring points; converges as 1/sqrt(samples);
* :func:`triangle_weights_clipped`: exact: the triangle is clipped by the two
  lines f = p_k and f = p_(k+1) around each gap between points
  (Sutherland-Hodgman polygon clipping in a reference triangle); the hats are
  linear inside a gap, so the clipped piece gives its area times the hat
  values at the mean frequency of the piece, which is the frequency at the
  piece's centroid (the frequency is linear; centroid by the shoelace
  formula).

Line positions: band n of a line at ``mean`` sits at ``mean + n * rate_hz``;
bands are stored in FFT order (index s holds n = s for s < (P+1)//2, else
s - P).  A triangle's intensity for a band is its weight times the mean of
its three vertex intensities (``amp * weights_t``).
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "band_offsets",
    "hat_weights",
    "triangle_weights_sampled",
    "triangle_weights_clipped",
    "bin_triangles",
    "histogram_lines",
]

_REF = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]])  # reference triangle, area 1/2


def band_offsets(p, rate_hz):
    """Band number times rate for the P stored bands (FFT order); 0 when P == 1."""
    if p == 1:
        return np.zeros(1)
    s = np.arange(p)
    n = np.where(s < (p + 1) // 2, s, s - p)
    return n * rate_hz


def _step(points):
    points = np.asarray(points, dtype=float)
    return float(points[1] - points[0])


def hat_weights(f, points):
    """h_k(f) for every line frequency f (any shape) and point: array (..., n_points)."""
    points = np.asarray(points, dtype=float)
    f = np.asarray(f, dtype=float)[..., None]
    return np.maximum(0.0, 1.0 - np.abs(f - points) / _step(points))


def triangle_weights_sampled(f, points, samples, rng):
    """Share of a triangle (vertex frequencies f[0..2]) per point, by uniform random sampling."""
    r1 = rng.random(samples)
    r2 = rng.random(samples)
    s1 = np.sqrt(r1)
    lam = np.column_stack([1 - s1, s1 * (1 - r2), s1 * r2])  # uniform over the triangle
    vals = lam @ np.asarray(f, dtype=float)
    return hat_weights(vals, points).mean(axis=0)


def _clip(poly, vals, level, keep_above):
    """Sutherland-Hodgman: keep the part of a polygon where the linear function >= level (or <=)."""
    out_p, out_v = [], []
    n = len(poly)
    for i in range(n):
        p, vp = poly[i], vals[i]
        q, vq = poly[(i + 1) % n], vals[(i + 1) % n]
        inside_p = vp >= level if keep_above else vp <= level
        inside_q = vq >= level if keep_above else vq <= level
        if inside_p:
            out_p.append(p)
            out_v.append(vp)
        if inside_p != inside_q:
            s = (level - vp) / (vq - vp)
            out_p.append(p + s * (q - p))
            out_v.append(level)
    return out_p, out_v


def _area_centroid(poly):
    """Area and centroid of a simple polygon (shoelace formula)."""
    if len(poly) < 3:
        return 0.0, None
    x = np.array([p[0] for p in poly])
    y = np.array([p[1] for p in poly])
    xn, yn = np.roll(x, -1), np.roll(y, -1)
    cross = x * yn - xn * y
    a2 = cross.sum()
    if a2 == 0.0:
        return 0.0, None
    cx = ((x + xn) * cross).sum() / (3.0 * a2)
    cy = ((y + yn) * cross).sum() / (3.0 * a2)
    return 0.5 * abs(a2), np.array([cx, cy])


def triangle_weights_clipped(f, points):
    """Exact share of a triangle (vertex frequencies f[0..2]) per point, by polygon clipping."""
    f = np.asarray(f, dtype=float)
    points = np.asarray(points, dtype=float)
    dx = _step(points)
    nodes = np.concatenate([[points[0] - dx], points, [points[-1] + dx]])  # hats of the edge points end here
    out = np.zeros(len(nodes))
    lo, hi = f.min(), f.max()
    if hi == lo:  # flat triangle: a sharp line
        return hat_weights(lo, points)
    for i in range(len(nodes) - 1):
        a, b = nodes[i], nodes[i + 1]
        if b < lo or a > hi:
            continue
        poly = [p.copy() for p in _REF]
        vals = list(f)
        poly, vals = _clip(poly, vals, a, True)
        if poly:
            poly, vals = _clip(poly, vals, b, False)
        area, c = _area_centroid(poly)
        if area == 0.0:
            continue
        frac = area / 0.5
        fbar = f[0] + (f[1] - f[0]) * c[0] + (f[2] - f[0]) * c[1]  # f is linear on the reference triangle
        out[i] += frac * (b - fbar) / dx
        out[i + 1] += frac * (fbar - a) / dx
    return out[1:-1]


def bin_triangles(mean, amp, weights_t, tris, tri_w, rate_hz, points, method="clipped", samples=0, rng=None,
                  cutoff=0.0):
    """Interpolated spectrum (intensity per point) summed over triangles, lines and bands.

    Triangle-line-band contributions of weight <= ``cutoff`` are left out.
    """
    mean = np.asarray(mean, dtype=float)
    amp = np.asarray(amp, dtype=float)
    p = amp.shape[2]
    offs = band_offsets(p, rate_hz)
    spec = np.zeros(len(points))
    for q, tri in enumerate(np.asarray(tris)):
        for t in range(mean.shape[1]):
            for s in range(p):
                w = tri_w[q] * np.mean([amp[v, t, s] * weights_t[v, t] for v in tri])
                if w <= cutoff:
                    continue
                f = [mean[v, t] + offs[s] for v in tri]
                if method == "clipped":
                    frac = triangle_weights_clipped(f, points)
                else:
                    frac = triangle_weights_sampled(f, points, samples, rng)
                spec += w * frac
    return spec


def histogram_lines(mean, amp, weights_t, vert_w, rate_hz, points):
    """Every vertex line and band split between its neighbouring points (dense hat matrix)."""
    mean = np.asarray(mean, dtype=float)
    amp = np.asarray(amp, dtype=float)
    p = amp.shape[2]
    offs = band_offsets(p, rate_hz)
    pos = mean[:, :, None] + offs[None, None, :]
    w = amp * np.asarray(weights_t)[:, :, None] * np.asarray(vert_w)[:, None, None]
    return w.ravel() @ hat_weights(pos.ravel(), points)
