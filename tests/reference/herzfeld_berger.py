"""Spinning-sideband intensities of a shift anisotropy, the Herzfeld-Berger way.

An independent reference (it imports nothing from powderspin) for the
sideband intensities of a first-order (inhomogeneous) interaction under
sample spinning, written from the formulation of J. Herzfeld and
A. E. Berger, J. Chem. Phys. 73 (1980) 6021:

1. A crystallite whose rotor axis points along ``n = (sin b cos a,
   sin b sin a, cos b)`` in the tensor's principal frame sees B0 along
   ``B(tau) = cos(theta) n + sin(theta) (cos(tau) u + sin(tau) v)`` with
   ``u = (cos b cos a, cos b sin a, -sin b)``, ``v = (-sin a, cos a, 0)``,
   ``theta`` the rotor angle and ``tau = 2 pi nu_r t + gamma`` the rotor
   phase.  Its offset ``nu(tau) = B^T D B`` (D = diag of the principal
   frequencies, Hz) is then, written out by hand,

       nu = A0 + C1 cos tau + S1 sin tau + C2 cos 2 tau + S2 sin 2 tau,
       A0 = cos^2(theta) nDn + sin^2(theta) (uDu + vDv) / 2,
       C1 = 2 sin(theta) cos(theta) nDu,   S1 = 2 sin(theta) cos(theta) nDv,
       C2 = sin^2(theta) (uDu - vDv) / 2,  S2 = sin^2(theta) uDv,

   with the analytic bilinear forms (D = diag(dx, dy, dz))

       nDn = sin^2 b (cos^2 a dx + sin^2 a dy) + cos^2 b dz
       nDu = sin b cos b (cos^2 a dx + sin^2 a dy - dz)
       nDv = sin b sin a cos a (dy - dx)
       uDu = cos^2 b (cos^2 a dx + sin^2 a dy) + sin^2 b dz
       vDv = sin^2 a dx + cos^2 a dy
       uDv = cos b sin a cos a (dy - dx).

2. The accumulated phase ``Phi(tau) = (1/nu_r) int (nu - A0) dtau`` is, in
   closed form, ``a sin(tau - phi1) + b sin(2 tau - phi2)`` with
   ``a = hypot(C1, S1)/nu_r``, ``phi1 = atan2(S1, C1)``,
   ``b = hypot(C2, S2)/(2 nu_r)``, ``phi2 = atan2(S2, C2)``.

3. By the Jacobi-Anger expansion ``exp(i z sin x) = sum_k J_k(z) exp(i k x)``
   the Fourier coefficients of ``exp(i Phi)`` over one period are the sums of
   Bessel-function products (the Herzfeld-Berger form)

       F_n = sum_l J_{n-2l}(a) J_l(b) exp(-i (n-2l) phi1 - i l phi2),

   and, after the average over the initial rotor phase gamma (which only
   multiplies F_n by a phase), the intensity of band n (at A0 + n nu_r) is
   ``|F_n|^2``.

4. The powder average of ``|F_n|^2`` over the rotor-axis direction is done
   with scipy quadrature: Gauss-Legendre nodes in ``cos b`` on [-1, 1]
   (scipy.special.roots_legendre) times the uniform (trapezoid) rule in
   ``a`` over its period pi, which is exponentially accurate for this
   smooth periodic integrand.

Bessel functions come from scipy.special.jv.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import jv, roots_legendre

__all__ = ["MAGIC_ANGLE_RAD", "principal_from_aniso", "phase_coefficients", "crystallite_bands",
           "sideband_intensities"]

#: arccos(1/sqrt 3), the magic angle
MAGIC_ANGLE_RAD = math.acos(1.0 / math.sqrt(3.0))


def principal_from_aniso(aniso_hz: float, eta: float) -> np.ndarray:
    """Traceless principal frequencies (dx, dy, dz) from a reduced anisotropy and asymmetry.

    Haeberlen convention: ``dz = aniso``, ``eta = (dy - dx) / aniso`` and the
    trace is zero, so ``dx = -aniso (1 + eta) / 2``, ``dy = -aniso (1 - eta) / 2``.
    The span ``max - min`` is ``|aniso| (3 + eta) / 2``.
    """
    return np.array([-aniso_hz * (1 + eta) / 2, -aniso_hz * (1 - eta) / 2, aniso_hz])


def phase_coefficients(principal_hz, beta, alpha, rotor_angle_rad=MAGIC_ANGLE_RAD):
    """Fourier coefficients (A0, C1, S1, C2, S2) in Hz of the offset over the rotor phase.

    ``beta, alpha`` (arrays, radians) are the polar angles of the rotor axis
    in the principal frame of ``D = diag(principal_hz)``.
    """
    dx, dy, dz = (float(x) for x in principal_hz)
    cb, sb = np.cos(beta), np.sin(beta)
    ca, sa = np.cos(alpha), np.sin(alpha)
    ct, st = math.cos(rotor_angle_rad), math.sin(rotor_angle_rad)
    mix = ca * ca * dx + sa * sa * dy
    ndn = sb * sb * mix + cb * cb * dz
    ndu = sb * cb * (mix - dz)
    ndv = sb * sa * ca * (dy - dx)
    udu = cb * cb * mix + sb * sb * dz
    vdv = sa * sa * dx + ca * ca * dy
    udv = cb * sa * ca * (dy - dx)
    a0 = ct * ct * ndn + st * st * (udu + vdv) / 2
    c1 = 2 * st * ct * ndu
    s1 = 2 * st * ct * ndv
    c2 = st * st * (udu - vdv) / 2
    s2 = st * st * udv
    return a0, c1, s1, c2, s2


def crystallite_bands(principal_hz, rate_hz, orders, beta, alpha, rotor_angle_rad=MAGIC_ANGLE_RAD):
    """|F_n|^2 of single crystallites (rows: orders, columns: orientations)."""
    orders = np.atleast_1d(np.asarray(orders, dtype=int))
    beta = np.atleast_1d(np.asarray(beta, dtype=float))
    alpha = np.atleast_1d(np.asarray(alpha, dtype=float))
    _, c1, s1, c2, s2 = phase_coefficients(principal_hz, beta, alpha, rotor_angle_rad)
    a = np.hypot(c1, s1) / rate_hz
    phi1 = np.arctan2(s1, c1)
    b = np.hypot(c2, s2) / (2 * rate_hz)
    phi2 = np.arctan2(s2, c2)
    # truncation: J_k(z) is negligible (< 1e-16) once |k| > z + 12 z^(1/3) + 20
    lmax = int(math.ceil(b.max() + 12 * np.cbrt(b.max()) + 20))
    kmax = int(math.ceil(a.max() + 12 * np.cbrt(a.max()) + 20)) + np.abs(orders).max() + 2 * lmax
    ls = np.arange(-lmax, lmax + 1)
    ks = np.arange(-kmax, kmax + 1)
    ja = jv(ks[:, None], a[None, :])  # (k, orientation)
    jb = jv(ls[:, None], b[None, :])
    out = np.empty((orders.size, beta.size))
    for i, n in enumerate(orders):
        k = n - 2 * ls
        f = (ja[k + kmax] * jb) * np.exp(-1j * (k[:, None] * phi1[None, :] + ls[:, None] * phi2[None, :]))
        out[i] = np.abs(f.sum(axis=0)) ** 2
    return out


def sideband_intensities(principal_hz, rate_hz, orders, *, rotor_angle_rad=MAGIC_ANGLE_RAD,
                         n_beta=64, n_alpha=64):
    """Powder-averaged sideband intensities I_n of a first-order tensor interaction.

    Parameters
    ----------
    principal_hz : sequence of 3 float
        Principal values of the anisotropic part of the offset (Hz); any
        isotropic part only moves all bands together and is removed.
    rate_hz : float
        Spinning rate (Hz), > 0.
    orders : sequence of int
        Band orders n (band n sits at the rotor average plus n * rate_hz).
    rotor_angle_rad : float
        Angle between the rotor axis and B0.
    n_beta, n_alpha : int
        Gauss-Legendre nodes in cos(beta) and uniform nodes in alpha over [0, pi).

    Returns
    -------
    ndarray
        I_n for each requested order; summed over all n they give 1.

    References
    ----------
    J. Herzfeld, A. E. Berger, J. Chem. Phys. 73 (1980) 6021.
    """
    d = np.asarray(principal_hz, dtype=float)
    d = d - d.mean()
    x, wx = roots_legendre(n_beta)
    alpha = np.pi * np.arange(n_alpha) / n_alpha
    beta = np.arccos(x)
    bb, aa = np.meshgrid(beta, alpha, indexing="ij")
    w = (wx[:, None] / 2.0) * np.full(n_alpha, 1.0 / n_alpha)[None, :]
    vals = crystallite_bands(d, rate_hz, orders, bb.ravel(), aa.ravel(), rotor_angle_rad)
    return vals @ w.ravel()
