"""Figures of spectra: shift decreasing from left to right (the trade's convention).

Axis units: ppm (default) or kHz (offsets from the reference frequency; wide
2H and satellite patterns are read in kHz).  Sideband marks sit at each site's
centre band plus n times the spinning rate, in that site's colour, thinned
when a manifold has many bands.  A vertical zoom (a second, scaled copy of the
sum) shows weak features such as satellite manifolds next to a strong central
transition.
"""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from ..files import check_outputs, output_path, write_via

__all__ = ["plot_spectrum", "save_plot", "PLOT_SUFFIXES"]

#: figure formats that :func:`save_plot` writes
PLOT_SUFFIXES = (".png", ".pdf", ".svg")
#: most sideband marks drawn per site (others are thinned out)
_MAX_MARKS = 60


def _x(spectrum, unit: str):
    if unit == "ppm":
        return spectrum.ppm
    if unit == "khz":
        return spectrum.hz / 1e3
    raise ValueError(f"unit = {unit!r} is not one of 'ppm', 'khz'")


def plot_spectrum(spectrum, ax=None, *, show_sites: bool = True, mark_sidebands: bool = True, unit: str = "ppm",
                  limits=None, vertical_zoom: float | None = None):
    """Draw a spectrum: the sum and one line per site, shift axis reversed.

    Parameters
    ----------
    spectrum : Spectrum
    ax : matplotlib Axes, optional
        Drawn into a new figure when omitted.
    show_sites : bool
        Draw each site (dashed) as well as the sum (when there is more than one site).
    mark_sidebands : bool
        Mark spinning-sideband positions (ticks under the baseline, at each
        site's centre band + n x rate, in the site's colour).
    unit : {"ppm", "khz"}
        Axis unit: shift in ppm, or offset from nu_ref in kHz.
    limits : (float, float), optional
        Axis range in ``unit`` (either order; drawn decreasing to the right).
    vertical_zoom : float, optional
        Also draw the sum multiplied by this factor (> 1), to show weak
        features such as satellite manifolds.

    Returns
    -------
    matplotlib Axes

    See Also
    --------
    save_plot

    References
    ----------
    R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (shift scale, increasing
    to the left).

    Examples
    --------
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> from powderspin.model.modelfile import make_model
    >>> from powderspin.simulator import simulate
    >>> spec = simulate(make_model("31P", {"field_tesla": 9.4, "points": 256},
    ...                            [{"span_ppm": 100.0, "skew": 0.3}]))
    >>> ax = plot_spectrum(spec, unit="khz")
    >>> bool(ax.get_xlim()[0] > ax.get_xlim()[1]), ax.get_xlabel()
    (True, 'offset from 31P reference / kHz')
    """
    import matplotlib.pyplot as plt

    if ax is None:
        _, ax = plt.subplots(figsize=(7.5, 4.2), layout="constrained")
    x = _x(spectrum, unit)
    n_sites = len(spectrum.site_labels)
    colours = plt.rcParams["axes.prop_cycle"].by_key().get("color", ["C0", "C1", "C2", "C3"])
    site_colour = {label: colours[i % len(colours)] for i, label in enumerate(spectrum.site_labels)}
    ax.plot(x, spectrum.intensity, lw=1.3, color="black", label="sum" if n_sites > 1 else spectrum.site_labels[0])
    top = float(np.max(spectrum.intensity)) if spectrum.intensity.size else 1.0
    if vertical_zoom is not None:
        if not vertical_zoom > 1:
            raise ValueError(f"vertical_zoom = {vertical_zoom!r} must be > 1")
        ax.plot(x, spectrum.intensity * vertical_zoom, lw=0.8, color="0.55", label=f"sum x {vertical_zoom:g}")
        ax.set_ylim(-0.08 * top, 1.1 * top)
    if show_sites and n_sites > 1:
        for label, y in zip(spectrum.site_labels, spectrum.site_intensities):
            ax.plot(x, y, lw=1.0, ls="--", color=site_colour[label], label=label)
    if mark_sidebands and spectrum.sidebands:
        rows = spectrum.sideband_rows_with_nominal()
        nu_ref = spectrum.nu_ref_hz
        for k, label in enumerate(spectrum.site_labels):
            mine = [(r, h) for r, h in rows if r.site == label and r.order != 0]
            if not mine:
                continue
            weight = sum(r.intensity for r, _ in rows if r.site == label) or 1.0
            mine = [(r, h) for r, h in mine if r.intensity > 1e-3 * weight]
            step = max(1, int(np.ceil(len(mine) / _MAX_MARKS)))
            mine = [(r, h) for r, h in mine if r.order % step == 0]
            if not mine:
                continue
            hz = np.array([h for _, h in mine])
            xs = hz / 1e3 if unit == "khz" else hz / nu_ref * 1e6
            y0 = -(0.035 + 0.03 * k) * top
            thin = f", one in {step}" if step > 1 else ""
            ax.plot(xs, np.full(xs.size, y0), "|", color=site_colour[label], ms=6,
                    label=f"{label} sidebands{thin}")
    lo, hi = (float(np.min(x)), float(np.max(x))) if limits is None else (min(limits), max(limits))
    ax.set_xlim(hi, lo)
    nuc = spectrum.metadata.get("nucleus", "")
    if unit == "ppm":
        ax.set_xlabel(f"{nuc} shift / ppm" if nuc else "shift / ppm")
        ax.set_ylabel("intensity / ppm$^{-1}$")
    else:
        ax.set_xlabel(f"offset from {nuc} reference / kHz" if nuc else "offset / kHz")
        ax.set_ylabel("intensity / ppm$^{-1}$")
    field = spectrum.metadata.get("field_tesla")
    rate = spectrum.metadata.get("spinning_hz")
    title = []
    if field is not None:
        title.append(f"{field:g} T")
    if rate is not None:
        title.append("static" if rate == 0 else
                     ("infinite rate" if rate == "inf" else f"{float(rate) / 1e3:g} kHz spinning"))
    if title:
        ax.set_title(", ".join(title), fontsize=10)
    ax.legend(frameon=False, fontsize=8)
    return ax


def save_plot(spectrum, path, *, force: bool = False, protect=(), **options):
    """Save a figure of the spectrum (PNG, PDF or SVG by suffix); never overwrites without force.

    The figure is drawn by :func:`plot_spectrum`, written to a temporary file
    in the same folder and moved into place.

    Parameters
    ----------
    spectrum : Spectrum
        The spectrum to draw.
    path : str or pathlib.Path
        Output file ending in ``.png``, ``.pdf`` or ``.svg``.
    force : bool, optional
        Overwrite an existing file.
    protect : iterable of path, optional
        Input files never to overwrite.
    **options
        Passed to :func:`plot_spectrum` (``unit``, ``limits``, ``vertical_zoom``, ...).

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    powderspin.files.OutputExistsError
        If ``path`` exists and ``force`` is False.
    powderspin.files.OutputPathError
        For another suffix or an unwritable place.

    See Also
    --------
    plot_spectrum

    References
    ----------
    J. D. Hunter, Comput. Sci. Eng. 9 (2007) 90 (matplotlib).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from powderspin.engine.spectrum import Spectrum
    >>> spec = Spectrum(hz=[-100.0, 0.0, 100.0], ppm=[-1.0, 0.0, 1.0], intensity=[0.0, 1.0, 0.0],
    ...                 site_labels=("a",), site_intensities=[[0.0, 1.0, 0.0]])
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = save_plot(spec, pathlib.Path(d) / "spec.png")
    ...     p.stat().st_size > 0
    True
    """
    p = output_path(path, "plot")
    check_outputs([(p, "plot", PLOT_SUFFIXES)], force=force, protect=protect)
    fig = Figure(figsize=(7.5, 4.2), layout="constrained")  # not pyplot: the caller's backend is left alone
    plot_spectrum(spectrum, fig.add_subplot(), **options)
    return write_via(p, lambda tmp: fig.savefig(tmp, dpi=120, format=p.suffix[1:].lower()), force=force,
                     protect=protect, role="plot")
