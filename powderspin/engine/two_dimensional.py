"""Two-dimensional MQMAS and STMAS spectra: per-crystallite (F1, F2) lines, binning and broadening.

The F2 dimension is the central transition (CT) exactly as in a 1D MAS
spectrum: the same :class:`~powderspin.engine.site_lines.SiteJob`, the same
:func:`~powderspin.engine.site_lines.compute_lines` (positions, sideband
intensities, weights) and the same tent kernel, so the F2 projection of an
ideal-excitation 2D spectrum is the 1D MAS CT spectrum.

The F1 dimension is the sheared isotropic frequency of
:mod:`powderspin.physics.multiple_quantum`,
``nu_F1 = (nu_t1 - R nu_CT) / (p - R)``, evaluated per crystallite from the
rotor-averaged offsets of the t1 transition (the symmetric +m <-> -m
transition for MQMAS, both inner satellites for STMAS) and of the CT, by the
site's producer (perturbation theory or exact diagonalisation).  With
perturbation theory at the magic angle and infinite rate every crystallite
has the same F1 position (the rank-4 parts cancel); exact diagonalisation
adds the higher-order terms and a mis-set rotor angle adds the rank-2 parts
(and, for STMAS, the first-order satellite frequency), which spread F1.

Spinning: infinite rate, or a finite rate with rotor-synchronised t1: the t1
increments are whole rotor periods, so the t1 phase of every crystallite
returns to its start and F1 sidebands fold onto the centre band; F2 carries
the CT sidebands of the 1D spectrum, each placed at the F1 position of its
centre band (the picture of a shear applied to the centre-band frequencies).
A frequency-domain shear of an unsheared spectrum would instead move the F2
sideband of order n by -R n nu_r / (p - R) in F1 (folded into the F1 window);
not computed here.  A t1 that is not synchronised (``t1_mode = "free"``,
:func:`free_t1_bands`) gives every crystallite band pairs (n1, n2) at
n1 nu_r / (p - R) in F1 and n2 nu_r in F2 from its centre band, weighted by
the real part of the rotor-phase-averaged amplitude
conj(A_n1) B_n2 sum_a A_a conj(B_(a + n2 - n1)) (:func:`band_pair_weights`;
A and B the complex band coefficients of the t1 transition and the CT).  Its
sum over n1 is |B_n2|^2, so folding F1 by nu_r / (p - R) gives back the
synchronised spectrum.  The pair weights can be negative (the dispersive
share of the amplitudes); bands whose F1 position lies off the axis are lost
with their signed weight.

Binning: each triangle of the orientation mesh adds its F2 tent (Alderman,
Solum and Grant's interpolation, as in 1D) to the two F1 rows around the
triangle's mean F1 position, shared linearly so the F1 centre of gravity is
kept.  The result is a density per ppm^2: each site integrates to its weight.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ..model.values import ModelError
from ..physics.multiple_quantum import TwoDimensionalScale
from . import _kernels as _k
from .frequencies import checked_directions, exact_pair_offsets, perturbative_pair_offsets
from .lineshape import Axis, broaden
from .pulses import MultipleQuantumPulses, site_mq_efficiency
from .site_lines import (
    BIN_CUTOFF,
    INFINITE_RATE_PHASES,
    INFINITE_RATE_PHASES_EXACT,
    LINES_MEMORY_BUDGET,
    SiteLines,
    _chunks,
)
from .spinning import choose_rotor_phases
from .threads import kernel_threads

__all__ = ["F1Lines", "t1_offsets", "compute_f1_lines", "bin_two_dimensional", "render_two_dimensional",
           "RenderedSite2D", "diagonal_gaussian", "band_amplitudes", "band_pair_weights", "free_t1_bands",
           "mq_pulses", "mq_excitation", "excited_fraction"]

#: orientations per chunk when computing F1 lines (Ctrl-C responds between chunks)
_F1_CHUNK = 4096
#: triangle x transition x band count below which the 2D binning runs in one chunk: about 0.1 us each, so
#: below this a second thread saves less than waking it costs on a busy machine (measured: 2304 triangles,
#: 0.3 ms in one chunk, 34 ms in two on a loaded 2-core machine)
_PARALLEL_WORK = 1 << 20


def t1_offsets(frame, directions, pairs, *, method: str, rotor_angle_rad: float, spinning: bool) -> np.ndarray:
    """Rotor-averaged offsets (Hz) of the level pairs that evolve in t1.

    Parameters
    ----------
    frame : SiteFrame
        The site's tensors in its crystallite frame.
    directions : array_like, shape (N, 3)
        Rotor-axis directions (B0 directions when static).
    pairs : sequence of (float, float)
        Level pairs (m_hi, m_lo); the offset is E(m_hi) - E(m_lo) - (m_hi - m_lo) nu0.
    method : {"perturbation", "exact"}
    rotor_angle_rad : float
        Rotor angle.
    spinning : bool
        Average over a rotor period (False: static).

    Returns
    -------
    numpy.ndarray, shape (N, len(pairs))

    References
    ----------
    M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300 (the rotor-averaged
    frequency is the centre-band position).

    Examples
    --------
    >>> from powderspin.engine.frequencies import site_frame
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> f = site_frame(Site(cq_mhz=3.0), get_nuclide("23Na"), 9.4)
    >>> off = t1_offsets(f, [[0, 0, 1], [1, 0, 0]], [(1.5, -1.5)], method="perturbation",
    ...                  rotor_angle_rad=math.acos(3 ** -0.5), spinning=True)
    >>> off.shape
    (2, 1)
    """
    ax = checked_directions(directions)
    theta = rotor_angle_rad if spinning else 0.0
    spin = frame.spin
    if method == "exact":
        phases = INFINITE_RATE_PHASES_EXACT if spinning else 1
        up = np.array([int(round(spin - a)) for a, _ in pairs], dtype=np.int64)
        lo = np.array([int(round(spin - b)) for _, b in pairs], dtype=np.int64)
        off, _ = exact_pair_offsets(frame, ax, up, lo, theta, phases)
    else:
        phases = INFINITE_RATE_PHASES if spinning else 1
        off = perturbative_pair_offsets(frame, ax, np.array([a for a, _ in pairs], dtype=float),
                                  np.array([b for _, b in pairs], dtype=float), theta, phases, True)
    return off.mean(axis=2)


@dataclass(frozen=True, eq=False)
class F1Lines:
    """Sheared F1 positions of one site's crystallites.

    Attributes
    ----------
    scale : TwoDimensionalScale
        The experiment, its ratio R and order p.
    f1_hz : ndarray (n_v, n_t1)
        Sheared F1 position (Hz from nu_ref, at the job's isotropic shift) per
        orientation and t1 transition.
    pair_weights : ndarray (n_t1,)
        Share of each t1 transition (1 for MQMAS, 1/2 each for the two STMAS satellites).
    band_weights : ndarray (n_v, n_t1, Q) or None
        Free (not synchronised) t1 only: the real part of each band pair's gamma-averaged amplitude
        (:func:`band_pair_weights`); None: F1 sidebands folded onto the centre band.
    band_f2_hz, band_f1_hz : ndarray (Q,) or None
        The pairs' offsets from the centre band: n2 nu_r in F2 and n1 nu_r / (p - R) in sheared F1.
    pulses : MultipleQuantumPulses or None
        Finite MQMAS pulses (None: ideal excitation).
    excitation : ndarray (n_v,) or None
        Per-orientation efficiency of the pathway with those pulses (:func:`mq_excitation`), weighting each
        orientation when binning; None: ideal (1 everywhere).
    """

    scale: TwoDimensionalScale
    f1_hz: np.ndarray
    pair_weights: np.ndarray
    band_weights: np.ndarray | None = None
    band_f2_hz: np.ndarray | None = None
    band_f1_hz: np.ndarray | None = None
    pulses: MultipleQuantumPulses | None = None
    excitation: np.ndarray | None = None


def compute_f1_lines(ct_lines: SiteLines, scale: TwoDimensionalScale) -> F1Lines:
    """Sheared F1 positions, per orientation, of a site whose CT lines are given.

    Parameters
    ----------
    ct_lines : SiteLines
        The site's central-transition lines (the F2 dimension).
    scale : TwoDimensionalScale

    Returns
    -------
    F1Lines

    References
    ----------
    L. Frydman, J. S. Harwood, J. Am. Chem. Soc. 117 (1995) 5367; Z. Gan, J. Am.
    Chem. Soc. 122 (2000) 3242.

    Examples
    --------
    >>> from powderspin.engine.site_lines import compute_lines, site_job
    >>> from powderspin.model.values import Measurement, Site
    >>> from powderspin.physics.multiple_quantum import two_dimensional_scale
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> job = site_job(Site(cq_mhz=3.0), Measurement(14.1, spinning_hz="inf", orientations=8),
    ...                get_nuclide("27Al"), "perturbation")
    >>> f1 = compute_f1_lines(compute_lines(job), two_dimensional_scale(2.5, "mqmas", 3))
    >>> bool(np.ptp(f1.f1_hz) < 1e-6)     # isotropic: the same for every crystallite
    True
    """
    job = ct_lines.job
    if tuple(ct_lines.transitions) != (0.5,):
        raise ValueError("compute_f1_lines needs the central-transition lines (transitions = (0.5,))")
    frame = job.frame()
    oset = ct_lines.orientations
    spinning = job.spinning_hz > 0
    theta = math.radians(job.rotor_angle_deg)
    pairs = scale.t1_pairs
    f_t1 = np.empty((oset.size, len(pairs)))
    small = oset.size * len(pairs) < _PARALLEL_WORK // 64 and job.method != "exact"
    with kernel_threads(1 if small else None):  # a small set: waking idle threads costs more than it saves
        for a, b in _chunks(oset.size, _F1_CHUNK):
            f_t1[a:b] = t1_offsets(frame, oset.vectors[a:b], pairs, method=job.method, rotor_angle_rad=theta,
                                   spinning=spinning)
    p, r = scale.order, scale.ratio
    f1 = (f_t1 - r * ct_lines.mean[:, :1]) / (p - r)
    return F1Lines(scale, f1, np.full(len(pairs), 1.0 / len(pairs)))


def band_amplitudes(traj: np.ndarray, rate_hz: float) -> np.ndarray:
    """Complex Fourier coefficients F_n of exp(i xi(phi)) over one rotor period (band n at index n mod P).

    ``xi(phi) = sum_{k != 0} c_k / (i k nu_r) e^{i k phi}`` with c_k the Fourier
    components of the offset trajectory; ``|F_n|^2`` are the 1D sideband
    intensities (DEVELOPERS.md, "Sidebands").

    Parameters
    ----------
    traj : ndarray (..., P)
        Offsets (Hz) at P equally spaced rotor phases.
    rate_hz : float
        Spinning rate (Hz).

    Returns
    -------
    numpy.ndarray (..., P), complex

    References
    ----------
    M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300; M. H. Levitt, J. Magn. Reson. 82 (1989) 427.

    Examples
    --------
    >>> t = np.arange(16) / 16.0
    >>> f = band_amplitudes(1000.0 * np.cos(2 * np.pi * t), 1000.0)   # modulation index 1
    >>> round(float(abs(f[0]) ** 2), 4)                                  # J0(1)^2
    0.5855
    """
    traj = np.asarray(traj, dtype=float)
    p = traj.shape[-1]
    c = np.fft.fft(traj, axis=-1) / p
    k = np.fft.fftfreq(p, 1.0 / p)
    keep = (k != 0) & (np.abs(k) < p / 2)
    g = np.zeros_like(c)
    g[..., keep] = c[..., keep] / (1j * k[keep] * rate_hz)
    xi = np.real(np.fft.ifft(g, axis=-1)) * p
    return np.fft.fft(np.exp(1j * xi), axis=-1) / p


def band_pair_weights(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Gamma-averaged complex amplitude of every (F1 band n1, F2 band n2) pair of one 2D experiment.

    For a t1 transition with band coefficients A (coherence in t1 from rotor
    phase gamma) followed, with an instantaneous transfer, by the CT with B in
    t2, the rotor-phase average of exp(i Phi_t1(t1)) exp(i Phi_CT(t2)) is
    ``sum S[n1, n2] exp(i 2 pi ((nu_t1 + n1 nu_r) t1 + (nu_CT + n2 nu_r) t2))`` with
    ``S[n1, n2] = conj(A[n1]) B[n2] G[n2 - n1]``, ``G[m] = sum_a A[a] conj(B[a + m])``
    (indices mod P).  Its sum over n1 is ``|B[n2]|^2`` (the 1D CT bands) and over n2
    ``|A[n1]|^2``.

    Parameters
    ----------
    a, b : ndarray (..., P), complex
        :func:`band_amplitudes` of the t1 transition and of the CT (same P).

    Returns
    -------
    numpy.ndarray (..., P, P), complex
        S with n1 on the second-to-last and n2 on the last axis (FFT order).

    References
    ----------
    M. H. Levitt, J. Magn. Reson. 82 (1989) 427 (the gamma average of sideband amplitudes); the 2D product is
    derived here in the same way.

    Examples
    --------
    >>> t = np.arange(16) / 16.0
    >>> a = band_amplitudes(800.0 * np.cos(2 * np.pi * t), 1000.0)
    >>> b = band_amplitudes(300.0 * np.sin(2 * np.pi * t), 1000.0)
    >>> s = band_pair_weights(a, b)
    >>> bool(np.allclose(s.sum(axis=0), abs(b) ** 2)), bool(np.allclose(s.sum(axis=1), abs(a) ** 2))
    (True, True)
    """
    p = a.shape[-1]
    g = np.fft.fft(np.fft.fft(a, axis=-1) * np.conj(np.fft.fft(b, axis=-1)), axis=-1) / p
    n = np.arange(p)
    diff = (n[None, :] - n[:, None]) % p  # [n1, n2] -> n2 - n1
    return np.conj(a)[..., :, None] * b[..., None, :] * g[..., diff]


def free_t1_bands(ct_lines: SiteLines, f1: F1Lines, *, tolerance: float = 1e-10) -> F1Lines:
    """Add the band pairs of a t1 that is not rotor-synchronised (F1 sidebands) to a site's F1 lines.

    Parameters
    ----------
    ct_lines : SiteLines
        The site's CT lines at a finite spinning rate.
    f1 : F1Lines
        Its centre-band F1 positions (:func:`compute_f1_lines`).
    tolerance : float, optional
        Bands whose largest intensity over the powder is at or below this are dropped.

    Returns
    -------
    F1Lines
        With ``band_weights`` (the real part of the gamma-averaged amplitudes) and the
        pairs' offsets: n2 nu_r in F2, n1 nu_r / (p - R) in sheared F1 (the shear acts on the
        rotor-averaged frequencies, so with a synchronised t1 every F1 band folds back onto the
        centre band and the pair weights sum to the 1D CT bands).
    """
    job = ct_lines.job
    rate = job.spinning_hz
    if not (rate > 0 and math.isfinite(rate)):
        raise ValueError("free t1 bands need a finite spinning rate")
    frame = job.frame()
    oset = ct_lines.orientations
    theta = math.radians(job.rotor_angle_deg)
    scale = f1.scale
    pairs = list(scale.t1_pairs) + [(0.5, -0.5)]
    up = np.array([a for a, _ in pairs])
    lo = np.array([b for _, b in pairs])
    probe = perturbative_pair_offsets(frame, oset.vectors[:: max(1, oset.size // 256)], up, lo, theta, 16, True)
    spread = float(np.max(np.abs(probe - probe.mean(axis=2, keepdims=True)))) if probe.size else 0.0
    p = max(int(ct_lines.phases), choose_rotor_phases(spread, rate))
    need = oset.size * len(pairs) * p * 16 * 4  # trajectories, band coefficients and their transforms
    if need > LINES_MEMORY_BUDGET:
        raise ModelError(f"t1_mode = 'free': {p} rotor phases for {oset.size} orientations would need "
                         f"{need / 2 ** 20:.0f} MB (more than {LINES_MEMORY_BUDGET / 2 ** 20:.0f} MB); spin faster, "
                         "use fewer orientations, or t1_mode = \"synchronised\"")
    if job.method == "exact":
        ui = np.array([int(round(frame.spin - a)) for a in up], dtype=np.int64)
        li = np.array([int(round(frame.spin - b)) for b in lo], dtype=np.int64)
        traj, _ = exact_pair_offsets(frame, oset.vectors, ui, li, theta, p)
    else:
        traj = perturbative_pair_offsets(frame, oset.vectors, up, lo, theta, p, True)
    amps = band_amplitudes(traj, rate)  # (n_v, n_t1 + 1, P)
    a, b = amps[:, :-1, :], amps[:, -1:, :]
    band = np.fft.fftfreq(p, 1.0 / p).astype(int)
    keep1 = np.flatnonzero(np.max(np.abs(a) ** 2, axis=(0, 1)) > tolerance)
    keep2 = np.flatnonzero(np.max(np.abs(b) ** 2, axis=(0, 1)) > tolerance)
    need = a.shape[0] * a.shape[1] * keep1.size * keep2.size * 8
    if need > LINES_MEMORY_BUDGET:
        raise ModelError(f"t1_mode = 'free': {keep1.size} F1 x {keep2.size} F2 bands over {a.shape[0]} orientations "
                         f"would need {need / 2 ** 20:.0f} MB (more than {LINES_MEMORY_BUDGET / 2 ** 20:.0f} MB); "
                         "spin faster, use fewer orientations, or t1_mode = \"synchronised\"")
    # S[n1, n2] = conj(A[n1]) B[n2] G[n2 - n1] (band_pair_weights) on the kept bands only
    g = np.fft.fft(np.fft.fft(a, axis=-1) * np.conj(np.fft.fft(np.broadcast_to(b, a.shape), axis=-1)), axis=-1) / p
    diff = (keep2[None, :] - keep1[:, None]) % p
    s_kept = (np.conj(a[:, :, keep1])[:, :, :, None] * b[:, :, keep2][:, :, None, :] * g[:, :, diff])
    w = np.real(s_kept).reshape(a.shape[0], a.shape[1], -1)
    n1 = band[keep1][:, None] * np.ones(keep2.size, dtype=int)[None, :]
    n2 = np.ones(keep1.size, dtype=int)[:, None] * band[keep2][None, :]
    d1 = (n1.ravel() * rate) / (scale.order - scale.ratio)
    d2 = n2.ravel() * rate
    return replace(f1, band_weights=np.ascontiguousarray(w), band_f2_hz=d2.astype(float), band_f1_hz=d1)


def bin_two_dimensional(f2_axis: Axis, f1_axis: Axis, ct: SiteLines, f1: F1Lines, *,
                        cutoff: float = BIN_CUTOFF, threads: int | None = None,
                        excitation: np.ndarray | None = None) -> np.ndarray:
    """Bin a site's 2D lines: intensity fraction per (F1, F2) point.

    Parameters
    ----------
    f2_axis, f1_axis : Axis
        The two axes (Hz, already translated by the site's shift).
    ct : SiteLines
        F2 lines (CT), on a triangulated orientation set.
    f1 : F1Lines
    cutoff : float, optional
        Contributions at or below this fraction are skipped.
    threads : int, optional
        Chunks of triangles worked on in parallel (default: numba's thread count).
    excitation : ndarray (n_v,), optional
        Per-crystallite efficiency of the whole coherence-transfer pathway
        (excitation times conversion), multiplying each orientation's weight;
        None: the F1 lines' own (``f1.excitation``, :func:`mq_excitation`), or ideal
        excitation (1 everywhere) when they have none.

    Returns
    -------
    numpy.ndarray, shape (f1_axis.points, f2_axis.points)
        Sums to 1 less what falls off the axes (ideal excitation).

    References
    ----------
    D. W. Alderman, M. S. Solum, D. M. Grant, J. Chem. Phys. 84 (1986) 3717.
    """
    oset = ct.orientations
    if not oset.has_triangles:
        raise ModelError(f"orientations: the set '{oset.name}' has no triangles, which a 2D spectrum needs; use "
                         "orientations = \"auto\" or a \"tri-...\" set")
    if ct.intensity is None:
        raise ModelError("a 2D spectrum needs the sideband intensities in memory; spin faster or use fewer "
                         "orientations")
    import numba

    nchunk = max(1, int(threads if threads is not None else numba.get_num_threads()))
    work = oset.triangles.shape[0] * f1.f1_hz.shape[1] * ct.intensity.shape[2]
    if work < _PARALLEL_WORK:
        nchunk = 1
    rate = ct.rate_hz if math.isfinite(ct.rate_hz) else 0.0
    with kernel_threads(1 if nchunk == 1 else None):  # one chunk: do not wake idle threads for nothing
        return _bin(f2_axis, f1_axis, ct, f1, cutoff, nchunk, rate, excitation)


def _bin(f2_axis, f1_axis, ct, f1, cutoff, nchunk, rate, excitation):
    oset = ct.orientations
    weights = np.ascontiguousarray(ct.weights[:, 0])
    if excitation is None:
        excitation = f1.excitation
    if excitation is not None:
        eff = np.asarray(excitation, dtype=float)
        if eff.shape != weights.shape or not np.all(np.isfinite(eff)):
            raise ValueError(f"excitation must be {weights.shape[0]} finite numbers (one per orientation), got "
                             f"shape {eff.shape}")
        weights = weights * eff
    if f1.band_weights is not None:
        return _k._bin_tent_2d_pairs(
            np.ascontiguousarray(ct.mean[:, 0]), np.ascontiguousarray(f1.f1_hz),
            np.ascontiguousarray(f1.band_weights), np.ascontiguousarray(f1.band_f2_hz),
            np.ascontiguousarray(f1.band_f1_hz), weights, np.ascontiguousarray(f1.pair_weights),
            np.ascontiguousarray(oset.triangles, dtype=np.int64), np.ascontiguousarray(oset.triangle_weights),
            f2_axis.left_edge_hz, f2_axis.dx_hz, f2_axis.points, f1_axis.left_edge_hz, f1_axis.dx_hz,
            f1_axis.points, nchunk, float(cutoff))
    return _k._bin_tent_2d(
        np.ascontiguousarray(ct.mean[:, 0]), np.ascontiguousarray(ct.intensity[:, 0, :]),
        weights, np.ascontiguousarray(f1.f1_hz),
        np.ascontiguousarray(f1.pair_weights), np.ascontiguousarray(oset.triangles, dtype=np.int64),
        np.ascontiguousarray(oset.triangle_weights), float(rate), f2_axis.left_edge_hz, f2_axis.dx_hz,
        f2_axis.points, f1_axis.left_edge_hz, f1_axis.dx_hz, f1_axis.points, nchunk, float(cutoff))


def _f1_responses(f1_axis: Axis, rows: np.ndarray, lorentz_hz: float, gauss_hz: float) -> np.ndarray:
    """Row i: the F1 profile that `broaden` makes of a unit line at F1 point rows[i] (broadening is linear)."""
    unit = np.zeros((rows.size, f1_axis.points))
    unit[np.arange(rows.size), rows] = 1.0
    return broaden(unit, f1_axis.dx_hz, lorentz_hz, gauss_hz)


def diagonal_gaussian(y: np.ndarray, dx1_ppm: float, dx2_ppm: float, fwhm_ppm: float) -> np.ndarray:
    """Convolve a 2D spectrum with a Gaussian distribution of pure shifts: a line along the diagonal.

    A shift d (ppm) moves a site by d in F2 and, on the sheared isotropic scale,
    by d in F1, so a Gaussian distribution of isotropic shifts (FWHM in ppm)
    spreads every point along the direction (1, 1) in (F1, F2) ppm.  Computed
    by multiplying the zero-padded 2D Fourier transform by
    exp(-2 pi^2 s^2 (u1 + u2)^2), s the standard deviation and u1, u2 the
    variables conjugate to F1 and F2 ppm (area kept; what moves beyond the
    axes is lost).

    Parameters
    ----------
    y : ndarray (n1, n2)
    dx1_ppm, dx2_ppm : float
        Point spacings (ppm), > 0.
    fwhm_ppm : float
        FWHM of the shift distribution (ppm); 0 returns a copy.

    Returns
    -------
    numpy.ndarray (n1, n2)

    References
    ----------
    R. N. Bracewell, *The Fourier Transform and Its Applications* (1965), the shift and convolution theorems
    (from memory).

    Examples
    --------
    >>> y = np.zeros((64, 64)); y[32, 32] = 1.0
    >>> z = diagonal_gaussian(y, 0.5, 0.5, 4.0)
    >>> round(float(z.sum()), 4), bool(z[36, 36] > 10 * z[36, 28])
    (1.0, True)
    """
    if fwhm_ppm <= 0:
        return np.array(y, dtype=float)
    sd = fwhm_ppm / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    n1, n2 = y.shape
    p1 = 1 << int(math.ceil(math.log2(n1 + int(math.ceil(5.0 * sd / dx1_ppm)) + 1)))
    p2 = 1 << int(math.ceil(math.log2(n2 + int(math.ceil(5.0 * sd / dx2_ppm)) + 1)))
    f = np.fft.rfft2(y, s=(p1, p2))
    u1 = np.fft.fftfreq(p1, d=dx1_ppm)[:, None]
    u2 = np.fft.rfftfreq(p2, d=dx2_ppm)[None, :]
    f *= np.exp(-2.0 * (math.pi * sd) ** 2 * (u1 + u2) ** 2)
    return np.fft.irfft2(f, s=(p1, p2))[:n1, :n2].copy()


@dataclass(frozen=True)
class RenderedSite2D:
    """A site's 2D spectrum on the two axes.

    Attributes
    ----------
    intensity : ndarray (n1, n2)
        Density per ppm^2; integrates to the site's weight (less what lies off the axes).
    lost_fraction : float
        Fraction of the site's intensity off the axes.
    excited_fraction : float
        The site's powder-averaged MQMAS efficiency (1 for ideal excitation): it integrates to its weight
        times this.
    """

    intensity: np.ndarray
    lost_fraction: float
    excited_fraction: float = 1.0


def render_two_dimensional(ct: SiteLines | None, f1: F1Lines | None, f2_axis: Axis, f1_axis: Axis, *,
                           shift_hz: float = 0.0, weight: float = 1.0, lorentz_hz: float = 0.0, gauss_hz: float = 0.0,
                           f1_lorentz_hz: float = 0.0, f1_gauss_hz: float = 0.0,
                           memo: dict | None = None, parts=None, shift_fwhm_ppm: float = 0.0) -> RenderedSite2D:
    """Bin, translate, weigh and broaden a site's 2D lines.

    Parameters
    ----------
    ct : SiteLines
        F2 (CT) lines.
    f1 : F1Lines
        Sheared F1 positions.
    f2_axis, f1_axis : Axis
    shift_hz : float, optional
        Translation (Hz) of every line in both dimensions: a pure shift lies on
        the diagonal of the sheared spectrum.
    weight : float, optional
        The site's weight.
    lorentz_hz, gauss_hz : float, optional
        F2 broadening (FWHM, Hz).
    f1_lorentz_hz, f1_gauss_hz : float, optional
        F1 broadening (FWHM, Hz of the sheared F1 scale).
    memo : dict, optional
        Binned lines shared between calls.
    parts : sequence of (SiteLines, F1Lines, float, float), optional
        Instead of one (``ct``, ``f1``, ``shift_hz``): several line sets with
        their translation (Hz) and share, binned and summed before the
        broadening (a site with an EFG distribution: one part per node).
    shift_fwhm_ppm : float, optional
        FWHM (ppm) of a Gaussian distribution of isotropic shifts, applied
        along the diagonal (:func:`diagonal_gaussian`) before the broadening.

    Returns
    -------
    RenderedSite2D

    Examples
    --------
    >>> from powderspin.engine.site_lines import compute_lines, site_job
    >>> from powderspin.engine.lineshape import make_axis
    >>> from powderspin.model.values import Measurement, Site
    >>> from powderspin.physics.multiple_quantum import two_dimensional_scale
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> nu = get_nuclide("27Al").larmor_hz(14.1)
    >>> ct = compute_lines(site_job(Site(cq_mhz=3.0), Measurement(14.1, spinning_hz="inf", orientations=16),
    ...                             get_nuclide("27Al"), "perturbation"))
    >>> f1 = compute_f1_lines(ct, two_dimensional_scale(2.5, "mqmas", 3))
    >>> a2, a1 = make_axis(128, nu, 0.0, 40.0), make_axis(64, nu, 0.0, 40.0)
    >>> r = render_two_dimensional(ct, f1, a2, a1, f1_gauss_hz=100.0)
    >>> round(float(r.intensity.sum() * a1.dx_ppm * a2.dx_ppm), 4)
    1.0
    """
    if parts is None:
        full = excited_fraction(ct, f1)
        s2 = replace(f2_axis, center_hz=f2_axis.center_hz - float(shift_hz))
        s1 = replace(f1_axis, center_hz=f1_axis.center_hz - float(shift_hz))
        key = ("binned2d", ct.job, f1.scale, f1.band_weights is not None, f1.pulses, s2, s1)
        frac = memo.get(key) if memo is not None else None
        if frac is None:
            frac = bin_two_dimensional(s2, s1, ct, f1)
            if memo is not None:
                frac.flags.writeable = False
                memo[key] = frac
    else:
        frac = np.zeros((f1_axis.points, f2_axis.points))
        full = sum(float(w_k) * excited_fraction(ct_k, f1_k) for ct_k, f1_k, _, w_k in parts)
        with kernel_threads(1):  # many small calls: starting parallel work would cost more than it saves
            for ct_k, f1_k, sh_k, w_k in parts:
                s2 = replace(f2_axis, center_hz=f2_axis.center_hz - float(sh_k))
                s1 = replace(f1_axis, center_hz=f1_axis.center_hz - float(sh_k))
                frac += float(w_k) * bin_two_dimensional(s2, s1, ct_k, f1_k)
    if shift_fwhm_ppm > 0:
        frac = diagonal_gaussian(frac, f1_axis.dx_ppm, f2_axis.dx_ppm, shift_fwhm_ppm)
    inside = float(frac.sum())
    # only the F1 rows that hold lines are broadened along F2 (a site covers a few rows before F1 broadening);
    # broadening is linear, so this is the same as broadening every row
    rows = np.flatnonzero(frac.any(axis=1))
    sub = frac[rows] * (weight / (f1_axis.dx_ppm * f2_axis.dx_ppm))
    if lorentz_hz > 0 or gauss_hz > 0:
        sub = broaden(sub, f2_axis.dx_hz, lorentz_hz, gauss_hz)
    y = np.zeros(frac.shape)
    if (f1_lorentz_hz > 0 or f1_gauss_hz > 0) and rows.size:
        if rows.size <= max(8, f1_axis.points // 8):
            # the F1 profile of each occupied row (the response of broaden() to that row alone), summed
            for k, r in zip(_f1_responses(f1_axis, rows, f1_lorentz_hz, f1_gauss_hz), sub):
                y += np.outer(k, r)
        else:
            y[rows] = sub
            y = np.ascontiguousarray(broaden(np.ascontiguousarray(y.T), f1_axis.dx_hz, f1_lorentz_hz,
                                             f1_gauss_hz).T)
    else:
        y[rows] = sub
    kept = float(y.sum() * f1_axis.dx_ppm * f2_axis.dx_ppm / weight) if weight > 0 else inside
    if full == 0.0:
        return RenderedSite2D(y, 0.0, 0.0)
    return RenderedSite2D(y, max(0.0, 1.0 - min(inside / full, kept / full)), full)


def excited_fraction(ct: SiteLines, f1: F1Lines) -> float:
    """The share of a site's ideal 2D integral that its MQMAS efficiency leaves (1 for ideal excitation).

    The average of ``f1.excitation`` with the weights the binning gives each orientation: a third of each
    triangle's solid angle per vertex, times the vertex's CT weight and its sideband intensities.

    Parameters
    ----------
    ct : SiteLines
    f1 : F1Lines

    Returns
    -------
    float
    """
    if f1 is None or f1.excitation is None:
        return 1.0
    oset = ct.orientations
    share = np.zeros(oset.size)
    np.add.at(share, np.asarray(oset.triangles).ravel(), np.repeat(np.asarray(oset.triangle_weights) / 3.0, 3))
    w = share * ct.weights[:, 0] * (ct.intensity[:, 0, :].sum(axis=1) if ct.intensity is not None else 1.0)
    total = float(w.sum())
    return float(np.dot(w, f1.excitation) / total) if total > 0 else 1.0


def mq_pulses(meas, nucleus, scale: TwoDimensionalScale, shift_ppm: float = 0.0,
              job_iso_ppm: float = 0.0) -> MultipleQuantumPulses | None:
    """A measurement's finite MQMAS pulses for one site (None for ``mq_pulses = "ideal"``).

    Parameters
    ----------
    meas : Measurement
    nucleus : Nuclide
    scale : TwoDimensionalScale
        Gives the order p and, from the sign of R, the echo pathway.
    shift_ppm : float, optional
        The site's isotropic shift (the carrier, ``carrier_ppm``, is on resonance with it when absent).
    job_iso_ppm : float, optional
        Isotropic shift carried by the site's job (0 for the perturbative route).

    Returns
    -------
    MultipleQuantumPulses or None

    Examples
    --------
    >>> from powderspin.model.values import Measurement
    >>> from powderspin.physics.multiple_quantum import two_dimensional_scale
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> m = Measurement(14.1, spinning_hz="inf", experiment="mqmas", mq_pulses="two-pulse", mq_rf_khz=100.0,
    ...                 mq_excite_us=3.5, mq_convert_us=1.2)
    >>> mq_pulses(m, get_nuclide("27Al"), two_dimensional_scale(2.5, "mqmas", 3)).echo_order   # R = 19/12 > 0
    3
    """
    if getattr(meas, "mq_pulses", "ideal") == "ideal" or scale.experiment != "mqmas":
        return None
    p = int(scale.order)
    f = nucleus.larmor_hz(meas.field_tesla) * 1e-6
    carrier = meas.carrier_ppm if meas.carrier_ppm is not None else shift_ppm
    offset = (carrier - shift_ppm + job_iso_ppm) * f
    sel_nu1 = sel_t = None
    if meas.mq_pulses == "z-filter":
        sel_nu1 = meas.zfilter_rf_khz * 1e3
        sel_t = (meas.zfilter_pulse_us * 1e-6 if meas.zfilter_pulse_us is not None
                 else 1.0 / (4.0 * (nucleus.spin + 0.5) * sel_nu1))
    return MultipleQuantumPulses(meas.mq_pulses, p, p if scale.ratio > 0 else -p, meas.mq_pathway,
                                 meas.mq_rf_khz * 1e3, meas.mq_excite_us * 1e-6, meas.mq_convert_us * 1e-6,
                                 sel_nu1, sel_t, 0.0 if offset == 0 else offset)


def mq_excitation(ct_lines: SiteLines, f1: F1Lines, pulses: MultipleQuantumPulses | None) -> F1Lines:
    """The F1 lines with each orientation's MQMAS efficiency for the given pulses (unchanged for None).

    Parameters
    ----------
    ct_lines : SiteLines
        The site's CT lines (their job gives the site, producer, orientations and rotor angle).
    f1 : F1Lines
    pulses : MultipleQuantumPulses or None

    Returns
    -------
    F1Lines

    References
    ----------
    L. Frydman, J. S. Harwood, J. Am. Chem. Soc. 117 (1995) 5367; J.-P. Amoureux, C. Fernandez, S. Steuernagel,
    J. Magn. Reson. A 123 (1996) 116 (from memory).
    """
    if pulses is None:
        return replace(f1, pulses=None, excitation=None)
    job = ct_lines.job
    eff = site_mq_efficiency(job.frame(), ct_lines.orientations.vectors, pulses, method=job.method,
                             rotor_angle_rad=math.radians(job.rotor_angle_deg), spinning=job.spinning_hz > 0)
    eff.flags.writeable = False
    return replace(f1, pulses=pulses, excitation=eff)
