"""Rotor-frame Fourier components of transition offsets: engine against the Wigner route.

``powderspin.engine.spinning.rotor_fourier_components`` samples the DEVELOPERS.md
section 2 offsets at 16 rotor phases and takes an FFT.  Check sources (named
again beside each test):

* the analytic spherical-tensor route of ``tests/reference/wigner_rotor.py``
  (principal frame -> rotor frame -> laboratory by Wigner rotations, products
  of rank-2 components by convolution of their Fourier coefficients;
  M. Mehring, *Principles of High Resolution NMR in Solids* (1983), app. B);
* real offsets have Hermitian Fourier components, c_-k = conj(c_k), and a
  rank-2 interaction under rotation has |k| <= 2 (common practice);
* magic-angle spinning removes the rank-2 (first-order) anisotropy, so a
  spin-1/2 site's rotor average is its isotropic shift (common practice);
* the magic-angle (and any-angle) rotor average of the central transition as
  rank 0 + rank 2 + rank 4 terms, derived in :func:`test_ct_rotor_average_rank_decomposition`
  with Clebsch-Gordan coefficients from sympy.physics.wigner and spherical
  harmonics from scipy.special.sph_harm_y (outside references);
* the powder average of the CT rotor average equals the static CT centre of
  gravity, the quadrupolar-induced shift of A. Samoson, Chem. Phys. Lett. 119
  (1985) 29 (formula as given in DEVELOPERS.md, 'Physics formulas'), integrated with
  scipy.integrate.lebedev_rule (outside reference).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import lebedev_rule
from scipy.special import eval_legendre, sph_harm_y
from sympy.physics.wigner import clebsch_gordan

from powderspin.engine._kernels import _perp3
from powderspin.engine.frequencies import site_frame
from powderspin.engine.spinning import rotor_fourier_components
from powderspin.model.values import Site
from powderspin.physics.nuclides import get_nuclide
from powderspin.physics.tensors import ShiftTensor, efg_principal, spherical_components
from tests.reference.wigner_rotor import (
    efg_principal_components,
    shift_principal_components,
    transition_fourier_components,
)

FIELD_T = 9.4
MAGIC = math.acos(1.0 / math.sqrt(3.0))
ROTOR_ANGLES = [MAGIC, math.radians(35.0), math.pi / 2]
SHIFT = ShiftTensor(12.0, -85.0, 0.6)        # ppm; non-coaxial with the EFG below
EULER_DEG = (25.0, 65.0, -40.0)
# (nucleus, C_Q in MHz): I = 3/2, 5/2, 9/2; C_Q/nu0 large enough that second order matters
QUADRUPOLAR = [("23Na", 2.5), ("27Al", 6.0), ("93Nb", 20.0)]
RTOL = 1e-9


def _axes(seed, count=8):
    """Random rotor axes plus the axes that exercise every branch of the engine's u choice."""
    rng = np.random.default_rng(seed)
    rnd = rng.normal(size=(count, 3))
    special = np.array([[0, 0, 1], [0, 0, -1], [1, 0, 0], [0, 1, 0], [1, 1, 1], [-1, 2, -0.5]], dtype=float)
    a = np.vstack([rnd, special])
    return a / np.linalg.norm(a, axis=1)[:, None]


def _phase_origin(n):
    """The engine's phase origin u (phi = 0 puts B0 in the (n, u) plane on the u side)."""
    return np.array(_perp3(float(n[0]), float(n[1]), float(n[2]))[:3])


def _levels(spin):
    return [spin - i for i in range(int(round(2 * spin)))]


def _reference(site, spin, nu0, axes, theta, ms):
    k = site.cq_hz / (2 * spin * (2 * spin - 1)) if spin > 0.5 else 0.0
    return np.array([
        transition_fourier_components(spin, nu0, k, site.eta_q, site.shift.principal_haeberlen, site.euler_rad,
                                      n, _phase_origin(n), theta, ms)
        for n in axes
    ])


def _assert_close(got, ref, rtol=RTOL):
    """|got - ref| <= rtol * (largest |c_k| of that crystallite and transition), for every k."""
    scale = np.max(np.abs(ref), axis=-1, keepdims=True)
    err = np.abs(got - ref)
    assert np.all(err <= rtol * scale), f"worst relative error {np.max(err / scale):.3e}"


def test_reference_principal_components_match_spherical_components():
    # the reference's hand-written principal-frame components against the package's
    # Cartesian -> spherical map (Mehring app. B normalisation, both written from it)
    for eta in (0.0, 0.4, 1.0):
        np.testing.assert_allclose(efg_principal_components(eta), spherical_components(np.diag(efg_principal(eta)))[2],
                                   rtol=0, atol=1e-15)
    iso, t2 = shift_principal_components(SHIFT.principal_haeberlen)
    c = spherical_components(np.diag(SHIFT.principal_haeberlen))
    assert abs(iso - c[0][0]) < 1e-12
    np.testing.assert_allclose(t2, c[2], rtol=0, atol=1e-12)


@pytest.mark.parametrize("theta", ROTOR_ANGLES, ids=["magic", "35deg", "90deg"])
@pytest.mark.parametrize("eta", [0.0, 0.4, 1.0])
@pytest.mark.parametrize("nucleus,cq_mhz", QUADRUPOLAR)
def test_quadrupolar_components_match_wigner_route(nucleus, cq_mhz, eta, theta):
    # source: analytic Wigner route, tests/reference/wigner_rotor.py
    nuc = get_nuclide(nucleus)
    site = Site(shift=SHIFT, cq_mhz=cq_mhz, eta_q=eta, euler_deg=EULER_DEG)
    frame = site_frame(site, nuc, FIELD_T)
    ms = _levels(nuc.spin)
    axes = _axes(seed=int(100 * eta) + len(nucleus) + int(1000 * theta))
    got = rotor_fourier_components(frame, axes, ms, rotor_angle_rad=theta)
    ref = _reference(site, nuc.spin, frame.nu0_hz, axes, theta, ms)
    assert got.shape == ref.shape == (len(axes), len(ms), 9)
    _assert_close(got, ref)
    # satellites are dominated by first order; the pair m, 1-m cancels the first-order
    # quadrupolar part (odd in 2m - 1) and keeps 2 x (second order + shift), which is
    # compared on its own scale so a second-order error cannot hide
    ms_a = np.array(ms)
    for i, m in enumerate(ms):
        j = int(np.argmin(np.abs(ms_a - (1 - m))))
        if m > 0.5:
            _assert_close(got[:, i] + got[:, j], ref[:, i] + ref[:, j])
    # the second-order part really is there: |k| = 3, 4 components are non-zero
    # (products of two rank-2 components) unless every tensor is axial about n
    assert np.max(np.abs(ref[:len(axes) - 6, :, [0, 1, 7, 8]])) > 1e-3 * frame.quad_constant_hz ** 2 / frame.nu0_hz
    # Hermitian symmetry of a real trajectory (common practice), engine and reference
    np.testing.assert_allclose(got[..., ::-1], np.conj(got), rtol=0, atol=1e-9 * np.max(np.abs(got)))
    np.testing.assert_allclose(ref[..., ::-1], np.conj(ref), rtol=0, atol=1e-12 * np.max(np.abs(ref)))


@pytest.mark.parametrize("theta", [0.0] + ROTOR_ANGLES, ids=["0deg", "magic", "35deg", "90deg"])
def test_spin_half_shift_components_match_wigner_route(theta):
    # source: analytic Wigner route; rank-2 interaction => |k| <= 2 (common practice)
    nuc = get_nuclide("31P")
    site = Site(shift=ShiftTensor(-7.0, 140.0, 0.35), euler_deg=(0.0, 0.0, 0.0))
    frame = site_frame(site, nuc, FIELD_T)
    axes = _axes(seed=7)
    got = rotor_fourier_components(frame, axes, [0.5], rotor_angle_rad=theta)
    ref = _reference(site, 0.5, frame.nu0_hz, axes, theta, [0.5])
    _assert_close(got, ref)
    scale = 140.0e-6 * frame.nu0_hz
    assert np.max(np.abs(got[..., [0, 1, 7, 8]])) < 1e-12 * scale
    np.testing.assert_allclose(got[..., ::-1], np.conj(got), rtol=0, atol=1e-12 * scale)
    if theta == 0.0:
        # spinning about B0 is static: no modulation at all
        assert np.max(np.abs(np.delete(got, 4, axis=-1))) < 1e-12 * scale


def test_spin_half_magic_angle_average_is_isotropic_shift():
    # common practice: MAS averages the rank-2 shift anisotropy to zero
    nuc = get_nuclide("31P")
    iso = -7.0
    site = Site(shift=ShiftTensor(iso, 140.0, 0.35))
    frame = site_frame(site, nuc, FIELD_T)
    c = rotor_fourier_components(frame, _axes(seed=11, count=30), [0.5], rotor_angle_rad=MAGIC)
    np.testing.assert_allclose(c[..., 4].real, iso * 1e-6 * frame.nu0_hz, rtol=0, atol=1e-9 * 140e-6 * frame.nu0_hz)
    assert np.max(np.abs(c[..., 4].imag)) < 1e-9 * 140e-6 * frame.nu0_hz
    # but the sidebands (k = +-1, +-2) are there
    assert np.min(np.max(np.abs(c[..., [2, 3, 5, 6]]), axis=-1)) > 1e-3 * 140e-6 * frame.nu0_hz


def test_reference_phase_origin_shifts_phases():
    # the reference's own phase bookkeeping: rotating the phase origin by chi about n
    # (u' = cos chi u + sin chi v) gives nu'(phi) = nu(phi + chi), so c'_k = c_k exp(i k chi)
    n = np.array([0.3, -0.5, 0.8])
    n /= np.linalg.norm(n)
    u = _phase_origin(n)
    v = np.cross(n, u)
    chi = 0.7
    args = (2.5, 1.0e8, 3.0e5, 0.4, SHIFT.principal_haeberlen, np.radians(EULER_DEG))
    c = transition_fourier_components(*args, n, u, 1.1, [1.5, 0.5])
    c2 = transition_fourier_components(*args, n, math.cos(chi) * u + math.sin(chi) * v, 1.1, [1.5, 0.5])
    k = np.arange(-4, 5)
    np.testing.assert_allclose(c2, c * np.exp(1j * k * chi), rtol=0, atol=1e-9 * np.max(np.abs(c)))


def _coupled_pas(eta, rank):
    """W_{L M} (M = -L..L) = sum_{q1+q2=M} <2 q1 2 q2 | L M> V_{2q1} V_{2q2}, EFG principal frame."""
    v = {0: math.sqrt(1.5), 2: eta / 2, -2: eta / 2, 1: 0.0, -1: 0.0}
    w = np.zeros(2 * rank + 1)
    for mm in range(-rank, rank + 1):
        w[mm + rank] = sum(float(clebsch_gordan(2, 2, rank, q1, mm - q1, mm)) * v[q1] * v[mm - q1]
                           for q1 in range(-2, 3) if abs(mm - q1) <= 2)
    return w


def _ct_rotor_average(spin, quad_constant_hz, nu0_hz, eta, axes, theta):
    """Rank decomposition of the CT rotor average (derivation in the test docstring)."""
    a = spin * (spin + 1) - 0.75
    out = np.zeros(len(axes))
    beta = np.arccos(np.clip(axes[:, 2], -1, 1))
    alpha = np.arctan2(axes[:, 1], axes[:, 0])
    for rank in (0, 2, 4):
        g = -float(clebsch_gordan(2, 2, rank, 1, -1, 0)) - 0.5 * float(clebsch_gordan(2, 2, rank, 2, -2, 0))
        w = _coupled_pas(eta, rank)
        # W^R_{L0} = sum_j W^C_{Lj} D^L_{j0}(alpha_n, beta_n, .), D^L_{j0} = conj(sqrt(4 pi/(2L+1)) Y_Lj(beta, alpha))
        wr = sum(w[j + rank] * np.conj(math.sqrt(4 * math.pi / (2 * rank + 1)) * sph_harm_y(rank, j, beta, alpha))
                 for j in range(-rank, rank + 1))
        out += -(2 * a * quad_constant_hz ** 2 / nu0_hz) * g * eval_legendre(rank, math.cos(theta)) * wr.real
    return out


@pytest.mark.parametrize("eta", [0.0, 0.4, 1.0])
@pytest.mark.parametrize("nucleus,cq_mhz", QUADRUPOLAR)
def test_ct_rotor_average_rank_decomposition(nucleus, cq_mhz, eta):
    r"""CT rotor average = rank-0 + P2(cos theta_R) rank-2 + P4(cos theta_R) rank-4 terms.

    Derivation (DEVELOPERS.md, 'Physics formulas' levels; X = I(I+1), a = X - 3/4, K = nu_Q/3).
    For m = 1/2, E2(1/2) = -E2(-1/2) and
    nu_CT = 2 E2(1/2) = -(K^2/(2 nu0)) [(4X - 3) A - (2X - 3/2) B] = -(2 a K^2/nu0)(A - B/2),
    with A = -V_21 V_2-1 and B = V_22 V_2-2 in the lab frame
    (tests/reference/wigner_rotor.py).  Couple the two rank-2 factors,
    V_2q V_2-q = sum_L <2 q 2 -q|L 0> W_L0 with W_LM = sum <2 q1 2 q2|L M> V_2q1 V_2q2
    (Clebsch-Gordan orthogonality); both V_21 V_2-1 and V_22 V_2-2 are even in q,
    so only L = 0, 2, 4 survive:

        A - B/2 = sum_L g_L W_L0,  g_L = -<2 1 2 -1|L 0> - (1/2) <2 2 2 -2|L 0>,

    g_0 = 1/sqrt(5) - 1/(2 sqrt 5) = 1/(2 sqrt 5), g_2 = -2/sqrt(14),
    g_4 = -9/(2 sqrt 70) (asserted below from sympy).  W_L0 transforms as a rank-L
    component, so over one rotor period its average is W^R_L0 P_L(cos theta_R)
    (only the exp(-i 0 phi) term of D^L(phi, theta_R, 0) survives), and
    W^R_L0 = sum_j W^C_Lj D^L_j0(alpha_n, beta_n, .) with (beta_n, alpha_n) the polar
    angles of the rotor axis in the EFG frame.  The rank-0 part is invariant:
    W_00 = (1/sqrt 5) sum_q |V_2q|^2 = (3/(2 sqrt 5))(1 + eta^2/3), which gives

        nu_CT(rank 0) = -(3 a K^2/(10 nu0)) (1 + eta^2/3) = -(nu_Q^2/(30 nu0)) a (1 + eta^2/3),

    the standard MAS isotropic second-order shift (value from memory; checked here and,
    through Samoson's QIS, in the powder test below).  At the magic angle P2 = 0 and
    P4 = -7/18, leaving rank 0 + rank 4.  The shift adds nu0 1e-6 [d_iso + P2(cos theta_R)
    (rank-2 part along n)]; the site here has an isotropic shift only off the magic angle
    and an anisotropic, non-coaxial one at the magic angle, where it must drop out.
    """
    # CG values: sympy.physics.wigner.clebsch_gordan (outside reference)
    g = {L: -float(clebsch_gordan(2, 2, L, 1, -1, 0)) - 0.5 * float(clebsch_gordan(2, 2, L, 2, -2, 0))
         for L in (0, 2, 4)}
    assert abs(g[0] - 1 / (2 * math.sqrt(5))) < 1e-15
    assert abs(g[2] + 2 / math.sqrt(14)) < 1e-15
    assert abs(g[4] + 9 / (2 * math.sqrt(70))) < 1e-15
    assert abs(_coupled_pas(eta, 0)[0] - 3 / (2 * math.sqrt(5)) * (1 + eta ** 2 / 3)) < 1e-14

    nuc = get_nuclide(nucleus)
    spin = nuc.spin
    quad_constant_hz = cq_mhz * 1e6 / (2 * spin * (2 * spin - 1))
    axes = _axes(seed=3 + int(10 * eta), count=20)
    iso = 5.0
    for theta, shift, euler in ((MAGIC, SHIFT, EULER_DEG), (math.radians(35.0), ShiftTensor(iso), (0, 0, 0)),
                                (math.pi / 2, ShiftTensor(iso), (0, 0, 0))):
        site = Site(shift=shift, cq_mhz=cq_mhz, eta_q=eta, euler_deg=euler)
        frame = site_frame(site, nuc, FIELD_T)
        c0 = rotor_fourier_components(frame, axes, [0.5], rotor_angle_rad=theta)[:, 0, 4]
        expect = (shift.iso_ppm * 1e-6 * frame.nu0_hz
                  + _ct_rotor_average(spin, quad_constant_hz, frame.nu0_hz, eta, axes, theta))
        scale = quad_constant_hz ** 2 / frame.nu0_hz
        np.testing.assert_allclose(c0.real, expect, rtol=0, atol=1e-9 * scale)
        assert np.max(np.abs(c0.imag)) < 1e-9 * scale


@pytest.mark.parametrize("theta", [0.0, MAGIC, math.pi / 2], ids=["0deg", "magic", "90deg"])
@pytest.mark.parametrize("eta", [0.0, 0.4, 1.0])
@pytest.mark.parametrize("nucleus,cq_mhz", QUADRUPOLAR)
def test_powder_average_of_ct_rotor_average_is_qis(nucleus, cq_mhz, eta, theta):
    # source: A. Samoson, Chem. Phys. Lett. 119 (1985) 29 (DEVELOPERS.md, 'Physics formulas' form):
    # delta_QIS = -(3/40) (P_Q/nu0)^2 [I(I+1) - 3/4] / [I^2 (2I-1)^2] * nu0 (Hz), P_Q = C_Q sqrt(1 + eta^2/3).
    # The CT rotor average is a polynomial of degree 4 in the rotor-axis components, so a
    # Lebedev rule of degree >= 5 (scipy.integrate.lebedev_rule) integrates it exactly; its
    # rank-2 and rank-4 parts average to zero and leave the static centre of gravity.
    nuc = get_nuclide(nucleus)
    spin = nuc.spin
    site = Site(shift=ShiftTensor(0.0), cq_mhz=cq_mhz, eta_q=eta)
    frame = site_frame(site, nuc, FIELD_T)
    x, w = lebedev_rule(7)
    c0 = rotor_fourier_components(frame, x.T, [0.5], rotor_angle_rad=theta)[:, 0, 4].real
    mean = float(w @ c0 / w.sum())
    cq = cq_mhz * 1e6
    p_q2 = cq ** 2 * (1 + eta ** 2 / 3)
    qis = -(3 / 40) * p_q2 / frame.nu0_hz ** 2 * (spin * (spin + 1) - 0.75) / (spin ** 2 * (2 * spin - 1) ** 2)
    qis_hz = qis * frame.nu0_hz
    assert abs(mean - qis_hz) < 1e-9 * abs(qis_hz)
    # the same number in nu_Q form (value from memory; see the rank-decomposition test)
    nu_q = 3 * cq / (2 * spin * (2 * spin - 1))
    assert abs(qis_hz + nu_q ** 2 / (30 * frame.nu0_hz) * (spin * (spin + 1) - 0.75) * (1 + eta ** 2 / 3)) \
        < 1e-12 * abs(qis_hz)
