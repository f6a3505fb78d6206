"""Progress bars on the terminal for long work (tqdm), shown only once the work has taken a while.

One class serves every command: a bar per stage (a site's lines, a kernel
grid, a fit's evaluations, posterior sampling, a plan's experiments); a new
stage closes the previous bar.  Bars go to standard error, appear only after
``delay`` seconds, and never when quiet.
"""

from __future__ import annotations

import sys

__all__ = ["StagedProgress"]


class StagedProgress:
    """A progress bar per stage, created when its stage starts and shown after ``delay`` seconds.

    Parameters
    ----------
    quiet : bool, optional
        Show nothing.
    delay : float, optional
        Seconds of work before a bar appears.

    Examples
    --------
    >>> bars = StagedProgress(quiet=True)
    >>> bars.update("plan", 3, total=10, unit="experiments")
    >>> bars.close()
    """

    def __init__(self, quiet: bool = False, delay: float = 2.0):
        self.quiet = quiet
        self.delay = delay
        self.bar = None
        self.stage = None

    def update(self, stage: str, done: int, *, total: int | None = None, unit: str = "it",
               postfix: str | None = None) -> None:
        """Report ``done`` units of work in ``stage`` (a new stage starts a new bar).

        Parameters
        ----------
        stage : str
            Shown as the bar's description.
        done : int
            Units of work done so far in this stage.
        total : int, optional
            Units in all (None: a counter without an end).
        unit : str, optional
            Name of a unit of work.
        postfix : str, optional
            Text after the bar (e.g. the current chi-square).
        """
        if self.quiet:
            return
        from tqdm import tqdm

        if stage != self.stage or self.bar is None:
            self.close()
            self.stage = stage
            self.bar = tqdm(total=total, desc=stage, unit=unit, delay=self.delay, leave=False, file=sys.stderr)
        if total is not None and self.bar.total != total:
            self.bar.total = total
        if postfix is not None:
            self.bar.set_postfix_str(postfix, refresh=False)
        if done > self.bar.n:  # update(), not refresh(): refresh() would show the bar before its delay
            self.bar.update(done - self.bar.n)

    def close(self) -> None:
        """Close the current bar (it disappears from the terminal)."""
        if self.bar is not None:
            self.bar.close()
            self.bar = None
        self.stage = None
