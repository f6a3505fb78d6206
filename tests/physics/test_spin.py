"""Tests for powderspin.physics.spin (spin operators for I = 1/2 ... 9/2).

Outside references:
* sympy.physics.quantum.spin: Jx, Jy, Jz, Jplus, Jminus, J2 represented in the
  Jz basis with sympy.physics.quantum.represent (hbar set to 1).  The order of
  sympy's basis is read from the diagonal of its Jz matrix and mapped onto
  powderspin's order (m = I, I-1, ..., -I) explicitly, so the test does not
  depend on sympy's ordering.
* sympy.physics.matrices.msigma (Pauli matrices; I = sigma/2 for spin 1/2).
* Spin-1/2 operator actions from DEVELOPERS.md, 'Physics formulas' (a fact of the trade,
  common practice): Iz a = a/2, Iz b = -b/2, Ix a = b/2, Ix b = a/2,
  Iy a = (i/2) b, Iy b = -(i/2) a, <Iz> = (|c_a|^2 - |c_b|^2)/2.
* Angular-momentum algebra (common practice): [Ix, Iy] = i Iz and cyclic,
  I^2 = I(I+1), I+- = Ix +- i Iy, <m+1|I+|m> = sqrt(I(I+1) - m(m+1)).
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest
import sympy as sp
from sympy.physics.matrices import msigma
from sympy.physics.quantum.constants import hbar
from sympy.physics.quantum.represent import represent
from sympy.physics.quantum.spin import J2, Jminus, Jplus, Jx, Jy, Jz

from powderspin.physics.spin import check_spin, magnetic_numbers, spin_operators

SPINS = [k / 2 for k in range(1, 10)]  # 1/2, 1, 3/2, ..., 9/2


def _sym(op, spin):
    j = sp.Rational(int(round(2 * spin)), 2)
    mat = represent(op, basis=Jz, j=j).subs(hbar, 1)
    return np.array(sp.N(mat, 20).tolist(), dtype=complex)


def _sym_to_ours(spin):
    """Permutation p with ours[i, j] = sympy[p[i], p[j]], from sympy's Jz diagonal."""
    sym_m = np.real(np.diag(_sym(Jz, spin)))
    ours_m = magnetic_numbers(spin)
    p = np.array([int(np.argmin(np.abs(sym_m - m))) for m in ours_m])
    np.testing.assert_allclose(sym_m[p], ours_m, atol=1e-14)
    assert sorted(p.tolist()) == list(range(len(ours_m)))
    return p


@pytest.mark.parametrize("spin", SPINS)
def test_against_sympy_quantum_spin(spin):
    # Source: sympy.physics.quantum.spin operators represented in the Jz basis.
    ops = spin_operators(spin)
    p = _sym_to_ours(spin)
    for ours, sym_op in ((ops.x, Jx), (ops.y, Jy), (ops.z, Jz), (ops.plus, Jplus), (ops.minus, Jminus)):
        ref = _sym(sym_op, spin)[np.ix_(p, p)]
        np.testing.assert_allclose(ours, ref, atol=1e-13)
    i2 = ops.x @ ops.x + ops.y @ ops.y + ops.z @ ops.z
    np.testing.assert_allclose(i2, _sym(J2, spin)[np.ix_(p, p)], atol=1e-12)


def test_spin_half_against_pauli_matrices():
    # Source: sympy.physics.matrices.msigma; I_k = sigma_k / 2 in the basis (a, b).
    ops = spin_operators(0.5)
    for ours, k in ((ops.x, 1), (ops.y, 2), (ops.z, 3)):
        np.testing.assert_allclose(ours, np.array(msigma(k).tolist(), dtype=complex) / 2, atol=1e-15)


def test_spin_half_actions():
    # Source: DEVELOPERS.md, 'Physics formulas' (fact of the trade, common practice).
    ops = spin_operators(0.5)
    a = np.array([1.0, 0.0], dtype=complex)  # m = +1/2 is index 0
    b = np.array([0.0, 1.0], dtype=complex)
    np.testing.assert_allclose(ops.z @ a, a / 2, atol=1e-15)
    np.testing.assert_allclose(ops.z @ b, -b / 2, atol=1e-15)
    np.testing.assert_allclose(ops.x @ a, b / 2, atol=1e-15)
    np.testing.assert_allclose(ops.x @ b, a / 2, atol=1e-15)
    np.testing.assert_allclose(ops.y @ a, 0.5j * b, atol=1e-15)
    np.testing.assert_allclose(ops.y @ b, -0.5j * a, atol=1e-15)
    np.testing.assert_allclose(ops.plus @ b, a, atol=1e-15)
    np.testing.assert_allclose(ops.plus @ a, 0.0, atol=1e-15)
    np.testing.assert_allclose(ops.minus @ a, b, atol=1e-15)
    rng = np.random.default_rng(5)
    for _ in range(20):
        psi = rng.normal(size=2) + 1j * rng.normal(size=2)
        psi /= np.linalg.norm(psi)
        ca, cb = psi
        expect = np.vdot(psi, ops.z @ psi)
        assert abs(expect.imag) < 1e-15
        assert abs(expect.real - (abs(ca) ** 2 - abs(cb) ** 2) / 2) < 1e-15


@pytest.mark.parametrize("spin", SPINS)
def test_commutators_casimir_ladder_hermiticity(spin):
    # Source: angular-momentum algebra (DEVELOPERS.md, 'Physics formulas'; common practice).
    ops = spin_operators(spin)
    x, y, z = ops.x, ops.y, ops.z
    n = int(round(2 * spin)) + 1
    assert ops.dimension == n and x.shape == y.shape == z.shape == (n, n)

    def comm(a, b):
        return a @ b - b @ a

    np.testing.assert_allclose(comm(x, y), 1j * z, atol=1e-12)
    np.testing.assert_allclose(comm(y, z), 1j * x, atol=1e-12)
    np.testing.assert_allclose(comm(z, x), 1j * y, atol=1e-12)
    np.testing.assert_allclose(x @ x + y @ y + z @ z, spin * (spin + 1) * np.eye(n), atol=1e-12)
    np.testing.assert_allclose(ops.plus, x + 1j * y, atol=1e-14)
    np.testing.assert_allclose(ops.minus, x - 1j * y, atol=1e-14)
    np.testing.assert_allclose(ops.minus, ops.plus.conj().T, atol=0)
    for a in (x, y, z):
        np.testing.assert_allclose(a, a.conj().T, atol=0)
    # Iz diagonal with m = I ... -I; I+ raises m by one with the textbook element
    m = magnetic_numbers(spin)
    np.testing.assert_allclose(np.diag(z).real, m, atol=0)
    np.testing.assert_allclose(np.diag(z).imag, 0.0, atol=0)
    assert m[0] == spin and m[-1] == -spin and np.all(np.diff(m) == -1.0)
    for j in range(1, n):
        assert abs(ops.plus[j - 1, j] - np.sqrt(spin * (spin + 1) - m[j] * (m[j] + 1))) < 1e-14
    np.testing.assert_allclose(comm(z, ops.plus), ops.plus, atol=1e-12)  # [Iz, I+] = I+
    # eigenvalues of every component are m = -I ... I (numpy.linalg.eigvalsh)
    for a in (x, y, z):
        np.testing.assert_allclose(np.linalg.eigvalsh(a), m[::-1], atol=1e-12)


def test_operators_read_only_and_frozen():
    ops = spin_operators(1.5)
    with pytest.raises(ValueError):
        ops.x[0, 0] = 1.0
    with pytest.raises(AttributeError):
        ops.spin = 2.5  # type: ignore[misc]


def test_check_spin_normalises_valid_values():
    assert check_spin(0.5) == 0.5
    assert check_spin("4.5") == 4.5
    assert check_spin(Fraction(7, 2)) == 3.5
    assert check_spin(np.float64(1.0)) == 1.0
    np.testing.assert_array_equal(magnetic_numbers(1.5), [1.5, 0.5, -0.5, -1.5])


@pytest.mark.parametrize("bad", [0, 0.0, 0.3, -0.5, -1, 1.25, float("nan"), float("inf"), float("-inf"), 20.5, "abc",
                                 None])
def test_invalid_spin_raises_value_error(bad):
    # Project rule: a clear ValueError naming the field, the value and the range.
    # (inf used to raise OverflowError from round().)
    for f in (check_spin, magnetic_numbers, spin_operators):
        with pytest.raises(ValueError) as info:
            f(bad)
        msg = str(info.value)
        assert "spin" in msg and repr(bad) in msg and "1/2" in msg, msg
    with pytest.raises(ValueError, match="nuclear_spin"):
        check_spin(bad, name="nuclear_spin")
