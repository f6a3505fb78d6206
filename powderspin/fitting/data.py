"""What a fit reads: the measured spectra, their axes, the fit and noise regions and the noise level.

Each measurement of a model is fitted to one measured spectrum
(:class:`powderspin.io.spectra.MeasuredSpectrum`), read from a file or given
in memory.  Its ppm scale is taken as referenced and converted to Hz with the
model's reference frequency; the spectrum is simulated on that axis.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np

from ..engine.lineshape import Axis, make_axis
from ..engine.site_lines import estimate_span_hz
from ..io.raw import is_raw_data
from ..io.spectra import AxisUnitError, DataError, compare_with_model, read_spectrum
from ..model.values import Model

__all__ = ["FitError", "MismatchError", "is_spectrum", "data_items", "read_measured", "data_axis", "region_mask",
           "check_region", "noise_from_region", "point_noise", "check_overlap", "line_range_hz", "MIN_NOISE_POINTS"]

#: fewest points a noise region must hold in every measurement
MIN_NOISE_POINTS = 8


class FitError(ValueError):
    """A fit cannot be set up or run with the given model, data and options.

    A ``ValueError`` subclass; the message is one line that names the
    measurement, file, region or parameter and what is allowed.

    Parameters
    ----------
    message : str

    Examples
    --------
    >>> str(FitError("no free parameters"))
    'no free parameters'
    """


class MismatchError(FitError):
    """A data file states another nucleus or field than the model (a :class:`FitError`).

    Refused unless accepted (``accept_mismatch=True``, ``--accept-mismatch``):
    C_Q values fitted at the wrong field are wrong.  ``cli_text`` is the
    message with the command line's flag.

    Parameters
    ----------
    message : str
    cli_text : str, optional

    Examples
    --------
    >>> e = MismatchError("... accept_mismatch=True", "... --accept-mismatch")
    >>> isinstance(e, FitError), e.cli_text
    (True, '... --accept-mismatch')
    """

    def __init__(self, message: str, cli_text: str | None = None):
        super().__init__(message)
        self.cli_text = cli_text or message


def is_spectrum(x) -> bool:
    """True for a measured spectrum in memory (anything with ``hz``, ``ppm``, ``intensity`` and ``nu_ref_hz``).

    Parameters
    ----------
    x : object

    Returns
    -------
    bool

    Examples
    --------
    >>> is_spectrum("data.csv")
    False
    """
    return all(hasattr(x, a) for a in ("hz", "ppm", "intensity", "nu_ref_hz"))


def data_items(model: Model, data) -> list:
    """One data item (a path or a spectrum in memory) per measurement, in model order.

    Parameters
    ----------
    model : Model
    data : sequence, path, spectrum or None
        Given data (one per measurement); None: each measurement's ``data``
        file, relative to the model file's folder.

    Returns
    -------
    list

    Raises
    ------
    FitError
        Not one item per measurement, a measurement without data, or an
        item that is neither a path nor a spectrum.

    Examples
    --------
    >>> import powderspin as ps
    >>> m = ps.make_model("31P", {"field_tesla": 9.4, "data": "a.csv"}, [{}])
    >>> [str(p) for p in data_items(m, None)]
    ['a.csv']
    """
    n = len(model.measurements)
    if data is not None and not isinstance(data, (list, tuple)):
        data = [data]
    if data:
        if len(data) != n:
            raise FitError(f"{len(data)} data file(s) given for {n} measurement(s); give one per measurement, "
                           "in the order of the [[measurement]] tables")
        for j, item in enumerate(data):
            if not (is_spectrum(item) or isinstance(item, (str, os.PathLike))):
                raise FitError(f"data item {j + 1}: expected a file path or a MeasuredSpectrum, got "
                               f"{type(item).__name__}")
        return list(data)
    out = []
    base = Path(model.source).parent if model.source else Path(".")
    for j, m in enumerate(model.measurements):
        where = "measurement" if n == 1 else f"measurement {j + 1}"
        if m.data is None:
            raise FitError(f"{where} has no data: give data = \"FILE\" in the model file or the data file(s) "
                           "after the model on the command line")
        p = Path(m.data)
        out.append(p if p.is_absolute() else base / p)
    return out


def read_measured(item, model: Model, j: int, axis_unit: str | None, accept_mismatch: bool = False):
    """Read one measurement's spectrum; returns (spectrum, path or None, warnings).

    Parameters
    ----------
    item : path or spectrum
    model : Model
    j : int
        The measurement (0-based).
    axis_unit : {"ppm", "hz", "khz"} or None
        Unit of the file's axis column when the file does not name it.

    Returns
    -------
    tuple
        The spectrum, where it was read from (None for one in memory),
        plain-language warnings where the file's nucleus, field or reference
        disagrees slightly with the model, and notes (the axis unit taken
        from the data).

    Raises
    ------
    FitError
        A missing file.
    powderspin.io.spectra.DataError
        An unreadable file; raw data whose nucleus or field disagrees with
        the model's (field: by more than 0.1 %).

    Notes
    -----
    A raw data folder (``fid`` or ``ser`` with its parameters) is processed
    with the model's ``[processing]`` table (defaults for absent keys) by
    :func:`powderspin.processing.process`; the spectrum's
    ``metadata["processing"]`` records how.
    """
    if is_spectrum(item):
        return item, None, [], []
    path = str(item)
    meas = model.measurements[j]
    if not Path(path).exists():
        raise FitError(f"data file {path!r} (measurement {j + 1}) does not exist")
    nuc = model.nucleus.name
    if is_raw_data(path):
        from ..io.raw import check_against_model, read_raw
        from ..processing import ProcessingOptions, process

        opts = ProcessingOptions.from_table(dict(model.processing))
        raw = read_raw(path, expect="any" if opts.row is not None else "fid")
        check_against_model(raw, nuc, meas.field_tesla, where=f"measurement {j + 1}")
        spec = process(raw, opts)
        _check_echo_train(spec, meas, j, path)
        return spec, path, [], []
    notes = []
    try:
        spec = _read(path, axis_unit, nuc, meas.field_tesla)
    except AxisUnitError as e:
        spec, unit = _infer_axis_unit(path, e, model, j)
        notes.append(f"{path}: no header names the axis column; it was read in {unit}, the only unit under which "
                     "the data look like the model's lines (give the unit to choose another)")
    found = compare_with_model(spec, nuc, meas.field_tesla)
    _refuse_other_sample(spec, path, model, j, accept_mismatch)
    warns = [f"measurement {j + 1}: {t}" for t in found]
    return spec, path, warns, notes


def _check_echo_train(spec, meas, j: int, path) -> None:
    """Spikelet data and the measurement's comb must be the same echo train (schema: the linked echo-train keys)."""
    import json

    rec = json.loads(spec.metadata.get("processing") or "{}").get("echo_train", {})
    if rec.get("mode") != "spikelets":
        return
    if meas.echo_train_period_us is None:
        raise FitError(f"measurement {j + 1}: {path!r} was processed into spikelets but the measurement simulates no "
                       "echo train; write echo_period_us in [processing] (the measurement takes it from there)")
    echoes = rec.get("echoes")
    if echoes is not None and int(echoes) != meas.echo_train_echoes:
        raise FitError(f"measurement {j + 1}: the processed echo train of {path!r} holds {int(echoes)} echoes but the "
                       f"measurement's comb has echo_train_echoes = {meas.echo_train_echoes}; write echo_count = "
                       f"{int(echoes)} in [processing] (the measurement takes it from there)")


def _read(path, axis_unit, nucleus, field_tesla):
    """Read a data file with what the model knows; the file's own statements win where they disagree.

    The model's nucleus is offered first, then with the model's field (a file that states no reference
    frequency); a file stating another nucleus is read as it is, so that the disagreement is reported as
    such (:func:`_refuse_other_sample`) and not as a bad option.
    """
    first = None
    for options in ({"nucleus": nucleus}, {"nucleus": nucleus, "field_tesla": field_tesla}, {},
                    {"field_tesla": field_tesla}):
        try:
            return read_spectrum(path, axis=axis_unit, **options)
        except AxisUnitError:
            raise
        except DataError as e:
            first = first or e
    raise first


#: a file's field or reference frequency this far (relative) from the model's is another magnet, not a rounding
MISMATCH_REFUSED = 0.01


def _refuse_other_sample(spec, path, model: Model, j: int, accept: bool) -> None:
    """Refuse data whose own header states another nucleus, or a field 1 % or more away, unless accepted."""
    if accept:
        return
    meas = model.measurements[j]
    nuc = model.nucleus
    problem = None
    if spec.nucleus is not None and spec.nucleus.strip().lower() != nuc.name.lower():
        from ..io.spectra import _canonical_nucleus

        canonical = _canonical_nucleus(spec.nucleus) or spec.nucleus.strip()
        if canonical.lower() != nuc.name.lower():
            problem = f"states the nucleus {spec.nucleus} but the model's is {nuc.name}"
    stated = spec.metadata.get("field_source") == "stated by the file"
    if problem is None and spec.field_tesla is not None and stated:
        rel = abs(spec.field_tesla - meas.field_tesla) / meas.field_tesla
        if rel >= MISMATCH_REFUSED:
            problem = (f"states a field of {spec.field_tesla:.6g} T but measurement {j + 1} has field_tesla = "
                       f"{meas.field_tesla:.6g} T (C_Q and shifts fitted at the wrong field are wrong)")
    if problem is None and spec.nu_ref_hz is not None:
        model_nu = nuc.larmor_hz(meas.field_tesla)
        rel = abs(spec.nu_ref_hz - model_nu) / model_nu
        if rel >= MISMATCH_REFUSED:
            problem = (f"states a reference frequency of {spec.nu_ref_hz / 1e6:.6g} MHz but {nuc.name} at "
                       f"field_tesla = {meas.field_tesla:.6g} T (measurement {j + 1}) has {model_nu / 1e6:.6g} MHz: "
                       f"the file is from about {meas.field_tesla * spec.nu_ref_hz / model_nu:.4g} T")
    if problem is not None:
        raise MismatchError(f"data file {str(path)!r} {problem}; correct the model, or accept the difference "
                            "with accept_mismatch=True",
                            f"data file {str(path)!r} {problem}; correct the model, or accept the difference "
                            "with --accept-mismatch")


#: a headerless file's unit fits when its signal's extent is within this factor of the model's lines' extent
AXIS_EXTENT_FACTOR = 4.0


def _lines_extent_hz(model: Model, j: int) -> float:
    """How wide the model's lines are at the start values (Hz): the sites' spans plus the broadening."""
    meas = model.measurements[j]
    lo = hi = None
    wide = 0.0
    for s in model.sites:
        a, b = estimate_span_hz(s, meas, model.nucleus)
        lo = a if lo is None else min(lo, a)
        hi = b if hi is None else max(hi, b)
        wide = max(wide, s.lorentz_hz + meas.lorentz_hz + math.hypot(s.gauss_hz, meas.gauss_hz))
    return max(hi - lo, 0.0) + max(wide, 1.0)


def line_range_hz(model: Model, j: int, nu_ref: float) -> tuple[float, float]:
    """Where measurement ``j``'s lines lie at the start values (Hz from nu_ref), broadening and sidebands included.

    Parameters
    ----------
    model : Model
    j : int
    nu_ref : float
        Reference frequency (Hz).

    Returns
    -------
    (low, high) : tuple of float
    """
    meas = model.measurements[j]
    off = meas.shift_offset_ppm * nu_ref * 1e-6
    lo = hi = None
    for s in model.sites:
        a, b = estimate_span_hz(s, meas, model.nucleus)
        wide = s.lorentz_hz + meas.lorentz_hz + 2 * math.hypot(s.gauss_hz, meas.gauss_hz)
        a, b = a + off - 3 * wide, b + off + 3 * wide
        if meas.spinning_hz > 0 and math.isfinite(meas.spinning_hz):
            a, b = a - 4 * meas.spinning_hz, b + 4 * meas.spinning_hz
        lo = a if lo is None else min(lo, a)
        hi = b if hi is None else max(hi, b)
    return lo, hi


def _infer_axis_unit(path, error, model: Model, j: int):
    """The unit of a headerless file's axis: the only one under which the data's signal looks like the model's lines.

    For each unit the file is read and placed on the model's frequency scale.
    A unit fits when the data's tallest point (the median taken off) lies
    among the model's lines at the start values, and the signal's extent (the
    points above a quarter of the tallest) is within a factor of
    ``AXIS_EXTENT_FACTOR`` of the lines' extent.  The units differ by factors
    of nu_ref / 1 MHz (ppm and Hz), nu_ref / 1 kHz (ppm and kHz) and 1000 (Hz and
    kHz), so at most one fits unless the reference frequency is low; the unit
    is taken when exactly one fits.  Otherwise ``error`` (naming ``axis`` /
    ``--axis``) is raised with the reason.
    """
    meas = model.measurements[j]
    nu_ref = model.nucleus.larmor_hz(meas.field_tesla)
    lo, hi = line_range_hz(model, j, nu_ref)
    extent = _lines_extent_hz(model, j)
    fits = []
    for unit in ("ppm", "hz", "khz"):
        try:
            spec = _read(path, unit, model.nucleus.name, meas.field_tesla)
        except DataError:
            continue
        y = np.asarray(spec.intensity, dtype=float)
        if y.size < 2 or not np.all(np.isfinite(y)):
            continue
        hz = np.asarray(spec.ppm, dtype=float) * nu_ref * 1e-6
        signal = y - np.median(y)
        k = int(np.argmax(np.abs(signal)))
        strong = np.abs(signal) >= 0.25 * abs(signal[k])
        seen = float(hz[strong].max() - hz[strong].min()) + abs(float(hz[1] - hz[0]))
        if lo <= hz[k] <= hi and extent / AXIS_EXTENT_FACTOR <= seen <= extent * AXIS_EXTENT_FACTOR:
            fits.append((unit, spec))
    if len(fits) == 1:
        return fits[0][1], fits[0][0]
    if fits:
        why = (f"no header row names the axis column, and {' and '.join(u for u, _ in fits)} would each make the "
               "data look like the model's lines")
    else:
        why = "no header row names the axis column, and no unit makes the data look like the model's lines"
    raise type(error)(error.path, why) from None


def data_axis(spec, nu_ref: float, where: str) -> tuple[Axis, float, float]:
    """The uniform axis (model Hz) of a measured spectrum; its ppm scale is taken as referenced.

    Parameters
    ----------
    spec : MeasuredSpectrum
    nu_ref : float
        The model's reference frequency (Hz) at this measurement's field.
    where : str
        The measurement, for messages.

    Returns
    -------
    axis : Axis
    center_ppm, width_ppm : float
        The values that rebuild the axis with :func:`powderspin.engine.lineshape.make_axis`.

    Raises
    ------
    FitError
        Fewer than 16 points, or a non-uniform axis.
    """
    ppm = np.asarray(spec.ppm, dtype=float)
    n = ppm.size
    if n < 16:
        raise FitError(f"{where}: the data have {n} points; a fit needs at least 16")
    hz = ppm * nu_ref * 1e-6
    step = (hz[-1] - hz[0]) / (n - 1)
    if not step > 0 or np.max(np.abs(np.diff(hz) - step)) > 2e-3 * step:
        raise FitError(f"{where}: the data axis is not uniform (steps differ by more than 0.2 %); "
                       "resample the spectrum onto a uniform axis first")
    center_ppm = float(0.5 * (ppm[0] + ppm[-1]))
    width_ppm = float(step * n / nu_ref * 1e6)
    return make_axis(n, nu_ref, center_ppm, width_ppm), center_ppm, width_ppm


def check_region(r, what: str) -> tuple[float, float]:
    """A region as (ppm_hi, ppm_lo), checked.

    Parameters
    ----------
    r : pair of numbers
    what : str
        Its name, for the message.

    Returns
    -------
    tuple of 2 float

    Raises
    ------
    FitError

    Examples
    --------
    >>> check_region((40, 90), "region 1")
    (90.0, 40.0)
    """
    from ..checks import is_real, show

    if isinstance(r, (str, bytes)) or not hasattr(r, "__iter__"):
        raise FitError(f"{what} = {show(r)} must be two shifts (ppm), e.g. (90, 40), not "
                       f"{'text' if isinstance(r, (str, bytes)) else type(r).__name__}")
    items = list(r)
    if len(items) != 2 or not all(is_real(x) for x in items):
        raise FitError(f"{what} = {show(r)} must be two shifts (ppm), e.g. (90, 40)")
    a, b = (float(x) for x in items)
    if not (math.isfinite(a) and math.isfinite(b)) or a == b:
        raise FitError(f"{what} = {r!r} must be two different finite shifts (ppm)")
    return (max(a, b), min(a, b))


def region_mask(ppm: np.ndarray, regions) -> np.ndarray:
    """Which points lie in any of the regions (all of them when there are none).

    Parameters
    ----------
    ppm : numpy.ndarray
    regions : sequence of (ppm_hi, ppm_lo)

    Returns
    -------
    numpy.ndarray of bool

    Examples
    --------
    >>> region_mask(np.array([0.0, 5.0, 10.0]), [(6.0, 4.0)]).tolist()
    [False, True, False]
    """
    if not regions:
        return np.ones(ppm.size, dtype=bool)
    mask = np.zeros(ppm.size, dtype=bool)
    for hi, lo in regions:
        mask |= (ppm <= hi) & (ppm >= lo)
    return mask


def noise_from_region(y: np.ndarray, ppm: np.ndarray, region) -> float:
    """Standard deviation of the data in a signal-free region, a straight line removed.

    Parameters
    ----------
    y, ppm : numpy.ndarray
    region : (ppm_hi, ppm_lo)

    Returns
    -------
    float

    Examples
    --------
    >>> x = np.linspace(0.0, 10.0, 101)
    >>> round(noise_from_region(2.0 + 0.5 * x, x, (10.0, 0.0)), 12)
    0.0
    """
    sel = (ppm <= region[0]) & (ppm >= region[1])
    x, v = ppm[sel], y[sel]
    a = np.vstack([np.ones_like(x), x - x.mean()]).T
    coef, *_ = np.linalg.lstsq(a, v, rcond=None)
    r = v - a @ coef
    return float(np.sqrt(np.sum(r * r) / max(1, r.size - 2)))


def point_noise(y: np.ndarray) -> float:
    """Noise estimate from point-to-point differences (median absolute deviation, robust to lines).

    Parameters
    ----------
    y : numpy.ndarray

    Returns
    -------
    float

    References
    ----------
    F. R. Hampel, J. Am. Stat. Assoc. 69 (1974) 383 (the median absolute
    deviation, 1.4826 for a normal distribution) (from memory).

    Examples
    --------
    >>> y = np.random.default_rng(0).normal(0.0, 2.0, 20000)
    >>> round(point_noise(y), 1)
    2.0
    """
    d = np.diff(y)
    mad = np.median(np.abs(d - np.median(d)))
    return float(1.4826 * mad / math.sqrt(2.0))


def check_overlap(model: Model, axes, where) -> None:
    """Refuse data that do not overlap the model's lines at the start values (a wrong file or nucleus).

    Parameters
    ----------
    model : Model
    axes : sequence of Axis
        The data axes, one per measurement.
    where : callable
        Measurement index -> its name for messages.

    Raises
    ------
    FitError
    """
    for j, ax in enumerate(axes):
        nu_ref = ax.nu_ref_hz
        lo, hi = line_range_hz(model, j, nu_ref)
        d_lo, d_hi = ax.hz[0], ax.hz[-1]
        if hi < d_lo or lo > d_hi:
            raise FitError(
                f"{where(j)}: the data cover {d_hi / nu_ref * 1e6:.6g} to {d_lo / nu_ref * 1e6:.6g} ppm but the "
                f"model's lines (at the start values) lie between {hi / nu_ref * 1e6:.6g} and "
                f"{lo / nu_ref * 1e6:.6g} ppm: check the nucleus, field_tesla, shift_ppm and the data file")
