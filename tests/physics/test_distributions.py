"""EFG distributions: the Czjzek density against random tensors, grids, averages, CT pattern edges.

Sources named beside each check:
- Czjzek model and its closed-form density: G. Czjzek et al., Phys. Rev. B 23 (1981) 2513;
  NMR use and extended model: J.-B. d'Espinose de Lacaillerie, C. Fretigny, D. Massiot,
  J. Magn. Reson. 192 (2008) 244; G. Le Caer, R. A. Brand, J. Phys.: Condens. Matter 10 (1998) 10715.
- chi distribution with 5 degrees of freedom: scipy.stats.chi (reference library).
- Quadrupolar-induced shift: A. Samoson, Chem. Phys. Lett. 119 (1985) 29.
- Static eta = 0 CT singularities: DEVELOPERS.md, 'Physics formulas' (standard second-order result).
Sample sizes: 10^6 tensors give KS and chi-square tests a resolution of about 1e-3 in
probability, far finer than any plausible convention error (a wrong factor in the component
map moves the distribution by tens of per cent); every generator is seeded.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from powderspin.physics.distributions import (
    DistributionError,
    DistributionGrid,
    ct_edges_hz,
    ct_g_extremes,
    ct_spin_factor,
    czjzek_cell_mass,
    czjzek_cq_cdf,
    czjzek_eta_cdf,
    czjzek_grid,
    czjzek_mean_pq_mhz,
    czjzek_mean_pq_squared_mhz2,
    czjzek_pdf,
    efg_from_components,
    explicit_grid,
    mean_cq_mhz,
    mean_pq_mhz,
    mean_pq_squared_mhz2,
    mean_quadrupolar_induced_shift_ppm,
    principal_cq_eta,
    quadrupolar_induced_shift_ppm,
    sample_czjzek,
    sample_extended_czjzek,
)
from powderspin.physics.nuclides import get_nuclide

SIGMA = 2.0
NU0_AL_9T4 = get_nuclide("27Al").larmor_hz(9.4)


@pytest.fixture(scope="module")
def czjzek_sample():
    return sample_czjzek(1_000_000, SIGMA, np.random.default_rng(20240611))


# ----------------------------------------------------------------------------- tensors


def test_component_map_is_an_isometry_and_matches_the_principal_frame():
    rng = np.random.default_rng(1)
    u = rng.normal(size=(1000, 5))
    v = efg_from_components(u)
    np.testing.assert_allclose(np.trace(v, axis1=1, axis2=2), 0.0, atol=1e-12)
    np.testing.assert_allclose(v, np.swapaxes(v, 1, 2))
    # (2/3) Tr V^2 = sum U_i^2 (module docstring)
    np.testing.assert_allclose((2 / 3) * np.einsum("nij,nji->n", v, v), (u**2).sum(1), rtol=1e-12)
    # principal frame: U = (C_Q, eta C_Q / sqrt 3, 0, 0, 0) gives diag(-(1-eta)/2, -(1+eta)/2, 1) C_Q
    for cq, eta in [(3.0, 0.0), (3.0, 0.4), (7.5, 1.0)]:
        t = efg_from_components([cq, eta * cq / math.sqrt(3), 0, 0, 0])
        np.testing.assert_allclose(t, cq * np.diag([-(1 - eta) / 2, -(1 + eta) / 2, 1.0]), atol=1e-12)
        c, e = principal_cq_eta(t)
        assert c == pytest.approx(cq) and e == pytest.approx(eta, abs=1e-12)


def test_principal_values_are_invariant_under_rotation():
    rng = np.random.default_rng(2)
    v = efg_from_components(rng.normal(size=(200, 5)))
    q, _ = np.linalg.qr(rng.normal(size=(200, 3, 3)))
    c0, e0 = principal_cq_eta(v)
    c1, e1 = principal_cq_eta(q @ v @ np.swapaxes(q, 1, 2))
    np.testing.assert_allclose(c1, c0, rtol=1e-10)
    np.testing.assert_allclose(e1, e0, atol=1e-9)
    # sign of the tensor: C_Q = |V_zz| and eta are unchanged
    c2, e2 = principal_cq_eta(-v)
    np.testing.assert_allclose(c2, c0, rtol=1e-12)
    np.testing.assert_allclose(e2, e0, atol=1e-9)


# ----------------------------------------------------------------------------- density


def test_chi5_cdf_closed_form_matches_scipy():
    from powderspin.physics.distributions import _chi5_cdf

    x = np.concatenate([np.linspace(0, 12, 2001), [np.inf]])
    np.testing.assert_allclose(_chi5_cdf(x), stats.chi(5).cdf(x), atol=1e-14)


@pytest.mark.parametrize("sigma", [0.7, 2.0, 5.5])
def test_density_is_normalised(sigma):
    # analytic normalisation sigma^5 sqrt(pi/2) (module docstring) checked by adaptive 2-D quadrature
    total, err = integrate.dblquad(lambda e, c: czjzek_pdf(c, e, sigma), 0, 15 * sigma, 0, 1, epsabs=1e-11)
    assert total == pytest.approx(1.0, abs=1e-8)


def test_marginal_cdfs_agree_with_quadrature_of_the_density():
    for eta in (0.2, 0.5, 0.9):
        ref = integrate.dblquad(lambda e, c: czjzek_pdf(c, e, SIGMA), 0, 40, 0, eta, epsabs=1e-11)[0]
        assert float(czjzek_eta_cdf(eta)) == pytest.approx(ref, abs=1e-8)
    for cq in (1.0, 3.0, 6.0):
        ref = integrate.dblquad(lambda e, c: czjzek_pdf(c, e, SIGMA), 0, cq, 0, 1, epsabs=1e-11)[0]
        assert float(czjzek_cq_cdf(cq, SIGMA)) == pytest.approx(ref, abs=1e-8)
    # cell masses tile the whole domain
    m = czjzek_cell_mass([0, 1, 2.5, 4, np.inf], [0, 0.3, 0.7, 1], SIGMA)
    assert m.sum() == pytest.approx(1.0, abs=1e-12)
    ref = integrate.dblquad(lambda e, c: czjzek_pdf(c, e, SIGMA), 1, 2.5, 0.3, 0.7, epsabs=1e-12)[0]
    assert m[1, 1] == pytest.approx(ref, abs=1e-10)


@pytest.mark.slow
def test_sampled_tensors_follow_the_closed_form(czjzek_sample):
    cq, eta = czjzek_sample
    # 1-D KS tests on the marginals against the closed-form CDFs (scipy.stats.kstest)
    p_cq = stats.kstest(cq, lambda c: czjzek_cq_cdf(c, SIGMA)).pvalue
    p_eta = stats.kstest(eta, czjzek_eta_cdf).pvalue
    # P_Q / sigma is chi with 5 degrees of freedom (scipy.stats.chi)
    p_pq = stats.kstest(cq * np.sqrt(1 + eta**2 / 3), stats.chi(5, scale=SIGMA).cdf).pvalue
    # 2-D chi-square goodness of fit on a 10 x 8 grid of cells of comparable mass
    c_edges = np.concatenate([[0.0], np.quantile(cq, np.linspace(0.1, 0.9, 9)), [np.inf]])
    e_edges = np.concatenate([[0.0], np.quantile(eta, np.linspace(1 / 8, 7 / 8, 7)), [1.0]])
    observed, _, _ = np.histogram2d(cq, eta, bins=[np.minimum(c_edges, 1e3), e_edges])
    expected = czjzek_cell_mass(c_edges, e_edges, SIGMA) * cq.size
    assert expected.sum() == pytest.approx(cq.size, rel=1e-10)
    p_2d = stats.chisquare(observed.ravel(), expected.ravel() * cq.size / expected.sum()).pvalue
    print(f"Czjzek sample, 1e6 tensors: p(C_Q) = {p_cq:.3f}, p(eta) = {p_eta:.3f}, "
          f"p(P_Q chi_5) = {p_pq:.3f}, p(2-D chi-square, 80 cells) = {p_2d:.3f}")
    assert min(p_cq, p_eta, p_pq, p_2d) > 0.01


def test_chi5_mean_and_second_moment(czjzek_sample):
    cq, eta = czjzek_sample
    pq = cq * np.sqrt(1 + eta**2 / 3)
    # <P_Q> = sigma sqrt(2) Gamma(3)/Gamma(5/2) against scipy.stats.chi and the sample
    assert czjzek_mean_pq_mhz(SIGMA) == pytest.approx(stats.chi(5, scale=SIGMA).mean(), rel=1e-12)
    assert pq.mean() == pytest.approx(czjzek_mean_pq_mhz(SIGMA), abs=5 * pq.std() / math.sqrt(pq.size))
    # <P_Q^2> = 5 sigma^2
    assert czjzek_mean_pq_squared_mhz2(SIGMA) == pytest.approx(stats.chi(5, scale=SIGMA).moment(2), rel=1e-12)
    p2 = pq**2
    assert p2.mean() == pytest.approx(5 * SIGMA**2, abs=5 * p2.std() / math.sqrt(p2.size))


# ----------------------------------------------------------------------------- extended model


def test_extended_model_small_sigma_concentrates_at_the_fixed_tensor():
    for cq0, eta0 in [(4.0, 0.0), (4.0, 0.35), (6.0, 1.0)]:
        cq, eta = sample_extended_czjzek(20_000, cq0, eta0, 1e-4, np.random.default_rng(3))
        assert np.abs(cq - cq0).max() < 1e-3
        assert np.abs(eta - eta0).max() < 1e-3


def test_extended_model_without_fixed_tensor_is_czjzek():
    a = sample_extended_czjzek(200_000, 0.0, 0.7, SIGMA, np.random.default_rng(4))
    b = sample_czjzek(200_000, SIGMA, np.random.default_rng(5))
    assert stats.ks_2samp(a[0], b[0]).pvalue > 0.01
    assert stats.ks_2samp(a[1], b[1]).pvalue > 0.01


def test_extended_model_does_not_depend_on_the_fixed_tensors_orientation():
    # The docstring's argument (isotropy of the random part), checked by brute force:
    # rotate the fixed tensor at random for every sample and compare (two-sample KS).
    rng = np.random.default_rng(6)
    n, cq0, eta0, sigma = 200_000, 3.0, 0.6, 0.8
    q, r = np.linalg.qr(rng.normal(size=(n, 3, 3)))
    v0 = efg_from_components([cq0, eta0 * cq0 / math.sqrt(3), 0, 0, 0])
    rotated = q @ v0 @ np.swapaxes(q, 1, 2) + efg_from_components(rng.normal(0, sigma, size=(n, 5)))
    c_rot, e_rot = principal_cq_eta(rotated)
    c_fix, e_fix = sample_extended_czjzek(n, cq0, eta0, sigma, np.random.default_rng(7))
    assert stats.ks_2samp(c_rot, c_fix).pvalue > 0.01
    assert stats.ks_2samp(e_rot, e_fix).pvalue > 0.01


def test_sampling_input_errors():
    with pytest.raises(DistributionError, match=r"eta0 = 1.5 is outside the allowed range \[0, 1\]"):
        sample_extended_czjzek(10, 1.0, 1.5, 1.0)
    with pytest.raises(DistributionError, match="sigma_mhz = -1"):
        sample_czjzek(10, -1.0)
    with pytest.raises(DistributionError, match="n = 2.5"):
        sample_czjzek(2.5, 1.0)


# ----------------------------------------------------------------------------- CT pattern edges


def test_ct_g_extremes_static_eta0_singularities():
    # DEVELOPERS.md, 'Physics formulas': +a nu_Q^2/(16 nu0) at theta = 90 deg and -a nu_Q^2/(9 nu0) at
    # cos^2 theta = 5/9, a = I(I+1) - 3/4, nu_Q = 3 C_Q/(2I(2I-1)).
    spin, cq, nu0 = 2.5, 6.0, NU0_AL_9T4
    a_design = spin * (spin + 1) - 0.75
    nu_q = 3 * cq * 1e6 / (2 * spin * (2 * spin - 1))
    lo, hi = ct_edges_hz(cq, 0.0, spin, nu0, "static")
    assert float(hi) == pytest.approx(a_design * nu_q**2 / (16 * nu0), rel=1e-12)
    assert float(lo) == pytest.approx(-a_design * nu_q**2 / (9 * nu0), rel=1e-12)


@pytest.mark.parametrize("experiment", ["static", "mas"])
@pytest.mark.parametrize("eta", [0.0, 0.3, 0.75, 1.0])
def test_ct_g_extremes_against_brute_force_orientations(experiment, eta):
    # Independent route: the CT offset of the perturbative level formula (DEVELOPERS.md, 'Physics formulas')
    # from laboratory-frame EFG components, at many random orientations (and 16 rotor phases
    # under MAS), then max and min.  Dense sampling approaches the exact extremes from inside.
    from powderspin.physics.distributions import _MAGIC_COS  # the magic-angle cosine 1/sqrt(3)

    rng = np.random.default_rng(8)
    rot, _ = np.linalg.qr(rng.normal(size=(60_000, 3, 3)))
    v = np.diag([-(1 - eta) / 2, -(1 + eta) / 2, 1.0])
    lab = rot @ v @ np.swapaxes(rot, 1, 2)  # EFG in a frame whose z is B0 (static) or the rotor axis (MAS)

    def g_of(t):
        return t[..., 0, 2] ** 2 + t[..., 1, 2] ** 2 - ((t[..., 0, 0] - t[..., 1, 1]) ** 2 + 4 * t[..., 0, 1] ** 2) / 8

    if experiment == "static":
        g = g_of(lab)
    else:
        sb = math.sqrt(1 - _MAGIC_COS**2)
        tilt = np.array([[_MAGIC_COS, 0, -sb], [0, 1, 0], [sb, 0, _MAGIC_COS]])  # rotor axis -> B0 at 54.74 deg
        g = 0.0
        for k in range(16):
            ph = 2 * math.pi * k / 16
            spin_r = np.array([[math.cos(ph), -math.sin(ph), 0], [math.sin(ph), math.cos(ph), 0], [0, 0, 1]])
            m = tilt @ spin_r
            g = g + g_of(m @ lab @ m.T)
        g = g / 16
    g_min, g_max = ct_g_extremes(eta, experiment)
    assert g.min() >= g_min - 1e-12 and g.max() <= g_max + 1e-12
    assert g.min() == pytest.approx(g_min, abs=3e-3) and g.max() == pytest.approx(g_max, abs=3e-3)
    # powder mean of g = (3/20)(1 + eta^2/3): the quadrupolar-induced shift (Samoson 1985)
    assert g.mean() == pytest.approx(0.15 * (1 + eta**2 / 3), abs=3e-3)


def test_spin_factor_and_bad_spins():
    assert ct_spin_factor(1.5) == pytest.approx((15 / 4 - 3 / 4) / 9)
    assert ct_spin_factor(4.5) == pytest.approx((99 / 4 - 3 / 4) / (4.5 * 8) ** 2)
    for bad in (1.0, 0.5, 2.0, 11.5):
        with pytest.raises(DistributionError, match="spin"):
            ct_spin_factor(bad)
    with pytest.raises(DistributionError, match="experiment = 'fast'"):
        ct_g_extremes(0.5, "fast")


# ----------------------------------------------------------------------------- grids


def _width_hz(grid, spin, nu0, experiment="mas"):
    lo, hi = ct_edges_hz(grid.cq_mhz[:, None], grid.eta[None, :], spin, nu0, experiment)
    return hi - lo


def test_czjzek_grid_for_27al_at_9_4_t():
    grid = czjzek_grid(SIGMA, 2.5, NU0_AL_9T4, 50.0)
    print(f"27Al, sigma = 2 MHz, 9.4 T, 50 Hz, MAS: {grid}")
    assert isinstance(grid, DistributionGrid) and grid.method == "quadrature"
    assert grid.weights.sum() == pytest.approx(1.0, abs=1e-12) and (grid.weights >= 0).all()
    assert 0 < grid.tail_mass <= 1e-4 * (1 + 1e-6)
    assert grid.cq_edge_step_hz <= 25.0 and grid.eta_edge_step_hz <= 25.0
    # the stated criterion, checked directly on the nodes with ct_edges_hz
    lo, hi = ct_edges_hz(grid.cq_mhz[:, None], grid.eta[None, :], 2.5, NU0_AL_9T4)
    for edge in (lo, hi):
        assert np.abs(np.diff(edge, axis=0)).max() <= 25.0 * (1 + 1e-9)
        assert np.abs(np.diff(edge, axis=1)).max() <= 25.0 * (1 + 1e-3)  # eta table interpolation
    w = _width_hz(grid, 2.5, NU0_AL_9T4)
    assert max(np.abs(np.diff(w, axis=0)).max(), np.abs(np.diff(w, axis=1)).max()) <= 50.0 * (1 + 1e-3)
    with pytest.raises(AttributeError):
        grid.tail_mass = 0.0
    with pytest.raises(ValueError):
        grid.weights[0, 0] = 1.0  # read-only


def test_grid_moments_against_analytic_values():
    grid = czjzek_grid(SIGMA, 2.5, NU0_AL_9T4, 50.0)
    # truncation at tail mass 1e-4 drops about 1e-4 * C_max^2 of <P_Q^2> = 5 sigma^2 (~5e-4 relative)
    assert mean_pq_squared_mhz2(grid) == pytest.approx(5 * SIGMA**2, rel=2e-3)
    assert mean_pq_mhz(grid) == pytest.approx(czjzek_mean_pq_mhz(SIGMA), rel=1e-3)
    ref_mean_cq = integrate.dblquad(lambda e, c: c * czjzek_pdf(c, e, SIGMA), 0, 40, 0, 1)[0]
    assert mean_cq_mhz(grid) == pytest.approx(ref_mean_cq, rel=1e-3)
    qis = mean_quadrupolar_induced_shift_ppm(grid, 2.5, NU0_AL_9T4)
    assert qis == pytest.approx(float(quadrupolar_induced_shift_ppm(math.sqrt(5) * SIGMA, 2.5, NU0_AL_9T4)),
                                rel=2e-3)


def test_grid_converges_when_the_spacing_is_halved():
    # Smooth functionals: the weighted mean CT width (Hz) and the weighted mean C_Q^2 expressed as the
    # width it produces.  The stated criterion bounds the width difference between neighbours by
    # 2 * fraction * resolution; halving the spacing must change the means by less than that.
    res, nu0, spin = 100.0, NU0_AL_9T4, 2.5
    coarse = czjzek_grid(SIGMA, spin, nu0, res, fraction=0.5)
    fine = czjzek_grid(SIGMA, spin, nu0, res, fraction=0.25)
    assert fine.shape[0] >= 2 * coarse.shape[0] - 1 and fine.shape[1] >= 2 * coarse.shape[1] - 1
    bound = 2 * 0.5 * res
    w_coarse = float((coarse.weights * _width_hz(coarse, spin, nu0)).sum())
    w_fine = float((fine.weights * _width_hz(fine, spin, nu0)).sum())
    assert abs(w_fine - w_coarse) < bound
    hz_per_mhz2 = ct_spin_factor(spin) * 1e12 / (2 * nu0) * 0.4375  # largest |g| under MAS (eta = 1)
    c2 = [float(g.weights.sum(1) @ g.cq_mhz**2) for g in (coarse, fine)]
    assert abs(c2[1] - c2[0]) * hz_per_mhz2 < bound
    print(f"halving: mean width {w_coarse:.2f} -> {w_fine:.2f} Hz, <C_Q^2> {c2[0]:.5f} -> {c2[1]:.5f} MHz^2")


def test_static_grids_are_finer_than_mas_grids():
    mas = czjzek_grid(0.5, 1.5, NU0_AL_9T4, 100.0)
    static = czjzek_grid(0.5, 1.5, NU0_AL_9T4, 100.0, experiment="static")
    assert static.shape[0] > mas.shape[0] and static.shape[1] > mas.shape[1]


def test_extended_grid_by_sampling():
    grid = czjzek_grid(0.5, 2.5, NU0_AL_9T4, 100.0, cq0_mhz=4.0, eta0=0.3, n_samples=200_000, seed=1)
    assert grid.method == "sampling" and grid.n_samples == 200_000
    assert grid.weights.sum() == pytest.approx(1.0, abs=1e-12)
    assert grid.tail_mass <= 1e-4 + 1e-9
    assert grid.cq_edge_step_hz <= 50.0 and grid.eta_edge_step_hz <= 50.0 * (1 + 1e-3)
    # weights reproduce the sample's moments (same seed, same sample)
    cq, eta = sample_extended_czjzek(200_000, 4.0, 0.3, 0.5, np.random.default_rng(1))
    assert mean_cq_mhz(grid) == pytest.approx(cq.mean(), rel=2e-3)
    assert mean_pq_squared_mhz2(grid) == pytest.approx(np.mean(cq**2 * (1 + eta**2 / 3)), rel=2e-3)
    # reproducible
    again = czjzek_grid(0.5, 2.5, NU0_AL_9T4, 100.0, cq0_mhz=4.0, eta0=0.3, n_samples=200_000, seed=1)
    np.testing.assert_array_equal(again.weights, grid.weights)


def test_grid_input_errors():
    with pytest.raises(DistributionError, match=r"resolution_hz = 0 is outside the allowed range \(0, inf\]"):
        czjzek_grid(1.0, 2.5, 1e8, 0)
    with pytest.raises(DistributionError, match="tail_mass = 0.5"):
        czjzek_grid(1.0, 2.5, 1e8, 50.0, tail_mass=0.5)
    with pytest.raises(DistributionError, match="spin = 1"):
        czjzek_grid(1.0, 1, 1e8, 50.0)
    with pytest.raises(DistributionError, match="more than max_nodes = 100; use a larger resolution_hz"):
        czjzek_grid(2.0, 2.5, NU0_AL_9T4, 50.0, max_nodes=100)


def test_explicit_grids_are_validated():
    g = explicit_grid({"values": [5.0, 2.0, 3.0], "weights": [0, 2, 2]}, {"values": [0.2, 0.8], "weights": [1, 3]})
    assert g.cq_mhz.tolist() == [2.0, 3.0, 5.0] and g.eta.tolist() == [0.2, 0.8]
    np.testing.assert_allclose(g.weights, [[0.125, 0.375], [0.125, 0.375], [0.0, 0.0]])
    assert g.method == "explicit" and g.tail_mass == 0.0
    assert mean_cq_mhz(g) == pytest.approx(2.5)
    ok = {"values": [0.5], "weights": [1.0]}
    cases = [
        ({"values": [-1.0], "weights": [1.0]}, ok, r"cq_distribution_mhz.values\[0\] = -1.0 is outside"),
        ({"values": [1.0], "weights": [-2.0]}, ok, r"cq_distribution_mhz.weights\[0\] = -2.0 is outside"),
        (ok, {"values": [0.5, 1.2], "weights": [1, 1]}, r"eta_distribution.values\[1\] = 1.2 is outside .*\[0, 1\]"),
        (ok, {"values": [0.5, 0.6], "weights": [1]}, "eta_distribution has 2 values but 1 weights"),
        (ok, {"values": [0.5], "weights": [0]}, "eta_distribution.weights are all zero"),
        ({"values": [1.0, 1.0], "weights": [1, 1]}, ok, "cq_distribution_mhz.values must be distinct"),
        ({"values": [1.0], "weights": [1], "spread": 2}, ok, "cq_distribution_mhz.spread is not a known key"),
        ({"values": [1.0]}, ok, "cq_distribution_mhz.weights is missing"),
        ({"values": [], "weights": []}, ok, "cq_distribution_mhz.values must be a non-empty list"),
        (ok, [0.5], "eta_distribution must be a table"),
        ({"values": [float("nan")], "weights": [1]}, ok, r"cq_distribution_mhz.values\[0\] = nan"),
        ({"values": ["2"], "weights": [1]}, ok, r"cq_distribution_mhz.values\[0\] = '2' is not a number"),
    ]
    for cq_spec, eta_spec, message in cases:
        with pytest.raises(DistributionError, match=message):
            explicit_grid(cq_spec, eta_spec)


# ----------------------------------------------------------------------------- quadrupolar-induced shift


def test_quadrupolar_induced_shift_formula():
    # delta_QIS = -(3/40) (P_Q/nu0)^2 [I(I+1) - 3/4] / [I^2 (2I-1)^2] * 1e6 (Samoson 1985), written out
    spin, pq, nu0 = 1.5, 2.7, 132.3e6
    expected = -(3 / 40) * (pq * 1e6 / nu0) ** 2 * (spin * (spin + 1) - 0.75) / (spin**2 * (2 * spin - 1) ** 2) * 1e6
    assert float(quadrupolar_induced_shift_ppm(pq, spin, nu0)) == pytest.approx(expected, rel=1e-14)
    # averaged over a distribution it needs <P_Q^2>, not <P_Q>^2
    g = explicit_grid({"values": [1.0, 3.0], "weights": [1, 1]}, {"values": [0.0], "weights": [1]})
    assert mean_quadrupolar_induced_shift_ppm(g, spin, nu0) == pytest.approx(
        0.5 * (float(quadrupolar_induced_shift_ppm(1.0, spin, nu0))
               + float(quadrupolar_induced_shift_ppm(3.0, spin, nu0))))
