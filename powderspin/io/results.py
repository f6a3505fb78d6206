"""Writers of results: simulated spectra, fit result files (a model file plus CSV), plans, and their texts.

- A simulated spectrum (:func:`write_spectrum`) is written by the suffix of
  the output: ``.csv``/``.txt`` text (metadata lines, then one row per
  point), ``.jdx``/``.dx`` JCAMP-DX 5.01, ``.npz`` NumPy arrays with the
  metadata as JSON, ``.npy`` a (2 + n_sites) x points array; ``-`` is CSV on
  standard output.

A fit's result file is a model file (TOML) with the fitted values, standard
errors in ``[site.stderr]`` / ``[measurement.stderr]`` and the fit's statistics
in ``[fit.result]`` (:meth:`powderspin.fitting.result.FitResult.to_dict`);
simulating it gives the fitted curves.  Beside it, one CSV per measurement
holds the data, the fit, each site's component, the baseline and the
residual on the data axis.  A fit with a 2D (MQMAS/STMAS) measurement
(:func:`write_result_2d`) writes the same pair; its 2D CSV is long-form, one
row per point: ``f1_ppm,f2_ppm,data,fit,<sites>,residual,in_fit``.  Every file is checked before anything is written
and written atomically (:mod:`powderspin.files`).
"""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import numpy as np

from ..engine.lineshape import baseline_values, make_axis
from ..engine.spectrum2d import Spectrum2D
from ..files import (
    STDOUT,
    OutputPathError,
    check_outputs,
    output_path,
    write_text_atomic,
    write_texts_together,
    write_via,
)
from .spectra import MeasuredSpectrum, write_jcamp
from .spectra2d import write_spectrum_2d

__all__ = ["spectrum_csv_text", "sideband_csv_text", "write_spectrum", "SPECTRUM_SUFFIXES", "plan_json_text",
           "write_plan_json", "spectrum_format", "result_to_toml", "fit_csv_text", "csv_paths", "write_result",
           "fit_2d_csv_text", "write_result_2d"]

#: what :func:`write_spectrum` writes, by suffix
SPECTRUM_SUFFIXES = {".csv": "CSV text", ".txt": "CSV text", ".jdx": "JCAMP-DX", ".dx": "JCAMP-DX",
                     ".npz": "NumPy arrays", ".npy": "NumPy array"}


def spectrum_csv_text(spectrum) -> str:
    """The spectrum as CSV text: metadata lines, then ``ppm,hz,intensity`` and one column per site.

    Parameters
    ----------
    spectrum : Spectrum

    Returns
    -------
    str
        ``# key: value`` metadata lines (dicts and lists as JSON), the
        header and one row per point in ascending hz (ppm, Hz, the sum and
        each site as densities per ppm).  Site columns are named by label
        (quoted where CSV needs it).

    References
    ----------
    Y. Shafranovich, RFC 4180 (2005), "Common Format and MIME Type for
    Comma-Separated Values (CSV) Files" (from memory).

    Examples
    --------
    >>> from powderspin.engine.spectrum import Spectrum
    >>> spec = Spectrum(hz=[-100.0, 0.0, 100.0], ppm=[-1.0, 0.0, 1.0], intensity=[0.0, 1.0, 0.0],
    ...                 site_labels=("a",), site_intensities=[[0.0, 1.0, 0.0]],
    ...                 metadata={"nucleus": "31P", "nu_ref_hz": 100e6})
    >>> print(spectrum_csv_text(spec), end="")
    # nucleus: 31P
    # nu_ref_hz: 100000000.0
    ppm,hz,intensity,a
    -1,-100,0,0
    0,0,1,1
    1,100,0,0
    """
    lines = []
    for k, v in spectrum.metadata.items():
        if isinstance(v, (dict, list, tuple)):
            v = json.dumps(v)
        lines.append(f"# {k}: {v}")
    head = io.StringIO()
    csv.writer(head, lineterminator="").writerow(["ppm", "hz", "intensity", *spectrum.site_labels])
    lines.append(head.getvalue())
    cols = [spectrum.ppm, spectrum.hz, spectrum.intensity, *spectrum.site_intensities]
    fmts = ["{:.10g}", "{:.12g}"] + ["{:.10g}"] * (len(cols) - 2)
    for row in zip(*cols):
        lines.append(",".join(f.format(x) for f, x in zip(fmts, row)))
    return "\n".join(lines) + "\n"


def sideband_csv_text(spectrum) -> str:
    """The sideband table as CSV: ``site,order,position_hz,position_ppm,nominal_hz,intensity``.

    Parameters
    ----------
    spectrum : Spectrum

    Returns
    -------
    str
        ``nominal_hz`` is the site's centre band plus n times the spinning
        rate; ``intensity`` is integrated (a site's bands sum to its weight).

    Examples
    --------
    >>> from powderspin.engine.spectrum import SidebandRow, Spectrum
    >>> spec = Spectrum(hz=[0.0, 1.0], ppm=[0.0, 0.01], intensity=[1.0, 0.0], site_labels=("a",),
    ...                 site_intensities=[[1.0, 0.0]], metadata={"spinning_hz": 1000.0, "nu_ref_hz": 1e8},
    ...                 sidebands=(SidebandRow("a", 0, 10.0, 0.1, 0.9),))
    >>> print(sideband_csv_text(spec), end="")
    # spinning_hz: 1000.0
    site,order,position_hz,position_ppm,nominal_hz,intensity
    a,0,10,0.1,10,0.9
    """
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    buf.write(f"# spinning_hz: {spectrum.metadata.get('spinning_hz', '')}\n")
    w.writerow(["site", "order", "position_hz", "position_ppm", "nominal_hz", "intensity"])
    for r, nominal in spectrum.sideband_rows_with_nominal():
        w.writerow([r.site, r.order, f"{r.position_hz:.10g}", f"{r.position_ppm:.10g}", f"{nominal:.10g}",
                    f"{r.intensity:.8g}"])
    return buf.getvalue()


def spectrum_format(path) -> str:
    """The format :func:`write_spectrum` writes to ``path``, by its suffix (``"-"``: CSV).

    Parameters
    ----------
    path : str or pathlib.Path

    Returns
    -------
    str
        The suffix (lower case): one of :data:`SPECTRUM_SUFFIXES`.

    Raises
    ------
    powderspin.files.OutputPathError
        Any other suffix; the message lists the allowed ones.

    Examples
    --------
    >>> spectrum_format("out.JDX"), spectrum_format("-")
    ('.jdx', '.csv')
    """
    if str(path) == STDOUT:
        return ".csv"
    suffix = output_path(path).suffix.lower()
    if suffix not in SPECTRUM_SUFFIXES:
        allowed = ", ".join(SPECTRUM_SUFFIXES)
        raise OutputPathError(f"output {str(path)!r}: the suffix {suffix or '(none)'!r} names no format "
                              f"powderspin writes; allowed: {allowed}")
    return suffix


def write_spectrum(spectrum, path, *, force: bool = False, protect=()) -> Path | None:
    """Write a simulated spectrum in the format its suffix names, atomically; never overwrites without ``force``.

    Parameters
    ----------
    spectrum : Spectrum or Spectrum2D
        A :class:`~powderspin.engine.spectrum2d.Spectrum2D` is written by
        :func:`powderspin.io.spectra2d.write_spectrum_2d` (``.npz`` or a text matrix).
    path : str or pathlib.Path
        ``.csv``/``.txt`` (text, see :func:`spectrum_csv_text`), ``.jdx``/``.dx``
        (JCAMP-DX 5.01, the sum only), ``.npz`` (arrays ``ppm``, ``hz``,
        ``intensity``, ``site_intensities``, ``site_labels`` and ``metadata``
        as JSON text), ``.npy`` (rows ppm, hz, the sum and each site); ``"-"``
        writes CSV to standard output.
    force : bool, optional
        Overwrite an existing file.
    protect : iterable of path, optional
        Input files never to overwrite.

    Returns
    -------
    pathlib.Path or None
        The file written (None for standard output).

    Raises
    ------
    powderspin.files.OutputExistsError
        If ``path`` exists and ``force`` is False.
    powderspin.files.OutputPathError
        For a suffix not listed above (the message lists them).

    See Also
    --------
    powderspin.io.spectra.read_spectrum : reads every one of these back.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from powderspin.engine.spectrum import Spectrum
    >>> spec = Spectrum(hz=[-100.0, 0.0, 100.0], ppm=[-1.0, 0.0, 1.0], intensity=[0.0, 1.0, 0.0],
    ...                 site_labels=("a",), site_intensities=[[0.0, 1.0, 0.0]],
    ...                 metadata={"nucleus": "31P", "nu_ref_hz": 100e6})
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_spectrum(spec, pathlib.Path(d) / "out.csv")
    ...     p.read_text().splitlines()[2]
    'ppm,hz,intensity,a'
    """
    if isinstance(spectrum, Spectrum2D):
        return write_spectrum_2d(spectrum, path, force=force, protect=protect)
    kind = spectrum_format(path)
    if kind in (".csv", ".txt"):
        return write_text_atomic(path, spectrum_csv_text(spectrum), force=force, protect=protect)
    check_outputs([(path, "output")], force=force, protect=protect)
    if kind in (".jdx", ".dx"):
        meta = spectrum.metadata
        m = MeasuredSpectrum(spectrum.hz, spectrum.ppm, spectrum.intensity, None, spectrum.nu_ref_hz,
                             "powderspin simulation", nucleus=meta.get("nucleus"), field_tesla=meta.get("field_tesla"))
        return write_jcamp(path, m, force=force)
    if kind == ".npz":
        def save(tmp):
            with open(tmp, "wb") as f:
                np.savez(f, ppm=spectrum.ppm, hz=spectrum.hz, intensity=spectrum.intensity,
                         site_intensities=spectrum.site_intensities, site_labels=np.array(spectrum.site_labels),
                         metadata=np.array(json.dumps(dict(spectrum.metadata), default=str)))
    else:
        def save(tmp):
            with open(tmp, "wb") as f:
                np.save(f, np.vstack([spectrum.ppm, spectrum.hz, spectrum.intensity, *spectrum.site_intensities]))
    return write_via(path, save, force=force, protect=protect, role="output")


def plan_json_text(plan) -> str:
    """A plan as JSON text (every number behind it; infinite and undefined values as null).

    Parameters
    ----------
    plan : Plan

    Returns
    -------
    str

    Examples
    --------
    >>> import json, powderspin as ps
    >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
    ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
    >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
    >>> json.loads(plan_json_text(p))["format"]
    'powderspin plan 1'
    """
    return json.dumps(plan.to_dict(), indent=1, allow_nan=False) + "\n"


def write_plan_json(plan, path, *, force: bool = False, protect=()) -> Path | None:
    """Write a plan's JSON atomically (``"-"``: standard output); never overwrites without ``force``.

    Parameters
    ----------
    plan : Plan
    path : str or pathlib.Path
    force : bool, optional
    protect : iterable of path, optional
        Input files never to overwrite.

    Returns
    -------
    pathlib.Path or None

    Examples
    --------
    >>> import tempfile, pathlib, json, powderspin as ps
    >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
    ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
    >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
    >>> with tempfile.TemporaryDirectory() as d:
    ...     out = write_plan_json(p, pathlib.Path(d) / "plan.json")
    ...     json.loads(out.read_text())["fields"][0]["recommended_rate_hz"]
    20000.0
    """
    return write_text_atomic(path, plan_json_text(plan), force=force, protect=protect, role="JSON output")


def result_to_toml(result, path=None) -> str:
    """The fit result as the text of a model file (TOML).

    Parameters
    ----------
    result : FitResult
    path : str or pathlib.Path, optional
        Where it will be written (for relative ``data`` paths).

    Returns
    -------
    str

    Examples
    --------
    See :func:`write_result`.
    """
    import tomli_w

    head = ("# powderspin fit result: a model file with the fitted values (simulate it to get the fitted curve),\n"
            "# standard errors in [site.stderr] / [measurement.stderr] and the fit's statistics in [fit.result]\n")
    return head + tomli_w.dumps(result.to_dict(path))


def fit_csv_text(result, measurement: int = 0) -> str:
    """The data, fit, site components, baseline and residual of one measurement as CSV text.

    Parameters
    ----------
    result : FitResult
    measurement : int, optional

    Returns
    -------
    str
        ``#`` comment lines, then the header ``ppm,hz,data,fit,<site labels>,baseline,residual,in_fit`` and
        one row per data point in ascending hz (``in_fit`` is 1 inside the fit regions).

    Examples
    --------
    See :func:`write_result`.
    """
    spec = result.spectra[measurement]
    data = np.asarray(result.data[measurement].intensity, dtype=float)
    meas = result.model.measurements[measurement]
    axis = make_axis(meas.points, spec.nu_ref_hz, meas.center_ppm, meas.width_ppm)
    bl = baseline_values(meas.baseline, axis) if meas.baseline else np.zeros(spec.hz.size)
    lines = [f"# powderspin fit: measurement {measurement + 1} of {len(result.spectra)}",
             f"# data: {result.data_paths[measurement] or result.data[measurement].source}",
             f"# nucleus: {result.model.nucleus.name}",
             f"# field_tesla: {meas.field_tesla}",
             f"# nu_ref_hz: {spec.nu_ref_hz}",
             f"# scale: {meas.scale!r}",
             f"# baseline: {[float(b) for b in meas.baseline]!r}",
             f"# noise: {result.noise[measurement]} ({result.noise_source})",
             f"# success: {result.success} ({result.message})",
             "# columns: data, fit (= sites + baseline), each site (scaled), baseline, residual (data - fit)"]
    # the fitted values in full (the result file rounds them to the digits their errors support)
    for n in result.names:
        lines.append(f"# fitted {n}: {result.values[n]!r} +- {result.stderr[n]!r}")
    head = io.StringIO()
    csv.writer(head, lineterminator="").writerow(["ppm", "hz", "data", "fit", *spec.site_labels, "baseline",
                                                   "residual", "in_fit"])
    lines.append(head.getvalue())
    cols = [spec.ppm, spec.hz, data, spec.intensity, *spec.site_intensities, bl, data - spec.intensity]
    mk = result.masks[measurement]
    for i in range(spec.hz.size):
        lines.append(",".join(f"{c[i]:.12g}" for c in cols) + f",{int(mk[i])}")
    return "\n".join(lines) + "\n"


def csv_paths(result_path, n_measurements: int) -> list[Path]:
    """The CSV file(s) written beside a result file: same stem, ``.csv`` (``-m1.csv``, ... for several).

    Parameters
    ----------
    result_path : str or pathlib.Path
    n_measurements : int

    Returns
    -------
    list of pathlib.Path

    Examples
    --------
    >>> [p.name for p in csv_paths("out/fit.toml", 2)]
    ['fit-m1.csv', 'fit-m2.csv']
    """
    p = output_path(result_path, "result file")
    if n_measurements == 1:
        return [p.with_suffix(".csv")]
    return [p.with_name(f"{p.stem}-m{j + 1}.csv") for j in range(n_measurements)]


def write_result(result, path, *, force: bool = False, protect=()) -> list[Path]:
    """Write the result file (a model file) and the CSV file(s) beside it, atomically.

    Parameters
    ----------
    result : FitResult
    path : str or pathlib.Path
        The result file (``.toml``).  The CSV of each measurement goes
        beside it (:func:`csv_paths`).
    force : bool, optional
        Replace existing files.
    protect : iterable of path, optional
        Inputs never to overwrite (the model and data files are always
        protected).

    Returns
    -------
    list of pathlib.Path
        The files written.  If any write fails, those already written by
        this call are removed.

    See Also
    --------
    result_to_toml, fit_csv_text

    Examples
    --------
    >>> import tempfile, pathlib
    >>> import numpy as np
    >>> import powderspin as ps
    >>> truth = ps.make_model("31P", {"field_tesla": 9.4, "points": 128, "center_ppm": 0.0, "width_ppm": 40.0},
    ...                       [{"label": "P", "shift_ppm": 2.0, "lorentz_hz": 400.0}])
    >>> s = ps.simulate(truth)
    >>> y = s.intensity + np.random.default_rng(2).normal(0.0, 0.002, s.hz.size)
    >>> start = ps.make_model("31P", {"field_tesla": 9.4},
    ...                       [{"label": "P", "shift_ppm": {"start": 0.0, "min": -5.0, "max": 5.0},
    ...                         "lorentz_hz": 400.0}])
    >>> r = ps.fit(start, [ps.MeasuredSpectrum(s.hz, s.ppm, y, None, s.nu_ref_hz, "synthetic")])
    >>> with tempfile.TemporaryDirectory() as d:
    ...     files = write_result(r, pathlib.Path(d) / "fit.toml")
    ...     again = ps.simulate(ps.load_model(files[0]))
    ...     gap = float(np.max(np.abs(again.intensity - r.spectra[0].intensity)))
    ...     print([f.name for f in files], gap < 0.1 * r.noise[0])  # values rounded far inside their errors
    ['fit.toml', 'fit.csv'] True
    """
    p = output_path(path, "result file")
    csvs = csv_paths(p, len(result.spectra))
    protect = list(protect) + [q for q in result.data_paths if q is not None]
    if result.model.source:
        protect.append(result.model.source)
    check_outputs([(p, "result file")] + [(c, "fit CSV") for c in csvs], force=force, protect=protect)
    texts = [(p, result_to_toml(result, p), "result file")]
    texts += [(c, fit_csv_text(result, j), "fit CSV") for j, c in enumerate(csvs)]
    return write_texts_together(texts, force=force, protect=protect)


def fit_2d_csv_text(result, measurement: int = 0) -> str:
    """Data, fit, site components and residual of one measurement of a 2D fit, as long-form CSV text.

    Parameters
    ----------
    result : powderspin.fitting.two_dimensional.TwoDimensionalFit
    measurement : int, optional

    Returns
    -------
    str
        ``#`` comment lines (the data file, the F1 scale, the scale, the fitted
        values with standard errors, the regions), then for a 2D measurement the
        header ``f1_ppm,f2_ppm,data,fit,<site labels>,residual,in_fit`` and one
        row per point (F1 ascending, F2 ascending within it); for a 1D
        measurement of a joint fit ``ppm,hz,data,fit,<site labels>,residual,in_fit``.
        ``in_fit`` is 1 for the points the fit used.

    See Also
    --------
    write_result_2d
    """
    spec = result.spectra[measurement]
    item = result.data[measurement]
    y = np.asarray(item.intensity, dtype=float)
    mk = np.asarray(result.masks[measurement], dtype=bool)
    meas = result.model.measurements[measurement]
    two_d = isinstance(spec, Spectrum2D)
    sel = dict(result.selection)
    lines = [f"# powderspin fit (2D): measurement {measurement + 1} of {len(result.spectra)}",
             f"# data: {item.source}",
             f"# nucleus: {result.model.nucleus.name}",
             f"# field_tesla: {meas.field_tesla}",
             f"# nu_ref_hz: {item.nu_ref_hz}",
             f"# experiment: {meas.experiment}",
             f"# scale: {result.scales[measurement]!r}",
             f"# success: {result.success} ({result.message})",
             f"# regions: {json.dumps(sel.get('regions', []))}"]
    if two_d:
        lines += [f"# f1_referencing: {item.metadata.get('f1_referencing', '')}",
                  "# f1 axis: powderspin's sheared isotropic scale (a site with C_Q = 0 on the diagonal)",
                  f"# f1_regions: {json.dumps(sel.get('f1_regions', []))}",
                  f"# slice_f1_ppm: {json.dumps(sel.get('slice_f1_ppm', []))}",
                  "# columns: data, fit (= sum of the sites), each site (scaled), residual (data - fit), in_fit"]
    else:
        lines.append("# columns: data, fit (= sum of the sites), each site (scaled), residual (data - fit), in_fit")
    for n, v in result.values.items():
        lines.append(f"# fitted {n}: {v!r} +- {result.stderr[n]!r}")
    head = io.StringIO()
    first = ["f1_ppm", "f2_ppm"] if two_d else ["ppm", "hz"]
    csv.writer(head, lineterminator="").writerow(first + ["data", "fit", *spec.site_labels, "residual", "in_fit"])
    lines.append(head.getvalue())
    if two_d:
        f1, f2 = np.meshgrid(spec.f1_ppm, spec.f2_ppm, indexing="ij")
        cols = [f1.ravel(), f2.ravel(), y.ravel(), spec.intensity.ravel(),
                *(s.ravel() for s in spec.site_intensities), (y - spec.intensity).ravel()]
    else:
        cols = [spec.ppm, spec.hz, y, spec.intensity, *spec.site_intensities, y - spec.intensity]
    flags = mk.ravel().astype(int)
    table = np.column_stack(cols)
    for row, flag in zip(table, flags):
        lines.append(",".join(f"{v:.12g}" for v in row) + f",{flag}")
    return "\n".join(lines) + "\n"


def write_result_2d(result, path, *, header: str = "", force: bool = False, protect=()) -> list[Path]:
    """Write a 2D fit's result file (the fitted model) and one long-form CSV per measurement, atomically.

    Parameters
    ----------
    result : powderspin.fitting.two_dimensional.TwoDimensionalFit
    path : str or pathlib.Path
        The result file (``.toml``); the CSV file(s) go beside it (:func:`csv_paths`).
    header : str, optional
        Comment lines at the top of the result file.
    force : bool, optional
        Replace existing files.
    protect : iterable of path, optional
        Inputs never to overwrite.

    Returns
    -------
    list of pathlib.Path
        The files written; if one write fails, those already written by this
        call are removed.

    See Also
    --------
    fit_2d_csv_text, write_result
    """
    p = output_path(path, "result file")
    csvs = csv_paths(p, len(result.spectra))
    protect = list(protect)
    if result.model.source:
        protect.append(result.model.source)
    protect += [d.source for d in result.data if getattr(d, "source", None)]
    check_outputs([(p, "result file")] + [(c, "fit CSV") for c in csvs], force=force, protect=protect)
    import tomli_w

    head = header or "# powderspin 2D fit result: a model file with the fitted values\n"
    if not head.endswith("\n"):
        head += "\n"
    # the fitted model plus [fit.result]: statistics and, as a 1D result file, minima, curvature and posterior
    texts = [(p, head + tomli_w.dumps(result.to_dict()), "result file")]
    texts += [(c, fit_2d_csv_text(result, j), "fit CSV") for j, c in enumerate(csvs)]
    return write_texts_together(texts, force=force, protect=protect)
