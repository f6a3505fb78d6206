"""Tests for powderspin.physics.wigner (Wigner d and D matrices) and its link to
powderspin.physics.tensors.spherical_components.

Outside references:
* sympy.physics.quantum.spin.Rotation.D / Rotation.d.  Their docstrings
  define ``D(j, m, m', a, b, g) = <j m| R(a, b, g) |j m'> = exp(-i m a)
  d(j, m, m', b) exp(-i m' g)`` and give ``Rotation.d(1, 1, 0, pi/2) =
  -sqrt(2)/2``: the same convention as powderspin (``d^1_{10} = -sin(b)/sqrt 2``),
  so ``ours[m'+l, m+l] == Rotation.D(l, m', m, a, b, g)`` with no change.
* sympy.physics.wigner.wigner_d_small / wigner_d.  Their docstrings define
  ``d = exp(+i b J_y)`` and ``D = exp(+i a J_z) exp(+i b J_y) exp(+i g J_z)``,
  indexed ``[J - m', J - m]``, i.e. the opposite sign of every angle and the
  reverse row/column order.  Hence
  ``ours_d(b)[m'+l, m+l] == wigner_d_small(l, -b)[l-m', l-m]`` and
  ``ours_D(a, b, g)[m'+l, m+l] == wigner_d(l, -a, -b, -g)[l-m', l-m]``.
* scipy.special.eval_legendre (d^l_00 = P_l(cos b)), scipy.special.sph_harm_y
  (spherical harmonics, Condon-Shortley phase), scipy.linalg.expm (exact
  exponentials of the spin operators), scipy.spatial.transform.Rotation.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import sympy as sp
from scipy.linalg import expm
from scipy.spatial.transform import Rotation as SciRot
from scipy.special import eval_legendre, sph_harm_y
from sympy.physics.quantum.spin import Rotation as SymRotation
from sympy.physics.wigner import wigner_d as sym_wigner_d
from sympy.physics.wigner import wigner_d_small as sym_wigner_d_small

from powderspin.physics.spin import spin_operators
from powderspin.physics.tensors import cartesian_from_spherical, rotation_matrix, spherical_components
from powderspin.physics.wigner import wigner_D, wigner_small_d

ANGLES = [(0.3, 0.7, 1.1), (-2.0, 2.6, 0.45)]


def _sym_complex(expr) -> complex:
    return complex(sp.N(expr, 30))


# --------------------------------------------------------------------------
# Against sympy.physics.quantum.spin.Rotation (same convention, no mapping)
# --------------------------------------------------------------------------

def test_small_d_rank2_against_sympy_quantum_rotation_d():
    # Source: sympy.physics.quantum.spin.Rotation.d, same convention (see module doc).
    beta = 0.7
    ours = wigner_small_d(2, beta)
    ref = np.array([[_sym_complex(SymRotation.d(2, mp, m, sp.Float(beta)).doit())
                     for m in range(-2, 3)] for mp in range(-2, 3)])
    np.testing.assert_allclose(ref.imag, 0.0, atol=1e-14)
    np.testing.assert_allclose(ours, ref.real, atol=1e-14)


def test_D_rank2_against_sympy_quantum_rotation_D():
    # Source: sympy.physics.quantum.spin.Rotation.D, same convention.
    a, b, g = ANGLES[0]
    ours = wigner_D(2, a, b, g)
    ref = np.array([[_sym_complex(SymRotation.D(2, mp, m, sp.Float(a), sp.Float(b), sp.Float(g)).doit())
                     for m in range(-2, 3)] for mp in range(-2, 3)])
    np.testing.assert_allclose(ours, ref, atol=1e-14)


@pytest.mark.parametrize("mp, m", [(4, 4), (4, 0), (0, 0), (3, -2), (-1, 2), (-4, 1), (2, -4), (-3, -3)])
def test_D_rank4_elements_against_sympy_quantum_rotation_D(mp, m):
    # Source: sympy.physics.quantum.spin.Rotation.D, same convention.  A
    # selection of elements (sympy takes ~0.2 s per rank-4 element); the full
    # rank-4 matrices are compared with sympy.physics.wigner below.
    a, b, g = ANGLES[1]
    ours = wigner_D(4, a, b, g)[mp + 4, m + 4]
    ref = _sym_complex(SymRotation.D(4, mp, m, sp.Float(a), sp.Float(b), sp.Float(g)).doit())
    assert abs(ours - ref) < 1e-13


# --------------------------------------------------------------------------
# Against sympy.physics.wigner (opposite angle signs, reversed index order)
# --------------------------------------------------------------------------

def _from_sym_matrix(mat, l):
    """Map sympy.physics.wigner's [l - m', l - m] indexing to ours [m' + l, m + l]."""
    arr = np.array(sp.N(mat, 30).tolist(), dtype=complex)
    out = np.empty_like(arr)
    for mp in range(-l, l + 1):
        for m in range(-l, l + 1):
            out[mp + l, m + l] = arr[l - mp, l - m]
    return out


@pytest.mark.parametrize("rank", [2, 4])
@pytest.mark.parametrize("beta", [0.7, 2.6, -1.3])
def test_small_d_against_sympy_wigner_d_small(rank, beta):
    # Source: sympy.physics.wigner.wigner_d_small = exp(+i beta J_y): ours(beta) = sympy(-beta).
    ref = _from_sym_matrix(sym_wigner_d_small(rank, sp.Float(-beta)), rank)
    np.testing.assert_allclose(ref.imag, 0.0, atol=1e-14)
    np.testing.assert_allclose(wigner_small_d(rank, beta), ref.real, atol=1e-13)


@pytest.mark.parametrize("rank", [2, 4])
@pytest.mark.parametrize("angles", ANGLES)
def test_D_against_sympy_wigner_d(rank, angles):
    # Source: sympy.physics.wigner.wigner_d = exp(i a Jz) exp(i b Jy) exp(i g Jz):
    # ours(a, b, g) = sympy(-a, -b, -g) with reversed indices.
    a, b, g = angles
    ref = _from_sym_matrix(sym_wigner_d(rank, sp.Float(-a), sp.Float(-b), sp.Float(-g)), rank)
    np.testing.assert_allclose(wigner_D(rank, a, b, g), ref, atol=1e-13)


# --------------------------------------------------------------------------
# Structural properties
# --------------------------------------------------------------------------

@pytest.mark.parametrize("rank", range(0, 7))
def test_unitarity_and_real_orthogonal_small_d(rank):
    # Source: D is a unitary representation; d(beta) is real orthogonal and
    # d(-beta) = d(beta)^T = d(beta)^-1 (Rose 1957, ch. IV; from memory).
    rng = np.random.default_rng(7 + rank)
    n = 2 * rank + 1
    for a, b, g in rng.uniform(-np.pi, np.pi, size=(10, 3)):
        D = wigner_D(rank, a, b, g)
        np.testing.assert_allclose(D @ D.conj().T, np.eye(n), atol=1e-12)
        np.testing.assert_allclose(D.conj().T @ D, np.eye(n), atol=1e-12)
        d = wigner_small_d(rank, b)
        assert d.dtype.kind == "f"
        np.testing.assert_allclose(d @ d.T, np.eye(n), atol=1e-12)
        np.testing.assert_allclose(wigner_small_d(rank, -b), d.T, atol=1e-12)
        # d(b1) d(b2) = d(b1 + b2): one-parameter group of rotations about y
        np.testing.assert_allclose(wigner_small_d(rank, a) @ d, wigner_small_d(rank, a + b), atol=1e-12)


@pytest.mark.parametrize("rank", range(0, 9))
def test_d00_is_legendre(rank):
    # Source: d^l_00(beta) = P_l(cos beta); reference scipy.special.eval_legendre.
    for beta in np.linspace(0.0, np.pi, 13):
        assert math.isclose(wigner_small_d(rank, beta)[rank, rank], eval_legendre(rank, math.cos(beta)),
                            rel_tol=0, abs_tol=1e-13)


@pytest.mark.parametrize("rank", [1, 2, 3, 4])
def test_D_m0_against_spherical_harmonics(rank):
    # Source: conj(D^l_{m0}(alpha, beta, 0)) = sqrt(4 pi/(2l+1)) Y_lm(beta, alpha)
    # (Sakurai, Modern Quantum Mechanics, eq. 3.6.52; value from memory of that
    # source); Y_lm from scipy.special.sph_harm_y(l, m, theta, phi).
    rng = np.random.default_rng(rank)
    m = np.arange(-rank, rank + 1)
    for alpha, beta in zip(rng.uniform(-np.pi, np.pi, 6), rng.uniform(0, np.pi, 6)):
        D = wigner_D(rank, alpha, beta, 0.0)
        y = sph_harm_y(rank, m, beta, alpha)
        np.testing.assert_allclose(np.conj(D[:, rank]), math.sqrt(4 * np.pi / (2 * rank + 1)) * y, atol=1e-13)


@pytest.mark.parametrize("rank", [2, 4])
def test_D_rotates_spherical_harmonics(rank):
    # Source: for the active rotation R, (U(R) f)(r) = f(R^-1 r) and
    # U(R)|l m> = sum_m' |l m'> D_{m'm}(R), so
    # Y_lm(R^-1 r) = sum_m' D_{m'm}(R) Y_lm'(r) (Sakurai sec. 3.6, from memory);
    # Y from scipy.special.sph_harm_y, R from powderspin.physics.tensors.rotation_matrix.
    rng = np.random.default_rng(100 + rank)
    m = np.arange(-rank, rank + 1)

    def ylm(v):
        theta = math.acos(max(-1.0, min(1.0, v[2])))
        phi = math.atan2(v[1], v[0])
        return sph_harm_y(rank, m, theta, phi)

    for a, b, g in rng.uniform(-np.pi, np.pi, size=(5, 3)):
        R = rotation_matrix(a, b, g)
        D = wigner_D(rank, a, b, g)
        for _ in range(4):
            r = rng.normal(size=3)
            r /= np.linalg.norm(r)
            np.testing.assert_allclose(ylm(R.T @ r), D.T @ ylm(r), atol=1e-12)


@pytest.mark.parametrize("rank", [1, 2, 3, 4])
def test_D_equals_exponential_of_spin_operators(rank):
    # Source: D = <m'| exp(-i a Jz) exp(-i b Jy) exp(-i g Jz) |m> computed by
    # scipy.linalg.expm from powderspin.physics.spin operators (basis m = l ... -l,
    # reversed to our m = -l ... l indexing).
    ops = spin_operators(rank)
    rev = slice(None, None, -1)
    jy = np.asarray(ops.y)[rev, rev]
    jz = np.asarray(ops.z)[rev, rev]
    a, b, g = ANGLES[1]
    ref = expm(-1j * a * jz) @ expm(-1j * b * jy) @ expm(-1j * g * jz)
    np.testing.assert_allclose(wigner_D(rank, a, b, g), ref, atol=1e-12)
    np.testing.assert_allclose(wigner_small_d(rank, b), expm(-1j * b * jy).real, atol=1e-12)


@pytest.mark.parametrize("rank", [2, 4])
def test_D_is_representation_of_rotation_matrix(rank):
    # Source: group property D(R1 R2) = D(R1) D(R2); the ZYZ angles of the
    # product come from scipy.spatial.transform.Rotation.as_euler("ZYZ")
    # (intrinsic ZYZ = Rz(a) Ry(b) Rz(g), as powderspin.physics.tensors.rotation_matrix).
    rng = np.random.default_rng(200 + rank)
    for e1, e2 in rng.uniform(-np.pi, np.pi, size=(10, 2, 3)):
        r12 = rotation_matrix(*e1) @ rotation_matrix(*e2)
        e12 = SciRot.from_matrix(r12).as_euler("ZYZ")
        np.testing.assert_allclose(rotation_matrix(*e12), r12, atol=1e-12)
        np.testing.assert_allclose(wigner_D(rank, *e12), wigner_D(rank, *e1) @ wigner_D(rank, *e2), atol=1e-11)


# --------------------------------------------------------------------------
# D^2 and spherical_components versus the Cartesian rotation R t R^T
# --------------------------------------------------------------------------

def test_D2_rotates_spherical_components_like_cartesian_rotation():
    # Source: numpy Cartesian rotation R t R^T versus the spherical route.
    # With T = spherical_components(t), T' = spherical_components(R t R^T) and
    # D = wigner_D(2, a, b, g), R = rotation_matrix(a, b, g):
    #     T'_m = sum_k conj(D_mk) T_k     and equivalently     T_k = sum_m T'_m D_mk
    # (the components in the frame reached by R follow from the reference-frame
    # components through D: the usual frame-to-frame rule).  The form
    # T'_m = sum_k D_mk T_k, once claimed in the docstring, is false for these
    # components (checked below so the docs cannot drift back).
    rng = np.random.default_rng(300)
    wrong = []
    for a, b, g in rng.uniform(-np.pi, np.pi, size=(50, 3)):
        x = rng.normal(size=(3, 3))
        t = x + x.T
        R = rotation_matrix(a, b, g)
        D = wigner_D(2, a, b, g)
        c = spherical_components(t)
        cr = spherical_components(R @ t @ R.T)
        np.testing.assert_allclose(cr[2], D.conj() @ c[2], atol=1e-12)
        np.testing.assert_allclose(c[2], D.T @ cr[2], atol=1e-12)
        np.testing.assert_allclose(cr[0], c[0], atol=1e-12)  # rank 0 is invariant
        # and back to Cartesian
        np.testing.assert_allclose(
            cartesian_from_spherical({0: c[0], 2: D.conj() @ c[2]}), R @ t @ R.T, atol=1e-12)
        wrong.append(np.abs(cr[2] - D @ c[2]).max())
    assert min(wrong) > 1e-3


def test_D2_tensor_frame_example():
    # Source: tensors.py worked example (euler (0, 90 deg, 0): shift z onto EFG x)
    # repeated in spherical form: an axial tensor diag(-1/2, -1/2, 1) in its own
    # frame carried by R has reference-frame components conj(D) T.  Cartesian
    # check: R diag(-1/2, -1/2, 1) R^T = diag(1, -1/2, -1/2), whose T2,+-2 =
    # (xx - yy)/2 = 3/4 and T20 = sqrt(3/2) (-1/2) (docstring formulas).
    D = wigner_D(2, 0.0, math.pi / 2, 0.0)
    c = spherical_components(np.diag([-0.5, -0.5, 1.0]))[2]
    np.testing.assert_allclose(D.conj() @ c, [0.75, 0, -0.5 * math.sqrt(1.5), 0, 0.75], atol=1e-14)


# --------------------------------------------------------------------------
# Bad input
# --------------------------------------------------------------------------

@pytest.mark.parametrize("rank", [2.5, -1, "two", None, True])
def test_invalid_rank_raises(rank):
    # Project rule: clear ValueError naming the field and allowed range.
    # (wigner_D used to truncate 2.5 to 2 silently.)
    with pytest.raises(ValueError, match="rank"):
        wigner_small_d(rank, 0.3)
    with pytest.raises(ValueError, match="rank"):
        wigner_D(rank, 0.1, 0.3, 0.2)


@pytest.mark.parametrize("bad", [float("nan"), float("inf"), "x"])
def test_invalid_angle_raises(bad):
    with pytest.raises(ValueError, match="beta"):
        wigner_small_d(2, bad)
    with pytest.raises(ValueError, match="alpha"):
        wigner_D(2, bad, 0.3, 0.2)
    with pytest.raises(ValueError, match="gamma"):
        wigner_D(2, 0.1, 0.3, bad)


def test_rank_zero_and_integral_float_rank():
    assert wigner_D(0, 0.4, 1.0, -0.2).tolist() == [[1.0 + 0.0j]]
    np.testing.assert_array_equal(wigner_small_d(2.0, 0.5), wigner_small_d(2, 0.5))
