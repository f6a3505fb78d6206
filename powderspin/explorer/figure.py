"""The explorer's curves as a matplotlib figure (for the PNG/SVG download)."""

from __future__ import annotations

from matplotlib.figure import Figure

from .palette import COMPONENT_COLOURS, DATA_COLOUR, RESIDUAL_COLOUR, SIMULATION_COLOUR

__all__ = ["curves_figure"]


def curves_figure(curves: dict, unit: str = "ppm", title: str = "") -> Figure:
    """Data, simulation, each site and the residual, ppm (or kHz) decreasing to the right.

    Parameters
    ----------
    curves : dict
        As :meth:`powderspin.explorer.state.ExplorerState.curves`.
    unit : {"ppm", "khz"}
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> import numpy as np
    >>> x = np.linspace(-10, 10, 5)
    >>> c = {"ppm": x, "khz": x, "total": x * 0, "sites": [x * 0], "labels": ["a"], "data": None, "residual": None}
    >>> len(curves_figure(c).axes)
    1
    """
    x = curves["khz"] if unit == "khz" else curves["ppm"]
    has_data = curves.get("data") is not None
    fig = Figure(figsize=(8.0, 5.0), layout="constrained")
    if has_data:
        ax, axr = fig.subplots(2, 1, sharex=True, height_ratios=(3, 1))
    else:
        ax, axr = fig.subplots(1, 1), None
    if has_data:
        ax.plot(x, curves["data"], color=DATA_COLOUR, lw=1.0, label="data")
    if len(curves["sites"]) > 1:
        for k, (lab, y) in enumerate(zip(curves["labels"], curves["sites"])):
            ax.plot(x, y, color=COMPONENT_COLOURS[k % len(COMPONENT_COLOURS)], lw=1.0, ls="--", label=lab)
    ax.plot(x, curves["total"], color=SIMULATION_COLOUR, lw=1.4, label="simulation")
    ax.legend(frameon=False, fontsize="small")
    ax.set_ylabel("intensity")
    if title:
        ax.set_title(title)
    last = ax
    if axr is not None:
        axr.plot(x, curves["residual"], color=RESIDUAL_COLOUR, lw=0.8)
        axr.axhline(0.0, color="0.6", lw=0.5)
        axr.set_ylabel("residual")
        last = axr
    last.set_xlabel("frequency offset / kHz" if unit == "khz" else "shift / ppm")
    last.set_xlim(max(x), min(x))
    return fig
