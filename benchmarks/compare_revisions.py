"""Time the same simulations in two installed checkouts, side by side in one run, and print the ratios.

Run from a checkout whose virtual environment has powderspin installed:

    python benchmarks/compare_revisions.py /path/to/other/checkout/.venv/bin/python

Each case is a ``make_model(...)`` + ``simulate(model)`` with explicit
orientation sets and methods (so that both revisions do the same work); the
two interpreters run each case alternately, several times, warm, and the best
time of each is printed with the ratio other/this.  A machine shared with
other work shows noise; the alternation puts both revisions under the same
load.
"""

from __future__ import annotations

import json
import subprocess
import sys

CASES = {
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

WORKER = r"""
import json, sys, time
import powderspin as ps
cases = json.loads(sys.argv[1])
models = {k: ps.make_model(n, m, s) for k, (n, m, s) in cases.items()}
for m in models.values():
    ps.simulate(m)  # warm: compiled and cached
print("ready", flush=True)
for line in sys.stdin:
    name = line.strip()
    best = float("inf")
    for _ in range(3):
        t = time.perf_counter(); ps.simulate(models[name]); best = min(best, time.perf_counter() - t)
    print(json.dumps(best), flush=True)
"""


def _start(python: str):
    p = subprocess.Popen([python, "-c", WORKER, json.dumps(CASES)], stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                         text=True)
    assert p.stdout.readline().strip() == "ready"
    return p


def _time(p, name):
    p.stdin.write(name + "\n")
    p.stdin.flush()
    return json.loads(p.stdout.readline())


def main():
    if len(sys.argv) != 2:
        raise SystemExit("usage: python benchmarks/compare_revisions.py OTHER_PYTHON")
    this, other = _start(sys.executable), _start(sys.argv[1])
    print(f"{'case':<62} {'this / ms':>10} {'other / ms':>11} {'other/this':>10}")
    for name in CASES:
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
