"""The Spectrum value and its files.

CSV layout (our own): ``#`` comment lines ``# key: value`` holding the
metadata, then the header ``ppm,hz,intensity`` and one row per point in
ascending hz.  Intensities are densities per ppm: each site's selected
transitions integrate (over ppm) to its weight, apart from what falls outside
the axis.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Mapping

import numpy as np

__all__ = ["Spectrum", "SidebandRow", "OutputExistsError", "write_text_safely"]


class OutputExistsError(FileExistsError):
    """An output file exists and overwriting was not requested.

    A ``FileExistsError`` subclass; the message names the file.

    Parameters
    ----------
    message : str
        The file and how to allow overwriting (``force=True`` / ``--force``).

    References
    ----------
    POSIX ``rename()`` (IEEE Std 1003.1), the atomic replace behind
    :func:`write_text_safely` (from memory).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_text_safely(pathlib.Path(d) / "a.txt", "x")
    ...     try:
    ...         write_text_safely(p, "y")
    ...     except OutputExistsError:
    ...         print("refused")
    refused
    """


@dataclass(frozen=True)
class SidebandRow:
    """One band of one site's sideband manifold.

    Attributes
    ----------
    site : str
        Label of the site the band belongs to.
    index : int
        Sideband order n (0 = centre band).
    offset_hz : float
        Intensity-weighted position of the band (Hz from nu_ref).
    offset_ppm : float
        The same position in ppm (``1e6 * offset_hz / nu_ref``).
    intensity : float
        Integrated intensity (the site's bands sum to its weight).

    References
    ----------
    J. Herzfeld, A. E. Berger, J. Chem. Phys. 73 (1980) 6021 (sideband
    intensities); M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300.

    Examples
    --------
    >>> row = SidebandRow("AlO4", -1, -12500.0, -79.9, 0.02)
    >>> row.index, row.offset_hz
    (-1, -12500.0)
    """

    site: str
    index: int
    offset_hz: float
    offset_ppm: float
    intensity: float


@dataclass(frozen=True)
class Spectrum:
    """A simulated spectrum.

    Attributes
    ----------
    hz : ndarray
        Axis points, Hz offsets from the reference frequency, ascending.
    ppm : ndarray
        The same points in ppm (``1e6 * hz / nu_ref``).
    intensity : ndarray
        Sum over sites (density per ppm).
    site_labels : tuple of str
        One label per site, in model order.
    site_intensities : ndarray, shape (n_sites, points)
        Each site's spectrum (density per ppm), in the order of ``site_labels``.
    metadata : Mapping
        What made the spectrum (nucleus, field, nu_ref, method per site, ...).
    sidebands : tuple of SidebandRow
        Sideband table (spinning samples at finite rate; empty otherwise).

    References
    ----------
    R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (ppm scale relative
    to nu_ref).

    Examples
    --------
    >>> spec = Spectrum(hz=[-100.0, 0.0, 100.0], ppm=[-1.0, 0.0, 1.0], intensity=[0.0, 1.0, 0.0],
    ...                 site_labels=("a",), site_intensities=[[0.0, 1.0, 0.0]],
    ...                 metadata={"nucleus": "31P", "nu_ref_hz": 100e6})
    >>> spec.area(), spec.first_moment_ppm(), spec.dx_ppm
    (1.0, 0.0, 1.0)
    """

    hz: np.ndarray
    ppm: np.ndarray
    intensity: np.ndarray
    site_labels: tuple[str, ...]
    site_intensities: np.ndarray
    metadata: Mapping = field(default_factory=dict)
    sidebands: tuple[SidebandRow, ...] = ()

    def __post_init__(self):
        for name in ("hz", "ppm", "intensity", "site_intensities"):
            a = np.array(getattr(self, name), dtype=float)
            a.flags.writeable = False
            object.__setattr__(self, name, a)
        object.__setattr__(self, "metadata", MappingProxyType(dict(self.metadata)))
        object.__setattr__(self, "site_labels", tuple(self.site_labels))
        object.__setattr__(self, "sidebands", tuple(self.sidebands))

    @property
    def nu_ref_hz(self) -> float:
        """Reference frequency nu_ref (Hz) from the metadata, NaN when absent.

        Returns
        -------
        float

        References
        ----------
        R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795.

        Examples
        --------
        >>> spec = Spectrum(hz=[-100.0, 0.0, 100.0], ppm=[-1.0, 0.0, 1.0], intensity=[0.0, 1.0, 0.0],
        ...                 site_labels=("a",), site_intensities=[[0.0, 1.0, 0.0]],
        ...                 metadata={"nucleus": "31P", "nu_ref_hz": 100e6})
        >>> spec.nu_ref_hz
        100000000.0
        """
        return float(self.metadata.get("nu_ref_hz", math.nan))

    @property
    def dx_ppm(self) -> float:
        """Point spacing of the axis (ppm), NaN for a one-point axis.

        Returns
        -------
        float

        References
        ----------
        R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795.

        Examples
        --------
        >>> spec = Spectrum(hz=[-100.0, 0.0, 100.0], ppm=[-1.0, 0.0, 1.0], intensity=[0.0, 1.0, 0.0],
        ...                 site_labels=("a",), site_intensities=[[0.0, 1.0, 0.0]],
        ...                 metadata={"nucleus": "31P", "nu_ref_hz": 100e6})
        >>> spec.dx_ppm
        1.0
        """
        return float(self.ppm[1] - self.ppm[0]) if self.ppm.size > 1 else math.nan

    def area(self, site: int | None = None) -> float:
        """Integral over ppm of the sum (or of one site).

        Parameters
        ----------
        site : int, optional
            Index of a site in ``site_labels``; the sum when omitted.

        Returns
        -------
        float
            Rectangle-rule integral over the ppm axis; each site's value is
            its weight (less what falls off the axis).

        References
        ----------
        W. H. Press et al., *Numerical Recipes*, 3rd ed. (2007), ch. 4
        (quadrature) (from memory).

        Examples
        --------
        >>> spec = Spectrum(hz=[-100.0, 0.0, 100.0], ppm=[-1.0, 0.0, 1.0], intensity=[0.0, 1.0, 0.0],
        ...                 site_labels=("a",), site_intensities=[[0.0, 1.0, 0.0]],
        ...                 metadata={"nucleus": "31P", "nu_ref_hz": 100e6})
        >>> spec.area(), spec.area(site=0)
        (1.0, 1.0)
        """
        y = self.intensity if site is None else self.site_intensities[site]
        return float(y.sum() * self.dx_ppm)

    def first_moment_ppm(self, site: int | None = None) -> float:
        """Centre of gravity (ppm) of the sum or of one site.

        Parameters
        ----------
        site : int, optional
            Index of a site in ``site_labels``; the sum when omitted.

        Returns
        -------
        float
            First moment ``sum(y * ppm) / sum(y)`` in ppm (for a quadrupolar
            central transition: the isotropic shift plus the
            quadrupolar-induced shift).

        References
        ----------
        A. Samoson, Chem. Phys. Lett. 119 (1985) 29 (centre of gravity of
        the central transition).

        Examples
        --------
        >>> spec = Spectrum(hz=[-100.0, 0.0, 100.0], ppm=[-1.0, 0.0, 1.0],
        ...                 intensity=[0.0, 1.0, 3.0], site_labels=("a",),
        ...                 site_intensities=[[0.0, 1.0, 3.0]])
        >>> spec.first_moment_ppm()
        0.75
        """
        y = self.intensity if site is None else self.site_intensities[site]
        return float((y * self.ppm).sum() / y.sum())

    # ----- files ---------------------------------------------------------
    def csv_text(self) -> str:
        """The spectrum as CSV text: ``# key: value`` metadata lines, then ``ppm,hz,intensity``.

        Returns
        -------
        str
            Metadata comment lines (dicts and lists as JSON), the header and
            one row per point in ascending hz (ppm, Hz, density per ppm).

        References
        ----------
        Y. Shafranovich, RFC 4180 (2005), "Common Format and MIME Type for
        Comma-Separated Values (CSV) Files" (from memory).

        Examples
        --------
        >>> spec = Spectrum(hz=[-100.0, 0.0, 100.0], ppm=[-1.0, 0.0, 1.0], intensity=[0.0, 1.0, 0.0],
        ...                 site_labels=("a",), site_intensities=[[0.0, 1.0, 0.0]],
        ...                 metadata={"nucleus": "31P", "nu_ref_hz": 100e6})
        >>> print(spec.csv_text(), end="")
        # nucleus: 31P
        # nu_ref_hz: 100000000.0
        ppm,hz,intensity
        -1,-100,0
        0,0,1
        1,100,0
        """
        lines = []
        for k, v in self.metadata.items():
            if isinstance(v, (dict, list, tuple)):
                v = json.dumps(v)
            lines.append(f"# {k}: {v}")
        lines.append("ppm,hz,intensity")
        for p, h, y in zip(self.ppm, self.hz, self.intensity):
            lines.append(f"{p:.8g},{h:.10g},{y:.10g}")
        return "\n".join(lines) + "\n"

    def write_csv(self, path, *, force: bool = False) -> Path:
        """Write the spectrum as CSV; refuses to overwrite unless ``force``.

        Parameters
        ----------
        path : str or pathlib.Path
            Output file (parent folders are made).
        force : bool, optional
            Overwrite an existing file.

        Returns
        -------
        pathlib.Path
            The file written (see :meth:`csv_text` for the layout).

        Raises
        ------
        OutputExistsError
            If ``path`` exists and ``force`` is False.

        References
        ----------
        Y. Shafranovich, RFC 4180 (2005) (CSV) (from memory).

        Examples
        --------
        >>> import tempfile, pathlib
        >>> spec = Spectrum(hz=[-100.0, 0.0, 100.0], ppm=[-1.0, 0.0, 1.0], intensity=[0.0, 1.0, 0.0],
        ...                 site_labels=("a",), site_intensities=[[0.0, 1.0, 0.0]],
        ...                 metadata={"nucleus": "31P", "nu_ref_hz": 100e6})
        >>> with tempfile.TemporaryDirectory() as d:
        ...     p = spec.write_csv(pathlib.Path(d) / "out.csv")
        ...     p.read_text().splitlines()[2]
        'ppm,hz,intensity'
        """
        return write_text_safely(path, self.csv_text(), force=force)

    def sideband_table(self) -> str:
        """Text table: site, sideband index, offset (Hz, ppm), integrated intensity.

        Returns
        -------
        str
            One header line and one line per :class:`SidebandRow`, or a
            one-line note for a static or infinite-rate spectrum.

        References
        ----------
        J. Herzfeld, A. E. Berger, J. Chem. Phys. 73 (1980) 6021 (sideband
        intensities).

        Examples
        --------
        >>> spec = Spectrum(hz=[-100.0, 0.0, 100.0], ppm=[-1.0, 0.0, 1.0], intensity=[0.0, 1.0, 0.0],
        ...                 site_labels=("a",), site_intensities=[[0.0, 1.0, 0.0]],
        ...                 metadata={"nucleus": "31P", "nu_ref_hz": 100e6})
        >>> print(spec.sideband_table(), end="")
        no sidebands (static or infinite-rate spectrum)
        """
        if not self.sidebands:
            return "no sidebands (static or infinite-rate spectrum)\n"
        rows = [f"{'site':<16} {'band':>5} {'offset_hz':>14} {'offset_ppm':>12} {'intensity':>12}"]
        for r in self.sidebands:
            rows.append(f"{r.site:<16} {r.index:>5d} {r.offset_hz:>14.2f} {r.offset_ppm:>12.3f} {r.intensity:>12.6f}")
        return "\n".join(rows) + "\n"


def write_text_safely(path, text: str, *, force: bool = False, protect=()) -> Path:
    """Write a text file atomically; never overwrite without ``force``.

    Files listed in ``protect`` (e.g. the input model) are never overwritten,
    even with ``force``.

    The text goes to a temporary file in the same folder, which is then moved
    into place with an atomic rename, so readers never see a half-written file.

    Parameters
    ----------
    path : str or pathlib.Path
        Output file; missing parent folders are made.
    text : str
        Content, written as UTF-8 with ``\n`` line ends.
    force : bool, optional
        Overwrite an existing file.
    protect : iterable of path, optional
        Files that must never be overwritten (e.g. the input model).

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    OutputExistsError
        If ``path`` exists and ``force`` is False, or ``path`` is a protected
        file.

    References
    ----------
    POSIX ``rename()`` (IEEE Std 1003.1), atomic replacement of a file
    (from memory).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_text_safely(pathlib.Path(d) / "sub" / "a.txt", "one")
    ...     p = write_text_safely(p, "two", force=True)
    ...     p.read_text()
    'two'
    """
    p = Path(path)
    for q in protect:
        try:
            if p.exists() and Path(q).exists() and p.resolve() == Path(q).resolve():
                raise OutputExistsError(f"output {str(p)!r} is an input file; choose another output name")
        except OSError:
            pass
    if p.exists() and not force:
        raise OutputExistsError(f"output {str(p)!r} exists; pass --force (force=True) to overwrite it")
    if p.parent and not p.parent.exists():
        p.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".", suffix=".part", dir=str(p.parent or "."))
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
        os.replace(tmp, p)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return p
