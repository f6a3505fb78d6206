"""Slow, obvious exact diagonalisation of the Zeeman + quadrupolar + secular shift Hamiltonian.

Twin of ``powderspin.engine.frequencies.exact_pair_offsets``; written independently with
plain numpy and without importing anything from powderspin.

For each B0 direction ``b`` (a unit vector in the crystallite frame):

1. build an explicit rotation matrix ``R`` whose third column is ``b``
   (``R = Rz(phi) Ry(theta)`` from the polar angles of ``b``); its columns are
   the laboratory axes written in the crystallite frame, so a crystallite-frame
   tensor ``T`` reads ``R^T T R`` in the laboratory frame (lab z = B0);
2. build the spin matrices from the textbook formulas
   ``<m|Iz|m> = m`` and ``<m+1|I+|m> = sqrt(I(I+1) - m(m+1))``
   (e.g. J. J. Sakurai, *Modern Quantum Mechanics*, sec. 3.5), basis order
   m = I, I-1, ..., -I;
3. ``H = nu0 (1 + 1e-6 d_zz) Iz + K sum_ab V_ab I_a I_b`` with
   ``K = C_Q / (2I(2I-1))`` and ``V = diag(-(1-eta)/2, -(1+eta)/2, 1)`` in the
   EFG principal (crystallite) frame (DEVELOPERS.md, 'Physics formulas');
4. ``numpy.linalg.eigh``; levels labelled by their expectation value <Iz>
   (largest first = m = I); offset of m -> m-1 is ``E(m) - E(m-1) - nu0`` and
   the intensity is ``|<m|I+|m-1>|^2`` between the eigenvectors.
"""

from __future__ import annotations

import numpy as np

__all__ = ["spin_matrices", "efg_principal_values", "lab_rotation", "to_lab", "hamiltonian", "exact_transitions"]


def spin_matrices(spin: float):
    """(Ix, Iy, Iz, I+) as complex matrices in the basis m = I ... -I (textbook formulas)."""
    dim = int(round(2 * spin)) + 1
    m = np.array([spin - i for i in range(dim)])
    iz = np.diag(m).astype(complex)
    iplus = np.zeros((dim, dim), dtype=complex)
    for col in range(dim):
        mm = m[col]
        if mm < spin:  # I+ |m> = sqrt(I(I+1) - m(m+1)) |m+1>; row of m+1 is col - 1
            iplus[col - 1, col] = np.sqrt(spin * (spin + 1) - mm * (mm + 1))
    iminus = iplus.conj().T
    ix = (iplus + iminus) / 2
    iy = (iplus - iminus) / 2j
    return ix, iy, iz, iplus


def efg_principal_values(eta_q: float) -> np.ndarray:
    """EFG principal values (V_xx, V_yy, V_zz) in units of V_zz (DEVELOPERS.md, 'Physics formulas')."""
    return np.array([-(1 - eta_q) / 2, -(1 + eta_q) / 2, 1.0])


def _rot_z(a):
    c, s = np.cos(a), np.sin(a)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def _rot_y(a):
    c, s = np.cos(a), np.sin(a)
    return np.array([[c, 0.0, s], [0.0, 1.0, 0.0], [-s, 0.0, c]])


def lab_rotation(b) -> np.ndarray:
    """Rotation matrix whose columns are lab x, y, z (z = b) in the crystallite frame."""
    b = np.asarray(b, dtype=float)
    b = b / np.linalg.norm(b)
    theta = np.arccos(np.clip(b[2], -1.0, 1.0))
    phi = np.arctan2(b[1], b[0])
    r = _rot_z(phi) @ _rot_y(theta)
    assert np.allclose(r[:, 2], b, atol=1e-12)
    return r


def to_lab(tensor, b) -> np.ndarray:
    """A crystallite-frame Cartesian tensor written in the lab frame (lab z along b)."""
    r = lab_rotation(b)
    return r.T @ np.asarray(tensor, dtype=float) @ r


def hamiltonian(spin, nu0_hz, cq_hz, eta_q, shift_tensor_ppm, b) -> np.ndarray:
    """Full Hamiltonian (Hz) for B0 along the crystallite-frame direction b."""
    ix, iy, iz, _ = spin_matrices(spin)
    ops = (ix, iy, iz)
    k = cq_hz / (2 * spin * (2 * spin - 1)) if spin > 0.5 else 0.0
    v_lab = to_lab(np.diag(efg_principal_values(eta_q)), b)
    d_lab = to_lab(shift_tensor_ppm, b)
    h = nu0_hz * (1 + 1e-6 * d_lab[2, 2]) * iz
    for a in range(3):
        for c in range(3):
            h = h + k * v_lab[a, c] * (ops[a] @ ops[c])
    return h


def exact_transitions(spin, nu0_hz, cq_hz, eta_q, shift_tensor_ppm, directions, ms):
    """Exact offsets (Hz) and intensities of transitions m -> m-1.

    Parameters
    ----------
    spin : float
    nu0_hz : float
        Larmor frequency (Hz).
    cq_hz, eta_q : float
        Quadrupole coupling constant (Hz) and asymmetry.
    shift_tensor_ppm : (3, 3) array
        Shift tensor (ppm) in the crystallite (EFG principal) frame.
    directions : (N, 3) array
        B0 directions in the crystallite frame.
    ms : sequence of float
        Upper level m of each transition.

    Returns
    -------
    offsets, intensities : (N, len(ms)) arrays
    """
    directions = np.atleast_2d(np.asarray(directions, dtype=float))
    ms = list(ms)
    _, _, iz, iplus = spin_matrices(spin)
    off = np.empty((len(directions), len(ms)))
    inten = np.empty_like(off)
    for i, b in enumerate(directions):
        h = hamiltonian(spin, nu0_hz, cq_hz, eta_q, shift_tensor_ppm, b)
        energies, vecs = np.linalg.eigh(h)
        mz = np.array([np.real(np.vdot(vecs[:, j], iz @ vecs[:, j])) for j in range(len(energies))])
        order = np.argsort(-mz)  # order[k] = eigen-index of level m = I - k
        for t, m in enumerate(ms):
            k_hi = int(round(spin - m))
            hi, lo = order[k_hi], order[k_hi + 1]
            off[i, t] = energies[hi] - energies[lo] - nu0_hz
            amp = np.vdot(vecs[:, hi], iplus @ vecs[:, lo])
            inten[i, t] = abs(amp) ** 2
    return off, inten
