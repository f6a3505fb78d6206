"""The Spectrum value and its files.

CSV layout (our own): ``#`` comment lines ``# key: value`` holding the
metadata (every site's parameters included, so a CSV alone says how it was
made), then the header ``ppm,hz,intensity,<site label>,...`` and one row per
point in ascending hz.  ``intensity`` is the sum over sites; each further
column is one site.  Intensities are densities per ppm: each site's selected
transitions integrate (over ppm) to its weight, apart from what falls outside
the axis.

Sideband table (``--sidebands FILE``), CSV with the columns ``site`` (label),
``order`` (sideband order n, 0 = centre band), ``position_hz`` and
``position_ppm`` (the band's intensity-weighted position, Hz from nu_ref and
ppm), ``nominal_hz`` (the centre band's position plus n times the spinning
rate) and ``intensity`` (integrated; a site's bands sum to its weight).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Mapping

import numpy as np

from ..frozen import reduce_through_init

__all__ = ["Spectrum", "SidebandRow"]


@dataclass(frozen=True)
class SidebandRow:
    """One band of one site's sideband manifold.

    Attributes
    ----------
    site : str
        Label of the site the band belongs to.
    order : int
        Sideband order n (0 = centre band).
    position_hz : float
        Intensity-weighted position of the band (Hz from nu_ref).
    position_ppm : float
        The same position in ppm (``1e6 * position_hz / nu_ref``).
    intensity : float
        Integrated intensity (the site's bands sum to its weight).

    References
    ----------
    J. Herzfeld, A. E. Berger, J. Chem. Phys. 73 (1980) 6021 (sideband
    intensities); M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300.

    Examples
    --------
    >>> row = SidebandRow("AlO4", -1, -12500.0, -79.9, 0.02)
    >>> row.order, row.position_hz
    (-1, -12500.0)
    """

    site: str
    order: int
    position_hz: float
    position_ppm: float
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

    __reduce__ = reduce_through_init  # picklable: to and from Dask workers (powderspin.frozen)

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

    def to_dict(self) -> dict:
        """The spectrum as plain values: axis, sum, sites, metadata and sideband table.

        Returns
        -------
        dict
            ``hz``, ``ppm``, ``intensity`` and ``site_intensities`` (lists),
            ``site_labels``, ``metadata`` and ``sidebands`` (one dict per row).

        Examples
        --------
        >>> spec = Spectrum(hz=[-100.0, 0.0, 100.0], ppm=[-1.0, 0.0, 1.0], intensity=[0.0, 1.0, 0.0],
        ...                 site_labels=("a",), site_intensities=[[0.0, 1.0, 0.0]])
        >>> sorted(spec.to_dict())[:3]
        ['hz', 'intensity', 'metadata']
        """
        return {"hz": self.hz.tolist(), "ppm": self.ppm.tolist(), "intensity": self.intensity.tolist(),
                "site_labels": list(self.site_labels), "site_intensities": self.site_intensities.tolist(),
                "metadata": dict(self.metadata),
                "sidebands": [{"site": r.site, "order": r.order, "position_hz": r.position_hz,
                               "position_ppm": r.position_ppm, "intensity": r.intensity} for r in self.sidebands]}

    def sideband_rows_with_nominal(self) -> list[tuple]:
        """Sideband rows with each band's nominal position: the site's centre band plus n x rate.

        Returns
        -------
        list of (SidebandRow, float)
            Each row and its nominal position (Hz).

        Examples
        --------
        >>> spec = Spectrum(hz=[0.0, 1.0], ppm=[0.0, 0.01], intensity=[1.0, 0.0], site_labels=("a",),
        ...                 site_intensities=[[1.0, 0.0]], metadata={"spinning_hz": 1000.0},
        ...                 sidebands=(SidebandRow("a", 0, 10.0, 0.1, 0.9), SidebandRow("a", 1, 1012.0, 10.12, 0.1)))
        >>> [round(h, 1) for _, h in spec.sideband_rows_with_nominal()]
        [10.0, 1010.0]
        """
        rate = self.metadata.get("spinning_hz", 0.0)
        rate = float(rate) if not isinstance(rate, str) else math.inf
        centre = {r.site: r.position_hz for r in self.sidebands if r.order == 0}
        out = []
        for r in self.sidebands:
            c = centre.get(r.site, r.position_hz - r.order * rate)
            out.append((r, c + r.order * rate))
        return out

    def sideband_table(self) -> str:
        """Text table: site, sideband order, position (Hz, ppm), integrated intensity.

        Returns
        -------
        str
            Two header lines and one line per :class:`SidebandRow`, or a
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
        rows = ["sidebands (order n: the band at the centre band + n x the spinning rate)",
                f"{'site':<16} {'order':>5} {'position_hz':>14} {'position_ppm':>12} {'intensity':>12}"]
        for r in self.sidebands:
            rows.append(f"{r.site:<16} {r.order:>5d} {r.position_hz:>14.2f} {r.position_ppm:>12.3f} "
                        f"{r.intensity:>12.6f}")
        return "\n".join(rows) + "\n"
