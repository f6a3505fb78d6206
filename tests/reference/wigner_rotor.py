"""Rotor-frame Fourier components of transition offsets by Wigner rotations (slow, analytic).

An independent route to ``powderspin.engine.spinning.rotor_fourier_components``.  The
engine evaluates the DEVELOPERS.md, 'Physics formulas' level formulas at 16 rotor phases on
the cone of B0 directions about the rotor axis and takes an FFT; here nothing
is sampled: the lab-frame spherical components are written as explicit
trigonometric polynomials of the rotor phase through Wigner rotation matrices,
and the products needed at second order are formed by convolving their
coefficient lists.

Spherical components (normalisation)
------------------------------------
For a real symmetric Cartesian tensor ``t`` (M. Mehring, *Principles of High
Resolution NMR in Solids* (1983), app. B; the normalisation of
:func:`powderspin.physics.tensors.spherical_components`, Condon-Shortley phase)::

    T_00    = tr(t) / 3
    T_20    = sqrt(3/2) (t_zz - tr(t)/3)
    T_2,+-1 = -+(t_xz +- i t_yz)
    T_2,+-2 = (t_xx - t_yy +- 2 i t_xy) / 2

so that, for a real tensor, ``T_2,-q = (-1)^q conj(T_2,q)`` and

    t_zz - tr/3                            = sqrt(2/3) T_20
    t_xz^2 + t_yz^2                        = |T_2,+-1|^2 = -T_2,1 T_2,-1
    ((t_xx - t_yy)^2 + 4 t_xy^2) / 4       = |T_2,+-2|^2 =  T_2,2 T_2,-2

(the last two are read off directly: ``|t_xz + i t_yz|^2 = t_xz^2 + t_yz^2``
and ``|(t_xx - t_yy) + 2 i t_xy|^2 / 4``; the signs follow from
``T_2,-1 = -conj(T_2,1)`` and ``T_2,-2 = conj(T_2,2)``).

In its principal frame the EFG (units of V_zz, ``V = diag(-(1-eta)/2,
-(1+eta)/2, 1)``) has ``T_20 = sqrt(3/2)``, ``T_2,+-1 = 0`` and
``T_2,+-2 = (V_xx - V_yy)/2 = eta/2``.  A shift tensor with principal values
(d_xx, d_yy, d_zz) (ppm) has ``T_00 = (d_xx + d_yy + d_zz)/3``,
``T_20 = sqrt(3/2) (d_zz - T_00)`` and ``T_2,+-2 = (d_xx - d_yy)/2``.

Rotation rule
-------------
Wigner matrices ``D^l_{m'm}(alpha, beta, gamma) = exp(-i m' alpha)
d^l_{m'm}(beta) exp(-i m gamma)`` from :func:`powderspin.physics.wigner.wigner_D`
(its convention is checked against sympy in ``tests/physics/test_wigner.py``).  With
``R = Rz(alpha) Ry(beta) Rz(gamma)`` (:func:`powderspin.physics.tensors.rotation_matrix`),
if the columns of R are the axes of a frame F written in a frame G, the
components in the two frames are related by (docstring of
:func:`powderspin.physics.tensors.spherical_components`)::

    T^F_{l k} = sum_m T^G_{l m} D^l_{m k}(alpha, beta, gamma)        (F from G)
    T^G_{l m} = sum_k conj(D^l_{m k}(alpha, beta, gamma)) T^F_{l k}  (G from F)

Frames
------
* P: the shift tensor's principal frame.  Its axes, written in the crystallite
  frame C, are the columns of ``rotation_matrix(*shift_euler_rad)`` (DEVELOPERS.md,
  "Physics formulas"), so the shift components in C follow from the P components by the
  "G from F" rule.
* C: the crystallite frame = the EFG principal frame.
* R: the rotor frame, axes (u, v, n) written in C: n the rotor axis, u the
  phase origin (any unit vector perpendicular to n), v = n x u.  (u, v, n) is
  right-handed because u x (n x u) = n.  Its Euler angles (alpha_R, beta_R,
  gamma_R) are read from that matrix (:func:`euler_angles_zyz`) and
  ``T^R = T^C D(alpha_R, beta_R, gamma_R)``.
* L(phi): the laboratory frame at rotor phase phi.  B0 = z_L has polar angle
  theta_R (the rotor angle) and azimuth phi in R, i.e. in C
  ``b(phi) = cos(theta_R) n + sin(theta_R) (cos(phi) u + sin(phi) v)``, the
  engine's cone (phi = 0 puts B0 in the (n, u) plane on the u side).  The lab
  axes written in R are the columns of ``Rz(phi) Ry(theta_R)``: Euler angles
  (phi, theta_R, 0).  The lab x, y axes do not matter: T_20, |T_2,+-1|^2 and
  |T_2,+-2|^2 are unchanged by a rotation about z_L (it multiplies T_2q by a
  phase exp(-i q chi)).

Hence::

    T^L_{2k}(phi) = sum_m T^R_{2m} exp(-i m phi) d^2_{m k}(theta_R)
                  = sum_{q=-2..2} a^{(k)}_q exp(i q phi),
    a^{(k)}_q     = T^R_{2,-q} d^2_{-q,k}(theta_R).

Each lab component is a trigonometric polynomial of degree 2 in phi; a
product of two of them, ``T^L_{2k} T^L_{2k'}``, has coefficients
``sum_q a^{(k)}_q a^{(k')}_{p-q}`` (a discrete convolution, ``numpy.convolve``)
for p = -4..4.

Transition offsets
------------------
DEVELOPERS.md, 'Physics formulas', X = I(I+1), K = C_Q / (2I(2I-1)), EFG in units of the
principal V_zz, A = V_xz^2 + V_yz^2 = -V^L_21 V^L_2,-1,
B = ((V_xx - V_yy)^2 + 4 V_xy^2)/4 = V^L_22 V^L_2,-2 (lab frame)::

    E1(m) = (K/2) V_zz (3 m^2 - X),                       V_zz = sqrt(2/3) V^L_20
    E2(m) = -(K^2 / (2 nu0)) m [ (4X - 8m^2 - 1) A - (2X - 2m^2 - 1) B ]
    nu(m -> m-1) = E1(m) - E1(m-1) + E2(m) - E2(m-1) + nu0 1e-6 d_zz(lab)

with ``E1(m) - E1(m-1) = (3K/2)(2m - 1) V_zz`` and
``d_zz(lab) = T^CS_00 + sqrt(2/3) T^CS,L_20``.  So, Fourier component by
Fourier component (p = -4..4, coefficients of exp(i p phi))::

    c_p = nu0 1e-6 [T^CS_00 delta_p0 + sqrt(2/3) a^{CS,(0)}_p]
        + (3K/2)(2m - 1) sqrt(2/3) a^{V,(0)}_p
        - (K^2 / (2 nu0)) [ alpha_m (-(a^{V,(1)} * a^{V,(-1)})_p)
                            - beta_m (a^{V,(2)} * a^{V,(-2)})_p ]

where ``*`` is the convolution, ``alpha_m = m(4X - 8m^2 - 1) -
(m-1)(4X - 8(m-1)^2 - 1)`` and ``beta_m = m(2X - 2m^2 - 1) -
(m-1)(2X - 2(m-1)^2 - 1)``.  First-order terms have |p| <= 2, second-order
terms |p| <= 4.  Real offsets give ``c_-p = conj(c_p)``.

References
----------
M. Mehring, *Principles of High Resolution NMR in Solids* (1983), ch. 2 and
app. B; M. E. Rose, *Elementary Theory of Angular Momentum* (1957), ch. IV
(Wigner matrices, ZYZ Euler angles); A. Samoson, E. Lippmaa, A. Pines,
Mol. Phys. 65 (1988) 1013 (second-order quadrupolar terms under sample
rotation as products of rank-2 components).
"""

from __future__ import annotations

import math

import numpy as np

from powderspin.physics.tensors import rotation_matrix
from powderspin.physics.wigner import wigner_D, wigner_small_d

__all__ = [
    "efg_principal_components",
    "shift_principal_components",
    "euler_angles_zyz",
    "rotor_frame_matrix",
    "rotor_frame_components",
    "lab_component_fourier",
    "transition_fourier_components",
]

SQRT23 = math.sqrt(2.0 / 3.0)


def efg_principal_components(eta_q: float) -> np.ndarray:
    """Rank-2 components T_{2,-2..2} of the EFG in its principal frame (units of V_zz)."""
    t = np.zeros(5, dtype=complex)
    t[2] = math.sqrt(1.5)
    t[0] = t[4] = eta_q / 2.0
    return t


def shift_principal_components(principal_ppm) -> tuple[complex, np.ndarray]:
    """(T_00, T_{2,-2..2}) of a shift tensor from its principal values (d_xx, d_yy, d_zz) in ppm."""
    dxx, dyy, dzz = (float(x) for x in principal_ppm)
    iso = (dxx + dyy + dzz) / 3.0
    t = np.zeros(5, dtype=complex)
    t[2] = math.sqrt(1.5) * (dzz - iso)
    t[0] = t[4] = (dxx - dyy) / 2.0
    return iso, t


def euler_angles_zyz(r: np.ndarray) -> tuple[float, float, float]:
    """ZYZ Euler angles (alpha, beta, gamma) with ``rotation_matrix(alpha, beta, gamma) == r``.

    From ``R = Rz(a) Ry(b) Rz(g)``: ``R_22 = cos b``, ``(R_02, R_12) = sin b (cos a, sin a)``,
    ``(R_20, R_21) = sin b (-cos g, sin g)``; for sin b = 0 only a + g (b = 0) or a - g
    (b = pi) is defined and g = 0 is taken.  The result is checked by rebuilding the matrix.
    """
    r = np.asarray(r, dtype=float)
    sb = math.hypot(r[0, 2], r[1, 2])
    beta = math.atan2(sb, r[2, 2])
    if sb > 1e-12:
        alpha = math.atan2(r[1, 2], r[0, 2])
        gamma = math.atan2(r[2, 1], -r[2, 0])
    elif r[2, 2] > 0:  # R = Rz(alpha + gamma)
        alpha, gamma = math.atan2(r[1, 0], r[0, 0]), 0.0
    else:  # R = Rz(alpha) Ry(pi): first column (-cos a, -sin a, 0)
        alpha, gamma = math.atan2(-r[1, 0], -r[0, 0]), 0.0
    if not np.allclose(rotation_matrix(alpha, beta, gamma), r, rtol=0, atol=1e-10):
        raise ValueError("matrix is not a proper rotation")
    return alpha, beta, gamma


def rotor_frame_matrix(axis, phase_origin) -> np.ndarray:
    """Columns (u, v, n): the rotor frame's axes in the crystallite frame (v = n x u)."""
    n = np.asarray(axis, dtype=float)
    n = n / np.linalg.norm(n)
    u = np.asarray(phase_origin, dtype=float)
    if abs(float(u @ n)) > 1e-9 * np.linalg.norm(u):
        raise ValueError("phase_origin must be perpendicular to the rotor axis")
    u = u / np.linalg.norm(u)
    v = np.cross(n, u)
    return np.column_stack([u, v, n])


def rotor_frame_components(t_crystal: np.ndarray, axis, phase_origin) -> np.ndarray:
    """Rank-2 components in the rotor frame, T^R_k = sum_m T^C_m D_{mk}(Omega_R)."""
    d = wigner_D(2, *euler_angles_zyz(rotor_frame_matrix(axis, phase_origin)))
    return np.asarray(t_crystal) @ d


def lab_component_fourier(t_rotor: np.ndarray, k: int, rotor_angle_rad: float) -> np.ndarray:
    """Coefficients a_q (q = -2..2, index q + 2) of T^L_{2k}(phi) = sum_q a_q exp(i q phi).

    ``a_q = T^R_{2,-q} d^2_{-q,k}(theta_R)`` (Euler angles of the lab frame in the rotor
    frame: (phi, theta_R, 0)).
    """
    d = wigner_small_d(2, rotor_angle_rad)
    q = np.arange(-2, 3)
    return np.asarray(t_rotor)[-q + 2] * d[-q + 2, k + 2]


def _pad9(a5: np.ndarray) -> np.ndarray:
    out = np.zeros(9, dtype=complex)
    out[2:7] = a5
    return out


def transition_fourier_components(spin, nu0_hz, quad_constant_hz, eta_q, shift_principal_ppm, shift_euler_rad, axis,
                                  phase_origin, rotor_angle_rad, ms, second_order=True) -> np.ndarray:
    """Fourier components c_p (p = -4..4, index p + 4) of the offsets of transitions m -> m-1.

    Parameters
    ----------
    spin : float
        I.
    nu0_hz : float
        Larmor (reference) frequency, Hz.
    quad_constant_hz : float
        K = C_Q / (2I(2I-1)), Hz (0 for no quadrupolar coupling).
    eta_q : float
        EFG asymmetry.
    shift_principal_ppm : (d_xx, d_yy, d_zz)
        Shift principal values along the shift frame's own axes (ppm, isotropic part included).
    shift_euler_rad : (alpha, beta, gamma)
        ZYZ active Euler angles of the shift frame relative to the EFG frame.
    axis, phase_origin : 3-vectors
        Rotor axis n and the phase-origin direction u (perpendicular to n), crystallite frame.
    rotor_angle_rad : float
        theta_R.
    ms : sequence of float
        Upper levels m.
    second_order : bool
        Include the second-order quadrupolar term.

    Returns
    -------
    ndarray complex (len(ms), 9)
        ``nu(phi) = sum_p c[:, p + 4] exp(i p phi)`` (Hz).
    """
    x = spin * (spin + 1.0)
    # EFG: principal = crystallite frame -> rotor frame -> Fourier coefficients in the lab
    v_r = rotor_frame_components(efg_principal_components(eta_q), axis, phase_origin)
    av = {k: lab_component_fourier(v_r, k, rotor_angle_rad) for k in range(-2, 3)}
    # shift: principal frame -> crystallite frame ("G from F": conjugate D) -> rotor -> lab
    iso, s_p = shift_principal_components(shift_principal_ppm)
    s_c = np.conj(wigner_D(2, *shift_euler_rad)) @ s_p
    s_r = rotor_frame_components(s_c, axis, phase_origin)
    a_cs = lab_component_fourier(s_r, 0, rotor_angle_rad)

    cs = np.zeros(9, dtype=complex)
    cs[4] = iso
    cs += SQRT23 * _pad9(a_cs)
    cs *= nu0_hz * 1e-6
    vzz = SQRT23 * _pad9(av[0])
    big_a = -np.convolve(av[1], av[-1])  # |V_2,+-1|^2 = V_xz^2 + V_yz^2
    big_b = np.convolve(av[2], av[-2])   # |V_2,+-2|^2 = ((V_xx - V_yy)^2 + 4 V_xy^2)/4

    out = np.empty((len(ms), 9), dtype=complex)
    for i, m in enumerate(ms):
        m = float(m)
        mm = m - 1.0
        c = cs + 1.5 * quad_constant_hz * (2.0 * m - 1.0) * vzz
        if second_order and quad_constant_hz != 0.0:
            alpha_m = m * (4 * x - 8 * m * m - 1) - mm * (4 * x - 8 * mm * mm - 1)
            beta_m = m * (2 * x - 2 * m * m - 1) - mm * (2 * x - 2 * mm * mm - 1)
            c = c - (quad_constant_hz * quad_constant_hz / (2.0 * nu0_hz)) * (alpha_m * big_a - beta_m * big_b)
        out[i] = c
    return out
