"""Processing a raw FID: a 64k-point FID with automatic phasing, warm, against the bare transform.

Target (issue 18; DEVELOPERS.md 'Performance'): <= 0.5 s for a 65536-point FID, every default step on
(DC offset, exact group-delay removal, zero filling to 131072 points, transform, automatic zero- and first-order
phasing, referencing), with and without a polynomial baseline through the found signal-free regions, and with the
minimum-entropy criterion.  The cheap counterpart is numpy's FFT of the same zero-filled FID.  Best of several
repeats (a shared machine).

Run:  python benchmarks/bench_process.py
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import best_time  # noqa: E402

from powderspin.io.raw import RawFID  # noqa: E402
from powderspin.processing import process  # noqa: E402

N = 65536
DWELL = 2e-6


def synthetic_fid(seed: int = 1) -> RawFID:
    """SYNTHETIC: three decaying lines and noise, delayed by a fractional group delay (not a measurement)."""
    rng = np.random.default_rng(seed)
    t = (np.arange(N) - 68.7) * DWELL
    fid = sum(a * np.exp(2j * np.pi * f * t - np.pi * w * np.abs(t))
              for a, f, w in ((1.0, 12000.0, 800.0), (0.6, -35000.0, 2500.0), (0.3, 81000.0, 400.0)))
    fid = fid * (t >= 0) * np.exp(1j * 0.7) + 0.01 * (rng.normal(size=N) + 1j * rng.normal(size=N))
    return RawFID(fid, DWELL, 104.3e6, 104.3e6, "27Al", None, 68.7, "synthetic")


def main() -> None:
    raw = synthetic_fid()
    z = np.zeros(2 * N, complex)
    z[:N] = raw.data
    t_fft = best_time(lambda: np.fft.fftshift(np.fft.fft(z)), repeat=7)
    process(raw)  # warm (imports, scipy)
    rows = [("defaults (causal phasing)", lambda: process(raw)),
            ("defaults + polynomial baseline", lambda: process(raw, baseline="polynomial", baseline_degree=2)),
            ("minimum-entropy phasing", lambda: process(raw, phase="entropy"))]
    print(f"65536-point FID, zero-filled to {2 * N}; numpy FFT alone {t_fft * 1e3:.1f} ms")
    for label, fn in rows:
        t = best_time(fn, repeat=5)
        flag = "ok" if t <= 0.5 else "OVER TARGET"
        print(f"  {label:34s} {t * 1e3:7.1f} ms  ({t / t_fft:5.0f}x the FFT)  target 500 ms: {flag}")


if __name__ == "__main__":
    main()
