"""Shared helpers for the benchmark scripts: warm timing and a numpy tent binning.

Importing this module (before powderspin) sets ``OMP_WAIT_POLICY=PASSIVE``
unless the environment already sets it, as the command line does: idle kernel
threads then sleep instead of spinning, which matters on a 2-core machine
where a spinning thread steals the other core (see powderspin/engine/threads.py).
"""

from __future__ import annotations

import os
import time

os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")

import numpy as np


def best_time(fn, repeat: int = 7, number: int = 1) -> float:
    """Best wall time in seconds over ``repeat`` runs of ``number`` calls (after one warm-up)."""
    fn()
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        for _ in range(number):
            fn()
        best = min(best, (time.perf_counter() - t0) / number)
    return best


def numpy_tent(freqs, tri, tri_w, amp, x0, dx, nb):
    """Straightforward numpy triangle interpolation: freqs (n_v, L), amp (n_v, L) -> (nb,).

    Same rule as the engine: point k (at x0 + (k + 0.5) dx) gets the tent density
    integrated against its linear hat function, the second difference of the
    density's second antiderivative R at the points.
    """
    out = np.zeros(nb)
    f = freqs[tri]  # (M, 3, L)
    w = amp[tri].mean(axis=1) * tri_w[:, None]  # (M, L)
    f = np.sort(f, axis=1)
    v1, v2, v3 = [(f[:, k, :] - x0) / dx - 0.5 for k in range(3)]
    v1, v2, v3, w = v1.ravel(), v2.ravel(), v3.ravel(), w.ravel()
    keep = (w > 0) & (v3 > -1.0) & (v1 < nb)
    v1, v2, v3, w = v1[keep], v2[keep], v3[keep], w[keep]
    k0 = np.clip(np.floor(v1).astype(int), 0, nb - 1)
    k1 = np.clip(np.floor(v3).astype(int) + 1, 0, nb - 1)
    cnt = k1 - k0 + 1
    rep = np.repeat(np.arange(v1.size), cnt)
    kk = k0[rep] + (np.arange(rep.size) - np.repeat(np.cumsum(cnt) - cnt, cnt))

    a, d, ww = (v2 - v1)[rep], (v3 - v1)[rep], w[rep]
    b, cen = d - a, (a + d) / 3.0

    def second_integral(t):
        rise = ww * t**3 / np.maximum(3.0 * d * a, 1e-300)
        fall = ww * (t - cen) + ww * (d - t) ** 3 / np.maximum(3.0 * d * b, 1e-300)
        return np.where(t <= 0.0, 0.0, np.where(t <= a, rise, np.where(t < d, fall, ww * (t - cen))))

    t = kk - v1[rep]
    val = second_integral(t + 1.0) - 2.0 * second_integral(t) + second_integral(t - 1.0)
    np.add.at(out, kk, val)
    return out
