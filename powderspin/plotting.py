"""Figures of spectra: ppm decreasing from left to right (the trade's convention)."""

from __future__ import annotations

import numpy as np

__all__ = ["plot_spectrum", "save_plot"]


def plot_spectrum(spectrum, ax=None, *, show_sites: bool = True, mark_sidebands: bool = True):
    """Draw a spectrum: one line per site plus the sum, ppm axis reversed.

    Parameters
    ----------
    spectrum : Spectrum
    ax : matplotlib Axes, optional
        Drawn into a new figure when omitted.
    show_sites : bool
        Draw each site (dashed) as well as the sum (when there is more than one site).
    mark_sidebands : bool
        Mark spinning-sideband positions (small ticks under the baseline).

    Returns
    -------
    matplotlib Axes

    References
    ----------
    R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (shift scale, increasing
    to the left).

    Examples
    --------
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> from powderspin.model import parse_model
    >>> from powderspin.simulation import simulate
    >>> spec = simulate(parse_model({"nucleus": "31P", "measurement": {"points": 256},
    ...                              "site": [{"span_ppm": 100.0, "skew": 0.3}]}))
    >>> ax = plot_spectrum(spec)
    >>> bool(ax.get_xlim()[0] > ax.get_xlim()[1])
    True
    """
    import matplotlib.pyplot as plt

    if ax is None:
        _, ax = plt.subplots(figsize=(7.0, 4.0), layout="constrained")
    ppm = spectrum.ppm
    n_sites = len(spectrum.site_labels)
    ax.plot(ppm, spectrum.intensity, lw=1.3, color="black",
            label="sum" if n_sites > 1 else spectrum.site_labels[0])
    if show_sites and n_sites > 1:
        for label, y in zip(spectrum.site_labels, spectrum.site_intensities):
            ax.plot(ppm, y, lw=1.0, ls="--", label=label)
    if mark_sidebands and spectrum.sidebands:
        top = float(np.max(spectrum.intensity)) if spectrum.intensity.size else 1.0
        marks = [r.offset_ppm for r in spectrum.sidebands if r.index != 0]
        if marks:
            ax.plot(marks, np.full(len(marks), -0.04 * top), "|", color="0.35", ms=6,
                    label="sidebands")
    ax.set_xlim(ppm.max(), ppm.min())
    nuc = spectrum.metadata.get("nucleus", "")
    ax.set_xlabel(f"{nuc} shift / ppm" if nuc else "shift / ppm")
    ax.set_ylabel("intensity / ppm$^{-1}$")
    field = spectrum.metadata.get("field_tesla")
    rate = spectrum.metadata.get("spinning_hz")
    title = []
    if field is not None:
        title.append(f"{field:g} T")
    if rate is not None:
        title.append("static" if rate == 0 else ("infinite rate" if rate == "inf" else f"{float(rate) / 1e3:g} kHz spinning"))
    if title:
        ax.set_title(", ".join(title), fontsize=10)
    ax.legend(frameon=False, fontsize=8)
    return ax


def save_plot(spectrum, path, *, force: bool = False):
    """Save a PNG (or any matplotlib format) of the spectrum; never overwrites without force.

    The figure is drawn by :func:`plot_spectrum` (ppm decreasing to the
    right), written to a temporary file in the same folder and moved into
    place.

    Parameters
    ----------
    spectrum : Spectrum
        The spectrum to draw (ppm axis, intensities as densities per ppm).
    path : str or pathlib.Path
        Output file; the suffix picks the format (``.png`` when none).
    force : bool, optional
        Overwrite an existing file.

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    powderspin.spectrum.OutputExistsError
        If ``path`` exists and ``force`` is False.

    References
    ----------
    J. D. Hunter, Comput. Sci. Eng. 9 (2007) 90 (matplotlib); R. K. Harris
    et al., Pure Appl. Chem. 73 (2001) 1795 (shift scale, increasing to the
    left).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from powderspin.spectrum import Spectrum
    >>> spec = Spectrum(hz=[-100.0, 0.0, 100.0], ppm=[-1.0, 0.0, 1.0], intensity=[0.0, 1.0, 0.0],
    ...                 site_labels=("a",), site_intensities=[[0.0, 1.0, 0.0]])
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = save_plot(spec, pathlib.Path(d) / "spec.png")
    ...     p.stat().st_size > 0
    True
    """
    import os
    import tempfile
    from pathlib import Path

    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    from .spectrum import OutputExistsError

    p = Path(path)
    if p.exists() and not force:
        raise OutputExistsError(f"output {str(p)!r} exists; pass --force (force=True) to overwrite it")
    fig, ax = plt.subplots(figsize=(7.0, 4.0), layout="constrained")
    plot_spectrum(spectrum, ax)
    fd, tmp = tempfile.mkstemp(prefix=".", suffix=p.suffix or ".png", dir=str(p.parent or "."))
    os.close(fd)
    try:
        fig.savefig(tmp, dpi=120, format=(p.suffix[1:] or "png"))
        os.replace(tmp, p)
    finally:
        plt.close(fig)
        if os.path.exists(tmp):
            os.unlink(tmp)
    return p
