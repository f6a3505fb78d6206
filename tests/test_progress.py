"""The progress protocol: events, emit, and the terminal bars that subscribe to it."""

from __future__ import annotations

import io

from powderspin.progress import ProgressEvent, TerminalProgress, emit


class _Tty(io.StringIO):
    def isatty(self):
        return True


def test_event_fields_and_emit():
    seen = []
    emit(seen.append, "lines", 3, 10, label="A", unit="orientations")
    emit(None, "lines", 4, 10)  # no subscriber: nothing happens
    assert seen == [ProgressEvent("lines", 3, 10, "A", "orientations")]
    assert seen[0].fraction == 0.3 and seen[0].description == "lines A"


def test_bars_only_on_a_terminal_and_never_when_quiet():
    log = io.StringIO()
    bars = TerminalProgress(delay=0.0, stream=log)
    bars(ProgressEvent("fit", 5, None, unit="evaluations", value=12.5))
    bars.close()
    assert log.getvalue() == ""  # not a terminal: no carriage returns piling up in a log
    tty = _Tty()
    bars = TerminalProgress(quiet=True, delay=0.0, stream=tty)
    bars(ProgressEvent("fit", 5, None, unit="evaluations"))
    assert tty.getvalue() == ""


def test_bars_show_units_with_a_space_and_the_chi_square():
    tty = _Tty()
    bars = TerminalProgress(delay=0.0, stream=tty)
    for k in range(1, 60):
        bars(ProgressEvent("fit", k, None, unit="evaluations", value=3.25))
    text = str(bars.bar)  # the bar as it would be drawn now
    bars.close()
    assert "59 evaluations" in text and "59evaluations" not in text
    assert "chi-square 3.25" in text


def test_a_new_stage_or_label_starts_a_new_bar():
    tty = _Tty()
    bars = TerminalProgress(delay=0.0, stream=tty, always=True)
    bars(ProgressEvent("lines", 1, 2, label="A", unit="orientations"))
    first = bars.bar
    bars(ProgressEvent("lines", 1, 2, label="B", unit="orientations"))
    assert bars.bar is not first and bars.key == ("lines", "B")
    bars.close()
    assert bars.bar is None
