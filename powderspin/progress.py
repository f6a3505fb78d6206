"""One progress protocol for every long job, and the terminal bars that subscribe to it.

Everything that takes long enough to report progress (a site's lines, a kernel
grid, a fit's evaluations, posterior sampling, a plan's experiments, a series of
fits) calls one callback with one small frozen value, a :class:`ProgressEvent`:

    progress(ProgressEvent(stage="lines", done=4096, total=10011, label="AlO4", unit="orientations"))

A front end subscribes by passing any callable that takes an event: the
terminal bars of the command line (:class:`TerminalProgress`), the browser
explorer, a Dask dashboard, or a list's ``append`` in a test.  Producers never
format text for a particular front end; they fill in the fields below.

Stages used by powderspin (``stage``):

- ``"lines"``: a site's per-orientation lines (``label`` the site, unit orientations);
- ``"kernels"``: the kernel grid of a site with an EFG distribution (``label`` the site,
  unit line shapes);
- ``"fit"``: least-squares evaluations (``total`` None; ``value`` the lowest chi-square so far);
- ``"posterior"``: posterior sampling (unit steps);
- ``"plan"``: a plan's candidate experiments;
- ``"series"``: the spectra of a series (``label`` "F failed, R running", shown beside one bar).
"""

from __future__ import annotations

import math
import sys
from dataclasses import dataclass
from typing import Callable

__all__ = ["ProgressEvent", "ProgressCallback", "TerminalProgress", "emit"]


@dataclass(frozen=True)
class ProgressEvent:
    """How far one stage of a long job has come.

    Parameters
    ----------
    stage : str
        What is being done (see the module notes for the stages powderspin uses).
    done : int
        Units of work done so far in this stage.
    total : int or None
        Units in all; None when the end is not known in advance (a fit's evaluations).
    label : str, optional
        Which item the stage works on (a site label), shown beside the stage.
    unit : str, optional
        Name of a unit of work ("orientations", "line shapes", "evaluations", ...).
    value : float, optional
        A number that goes with the stage, e.g. the lowest chi-square of a fit (NaN when none).

    Examples
    --------
    >>> e = ProgressEvent("lines", 512, 1024, label="AlO4", unit="orientations")
    >>> e.fraction, e.description
    (0.5, 'lines AlO4')
    """

    stage: str
    done: int
    total: int | None = None
    label: str = ""
    unit: str = "it"
    value: float = math.nan

    @property
    def fraction(self) -> float | None:
        """``done / total`` (None when the total is not known).

        Returns
        -------
        float or None

        Examples
        --------
        >>> ProgressEvent("fit", 10).fraction is None
        True
        """
        if not self.total:
            return None
        return self.done / self.total

    @property
    def description(self) -> str:
        """The stage and its label, as one short text (e.g. ``"kernels AlO4"``).

        Returns
        -------
        str

        Examples
        --------
        >>> ProgressEvent("plan", 1, 4).description
        'plan'
        """
        return f"{self.stage} {self.label}" if self.label else self.stage


#: what a producer of progress takes: any callable of one event
ProgressCallback = Callable[[ProgressEvent], None]


def emit(progress: ProgressCallback | None, stage: str, done: int, total: int | None = None, *, label: str = "",
         unit: str = "it", value: float = math.nan) -> None:
    """Send one event to ``progress`` when there is a subscriber (None: nothing happens).

    Parameters
    ----------
    progress : callable or None
    stage, done, total, label, unit, value
        The fields of :class:`ProgressEvent`.

    Examples
    --------
    >>> seen = []
    >>> emit(seen.append, "posterior", 3, 10, unit="steps")
    >>> emit(None, "posterior", 4, 10)
    >>> seen[0].done, seen[0].unit
    (3, 'steps')
    """
    if progress is not None:
        progress(ProgressEvent(stage, int(done), None if total is None else int(total), label, unit, value))


class TerminalProgress:
    """Progress bars on the terminal (tqdm): one bar per stage and label, shown after ``delay`` seconds.

    A subscriber of the progress protocol: pass it wherever a ``progress``
    callback is taken.  Bars go to standard error, only when it is a terminal
    (no carriage returns piling up in a log file), and never when quiet.  A new
    stage or label closes the previous bar.

    Parameters
    ----------
    quiet : bool, optional
        Show nothing.
    delay : float, optional
        Seconds of work before a bar appears.
    stream : file, optional
        Where the bars go (default standard error).
    always : bool, optional
        Show bars even when the stream is not a terminal (the command line
        sets it from ``POWDERSPIN_PROGRESS=always``).

    Examples
    --------
    >>> bars = TerminalProgress(quiet=True)
    >>> bars(ProgressEvent("plan", 3, 10, unit="experiments"))
    >>> bars.close()
    """

    def __init__(self, quiet: bool = False, delay: float = 2.0, stream=None, always: bool = False):
        self.stream = sys.stderr if stream is None else stream
        isatty = getattr(self.stream, "isatty", None)
        self.quiet = quiet or not (always or (callable(isatty) and isatty()))
        self.delay = delay
        self.bar = None
        self.key = None

    def __call__(self, event: ProgressEvent) -> None:
        """Show one event (the bar of its stage and label)."""
        if self.quiet:
            return
        from tqdm import tqdm

        series = event.stage == "series"  # one bar over the spectra; its label (failed, running) changes
        key = (event.stage, "" if series else event.label)
        if key != self.key or self.bar is None:
            self.close()
            self.key = key
            self.bar = tqdm(total=event.total, desc=event.stage if series else event.description,
                            unit=f" {event.unit}", delay=self.delay, leave=False, file=self.stream)
        if series:
            self.bar.set_postfix_str(event.label, refresh=False)
        if event.total is not None and self.bar.total != event.total:
            self.bar.total = event.total
        if not series and not math.isnan(event.value):
            self.bar.set_postfix_str(f"chi-square {event.value:.6g}" if event.stage == "fit" else f"{event.value:.6g}",
                                     refresh=False)
        if event.done > self.bar.n:  # update(), not refresh(): refresh() would show the bar before its delay
            self.bar.update(event.done - self.bar.n)

    def close(self) -> None:
        """Close the current bar (it disappears from the terminal)."""
        if self.bar is not None:
            self.bar.close()
            self.bar = None
        self.key = None
