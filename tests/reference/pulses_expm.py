"""Slow, obvious finite-pulse propagation with scipy.linalg.expm.

Twin of ``powderspin.engine._kernels._pulse_propagators``, ``_density_after_pulses`` and
``_excitation_amplitudes``.  The rotating-frame Hamiltonian is written literally with explicit spin
matrices (:func:`tests.reference.exact_numpy.spin_matrices`), and the level energies come from the
literal high-field formulas of :mod:`tests.reference.perturbative_numpy` (the shift ``nu0 1e-6 d_zz(lab)``
times Iz, plus E1(m) and E2(m) on the diagonal):

    H = sum_m [E1(m) + E2(m)] |m><m| + (nu0 1e-6 d_zz - carrier) Iz + nu1 (cos(phi) Ix + sin(phi) Iy)
    U = expm(-2 pi i H t),  rho = U Iz U^H,  signal of m -> m-1 = <m|I+|m-1> rho[m-1, m]

The echo keeps, for each transition, only the element |m><m-1| of rho after the first pulse and takes the
element |m-1><m| of U2 (|m><m-1|) U2^H, written with matrix products rather than index formulas.
"""

from __future__ import annotations

import numpy as np
from scipy.linalg import expm

from .exact_numpy import spin_matrices, to_lab
from .perturbative_numpy import lab_efg_spherical, level_energy_first, level_energy_second

__all__ = ["hamiltonian_levels", "propagator", "density_after", "transition_signals", "mq_pathway_signals"]


def hamiltonian_levels(spin, nu0_hz, cq_hz, eta_q, shift_tensor_ppm, b, carrier_hz=0.0, second_order=True):
    """Diagonal of the rotating-frame Hamiltonian (Hz) for B0 along ``b``: m = I, I-1, ..., -I."""
    ms = [spin - i for i in range(int(round(2 * spin)) + 1)]
    d_lab = to_lab(np.asarray(shift_tensor_ppm, dtype=float), np.asarray(b, dtype=float))
    cs = nu0_hz * 1e-6 * d_lab[2, 2] - carrier_hz
    out = []
    v, comp = lab_efg_spherical(eta_q, np.asarray(b, dtype=float))
    for m in ms:
        e = cs * m
        if spin > 0.5 and cq_hz != 0.0:
            e += level_energy_first(spin, cq_hz, m, v[2, 2])
            if second_order:
                e += level_energy_second(spin, cq_hz, nu0_hz, m, comp)
        out.append(e)
    return np.array(out)


def propagator(levels, nu1_hz, length_s, phase_deg):
    """expm(-2 pi i H t) with H = diag(levels) + nu1 (cos Ix + sin Iy)."""
    spin = (len(levels) - 1) / 2
    ix, iy, _, _ = spin_matrices(spin)
    ph = np.radians(phase_deg)
    h = np.diag(np.asarray(levels, dtype=complex)) + nu1_hz * (np.cos(ph) * ix + np.sin(ph) * iy)
    return expm(-2j * np.pi * h * length_s)


def density_after(levels, pulses):
    """rho after back-to-back pulses [(nu1_hz, length_s, phase_deg), ...] from Iz."""
    spin = (len(levels) - 1) / 2
    _, _, iz, _ = spin_matrices(spin)
    rho = iz.astype(complex)
    for nu1, t, ph in pulses:
        u = propagator(levels, nu1, t, ph)
        rho = u @ rho @ u.conj().T
    return rho


def transition_signals(levels, kind, nu1_hz, lengths_s, phases_deg, m_upper):
    """Complex signal of each transition after a single pulse or the refocused echo pathway."""
    spin = (len(levels) - 1) / 2
    _, _, _, iplus = spin_matrices(spin)
    d = len(levels)
    rho1 = density_after(levels, [(nu1_hz, lengths_s[0], phases_deg[0])])
    out = []
    for m in m_upper:
        upper = int(round(spin - m))  # index of |m>
        lower = upper + 1  # index of |m-1>
        c = iplus[upper, lower]
        if kind == "single":
            out.append(c * rho1[lower, upper])
            continue
        keep = np.zeros((d, d), dtype=complex)
        keep[upper, lower] = rho1[upper, lower]  # the +1 coherence |m><m-1|
        u2 = propagator(levels, nu1_hz, lengths_s[1], phases_deg[1])
        rho2 = u2 @ keep @ u2.conj().T
        out.append(c * rho2[lower, upper])  # the -1 coherence |m-1><m| of the same transition
    return np.array(out)


def _keep_order(rho, spin, order):
    """rho with only the elements of coherence order ``order`` (m_a - m_b) kept (ideal phase cycling)."""
    ms = [spin - i for i in range(len(rho))]
    out = np.zeros_like(rho)
    for a, ma in enumerate(ms):
        for b, mb in enumerate(ms):
            if abs((ma - mb) - order) < 1e-9:
                out[a, b] = rho[a, b]
    return out


def mq_pathway_signals(levels, kind, nu1_hz, excite_s, convert_s, order, selective=None):
    """CT signal c <-1/2|rho|1/2> of the pathways with t1 order +order and -order (MQMAS).

    The symmetric element |m><-m| (or |-m><m|), m = order / 2, is kept after the excitation pulse (a projector
    written out), everything of order -1 (two-pulse) or 0 (z-filter) after the conversion pulse, and for the
    z-filter order -1 after the selective pulse ``selective = (nu1_hz, length_s)``; all pulses along x.
    """
    spin = (len(levels) - 1) / 2
    _, _, _, iplus = spin_matrices(spin)
    d = len(levels)
    rho1 = density_after(levels, [(nu1_hz, excite_s, 0.0)])
    m = order / 2
    hi, lo = int(round(spin - m)), int(round(spin + m))
    ct_lo, ct_hi = int(round(spin + 0.5)), int(round(spin - 0.5))
    u2 = propagator(levels, nu1_hz, convert_s, 0.0)
    out = []
    for a, b in ((hi, lo), (lo, hi)):
        keep = np.zeros((d, d), dtype=complex)
        keep[a, b] = rho1[a, b]
        rho2 = u2 @ keep @ u2.conj().T
        if kind == "two-pulse":
            rho = _keep_order(rho2, spin, -1)
        else:
            u3 = propagator(levels, selective[0], selective[1], 0.0)
            rho = _keep_order(u3 @ _keep_order(rho2, spin, 0) @ u3.conj().T, spin, -1)
        out.append(iplus[ct_hi, ct_lo] * rho[ct_lo, ct_hi])
    return np.array(out)
