"""Kernel grids of EFG distributions: the distribution of a site, its (C_Q, eta) nodes and their weights.

See :mod:`powderspin.disorder.site` for how a distributed site is rendered from the kernels of a grid.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from ..model.values import Model, ModelError, Site
from ..physics.distributions import (
    DistributionError,
    ct_g_table,
    ct_spin_factor,
    czjzek_cq_cdf,
    czjzek_pdf,
    uniform_in_measure,
)

#: largest move of a CT pattern edge between neighbouring sub-samples, as a
#: fraction of the resolution (see the module docstring)
GRID_FRACTION = 0.5


#: C_Q nodes per smallest sigma of a Czjzek grid (the nodes are equally spaced in C_Q)
NODES_PER_SIGMA = 6


#: fewest and most C_Q nodes of a kernel grid (rows of the kernel matrix per eta node)
MIN_CQ_NODES = 24


MAX_CQ_NODES = 160


#: eta nodes of a Czjzek kernel grid
ETA_NODES = 17


#: finest kernel axis, as a divisor of the output axis step
MAX_OVERSAMPLING = 8


#: most sub-samples (line shapes) the spacing criterion may ask for on the scaled path
MAX_GRID_NODES = 250_000


#: probability left outside a Czjzek grid
TAIL_MASS = 1e-4


#: seeded random tensors behind the extended-Czjzek weights
EXTENDED_SAMPLES = 200_000


def parameter_range(model: Model, table: str, index: int, key: str) -> tuple[float, float]:
    """The range a parameter can take: (value, value) when fixed, the bounds when free or tied to a free one.

    Parameters
    ----------
    model : Model
    table : {"site", "measurement"}
    index : int
    key : str

    Returns
    -------
    tuple of 2 float
        (lowest, highest) in the key's unit.

    Examples
    --------
    >>> from powderspin.model.modelfile import make_model
    >>> m = make_model("27Al", {"field_tesla": 9.4}, [{"czjzek_sigma_mhz": {"start": 2.0, "min": 1.0, "max": 3.0}}])
    >>> parameter_range(m, "site", 0, "czjzek_sigma_mhz"), parameter_range(m, "site", 0, "gauss_hz")
    ((1.0, 3.0), (0.0, 0.0))
    """
    addr = (table, index, key)
    for t in model.tied:
        if (t.address.table, t.address.index, t.address.key) == addr and t.address.item is None:
            src = t.source
            return parameter_range(model, src.table, src.index, src.key)
    for f in model.free:
        if (f.address.table, f.address.index, f.address.key) == addr and f.address.item is None:
            return (float(f.min), float(f.max))
    obj = model.measurements[index] if table == "measurement" else model.sites[index]
    if table == "site" and key == "shift_ppm":
        v = obj.shift.iso_ppm
    else:
        v = float(getattr(obj, key))
    return (v, v)


def shift_fwhm_hz(site: Site, nu_ref_hz: float) -> float:
    """Gaussian FWHM (Hz) of a site's shift distribution: ``shift_fwhm_ppm * nu_ref * 1e-6``.

    Parameters
    ----------
    site : Site
    nu_ref_hz : float
        Reference frequency (Hz) at the measurement's field.

    Returns
    -------
    float

    Examples
    --------
    >>> shift_fwhm_hz(Site(shift_fwhm_ppm=10.0), 104.3e6)
    1043.0
    """
    return site.shift_fwhm_ppm * nu_ref_hz * 1e-6


@dataclass(frozen=True)
class EfgDistribution:
    """What kind of EFG distribution a site has, with its current values.

    Parameters
    ----------
    kind : {"czjzek", "extended", "explicit"}
    sigma_mhz : float
        Czjzek width (MHz).
    cq0_mhz, eta0 : float
        Fixed tensor of the extended model (``|cq_mhz|``, ``eta_q``).
    cq_values_mhz, cq_weights, eta_values, eta_weights : tuple of float
        Explicit grids (one value with weight 1 for a fixed parameter).

    Examples
    --------
    >>> EfgDistribution.of_site(Site(czjzek_sigma_mhz=2.0)).kind
    'czjzek'
    >>> EfgDistribution.of_site(Site(cq_mhz=3.0, eta_q=0.2, czjzek_sigma_mhz=0.5)).kind
    'extended'
    """

    kind: str
    sigma_mhz: float = 0.0
    cq0_mhz: float = 0.0
    eta0: float = 0.0
    cq_values_mhz: tuple = ()
    cq_weights: tuple = ()
    eta_values: tuple = ()
    eta_weights: tuple = ()

    @classmethod
    def of_site(cls, site: Site, *, cq_variable: bool = False) -> EfgDistribution:
        """The distribution of a site (``cq_variable``: a free ``cq_mhz`` makes a Czjzek site extended).

        Parameters
        ----------
        site : Site
        cq_variable : bool, optional

        Returns
        -------
        EfgDistribution

        Examples
        --------
        >>> d = EfgDistribution.of_site(Site(cq_distribution_mhz={"values": [2, 4], "weights": [1, 1]}, eta_q=0.3))
        >>> d.kind, d.cq_values_mhz, d.eta_values
        ('explicit', (2.0, 4.0), (0.3,))
        """
        if site.cq_distribution_mhz is not None or site.eta_distribution is not None:
            cq = site.cq_distribution_mhz or ((abs(site.cq_mhz),), (1.0,))
            eta = site.eta_distribution or ((site.eta_q,), (1.0,))
            return cls("explicit", cq_values_mhz=tuple(cq[0]), cq_weights=tuple(cq[1]),
                       eta_values=tuple(eta[0]), eta_weights=tuple(eta[1]))
        kind = "extended" if (site.cq_mhz != 0.0 or cq_variable) else "czjzek"
        return cls(kind, sigma_mhz=site.czjzek_sigma_mhz, cq0_mhz=abs(site.cq_mhz), eta0=site.eta_q)

    def describe(self) -> str:
        """One line for the metadata, e.g. ``"Czjzek, sigma = 2 MHz"``.

        Returns
        -------
        str

        Examples
        --------
        >>> EfgDistribution("extended", 0.8, 3.0, 0.4).describe()
        'extended Czjzek, sigma = 0.8 MHz around C_Q = 3 MHz, eta = 0.4'
        """
        if self.kind == "czjzek":
            return f"Czjzek, sigma = {self.sigma_mhz:g} MHz"
        if self.kind == "extended":
            return (f"extended Czjzek, sigma = {self.sigma_mhz:g} MHz around C_Q = {self.cq0_mhz:g} MHz, "
                    f"eta = {self.eta0:g}")
        return (f"explicit grid, {len(self.cq_values_mhz)} C_Q value(s) x {len(self.eta_values)} eta value(s)")


@functools.lru_cache(maxsize=2)
def _standard_normals(n: int, seed: int = 20240611) -> np.ndarray:
    z = np.random.default_rng(seed).standard_normal((n, 5))
    z.setflags(write=False)
    return z


def _principal_cq_eta_fast(u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """C_Q = |V_zz| and eta of the tensors with components u (n, 5), by the closed-form 3x3 eigenvalues.

    For a symmetric traceless V with ``p = sqrt(Tr V^2 / 6)`` the eigenvalues are
    ``2 p cos(phi + 2 pi k / 3)``, k = 0, 1, 2, with ``phi = arccos(det(V / p) / 2) / 3``
    (the trigonometric solution of the characteristic cubic; O. K. Smith, Commun. ACM 4
    (1961) 168, from memory).  ``Tr V^2 = (3/2) sum u^2`` and det V are written from the
    components (:func:`powderspin.physics.distributions.efg_from_components`), so no 3x3 arrays
    are built.  Checked against numpy.linalg.eigvalsh in the tests.
    """
    h = math.sqrt(3.0) / 2.0
    u1, u2, u3, u4, u5 = (u[:, i] for i in range(5))
    vzz = u1
    vxx = -0.5 * u1 + h * u2
    vyy = -0.5 * u1 - h * u2
    vxy, vxz, vyz = h * u3, h * u4, h * u5
    det = vxx * vyy * vzz + 2 * vxy * vxz * vyz - vxx * vyz ** 2 - vyy * vxz ** 2 - vzz * vxy ** 2
    p = 0.5 * np.sqrt(np.einsum("ij,ij->i", u, u))
    safe = np.where(p > 0, p, 1.0)
    phi = np.arccos(np.clip(det / safe ** 3 / 2.0, -1.0, 1.0)) / 3.0
    hi = 2 * p * np.cos(phi)                       # largest eigenvalue
    lo = 2 * p * np.cos(phi + 2 * np.pi / 3)       # smallest
    mid = -hi - lo
    big_is_hi = np.abs(hi) >= np.abs(lo)
    zz = np.where(big_is_hi, hi, lo)               # largest magnitude
    other = np.where(big_is_hi, lo, hi)            # the remaining two: other and mid
    yy = np.where(np.abs(other) >= np.abs(mid), other, mid)
    xx = np.where(np.abs(other) >= np.abs(mid), mid, other)
    cq = np.abs(zz)
    with np.errstate(invalid="ignore", divide="ignore"):
        eta = np.where(cq > 0, (xx - yy) / np.where(zz == 0, 1.0, zz), 0.0)
    return cq, np.clip(eta, 0.0, 1.0)


def _extended_samples(sigma: float, cq0: float, eta0: float, n: int = EXTENDED_SAMPLES):
    """(C_Q, eta) of the seeded sample of the extended model (common random numbers for every call)."""
    u = _standard_normals(n) * sigma
    u = u.copy()
    u[:, 0] += cq0
    u[:, 1] += eta0 * cq0 / math.sqrt(3.0)
    return _principal_cq_eta_fast(u)


@dataclass(frozen=True, eq=False)
class KernelGrid:
    """Nodes of a (C_Q, eta) kernel grid, and the sub-samples whose line shapes make each node's kernel.

    The distribution's density is represented by its values at the nodes,
    joined linearly (hat functions in C_Q and in eta): node (i, j) has the
    weight ``density(C_i, eta_j) A_i B_j`` with ``A_i``, ``B_j`` the areas of
    its hats, and its kernel is the hat-weighted average of the sub-samples'
    line shapes (so the sum over nodes integrates the interpolated density
    against the line shapes; the error is second order in the node spacing).
    The sub-samples are spaced by the criterion of the module docstring.
    Explicit grids have point nodes (each value its own sub-sample).

    Parameters
    ----------
    kind : {"czjzek", "extended", "explicit"}
    cq_mhz : numpy.ndarray (K,)
        C_Q nodes (MHz), equally spaced (explicit: the values).
    eta : numpy.ndarray (M,)
        eta nodes, equally spaced (explicit: the values).
    cq_samples_mhz : numpy.ndarray (L,)
        C_Q sub-samples, increasing.
    cq_left : numpy.ndarray (L,) of int
        The node at or left of each sub-sample; it shares its quadrature weight
        between that node (``cq_w_left``) and the next (``cq_w_right``).
    cq_w_left, cq_w_right : numpy.ndarray (L,)
    eta_samples, eta_left, eta_w_left, eta_w_right : numpy.ndarray (Mf,)
        The same in eta.
    explicit_weights : numpy.ndarray (K, M) or None
    resolution_hz, fraction : float
        The spacing criterion (NaN for explicit grids).
    criterion_shape : tuple of 2 int
        Sub-samples the criterion asked for in C_Q^2 and in eta.
    tail_mass : float
        Probability the extent leaves out.
    sigma_resolved_mhz : float
        Smallest sigma the node spacing follows (at least NODES_PER_SIGMA
        nodes per sigma); 0 for explicit grids.

    Examples
    --------
    >>> g = plan_grid(EfgDistribution("czjzek", 2.0), 2.5, 104.26e6, 500.0)
    >>> g.shape, g.criterion_shape
    ((30, 17), (63, 13))
    """

    kind: str
    cq_mhz: np.ndarray
    eta: np.ndarray
    cq_samples_mhz: np.ndarray
    cq_left: np.ndarray
    cq_w_left: np.ndarray
    cq_w_right: np.ndarray
    eta_samples: np.ndarray
    eta_left: np.ndarray
    eta_w_left: np.ndarray
    eta_w_right: np.ndarray
    explicit_weights: np.ndarray | None = None
    resolution_hz: float = math.nan
    fraction: float = math.nan
    criterion_shape: tuple = (0, 0)
    tail_mass: float = 0.0
    sigma_resolved_mhz: float = 0.0

    @property
    def shape(self) -> tuple[int, int]:
        """(C_Q nodes, eta nodes)."""
        return (len(self.cq_mhz), len(self.eta))

    @property
    def line_shapes(self) -> int:
        """Number of sub-sample line shapes behind the kernels."""
        return int(len(self.cq_samples_mhz) * len(self.eta_samples))

    def cq_norms(self) -> np.ndarray:
        """Total sub-sample weight of each C_Q node (the kernels are divided by it)."""
        k = len(self.cq_mhz)
        return (np.bincount(self.cq_left, self.cq_w_left, minlength=k)
                + np.bincount(np.minimum(self.cq_left + 1, k - 1), self.cq_w_right, minlength=k))

    def eta_norms(self) -> np.ndarray:
        """Total sub-sample weight of each eta node."""
        m = len(self.eta)
        return (np.bincount(self.eta_left, self.eta_w_left, minlength=m)
                + np.bincount(np.minimum(self.eta_left + 1, m - 1), self.eta_w_right, minlength=m))

    def weights(self, dist: EfgDistribution) -> np.ndarray:
        """Node weights (K, M), summing to 1, for the distribution's current values.

        Pure Czjzek: the closed-form density at the nodes times the hat
        areas.  Extended Czjzek: a seeded sample of random tensors (the same
        one for every call) shared linearly between the neighbouring nodes
        (the hats' projection of the density; smooth in the parameters).
        Explicit: the given weights.

        Parameters
        ----------
        dist : EfgDistribution

        Returns
        -------
        numpy.ndarray

        Examples
        --------
        >>> d = EfgDistribution("czjzek", 2.0)
        >>> g = plan_grid(d, 2.5, 104.26e6, 500.0)
        >>> w = g.weights(d)
        >>> w.shape, round(float(w.sum()), 12), bool((w >= 0).all())
        ((30, 17), 1.0, True)
        """
        k, m = self.shape
        if self.kind == "explicit":
            return self.explicit_weights
        if dist.sigma_mhz <= 0:
            cq, eta = np.array([dist.cq0_mhz if self.kind == "extended" else 0.0]), np.array([dist.eta0])
        elif self.kind == "czjzek":
            w = czjzek_pdf(self.cq_mhz[:, None], self.eta[None, :], dist.sigma_mhz) \
                * _hat_areas(self.cq_mhz)[:, None] * _hat_areas(self.eta)[None, :]
            total = float(w.sum())
            if not total > 0:
                raise ModelError(f"czjzek_sigma_mhz = {dist.sigma_mhz:g} puts no probability on the kernel grid "
                                 f"(C_Q {self.cq_mhz[0]:.4g} ... {self.cq_mhz[-1]:.4g} MHz)")
            return w / total
        else:
            cq, eta = _extended_samples(dist.sigma_mhz, dist.cq0_mhz, dist.eta0)
        x = (cq - self.cq_mhz[0]) / max(self.cq_mhz[-1] - self.cq_mhz[0], 1e-300) * (k - 1) if k > 1 else 0 * cq
        y = (eta - self.eta[0]) / max(self.eta[-1] - self.eta[0], 1e-300) * (m - 1) if m > 1 else 0 * eta
        keep = (x >= -1e-9) & (x <= k - 1 + 1e-9) & (y >= -1e-9) & (y <= m - 1 + 1e-9)
        if not keep.any():
            raise ModelError(
                f"the extended Czjzek distribution (C_Q = {dist.cq0_mhz:g} MHz, eta = {dist.eta0:g}, sigma = "
                f"{dist.sigma_mhz:g} MHz) lies outside its kernel grid (C_Q {self.cq_mhz[0]:.4g} ... "
                f"{self.cq_mhz[-1]:.4g} MHz); give cq_mhz/eta_q/czjzek_sigma_mhz ranges that contain it")
        x, y = np.clip(x[keep], 0.0, k - 1.0), np.clip(y[keep], 0.0, m - 1.0)
        i0 = np.minimum(np.floor(x).astype(np.int64), max(k - 2, 0))
        j0 = np.minimum(np.floor(y).astype(np.int64), max(m - 2, 0))
        fx, fy = x - i0, y - j0
        w = np.zeros(k * m)
        for di, wx in ((0, 1 - fx), (1, fx)):
            for dj, wy in ((0, 1 - fy), (1, fy)):
                ii = np.minimum(i0 + di, k - 1)
                jj = np.minimum(j0 + dj, m - 1)
                w += np.bincount(ii * m + jj, weights=wx * wy, minlength=k * m)
        w = w.reshape(k, m)
        return w / w.sum()

    def __str__(self) -> str:
        k, m = self.shape
        lines = [f"kernel grid ({self.kind}): {k} x {m} nodes, {self.line_shapes} sub-sample line shapes"]
        if self.kind != "explicit":
            lines.append(f"  C_Q {self.cq_mhz[0]:.4g} ... {self.cq_mhz[-1]:.4g} MHz, eta {self.eta[0]:.3g} ... "
                         f"{self.eta[-1]:.3g}; criterion {self.criterion_shape[0]} x {self.criterion_shape[1]} "
                         f"sub-samples for edge moves <= {self.fraction:g} x {self.resolution_hz:.4g} Hz")
        return "\n".join(lines)


def _hat_areas(nodes: np.ndarray) -> np.ndarray:
    """Areas of the hat functions on equally spaced nodes (half at the two ends)."""
    if len(nodes) == 1:
        return np.ones(1)
    h = (nodes[-1] - nodes[0]) / (len(nodes) - 1)
    a = np.full(len(nodes), h)
    a[0] = a[-1] = 0.5 * h
    return a


def _hat_shares(samples: np.ndarray, weights: np.ndarray, nodes: np.ndarray):
    """Left node index and the shares of each sample's quadrature weight for it and the next node."""
    n = len(nodes)
    if n == 1:
        return np.zeros(len(samples), dtype=np.int64), weights.copy(), np.zeros(len(samples))
    x = (samples - nodes[0]) / (nodes[-1] - nodes[0]) * (n - 1)
    x = np.clip(x, 0.0, n - 1.0)
    left = np.minimum(np.floor(x).astype(np.int64), n - 2)
    f = x - left
    return left, weights * (1.0 - f), weights * f


def _cq_quantile(sigma: float, tail: float) -> float:
    return float(optimize.brentq(lambda c: float(czjzek_cq_cdf(c, sigma)) - (1 - tail * (1 - 1e-6)), 0.0,
                                 20 * sigma, xtol=1e-13 * sigma))


def distribution_extent(dist: EfgDistribution, sigma_max: float, cq0_range, eta0_range, tail: float):
    """(c_lo, c_hi, e_lo, e_hi) holding all but ``tail`` of the distribution anywhere in the ranges."""
    if dist.kind == "czjzek":
        return _extent_cached("czjzek", float(sigma_max), (0.0, 0.0), (0.0, 0.0), float(tail))
    return _extent_cached(dist.kind, float(sigma_max), tuple(map(float, cq0_range)), tuple(map(float, eta0_range)),
                          float(tail))


@functools.lru_cache(maxsize=64)
def _extent_cached(kind: str, sigma_max: float, cq0_range, eta0_range, tail: float):
    if kind == "czjzek":
        return 0.0, _cq_quantile(sigma_max, tail), 0.0, 1.0
    c_lo, c_hi, e_lo, e_hi = math.inf, 0.0, 1.0, 0.0
    for c0 in sorted(set(cq0_range)):
        for e0 in sorted(set(eta0_range)):
            cq, eta = _extended_samples(sigma_max, abs(c0), e0)
            a, b = np.quantile(cq, [tail / 4, 1 - tail / 4])
            ea, eb = np.quantile(eta, [tail / 4, 1 - tail / 4])
            c_lo, c_hi = min(c_lo, float(a)), max(c_hi, float(b))
            e_lo, e_hi = min(e_lo, float(ea)), max(e_hi, float(eb))
    if e_hi - e_lo < 1e-6:
        e_lo, e_hi = max(0.0, e_lo - 1e-3), min(1.0, e_hi + 1e-3)
    if c_hi - c_lo < 1e-9:
        c_lo, c_hi = max(0.0, c_lo - 1e-6), c_hi + 1e-6
    return c_lo, c_hi, e_lo, e_hi


def c4_ratio(dist: EfgDistribution, sigma_max: float, cq0_range, eta0_range, c_ref: float) -> float:
    """<C_Q^4> / c_ref^4 over the distribution (the largest over the parameter ranges)."""
    if c_ref <= 0:
        return 0.0
    if dist.kind == "explicit":
        w = np.asarray(dist.cq_weights, float)
        return float((w / w.sum()) @ (np.asarray(dist.cq_values_mhz, float) ** 4)) / c_ref ** 4
    corners = [(0.0, 0.0)] if dist.kind == "czjzek" else [(c, e) for c in set(cq0_range) for e in set(eta0_range)]
    return max(_c4_cached(float(sigma_max), float(c), float(e)) for c, e in corners) / c_ref ** 4


@functools.lru_cache(maxsize=64)
def _c4_cached(sigma: float, cq0: float, eta0: float) -> float:
    cq, _ = _extended_samples(sigma, abs(cq0), eta0)
    return float(np.mean(cq ** 4))


def _fill_gaps(x: np.ndarray, lo: float, hi: float, max_gap: float) -> np.ndarray:
    """Sorted points x in [lo, hi] with evenly spaced points added wherever a gap (ends included) exceeds max_gap."""
    x = np.sort(np.asarray(x, dtype=float))
    out = []
    prev, first = lo, True
    for v in list(x) + [None]:
        end = hi if v is None else v
        gap = end - prev
        # the gap before the first point and after the last count half (they end at the interval's edges)
        limit = 0.5 * max_gap if (first or v is None) else max_gap
        n_add = max(0, math.ceil(gap / limit - 1e-9) - 1) if gap > limit else 0
        if n_add:
            if first and v is not None:
                out.extend(end - (np.arange(n_add, 0, -1)) * gap / (n_add + 0.5))
            elif v is None:
                out.extend(prev + np.arange(1, n_add + 1) * gap / (n_add + 0.5))
            else:
                out.extend(prev + np.arange(1, n_add + 1) * gap / (n_add + 1))
        if v is not None:
            out.append(v)
        prev, first = end, False
    return np.array(out)


def _voronoi_widths(x: np.ndarray, lo: float, hi: float) -> np.ndarray:
    """Widths of the cells around sorted points x inside [lo, hi] (midpoints between neighbours)."""
    mid = 0.5 * (x[1:] + x[:-1])
    edges = np.concatenate([[lo], mid, [hi]])
    return np.diff(edges)


@functools.lru_cache(maxsize=64)
def _plan_cached(dist_kind, spin, larmor_hz, resolution_hz, sigma_max, sigma_min, cq0_range, eta0_range, experiment,
                 fraction, tail, max_nodes, node_limits, explicit):
    if dist_kind == "explicit":
        cq_v, cq_w, eta_v, eta_w = explicit
        oc, oe = np.argsort(cq_v, kind="stable"), np.argsort(eta_v, kind="stable")
        cq = np.asarray(cq_v, float)[oc]
        eta = np.asarray(eta_v, float)[oe]
        wc = np.asarray(cq_w, float)[oc]
        we = np.asarray(eta_w, float)[oe]
        w = np.outer(wc / wc.sum(), we / we.sum())
        k, m = len(cq), len(eta)
        return KernelGrid("explicit", cq, eta, cq.copy(), np.arange(k), np.ones(k), np.zeros(k),
                          eta.copy(), np.arange(m), np.ones(m), np.zeros(m), w)
    dist = EfgDistribution(dist_kind, sigma_max)
    a = ct_spin_factor(spin)
    c_lo, c_hi, e_lo, e_hi = distribution_extent(dist, sigma_max, cq0_range, eta0_range, tail)
    eta_t, gmin_t, gmax_t = ct_g_table(experiment)
    inside = (eta_t >= e_lo - 1e-3) & (eta_t <= e_hi + 1e-3)
    g_abs = float(np.max(np.maximum(np.abs(gmin_t[inside]), np.abs(gmax_t[inside]))))
    edge_per_s = a * 1e12 / (2 * larmor_hz) * g_abs  # Hz of edge move per MHz^2 of C_Q^2
    s_lo, s_hi = c_lo ** 2, c_hi ** 2
    delta_s = fraction * resolution_hz / edge_per_s  # largest C_Q^2 step between sub-samples
    k_crit = max(2, math.ceil((s_hi - s_lo) / delta_s))
    slope = np.maximum(np.abs(np.gradient(gmin_t, eta_t)), np.abs(np.gradient(gmax_t, eta_t)))
    scale_hi = a * (c_hi * 1e6) ** 2 / (2 * larmor_hz)
    density = scale_hi * slope + 1e-9 * fraction * resolution_hz
    t_table = np.concatenate([[0.0], np.cumsum(0.5 * (density[1:] + density[:-1]) * np.diff(eta_t))])
    t_span = float(np.diff(np.interp([e_lo, e_hi], eta_t, t_table))[0])
    m_crit = max(2, math.ceil(t_span / (fraction * resolution_hz)))
    # nodes: equally spaced, NODES_PER_SIGMA per smallest sigma in C_Q (within the limits), eta fixed count
    k_min, k_max, m_nodes = node_limits
    s_res = max(sigma_min, (c_hi - c_lo) / (NODES_PER_SIGMA * (k_max - 1)))
    k = int(min(k_max, max(k_min, math.ceil(NODES_PER_SIGMA * (c_hi - c_lo) / s_res) + 1)))
    cq_nodes = np.linspace(c_lo, c_hi, k)
    m = m_nodes
    eta_nodes = np.linspace(e_lo, e_hi, m)
    h_c = (c_hi - c_lo) / (k - 1)
    h_e = (e_hi - e_lo) / (m - 1)
    # C_Q sub-samples: the criterion's (uniform in C_Q^2), gaps wider than half a node spacing filled
    s_pts = s_lo + (np.arange(k_crit) + 0.5) * (s_hi - s_lo) / k_crit
    cq_samples = _fill_gaps(np.sqrt(s_pts), c_lo, c_hi, 0.5 * h_c)
    cq_q = _voronoi_widths(cq_samples, c_lo, c_hi)
    # eta sub-samples: the criterion's (uniform in edge motion), gaps wider than half a node spacing filled
    _, fine_nodes = uniform_in_measure(t_table, eta_t, e_lo, e_hi, m_crit)
    eta_samples = _fill_gaps(fine_nodes, e_lo, e_hi, 0.5 * h_e)
    eta_q = _voronoi_widths(eta_samples, e_lo, e_hi)
    total = len(cq_samples) * len(eta_samples)
    if total > max_nodes:
        raise DistributionError(
            f"the kernel grid would need {len(cq_samples)} x {len(eta_samples)} = {total} line shapes (C_Q up to "
            f"{c_hi:.3g} MHz; each pattern edge may move at most {fraction:g} x {resolution_hz:.4g} Hz between "
            f"neighbours), more than the limit {max_nodes}")
    cl, cwl, cwr = _hat_shares(cq_samples, cq_q, cq_nodes)
    el, ewl, ewr = _hat_shares(eta_samples, eta_q, eta_nodes)
    return KernelGrid(dist_kind, cq_nodes, eta_nodes, cq_samples, cl, cwl, cwr, eta_samples, el, ewl, ewr, None,
                      float(resolution_hz), float(fraction), (int(k_crit), int(m_crit)), float(tail),
                      float(s_res))


def plan_grid(dist: EfgDistribution, spin: float, larmor_hz: float, resolution_hz: float, *,
              sigma_max_mhz: float | None = None, sigma_min_mhz: float | None = None, cq0_range_mhz=None,
              eta0_range=None, experiment: str = "mas", fraction: float = GRID_FRACTION, tail_mass: float = TAIL_MASS,
              max_nodes: int = MAX_GRID_NODES, node_limits: tuple = (MIN_CQ_NODES, MAX_CQ_NODES, ETA_NODES)
              ) -> KernelGrid:
    """The nodes and sub-samples of a distribution's kernel grid (the criterion of the module docstring).

    Parameters
    ----------
    dist : EfgDistribution
    spin : float
        Nuclear spin (half-integer for Czjzek distributions).
    larmor_hz : float
        nu0 (Hz).
    resolution_hz : float
        max(axis step, smallest total broadening FWHM) (Hz).
    sigma_max_mhz, sigma_min_mhz : float, optional
        Largest sigma the grid must hold (its extent) and smallest it must
        resolve (its node spacing: :data:`NODES_PER_SIGMA` nodes per sigma);
        default the distribution's own.
    cq0_range_mhz, eta0_range : (float, float), optional
        Ranges of the fixed tensor of the extended model (default its values).
    experiment : {"mas", "static"}
        Which CT pattern the edges follow (infinitely fast MAS for any spinning).
    fraction : float
        Largest edge move between neighbouring sub-samples / resolution.
    tail_mass : float
        Probability left outside the grid.
    max_nodes : int
        Refuse grids with more sub-samples than this.
    node_limits : (int, int, int)
        Fewest and most C_Q nodes, and the number of eta nodes.

    Returns
    -------
    KernelGrid

    Raises
    ------
    DistributionError
        When the criterion asks for more than ``max_nodes`` sub-samples.

    References
    ----------
    G. Czjzek et al., Phys. Rev. B 23 (1981) 2513; G. Le Caer, R. A. Brand,
    J. Phys.: Condens. Matter 10 (1998) 10715.

    Examples
    --------
    >>> g = plan_grid(EfgDistribution("czjzek", 2.0), 2.5, 104.26e6, 200.0)
    >>> g.shape, g.criterion_shape
    ((30, 17), (157, 32))
    >>> plan_grid(EfgDistribution("czjzek", 2.0), 2.5, 104.26e6, 200.0, sigma_min_mhz=1.0).shape
    (59, 17)
    """
    if dist.kind == "explicit":
        explicit = (dist.cq_values_mhz, dist.cq_weights, dist.eta_values, dist.eta_weights)
        return _plan_cached("explicit", 0.0, 0.0, 0.0, 0.0, 0.0, (), (), "", 0.0, 0.0, 0, (), explicit)
    smax = float(dist.sigma_mhz if sigma_max_mhz is None else sigma_max_mhz)
    smin = float(dist.sigma_mhz if sigma_min_mhz is None else sigma_min_mhz)
    if not smax > 0:
        raise DistributionError("czjzek_sigma_mhz: the grid needs a sigma > 0 (or a free sigma with max > 0)")
    cr = tuple(float(x) for x in (cq0_range_mhz or (dist.cq0_mhz, dist.cq0_mhz)))
    er = tuple(float(x) for x in (eta0_range or (dist.eta0, dist.eta0)))
    if dist.kind == "czjzek":
        cr, er = (0.0, 0.0), (0.0, 0.0)
    return _plan_cached(dist.kind, float(spin), float(larmor_hz), float(resolution_hz), smax, max(0.0, min(smin, smax)),
                        cr, er, experiment, float(fraction), float(tail_mass), int(max_nodes), tuple(node_limits),
                        None)


def oversampling(axis_step_hz: float, min_fwhm_hz: float) -> int:
    """Kernel-axis oversampling q: the linear share of a translation spreads a line by at most half a fine step.

    q makes that spread (standard deviation at most ``step / (2 q)``) no more
    than a tenth of the smallest Gaussian broadening's standard deviation
    (FWHM / 2.3548), capped at :data:`MAX_OVERSAMPLING`.

    Parameters
    ----------
    axis_step_hz : float
        Output axis step (Hz).
    min_fwhm_hz : float
        Smallest total broadening FWHM (Hz).

    Returns
    -------
    int

    Examples
    --------
    >>> oversampling(10.0, 500.0), oversampling(10.0, 40.0), oversampling(10.0, 0.0)
    (1, 3, 8)
    """
    if not min_fwhm_hz > 0:
        return MAX_OVERSAMPLING
    need = 10.0 * 2.3548200450309493 / 2.0 * axis_step_hz / min_fwhm_hz
    return int(min(MAX_OVERSAMPLING, max(1, math.ceil(need - 1e-9))))
