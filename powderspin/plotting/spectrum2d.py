"""Contour figure of a sheared 2D (MQMAS, STMAS) spectrum, in the trade's orientation.

F2 (the central transition) runs horizontally and F1 (the sheared isotropic
dimension) vertically, ppm decreasing to the right and upwards (common
practice).  The F2 projection sits above the contours and the F1 projection to
their right.  Two kinds of guide lines are drawn: the chemical-shift (CS) axis,
the diagonal delta_F1 = delta_F2 on which a site without quadrupolar coupling
lies, and through each site's isotropic shift on that diagonal its
quadrupolar-induced-shift (QIS) axis, the direction (1, k_F1) in
(delta_F2, delta_F1) along which a growing quadrupolar coupling moves the
site's centre of gravity (k_F1 from the metadata's F1 convention).
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
from matplotlib.figure import Figure

from ..files import check_outputs, write_via

__all__ = ["plot_spectrum_2d", "save_plot_2d", "plot_fit_2d", "save_fit_report_2d"]


def _fraction(text) -> float | None:
    try:
        return float(Fraction(str(text)))
    except (ValueError, ZeroDivisionError):
        return None


def _f1_factors(spectrum) -> tuple[float, float | None]:
    """(c, k_F1): the F1 scale's factor on the isotropic scale and the F1 quadrupolar-induced-shift factor."""
    conv = spectrum.metadata.get("f1_convention") or {}
    c = _fraction(conv.get("f1_scale_factor", "1")) or 1.0
    k = _fraction(conv["f1_qis_factor"]) if "f1_qis_factor" in conv else None
    text = conv.get("f1_centre_of_gravity", "")
    if k is None and "(" in text and ")" in text and "[" not in text:
        k = _fraction(text[text.index("(") + 1:text.index(")")])
    return c, k


def _signal_range(ppm: np.ndarray, profile: np.ndarray, fraction: float) -> tuple[float, float]:
    """ppm range where the profile exceeds ``fraction`` of its maximum, with a margin of 15 % (whole axis if flat)."""
    top = float(np.max(np.abs(profile))) if profile.size else 0.0
    if top <= 0:
        return float(ppm.min()), float(ppm.max())
    idx = np.flatnonzero(np.abs(profile) > fraction * top)
    lo, hi = float(ppm[idx].min()), float(ppm[idx].max())
    m = 0.15 * max(hi - lo, 10 * abs(float(ppm[1] - ppm[0])) if ppm.size > 1 else 1.0)
    return max(lo - m, float(ppm.min())), min(hi + m, float(ppm.max()))


def plot_spectrum_2d(spectrum, fig: Figure | None = None, *, levels: int = 14, lowest: float = 0.02,
                     show_axes: bool = True, limits: str | None = "signal") -> Figure:
    """Draw contours, projections and the CS and QIS axes of a 2D spectrum.

    Parameters
    ----------
    spectrum : Spectrum2D
    fig : matplotlib.figure.Figure, optional
        The figure to draw on (a new one by default; pyplot is never used).
    levels : int, optional
        Number of contour levels, spaced geometrically.
    lowest : float, optional
        Lowest contour as a fraction of the maximum (0 < lowest < 1).
    show_axes : bool, optional
        Draw the CS (diagonal) and QIS axes.
    limits : {"signal", None}, optional
        ``"signal"``: show the region where the projections exceed ``lowest``
        times their maximum (a finite-rate F2 axis covers the whole sideband
        manifold); None: the whole axes.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    ValueError
        ``levels`` < 2 or ``lowest`` outside (0, 1).

    See Also
    --------
    save_plot_2d

    References
    ----------
    S. E. Ashbrook, S. Wimperis, Prog. Nucl. Magn. Reson. Spectrosc. 45 (2004) 53 (the CS and QIS axes of a
    sheared spectrum); J. D. Hunter, Comput. Sci. Eng. 9 (2007) 90 (matplotlib).

    Examples
    --------
    >>> from powderspin.engine.spectrum2d import Spectrum2D
    >>> f = np.linspace(-10, 10, 41)
    >>> z = np.exp(-(f[:, None] ** 2 + f[None, :] ** 2) / 8)
    >>> s = Spectrum2D(f * 100, f, f * 100, f, z, ("a",), z[None], {"nucleus": "27Al"})
    >>> fig = plot_spectrum_2d(s)
    >>> len(fig.axes)
    3
    """
    if int(levels) < 2:
        raise ValueError(f"levels = {levels!r} must be an integer >= 2")
    if not 0 < lowest < 1:
        raise ValueError(f"lowest = {lowest!r} must lie in (0, 1) (a fraction of the maximum)")
    if fig is None:
        fig = Figure(figsize=(7.0, 6.4), layout="constrained")
    gs = fig.add_gridspec(2, 2, width_ratios=(4, 1), height_ratios=(1, 4))
    ax = fig.add_subplot(gs[1, 0])
    top = fig.add_subplot(gs[0, 0], sharex=ax)
    right = fig.add_subplot(gs[1, 1], sharey=ax)
    x, y, z = spectrum.f2_ppm, spectrum.f1_ppm, spectrum.intensity
    zmax = float(z.max()) if z.size else 0.0
    if zmax > 0:
        lv = zmax * np.geomspace(lowest, 1.0, int(levels))
        ax.contour(x, y, z, levels=lv, colors="k", linewidths=0.6)
    colours = [f"C{k % 10}" for k in range(len(spectrum.site_labels))]
    top.plot(x, spectrum.f2_projection(), color="k", lw=1.0)
    right.plot(spectrum.f1_projection(), y, color="k", lw=1.0)
    if len(spectrum.site_labels) > 1:
        for k, label in enumerate(spectrum.site_labels):
            top.plot(x, spectrum.f2_projection(k), color=colours[k], lw=0.8, label=label)
            right.plot(spectrum.f1_projection(k), y, color=colours[k], lw=0.8)
        top.legend(frameon=False, fontsize=8, loc="upper left")
    if show_axes:
        lo = min(x.min(), y.min())
        hi = max(x.max(), y.max())
        c_f1, k_f1 = _f1_factors(spectrum)
        ax.plot([lo, hi], [c_f1 * lo, c_f1 * hi], color="0.4", lw=0.8, ls="--", label="CS axis")
        sites = spectrum.metadata.get("sites", {})
        if k_f1 is not None:
            first = True
            for k, label in enumerate(spectrum.site_labels):
                iso = (sites.get(label) or {}).get("shift_ppm")
                if iso is None:
                    continue
                iso = float(iso) + float(spectrum.metadata.get("shift_offset_ppm", 0.0))
                d = np.array([x.min() - iso, x.max() - iso])
                ax.plot(iso + d, c_f1 * (iso + k_f1 * d), color=colours[k], lw=0.8, ls=":",
                        label="QIS axis" if first else None)
                first = False
        ax.legend(frameon=False, fontsize=8, loc="lower right")
    if limits == "signal":
        x0, x1 = _signal_range(x, spectrum.f2_projection(), lowest)
        y0, y1 = _signal_range(y, spectrum.f1_projection(), lowest)
    elif limits is None:
        x0, x1, y0, y1 = float(x.min()), float(x.max()), float(y.min()), float(y.max())
    else:
        raise ValueError(f"limits = {limits!r} is not one of 'signal', None")
    ax.set_xlim(x1, x0)  # ppm decreasing to the right
    ax.set_ylim(y1, y0)  # and upwards
    nuc = spectrum.metadata.get("nucleus", "")
    ax.set_xlabel(f"F2 {nuc} shift / ppm".replace("  ", " "))
    scale_name = (meta_conv := spectrum.metadata.get("f1_convention") or {}).get("f1_scale", "isotropic")
    ylabel = (f"F1 {nuc} isotropic shift / ppm (sheared)" if scale_name == "isotropic" else
              f"F1 {nuc} / ppm (sheared, {scale_name} scale x {meta_conv.get('f1_scale_factor', '?')})")
    ax.set_ylabel(ylabel.replace("  ", " "))
    top.axis("off")
    right.axis("off")
    meta = spectrum.metadata
    exp = str(meta.get("experiment", ""))
    title = [f"{meta['mq_order']}QMAS" if exp == "mqmas" and meta.get("mq_order") else exp.upper()]
    if meta.get("field_tesla") is not None:
        title.append(f"{meta['field_tesla']:g} T")
    rate = meta.get("spinning_hz")
    if rate is not None:
        title.append("infinite rate" if rate == "inf" else f"{float(rate) / 1e3:g} kHz MAS")
    exc = meta.get("excitation")
    if exc is not None:
        title.append("excitation: modelled (" + str(exc.get("sequence", "pulses")) + ")" if isinstance(exc, dict)
                     else "excitation: ideal")
    top.set_title(", ".join(t for t in title if t), fontsize=10)
    return fig


def save_plot_2d(spectrum, path, *, force: bool = False, protect=(), **options):
    """Save the contour figure of a 2D spectrum (PNG, PDF or SVG by suffix); never overwrites without force.

    Parameters
    ----------
    spectrum : Spectrum2D
    path : str or pathlib.Path
    force : bool, optional
    protect : iterable of path, optional
    **options
        Passed to :func:`plot_spectrum_2d`.

    Returns
    -------
    pathlib.Path

    See Also
    --------
    plot_spectrum_2d
    """
    from pathlib import Path

    from .spectrum import PLOT_SUFFIXES

    p = Path(path)
    check_outputs([(p, "plot", PLOT_SUFFIXES)], force=force, protect=protect)
    fig = plot_spectrum_2d(spectrum, **options)
    return write_via(p, lambda tmp: fig.savefig(tmp, dpi=120, format=p.suffix[1:].lower()), force=force,
                     protect=protect, role="plot")


def plot_fit_2d(data, fitted, fig: Figure | None = None, *, levels: int = 10, lowest: float = 0.05,
                mask=None) -> Figure:
    """A 2D fit at a glance: data and fit contours side by side, the residual, and each site's F2 slice.

    Parameters
    ----------
    data : MeasuredSpectrum2D
        The measured spectrum (:func:`powderspin.io.spectra2d.read_spectrum_2d`).
    fitted : Spectrum2D
        The fitted model simulated on the data's axes (its measurement's scale applied).
    fig : matplotlib.figure.Figure, optional
    levels : int, optional
        Contour levels (geometric, from ``lowest`` to 1 of the data's maximum).
    lowest : float, optional
        Lowest contour as a fraction of the data's maximum.
    mask : array_like of bool (n1, n2), optional
        The points the fit used; when it leaves some out, their boundary is
        drawn (green, dashed) on the three contour panels, the residual's
        largest value is taken within it, and each F2 slice marks the fitted
        part of the row.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    ValueError
        Data and fit on different points, or a mask of another shape.

    Examples
    --------
    >>> from powderspin.engine.spectrum2d import Spectrum2D
    >>> from powderspin.io.spectra2d import MeasuredSpectrum2D
    >>> f1, f2 = np.linspace(0, 20, 21), np.linspace(0, 30, 31)
    >>> z = np.exp(-((f1[:, None] - 10) ** 2 + (f2[None, :] - 15) ** 2) / 8)
    >>> d = MeasuredSpectrum2D(f1, f2, z, 1e8, "x")
    >>> s = Spectrum2D(f1 * 100, f1, f2 * 100, f2, z, ("a",), z[None], {"centres_of_gravity_ppm": {"a": {"f1": 10.0}}})
    >>> len(plot_fit_2d(d, s).axes)
    4
    """
    if data.intensity.shape != fitted.intensity.shape or not (
            np.allclose(data.f1_ppm, fitted.f1_ppm) and np.allclose(data.f2_ppm, fitted.f2_ppm)):
        raise ValueError("data and fit must be on the same F1 and F2 points")
    mk = np.ones(data.intensity.shape, dtype=bool) if mask is None else np.asarray(mask, dtype=bool)
    if mk.shape != data.intensity.shape:
        raise ValueError(f"mask has shape {mk.shape}; the data have {data.intensity.shape}")
    partial = not bool(mk.all())
    if fig is None:
        fig = Figure(figsize=(10.0, 8.0), layout="constrained")
    x, y = data.f2_ppm, data.f1_ppm
    top = float(np.max(np.abs(data.intensity))) or 1.0
    lv = top * np.geomspace(lowest, 1.0, int(levels))
    axes = fig.subplots(2, 2)
    for ax, z, title in ((axes[0, 0], data.intensity, "data"), (axes[0, 1], fitted.intensity, "fit")):
        ax.contour(x, y, z, levels=lv, colors="k", linewidths=0.6)
        ax.set_title(title, fontsize=10)
    res = data.intensity - fitted.intensity
    # residual contours from three standard deviations of the residual itself (so noise alone draws little)
    big = float(np.max(np.abs(res[mk])))
    start = 3.0 * float(np.std(res[mk]))
    ax = axes[1, 0]
    if big > start > 0:
        rl = np.geomspace(start, big, int(levels))
        if np.any(res > start):
            ax.contour(x, y, res, levels=rl, colors="C3", linewidths=0.6)
        if np.any(-res > start):
            ax.contour(x, y, -res, levels=rl, colors="C0", linewidths=0.6)
    ax.set_title(f"residual, from 3 s.d. (red +, blue -); largest {100 * big / top:.2g} % of the data's maximum"
                 + (" (fitted part)" if partial else ""), fontsize=9)
    for a in (axes[0, 0], axes[0, 1], axes[1, 0]):
        if partial and mk.any():
            a.contour(x, y, mk.astype(float), levels=[0.5], colors="C2", linewidths=0.9, linestyles="--")
        a.set_xlim(x.max(), x.min())
        a.set_ylim(y.max(), y.min())
        a.set_xlabel("F2 / ppm")
        a.set_ylabel("F1 / ppm (sheared)")
    ax = axes[1, 1]
    cogs = fitted.metadata.get("centres_of_gravity_ppm", {})
    offset = 0.0
    marked = False
    for k, label in enumerate(fitted.site_labels):
        c = (cogs.get(label) or {}).get("f1")
        if c is None or not (y.min() <= c <= y.max()):
            continue
        j = int(np.argmin(np.abs(y - c)))
        d_row, f_row = data.intensity[j], fitted.intensity[j]
        ax.plot(x, d_row + offset, color="k", lw=0.8, label="data" if k == 0 else None)
        ax.plot(x, f_row + offset, color=f"C{k % 10}", lw=1.0, label=f"{label} (F1 {y[j]:.1f} ppm)")
        if partial and mk[j].any():
            ax.plot(x[mk[j]], np.full(int(mk[j].sum()), offset), "|", color="C2", ms=4,
                    label=None if marked else "fitted points")
            marked = True
        offset += 1.1 * max(float(np.max(np.abs(d_row))), float(np.max(np.abs(f_row))))
    ax.set_xlim(x.max(), x.min())
    ax.set_yticks([])
    ax.set_xlabel("F2 / ppm")
    ax.set_title("F2 slice at each site's F1 centre", fontsize=10)
    ax.legend(frameon=False, fontsize=8)
    return fig


def save_fit_report_2d(data, fitted, path, *, force: bool = False, protect=(), mask=None):
    """Save :func:`plot_fit_2d` (PNG, PDF or SVG by suffix); never overwrites without force.

    Parameters
    ----------
    data : MeasuredSpectrum2D
    fitted : Spectrum2D
    path : str or pathlib.Path
    force : bool, optional
    protect : iterable of path, optional
    mask : array_like of bool (n1, n2), optional
        The points the fit used (:func:`plot_fit_2d`).

    Returns
    -------
    pathlib.Path
    """
    from pathlib import Path

    from .spectrum import PLOT_SUFFIXES

    p = Path(path)
    check_outputs([(p, "report", PLOT_SUFFIXES)], force=force, protect=protect)
    fig = plot_fit_2d(data, fitted, mask=mask)
    return write_via(p, lambda tmp: fig.savefig(tmp, dpi=110, format=p.suffix[1:].lower()), force=force,
                     protect=protect, role="report")
