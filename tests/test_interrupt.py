"""Ctrl-C: a running simulation stops at once with status 130, one line, no traceback and no partial output."""

from __future__ import annotations

import signal
import subprocess
import sys
import threading
import time

SLOW_MODEL = """nucleus = "93Nb"
[measurement]
field_tesla = 9.4
spinning_hz = 15000
method = "exact"
orientations = 300
transitions = "all"
points = 4096
[[site]]
label = "Nb"
cq_mhz = 30.0
eta_q = 0.4
"""


def test_sigint_exits_130_with_one_line_and_no_output(tmp_path):
    model = tmp_path / "slow.toml"
    model.write_text(SLOW_MODEL)
    out = tmp_path / "out.csv"
    proc = subprocess.Popen([sys.executable, "-m", "powderspin", "simulate", str(model), "-o", str(out)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    chunks: list[str] = []

    def read():
        for piece in iter(lambda: proc.stderr.read(1), ""):
            chunks.append(piece)

    reader = threading.Thread(target=read, daemon=True)
    reader.start()
    # wait until the progress bar shows that the lines are being computed (it appears after 2 s of work)
    deadline = time.monotonic() + 240
    while "orientations" not in "".join(chunks) and time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.2)
    assert proc.poll() is None, "the slow model finished (or failed) before it could be interrupted"
    t0 = time.monotonic()
    proc.send_signal(signal.SIGINT)
    proc.wait(timeout=120)
    stopped_after = time.monotonic() - t0
    reader.join(timeout=10)
    stderr = "".join(chunks).replace("\r", "\n")
    assert proc.returncode == 130, stderr
    lines = [l for l in stderr.splitlines() if l.strip() and not l.startswith(("note:", "site Nb"))
             and "orientations/s" not in l and "it/s" not in l]
    assert len(lines) == 1 and "interrupted" in lines[0], stderr
    assert "Traceback" not in stderr
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == ["slow.toml"]  # no temporary file left either
    # a chunk of work takes a fraction of a second on an idle machine; allow for a loaded one
    assert stopped_after < 30.0, f"took {stopped_after:.1f} s to stop"
