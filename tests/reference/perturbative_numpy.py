"""Slow, obvious perturbative transition offsets (first-order shift, first- and second-order quadrupolar).

Twin of ``powderspin.engine._kernels._perturbative_offsets``.  The kernel evaluates
the second-order term through rotation invariants of the EFG; here the
laboratory-frame EFG is built explicitly (``R^T V R`` with the rotation of
:mod:`tests.reference.exact_numpy`), its rank-2 spherical components are
formed, and the level energies of DEVELOPERS.md, 'Physics formulas' are written literally:

    E1(m) = (C_Q / (4I(2I-1))) V_zz (3 m^2 - X)
    E2(m) = -(K^2 / (2 nu0)) m [ (4X - 8m^2 - 1) (V_xz^2 + V_yz^2)
                               - (2X - 2m^2 - 1) ((V_xx - V_yy)^2 + 4 V_xy^2) / 4 ]

with X = I(I+1), K = C_Q / (2I(2I-1)).  In spherical-tensor language
``V_xz^2 + V_yz^2 = |V_{2,+-1}|^2`` and ``((V_xx - V_yy)^2 + 4 V_xy^2)/4 =
|V_{2,+-2}|^2`` with ``V_{2,+-1} = -+(V_xz +- i V_yz)``,
``V_{2,+-2} = (V_xx - V_yy +- 2i V_xy)/2`` (M. Mehring, *Principles of High
Resolution NMR in Solids* (1983), app. B normalisation); the code below forms
these components and uses their squared moduli.

:func:`second_order_sum` gives an independent route to E2: the textbook
Rayleigh-Schroedinger sum ``sum_{m' != m} |<m'|H_Q|m>|^2 / (E_m - E_m')`` with
unperturbed energies ``E_m = nu0 m`` (e.g. A. Abragam, *The Principles of
Nuclear Magnetism* (1961), chapter on electric quadrupole effects (from memory)), evaluated with explicit matrices.
"""

from __future__ import annotations

import numpy as np

from .exact_numpy import efg_principal_values, spin_matrices, to_lab

__all__ = ["lab_efg_spherical", "level_energy_first", "level_energy_second", "second_order_sum",
           "perturbative_transitions"]


def lab_efg_spherical(eta_q, b):
    """Lab-frame EFG (units of V_zz) and its spherical components {0: V20, 1: V2+1, 2: V2+2, -1, -2}."""
    v = to_lab(np.diag(efg_principal_values(eta_q)), b)
    comp = {
        0: np.sqrt(1.5) * v[2, 2],
        1: -(v[0, 2] + 1j * v[1, 2]),
        -1: v[0, 2] - 1j * v[1, 2],
        2: (v[0, 0] - v[1, 1] + 2j * v[0, 1]) / 2,
        -2: (v[0, 0] - v[1, 1] - 2j * v[0, 1]) / 2,
    }
    return v, comp


def level_energy_first(spin, cq_hz, m, vzz):
    """E1(m) (Hz), DEVELOPERS.md, 'Physics formulas'."""
    x = spin * (spin + 1)
    return cq_hz / (4 * spin * (2 * spin - 1)) * vzz * (3 * m * m - x)


def level_energy_second(spin, cq_hz, nu0_hz, m, comp):
    """E2(m) (Hz), DEVELOPERS.md, 'Physics formulas', with |V_{2,1}|^2 and |V_{2,2}|^2 from the spherical components."""
    x = spin * (spin + 1)
    k = cq_hz / (2 * spin * (2 * spin - 1))
    v1sq = abs(comp[1]) ** 2  # = V_xz^2 + V_yz^2
    v2sq = abs(comp[2]) ** 2  # = ((V_xx - V_yy)^2 + 4 V_xy^2) / 4
    return -(k * k / (2 * nu0_hz)) * m * ((4 * x - 8 * m * m - 1) * v1sq - (2 * x - 2 * m * m - 1) * v2sq)


def second_order_sum(spin, cq_hz, nu0_hz, eta_q, b, m):
    """Rayleigh-Schroedinger second-order energy of level m (Hz) from explicit matrix elements."""
    ix, iy, iz, _ = spin_matrices(spin)
    ops = (ix, iy, iz)
    k = cq_hz / (2 * spin * (2 * spin - 1))
    v = to_lab(np.diag(efg_principal_values(eta_q)), b)
    hq = sum(k * v[a, c] * (ops[a] @ ops[c]) for a in range(3) for c in range(3))
    ms = [spin - i for i in range(int(round(2 * spin)) + 1)]
    col = ms.index(m)
    total = 0.0
    for row, mp in enumerate(ms):
        if row != col:
            total += abs(hq[row, col]) ** 2 / (nu0_hz * (m - mp))
    return total


def perturbative_transitions(spin, nu0_hz, cq_hz, eta_q, shift_tensor_ppm, directions, ms, second_order=True):
    """Perturbative offsets (Hz) of m -> m-1, shape (N, len(ms)).

    First-order shift ``nu0 1e-6 d_zz(lab)`` (isotropic part included) plus
    E1(m) - E1(m-1) plus (optionally) E2(m) - E2(m-1).
    """
    directions = np.atleast_2d(np.asarray(directions, dtype=float))
    out = np.empty((len(directions), len(ms)))
    for i, b in enumerate(directions):
        d_lab = to_lab(shift_tensor_ppm, b)
        cs = nu0_hz * 1e-6 * d_lab[2, 2]
        v, comp = lab_efg_spherical(eta_q, b)
        for t, m in enumerate(ms):
            val = cs
            if spin > 0.5 and cq_hz != 0.0:
                val += level_energy_first(spin, cq_hz, m, v[2, 2]) - level_energy_first(spin, cq_hz, m - 1, v[2, 2])
                if second_order:
                    val += (level_energy_second(spin, cq_hz, nu0_hz, m, comp)
                            - level_energy_second(spin, cq_hz, nu0_hz, m - 1, comp))
            out[i, t] = val
    return out
