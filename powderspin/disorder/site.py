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

import functools
import hashlib
import math
from dataclasses import dataclass, replace

import numpy as np

from ..engine.frequencies import perturbation_error_hz, site_frame
from ..engine.lineshape import Axis, broaden, hat_corrected_gauss
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
from ..model.values import Model, ModelError, Site, is_variable, selected_transitions
from ..physics.distributions import (
    DistributionError,
    ct_edges_hz,
)
from ..physics.tensors import ShiftTensor
from .grid import (
    ETA_NODES,
    GRID_FRACTION,
    MAX_CQ_NODES,
    MAX_GRID_NODES,
    MIN_CQ_NODES,
    TAIL_MASS,
    EfgDistribution,
    KernelGrid,
    c4_ratio,
    distribution_extent,
    oversampling,
    parameter_range,
    plan_grid,
    shift_fwhm_hz,
)
from .library import canonical_key_json
from .store import KernelStore

#: most sub-samples on the direct path (each is a full site computation, ~1-50 ms)
MAX_DIRECT_KERNELS = 20_000


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

    def total(self, weights: np.ndarray) -> float:
        """The weighted sum of the kernels' areas (1 for ideal excitation, less what lies off the kernel axis).

        Parameters
        ----------
        weights : numpy.ndarray (K, M)

        Returns
        -------
        float
        """
        return float(np.ascontiguousarray(weights.T).reshape(-1) @ self.matrix.sum(axis=1))

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
        self._cq_variable = is_variable(model, index, "cq_mhz")
        self.dist = EfgDistribution.of_site(site, cq_variable=self._cq_variable)
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
            c_lo, c_hi, e_lo, e_hi = distribution_extent(self.dist, self.sigma_range[1], self.cq0_range,
                                                         self.eta0_range, TAIL_MASS)
            self.cq_extent, self.eta_extent = (c_lo, c_hi), (e_lo, e_hi)
        # "auto" weighs the perturbative error (growing as C_Q^4) over the distribution
        self.cq_for_method = self.cq_extent[1]
        self.c4_ratio = c4_ratio(self.dist, self.sigma_range[1], self.cq0_range, self.eta0_range, self.cq_extent[1])
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
        # finite pulses: the excitation depends on C_Q next to nu1, so a pattern no longer scales with C_Q^2
        self.path = "scaled" if (ms == (0.5,) and site.shift.is_isotropic and (meas.is_static or meas.is_infinite_rate)
                                 and meas.method != "exact" and meas.pulse_sequence == "ideal") else "direct"
        #: with finite pulses, the site's observed intensity over the ideal one at the last render (else 1)
        self.excited_fraction = 1.0

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
               lorentz_hz: float | None = None, gauss_hz: float | None = None, progress=None,
               site: Site | None = None, point_values: bool = False) -> RenderedSite:
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
        site : Site, optional
            The site at other parameter values than this object was made with
            (the distribution's width, C_Q0, eta0, weight, broadening); the
            kernel grid, made for the whole range of the free parameters, is
            reused.  Default: the site it was made with.
        point_values : bool, optional
            Make each point the continuous spectrum at its frequency, as for a
            single site: the kernels' hat sharing on the kernel axis (step s)
            and the translation's onto ``axis`` (step dx) smooth the pattern
            by triangles of variances s^2/6 and dx^2/6, which the Gaussian
            broadening gives back (narrowed by their sum,
            :func:`powderspin.engine.lineshape.hat_corrected_gauss`).  The
            caller chooses the axis fine enough for the rest
            (:func:`powderspin.engine.lineshape.sampling_oversampling`).
            Default False: points are bin values of the broadened pattern.

        Returns
        -------
        RenderedSite
        """
        meas = self.meas
        if site is None:
            site = self.site
            dist = self.dist
        else:
            dist = EfgDistribution.of_site(site, cq_variable=self._cq_variable)
        if weight is None:
            weight = site.weight
        if lorentz_hz is None:
            lorentz_hz = site.lorentz_hz + meas.lorentz_hz
        if gauss_hz is None:
            gauss_hz = math.hypot(site.gauss_hz, meas.gauss_hz, shift_fwhm_hz(site, self.nu_ref))
        kset = self.kernels(axis, store, progress=progress)
        self.kernel_set = kset
        w = kset.grid.weights(dist)
        frac = kset.fractions(w, axis, shift_hz)
        inside = float(frac.sum())
        y = frac * weight / axis.dx_ppm
        if point_values:  # the two hat sharings add their variances: one hat of step sqrt(dx^2 + s^2)
            gauss_hz = hat_corrected_gauss(gauss_hz, math.hypot(axis.dx_hz, kset.step_hz))
        y = broaden(y, axis.dx_hz, lorentz_hz, gauss_hz)
        kept = float(y.sum() * axis.dx_ppm / weight) if weight > 0 else inside
        if meas.pulse_sequence != "ideal":  # the kernels integrate to their excited fractions; lost is relative
            self.excited_fraction = kset.total(w)
            if self.excited_fraction > 0:
                inside /= self.excited_fraction
                kept /= self.excited_fraction
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
