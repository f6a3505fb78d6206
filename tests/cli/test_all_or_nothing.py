"""Commands that write several files write all of them or none: errors, a full disk, Ctrl-C and SIGTERM.

``simulate -o OUT.csv --plot OUT.png`` and ``plan --json OUT.json --plot OUT.png`` are interrupted at many
points in time with SIGINT and SIGTERM; afterwards either the command finished (status 0, every file there)
or it was stopped (status 130, one line, no output and no temporary file).  A full disk is simulated with
``ENOSPC`` from the figure writer (the second output) and from the final renames.
"""

from __future__ import annotations

import errno
import os
import signal
import subprocess
import sys
import time

import pytest

from powderspin.cli.main import main

SIM_MODEL = """nucleus = "27Al"
[measurement]
field_tesla = 9.4
spinning_hz = 10000
points = 1024
[[site]]
label = "Al"
shift_ppm = 10.0
cq_mhz = 3.0
eta_q = 0.3
"""

PLAN_MODEL = """nucleus = "31P"
[measurement]
field_tesla = 9.4
orientations = 8
lorentz_hz = 300.0
[[site]]
label = "P"
span_ppm = 150.0
skew = 0.5
"""

COMMANDS = {
    "simulate": (SIM_MODEL, ["simulate", "{model}", "-o", "out.csv", "--plot", "out.png", "-q"],
                 ["out.csv", "out.png"]),
    "plan": (PLAN_MODEL, ["plan", "{model}", "--fields", "9.4", "--rates", "5000", "10000", "--json", "out.json",
                          "--plot", "out.png", "-q"], ["out.json", "out.png"]),
}


def _start(tmp_path, which):
    text, args, outs = COMMANDS[which]
    model = tmp_path / "model.toml"
    model.write_text(text)
    argv = [a.replace("{model}", str(model)) for a in args]
    env = dict(os.environ, NUMBA_NUM_THREADS="1")
    proc = subprocess.Popen([sys.executable, "-m", "powderspin", *argv], cwd=tmp_path, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env)
    return proc, outs


def _left(tmp_path):
    return sorted(p.name for p in tmp_path.iterdir() if p.name != "model.toml")


@pytest.mark.slow
@pytest.mark.parametrize("which", ["simulate", "plan"])
def test_interrupted_at_many_points_leaves_all_or_nothing(tmp_path, which):
    # one full run first compiles the kernels (on a fresh machine); a second, warm, run measures how long a run
    # takes, so that the signals below land inside the runs they interrupt
    proc, outs = _start(tmp_path, which)
    out, err = proc.communicate(timeout=600)
    assert proc.returncode == 0, err
    assert _left(tmp_path) == sorted(outs)
    for name in outs:
        (tmp_path / name).unlink()
    t0 = time.monotonic()
    proc, outs = _start(tmp_path, which)
    out, err = proc.communicate(timeout=600)
    duration = time.monotonic() - t0
    assert proc.returncode == 0, err
    assert _left(tmp_path) == sorted(outs)
    outcomes = set()
    # signals spread over the whole run, from interpreter start to the last write
    fractions = [0.15, 0.3, 0.45, 0.55, 0.65, 0.72, 0.8, 0.86, 0.9, 0.94, 0.97, 1.0]
    for k, fraction in enumerate(fractions):
        sig = signal.SIGINT if k % 2 == 0 else signal.SIGTERM
        for name in outs:
            (tmp_path / name).unlink(missing_ok=True)
        proc, _ = _start(tmp_path, which)
        time.sleep(duration * fraction)
        proc.send_signal(sig)
        out, err = proc.communicate(timeout=300)
        left = _left(tmp_path)
        assert "Traceback" not in err or proc.returncode in (-sig, 1), err
        if proc.returncode == 0 or "wrote" in err:
            # finished before the signal (a signal after the last line only ends a finished process)
            assert left == sorted(outs), (fraction, sig, err)
            assert proc.returncode in (0, -sig), err
            outcomes.add("finished")
        else:
            # stopped: no output, no temporary file; once the command runs, one line and status 130
            assert left == [], (fraction, sig, proc.returncode, err)
            if proc.returncode == 130:
                lines = [line for line in err.splitlines() if line.strip() and not line.startswith("note:")]
                assert len(lines) == 1 and ("interrupted" in lines[0] or "terminated" in lines[0]), err
                outcomes.add(f"stopped by {signal.Signals(sig).name}")
    assert "stopped by SIGINT" in outcomes and "stopped by SIGTERM" in outcomes, outcomes


def _run(tmp_path, which, capsys):
    text, args, outs = COMMANDS[which]
    model = tmp_path / "model.toml"
    model.write_text(text)
    cwd = os.getcwd()
    os.chdir(tmp_path)
    try:
        status = main([a.replace("{model}", str(model)) for a in args])
    finally:
        os.chdir(cwd)
    return status, capsys.readouterr().err, outs


def _disk_full(*args, **kwargs):
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


@pytest.mark.parametrize("which", ["simulate", "plan"])
def test_full_disk_while_writing_the_figure_leaves_nothing(tmp_path, which, capsys, monkeypatch):
    """The figure is written after the first output: with the disk full there, the first is not left behind."""
    from matplotlib.figure import Figure

    monkeypatch.setattr(Figure, "savefig", _disk_full)
    status, err, outs = _run(tmp_path, which, capsys)
    assert status == 2, err
    lines = [line for line in err.splitlines() if line.strip() and not line.startswith(("note:", "caution:"))]
    assert len(lines) == 1 and "out.png" in lines[0] and "No space left" in lines[0], err
    assert _left(tmp_path) == []


@pytest.mark.parametrize("which", ["simulate", "plan"])
def test_failed_rename_puts_everything_back(tmp_path, which, capsys, monkeypatch):
    """The second of the final renames fails: the first file is taken back; a replaced file is restored."""
    real = os.replace
    calls = []

    def second_fails(src, dst, *a, **k):
        if str(dst).endswith(("out.png", "out.json", "out.csv")):
            calls.append(dst)
            if len(calls) == 2:
                _disk_full()
        return real(src, dst, *a, **k)

    monkeypatch.setattr(os, "replace", second_fails)
    status, err, outs = _run(tmp_path, which, capsys)
    assert status == 2, err
    assert _left(tmp_path) == []
    # with --force, the user's earlier files come back unchanged
    for name in outs:
        (tmp_path / name).write_text("earlier")
    calls.clear()
    text, args, _ = COMMANDS[which]
    cwd = os.getcwd()
    os.chdir(tmp_path)
    try:
        status = main([a.replace("{model}", str(tmp_path / "model.toml")) for a in args] + ["--force"])
    finally:
        os.chdir(cwd)
    assert status == 2
    assert _left(tmp_path) == sorted(outs)
    assert all((tmp_path / name).read_text() == "earlier" for name in outs)


def test_sigterm_in_process_is_one_line_and_status_130(tmp_path, capsys, monkeypatch):
    """SIGTERM arriving while a command works is reported like Ctrl-C."""
    import powderspin.simulator as simulator

    def stop(*a, **k):
        os.kill(os.getpid(), signal.SIGTERM)
        time.sleep(1)
        raise AssertionError("SIGTERM was not delivered")

    monkeypatch.setattr(simulator, "simulate", stop)
    status, err, outs = _run(tmp_path, "simulate", capsys)
    assert status == 130
    assert err.strip().splitlines()[-1] == "terminated (SIGTERM); no output was written"
    assert _left(tmp_path) == []
    assert signal.getsignal(signal.SIGTERM) is signal.SIG_DFL  # the handler is put back after the command


def test_missing_output_folder_is_refused(tmp_path, capsys):
    model = tmp_path / "model.toml"
    model.write_text(SIM_MODEL)
    status = main(["simulate", str(model), "-o", str(tmp_path / "nofolder" / "out.csv")])
    err = capsys.readouterr().err
    assert status == 2 and "does not exist" in err and "nofolder" in err
    assert not (tmp_path / "nofolder").exists()
