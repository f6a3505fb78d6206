"""Two-dimensional MQMAS: warm timings and their ratio to the 1D MAS spectrum of the same site.

Target (design.md section 6): one 27Al site, 3QMAS, infinite rate, 256 x 512
points <= 50 ms warm.  Printed: the whole simulation (Simulator built, lines,
F1 positions, 2D binning, broadening in both dimensions), a re-simulation at a
new C_Q through one Simulator (what a fit step costs), and the same two for the
1D MAS central-transition spectrum of the same site, with the ratios.  Best of
several repeats (a shared machine; see DEVELOPERS.md, 'Performance').

Run:  python benchmarks/bench_mqmas.py
"""

from __future__ import annotations

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(ROOT))
from _common import best_time  # noqa: E402

from powderspin.engine.threads import kernel_threads  # noqa: E402
from powderspin.model.modelfile import make_model  # noqa: E402
from powderspin.simulator import Simulator, simulate  # noqa: E402


def main() -> None:
    meas = {"field_tesla": 14.1, "spinning_hz": "inf", "experiment": "mqmas", "mq_order": 3, "points": 512,
            "f1_points": 256, "gauss_hz": 150.0, "f1_gauss_hz": 150.0}
    site = {"label": "Al", "shift_ppm": 60.0, "cq_mhz": {"start": 4.0, "min": 1.0, "max": 10.0}, "eta_q": 0.4}
    two_d = make_model("27Al", meas, [site])
    one_d = two_d.with_measurement(0, experiment="1d")
    s2, s1 = Simulator(two_d), Simulator(one_d)
    print(f"orientation set: {s2.orientations[0]}; 2D shape {s2.spectrum().shape}")
    values = iter(4.0 + 1e-3 * k for k in range(1, 10000))
    for threads in (1, 2):
        with kernel_threads(threads):
            t2 = best_time(lambda: simulate(two_d), repeat=7)
            t1 = best_time(lambda: simulate(one_d), repeat=7)
            r2 = best_time(lambda: s2.spectrum([next(values)]), repeat=9)
            r1 = best_time(lambda: s1.spectrum([next(values)]), repeat=9)
        print(f"{threads} thread(s): 3QMAS 256 x 512, whole simulation  {t2 * 1e3:7.1f} ms (target 50 ms); "
              f"1D MAS {t1 * 1e3:6.1f} ms; ratio 2D/1D {t2 / t1:5.1f}")
        print(f"{threads} thread(s): 3QMAS 256 x 512, new C_Q (fit step) {r2 * 1e3:7.1f} ms;                "
              f"1D MAS {r1 * 1e3:6.1f} ms; ratio 2D/1D {r2 / r1:5.1f}")


if __name__ == "__main__":
    main()
