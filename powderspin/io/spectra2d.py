"""Writers and readers of two-dimensional (MQMAS, STMAS) spectra.

- ``.npz``: NumPy arrays ``f1_ppm`` (n1), ``f2_ppm`` (n2), ``f1_hz``, ``f2_hz``,
  ``intensity`` (n1 x n2), ``site_intensities`` (n_sites x n1 x n2),
  ``site_labels`` and ``metadata`` (JSON text, including the F1 convention and
  each site's F1/F2 centres of gravity).
- ``.csv`` / ``.txt``: plain text a spreadsheet opens: ``# key: value``
  metadata lines, then a matrix whose first row holds the F2 ppm values
  (first cell ``f1_ppm\\f2_ppm``) and whose first column holds the F1 ppm
  values; the cells are the summed intensity (density per ppm^2).  Each
  site's component follows as a block of its own, headed by a line
  ``# site: LABEL``.

Every file is checked before anything is written and written atomically
(:mod:`powderspin.files`).

Reading (:func:`read_spectrum_2d`) takes the same two forms and processed
spectrometer data through nmrglue (Bruker ``pdata/N`` with ``2rr``, ``procs``
and ``proc2s``; NMRPipe 2D; :mod:`powderspin.io.processed2d`).  The F1
referencing of a measured file is never guessed: ``f1_referencing`` names the
F1 scale of the file's F1 axis (powderspin's sheared isotropic scale, or one of
the other scales of :data:`powderspin.physics.multiple_quantum.F1_SCALES`), says
that the file's metadata state it, or gives the linear map to the isotropic
scale.  Intensities are never changed by the referencing (measured data are in
arbitrary units; a fit solves the scale).
"""

from __future__ import annotations

import csv
import io
import json
import math
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path
from types import MappingProxyType
from typing import Mapping

import numpy as np

from ..files import STDOUT, OutputPathError, check_outputs, write_text_atomic, write_via
from ..frozen import reduce_through_init
from .spectra import DataError

__all__ = ["SPECTRUM_2D_SUFFIXES", "spectrum_2d_format", "spectrum_2d_text", "write_spectrum_2d",
           "MeasuredSpectrum2D", "read_spectrum_2d", "F1_REFERENCING_WORDS"]

#: what :func:`write_spectrum_2d` writes, by suffix
SPECTRUM_2D_SUFFIXES = {".npz": "NumPy arrays", ".csv": "text matrix", ".txt": "text matrix"}


def spectrum_2d_format(path) -> str:
    """The format :func:`write_spectrum_2d` writes to ``path``, by suffix (``"-"``: text).

    Parameters
    ----------
    path : str or pathlib.Path

    Returns
    -------
    str
        ``".npz"``, ``".csv"`` or ``".txt"``.

    Raises
    ------
    powderspin.files.OutputPathError
        Any other suffix; the message lists the allowed ones.

    Examples
    --------
    >>> spectrum_2d_format("out.NPZ"), spectrum_2d_format("-")
    ('.npz', '.csv')
    """
    if str(path) == STDOUT:
        return ".csv"
    suffix = Path(path).suffix.lower()
    if suffix not in SPECTRUM_2D_SUFFIXES:
        raise OutputPathError(f"output {str(path)!r}: a 2D spectrum is written as "
                              + ", ".join(SPECTRUM_2D_SUFFIXES) + f"; the suffix {suffix or '(none)'!r} is not one")
    return suffix


def _matrix_lines(f1_ppm, f2_ppm, y) -> list[str]:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["f1_ppm\\f2_ppm"] + [f"{x:.10g}" for x in f2_ppm])
    for f, row in zip(f1_ppm, y):
        w.writerow([f"{f:.10g}"] + [f"{v:.10g}" for v in row])
    return buf.getvalue().splitlines()


def spectrum_2d_text(spectrum) -> str:
    """The 2D spectrum as text: metadata lines, the summed matrix, then one block per site.

    Parameters
    ----------
    spectrum : Spectrum2D

    Returns
    -------
    str

    Examples
    --------
    >>> from powderspin.engine.spectrum2d import Spectrum2D
    >>> s = Spectrum2D([0.0, 100.0], [0.0, 1.0], [0.0, 100.0], [0.0, 1.0], [[0.0, 2.0], [4.0, 0.0]], ("a",),
    ...                [[[0.0, 2.0], [4.0, 0.0]]], {"nucleus": "27Al"})
    >>> print(spectrum_2d_text(s), end="")
    # nucleus: 27Al
    # layout: first row F2 ppm, first column F1 ppm, cells intensity (density per ppm^2); sum, then each site
    f1_ppm\\f2_ppm,0,1
    0,0,2
    1,4,0
    # site: a
    f1_ppm\\f2_ppm,0,1
    0,0,2
    1,4,0
    """
    lines = []
    for k, v in spectrum.metadata.items():
        if isinstance(v, (dict, list, tuple)):
            v = json.dumps(v, default=str)
        lines.append(f"# {k}: {v}")
    lines.append("# layout: first row F2 ppm, first column F1 ppm, cells intensity (density per ppm^2); "
                 "sum, then each site")
    lines += _matrix_lines(spectrum.f1_ppm, spectrum.f2_ppm, spectrum.intensity)
    for label, y in zip(spectrum.site_labels, spectrum.site_intensities):
        lines.append(f"# site: {label}")
        lines += _matrix_lines(spectrum.f1_ppm, spectrum.f2_ppm, y)
    return "\n".join(lines) + "\n"


def write_spectrum_2d(spectrum, path, *, force: bool = False, protect=()) -> Path | None:
    """Write a 2D spectrum as ``.npz`` arrays or a text matrix, atomically; never overwrites without ``force``.

    Parameters
    ----------
    spectrum : Spectrum2D
    path : str or pathlib.Path
        ``.npz``, ``.csv`` or ``.txt`` (``"-"``: text on standard output).
    force : bool, optional
        Overwrite an existing file.
    protect : iterable of path, optional
        Input files never to overwrite.

    Returns
    -------
    pathlib.Path or None

    Raises
    ------
    powderspin.files.OutputExistsError
        If ``path`` exists and ``force`` is False.
    powderspin.files.OutputPathError
        Another suffix (the message lists the allowed ones).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from powderspin.engine.spectrum2d import Spectrum2D
    >>> s = Spectrum2D([0.0], [0.0], [0.0, 1.0], [0.0, 0.01], [[1.0, 0.0]], ("a",), [[[1.0, 0.0]]])
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_spectrum_2d(s, pathlib.Path(d) / "mq.npz")
    ...     sorted(np.load(p).files)[:3]
    ['f1_hz', 'f1_ppm', 'f2_hz']
    """
    kind = spectrum_2d_format(path)
    if kind in (".csv", ".txt"):
        return write_text_atomic(path, spectrum_2d_text(spectrum), force=force, protect=protect)
    check_outputs([(path, "output")], force=force, protect=protect)

    def save(tmp):
        with open(tmp, "wb") as f:
            np.savez(f, f1_ppm=spectrum.f1_ppm, f2_ppm=spectrum.f2_ppm, f1_hz=spectrum.f1_hz, f2_hz=spectrum.f2_hz,
                     intensity=spectrum.intensity, site_intensities=spectrum.site_intensities,
                     site_labels=np.array(spectrum.site_labels),
                     metadata=np.array(json.dumps(dict(spectrum.metadata), default=str)))
    return write_via(path, save, force=force, protect=protect, role="output")


# --------------------------------------------------------------------------
# reading measured 2D spectra
# --------------------------------------------------------------------------

#: the words ``f1_referencing`` accepts besides a (scale, offset_ppm) pair: the F1 scales and "file"
F1_REFERENCING_WORDS = ("isotropic", "t1_evolution", "total_evolution", "file")
_WORDS_TEXT = "'isotropic', 't1_evolution', 'total_evolution', 'file'"
#: fewest points along F2 and F1 of a measured 2D spectrum
MIN_F2_POINTS = 16
MIN_F1_POINTS = 8


@dataclass(frozen=True)
class MeasuredSpectrum2D:
    """A measured 2D spectrum on powderspin's sheared isotropic F1 scale, axes ascending.

    Attributes
    ----------
    f1_ppm : ndarray (n1,)
        F1 points (ppm) after the referencing given when reading: a site with
        C_Q = 0 at F1 = F2 = delta_iso.
    f2_ppm : ndarray (n2,)
    intensity : ndarray (n1, n2)
    nu_ref_hz : float
        Reference frequency (Hz) of both scales.
    source : str
        The file.
    metadata : Mapping
        ``f1_referencing`` (what was applied) and the file's own metadata.

    Examples
    --------
    >>> m = MeasuredSpectrum2D(np.arange(8.0), np.arange(16.0), np.zeros((8, 16)), 1e8, "x.npz")
    >>> float(m.f2_hz[1])
    100.0
    """

    f1_ppm: np.ndarray
    f2_ppm: np.ndarray
    intensity: np.ndarray
    nu_ref_hz: float
    source: str
    metadata: Mapping = field(default_factory=dict)

    __reduce__ = reduce_through_init  # picklable: to and from Dask workers (powderspin.frozen)

    def __post_init__(self):
        for name in ("f1_ppm", "f2_ppm", "intensity"):
            a = np.array(getattr(self, name), dtype=float)
            a.flags.writeable = False
            object.__setattr__(self, name, a)
        object.__setattr__(self, "metadata", MappingProxyType(dict(self.metadata)))

    @property
    def f1_hz(self) -> np.ndarray:
        """F1 points (Hz offsets from nu_ref).

        Returns
        -------
        numpy.ndarray
        """
        return self.f1_ppm * self.nu_ref_hz * 1e-6

    @property
    def f2_hz(self) -> np.ndarray:
        """F2 points (Hz offsets from nu_ref).

        Returns
        -------
        numpy.ndarray
        """
        return self.f2_ppm * self.nu_ref_hz * 1e-6


def _check_referencing(source, f1_referencing) -> tuple:
    if f1_referencing is None:
        raise DataError(source, "f1_referencing must be given (it is never guessed): \"isotropic\" when the file's "
                                "F1 axis is already powderspin's sheared isotropic scale (a site with C_Q = 0 on the "
                                "diagonal), \"t1_evolution\" (F1 = nu_t1 - R nu_CT, factor p - R) or "
                                "\"total_evolution\" (factor (p - R) / (1 + |R|)), \"file\" to take it from the "
                                "file's own metadata, or (scale, offset_ppm) mapping the file's F1 ppm to the "
                                "isotropic scale")
    if isinstance(f1_referencing, str):
        if f1_referencing not in F1_REFERENCING_WORDS:
            raise DataError(source, f"f1_referencing = {f1_referencing!r} is not one of {_WORDS_TEXT} or a "
                                    "(scale, offset_ppm) pair")
        return (f1_referencing,)
    try:
        scale, offset = (float(x) for x in f1_referencing)
    except (TypeError, ValueError):
        raise DataError(source, f"f1_referencing = {f1_referencing!r} is not one of {_WORDS_TEXT} or a "
                                "(scale, offset_ppm) pair of numbers") from None
    if not (math.isfinite(scale) and math.isfinite(offset)) or scale == 0:
        raise DataError(source, f"f1_referencing = ({scale!r}, {offset!r}): the scale must be a finite non-zero "
                                "number and the offset finite (ppm)")
    return ("map", scale, offset)


def _uniform_ascending(source, name: str, v: np.ndarray, minimum: int):
    if v.ndim != 1 or v.size < minimum:
        raise DataError(source, f"{name} must have at least {minimum} points, got {v.size}")
    if not np.all(np.isfinite(v)):
        raise DataError(source, f"{name} holds a value that is not a finite number")
    d = np.diff(v)
    step = (v[-1] - v[0]) / (v.size - 1)
    if step == 0 or not (np.all(d > 0) or np.all(d < 0)):
        raise DataError(source, f"{name} must be strictly monotonic")
    if np.max(np.abs(d - step)) > 1e-3 * abs(step) + 1e-9 * np.max(np.abs(v)):
        raise DataError(source, f"{name} must be uniformly spaced (to 1e-3 of its step)")
    return step < 0


def _read_npz_2d(source, p: Path):
    try:
        with np.load(p, allow_pickle=False) as d:
            names = set(d.files)
            missing = [k for k in ("f1_ppm", "f2_ppm", "intensity") if k not in names]
            if missing:
                raise DataError(source, "a 2D .npz needs the arrays f1_ppm, f2_ppm and intensity; missing: "
                                + ", ".join(missing))
            f1, f2, y = (np.asarray(d[k], dtype=float) for k in ("f1_ppm", "f2_ppm", "intensity"))
            meta = {}
            if "metadata" in names:
                try:
                    meta = json.loads(str(d["metadata"]))
                except json.JSONDecodeError:
                    raise DataError(source, "the metadata array is not JSON text") from None
            f2_hz = np.asarray(d["f2_hz"], dtype=float) if "f2_hz" in names else None
    except DataError:
        raise
    except (OSError, ValueError) as e:
        raise DataError(source, f"not a readable .npz file ({e})") from None
    nu = meta.get("nu_ref_hz") if isinstance(meta, dict) else None
    if nu is None and f2_hz is not None and f2_hz.shape == f2.shape and np.any(f2 != 0):
        k = int(np.argmax(np.abs(f2)))
        nu = float(f2_hz[k] / f2[k] * 1e6)
    return f1, f2, y, meta if isinstance(meta, dict) else {}, nu


def _read_text_2d(source, p: Path):
    try:
        text = p.read_text()
    except (OSError, UnicodeDecodeError) as e:
        raise DataError(source, f"cannot be read as text ({e})") from None
    meta: dict = {}
    rows: list = []
    header = None
    for lineno, line in enumerate(text.splitlines(), 1):
        s = line.strip()
        if not s:
            continue
        if s.startswith("#"):
            if header is not None and s.startswith("# site:"):
                break  # the sum comes first; the sites' blocks are not data
            if ":" in s:
                k, v = s[1:].split(":", 1)
                v = v.strip()
                try:
                    meta[k.strip()] = json.loads(v)
                except json.JSONDecodeError:
                    meta[k.strip()] = v
            continue
        cells = next(csv.reader([s]))
        if header is None:
            try:
                header = np.array([float(c) for c in cells[1:]])
            except ValueError:
                raise DataError(source, "the first row must hold the F2 ppm values after one label cell",
                                line=lineno) from None
            continue
        if len(cells) != header.size + 1:
            raise DataError(source, f"{len(cells)} values, but the header row has {header.size + 1}", line=lineno)
        try:
            rows.append([float(c) for c in cells])
        except ValueError:
            raise DataError(source, "a value is not a number", line=lineno) from None
    if header is None or not rows:
        raise DataError(source, "no matrix found: the first row holds the F2 ppm values, the first column the F1 "
                                "ppm values")
    a = np.array(rows)
    nu = meta.get("nu_ref_hz")
    return a[:, 0], header, a[:, 1:], meta, (float(nu) if nu is not None else None)


def _scale_factor(source, name: str, experiment_scale, meta: dict, how: str) -> float:
    """The factor c of the F1 scale ``name`` (F1_name = c F1_isotropic), from the experiment or the file."""
    if experiment_scale is not None:
        return experiment_scale.f1_scale_factor(name)
    conv = meta.get("f1_convention") if isinstance(meta.get("f1_convention"), dict) else {}
    if how == "file" and "f1_scale_factor" in conv:
        try:
            return float(Fraction(str(conv["f1_scale_factor"])))
        except (ValueError, ZeroDivisionError):
            pass
    raise DataError(source, f"f1_referencing = {name!r} needs the experiment (spin, experiment, mq_order) to give "
                            "its factor; pass experiment_scale (powderspin.physics.multiple_quantum."
                            "two_dimensional_scale)")


def read_spectrum_2d(path, *, f1_referencing, nu_ref_hz: float | None = None,
                     experiment_scale=None) -> MeasuredSpectrum2D:
    """Read a measured 2D spectrum (.npz, text matrix, Bruker 2rr, NMRPipe 2D), with an explicit F1 referencing.

    Parameters
    ----------
    path : str or os.PathLike
        ``.npz`` with arrays ``f1_ppm``, ``f2_ppm``, ``intensity`` (F1 x F2) and
        optionally ``metadata`` (JSON text); a text matrix as written by
        :func:`write_spectrum_2d` (first row F2 ppm, first column F1 ppm;
        ``# key: value`` lines; only the first block is read); a Bruker
        ``pdata/N`` directory (``2rr``, ``procs``, ``proc2s``) or the
        experiment directory holding ``pdata/1``; or an NMRPipe 2D spectrum
        (:mod:`powderspin.io.processed2d`).
    f1_referencing : {"isotropic", "t1_evolution", "total_evolution", "file"} or (float, float)
        Required: the F1 scale of the file's F1 ppm.  ``"isotropic"``:
        powderspin's sheared isotropic scale (a site with C_Q = 0 on the
        diagonal); ``"t1_evolution"`` / ``"total_evolution"``: the scales of
        :data:`powderspin.physics.multiple_quantum.F1_SCALES`, F1 = c x the
        isotropic scale (c = p - R, or (p - R) / (1 + |R|)), divided by c here;
        ``"file"``: the file's metadata must name the scale
        (``f1_convention.f1_scale``); ``(scale, offset_ppm)``:
        F1 = scale * F1_file + offset_ppm.
    nu_ref_hz : float, optional
        Reference frequency (Hz), when the file does not give it (or to check
        the file's against it).
    experiment_scale : TwoDimensionalScale, optional
        The experiment (from the model), which gives the factor of a named
        non-isotropic scale; without it only a file that states its factor can be
        read with such a scale.

    Returns
    -------
    MeasuredSpectrum2D
        Axes ascending, F1 on the isotropic scale; the intensities as in the
        file (the referencing never changes them).

    Raises
    ------
    powderspin.io.spectra.DataError
        One line naming the file and the problem (a missing or unknown
        referencing, missing arrays or parameter files, axes not uniform or too
        short, a shape mismatch, no reference frequency).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from powderspin.engine.spectrum2d import Spectrum2D
    >>> f1, f2 = np.linspace(0, 7, 8), np.linspace(0, 15, 16)
    >>> s = Spectrum2D(f1 * 100, f1, f2 * 100, f2, np.ones((8, 16)), ("a",), np.ones((1, 8, 16)),
    ...                {"nu_ref_hz": 1e8})
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_spectrum_2d(s, pathlib.Path(d) / "mq.npz")
    ...     m = read_spectrum_2d(p, f1_referencing=(1.0, 2.0))
    >>> m.f1_ppm[:3].tolist(), m.nu_ref_hz
    ([2.0, 3.0, 4.0], 100000000.0)
    """
    from .processed2d import is_pipe_file, read_bruker_2d, read_pipe_2d

    source = str(path)
    p = Path(path)
    ref = _check_referencing(source, f1_referencing)
    if p.is_dir():
        f1, f2, y, meta, nu_file = read_bruker_2d(source, p)
    elif not p.is_file():
        raise DataError(source, "no such file")
    elif p.suffix.lower() == ".npz":
        f1, f2, y, meta, nu_file = _read_npz_2d(source, p)
    elif is_pipe_file(p):
        f1, f2, y, meta, nu_file = read_pipe_2d(source, p, nu_ref_hz)
    else:
        f1, f2, y, meta, nu_file = _read_text_2d(source, p)
    if y.ndim != 2 or y.shape != (f1.size, f2.size):
        raise DataError(source, f"intensity has shape {y.shape}; the axes give (n1, n2) = ({f1.size}, {f2.size})")
    if not np.all(np.isfinite(y)):
        raise DataError(source, "intensity holds a value that is not a finite number")
    if _uniform_ascending(source, "the F1 axis", f1, MIN_F1_POINTS):
        f1, y = f1[::-1], y[::-1]
    if _uniform_ascending(source, "the F2 axis", f2, MIN_F2_POINTS):
        f2, y = f2[::-1], y[:, ::-1]
    if nu_ref_hz is not None and nu_file is not None and abs(nu_ref_hz - nu_file) > 1e-6 * nu_file:
        raise DataError(source, f"nu_ref_hz = {nu_ref_hz:g} contradicts the file's {nu_file:.10g} Hz")
    nu = nu_ref_hz if nu_ref_hz is not None else nu_file
    if nu is None or not (math.isfinite(nu) and nu > 0):
        raise DataError(source, "no reference frequency: the file gives none; pass nu_ref_hz (Hz)")
    how = ref[0]
    if how == "file":
        conv = meta.get("f1_convention") if isinstance(meta.get("f1_convention"), dict) else {}
        name = conv.get("f1_scale")
        if name not in ("isotropic", "t1_evolution", "total_evolution"):
            raise DataError(source, "f1_referencing = 'file', but the file does not state powderspin's isotropic "
                                    "F1 scale or another named F1 scale (metadata f1_convention.f1_scale); give "
                                    "one of 'isotropic', 't1_evolution', 'total_evolution' or (scale, offset_ppm)")
        how, said = name, "stated by the file"
        if name != "isotropic" and experiment_scale is not None and "f1_scale_factor" in conv:
            stated = _scale_factor(source, name, None, meta, "file")
            if abs(stated - experiment_scale.f1_scale_factor(name)) > 1e-9 * abs(stated):
                raise DataError(source, f"the file's F1 scale {name!r} has the factor {conv['f1_scale_factor']}, but "
                                        f"the model's experiment gives {experiment_scale.f1_scale_factor(name):.6g} "
                                        "(another nucleus, experiment or mq_order)")
    else:
        said = "given when reading"
    if how == "isotropic":
        applied = f"isotropic ({said})"
    elif how in ("t1_evolution", "total_evolution"):
        c = _scale_factor(source, how, experiment_scale, meta, "file" if said.startswith("stated") else "given")
        f1 = f1 / c
        if c < 0:
            f1, y = f1[::-1], y[::-1]
        applied = f"{how} ({said}): F1 = F1_file / {c:.10g} on the isotropic scale"
    else:
        _, scale, offset = ref
        f1 = scale * f1 + offset
        if scale < 0:
            f1, y = f1[::-1], y[::-1]
        applied = f"F1 = {scale:g} F1_file + {offset:g} ppm"
    meta = dict(meta)
    meta["f1_referencing"] = applied
    return MeasuredSpectrum2D(f1, f2, y, float(nu), source, meta)
