"""Series on worker processes: the kernel grid of a distributed site is built once for the whole series; the chain's
carry reproduces the fitted curve; the example's data are remade by its script."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import powderspin as ps
from powderspin.series.runner import fit_series, series_client
from powderspin.series.tasks import _carry_of, chain_start, store_for

from .helpers import two_site_model, write_two_site_series

ROOT = Path(__file__).resolve().parents[2]


def _stats(library):
    return store_for(library).stats


@pytest.mark.slow
def test_kernel_grid_is_built_once_for_the_series(tmp_path):
    """Czjzek sites (the glass example's model): the first spectrum is fitted alone, so its kernels go into the
    shared library once; the other worker reads them instead of building them at the same time."""
    model = ps.load_model(ROOT / "examples" / "glass_fit.toml")
    files = []
    for k in range(4):
        p = tmp_path / f"g{k}.csv"
        shutil.copy(ROOT / "examples" / "glass_27al_14p1T.csv", p)
        files.append(str(p))
    lib = tmp_path / "library"
    with series_client(workers=2) as c:
        c.wait_for_workers(2)
        r = fit_series(model, files, tmp_path / "out", client=c, library=lib, plot=False)
        stats = list(c.run(_stats, str(lib)).values())
    assert r.failed == 0, [x.status for x in r.rows]
    entries = len(list(lib.rglob("*.h5")))
    built = sum(s.rows_built for s in stats)
    assert entries > 0 and built == entries, (built, entries, stats)
    assert all(x.get("AlO4.mean_cq_mhz") > 0 for x in r.rows)  # derived quantities reach the table


def test_chain_carry_reproduces_the_fitted_curve(tmp_path):
    """The start of the next fit (weights put back on the model's scale) simulates the fitted spectrum, up to the
    scale: normalising the weights changes nothing but the scale (the scale absorbs their sum)."""
    manifest = write_two_site_series(tmp_path, [260])
    data = tmp_path / "na_260K.csv"
    assert manifest.exists()
    start = two_site_model()
    result = ps.fit(start, [data])
    carry = _carry_of(start, result)
    nxt = chain_start(start, carry)
    assert nxt.sites[1].weight == start.sites[1].weight  # the fixed weight keeps its value
    a = ps.simulate(nxt.with_measurement(0, points=256, center_ppm=-10.0, width_ppm=160.0)).intensity
    b = ps.simulate(result.model.with_measurement(0, scale=1.0, baseline=())).intensity
    k = float(a @ b) / float(b @ b)
    assert np.max(np.abs(a - k * b)) <= 1e-9 * np.max(np.abs(a))


@pytest.mark.slow
def test_example_data_are_remade_by_the_script(tmp_path):
    r = subprocess.run([sys.executable, str(ROOT / "examples" / "make_vt_sodium_series.py"), str(tmp_path)],
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    committed = ROOT / "examples" / "vt_sodium"
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(p.name for p in committed.iterdir())
    for p in committed.iterdir():
        new = (tmp_path / p.name).read_text().splitlines()
        old = p.read_text().splitlines()
        assert len(new) == len(old)
        for a, b in zip(new, old):  # the same text, or numbers equal to the printed digits
            if a != b:
                x = [float(v) for v in a.split(",")]
                y = [float(v) for v in b.split(",")]
                assert np.allclose(x, y, rtol=1e-5, atol=1e-5), (p.name, a, b)


def _worker_env():
    import os

    return {k: os.environ.get(k) for k in ("MALLOC_TRIM_THRESHOLD_", "OMP_NUM_THREADS", "NUMBA_NUM_THREADS")}


def test_workers_keep_the_dynamic_malloc_threshold():
    """A LocalCluster worker gets one thread for numba and OpenMP, but not Dask's MALLOC_TRIM_THRESHOLD_: setting it
    turns off glibc's dynamic mmap threshold (mallopt(3) manual page, from memory), which made every fit in a worker
    fault in its large temporaries afresh (1.6x the CPU time; benchmarks/bench_series.py)."""
    import os

    before = os.environ.get("MALLOC_TRIM_THRESHOLD_")
    with series_client(workers=1) as c:
        c.wait_for_workers(1)
        (env,) = c.run(_worker_env).values()
    assert env == {"MALLOC_TRIM_THRESHOLD_": before, "OMP_NUM_THREADS": "1", "NUMBA_NUM_THREADS": "1"}
    assert os.environ.get("MALLOC_TRIM_THRESHOLD_") == before  # nor is it left in this process's environment
