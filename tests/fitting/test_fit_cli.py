"""The ``powderspin fit`` command: bad inputs (tests/bad_inputs/fit/cases.toml), outputs, Ctrl-C, reproduction."""

from __future__ import annotations

import csv
import shutil
import signal
import subprocess
import sys
import time
import tomllib
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[2]
BAD = ROOT / "tests" / "bad_inputs" / "fit"
CASES = tomllib.loads((BAD / "cases.toml").read_text())["case"]


def _run(args, cwd, **kw):
    return subprocess.run([sys.executable, "-m", "powderspin", *args], cwd=cwd, capture_output=True, text=True,
                          timeout=600, **kw)


@pytest.mark.parametrize("case", CASES, ids=[c["name"] for c in CASES])
def test_bad_input(case, tmp_path):
    for f in BAD.iterdir():
        if f.is_file():
            shutil.copy(f, tmp_path / f.name)
    for name in case.get("create", []):
        (tmp_path / name).write_text("mine\n")
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    r = _run(["fit", *case["args"]], tmp_path)
    assert r.returncode == 2, (r.stdout, r.stderr)
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), r.stderr
    assert "Traceback" not in r.stderr
    for frag in case["expect"]:
        assert frag in lines[0], (frag, lines[0])
    after = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    assert after == before  # nothing created, nothing changed


def _csv_columns(path):
    rows = [l for l in Path(path).read_text().splitlines() if not l.startswith("#")]
    head = next(csv.reader([rows[0]]))
    data = np.array([[float(x) for x in r.split(",")] for r in rows[1:]])
    return {h: data[:, k] for k, h in enumerate(head)}


@pytest.mark.slow
def test_fit_command_outputs_and_simulate_reproduces(tmp_path):
    """fit writes the result, the CSV and the report; simulate of the result gives the fit column back."""
    for f in ("good.toml", "line.csv"):
        shutil.copy(BAD / f, tmp_path / f)
    r = _run(["fit", "good.toml", "-o", "res.toml", "--report", "res.png", "--noise-region", "20:12", "-q"],
             tmp_path)
    assert r.returncode == 0, r.stderr
    assert "P.shift_ppm" in r.stdout and "reduced chi-square" in r.stdout
    for f in ("res.toml", "res.csv", "res.png"):
        assert (tmp_path / f).stat().st_size > 0
    doc = tomllib.loads((tmp_path / "res.toml").read_text())
    site = doc["site"][0]
    assert isinstance(site["shift_ppm"], float) and set(site["stderr"]) == {"shift_ppm", "gauss_hz"}
    res = doc["fit"]["result"]
    assert sorted(res["parameters"]) == ["P.gauss_hz", "P.shift_ppm"] and res["noise_source"] == "noise region"
    assert doc["fit"]["noise_region"] == [20.0, 12.0]
    assert doc["measurement"]["data"] == "line.csv" and "scale" in doc["measurement"]
    # the result is a model file: simulate it (as the command line does) and compare with the fit column
    r2 = _run(["simulate", "res.toml", "-o", "again.csv", "-q"], tmp_path)
    assert r2.returncode == 0, r2.stderr
    fitted = _csv_columns(tmp_path / "res.csv")["fit"]
    again = _csv_columns(tmp_path / "again.csv")["intensity"]
    # both CSV files print 10-12 significant digits (the result file shows rounded values and keeps the full ones)
    assert np.max(np.abs(again - fitted)) <= 1e-9 * np.max(np.abs(fitted))
    assert any(line.startswith("# fitted P.shift_ppm: ") for line in (tmp_path / "res.csv").read_text().splitlines())
    # a rerun refuses to overwrite, --force replaces
    r3 = _run(["fit", "good.toml", "-o", "res.toml", "-q"], tmp_path)
    assert r3.returncode == 2 and "--force" in r3.stderr
    r4 = _run(["fit", "good.toml", "-o", "res.toml", "--force", "-q"], tmp_path)
    assert r4.returncode == 0, r4.stderr


@pytest.mark.slow
def test_ctrl_c_stops_with_130_and_leaves_nothing(tmp_path):
    """SIGINT during a long posterior run: exit 130, one line, no output file (the check is on files, not time)."""
    for f in ("good.toml", "line.csv"):
        shutil.copy(BAD / f, tmp_path / f)
    p = subprocess.Popen([sys.executable, "-m", "powderspin", "fit", "good.toml", "-o", "res.toml", "--posterior",
                          "--steps", "1000000", "-q"], cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                         text=True)
    time.sleep(8.0)  # well into sampling (the million steps would take hours)
    p.send_signal(signal.SIGINT)
    out, err = p.communicate(timeout=120)
    assert p.returncode == 130, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "interrupted" in lines[0]
    assert sorted(x.name for x in tmp_path.iterdir()) == ["good.toml", "line.csv"]


def test_data_on_the_command_line_and_global_search(tmp_path):
    """DATA arguments override data = ...; --global reports its starts; the result names the file used."""
    shutil.copy(BAD / "no_data.toml", tmp_path / "model.toml")
    shutil.copy(BAD / "line.csv", tmp_path / "spectrum.csv")
    (tmp_path / "out").mkdir()  # outputs go into existing folders only
    r = _run(["fit", "model.toml", "spectrum.csv", "-o", "out/res.toml", "--global", "--starts", "4", "--region",
              "15:-15", "-q"], tmp_path)
    assert r.returncode == 0, r.stderr
    assert "of 4 starts reached the best fit" in r.stdout
    doc = tomllib.loads((tmp_path / "out" / "res.toml").read_text())
    assert doc["measurement"]["data"] == str(Path("..") / "spectrum.csv")
    assert doc["fit"]["regions"] == [[15.0, -15.0]] and doc["fit"]["result"]["starts"] == 4
    cols = _csv_columns(tmp_path / "out" / "res.csv")
    inside = cols["in_fit"] == 1
    assert inside.any() and not inside.all()
    assert np.all(np.abs(cols["ppm"][inside]) <= 15.0)
