"""Ctrl-C: a running simulation stops at once with status 130, one line, no traceback and no partial output."""

from __future__ import annotations

import pytest

from tests.interrupting import interrupt_when_busy

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


@pytest.mark.slow
def test_sigint_exits_130_with_one_line_and_no_output(tmp_path):
    model = tmp_path / "slow.toml"
    model.write_text(SLOW_MODEL)
    out = tmp_path / "out.csv"
    # the progress bar (after 2 s of work) shows that the lines are being computed
    code, stderr, _, stopped_after = interrupt_when_busy(["simulate", model, "-o", out], "orientations")
    assert code == 130, stderr
    lines = [l for l in stderr.splitlines() if l.strip() and not l.startswith(("note:", "site Nb"))
             and "orientations/s" not in l and "it/s" not in l]
    assert len(lines) == 1 and "interrupted" in lines[0], stderr
    assert "Traceback" not in stderr
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == ["slow.toml"]  # no temporary file left either
    # a chunk of work takes a fraction of a second on an idle machine; allow for a loaded one
    assert stopped_after < 30.0, f"took {stopped_after:.1f} s to stop"
