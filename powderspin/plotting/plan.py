"""The figure of a plan: each field's spectrum at its recommended rate, sidebands marked, and the ranking."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from ..files import check_outputs, output_path, write_via
from .spectrum import PLOT_SUFFIXES, plot_spectrum

__all__ = ["plot_plan", "save_plan_plot"]


def plot_plan(p, fig=None):
    """Draw the plan: each field's spectrum at its recommended rate, sidebands marked, and the precision ranking.

    Parameters
    ----------
    p : powderspin.planning.results.Plan
    fig : matplotlib.figure.Figure, optional
        Drawn into a new figure when omitted (made without pyplot, so the
        caller's backend is left alone).

    Returns
    -------
    matplotlib.figure.Figure

    See Also
    --------
    powderspin.plotting.spectrum.plot_spectrum

    Examples
    --------
    >>> import powderspin as ps
    >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
    ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
    >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
    >>> fig = plot_plan(p)
    >>> len(fig.axes)
    1
    """
    rows = len(p.fields) + (1 if p.ranking else 0)
    if fig is None:
        fig = Figure(figsize=(8.0, 2.6 * rows + 0.4), layout="constrained")
    axes = fig.subplots(rows, 1, squeeze=False)[:, 0]
    for ax, f in zip(axes, p.fields):
        if f.spectrum is None:
            ax.text(0.5, 0.5, f"{f.field_tesla:g} T: no candidate rate could be simulated", ha="center",
                    transform=ax.transAxes)
            ax.set_axis_off()
            continue
        plot_spectrum(f.spectrum, ax, mark_sidebands=True)
        if f.recommended_rate_hz is not None:
            ax.set_title(f"{f.field_tesla:g} T, {f.recommended_rate_hz / 1e3:g} kHz (recommended)", fontsize=10)
        else:
            ax.set_title(f"{f.field_tesla:g} T, {f.resolution_rate_hz / 1e3:g} kHz (fastest candidate; no rate "
                         "meets the threshold)", fontsize=10)
    if p.ranking:
        ax = axes[-1]
        top = [t for t in p.ranking if math.isfinite(t[2])][:15]
        if top:
            labels = [f"{ft:g} T, {rt / 1e3:g} kHz" for ft, rt, _, _ in top]
            vals = [c for _, _, c, _ in top]
            colours = []
            for ft, rt, _, _ in top:
                r = p.field(ft).rate(rt)
                colours.append("0.3" if r.passes(p.threshold) else "0.75")
            ys = np.arange(len(top))
            ax.barh(ys, vals, color=colours)
            ax.set_yticks(ys, labels, fontsize=7)
            ax.invert_yaxis()
            ax.set_xscale("log")
            largest = max(p.rotor_table.rotors, key=lambda r: r.sample_volume_ul)
            # two short lines: a long caption is clipped at the figure's edge
            ax.set_xlabel("score: largest standard error over its reference (lower is better)\n"
                          f"at each rotor's SNR (SNR {p.snr:g} with the {largest.name} rotor); grey: sidebands "
                          "overlap", fontsize=8.5)
            ax.set_title("precision ranking (best first)", fontsize=10)
        else:
            ax.text(0.5, 0.5, "no parameter is determined", ha="center", transform=ax.transAxes)
            ax.set_axis_off()
    return fig


def save_plan_plot(plan, path, *, force: bool = False, protect=()) -> Path:
    """Write the figure of a plan (:func:`plot_plan`) as PNG, PDF or SVG, atomically.

    Parameters
    ----------
    plan : Plan
    path : str or pathlib.Path
    force : bool, optional
    protect : iterable of path, optional

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, pathlib
    >>> import powderspin as ps
    >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
    ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
    >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
    >>> with tempfile.TemporaryDirectory() as d:
    ...     save_plan_plot(p, pathlib.Path(d) / "plan.png").stat().st_size > 0
    True
    """
    out = output_path(path, "plot")
    check_outputs([(out, "plot", PLOT_SUFFIXES)], force=force, protect=protect)
    fig = plot_plan(plan)
    return write_via(out, lambda tmp: fig.savefig(tmp, dpi=110, format=out.suffix[1:].lower()), force=force,
                     protect=protect, role="plot")
