"""Slow, obvious binning: triangle interpolation by brute force, and plain histograms.

Twin of ``powderspin._kernels._bin_tent`` and ``_bin_histogram``.

Triangle interpolation (D. W. Alderman, M. S. Solum, D. M. Grant, J. Chem.
Phys. 84 (1986) 3717) takes the frequency to vary linearly over each triangle
of the orientation mesh and the intensity to be spread uniformly over the
triangle's area.  The fraction of the triangle whose interpolated frequency
falls in a bin is then computed here directly from that definition, never
from the resulting "tent" density:

* :func:`triangle_fractions_sampled`: random points uniform in the triangle
  (barycentric coordinates from the standard square-root construction),
  histogrammed; converges as 1/sqrt(samples);
* :func:`triangle_fractions_clipped`: exact: the triangle is clipped by the two
  lines f = lower edge and f = upper edge of each bin (Sutherland-Hodgman
  polygon clipping in a reference triangle) and the clipped area is measured
  with the shoelace formula.

Line positions: band n of a line at ``mean`` sits at ``mean + n * rate_hz``;
bands are stored in FFT order (index s holds n = s for s < (P+1)//2, else
s - P).  A triangle's intensity for a band is its weight times the mean of
its three vertex intensities (``amp * weights_t``).
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "band_offsets",
    "triangle_fractions_sampled",
    "triangle_fractions_clipped",
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


def triangle_fractions_sampled(f, edges, samples, rng):
    """Fraction of a triangle (vertex frequencies f[0..2]) per bin, by uniform random sampling."""
    r1 = rng.random(samples)
    r2 = rng.random(samples)
    s1 = np.sqrt(r1)
    lam = np.column_stack([1 - s1, s1 * (1 - r2), s1 * r2])  # uniform over the triangle
    vals = lam @ np.asarray(f, dtype=float)
    counts, _ = np.histogram(vals, bins=edges)
    return counts / samples


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


def _area(poly):
    if len(poly) < 3:
        return 0.0
    x = np.array([p[0] for p in poly])
    y = np.array([p[1] for p in poly])
    return 0.5 * abs(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1)))


def triangle_fractions_clipped(f, edges):
    """Exact fraction of a triangle (vertex frequencies f[0..2]) per bin, by polygon clipping."""
    f = np.asarray(f, dtype=float)
    out = np.zeros(len(edges) - 1)
    lo, hi = f.min(), f.max()
    for k in range(len(edges) - 1):
        a, b = edges[k], edges[k + 1]
        if b < lo or a > hi:
            continue
        poly = [p.copy() for p in _REF]
        vals = list(f)
        poly, vals = _clip(poly, vals, a, True)
        if poly:
            poly, vals = _clip(poly, vals, b, False)
        out[k] = _area(poly) / 0.5
    if hi == lo:  # flat triangle: one bin takes it all (avoid double counting on an edge)
        k = np.searchsorted(edges, lo, side="right") - 1
        out[:] = 0.0
        if 0 <= k < len(out):
            out[k] = 1.0
    return out


def bin_triangles(mean, amp, weights_t, tris, tri_w, rate_hz, edges, method="clipped", samples=0, rng=None,
                  cutoff=0.0):
    """Interpolated spectrum (intensity per bin) summed over triangles, lines and bands.

    Triangle-line-band contributions of weight <= ``cutoff`` are left out.
    """
    mean = np.asarray(mean, dtype=float)
    amp = np.asarray(amp, dtype=float)
    p = amp.shape[2]
    offs = band_offsets(p, rate_hz)
    spec = np.zeros(len(edges) - 1)
    for q, tri in enumerate(np.asarray(tris)):
        for t in range(mean.shape[1]):
            for s in range(p):
                w = tri_w[q] * np.mean([amp[v, t, s] * weights_t[v, t] for v in tri])
                if w <= cutoff:
                    continue
                f = [mean[v, t] + offs[s] for v in tri]
                if method == "clipped":
                    frac = triangle_fractions_clipped(f, edges)
                else:
                    frac = triangle_fractions_sampled(f, edges, samples, rng)
                spec += w * frac
    return spec


def histogram_lines(mean, amp, weights_t, vert_w, rate_hz, edges):
    """Plain histogram of every vertex line and band (numpy.histogram)."""
    mean = np.asarray(mean, dtype=float)
    amp = np.asarray(amp, dtype=float)
    p = amp.shape[2]
    offs = band_offsets(p, rate_hz)
    pos = mean[:, :, None] + offs[None, None, :]
    w = amp * np.asarray(weights_t)[:, :, None] * np.asarray(vert_w)[:, None, None]
    spec, _ = np.histogram(pos.ravel(), bins=edges, weights=w.ravel())
    return spec
