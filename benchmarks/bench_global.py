"""Global-search timings (warm): the eight-parameter static case, two-site static 27Al, the two-site MAS example.

    python benchmarks/bench_global.py [--repeat N] [--cases static8 twosite mas]

- static8: static central transition of 59Co (I = 7/2) with shift anisotropy and a quadrupolar coupling at a
  general relative orientation, eight free parameters (shift, C_Q, eta, span, skew, three Euler angles; the
  broadening held), seeded noise, a poor start (target: under 60 s).  Differential evolution path.
- twosite: two static 27Al sites (eight free parameters) from a poor start: the lineshape-library scan
  (target: <= 20 s), compared in the same run with the differential-evolution path on the same data (the two
  must agree on the lowest chi-square).
- mas: ``examples/alpo_fit.toml`` (two 27Al sites under MAS) with ``global_search=True``.

Printed: best wall time of N repeats, evaluations, chi-square of the global result and of a local fit started
at the truth (where known), minima found.  The spectra are the engine's own (this measures speed and whether
the search finds the lowest minimum, not the physics).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import powderspin as ps  # noqa: E402
import powderspin.fitting.search as search  # noqa: E402
from powderspin.fitting.fitter import fit  # noqa: E402
from tests.fitting import hard_cases as hc  # noqa: E402
from tests.fitting.test_search import TWO_SITE_POOR, TWO_SITE_TRUTH, _two_site, _two_site_data  # noqa: E402


def timed(fn, repeat):
    best, out = None, None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        dt = time.perf_counter() - t
        best = dt if best is None else min(best, dt)
    return best, out


def case_static8(repeat):
    d, noise = hc.data("co59", 3)
    names = hc.NAMES[1:]

    def model(start):
        m = hc.model("co59", start)
        held = next(p for p in m.free if p.name == "measurement 1.gauss_hz")
        # held at the value the data were made with (the measurements and sites of the model *with* that value:
        # taking the original model's would hold it at the start's value, 1000 Hz, which no search can undo)
        h = m.with_parameters({held.address: 1500.0})
        return h.__class__(h.nucleus, tuple(h.measurements), tuple(h.sites), tuple(p for p in h.free if p is not held),
                           h.tied, h.fit, h.source)

    assert model(hc.poor_start("co59")).measurements[0].gauss_hz == 1500.0
    truth_fit = fit(model(hc.truth("co59")), [d], noise_region=noise, profile="none")
    t, r = timed(lambda: fit(model(hc.poor_start("co59")), [d], noise_region=noise, global_search=True,
                             profile="none"), repeat)
    print(f"static8 (59Co CT, shift anisotropy + C_Q at general angles, {len(names)} free): {t:.1f} s "
          f"(target < 60 s), {r.n_evaluations} evaluations, {r.starts} starts, chi-square {r.chi_square:.2f} "
          f"(local fit from the truth {truth_fit.chi_square:.2f}), {len(r.minima)} minima within 9")


def case_twosite(repeat):
    d, noise = _two_site_data(1)
    at = fit(_two_site(TWO_SITE_TRUTH), [d], noise_region=noise, profile="none")
    t, r = timed(lambda: fit(_two_site(TWO_SITE_POOR), [d], noise_region=noise, global_search=True,
                             profile="none"), repeat)
    orig = search.scan_applies
    search.scan_applies = lambda *a: False
    try:
        t2, r2 = timed(lambda: fit(_two_site(TWO_SITE_POOR), [d], noise_region=noise, global_search=True,
                                   profile="none"), 1)
    finally:
        search.scan_applies = orig
    print(f"twosite (two static 27Al sites, 8 free, poor start): library scan {t:.1f} s (target <= 20 s), "
          f"{r.n_evaluations} evaluations, chi-square {r.chi_square:.2f}; differential evolution {t2:.1f} s, "
          f"chi-square {r2.chi_square:.2f}; local fit from the truth {at.chi_square:.2f}; ratio DE/scan "
          f"{t2 / t:.2f}")


def case_mas(repeat):
    path = ROOT / "examples" / "alpo_fit.toml"
    t0, local = timed(lambda: fit(ps.load_model(path), profile="none"), 1)
    t, r = timed(lambda: fit(ps.load_model(path), global_search=True, profile="none"), repeat)
    print(f"mas (examples/alpo_fit.toml, {len(r.names)} free): global {t:.1f} s, {r.n_evaluations} evaluations, "
          f"{r.starts} starts, chi-square {r.chi_square:.2f} (local {local.chi_square:.2f} in {t0:.2f} s; "
          f"ratio {t / t0:.0f})")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=1)
    ap.add_argument("--cases", nargs="*", default=["static8", "twosite", "mas"])
    a = ap.parse_args()
    for c in a.cases:
        {"static8": case_static8, "twosite": case_twosite, "mas": case_mas}[c](a.repeat)


if __name__ == "__main__":
    main()
