"""Writers of simulated two-dimensional (MQMAS, STMAS) spectra.

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
"""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import numpy as np

from ..files import STDOUT, OutputPathError, check_outputs, write_text_atomic, write_via

__all__ = ["SPECTRUM_2D_SUFFIXES", "spectrum_2d_format", "spectrum_2d_text", "write_spectrum_2d"]

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
