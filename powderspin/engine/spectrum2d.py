"""A simulated two-dimensional (MQMAS or STMAS) spectrum: a frozen value."""

from __future__ import annotations

from dataclasses import dataclass, field
from fractions import Fraction
from types import MappingProxyType
from typing import Mapping

import numpy as np

from ..frozen import reduce_through_init

__all__ = ["Spectrum2D"]


@dataclass(frozen=True)
class Spectrum2D:
    """A sheared two-dimensional spectrum: F1 the isotropic dimension, F2 the central transition.

    Attributes
    ----------
    f1_hz, f1_ppm : ndarray (n1,)
        F1 points (sheared isotropic scale: a site with C_Q = 0 lies on the
        diagonal), Hz offsets from nu_ref and ppm, ascending.
    f2_hz, f2_ppm : ndarray (n2,)
        F2 points, ascending.
    intensity : ndarray (n1, n2)
        Sum over sites, density per ppm^2 (each site integrates to its weight
        under ideal excitation).
    site_labels : tuple of str
    site_intensities : ndarray (n_sites, n1, n2)
    metadata : Mapping
        What made the spectrum, including the F1 convention (``"f1_convention"``:
        the refocusing ratio, the F1 definition and the centre-of-gravity formulas)
        and each site's F1 and F2 centres of gravity (``"centres_of_gravity_ppm"``).

    References
    ----------
    S. E. Ashbrook, S. Wimperis, Prog. Nucl. Magn. Reson. Spectrosc. 45 (2004) 53 (shearing and referencing).

    Examples
    --------
    >>> s = Spectrum2D(f1_hz=[0.0, 100.0], f1_ppm=[0.0, 1.0], f2_hz=[0.0, 100.0, 200.0], f2_ppm=[0.0, 1.0, 2.0],
    ...                intensity=[[0.0, 1.0, 0.0], [0.0, 0.0, 0.0]], site_labels=("a",),
    ...                site_intensities=[[[0.0, 1.0, 0.0], [0.0, 0.0, 0.0]]])
    >>> s.shape, s.f2_projection().tolist(), s.f1_projection().tolist()
    ((2, 3), [0.0, 1.0, 0.0], [1.0, 0.0])
    """

    f1_hz: np.ndarray
    f1_ppm: np.ndarray
    f2_hz: np.ndarray
    f2_ppm: np.ndarray
    intensity: np.ndarray
    site_labels: tuple[str, ...]
    site_intensities: np.ndarray
    metadata: Mapping = field(default_factory=dict)

    __reduce__ = reduce_through_init  # picklable: to and from Dask workers (powderspin.frozen)

    def __post_init__(self):
        for name in ("f1_hz", "f1_ppm", "f2_hz", "f2_ppm", "intensity", "site_intensities"):
            a = np.array(getattr(self, name), dtype=float)
            a.flags.writeable = False
            object.__setattr__(self, name, a)
        n1, n2 = self.f1_ppm.size, self.f2_ppm.size
        if self.intensity.shape != (n1, n2):
            raise ValueError(f"intensity has shape {self.intensity.shape}, expected (n1, n2) = ({n1}, {n2})")
        if self.site_intensities.shape[1:] != (n1, n2):
            raise ValueError(f"site_intensities has shape {self.site_intensities.shape}, expected (n_sites, {n1}, "
                             f"{n2})")
        object.__setattr__(self, "metadata", MappingProxyType(dict(self.metadata)))
        object.__setattr__(self, "site_labels", tuple(self.site_labels))

    @property
    def shape(self) -> tuple[int, int]:
        """(n1, n2).

        Returns
        -------
        tuple of int
        """
        return self.intensity.shape

    @property
    def dx1_ppm(self) -> float:
        """F1 point spacing (ppm; 1 for a single point).

        Returns
        -------
        float
        """
        return float(self.f1_ppm[1] - self.f1_ppm[0]) if self.f1_ppm.size > 1 else 1.0

    @property
    def dx2_ppm(self) -> float:
        """F2 point spacing (ppm; 1 for a single point).

        Returns
        -------
        float
        """
        return float(self.f2_ppm[1] - self.f2_ppm[0]) if self.f2_ppm.size > 1 else 1.0

    def _pick(self, site):
        if site is None:
            return self.intensity
        if isinstance(site, str):
            if site not in self.site_labels:
                raise ValueError(f"site = {site!r} is not one of {list(self.site_labels)}")
            site = self.site_labels.index(site)
        return self.site_intensities[site]

    def f2_projection(self, site=None) -> np.ndarray:
        """Sum over F1 (density per ppm along F2): under ideal excitation, the 1D MAS central-transition spectrum.

        Parameters
        ----------
        site : int or str, optional
            One site (index or label) instead of the sum.

        Returns
        -------
        numpy.ndarray (n2,)
        """
        return self._pick(site).sum(axis=0) * self.dx1_ppm

    def f1_projection(self, site=None) -> np.ndarray:
        """Sum over F2 (density per ppm along F1): the isotropic spectrum.

        Parameters
        ----------
        site : int or str, optional
            One site (index or label) instead of the sum.

        Returns
        -------
        numpy.ndarray (n1,)
        """
        return self._pick(site).sum(axis=1) * self.dx2_ppm

    def f2_slice(self, f1_ppm: float, site=None) -> np.ndarray:
        """The F2 cross-section at an F1 position, interpolated linearly between the two nearest rows.

        Parameters
        ----------
        f1_ppm : float
            F1 position (ppm), within the F1 axis.
        site : int or str, optional

        Returns
        -------
        numpy.ndarray (n2,)
            Density per ppm^2 along F2.

        Raises
        ------
        ValueError
            When ``f1_ppm`` lies outside the F1 axis (the message gives its range).

        Examples
        --------
        >>> s = Spectrum2D([0.0, 100.0], [0.0, 1.0], [0.0, 100.0], [0.0, 1.0], [[0.0, 2.0], [4.0, 0.0]], ("a",),
        ...                [[[0.0, 2.0], [4.0, 0.0]]])
        >>> s.f2_slice(0.25).tolist()
        [1.0, 1.5]
        """
        y = self._pick(site)
        f = self.f1_ppm
        x = float(f1_ppm)
        lo, hi = float(f.min()), float(f.max())
        if not lo <= x <= hi:
            raise ValueError(f"f1_ppm = {f1_ppm!r} lies outside the F1 axis [{lo:.6g}, {hi:.6g}] ppm")
        if f.size == 1:
            return y[0].copy()
        j = min(int(np.searchsorted(f, x, side="right")) - 1, f.size - 2)
        r = (x - f[j]) / (f[j + 1] - f[j])
        return (1.0 - r) * y[j] + r * y[j + 1]

    @property
    def f1_scale(self) -> str:
        """The F1 scale of this spectrum (``"isotropic"`` unless :meth:`on_f1_scale` changed it).

        Returns
        -------
        str
            A name of :data:`powderspin.physics.multiple_quantum.F1_SCALES`.
        """
        conv = self.metadata.get("f1_convention") or {}
        return str(conv.get("f1_scale", "isotropic"))

    def on_f1_scale(self, name: str) -> "Spectrum2D":
        """The same spectrum drawn on another F1 scale, named in its metadata.

        F1 (Hz and ppm, same 0 ppm) is multiplied by the scale's factor c
        relative to the present scale (c = p - R for ``"t1_evolution"``,
        (p - R) / (1 + |R|) for ``"total_evolution"``, 1 for ``"isotropic"``;
        :meth:`powderspin.physics.multiple_quantum.TwoDimensionalScale.f1_scale_factor`),
        the intensities are divided by |c| so that each site still integrates to
        its weight (density per ppm^2 of the new axes), and the metadata's
        ``f1_convention`` and F1 centres of gravity follow.

        Parameters
        ----------
        name : {"isotropic", "t1_evolution", "total_evolution"}

        Returns
        -------
        Spectrum2D

        Raises
        ------
        ValueError
            An unknown name, or metadata that do not say the spin and experiment
            (a spectrum not made by the simulator).

        References
        ----------
        S. E. Ashbrook, S. Wimperis, Prog. Nucl. Magn. Reson. Spectrosc. 45 (2004) 53 (F1 scaling conventions).

        Examples
        --------
        >>> meta = {"spin": "3/2", "experiment": "mqmas", "mq_order": 3, "f1_convention": {"f1_scale": "isotropic"}}
        >>> s = Spectrum2D([0.0, 100.0], [0.0, 1.0], [0.0], [0.0], [[1.0], [0.0]], ("a",), [[[1.0], [0.0]]], meta)
        >>> t = s.on_f1_scale("t1_evolution")
        >>> t.f1_scale, t.metadata["f1_convention"]["f1_scale_factor"], round(float(t.f1_ppm[1]), 6)
        ('t1_evolution', '34/9', 3.777778)
        """
        from ..physics.multiple_quantum import F1_SCALES, two_dimensional_scale

        if name not in F1_SCALES:
            raise ValueError(f"f1_scale = {name!r} is not one of " + ", ".join(repr(k) for k in F1_SCALES))
        meta = dict(self.metadata)
        try:
            spin = float(Fraction(str(meta["spin"])))
            scale = two_dimensional_scale(spin, str(meta["experiment"]), int(meta.get("mq_order", 3)))
        except (KeyError, ValueError) as e:
            raise ValueError(f"f1_scale: the spectrum's metadata must give its spin and experiment ({e})") from None
        c = scale.f1_scale_factor(name) / scale.f1_scale_factor(self.f1_scale)
        f1_hz, f1_ppm = c * self.f1_hz, c * self.f1_ppm
        y, ys = self.intensity / abs(c), self.site_intensities / abs(c)
        if c < 0:
            f1_hz, f1_ppm, y, ys = f1_hz[::-1], f1_ppm[::-1], y[::-1], ys[:, ::-1]
        meta["f1_convention"] = scale.describe(name)
        cogs = meta.get("centres_of_gravity_ppm")
        if isinstance(cogs, Mapping):
            meta["centres_of_gravity_ppm"] = {k: ({**v, "f1": c * v["f1"]} if isinstance(v, Mapping) and "f1" in v
                                                  else v) for k, v in cogs.items()}
        if name != "isotropic":
            meta["intensity_units"] = (f"density per ppm^2 on the F2 and {name} F1 axes; each site integrates to its "
                                       "weight")
        return Spectrum2D(f1_hz, f1_ppm, self.f2_hz, self.f2_ppm, y, self.site_labels, ys, meta)

    def to_dict(self) -> dict:
        """The spectrum as plain values (lists and the metadata).

        Returns
        -------
        dict
            ``f1_hz``, ``f1_ppm``, ``f2_hz``, ``f2_ppm``, ``intensity``,
            ``site_labels``, ``site_intensities``, ``metadata``.

        Examples
        --------
        >>> s = Spectrum2D([0.0], [0.0], [0.0], [0.0], [[1.0]], ("a",), [[[1.0]]])
        >>> sorted(s.to_dict())[:3]
        ['f1_hz', 'f1_ppm', 'f2_hz']
        """
        return {"f1_hz": self.f1_hz.tolist(), "f1_ppm": self.f1_ppm.tolist(), "f2_hz": self.f2_hz.tolist(),
                "f2_ppm": self.f2_ppm.tolist(), "intensity": self.intensity.tolist(),
                "site_labels": list(self.site_labels), "site_intensities": self.site_intensities.tolist(),
                "metadata": dict(self.metadata)}
