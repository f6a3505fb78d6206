"""Time the same jobs in two installed checkouts, side by side in one run, and print the ratios.

Run from a checkout whose virtual environment has powderspin installed:

    python benchmarks/compare_revisions.py /path/to/other/checkout/.venv/bin/python [--only WORD]

The jobs use only the public API that both revisions share: simulations
(``make_model`` + ``simulate`` with explicit orientation sets and methods, so
that both revisions do the same work), a one-site MAS fit and the bundled
two-field example fit, the planner on the bundled plan example, and a Czjzek
fit from cached kernels.  The two interpreters run each job alternately,
several times, warm, and the best time of each is printed with the ratio
other/this (above 1: this checkout is faster).  A machine shared with other
work shows noise; the alternation puts both revisions under the same load.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

# name -> (set-up code run once, timed code); both run with ``ps``, ``np`` and ``ROOT`` defined.
SIMULATIONS = {
    "static 27Al CT, 10011 orientations, 4096 points":
        ("27Al", {"field_tesla": 14.1, "points": 4096, "orientations": 140, "method": "perturbation"},
         [{"cq_mhz": 5.0, "eta_q": 0.3}]),
    "static 31P shift anisotropy, 10011 orientations":
        ("31P", {"field_tesla": 14.1, "points": 4096, "orientations": 140},
         [{"shift_ppm": 5.0, "span_ppm": 180.0, "skew": 0.4}]),
    "MAS 27Al CT + shift anisotropy, 4186 orientations, 64 phases":
        ("27Al", {"field_tesla": 14.1, "spinning_hz": 15000.0, "points": 4096, "orientations": 90,
                  "rotor_phases": 64, "method": "perturbation"},
         [{"cq_mhz": 3.0, "eta_q": 0.4, "span_ppm": 40.0, "skew": 0.2, "euler_deg": [0.0, 30.0, 0.0]}]),
    "27Al all transitions, 10 kHz MAS, C_Q 3 MHz":
        ("27Al", {"field_tesla": 9.4, "spinning_hz": 10000.0, "points": 8192, "transitions": "all",
                  "orientations": 99, "method": "perturbation"},
         [{"cq_mhz": 3.0, "eta_q": 0.2}]),
    "93Nb exact route under MAS":
        ("93Nb", {"field_tesla": 9.4, "spinning_hz": 20000.0, "points": 4096, "orientations": 54,
                  "method": "exact", "rotor_phases": 32},
         [{"cq_mhz": 20.0, "eta_q": 0.3}]),
}

ONE_SITE_FIT = """
from powderspin.io.spectra import MeasuredSpectrum
truth = ps.simulate(ps.make_model("27Al", {"field_tesla": 14.1, "spinning_hz": 14000.0, "gauss_hz": 300.0,
                                           "points": 512, "center_ppm": 60.0, "width_ppm": 80.16,
                                           "orientations": "fine"},
                                  [{"label": "A", "shift_ppm": 60.0, "cq_mhz": 4.0, "eta_q": 0.35}]))
rng = np.random.default_rng(1)
y = truth.intensity + rng.normal(0.0, truth.intensity.max() / 200.0, truth.hz.size)
data = [MeasuredSpectrum(hz=truth.hz, ppm=truth.ppm, intensity=y, imag=None, nu_ref_hz=truth.nu_ref_hz,
                         source="synthetic")]
model = ps.make_model("27Al", {"field_tesla": 14.1, "spinning_hz": 14000.0,
                               "gauss_hz": {"start": 330.0, "min": 50.0, "max": 2000.0}},
                      [{"label": "A", "shift_ppm": {"start": 61.2, "min": 40.0, "max": 80.0},
                        "cq_mhz": {"start": 4.4, "min": 1.0, "max": 8.0},
                        "eta_q": {"start": 0.385, "min": 0.0, "max": 1.0}}])
"""

CASES = {name: (f"model = ps.make_model(*{args!r})", "ps.simulate(model)") for name, args in SIMULATIONS.items()}
CASES.update({
    "fit: one-site MAS, 4 free parameters": (ONE_SITE_FIT, "ps.fit(model, data)"),
    "fit: aluminophosphate example, 3 sites, 2 fields": (
        "model = ps.load_model(ROOT / 'examples' / 'alpo_fit.toml')", "ps.fit(model)"),
    "plan: examples/plan_alpo.toml, 3 fields x 10 rates": (
        "model = ps.load_model(ROOT / 'examples' / 'plan_alpo.toml')",
        "ps.plan(model, [9.4, 14.1, 18.8], n_rates=10)"),
    "fit: Czjzek glass example, cached kernels": (
        "model = ps.load_model(ROOT / 'examples' / 'glass_fit.toml')", "ps.fit(model)"),
})

WORKER = r"""
import json, sys, time
from pathlib import Path
import numpy as np
import powderspin as ps
ROOT = Path(sys.argv[2])
cases = json.loads(sys.argv[1])
spaces = {}
for name, (setup, run) in cases.items():
    spaces[name] = ns = {"ps": ps, "np": np, "ROOT": ROOT}
    exec(setup, ns)
    exec(run, ns)  # warm: compiled, kernels built, caches filled
print("ready", flush=True)
for line in sys.stdin:
    name = line.strip()
    setup, run = cases[name]
    code = compile(run, name, "exec")
    best = float("inf")
    for _ in range(3):
        t = time.perf_counter(); exec(code, spaces[name]); best = min(best, time.perf_counter() - t)
    print(json.dumps(best), flush=True)
"""


def _start(python: str, cases: dict):
    env = dict(os.environ)
    env.setdefault("OMP_WAIT_POLICY", "PASSIVE")  # as the command line sets it
    p = subprocess.Popen([python, "-c", WORKER, json.dumps(cases), str(ROOT)], stdin=subprocess.PIPE,
                         stdout=subprocess.PIPE, text=True, env=env)
    assert p.stdout.readline().strip() == "ready"
    return p


def _time(p, name):
    p.stdin.write(name + "\n")
    p.stdin.flush()
    return json.loads(p.stdout.readline())


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("other_python", help="the other checkout's interpreter (its .venv/bin/python)")
    ap.add_argument("--only", default="", help="run only the jobs whose name contains this text")
    args = ap.parse_args(argv)
    cases = {k: v for k, v in CASES.items() if args.only in k}
    if not cases:
        raise SystemExit(f"--only {args.only!r}: no job matches; jobs: {', '.join(CASES)}")
    this, other = _start(sys.executable, cases), _start(args.other_python, cases)
    print(f"{'case':<62} {'this / ms':>10} {'other / ms':>11} {'other/this':>10}")
    for name in cases:
        a = b = float("inf")
        for _ in range(3):  # alternate, so both see the same load
            a = min(a, _time(this, name))
            b = min(b, _time(other, name))
        print(f"{name:<62} {a * 1e3:10.2f} {b * 1e3:11.2f} {b / a:10.2f}")
    for p in (this, other):
        p.stdin.close()
        p.wait()


if __name__ == "__main__":
    main()
