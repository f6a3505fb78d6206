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
    """An output file exists and overwriting was not requested."""


@dataclass(frozen=True)
class SidebandRow:
    """One band of one site's sideband manifold.

    Attributes
    ----------
    site : str
    index : int
        Sideband order n (0 = centre band).
    offset_hz : float
        Intensity-weighted position of the band (Hz from nu_ref).
    offset_ppm : float
    intensity : float
        Integrated intensity (the site's bands sum to its weight).
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
    site_intensities : ndarray, shape (n_sites, points)
    metadata : Mapping
        What made the spectrum (nucleus, field, nu_ref, method per site, ...).
    sidebands : tuple of SidebandRow
        Sideband table (spinning samples at finite rate; empty otherwise).
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
        return float(self.metadata.get("nu_ref_hz", math.nan))

    @property
    def dx_ppm(self) -> float:
        return float(self.ppm[1] - self.ppm[0]) if self.ppm.size > 1 else math.nan

    def area(self, site: int | None = None) -> float:
        """Integral over ppm of the sum (or of one site)."""
        y = self.intensity if site is None else self.site_intensities[site]
        return float(y.sum() * self.dx_ppm)

    def first_moment_ppm(self, site: int | None = None) -> float:
        """Centre of gravity (ppm) of the sum or of one site."""
        y = self.intensity if site is None else self.site_intensities[site]
        return float((y * self.ppm).sum() / y.sum())

    # ----- files ---------------------------------------------------------
    def csv_text(self) -> str:
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
        """Write the spectrum as CSV; refuses to overwrite unless ``force``."""
        return write_text_safely(path, self.csv_text(), force=force)

    def sideband_table(self) -> str:
        """Text table: site, sideband index, offset (Hz, ppm), integrated intensity."""
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
