"""Automatic phasing: causality (the default, ``phase = "auto"``) against minimum entropy (``phase = "entropy"``).

SYNTHETIC data (powderspin's own spectra turned into FIDs by tests/processing/synthetic.py, not measurements): two
broad static central-transition patterns and two narrow MAS spectra, each with ten seeded draws of a zero-order
phase error in (-180, 180) deg, a first-order error in (-150, 150) deg, a fractional group delay, a DC offset and
noise.  The figure of merit is the residual phase error (degrees) where the pattern has at least 5 % of its
maximum: the largest over those points, per draw; printed as median and worst over the draws, with the time per
phasing (best of 3 for one draw).

Run:  python benchmarks/bench_phasing.py
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
from _common import best_time  # noqa: E402

from powderspin.io.raw import RawFID  # noqa: E402
from powderspin.processing import process, processing_record  # noqa: E402
from tests.processing.synthetic import fft_axis_hz, fid_from_spectrum, simulate_on_fft_grid  # noqa: E402

GRPDLY = 67.985
DRAWS = 10

#: (label, nucleus, field, sites, dwell s, points of the transform, recorded points, carrier offset Hz, measurement)
CASES = [
    ("27Al static, C_Q 8 MHz", "27Al", 9.4, [{"cq_mhz": 8.0, "eta_q": 0.3, "shift_ppm": 10.0}], 1e-6, 8192, 4096,
     -20000.0, {"lorentz_hz": 2000.0}),
    ("93Nb static, C_Q 30 MHz", "93Nb", 9.4, [{"cq_mhz": 30.0, "eta_q": 0.1, "shift_ppm": -1000.0}], 1e-6, 8192,
     4096, 0.0, {"lorentz_hz": 3000.0}),
    ("27Al MAS, two sites", "27Al", 9.4, [{"shift_ppm": 62.0, "cq_mhz": 3.0, "eta_q": 0.5},
                                         {"shift_ppm": 4.0, "cq_mhz": 5.0, "eta_q": 0.3, "weight": 0.6}],
     1e-5, 8192, 4096, 1500.0, {"spinning_hz": "inf", "lorentz_hz": 150.0, "gauss_hz": 100.0}),
    ("23Na MAS, narrow", "23Na", 9.4, [{"shift_ppm": 7.0, "cq_mhz": 1.0, "eta_q": 0.2}], 2e-5, 8192, 4096, 0.0,
     {"spinning_hz": "inf", "lorentz_hz": 40.0}),
]


def residual_deg(rec, e0, e1, x, where) -> float:
    p0, p1 = rec["phase"]["phase0_deg"], rec["phase"]["phase1_deg"]
    r = (p0 + e0 + (p1 + e1) * x[where] + 180.0) % 360.0 - 180.0
    return float(np.max(np.abs(r)))


def main() -> None:
    print(f"residual phase error (deg) where the pattern is >= 5 % of its maximum; {DRAWS} draws each")
    print(f"  {'case':28s} {'method':8s} {'median':>8s} {'worst':>8s} {'time':>9s}")
    for label, nuc, field, sites, dw, m, n, offset, meas in CASES:
        g, nu = simulate_on_fft_grid(nuc, field, sites, m, dw, offset, **meas)
        x = fft_axis_hz(m, dw) * dw
        where = g > 0.05 * g.max()
        rng = np.random.default_rng(2024)
        draws = []
        for seed in range(DRAWS):
            e0, e1 = rng.uniform(-180.0, 180.0), rng.uniform(-150.0, 150.0)
            fid = fid_from_spectrum(g, dw, n, group_delay=GRPDLY, phase0_deg=e0, phase1_deg=e1, dc=0.01 - 0.02j,
                                    noise=2e-3, seed=seed)
            draws.append((e0, e1, RawFID(fid, dw, nu + offset, nu, nuc, field, GRPDLY, "synthetic")))
        for method in ("auto", "entropy"):
            errs = []
            t0 = time.perf_counter()
            for e0, e1, raw in draws:
                errs.append(residual_deg(processing_record(process(raw, phase=method, zero_fill_points=m)), e0, e1, x,
                                         where))
            t = best_time(lambda: process(draws[0][2], phase=method, zero_fill_points=m), repeat=3)
            del t0
            print(f"  {label:28s} {method:8s} {np.median(errs):8.3f} {np.max(errs):8.3f} {t * 1e3:7.0f} ms")


if __name__ == "__main__":
    main()
