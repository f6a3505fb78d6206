"""A global fit's starts run on Dask give the serial run's result (fit(..., map_starts=...) and fit --workers)."""

from __future__ import annotations

import subprocess
import sys
import tomllib

import numpy as np
import pytest

import powderspin as ps
from powderspin.series.runner import dask_map

from .helpers import write_line_series


def _model():
    # a 1 ppm wide Gaussian line (160 Hz) searched for over 60 ppm: only starts near the line reach it
    return ps.make_model("31P", {"field_tesla": 9.4, "gauss_hz": 160.0},
                         [{"label": "P", "shift_ppm": {"start": -15.0, "min": -20.0, "max": 40.0}}])


def test_dask_starts_give_the_serial_result(tmp_path):
    (path,) = write_line_series(tmp_path, [17.0])
    serial = ps.fit(_model(), [path], global_search=True, starts=8, seed=3)
    from distributed import Client

    with Client(processes=False, n_workers=1, threads_per_worker=1, dashboard_address=":0") as c:
        par = ps.fit(_model(), [path], global_search=True, starts=8, seed=3, map_starts=dask_map(c))
    assert abs(serial.values["P.shift_ppm"] - 17.0) < 3 * serial.stderr["P.shift_ppm"]
    assert par.values["P.shift_ppm"] == serial.values["P.shift_ppm"]
    assert par.stderr["P.shift_ppm"] == serial.stderr["P.shift_ppm"]
    # (the evaluation counts may differ by one or two: in order, a start can find the previous run's last
    # evaluation in the problem's memo; the fitted values cannot)
    assert (par.starts, par.starts_at_best) == (serial.starts, serial.starts_at_best)
    assert np.array_equal(par.spectra[0].intensity, serial.spectra[0].intensity)


@pytest.mark.slow
def test_fit_command_global_on_local_workers(tmp_path):
    (path,) = write_line_series(tmp_path, [17.0])
    (tmp_path / "m.toml").write_text(ps.model_to_toml(_model()))
    runs = {}
    for name, extra in (("serial", []), ("dask", ["--workers", "2"])):
        r = subprocess.run([sys.executable, "-m", "powderspin", "fit", "m.toml", str(path), "-o", f"{name}.toml",
                            "--global", "--starts", "8", "-q", *extra], cwd=tmp_path, capture_output=True, text=True,
                           timeout=600)
        assert r.returncode == 0, r.stderr
        runs[name] = tomllib.loads((tmp_path / f"{name}.toml").read_text())
    assert runs["dask"]["site"][0]["shift_ppm"] == runs["serial"]["site"][0]["shift_ppm"]
    r = subprocess.run([sys.executable, "-m", "powderspin", "fit", "m.toml", str(path), "-o", "x.toml", "--workers",
                        "2"], cwd=tmp_path, capture_output=True, text=True, timeout=600)
    assert r.returncode == 2 and "add --global" in r.stderr and not (tmp_path / "x.toml").exists()
