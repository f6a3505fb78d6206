"""Processed 2D spectrometer data read through nmrglue: Bruker ``2rr`` and NMRPipe 2D.

These readers return the file's own axes and values; the F1 referencing
(which F1 scale the file's F1 ppm are on) is applied by
:func:`powderspin.io.spectra2d.read_spectrum_2d`, which calls them, and is
never guessed.

Formats
-------
- Bruker processed 2D data: a ``pdata/N`` directory holding ``2rr`` with
  ``procs`` (F2, the acquisition dimension) and ``proc2s`` (F1), or the
  experiment directory that contains ``pdata/1``.  nmrglue's Bruker reader
  undoes the submatrix storage (``XDIM``) and the intensity exponent
  (``NC_proc``: stored value times 2^NC_proc).  Each axis is
  ``ppm_i = OFFSET - i * SW_p / (SF * SI)``, i = 0 .. SI-1, from its own
  parameter file (``SF`` in MHz, the frequency of 0 ppm; ``SW_p`` in Hz; common
  practice, as for 1D data in :mod:`powderspin.io.spectra`).  The reference
  frequency of both dimensions is the F2 ``SF``; F1 ppm are the file's as
  stated by ``proc2s``, whatever F1 scale the processing gave them.
- NMRPipe 2D spectra (recognised by the header, whatever the suffix): real
  data, both dimensions transformed, not transposed.  The Hz axes come from
  nmrglue's unit conversion (``make_uc``, its ``hz_scale``); ppm are Hz over
  each dimension's observe frequency.  The header stores its numbers as 32-bit
  floats: when a reference frequency is given (the model's) and agrees with
  the header's to 1e-6, it is used instead of the rounded one.

Only the real part (``2rr``) is read; nothing is written back.

References
----------
J. J. Helmus, C. P. Jaroniec, J. Biomol. NMR 55 (2013) 355 (nmrglue);
F. Delaglio et al., J. Biomol. NMR 6 (1995) 277 (NMRPipe and its file format).
"""

from __future__ import annotations

import math
import os
import struct
from pathlib import Path

import numpy as np

from .spectra import DataError, read_through_nmrglue

__all__ = ["is_bruker_2d", "is_pipe_file", "read_bruker_2d", "read_pipe_2d"]

#: the NMRPipe header's byte-order check value (word 2)
_PIPE_ORDER_CHECK = 2.345
#: a given reference frequency replaces a header's 32-bit one when they agree this closely (relative)
_FLOAT32_AGREEMENT = 1e-6


def is_pipe_file(path) -> bool:
    """True when ``path`` is a file whose header is an NMRPipe header (byte-order word 2.345).

    Parameters
    ----------
    path : str or pathlib.Path

    Returns
    -------
    bool

    Examples
    --------
    >>> is_pipe_file("no-such-file")
    False
    """
    p = Path(path)
    try:
        if not p.is_file() or p.stat().st_size < 2048:
            return False
        with open(p, "rb") as f:
            head = f.read(12)
    except OSError:
        return False
    return any(abs(struct.unpack(f"{e}3f", head)[2] - _PIPE_ORDER_CHECK) < 1e-6 for e in "<>")


def is_bruker_2d(path) -> bool:
    """True for a Bruker processed-data directory holding ``2rr``, or an experiment directory with ``pdata/1/2rr``.

    Parameters
    ----------
    path : str or pathlib.Path

    Returns
    -------
    bool

    Examples
    --------
    >>> is_bruker_2d("no-such-folder")
    False
    """
    p = Path(path)
    return p.is_dir() and ((p / "2rr").exists() or (p / "pdata").is_dir())


def _number(source, table: dict, name: str, key: str) -> float:
    v = table.get(key)
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise DataError(source, f"{name} lacks a numeric {key} (needed for the ppm axis); found {v!r}")
    return float(v)


def read_bruker_2d(source: str, d: Path):
    """Read a Bruker processed 2D spectrum (``2rr``, ``procs``, ``proc2s``) with nmrglue.

    Parameters
    ----------
    source : str
        The path as the user gave it (for messages).
    d : pathlib.Path
        A ``pdata/N`` directory or an experiment directory with ``pdata/1``.

    Returns
    -------
    f1_ppm, f2_ppm : ndarray
        The file's axes (ppm, as stored: descending).
    intensity : ndarray (n1, n2)
        ``2rr`` times 2^NC_proc.
    metadata : dict
    nu_ref_hz : float
        F2 ``SF`` in Hz.

    Raises
    ------
    powderspin.io.spectra.DataError
        Not processed 2D data, a missing ``procs``/``proc2s`` or axis parameter,
        sizes that disagree with ``SI``.
    """
    if not (d / "2rr").exists():
        pdata = d / "pdata"
        if pdata.is_dir():
            if (pdata / "1").is_dir():
                return read_bruker_2d(source, pdata / "1")
            found = sorted(q.name for q in pdata.iterdir() if q.is_dir())
            raise DataError(source, f"has no pdata/1; give one of its processed-data directories "
                            f"({', '.join('pdata/' + f for f in found) or 'none found'})")
        if (d / "1r").exists():
            raise DataError(source, "holds a processed 1D spectrum (1r); a 2D spectrum needs 2rr with procs and "
                                    "proc2s")
        if (d / "ser").exists() or (d / "fid").exists():
            raise DataError(source, "holds only time-domain data (ser/fid); process it in both dimensions first "
                                    "and give the pdata/N directory (2rr, procs, proc2s)")
        raise DataError(source, "is a directory but not Bruker processed 2D data (expected 2rr with procs and proc2s, "
                                "or an experiment directory with pdata/1)")
    for name, role in (("procs", "F2"), ("proc2s", "F1")):
        if not (d / name).is_file():
            raise DataError(source, f"has 2rr but no {name} file: the {role} processing parameters define the "
                                    f"{role} axis")
    pdir = os.path.abspath(str(d))
    (dic, values), notes = read_through_nmrglue(source, "bruker", lambda m: m.read_pdata(pdir, bin_files=["2rr"]),
                                                needs="reading Bruker data",
                                                failure="the processed data could not be read")
    y = np.asarray(values, dtype=float)
    axes = []
    meta: dict = {"format": "Bruker processed 2D (2rr, procs, proc2s)", "bruker.directory": pdir}
    for name, role, dim in (("procs", "F2", 1), ("proc2s", "F1", 0)):
        table = dic.get(name, {})
        si, sf, off, sw = (_number(source, table, name, k) for k in ("SI", "SF", "OFFSET", "SW_p"))
        if sf <= 0 or sw <= 0:
            raise DataError(source, f"{name} SF ({sf!r} MHz) and SW_p ({sw!r} Hz) must be > 0")
        n = int(si)
        if y.ndim != 2 or y.shape[dim] != n:
            raise DataError(source, f"2rr holds {y.shape} points (F1 x F2) but {name} says SI = {n} along {role}")
        axes.append(off - np.arange(n) * sw / (sf * n))
        for k, v in (("SF_MHz", sf), ("OFFSET_ppm", off), ("SW_p_Hz", sw), ("SI", n)):
            meta[f"bruker.{role}.{k}"] = v
        if "NC_proc" in table:
            meta[f"bruker.{role}.NC_proc"] = table["NC_proc"]
    f2_ppm, f1_ppm = axes
    acqus = dic.get("acqus", {})
    nuc = acqus.get("NUC1") or dic.get("procs", {}).get("AXNUC")
    if isinstance(nuc, str) and nuc.strip() and nuc.strip().lower() != "off":
        meta["nucleus_stated"] = nuc.strip()
    if notes:
        meta["reader_notes"] = tuple(notes[:10])
    return f1_ppm, f2_ppm, y, meta, meta["bruker.F2.SF_MHz"] * 1e6


def read_pipe_2d(source: str, p: Path, nu_ref_hz: float | None = None):
    """Read an NMRPipe 2D spectrum with nmrglue.

    Parameters
    ----------
    source : str
        The path as the user gave it (for messages).
    p : pathlib.Path
    nu_ref_hz : float, optional
        The expected reference frequency (Hz); used for the F2 ppm (and F1 when
        both dimensions observe at it) when it agrees with the header's 32-bit
        observe frequency to 1e-6.

    Returns
    -------
    f1_ppm, f2_ppm : ndarray
    intensity : ndarray (n1, n2)
    metadata : dict
    nu_ref_hz : float
        The header's F2 observe frequency in Hz.

    Raises
    ------
    powderspin.io.spectra.DataError
        Not 2D, not transformed in both dimensions, complex or transposed data.
    """
    (pipe, dic, data), notes = read_through_nmrglue(source, "pipe", lambda m: (m, *m.read(str(p))),
                                                    needs="reading NMRPipe data",
                                                    failure="the NMRPipe file could not be read")
    if int(dic.get("FDDIMCOUNT", 0)) != 2 or np.ndim(data) != 2:
        raise DataError(source, f"is an NMRPipe file of {int(dic.get('FDDIMCOUNT', 0))} dimension(s); a 2D "
                                "spectrum is needed")
    if int(dic.get("FDTRANSPOSED", 0)) != 0:
        raise DataError(source, "is a transposed NMRPipe 2D file (FDTRANSPOSED = 1); transpose it back so that the "
                                "rows are F2")
    if np.iscomplexobj(data) or int(dic.get("FDQUADFLAG", 1)) != 1:
        raise DataError(source, "holds complex data; keep only the real part of both dimensions when processing")
    x_dim, y_dim = int(dic["FDDIMORDER1"]), int(dic["FDDIMORDER2"])
    for dim, role in ((x_dim, "F2"), (y_dim, "F1")):
        if int(dic.get(f"FDF{dim}FTFLAG", 0)) != 1:
            raise DataError(source, f"its {role} dimension is not Fourier transformed (a spectrum is needed)")
    y = np.asarray(data, dtype=float)
    obs = {}
    hz = {}
    for axis, dim, role in ((1, x_dim, "F2"), (0, y_dim, "F1")):
        o = float(dic[f"FDF{dim}OBS"]) * 1e6
        if not (math.isfinite(o) and o > 0):
            raise DataError(source, f"its {role} observe frequency FDF{dim}OBS = {o / 1e6!r} MHz must be > 0")
        obs[role] = o
        hz[role] = np.asarray(pipe.make_uc(dic, data, dim=axis).hz_scale(), dtype=float)
    nu_file = obs["F2"]
    nu = nu_file
    if nu_ref_hz is not None and abs(nu_ref_hz - nu_file) <= _FLOAT32_AGREEMENT * nu_file:
        nu = float(nu_ref_hz)
    f2_ppm = hz["F2"] / nu * 1e6
    f1_nu = nu if obs["F1"] == obs["F2"] else obs["F1"]
    f1_ppm = hz["F1"] / f1_nu * 1e6
    meta: dict = {"format": "NMRPipe 2D", "pipe.F2.OBS_MHz": obs["F2"] / 1e6, "pipe.F1.OBS_MHz": obs["F1"] / 1e6,
                  "pipe.F2.SW_Hz": float(dic[f"FDF{x_dim}SW"]), "pipe.F1.SW_Hz": float(dic[f"FDF{y_dim}SW"])}
    if notes:
        meta["reader_notes"] = tuple(notes[:10])
    return f1_ppm, f2_ppm, y, meta, nu_file
