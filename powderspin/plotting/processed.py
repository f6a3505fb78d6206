"""The figure of a processed spectrum: the spectrum (ppm decreasing to the right) with the signal-free regions."""

from __future__ import annotations

import json

import numpy as np
from matplotlib.figure import Figure

from ..files import write_via
from .spectrum import PLOT_SUFFIXES

__all__ = ["plot_processed", "save_processed_plot"]


def plot_processed(spectrum, ax=None):
    """Draw a processed (or any measured) spectrum; shade the signal-free regions the baseline step found.

    Parameters
    ----------
    spectrum : MeasuredSpectrum
    ax : matplotlib Axes, optional
        Drawn into a new figure when omitted.

    Returns
    -------
    matplotlib.axes.Axes

    Examples
    --------
    >>> import numpy as np
    >>> from powderspin.io.spectra import MeasuredSpectrum
    >>> hz = np.linspace(-5e3, 5e3, 256)
    >>> spec = MeasuredSpectrum(hz, hz / 100.0, np.exp(-(hz / 500.0) ** 2), None, 1e8, "example")
    >>> plot_processed(spec).get_xlabel()
    'shift (ppm)'
    """
    if ax is None:
        ax = Figure(figsize=(7.5, 4.2), layout="constrained").add_subplot()
    ppm = np.asarray(spectrum.ppm)
    ax.plot(ppm, spectrum.intensity, color="#1b4f72", lw=1.0, label="real part")
    text = spectrum.metadata.get("processing")
    rec = json.loads(text) if text else {}
    regions = rec.get("baseline", {}).get("regions_ppm", [])
    for k, (hi, lo) in enumerate(regions):
        ax.axvspan(lo, hi, color="#d5e8d4", alpha=0.6, lw=0, label="signal-free (baseline)" if k == 0 else None)
    ax.set_xlim(ppm.max(), ppm.min())
    ax.set_xlabel("shift (ppm)")
    ax.set_ylabel("intensity")
    title = spectrum.nucleus or ""
    phase = rec.get("phase", {})
    if "phase0_deg" in phase:
        title += f"   phase {phase['phase0_deg']:.1f} deg, {phase['phase1_deg']:.1f} deg across the window"
    ax.set_title(title.strip(), fontsize=10)
    if regions:
        ax.legend(loc="upper right", fontsize=8, frameon=False)
    return ax


def save_processed_plot(spectrum, path, *, force: bool = False, protect=()):
    """Save :func:`plot_processed` as PNG, PDF or SVG (by suffix), atomically; never overwrites without force.

    Parameters
    ----------
    spectrum : MeasuredSpectrum
    path : str or pathlib.Path
    force : bool, optional
    protect : iterable of path, optional

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, pathlib
    >>> import numpy as np
    >>> from powderspin.io.spectra import MeasuredSpectrum
    >>> hz = np.linspace(-5e3, 5e3, 256)
    >>> spec = MeasuredSpectrum(hz, hz / 100.0, np.exp(-(hz / 500.0) ** 2), None, 1e8, "example")
    >>> with tempfile.TemporaryDirectory() as d:
    ...     save_processed_plot(spec, pathlib.Path(d) / "p.png").stat().st_size > 0
    True
    """
    from pathlib import Path

    from ..files import check_outputs

    p = Path(path)
    check_outputs([(p, "plot", PLOT_SUFFIXES)], force=force, protect=protect)
    fig = Figure(figsize=(7.5, 4.2), layout="constrained")
    plot_processed(spectrum, fig.add_subplot())
    return write_via(p, lambda tmp: fig.savefig(tmp, dpi=120, format=p.suffix[1:].lower()), force=force,
                     protect=protect, role="plot")
