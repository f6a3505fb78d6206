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

import math
from pathlib import Path

import numpy as np

from ..files import check_outputs, output_path, write_via
from ..fitting.result import format_value

__all__ = ["report_figure", "save_report", "save_corner", "REPORT_SUFFIXES", "REPORT_UNITS", "parameter_label",
           "value_with_error", "quoted_quantities", "report_lines"]

#: x-axis units of the report: the shift in ppm, or the offset from the reference frequency in kHz
REPORT_UNITS = ("ppm", "khz")

#: how the report names each key: (words, symbol); the unit comes from the key table (schema)
_KEY_WORDS = {
    "shift_ppm": "isotropic shift d_iso", "cq_mhz": "C_Q", "eta_q": "eta_Q", "span_ppm": "span",
    "skew": "skew", "aniso_ppm": "anisotropy d_aniso", "eta_cs": "eta_CS", "weight": "fraction",
    "lorentz_hz": "Lorentzian FWHM", "gauss_hz": "Gaussian FWHM", "euler_deg": "Euler angle",
    "shift_offset_ppm": "shift offset", "shift_fwhm_ppm": "shift distribution FWHM",
    "czjzek_sigma_mhz": "Czjzek sigma", "principal_ppm": "principal shift",
}
_EULER = ("alpha", "beta", "gamma")

#: figure formats the report and corner plot can be written in
REPORT_SUFFIXES = (".png", ".pdf", ".svg")

_DATA = "0.55"
_FIT = "#1f2f5c"
_RESID = "#7a3b2e"


def report_figure(result, unit: str = "ppm"):
    """The report figure of a fit (matplotlib Figure).

    Parameters
    ----------
    result : powderspin.fitting.fitter.FitResult
    unit : {"ppm", "khz"}, optional
        The x axis: the shift in ppm (default) or the offset from the
        reference frequency in kHz.

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

    if unit not in REPORT_UNITS:
        raise ValueError(f"unit = {unit!r} must be one of {', '.join(REPORT_UNITS)}")
    n = len(result.spectra)
    table = report_lines(result)
    height = max(3.4 * n + 0.9, 0.13 * len(table) + 0.8)
    fig = Figure(figsize=(11.0, height))
    # margins in inches, so that the title and the axis label are never clipped, whatever the number of panels
    gs = fig.add_gridspec(n, 2, width_ratios=(3.0, 1.35), left=1.0 / 11.0, right=0.99, top=1.0 - 0.45 / height,
                          bottom=0.6 / height, wspace=0.1, hspace=0.75 / 3.4)
    colours = matplotlib.colormaps["Dark2"].colors
    for j, spec in enumerate(result.spectra):
        inner = gs[j, 0].subgridspec(2, 1, height_ratios=(3, 1), hspace=0.06)
        ax = fig.add_subplot(inner[0])
        axr = fig.add_subplot(inner[1], sharex=ax)
        ppm = spec.ppm if unit == "ppm" else np.asarray(spec.hz) / 1e3
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
        axr.set_xlabel(f"{result.model.nucleus.name} shift (ppm)" if unit == "ppm" else
                       f"{result.model.nucleus.name} offset from {spec.nu_ref_hz / 1e6:.6g} MHz (kHz)")
        ax.tick_params(labelbottom=False)
        ax.set_xlim(ppm.max(), ppm.min())
        ax.legend(fontsize=8, frameon=False, loc="upper right")
    tab = fig.add_subplot(gs[:, 1])
    tab.set_navigate(False)
    tab.axis("off")
    tab.text(0.0, 1.0, "\n".join(table), va="top", ha="left", family="monospace", fontsize=7.5,
             transform=tab.transAxes)
    return fig


def _shade_outside(ax, ppm, mk):
    edges = np.flatnonzero(np.diff(mk.astype(int)))
    bounds = [0] + list(edges + 1) + [mk.size]
    for a, b in zip(bounds[:-1], bounds[1:]):
        if not mk[a]:
            ax.axvspan(ppm[a], ppm[b - 1], color="0.93", lw=0)


def parameter_label(name: str, model) -> str:
    """A fitted parameter's name in words, with its unit: ``"AlO4: C_Q (MHz)"``, ``"spectrum 1: Gaussian FWHM (Hz)"``.

    Parameters
    ----------
    name : str
        As fit results spell it (``"AlO4.cq_mhz"``, ``"measurement 1.gauss_hz"``, ``"A.euler_deg[1]"``).
    model : Model

    Returns
    -------
    str

    Examples
    --------
    >>> import powderspin as ps
    >>> m = ps.make_model("27Al", {"field_tesla": 9.4}, [{"label": "AlO4", "cq_mhz": 3.0}])
    >>> parameter_label("AlO4.cq_mhz", m), parameter_label("measurement 1.gauss_hz", m)
    ('AlO4: C_Q (MHz)', 'spectrum: Gaussian FWHM (Hz)')
    """
    from ..model.schema import key_spec

    owner, _, key = name.rpartition(".")
    item = None
    if key.endswith("]") and "[" in key:
        key, _, idx = key[:-1].partition("[")
        item = int(idx)
    table = "measurement" if owner.startswith("measurement ") else "site"
    if table == "measurement":
        owner = "spectrum" if len(model.measurements) == 1 else f"spectrum {owner.split()[-1]}"
    words = _KEY_WORDS.get(key, key)
    if key == "euler_deg" and item is not None:
        words = f"Euler {_EULER[item]}"
    elif key == "principal_ppm" and item is not None:
        words = f"d{item + 1}{item + 1}"
    try:
        u = key_spec(table, key).unit
    except (KeyError, ValueError):
        u = ""
    return f"{owner}: {words}" + (f" ({_unit_text(u)})" if u else "")


def _unit_text(u: str) -> str:
    return {"deg": "degrees"}.get(u, u)


def value_with_error(v: float, e: float) -> str:
    """A value and its standard error with the sign ±, to the digits the error supports.

    Examples
    --------
    >>> value_with_error(3.14159, 0.0123)
    '3.142 ± 0.012'
    """
    return format_value(v, e).replace(" +- ", " ± ")


def quoted_quantities(result) -> list[tuple[str, float, float, str]]:
    """What spectroscopists quote beside the fitted parameters: P_Q, the quadrupolar-induced shift, d11/d22/d33.

    For each site with a quadrupolar coupling: P_Q = C_Q (1 + eta_Q^2/3)^(1/2) and, for a half-integer
    spin, the quadrupolar-induced shift of the central transition's centre of gravity,
    d_QIS = -(3/40) (C_Q / nu0)^2 [I(I+1) - 3/4] / [I^2 (2I-1)^2] (1 + eta_Q^2/3) x 1e6 ppm
    (A. Samoson, Chem. Phys. Lett. 119 (1985) 29; from memory) at each measurement's field; for each site
    with an anisotropic shift, the principal components d11 >= d22 >= d33 (IUPAC order; J. Mason, Solid
    State Nucl. Magn. Reson. 2 (1993) 285).  Standard errors come from the covariance of the free
    parameters (first-order propagation; 0 where every input was fixed, NaN where an input is undetermined).

    Returns
    -------
    list of (label, value, stderr, unit)
    """
    model = result.model
    names = list(result.names)
    cov = np.asarray(result.covariance, dtype=float)
    out = []

    def error_of(func, inputs):
        """First-order error of func(values of inputs) from the covariance of the free ones."""
        base = {k: v for k, v in inputs.items()}
        free = [k for k in base if k in names]
        if not free:
            return 0.0
        idx = [names.index(k) for k in free]
        grad = []
        for k in free:
            h = 1e-6 * max(abs(base[k]), 1e-3)
            up = dict(base, **{k: base[k] + h})
            dn = dict(base, **{k: base[k] - h})
            grad.append((func(up) - func(dn)) / (2 * h))
        g = np.array(grad)
        c = cov[np.ix_(idx, idx)]
        var = float(g @ c @ g)
        return math.sqrt(var) if math.isfinite(var) and var >= 0 else math.nan

    spin = float(model.nucleus.spin)
    for i, site in enumerate(model.sites):
        label = site.label
        cq_name, eta_name = f"{label}.cq_mhz", f"{label}.eta_q"
        if site.cq_mhz != 0.0 and spin > 0.5:
            inputs = {cq_name: site.cq_mhz, eta_name: site.eta_q}

            def pq(v, a=cq_name, b=eta_name):
                return abs(v[a]) * math.sqrt(1.0 + v[b] ** 2 / 3.0)

            out.append((f"{label}: P_Q", pq(inputs), error_of(pq, inputs), "MHz"))
            if (2 * spin) % 2 == 1:
                for j, meas in enumerate(model.measurements):
                    nu0 = model.nucleus.larmor_hz(meas.field_tesla)

                    def qis(v, a=cq_name, b=eta_name, nu0=nu0):
                        factor = (spin * (spin + 1) - 0.75) / (spin ** 2 * (2 * spin - 1) ** 2)
                        return -3.0 / 40.0 * (v[a] * 1e6 / nu0) ** 2 * factor * (1 + v[b] ** 2 / 3.0) * 1e6

                    where = "" if len(model.measurements) == 1 else f" at {meas.field_tesla:g} T"
                    out.append((f"{label}: QIS of the CT{where}", qis(inputs), error_of(qis, inputs), "ppm"))
        if site.shift.span_ppm != 0.0:
            for k, d in enumerate(site.shift.principal_iupac):
                out.append((f"{label}: d{k + 1}{k + 1}", d, math.nan, "ppm"))
    return out


def report_lines(result) -> list[str]:
    """The text column of the report: fitted values with units and errors, the quantities people quote, the fit.

    Parameters
    ----------
    result : FitResult

    Returns
    -------
    list of str
    """
    lines = ["fitted values (± 1 standard error)", ""]
    for name in result.names:
        lines.append(parameter_label(name, result.model))
        lines.append("   " + value_with_error(result.values[name], result.stderr[name]))
        if result.posterior is not None:
            lo, hi = result.posterior.interval(name)
            lines.append(f"   16-84 % interval: {lo:.5g} to {hi:.5g}")
    for name, (v, e) in result.derived.items():
        lines.append(f"{name} (derived)")
        lines.append("   " + value_with_error(v, e))
    quoted = quoted_quantities(result)
    if quoted:
        lines += ["", "quantities usually quoted"]
        for label, v, e, u in quoted:
            text = value_with_error(v, e) if math.isfinite(e) and e > 0 else f"{v:.5g}"
            lines += [label, f"   {text} {u}"]  # the value under its label, as above: the panel stays narrow
    lines.append("")
    lines.append(f"reduced chi-square {result.reduced_chi_square:.4g}")
    lines.append(f"noise from the {result.noise_source}")
    lines.append(f"{result.evaluations} evaluations, {result.time_s:.1f} s")
    if result.starts > 1:
        lines.append(f"{result.starts_at_best} of {result.starts} starts at the best")
    if result.warnings:
        lines.append(f"{len(result.warnings)} warning(s): see the result file")
    return lines


def save_report(result, path, *, force: bool = False, protect=(), unit: str = "ppm") -> Path:
    """Write the report figure of a fit (PNG, PDF or SVG) atomically.

    Parameters
    ----------
    result : powderspin.fitting.fitter.FitResult
    path : str or pathlib.Path
        ``.png``, ``.pdf`` or ``.svg``.
    unit : {"ppm", "khz"}, optional
        The x axis (see :func:`report_figure`).
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
    fig = report_figure(result, unit)
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
