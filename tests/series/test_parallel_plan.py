"""A plan's candidates run on Dask give the serial plan (plan(..., map_candidates=...), plan --workers);
Ctrl-C during a Dask plan stops it with one line, status 130 and no output."""

from __future__ import annotations

import json
import math
import os
import re
import signal
import subprocess
import sys
import threading
import time

import pytest

import powderspin as ps
from powderspin.series.runner import dask_map

# an invented sample: two 27Al sites, one with a shift anisotropy (so the sidebands differ between sites)
TWO_SITES = """nucleus = "27Al"
[measurement]
field_tesla = 14.1
points = 1024
orientations = "medium"
lorentz_hz = 150.0
[[site]]
label = "A"
weight = 0.6
shift_ppm = 60.0
cq_mhz = 4.5
eta_q = 0.3
[[site]]
label = "B"
weight = 0.4
shift_ppm = 10.0
cq_mhz = 7.0
eta_q = 0.6
span_ppm = 80.0
skew = 0.2
"""


def _model(tmp_path):
    p = tmp_path / "two.toml"
    p.write_text(TWO_SITES)
    return p


def _same(a, b, path="", rtol=1e-9):
    """JSON values equal: numbers to rtol (both NaN, or both the same infinity, count as equal), the rest exactly."""
    if isinstance(a, dict) and isinstance(b, dict):
        assert sorted(a) == sorted(b), (path, sorted(set(a) ^ set(b)))
        for k in a:
            _same(a[k], b[k], f"{path}.{k}", rtol)
    elif isinstance(a, list) and isinstance(b, list):
        assert len(a) == len(b), path
        for k, (x, y) in enumerate(zip(a, b)):
            _same(x, y, f"{path}[{k}]", rtol)
    elif isinstance(a, (int, float)) and isinstance(b, (int, float)) and not isinstance(a, bool):
        if math.isnan(a) or math.isnan(b):
            assert math.isnan(a) and math.isnan(b), (path, a, b)
        else:
            assert a == pytest.approx(b, rel=rtol, abs=0.0), (path, a, b)
    else:
        assert a == b, (path, a, b)


def _plain(plan_dict):
    d = json.loads(json.dumps(plan_dict, default=str))
    d.pop("timings_s")  # seconds: the one part that differs
    return d


def test_dask_candidates_give_the_serial_plan(tmp_path):
    """In-process Dask client: every number of the plan equals the serial run's to 1e-9; the progress reaches the
    total once, in order."""
    from distributed import Client

    model = _model(tmp_path)
    fields, rates = [9.4, 18.8], [4000.0, 8000.0, 12000.0, 20000.0]
    serial = ps.plan(model, fields, rates_hz=rates)
    seen = []
    with Client(processes=False, n_workers=2, threads_per_worker=1, dashboard_address=":0") as c:
        par = ps.plan(model, fields, rates_hz=rates, map_candidates=dask_map(c), progress=lambda e: seen.append(e))
    _same(_plain(serial.to_dict()), _plain(par.to_dict()))
    assert [f.recommended_rate_hz for f in par.fields] == [f.recommended_rate_hz for f in serial.fields]
    total = len(fields) * (1 + len(rates))
    assert [e.done for e in seen] == list(range(1, total + 1)) and {e.total for e in seen} == {total}
    assert par.timings["candidates"] > 0


def test_map_candidates_must_be_callable():
    with pytest.raises(ps.PlanError, match="map_candidates must be callable"):
        m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
                          [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
        ps.plan(m, [9.4], rates_hz=[5000], map_candidates=4)


def test_plan_and_fit_share_the_dask_options_wording():
    """--workers and --scheduler say the same of plan as of fit --global (only the work named differs)."""
    from powderspin.cli.main import build_parser

    sub = next(a for a in build_parser()._actions if a.dest == "command")
    helps = {}
    for name in ("fit", "plan"):
        p = sub.choices[name]
        helps[name] = {a.dest: a.help for a in p._actions if a.dest in ("workers", "scheduler")}
    for dest, tail in (("workers", " on a local Dask cluster of N single-threaded processes"),
                       ("scheduler", " on a running Dask scheduler (e.g. tcp://head-node:8786)")):
        assert helps["fit"][dest].endswith(tail) and helps["plan"][dest].endswith(tail)


def _cli(args, cwd, **kw):
    return subprocess.run([sys.executable, "-m", "powderspin", *map(str, args)], cwd=cwd, capture_output=True,
                          text=True, timeout=900, **kw)


@pytest.mark.slow
def test_plan_command_on_two_local_workers_writes_the_serial_json(tmp_path):
    """`plan --workers 2` (a LocalCluster of 2 worker processes) writes the JSON of the serial command to 1e-9 and
    prints the same table."""
    _model(tmp_path)
    common = ["plan", "two.toml", "--fields", "9.4", "14.1", "18.8", "--rate-count", "8", "-q"]
    serial = _cli(common + ["--json", "serial.json"], tmp_path)
    assert serial.returncode == 0, serial.stderr
    dask = _cli(common + ["--json", "dask.json", "--workers", "2"], tmp_path)
    assert dask.returncode == 0, dask.stderr
    a = json.loads((tmp_path / "serial.json").read_text())
    b = json.loads((tmp_path / "dask.json").read_text())
    a.pop("timings_s"), b.pop("timings_s")
    _same(a, b)
    assert dask.stdout == serial.stdout
    assert "Traceback" not in dask.stderr


@pytest.mark.slow
def test_ctrl_c_during_a_dask_plan_stops_with_one_line_and_no_output(tmp_path):
    """SIGINT to the whole process group (as Ctrl-C on a terminal: the command and its worker processes) once
    candidates are coming back from the workers: status 130, one line, no JSON or plot, no table."""
    _model(tmp_path)
    args = [sys.executable, "-m", "powderspin", "plan", "two.toml", "--fields", "9.4", "14.1", "18.8", "23.5",
            "--rate-count", "60", "--json", "plan.json", "--plot", "plan.png", "--workers", "2"]
    env = dict(os.environ, POWDERSPIN_PROGRESS="always")  # bars on a pipe: they say how far the plan is
    proc = subprocess.Popen(args, cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env,
                            start_new_session=True)
    chunks: list[str] = []
    reader = threading.Thread(target=lambda: chunks.extend(iter(lambda: proc.stderr.read(1), "")), daemon=True)
    reader.start()

    def candidates_back():  # the 4 set-ups are done here; more than 4 done means workers have returned candidates
        done = [int(m.group(1)) for m in re.finditer(r"(\d+)/\d+ \[", "".join(chunks))]
        return bool(done) and max(done) > 6

    deadline = time.monotonic() + 300
    while not candidates_back() and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.1)
    assert proc.poll() is None, "the plan finished (or failed) before it could be interrupted: " + "".join(chunks)
    os.killpg(proc.pid, signal.SIGINT)
    proc.wait(timeout=120)
    reader.join(timeout=10)
    err = "".join(chunks).replace("\r", "\n")
    assert proc.returncode == 130, err
    lines = [x for x in err.splitlines() if x.strip() and "experiments" not in x and not x.startswith("note:")]
    assert len(lines) == 1 and "interrupted" in lines[0], err
    assert "Traceback" not in err
    assert proc.stdout.read() == ""
    assert sorted(p.name for p in tmp_path.iterdir()) == ["two.toml"]
