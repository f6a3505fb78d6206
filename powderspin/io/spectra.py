"""Measured 1D spectra: reading them from files and writing them back.

This module turns a measured one-dimensional spectrum, as a spectroscopist
exports it, into a :class:`MeasuredSpectrum` for the fitting layer, and writes
spectra back to plain text or JCAMP-DX.

Conventions (the same as everywhere in powderspin)
--------------------------------------------------
- ``hz`` holds frequency offsets (Hz) from the reference frequency ``nu_ref``
  of the nucleus at the field; ``ppm = 1e6 * hz / nu_ref``; a positive shift
  is a higher frequency.
- The arrays are stored with ``hz`` ascending, whatever the order in the file
  (exports usually list ppm descending, the order in which spectra are
  plotted: ppm decreasing from left to right).

Formats read by :func:`read_spectrum`
-------------------------------------
- Plain text (``.csv``, ``.tsv``, ``.txt``, ``.dat``, ``.xy``, ``.asc``):
  comma-, tab-, semicolon- or whitespace-separated columns (detected from the
  first row), ``#`` comment lines, optional ``# key: value`` lines
  (``nu_ref_hz``, ``nucleus`` and ``field_tesla`` are understood), and an
  optional header row naming the columns: ``ppm``, ``hz`` or ``khz`` for the
  axis; ``intensity``, or ``real`` and ``imag``, for the values (any case).
  This covers the CSV that powderspin itself writes (``ppm,hz,intensity``,
  possibly followed by per-site columns, which are ignored).  Without a header
  the first column is the axis, whose unit the ``axis=`` option names, the
  second the real part and an optional third the imaginary part; without
  ``axis=`` such a file raises :class:`AxisUnitError` (a ``DataError``), which
  the fit answers by taking the unit from the data where only one unit fits
  the model's lines (:mod:`powderspin.fitting.data`).  A UTF-8 byte-order mark
  is skipped.  A number beyond the largest double (``1e309``) is an error
  quoting the text as written, with its line.
- NumPy ``.npy``: a 2 x N or N x 2 float array (3 x N / N x 3 with an
  imaginary row/column, or a complex second row); row/column 0 is the axis,
  whose unit ``axis=`` names.
- JCAMP-DX 1D NMR spectra (``.jdx``, ``.dx``, ``.jcamp``), XYDATA or NTUPLES,
  in AFFN or the compressed ASDF forms (SQZ, DIF, DUP), decoded by nmrglue's
  JCAMP-DX reader.  The axis comes from FIRSTX/LASTX/NPOINTS in XUNITS (HZ or
  PPM), the reference frequency from ``.OBSERVE FREQUENCY`` (MHz); a
  ``.SHIFT REFERENCE`` (or, failing that, a ``$OFFSET`` label giving the shift
  of the first point in ppm) re-anchors the shift scale; the nucleus comes
  from ``.OBSERVE NUCLEUS``.  The point form ``##XYPOINTS=(XY..XY)`` (also
  ``##XYDATA=(XY..XY)``), explicit x, y pairs that nmrglue does not decode,
  is read here: pairs separated by semicolons, blanks or line ends, scaled by
  ``##XFACTOR=``/``##YFACTOR=``, errors naming the line (R. S. McDonald, P. A.
  Wilks, Appl. Spectrosc. 42 (1988) 151).
- Bruker processed 1D data, read with nmrglue's Bruker reader: a ``pdata/N``
  directory holding ``1r`` (and ``1i``) and ``procs``, or the experiment
  directory that contains ``pdata/1``.  The axis is
  ``ppm_i = OFFSET - i * SW_p / (SF * SI)``, i = 0 .. SI-1 (``SF`` in MHz is
  the frequency of 0 ppm, ``SW_p`` the width in Hz; common practice), the
  nucleus is ``NUC1`` from the experiment's ``acqus`` (else ``AXNUC``).
  Agilent/Varian data are not read: nmrglue reads only their time-domain
  files, not a processed spectrum.

The reference frequency
-----------------------
A ppm axis needs ``nu_ref`` to give Hz offsets (and an Hz axis needs it to
give ppm).  It is taken from the file when the file states it; else from the
``nu_ref_hz=`` option; else from a file that lists both ppm and Hz columns;
else from the nucleus and the field (``nucleus=`` and ``field_tesla=`` or the
file's own), through :meth:`powderspin.physics.nuclides.Nuclide.larmor_hz`.  An option
that contradicts what the file states (a different nucleus; a reference
frequency or field differing by more than ``MATCH_TOLERANCE`` relative) is an
error rather than a silent override.  When the file states no field, the
field is implied by ``nu_ref`` and the nucleus (``metadata["field_source"]``
says which).

Checks
------
Every problem with a file raises :class:`DataError` (a ``ValueError``) with
one line that names the file, the line (text files) or point, and the
problem.  A file must hold at least ``MIN_POINTS`` points on a strictly
monotonic axis.  The axis must be uniform: every step may differ from the mean
step by at most ``UNIFORM_STEP_TOLERANCE`` (1e-3) of the mean step, plus the
precision to which the text file prints the axis; ``resample=True`` instead
interpolates linearly onto a uniform axis with the same number of points and
records this in the metadata.

References
----------
.. [1] R. S. McDonald, P. A. Wilks, "JCAMP-DX: a standard form for exchange
   of infrared spectra in computer readable form", Appl. Spectrosc. 42 (1988)
   151 (from memory).
.. [2] A. N. Davies, P. Lampen, "JCAMP-DX for NMR", Appl. Spectrosc. 47
   (1993) 1093 (from memory).
.. [3] R. K. Harris et al., "NMR nomenclature. Nuclear spin properties and
   conventions for chemical shifts", Pure Appl. Chem. 73 (2001) 1795 (the ppm
   scale relative to nu_ref).

Examples
--------
>>> import pathlib, tempfile
>>> import numpy as np
>>> from powderspin.io.spectra import read_spectrum
>>> ppm = np.linspace(80.0, -80.0, 161)                  # exported descending
>>> y = 1.0 / (1.0 + ((ppm - 10.0) / 4.0) ** 2)           # a Lorentzian line
>>> with tempfile.TemporaryDirectory() as d:
...     path = pathlib.Path(d) / "spectrum.csv"
...     rows = "".join(f"{a:.17g},{b:.17g}\\n" for a, b in zip(ppm, y))
...     _ = path.write_text("# nucleus: 27Al\\n# field_tesla: 14.1\\nppm,intensity\\n" + rows)
...     spec = read_spectrum(path)
>>> bool(np.all(np.diff(spec.hz) > 0)), spec.nucleus, spec.field_tesla
(True, '27Al', 14.1)
>>> float(spec.ppm[np.argmax(spec.intensity)])
10.0
"""

from __future__ import annotations

import decimal
import json
import math
import os
import re
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Mapping

import numpy as np

from ..files import write_text_atomic
from ..frozen import reduce_through_init
from ..physics.nuclides import UnknownNuclideError, get_nuclide

__all__ = [
    "DataError",
    "AxisUnitError",
    "MeasuredSpectrum",
    "read_spectrum",
    "write_spectrum_text",
    "write_jcamp",
    "compare_with_model",
    "MIN_POINTS",
    "UNIFORM_STEP_TOLERANCE",
    "MATCH_TOLERANCE",
    "read_through_nmrglue",
]

#: Fewest points a measured spectrum may have.
MIN_POINTS = 16
#: Largest allowed deviation of an axis step from the mean step, as a fraction of the mean step.
UNIFORM_STEP_TOLERANCE = 1e-3
#: Relative tolerance for reference frequencies and fields that should agree.
MATCH_TOLERANCE = 1e-4

_TEXT_SUFFIXES = (".csv", ".tsv", ".txt", ".dat", ".xy", ".asc")
_JCAMP_SUFFIXES = (".jdx", ".dx", ".jcamp")
_NPY_SUFFIXES = (".npy",)
_AXIS_UNITS = ("ppm", "hz", "khz")
_UNIT_LABEL = {"ppm": "ppm", "hz": "Hz", "khz": "kHz"}
_VALUE_NAMES = ("intensity", "real", "imag")
_ACCEPTED_NAMES = "ppm, hz or khz (axis); intensity, or real and imag (values)"
_OWN_CSV_HEADER = ("ppm", "hz", "intensity")
_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")
_NONFINITE = re.compile(r"[+-]?(?:nan|inf|infinity)", re.IGNORECASE)
_KEY_LINE = re.compile(r"^([A-Za-z_][A-Za-z0-9_.\- ]*?)\s*:\s*(.*)$")
_JCAMP_LINE_LIMIT = 80
_INT32_MAX = 2**31 - 1


class DataError(ValueError):
    """A measured-spectrum file (or an option for reading it) is not usable.

    The message is one line: the file, the line number (text files) where it
    applies, and the problem.

    Parameters
    ----------
    path : str or os.PathLike
        The file (or directory) concerned.
    problem : str
        What is wrong and, where possible, how to put it right.
    line : int, optional
        1-based line number in a text file.

    Attributes
    ----------
    path : str
    line : int or None
    problem : str

    Examples
    --------
    >>> err = DataError("scan.csv", "3 values, but line 4 has 2", line=9)
    >>> str(err)
    'scan.csv, line 9: 3 values, but line 4 has 2'
    >>> isinstance(err, ValueError)
    True
    """

    def __init__(self, path, problem: str, *, line: int | None = None):
        self.path = str(path)
        self.line = line
        self.problem = " ".join(str(problem).split())
        where = self.path if line is None else f"{self.path}, line {line}"
        super().__init__(" ".join(f"{where}: {self.problem}".splitlines()))

    def __reduce__(self):  # keeps the error intact across processes (pickle)
        return (_rebuild_data_error, (self.path, self.problem, self.line))


def _rebuild_data_error(path, problem, line):
    return DataError(path, problem, line=line)


class AxisUnitError(DataError):
    """A text file without a header row, read without saying the unit of its axis column.

    A :class:`DataError`.  ``powderspin.fit`` first tries to tell the unit
    from the data (the unit that puts the data's signal over the model's
    lines, where only one does); the message names the keyword ``axis`` and
    ``cli_text`` the command line's ``--axis`` flag.

    Parameters
    ----------
    path : str or os.PathLike
    problem : str
        Why the unit is not known.

    Examples
    --------
    >>> e = AxisUnitError("scan.txt", "no header row names the axis column")
    >>> isinstance(e, DataError), "--axis ppm" in e.cli_text, "axis='ppm'" in str(e)
    (True, True, True)
    """

    def __init__(self, path, problem: str, *, line: int | None = None):
        super().__init__(path, f"{problem}; pass axis='ppm', 'hz' or 'khz' to say what column 1 holds", line=line)
        self.cli_text = f"{self.path}: {' '.join(problem.split())}; pass --axis ppm, --axis hz or --axis khz to say " \
                        "what column 1 holds"
        self.reason = problem

    def __reduce__(self):
        return (AxisUnitError, (self.path, self.reason))


# --------------------------------------------------------------------------
# the value
# --------------------------------------------------------------------------
def _frozen(values) -> np.ndarray:
    a = np.array(values, dtype=float)
    a.flags.writeable = False
    return a


def _plain(value):
    """Metadata values as immutable plain objects (lists -> tuples)."""
    if isinstance(value, Mapping):
        return MappingProxyType({str(k): _plain(v) for k, v in value.items()})
    if isinstance(value, (list, tuple)):
        return tuple(_plain(v) for v in value)
    if isinstance(value, np.generic):
        return value.item()
    return value


@dataclass(frozen=True)
class MeasuredSpectrum:
    """A measured 1D spectrum on a uniform axis, ascending in frequency.

    Attributes
    ----------
    hz : ndarray
        Axis points: offsets (Hz) from the reference frequency ``nu_ref_hz``,
        strictly ascending.  Read-only.
    ppm : ndarray
        The same points as shifts, ``1e6 * hz / nu_ref_hz`` (ppm).  Read-only.
    intensity : ndarray
        The real part of the spectrum at each point, in the order of ``hz``.
        Read-only.
    imag : ndarray or None
        The imaginary part when the file holds one.  Read-only.
    nu_ref_hz : float
        Reference frequency nu_ref (Hz): the frequency of 0 ppm.
    source : str
        The file or directory read (as given), or a description.
    nucleus : str or None
        The nucleus as stated by the file (or given when reading), e.g.
        ``"27Al"``; None when unknown.
    field_tesla : float or None
        The field B0 (T), as stated by the file, given when reading, or
        implied by ``nu_ref_hz`` and the nucleus (``metadata["field_source"]``
        says which); None when unknown.
    metadata : Mapping
        Read-only record of where the values came from (format, sources of
        nu_ref and field, resampling, the file's own ``key: value`` lines as
        ``"file.<key>"``, ...).

    Raises
    ------
    ValueError
        If the arrays differ in length or shape, are not finite, ``hz`` is not
        strictly ascending, ``ppm`` does not equal ``1e6 * hz / nu_ref_hz``
        (to 1e-9 relative), or ``nu_ref_hz`` is not a finite number > 0.

    See Also
    --------
    read_spectrum : Read one from a file.
    write_spectrum_text, write_jcamp : Write one to a file.

    References
    ----------
    .. [1] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (ppm scale).

    Examples
    --------
    >>> import numpy as np
    >>> hz = np.linspace(-5000.0, 5000.0, 64)
    >>> spec = MeasuredSpectrum(hz=hz, ppm=1e6 * hz / 100e6, intensity=np.exp(-(hz / 800.0) ** 2),
    ...                         imag=None, nu_ref_hz=100e6, source="example")
    >>> float(spec.ppm[-1]), spec.hz.flags.writeable
    (50.0, False)
    """

    hz: np.ndarray
    ppm: np.ndarray
    intensity: np.ndarray
    imag: np.ndarray | None
    nu_ref_hz: float
    source: str
    nucleus: str | None = None
    field_tesla: float | None = None
    metadata: Mapping = field(default_factory=dict)

    __reduce__ = reduce_through_init  # picklable: to and from Dask workers (powderspin.frozen)

    def __post_init__(self):
        hz = _frozen(self.hz)
        ppm = _frozen(self.ppm)
        inten = _frozen(self.intensity)
        imag = None if self.imag is None else _frozen(self.imag)
        for name, a in (("hz", hz), ("ppm", ppm), ("intensity", inten), ("imag", imag)):
            if a is None:
                continue
            if a.ndim != 1 or a.shape != hz.shape:
                raise ValueError(f"MeasuredSpectrum.{name} must be a 1-D array as long as hz "
                                 f"({hz.size} points); got shape {a.shape}")
            if not np.all(np.isfinite(a)):
                raise ValueError(f"MeasuredSpectrum.{name} must hold finite numbers only")
        if hz.size >= 2 and not np.all(np.diff(hz) > 0):
            raise ValueError("MeasuredSpectrum.hz must be strictly ascending")
        nu = self.nu_ref_hz
        if isinstance(nu, bool) or not isinstance(nu, (int, float, np.floating, np.integer)) \
                or not math.isfinite(float(nu)) or float(nu) <= 0:
            raise ValueError(f"MeasuredSpectrum.nu_ref_hz must be a finite number > 0 Hz; got {nu!r}")
        nu = float(nu)
        if hz.size and not np.allclose(ppm, 1e6 * hz / nu, rtol=1e-9, atol=1e-12 * float(np.max(np.abs(ppm)))):
            raise ValueError("MeasuredSpectrum.ppm must equal 1e6 * hz / nu_ref_hz (to 1e-9 relative)")
        if self.field_tesla is not None:
            f = float(self.field_tesla)
            if not math.isfinite(f) or f <= 0:
                raise ValueError(f"MeasuredSpectrum.field_tesla must be None or a finite number > 0 T; "
                                 f"got {self.field_tesla!r}")
            object.__setattr__(self, "field_tesla", f)
        if self.nucleus is not None and not isinstance(self.nucleus, str):
            raise ValueError(f"MeasuredSpectrum.nucleus must be None or a string; got {self.nucleus!r}")
        object.__setattr__(self, "hz", hz)
        object.__setattr__(self, "ppm", ppm)
        object.__setattr__(self, "intensity", inten)
        object.__setattr__(self, "imag", imag)
        object.__setattr__(self, "nu_ref_hz", nu)
        object.__setattr__(self, "source", str(self.source))
        object.__setattr__(self, "metadata", _plain(dict(self.metadata)))


# --------------------------------------------------------------------------
# what a format reader hands to the common checks
# --------------------------------------------------------------------------
@dataclass
class _Raw:
    fmt: str
    axis: np.ndarray                  # in `unit`, in file order
    unit: str                         # "ppm" | "hz" | "khz"
    real: np.ndarray
    imag: np.ndarray | None
    lines: np.ndarray | None = None   # text line number of each point
    nu_ref_hz: float | None = None    # stated by the file
    nucleus: str | None = None        # stated by the file
    field_tesla: float | None = None  # stated by the file
    implied_nu_ref_hz: float | None = None  # implied by ppm and hz columns together
    precision: np.ndarray | None = None  # printing step of each axis value as written, in `unit`
    anchor: tuple | None = None       # (index in file order, shift in ppm, label)
    metadata: dict = field(default_factory=dict)


def _where(raw: _Raw, i: int) -> tuple[str, int | None]:
    """Describe point ``i`` (file order): the text line, or the point number."""
    if raw.lines is not None:
        return "", int(raw.lines[i])
    return f"point {i + 1}: ", None


def _fmt(x: float) -> str:
    return f"{x:.10g}"


# --------------------------------------------------------------------------
# public reader
# --------------------------------------------------------------------------
def read_spectrum(path, *, axis: str | None = None, nu_ref_hz: float | None = None,
                  nucleus: str | None = None, field_tesla: float | None = None,
                  resample: bool = False) -> MeasuredSpectrum:
    """Read a measured 1D spectrum from a text, ``.npy``, JCAMP-DX or Bruker file.

    Parameters
    ----------
    path : str or os.PathLike
        A text file, a ``.npy`` file, a JCAMP-DX file, or a Bruker processed
        data directory (``pdata/N``, or the experiment directory holding
        ``pdata/1``); the format is chosen by the extension (see the module
        notes).
    axis : {"ppm", "hz", "khz"}, optional
        Unit of the axis column when the file does not name it (text without
        a header, ``.npy``).  Must agree with a header when both are given;
        not accepted for JCAMP-DX and Bruker data, which state their axis.
    nu_ref_hz : float, optional
        Reference frequency nu_ref (Hz, the frequency of 0 ppm), when the file
        does not state it.
    nucleus : str, optional
        The observed nucleus (e.g. ``"27Al"``), when the file does not state it.
    field_tesla : float, optional
        The field B0 (T), when the file does not state it.  With ``nucleus``
        it gives nu_ref when nothing else does.
    resample : bool, optional
        Accept a non-uniform axis by interpolating linearly onto a uniform
        axis with the same number of points and the same end points
        (recorded in ``metadata["resampled"]``).

    Returns
    -------
    MeasuredSpectrum
        Ascending in Hz, with ppm, nucleus and field as far as they are known.

    Raises
    ------
    DataError
        One line naming the file, the line or point, and the problem: missing
        file, directory that holds no processed spectrum, binary or non-UTF-8
        text, ragged rows, text or NaN/inf where a number belongs, fewer than
        ``MIN_POINTS`` points, duplicate axis values, a non-monotonic or
        non-uniform axis, an unknown column name, an unknown reference
        frequency, an unsupported extension, or an option that contradicts
        the file.

    See Also
    --------
    compare_with_model : Check the file's nucleus, field and nu_ref against a model.
    write_spectrum_text, write_jcamp : Write a spectrum back.

    Notes
    -----
    Values given as options fill in what the file does not state; where the
    file states a value, the option must agree with it (the same nucleus;
    nu_ref or field within ``MATCH_TOLERANCE`` relative), else DataError.

    References
    ----------
    .. [1] R. S. McDonald, P. A. Wilks, Appl. Spectrosc. 42 (1988) 151
       (JCAMP-DX) (from memory).
    .. [2] A. N. Davies, P. Lampen, Appl. Spectrosc. 47 (1993) 1093
       (JCAMP-DX for NMR) (from memory).
    .. [3] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (nu_ref and
       the ppm scale).

    Examples
    --------
    A header-less whitespace-separated file whose first column is in kHz:

    >>> import pathlib, tempfile
    >>> import numpy as np
    >>> khz = np.linspace(-20.0, 20.0, 101)
    >>> y = 1.0 / (1.0 + (khz / 1.5) ** 2)                       # a Lorentzian
    >>> with tempfile.TemporaryDirectory() as d:
    ...     path = pathlib.Path(d) / "na.dat"
    ...     _ = path.write_text("".join(f"{a:.17g} {b:.17g}\\n" for a, b in zip(khz, y)))
    ...     spec = read_spectrum(path, axis="khz", nucleus="23Na", field_tesla=9.4)
    ...     try:
    ...         read_spectrum(path)
    ...     except DataError as err:
    ...         print(str(err).split(": ", 1)[1])
    no header row names the axis column; pass axis='ppm', 'hz' or 'khz' to say what column 1 holds
    >>> float(spec.hz[0]), float(spec.hz[-1]), spec.nucleus
    (-20000.0, 20000.0, '23Na')
    >>> spec.metadata["nu_ref_source"]
    'nucleus and field (given)'
    """
    if not isinstance(path, (str, os.PathLike)) or isinstance(path, bytes) or not os.fspath(path).strip():
        got = "None" if path is None else ("an empty name" if isinstance(path, str) else type(path).__name__)
        raise DataError("read_spectrum", f"path must be a file name (text or pathlib.Path), got {got}")
    source = str(path)
    p = Path(path)
    opts = _check_options(source, axis, nu_ref_hz, nucleus, field_tesla, resample)
    if not p.exists():
        raise DataError(source, "no such file or directory")
    if p.is_dir():
        raw = _read_bruker_dir(source, p, opts)
    else:
        suffix = p.suffix.lower()
        if p.name in ("1r", "1i", "procs") and (p.parent / "procs").is_file():
            raw = _read_bruker_dir(source, p.parent, opts)
        elif suffix in _NPY_SUFFIXES:
            raw = _read_npy(source, p, opts)
        elif suffix in _JCAMP_SUFFIXES:
            raw = _read_jcamp(source, p, opts, _read_bytes(source, p))
        elif suffix in _TEXT_SUFFIXES:
            data = _read_bytes(source, p)
            if data.lstrip(b"\xef\xbb\xbf \t\r\n").startswith(b"##"):
                raw = _read_jcamp(source, p, opts, data)
            else:
                raw = _read_text(source, data, opts)
        else:
            shown = f"'{p.suffix}'" if p.suffix else "(no extension)"
            raise DataError(source, f"unsupported file type {shown}; supported: "
                            f"{' '.join(_TEXT_SUFFIXES)} (text), .npy (NumPy), "
                            f"{' '.join(_JCAMP_SUFFIXES)} (JCAMP-DX), or a Bruker processed-data directory")
    return _finish(source, raw, opts)


# --------------------------------------------------------------------------
# options
# --------------------------------------------------------------------------
def _positive(source, name, value, unit):
    if value is None:
        return None
    ok = not isinstance(value, bool)
    try:
        v = float(value)
    except (TypeError, ValueError):
        ok = False
    if not ok or not math.isfinite(v) or v <= 0:
        raise DataError(source, f"option {name} must be a finite number > 0 {unit}; got {value!r}")
    return v


def _canonical_nucleus(text: str) -> str | None:
    """The table name of a nucleus ('27Al' from '^27Al', 'Al27', ...), or None."""
    cleaned = text.replace("^", "").strip()
    try:
        return get_nuclide(cleaned).name
    except (UnknownNuclideError, ValueError):
        return None


def _check_options(source, axis, nu_ref_hz, nucleus, field_tesla, resample) -> dict:
    if axis is not None:
        if not isinstance(axis, str) or axis.strip().lower() not in _AXIS_UNITS:
            raise DataError(source, f"option axis must be 'ppm', 'hz' or 'khz'; got {axis!r}")
        axis = axis.strip().lower()
    if nucleus is not None:
        if not isinstance(nucleus, str):
            raise DataError(source, f"option nucleus must be a name such as '27Al'; got {nucleus!r}")
        try:
            nucleus = get_nuclide(nucleus.replace("^", "").strip()).name
        except UnknownNuclideError as err:
            raise DataError(source, f"option nucleus: {err}") from None
    if not isinstance(resample, bool):
        raise DataError(source, f"option resample must be True or False; got {resample!r}")
    return {
        "axis": axis,
        "nu_ref_hz": _positive(source, "nu_ref_hz", nu_ref_hz, "Hz"),
        "nucleus": nucleus,
        "field_tesla": _positive(source, "field_tesla", field_tesla, "T"),
        "resample": resample,
    }


def _read_bytes(source, p: Path) -> bytes:
    try:
        return p.read_bytes()
    except PermissionError:
        raise DataError(source, "cannot be read (permission denied)") from None
    except OSError as err:
        raise DataError(source, f"cannot be read ({err.strerror or err})") from None


def _check_binary(source, data: bytes, what: str) -> None:
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        raise DataError(source, f"{what} is UTF-16 encoded; save it as UTF-8 text")
    nul = data.find(b"\x00")
    if nul >= 0:
        raise DataError(source, f"binary data, not {what} (a NUL byte at byte {nul}); "
                        "give a text export of the spectrum")


# --------------------------------------------------------------------------
# plain text
# --------------------------------------------------------------------------
def _split(line: str, delim: str | None) -> list[str]:
    if delim is None:
        return line.split()
    return [f.strip() for f in line.split(delim)]


def _detect_delimiter(line: str) -> str | None:
    for d in ("\t", ",", ";"):
        if d in line:
            return d
    return None


def _name(field_text: str) -> str:
    return field_text.strip().strip("\"'").strip().lower()


def _is_number_text(text: str) -> bool:
    return bool(_NUMBER.fullmatch(text) or _NONFINITE.fullmatch(text))


def _parse_number(source, text: str, lineno: int, col: int, colname: str) -> float:
    label = f"column {col} ({colname!r})" if colname else f"column {col}"
    if _NUMBER.fullmatch(text):
        v = float(text)
        if not math.isfinite(v):  # '1e309': beyond the largest double
            shown = text if len(text) <= 40 else text[:37] + "..."
            raise DataError(source, f"{label} holds {shown!r}, which is too large for a number (the largest is "
                            "about 1.8e308)", line=lineno)
        return v
    if _NONFINITE.fullmatch(text):
        raise DataError(source, f"{label} holds {text!r}; every value must be a finite number", line=lineno)
    if text == "":
        raise DataError(source, f"{label} is empty; every row needs a number in every column", line=lineno)
    hint = " (decimal commas are not read; use a decimal point)" if re.fullmatch(r"[+-]?\d+,\d+", text) else ""
    shown = text if len(text) <= 40 else text[:37] + "..."
    raise DataError(source, f"{label} holds {shown!r}, which is not a number{hint}", line=lineno)


def _decimal_precision(text: str) -> float:
    """The printing step of a number as written ('12.50' -> 0.01)."""
    try:
        exp = decimal.Decimal(text).as_tuple().exponent
    except decimal.InvalidOperation:
        return 0.0
    if not isinstance(exp, int):
        return 0.0
    return 10.0 ** max(min(exp, 300), -320)  # '1e309' is refused elsewhere; never an OverflowError here


def _parse_file_keys(source, keys: dict) -> tuple[dict, dict]:
    """The understood ``# key: value`` entries, and the rest for the metadata."""
    stated: dict = {}
    rest: dict = {}
    for key, (value, lineno) in keys.items():
        if key in ("nu_ref_hz", "field_tesla"):
            unit = "Hz" if key == "nu_ref_hz" else "T"
            ok = bool(_NUMBER.fullmatch(value))
            v = float(value) if ok else math.nan
            if not ok or not math.isfinite(v) or v <= 0:
                raise DataError(source, f"'# {key}:' must be a finite number > 0 {unit}; got {value!r}",
                                line=lineno)
            stated[key] = v
        elif key == "nucleus":
            if value and value.lower() not in ("none", "unknown"):
                stated[key] = _canonical_nucleus(value) or value
        else:
            rest[f"file.{key}"] = value
    return stated, rest


def _read_text(source, data: bytes, opts: dict) -> _Raw:
    _check_binary(source, data, "text")
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        line = data[: err.start].count(b"\n") + 1
        col = err.start - (data.rfind(b"\n", 0, err.start) + 1) + 1
        raise DataError(source, f"not UTF-8 text (byte 0x{data[err.start]:02x} at column {col}); "
                        "save the file as UTF-8", line=line) from None

    keys: dict = {}
    last_comment: tuple[int, str] | None = None
    header: list[str] | None = None
    header_line = None
    rows: list[tuple[int, list[str]]] = []
    delim: str | None = None
    delim_known = False
    for lineno, rawline in enumerate(re.split(r"\r\n|\n|\r", text), 1):
        s = rawline.strip()
        if not s:
            continue
        if s.startswith("#"):
            body = s.lstrip("#").strip()
            m = _KEY_LINE.match(body)
            if m:
                keys[m.group(1).strip().lower()] = (m.group(2).strip(), lineno)
            elif not rows and header is None:
                last_comment = (lineno, body)
            continue
        if "#" in s:
            s = s[: s.index("#")].strip()
            if not s:
                continue
        if not delim_known:
            delim, delim_known = _detect_delimiter(s), True
        fields = _split(s, delim)
        if header is None and not rows:
            if not any(_is_number_text(f) for f in fields):
                header, header_line = [_name(f) for f in fields], lineno
                continue
            if last_comment is not None:
                names = [_name(f) for f in _split(last_comment[1], delim)]
                if len(names) == len(fields) and all(n in _AXIS_UNITS + _VALUE_NAMES for n in names):
                    header, header_line = names, last_comment[0]
        rows.append((lineno, fields))

    stated, rest = _parse_file_keys(source, keys)
    if not rows:
        raise DataError(source, "holds no data rows" + (" (only a header)" if header else ""))
    first_line, first = rows[0]
    ncols = len(header) if header is not None else len(first)
    ref_line = header_line if header is not None else first_line

    meta = {"format": {None: "whitespace-separated text", "\t": "tab-separated text",
                       ",": "comma-separated text", ";": "semicolon-separated text"}[delim]}
    meta.update(rest)

    # which column is what
    columns: dict[str, int] = {}
    ignored: list[str] = []
    if header is not None:
        own = tuple(header[:3]) == _OWN_CSV_HEADER
        for j, n in enumerate(header):
            if n in columns:
                raise DataError(source, f"column name {n!r} appears twice in the header", line=header_line)
            if n in _AXIS_UNITS or n in _VALUE_NAMES:
                columns[n] = j
            elif own and j >= 3:
                ignored.append(n)
            else:
                shown = n if n else "(empty)"
                raise DataError(source, f"unknown column name {shown!r}; accepted names: {_ACCEPTED_NAMES}",
                                line=header_line)
        axes = [u for u in ("hz", "khz", "ppm") if u in columns]
        if not axes:
            raise DataError(source, "the header names no axis column; accepted axis names: ppm, hz, khz",
                            line=header_line)
        unit = axes[0]
        if opts["axis"] is not None:
            if opts["axis"] not in columns:
                raise DataError(source, f"option axis={opts['axis']!r}, but the header names the axis "
                                f"column {axes[0]!r}; leave axis out or make them agree", line=header_line)
            unit = opts["axis"]
        if "intensity" in columns and "real" in columns:
            raise DataError(source, "the header names both 'intensity' and 'real'; keep one of them",
                            line=header_line)
        real_col = columns.get("intensity", columns.get("real"))
        if real_col is None:
            what = "'imag' without 'real'" if "imag" in columns else "no value column"
            raise DataError(source, f"the header has {what}; accepted value names: intensity, or real and imag",
                            line=header_line)
        imag_col = columns.get("imag")
        axis_col = columns[unit]
        second = None
        if unit != "ppm" and "ppm" in columns:
            second = columns["ppm"]
        elif unit == "ppm" and ("hz" in columns or "khz" in columns):
            second = columns["hz"] if "hz" in columns else columns["khz"]
        colnames = header
    else:
        if ncols not in (2, 3):
            raise DataError(source, f"{ncols} columns and no header; expected 2 (axis, intensity) or 3 "
                            "(axis, real, imag), or a header row naming the columns", line=first_line)
        if opts["axis"] is None:
            raise AxisUnitError(source, "no header row names the axis column")
        unit, axis_col, real_col = opts["axis"], 0, 1
        imag_col = 2 if ncols == 3 else None
        second = None
        colnames = ["", "", ""]
    if ignored:
        meta["ignored_columns"] = tuple(ignored)

    n = len(rows)
    axis = np.empty(n)
    real = np.empty(n)
    imag = np.empty(n) if imag_col is not None else None
    other = np.empty(n) if second is not None else None
    lines = np.empty(n, dtype=int)
    precision = np.empty(n)
    other_precision = np.empty(n) if second is not None else None
    for i, (lineno, fields) in enumerate(rows):
        if len(fields) != ncols:
            raise DataError(source, f"{len(fields)} values, but line {ref_line} has {ncols}; every row needs "
                            "the same number of columns", line=lineno)
        lines[i] = lineno
        t = fields[axis_col]
        axis[i] = _parse_number(source, t, lineno, axis_col + 1, colnames[axis_col])
        precision[i] = _decimal_precision(t)
        real[i] = _parse_number(source, fields[real_col], lineno, real_col + 1, colnames[real_col])
        if imag is not None:
            imag[i] = _parse_number(source, fields[imag_col], lineno, imag_col + 1, colnames[imag_col])
        if other is not None:
            t2 = fields[second]
            other[i] = _parse_number(source, t2, lineno, second + 1, colnames[second])
            other_precision[i] = _decimal_precision(t2)

    raw = _Raw(fmt=meta["format"], axis=axis, unit=unit, real=real, imag=imag, lines=lines,
               nu_ref_hz=stated.get("nu_ref_hz"), nucleus=stated.get("nucleus"),
               field_tesla=stated.get("field_tesla"), precision=precision, metadata=meta)
    if other is not None:
        raw.implied_nu_ref_hz = _nu_ref_from_columns(source, raw, other, colnames[second], other_precision)
    return raw


def _nu_ref_from_columns(source, raw: _Raw, other: np.ndarray, other_unit: str, other_precision: np.ndarray):
    """nu_ref implied by a file that lists the axis both in ppm and in Hz (or kHz)."""
    if raw.unit == "ppm":
        ppm, ppm_prec = raw.axis, raw.precision
        scale = 1e3 if other_unit == "khz" else 1.0
        hz, hz_prec = other * scale, other_precision * scale
    else:
        scale = 1e3 if raw.unit == "khz" else 1.0
        hz, hz_prec = raw.axis * scale, raw.precision * scale
        ppm, ppm_prec = other, other_precision
    denom = float(np.dot(ppm, ppm))
    if denom == 0.0:
        return None
    nu = 1e6 * float(np.dot(hz, ppm)) / denom
    if not math.isfinite(nu) or nu <= 0:
        raise DataError(source, "the ppm and Hz columns do not describe one positive reference frequency")
    resid = np.abs(hz - ppm * nu / 1e6)
    allowed = 1e-6 * float(np.max(np.abs(hz))) + 0.5 * (hz_prec + ppm_prec * nu / 1e6)
    k = int(np.argmax(resid - allowed))
    if resid[k] > allowed[k]:
        raise DataError(source, f"the ppm and Hz columns disagree (by {_fmt(resid[k])} Hz) with the single "
                        f"reference frequency {_fmt(nu)} Hz that fits them best", line=int(raw.lines[k]))
    return nu


# --------------------------------------------------------------------------
# .npy
# --------------------------------------------------------------------------
def _read_npy(source, p: Path, opts: dict) -> _Raw:
    try:
        with p.open("rb") as fh:
            arr = np.load(fh, allow_pickle=False)
    except PermissionError:
        raise DataError(source, "cannot be read (permission denied)") from None
    except ValueError as err:
        if "pickle" in str(err).lower() or "object" in str(err).lower():
            raise DataError(source, "holds Python objects, which are not loaded (pickled data can run code); "
                            "save a plain numeric array") from None
        raise DataError(source, f"not a readable .npy array ({err})") from None
    except Exception as err:  # numpy raises several kinds for damaged files
        raise DataError(source, f"not a readable .npy array ({type(err).__name__}: {err})") from None
    if not isinstance(arr, np.ndarray):
        raise DataError(source, "not a single .npy array")
    if arr.dtype.kind not in "fiuc":
        raise DataError(source, f"holds {arr.dtype} values; expected numbers (float)")
    if arr.ndim != 2:
        raise DataError(source, f"holds an array of shape {arr.shape}; expected 2 x N or N x 2 "
                        "(row/column 0 the axis, then the intensity)")
    if arr.shape[0] in (2, 3):
        rows = arr
        layout = "rows"
    elif arr.shape[1] in (2, 3):
        rows = arr.T
        layout = "columns"
    else:
        raise DataError(source, f"holds an array of shape {arr.shape}; expected 2 x N or N x 2 "
                        "(or 3 x N / N x 3 with an imaginary part)")
    if opts["axis"] is None:
        raise DataError(source, f"a .npy array does not name its axis unit; pass axis='ppm', 'hz' or 'khz' "
                        f"to say what {layout[:-1]} 0 holds")
    imag = None
    if arr.dtype.kind == "c":
        if rows.shape[0] != 2 or np.any(rows[0].imag != 0):
            raise DataError(source, "a complex .npy array must have 2 rows/columns: a real axis, then the "
                            "complex spectrum")
        axis, real, imag = rows[0].real, rows[1].real, rows[1].imag
    else:
        axis, real = rows[0], rows[1]
        if rows.shape[0] == 3:
            imag = rows[2]
    return _Raw(fmt=f"NumPy .npy ({layout})", axis=np.array(axis, dtype=float), unit=opts["axis"],
                real=np.array(real, dtype=float), imag=None if imag is None else np.array(imag, dtype=float),
                metadata={"format": f"NumPy .npy ({layout})"})


# --------------------------------------------------------------------------
# JCAMP-DX
# --------------------------------------------------------------------------
def _jcamp_value(dic: dict, key: str) -> str | None:
    v = dic.get(key)
    if not v:
        return None
    return str(v[0]).strip()


def _jcamp_float(source, dic: dict, key: str, label: str) -> float | None:
    text = _jcamp_value(dic, key)
    if text is None:
        return None
    try:
        v = float(text)
    except ValueError:
        raise DataError(source, f"JCAMP-DX ##{label}= holds {text!r}, not a number") from None
    if not math.isfinite(v):
        raise DataError(source, f"JCAMP-DX ##{label}= holds {text!r}; it must be finite")
    return v


def _jcamp_unit(source, text: str, label: str) -> str:
    u = text.strip().upper().replace(" ", "")
    if u in ("HZ", "PPM", "KHZ"):
        return u.lower()
    raise DataError(source, f"JCAMP-DX {label} is {text!r}; only HZ, KHZ and PPM frequency axes are read")


def _jcamp_label(text: str) -> str:
    """A JCAMP-DX label in its compared form: upper case without spaces, dashes, slashes or underscores."""
    return re.sub(r"[\s\-/_]", "", text).upper()


#: labels whose (XY..XY) table lists the points one by one
_POINT_TABLE_LABELS = ("XYPOINTS", "XYDATA")


def _jcamp_point_table(source, data: bytes) -> _Raw | None:
    """A JCAMP-DX spectrum in the point form ``##XYPOINTS=(XY..XY)``: explicit x, y pairs.

    The pairs are separated by semicolons, spaces or line ends, x from y by a
    comma (or spaces); ``##XFACTOR=`` and ``##YFACTOR=`` scale them.  Returns
    None when the file holds no such table.

    References
    ----------
    R. S. McDonald, P. A. Wilks, Appl. Spectrosc. 42 (1988) 151 (JCAMP-DX, the
    (XY..XY) form); A. N. Davies, P. Lampen, Appl. Spectrosc. 47 (1993) 1093
    (JCAMP-DX for NMR).
    """
    text = data.decode("utf-8-sig", errors="replace")
    labels: dict = {}
    pairs: list[tuple[str, str, int]] = []
    in_table = False
    for lineno, line in enumerate(re.split(r"\r\n|\n|\r", text), 1):
        body = line.split("$$", 1)[0].strip()  # $$ starts a comment
        if body.startswith("##"):
            in_table = False
            label, _, value = body[2:].partition("=")
            key = _jcamp_label(label)
            labels.setdefault(key, (value.strip(), lineno))
            if key in _POINT_TABLE_LABELS and _jcamp_label(value).startswith("(XY..XY)"):
                in_table = True
                if pairs:
                    raise DataError(source, "holds more than one (XY..XY) table; give one spectrum per file",
                                    line=lineno)
            continue
        if not in_table or not body:
            continue
        for group in re.split(r"[;]|\s{2,}|\t", body):
            group = group.strip()
            if not group:
                continue
            parts = [q for q in re.split(r"[,\s]+", group) if q]
            if len(parts) % 2:
                raise DataError(source, f"(XY..XY) point {group!r} is not an x, y pair", line=lineno)
            for k in range(0, len(parts), 2):
                pairs.append((parts[k], parts[k + 1], lineno))
    if not pairs:
        return None
    xfactor = _point_factor(source, labels, "XFACTOR")
    yfactor = _point_factor(source, labels, "YFACTOR")
    n = len(pairs)
    x = np.empty(n)
    y = np.empty(n)
    lines = np.empty(n, dtype=int)
    precision = np.empty(n)
    for i, (xt, yt, lineno) in enumerate(pairs):
        x[i] = _parse_number(source, xt, lineno, 1, "x") * xfactor
        y[i] = _parse_number(source, yt, lineno, 2, "y") * yfactor
        lines[i] = lineno
        precision[i] = _decimal_precision(xt) * abs(xfactor)
    if not np.all(np.isfinite(x)) or not np.all(np.isfinite(y)):
        raise DataError(source, "##XFACTOR= or ##YFACTOR= scales the (XY..XY) points beyond the largest number")
    unit_text, unit_line = labels.get("XUNITS", (None, None))
    if not unit_text:
        raise DataError(source, "JCAMP-DX file lacks ##XUNITS=; it defines the axis of the (XY..XY) points")
    unit = _jcamp_unit(source, unit_text, "XUNITS")
    dtype = labels.get("DATATYPE", ("", 0))[0]
    norm = _jcamp_label(dtype)
    if norm == "NMRFID":
        raise DataError(source, "JCAMP-DX DATA TYPE is NMR FID (time-domain data); give the processed "
                        "spectrum (NMR SPECTRUM)")
    if dtype and norm != "NMRSPECTRUM":
        raise DataError(source, f"JCAMP-DX DATA TYPE is {dtype!r}; only NMR SPECTRUM is read")

    def number(key, label):
        value, lineno = labels.get(key, (None, None))
        if not value:
            return None
        if not _NUMBER.fullmatch(value.strip()):
            raise DataError(source, f"JCAMP-DX ##{label}= holds {value!r}, not a number", line=lineno)
        v = float(value)
        if not (math.isfinite(v) and v > 0):
            raise DataError(source, f"JCAMP-DX ##{label}= holds {value!r}; it must be a finite number > 0",
                            line=lineno)
        return v

    npoints = labels.get("NPOINTS", (None, None))
    if npoints[0] and _NUMBER.fullmatch(npoints[0].strip()) and float(npoints[0]) != n:
        raise DataError(source, f"JCAMP-DX ##NPOINTS={npoints[0].strip()}, but the (XY..XY) table holds {n} "
                        "points (damaged or truncated data?)", line=npoints[1])
    obs = number(".OBSERVEFREQUENCY", ".OBSERVE FREQUENCY")
    field_t = number("$FIELDTESLA", "$FIELD TESLA")
    nuc_text = labels.get(".OBSERVENUCLEUS", ("", 0))[0]
    nucleus = (_canonical_nucleus(nuc_text) or nuc_text.replace("^", "").strip()) if nuc_text else None
    meta = {"format": "JCAMP-DX XYPOINTS"}
    for key, name in (("TITLE", "title"), ("JCAMPDX", "jcamp_dx"), ("ORIGIN", "origin"), ("OWNER", "owner"),
                      ("DATE", "date"), ("LONGDATE", "long_date"), ("XUNITS", "xunits"), ("YUNITS", "yunits")):
        if labels.get(key, ("",))[0]:
            meta[f"file.{name}"] = " ".join(labels[key][0].split())
    return _Raw(fmt=meta["format"], axis=x, unit=unit, real=y, imag=None, lines=lines,
                nu_ref_hz=None if obs is None else obs * 1e6, nucleus=nucleus, field_tesla=field_t,
                precision=precision, metadata=meta)


def _point_factor(source, labels: dict, key: str) -> float:
    value, lineno = labels.get(key, ("", None))
    if not value:
        return 1.0
    if not _NUMBER.fullmatch(value.strip()) or not math.isfinite(float(value)) or float(value) == 0:
        raise DataError(source, f"JCAMP-DX ##{key}= holds {value!r}; it must be a finite number other than 0",
                        line=lineno)
    return float(value)


def read_through_nmrglue(source, module: str, read, *, needs: str, failure: str):
    """Run one of nmrglue's readers: its failures as one :class:`DataError` line, its warnings as notes.

    Parameters
    ----------
    source : str
        The file or folder, as the user named it (for messages).
    module : str
        The module of ``nmrglue.fileio`` (``"bruker"``, ``"pipe"``, ``"jcampdx"``, ...).
    read : callable
        Called with that module; returns what the reader returns.
    needs : str
        What needs nmrglue, for the message when it is missing ("reading JCAMP-DX").
    failure : str
        The message when the reader fails; the reader's own error follows in parentheses.

    Returns
    -------
    result
        What ``read`` returned.
    notes : list of str
        The reader's warnings, one line each.

    Raises
    ------
    DataError
        nmrglue missing, or the reader failed.

    Examples
    --------
    >>> out, notes = read_through_nmrglue("x", "jcampdx", lambda m: m.__name__, needs="JCAMP-DX", failure="bad")
    >>> out, notes
    ('nmrglue.fileio.jcampdx', [])
    """
    import importlib

    try:
        mod = importlib.import_module(f"nmrglue.fileio.{module}")
    except ImportError as err:  # pragma: no cover - nmrglue is a declared dependency
        raise DataError(source, f"{needs} needs the nmrglue package ({err})") from None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            result = read(mod)
        except Exception as err:
            raise DataError(source, f"{failure} ({type(err).__name__}: {err})") from None
    return result, [" ".join(str(w.message).split()) for w in caught]


def _read_jcamp(source, p: Path, opts: dict, data: bytes) -> _Raw:
    _check_binary(source, data, "JCAMP-DX text")
    if not data.lstrip(b"\xef\xbb\xbf \t\r\n").startswith(b"##"):
        raise DataError(source, "not a JCAMP-DX file (it should start with a ##TITLE= line)")
    if opts["axis"] is not None:
        raise DataError(source, "option axis is for text and .npy files; a JCAMP-DX file states its own axis")
    (dic, values), notes = read_through_nmrglue(source, "jcampdx", lambda m: m.read(str(p)),
                                                needs="reading JCAMP-DX", failure="not a readable JCAMP-DX spectrum")
    if values is None:
        points = _jcamp_point_table(source, data)
        if points is not None:
            return points
        said = f" (the reader says: {notes[0]})" if notes else ""
        raise DataError(source, f"no spectrum data could be decoded from ##XYDATA, ##XYPOINTS or ##DATA TABLE{said}")

    dtype = _jcamp_value(dic, "DATATYPE")
    norm = (dtype or "").upper().replace(" ", "")
    if norm == "NMRFID":
        raise DataError(source, "JCAMP-DX DATA TYPE is NMR FID (time-domain data); give the processed "
                        "spectrum (NMR SPECTRUM)")
    if dtype is not None and norm != "NMRSPECTRUM":
        raise DataError(source, f"JCAMP-DX DATA TYPE is {dtype!r}; only NMR SPECTRUM is read")

    if isinstance(values, list):
        real, imag = values[0], values[1]
        if real is None:
            raise DataError(source, "JCAMP-DX NTUPLES hold an imaginary page but no real page")
        if imag is not None and len(imag) != len(real):
            raise DataError(source, f"JCAMP-DX real and imaginary pages differ in length "
                            f"({len(real)} and {len(imag)} points)")
    else:
        real, imag = values, None
    real = np.asarray(real, dtype=float)
    imag = None if imag is None else np.asarray(imag, dtype=float)
    n = real.size

    ntuples = (_jcamp_value(dic, "DATACLASS") or "").upper().replace(" ", "") == "NTUPLES"
    if ntuples:
        try:
            symbols = [s.strip().upper() for s in _jcamp_value(dic, "SYMBOL").split(",")]
            ix = symbols.index("X")
            first = float(_jcamp_value(dic, "FIRST").split(",")[ix])
            last = float(_jcamp_value(dic, "LAST").split(",")[ix])
            unit_text = _jcamp_value(dic, "UNITS").split(",")[ix]
        except (AttributeError, ValueError, IndexError):
            raise DataError(source, "JCAMP-DX NTUPLES do not give the X axis (##SYMBOL=, ##FIRST=, ##LAST=, "
                            "##UNITS= with an X entry)") from None
        unit = _jcamp_unit(source, unit_text, "NTUPLES X UNITS")
    else:
        first = _jcamp_float(source, dic, "FIRSTX", "FIRSTX")
        last = _jcamp_float(source, dic, "LASTX", "LASTX")
        unit_text = _jcamp_value(dic, "XUNITS")
        missing = [k for k, v in (("FIRSTX", first), ("LASTX", last), ("XUNITS", unit_text)) if v is None]
        if missing:
            raise DataError(source, f"JCAMP-DX file lacks ##{'=, ##'.join(missing)}=; they define the axis")
        unit = _jcamp_unit(source, unit_text, "XUNITS")
        npoints = _jcamp_float(source, dic, "NPOINTS", "NPOINTS")
        if npoints is not None and int(npoints) != n:
            raise DataError(source, f"JCAMP-DX ##NPOINTS={int(npoints)}, but the data table decodes to {n} "
                            "values (damaged or truncated data?)")
    if n >= 2 and first == last:
        raise DataError(source, f"JCAMP-DX first and last X are both {first!r}; the axis has no width")

    obs = _jcamp_float(source, dic, ".OBSERVEFREQUENCY", ".OBSERVE FREQUENCY")
    if obs is not None and obs <= 0:
        raise DataError(source, f"JCAMP-DX ##.OBSERVE FREQUENCY= must be > 0 MHz; got {obs!r}")
    nuc_text = _jcamp_value(dic, ".OBSERVENUCLEUS")
    nucleus = None
    if nuc_text:
        nucleus = _canonical_nucleus(nuc_text) or nuc_text.replace("^", "").strip()
    field_t = _jcamp_float(source, dic, "$FIELDTESLA", "$FIELD TESLA")
    if field_t is not None and field_t <= 0:
        raise DataError(source, f"JCAMP-DX ##$FIELD TESLA= must be > 0 T; got {field_t!r}")

    anchor = None
    shiftref = _jcamp_value(dic, ".SHIFTREFERENCE")
    if shiftref:
        parts = [s.strip() for s in shiftref.strip("() ").split(",")]
        try:
            point, shift = int(float(parts[-2])), float(parts[-1])
        except (ValueError, IndexError):
            raise DataError(source, f"JCAMP-DX ##.SHIFT REFERENCE= {shiftref!r} does not end with a point "
                            "number and its shift in ppm") from None
        if not 1 <= point <= n:
            raise DataError(source, f"JCAMP-DX ##.SHIFT REFERENCE= names point {point}, outside 1..{n}")
        anchor = (point - 1, shift, f".SHIFT REFERENCE (point {point} at {shift:g} ppm)")
    else:
        offset = _jcamp_float(source, dic, "$OFFSET", "$OFFSET")
        if offset is not None:
            anchor = (0, offset, f"$OFFSET (first point at {offset:g} ppm)")

    meta = {"format": "JCAMP-DX" + (" NTUPLES" if ntuples else " XYDATA")}
    for key, name in (("TITLE", "title"), ("JCAMPDX", "jcamp_dx"), ("ORIGIN", "origin"), ("OWNER", "owner"),
                      ("DATE", "date"), ("LONGDATE", "long_date"), ("XUNITS", "xunits"), ("YUNITS", "yunits")):
        v = _jcamp_value(dic, key)
        if v is not None:
            meta[f"file.{name}"] = " ".join(v.split())
    if notes:
        meta["reader_notes"] = tuple(notes[:10])
    return _Raw(fmt=meta["format"], axis=np.linspace(first, last, n), unit=unit, real=real, imag=imag,
                nu_ref_hz=None if obs is None else obs * 1e6, nucleus=nucleus, field_tesla=field_t,
                anchor=anchor, metadata=meta)


# --------------------------------------------------------------------------
# Bruker processed data
# --------------------------------------------------------------------------
def _read_bruker_dir(source, d: Path, opts: dict) -> _Raw:
    if (d / "2rr").exists() or (d / "3rrr").exists():
        raise DataError(source, "holds multi-dimensional processed data (2rr/3rrr); a 1D spectrum (1r) is read here "
                                "(a 2rr is read for a 2D measurement: experiment = \"mqmas\" or \"stmas\")")
    if not (d / "1r").is_file():
        pdata = d / "pdata"
        if pdata.is_dir():
            if (pdata / "1").is_dir():
                return _read_bruker_dir(source, pdata / "1", opts)
            found = sorted(q.name for q in pdata.iterdir() if q.is_dir())
            raise DataError(source, f"has no pdata/1; give one of its processed-data directories "
                            f"({', '.join('pdata/' + f for f in found) or 'none found'})")
        if (d / "fid").exists() or (d / "ser").exists():
            raise DataError(source, "holds only time-domain data (fid/ser) and no processed spectrum; "
                            "process it first and give the pdata/N directory (1r and procs)")
        raise DataError(source, "is a directory but not a processed 1D spectrum (expected 1r and procs, "
                        "or an experiment directory with pdata/1)")
    if not (d / "procs").is_file():
        raise DataError(source, "has 1r but no procs file; the processing parameters define the axis")
    if opts["axis"] is not None:
        raise DataError(source, "option axis is for text and .npy files; Bruker processed data state their axis")
    pdir = os.path.abspath(str(d))
    (dic, values), notes = read_through_nmrglue(source, "bruker", lambda m: m.read_pdata(pdir, all_components=True),
                                                needs="reading Bruker data",
                                                failure="the processed data could not be read")
    if isinstance(values, list):
        real, imag = np.asarray(values[0], dtype=float), np.asarray(values[1], dtype=float)
    else:
        real, imag = np.asarray(values, dtype=float), None
    procs = dic.get("procs", {})
    params = {}
    for key in ("SI", "SF", "OFFSET", "SW_p"):
        v = procs.get(key)
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise DataError(source, f"procs lacks a numeric {key} (needed for the ppm axis); found {v!r}")
        params[key] = float(v)
    si = int(params["SI"])
    if params["SF"] <= 0 or params["SW_p"] <= 0:
        raise DataError(source, f"procs SF ({params['SF']!r} MHz) and SW_p ({params['SW_p']!r} Hz) must be > 0")
    if real.ndim != 1 or real.size != si:
        raise DataError(source, f"1r holds {real.size} points but procs says SI = {si}")
    if imag is not None and imag.shape != real.shape:
        raise DataError(source, f"1i holds {imag.size} points but 1r holds {real.size}")
    ppm = params["OFFSET"] - np.arange(si) * params["SW_p"] / (params["SF"] * si)
    acqus = dic.get("acqus", {})
    nuc_text = acqus.get("NUC1") or procs.get("AXNUC")
    nucleus = None
    if isinstance(nuc_text, str) and nuc_text.strip() and nuc_text.strip().lower() != "off":
        nucleus = _canonical_nucleus(nuc_text) or nuc_text.strip()
    meta = {"format": "Bruker processed 1D (1r" + ("+1i" if imag is not None else "") + ", procs)",
            "bruker.SF_MHz": params["SF"], "bruker.OFFSET_ppm": params["OFFSET"],
            "bruker.SW_p_Hz": params["SW_p"], "bruker.SI": si, "bruker.directory": pdir}
    if "NC_proc" in procs:
        meta["bruker.NC_proc"] = procs["NC_proc"]
    if notes:
        meta["reader_notes"] = tuple(notes[:10])
    return _Raw(fmt=meta["format"], axis=ppm, unit="ppm", real=real, imag=imag,
                nu_ref_hz=params["SF"] * 1e6, nucleus=nucleus, metadata=meta)


# --------------------------------------------------------------------------
# checks common to every format
# --------------------------------------------------------------------------
def _relative_difference(a: float, b: float) -> float:
    return abs(a - b) / max(abs(a), abs(b))


def _resolve_reference(source, raw: _Raw, opts: dict) -> tuple[float, str | None, float | None, dict]:
    meta: dict = {}
    # nucleus
    nucleus, given_nuc = raw.nucleus, opts["nucleus"]
    if nucleus is not None and given_nuc is not None and nucleus != given_nuc:
        raise DataError(source, f"the file states the nucleus {nucleus}, but nucleus={given_nuc!r} was given; "
                        "leave the option out or read the right file")
    if nucleus is not None:
        meta["nucleus_source"] = "stated by the file"
    elif given_nuc is not None:
        nucleus = given_nuc
        meta["nucleus_source"] = "given"
    # field
    field_t, given_field = raw.field_tesla, opts["field_tesla"]
    if field_t is not None and given_field is not None \
            and _relative_difference(field_t, given_field) > MATCH_TOLERANCE:
        raise DataError(source, f"the file states the field {_fmt(field_t)} T, but field_tesla={given_field!r} "
                        f"was given (they differ by more than {MATCH_TOLERANCE:g} relative)")
    if field_t is not None:
        field_source = "stated by the file"
    elif given_field is not None:
        field_t, field_source = given_field, "given"
    else:
        field_source = None
    # reference frequency
    nu, given_nu = raw.nu_ref_hz, opts["nu_ref_hz"]
    for theirs, label in ((raw.nu_ref_hz, "the file states"), (raw.implied_nu_ref_hz, "the file's ppm and Hz "
                                                                                         "columns imply")):
        if theirs is not None and given_nu is not None \
                and _relative_difference(theirs, given_nu) > MATCH_TOLERANCE:
            raise DataError(source, f"{label} the reference frequency {_fmt(theirs)} Hz, but nu_ref_hz="
                            f"{given_nu!r} was given (they differ by more than {MATCH_TOLERANCE:g} relative)")
    nuclide = None
    if nucleus is not None:
        try:
            nuclide = get_nuclide(nucleus)
        except UnknownNuclideError:
            nuclide = None
    if nu is not None:
        meta["nu_ref_source"] = "stated by the file"
    elif given_nu is not None:
        nu = given_nu
        meta["nu_ref_source"] = "given"
    elif raw.implied_nu_ref_hz is not None:
        nu = raw.implied_nu_ref_hz
        meta["nu_ref_source"] = "implied by the file's ppm and Hz columns"
    elif nuclide is not None and field_t is not None:
        nu = nuclide.larmor_hz(field_t)
        both = {meta.get("nucleus_source"), field_source}
        meta["nu_ref_source"] = f"nucleus and field ({' and '.join(sorted(both))})"
    else:
        have = []
        if nucleus is not None:
            have.append(f"nucleus {nucleus}")
        if field_t is not None:
            have.append(f"field {_fmt(field_t)} T")
        known = f" (known: {', '.join(have)})" if have else ""
        raise DataError(source, f"the reference frequency is unknown: the file states none{known}; pass "
                        "nu_ref_hz=..., or nucleus=... and field_tesla=...")
    if field_t is None and nuclide is not None:
        field_t = nu / nuclide.larmor_hz(1.0)
        field_source = "implied by the reference frequency and the nucleus"
    if field_source is not None:
        meta["field_source"] = field_source
    return nu, nucleus, field_t, meta


def _finish(source, raw: _Raw, opts: dict) -> MeasuredSpectrum:
    n = raw.axis.size
    if n < MIN_POINTS:
        raise DataError(source, f"only {n} data point{'s' if n != 1 else ''}; at least {MIN_POINTS} are needed")
    for name, arr in (("axis", raw.axis), ("intensity", raw.real), ("imaginary part", raw.imag)):
        if arr is None:
            continue
        bad = np.flatnonzero(~np.isfinite(arr))
        if bad.size:
            pre, line = _where(raw, int(bad[0]))
            raise DataError(source, f"{pre}the {name} holds {arr[bad[0]]!r}; every value must be a finite number",
                            line=line)
    step = np.diff(raw.axis)
    direction = 1.0 if step[0] > 0 else -1.0
    bad = np.flatnonzero(step * direction <= 0)
    if bad.size:
        k = int(bad[0]) + 1
        pre, line = _where(raw, k)
        prev = _where(raw, k - 1)
        prev_at = f"line {prev[1]}" if prev[1] is not None else prev[0].rstrip(": ")
        unit = _UNIT_LABEL[raw.unit]
        if step[k - 1] == 0:
            raise DataError(source, f"{pre}duplicate axis value {_fmt(raw.axis[k])} {unit} (also on "
                            f"{prev_at}); each axis value must appear once", line=line)
        order = "ascending" if direction > 0 else "descending"
        raise DataError(source, f"{pre}the axis is not monotonic: {_fmt(raw.axis[k])} {unit} follows "
                        f"{_fmt(raw.axis[k - 1])} in an axis that starts {order}; it must be strictly "
                        "ascending or strictly descending", line=line)

    # to ascending order
    axis, real, imag = raw.axis, raw.real, raw.imag
    meta = dict(raw.metadata)
    meta["axis_in_file"] = f"{raw.unit}, {'ascending' if direction > 0 else 'descending'}"
    nu, nucleus, field_t, refmeta = _resolve_reference(source, raw, opts)
    meta.update(refmeta)
    if raw.anchor is not None:
        index, shift_ppm, label = raw.anchor
        to_ppm = {"ppm": 1.0, "hz": 1e6 / nu, "khz": 1e9 / nu}[raw.unit]
        axis = axis + (shift_ppm / to_ppm - axis[index])
        meta["shift_reference"] = label
    precision = np.zeros(n) if raw.precision is None else raw.precision
    if direction < 0:
        axis, real, precision = axis[::-1], real[::-1], precision[::-1]
        imag = None if imag is None else imag[::-1]

    # uniform steps: each may differ from the mean step by the tolerance, plus
    # the rounding of its two end values as printed (half a printing step each)
    step = np.diff(axis)
    mean = (axis[-1] - axis[0]) / (n - 1)
    allowed = UNIFORM_STEP_TOLERANCE * abs(mean) + 0.5 * (precision[:-1] + precision[1:])
    if np.any(np.abs(step - mean) > allowed):
        printing = " plus the rounding of the printed values" if np.any(precision) else ""
        desc = (f"steps range from {_fmt(step.min())} to {_fmt(step.max())} {_UNIT_LABEL[raw.unit]} (mean "
                f"{_fmt(mean)}; allowed deviation {UNIFORM_STEP_TOLERANCE:g} of the mean step{printing})")
        if not opts["resample"]:
            raise DataError(source, f"the axis is not uniform: {desc}; pass resample=True to interpolate "
                            "linearly onto a uniform axis with the same number of points")
        uniform = np.linspace(axis[0], axis[-1], n)
        real = np.interp(uniform, axis, real)
        imag = None if imag is None else np.interp(uniform, axis, imag)
        axis = uniform
        meta["resampled"] = f"linear interpolation onto {n} uniform points; in the file {desc}"
    if raw.precision is not None and not meta.get("resampled"):
        meta["axis_precision_hz"] = 0.5 * float(np.max(precision)) * {"ppm": nu / 1e6, "hz": 1.0,
                                                                       "khz": 1e3}[raw.unit]

    if raw.unit == "ppm":
        ppm = axis
        hz = axis * nu / 1e6
    else:
        hz = axis * (1e3 if raw.unit == "khz" else 1.0)
        ppm = 1e6 * hz / nu
    return MeasuredSpectrum(hz=hz, ppm=ppm, intensity=real, imag=imag, nu_ref_hz=nu, source=source,
                            nucleus=nucleus, field_tesla=field_t, metadata=meta)


# --------------------------------------------------------------------------
# comparison with a model
# --------------------------------------------------------------------------
def compare_with_model(spectrum: MeasuredSpectrum, nucleus_name: str, field_tesla: float) -> list[str]:
    """Plain-language warnings where a measured spectrum disagrees with a model's nucleus or field.

    Parameters
    ----------
    spectrum : MeasuredSpectrum
        The measured spectrum (as read by :func:`read_spectrum`).
    nucleus_name : str
        The model's nucleus, e.g. ``"27Al"``.
    field_tesla : float
        The model's field B0 (T), finite and > 0.

    Returns
    -------
    list of str
        One sentence per disagreement (empty when everything agrees or
        cannot be checked): a different nucleus; a field differing by more
        than ``MATCH_TOLERANCE`` (1e-4) relative; a reference frequency that
        differs from the model's nu_ref (the nucleus's reference frequency at
        the model's field) by more than the same tolerance.  A field that the
        file only implies through its reference frequency is not reported
        twice: the reference-frequency sentence covers it.

    Raises
    ------
    ValueError
        If ``nucleus_name`` is not a known nucleus (``UnknownNuclideError``)
        or ``field_tesla`` is not a finite number > 0.

    See Also
    --------
    read_spectrum

    References
    ----------
    .. [1] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (nu_ref from
       the frequency ratio Xi).

    Examples
    --------
    >>> import numpy as np
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> nu = get_nuclide("27Al").larmor_hz(14.1)
    >>> hz = np.linspace(-2e4, 2e4, 64)
    >>> spec = MeasuredSpectrum(hz=hz, ppm=1e6 * hz / nu, intensity=np.ones(64), imag=None,
    ...                         nu_ref_hz=nu, source="example", nucleus="27Al", field_tesla=14.1)
    >>> compare_with_model(spec, "27Al", 14.1)
    []
    >>> for line in compare_with_model(spec, "27Al", 9.4):
    ...     print(line)
    the file's field is 14.1 T but the model's is 9.4 T (relative difference 0.33, tolerance 0.0001)
    the file's reference frequency is 156.4... MHz but the model's (27Al at 9.4 T) is 104.2... MHz
    (relative difference 0.33, tolerance 0.0001); the ppm scales will not line up
    """
    model_nuclide = get_nuclide(nucleus_name)
    model_nu = model_nuclide.larmor_hz(field_tesla)
    model_field = float(field_tesla)
    out: list[str] = []
    file_nuc = spectrum.nucleus
    same_nucleus = True
    if file_nuc is not None:
        canonical = _canonical_nucleus(file_nuc)
        if (canonical or file_nuc.strip()).lower() != model_nuclide.name.lower():
            same_nucleus = False
            out.append(f"the file's nucleus is {file_nuc} but the model's is {model_nuclide.name}")
    source = spectrum.metadata.get("field_source")
    if spectrum.field_tesla is not None and source != "implied by the reference frequency and the nucleus":
        rel = _relative_difference(spectrum.field_tesla, model_field)
        if rel > MATCH_TOLERANCE:
            out.append(f"the file's field is {spectrum.field_tesla:.6g} T but the model's is {model_field:.6g} T "
                       f"(relative difference {rel:.2g}, tolerance {MATCH_TOLERANCE:g})")
    if same_nucleus:
        rel = _relative_difference(spectrum.nu_ref_hz, model_nu)
        if rel > MATCH_TOLERANCE:
            out.append(f"the file's reference frequency is {spectrum.nu_ref_hz / 1e6:.6f} MHz but the model's "
                       f"({model_nuclide.name} at {model_field:.6g} T) is {model_nu / 1e6:.6f} MHz (relative "
                       f"difference {rel:.2g}, tolerance {MATCH_TOLERANCE:g}); the ppm scales will not line up")
    return out


# --------------------------------------------------------------------------
# writers
# --------------------------------------------------------------------------
def _metadata_text(value) -> str:
    if isinstance(value, Mapping):
        value = dict(value)
    if isinstance(value, (dict, list, tuple)):
        value = json.dumps(value, default=str)
    return " ".join(str(value).split())


def write_spectrum_text(path, spectrum: MeasuredSpectrum, *, force: bool = False) -> Path:
    """Write a measured spectrum as CSV that :func:`read_spectrum` reads back exactly.

    The file starts with ``# key: value`` lines (source, nucleus,
    field_tesla, nu_ref_hz, then the other metadata), then the header
    ``ppm,hz,intensity`` (plus ``imag`` when the spectrum has an imaginary
    part) and one row per point in ascending Hz.  Numbers are written with the
    shortest text that reads back to the same double.

    Parameters
    ----------
    path : str or os.PathLike
        Output file; missing parent folders are made.
    spectrum : MeasuredSpectrum
        The spectrum to write.
    force : bool, optional
        Overwrite an existing file.  The file the spectrum was read from is
        never overwritten.

    Returns
    -------
    pathlib.Path
        The file written (atomically: a temporary file in the same folder,
        then a rename; permissions follow the umask).

    Raises
    ------
    OutputExistsError
        If the file exists and ``force`` is False, or it is the spectrum's
        source file.

    See Also
    --------
    read_spectrum, write_jcamp

    References
    ----------
    .. [1] Y. Shafranovich, RFC 4180 (2005), "Common Format and MIME Type for
       Comma-Separated Values (CSV) Files" (from memory).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> import numpy as np
    >>> hz = np.linspace(-4000.0, 4000.0, 128)
    >>> spec = MeasuredSpectrum(hz=hz, ppm=1e6 * hz / 121.5e6, intensity=1 / (1 + (hz / 300.0) ** 2),
    ...                         imag=None, nu_ref_hz=121.5e6, source="example")
    >>> with tempfile.TemporaryDirectory() as d:
    ...     out = write_spectrum_text(pathlib.Path(d) / "copy.csv", spec)
    ...     back = read_spectrum(out)
    ...     header = [ln for ln in out.read_text().splitlines() if not ln.startswith("#")][0]
    >>> header, bool(np.array_equal(back.hz, spec.hz)), bool(np.array_equal(back.intensity, spec.intensity))
    ('ppm,hz,intensity', True, True)
    """
    lines = [f"# source: {_metadata_text(spectrum.source)}"]
    if spectrum.nucleus is not None:
        lines.append(f"# nucleus: {spectrum.nucleus}")
    if spectrum.field_tesla is not None:
        lines.append(f"# field_tesla: {spectrum.field_tesla!r}")
    lines.append(f"# nu_ref_hz: {spectrum.nu_ref_hz!r}")
    reserved = {"source", "nucleus", "field_tesla", "nu_ref_hz"}
    for key, value in spectrum.metadata.items():
        k = key[5:] if key.startswith("file.") else key
        if k in reserved or not _KEY_LINE.match(f"{k}: x") or k.strip() != k:
            continue
        reserved.add(k)
        lines.append(f"# {k}: {_metadata_text(value)}")
    has_imag = spectrum.imag is not None
    lines.append("ppm,hz,intensity" + (",imag" if has_imag else ""))
    cols = [spectrum.ppm, spectrum.hz, spectrum.intensity] + ([spectrum.imag] if has_imag else [])
    for row in zip(*(c.tolist() for c in cols)):
        lines.append(",".join(repr(v) for v in row))
    return write_text_atomic(path, "\n".join(lines) + "\n", force=force,
                             protect=[q for q in (spectrum.source,) if q])


def _fixed(x: float) -> str:
    """An abscissa for an XYDATA line: fixed-point (no exponent), trailing zeros trimmed."""
    s = f"{x:.6f}".rstrip("0").rstrip(".")
    return "0" if s in ("", "-0") else s


_SQZ = ("@ABCDEFGHI", "@abcdefghi")
_DIF = ("%JKLMNOPQR", "%jklmnopqr")
_DUP = " STUVWXYZs"


def _pseudo(value: int, table: tuple[str, str]) -> str:
    digits = str(abs(value))
    return table[0 if value >= 0 else 1][int(digits[0])] + digits[1:]


def _dup(count: int) -> str:
    digits = str(count)
    return _DUP[int(digits[0])] + digits[1:]


def _affn_lines(x: np.ndarray, y: list[int]) -> list[str]:
    out = []
    i, n = 0, len(y)
    while i < n:
        line = _fixed(x[i])
        j = i
        while j < n:
            token = f" {y[j]}"
            if j > i and len(line) + len(token) > _JCAMP_LINE_LIMIT:
                break
            line += token
            j += 1
        out.append(line)
        i = j
    return out


def _difdup_lines(x: np.ndarray, y: list[int]) -> list[str]:
    """DIF form with DUP counts; each line starts with its first ordinate in SQZ form.

    The last ordinate of each line is repeated (in SQZ form) as the first of
    the next line, the Y-value check of the DIF form; a final line holds the
    last point alone as the check of the last line.
    """
    out = []
    n = len(y)
    k = 0
    while True:
        line = f"{_fixed(x[k])} {_pseudo(y[k], _SQZ)}"
        j = k + 1
        while j < n:
            d = y[j] - y[j - 1]
            r = 1
            while j + r < n and y[j + r] - y[j + r - 1] == d:
                r += 1
            token = _pseudo(d, _DIF) + (_dup(r) if r > 1 else "")
            if j > k + 1 and len(line) + len(token) > _JCAMP_LINE_LIMIT:
                break  # (a first token always fits: abscissa + SQZ + DIF/DUP < 80 characters)
            line += token
            j += r
        out.append(line)
        if j >= n:
            out.append(f"{_fixed(x[n - 1])} {_pseudo(y[n - 1], _SQZ)}")
            return out
        k = j - 1


def _label_text(value) -> str:
    return " ".join(str(value).replace("$$", "$").split()) or "not stated"


def write_jcamp(path, spectrum: MeasuredSpectrum, *, force: bool = False, compress: bool = False) -> Path:
    """Write a measured spectrum as a JCAMP-DX 5.01 1D NMR spectrum.

    The file holds ``##TITLE``, ``##JCAMP-DX=5.01``, ``##DATA TYPE=NMR
    SPECTRUM``, ``##DATA CLASS=XYDATA``, ``##ORIGIN``, ``##OWNER``,
    ``##.OBSERVE FREQUENCY`` (nu_ref in MHz: 0 ppm), ``##.OBSERVE NUCLEUS``
    (when known), ``##$FIELD TESLA`` (a private label, when the field is
    known), ``##XUNITS=HZ`` (offsets from nu_ref, so ppm = X / observe
    frequency), ``##YUNITS=ARBITRARY UNITS``, ``##XFACTOR``, ``##YFACTOR``,
    ``##FIRSTX``, ``##LASTX``, ``##DELTAX``, ``##NPOINTS``, ``##FIRSTY`` and
    ``##XYDATA=(X++(Y..Y))``: in AFFN (plain integers), or with
    ``compress=True`` in the DIF form with DUP counts (first ordinate of each
    line in SQZ form, the Y-value check at each line start), lines of at most
    80 characters.

    Ordinates are integers times YFACTOR, scaled so that the largest
    magnitude is 2**31 - 1: the written intensities equal the spectrum's to
    within 2.4e-10 of its largest magnitude.  The imaginary part is not
    written (XYDATA holds one ordinate).  The axis is written as FIRSTX,
    LASTX and NPOINTS, i.e. uniform; a spectrum whose points stray from a
    uniform axis by more than 1e-3 of a step (or by more than the printing
    precision of the text file it was read from) is refused.

    Parameters
    ----------
    path : str or os.PathLike
        Output file; missing parent folders are made.
    spectrum : MeasuredSpectrum
        The spectrum to write.
    force : bool, optional
        Overwrite an existing file.  The file the spectrum was read from is
        never overwritten.
    compress : bool, optional
        Write the DIF/DUP compressed form instead of AFFN.

    Returns
    -------
    pathlib.Path
        The file written (atomically; permissions follow the umask).

    Raises
    ------
    OutputExistsError
        If the file exists and ``force`` is False, or it is the source file.
    ValueError
        If the axis is not uniform.

    See Also
    --------
    read_spectrum, write_spectrum_text

    References
    ----------
    .. [1] R. S. McDonald, P. A. Wilks, Appl. Spectrosc. 42 (1988) 151
       (JCAMP-DX, the ASDF compression forms) (from memory).
    .. [2] A. N. Davies, P. Lampen, Appl. Spectrosc. 47 (1993) 1093
       (JCAMP-DX for NMR: .OBSERVE FREQUENCY, .OBSERVE NUCLEUS) (from memory).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> import numpy as np
    >>> hz = np.linspace(-6000.0, 6000.0, 256)
    >>> spec = MeasuredSpectrum(hz=hz, ppm=1e6 * hz / 78.2e6, intensity=1 / (1 + (hz / 250.0) ** 2),
    ...                         imag=None, nu_ref_hz=78.2e6, source="example", nucleus="27Al")
    >>> with tempfile.TemporaryDirectory() as d:
    ...     out = write_jcamp(pathlib.Path(d) / "al.jdx", spec, compress=True)
    ...     back = read_spectrum(out)
    ...     first_lines = out.read_text().splitlines()[:3]
    >>> first_lines
    ['##TITLE= example', '##JCAMP-DX= 5.01', '##DATA TYPE= NMR SPECTRUM']
    >>> bool(np.allclose(back.hz, spec.hz, rtol=1e-12)), back.nucleus
    (True, '27Al')
    >>> float(np.max(np.abs(back.intensity - spec.intensity))) < 1e-9
    True
    """
    hz = spectrum.hz
    n = hz.size
    if n < 2:
        raise ValueError(f"write_jcamp {str(path)!r}: a spectrum needs at least 2 points; it has {n}")
    uniform = np.linspace(hz[0], hz[-1], n)
    step = (hz[-1] - hz[0]) / (n - 1)
    allowed = UNIFORM_STEP_TOLERANCE * step + float(spectrum.metadata.get("axis_precision_hz", 0.0) or 0.0)
    dev = float(np.max(np.abs(hz - uniform)))
    if dev > allowed:
        raise ValueError(f"write_jcamp {str(path)!r}: the axis strays {dev:.3g} Hz from a uniform axis "
                         f"(allowed {allowed:.3g} Hz); JCAMP-DX XYDATA needs equal steps "
                         "(read the file with resample=True)")
    y = spectrum.intensity
    peak = float(np.max(np.abs(y)))
    yfactor = peak / _INT32_MAX if peak > 0 else 1.0
    ints = [int(v) for v in np.rint(y / yfactor).astype(np.int64)]
    title = spectrum.metadata.get("file.title") or spectrum.metadata.get("title") or spectrum.source
    head = [
        f"##TITLE= {_label_text(title)}",
        "##JCAMP-DX= 5.01",
        "##DATA TYPE= NMR SPECTRUM",
        "##DATA CLASS= XYDATA",
        f"##ORIGIN= {_label_text(spectrum.metadata.get('file.origin', 'written by powderspin'))}",
        f"##OWNER= {_label_text(spectrum.metadata.get('file.owner', 'not stated'))}",
        f"##.OBSERVE FREQUENCY= {spectrum.nu_ref_hz / 1e6!r}",
    ]
    if spectrum.nucleus is not None:
        canonical = _canonical_nucleus(spectrum.nucleus)
        head.append(f"##.OBSERVE NUCLEUS= ^{canonical or _label_text(spectrum.nucleus)}")
    if spectrum.field_tesla is not None:
        head.append(f"##$FIELD TESLA= {spectrum.field_tesla!r}")
    head += [
        "##XUNITS= HZ",
        "##YUNITS= ARBITRARY UNITS",
        "##XFACTOR= 1.0",
        f"##YFACTOR= {yfactor!r}",
        f"##FIRSTX= {float(hz[0])!r}",
        f"##LASTX= {float(hz[-1])!r}",
        f"##DELTAX= {float(step)!r}",
        f"##NPOINTS= {n}",
        f"##FIRSTY= {ints[0] * yfactor!r}",
        "##XYDATA= (X++(Y..Y))",
    ]
    body = _difdup_lines(uniform, ints) if compress else _affn_lines(uniform, ints)
    text = "\n".join(head + body + ["##END="]) + "\n"
    return write_text_atomic(path, text, force=force, protect=[q for q in (spectrum.source,) if q])
