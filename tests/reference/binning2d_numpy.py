"""Slow, obvious 2D binning: twin of ``powderspin.engine._kernels._bin_tent_2d``.

F2: each triangle's share per point by exact polygon clipping
(``binning_numpy.triangle_weights_clipped``: D. W. Alderman, M. S. Solum,
D. M. Grant, J. Chem. Phys. 84 (1986) 3717).  F1: the triangle's mean F1
position split between the two neighbouring F1 points by their hat functions
(``binning_numpy.hat_weights``).  The 2D share is the outer product.
"""

from __future__ import annotations

import numpy as np

from .binning_numpy import band_offsets, hat_weights, triangle_weights_clipped


def bin_triangles_2d(mean, amp, weights, f1, w1, tris, tri_w, rate_hz, f2_points, f1_points, cutoff=0.0):
    """(n1, n2) intensity: mean (n_v,), amp (n_v, P), weights (n_v,), f1 (n_v, n_t1), w1 (n_t1,)."""
    mean = np.asarray(mean, dtype=float)
    amp = np.asarray(amp, dtype=float)
    f1 = np.asarray(f1, dtype=float)
    p = amp.shape[1]
    offs = band_offsets(p, rate_hz)
    out = np.zeros((len(f1_points), len(f2_points)))
    for q, tri in enumerate(np.asarray(tris)):
        for t in range(f1.shape[1]):
            row = hat_weights(np.mean([f1[v, t] for v in tri]), f1_points)
            for s in range(p):
                w = tri_w[q] * np.mean([amp[v, s] * weights[v] for v in tri]) * w1[t]
                if abs(w) <= cutoff:
                    continue
                col = triangle_weights_clipped([mean[v] + offs[s] for v in tri], f2_points)
                out += w * np.outer(row, col)
    return out


def bin_pairs_2d(mean, f1, amp, d2, d1, weights, w1, tris, tri_w, f2_points, f1_points, cutoff=0.0):
    """(n1, n2) intensity of band pairs: amp (n_v, n_t1, Q) signed weights, offsets d2, d1 (Q,) in Hz."""
    mean = np.asarray(mean, dtype=float)
    f1 = np.asarray(f1, dtype=float)
    amp = np.asarray(amp, dtype=float)
    out = np.zeros((len(f1_points), len(f2_points)))
    for q, tri in enumerate(np.asarray(tris)):
        for t in range(f1.shape[1]):
            fc = np.mean([f1[v, t] for v in tri])
            for s in range(amp.shape[2]):
                w = tri_w[q] * np.mean([amp[v, t, s] * weights[v] for v in tri]) * w1[t]
                if abs(w) <= cutoff:
                    continue
                row = hat_weights(fc + d1[s], f1_points)
                col = triangle_weights_clipped([mean[v] + d2[s] for v in tri], f2_points)
                out += w * np.outer(row, col)
    return out
