"""Symmetric multiple-quantum transitions m <-> -m (needed for MQ experiments later)."""

from __future__ import annotations

import numpy as np
import pytest

from powderspin.engine.frequencies import SiteFrame, multiple_quantum_offsets, perturbative_offsets
from powderspin.physics.tensors import efg_principal
from tests.reference.exact_numpy import hamiltonian, spin_matrices


def _frame(spin, ratio, eta=0.35, nu0=1e8, delta=None):
    k = ratio * nu0 / (2 * spin * (2 * spin - 1))
    d = np.zeros((3, 3)) if delta is None else delta
    return SiteFrame(spin, nu0, k, efg_principal(eta), d, "hemisphere")


def _numpy_mq(spin, frame, dirs, m):
    """Exact E(m) - E(-m) - 2 m nu0 from plain numpy eigh (tests/reference/exact_numpy.py)."""
    _, _, iz, _ = spin_matrices(spin)
    cq = frame.quad_constant_hz * 2 * spin * (2 * spin - 1)
    eta = float(frame.efg_principal_values[0] - frame.efg_principal_values[1])
    out = []
    for b in dirs:
        h = hamiltonian(spin, frame.nu0_hz, cq, eta, frame.shift_tensor_ppm, b)
        e, u = np.linalg.eigh(h)
        mz = np.einsum("ij,i->j", np.abs(u) ** 2, np.real(np.diag(iz)))
        order = np.argsort(-mz)
        hi = order[int(round(spin - m))]
        lo = order[int(round(spin + m))]
        out.append(e[hi] - e[lo] - 2 * m * frame.nu0_hz)
    return np.array(out)


@pytest.mark.parametrize("spin,m", [(1.5, 1.5), (2.5, 1.5), (2.5, 2.5), (3.5, 1.5), (4.5, 2.5)])
def test_exact_mq_matches_numpy_twin(spin, m):
    rng = np.random.default_rng(7)
    dirs = rng.normal(size=(20, 3))
    dirs /= np.linalg.norm(dirs, axis=1)[:, None]
    delta = np.diag([10.0, -30.0, 20.0]) + 5.0
    fr = _frame(spin, 0.05, delta=delta)
    got = multiple_quantum_offsets(fr, dirs, m, method="exact")[:, 0, 0]
    ref = _numpy_mq(spin, fr, dirs, m)
    assert np.allclose(got, ref, atol=5e-15 * fr.nu0_hz * (2 * spin + 1))


@pytest.mark.parametrize("spin,m", [(1.5, 1.5), (2.5, 1.5), (2.5, 2.5), (3.5, 3.5), (4.5, 1.5)])
def test_mq_second_order_is_twice_e2_and_converges(spin, m):
    """First order cancels for m <-> -m (DEVELOPERS.md, 'Physics formulas'); the perturbative error shrinks at
    least as fast as (C_Q/nu0)^3 (exact diagonalisation as the reference)."""
    rng = np.random.default_rng(3)
    dirs = rng.normal(size=(60, 3))
    dirs /= np.linalg.norm(dirs, axis=1)[:, None]
    errs = []
    ratios = np.array([0.005, 0.01, 0.02, 0.04])
    for r in ratios:
        fr = _frame(spin, r)
        a = multiple_quantum_offsets(fr, dirs, m)[:, 0, 0]
        b = multiple_quantum_offsets(fr, dirs, m, method="exact")[:, 0, 0]
        errs.append(np.abs(a - b).max() / fr.nu0_hz)
    slope = np.polyfit(np.log(ratios), np.log(errs), 1)[0]
    assert slope > 2.7
    # first-order part cancels: no term linear in C_Q
    fr1 = _frame(spin, 0.01)
    fr2 = _frame(spin, 0.02)
    a1 = multiple_quantum_offsets(fr1, dirs, m)[:, 0, 0]
    a2 = multiple_quantum_offsets(fr2, dirs, m)[:, 0, 0]
    assert np.allclose(a2, 4 * a1, rtol=1e-12, atol=1e-9)


def test_mq_shift_scales_with_coherence_order():
    """The shift contributes 2 m nu0 1e-6 d_zz to an m <-> -m coherence (coherence order 2m)."""
    dirs = np.array([[0.0, 0.0, 1.0], [1.0, 0.0, 0.0]])
    fr = SiteFrame(1.5, 1e8, 0.0, efg_principal(0.0), np.diag([1.0, 2.0, 3.0]), "octant")
    got = multiple_quantum_offsets(fr, dirs, 1.5)[:, 0, 0]
    sq = perturbative_offsets(fr, dirs, [0.5])[:, 0, 0]
    assert np.allclose(got, 3 * sq)


def test_mq_rejects_bad_m():
    fr = _frame(1.5, 0.01)
    for bad in (2.5, 1.0, -1.5, 0.0):
        with pytest.raises(ValueError, match="m = "):
            multiple_quantum_offsets(fr, [[0, 0, 1]], bad)
