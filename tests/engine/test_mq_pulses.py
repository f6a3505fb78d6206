"""Finite-pulse MQMAS excitation x conversion: the fast path against its expm twin, and the physics limits."""

from __future__ import annotations

import numpy as np
import pytest

from powderspin.engine import pulses as P
from powderspin.engine.frequencies import site_frame
from powderspin.model.values import Site
from powderspin.physics.nuclides import get_nuclide
from powderspin.physics.tensors import ShiftTensor
from tests.reference import pulses_expm as ref


def _directions(n, seed=5):
    rng = np.random.default_rng(seed)
    d = rng.normal(size=(n, 3))
    return d / np.linalg.norm(d, axis=1)[:, None]


def _frame(nucleus, cq_mhz, eta=0.3, aniso=40.0, euler=(10.0, 40.0, 80.0), field=14.1):
    site = Site(shift=ShiftTensor(0.0, aniso, 0.2), cq_mhz=cq_mhz, eta_q=eta, euler_deg=euler)
    return site_frame(site, get_nuclide(nucleus), field)


def _first_order_levels(spin, nu_q_lab):
    """E1(m) = (nu_Q / 6)(3 m^2 - I(I+1)) V_zz(lab) per row (DEVELOPERS.md, level energies in high field)."""
    mz = spin - np.arange(int(round(2 * spin)) + 1)
    return np.asarray(nu_q_lab, dtype=float)[:, None] / 6.0 * (3.0 * mz ** 2 - spin * (spin + 1.0))[None, :]


def _seq(kind="two-pulse", order=3, echo=-3, pathway="echo", nu1=100e3, t1=3.5e-6, t2=1.2e-6, sel=(10e3, 12e-6)):
    if kind == "two-pulse":
        sel = (None, None)
    return P.MultipleQuantumPulses(kind, order, echo, pathway, nu1, t1, t2, sel[0], sel[1])


# ---------------------------------------------------------------------------
# the fast path against the slow density-matrix twin (tests/reference/pulses_expm.py: scipy.linalg.expm,
# literal spin matrices, projectors for the pathway selection)


@pytest.mark.parametrize("nucleus,cq,order", [("23Na", 2.5, 3), ("27Al", 5.0, 3), ("27Al", 5.0, 5)])
@pytest.mark.parametrize("kind", ["two-pulse", "z-filter"])
def test_pathway_amplitudes_match_expm_twin(nucleus, cq, order, kind):
    frame = _frame(nucleus, cq)
    lv = P.rotating_frame_levels(frame, _directions(5), carrier_offset_hz=700.0)
    seq = _seq(kind, order, order, nu1=90e3, t1=3.1e-6, t2=1.1e-6, sel=(12e3, 9e-6))
    fast = P.mq_pathway_amplitudes(lv, seq)
    for i in range(lv.shape[0]):
        slow = ref.mq_pathway_signals(lv[i], kind, 90e3, 3.1e-6, 1.1e-6, order, (12e3, 9e-6))
        np.testing.assert_allclose(fast[i], slow, rtol=0, atol=1e-10)
    assert np.abs(fast).max() > 1e-3  # not a comparison of zeros


def test_efficiency_is_the_phased_amplitude_over_the_hard_ct_signal():
    # efficiency = Re(i A) s / (c^2 / 2), c = I + 1/2: the reference is the CT signal -i c^2 / 2 of a hard 90
    # degree pulse (powderspin.engine.pulses module notes); checked on the twin's amplitudes
    frame = _frame("27Al", 4.0)
    lv = P.rotating_frame_levels(frame, _directions(3))
    for pathway in ("echo", "antiecho", "both"):
        seq = _seq("z-filter", 3, 3, pathway)
        e = P.mq_efficiency(lv, seq)
        s_plus, s_minus = P.pathway_signs(2.5, seq)
        for i in range(3):
            a_plus, a_minus = (1j * ref.mq_pathway_signals(lv[i], "z-filter", 100e3, 3.5e-6, 1.2e-6, 3,
                                                           (10e3, 12e-6))).real / (3.0 ** 2 / 2)
            want = {"echo": s_plus * a_plus, "antiecho": s_minus * a_minus,
                    "both": 0.5 * (s_plus * a_plus + s_minus * a_minus)}[pathway]
            assert e[i] == pytest.approx(want, abs=1e-12)


# ---------------------------------------------------------------------------
# the limits


@pytest.mark.parametrize("spin", [1.5, 2.5])
def test_hard_pulse_limit_depends_on_orientation_only_through_nu_q_lab_squared(spin):
    # nu1 >> nu_Q.  Multiple-quantum coherence cannot be excited by RF alone: Iz is a rank-1 tensor and a hard
    # rotation keeps its rank, so |p| >= 2 needs the quadrupolar term.  By average Hamiltonian theory
    # (U. Haeberlen, J. S. Waugh, Phys. Rev. 175 (1968) 453) the first-order term [T2, T1] holds rank 2 only
    # and rank 3 first appears at second order in nu_Q / nu1 (the rank rule for commutators of spherical
    # tensor operators, e.g. M. Mehring, Principles of High Resolution NMR in Solids (1983); from memory),
    # while conversion of rank 3 into the CT's -1 element is zeroth order.  So the efficiency tends to
    # K (nu_Q V_zz(lab) / nu1)^2: it is orientation-independent ONLY after dividing by V_zz(lab)^2 (the
    # efficiency itself vanishes in this limit).  Checked: within 1 % of the largest at nu_Q = nu1 / 100, and
    # quartered when nu_Q is halved.
    nu1 = 100e3
    vzz = np.linspace(-1.0, 1.0, 41)
    vzz = vzz[np.abs(vzz) > 0.05]
    for kind, echo in (("two-pulse", -3 if spin == 1.5 else 3), ("z-filter", 3)):
        seq = _seq(kind, 3, echo, "both", nu1=nu1, t1=2.0e-6, t2=1.5e-6, sel=(nu1, 1.0 / (4 * (spin + 0.5) * nu1)))
        e = P.mq_efficiency(_first_order_levels(spin, vzz * nu1 / 100), seq)
        norm = e / vzz ** 2
        assert np.ptp(norm) <= 1e-2 * np.abs(norm).max()
        e_half = P.mq_efficiency(_first_order_levels(spin, vzz * nu1 / 200), seq)
        np.testing.assert_allclose(e_half / e, 0.25, rtol=2e-2)


def test_selective_limit_triple_quantum_nutation_spin_three_halves():
    # nu1 << nu_Q, I = 3/2, on resonance, first-order splitting nu_Q = E(3/2) - E(1/2): the pair |3/2>, |-3/2>
    # is a fictitious spin 1/2 driven through the RF-dressed CT states |1/2> +- |-1/2> (energies -nu_Q/2 +-
    # nu1) with the coupling (3/8) nu1^2 [1/(nu_Q - nu1) - 1/(nu_Q + nu1)], so it nutates at
    # nu_3Q = (3/2) nu1^3 / (nu_Q^2 - nu1^2) ~ (3/2) nu1^3 / nu_Q^2 (second-order perturbation theory, derived
    # here; the nu1^3 / nu_Q^2 law of selective triple-quantum excitation: S. Vega, Y. Naor, J. Chem. Phys. 75
    # (1981) 75; A. Wokaun, R. R. Ernst, J. Chem. Phys. 67 (1977) 1752; both from memory).  The 3Q element
    # after the excitation pulse is (3/2) sin(2 pi nu_3Q t), and the pathway amplitude with a fixed conversion
    # pulse is proportional to it.
    nu1, nu_q = 5e3, 250e3
    lv = _first_order_levels(1.5, [nu_q])
    nu3 = 1.5 * nu1 ** 3 / (nu_q ** 2 - nu1 ** 2)
    ts = np.linspace(0.05, 0.95, 10) / nu3
    rho3 = np.array([abs(P.density_after_pulses(lv, [(nu1, t, 0.0)])[0, 0, 3]) for t in ts])
    np.testing.assert_allclose(rho3, 1.5 * np.abs(np.sin(2 * np.pi * nu3 * ts)), atol=1.5e-2)
    # through the pathway (fixed conversion pulse and receiver phase): its absorptive part over that at a
    # reference excitation length follows sin(2 pi nu_3Q t)
    def absorptive(t):
        return (1j * P.mq_pathway_amplitudes(lv, _seq("two-pulse", 3, -3, "echo", nu1, t, 1.0 / (12 * nu1)))).real[0]

    eff = np.array([absorptive(t) for t in ts])
    e0 = absorptive(0.25 / nu3)
    np.testing.assert_allclose(eff / e0, np.repeat(np.sin(2 * np.pi * nu3 * ts)[:, None], 2, axis=1), atol=2e-2)


@pytest.mark.parametrize("spin", [1.5, 2.5])
def test_selective_z_filter_pulse_nutates_at_i_plus_half_nu1(spin):
    # the z-filter's last pulse, nu1_sel << nu_Q: CT nutation at (I + 1/2) nu1_sel, so the efficiency follows
    # sin((I + 1/2) theta3), theta3 = 2 pi nu1_sel t3 (D. Fenzke, D. Freude, T. Froehlich, J. Haase, J. Magn.
    # Reson. 57 (1984) 368, from memory; the z-filter: J.-P. Amoureux, C. Fernandez, S. Steuernagel, J. Magn.
    # Reson. A 123 (1996) 116, from memory)
    nu_sel, k = 2e3, spin + 0.5
    lv = _first_order_levels(spin, [600e3])
    ts = np.linspace(0.1, 1.9, 7) / (2 * k * nu_sel)
    e = np.array([P.mq_efficiency(lv, _seq("z-filter", 3, 3, "both", 150e3, 3e-6, 1e-6, (nu_sel, t)))[0] for t in ts])
    e90 = P.mq_efficiency(lv, _seq("z-filter", 3, 3, "both", 150e3, 3e-6, 1e-6, (nu_sel, 1 / (4 * k * nu_sel))))[0]
    np.testing.assert_allclose(e / e90, np.sin(2 * np.pi * k * nu_sel * ts), atol=1e-2)


@pytest.mark.parametrize("spin", [1.5, 2.5])
def test_z_filter_pathways_agree_two_pulse_pathways_do_not(spin):
    # z-filter: the two pathways meet in the populations, where the +p and -p contributions are complex
    # conjugates (rho is Hermitian); an ideal CT-selective last pulse then gives both the same absorptive
    # amplitude, so echo, antiecho and both combined give the same spectrum (J.-P. Amoureux, C. Fernandez,
    # S. Steuernagel, J. Magn. Reson. A 123 (1996) 116, from memory).  Checked where the selective pulse is
    # ideal: first-order levels (no CT offset), nu1_sel <= nu_Q V_zz / 50; within 1 % of the largest.
    # (With the second-order CT shift comparable to nu1_sel, e.g. 23Na, C_Q 2.5 MHz, 14.1 T, 10 kHz, the two
    # differ per crystallite by up to about 10 % of the largest: "both" is then the right choice.)
    # Two-pulse: the conversion with |Delta p| = 2 (-p -> -1) is more efficient than that with |Delta p| = 4
    # (from memory; the asymmetry the z-filter removes).
    vzz = np.linspace(0.3, 1.0, 15)
    lv = _first_order_levels(spin, 500e3 * vzz)
    z = {pw: P.mq_efficiency(lv, _seq("z-filter", 3, 3, pw, 100e3, 3e-6, 1e-6, (3e3, 1 / (4 * (spin + 0.5) * 3e3))))
         for pw in ("echo", "antiecho", "both")}
    top = np.abs(z["both"]).max()
    assert top > 1e-3
    assert np.abs(z["echo"] - z["antiecho"]).max() <= 1e-2 * top
    np.testing.assert_allclose(z["both"], 0.5 * (z["echo"] + z["antiecho"]), atol=1e-14)
    two = P.mq_pathway_amplitudes(lv, _seq("two-pulse", 3, 3, "both", 100e3, 3e-6, 1e-6))
    assert np.abs(two[:, 1]).mean() > 1.5 * np.abs(two[:, 0]).mean()


def test_echo_pathway_follows_the_sign_of_r():
    # echo: t1 order +p when R > 0 (I = 5/2, 3QMAS: R = 19/12), -p when R < 0 (I = 3/2: R = -7/9)
    # (S. E. Ashbrook, S. Wimperis, Prog. Nucl. Magn. Reson. Spectrosc. 45 (2004) 53, from memory)
    from powderspin.engine.two_dimensional import mq_pulses
    from powderspin.model.values import Measurement
    from powderspin.physics.multiple_quantum import two_dimensional_scale

    m = Measurement(14.1, spinning_hz="inf", experiment="mqmas", mq_pulses="two-pulse", mq_rf_khz=100.0,
                    mq_excite_us=3.0, mq_convert_us=1.0)
    assert mq_pulses(m, get_nuclide("23Na"), two_dimensional_scale(1.5, "mqmas", 3)).t1_orders == (-3,)
    assert mq_pulses(m, get_nuclide("27Al"), two_dimensional_scale(2.5, "mqmas", 3)).t1_orders == (3,)
    assert mq_pulses(m, get_nuclide("27Al"), two_dimensional_scale(2.5, "mqmas", 5)).t1_orders == (-5,)


@pytest.mark.parametrize("spin", [1.5, 2.5, 3.5, 4.5])
@pytest.mark.parametrize("kind", ["two-pulse", "z-filter"])
def test_receiver_signs_are_those_of_short_pulses(spin, kind):
    # the convention of pathway_signs: each pathway positive when every pulse is short (10 degrees; nu_Q = nu1 / 10;
    # a selective pulse at nu_Q / 100), propagated here
    nu1 = 1e5
    t = 10.0 / 360.0 / nu1
    nu_sel = nu1 / 1000.0
    seq = _seq(kind, 3, 3, "both", nu1, t, t, (nu_sel, 10.0 / 360.0 / ((spin + 0.5) * nu_sel)))
    a = (1j * P.mq_pathway_amplitudes(_first_order_levels(spin, [nu1 / 10.0]), seq))[0]
    assert np.all(np.abs(a.imag) < 1e-6 * np.abs(a.real))
    assert P.pathway_signs(spin, seq) == tuple(float(np.sign(v)) for v in a.real)


# ---------------------------------------------------------------------------
# the fused kernel: its tridiagonal eigensolver against LAPACK, and the pathways against the expm twin for every
# spin, order and corner case


def test_tridiagonal_eigensolver_matches_numpy():
    # implicit QL with Wilkinson's shift (engine/_kernels.py) against numpy.linalg.eigh (LAPACK): random matrices,
    # the selective-pulse case (off-diagonal 1e-3 of the diagonal spread), exact degeneracies, no coupling at all
    from powderspin.engine import _kernels as K

    rng = np.random.default_rng(11)
    cases = []
    for d in (2, 3, 4, 6, 8, 10):
        cases.append((rng.normal(size=d) * 1e6, rng.normal(size=d - 1) * 1e5))
        cases.append((rng.normal(size=d) * 1e7, rng.normal(size=d - 1) * 1e4))
        cases.append((np.zeros(d), np.full(d - 1, 3e4)))
        cases.append((np.repeat(rng.normal(size=1) * 1e6, d), np.zeros(d - 1)))
        cases.append((np.r_[np.full(d // 2, 2e5), np.full(d - d // 2, -2e5)], np.r_[np.zeros(d - 2), 1e-3]))
    for diag, off in cases:
        d = diag.size
        a = np.diag(diag) + np.diag(off, 1) + np.diag(off, -1)
        lam = np.empty(d)
        vec = np.empty((d, d))
        K._tridiagonal_eigen(diag.copy(), np.r_[off, 0.0], lam, vec)
        ref_lam = np.linalg.eigvalsh(a)
        scale = max(np.abs(a).max(), 1e-300)
        np.testing.assert_allclose(np.sort(lam), ref_lam, rtol=0, atol=1e-13 * scale)
        np.testing.assert_allclose(vec @ np.diag(lam) @ vec.T, a, rtol=0, atol=1e-13 * scale)
        np.testing.assert_allclose(vec.T @ vec, np.eye(d), rtol=0, atol=1e-13)


@pytest.mark.parametrize("nucleus,cq,orders", [("23Na", 2.0, (3,)), ("17O", 6.0, (3, 5)), ("59Co", 20.0, (3, 5, 7)),
                                               ("93Nb", 30.0, (3, 5, 7, 9))])
def test_fused_pathway_kernel_matches_expm_twin_for_every_spin_and_order(nucleus, cq, orders):
    # I = 3/2, 5/2, 7/2, 9/2; off resonance; two-pulse and z-filter; with the twin of tests/reference/pulses_expm.py
    # (scipy.linalg.expm of the literal Hamiltonian) to 1e-10 for every orientation
    frame = _frame(nucleus, cq, eta=0.6)
    lv = P.rotating_frame_levels(frame, _directions(4, seed=9), rotor_angle_rad=0.9553, phases=2,
                                 carrier_offset_hz=-2500.0)
    for order in orders:
        for kind in ("two-pulse", "z-filter"):
            seq = _seq(kind, order, order, nu1=120e3, t1=2.7e-6, t2=0.9e-6, sel=(8e3, 14e-6))
            fast = P.mq_pathway_amplitudes(lv, seq)
            for i in range(lv.shape[0]):
                slow = ref.mq_pathway_signals(lv[i], kind, 120e3, 2.7e-6, 0.9e-6, order, (8e3, 14e-6))
                np.testing.assert_allclose(fast[i], slow, rtol=0, atol=1e-10)
            assert np.abs(fast).max() > (1e-4 if order < 9 else 1e-6)  # not zeros (9Q is weakly excited)


def test_fused_pathway_kernel_corner_cases_match_expm_twin():
    # zero-length pulses, a selective pulse of zero field, and levels with exact degeneracies (B0 along the EFG's
    # principal axes, no shift): against the expm twin
    frame = _frame("27Al", 5.0, eta=0.0, aniso=0.0, euler=(0.0, 0.0, 0.0))
    lv = P.rotating_frame_levels(frame, np.eye(3))
    for t1, t2, sel in ((0.0, 1e-6, (10e3, 12e-6)), (3e-6, 0.0, (10e3, 12e-6)), (3e-6, 1e-6, (0.0, 12e-6)),
                        (3e-6, 1e-6, (10e3, 0.0))):
        for kind in ("two-pulse", "z-filter"):
            fast = P.mq_pathway_amplitudes(lv, _seq(kind, 3, 3, nu1=100e3, t1=t1, t2=t2, sel=sel))
            for i in range(3):
                slow = ref.mq_pathway_signals(lv[i], kind, 100e3, t1, t2, 3, sel)
                np.testing.assert_allclose(fast[i], slow, rtol=0, atol=1e-10)
