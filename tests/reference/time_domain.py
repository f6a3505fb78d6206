"""Brute-force time-domain reference for spectra of spinning powders.

An independent reference (it imports nothing from powderspin): the spectrum
is made the way an experiment makes it, by adding up free induction decays.

1. Crystallites.  The rotor axis points along ``n = (sin b cos a,
   sin b sin a, cos b)`` in the crystallite frame; the powder grid is
   Gauss-Legendre in ``cos b`` (scipy.special.roots_legendre) times the
   uniform rule in ``a``.  Each crystallite is also sampled at ``n_gamma``
   equally spaced initial rotor phases gamma.
2. Geometry, with explicit 3x3 rotation matrices: a crystallite-frame
   tensor T reads ``T_lab = M T M^T`` in the laboratory frame (z along B0),
   ``M = Ry(theta_R) Rz(tau) Ry(-b) Rz(-a)``, ``tau = gamma + 2 pi nu_r t``
   the rotor phase and ``theta_R`` the rotor angle (so the rotor axis,
   ``M^T Ry(theta_R) e_z``, is n, and B0 makes the angle theta_R with it).
3. Frequency of the transition m -> m-1 at each time (Hz), the high-field
   perturbation formulas of DEVELOPERS.md, 'Physics formulas' written out
   literally with the laboratory-frame EFG components (X = I(I+1),
   K = C_Q / (2I(2I-1))):
   ``E1(m) = C_Q / (4I(2I-1)) V_zz (3 m^2 - X)``,
   ``E2(m) = -(K^2 / (2 nu0)) m [(4X - 8m^2 - 1)(V_xz^2 + V_yz^2)
   - (2X - 2m^2 - 1)((V_xx - V_yy)^2 + 4 V_xy^2) / 4]``,
   ``nu = E1(m) - E1(m-1) + E2(m) - E2(m-1) + nu0 1e-6 d_zz``
   (A. Abragam, *The Principles of Nuclear Magnetism* (1961), chapter on electric quadrupole effects (from memory), for
   the first- and second-order quadrupolar level shifts).
4. Phase: ``xi(t) = 2 pi int_0^t nu dt'`` by the cumulative Simpson rule
   (scipy.integrate.cumulative_simpson) on a fine grid over one rotor period;
   the frequency is periodic, so the phase over many periods is the rotor
   average times t plus the periodic remainder.
5. Signal: ``s(t) = sum_crystallites sum_gamma w exp(i xi(t))`` sampled
   ``samples_per_period`` times per rotor period over the whole acquisition,
   multiplied by ``exp(-pi L t)`` (a Lorentzian of FWHM L), first point
   halved, and Fourier transformed (numpy.fft); the real part is the
   absorption spectrum.

The frequency axis must be commensurate with the rotor period:
``points * dx = samples_per_period * nu_r``.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.integrate import cumulative_simpson
from scipy.special import roots_legendre

__all__ = ["powder_grid", "lab_rotations", "lab_tensors", "transition_offsets_hz", "fid", "spectrum"]


def _rz(angle):
    a = np.asarray(angle, dtype=float)
    c, s = np.cos(a), np.sin(a)
    z, o = np.zeros_like(a), np.ones_like(a)
    return np.stack([np.stack([c, -s, z], -1), np.stack([s, c, z], -1), np.stack([z, z, o], -1)], -2)


def _ry(angle):
    a = np.asarray(angle, dtype=float)
    c, s = np.cos(a), np.sin(a)
    z, o = np.zeros_like(a), np.ones_like(a)
    return np.stack([np.stack([c, z, s], -1), np.stack([z, o, z], -1), np.stack([-s, z, c], -1)], -2)


def powder_grid(n_beta: int, n_alpha: int, region: str = "sphere"):
    """Rotor-axis directions (b, a) and weights summing to 1.

    ``region = "sphere"``: cos b on [-1, 1], a uniform on [0, 2 pi).
    ``region = "octant"``: cos b on [0, 1], a at the midpoints of [0, pi/2);
    valid only when every tensor is diagonal in the crystallite frame (the
    frequencies are then unchanged by the reflections x, y, z -> -x, -y, -z).
    """
    x, wx = roots_legendre(n_beta)
    if region == "sphere":
        a = 2 * np.pi * np.arange(n_alpha) / n_alpha
    elif region == "octant":
        x = 0.5 * (x + 1.0)
        a = 0.5 * np.pi * (np.arange(n_alpha) + 0.5) / n_alpha
    else:
        raise ValueError(f"region = {region!r} must be 'sphere' or 'octant'")
    b = np.arccos(x)
    bb, aa = np.meshgrid(b, a, indexing="ij")
    w = np.repeat(wx / wx.sum(), n_alpha) / n_alpha
    return bb.ravel(), aa.ravel(), w


def lab_rotations(beta, alpha, tau, rotor_angle_rad):
    """Rotations ``M = Ry(theta_R) Rz(tau) Ry(-b) Rz(-a)`` taking crystallite-frame components to the lab frame.

    Returns an array (3, 3, n_orientations, n_tau): ``M[i, k, o, t]``.
    """
    a = _ry(-np.asarray(beta)) @ _rz(-np.asarray(alpha))  # (n_o, 3, 3)
    c = _ry(rotor_angle_rad)[None] @ _rz(np.asarray(tau))  # (n_t, 3, 3)
    m = np.zeros((3, 3, a.shape[0], c.shape[0]))
    for i in range(3):
        for k in range(3):
            for j in range(3):
                m[i, k] += a[:, j, k][:, None] * c[:, i, j][None, :]
    return m


def lab_tensors(tensor, beta, alpha, tau, rotor_angle_rad, rotations=None):
    """Laboratory-frame components ``M T M^T`` of a crystallite-frame tensor T.

    Returns an array (3, 3, n_orientations, n_tau).
    """
    m = lab_rotations(beta, alpha, tau, rotor_angle_rad) if rotations is None else rotations
    t = np.asarray(tensor, dtype=float)
    w = np.zeros(m.shape)
    for i in range(3):
        for l in range(3):
            for k in range(3):
                if t[k, l] != 0.0:
                    w[i, l] += m[i, k] * t[k, l]
    out = np.empty(m.shape)
    for i in range(3):
        for j in range(i, 3):
            out[i, j] = w[i, 0] * m[j, 0] + w[i, 1] * m[j, 1] + w[i, 2] * m[j, 2]
            out[j, i] = out[i, j]
    return out


def _e1(spin, cq_hz, vzz, m):
    return cq_hz / (4 * spin * (2 * spin - 1)) * vzz * (3 * m * m - spin * (spin + 1))


def _e2(spin, cq_hz, nu0_hz, v, m):
    x = spin * (spin + 1)
    k = cq_hz / (2 * spin * (2 * spin - 1))
    vxx, vyy, vxy = v[0, 0], v[1, 1], v[0, 1]
    vxz, vyz = v[0, 2], v[1, 2]
    return -(k * k / (2 * nu0_hz)) * m * (
        (4 * x - 8 * m * m - 1) * (vxz ** 2 + vyz ** 2)
        - (2 * x - 2 * m * m - 1) * ((vxx - vyy) ** 2 + 4 * vxy ** 2) / 4
    )


def transition_offsets_hz(spin, m, nu0_hz, cq_hz, efg, shift_ppm, beta, alpha, tau, rotor_angle_rad):
    """Offset (Hz) of transition m -> m-1 for each orientation and rotor phase.

    ``efg`` (3x3, units of V_zz) and ``shift_ppm`` (3x3, isotropic part
    included) are crystallite-frame tensors.  Spin 1/2 (or C_Q = 0) keeps the
    shift term only.
    """
    rot = lab_rotations(beta, alpha, tau, rotor_angle_rad)
    if np.any(np.asarray(shift_ppm) != 0.0):
        out = nu0_hz * 1e-6 * lab_tensors(shift_ppm, beta, alpha, tau, rotor_angle_rad, rot)[2, 2]
    else:
        out = np.zeros(rot.shape[2:])
    if spin > 0.5 and cq_hz != 0.0:
        v = lab_tensors(efg, beta, alpha, tau, rotor_angle_rad, rot)
        out = out + _e1(spin, cq_hz, v[2, 2], m) - _e1(spin, cq_hz, v[2, 2], m - 1)
        out = out + _e2(spin, cq_hz, nu0_hz, v, m) - _e2(spin, cq_hz, nu0_hz, v, m - 1)
    return out


def fid(spin, ms, nu0_hz, cq_hz, efg, shift_ppm, rate_hz, rotor_angle_rad, points, samples_per_period, *,
        n_beta, n_alpha, n_gamma, substeps=8, region="sphere", chunk=256):
    """Powder- and gamma-averaged FID sampled at ``t_k = k / (samples_per_period * rate_hz)``.

    Transitions are weighted by the small-tip intensities I(I+1) - m(m-1)
    (common practice), normalised to a total of 1.

    Returns
    -------
    t : ndarray (points,)  times (s)
    s : ndarray (points,)  complex signal, s(0) = 1
    closure : float        largest |xi| left after one rotor period (rad) - a
                           check of the phase integration
    """
    n_fine = samples_per_period * substeps
    if n_fine % n_gamma:
        raise ValueError("n_gamma must divide samples_per_period * substeps")
    period = 1.0 / rate_hz
    tau = 2 * np.pi * np.arange(n_fine + 1) / n_fine
    beta, alpha, w = powder_grid(n_beta, n_alpha, region)
    ms = [float(m) for m in ms]
    tw = np.array([spin * (spin + 1) - m * (m - 1) for m in ms])
    tw = tw / tw.sum()
    k = np.arange(points)
    t = k * period / samples_per_period
    n_periods = -(-points // samples_per_period)
    r_idx = (k % samples_per_period) * substeps  # fine-grid index of t_k within its period
    g0 = np.arange(n_gamma) * (n_fine // n_gamma)  # fine-grid index of each gamma
    sig = np.zeros(points, dtype=complex)
    closure = 0.0
    for lo in range(0, beta.size, chunk):
        sl = slice(lo, lo + chunk)
        for m, wt in zip(ms, tw):
            nu = transition_offsets_hz(spin, m, nu0_hz, cq_hz, efg, shift_ppm, beta[sl], alpha[sl], tau,
                                       rotor_angle_rad)  # (n_o, n_fine + 1)
            nubar = nu[:, :-1].mean(axis=1)  # periodic trapezoid = exact period average here
            xi = 2 * np.pi * cumulative_simpson(nu - nubar[:, None], dx=period / n_fine, axis=1, initial=0.0)
            closure = max(closure, float(np.abs(xi[:, -1]).max()))
            xi = xi[:, :-1]
            # exp(i [xi(gamma + w t_k) - xi(gamma)]) averaged over gamma, for t_k within one period
            idx = (g0[:, None] + r_idx[None, :samples_per_period]) % n_fine  # (n_gamma, M)
            g = np.exp(1j * (xi[:, idx] - xi[:, g0][:, :, None])).mean(axis=1)  # (n_o, M)
            # exp(2 pi i nubar t_k) with t_k = (q M + r) dt factorises into a (period q) x (sample r) product
            q = np.arange(n_periods)
            per = np.exp(2j * np.pi * nubar[:, None] * (q[None, :] * period))  # (n_o, n_periods)
            within = np.exp(2j * np.pi * nubar[:, None] * t[None, :samples_per_period]) * g  # (n_o, M)
            sig += wt * ((w[sl][:, None] * per).T @ within).ravel()[:points]
    return t, sig, closure


def spectrum(axis_hz, spin, ms, nu0_hz, cq_hz, efg, shift_ppm, rate_hz, rotor_angle_rad, lorentz_hz,
             samples_per_period, *, n_beta, n_alpha, n_gamma, substeps=8, region="sphere"):
    """Absorption spectrum (unit area over Hz) at the points ``axis_hz``.

    ``axis_hz`` must be uniform with ``len(axis_hz) * dx == samples_per_period * rate_hz``
    (so the FFT bins fall on the axis and the samples on the rotor period).
    """
    axis_hz = np.asarray(axis_hz, dtype=float)
    n = axis_hz.size
    dx = (axis_hz[-1] - axis_hz[0]) / (n - 1)
    if not np.allclose(np.diff(axis_hz), dx, rtol=1e-9, atol=0):
        raise ValueError("axis_hz must be uniform")
    if abs(n * dx - samples_per_period * rate_hz) > 1e-9 * n * dx:
        raise ValueError(
            f"points * dx = {n * dx} Hz must equal samples_per_period * rate_hz = {samples_per_period * rate_hz} Hz")
    t, s, closure = fid(spin, ms, nu0_hz, cq_hz, efg, shift_ppm, rate_hz, rotor_angle_rad, n, samples_per_period,
                        n_beta=n_beta, n_alpha=n_alpha, n_gamma=n_gamma, substeps=substeps, region=region)
    if closure > 1e-4:
        raise RuntimeError(f"phase integration did not close over a period (|xi(T)| = {closure:.3g} rad)")
    s = s * np.exp(-math.pi * lorentz_hz * t) * np.exp(-2j * np.pi * axis_hz[0] * t)
    s[0] *= 0.5
    y = np.real(np.fft.fft(s))
    return y / (y.sum() * dx)
