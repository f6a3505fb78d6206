"""Raw time-domain data (FIDs) as the spectrometer wrote them.

:func:`read_raw` turns a free-induction decay (or an echo train) into a
:class:`RawFID`: the complex samples, the dwell time, the transmitter
(carrier) frequency, the spectrometer's base frequency of the nucleus, the
observed nucleus, the field implied by them, and the digital-filter group
delay.  Processing into a spectrum is :mod:`powderspin.processing`.

Formats
-------
- A Bruker experiment folder holding ``fid`` (one FID) or ``ser`` (several
  FIDs) and ``acqus``, read through nmrglue's Bruker reader
  (``nmrglue.fileio.bruker``).  Parameters used: ``TD`` (points, real and
  imaginary counted separately), ``SW_h`` (spectral width, Hz; the dwell time
  is 1/SW_h), ``SFO1`` (transmitter frequency, MHz), ``BF1`` (the
  spectrometer's base frequency of the observed nucleus, MHz), ``NUC1`` (the
  nucleus), ``DTYPA`` (0: 32-bit integers, 2: 64-bit floats), ``BYTORDA``,
  and the digital filter: ``GRPDLY`` (its group delay in points, fractional)
  or, for older files without it, ``DECIM`` and ``DSPFVS`` looked up in
  nmrglue's table of delays (``nmrglue.fileio.bruker.bruker_dsp_table``).
  ``acqus`` is parsed by nmrglue; the binary ``fid``/``ser`` is then read with
  numpy against TD (each FID of a ``ser`` starts on a 1024-byte boundary), so
  that a truncated file is refused rather than reshaped (the tests check the
  samples against nmrglue's own ``bruker.read``).
- An Agilent/Varian folder holding ``fid`` and ``procpar``, read through
  nmrglue's Varian reader.  Parameters used: ``np`` (points, real and
  imaginary counted separately), ``sw`` (Hz), ``sfrq`` (transmitter, MHz),
  ``tn`` (the nucleus) and, when present, ``reffrq`` (MHz, the frequency of
  0 ppm) as the base frequency; without it the transmitter frequency is the
  base frequency.  These files have no digital-filter delay.
- A Tecmag ``.tnt`` file, read through nmrglue's Tecmag reader
  (``nmrglue.fileio.tecmag``).  The file is a sequence of tagged sections; the
  ``TMAG`` section's fields used are ``actual_npts`` (complex points per
  dimension; one FID when the others are 1, several FIDs when only the second
  is larger), ``dwell`` (s, of the first dimension; the dwell time), ``sw``
  (Hz; must equal 1/dwell, or half of it, within 0.1 %, else the file is
  refused as contradictory; half is accepted because, from memory, the
  acquisition software states the spectral width as a +/- value),
  ``obs_channel`` (the observed channel, 1 to 4) and, for that channel,
  ``ob_freq`` (transmitter, MHz) and ``nuclei`` (the nucleus).  The
  ``DATA`` section holds little-endian complex64 samples; its length must be
  8 x the product of ``actual_npts`` and the file must hold all of it (checked
  before nmrglue maps it).  The file states no frequency of 0 ppm that nmrglue
  interprets (its ``base_freq`` field is noted there as not meaningful), so the
  transmitter frequency is the base frequency, and no digital-filter group
  delay (0).
- A Magritek Spinsolve folder holding ``acqu.par`` and ``data.1d`` (or
  ``fid.1d``), read through nmrglue's Spinsolve reader
  (``nmrglue.fileio.spinsolve``).  ``acqu.par`` keys used, as nmrglue
  interprets them: ``bandwidth`` (kHz; the dwell time is 1/bandwidth),
  ``b1Freq`` (MHz, the frequency of 0 ppm: the base frequency),
  ``lowestFrequency`` (Hz from b1Freq to the low edge of the band; the
  transmitter is at its centre, b1Freq + lowestFrequency + bandwidth/2) and
  ``rxChannel`` (the nucleus).  ``data.1d`` holds a 32-byte header (eight
  little-endian 32-bit integers, of which ``xDim`` is the number of complex
  points and ``yDim``, ``zDim``, ``qDim`` must be at most 1), then ``xDim``
  float32 values of the time axis and ``xDim`` interleaved float32 pairs
  (real, imaginary); a file of any other length is refused.  No group delay
  (0).
- A NumPy ``.npy`` file holding a complex 1-D array, or a real 2 x N or N x 2
  array (real and imaginary parts); the dwell time must be given.
- A text file (``.txt``, ``.csv``, ``.dat``, ``.tsv``) with two columns (real
  and imaginary parts) and ``#`` comment lines; the dwell time must be given.

The sense of rotation (stated, and checked in the tests against nmrglue)
------------------------------------------------------------------------
A signal at a frequency nu above the carrier is stored as
``exp(+2 pi i nu t)``: numpy's ``fftshift(fft(fid))`` then runs up in
frequency, index by index.  This is how nmrglue's own example
``examples/bruker_processed_1d/dig_filter_remove.py`` compares the transform
of raw Bruker data with the spectrometer's processed spectrum (which it
reverses, because processed spectra are stored with the frequency
decreasing).  The same sense is assumed for Agilent/Varian, Tecmag and
Spinsolve data and for ``.npy``/text FIDs (for Tecmag and Spinsolve the
samples are nmrglue's, unchanged); ``conjugate=True`` reverses it for data
recorded the other way.

The field and the reference frequency
-------------------------------------
The field is the one at which the nucleus's reference frequency on the IUPAC
unified scale, nu_ref = (Xi/100) (gamma_p/2pi) B0 (R. K. Harris et al., Pure
Appl. Chem. 73 (2001) 1795), equals the base frequency:
``field_tesla = base_hz / Nuclide.larmor_hz(1 T)``.  The base frequency is
the spectrometer's nominal frequency of 0 ppm; :mod:`powderspin.processing.referencing`
refines the scale (unified scale from a measured 1H frequency, or a
secondary reference).

Examples
--------
>>> import pathlib, tempfile
>>> import numpy as np
>>> from powderspin.io.raw import read_raw
>>> fid = np.exp((2j * np.pi * 1500.0 - 300.0) * np.arange(512) * 2e-5)
>>> with tempfile.TemporaryDirectory() as d:
...     path = pathlib.Path(d) / "fid.npy"
...     np.save(path, fid)
...     raw = read_raw(path, dwell_us=20.0, nucleus="23Na", carrier_mhz=105.868)
>>> raw.points, raw.dwell_s, raw.nucleus, round(raw.field_tesla, 3)
(512, 2e-05, '23Na', 9.4)
"""

from __future__ import annotations

import math
import re
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Mapping

import numpy as np

from ..frozen import reduce_through_init
from ..physics.nuclides import UnknownNuclideError, get_nuclide
from .spectra import DataError

__all__ = ["RawFID", "read_raw", "is_raw_data", "FIELD_TOLERANCE", "check_against_model", "MIN_RAW_POINTS"]

#: largest relative disagreement between a model's field and the data's (0.1 %)
FIELD_TOLERANCE = 1e-3
#: fewest complex points a FID must hold
MIN_RAW_POINTS = 16
_TEXT_SUFFIXES = (".txt", ".csv", ".dat", ".tsv")
_SPINSOLVE_FIDS = ("data.1d", "fid.1d")
_FOLDERS = "a fid or ser file with its parameters (acqus or procpar), or data.1d with acqu.par"
_NUCLEUS = re.compile(r"^\s*(\d+)\s*([A-Za-z]{1,2})\s*$")
_NUCLEUS_REVERSED = re.compile(r"^\s*([A-Za-z]{1,2})\s*(\d+)\s*$")


@dataclass(frozen=True)
class RawFID:
    """A free-induction decay (or echo train) as recorded.

    Attributes
    ----------
    data : ndarray of complex
        The samples, 1-D (one FID) or 2-D (several FIDs, one per row, as in a
        ``ser`` file).  Read-only.
    dwell_s : float
        Time between complex samples (s); the spectral width is 1/dwell_s.
    carrier_hz : float or None
        Absolute transmitter (carrier) frequency (Hz), the frequency of the
        FID's zero.
    base_hz : float or None
        The spectrometer's base frequency of the nucleus (Hz): its nominal
        frequency of 0 ppm.
    nucleus : str or None
        The observed nucleus, e.g. ``"27Al"``.
    field_tesla : float or None
        The field implied by ``base_hz`` and the nucleus (module notes).
    group_delay_points : float
        The digital filter's group delay in dwell times (0 when none).
    source : str
        The folder or file read.
    metadata : Mapping
        Where each value came from (format, parameter names and values).

    Examples
    --------
    >>> raw = RawFID(data=np.ones(64, complex), dwell_s=1e-5, carrier_hz=None, base_hz=None,
    ...              nucleus=None, field_tesla=None, group_delay_points=0.0, source="memory")
    >>> raw.points, round(raw.spectral_width_hz)
    (64, 100000)
    """

    data: np.ndarray
    dwell_s: float
    carrier_hz: float | None
    base_hz: float | None
    nucleus: str | None
    field_tesla: float | None
    group_delay_points: float
    source: str
    metadata: Mapping = field(default_factory=dict)

    __reduce__ = reduce_through_init  # picklable: to and from Dask workers (powderspin.frozen)

    def __post_init__(self):
        a = np.array(self.data, dtype=complex)
        if a.ndim not in (1, 2) or a.shape[-1] < 1:
            raise ValueError(f"RawFID.data must be a 1-D or 2-D complex array; got shape {a.shape}")
        if not np.all(np.isfinite(a)):
            raise ValueError("RawFID.data must hold finite numbers only")
        a.flags.writeable = False
        object.__setattr__(self, "data", a)
        dw = float(self.dwell_s)
        if not math.isfinite(dw) or dw <= 0:
            raise ValueError(f"RawFID.dwell_s must be a finite number > 0 s; got {self.dwell_s!r}")
        object.__setattr__(self, "dwell_s", dw)
        object.__setattr__(self, "group_delay_points", float(self.group_delay_points))
        object.__setattr__(self, "metadata", MappingProxyType(dict(self.metadata)))

    @property
    def points(self) -> int:
        """Complex points per FID."""
        return int(self.data.shape[-1])

    @property
    def spectral_width_hz(self) -> float:
        """The spectral width 1/dwell (Hz)."""
        return 1.0 / self.dwell_s

    @property
    def carrier_offset_hz(self) -> float:
        """The carrier's offset from the base frequency (Hz); 0 when either is unknown."""
        if self.carrier_hz is None or self.base_hz is None:
            return 0.0
        return self.carrier_hz - self.base_hz

    def row(self, index: int) -> "RawFID":
        """One FID of a 2-D data set as a 1-D RawFID.

        Parameters
        ----------
        index : int
            0-based row.

        Returns
        -------
        RawFID

        Raises
        ------
        DataError
            A row outside the data.

        Examples
        --------
        >>> raw = RawFID(np.ones((3, 32), complex), 1e-5, None, None, None, None, 0.0, "memory")
        >>> raw.row(2).data.shape
        (32,)
        """
        if self.data.ndim == 1:
            if index == 0:
                return self
            raise DataError(self.source, f"row = {index}: the data hold one FID; only row 0 exists")
        n = self.data.shape[0]
        if not 0 <= index < n:
            raise DataError(self.source, f"row = {index}: the data hold {n} FIDs; give a row in [0, {n - 1}]")
        meta = dict(self.metadata)
        meta["row"] = index
        return RawFID(self.data[index], self.dwell_s, self.carrier_hz, self.base_hz, self.nucleus,
                      self.field_tesla, self.group_delay_points, self.source, meta)


def _canonical_nucleus(text) -> str | None:
    if not isinstance(text, str):
        return None
    m = _NUCLEUS.match(text) or _NUCLEUS_REVERSED.match(text)
    if m is None:
        return None
    a, b = m.groups()
    mass, sym = (a, b) if a.isdigit() else (b, a)
    return f"{int(mass)}{sym.capitalize()}"


def is_raw_data(path) -> bool:
    """True for raw time-domain data: a folder with ``fid``, ``ser``, ``data.1d`` or ``fid.1d``, or a ``.tnt`` file.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    bool

    Examples
    --------
    >>> is_raw_data("spectrum.csv")
    False
    """
    p = Path(path)
    if p.is_dir():
        return any((p / name).is_file() for name in ("fid", "ser") + _SPINSOLVE_FIDS)
    return p.is_file() and (p.name in ("fid",) + _SPINSOLVE_FIDS or p.suffix.lower() == ".tnt")


def _positive_option(source, name, value, unit):
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)) \
            or not math.isfinite(float(value)) or float(value) <= 0:
        raise DataError(source, f"{name} = {value!r} must be a finite number > 0 {unit}")
    return float(value)


def read_raw(path, *, dwell_us: float | None = None, nucleus: str | None = None,
             carrier_mhz: float | None = None, base_mhz: float | None = None,
             expect: str = "fid", conjugate: bool = False) -> RawFID:
    """Read raw time-domain data: a spectrometer folder, a ``.npy`` FID or a two-column text FID.

    Parameters
    ----------
    path : str or os.PathLike
        A Bruker folder (``fid`` or ``ser`` with ``acqus``), an
        Agilent/Varian folder (``fid`` with ``procpar``), a Spinsolve folder
        (``data.1d`` or ``fid.1d`` with ``acqu.par``), a ``fid``/``data.1d``
        file in such a folder, a Tecmag ``.tnt`` file, a ``.npy`` file or a
        two-column text file (module notes).
    dwell_us : float, optional
        Dwell time (microseconds) of a ``.npy`` or text FID (required there;
        refused for folders, which state it).
    nucleus : str, optional
        The observed nucleus of a ``.npy`` or text FID; for a folder it must
        agree with the file's.
    carrier_mhz : float, optional
        Transmitter frequency (MHz) of a ``.npy`` or text FID.
    base_mhz : float, optional
        Frequency of 0 ppm (MHz) of a ``.npy`` or text FID (default: the
        carrier frequency).
    expect : {"fid", "ser", "any"}, optional
        ``"fid"`` refuses a ``ser`` file (several FIDs), ``"ser"`` refuses a
        single ``fid``; ``"any"`` accepts both.
    conjugate : bool, optional
        Reverse the sense of rotation (module notes).

    Returns
    -------
    RawFID

    Raises
    ------
    DataError
        One line naming the file and the problem: a folder without
        parameters, a truncated FID (fewer points than the parameters
        state), a ``ser`` file where one FID is expected, a missing dwell
        time, a nucleus that disagrees with the file, an unknown nucleus.

    See Also
    --------
    powderspin.processing.process : Turn it into a spectrum.

    References
    ----------
    .. [1] J. J. Helmus, C. P. Jaroniec, "Nmrglue: an open source Python
       package for the analysis of multidimensional NMR data", J. Biomol.
       NMR 55 (2013) 355.
    .. [2] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (the field
       from the base frequency through Xi).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     try:
    ...         read_raw(d)
    ...     except DataError as err:
    ...         print(str(err).split(": ", 1)[1])
    holds no raw data: expected a fid or ser file with its parameters (acqus or procpar), or data.1d with acqu.par
    """
    source = str(path)
    if expect not in ("fid", "ser", "any"):
        raise ValueError(f"expect = {expect!r} must be 'fid', 'ser' or 'any'")
    p = Path(path)
    dwell = _positive_option(source, "dwell_us", dwell_us, "microseconds")
    carrier = _positive_option(source, "carrier_mhz", carrier_mhz, "MHz")
    base = _positive_option(source, "base_mhz", base_mhz, "MHz")
    given_nuc = None
    if nucleus is not None:
        given_nuc = _canonical_nucleus(nucleus)
        if given_nuc is None:
            raise DataError(source, f"nucleus = {nucleus!r} is not a nucleus name such as '27Al'")
    if not p.exists():
        raise DataError(source, "no such file or directory")
    if p.is_file() and p.name in ("fid", "ser") + _SPINSOLVE_FIDS:
        p = p.parent
    if p.is_file() and p.suffix.lower() == ".tnt":
        for name, value in (("dwell_us", dwell), ("carrier_mhz", carrier), ("base_mhz", base)):
            if value is not None:
                raise DataError(source, f"option {name} is for .npy and text FIDs; a .tnt file states it")
        raw = _check_nucleus(source, _read_tecmag(source, p, expect), nucleus, given_nuc)
    elif p.is_dir():
        for name, value in (("dwell_us", dwell), ("carrier_mhz", carrier), ("base_mhz", base)):
            if value is not None:
                raise DataError(source, f"option {name} is for .npy and text FIDs; a spectrometer folder states it")
        if (p / "acqus").is_file():
            raw = _read_bruker(source, p, expect)
        elif (p / "procpar").is_file():
            raw = _read_varian(source, p, expect)
        elif (p / "acqu.par").is_file():
            raw = _read_spinsolve(source, p, expect)
        elif (p / "fid").is_file() or (p / "ser").is_file():
            which = "fid" if (p / "fid").is_file() else "ser"
            raise DataError(source, f"holds a {which} file but no parameters (acqus or procpar); the dwell time, "
                            "frequencies and nucleus come from them")
        elif any((p / name).is_file() for name in _SPINSOLVE_FIDS):
            raise DataError(source, "holds a data.1d/fid.1d file but no parameters (acqu.par); the dwell time, "
                            "frequencies and nucleus come from them")
        else:
            raise DataError(source, f"holds no raw data: expected {_FOLDERS}")
        raw = _check_nucleus(source, raw, nucleus, given_nuc)
    else:
        suffix = p.suffix.lower()
        if dwell is None:
            raise DataError(source, "a .npy or text FID needs its dwell time: give dwell_us (--dwell-us: "
                            "microseconds between complex points)")
        if suffix == ".npy":
            data = _read_npy(source, p)
            fmt = "NumPy .npy FID"
        elif suffix in _TEXT_SUFFIXES:
            data = _read_text(source, p)
            fmt = "two-column text FID (real, imaginary)"
        else:
            shown = f"'{p.suffix}'" if p.suffix else "(no extension)"
            raise DataError(source, f"unsupported raw-data file {shown}; give a spectrometer folder (fid/ser with "
                            f"acqus or procpar, or data.1d with acqu.par), a .tnt file, a .npy FID or a two-column "
                            f"text FID ({' '.join(_TEXT_SUFFIXES)})")
        if base is None:
            base = carrier
        raw = RawFID(data, dwell / 1e6, None if carrier is None else carrier * 1e6,
                     None if base is None else base * 1e6, given_nuc, None, 0.0, source,
                     {"format": fmt, "dwell_source": "given"})
    if raw.points < MIN_RAW_POINTS:
        raise DataError(source, f"only {raw.points} complex points; at least {MIN_RAW_POINTS} are needed")
    if conjugate:
        raw = _with(raw, data=np.conj(raw.data), metadata={**raw.metadata, "conjugated": True})
    return _with_field(raw)


def _check_nucleus(source, raw: RawFID, nucleus, given_nuc) -> RawFID:
    if given_nuc is not None and raw.nucleus is not None and raw.nucleus != given_nuc:
        raise DataError(source, f"the file states the nucleus {raw.nucleus}, but nucleus={nucleus!r} was given")
    if raw.nucleus is None and given_nuc is not None:
        raw = _with(raw, nucleus=given_nuc)
    return raw


def _with(raw: RawFID, **changes) -> RawFID:
    values = {k: getattr(raw, k) for k in ("data", "dwell_s", "carrier_hz", "base_hz", "nucleus", "field_tesla",
                                           "group_delay_points", "source", "metadata")}
    values.update(changes)
    return RawFID(**values)


def _with_field(raw: RawFID) -> RawFID:
    if raw.nucleus is None or raw.base_hz is None:
        return raw
    try:
        nuclide = get_nuclide(raw.nucleus)
    except UnknownNuclideError:
        raise DataError(raw.source, f"the nucleus {raw.nucleus} is not in powderspin's nuclide table") from None
    meta = dict(raw.metadata)
    meta["field_source"] = "the base frequency and the nucleus's Xi (IUPAC unified scale)"
    return _with(raw, field_tesla=raw.base_hz / nuclide.larmor_hz(1.0), metadata=meta)


# --------------------------------------------------------------------------
# Bruker
# --------------------------------------------------------------------------
def _number(source, params: dict, key: str, where: str, *, required=True, positive=True):
    v = params.get(key)
    if isinstance(v, str):
        try:
            v = float(v)
        except ValueError:
            v = None
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) \
            or (positive and v <= 0):
        if required:
            raise DataError(source, f"{where} lacks a usable {key} (found {params.get(key)!r}); "
                            f"it is needed to read the FID")
        return None
    return float(v)


def _read_bruker(source, d: Path, expect: str) -> RawFID:
    has_fid, has_ser = (d / "fid").is_file(), (d / "ser").is_file()
    if not has_fid and not has_ser:
        raise DataError(source, "holds acqus but no fid or ser file")
    if expect == "fid" and not has_fid:
        raise DataError(source, "holds a ser file (a series of FIDs: an arrayed or multi-dimensional "
                        "acquisition) where one FID (fid) is expected; choose one FID with row=N (--row N)")
    if expect == "ser" and not has_ser:
        raise DataError(source, "holds a single fid where a series of FIDs (ser) is expected")
    name = "fid" if (expect != "ser" and has_fid) else "ser"
    from nmrglue.fileio import bruker
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            dic = {"acqus": bruker.read_jcamp(str(d / "acqus"))}
        except Exception as err:
            raise DataError(source, f"acqus could not be read ({type(err).__name__}: {err})") from None
    acq = dic["acqus"]
    td = _number(source, acq, "TD", "acqus")
    sw = _number(source, acq, "SW_h", "acqus")
    sfo = _number(source, acq, "SFO1", "acqus")
    bf = _number(source, acq, "BF1", "acqus", required=False) or sfo
    dtype_code = int(acq.get("DTYPA", 0) or 0)
    if dtype_code not in (0, 2):
        raise DataError(source, f"acqus DTYPA = {dtype_code}: only 0 (32-bit integers) and 2 (64-bit floats) "
                        "are read")
    size = 8 if dtype_code == 2 else 4
    td = int(td)
    if td % 2:
        raise DataError(source, f"acqus TD = {td} is odd; complex data need an even number of values")
    nbytes = (d / name).stat().st_size
    if name == "fid":
        if nbytes < td * size:
            raise DataError(source, f"the fid file is truncated: it holds {nbytes // size} values but acqus TD "
                            f"says {td} ({td * size} bytes expected, {nbytes} found)")
        rows = 1
    else:
        block = int(math.ceil(td * size / 1024.0) * 1024)  # each FID starts on a 1024-byte boundary
        rows = nbytes // block
        if rows < 1 or nbytes % block:
            raise DataError(source, f"the ser file is truncated: {nbytes} bytes is not a whole number of FIDs "
                            f"of {block} bytes (acqus TD = {td})")
    big = int(acq.get("BYTORDA", 0) or 0) == 1
    raw = np.fromfile(d / name, dtype=(">" if big else "<") + ("f8" if dtype_code == 2 else "i4"))
    if name == "fid":
        values = raw[:td].astype(float)
        data = values[0::2] + 1j * values[1::2]
    else:
        per = block // size
        values = raw[: rows * per].reshape(rows, per)[:, :td].astype(float)
        data = values[:, 0::2] + 1j * values[:, 1::2]
    grp = acq.get("GRPDLY")
    meta = {"format": f"Bruker {name} + acqus", "acqus.TD": td, "acqus.SW_h": sw, "acqus.SFO1": sfo,
            "acqus.BF1": bf, "acqus.DTYPA": dtype_code}
    if isinstance(grp, (int, float)) and not isinstance(grp, bool) and grp >= 0:
        delay = float(grp)
        meta["group_delay_source"] = "acqus GRPDLY"
    else:
        decim = acq.get("DECIM")
        dspfvs = acq.get("DSPFVS")
        delay = 0.0
        meta["group_delay_source"] = "none stated (no GRPDLY, DECIM or DSPFVS)"
        if decim is not None and dspfvs is not None:
            table = bruker.bruker_dsp_table.get(int(dspfvs), {})
            key = int(decim)
            if key in table:
                delay = float(table[key])
                meta["group_delay_source"] = f"nmrglue's table for DSPFVS = {int(dspfvs)}, DECIM = {key}"
            elif int(decim) > 1:
                raise DataError(source, f"acqus DECIM = {decim}, DSPFVS = {dspfvs}: the digital filter's group delay "
                                "is not known; give group_delay_points")
    nuc = _canonical_nucleus(acq.get("NUC1"))
    if nuc is None and isinstance(acq.get("NUC1"), str) and acq.get("NUC1", "").strip().lower() not in ("", "off"):
        meta["nucleus_text"] = acq.get("NUC1")
    meta["acqus.NUC1"] = str(acq.get("NUC1"))
    return RawFID(data, 1.0 / sw, sfo * 1e6, bf * 1e6, nuc, None, delay, source, meta)


# --------------------------------------------------------------------------
# Agilent / Varian
# --------------------------------------------------------------------------
def _procpar_value(pp: dict, key: str):
    entry = pp.get(key)
    if not isinstance(entry, dict):
        return None
    values = entry.get("values")
    if not values:
        return None
    return values[0]


def _read_varian(source, d: Path, expect: str) -> RawFID:
    if not (d / "fid").is_file():
        raise DataError(source, "holds procpar but no fid file")
    from nmrglue.fileio import varian
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            pp = varian.read_procpar(str(d / "procpar"))
        except Exception as err:
            raise DataError(source, f"procpar could not be read ({type(err).__name__}: {err})") from None
        try:
            _, data = varian.read(str(d), as_2d=True)
        except Exception as err:
            raise DataError(source, f"the fid file could not be read ({type(err).__name__}: {err}); it may be "
                            "truncated") from None
    params = {}
    for key in ("np", "sw", "sfrq"):
        params[key] = _number(source, {key: _procpar_value(pp, key)}, key, "procpar")
    npts = int(params["np"]) // 2
    data = np.asarray(data)
    if data.shape[-1] < npts:
        raise DataError(source, f"the fid file is truncated: it holds {data.shape[-1]} complex points per FID but "
                        f"procpar np says {npts}")
    data = data[..., :npts]
    if data.shape[0] > 1 and expect == "fid":
        raise DataError(source, f"the fid file holds {data.shape[0]} FIDs (an arrayed acquisition) where one FID is "
                        "expected; choose one FID with row=N (--row N)")
    if expect == "ser" and data.shape[0] == 1:
        raise DataError(source, "the fid file holds a single FID where a series of FIDs is expected")
    if data.shape[0] == 1:
        data = data[0]
    ref = _number(source, {"reffrq": _procpar_value(pp, "reffrq")}, "reffrq", "procpar", required=False)
    nuc = _canonical_nucleus(_procpar_value(pp, "tn"))
    meta = {"format": "Agilent/Varian fid + procpar", "procpar.np": int(params["np"]), "procpar.sw": params["sw"],
            "procpar.sfrq": params["sfrq"], "procpar.tn": str(_procpar_value(pp, "tn")),
            "group_delay_source": "none (no digital-filter delay in these files)"}
    if ref is not None:
        meta["procpar.reffrq"] = ref
    return RawFID(data, 1.0 / params["sw"], params["sfrq"] * 1e6, (ref or params["sfrq"]) * 1e6, nuc, None, 0.0,
                  source, meta)


# --------------------------------------------------------------------------
# Tecmag .tnt
# --------------------------------------------------------------------------
def _tnt_sections(source, p: Path) -> dict:
    """The tagged sections of a .tnt file: tag -> (offset of its content, length); refuses a cut-short file."""
    nbytes = p.stat().st_size
    sections = {}
    with open(p, "rb") as f:
        magic = f.read(8)
        if not re.match(rb"^TNT1\.\d\d\d$", magic):
            raise DataError(source, f"is not a Tecmag .tnt file (it starts with {magic[:8]!r}, not TNT1.xxx)")
        pos = 8
        while pos + 12 <= nbytes:
            f.seek(pos)
            head = f.read(12)
            tag = head[:4].decode("latin1")
            length = int.from_bytes(head[8:12], "little")
            if pos + 12 + length > nbytes:
                raise DataError(source, f"the .tnt file is truncated: its {tag} section states {length} bytes but "
                                f"only {nbytes - pos - 12} remain")
            sections.setdefault(tag, (pos + 12, length))
            pos += 12 + length
    for tag in ("TMAG", "DATA"):
        if tag not in sections:
            raise DataError(source, f"the .tnt file has no {tag} section (it may be truncated)")
    return sections


def _read_tecmag(source, p: Path, expect: str) -> RawFID:
    from nmrglue.fileio import tecmag
    sections = _tnt_sections(source, p)
    if sections["TMAG"][1] != tecmag.TNTTMAG.itemsize:
        raise DataError(source, f"the .tnt TMAG section holds {sections['TMAG'][1]} bytes, not the "
                        f"{tecmag.TNTTMAG.itemsize} of the layout nmrglue reads")
    with open(p, "rb") as f:
        f.seek(sections["TMAG"][0])
        tmag = np.frombuffer(f.read(tecmag.TNTTMAG.itemsize), tecmag.TNTTMAG, count=1)[0]
    npts = [int(x) for x in tmag["actual_npts"]]
    if min(npts) < 1:
        raise DataError(source, f"the .tnt TMAG actual_npts = {npts} must all be >= 1")
    total = int(np.prod(npts))
    if sections["DATA"][1] != 8 * total:
        raise DataError(source, f"the .tnt DATA section holds {sections['DATA'][1]} bytes but TMAG actual_npts = "
                        f"{npts} states {8 * total} (8 bytes per complex point)")
    if any(n > 1 for n in npts[2:]):
        raise DataError(source, f"the .tnt TMAG actual_npts = {npts}: only one FID or a series of FIDs (second "
                        "dimension) is read, not 3-D or 4-D data")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            dic, mapped = tecmag.read(str(p))
            data = np.array(mapped, dtype=complex)
            del mapped
        except Exception as err:
            raise DataError(source, f"the .tnt file could not be read ({type(err).__name__}: {err})") from None
    data = data.reshape(npts[0], npts[1]).T  # nmrglue's shape is actual_npts (Fortran order): one FID per column
    if npts[1] > 1 and expect == "fid":
        raise DataError(source, f"the .tnt file holds {npts[1]} FIDs (TMAG actual_npts = {npts}) where one FID is "
                        "expected; choose one FID with row=N (--row N)")
    if npts[1] == 1 and expect == "ser":
        raise DataError(source, "the .tnt file holds a single FID where a series of FIDs is expected")
    if npts[1] == 1:
        data = data[0]
    dwell = float(dic["dwell"][0])
    sw = float(dic["sw"][0])
    if not math.isfinite(dwell) or dwell <= 0:
        raise DataError(source, f"the .tnt TMAG dwell = {dwell!r} s must be a finite number > 0")
    if not math.isfinite(sw) or sw <= 0 or min(abs(sw * dwell - 1.0), abs(2.0 * sw * dwell - 1.0)) > FIELD_TOLERANCE:
        raise DataError(source, f"the .tnt TMAG sw = {sw!r} Hz contradicts dwell = {dwell!r} s (sw must be "
                        f"1/dwell = {1.0 / dwell:.6g} Hz, or half of it, within 0.1 %)")
    chan = int(dic["obs_channel"])
    if not 1 <= chan <= 4:
        raise DataError(source, f"the .tnt TMAG obs_channel = {chan} must be a channel 1 to 4")
    freq = float(dic["ob_freq"][chan - 1])
    if not math.isfinite(freq) or freq <= 0:
        raise DataError(source, f"the .tnt TMAG ob_freq[{chan}] = {freq!r} MHz (the observed channel's transmitter "
                        "frequency) must be a finite number > 0")
    label = bytes(dic["nuclei"][chan - 1]).split(b"\0")[0].decode("latin1").strip()
    meta = {"format": "Tecmag .tnt", "tnt.actual_npts": npts, "tnt.dwell": dwell, "tnt.sw": sw,
            "tnt.obs_channel": chan, "tnt.ob_freq": freq, "tnt.nuclei": label,
            "tnt.magnet_field": float(dic["magnet_field"]),
            "base_source": "the transmitter frequency (the file states no frequency of 0 ppm)",
            "group_delay_source": "none stated"}
    return RawFID(data, dwell, freq * 1e6, freq * 1e6, _canonical_nucleus(label), None, 0.0, source, meta)


# --------------------------------------------------------------------------
# Magritek Spinsolve
# --------------------------------------------------------------------------
def _read_spinsolve(source, d: Path, expect: str) -> RawFID:
    name = next((n for n in _SPINSOLVE_FIDS if (d / n).is_file()), None)
    if name is None:
        raise DataError(source, "holds acqu.par but no time-domain data (data.1d or fid.1d)")
    if expect == "ser":
        raise DataError(source, f"holds a single FID ({name}) where a series of FIDs is expected")
    nbytes = (d / name).stat().st_size
    if nbytes < 32:
        raise DataError(source, f"the {name} file is truncated: {nbytes} bytes, less than its 32-byte header")
    head = np.fromfile(d / name, dtype="<u4", count=8)
    xdim, ydim, zdim, qdim = (int(v) for v in head[4:8])
    if any(v > 1 for v in (ydim, zdim, qdim)):
        raise DataError(source, f"the {name} header states yDim = {ydim}, zDim = {zdim}, qDim = {qdim}: only one "
                        "FID (all at most 1) is read")
    if xdim < 1 or nbytes != 32 + 12 * xdim:
        raise DataError(source, f"the {name} file is truncated or not 1-D: its header states xDim = {xdim} "
                        f"complex points ({32 + 12 * xdim} bytes with the time axis), {nbytes} bytes found")
    from nmrglue.fileio import spinsolve
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            dic, data = spinsolve.read(str(d), specfile=name)
        except Exception as err:
            raise DataError(source, f"acqu.par or {name} could not be read ({type(err).__name__}: {err})") from None
    acq = dic["acqu"]
    bw = _number(source, acq, "bandwidth", "acqu.par")
    b1 = _number(source, acq, "b1Freq", "acqu.par")
    low = _number(source, acq, "lowestFrequency", "acqu.par", positive=False)
    sw = bw * 1e3
    carrier = b1 * 1e6 + low + 0.5 * sw
    if carrier <= 0:
        raise DataError(source, f"acqu.par b1Freq = {b1} MHz and lowestFrequency = {low} Hz put the transmitter at "
                        f"{carrier:.6g} Hz; it must be > 0")
    nuc = _canonical_nucleus(acq.get("rxChannel"))
    data = np.asarray(data, dtype=complex)
    if data.shape != (xdim,):
        raise DataError(source, f"the {name} file gave {data.shape} points where its header states xDim = {xdim}")
    meta = {"format": f"Spinsolve {name} + acqu.par", f"{name}.xDim": xdim, "acqu.par.bandwidth": bw,
            "acqu.par.b1Freq": b1, "acqu.par.lowestFrequency": low, "acqu.par.rxChannel": str(acq.get("rxChannel")),
            "group_delay_source": "none stated"}
    return RawFID(data, 1.0 / sw, carrier, b1 * 1e6, nuc, None, 0.0, source, meta)


# --------------------------------------------------------------------------
# .npy and text
# --------------------------------------------------------------------------
def _read_npy(source, p: Path) -> np.ndarray:
    try:
        a = np.load(p, allow_pickle=False)
    except Exception as err:
        raise DataError(source, f"not a readable .npy file ({type(err).__name__}: {err})") from None
    if np.iscomplexobj(a):
        if a.ndim != 1:
            raise DataError(source, f"a complex .npy FID must be 1-D; this one has shape {a.shape}")
        out = a.astype(complex)
    elif a.ndim == 2 and 2 in a.shape:
        out = (a[0] + 1j * a[1]) if a.shape[0] == 2 else (a[:, 0] + 1j * a[:, 1])
    else:
        raise DataError(source, f"a .npy FID must be a complex 1-D array or a real 2 x N / N x 2 array (real, "
                        f"imaginary); this one has shape {a.shape} and type {a.dtype}")
    bad = np.flatnonzero(~np.isfinite(out))
    if bad.size:
        raise DataError(source, f"point {bad[0] + 1} is not a finite number")
    return out


def _read_text(source, p: Path) -> np.ndarray:
    try:
        text = p.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise DataError(source, "is not UTF-8 text (a binary file?)") from None
    rows = []
    for lineno, line in enumerate(text.splitlines(), 1):
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        parts = [x for x in re.split(r"[,;\s]+", s) if x]
        if len(parts) != 2:
            raise DataError(source, f"expected two columns (real, imaginary), found {len(parts)}", line=lineno)
        try:
            rows.append((float(parts[0]), float(parts[1])))
        except ValueError:
            raise DataError(source, f"{s!r} is not two numbers (real, imaginary)", line=lineno) from None
    if not rows:
        raise DataError(source, "holds no data rows (two columns: real, imaginary)")
    a = np.array(rows)
    bad = np.flatnonzero(~np.all(np.isfinite(a), axis=1))
    if bad.size:
        raise DataError(source, f"row {bad[0] + 1} is not a finite number")
    return a[:, 0] + 1j * a[:, 1]


def check_against_model(raw_or_spectrum, nucleus_name: str, field_tesla: float, where: str = "") -> None:
    """Refuse data whose nucleus or field disagrees with a model's (field: by more than 0.1 %).

    Parameters
    ----------
    raw_or_spectrum : RawFID or MeasuredSpectrum
        Anything with ``nucleus``, ``field_tesla`` and ``source``.
    nucleus_name : str
        The model's nucleus.
    field_tesla : float
        The model's field (T).
    where : str, optional
        Prefix for the message (e.g. ``"measurement 1"``).

    Raises
    ------
    DataError
        Naming both values.

    Examples
    --------
    >>> raw = RawFID(np.ones(32, complex), 1e-5, 104.26e6, 104.26e6, "27Al", 9.3947, 0.0, "exp/1")
    >>> check_against_model(raw, "27Al", 9.4)
    >>> try:
    ...     check_against_model(raw, "27Al", 14.1)
    ... except DataError as err:
    ...     print(str(err).split("; ")[0])
    exp/1: the data were recorded at 9.3947 T but the model says field_tesla = 14.1 T (they differ by 33 %
    """
    pre = f"{where}: " if where else ""
    src = raw_or_spectrum.source
    nuc = raw_or_spectrum.nucleus
    model_nuc = get_nuclide(nucleus_name).name
    if nuc is not None and _canonical_nucleus(nuc) not in (None, model_nuc) or (nuc is not None and
                                                                               _canonical_nucleus(nuc) is None):
        raise DataError(src, f"{pre}the data observe {nuc} but the model's nucleus is {model_nuc}")
    f = raw_or_spectrum.field_tesla
    if f is not None:
        rel = abs(f - field_tesla) / field_tesla
        if rel > FIELD_TOLERANCE:
            raise DataError(src, f"{pre}the data were recorded at {f:.5g} T but the model says field_tesla = "
                            f"{field_tesla:.6g} T (they differ by {100 * rel:.2g} %; at most "
                            f"{100 * FIELD_TOLERANCE:g} % is accepted)")
