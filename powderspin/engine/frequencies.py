"""Transition frequencies per crystallite orientation: the two producers.

Both producers give, for each orientation and rotor phase, the offset (Hz,
from the reference frequency nu_ref) of each selected transition m -> m-1:

* :func:`perturbative_offsets`: first-order shift (full secular part of the
  tensor), first-order quadrupolar and second-order quadrupolar terms;
* :func:`exact_offsets`: diagonalisation of the full Zeeman + quadrupolar +
  secular shift Hamiltonian (adiabatic levels labelled by <Iz>);
* :func:`corrected_exact_offsets`: the same exact offsets as second order plus
  a smooth correction fitted once per site (:func:`fit_exact_correction`), the
  fast exact route.

The Hamiltonian (frequency units) is ``H = nu0 (1 + 1e-6 d_zz) Iz + K sum_ab
V_ab I_a I_b`` with ``K = C_Q / (2I(2I-1))`` and the EFG in units of V_zz.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from . import _kernels as _k
from .threads import split_work

if TYPE_CHECKING:  # pragma: no cover
    from ..model.values import Site
    from ..physics.nuclides import Nuclide

from ..physics.spin import spin_operators
from ..physics.tensors import efg_principal, is_axis_permutation, rotation_matrix

__all__ = [
    "SiteFrame",
    "site_frame",
    "perturbative_offsets",
    "exact_offsets",
    "multiple_quantum_offsets",
    "transition_intensity",
    "perturbation_error_hz",
    "probe_directions",
    "ExactCorrection",
    "fit_exact_correction",
    "corrected_exact_offsets",
    "correction_tolerance_hz",
]


@dataclass(frozen=True)
class SiteFrame:
    """A site's interactions written in its crystallite frame, ready for the kernels.

    Attributes
    ----------
    spin : float
        Nuclear spin I.
    nu0_hz : float
        Reference (Larmor) frequency at the field (Hz).
    quad_constant_hz : float
        C_Q / (2I(2I-1)) in Hz (0 for spin 1/2 or C_Q = 0).
    efg_principal_values : ndarray
        EFG principal values in units of V_zz.
    shift_tensor_ppm : ndarray
        3x3 shift tensor (ppm, isotropic part included) in the crystallite frame.
    symmetry : str
        "octant" when every tensor is diagonal in the crystallite frame,
        otherwise "hemisphere" (all terms are of even rank).

    References
    ----------
    M. Mehring, *Principles of High Resolution NMR in Solids* (1983), ch. 2
    (interaction tensors in their principal frames) (from memory).

    Examples
    --------
    >>> from powderspin.model.modelfile import make_site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> f = site_frame(make_site(cq_mhz=3.0, span_ppm=40.0, skew=0.2, euler_deg=[0, 30, 0]),
    ...                get_nuclide("27Al"), 14.1)
    >>> f.spin, f.symmetry, f.efg_principal_values.tolist()
    (2.5, 'hemisphere', [-0.5, -0.5, 1.0])
    """

    spin: float
    nu0_hz: float
    quad_constant_hz: float
    efg_principal_values: np.ndarray
    shift_tensor_ppm: np.ndarray
    symmetry: str

    @property
    def nu_q_hz(self) -> float:
        """nu_Q = 3 C_Q / (2I(2I-1)) in Hz.

        Returns
        -------
        float
            Quadrupolar frequency nu_Q (Hz); the satellite splitting at
            theta = 0 for eta = 0.

        References
        ----------
        A. Abragam, *The Principles of Nuclear Magnetism* (1961), chapter on
        electric quadrupole effects (from memory).

        Examples
        --------
        >>> from powderspin.model.values import Site
        >>> from powderspin.physics.nuclides import get_nuclide
        >>> site_frame(Site(cq_mhz=3.0), get_nuclide("27Al"), 14.1).nu_q_hz
        450000.0
        """
        return 3.0 * self.quad_constant_hz


def site_frame(site: Site, nucleus: Nuclide, field_tesla: float) -> SiteFrame:
    """Express a site's tensors in its crystallite frame.

    The crystallite frame is the EFG principal frame; the shift tensor is
    rotated into it with the site's Euler angles (see
    :mod:`powderspin.physics.tensors`).

    Parameters
    ----------
    site : Site
        Shift tensor (ppm), C_Q (MHz), eta_Q and Euler angles (degrees).
    nucleus : Nuclide
        Spin and frequency ratio of the observed nucleus.
    field_tesla : float
        Magnetic field B0 (T), > 0.

    Returns
    -------
    SiteFrame
        Spin, nu0 (Hz), C_Q/(2I(2I-1)) (Hz), EFG principal values and the
        shift tensor (ppm) in the EFG principal frame.

    References
    ----------
    M. Mehring, *Principles of High Resolution NMR in Solids* (1983), app. B;
    M. E. Rose, *Elementary Theory of Angular Momentum* (1957), ch. IV.

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> f = site_frame(Site(cq_mhz=3.0), get_nuclide("27Al"), 14.1)
    >>> round(f.quad_constant_hz)
    150000
    """
    spin = nucleus.spin
    nu0 = nucleus.larmor_hz(field_tesla)
    k = site.cq_hz / (2 * spin * (2 * spin - 1)) if spin > 0.5 else 0.0
    if k == 0.0:
        # no EFG to orient against: the shift principal frame is the crystallite
        # frame (the relative Euler angles have no effect on a powder)
        r = np.eye(3)
    else:
        r = rotation_matrix(*site.euler_rad)
    delta = r @ np.diag(site.shift.principal_haeberlen) @ r.T
    coaxial = is_axis_permutation(r) or site.shift.is_isotropic
    return SiteFrame(spin, nu0, k, efg_principal(site.eta_q), delta, "octant" if coaxial else "hemisphere")


def checked_directions(directions) -> np.ndarray:
    """Unit vectors (N, 3) from ``directions``; the engine's one check of direction input.

    Part of the engine's internal interface (used by :mod:`powderspin.engine.spinning`).

    Parameters
    ----------
    directions : array_like, shape (N, 3) or (3,)
        Non-zero finite vectors (any length).

    Returns
    -------
    numpy.ndarray, shape (N, 3)
        The directions normalised, C-contiguous.

    Raises
    ------
    ValueError
        Naming the first bad direction or the wrong shape.

    Examples
    --------
    >>> checked_directions([0.0, 0.0, 2.0]).tolist()
    [[0.0, 0.0, 1.0]]
    """
    d = np.asarray(directions, dtype=float)
    if d.size == 0:
        return np.empty((0, 3))
    if d.ndim not in (1, 2) or d.shape[-1] != 3:
        raise ValueError(f"directions must have shape (N, 3) or (3,), got shape {d.shape}")
    d = np.ascontiguousarray(d.reshape(-1, 3))
    nrm = np.linalg.norm(d, axis=1)
    bad = (nrm == 0) | ~np.isfinite(nrm)
    if np.any(bad):
        i = int(np.argmax(bad))
        raise ValueError(f"directions[{i}] = {d[i].tolist()} must be a non-zero finite 3-vector")
    return d / nrm[:, None]


def upper_level_indices(spin: float, m_upper) -> np.ndarray:
    """Index (m = I first) of the upper level of each transition m -> m-1; validates ``m_upper``.

    Part of the engine's internal interface (used by :mod:`powderspin.engine.spinning`).

    Parameters
    ----------
    spin : float
        Nuclear spin I.
    m_upper : sequence of float
        Upper level m of each transition m -> m-1.

    Returns
    -------
    numpy.ndarray of int
        I - m for each transition.

    Raises
    ------
    ValueError
        When a level does not exist for this spin (the message lists the allowed values).

    Examples
    --------
    >>> upper_level_indices(2.5, [2.5, 0.5]).tolist()
    [0, 2]
    """
    m_upper_a = np.asarray(m_upper, dtype=float).reshape(-1)
    idx = spin - m_upper_a
    ok = np.isfinite(idx) & (np.abs(idx - np.round(idx)) < 1e-9) & (idx > -0.5) & (idx < 2 * spin - 0.5)
    if not np.all(ok):
        allowed = [spin - i for i in range(int(round(2 * spin)))]
        raise ValueError(f"transition upper levels m_upper = {m_upper_a.tolist()} not available for spin {spin}; "
                         f"allowed values are {allowed}")
    return np.round(idx).astype(np.int64)


def perturbative_offsets(
    frame: SiteFrame,
    directions,
    m_upper,
    *,
    rotor_angle_rad: float = 0.0,
    phases: int = 1,
    second_order: bool = True,
) -> np.ndarray:
    """Transition offsets (Hz) from perturbation theory.

    Parameters
    ----------
    frame : SiteFrame
        Site interactions (:func:`site_frame`).
    directions : array_like, shape (N, 3)
        Static: B0 directions in the crystallite frame.  Spinning: rotor-axis
        directions.
    m_upper : sequence of float
        Upper level m of each transition m -> m-1.
    rotor_angle_rad : float
        Angle between rotor axis and B0; 0 (with ``phases=1``) is static.
    phases : int
        Number of equally spaced rotor phases per period.
    second_order : bool
        Include the second-order quadrupolar term.

    Returns
    -------
    ndarray, shape (N, len(m_upper), phases)

    References
    ----------
    A. Abragam, *The Principles of Nuclear Magnetism* (1961), chapter on electric quadrupole effects (from memory);
    P. P. Man, in *Encyclopedia of Analytical Chemistry* (2000), "Quadrupolar
    interactions" (second-order level shifts).

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> f = site_frame(Site(cq_mhz=3.0), get_nuclide("27Al"), 14.1)
    >>> perturbative_offsets(f, [[0, 0, 1]], [1.5]).round(1).tolist()  # nu_Q at theta = 0
    [[[450000.0]]]
    """
    ax = checked_directions(directions)
    upper_level_indices(frame.spin, m_upper)
    m_upper_a = np.asarray(m_upper, dtype=float).reshape(-1)
    return perturbative_pair_offsets(frame, ax, m_upper_a, m_upper_a - 1.0, rotor_angle_rad, phases, second_order)


def kernel_geometry(frame: SiteFrame, ax: np.ndarray, rotor_angle_rad: float, phases: int) -> tuple:
    """The leading arguments shared by the producer kernels of :mod:`powderspin.engine._kernels`.

    Part of the engine's internal interface (used by :mod:`powderspin.engine.spinning`).

    Parameters
    ----------
    frame : SiteFrame
    ax : numpy.ndarray, shape (N, 3)
        Unit directions (:func:`checked_directions`).
    rotor_angle_rad : float
        Rotor angle (radians); 0 with ``phases = 1`` is static.
    phases : int
        Rotor phases per period.

    Returns
    -------
    tuple
        (directions, cos and sin of the rotor angle, phases, EFG principal values,
        shift tensor (ppm), C_Q / (2I(2I-1)) (Hz), nu0 (Hz)).

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> g = kernel_geometry(site_frame(Site(cq_mhz=3.0), get_nuclide("27Al"), 14.1), checked_directions([0, 0, 1]),
    ...                     0.0, 1)
    >>> len(g), g[3]
    (8, 1)
    """
    return (
        ax,
        math.cos(rotor_angle_rad),
        math.sin(rotor_angle_rad),
        int(phases),
        np.ascontiguousarray(frame.efg_principal_values, dtype=float),
        np.ascontiguousarray(frame.shift_tensor_ppm, dtype=float),
        float(frame.quad_constant_hz),
        float(frame.nu0_hz),
    )


def perturbative_pair_offsets(frame, ax, m_upper, m_lower, rotor_angle_rad, phases, second_order):
    """Perturbative offsets (Hz) of the level pairs m_upper <-> m_lower (checked unit vectors ``ax``).

    Part of the engine's internal interface (used by :mod:`powderspin.engine.two_dimensional` for the
    multiple-quantum and satellite transitions; :func:`perturbative_offsets` is the public front).
    """
    geo = kernel_geometry(frame, ax, rotor_angle_rad, phases)
    rest = (np.ascontiguousarray(m_upper, dtype=float), np.ascontiguousarray(m_lower, dtype=float),
            float(frame.spin), bool(second_order))
    parts = split_work(lambda a, b: _k._perturbative_offsets(geo[0][a:b], *geo[1:], *rest), geo[0].shape[0],
                       grain=max(256, 4096 // max(1, int(phases))))
    return parts[0] if len(parts) == 1 else np.concatenate(parts)


def _operator_products(spin: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    o = spin_operators(spin)
    x, y, z = o.x, o.y, o.z
    ops = np.array([x @ x, y @ y, z @ z, x @ y + y @ x, x @ z + z @ x, y @ z + z @ y], dtype=complex)
    return ops, np.real(np.diag(z)).copy(), np.array(o.plus, dtype=complex)


def exact_offsets(
    frame: SiteFrame,
    directions,
    m_upper,
    *,
    rotor_angle_rad: float = 0.0,
    phases: int = 1,
) -> tuple[np.ndarray, np.ndarray]:
    """Transition offsets (Hz) and intensities from exact diagonalisation.

    Parameters
    ----------
    frame, directions, m_upper, rotor_angle_rad, phases
        As in :func:`perturbative_offsets`.

    Returns
    -------
    offsets : ndarray, shape (N, len(m_upper), phases)
        E(m) - E(m-1) - nu0 with levels labelled by <Iz>.
    intensities : ndarray, same shape
        |<m|I+|m-1>|^2 between the eigenstates (I(I+1) - m(m-1) in high field).

    References
    ----------
    J. A. Weil, J. R. Bolton, *Electron Paramagnetic Resonance* (2007) (from memory)
    (exact spin-Hamiltonian diagonalisation).

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> f = site_frame(Site(cq_mhz=3.0), get_nuclide("27Al"), 14.1)
    >>> off, inten = exact_offsets(f, [[0, 0, 1]], [0.5])
    >>> round(float(inten[0, 0, 0]), 6)
    9.0
    """
    ax = checked_directions(directions)
    spin = frame.spin
    upper = upper_level_indices(spin, m_upper)
    return exact_pair_offsets(frame, ax, upper, upper + 1, rotor_angle_rad, phases)


def exact_pair_offsets(frame, ax, upper, lower, rotor_angle_rad, phases):
    """Exact offsets (Hz) and intensities of the level pairs with indices ``upper``, ``lower`` (m = I first).

    Part of the engine's internal interface (used by :mod:`powderspin.engine.two_dimensional`;
    :func:`exact_offsets` is the public front).
    """
    ops, iz, ip = _operator_products(frame.spin)
    ax, cos_r, sin_r, nphase, efg, delta, quad, nu0 = kernel_geometry(frame, ax, rotor_angle_rad, phases)
    upper = np.asarray(upper, dtype=np.int64)
    lower = np.asarray(lower, dtype=np.int64)
    n, nt = ax.shape[0], upper.size
    off = np.empty((n, nt, nphase))
    inten = np.empty((n, nt, nphase))
    phi = 2.0 * np.pi * np.arange(nphase) / nphase
    step = max(1, _EXACT_BLOCK // nphase)
    for a in range(0, n, step):
        d = ax[a:a + step]
        u, v = _perpendicular_pairs(d)
        # field direction on the cone about each rotor axis (as the perturbative kernels sample it)
        b = (cos_r * d[:, None, :] + sin_r * (np.cos(phi)[None, :, None] * u[:, None, :]
                                               + np.sin(phi)[None, :, None] * v[:, None, :])).reshape(-1, 3)
        ex, ey = _perpendicular_pairs(b)
        comps = quad * np.stack([(efg * ex * ex).sum(1), (efg * ey * ey).sum(1), (efg * b * b).sum(1),
                                 (efg * ex * ey).sum(1), (efg * ex * b).sum(1), (efg * ey * b).sum(1)], axis=1)
        zee = nu0 * (1.0 + 1e-6 * ((b @ delta) * b).sum(axis=1))
        h = (comps @ ops.reshape(6, -1)).reshape(-1, iz.size, iz.size)
        h[:, np.arange(iz.size), np.arange(iz.size)] += zee[:, None] * iz
        w, vec = np.linalg.eigh(h)
        mz = iz @ (vec.real ** 2 + vec.imag ** 2)
        order = np.argsort(-mz, axis=1, kind="stable")  # levels by descending <Iz>: index 0 is m = I
        jh, jl = order[:, upper], order[:, lower]
        rows = np.arange(w.shape[0])[:, None]
        o = w[rows, jh] - w[rows, jl] - (lower - upper)[None, :] * nu0
        vh = np.take_along_axis(vec, jh[:, None, :], axis=2)  # (M, dim, nt) eigenvectors of the upper levels
        vl = np.take_along_axis(vec, jl[:, None, :], axis=2)
        amp = (vh.conj() * (ip @ vl)).sum(axis=1)
        m = d.shape[0]
        off[a:a + m] = o.reshape(m, nphase, nt).transpose(0, 2, 1)
        inten[a:a + m] = (amp.real ** 2 + amp.imag ** 2).reshape(m, nphase, nt).transpose(0, 2, 1)
    return off, inten


#: matrices diagonalised per numpy call of the exact route (a few MB of work arrays)
_EXACT_BLOCK = 4096


def _perpendicular_pairs(n: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Orthonormal (u, v) perpendicular to each unit vector n (rows), v = n x u: the kernels' convention
    (u = n crossed with the coordinate axis least aligned with n), so that rotor phases agree."""
    a = np.abs(n)
    first = (a[:, 0] <= a[:, 1]) & (a[:, 0] <= a[:, 2])
    second = ~first & (a[:, 1] <= a[:, 2])
    z = np.zeros(n.shape[0])
    u = np.where(first[:, None], np.stack([z, n[:, 2], -n[:, 1]], 1),
                 np.where(second[:, None], np.stack([-n[:, 2], z, n[:, 0]], 1), np.stack([n[:, 1], -n[:, 0], z], 1)))
    u /= np.linalg.norm(u, axis=1)[:, None]
    return u, np.cross(n, u)


def multiple_quantum_offsets(
    frame: SiteFrame,
    directions,
    m: float,
    *,
    method: str = "perturbation",
    rotor_angle_rad: float = 0.0,
    phases: int = 1,
) -> np.ndarray:
    """Offsets (Hz) of the symmetric multiple-quantum transition m <-> -m.

    The offset is E(m) - E(-m) - 2 m nu0.  To first order the quadrupolar part
    cancels; to second order it is 2 E2(m), and the shift contributes
    2 m nu0 1e-6 d_zz.

    Parameters
    ----------
    frame : SiteFrame
    directions : array_like (N, 3)
    m : float
        Positive m (e.g. 1.5 for the triple-quantum transition of I = 3/2).
    method : {"perturbation", "exact"}
    rotor_angle_rad, phases
        As in :func:`perturbative_offsets`.

    Returns
    -------
    ndarray (N, 1, phases)

    References
    ----------
    L. Frydman, J. S. Harwood, J. Am. Chem. Soc. 117 (1995) 5367 (multiple-quantum
    transitions of half-integer quadrupolar nuclei).

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> f = site_frame(Site(cq_mhz=3.0), get_nuclide("23Na"), 9.4)
    >>> abs(float(multiple_quantum_offsets(f, [[0, 0, 1]], 1.5)[0, 0, 0])) < 1e-6  # theta = 0: no shift
    True
    """
    ax = checked_directions(directions)
    spin = frame.spin
    mm = float(m)
    if not (0 < mm <= spin and abs(2 * mm - round(2 * mm)) < 1e-12) or abs(mm - round(mm)) < 1e-12:
        raise ValueError(f"m = {m!r} must be a positive half-integer <= I = {spin} for a symmetric m <-> -m transition")
    if method == "perturbation":
        return perturbative_pair_offsets(frame, ax, np.array([mm]), np.array([-mm]), rotor_angle_rad, phases, True)
    if method == "exact":
        up = np.array([int(round(spin - mm))])
        lo = np.array([int(round(spin + mm))])
        return exact_pair_offsets(frame, ax, up, lo, rotor_angle_rad, phases)[0]
    raise ValueError(f"method = {method!r} is not one of 'perturbation', 'exact'")


def transition_intensity(spin: float, m: float) -> float:
    """Small-tip intensity of m -> m-1: |<m|I+|m-1>|^2 = I(I+1) - m(m-1).

    Parameters
    ----------
    spin : float
        Nuclear spin I.
    m : float
        Upper level m of the transition m -> m-1.

    Returns
    -------
    float
        Relative intensity (dimensionless); 9 for the central transition of
        I = 5/2.

    References
    ----------
    A. Abragam, *The Principles of Nuclear Magnetism* (1961), chapter on the motion of free spins (from memory)
    (matrix elements of I+); common practice for non-selective small-tip
    excitation.

    Examples
    --------
    >>> [transition_intensity(2.5, m) for m in (2.5, 1.5, 0.5)]
    [5.0, 8.0, 9.0]
    """
    return spin * (spin + 1.0) - m * (m - 1.0)


def probe_directions(count: int = 96) -> np.ndarray:
    """Quasi-uniform directions on the upper hemisphere (a golden-angle spiral) for quick checks.

    Parameters
    ----------
    count : int, optional
        Number of directions.

    Returns
    -------
    numpy.ndarray, shape (count, 3)
        Unit vectors with z > 0 (all high-field terms are of even rank, so a
        hemisphere represents the sphere).

    Examples
    --------
    >>> d = probe_directions(10)
    >>> d.shape, bool(np.allclose(np.linalg.norm(d, axis=1), 1.0))
    ((10, 3), True)
    """
    i = np.arange(count) + 0.5
    z = 1.0 - i / count  # upper hemisphere suffices (even-rank terms)
    phi = i * math.pi * (3.0 - math.sqrt(5.0))
    r = np.sqrt(1.0 - z * z)
    return np.column_stack([r * np.cos(phi), r * np.sin(phi), z])


def perturbation_error_hz(frame: SiteFrame, m_upper, *, rotor_angle_rad: float = 0.0, phases: int = 1) -> float:
    """Largest perturbative error (Hz) over probe orientations, by exact diagonalisation.

    ``method = "auto"`` uses this (:func:`powderspin.engine.site_lines.choose_method`):
    when the returned error exceeds half an axis point, the exact producer is
    used.  Returns 0.0 for
    spin 1/2 or C_Q = 0 (first-order shift is exact at high field).

    Parameters
    ----------
    frame : SiteFrame
        Site interactions (:func:`site_frame`).
    m_upper : sequence of float
        Upper level m of each transition m -> m-1.
    rotor_angle_rad : float, optional
        Rotor angle (radians); 0 with ``phases=1`` is static.
    phases : int, optional
        Rotor phases per period to compare at.

    Returns
    -------
    float
        max |perturbative - exact| offset (Hz) over 96 probe directions.

    References
    ----------
    A. Abragam, *The Principles of Nuclear Magnetism* (1961), chapter on
    electric quadrupole effects (perturbation theory of the levels) (from memory); J. A. Weil,
    J. R. Bolton, *Electron Paramagnetic Resonance* (2007) (exact
    diagonalisation of spin Hamiltonians) (from memory).

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> al = get_nuclide("27Al")
    >>> perturbation_error_hz(site_frame(Site(cq_mhz=3.0), al, 14.1), [0.5]) < 1.0      # Hz
    True
    >>> perturbation_error_hz(site_frame(Site(cq_mhz=20.0), al, 9.4), [0.5]) > 10.0     # Hz
    True
    """
    if frame.quad_constant_hz == 0.0:
        return 0.0
    d = probe_directions()
    a = perturbative_offsets(frame, d, m_upper, rotor_angle_rad=rotor_angle_rad, phases=phases)
    b, _ = exact_offsets(frame, d, m_upper, rotor_angle_rad=rotor_angle_rad, phases=phases)
    return float(np.max(np.abs(a - b)))


# ---------------------------------------------------------------------------
# the fast exact route: second order plus a fitted smooth correction

#: degrees tried for the correction polynomial, in order (each needs about 2.5x its
#: number of monomials, (L + 1)(L + 2) / 2, diagonalisations to fit)
CORRECTION_DEGREES = (8, 12, 16, 20)


@dataclass(frozen=True)
class ExactCorrection:
    """Exact-minus-second-order offsets and intensities as polynomials in B0's direction.

    At high field the exact offset of a transition is a function of B0's
    direction b in the crystallite frame alone (the Hamiltonian depends on
    nothing else), and so is its second-order approximation.  Their
    difference, the third- and higher-order terms, is small and smooth: the
    order-n term is a polynomial of degree 2n in b and shrinks by about
    nu_Q/nu0 per order.  A homogeneous polynomial of even degree L in b
    (monomials b_x^a b_y^b b_z^c, a + b + c = L) represents every even
    function of b up to spherical-harmonic rank L on the unit sphere, so it
    holds the correction to the size of the neglected orders.  Fitted once per
    site from a few hundred diagonalisations, it gives the exact offsets at any
    orientation and rotor phase for the price of the perturbative ones.

    Attributes
    ----------
    degree : int
        Polynomial degree L (even).
    exponents : ndarray (C, 3) of int
        Powers of the monomials.
    coefficients : ndarray (2 T, C)
        Rows 0..T-1: offset corrections (Hz) of the T transitions; rows T..2T-1:
        intensity corrections (|<m|I+|m-1>|^2 minus its high-field value).
    error_hz : float
        Largest offset error of the fit on check directions not used to fit it (Hz).
    intensity_error : float
        Largest intensity error there (absolute).

    References
    ----------
    A. Abragam, *The Principles of Nuclear Magnetism* (1961), chapter on electric
    quadrupole effects (the perturbation series in nu_Q/nu0) (from memory);
    E. W. Hobson, *The Theory of Spherical and Ellipsoidal Harmonics* (1931) (homogeneous
    polynomials on the sphere and spherical harmonics) (from memory).

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> c = fit_exact_correction(site_frame(Site(cq_mhz=10.0), get_nuclide("27Al"), 9.4), [1.5, 0.5])
    >>> c.degree, c.error_hz < 1e-3
    (16, True)
    """

    degree: int
    exponents: np.ndarray
    coefficients: np.ndarray
    error_hz: float
    intensity_error: float


def _monomial_exponents(degree: int, octant: bool = False) -> np.ndarray:
    """Powers (a, b, c), a + b + c = degree; only even ones when the function is even in each axis."""
    e = [(a, b, degree - a - b) for a in range(degree + 1) for b in range(degree + 1 - a)]
    if octant:
        e = [x for x in e if x[0] % 2 == 0 and x[1] % 2 == 0]
    return np.array(e, dtype=np.int64)


def _monomials(d: np.ndarray, exponents: np.ndarray) -> np.ndarray:
    return np.prod(d[:, None, :] ** exponents[None, :, :], axis=2)


def correction_tolerance_hz(frame: SiteFrame) -> float:
    """Largest offset error (Hz) :func:`fit_exact_correction` accepts.

    1e-5 Hz, or the rounding level of the exact diagonalisation itself (about
    3e-14 of the largest level energy, nu0 I, measured) where that is larger.

    Parameters
    ----------
    frame : SiteFrame

    Returns
    -------
    float

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> correction_tolerance_hz(site_frame(Site(cq_mhz=10.0), get_nuclide("27Al"), 9.4))
    1e-05
    """
    return max(1e-5, 3e-14 * frame.nu0_hz * frame.spin)


def fit_exact_correction(frame: SiteFrame, m_upper, *, degrees=CORRECTION_DEGREES,
                         tolerance_hz: float | None = None) -> ExactCorrection | None:
    """Fit the exact-minus-second-order correction of a site (see :class:`ExactCorrection`).

    For each degree in turn the correction is fitted by least squares to exact
    diagonalisations at 2.5 times as many quasi-uniform directions as it has
    monomials, and checked at as many other directions; the first degree whose
    largest offset error is within ``tolerance_hz`` (and intensity error within
    1e-9 of the largest intensity) is returned.

    Parameters
    ----------
    frame : SiteFrame
    m_upper : sequence of float
        Upper level m of each transition m -> m-1.
    degrees : sequence of int, optional
        Even degrees to try.
    tolerance_hz : float, optional
        Default :func:`correction_tolerance_hz`.

    Returns
    -------
    ExactCorrection or None
        None when no degree meets the tolerance (strong coupling: the exact
        route then diagonalises at every orientation and phase).

    References
    ----------
    A. Abragam, *The Principles of Nuclear Magnetism* (1961), chapter on electric
    quadrupole effects (from memory).

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> f = site_frame(Site(cq_mhz=25.0, eta_q=0.3), get_nuclide("93Nb"), 9.4)
    >>> c = fit_exact_correction(f, [0.5])
    >>> d = probe_directions(5)
    >>> off, _ = corrected_exact_offsets(f, d, [0.5], c)
    >>> bool(np.abs(off - exact_offsets(f, d, [0.5])[0]).max() < 1e-3)   # Hz
    True
    """
    upper_level_indices(frame.spin, m_upper)
    m_upper_a = np.asarray(m_upper, dtype=float).reshape(-1)
    tol = correction_tolerance_hz(frame) if tolerance_hz is None else float(tolerance_hz)
    ideal = np.array([transition_intensity(frame.spin, m) for m in m_upper_a])
    for degree in degrees:
        # a site whose tensors are all diagonal in the crystallite frame has frequencies even in
        # each coordinate of b (the octant symmetry), and so has the correction
        exps = _monomial_exponents(int(degree), frame.symmetry == "octant")
        nfit = int(2.5 * len(exps))
        d_fit = probe_directions(nfit)
        d_chk = probe_directions(nfit + 1)[:: 2]  # a different spiral
        targets = []
        for d in (d_fit, d_chk):
            ex, inten = exact_offsets(frame, d, m_upper_a)
            pt = perturbative_offsets(frame, d, m_upper_a)
            targets.append(np.concatenate([(ex - pt)[..., 0], inten[..., 0] - ideal], axis=1))
        coef = _k._least_squares(_monomials(d_fit, exps), np.ascontiguousarray(targets[0]))
        resid = np.abs(_monomials(d_chk, exps) @ coef - targets[1])
        nt = len(m_upper_a)
        err_hz = float(resid[:, :nt].max())
        err_i = float(resid[:, nt:].max())
        if err_hz <= tol and err_i <= 1e-9 * float(ideal.max()):
            return ExactCorrection(int(degree), exps, np.ascontiguousarray(coef.T), err_hz, err_i)
    return None


def corrected_exact_offsets(frame: SiteFrame, directions, m_upper, correction: ExactCorrection, *,
                            rotor_angle_rad: float = 0.0, phases: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """Exact offsets and intensities as second order plus the fitted correction (fast exact route).

    Parameters
    ----------
    frame, directions, m_upper, rotor_angle_rad, phases
        As in :func:`exact_offsets`; ``m_upper`` must be the transitions the
        correction was fitted for.
    correction : ExactCorrection
        From :func:`fit_exact_correction`.

    Returns
    -------
    offsets, intensities : ndarray, shape (N, len(m_upper), phases)
        As :func:`exact_offsets` gives them, to within ``correction.error_hz``
        and ``correction.intensity_error``.

    References
    ----------
    A. Abragam, *The Principles of Nuclear Magnetism* (1961), chapter on electric
    quadrupole effects (from memory).

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> f = site_frame(Site(cq_mhz=10.0), get_nuclide("27Al"), 9.4)
    >>> c = fit_exact_correction(f, [0.5])
    >>> off, inten = corrected_exact_offsets(f, [[0.0, 0.0, 1.0]], [0.5], c)
    >>> round(float(inten[0, 0, 0]), 6)
    9.0
    """
    ax = checked_directions(directions)
    upper_level_indices(frame.spin, m_upper)
    m_upper_a = np.asarray(m_upper, dtype=float).reshape(-1)
    nt = len(m_upper_a)
    if correction.coefficients.shape[0] != 2 * nt:
        raise ValueError(f"the correction was fitted for {correction.coefficients.shape[0] // 2} transitions, "
                         f"not the {nt} of m_upper = {m_upper_a.tolist()}")
    pert = perturbative_offsets(frame, ax, m_upper_a, rotor_angle_rad=rotor_angle_rad, phases=phases)
    corr = _k._cone_polynomial(ax, math.cos(rotor_angle_rad), math.sin(rotor_angle_rad), int(phases),
                               correction.exponents, correction.coefficients)
    ideal = np.array([transition_intensity(frame.spin, m) for m in m_upper_a])
    return pert + corr[:, :nt], corr[:, nt:] + ideal[None, :, None]
