"""Finite-pulse excitation: kernels against the expm twin, and the physics limits with their sources."""

from __future__ import annotations

import math

import numpy as np
import pytest

from powderspin.engine import pulses as P
from powderspin.engine.frequencies import site_frame
from powderspin.model.values import Site
from powderspin.physics.nuclides import get_nuclide
from powderspin.physics.orientations import select_orientations
from powderspin.physics.tensors import ShiftTensor
from tests.reference import pulses_expm as ref


def _directions(n, seed=3):
    rng = np.random.default_rng(seed)
    d = rng.normal(size=(n, 3))
    return d / np.linalg.norm(d, axis=1)[:, None]


def _frame(cq_mhz=2.0, eta=0.4, nucleus="27Al", field=9.4, aniso=60.0, eta_cs=0.3, iso=0.0, euler=(20.0, 50.0, 70.0)):
    site = Site(shift=ShiftTensor(iso, aniso, eta_cs), cq_mhz=cq_mhz, eta_q=eta, euler_deg=euler)
    return site_frame(site, get_nuclide(nucleus), field)


# ---------------------------------------------------------------------------
# kernels against the slow twin (tests/reference/pulses_expm.py: scipy.linalg.expm, literal Hamiltonian)


@pytest.mark.parametrize("nucleus,cq", [("27Al", 2.0), ("23Na", 1.2), ("93Nb", 8.0), ("2H", 0.17)])
def test_levels_match_literal_hamiltonian(nucleus, cq):
    frame = _frame(cq_mhz=cq, nucleus=nucleus)
    dirs = _directions(7)
    lv = P.rotating_frame_levels(frame, dirs, carrier_offset_hz=1234.5)
    for i, b in enumerate(dirs):
        r = ref.hamiltonian_levels(frame.spin, frame.nu0_hz, cq * 1e6, 0.4, frame.shift_tensor_ppm, b, 1234.5)
        # levels are defined up to a constant
        np.testing.assert_allclose(lv[i] - lv[i, 0], r - r[0], rtol=0, atol=1e-6)


@pytest.mark.parametrize("nucleus,cq", [("27Al", 2.0), ("23Na", 1.2), ("17O", 0.9), ("2H", 0.17)])
def test_kernels_match_expm_twin(nucleus, cq):
    frame = _frame(cq_mhz=cq, nucleus=nucleus)
    dirs = _directions(9)
    lv = P.rotating_frame_levels(frame, dirs, carrier_offset_hz=-800.0)
    spin = frame.spin
    m_up = [spin - i for i in range(int(round(2 * spin)))]
    pulses = [(83e3, 1.7e-6, 30.0), (83e3, 3.1e-6, 115.0)]
    u = P.pulse_propagators(lv, 83e3, 1.7e-6, 30.0)
    rho = P.density_after_pulses(lv, pulses)
    single = P.PulseSequence("single", 83e3, (1.7e-6,), (30.0,))
    echo = P.PulseSequence("echo", 83e3, (1.7e-6, 3.1e-6), (30.0, 115.0))
    a1 = P.transition_amplitudes(lv, single, m_up)
    a2 = P.transition_amplitudes(lv, echo, m_up)
    for i in range(len(dirs)):
        np.testing.assert_allclose(u[i], ref.propagator(lv[i], 83e3, 1.7e-6, 30.0), rtol=0, atol=1e-10)
        np.testing.assert_allclose(rho[i], ref.density_after(lv[i], pulses), rtol=0, atol=1e-10)
        np.testing.assert_allclose(a1[i], ref.transition_signals(lv[i], "single", 83e3, (1.7e-6,), (30.0,), m_up),
                                   rtol=0, atol=1e-10)
        np.testing.assert_allclose(a2[i], ref.transition_signals(lv[i], "echo", 83e3, (1.7e-6, 3.1e-6),
                                                                 (30.0, 115.0), m_up), rtol=0, atol=1e-10)


def test_small_symmetric_eigensolver_matches_numpy():
    # the kernels' Jacobi eigensolver against numpy.linalg.eigh (LAPACK), tridiagonal and full matrices
    from powderspin.engine import _kernels as K

    rng = np.random.default_rng(5)
    for d in (2, 3, 4, 6, 8, 10):
        for full in (False, True):
            a = rng.normal(size=(d, d)) * 1e5
            a = a + a.T
            if not full:
                a = np.triu(np.tril(a, 1), -1)
            lam = np.empty(d)
            vec = np.empty((d, d))
            K._symmetric_eigen(a.copy(), lam, vec)
            ref_lam = np.linalg.eigvalsh(a)
            np.testing.assert_allclose(np.sort(lam), ref_lam, rtol=0, atol=1e-9 * np.abs(ref_lam).max())
            np.testing.assert_allclose(vec @ np.diag(lam) @ vec.T, a, rtol=0, atol=1e-9 * np.abs(a).max())
            np.testing.assert_allclose(vec.T @ vec, np.eye(d), rtol=0, atol=1e-12)


def test_coherence_transfer_is_the_matrix_element_of_u_rho_u():
    # |a><b| -> U |a><b| U^H, read at (c, d): explicit matrix products with the expm twin's propagator
    frame = _frame(cq_mhz=3.0, eta=0.2, nucleus="27Al")
    lv = P.rotating_frame_levels(frame, _directions(3))
    u = P.pulse_propagators(lv, 100e3, 1.2e-6, 0.0)
    ms = [2.5, 1.5, 0.5, -0.5, -1.5, -2.5]
    for src, dst in [((1.5, -1.5), (-0.5, 0.5)), ((0.5, -0.5), (-0.5, 0.5)), ((2.5, -2.5), (0.5, 1.5))]:
        got = P.coherence_transfer(u, src, dst)
        for i in range(3):
            el = np.zeros((6, 6), dtype=complex)
            el[ms.index(src[0]), ms.index(src[1])] = 1.0
            ur = ref.propagator(lv[i], 100e3, 1.2e-6, 0.0)
            assert got[i] == pytest.approx((ur @ el @ ur.conj().T)[ms.index(dst[0]), ms.index(dst[1])], abs=1e-10)


def test_coherence_amplitudes_pick_order_p():
    rho = P.density_after_pulses(np.zeros((1, 6)), [(50e3, 3e-6, 0.0)])
    for p in range(-5, 6):
        amp, pairs = P.coherence_amplitudes(rho, p)
        assert amp.shape == (1, 6 - abs(p))
        assert np.all(pairs[:, 0] - pairs[:, 1] == p)
        for (ma, mb), val in zip(pairs, amp[0]):
            assert val == rho[0, int(2.5 - ma), int(2.5 - mb)]


# ---------------------------------------------------------------------------
# physics limits


def test_spin_half_offset_matches_bloch_rotation():
    # Spin 1/2 off resonance: rotation about the effective field n = (nu1, 0, Delta)/nu_eff by
    # 2 pi nu_eff t; the absorptive signal is (nu1/nu_eff) sin(2 pi nu_eff t) (Bloch equations in the
    # rotating frame; A. Abragam, The Principles of Nuclear Magnetism (1961), ch. II, from memory).
    nu1 = 50e3
    for delta, t in [(0.0, 3e-6), (20e3, 4e-6), (-70e3, 2.2e-6)]:
        lv = np.array([[delta / 2, -delta / 2]])
        e = P.transition_excitation(lv, P.PulseSequence("single", nu1, (t,)), [0.5])[0, 0]
        neff = math.hypot(nu1, delta)
        assert e == pytest.approx(nu1 / neff * math.sin(2 * math.pi * neff * t), abs=1e-12)


@pytest.mark.parametrize("spin_nucleus", ["23Na", "27Al", "59Co"])
def test_selective_limit_ct_nutates_at_i_plus_half_nu1(spin_nucleus):
    # nu_Q >> nu1: the central transition behaves as a fictitious spin 1/2 driven at (I + 1/2) nu1, so a
    # single pulse gives sin((I + 1/2) theta) / (I + 1/2), theta = 2 pi nu1 t (D. Fenzke, D. Freude,
    # T. Froehlich, J. Haase, J. Magn. Reson. 57 (1984) 368; A. Samoson, E. Lippmaa, Phys. Rev. B 28 (1983)
    # 6565; both from memory).  B0 along the EFG z axis, eta = 0: the CT has no second-order offset.
    frame = _frame(cq_mhz=12.0, eta=0.0, nucleus=spin_nucleus, field=14.1, aniso=0.0, eta_cs=0.0,
                   euler=(0.0, 0.0, 0.0))
    k = frame.spin + 0.5
    nu1 = 5e3  # nu_Q is several hundred kHz or more
    assert frame.nu_q_hz > 50 * nu1
    lv = P.rotating_frame_levels(frame, [[0.0, 0.0, 1.0]])
    ts = np.linspace(0.0, 2.0 / (k * nu1), 41)[1:]
    e = np.array([P.transition_excitation(lv, P.PulseSequence("single", nu1, (t,)), [0.5])[0, 0] for t in ts])
    theta = 2 * math.pi * nu1 * ts
    np.testing.assert_allclose(e, np.sin(k * theta) / k, atol=2e-3)
    # the nutation frequency itself: the first zero crossing at t = 1 / (2 (I + 1/2) nu1)
    fine = np.linspace(0.9, 1.1, 201) / (2 * k * nu1)
    ef = np.array([P.transition_excitation(lv, P.PulseSequence("single", nu1, (t,)), [0.5])[0, 0] for t in fine])
    t0 = fine[np.argmin(np.abs(ef))]
    assert 1.0 / (2 * t0) == pytest.approx(k * nu1, rel=2e-3)


@pytest.mark.parametrize("spin_nucleus", ["23Na", "27Al"])
def test_selective_echo_is_a_fictitious_spin_half_echo(spin_nucleus):
    # nu_Q >> nu1: the central transition is a fictitious spin 1/2 nutating at k nu1, k = I + 1/2 (S. Vega,
    # J. Chem. Phys. 68 (1978) 5518; A. Wokaun, R. R. Ernst, J. Chem. Phys. 67 (1977) 1752; both from memory).
    # The first pulse leaves the -1 coherence sin(k theta1) / k, the refocusing pulse transfers +1 -> -1 with
    # sin^2(k theta2 / 2) (a spin-1/2 rotation), so the echo is their product.
    frame = _frame(cq_mhz=12.0, eta=0.0, nucleus=spin_nucleus, field=14.1, aniso=0.0, eta_cs=0.0,
                   euler=(0.0, 0.0, 0.0))
    k = frame.spin + 0.5
    nu1 = 5e3
    lv = P.rotating_frame_levels(frame, [[0.0, 0.0, 1.0]])
    for t1, t2 in [(1 / (4 * k * nu1), 1 / (2 * k * nu1)), (0.3 / (k * nu1), 0.35 / (k * nu1)),
                   (0.1 / (k * nu1), 0.6 / (k * nu1))]:
        e = P.transition_excitation(lv, P.PulseSequence("echo", nu1, (t1, t2)), [0.5])[0, 0]
        th1, th2 = 2 * math.pi * nu1 * t1, 2 * math.pi * nu1 * t2
        assert e == pytest.approx(math.sin(k * th1) / k * math.sin(k * th2 / 2) ** 2, abs=2e-3)


def test_non_selective_limit_gives_ideal_relative_intensities():
    # nu1 >> nu_Q and a short pulse: every transition is excited as sin(theta), so the powder intensities
    # keep the ratios I(I+1) - m(m-1) (9 : 8 : 5 for I = 5/2) of the ideal small-tip spectrum (common
    # practice; A. Abragam (1961), matrix elements of I+, from memory).
    frame = _frame(cq_mhz=0.02, eta=0.3, nucleus="27Al", aniso=0.0, eta_cs=0.0, euler=(0.0, 0.0, 0.0))
    oset = select_orientations("octant", 16)
    m_up = [2.5, 1.5, 0.5, -0.5, -1.5]
    seq = P.PulseSequence("single", 200e3, (0.125e-6,))  # 9 degrees
    e = P.site_excitation(frame, oset.vectors, m_up, seq)
    np.testing.assert_allclose(e, math.sin(math.radians(9.0)), rtol=2e-3)
    ideal = np.array([2.5 * 3.5 - m * (m - 1) for m in m_up])
    powder = (oset.weights[:, None] * e).sum(axis=0) * ideal
    np.testing.assert_allclose(powder / powder.sum(), ideal / ideal.sum(), rtol=2e-3)


def test_hard_echo_refocuses_the_central_transition():
    # hard 90 - 180 echo: the CT is fully refocused (excitation 1), the satellites' same-transition echo
    # vanishes (a pi rotation takes |m> to |-m>; only the CT maps onto itself) (M. H. Levitt, Spin
    # Dynamics (2008), rotation of spin states, from memory).
    frame = _frame(cq_mhz=0.001, eta=0.0, aniso=0.0, eta_cs=0.0, euler=(0.0, 0.0, 0.0))
    seq = P.PulseSequence("echo", 250e3, (1e-6, 2e-6), (0.0, 90.0))
    e = P.site_excitation(frame, _directions(5), [2.5, 1.5, 0.5], seq)
    np.testing.assert_allclose(e[:, 2], 1.0, atol=1e-4)
    np.testing.assert_allclose(e[:, :2], 0.0, atol=1e-4)


def test_quantitative_limit_solves_the_selectivity_ratio():
    # the ratio sin((I+1/2) theta) / ((I+1/2) sin theta) of the two limits (Fenzke et al. 1984, from memory)
    for spin in (1.5, 2.5, 3.5, 4.5):
        lim = P.quantitative_tip_limit_deg(spin)
        assert P.ct_selectivity_ratio(spin, lim) == pytest.approx(1 - P.QUANTITATIVE_TOLERANCE, abs=1e-9)
        # below the selective 90 degree pulse pi / (2 (I + 1/2))
        assert lim < 90.0 / (spin + 0.5)
        # and close to the small-angle expansion theta^2 = 6 tol / ((I+1/2)^2 - 1)
        approx = math.degrees(math.sqrt(6 * P.QUANTITATIVE_TOLERANCE / ((spin + 0.5) ** 2 - 1)))
        assert lim == pytest.approx(approx, rel=0.1)


def test_spinning_excitation_is_the_rotor_phase_average():
    frame = _frame()
    seq = P.PulseSequence("single", 60e3, (1.0e-6,))
    dirs = _directions(4)
    theta = math.acos(1 / math.sqrt(3))
    e = P.site_excitation(frame, dirs, [0.5], seq, rotor_angle_rad=theta, spinning=True, rotor_phases=8)
    lv = P.rotating_frame_levels(frame, dirs, rotor_angle_rad=theta, phases=8)
    each = P.transition_excitation(lv, seq, [0.5]).reshape(4, 8)
    np.testing.assert_allclose(e[:, 0], each.mean(axis=1), rtol=0, atol=1e-14)
