"""Shared helpers for the benchmark scripts: warm timing and a numpy tent binning."""

from __future__ import annotations

import time

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
    """Straightforward numpy triangle interpolation: freqs (n_v, L), amp (n_v, L) -> (nb,)."""
    out = np.zeros(nb)
    f = freqs[tri]  # (M, 3, L)
    w = amp[tri].mean(axis=1) * tri_w[:, None]  # (M, L)
    f = np.sort(f, axis=1)
    u1, u2, u3 = [(f[:, k, :] - x0) / dx for k in range(3)]
    u1, u2, u3, w = u1.ravel(), u2.ravel(), u3.ravel(), w.ravel()
    keep = w > 0
    u1, u2, u3, w = u1[keep], u2[keep], u3[keep], w[keep]
    k0 = np.clip(np.floor(u1).astype(int), 0, nb - 1)
    k1 = np.clip(np.floor(u3).astype(int), 0, nb - 1)
    cnt = k1 - k0 + 1
    rep = np.repeat(np.arange(u1.size), cnt)
    kk = k0[rep] + (np.arange(rep.size) - np.repeat(np.cumsum(cnt) - cnt, cnt))

    def cdf(u, a, b, c):
        out = np.where(u >= c, 1.0, 0.0)
        span = np.maximum(c - a, 1e-300)
        r1 = np.where(u < b, (u - a) ** 2 / (span * np.maximum(b - a, 1e-300)), 0.0)
        r2 = np.where(u >= b, 1.0 - (c - u) ** 2 / (span * np.maximum(c - b, 1e-300)), 0.0)
        inside = (u > a) & (u < c)
        return np.where(inside, r1 + r2, out)

    a, b, c = u1[rep], u2[rep], u3[rep]
    degenerate = (c - a) < 1e-9
    val = np.where(degenerate, (kk == np.floor(a)).astype(float),
                   cdf(kk + 1.0, a, b, c) - cdf(kk.astype(float), a, b, c))
    np.add.at(out, kk, w[rep] * val)
    return out
