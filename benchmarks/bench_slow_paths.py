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
import resource
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
    t = time.perf_counter(); c = time.process_time(); simulate(models[name])
    dt = time.perf_counter() - t; dc = time.process_time() - c
    print(json.dumps([dt, dc, meta]), flush=True)
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


def _children_cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def first_run(python: str) -> tuple[float, float, float, float]:
    """``powderspin demo`` with an empty numba cache, then again with it filled: (wall, CPU) seconds of each."""
    out = []
    with tempfile.TemporaryDirectory() as cache, tempfile.TemporaryDirectory() as work:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)
        env.setdefault("OMP_WAIT_POLICY", "PASSIVE")
        for k in range(2):
            t = time.perf_counter()
            c = _children_cpu()
            subprocess.run([python, "-m", "powderspin", "demo", "--out", os.path.join(work, f"d{k}"), "-q"],
                           cwd=work, env=env, check=True, capture_output=True)
            out += [time.perf_counter() - t, _children_cpu() - c]
    return tuple(out)


COMPILE_PROFILE = r"""
import collections, os, sys, tempfile, time
from numba.core import event
spent = collections.defaultdict(float)
open_ = {}
class Listener(event.Listener):
    def on_start(self, e):
        open_[id(e.data["dispatcher"]), str(e.data.get("args"))] = time.process_time()
    def on_end(self, e):
        c0 = open_.pop((id(e.data["dispatcher"]), str(e.data.get("args"))))
        spent[e.data["dispatcher"].py_func.__qualname__] += time.process_time() - c0
event.register("numba:compile", Listener())
t, c = time.perf_counter(), time.process_time()
from powderspin.cli.main import main
try:
    main(["demo", "--out", os.path.join(tempfile.mkdtemp(), "d"), "-q"])
except SystemExit:
    pass
print(f"demo, empty cache, in one process: wall {time.perf_counter() - t:.1f} s, cpu {time.process_time() - c:.1f} s")
print("compile cpu per function (s; a function compiled inside another counts in both):")
for name, sec in sorted(spent.items(), key=lambda x: -x[1])[:15]:
    print(f"  {sec:6.2f}  {name}")
"""


def compile_profile(python: str) -> None:
    """The demo with an empty cache, numba's compile events summed per function (CPU seconds)."""
    with tempfile.TemporaryDirectory() as cache:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)
        env.setdefault("OMP_WAIT_POLICY", "PASSIVE")
        out = subprocess.run([python, "-c", COMPILE_PROFILE], env=env, cwd=tempfile.gettempdir(), check=True,
                             capture_output=True, text=True).stdout
    lines = out.splitlines()
    first = next(k for k, x in enumerate(lines) if x.startswith("demo, empty"))
    print("\n".join(lines[first:]))


def main():
    import argparse

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("other", nargs="?", help="python of another checkout, timed side by side")
    ap.add_argument("--only", help="comma-separated words; run the cases whose names contain one (and their "
                    "cheap counterparts)")
    ap.add_argument("--no-first-run", action="store_true", help="skip the first-run (empty cache) row")
    ap.add_argument("--compile-profile", action="store_true",
                    help="only: the first run's compile time per kernel (numba's compile events)")
    args = ap.parse_args()
    other = args.other
    if args.compile_profile:
        compile_profile(sys.executable)
        if other:
            print("other revision:")
            compile_profile(other)
        return
    names = list(CASES)
    if args.only:
        words = args.only.split(",")
        pick = [n for n in names if any(w in n for w in words)]
        names = [n for n in names if n in pick or any(CASES[q][3] == n for q in pick)]
    procs = {"this": _start(sys.executable, names)}
    if other:
        procs["other"] = _start(other, names)
    best = {k: {} for k in procs}
    cpu = {k: {} for k in procs}
    meta = {}
    for name in names:
        for _ in range(CASES[name][4]):
            for k, p in procs.items():  # alternate, so both see the same load
                dt, dc, m = _once(p, name)
                best[k][name] = min(best[k].get(name, float("inf")), dt)
                cpu[k][name] = min(cpu[k].get(name, float("inf")), dc)
                meta[(k, name)] = m
    for p in procs.values():
        p.stdin.close()
        p.wait()
    print(f"load average (1 min) {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores; best of repeats; "
          "cpu = process time of the best run's kind (best of repeats)")
    head = f"{'case':<44} {'this / s':>9} {'cpu / s':>8} {'cheap / s':>9} {'ratio':>7}"
    if other:
        head += f" {'other / s':>10} {'cpu / s':>8} {'other/this':>10} {'cpu ratio':>9}"
    print(head)
    for name in names:
        cheap = CASES[name][3] if CASES[name][3] in names else None
        t = best["this"][name]
        row = f"{name:<44} {t:9.3f} {cpu['this'][name]:8.3f}"
        row += f" {best['this'][cheap]:9.3f} {t / best['this'][cheap]:7.1f}" if cheap else f" {'':>9} {'':>7}"
        if other:
            o = best["other"][name]
            oc = cpu["other"][name]
            row += f" {o:10.3f} {oc:8.3f} {o / t:10.1f} {oc / cpu['this'][name]:9.1f}"
        print(row + f"   [{meta[('this', name)]}]", flush=True)
    if args.no_first_run:
        return
    a, ac, b, bc = first_run(sys.executable)
    row = f"{'first run: demo, empty numba cache':<44} {a:9.1f} {ac:8.1f} {b:9.1f} {a / b:7.1f}"
    if other:
        oa, oac, ob, obc = first_run(other)
        row += f" {oa:10.1f} {oac:8.1f} {oa / a:10.1f} {oac / ac:9.1f}"
    print(row + "   [cheap = the same run with the cache filled]")
    print(f"compile share of the first run (1 - filled/empty): wall {1 - b / a:.0%}, cpu {1 - bc / ac:.0%}"
          + (f"; other: wall {1 - ob / oa:.0%}, cpu {1 - obc / oac:.0%}" if other else ""))
    print("per kernel: python benchmarks/bench_slow_paths.py --compile-profile")


if __name__ == "__main__":
    main()
