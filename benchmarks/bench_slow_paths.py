"""The slow paths of the speed issue: each case, its cheap counterpart, and (optionally) another revision.

Rows (all warm, best of several runs; ``simulate(model)`` of a one-site model):

* exact route, 93Nb C_Q 25 MHz, 9.4 T, 20 kHz MAS, "medium" set (target <= 0.2 s), and with
  ``orientations = "auto"`` (target <= 0.5 s); cheap counterpart: the perturbative route;
* wide sideband manifolds, 27Al C_Q 10 MHz, all transitions, 9.4 T, 16384 points over 80000 ppm,
  5 kHz and 2 kHz MAS (targets <= 3 s / <= 6 s); cheap counterpart: the static pattern;
* 27Al C_Q 3.4 MHz, all transitions, 3 kHz MAS, 65536 points, ``method = "auto"`` (which picks the
  exact route); target: within 3x of the perturbative route;
* the first run after install (an empty compiled cache): ``powderspin demo`` (target <= 15 s),
  and the same run with the cache filled (the compile share is the difference).

Run:

    python benchmarks/bench_slow_paths.py                       # this checkout
    python benchmarks/bench_slow_paths.py OTHER_PYTHON           # and another revision, side by side

With another interpreter (a checkout of another revision with its own virtual environment) the two
run each case alternately, so both see the same load on a shared machine, and the ratio
other/this is printed.  Set ``OMP_WAIT_POLICY=PASSIVE`` on a busy machine (the command line does).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time

WIDE = {"field_tesla": 9.4, "points": 16384, "transitions": "all", "center_ppm": 0.0, "width_ppm": 80000.0}
NB = {"field_tesla": 9.4, "spinning_hz": 20000.0, "points": 4096}
AL34 = {"field_tesla": 9.4, "spinning_hz": 3000.0, "points": 65536, "transitions": "all"}

# name: (nucleus, measurement, sites, cheap counterpart, repeats)
CASES = {
    "93Nb exact, medium set": ("93Nb", {**NB, "method": "exact", "orientations": "medium"},
                               [{"cq_mhz": 25.0, "eta_q": 0.3}], "93Nb perturbative, medium set", 5),
    "93Nb perturbative, medium set": ("93Nb", {**NB, "method": "perturbation", "orientations": "medium"},
                                      [{"cq_mhz": 25.0, "eta_q": 0.3}], None, 5),
    "93Nb exact, auto set": ("93Nb", {**NB, "method": "exact", "orientations": "auto"},
                             [{"cq_mhz": 25.0, "eta_q": 0.3}], "93Nb perturbative, auto set", 3),
    "93Nb perturbative, auto set": ("93Nb", {**NB, "method": "perturbation", "orientations": "auto"},
                                    [{"cq_mhz": 25.0, "eta_q": 0.3}], None, 3),
    "27Al C_Q 10 MHz all, 5 kHz": ("27Al", {**WIDE, "spinning_hz": 5000.0}, [{"cq_mhz": 10.0, "eta_q": 0.3}],
                                   "27Al C_Q 10 MHz all, static", 2),
    "27Al C_Q 10 MHz all, 2 kHz": ("27Al", {**WIDE, "spinning_hz": 2000.0}, [{"cq_mhz": 10.0, "eta_q": 0.3}],
                                   "27Al C_Q 10 MHz all, static", 2),
    "27Al C_Q 10 MHz all, static": ("27Al", WIDE, [{"cq_mhz": 10.0, "eta_q": 0.3}], None, 3),
    "27Al C_Q 3.4 MHz all, 3 kHz, auto": ("27Al", AL34, [{"cq_mhz": 3.4, "eta_q": 0.3}],
                                          "27Al C_Q 3.4 MHz all, 3 kHz, perturbative", 2),
    "27Al C_Q 3.4 MHz all, 3 kHz, perturbative": ("27Al", {**AL34, "method": "perturbation"},
                                                  [{"cq_mhz": 3.4, "eta_q": 0.3}], None, 2),
}

WORKER = r"""
import json, sys, time
import powderspin as ps
from powderspin.simulator import simulate
cases = json.loads(sys.argv[1])
models = {k: ps.make_model(c[0], c[1], c[2]) for k, c in cases.items()}
print("ready", flush=True)
warm = set()
for line in sys.stdin:
    name = line.strip()
    if name not in warm:
        s = simulate(models[name])  # compiled and cached
        warm.add(name)
        meta = {k: s.metadata.get(k, {}).get("site 1") for k in ("method", "orientations", "rotor_phases")}
    t = time.perf_counter(); simulate(models[name]); dt = time.perf_counter() - t
    print(json.dumps([dt, meta]), flush=True)
"""


def _start(python: str, names):
    env = dict(os.environ)
    env.setdefault("OMP_WAIT_POLICY", "PASSIVE")
    # run from a neutral folder so that each interpreter imports its own checkout
    p = subprocess.Popen([python, "-c", WORKER, json.dumps({n: CASES[n][:3] for n in names})], stdin=subprocess.PIPE,
                         stdout=subprocess.PIPE, text=True, env=env, cwd=tempfile.gettempdir())
    assert p.stdout.readline().strip() == "ready"
    return p


def _once(p, name):
    p.stdin.write(name + "\n")
    p.stdin.flush()
    return json.loads(p.stdout.readline())


def first_run(python: str) -> tuple[float, float]:
    """Seconds for ``powderspin demo`` with an empty numba cache, then again with it filled."""
    out = []
    with tempfile.TemporaryDirectory() as cache, tempfile.TemporaryDirectory() as work:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)
        env.setdefault("OMP_WAIT_POLICY", "PASSIVE")
        for k in range(2):
            t = time.perf_counter()
            subprocess.run([python, "-m", "powderspin", "demo", "--out", os.path.join(work, f"d{k}"), "-q"],
                           cwd=work, env=env, check=True, capture_output=True)
            out.append(time.perf_counter() - t)
    return out[0], out[1]


def main():
    import argparse

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("other", nargs="?", help="python of another checkout, timed side by side")
    ap.add_argument("--only", help="comma-separated words; run the cases whose names contain one (and their "
                    "cheap counterparts)")
    ap.add_argument("--no-first-run", action="store_true", help="skip the first-run (empty cache) row")
    args = ap.parse_args()
    other = args.other
    names = list(CASES)
    if args.only:
        words = args.only.split(",")
        pick = [n for n in names if any(w in n for w in words)]
        names = [n for n in names if n in pick or any(CASES[q][3] == n for q in pick)]
    procs = {"this": _start(sys.executable, names)}
    if other:
        procs["other"] = _start(other, names)
    best = {k: {} for k in procs}
    meta = {}
    for name in names:
        for _ in range(CASES[name][4]):
            for k, p in procs.items():  # alternate, so both see the same load
                dt, m = _once(p, name)
                best[k][name] = min(best[k].get(name, float("inf")), dt)
                meta[(k, name)] = m
    for p in procs.values():
        p.stdin.close()
        p.wait()
    head = f"{'case':<44} {'this / s':>9} {'cheap / s':>9} {'ratio':>7}"
    if other:
        head += f" {'other / s':>10} {'other/this':>10}"
    print(head)
    for name in names:
        cheap = CASES[name][3] if CASES[name][3] in names else None
        t = best["this"][name]
        row = f"{name:<44} {t:9.3f}"
        row += f" {best['this'][cheap]:9.3f} {t / best['this'][cheap]:7.1f}" if cheap else f" {'':>9} {'':>7}"
        if other:
            o = best["other"][name]
            row += f" {o:10.3f} {o / t:10.1f}"
        print(row + f"   [{meta[('this', name)]}]", flush=True)
    if args.no_first_run:
        return
    a, b = first_run(sys.executable)
    row = f"{'first run: demo, empty numba cache':<44} {a:9.1f} {b:9.1f} {a / b:7.1f}"
    if other:
        oa, ob = first_run(other)
        row += f" {oa:10.1f} {oa / a:10.1f}   (other with the cache filled: {ob:.1f} s)"
    print(row + "   [cheap = the same run with the cache filled]")


if __name__ == "__main__":
    main()
