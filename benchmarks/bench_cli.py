"""Cold start of the command line with the compiled numba cache present.

Targets (DEVELOPERS.md, 'Performance'): simulate <= 3 s; ``powderspin nuclide`` at most half
the time of ``simulate`` (it must not pay for numba).  Each run is a fresh process.  The ratio
printed is to a bare ``python -c "import numpy, scipy, numba"`` measured in the same run (the
floor any numba tool pays).

Run:  python benchmarks/bench_cli.py
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def wall(cmd, cwd):
    t0 = time.perf_counter()
    subprocess.run(cmd, cwd=cwd, check=True, capture_output=True)
    return time.perf_counter() - t0


def main():
    with tempfile.TemporaryDirectory() as d:
        model = ROOT / "examples" / "phosphate_static.toml"
        sim = [sys.executable, "-m", "powderspin", "simulate", str(model), "-o", "out.csv", "--force"]
        plot = sim + ["--plot", "out.png"]
        base = [sys.executable, "-c", "import numpy, scipy, numba"]
        nuclide = [sys.executable, "-m", "powderspin", "nuclide", "27Al", "--field", "9.4"]
        wall(sim, d)  # make sure the compiled cache exists
        t_sim, t_plot, t_base, t_nuc = [], [], [], []
        for _ in range(3):  # interleaved, so that all see the same load
            t_sim.append(wall(sim, d))
            t_plot.append(wall(plot, d))
            t_base.append(wall(base, d))
            t_nuc.append(wall(nuclide, d))
        t_sim, t_plot, t_base, t_nuc = min(t_sim), min(t_plot), min(t_base), min(t_nuc)
        print(f"powderspin simulate (static 31P, 2 sites): {t_sim:.2f} s cold start (target 3 s); "
              f"with --plot {t_plot:.2f} s; bare numpy+scipy+numba import {t_base:.2f} s "
              f"(ratio {t_sim / t_base:.1f})")
        print(f"powderspin nuclide 27Al --field 9.4: {t_nuc:.2f} s, ratio nuclide/simulate {t_nuc / t_sim:.2f} "
              "(target <= 0.5)")


if __name__ == "__main__":
    main()
