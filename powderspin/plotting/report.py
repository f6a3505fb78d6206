"""Figures of a fit: the report (data, fit, components, residual, fitted values) and the corner plot.

The report has one panel per measurement: the data (grey), the fit (a dark
line), each site's component (thin coloured lines) and, under it, the
residual on the same axis; the ppm axis decreases to the right (the trade's
convention).  A column at the right lists the fitted values with their
standard errors (and posterior intervals when sampled) and the fit's
statistics.  The corner plot shows the pairwise posterior distributions of
the free parameters (:mod:`corner`).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..files import check_outputs, output_path, write_via
from ..fitting.result import format_value

__all__ = ["report_figure", "save_report", "save_corner", "REPORT_SUFFIXES"]

#: figure formats the report and corner plot can be written in
REPORT_SUFFIXES = (".png", ".pdf", ".svg")

_DATA = "0.55"
_FIT = "#1f2f5c"
_RESID = "#7a3b2e"


def report_figure(result):
    """The report figure of a fit (matplotlib Figure).

    Parameters
    ----------
    result : powderspin.fitting.fitter.FitResult

    Returns
    -------
    matplotlib.figure.Figure
        One panel per measurement (spectrum over residual, ppm decreasing to
        the right) and a column with the fitted values and errors.

    See Also
    --------
    save_report

    Examples
    --------
    See :func:`save_report`.
    """
    import matplotlib
    from matplotlib.figure import Figure

    n = len(result.spectra)
    fig = Figure(figsize=(10.5, 3.4 * n + 0.5))
    gs = fig.add_gridspec(n, 2, width_ratios=(3.2, 1.2), left=0.08, right=0.99, top=0.95, bottom=0.07,
                          wspace=0.08, hspace=0.32)
    colours = matplotlib.colormaps["Dark2"].colors
    for j, spec in enumerate(result.spectra):
        inner = gs[j, 0].subgridspec(2, 1, height_ratios=(3, 1), hspace=0.06)
        ax = fig.add_subplot(inner[0])
        axr = fig.add_subplot(inner[1], sharex=ax)
        ppm = spec.ppm
        data = np.asarray(result.data[j].intensity)
        mk = np.asarray(result.masks[j])
        ax.plot(ppm, data, color=_DATA, lw=0.8, label="data")
        for k, label in enumerate(spec.site_labels):
            c = colours[k % len(colours)]
            ax.fill_between(ppm, 0.0, spec.site_intensities[k], color=c, alpha=0.25, lw=0)
            ax.plot(ppm, spec.site_intensities[k], color=c, lw=0.9, label=label)
        ax.plot(ppm, spec.intensity, color=_FIT, lw=1.0, ls=(0, (5, 2)), label="fit")
        resid = data - spec.intensity
        axr.axhline(0.0, color="0.75", lw=0.6)
        axr.plot(ppm, np.where(mk, resid, np.nan), color=_RESID, lw=0.7)
        if not mk.all():
            axr.plot(ppm, np.where(mk, np.nan, resid), color="0.8", lw=0.6)
            for a in (ax, axr):
                _shade_outside(a, ppm, mk)
        meas = result.model.measurements[j]
        spin = "static" if meas.spinning_hz == 0 else (
            "infinite-rate MAS" if meas.is_infinite_rate else f"{meas.spinning_hz / 1e3:g} kHz MAS")
        ax.set_title(f"measurement {j + 1}: {result.model.nucleus.name}, {meas.field_tesla:g} T, {spin}",
                     loc="left", fontsize=10)
        ax.set_ylabel("intensity")
        axr.set_ylabel("residual")
        axr.set_xlabel(f"{result.model.nucleus.name} shift (ppm)")
        ax.tick_params(labelbottom=False)
        ax.set_xlim(ppm.max(), ppm.min())
        ax.legend(fontsize=8, frameon=False, loc="upper right")
    tab = fig.add_subplot(gs[:, 1])
    tab.set_navigate(False)
    tab.axis("off")
    tab.text(0.0, 1.0, _table_text(result), va="top", ha="left", family="monospace", fontsize=7.5,
             transform=tab.transAxes)
    return fig


def _shade_outside(ax, ppm, mk):
    edges = np.flatnonzero(np.diff(mk.astype(int)))
    bounds = [0] + list(edges + 1) + [mk.size]
    for a, b in zip(bounds[:-1], bounds[1:]):
        if not mk[a]:
            ax.axvspan(ppm[a], ppm[b - 1], color="0.93", lw=0)


def _table_text(result) -> str:
    lines = ["fitted values (+- 1 standard error)", ""]
    for name in result.names:
        lines.append(name)
        lines.append("   " + format_value(result.values[name], result.stderr[name]))
        if result.posterior is not None:
            lo, hi = result.posterior.interval(name)
            lines.append(f"   16-84 %: {lo:.5g} .. {hi:.5g}")
    lines.append("")
    lines.append(f"reduced chi-square {result.reduced_chi_square:.4g}")
    lines.append(f"noise from the {result.noise_source}")
    lines.append(f"{result.evaluations} evaluations, {result.time_s:.1f} s")
    if result.starts > 1:
        lines.append(f"{result.starts_at_best} of {result.starts} starts at the best")
    if result.warnings:
        lines.append(f"{len(result.warnings)} warning(s): see the result file")
    return "\n".join(lines)


def save_report(result, path, *, force: bool = False, protect=()) -> Path:
    """Write the report figure of a fit (PNG, PDF or SVG) atomically.

    Parameters
    ----------
    result : powderspin.fitting.fitter.FitResult
    path : str or pathlib.Path
        ``.png``, ``.pdf`` or ``.svg``.
    force : bool, optional
        Replace an existing file.
    protect : iterable of path, optional
        Inputs never to overwrite.

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, pathlib
    >>> import numpy as np
    >>> import powderspin as ps
    >>> from powderspin.io.spectra import MeasuredSpectrum
    >>> truth = ps.make_model("31P", {"field_tesla": 9.4, "points": 128, "center_ppm": 0.0, "width_ppm": 40.0},
    ...                       [{"label": "P", "shift_ppm": 2.0, "lorentz_hz": 400.0}])
    >>> s = ps.simulate(truth)
    >>> y = s.intensity + np.random.default_rng(3).normal(0.0, 0.002, s.hz.size)
    >>> start = ps.make_model("31P", {"field_tesla": 9.4},
    ...                       [{"label": "P", "shift_ppm": {"start": 0.0, "min": -5.0, "max": 5.0},
    ...                         "lorentz_hz": 400.0}])
    >>> r = ps.fit(start, [MeasuredSpectrum(s.hz, s.ppm, y, None, s.nu_ref_hz, "synthetic")])
    >>> with tempfile.TemporaryDirectory() as d:
    ...     save_report(r, pathlib.Path(d) / "fit.png").stat().st_size > 1000
    True
    """
    p = output_path(path, "report")
    check_outputs([(p, "report", REPORT_SUFFIXES)], force=force, protect=protect)
    fig = report_figure(result)
    return write_via(p, lambda tmp: fig.savefig(tmp, dpi=110, format=p.suffix[1:]), force=force, protect=protect,
                     role="report")


def save_corner(result, path, *, force: bool = False, protect=()) -> Path:
    """Write the corner plot (pairwise posterior distributions) of a fit sampled with ``posterior=True``.

    Parameters
    ----------
    result : powderspin.fitting.fitter.FitResult
        With ``result.posterior`` set.
    path : str or pathlib.Path
        ``.png``, ``.pdf`` or ``.svg``.
    force : bool, optional
    protect : iterable of path, optional

    Returns
    -------
    pathlib.Path

    Raises
    ------
    ValueError
        When the fit was not sampled.

    References
    ----------
    D. Foreman-Mackey, J. Open Source Softw. 1 (2016) 24 (corner.py).

    Examples
    --------
    >>> try:
    ...     save_corner(type("R", (), {"posterior": None})(), "x.png")
    ... except ValueError as e:
    ...     print(e)
    the fit has no posterior samples: fit with posterior=True (--posterior)
    """
    if result.posterior is None:
        raise ValueError("the fit has no posterior samples: fit with posterior=True (--posterior)")
    import corner
    import matplotlib
    from matplotlib.figure import Figure

    p = output_path(path, "corner plot")
    check_outputs([(p, "corner plot", REPORT_SUFFIXES)], force=force, protect=protect)
    post = result.posterior
    k = len(post.names)
    with matplotlib.rc_context({"font.size": 8}):
        fig = Figure(figsize=(2.0 * k + 1.0, 2.0 * k + 1.0))  # not pyplot: the caller's backend is left alone
        fig = corner.corner(post.samples, labels=list(post.names), quantiles=[0.16, 0.5, 0.84],
                            show_titles=True, title_fmt=".4g", color=_FIT, fig=fig)
    return write_via(p, lambda tmp: fig.savefig(tmp, dpi=100, format=p.suffix[1:]), force=force,
                     protect=protect, role="corner plot")
