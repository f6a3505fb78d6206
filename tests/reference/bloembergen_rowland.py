"""Analytic static powder pattern of a first-order shift anisotropy.

N. Bloembergen, T. J. Rowland, Acta Metall. 1 (1953) 731: for principal
frequencies w1 >= w2 >= w3 the powder density is

    w3 < w < w2:  I(w) = K(m) / (pi sqrt((w1 - w)(w2 - w3))),
                  m = (w - w3)(w1 - w2) / ((w1 - w)(w2 - w3))
    w2 < w < w1:  I(w) = K(m) / (pi sqrt((w - w3)(w1 - w2))),
                  m = (w1 - w)(w2 - w3) / ((w - w3)(w1 - w2))

with K the complete elliptic integral of the first kind (scipy.special.ellipk
takes the parameter m = k^2).  The density integrates to 1; it has a
logarithmic singularity at w2 and steps at the edges (an axially symmetric
tensor gives the limit 1/(2 sqrt((w_par - w_perp)(w - w_perp))).
"""

from __future__ import annotations

import numpy as np
from scipy import integrate
from scipy.special import ellipk


def density(w, w1, w2, w3):
    """Bloembergen-Rowland density at frequencies w (same units as w1..w3)."""
    w = np.asarray(w, dtype=float)
    out = np.zeros_like(w)
    if w1 - w3 <= 0:
        raise ValueError("need w1 > w3")
    if w1 == w2 or w2 == w3:
        # axially symmetric limit
        if w2 == w3:  # unique at w1 (parallel), perpendicular w2
            par, perp = w1, w2
            sel = (w > perp) & (w < par)
            out[sel] = 1.0 / (2.0 * np.sqrt((par - perp) * (w[sel] - perp)))
        else:  # unique at w3
            par, perp = w3, w2
            sel = (w < perp) & (w > par)
            out[sel] = 1.0 / (2.0 * np.sqrt((perp - par) * (perp - w[sel])))
        return out
    lo = (w > w3) & (w < w2)
    m = (w[lo] - w3) * (w1 - w2) / ((w1 - w[lo]) * (w2 - w3))
    out[lo] = ellipk(np.clip(m, 0, 1 - 1e-16)) / (np.pi * np.sqrt((w1 - w[lo]) * (w2 - w3)))
    hi = (w > w2) & (w < w1)
    m = (w1 - w[hi]) * (w2 - w3) / ((w[hi] - w3) * (w1 - w2))
    out[hi] = ellipk(np.clip(m, 0, 1 - 1e-16)) / (np.pi * np.sqrt((w[hi] - w3) * (w1 - w2)))
    return out


def binned(edges, w1, w2, w3):
    """Exact integral of the density over each bin [edges[k], edges[k+1]]."""
    edges = np.asarray(edges, dtype=float)
    out = np.zeros(edges.size - 1)
    sing = [w1, w2, w3]
    for k in range(out.size):
        a, b = edges[k], edges[k + 1]
        if b <= w3 or a >= w1:
            continue
        a2, b2 = max(a, w3), min(b, w1)
        pts = [p for p in sing if a2 < p < b2]
        val, _ = integrate.quad(lambda x: float(density(np.array([x]), w1, w2, w3)[0]), a2, b2,
                                points=pts or None, limit=200)
        out[k] = val
    return out
