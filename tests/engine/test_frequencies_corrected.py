"""The fast exact route (second order + a fitted correction) against full diagonalisation.

The reference throughout is exact diagonalisation of the full Hamiltonian with numpy
(``tests/reference/exact_numpy.py``) at every rotor phase; the accuracy promised in the
README (exact offsets wherever second order is off by more than half an axis point) needs
the fast route's error far below half a point, and it is checked here to 1e-3 Hz.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from powderspin.engine import _kernels as _k
from powderspin.engine.frequencies import (
    corrected_exact_offsets,
    correction_tolerance_hz,
    exact_offsets,
    fit_exact_correction,
    site_frame,
)
from powderspin.engine.spinning import rotor_lines, trajectory_sidebands
from powderspin.model.modelfile import make_site
from powderspin.physics.nuclides import get_nuclide
from tests.reference import polynomial_numpy, sidebands_numpy
from tests.reference.exact_numpy import exact_transitions

MAGIC = math.acos(1.0 / math.sqrt(3.0))

CASES = [
    # (nucleus, field T, site keys, transitions)
    ("93Nb", 9.4, dict(cq_mhz=25.0, eta_q=0.3), [0.5]),
    ("27Al", 9.4, dict(cq_mhz=10.0, eta_q=0.3), [2.5, 1.5, 0.5, -0.5, -1.5]),
    ("27Al", 9.4, dict(cq_mhz=3.4, eta_q=0.3), [2.5, 1.5, 0.5, -0.5, -1.5]),
    # non-coaxial shift tensor (hemisphere symmetry), isotropic shift carried in the Hamiltonian
    ("27Al", 9.4, dict(cq_mhz=10.0, eta_q=0.7, shift_ppm=200.0, span_ppm=300.0, skew=0.3,
                       euler_deg=[10.0, 40.0, 70.0]), [2.5, 0.5]),
    ("23Na", 4.7, dict(cq_mhz=4.0, eta_q=0.9), [1.5, 0.5, -0.5]),
    ("17O", 9.4, dict(cq_mhz=8.0, eta_q=0.1), [2.5, 0.5]),
]


def _dirs(seed, n):
    rng = np.random.default_rng(seed)
    d = rng.normal(size=(n, 3))
    return d / np.linalg.norm(d, axis=1)[:, None]


@pytest.mark.parametrize("nucleus,field,keys,ms", CASES)
def test_corrected_route_matches_full_diagonalisation_at_every_phase(nucleus, field, keys, ms):
    # Source: exact diagonalisation with numpy.linalg.eigh of the full Hamiltonian
    # (tests/reference/exact_numpy.py) at each of 64 rotor phases on the cone about each axis.
    nuc = get_nuclide(nucleus)
    site = make_site(**keys)
    frame = site_frame(site, nuc, field)
    corr = fit_exact_correction(frame, ms)
    assert corr is not None
    assert corr.error_hz <= correction_tolerance_hz(frame)
    phases = 64
    shift = frame.shift_tensor_ppm
    for n in _dirs(len(nucleus) + int(keys["cq_mhz"]), 3):
        off, inten = corrected_exact_offsets(frame, n[None, :], ms, corr, rotor_angle_rad=MAGIC, phases=phases)
        u, v = _k._perp_pair(n)
        np.testing.assert_allclose(np.cross(n, u), v, atol=1e-14)
        phi = 2 * np.pi * np.arange(phases) / phases
        b = math.cos(MAGIC) * n + math.sin(MAGIC) * (np.cos(phi)[:, None] * u + np.sin(phi)[:, None] * v)
        ref_off, ref_int = exact_transitions(nuc.spin, frame.nu0_hz, site.cq_hz, site.eta_q, shift, b, ms)
        np.testing.assert_allclose(off[0].T, ref_off, rtol=0, atol=1e-3)  # Hz
        np.testing.assert_allclose(inten[0].T, ref_int, rtol=0, atol=1e-8)


def test_static_corrected_route_matches_kernel_exact_route():
    # Source: the exact kernel (itself checked against numpy eigh in test_frequencies.py) at 300
    # random static directions.
    frame = site_frame(make_site(cq_mhz=15.0, eta_q=0.5), get_nuclide("27Al"), 11.7)
    ms = [2.5, 1.5, 0.5]
    corr = fit_exact_correction(frame, ms)
    d = _dirs(3, 300)
    a, ai = corrected_exact_offsets(frame, d, ms, corr)
    b, bi = exact_offsets(frame, d, ms)
    assert np.abs(a - b).max() < 1e-3
    assert np.abs(ai - bi).max() < 1e-8


def test_strong_coupling_falls_back_to_full_diagonalisation():
    # nu_Q / nu0 = 0.4: the perturbation series converges too slowly for any degree tried, so the fit
    # is refused and the exact route diagonalises at every orientation and phase.
    nuc = get_nuclide("27Al")
    nu0 = nuc.larmor_hz(9.4)
    cq_mhz = 0.4 * nu0 * 20 / 3 / 1e6
    frame = site_frame(make_site(cq_mhz=cq_mhz), nuc, 9.4)
    assert fit_exact_correction(frame, [0.5]) is None


def test_spectrum_of_fast_exact_route_matches_direct_route(monkeypatch):
    # Source: the same site simulated with the exact route diagonalising at every orientation and
    # rotor phase (the fit disabled); both are exact, so the spectra agree to rounding.
    from powderspin.engine import site_lines
    from powderspin.model.modelfile import make_model
    from powderspin.simulator import simulate

    model = make_model("93Nb", {"field_tesla": 9.4, "spinning_hz": 20000.0, "points": 2048, "method": "exact",
                                "orientations": 20, "rotor_phases": 64}, [{"cq_mhz": 25.0, "eta_q": 0.3}])
    fast = simulate(model)
    monkeypatch.setattr(site_lines, "fit_exact_correction", lambda *a, **k: None)
    direct = simulate(model)
    np.testing.assert_allclose(fast.intensity, direct.intensity, rtol=0, atol=1e-7 * direct.intensity.max())


def test_trajectory_sidebands_equal_rotor_lines_where_both_are_exact():
    # A trajectory of degree 12 sampled at Q = 32 phases holds it exactly; rotor_lines at P phases
    # (the fixed route: the trajectory sampled at every one of the P phases) and trajectory_sidebands
    # from the Q samples then give the same bands to rounding.
    rng = np.random.default_rng(2)
    c = rng.normal(size=(4, 2, 13)) + 1j * rng.normal(size=(4, 2, 13))
    c *= 3000.0 / (1.0 + np.arange(13)) ** 3

    def traj(p):
        phi = 2 * np.pi * np.arange(p) / p
        k = np.arange(1, 13)
        return 500.0 + 2 * np.real(np.einsum("ntk,kp->ntp", c[..., 1:], np.exp(1j * np.outer(k, phi))))

    rate = 2000.0
    for p in (32, 128, 1024):
        m_fix, a_fix = rotor_lines(traj(p), rate)
        for adaptive in (False, True):
            m_new, a_new = trajectory_sidebands(traj(32), rate, p, adaptive=adaptive)
            np.testing.assert_allclose(m_new, m_fix, rtol=0, atol=1e-9)
            np.testing.assert_allclose(a_new, a_fix, rtol=0, atol=1e-9)


def test_harmonic_sidebands_kernel_matches_phase_integral():
    # Source: |F_n|^2 by numerical integration of the phase (tests/reference/sidebands_numpy.py).
    rate = 1500.0
    ck = {1: 2000.0 + 900.0j, 2: -700.0 + 300.0j, 5: 40.0 - 25.0j, 9: 3.0 + 1.0j}

    def nu(phi):
        return 100.0 + sum(2 * np.real(c * np.exp(1j * k * phi)) for k, c in ck.items())

    kmax = 9
    g = np.zeros(kmax, dtype=complex)
    for k, c in ck.items():
        g[k - 1] = c / (1j * k * rate)
    p = 64
    amp = _k._harmonic_sidebands(np.ascontiguousarray(g.real[None, :]), np.ascontiguousarray(g.imag[None, :]), p)
    _, ref = sidebands_numpy.sideband_intensities(nu, rate)
    n = np.fft.fftfreq(p, 1.0 / p).astype(int)
    np.testing.assert_allclose(amp[0], ref[n % ref.size], rtol=0, atol=1e-9)


def test_cone_polynomial_kernel_matches_numpy_twin():
    # Source: tests/reference/polynomial_numpy.py (plain monomials on an explicitly built cone).
    rng = np.random.default_rng(4)
    exps = np.array([(a, b, 6 - a - b) for a in range(7) for b in range(7 - a)], dtype=np.int64)
    coef = rng.normal(size=(3, len(exps)))
    axes = _dirs(5, 4)
    got = _k._cone_polynomial(axes, math.cos(MAGIC), math.sin(MAGIC), 16, exps, coef)
    for i, n in enumerate(axes):
        u, v = _k._perp_pair(n)
        ref = polynomial_numpy.cone_polynomial(n, u, v, MAGIC, 16, exps, coef)
        np.testing.assert_allclose(got[i], ref, rtol=1e-12, atol=1e-12)


def test_least_squares_kernel_matches_numpy():
    # Source: numpy.linalg.lstsq on the same (over-determined, full-rank) system.
    rng = np.random.default_rng(6)
    a = rng.normal(size=(60, 21))
    b = rng.normal(size=(60, 3))
    ref, *_ = np.linalg.lstsq(a, b, rcond=None)
    np.testing.assert_allclose(_k._least_squares(a, b), ref, rtol=0, atol=1e-11)


@pytest.mark.parametrize("rate", [2000.0, 5000.0])
def test_adaptive_sidebands_match_fixed_route(rate):
    # The adaptive route (each block of crystallites at the fewest phases its own manifold needs)
    # against the fixed one (every line at the site's P phases), 27Al C_Q 10 MHz, all transitions:
    # where both resolve the manifold (P chosen so that the fixed route does) they agree to 1e-9.
    from powderspin.engine.spinning import perturbative_sidebands

    frame = site_frame(make_site(cq_mhz=10.0, eta_q=0.3), get_nuclide("27Al"), 9.4)
    ms = [2.5, 1.5, 0.5, -0.5, -1.5]
    axes = _dirs(8, 40)
    p = 16384 if rate < 3000 else 8192
    kw = dict(rotor_angle_rad=MAGIC, phases=p, rate_hz=rate)
    m_fix, a_fix = perturbative_sidebands(frame, axes, ms, adaptive=False, **kw)
    m_ad, a_ad = perturbative_sidebands(frame, axes, ms, adaptive=True, **kw)
    np.testing.assert_allclose(m_ad, m_fix, rtol=0, atol=1e-9)
    np.testing.assert_allclose(a_ad, a_fix, rtol=0, atol=1e-9)
    # and the same for the exact route's consumer
    corr = fit_exact_correction(frame, ms)
    off, _ = corrected_exact_offsets(frame, axes, ms, corr, rotor_angle_rad=MAGIC, phases=64)
    _, e_fix = trajectory_sidebands(off, rate, p, adaptive=False)
    _, e_ad = trajectory_sidebands(off, rate, p, adaptive=True)
    np.testing.assert_allclose(e_ad, e_fix, rtol=0, atol=1e-9)


def test_harmonics_below_the_floor_change_no_band():
    # The fitted exact trajectory (degree 16) sampled at 64 phases carries harmonics 17..31 as
    # rounding noise (~1e-14 rad in xi); the kernel leaves out trailing harmonics below
    # _HARMONIC_FLOOR.  Source: |F_n|^2 by numerical integration of the phase of the full
    # trigonometric interpolant of the same samples, every harmonic kept
    # (tests/reference/sidebands_numpy.py; M. H. Levitt, J. Magn. Reson. 82 (1989) 427).
    frame = site_frame(make_site(cq_mhz=10.0, eta_q=0.3), get_nuclide("27Al"), 9.4)
    ms = [2.5, 0.5]
    corr = fit_exact_correction(frame, ms)
    off, _ = corrected_exact_offsets(frame, _dirs(11, 3), ms, corr, rotor_angle_rad=MAGIC, phases=64)
    rate, p = 5000.0, 4096
    g = np.fft.fft(off, axis=-1)[..., 1:32] / 64 / (1j * np.arange(1, 32) * rate)
    assert np.abs(g[..., 20:]).max() < _k._HARMONIC_FLOOR  # the case does exercise the floor
    _, amp = trajectory_sidebands(off, rate, p, adaptive=False)
    n = np.fft.fftfreq(p, 1.0 / p).astype(int)
    for i in range(off.shape[0]):
        for t in range(off.shape[1]):
            _, ref = sidebands_numpy.sideband_intensities(sidebands_numpy.trig_interpolant(off[i, t]), rate,
                                                          samples_per_period=16384)
            np.testing.assert_allclose(amp[i, t], ref[n % ref.size], rtol=0, atol=1e-9)
