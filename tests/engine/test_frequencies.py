"""The two frequency producers against slow twins, perturbation theory and textbook values.

Check sources (named again beside each test):

* exact diagonalisation with plain numpy (``tests/reference/exact_numpy.py``);
* the DEVELOPERS.md, 'Physics formulas' level energies written literally
  (``tests/reference/perturbative_numpy.py``) and the textbook
  Rayleigh-Schroedinger second-order sum (same file);
* first-order quadrupolar splitting: A. Abragam, *The Principles of Nuclear
  Magnetism* (1961), ch. VII;
* eta = 0 static central-transition singularities and the quadrupolar-induced
  shift of the centre of gravity: DEVELOPERS.md, 'Physics formulas' ("standard result") and
  A. Samoson, Chem. Phys. Lett. 119 (1985) 29;
* magic-angle averaging of rank-2 terms: P2(cos theta_m) = 0 (common practice).

Chapter numbers of the textbooks are given from memory; the formulas themselves are
re-derived or cross-checked numerically here (exact diagonalisation, the
Rayleigh-Schroedinger sum), so no test rests on a remembered number alone.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from powderspin.engine import _kernels as _k
from powderspin.engine.frequencies import (
    SiteFrame,
    exact_offsets,
    perturbation_error_hz,
    perturbative_offsets,
    transition_intensity,
)
from powderspin.physics.tensors import efg_principal
from tests.reference.exact_numpy import exact_transitions
from tests.reference.perturbative_numpy import (
    lab_efg_spherical,
    level_energy_second,
    perturbative_transitions,
    second_order_sum,
)

SPINS = [1.0, 1.5, 2.5, 3.5, 4.5]
MAGIC = math.acos(1.0 / math.sqrt(3.0))
NU0 = 1.0e8  # Hz; every result below scales with nu0 at fixed C_Q/nu0


def _frame(spin, nu0, cq, eta, delta=None):
    k = cq / (2 * spin * (2 * spin - 1)) if spin > 0.5 else 0.0
    d = np.zeros((3, 3)) if delta is None else np.asarray(delta, dtype=float)
    return SiteFrame(spin, nu0, k, efg_principal(eta), d, "hemisphere")


def _all_ms(spin):
    return [spin - i for i in range(int(round(2 * spin)))]


def _random_dirs(rng, n):
    d = rng.normal(size=(n, 3))
    return d / np.linalg.norm(d, axis=1)[:, None]


def _random_shift_tensor(rng):
    """A symmetric, non-coaxial shift tensor (ppm) with an isotropic part."""
    a = rng.normal(size=(3, 3))
    return 40.0 * (a + a.T) + 25.0 * np.eye(3)


def _own_rotor_directions(n, theta_r, phases):
    """B0 directions over one rotor period, built with our own perpendicular pair."""
    n = np.asarray(n, dtype=float)
    helper = np.array([0.3, -0.8, 0.52])
    u = np.cross(n, helper)
    u /= np.linalg.norm(u)
    v = np.cross(n, u)
    phi = 2 * np.pi * np.arange(phases) / phases
    return (math.cos(theta_r) * n[None, :]
            + math.sin(theta_r) * (np.cos(phi)[:, None] * u + np.sin(phi)[:, None] * v))


# ---------------------------------------------------------------------------
# exact producer vs plain numpy diagonalisation (tests/reference/exact_numpy.py)


@pytest.mark.parametrize("spin", SPINS)
@pytest.mark.parametrize("ratio", [0.003, 0.05, 0.4])
def test_exact_kernel_matches_numpy_diagonalisation(spin, ratio):
    # Source: exact diagonalisation with numpy.linalg.eigh, tensors rotated into the
    # lab frame by an explicit rotation matrix (tests/reference/exact_numpy.py).
    rng = np.random.default_rng(int(10 * spin + 1000 * ratio))
    eta = float(rng.random())
    delta = _random_shift_tensor(rng)
    dirs = _random_dirs(rng, 12)
    ms = _all_ms(spin)
    off, inten = exact_offsets(_frame(spin, NU0, ratio * NU0, eta, delta), dirs, ms)
    ref_off, ref_int = exact_transitions(spin, NU0, ratio * NU0, eta, delta, dirs, ms)
    # eigenvalues are good to a few ulps of the largest level energy (~ nu0 I)
    atol = 5e-15 * NU0 * (2 * spin + 1)
    np.testing.assert_allclose(off[..., 0], ref_off, rtol=0, atol=atol)
    np.testing.assert_allclose(inten[..., 0], ref_int, rtol=0, atol=1e-11)


@pytest.mark.parametrize("spin", [1.5, 3.5])
def test_exact_kernel_spinning_matches_numpy(spin):
    # Source: tests/reference/exact_numpy.py evaluated along the rotor cone.
    # (a) With the kernel's own perpendicular pair (checked orthonormal and right-handed
    #     here) the trajectories agree phase by phase.
    # (b) With an independent pair the phase origin differs, so the rotor average and the
    #     magnitudes of the Fourier components must agree (the exact trajectory is not
    #     band-limited, but its harmonics fall off fast enough that 64 phases leave no
    #     visible aliasing).
    rng = np.random.default_rng(7)
    eta, ratio, phases = 0.6, 0.08, 64
    delta = _random_shift_tensor(rng)
    frame = _frame(spin, NU0, ratio * NU0, eta, delta)
    ms = _all_ms(spin)
    for n in _random_dirs(rng, 3):
        off, inten = exact_offsets(frame, n[None, :], ms, rotor_angle_rad=MAGIC, phases=phases)
        u, v = _k._perp_pair(n)
        np.testing.assert_allclose([u @ u, v @ v, u @ v, u @ n, v @ n], [1, 1, 0, 0, 0], atol=1e-14)
        np.testing.assert_allclose(np.cross(n, u), v, atol=1e-14)
        phi = 2 * np.pi * np.arange(phases) / phases
        b = math.cos(MAGIC) * n + math.sin(MAGIC) * (np.cos(phi)[:, None] * u + np.sin(phi)[:, None] * v)
        ref_off, ref_int = exact_transitions(spin, NU0, ratio * NU0, eta, delta, b, ms)
        atol = 5e-15 * NU0 * (2 * spin + 1)
        np.testing.assert_allclose(off[0].T, ref_off, rtol=0, atol=atol)
        np.testing.assert_allclose(inten[0].T, ref_int, rtol=0, atol=1e-11)
        own, _ = exact_transitions(spin, NU0, ratio * NU0, eta, delta, _own_rotor_directions(n, MAGIC, phases), ms)
        ck = np.abs(np.fft.fft(off[0], axis=1))
        ck_ref = np.abs(np.fft.fft(own.T, axis=1))
        np.testing.assert_allclose(ck, ck_ref, rtol=0, atol=atol * phases)


@pytest.mark.parametrize("spin", [1.5, 2.5, 4.5])
def test_exact_intensities_reduce_to_high_field_values(spin):
    # Source: |<m|I+|m-1>|^2 = I(I+1) - m(m-1) for pure Zeeman states (Abragam, chapter on the motion of
    # free spins, from memory;
    # textbook angular-momentum algebra).  At C_Q/nu0 = 1e-5 the states are pure to ~1e-5.
    rng = np.random.default_rng(3)
    ms = _all_ms(spin)
    _, inten = exact_offsets(_frame(spin, NU0, 1e-5 * NU0, 0.4), _random_dirs(rng, 10), ms)
    expected = np.array([spin * (spin + 1) - m * (m - 1) for m in ms])
    np.testing.assert_allclose(inten[..., 0], np.broadcast_to(expected, (10, len(ms))), rtol=1e-4)
    np.testing.assert_allclose([transition_intensity(spin, m) for m in ms], expected, rtol=0, atol=1e-12)


# ---------------------------------------------------------------------------
# perturbative producer vs literal formulas (tests/reference/perturbative_numpy.py)


@pytest.mark.parametrize("spin", [0.5] + SPINS)
@pytest.mark.parametrize("second_order", [True, False])
def test_perturbative_kernel_matches_literal_formulas(spin, second_order):
    # Source: DEVELOPERS.md, 'Physics formulas' E1/E2 written literally with V_xz, V_yz, V_xx - V_yy,
    # V_xy of the explicitly rotated EFG (tests/reference/perturbative_numpy.py).
    rng = np.random.default_rng(int(20 * spin) + second_order)
    eta = float(rng.random())
    delta = _random_shift_tensor(rng)
    cq = 0.0 if spin == 0.5 else 0.03 * NU0
    ms = [0.5] if spin == 0.5 else _all_ms(spin)
    dirs = _random_dirs(rng, 25)
    got = perturbative_offsets(_frame(spin, NU0, cq, eta, delta), dirs, ms, second_order=second_order)[..., 0]
    ref = perturbative_transitions(spin, NU0, cq, eta, delta, dirs, ms, second_order=second_order)
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12 * max(np.abs(ref).max(), 1.0))


@pytest.mark.parametrize("spin", [1.0, 2.5])
def test_perturbative_kernel_spinning_matches_literal_formulas(spin):
    # Source: tests/reference/perturbative_numpy.py along the rotor cone; with the kernel's
    # perpendicular pair phase by phase, with an independent pair through |Fourier components|.
    rng = np.random.default_rng(11)
    eta, phases, theta_r = 0.25, 32, 0.9
    delta = _random_shift_tensor(rng)
    cq = 0.02 * NU0
    frame = _frame(spin, NU0, cq, eta, delta)
    ms = _all_ms(spin)
    for n in _random_dirs(rng, 3):
        got = perturbative_offsets(frame, n[None, :], ms, rotor_angle_rad=theta_r, phases=phases)[0]
        u, v = _k._perp_pair(n)
        phi = 2 * np.pi * np.arange(phases) / phases
        b = math.cos(theta_r) * n + math.sin(theta_r) * (np.cos(phi)[:, None] * u + np.sin(phi)[:, None] * v)
        ref = perturbative_transitions(spin, NU0, cq, eta, delta, b, ms).T
        scale = np.abs(ref).max()
        np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12 * scale)
        own = perturbative_transitions(spin, NU0, cq, eta, delta, _own_rotor_directions(n, theta_r, phases), ms).T
        np.testing.assert_allclose(np.abs(np.fft.fft(got, axis=1)), np.abs(np.fft.fft(own, axis=1)),
                                   rtol=0, atol=1e-12 * scale * phases)
        # a degree-4 trigonometric polynomial: no Fourier content above |k| = 4
        assert np.abs(np.fft.fft(got, axis=1)[:, 5:phases - 4]).max() < 1e-12 * scale * phases


@pytest.mark.parametrize("spin", SPINS)
def test_second_order_formula_equals_rayleigh_schroedinger_sum(spin):
    # Source: textbook second-order perturbation theory, E2(m) = sum_{m'} |<m'|H_Q|m>|^2 /
    # (nu0 (m - m')), with explicit matrices (tests/reference/perturbative_numpy.py);
    # checks the DEVELOPERS.md, 'Physics formulas' E2 formula itself, for every level.
    rng = np.random.default_rng(5)
    cq, eta = 0.02 * NU0, 0.7
    for b in _random_dirs(rng, 4):
        _, comp = lab_efg_spherical(eta, b)
        for m in [spin - i for i in range(int(round(2 * spin)) + 1)]:
            a = level_energy_second(spin, cq, NU0, m, comp)
            r = second_order_sum(spin, cq, NU0, eta, b, m)
            assert abs(a - r) <= 1e-12 * (cq * cq / NU0), (m, a, r)


# ---------------------------------------------------------------------------
# exact vs perturbative: the size of the neglected terms (DEVELOPERS.md, 'Physics formulas')


def _loglog_slope(x, y):
    return float(np.polyfit(np.log(x), np.log(y), 1)[0])


@pytest.mark.parametrize("spin", SPINS)
def test_perturbative_error_scaling(spin):
    # Source: DEVELOPERS.md, 'Physics formulas' (measured against exact diagonalisation): the satellite
    # error falls as (C_Q/nu0)^3 and the central-transition error as (C_Q/nu0)^4.  Exact
    # levels from tests/reference/exact_numpy.py and the exact kernel.  For integer spin there
    # is no central transition and both members of each satellite pair m, 1-m must follow
    # the (C_Q/nu0)^3 law.  No shift tensor here:
    # the exact route's Zeeman term nu0 (1 + 1e-6 d_zz) would add a C_Q^2 d_zz / nu0 term.
    rng = np.random.default_rng(99)
    dirs = _random_dirs(rng, 24)
    ms = _all_ms(spin)
    ratios = np.geomspace(0.005, 0.04, 6)
    errs = []
    for x in ratios:
        eta = 0.35
        frame = _frame(spin, NU0, x * NU0, eta)
        pert = perturbative_offsets(frame, dirs, ms)[..., 0]
        exact = exact_offsets(frame, dirs, ms)[0][..., 0]
        errs.append(np.abs(pert - exact).max(axis=0))
    errs = np.array(errs)
    # the reference diagonalisation gives the same differences at the largest ratio
    ref = exact_transitions(spin, NU0, ratios[-1] * NU0, 0.35, np.zeros((3, 3)), dirs[:6], ms)[0]
    np.testing.assert_allclose(pert[:6] - ref, pert[:6] - exact[:6], rtol=1e-6, atol=1e-6)
    for t, m in enumerate(ms):
        slope = _loglog_slope(ratios, errs[:, t])
        expected = 4.0 if m == 0.5 else 3.0
        assert abs(slope - expected) < 0.3, (spin, m, slope)


# ---------------------------------------------------------------------------
# textbook values


@pytest.mark.parametrize("spin", [1.5, 2.5, 3.5, 4.5])
def test_first_order_satellite_splitting_at_theta_zero(spin):
    # Source: A. Abragam, The Principles of Nuclear Magnetism (1961), chapter on electric quadrupole effects
    # (from memory): the
    # first-order satellite 3/2 -> 1/2 sits at nu_Q (3 cos^2 theta - 1)/2 from the centre,
    # nu_Q = 3 C_Q / (2I(2I-1)); at theta = 0 and eta = 0 it is nu_Q.  Here H_Q commutes
    # with Iz, so the exact route gives the same value.
    cq = 0.01 * NU0
    nu_q = 3 * cq / (2 * spin * (2 * spin - 1))
    frame = _frame(spin, NU0, cq, 0.0)
    p = perturbative_offsets(frame, [[0.0, 0.0, 1.0]], [1.5])[0, 0, 0]
    e = exact_offsets(frame, [[0.0, 0.0, 1.0]], [1.5])[0][0, 0, 0]
    assert p == pytest.approx(nu_q, rel=1e-12)
    assert e == pytest.approx(nu_q, rel=1e-9)
    # and the (3 cos^2 theta - 1)/2 dependence at first order
    th = 0.7
    p1 = perturbative_offsets(frame, [[math.sin(th), 0.0, math.cos(th)]], [1.5], second_order=False)[0, 0, 0]
    assert p1 == pytest.approx(nu_q * (3 * math.cos(th) ** 2 - 1) / 2, rel=1e-12)


@pytest.mark.parametrize("spin", [1.5, 2.5, 3.5, 4.5])
def test_static_central_transition_singularities(spin):
    # Source: DEVELOPERS.md, 'Physics formulas' "standard result" (derivable from second-order
    # perturbation theory): for eta = 0 the static CT sits at +a nu_Q^2 / (16 nu0) for
    # theta = 90 deg and at -a nu_Q^2 / (9 nu0) for cos^2 theta = 5/9, a = I(I+1) - 3/4.
    cq = 0.01 * NU0
    nu_q = 3 * cq / (2 * spin * (2 * spin - 1))
    a = spin * (spin + 1) - 0.75
    c = math.sqrt(5.0 / 9.0)
    dirs = [[1.0, 0.0, 0.0], [math.sqrt(1 - c * c), 0.0, c]]
    expected = [a * nu_q ** 2 / (16 * NU0), -a * nu_q ** 2 / (9 * NU0)]
    frame = _frame(spin, NU0, cq, 0.0)
    got = perturbative_offsets(frame, dirs, [0.5])[:, 0, 0]
    np.testing.assert_allclose(got, expected, rtol=1e-12)
    # the exact levels agree up to the (C_Q/nu0)^4 remainder
    ex = exact_offsets(frame, dirs, [0.5])[0][:, 0, 0]
    np.testing.assert_allclose(ex, expected, rtol=1e-3)
    # 90 deg is the maximum of the eta = 0 pattern, cos^2 = 5/9 its minimum
    th = np.linspace(0, np.pi / 2, 2001)
    scan = perturbative_offsets(frame, np.column_stack([np.sin(th), 0 * th, np.cos(th)]), [0.5])[:, 0, 0]
    assert scan.max() == pytest.approx(expected[0], rel=1e-9)
    assert scan.min() == pytest.approx(expected[1], rel=1e-5)


@pytest.mark.parametrize("spin", [1.5, 2.5, 4.5])
@pytest.mark.parametrize("eta", [0.0, 0.5, 1.0])
def test_central_transition_centre_of_gravity(spin, eta):
    # Source: quadrupolar-induced shift of the CT centre of gravity (DEVELOPERS.md, 'Physics formulas';
    # A. Samoson, Chem. Phys. Lett. 119 (1985) 29):
    #   nu_QIS = -(3/40) P_Q^2 / nu0 * [I(I+1) - 3/4] / [I^2 (2I-1)^2],  P_Q = C_Q sqrt(1 + eta^2/3).
    # The powder average is done with a product rule (Gauss-Legendre in cos theta, uniform
    # in phi), exact for the degree-4 polynomial in the B0 direction.
    cq = 0.02 * NU0
    z, wz = np.polynomial.legendre.leggauss(6)
    phi = 2 * np.pi * np.arange(10) / 10
    zz, pp = np.meshgrid(z, phi, indexing="ij")
    r = np.sqrt(1 - zz ** 2)
    dirs = np.column_stack([(r * np.cos(pp)).ravel(), (r * np.sin(pp)).ravel(), zz.ravel()])
    w = (np.repeat(wz, phi.size) / 2.0) / phi.size
    off = perturbative_offsets(_frame(spin, NU0, cq, eta), dirs, [0.5])[:, 0, 0]
    pq2 = cq * cq * (1 + eta * eta / 3)
    expected = -(3 / 40) * pq2 / NU0 * (spin * (spin + 1) - 0.75) / (spin ** 2 * (2 * spin - 1) ** 2)
    assert float(w @ off) == pytest.approx(expected, rel=1e-10)


def test_magic_angle_removes_first_order_anisotropy():
    # Source: P2(cos theta_m) = 0, so the rotor average of any rank-2 first-order term
    # vanishes at the magic angle (common practice); 5 or more equally spaced phases
    # average a degree-2 trigonometric polynomial exactly (DEVELOPERS.md, 'Physics formulas').
    rng = np.random.default_rng(4)
    delta = _random_shift_tensor(rng)
    iso = np.trace(delta) / 3
    frame = _frame(2.5, NU0, 0.02 * NU0, 0.3, delta)
    off = perturbative_offsets(frame, _random_dirs(rng, 20), _all_ms(2.5), rotor_angle_rad=MAGIC,
                               phases=8, second_order=False)
    np.testing.assert_allclose(off.mean(axis=2), NU0 * 1e-6 * iso, rtol=0, atol=1e-7 * NU0 * 1e-6 * 100)


def test_zero_rotor_angle_is_static():
    # Geometry check: with the rotor axis along B0 every phase sees the same direction.
    rng = np.random.default_rng(8)
    frame = _frame(1.5, NU0, 0.05 * NU0, 0.5, _random_shift_tensor(rng))
    dirs = _random_dirs(rng, 5)
    stat = exact_offsets(frame, dirs, [1.5, 0.5])[0]
    rot = exact_offsets(frame, dirs, [1.5, 0.5], rotor_angle_rad=0.0, phases=4)[0]
    np.testing.assert_allclose(rot, np.repeat(stat, 4, axis=2), rtol=0, atol=1e-6)


# ---------------------------------------------------------------------------
# perturbation_error_hz and input checks


def test_perturbation_error_hz_small_and_large():
    # Source: the error scaling above; at C_Q/nu0 = 1e-3 the CT error is ~1e-12 C_Q (far
    # below a millihertz), at C_Q/nu0 = 0.4 perturbation theory is off by kilohertz.
    nu0 = 1.0e8
    small = perturbation_error_hz(_frame(2.5, nu0, 1e-3 * nu0, 0.3), [0.5])
    large = perturbation_error_hz(_frame(2.5, nu0, 0.4 * nu0, 0.3), [0.5])
    assert 0.0 <= small < 1e-3
    assert large > 1e3
    # satellites: third-order error, still far below a hertz at 1e-3
    assert perturbation_error_hz(_frame(1.0, nu0, 1e-3 * nu0, 0.0), [1.0, 0.0]) < 0.1
    # no quadrupole coupling: first-order shift is exact
    assert perturbation_error_hz(_frame(0.5, nu0, 0.0, 0.0, np.diag([10.0, 20.0, 30.0])), [0.5]) == 0.0


@pytest.mark.parametrize("bad", [[[0.0, 0.0, 0.0]], [[np.nan, 0.0, 1.0]], [[np.inf, 0.0, 1.0]],
                                 [[1.0, 0.0]], [[1.0, 0.0, 0.0, 1.0]], [[[1.0, 0.0, 0.0]]]])
def test_bad_directions_raise(bad):
    frame = _frame(1.5, NU0, 1e6, 0.2)
    with pytest.raises(ValueError, match="directions"):
        perturbative_offsets(frame, bad, [0.5])
    with pytest.raises(ValueError, match="directions"):
        exact_offsets(frame, bad, [0.5])


@pytest.mark.parametrize("ms", [[2.5], [-1.5], [0.7], [float("nan")]])
def test_bad_transitions_raise(ms):
    frame = _frame(1.5, NU0, 1e6, 0.2)
    with pytest.raises(ValueError, match="spin 1.5"):
        exact_offsets(frame, [[0.0, 0.0, 1.0]], ms)
    with pytest.raises(ValueError, match="spin 1.5"):
        perturbative_offsets(frame, [[0.0, 0.0, 1.0]], ms)
