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
from ..io.spectra import DataError, compare_with_model, read_spectrum
from ..model.values import Model

__all__ = ["FitError", "is_spectrum", "data_items", "read_measured", "data_axis", "region_mask", "check_region",
           "noise_from_region", "point_noise", "check_overlap", "MIN_NOISE_POINTS"]

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


def read_measured(item, model: Model, j: int, axis_unit: str | None):
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
        The spectrum, where it was read from (None for one in memory), and
        plain-language warnings where the file's nucleus, field or reference
        disagrees with the model.

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
        return item, None, []
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
        return process(raw, opts), path, []
    try:
        spec = read_spectrum(path, axis=axis_unit, nucleus=nuc)
    except DataError as first:
        try:  # the file may not state its reference frequency: take it from the model's field
            spec = read_spectrum(path, axis=axis_unit, nucleus=nuc, field_tesla=meas.field_tesla)
        except DataError:
            raise first from None
    warns = [f"measurement {j + 1}: {t}" for t in compare_with_model(spec, nuc, meas.field_tesla)]
    return spec, path, warns


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
    try:
        a, b = (float(x) for x in r)
    except (TypeError, ValueError):
        raise FitError(f"{what} = {r!r} must be two shifts (ppm), e.g. (90, 40)") from None
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
        meas = model.measurements[j]
        nu_ref = ax.nu_ref_hz
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
        d_lo, d_hi = ax.hz[0], ax.hz[-1]
        if hi < d_lo or lo > d_hi:
            raise FitError(
                f"{where(j)}: the data cover {d_hi / nu_ref * 1e6:.6g} to {d_lo / nu_ref * 1e6:.6g} ppm but the "
                f"model's lines (at the start values) lie between {hi / nu_ref * 1e6:.6g} and "
                f"{lo / nu_ref * 1e6:.6g} ppm: check the nucleus, field_tesla, shift_ppm and the data file")
