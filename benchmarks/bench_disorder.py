"""Distributed sites (warm): kernel-grid build rates, grid sizes, a Czjzek fit with cached kernels, library lookups.

    python benchmarks/bench_disorder.py [--repeat N] [--quick]

Printed, never asserted (timings on a shared 2-core machine jump; the best of
N repeats is shown, and ratios are measured in the same run):

1. Build rate of a 27Al central-transition kernel grid of 40 x 20 (C_Q, eta)
   points at infinite-rate MAS, 9.4 T, 2048 points (target: <= 10 s on 2
   cores), in kernels per second:
   - the direct path (every kernel a full site computation: producer,
     triangle binning), with the compiled kernels on 1 and on 2 threads, and
     with 2 worker processes (spawned) building half of the eta rows each;
   - the scaled path (one unit pattern per eta, scaled by C_Q^2);
   - a straightforward numpy computation of the same kernels (rotation
     invariants on the rotor cone, numpy triangle interpolation).
2. Grid sizes and build times of Czjzek grids for typical glasses: 27Al at
   9.4 and 14.1 T, sigma 1-3 MHz, broadening (the resolution) 200-1000 Hz.
3. A Czjzek fit with cached kernels (target <= 0.5 s; design notes: a
   distribution fit <= 1 s): the glass example (2 sites, 6 free parameters)
   and a one-site fit (3 free parameters), against the same fits building
   their kernels.
4. Library lookups: reading one kernel entry (target <= 5 ms per entry) and
   a whole kernel set from the library in a fresh store, against building it.
"""

from __future__ import annotations

import argparse
import math
import multiprocessing
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import best_time, numpy_tent  # noqa: E402

import powderspin as ps  # noqa: E402
from powderspin.disorder.library import LineshapeLibrary  # noqa: E402
from powderspin.disorder.site import DistributedSite
from powderspin.disorder.store import KernelStore  # noqa: E402
from powderspin.engine.lineshape import make_axis  # noqa: E402
from powderspin.io.spectra import MeasuredSpectrum  # noqa: E402
from powderspin.physics.orientations import select_orientations  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
GRID_CQ = np.linspace(1.0, 12.0, 40)
GRID_ETA = np.linspace(0.0, 1.0, 20)


def _grid_model():
    meas = {"field_tesla": 9.4, "spinning_hz": "inf", "points": 2048, "gauss_hz": 300.0}
    site = {"label": "grid", "cq_distribution_mhz": {"values": GRID_CQ.tolist(), "weights": [1.0] * 40},
            "eta_distribution": {"values": GRID_ETA.tolist(), "weights": [1.0] * 20}}
    m = ps.make_model("27Al", meas, [site])
    ax = make_axis(2048, m.larmor_hz, center_ppm=-60.0, width_ppm=300.0)
    return m, ax


def build_grid(path: str, threads: int | None) -> tuple[float, int]:
    m, ax = _grid_model()
    ds = DistributedSite(m, 0, 0)
    ds.path = path
    store = KernelStore(None, build_threads=threads)
    t0 = time.perf_counter()
    ds.kernels(ax, store)
    return time.perf_counter() - t0, store.stats.line_shapes


def _worker(path: str, groups: list[int]) -> int:
    """Build the kernel entries of some eta rows in a fresh process (1 kernel thread)."""
    import numba

    numba.set_num_threads(1)
    m, ax = _grid_model()
    ds = DistributedSite(m, 0, 0)
    ds.path = path
    store = KernelStore(None, build_threads=1)
    grid = ds.grid(ax)
    from powderspin.disorder.grid import oversampling
    from powderspin.disorder.site import _kernel_axis
    from powderspin.engine.lineshape import Axis
    from powderspin.engine.site_lines import site_job

    q = oversampling(ax.dx_hz, ds.min_fwhm_hz())
    first, step, n = _kernel_axis(ax, q, ds.shift_range_hz(), ds.span_hz())
    kaxis = Axis(first + 0.5 * n * step, n * step, n, ds.nu_ref)
    template = site_job(ds._template_site, ds.meas, ds.nucleus, ds.method)
    for jl in groups:
        idx = np.flatnonzero(grid.eta_left == jl)
        ds._build_entry(grid, idx, template, kaxis, store, None, [0], 1)
    return store.stats.line_shapes


def build_grid_processes(path: str) -> float:
    ctx = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(2, mp_context=ctx) as pool:
        pool.submit(_worker, path, []).result()  # start-up (imports, compiled-kernel cache) not timed below ...
        pool.submit(_worker, path, []).result()
        t0 = time.perf_counter()
        futs = [pool.submit(_worker, path, list(range(k, 20, 2))) for k in range(2)]
        n = sum(f.result() for f in futs)
        return time.perf_counter() - t0, n


def numpy_kernel(cq_mhz: float, eta: float, oset, nu0: float, ax) -> np.ndarray:
    """One kernel, straightforwardly: CT offsets on the rotor cone (8 phases) and numpy triangle interpolation."""
    a = (2.5 * 3.5 - 0.75) / (2.5 * 4.0) ** 2
    lam = np.array([-(1 - eta) / 2, -(1 + eta) / 2, 1.0])
    n = oset.vectors
    helper = np.where(np.abs(n[:, :1]) < 0.9, [[1.0, 0, 0]], [[0, 1.0, 0]])
    u = np.cross(n, helper)
    u /= np.linalg.norm(u, axis=1, keepdims=True)
    v = np.cross(n, u)
    c, s = 1 / math.sqrt(3), math.sqrt(2 / 3)
    g = np.zeros(len(n))
    for k in range(8):
        ph = 2 * math.pi * k / 8
        b = c * n + s * (math.cos(ph) * u + math.sin(ph) * v)
        q = (b ** 2 * lam ** 2).sum(1)
        z = (b ** 2 * lam).sum(1)
        g += 1.5 * q - 1.125 * z ** 2 - (lam ** 2).sum() / 4
    f = -(a * (cq_mhz * 1e6) ** 2 / (2 * nu0)) * g / 8
    return numpy_tent(f[:, None], oset.triangles, oset.triangle_weights, np.ones((len(n), 1)), ax.left_edge_hz,
                      ax.dx_hz, ax.points)


def section_build(repeat: int) -> None:
    print("1. 27Al CT kernel grid, 40 x 20 (C_Q, eta) points, infinite-rate MAS, 9.4 T, 2048 points "
          "(target <= 10 s)")
    build_grid("scaled", 1)  # compile / warm
    build_grid("direct", 1) if repeat > 1 else None
    rows = []
    for label, fn in (("direct path, kernels on 1 thread", lambda: build_grid("direct", 1)),
                      ("direct path, kernels on 2 threads", lambda: build_grid("direct", 2)),
                      ("scaled path, 1 thread", lambda: build_grid("scaled", 1))):
        best, n = min((fn() for _ in range(max(1, repeat))), key=lambda r: r[0])
        rows.append((label, best, n))
    try:
        t, n = min((build_grid_processes("direct") for _ in range(max(1, min(repeat, 2)))), key=lambda r: r[0])
        rows.append(("direct path, 2 worker processes (start-up excluded)", t, n))
    except Exception as e:  # pragma: no cover - a benchmark reports, it does not stop
        print(f"   (process pool not measured: {e})")
    m, ax = _grid_model()
    oset = select_orientations("octant", "auto")
    nu0 = m.larmor_hz
    sample = [(c, e) for c in GRID_CQ[::8] for e in GRID_ETA[::10]]
    t_np = best_time(lambda: [numpy_kernel(c, e, oset, nu0, ax) for c, e in sample], repeat=max(1, repeat // 2))
    per_np = t_np / len(sample)
    rows.append(("straightforward numpy (per kernel, extrapolated to 800)", per_np * 800, 800))
    for label, t, n in rows:
        print(f"   {label:<58} {t:8.2f} s  {n / t:9.1f} kernels/s  (numpy / this: {per_np * n / t:6.1f})")


def section_sizes() -> None:
    print("2. Czjzek grids for typical glasses (27Al, infinite-rate MAS, 1024 points over 160 ppm)")
    print(f"   {'field':>6} {'sigma':>6} {'res Hz':>7}  {'nodes':>8}  {'criterion':>10} {'line shapes':>12} "
          f"{'build s':>8}")
    for field in (9.4, 14.1):
        for sigma in (1.0, 2.0, 3.0):
            for res in (200.0, 500.0, 1000.0):
                m = ps.make_model("27Al", {"field_tesla": field, "spinning_hz": "inf"},
                                  [{"czjzek_sigma_mhz": sigma, "gauss_hz": res}])
                ax = make_axis(1024, m.larmor_hz, center_ppm=-10.0, width_ppm=160.0)
                ds = DistributedSite(m, 0, 0)
                try:
                    t0 = time.perf_counter()
                    ks = ds.kernels(ax, KernelStore(None))
                    dt = time.perf_counter() - t0
                    g = ks.grid
                    print(f"   {field:6.1f} {sigma:6.1f} {res:7.0f}  {g.shape[0]:3d} x {g.shape[1]:2d}  "
                          f"{g.criterion_shape[0]:4d} x {g.criterion_shape[1]:3d} {g.line_shapes:12d} {dt:8.2f}"
                          f"  ({ks.path}, {ks.method})")
                except Exception as e:
                    print(f"   {field:6.1f} {sigma:6.1f} {res:7.0f}  refused: {str(e)[:90]}...")


def _glass_fit(store):
    return ps.fit(ps.load_model(ROOT / "examples" / "glass_fit.toml"), kernel_store=store)


def _one_site_data():
    truth = ps.make_model("27Al", {"field_tesla": 14.1, "spinning_hz": "inf", "points": 512, "center_ppm": 30.0,
                                   "width_ppm": 160.0},
                          [{"label": "A", "shift_ppm": 60.0, "czjzek_sigma_mhz": 2.0, "shift_fwhm_ppm": 6.0}])
    s = ps.simulate(truth, kernel_store=KernelStore(None))
    y = 100 * s.intensity + np.random.default_rng(1).normal(0, 2.0 * s.intensity.max(), s.hz.size)
    start = ps.make_model("27Al", {"field_tesla": 14.1, "spinning_hz": "inf"},
                          [{"label": "A", "shift_ppm": {"start": 58.0, "min": 50.0, "max": 70.0},
                            "czjzek_sigma_mhz": {"start": 1.6, "min": 1.2, "max": 3.0},
                            "shift_fwhm_ppm": {"start": 4.0, "min": 3.0, "max": 15.0}}])
    return start, MeasuredSpectrum(s.hz, s.ppm, y, None, s.nu_ref_hz, "synthetic")


def section_fit(repeat: int) -> None:
    print("3. Czjzek fits with cached kernels (target <= 0.5 s)")
    start, data = _one_site_data()
    for label, fn in (("glass example: 2 sites, 6 free parameters", _glass_fit),
                      ("one site: sigma, shift, shift width", lambda st: ps.fit(start, [data], kernel_store=st))):
        t0 = time.perf_counter()
        cold = KernelStore(None)
        r = fn(cold)
        t_cold = time.perf_counter() - t0
        warm = KernelStore(None)
        fn(warm)
        t_warm = best_time(lambda: fn(warm), repeat=repeat)
        print(f"   {label:<44} cached {t_warm:6.3f} s ({r.n_evaluations} evaluations, "
              f"{1e3 * t_warm / r.n_evaluations:.1f} ms each); building its kernels {t_cold:6.2f} s "
              f"({cold.stats.line_shapes} line shapes); ratio {t_cold / t_warm:5.1f}")


def section_library(repeat: int) -> None:
    print("4. Lineshape library (HDF5): lookups (target <= 5 ms per entry)")
    m = ps.make_model("27Al", {"field_tesla": 9.4, "spinning_hz": "inf"}, [{"czjzek_sigma_mhz": 2.0,
                                                                           "gauss_hz": 300.0}])
    ax = make_axis(2048, m.larmor_hz, center_ppm=-10.0, width_ppm=160.0)
    with tempfile.TemporaryDirectory() as d:
        lib = LineshapeLibrary(d)
        ds = DistributedSite(m, 0, 0)
        t0 = time.perf_counter()
        ds.kernels(ax, KernelStore(lib))
        t_build = time.perf_counter() - t0
        import json

        import h5py

        keys = []
        for p in sorted(Path(d).rglob("*.h5")):
            with h5py.File(p, "r") as f:
                keys.append(json.loads(f.attrs["key_json"]))
        sizes = [p.stat().st_size for p in Path(d).rglob("*.h5")]
        t_get = best_time(lambda: [lib.get(k) for k in keys], repeat=repeat) / len(keys)
        t_set = best_time(lambda: DistributedSite(m, 0, 0).kernels(ax, KernelStore(LineshapeLibrary(d))),
                          repeat=repeat)
        print(f"   one entry (of {len(keys)}, {np.mean(sizes) / 1e3:.0f} kB each): {1e3 * t_get:6.2f} ms")
        print(f"   whole kernel set from the library in a fresh store: {t_set:6.3f} s; building it: {t_build:6.2f} s; "
              f"ratio {t_build / t_set:5.1f}")


def main(argv=None) -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--repeat", type=int, default=3)
    p.add_argument("--quick", action="store_true", help="skip the grid-size table and the process pool")
    args = p.parse_args(argv)
    section_build(args.repeat)
    if not args.quick:
        section_sizes()
    section_fit(args.repeat)
    section_library(args.repeat)


if __name__ == "__main__":
    main()
