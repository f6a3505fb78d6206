"""Two-dimensional MQMAS/STMAS lines: the binning kernel against its twin, sheared F1 against exact diagonalisation."""

from __future__ import annotations

import math

import numpy as np
import pytest

from powderspin.engine.frequencies import SiteFrame
from powderspin.engine.lineshape import Axis
from powderspin.engine.site_lines import compute_lines, site_job
from powderspin.engine.two_dimensional import bin_two_dimensional, compute_f1_lines, t1_offsets
from powderspin.model.values import Measurement, Site
from powderspin.physics.multiple_quantum import isotropic_shifts_ppm, two_dimensional_scale
from powderspin.physics.nuclides import get_nuclide
from powderspin.physics.tensors import ShiftTensor, efg_principal
from tests.reference.binning2d_numpy import bin_triangles_2d
from tests.reference.exact_numpy import hamiltonian, spin_matrices

MAGIC = math.acos(1 / math.sqrt(3))


def _lines(meas, site, nucleus="27Al", method="perturbation"):
    return compute_lines(site_job(site, meas, get_nuclide(nucleus), method))


@pytest.mark.parametrize("rate,angle,experiment", [("inf", 54.7356, "mqmas"), (12000.0, 54.7356, "mqmas"),
                                                   ("inf", 55.2, "stmas"), (20000.0, 54.0, "mqmas")])
def test_kernel_matches_slow_twin(rate, angle, experiment):
    """_bin_tent_2d against tests/reference/binning2d_numpy.py (exact polygon clipping in F2, hats in F1)."""
    site = Site(shift=ShiftTensor(20.0, 30.0, 0.4), cq_mhz=4.0, eta_q=0.3, euler_deg=(10.0, 40.0, 0.0))
    meas = Measurement(11.7, spinning_hz=rate, rotor_angle_deg=angle, orientations=3, rotor_phases=16
                       if rate != "inf" else "auto")
    ct = _lines(meas, site)
    f1 = compute_f1_lines(ct, two_dimensional_scale(2.5, experiment, 3))
    nu = get_nuclide("27Al").larmor_hz(11.7)
    lo, hi = ct.frequency_range()
    a2 = Axis(0.5 * (lo + hi), 1.4 * (hi - lo) + 4 * (ct.rate_hz if math.isfinite(ct.rate_hz) else 0), 48, nu)
    f1lo, f1hi = float(f1.f1_hz.min()), float(f1.f1_hz.max())
    a1 = Axis(0.5 * (f1lo + f1hi), max(1.3 * (f1hi - f1lo), 500.0), 24, nu)
    got = bin_two_dimensional(a2, a1, ct, f1)
    oset = ct.orientations
    ref = bin_triangles_2d(ct.mean[:, 0], ct.intensity[:, 0, :], ct.weights[:, 0], f1.f1_hz, f1.pair_weights,
                           oset.triangles, oset.triangle_weights, ct.rate_hz if math.isfinite(ct.rate_hz) else 0.0,
                           a2.hz, a1.hz, cutoff=1e-13)
    assert np.abs(got - ref).max() <= 1e-12 * max(1.0, ref.max())
    # the F1 hats sum to 1: the F2 projection is the 1D binning of the same lines
    from powderspin.engine.lineshape import bin_lines
    one_d = bin_lines(a2, ct.mean, ct.intensity, ct.weights, oset, "interpolate",
                      ct.rate_hz if math.isfinite(ct.rate_hz) else 0.0, 1e-13)
    if f1lo > a1.hz[0] and f1hi < a1.hz[-1]:
        assert np.allclose(got.sum(axis=0), one_d, atol=1e-13)


def _cone(n, theta, phases):
    n = n / np.linalg.norm(n)
    t = np.array([1.0, 0.0, 0.0]) if abs(n[0]) < 0.9 else np.array([0.0, 1.0, 0.0])
    u = np.cross(n, t)
    u /= np.linalg.norm(u)
    v = np.cross(n, u)
    phi = 2 * np.pi * np.arange(phases) / phases
    return (math.cos(theta) * n[None, :] + math.sin(theta) * (np.cos(phi)[:, None] * u + np.sin(phi)[:, None] * v))


def _reference_f1(spin, nu0, cq, eta, delta, axes, scale, theta=MAGIC, phases=32):
    """Sheared F1 (Hz) per rotor axis from plain numpy eigh of the full Zeeman + quadrupolar + shift Hamiltonian
    (tests/reference/exact_numpy.py), levels labelled by <Iz>, averaged over a rotor period."""
    _, _, iz, _ = spin_matrices(spin)
    out = []
    for n in axes:
        t1 = np.zeros(len(scale.t1_pairs))
        ct = 0.0
        for b in _cone(n, theta, phases):
            e, u = np.linalg.eigh(hamiltonian(spin, nu0, cq, eta, delta, b))
            mz = np.einsum("ij,i->j", np.abs(u) ** 2, np.real(np.diag(iz)))
            order = np.argsort(-mz)

            def level(m):
                return e[order[int(round(spin - m))]]
            ct += (level(0.5) - level(-0.5) - nu0) / phases
            for k, (a, c) in enumerate(scale.t1_pairs):
                t1[k] += (level(a) - level(c) - (a - c) * nu0) / phases
        out.append((t1 - scale.ratio * ct) / (scale.order - scale.ratio))
    return np.array(out)


CASES = [(1.5, "mqmas", 3), (2.5, "mqmas", 3), (2.5, "mqmas", 5), (3.5, "mqmas", 3), (3.5, "mqmas", 5),
         (4.5, "mqmas", 3), (4.5, "mqmas", 5), (1.5, "stmas", 3), (2.5, "stmas", 3), (3.5, "stmas", 3),
         (4.5, "stmas", 3)]


@pytest.mark.parametrize("spin,experiment,order", CASES)
def test_sheared_f1_against_exact_diagonalisation(spin, experiment, order):
    """Per crystallite, the rotor-averaged sheared F1 frequency from exact diagonalisation (numpy eigh, full
    Hamiltonian with a shift tensor) approaches the isotropic F1 of second-order theory, with an error that falls
    at least as (C_Q/nu0)^3 relative to nu0 (design.md section 5; the third-order terms are the first neglected).
    This checks R and the F1 centre of gravity delta_iso + k_F1 delta_QIS of powderspin.physics.multiple_quantum;
    the engine's exact route gives the same numbers as the numpy reference.  The shift is isotropic here, and it
    enters the Hamiltonian as a change of the Zeeman frequency, nu0 (1 + 1e-6 delta_iso), which scales the
    second-order terms (DEVELOPERS.md, "Hamiltonian of the exact route"); the prediction uses that frequency.
    Measured slopes (log error / log C_Q): about 4 for MQMAS (the third-order terms cancel for the symmetric
    transitions and the CT at the magic angle), about 3 for STMAS (the satellites keep a third-order term)."""
    rng = np.random.default_rng(11)
    axes = rng.normal(size=(6, 3))
    axes /= np.linalg.norm(axes, axis=1)[:, None]
    nu0, eta, iso = 1.0e8, 0.45, 25.0
    delta = np.diag([iso, iso, iso])
    nu_eff = nu0 * (1 + 1e-6 * iso)
    scale = two_dimensional_scale(spin, experiment, order)
    ratios = np.array([0.005, 0.01, 0.02])
    errs = []
    for r in ratios:
        cq = r * nu0
        ref = _reference_f1(spin, nu0, cq, eta, delta, axes, scale)
        f1_hz = iso * 1e-6 * nu0 + isotropic_shifts_ppm(scale, cq / 1e6, eta, nu_eff)[0] * 1e-6 * nu_eff
        errs.append(np.abs(ref - f1_hz).max() / nu0)
        if r == ratios[-1]:
            frame = SiteFrame(spin, nu0, cq / (2 * spin * (2 * spin - 1)), efg_principal(eta), delta, "hemisphere")
            t1 = t1_offsets(frame, axes, scale.t1_pairs, method="exact", rotor_angle_rad=MAGIC, spinning=True)
            ct = t1_offsets(frame, axes, [(0.5, -0.5)], method="exact", rotor_angle_rad=MAGIC, spinning=True)
            ours = (t1 - scale.ratio * ct) / (scale.order - scale.ratio)
            assert np.allclose(ours, ref, rtol=0, atol=1e-6 * nu0 * r ** 2)
    slope = np.polyfit(np.log(ratios), np.log(errs), 1)[0]
    print(f"I = {spin}, {experiment} p = {scale.order}: F1 error slope {slope:.2f}")
    assert slope > 2.7, (errs, slope)
    # the second-order term itself is of order (C_Q/nu0)^2 nu0: the error is far below it
    assert errs[0] < 0.05 * ratios[0] ** 2


def test_perturbative_f1_is_isotropic_at_the_magic_angle_and_spreads_off_it():
    """At the magic angle and infinite rate the rank-4 parts cancel in the sheared F1 (every crystallite at the
    isotropic position, Frydman and Harwood 1995); a mis-set rotor angle leaves rank-2 parts (P2(cos theta) != 0),
    which spread F1 -- much more in STMAS, whose satellites also keep first-order frequency (Gan 2000)."""
    site = Site(shift=ShiftTensor(10.0), cq_mhz=5.0, eta_q=0.2)
    nu = get_nuclide("27Al").larmor_hz(9.4)
    magic = _lines(Measurement(9.4, spinning_hz="inf", orientations=8), site)
    for exp in ("mqmas", "stmas"):
        s = two_dimensional_scale(2.5, exp, 3)
        f1 = compute_f1_lines(magic, s)
        iso = isotropic_shifts_ppm(s, 5.0, 0.2, nu, 0.0)[0] * 1e-6 * nu
        assert np.allclose(f1.f1_hz, iso, rtol=1e-10, atol=1e-6)
    off = _lines(Measurement(9.4, spinning_hz="inf", rotor_angle_deg=54.7356 + 0.05, orientations=8), site)
    spread = {exp: np.ptp(compute_f1_lines(off, two_dimensional_scale(2.5, exp, 3)).f1_hz) for exp in ("mqmas",
                                                                                                     "stmas")}
    assert spread["mqmas"] > 0.1 and spread["stmas"] > 30 * spread["mqmas"]


def test_excitation_hook_weights_each_crystallite():
    """The hook for finite-pulse excitation: per-orientation efficiencies multiply the weights (linear)."""
    ct = _lines(Measurement(11.7, spinning_hz="inf", orientations=6), Site(cq_mhz=3.0))
    f1 = compute_f1_lines(ct, two_dimensional_scale(2.5, "mqmas", 3))
    nu = get_nuclide("27Al").larmor_hz(11.7)
    lo, hi = ct.frequency_range()
    a2 = Axis(0.5 * (lo + hi), 1.5 * (hi - lo), 32, nu)
    a1 = Axis(float(f1.f1_hz.mean()), 2000.0, 16, nu)
    ideal = bin_two_dimensional(a2, a1, ct, f1)
    assert np.allclose(bin_two_dimensional(a2, a1, ct, f1, excitation=np.ones(ct.orientations.size)), ideal)
    eff = np.random.default_rng(3).random(ct.orientations.size)
    half = bin_two_dimensional(a2, a1, ct, f1, excitation=0.5 * eff)
    assert np.allclose(2 * half, bin_two_dimensional(a2, a1, ct, f1, excitation=eff))
    with pytest.raises(ValueError, match="excitation must be"):
        bin_two_dimensional(a2, a1, ct, f1, excitation=np.ones(3))


@pytest.mark.parametrize("experiment,order", [("mqmas", 4), ("stmas", 3)])
def test_exact_f1_width_comes_from_higher_orders_only(experiment, order):
    """With no broadening, the perturbative F1 line of a site has zero width at the magic angle (second order
    refocused); on the exact route its spread over the powder comes from the neglected orders, growing as
    (C_Q/nu0)^4 for MQMAS (no third-order term for symmetric transitions and the CT) and (C_Q/nu0)^3 for STMAS
    (the satellites' third-order term) -- measured slopes, cf. test_sheared_f1_against_exact_diagonalisation."""
    nuc = get_nuclide("27Al")
    spreads = []
    cqs = np.array([6.0, 9.0, 13.5])
    for cq in cqs:
        job = site_job(Site(cq_mhz=float(cq), eta_q=0.3), Measurement(9.4, spinning_hz="inf", orientations=6), nuc,
                       "exact")
        ct = compute_lines(job)
        f1 = compute_f1_lines(ct, two_dimensional_scale(2.5, experiment, 3)).f1_hz[:, 0]
        w = ct.orientations.weights
        mean = (w * f1).sum() / w.sum()
        spreads.append(np.sqrt((w * (f1 - mean) ** 2).sum() / w.sum()))
    slope = np.polyfit(np.log(cqs), np.log(spreads), 1)[0]
    assert abs(slope - order) < 0.3, (spreads, slope)
    perturbative = compute_f1_lines(_lines(Measurement(9.4, spinning_hz="inf", orientations=6),
                                           Site(cq_mhz=13.5, eta_q=0.3)), two_dimensional_scale(2.5, experiment, 3))
    assert np.ptp(perturbative.f1_hz) < 1e-6 * spreads[-1] + 1e-9


# --------------------------------------------------------------------------- free (not synchronised) t1

def test_band_amplitudes_match_the_sideband_kernel():
    """|F_n|^2 of the complex band amplitudes equals the 1D sideband intensities of _sideband_intensities."""
    from powderspin.engine.spinning import rotor_lines
    from powderspin.engine.two_dimensional import band_amplitudes
    rng = np.random.default_rng(2)
    t = np.arange(64) / 64.0
    traj = np.zeros((5, 1, 64))
    for k in range(1, 5):
        traj += rng.normal(0, 2000.0 / k, (5, 1, 1)) * np.cos(2 * np.pi * k * t + rng.random((5, 1, 1)) * 6)
    _, amp = rotor_lines(traj, 3000.0)
    f = band_amplitudes(traj, 3000.0)
    assert np.allclose(np.abs(f) ** 2, amp, atol=1e-12)


def test_band_pair_weights_against_a_time_domain_gamma_average():
    """The 2D amplitudes reproduce the rotor-phase average of exp(i Phi_A(gamma, t1)) exp(i Phi_B(gamma + w t1,
    t2)), computed directly from the phase integrals of two trajectories at many rotor phases (the derivation of
    M. H. Levitt, J. Magn. Reson. 82 (1989) 427, carried to two time variables)."""
    from powderspin.engine.two_dimensional import band_amplitudes, band_pair_weights
    rate = 2000.0
    p = 64
    ph = 2 * np.pi * np.arange(p) / p
    a_c = [(1, 1500.0, 0.3), (2, -700.0, 1.1)]   # (harmonic k, amplitude Hz, phase)
    b_c = [(1, 900.0, -0.4), (2, 400.0, 2.0), (4, 150.0, 0.0)]

    def nu(coefs, phi):
        return sum(a * np.cos(k * phi + d) for k, a, d in coefs)

    def phase(coefs, g, t):  # 2 pi * integral_0^t nu(g + w tau) d tau, analytic
        w = 2 * np.pi * rate
        return sum(2 * np.pi * a * (np.sin(k * (g + w * t) + d) - np.sin(k * g + d)) / (k * w) for k, a, d in coefs)

    s = band_pair_weights(band_amplitudes(nu(a_c, ph), rate), band_amplitudes(nu(b_c, ph), rate))
    n = np.fft.fftfreq(p, 1.0 / p)
    gam = 2 * np.pi * np.arange(720) / 720
    for t1, t2 in [(0.0, 0.0), (1.3e-4, 0.0), (0.0, 2.1e-4), (3.7e-4, 1.9e-4), (7.1e-4, 4.4e-4)]:
        direct = np.mean(np.exp(1j * phase(a_c, gam, t1)) * np.exp(1j * phase(b_c, gam + 2 * np.pi * rate * t1, t2)))
        bands = (s * np.exp(2j * np.pi * rate * (n[:, None] * t1 + n[None, :] * t2))).sum()
        assert abs(bands - direct) < 1e-9


def test_pair_kernel_matches_slow_twin_and_free_t1_projects_onto_the_1d_ct():
    """_bin_tent_2d_pairs against tests/reference/binning2d_numpy.py (bin_pairs_2d); with an F1 axis that holds
    every F1 band, summing over F1 gives the synchronised spectrum (the amplitudes' sum over n1 is |B_n2|^2)."""
    from powderspin.engine.two_dimensional import free_t1_bands
    from tests.reference.binning2d_numpy import bin_pairs_2d
    ct = _lines(Measurement(9.4, spinning_hz=8000.0, orientations=3), Site(cq_mhz=4.0, eta_q=0.3))
    f1 = compute_f1_lines(ct, two_dimensional_scale(2.5, "mqmas", 3))
    fr = free_t1_bands(ct, f1)
    nu = get_nuclide("27Al").larmor_hz(9.4)
    lo, hi = ct.frequency_range()
    a2 = Axis(0.5 * (lo + hi), 1.3 * (hi - lo), 96, nu)
    a1 = Axis(float(f1.f1_hz.mean()), 400000.0, 64, nu)
    got = bin_two_dimensional(a2, a1, ct, fr)
    oset = ct.orientations
    ref = bin_pairs_2d(ct.mean[:, 0], fr.f1_hz, fr.band_weights, fr.band_f2_hz, fr.band_f1_hz, ct.weights[:, 0],
                       fr.pair_weights, oset.triangles, oset.triangle_weights, a2.hz, a1.hz, cutoff=1e-13)
    assert np.abs(got - ref).max() <= 1e-12 * np.abs(ref).max()
    sync = bin_two_dimensional(a2, a1, ct, f1)
    assert np.abs(got.sum(axis=0) - sync.sum(axis=0)).max() <= 1e-9 * sync.sum(axis=0).max()
    assert got.min() < 0 < got.max()   # signed pair weights: the joint spectrum is not positive everywhere
