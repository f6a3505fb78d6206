r"""Disordered sites: distributions of the isotropic shift and of the EFG, rendered from cached kernels.

Glasses, zeolites and defective solids have, for one kind of site, a spread
of local environments.  Two kinds of spread are modelled here.

Shift distribution (``shift_fwhm_ppm``)
---------------------------------------
A Gaussian distribution of the isotropic shift with FWHM ``w`` ppm moves
every line of the site by ``delta * nu_ref * 1e-6`` Hz, delta distributed
normally.  Averaging translated copies of a spectrum is a convolution, so the
site's spectrum is *exactly* its undistributed spectrum convolved with a
Gaussian of FWHM ``w * nu_ref * 1e-6`` Hz.  Gaussian convolutions combine in
quadrature, so the engine adds it to the Gaussian broadening:
``gauss_total = hypot(site gauss_hz, measurement gauss_hz, w nu_ref 1e-6)``.
Unlike ``gauss_hz`` it scales with the field (a width in ppm).  (The second-
order quadrupolar shift does not depend on delta_iso, so this holds for
quadrupolar sites too, in the high-field picture.)

EFG distributions (``czjzek_sigma_mhz``, ``cq_distribution_mhz``, ``eta_distribution``)
---------------------------------------------------------------------------------------
A site with a distribution of EFG tensors is a weighted sum of line shapes
over a (C_Q, eta) grid:

* ``czjzek_sigma_mhz`` with ``cq_mhz = 0``: the Czjzek model (G. Czjzek et
  al., Phys. Rev. B 23 (1981) 2513), conventions of
  :mod:`powderspin.physics.distributions`;
* ``czjzek_sigma_mhz`` with ``cq_mhz``/``eta_q``: the extended Czjzek model
  (G. Le Caer, R. A. Brand, J. Phys.: Condens. Matter 10 (1998) 10715;
  J.-B. d'Espinose de Lacaillerie, C. Fretigny, D. Massiot, J. Magn. Reson.
  192 (2008) 244);
* ``cq_distribution_mhz`` / ``eta_distribution``: explicit user grids
  (``{ values = [...], weights = [...] }``); one may come without the other,
  which is then fixed at the site's ``cq_mhz`` / ``eta_q``.

**Rendering.**  Each kernel (the line shape of one grid cell) is rendered
*unbroadened* and *unshifted* on a kernel axis, the kernels are summed with
the grid weights (a matrix-vector product), the sum is translated by the
isotropic shift and broadened once.  Broadening is linear and commutes with
the sum, and the isotropic shift is a translation of every line
(:mod:`powderspin.engine.site_lines`), so kernels depend on neither and stay valid
while a fit changes them; only the weights change with sigma.

**Nodes and sub-samples.**  The distribution's density is represented by
its values at K x M *nodes*, equally spaced in C_Q (:data:`NODES_PER_SIGMA`
per smallest sigma, :data:`MIN_CQ_NODES` to :data:`MAX_CQ_NODES`) and in eta
(:data:`ETA_NODES`), joined linearly (hat functions): the sum over nodes of
``density x hat area x kernel`` integrates the interpolated density against
the line shapes, an error of second order in the node spacing.  A node's
kernel is the hat-weighted average of the line shapes at the *sub-samples*
around it; the sub-samples are spaced by the criterion below (uniform in
C_Q^2 and, in eta, uniform in the motion of the pattern edges), with gaps
wider than half a node spacing filled.  The node weights are the
closed-form Czjzek density at the nodes times the hat areas (pure Czjzek),
the linear share of a seeded sample of random tensors between the
neighbouring nodes (extended Czjzek: the hats' projection of the density,
smooth in the parameters because the same sample serves every call), or the
user's weights (explicit grids, whose values are the nodes themselves).

**Spacing criterion.**  Between neighbouring sub-samples each edge of the
second-order central-transition pattern moves by at most
``fraction x resolution`` (``fraction`` = :data:`GRID_FRACTION` = 1/2), with

    resolution = max(axis step, smallest total broadening FWHM the site can have)

(Lorentzian plus Gaussian, shift distribution included; with a free
broadening its lower bound).  Neighbouring line shapes then differ in width
by at most one resolution element, and summing them under that broadening
leaves a ripple of about 1e-6 for a Gaussian (Poisson summation, see
:mod:`powderspin.physics.distributions`) and below 0.4 % for a Lorentzian.

**Two ways to compute the line shapes.**  ``"scaled"``: for the second-order
central transition, static or infinitely fast MAS, perturbation theory and no
shift anisotropy, every crystallite's offset is ``-(a C_Q^2/(2 nu0)) g``,
so the whole pattern scales exactly with C_Q^2.  One unit pattern per eta
sub-sample (C_Q = 1 MHz, binned finely and kept as a cumulative function)
then gives the pattern at any C_Q^2 = s as differences of that cumulative
function at the kernel-axis edges divided by s: the C_Q direction costs no
producer call and no binning.  ``"direct"``: in every other case (finite-rate
spinning, shift anisotropy, satellites, exact diagonalisation) every
sub-sample is a :class:`~powderspin.engine.site_lines.SiteJob` computed and binned
as an ordinary site.

**Translation.**  Kernels live on an axis ``q`` times finer than the output
(``q`` = :func:`oversampling`, 1 to :data:`MAX_OVERSAMPLING`) whose points
are whole multiples of its step from 0 Hz (plus half a step), independent of
the shift.  After the sum, each kernel point is moved by the shift and its
mass shared linearly between the two output points around its new position,
the same hat sharing :func:`powderspin.engine.lineshape.bin_lines` gives every line.
Compared with binning the lines directly at the shifted position this adds
the kernel axis's own sharing, a spread of at most half a fine step
(standard deviation), which ``q`` keeps below a tenth of the smallest
Gaussian broadening's.

**Fits.**  The grid extent comes from the *upper* bound of a free sigma (and
the range of a free ``cq_mhz``/``eta_q``), the spacing from the *lower*
bounds of free broadening, and the kernel axis from the range of a free
isotropic shift, so the same kernels serve every step of a fit.

**The lineshape library.**  Kernel entries (one per eta interval) are kept in memory
per process and in the HDF5 library (:class:`powderspin.disorder.library.LineshapeLibrary`),
keyed by everything that changes them: the template
:meth:`~powderspin.engine.site_lines.SiteJob.key` (with its C_Q and eta set to the
reference values), the nodes, the sub-samples and their weights (by the
sha256 of their canonical JSON), the kernel axis (centre, width, points,
nu_ref), the binning and the computing scheme; the library adds the package
version.  :class:`KernelStore` counts what it computes and
what it finds.

Examples
--------
>>> import powderspin as ps
>>> m = ps.make_model("27Al", {"field_tesla": 9.4, "spinning_hz": "inf", "points": 512,
...                            "center_ppm": 20.0, "width_ppm": 200.0},
...                   [{"label": "AlO4", "shift_ppm": 65.0, "czjzek_sigma_mhz": 2.0, "gauss_hz": 400.0}])
>>> spec = ps.simulate(m, kernel_store=KernelStore(None))
>>> round(spec.area(), 3), spec.metadata["distributions"]["AlO4"].split(";")[0]
(1.0, 'Czjzek, sigma = 2 MHz')
"""

from __future__ import annotations

import contextlib
import functools
import math
from collections import OrderedDict
from dataclasses import dataclass, replace

import numpy as np
from scipy import optimize

from ..engine.lineshape import Axis, broaden
from ..engine.site_lines import (
    BIN_CUTOFF,
    RenderedSite,
    SiteJob,
    check_high_field,
    compute_lines,
    estimate_span_hz,
    render_lines,
    site_job,
)
from ..model.schema import key_spec
from ..model.values import Model, ModelError, Site, selected_transitions
from ..physics.distributions import (
    DistributionError,
    _g_table,
    _uniform_in_measure,
    ct_edges_hz,
    ct_spin_factor,
    czjzek_cq_cdf,
    czjzek_pdf,
)
from ..physics.tensors import ShiftTensor
from .library import LineshapeLibrary, canonical_key_json, default_library_path

__all__ = [
    "ETA_NODES",
    "GRID_FRACTION",
    "MAX_CQ_NODES",
    "MAX_DIRECT_KERNELS",
    "MAX_GRID_NODES",
    "MAX_OVERSAMPLING",
    "MIN_CQ_NODES",
    "NODES_PER_SIGMA",
    "DistributedSite",
    "EfgDistribution",
    "KernelGrid",
    "KernelSet",
    "KernelStore",
    "check_model_distributions",
    "default_kernel_store",
    "distribution_means",
    "distribution_summary",
    "oversampling",
    "parameter_range",
    "plan_grid",
    "shift_fwhm_hz",
]

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
#: most sub-samples (line shapes) the spacing criterion may ask for on the scaled path
MAX_GRID_NODES = 250_000
#: most sub-samples on the direct path (each is a full site computation, ~1-50 ms)
MAX_DIRECT_KERNELS = 20_000
#: finest kernel axis, as a divisor of the output axis step
MAX_OVERSAMPLING = 8
#: probability left outside a Czjzek grid
TAIL_MASS = 1e-4
#: seeded random tensors behind the extended-Czjzek weights
EXTENDED_SAMPLES = 200_000
#: C_Q (MHz) of the unit patterns of the scaled path
UNIT_CQ_MHZ = 1.0
#: unit-pattern bins per kernel-axis step at the largest C_Q (scaled path)
UNIT_OVERSAMPLING = 8
#: most bins of a unit pattern
MAX_UNIT_POINTS = 1 << 21
#: kernel-axis windows snap outward to this many fine steps (so small changes reuse kernels)
WINDOW_BLOCK = 64
#: version of the kernel computation, part of every library key
KERNEL_SCHEME = 1
#: bytes of kernels kept in memory per process by a KernelStore
MEMORY_BUDGET_BYTES = 512 * 1024 * 1024

from ..model.values import _DIST_KEYS, _address_set, _is_variable, check_model_distributions  # noqa: E402,F401


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


# --------------------------------------------------------------------------- the distribution of one site


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


# --------------------------------------------------------------------------- seeded tensors (extended model)


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


# --------------------------------------------------------------------------- grids


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


def _extent(dist: EfgDistribution, sigma_max: float, cq0_range, eta0_range, tail: float):
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


def _c4_ratio(dist: EfgDistribution, sigma_max: float, cq0_range, eta0_range, c_ref: float) -> float:
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
    c_lo, c_hi, e_lo, e_hi = _extent(dist, sigma_max, cq0_range, eta0_range, tail)
    eta_t, gmin_t, gmax_t = _g_table(experiment)
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
    _, fine_nodes = _uniform_in_measure(t_table, eta_t, e_lo, e_hi, m_crit)
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


# --------------------------------------------------------------------------- kernel store


@dataclass
class StoreStats:
    """What a :class:`KernelStore` did (counts since it was made).

    Attributes
    ----------
    line_shapes : int
        Sub-sample line shapes computed (scaled or direct).
    producer_calls : int
        Frequency computations (:func:`~powderspin.engine.site_lines.compute_lines` calls).
    rows_built, rows_from_library, rows_from_memory : int
        Kernel rows (one per eta cell) built, read from the HDF5 library, found in memory.
    sets_from_memory : int
        Whole kernel sets found in memory (no row lookups at all).
    """

    line_shapes: int = 0
    producer_calls: int = 0
    rows_built: int = 0
    rows_from_library: int = 0
    rows_from_memory: int = 0
    sets_from_memory: int = 0


class KernelStore:
    """Kernels in memory (per process, least recently used dropped first) and in the HDF5 library.

    Parameters
    ----------
    library : LineshapeLibrary or None
        The persistent library (None: memory only, as ``--no-cache``).
    memory_bytes : int, optional
        Bytes of kernels kept in memory.
    build_threads : int, "auto" or None, optional
        Threads of the compiled kernels while kernels are built.  ``"auto"``
        (default): all of numba's threads when the machine is otherwise idle
        (1-minute load average below the number of cores less one half), else
        1; None leaves numba's setting.  A grid is many small computations: on
        an idle 2-core machine two threads built a 40 x 20 grid 1.5 times
        faster than one, but on a busy machine (other processes on both cores)
        they made it 3-4 times slower, because each small parallel call waits
        for a descheduled thread (``benchmarks/bench_disorder.py`` measures
        both; a pool of worker processes gained nothing).

    Examples
    --------
    >>> store = KernelStore(None)
    >>> store.stats.rows_built, store.library is None
    (0, True)
    """

    def __init__(self, library: LineshapeLibrary | None, *, memory_bytes: int = MEMORY_BUDGET_BYTES,
                 build_threads: int | str | None = "auto"):
        self.library = library if (library is None or library.enabled) else None
        self.memory_bytes = int(memory_bytes)
        self.build_threads = build_threads
        self.stats = StoreStats()
        self._memory: OrderedDict = OrderedDict()
        self._sizes: dict = {}

    def __repr__(self) -> str:
        return f"KernelStore({self.library!r}, memory entries={len(self._memory)})"

    def _remember(self, key, value, nbytes: int) -> None:
        self._memory[key] = value
        self._memory.move_to_end(key)
        self._sizes[key] = nbytes
        total = sum(self._sizes.values())
        while total > self.memory_bytes and len(self._memory) > 1:
            old, _ = self._memory.popitem(last=False)
            total -= self._sizes.pop(old)

    def recall(self, key):
        """A value kept in memory under a hashable key, or None.

        Parameters
        ----------
        key : hashable

        Returns
        -------
        object or None
        """
        v = self._memory.get(key)
        if v is not None:
            self._memory.move_to_end(key)
        return v

    def row(self, key: dict, build, description: str = "") -> dict:
        """The arrays of a kernel row: from memory, else the library, else ``build()`` (then kept in both).

        Parameters
        ----------
        key : dict
            Library key (JSON-ready).
        build : callable
            Returns a mapping of names to arrays.
        description : str, optional

        Returns
        -------
        dict of str to numpy.ndarray
        """
        text = canonical_key_json(key)
        got = self.recall(("row", text))
        if got is not None:
            self.stats.rows_from_memory += 1
            return got
        got = self.library.get(key) if self.library is not None else None
        if got is not None:
            self.stats.rows_from_library += 1
        else:
            with _kernel_threads(self.build_threads):
                got = {k: np.asarray(v) for k, v in build().items()}
            self.stats.rows_built += 1
            if self.library is not None:
                try:
                    self.library.put(key, got, description)
                except OSError as e:
                    import warnings

                    warnings.warn(f"lineshape library {self.library.path}: could not store a kernel row ({e}); "
                                  "it is used without being stored", RuntimeWarning, stacklevel=2)
        self._remember(("row", text), got, sum(a.nbytes for a in got.values()))
        return got


def _auto_threads() -> int:
    """All of numba's threads on an otherwise idle machine, else 1 (see KernelStore)."""
    import os

    import numba

    cores = os.cpu_count() or 1
    try:
        load = os.getloadavg()[0]
    except (AttributeError, OSError):  # no load average on this platform: the safe choice
        return 1
    return numba.config.NUMBA_NUM_THREADS if load < cores - 0.5 else 1


@contextlib.contextmanager
def _kernel_threads(n: int | str | None):
    """Run the compiled kernels with ``n`` threads inside the block (None: unchanged; "auto": see KernelStore)."""
    if n is None:
        yield
        return
    import numba

    if n == "auto":
        n = _auto_threads()
    old = numba.get_num_threads()
    numba.set_num_threads(max(1, min(int(n), numba.config.NUMBA_NUM_THREADS)))
    try:
        yield
    finally:
        numba.set_num_threads(old)


@functools.lru_cache(maxsize=8)
def _store_for(path: str, enabled: bool) -> KernelStore:
    return KernelStore(LineshapeLibrary(path) if enabled else None)


def default_kernel_store(path=None, *, enabled: bool = True) -> KernelStore:
    """The process-wide kernel store of a library folder (default: ``$POWDERSPIN_CACHE`` or the user cache).

    Parameters
    ----------
    path : str or pathlib.Path, optional
        Library folder (default :func:`powderspin.disorder.library.default_library_path`).
    enabled : bool, optional
        False: memory only (nothing read from or written to disk).

    Returns
    -------
    KernelStore
        The same object for the same folder within one process.

    Examples
    --------
    >>> default_kernel_store(enabled=False) is default_kernel_store(enabled=False)
    True
    """
    p = str(default_library_path() if path is None else path)
    return _store_for(p if enabled else "", bool(enabled))


# --------------------------------------------------------------------------- kernel sets


@dataclass(frozen=True, eq=False)
class KernelSet:
    """The kernels of a grid on a kernel axis: one row per cell, fractions of the cell's line shape per fine bin.

    Attributes
    ----------
    grid : KernelGrid
    first_edge_hz, step_hz : float
        Kernel bin j spans ``first_edge_hz + [j, j+1] step_hz`` (Hz, isotropic shift 0).
    points : int
    oversampling : int
        Output step / kernel step.
    matrix : numpy.ndarray (K*M, points)
        Row ``j * K + i`` is node (C_Q i, eta j).
    path : {"scaled", "direct"}
    method : str
    orientations : str
        Orientation set name.
    """

    grid: KernelGrid
    first_edge_hz: float
    step_hz: float
    points: int
    oversampling: int
    matrix: np.ndarray
    path: str
    method: str
    orientations: str

    def fractions(self, weights: np.ndarray, axis: Axis, shift_hz: float) -> np.ndarray:
        """The weighted sum of kernels translated by ``shift_hz`` onto the output axis (fractions per bin).

        Parameters
        ----------
        weights : numpy.ndarray (K, M)
        axis : Axis
            Output axis (its step is ``oversampling * step_hz``).
        shift_hz : float
            Translation (Hz).

        Returns
        -------
        numpy.ndarray (axis.points,)
        """
        q = self.oversampling
        # einsum, not BLAS: a multi-threaded BLAS call costs far more than this small product on a busy machine
        combined = np.einsum("i,ij->j", np.ascontiguousarray(weights.T).reshape(-1), self.matrix)
        # kernel point m sits at first + (m + 1/2) step + shift; in output-point units (point k at
        # left + (k + 1/2) dx) that is p = (d + m + 1/2) / q - 1/2; its mass is shared linearly between
        # the two output points around p (the hat sharing of powderspin.engine.lineshape.bin_lines)
        d = (self.first_edge_hz + shift_hz - axis.left_edge_hz) / self.step_hz
        p = (d + np.arange(self.points) + 0.5) / q - 0.5
        k0 = np.floor(p)
        frac = p - k0
        k0 = k0.astype(np.int64)
        out = np.zeros(axis.points)
        for k, share in ((k0, 1.0 - frac), (k0 + 1, frac)):
            ok = (k >= 0) & (k < axis.points)
            out += np.bincount(k[ok], weights=share[ok] * combined[ok], minlength=axis.points)
        return out


def _kernel_axis(axis: Axis, q: int, shift_range_hz, support_hz) -> tuple[float, float, int]:
    step = axis.dx_hz / q
    lo = axis.left_edge_hz - shift_range_hz[1] - 2 * axis.dx_hz
    hi = axis.left_edge_hz + axis.width_hz - shift_range_hz[0] + 2 * axis.dx_hz
    if support_hz is not None:
        lo, hi = max(lo, support_hz[0] - 2 * step), min(hi, support_hz[1] + 2 * step)
    if hi <= lo:  # the site's lines cannot reach the axis: a minimal window (all intensity falls outside)
        hi = lo + step
    j_lo = math.floor(lo / step / WINDOW_BLOCK) * WINDOW_BLOCK
    j_hi = math.ceil(hi / step / WINDOW_BLOCK) * WINDOW_BLOCK
    j_hi = max(j_hi, j_lo + WINDOW_BLOCK)
    return j_lo * step, step, j_hi - j_lo


def _digest(value) -> str:
    """sha256 of the canonical JSON of a value (floats by repr: exact)."""
    import hashlib

    return hashlib.sha256(canonical_key_json({"v": value}).encode("ascii")).hexdigest()


def _trimmed(rows: np.ndarray) -> dict:
    """Rows (K, n) as start/stop indices and the concatenated nonzero spans (the library stores these)."""
    starts, stops, parts = [], [], []
    for r in rows:
        nz = np.flatnonzero(r)
        a, b = (int(nz[0]), int(nz[-1]) + 1) if nz.size else (0, 0)
        starts.append(a)
        stops.append(b)
        parts.append(r[a:b])
    return {"start": np.array(starts, dtype=np.int64), "stop": np.array(stops, dtype=np.int64),
            "values": np.concatenate(parts) if parts else np.zeros(0)}


def _untrimmed(arrays: dict, k: int, n: int) -> np.ndarray:
    out = np.zeros((k, n))
    pos = 0
    for i, (a, b) in enumerate(zip(arrays["start"], arrays["stop"])):
        out[i, a:b] = arrays["values"][pos:pos + (b - a)]
        pos += b - a
    return out


# --------------------------------------------------------------------------- a prepared distributed site


@functools.lru_cache(maxsize=64)
def _span_cached(path, cq_extent, eta_extent, template_site, meas, nucleus, experiment):
    """Lowest and highest offset (Hz, shift 0) of a distributed site's lines (see DistributedSite.span_hz)."""
    c_hi = cq_extent[1]
    nu_ref = nucleus.larmor_hz(meas.field_tesla)
    if path == "scaled":
        etas = np.linspace(eta_extent[0], eta_extent[1], 9)
        lo, hi = ct_edges_hz(c_hi, etas, nucleus.spin, nu_ref, experiment)
        return float(min(0.0, lo.min())), float(max(0.0, hi.max()))
    lo, hi = 0.0, 0.0
    for c in (cq_extent[0], c_hi):
        for e in (eta_extent[0], 0.5 * sum(eta_extent), eta_extent[1]):
            s = replace(template_site, cq_mhz=min(c, 1e3), eta_q=e)
            a, b = estimate_span_hz(s, meas, nucleus)
            lo, hi = min(lo, a), max(hi, b)
    return lo, hi


@functools.lru_cache(maxsize=64)
def _method_cached(template_site, label, meas, nucleus, c_ref, c4_ratio, eta_extent, half_step_hz):
    """The producer of a distributed site for ``method = "auto"``.

    The CT error of second-order perturbation theory grows as C_Q^4 (design notes,
    section 2), so over the distribution its intensity-weighted mean is the error at
    ``c_ref`` times ``c4_ratio = <C_Q^4> / c_ref^4``.  The exact route is chosen when
    that mean exceeds half an axis point: the few crystallites far out in the tail move
    by more, but they carry little intensity spread over a wide range.
    """
    from ..engine.frequencies import perturbation_error_hz, site_frame

    worst = 0.0
    m_upper = selected_transitions(nucleus.spin, meas.transitions)
    for e in (eta_extent[0], eta_extent[1]):
        site = replace(template_site, label=label, cq_mhz=min(c_ref, 1e3), eta_q=e)
        frame = site_frame(site, nucleus, meas.field_tesla)
        if meas.is_static:
            err = perturbation_error_hz(frame, m_upper)
        else:
            err = perturbation_error_hz(frame, m_upper, rotor_angle_rad=math.radians(meas.rotor_angle_deg), phases=8)
        worst = max(worst, err)
    mean_err = worst * c4_ratio
    if mean_err > half_step_hz:
        return "exact", (f"site '{label}': second-order perturbation theory is off by {mean_err:.3g} Hz on average "
                         f"over the C_Q distribution ({worst:.3g} Hz at C_Q = {c_ref:.3g} MHz), more than half a "
                         f"point ({half_step_hz:.3g} Hz); using exact diagonalisation for every kernel")
    return "perturbation", ""


def _scaled_hat_shares(s, weights, first, step, a, b, u0, du, cdf, g_edges) -> np.ndarray:
    """Weighted sums of the hat shares at kernel points a <= m < b of a unit pattern scaled by each s.

    The unit pattern has the cumulative function ``cdf`` (piecewise linear on the unit
    edges ``u0 + j du``) with integral ``G`` (``g_edges`` at the edges, piecewise
    quadratic between).  Scaled by s, the pattern's cumulative function is F(f) =
    cdf(f / s) and the integral of F is s G(f / s); the share of point c (hat of
    half-width h = ``step``) is the second difference ``s [G((c+h)/s) - 2 G(c/s) +
    G((c-h)/s)] / h`` (hat = box * box).  ``weights`` (R, len(s)) combine the samples.
    """
    pos = first + (np.arange(a - 1, b + 1) + 0.5) * step            # points a-1 .. b
    x = pos[None, :] / s[:, None]
    n = len(cdf) - 1
    j = np.clip(np.floor((x - u0) / du).astype(np.int64), 0, n - 1)
    t = x - (u0 + j * du)
    slope = (cdf[j + 1] - cdf[j]) / du
    g = g_edges[j] + cdf[j] * t + 0.5 * slope * t * t
    g = np.where(x <= u0, 0.0, g)
    top = u0 + n * du
    g = np.where(x >= top, g_edges[-1] + (x - top) * cdf[-1], g)
    shares = s[:, None] * (g[:, 2:] - 2.0 * g[:, 1:-1] + g[:, :-2]) / step
    return np.einsum("rl,lp->rp", weights, shares)


class DistributedSite:
    """One site with an EFG distribution, prepared for one measurement of a model.

    Holds the distribution, the ranges its parameters can take in a fit, the
    producer path and the extent of its lines; :meth:`render` plans the grid
    for an axis, fetches or builds the kernels and renders the site.

    Parameters
    ----------
    model : Model
    index : int
        The site (0-based).
    measurement : int
        The measurement (0-based).
    allow_strong_coupling : bool, optional
        As :func:`powderspin.simulator.simulate`.

    Examples
    --------
    >>> from powderspin.model.modelfile import make_model
    >>> from powderspin.engine.lineshape import make_axis
    >>> m = make_model("27Al", {"field_tesla": 14.1, "spinning_hz": "inf"},
    ...                [{"label": "A", "czjzek_sigma_mhz": 1.5, "gauss_hz": 300.0}])
    >>> ds = DistributedSite(m, 0, 0)
    >>> ds.path, ds.dist.kind
    ('scaled', 'czjzek')
    >>> ax = make_axis(1024, m.larmor_hz, center_ppm=-5.0, width_ppm=100.0)
    >>> r = ds.render(ax, shift_hz=0.0, store=KernelStore(None))
    >>> round(float(r.intensity.sum() * ax.dx_ppm), 3)
    1.0
    """

    def __init__(self, model: Model, index: int, measurement: int = 0, *, allow_strong_coupling: bool = False):
        site = model.sites[index]
        meas = model.measurements[measurement]
        nuc = model.nucleus
        self.model, self.index, self.measurement = model, index, measurement
        self.site, self.meas, self.nucleus = site, meas, nuc
        self.label = site.label
        self.nu_ref = nuc.larmor_hz(meas.field_tesla)
        rng = functools.partial(parameter_range, model)
        self.dist = EfgDistribution.of_site(site, cq_variable=_is_variable(model, index, "cq_mhz"))
        self.sigma_range = rng("site", index, "czjzek_sigma_mhz")
        lo, hi = rng("site", index, "cq_mhz")
        self.cq0_range = (0.0 if lo <= 0 <= hi else min(abs(lo), abs(hi)), max(abs(lo), abs(hi)))
        self.eta0_range = rng("site", index, "eta_q")
        self.notes: list[str] = []
        for key, r in (("czjzek_sigma_mhz", self.sigma_range), ("cq_mhz", (lo, hi))):
            spec = key_spec("site", key)
            if self.dist.kind != "explicit" and r[0] < r[1] and (r[1] >= spec.high or r[0] <= -spec.high):
                raise ModelError(
                    f"site '{site.label}': {key} is a fit parameter without its own min and max; give both "
                    f"(the kernel grid of the distribution is built once for the whole range, e.g. "
                    f"{key} = {{ start = 2.0, min = 0.5, max = 4.0 }})")
        # the extent of the C_Q values (for the strong-coupling check, the method and the span)
        if self.dist.kind == "explicit":
            cqs = self.dist.cq_values_mhz
            self.cq_extent = (min(cqs), max(cqs))
            self.eta_extent = (min(self.dist.eta_values), max(self.dist.eta_values))
        else:
            if not self.sigma_range[1] > 0:
                raise ModelError(f"site '{site.label}': czjzek_sigma_mhz needs a value > 0 (or a free range "
                                 "with max > 0)")
            c_lo, c_hi, e_lo, e_hi = _extent(self.dist, self.sigma_range[1], self.cq0_range, self.eta0_range,
                                             TAIL_MASS)
            self.cq_extent, self.eta_extent = (c_lo, c_hi), (e_lo, e_hi)
        # "auto" weighs the perturbative error (growing as C_Q^4) over the distribution
        self.cq_for_method = self.cq_extent[1]
        self.c4_ratio = _c4_ratio(self.dist, self.sigma_range[1], self.cq0_range, self.eta0_range, self.cq_extent[1])
        self.notes += check_high_field([Site(label=site.label, cq_mhz=min(self.cq_extent[1], 1e3))], nuc,
                                       meas.field_tesla,
                                       allow_strong_coupling=allow_strong_coupling)
        ms = selected_transitions(nuc.spin, meas.transitions)
        self.experiment = "static" if meas.is_static else "mas"
        self._template_site = replace(site, label="kernel", weight=1.0, shift=ShiftTensor(0.0, site.shift.aniso_ppm,
                                      site.shift.eta if not site.shift.is_isotropic else 0.0),
                                      cq_mhz=UNIT_CQ_MHZ, eta_q=0.0, lorentz_hz=0.0, gauss_hz=0.0,
                                      shift_fwhm_ppm=0.0, czjzek_sigma_mhz=0.0, cq_distribution_mhz=None,
                                      eta_distribution=None, shift_form="haeberlen", shift_given=())
        self._ms = ms
        self.method = None
        self.path = "scaled" if (ms == (0.5,) and site.shift.is_isotropic and (meas.is_static or meas.is_infinite_rate)
                                 and meas.method != "exact") else "direct"

    # -- extents

    def span_hz(self) -> tuple[float, float]:
        """Lowest and highest offset (Hz, isotropic shift 0) the site's lines can reach.

        Returns
        -------
        tuple of 2 float
        """
        return _span_cached(self.path, self.cq_extent, self.eta_extent, self._template_site, self.meas, self.nucleus,
                            self.experiment)

    def min_fwhm_hz(self) -> float:
        """Smallest total broadening FWHM (Hz) this site can have: Lorentzian plus Gaussian, lower bounds.

        Returns
        -------
        float
        """
        rng = functools.partial(parameter_range, self.model)
        i, j = self.index, self.measurement
        lor = rng("site", i, "lorentz_hz")[0] + rng("measurement", j, "lorentz_hz")[0]
        gau = math.hypot(rng("site", i, "gauss_hz")[0], rng("measurement", j, "gauss_hz")[0],
                         rng("site", i, "shift_fwhm_ppm")[0] * self.nu_ref * 1e-6)
        return max(0.0, lor) + max(0.0, gau)

    def shift_range_hz(self) -> tuple[float, float]:
        """Range (Hz) of the translation: isotropic shift plus referencing offset, over their free ranges.

        Returns
        -------
        tuple of 2 float
        """
        rng = functools.partial(parameter_range, self.model)
        a = rng("site", self.index, "shift_ppm")
        b = rng("measurement", self.measurement, "shift_offset_ppm")
        f = self.nu_ref * 1e-6
        return ((a[0] + b[0]) * f, (a[1] + b[1]) * f)

    # -- method

    def _decide_method(self, axis: Axis) -> str:
        if self.method is not None:
            return self.method
        meas = self.meas
        if meas.method != "auto":
            self.method = meas.method
        else:
            self.method, note = _method_cached(self._template_site, self.label, meas, self.nucleus,
                                               float(self.cq_for_method), float(self.c4_ratio),
                                               tuple(self.eta_extent), 0.5 * axis.dx_hz)
            if note:
                self.notes.append(note)
        if self.method == "exact":
            self.path = "direct"
        return self.method

    # -- the grid and kernels

    def grid(self, axis: Axis, *, fraction: float = GRID_FRACTION, node_limits=None,
             max_nodes: int | None = None) -> KernelGrid:
        """Plan the kernel grid for an output axis (resolution = max(axis step, smallest broadening)).

        Parameters
        ----------
        axis : Axis
        fraction, node_limits, max_nodes
            As :func:`plan_grid` (``max_nodes`` defaults by path).

        Returns
        -------
        KernelGrid

        Raises
        ------
        ModelError
            When the grid would be too large; the message names the site, the
            keys that set its size and what to change.
        """
        self._decide_method(axis)
        res = max(axis.dx_hz, self.min_fwhm_hz())
        limit = max_nodes if max_nodes is not None else (MAX_GRID_NODES if self.path == "scaled"
                                                          else MAX_DIRECT_KERNELS)
        limits = node_limits if node_limits is not None else (MIN_CQ_NODES, MAX_CQ_NODES, ETA_NODES)
        try:
            g = plan_grid(self.dist, self.nucleus.spin, self.nu_ref, res, sigma_max_mhz=self.sigma_range[1],
                          sigma_min_mhz=self.sigma_range[0], cq0_range_mhz=self.cq0_range,
                          eta0_range=self.eta0_range, experiment=self.experiment, fraction=fraction,
                          max_nodes=limit, node_limits=limits)
        except DistributionError as e:
            free = ("lower the upper bound of the free czjzek_sigma_mhz" if self.sigma_range[1] > self.sigma_range[0]
                    else "lower czjzek_sigma_mhz")
            raise ModelError(
                f"site '{self.label}': {e}; the resolution {res:.4g} Hz is the larger of the axis step and the "
                "smallest broadening the site can have (lorentz_hz + gauss_hz with shift_fwhm_ppm, lower bounds if "
                f"free): raise that broadening or its lower bound, or {free}"
                + ("" if self.path == "scaled" else ", or use spinning_hz = \"inf\" or a static sample without shift "
                   "anisotropy (the fast scaled path)")) from None
        if g.kind != "explicit" and g.sigma_resolved_mhz > self.sigma_range[0] * (1 + 1e-9):
            note = (f"site '{self.label}': the kernel grid spaces its C_Q nodes for sigma >= "
                    f"{g.sigma_resolved_mhz:.3g} MHz; below that (czjzek_sigma_mhz down to {self.sigma_range[0]:g}) "
                    "the distribution is represented coarsely: narrow the czjzek_sigma_mhz range")
            if note not in self.notes:
                self.notes.append(note)
        return g

    def kernels(self, axis: Axis, store: KernelStore, *, progress=None, fraction: float = GRID_FRACTION,
                node_limits=None) -> KernelSet:
        """Fetch or build the kernel set for an output axis.

        Parameters
        ----------
        axis : Axis
        store : KernelStore
        progress : callable, optional
            ``progress(done, total)`` in line shapes while kernels are built.
        fraction, node_limits
            As :func:`plan_grid`.

        Returns
        -------
        KernelSet
        """
        grid = self.grid(axis, fraction=fraction, node_limits=node_limits)
        q = oversampling(axis.dx_hz, self.min_fwhm_hz())
        first, step, n = _kernel_axis(axis, q, self.shift_range_hz(), self.span_hz())
        template = site_job(self._template_site, self.meas, self.nucleus, self.method)
        memo_key = ("set", template, id(grid), first, step, n, q, self.meas.binning, self.path)
        found = store.recall(memo_key)
        if found is not None and found.grid is grid:
            store.stats.sets_from_memory += 1
            return found
        k, m = grid.shape
        kaxis = Axis(first + 0.5 * n * step, n * step, n, self.nu_ref)
        matrix = np.zeros((m * k, n))
        n_cq = len(grid.cq_samples_mhz)
        groups = [np.flatnonzero(grid.eta_left == jl) for jl in range(m)]
        total = grid.line_shapes
        done = [0]
        base_key = {
            "what": "powderspin distributed-site kernel entry",
            "scheme": KERNEL_SCHEME,
            "path": self.path,
            "job": template.key(),
            "cq_nodes_mhz": [float(grid.cq_mhz[0]), float(grid.cq_mhz[-1]), int(k)],
            # the sub-samples and their weights, by the sha256 of their canonical JSON (exact, and keeps keys
            # short: canonicalising thousands of floats per lookup cost more than reading the entry)
            "cq_samples_sha256": _digest({"nodes": grid.cq_mhz.tolist(), "samples": grid.cq_samples_mhz.tolist(),
                                          "left": grid.cq_left.tolist(), "w": [grid.cq_w_left.tolist(),
                                                                               grid.cq_w_right.tolist()]}),
            "axis": {"center_hz": kaxis.center_hz, "width_hz": kaxis.width_hz, "points": n,
                     "nu_ref_hz": self.nu_ref},
            "binning": self.meas.binning,
        }
        if self.path == "scaled":
            base_key["unit"] = {"cq_mhz": UNIT_CQ_MHZ, "oversampling": UNIT_OVERSAMPLING}
        for jl, idx in enumerate(groups):
            if idx.size == 0:
                continue
            key = dict(base_key, eta_nodes=[float(grid.eta[jl]), float(grid.eta[min(jl + 1, m - 1)])],
                       eta_samples_sha256=_digest({"samples": grid.eta_samples[idx].tolist(),
                                                   "w": [grid.eta_w_left[idx].tolist(),
                                                         grid.eta_w_right[idx].tolist()]}))

            def build(idx=idx):
                left, right = self._build_entry(grid, idx, template, kaxis, store, progress, done, total)
                out = {"left_" + k_: v for k_, v in _trimmed(left).items()}
                out.update({"right_" + k_: v for k_, v in _trimmed(right).items()})
                return out

            arrays = store.row(key, build, description=f"kernels of eta nodes {jl + 1}-{min(jl + 2, m)} of {m}, "
                                                       f"site '{self.label}' ({self.dist.describe()})")
            matrix[jl * k:(jl + 1) * k] += _untrimmed({k_[5:]: v for k_, v in arrays.items()
                                                       if k_.startswith("left_")}, k, n)
            if jl + 1 < m:
                matrix[(jl + 1) * k:(jl + 2) * k] += _untrimmed({k_[6:]: v for k_, v in arrays.items()
                                                                 if k_.startswith("right_")}, k, n)
            if progress is not None:
                done[0] = max(done[0], n_cq * int(sum(g.size for g in groups[:jl + 1])))
                progress(done[0], total)
        norm = np.outer(grid.eta_norms(), grid.cq_norms()).reshape(-1)
        matrix /= np.where(norm > 0, norm, 1.0)[:, None]
        kset = KernelSet(grid, first, step, n, q, matrix, self.path, self.method, template.orientations)
        store._remember(memo_key, kset, matrix.nbytes)
        return kset

    def _build_entry(self, grid: KernelGrid, idx: np.ndarray, template: SiteJob, kaxis: Axis, store: KernelStore,
                     progress, done: list, total: int) -> tuple[np.ndarray, np.ndarray]:
        """Un-normalised kernel sums of the eta sub-samples ``idx`` for their left and right eta nodes."""
        k = grid.shape[0]
        left = np.zeros((k, kaxis.points))
        right = np.zeros((k, kaxis.points))
        cq = grid.cq_samples_mhz
        cl, cwl, cwr = grid.cq_left, grid.cq_w_left, grid.cq_w_right
        blocks = [np.flatnonzero(cl == i) for i in range(k)]
        for e_i in idx:
            eta = float(grid.eta_samples[e_i])
            wl_e, wr_e = float(grid.eta_w_left[e_i]), float(grid.eta_w_right[e_i])
            acc = np.zeros((k, kaxis.points))  # this eta sub-sample's sums for each C_Q node
            if self.path == "scaled":
                job = replace(template, cq_mhz=UNIT_CQ_MHZ, eta_q=eta)
                lines = compute_lines(job)
                store.stats.producer_calls += 1
                u_lo, u_hi = (x / UNIT_CQ_MHZ ** 2 for x in lines.frequency_range())
                s_max = float(cq.max()) ** 2
                span = max(u_hi - u_lo, 1e-12)
                nu = int(min(MAX_UNIT_POINTS, max(64, math.ceil(span * s_max * UNIT_OVERSAMPLING / kaxis.dx_hz) + 4)))
                du = span * (1 + 4.0 / nu) / nu
                uaxis = Axis(0.5 * (u_lo + u_hi) * UNIT_CQ_MHZ ** 2, nu * du * UNIT_CQ_MHZ ** 2, nu, self.nu_ref)
                frac = render_lines(lines, uaxis, binning=self.meas.binning, cutoff=BIN_CUTOFF).intensity \
                    * uaxis.dx_ppm
                cdf = np.concatenate([[0.0], np.cumsum(frac)])  # unit pattern, uniform within each unit bin
                u0, du_ = uaxis.left_edge_hz / UNIT_CQ_MHZ ** 2, uaxis.dx_hz / UNIT_CQ_MHZ ** 2
                g_edges = np.concatenate([[0.0], np.cumsum(0.5 * (cdf[1:] + cdf[:-1]) * du_)])
                step, first = kaxis.dx_hz, kaxis.left_edge_hz
                for i, b in enumerate(blocks):
                    if b.size == 0:
                        continue
                    s = np.maximum(cq[b] ** 2, 1e-300)
                    lo = min(s.min() * u_lo, s.max() * u_lo)
                    hi = max(s.min() * u_hi, s.max() * u_hi)
                    a0 = max(0, math.floor((lo - first) / step - 0.5) - 1)
                    b0 = min(kaxis.points, math.ceil((hi - first) / step - 0.5) + 2)
                    if b0 <= a0:  # these sub-samples' lines lie outside the kernel window
                        continue
                    w2 = np.stack([cwl[b], cwr[b]])
                    part = _scaled_hat_shares(s, w2, first, step, a0, b0, u0, du_, cdf, g_edges)
                    acc[i, a0:b0] += part[0]
                    if i + 1 < k:
                        acc[i + 1, a0:b0] += part[1]
                store.stats.line_shapes += len(cq)
                done[0] += len(cq)
                if progress is not None:
                    progress(done[0], total)
            else:
                for i, b in enumerate(blocks):
                    for l_ in b:
                        job = replace(template, cq_mhz=float(cq[l_]), eta_q=eta)
                        lines = compute_lines(job)
                        store.stats.producer_calls += 1
                        store.stats.line_shapes += 1
                        y = render_lines(lines, kaxis, binning=self.meas.binning, cutoff=BIN_CUTOFF).intensity \
                            * kaxis.dx_ppm
                        acc[i] += cwl[l_] * y
                        if i + 1 < k:
                            acc[i + 1] += cwr[l_] * y
                    done[0] += b.size
                    if progress is not None:
                        progress(done[0], total)
            left += wl_e * acc
            right += wr_e * acc
        return left, right

    def render(self, axis: Axis, *, shift_hz: float, store: KernelStore, weight: float | None = None,
               lorentz_hz: float | None = None, gauss_hz: float | None = None, progress=None) -> RenderedSite:
        """The site's line shape on an axis: kernels summed with the grid weights, translated, weighed, broadened.

        Parameters
        ----------
        axis : Axis
        shift_hz : float
            Translation (Hz): isotropic shift plus referencing offset.
        store : KernelStore
        weight, lorentz_hz, gauss_hz : float, optional
            Default: the site's weight and its total broadening in the
            measurement (Gaussian widths in quadrature with the shift
            distribution's).
        progress : callable, optional
            ``progress(done, total)`` while kernels are built.

        Returns
        -------
        RenderedSite
        """
        site, meas = self.site, self.meas
        if weight is None:
            weight = site.weight
        if lorentz_hz is None:
            lorentz_hz = site.lorentz_hz + meas.lorentz_hz
        if gauss_hz is None:
            gauss_hz = math.hypot(site.gauss_hz, meas.gauss_hz, shift_fwhm_hz(site, self.nu_ref))
        kset = self.kernels(axis, store, progress=progress)
        self.kernel_set = kset
        w = kset.grid.weights(self.dist)
        frac = kset.fractions(w, axis, shift_hz)
        inside = float(frac.sum())
        y = frac * weight / axis.dx_ppm
        y = broaden(y, axis.dx_hz, lorentz_hz, gauss_hz)
        kept = float(y.sum() * axis.dx_ppm / weight) if weight > 0 else inside
        return RenderedSite(y, max(0.0, 1.0 - min(inside, kept)))

    def describe(self) -> str:
        """Metadata text: the distribution, the grid, the kernel path and what was computed.

        Returns
        -------
        str
        """
        text = self.dist.describe()
        ks = getattr(self, "kernel_set", None)
        if ks is not None:
            g = ks.grid
            text += (f"; kernel grid {g.shape[0]} x {g.shape[1]} nodes ({g.line_shapes} line shapes, {ks.path} path, "
                     f"kernel step {ks.step_hz:.4g} Hz)")
            if g.kind != "explicit":
                text += f"; criterion: pattern edges move <= {g.fraction:g} x {g.resolution_hz:.4g} Hz"
        return text


# --------------------------------------------------------------------------- what spectroscopists quote


def distribution_means(site: Site) -> dict[str, float] | None:
    """Mean C_Q and mean P_Q = C_Q (1 + eta^2/3)^(1/2) of a site's EFG distribution (MHz).

    Pure Czjzek: P_Q / sigma follows the chi distribution with 5 degrees of
    freedom, so ``<P_Q> = sigma 8 sqrt(2) / (3 sqrt(pi))``, and eta is
    independent of P_Q, so ``<C_Q> = <P_Q> <(1 + eta^2/3)^(-1/2)>``; with the
    eta density ``3 eta (1 - eta^2/9) w^(-5/2)``, ``w = 1 + eta^2/3``, the
    average is ``(3/2) int_1^(4/3) (4 - w) w^(-3) dw = 15/16``.  Extended
    Czjzek: the seeded sample of random tensors (the same one the weights
    use).  Explicit grids: the weighted means of the given values.

    Parameters
    ----------
    site : Site

    Returns
    -------
    dict or None
        ``{"mean_cq_mhz": ..., "mean_pq_mhz": ...}``; None for a site
        without an EFG distribution.

    References
    ----------
    G. Czjzek et al., Phys. Rev. B 23 (1981) 2513; J.-B. d'Espinose de
    Lacaillerie, C. Fretigny, D. Massiot, J. Magn. Reson. 192 (2008) 244.

    Examples
    --------
    >>> m = distribution_means(Site(czjzek_sigma_mhz=2.0))
    >>> round(m["mean_pq_mhz"], 4), round(m["mean_cq_mhz"] / m["mean_pq_mhz"], 4)
    (4.2554, 0.9375)
    """
    from ..physics.distributions import czjzek_mean_pq_mhz

    if not site.has_efg_distribution:
        return None
    dist = EfgDistribution.of_site(site)
    if dist.kind == "explicit":
        cq = np.asarray(dist.cq_values_mhz, float)
        wc = np.asarray(dist.cq_weights, float)
        eta = np.asarray(dist.eta_values, float)
        we = np.asarray(dist.eta_weights, float)
        wc, we = wc / wc.sum(), we / we.sum()
        return {"mean_cq_mhz": float(wc @ cq),
                "mean_pq_mhz": float(wc @ cq * (we @ np.sqrt(1 + eta ** 2 / 3)))}
    if dist.kind == "czjzek":
        pq = czjzek_mean_pq_mhz(dist.sigma_mhz)
        return {"mean_cq_mhz": 15.0 / 16.0 * pq, "mean_pq_mhz": pq}
    cq, eta = _extended_samples(dist.sigma_mhz, dist.cq0_mhz, dist.eta0)
    return {"mean_cq_mhz": float(cq.mean()), "mean_pq_mhz": float((cq * np.sqrt(1 + eta ** 2 / 3)).mean())}


def distribution_summary(model_at, params, x, cov) -> dict[str, tuple[float, float]]:
    """Mean C_Q and P_Q of every distributed site at a fit's solution, with errors by the delta method.

    Parameters
    ----------
    model_at : callable
        Free-parameter vector -> Model.
    params : sequence of FreeParameter
        The free parameters, in the order of ``x``.
    x : numpy.ndarray
        The solution.
    cov : numpy.ndarray (p, p)
        Covariance of the free parameters (inf on the diagonal where the data
        do not fix a direction).

    Returns
    -------
    dict
        ``"LABEL.mean_cq_mhz"`` and ``"LABEL.mean_pq_mhz"`` -> (value, standard
        error); the gradient is taken numerically by central differences (a
        step of 1e-4 of each parameter's range, inside the bounds).

    Examples
    --------
    >>> import numpy as np
    >>> from powderspin.model.modelfile import make_model
    >>> m = make_model("27Al", {"field_tesla": 9.4},
    ...                [{"label": "A", "czjzek_sigma_mhz": {"start": 2.0, "min": 1.0, "max": 3.0}}])
    >>> at = lambda t: m.with_parameters({m.free[0].address: float(t[0])})
    >>> s = distribution_summary(at, m.free, np.array([2.0]), np.array([[0.01]]))
    >>> v, e = s["A.mean_pq_mhz"]
    >>> round(v, 4), round(e / 0.1, 4)       # <P_Q> = 2.1277 sigma: the error scales alike
    (4.2554, 2.1277)
    """
    x = np.asarray(x, dtype=float)
    base = model_at(x)
    labels = [s.label for s in base.sites]
    values = {}
    for s in base.sites:
        m = distribution_means(s)
        if m is not None:
            for k, v in m.items():
                values[f"{s.label}.{k}"] = v
    if not values:
        return {}
    names = list(values)
    grads = np.zeros((len(names), x.size))
    for j, p in enumerate(params):
        span = (p.max - p.min) if math.isfinite(p.max - p.min) else max(abs(x[j]), 1.0)
        h = 1e-4 * span
        lo, hi = max(p.min, x[j] - h), min(p.max, x[j] + h)
        if hi <= lo:
            continue
        t_lo, t_hi = x.copy(), x.copy()
        t_lo[j], t_hi[j] = lo, hi
        m_lo, m_hi = model_at(t_lo), model_at(t_hi)
        for r, n in enumerate(names):
            label, _, key = n.rpartition(".")
            i = labels.index(label)
            a, b = distribution_means(m_lo.sites[i]), distribution_means(m_hi.sites[i])
            grads[r, j] = (b[key] - a[key]) / (hi - lo)
    out = {}
    c = np.asarray(cov, dtype=float)
    for r, n in enumerate(names):
        g = grads[r]
        used = g != 0
        if np.any(~np.isfinite(np.diag(c))[used]):
            err = math.inf
        else:
            cc = np.where(np.isfinite(c), c, 0.0)
            err = float(math.sqrt(max(0.0, g @ cc @ g)))
        out[n] = (float(values[n]), err)
    return out
