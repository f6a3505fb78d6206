"""Cold start of the command line with the compiled numba cache present.

Target (DEVELOPERS.md, 'Performance'): <= 3 s.  Each run is a fresh process.
The ratio printed is to a bare ``python -c "import numpy, scipy, numba"``
measured in the same run (the floor any numba tool pays).

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
        wall(sim, d)  # make sure the compiled cache exists
        t_sim = min(wall(sim, d) for _ in range(3))
        t_plot = min(wall(plot, d) for _ in range(3))
        t_base = min(wall(base, d) for _ in range(3))
        print(f"powderspin simulate (static 31P, 2 sites): {t_sim:.2f} s cold start (target 3 s); "
              f"with --plot {t_plot:.2f} s; bare numpy+scipy+numba import {t_base:.2f} s "
              f"(ratio {t_sim / t_base:.1f})")


if __name__ == "__main__":
    main()
