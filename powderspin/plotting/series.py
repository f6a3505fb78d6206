"""The trends of a series: every free parameter with its error bars against the series variable (or the file order)."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from ..files import write_via

__all__ = ["plot_trends", "save_trends"]


def plot_trends(rows, parameters, variable=None, x=None, fig=None):
    """Draw one panel per free parameter: fitted values with one-standard-error bars along the series.

    Parameters
    ----------
    rows : sequence of powderspin.series.runner.SeriesRow
    parameters : sequence of str
        The free parameters (``"A.cq_mhz"``).
    variable : str, optional
        Name of the series variable (the x label).
    x : sequence of float, optional
        The series variable of each row; the file order (1, 2, ...) when
        omitted.
    fig : matplotlib.figure.Figure, optional
        Drawn into a new figure when omitted (made without pyplot).

    Returns
    -------
    matplotlib.figure.Figure
        Failed rows are left out and counted in the title; errors that are
        infinite (a parameter the data do not fix) are drawn as open markers
        without bars.

    Examples
    --------
    >>> from powderspin.series.runner import SeriesRow
    >>> rows = [SeriesRow("a", (), "ok", (("A.cq_mhz", 2.0), ("A.cq_mhz_stderr", 0.1))),
    ...         SeriesRow("b", (), "unreadable", ())]
    >>> fig = plot_trends(rows, ["A.cq_mhz"])
    >>> len(fig.axes)
    1
    """
    n = max(1, len(parameters))
    cols = 1 if n == 1 else 2
    nrows = int(math.ceil(n / cols))
    if fig is None:
        fig = Figure(figsize=(5.0 * cols, 2.4 * nrows + 0.8), layout="constrained")
    xs = np.arange(1, len(rows) + 1, dtype=float) if x is None else np.asarray(x, dtype=float)
    ok = np.array([r.ok for r in rows], dtype=bool)
    for k, name in enumerate(parameters):
        ax = fig.add_subplot(nrows, cols, k + 1)
        v = np.array([r.get(name) for r in rows], dtype=float)
        e = np.array([r.get(f"{name}_stderr") for r in rows], dtype=float)
        good = ok & np.isfinite(v)
        bars = good & np.isfinite(e)
        ax.errorbar(xs[bars], v[bars], yerr=e[bars], fmt="o", ms=4, capsize=2, color="tab:blue", lw=1)
        loose = good & ~np.isfinite(e)
        if loose.any():
            ax.plot(xs[loose], v[loose], "o", mfc="none", color="tab:red", label="error not determined")
            ax.legend(fontsize="small")
        ax.set_ylabel(name)
        ax.set_xlabel(variable if (variable and x is not None) else "spectrum (file order)")
        ax.grid(alpha=0.3)
    n_bad = int((~ok).sum())
    title = f"series: {len(rows)} spectra"
    if n_bad:
        title += f", {n_bad} failed (not shown)"
    fig.suptitle(title + "; bars are one standard error", fontsize="medium")
    return fig


def save_trends(rows, parameters, variable, x, path) -> Path:
    """Draw :func:`plot_trends` and write it atomically (replacing an earlier series' figure).

    Parameters
    ----------
    rows, parameters, variable, x
        As :func:`plot_trends`.
    path : str or pathlib.Path
        ``.png``, ``.pdf`` or ``.svg``.

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from powderspin.series.runner import SeriesRow
    >>> rows = [SeriesRow("a", (), "ok", (("A.cq_mhz", 2.0), ("A.cq_mhz_stderr", 0.1)))]
    >>> with tempfile.TemporaryDirectory() as d:
    ...     save_trends(rows, ["A.cq_mhz"], None, None, pathlib.Path(d) / "t.png").stat().st_size > 0
    True
    """
    out = Path(path)
    fig = plot_trends(rows, parameters, variable, x)
    return write_via(out, lambda tmp: fig.savefig(tmp, dpi=110, format=out.suffix[1:].lower()), force=True,
                     role="trend figure")
