"""fit_series on Dask: parameter recovery along a synthetic series, resume by content hash, chained fits.

The data are made by independent routes (tests/series/helpers.py): the 23Na
series by the slow reference route of tests/reference/fit_spectra.py (dense
powder grid, explicit rotations of the high-field formulas, design.md section
2), the 31P lines as analytic Gaussians (common practice).  The tests run on
an in-process Dask client with one single-threaded worker (so that fit calls
can be counted); tests/series/test_series_cli.py runs worker processes.
"""

from __future__ import annotations

import csv
import math

import numpy as np
import pytest

import powderspin as ps
import powderspin.fitting.fitter as fitter_module
from powderspin.series.inputs import SeriesError
from powderspin.series.runner import MARKER, fit_series

from .helpers import line_model, two_site_model, two_site_truth, write_line_series, write_two_site_series


@pytest.fixture(scope="module")
def client():
    from distributed import Client

    with Client(processes=False, n_workers=1, threads_per_worker=1, dashboard_address=":0") as c:
        yield c


@pytest.fixture
def count_fits(monkeypatch):
    calls = []
    real = fitter_module.fit

    def counting(*a, **k):
        calls.append(str(a[1][0]) if len(a) > 1 else "")
        return real(*a, **k)

    monkeypatch.setattr(fitter_module, "fit", counting)
    return calls


def _table(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def test_synthetic_series_recovers_the_drifts(tmp_path, client):
    """C_Q and the site fraction drift linearly with temperature; every fitted value lies within 3 standard errors
    of the truth, and the trend figure is written."""
    temps = [200, 250, 300]
    manifest = write_two_site_series(tmp_path, temps)
    r = fit_series(two_site_model(), output_dir=tmp_path / "out", manifest=manifest, client=client)
    assert r.failed == 0 and r.fitted == 3 and r.variable == "temperature_k"
    rows = _table(tmp_path / "out" / "table.csv")
    assert [int(x["temperature_k"]) for x in rows] == temps
    for row, t in zip(rows, temps):
        tr = two_site_truth(t)
        assert row["status"] == "ok"
        for name, truth in (("A.cq_mhz", tr["A.cq_mhz"]), ("A.weight", tr["A.fraction"]),
                            ("A.shift_ppm", tr["A.shift_ppm"]), ("B.shift_ppm", tr["B.shift_ppm"])):
            v, e = float(row[name]), float(row[f"{name}_stderr"])
            assert 0 < e < 0.1 * max(abs(truth), 1.0), (name, t, e)
            assert abs(v - truth) <= 3 * e, (name, t, v, truth, e)
        # the fraction of the fixed-weight site is derived: 1 - the other's
        assert math.isclose(float(row["B.fraction"]), 1 - float(row["A.weight"]), rel_tol=1e-9)
    assert (tmp_path / "out" / "trends.png").stat().st_size > 10_000
    for t in temps:  # the usual result file per spectrum, a model file that simulates
        m = ps.load_model(tmp_path / "out" / f"na_{t}K.toml")
        assert m.sites[0].cq_mhz == pytest.approx(float(rows[temps.index(t)]["A.cq_mhz"]), rel=1e-9)


def test_resume_refits_only_what_is_missing_or_changed(tmp_path, client, count_fits):
    paths = write_line_series(tmp_path, [1.0, 1.5, 2.0, 2.5, 3.0])
    out = tmp_path / "out"
    first = fit_series(line_model(), [str(p) for p in paths], out, client=client, plot=False)
    assert len(count_fits) == 5 and first.fitted == 5 and first.reused == 0
    table = (out / "table.csv").read_text()
    # a run stopped early: two results missing
    for k in (1, 3):
        (out / f"p{k:02d}.toml").unlink()
    count_fits.clear()
    again = fit_series(line_model(), [str(p) for p in paths], out, client=client, plot=False)
    assert sorted(count_fits) == sorted(str(paths[k]) for k in (1, 3))
    assert again.fitted == 2 and again.reused == 3
    strip = [{k: v for k, v in r.items() if k != "time_s"} for r in _table(out / "table.csv")]
    assert strip == [{k: v for k, v in r.items() if k != "time_s"} for r in csv.DictReader(table.splitlines())]
    # a changed data file, a changed model: refitted; force: everything
    paths[0].write_text(paths[0].read_text().replace("synthetic", "synthetic, copied"))
    count_fits.clear()
    fit_series(line_model(), [str(p) for p in paths], out, client=client, plot=False)
    assert count_fits == [str(paths[0])]
    count_fits.clear()
    fit_series(line_model(start=0.5), [str(p) for p in paths], out, client=client, plot=False)
    assert len(count_fits) == 5
    count_fits.clear()
    fit_series(line_model(start=0.5), [str(p) for p in paths], out, client=client, plot=False, force=True)
    assert len(count_fits) == 5


def test_chained_fits_agree_with_independent_ones_and_follow_a_moving_line(tmp_path, client):
    """A line moving by half its width per spectrum: where independent fits from the model's start converge, both
    agree within errors; beyond their start range only the chained fits follow the line."""
    shifts = [0.5 * k for k in range(13)]  # 0 to 6 ppm; the line is 1 ppm wide (160 Hz at 162 MHz)
    paths = write_line_series(tmp_path, shifts)
    files = [str(p) for p in paths]
    ind = fit_series(line_model(), files, tmp_path / "ind", client=client, plot=False)
    chn = fit_series(line_model(), files, tmp_path / "chain", client=client, plot=False, chain=True)
    v_i, e_i = np.array(ind.column("P.shift_ppm")), np.array(ind.column("P.shift_ppm_stderr"))
    v_c, e_c = np.array(chn.column("P.shift_ppm")), np.array(chn.column("P.shift_ppm_stderr"))
    assert chn.failed == 0
    assert np.all(np.abs(v_c - shifts) <= 3 * e_c), (v_c, shifts)
    near = np.abs(np.array(shifts)) <= 1.0
    assert np.all(np.abs(v_i[near] - v_c[near]) <= 3 * np.hypot(e_i[near], e_c[near]))
    assert np.all(e_c < 0.05)  # every chained fit pins the line to a twentieth of its width
    lost = np.abs(v_i - shifts) > 0.5  # an independent fit that ended half a line width or more from the line
    assert lost[-1] and not near[lost].any(), (v_i, e_i, shifts)


def test_bad_spectra_get_their_error_in_their_row(tmp_path, client):
    paths = write_line_series(tmp_path, [1.0, 2.0])
    bad = tmp_path / "broken.csv"
    bad.write_bytes(b"\x00\x01 not a spectrum \xff\n")
    # an axis column whose unit the file does not say, and under which no unit (ppm, Hz, kHz) makes the data look
    # like the model's one narrow line, so the unit cannot be inferred either
    unnamed = tmp_path / "unnamed_axis.csv"
    unnamed.write_text("\n".join(f"{x},{1.0 if abs(x) < 2000 else 0.0}" for x in range(-8000, 8000, 20)) + "\n")
    files = [str(paths[0]), str(bad), str(unnamed), str(tmp_path / "missing.csv"), str(paths[1])]
    r = fit_series(line_model(), files, tmp_path / "out", client=client)
    status = [row.status for row in r.rows]
    assert status[0] == status[4] == "ok" and r.failed == 3
    assert "broken.csv" in status[1]
    assert "axis" in status[2] and "unnamed_axis.csv" in status[2]
    assert "missing.csv" in status[3] and "does not exist" in status[3]
    rows = _table(tmp_path / "out" / "table.csv")
    assert [x["status"] for x in rows] == status and rows[1]["P.shift_ppm"] == ""
    assert not (tmp_path / "out" / "broken.toml").exists()


def test_bad_inputs_write_nothing(tmp_path, client):
    paths = write_line_series(tmp_path, [1.0])
    with pytest.raises(SeriesError, match="matched no files"):
        fit_series(line_model(), [str(tmp_path / "nothing*.csv")], tmp_path / "o1", client=client)
    (tmp_path / "m.csv").write_text("name,temperature_k\np00.csv,300\n")
    with pytest.raises(SeriesError, match="no 'file' column"):
        fit_series(line_model(), output_dir=tmp_path / "o2", manifest=tmp_path / "m.csv", client=client)
    (tmp_path / "m2.csv").write_text("file,temperature_k\np00.csv,300\n")
    with pytest.raises(SeriesError, match="'time_s' is not a column"):
        fit_series(line_model(), output_dir=tmp_path / "o3", manifest=tmp_path / "m2.csv", variable="time_s",
                   client=client)
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "notes.txt").write_text("precious")
    with pytest.raises(SeriesError, match="did not write"):
        fit_series(line_model(), [str(paths[0])], mine, client=client)
    assert not any((tmp_path / f"o{k}").exists() for k in (1, 2, 3))
    assert sorted(p.name for p in mine.iterdir()) == ["notes.txt"] and not (mine / MARKER).exists()
