"""The ``powderspin series`` command: bad inputs (tests/bad_inputs/series/cases.toml), rows of bad spectra and the
exit status, Ctrl-C and resume, and a real Dask scheduler with two workers, one of them killed during the run."""

from __future__ import annotations

import csv
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
import tomllib
from pathlib import Path

import pytest

from .helpers import write_line_series

ROOT = Path(__file__).resolve().parents[2]
BAD = ROOT / "tests" / "bad_inputs" / "series"
CASES = tomllib.loads((BAD / "cases.toml").read_text())["case"]

MODEL = """nucleus = "31P"
[measurement]
field_tesla = 9.4
gauss_hz = 160.0
[[site]]
label = "P"
shift_ppm = { start = 0.0, min = -20.0, max = 40.0 }
"""


def _run(args, cwd, **kw):
    return subprocess.run([sys.executable, "-m", "powderspin", *map(str, args)], cwd=cwd, capture_output=True,
                          text=True, timeout=600, **kw)


def _snapshot(folder: Path) -> dict:
    return {str(p.relative_to(folder)): (p.read_bytes() if p.is_file() else None) for p in sorted(folder.rglob("*"))}


@pytest.mark.parametrize("case", CASES, ids=[c["name"] for c in CASES])
def test_bad_input(case, tmp_path, monkeypatch, capsys):
    """In this process (main() as the command runs it): each case is refused before any Dask work starts."""
    from powderspin.cli.main import main

    work = tmp_path / "w"
    shutil.copytree(BAD, work)
    before = _snapshot(work)
    monkeypatch.chdir(work)
    status = main(["series", *case["args"]])
    captured = capsys.readouterr()
    assert status == 2, (captured.out, captured.err)
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), captured.err
    assert "Traceback" not in captured.err
    for frag in case["expect"]:
        assert frag in lines[0], (frag, lines[0])
    assert _snapshot(work) == before  # nothing created, nothing changed


def _table(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def test_bad_spectra_fail_their_rows_and_the_exit_status(tmp_path):
    """One corrupted file and one whose axis unit is not said, among good ones: their rows say why, the others are
    ok, the exit status is 1 and the summary counts the failures."""
    (tmp_path / "model.toml").write_text(MODEL)
    write_line_series(tmp_path, [1.0, 2.0], fwhm_hz=160.0)
    (tmp_path / "p02.csv").write_bytes(b"ppm,intensity\n1,2\nthree,four\n5,6\n")
    # no unit (ppm, Hz, kHz) makes this headerless file look like the model's narrow line: it cannot be inferred
    (tmp_path / "p03.csv").write_text("\n".join(f"{x},{1.0 if abs(x) < 2000 else 0.0}"
                                                for x in range(-8000, 8000, 20)))
    r = _run(["series", "model.toml", "p*.csv", "-o", "out", "--workers", "1", "-q"], tmp_path)
    assert r.returncode == 1, r.stderr
    assert "4 spectra, 2 ok, 2 failed" in r.stdout
    rows = {x["file"]: x for x in _table(tmp_path / "out" / "table.csv")}
    assert rows["p00.csv"]["status"] == rows["p01.csv"]["status"] == "ok"
    assert "p02.csv" in rows["p02.csv"]["status"] and "line 3" in rows["p02.csv"]["status"]
    assert "axis" in rows["p03.csv"]["status"]
    assert all("\n" not in x["status"] for x in rows.values())
    assert "failed: p02.csv" in r.stderr and "Traceback" not in r.stderr
    assert (tmp_path / "out" / "trends.png").exists() and (tmp_path / "out" / "p00.toml").exists()


def _wait_for(cond, timeout=180.0):
    t0 = time.monotonic()
    while not cond():
        if time.monotonic() - t0 > timeout:
            return False
        time.sleep(0.05)
    return True


@pytest.mark.slow
def test_ctrl_c_then_resume_fits_only_the_rest(tmp_path):
    """SIGINT to the whole process group (as Ctrl-C on a terminal: the command and its worker processes) after some
    results are written: exit 130, one line; the rerun fits only the missing spectra and its table equals an
    uninterrupted run's (the times aside)."""
    (tmp_path / "model.toml").write_text(MODEL)
    write_line_series(tmp_path, [0.5 * k for k in range(16)], fwhm_hz=160.0)
    args = [sys.executable, "-m", "powderspin", "series", "model.toml", "p*.csv", "-o", "out", "--workers", "2", "-q"]
    proc = subprocess.Popen(args, cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True)
    assert _wait_for(lambda: len(list((tmp_path / "out").glob("*.toml"))) >= 3 or proc.poll() is not None)
    assert proc.poll() is None, "the series finished before it could be interrupted"
    os.killpg(proc.pid, signal.SIGINT)
    out, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert len(err.strip().splitlines()) == 1 and "interrupted" in err, err
    done = len(list((tmp_path / "out").glob("*.toml")))
    assert 3 <= done < 16
    assert not [p for p in (tmp_path / "out").iterdir() if p.name.startswith(".") and p.name != ".powderspin-series"]
    r = _run(["series", "model.toml", "p*.csv", "-o", "out", "--workers", "1", "-q"], tmp_path)
    assert r.returncode == 0, r.stderr
    assert f"({16 - done} fitted now, {done} reused from earlier runs)" in r.stdout
    whole = _run(["series", "model.toml", "p*.csv", "-o", "whole", "--workers", "1", "-q"], tmp_path)
    assert whole.returncode == 0, whole.stderr

    def strip(rows):
        return [{k: v for k, v in x.items() if k != "time_s"} for x in rows]

    assert strip(_table(tmp_path / "out" / "table.csv")) == strip(_table(tmp_path / "whole" / "table.csv"))


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.slow
def test_a_real_scheduler_survives_a_killed_worker(tmp_path):
    """`dask scheduler` and two `dask worker` processes on 127.0.0.1; one worker is killed (SIGKILL) while the series
    runs; Dask reruns its task elsewhere and every row is filled."""
    (tmp_path / "model.toml").write_text(MODEL)
    write_line_series(tmp_path, [0.25 * k for k in range(24)], fwhm_hz=160.0)
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    env = dict(os.environ, NUMBA_NUM_THREADS="1", OMP_NUM_THREADS="1")
    dask = [sys.executable, "-m", "dask"]
    procs = []
    try:
        procs.append(subprocess.Popen(dask + ["scheduler", "--host", "127.0.0.1", "--port", str(port),
                                              "--dashboard-address", ":0"], env=env, stdout=subprocess.DEVNULL,
                                      stderr=subprocess.DEVNULL))
        for k in range(2):
            procs.append(subprocess.Popen(dask + ["worker", address, "--nthreads", "1", "--no-nanny", "--name",
                                                  f"w{k}", "--host", "127.0.0.1", "--dashboard-address", ":0"],
                                          env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
        from distributed import Client

        with Client(address, timeout="60s") as c:
            c.wait_for_workers(2, timeout=120)
        series = subprocess.Popen([sys.executable, "-m", "powderspin", "series", "model.toml", "p*.csv", "-o", "out",
                                   "--scheduler", address, "-q"], cwd=tmp_path, stdout=subprocess.PIPE,
                                  stderr=subprocess.PIPE, text=True, env=env)
        assert _wait_for(lambda: len(list((tmp_path / "out").glob("*.toml"))) >= 2 or series.poll() is not None)
        assert series.poll() is None, "the series finished before a worker could be killed"
        procs[1].kill()
        out, err = series.communicate(timeout=300)
        assert series.returncode == 0, err
        assert "24 spectra, 24 ok, 0 failed" in out
        assert procs[1].poll() is not None and procs[2].poll() is None  # one worker was gone; the other did the rest
        rows = _table(tmp_path / "out" / "table.csv")
        assert len(rows) == 24 and all(x["status"] == "ok" for x in rows)
    finally:
        for p in procs:
            if p.poll() is None:
                p.terminate()
        for p in procs:
            try:
                p.wait(timeout=30)
            except subprocess.TimeoutExpired:
                p.kill()
