"""Two-dimensional measurements through the Simulator: F2 projection, centres of gravity, bad input."""

from __future__ import annotations

import numpy as np
import pytest

import powderspin as ps
from powderspin.engine.spectrum2d import Spectrum2D
from powderspin.model.values import ModelError
from powderspin.physics.multiple_quantum import isotropic_shifts_ppm, two_dimensional_scale

SITES = [{"label": "A", "shift_ppm": 60.0, "cq_mhz": 3.0, "eta_q": 0.3},
         {"label": "B", "shift_ppm": 10.0, "cq_mhz": 5.0, "eta_q": 0.7, "gauss_hz": 150.0}]


def _model(nucleus="27Al", sites=SITES, **meas):
    m = {"field_tesla": 14.1, "spinning_hz": "inf", "experiment": "mqmas", "points": 512, "f1_points": 128,
         "orientations": 24}
    m.update(meas)
    return ps.make_model(nucleus, m, sites)


@pytest.mark.parametrize("meas", [{}, {"spinning_hz": 15000.0}, {"experiment": "stmas", "gauss_hz": 100.0},
                                  {"mq_order": 5, "lorentz_hz": 80.0, "f1_gauss_hz": 400.0},
                                  {"method": "exact", "spinning_hz": 20000.0}])
def test_f2_projection_is_the_1d_mas_central_transition(meas):
    """Ideal excitation: summing the sheared 2D spectrum over F1 gives the 1D MAS CT spectrum of the same model
    (the same lines, the same tent kernel; the F1 hats sum to 1) -- to 1e-6 of its maximum (issue 15)."""
    m = _model(**meas)
    s = ps.simulate(m)
    assert isinstance(s, Spectrum2D) and s.shape == (128, 512)
    # 2D spectra are bin averages in F2 (the 1D default samples point values where lines are narrow)
    one = ps.Simulator(m.with_measurement(0, experiment="1d"), point_values=False).spectrum()
    assert np.allclose(s.f2_ppm, one.ppm)
    assert np.abs(s.f2_projection() - one.intensity).max() <= 1e-6 * one.intensity.max()
    for k in range(2):
        assert np.abs(s.f2_projection(k) - one.site_intensities[k]).max() <= 1e-6 * one.intensity.max()


@pytest.mark.parametrize("nucleus,spin,order", [("23Na", 1.5, 3), ("27Al", 2.5, 3), ("27Al", 2.5, 5),
                                                ("17O", 2.5, 3), ("59Co", 3.5, 5)])
def test_centres_of_gravity_follow_the_published_shear(nucleus, spin, order):
    """F1 centre of gravity delta_iso + k_F1 delta_QIS with k_F1 = -10/17, F2 centre delta_iso + delta_QIS
    (A. Samoson, Chem. Phys. Lett. 119 (1985) 29; design.md section 8); delta_iso = (17 F1 + 10 F2)/27
    (J.-P. Amoureux, C. Fernandez, Solid State Nucl. Magn. Reson. 10 (1998) 211; from memory)."""
    site = [{"label": "x", "shift_ppm": 30.0, "cq_mhz": 2.5, "eta_q": 0.5}]
    # 96 subdivisions: the powder average of the tents converges as the square of the triangle size (measured here
    # for 23Na: F2 centre off by 0.0067, 0.0017, 0.0004 ppm at 24, 48, 96 subdivisions)
    m = _model(nucleus, site, mq_order=order, points=1024, f1_points=256, orientations=96)
    s = ps.simulate(m)
    p1, p2 = s.f1_projection(), s.f2_projection()
    c1 = (p1 * s.f1_ppm).sum() / p1.sum()
    c2 = (p2 * s.f2_ppm).sum() / p2.sum()
    nu = m.larmor_hz
    d1, d2 = isotropic_shifts_ppm(two_dimensional_scale(spin, "mqmas", order), 2.5, 0.5, nu, 30.0)
    # the CT pattern's edges cost up to one F2 point of the centre of gravity (lineshape module notes)
    assert c1 == pytest.approx(d1, abs=1e-6 * abs(d1 - 30.0) + 1e-9)
    assert c2 == pytest.approx(d2, abs=abs(s.dx2_ppm) * 0.05)
    assert (17 * c1 + 10 * c2) / 27 == pytest.approx(30.0, abs=abs(s.dx2_ppm) * 0.05)
    cog = s.metadata["centres_of_gravity_ppm"]["x"]
    assert cog["f1"] == pytest.approx(d1) and cog["f2"] == pytest.approx(d2)
    assert s.metadata["f1_convention"]["f1_centre_of_gravity"] == "delta_F1 = delta_iso + (-10/17) delta_QIS"


def test_pure_shift_lies_on_the_diagonal_and_integrates_to_the_weight():
    """A site with C_Q = 0: delta_F1 = delta_F2 = delta_iso (the convention of every output, design.md section 8)."""
    m = _model(sites=[{"label": "s", "shift_ppm": 12.0, "weight": 2.5, "gauss_hz": 100.0}],
               f1_center_ppm=12.0, f1_width_ppm=40.0, center_ppm=12.0, width_ppm=40.0)
    s = ps.simulate(m)
    assert s.intensity.sum() * s.dx1_ppm * s.dx2_ppm == pytest.approx(2.5, rel=1e-6)
    p1 = s.f1_projection()
    assert (p1 * s.f1_ppm).sum() / p1.sum() == pytest.approx(12.0, abs=1e-9)
    i, j = np.unravel_index(np.argmax(s.intensity), s.shape)
    assert abs(s.f1_ppm[i] - 12.0) <= s.dx1_ppm and abs(s.f2_ppm[j] - 12.0) <= s.dx2_ppm


def test_slices_and_projections():
    s = ps.simulate(_model())
    row = s.f2_slice(float(s.f1_ppm[40]))
    assert np.allclose(row, s.intensity[40])
    mid = s.f2_slice(0.5 * float(s.f1_ppm[40] + s.f1_ppm[41]))
    assert np.allclose(mid, 0.5 * (s.intensity[40] + s.intensity[41]))
    with pytest.raises(ValueError, match="f1_ppm = .* outside the F1 axis"):
        s.f2_slice(1e5)
    d = s.to_dict()
    assert len(d["intensity"]) == 128 and d["metadata"]["experiment"] == "mqmas"
    assert s.f1_projection().sum() * s.dx1_ppm == pytest.approx(s.f2_projection().sum() * s.dx2_ppm)


def test_finite_rate_adds_f2_sidebands_only():
    """Rotor-synchronised t1: F1 sidebands fold onto the centre band, so every sideband of a site sits in the
    same F1 rows as its centre band; F2 carries the CT sidebands at multiples of the spinning rate."""
    m = _model(sites=[SITES[1]], spinning_hz=6000.0, points=2048, width_ppm=250.0, center_ppm=0.0)
    s = ps.simulate(m)
    p1 = s.f1_projection()
    rows = np.flatnonzero(p1 > 1e-9 * p1.max())
    assert rows.size <= 2
    assert "rotor-synchronised" in " ".join(s.metadata["notes"])


@pytest.mark.parametrize("nucleus,meas,words", [
    ("23Na", {"mq_order": 5}, "mq_order = 5 is not available for I = 3/2; allowed: 3"),
    ("27Al", {"mq_order": 7}, "mq_order = 7 is not available for I = 5/2; allowed: 3, 5"),
    ("27Al", {"mq_order": 4}, "mq_order = 4 is not available"),
    ("27Al", {"mq_order": 11}, r"mq_order = 11 must be an integer in \[3, 9\]"),
    ("14N", {}, "half-integer spin of at least 3/2"),
    ("31P", {}, "half-integer spin of at least 3/2"),
    ("27Al", {"experiment": "hmqc"}, "experiment = 'hmqc' is not one of '1d', 'mqmas', 'stmas'"),
    ("27Al", {"spinning_hz": 0.0}, "needs a spinning sample"),
    ("27Al", {"transitions": "all"}, "cannot be chosen for experiment"),
    ("27Al", {"f1_points": 4}, r"f1_points = 4 must be an integer in \[16, 65536\]"),
    ("27Al", {"f1_gauss_hz": -1.0}, "f1_gauss_hz"),
    ("27Al", {"t1_mode": "sometimes"}, "t1_mode = 'sometimes' is not one of 'synchronised', 'free'"),
])
def test_bad_input_names_the_key_and_range(nucleus, meas, words):
    sites = [{"cq_mhz": 0.0}] if nucleus == "31P" else [{"cq_mhz": 1.0}]
    with pytest.raises(ModelError, match=words):
        _model(nucleus, sites, **meas)


def test_shift_distribution_lies_along_the_diagonal():
    """A Gaussian distribution of isotropic shifts moves a C_Q = 0 site along the diagonal (delta_F1 = delta_F2 for
    a pure shift, design.md section 8): both projections have the distribution's variance (plus the hat sharing's
    dx^2/6, lineshape module notes) and F1 and F2 are fully correlated."""
    fw = 6.0
    m = _model(sites=[{"label": "s", "shift_ppm": 20.0, "shift_fwhm_ppm": fw}], center_ppm=20.0, width_ppm=60.0,
               f1_center_ppm=20.0, f1_width_ppm=60.0, f1_points=256)
    s = ps.simulate(m)
    var = (fw / (2 * np.sqrt(2 * np.log(2)))) ** 2
    y = s.intensity
    w = y.sum()
    c1 = (y.sum(axis=1) * s.f1_ppm).sum() / w
    c2 = (y.sum(axis=0) * s.f2_ppm).sum() / w
    v1 = (y.sum(axis=1) * (s.f1_ppm - c1) ** 2).sum() / w
    v2 = (y.sum(axis=0) * (s.f2_ppm - c2) ** 2).sum() / w
    cov = (y * np.outer(s.f1_ppm - c1, s.f2_ppm - c2)).sum() / w
    assert c1 == pytest.approx(20.0, abs=1e-3) and c2 == pytest.approx(20.0, abs=1e-3)
    assert v1 == pytest.approx(var + s.dx1_ppm ** 2 / 6, rel=0.02)
    assert v2 == pytest.approx(var + s.dx2_ppm ** 2 / 6, rel=0.02)
    assert cov / np.sqrt(v1 * v2) > 0.99


def test_czjzek_site_in_2d_has_the_averaged_centres():
    """Pure Czjzek distribution: <P_Q^2> = 5 sigma^2 (G. Czjzek et al., Phys. Rev. B 23 (1981) 2513; DEVELOPERS.md,
    'EFG distributions'), so the centres of gravity are delta_iso + <delta_QIS> in F2 and delta_iso - (10/17)
    <delta_QIS> in F1 (Samoson 1985 with the mean P_Q^2; design.md section 8).  The F2 projection follows the 1D
    kernel route's spectrum of the same site (different discretisations of the distribution: 1 % of the maximum)."""
    sigma, iso = 1.5, 60.0
    site = [{"label": "g", "shift_ppm": iso, "cq_mhz": 0.0, "czjzek_sigma_mhz": sigma}]
    m = _model(sites=site, gauss_hz=150.0, f1_gauss_hz=150.0, center_ppm=50.0, width_ppm=120.0, points=1024,
               f1_center_ppm=65.0, f1_width_ppm=60.0, f1_points=256, orientations=16)
    s = ps.simulate(m)
    nu = m.larmor_hz
    x = 2.5 * 3.5
    qis = -(3 / 40) * 5 * (sigma * 1e6) ** 2 / nu ** 2 * (x - 0.75) / (2.5 ** 2 * 16) * 1e6
    p1, p2 = s.f1_projection(), s.f2_projection()
    c1 = (p1 * s.f1_ppm).sum() / p1.sum()
    c2 = (p2 * s.f2_ppm).sum() / p2.sum()
    assert c2 - iso == pytest.approx(qis, rel=0.01)
    assert c1 - iso == pytest.approx(-10 / 17 * qis, rel=0.01)
    one = ps.simulate(m.with_measurement(0, experiment="1d"))
    assert np.abs(p2 - one.intensity).max() < 0.01 * one.intensity.max()


def test_model_file_round_trip_keeps_2d_keys_and_1d_files_unchanged(tmp_path):
    from powderspin.model.modelfile import load_model, model_to_dict, write_model
    m = _model(mq_order=5, f1_center_ppm=40.0, f1_width_ppm=100.0, f1_gauss_hz=300.0)
    p = tmp_path / "m.toml"
    write_model(m, p)
    back = load_model(p)
    assert back.measurement == m.measurement
    one = ps.make_model("27Al", {"field_tesla": 14.1}, [{"cq_mhz": 3.0}])
    assert not any(k.startswith("f1_") or k in ("experiment", "mq_order", "t1_mode")
                   for k in model_to_dict(one)["measurement"])


def _f1_width_ppm(s):
    p = s.f1_projection()
    c = (p * s.f1_ppm).sum() / p.sum()
    return float(np.sqrt((p * (s.f1_ppm - c) ** 2).sum() / p.sum()))


def test_stmas_needs_the_exact_magic_angle():
    """A rotor angle 0.1 deg off the magic angle leaves the satellites' first-order quadrupolar frequency
    scaled by P2(cos theta) ~ -3 sin(2 theta_m) d_theta / 2 (Gan, J. Am. Chem. Soc. 122 (2000) 3242; Ashbrook and
    Wimperis 2004): the STMAS F1 line broadens by far more than its 3QMAS counterpart, whose t1 transition has no
    first-order term."""
    base = {"orientations": 24, "f1_points": 256, "f1_center_ppm": 60.0, "f1_width_ppm": 100.0,
            "f1_gauss_hz": 100.0}
    site = [{"label": "A", "shift_ppm": 60.0, "cq_mhz": 3.0, "eta_q": 0.3}]
    widths = {}
    for exp in ("mqmas", "stmas"):
        for angle in (54.7356103, 54.8356103):
            widths[exp, angle] = _f1_width_ppm(ps.simulate(_model(sites=site, experiment=exp,
                                                                  rotor_angle_deg=angle, **base)))
    magic, off = 54.7356103, 54.8356103
    assert widths["stmas", off] > 10 * widths["stmas", magic]
    assert widths["stmas", off] > 10 * widths["mqmas", off]
    # first-order estimate of the STMAS F1 spread: nu_Q-scale satellite frequency times |P2(cos theta)|, sheared
    # by 1/(1 - R); its RMS over a powder is of the order of that maximum divided by a few
    import math
    nu_q = 3 * 3.0e6 / (2 * 2.5 * 4)
    p2 = 0.5 * (3 * math.cos(math.radians(off)) ** 2 - 1)
    r = two_dimensional_scale(2.5, "stmas").ratio
    bound_ppm = nu_q * abs(p2) / (1 - r) / (ps.make_model("27Al", {"field_tesla": 14.1}, [{}]).larmor_hz * 1e-6)
    assert 0.05 * bound_ppm < widths["stmas", off] < bound_ppm


def test_one_dimensional_helpers_and_the_1d_fit_refuse_2d_measurements():
    sim = ps.Simulator(_model())
    assert sim.is_two_dimensional
    for name in ("centrebands", "band_intensities", "centres_of_gravity_hz"):
        with pytest.raises(ModelError, match=f"{name} is for 1D measurements"):
            getattr(sim, name)()
    from powderspin.fitting.data import FitError
    m = _model(sites=[{"label": "A", "cq_mhz": {"start": 3.0, "min": 1.0, "max": 5.0}}])
    with pytest.raises(FitError, match="fit_two_dimensional"):
        ps.fit(m, data=[ps.simulate(m.with_measurement(0, experiment="1d"))])
    assert sim.jacobian().shape == (128 * 512, 0)
    j = ps.Simulator(m).jacobian()
    assert j.shape == (128 * 512, 1) and np.abs(j).max() > 0


def test_free_t1_shows_f1_sidebands_at_the_sheared_spacing():
    """Without rotor synchronisation F1 carries sidebands n nu_r / (p - R) from the centre band (the unsheared
    multiple-quantum bands n nu_r, scaled like every F1 frequency); with an F1 axis that holds them all, the F2
    projection is that of the synchronised spectrum, i.e. the 1D MAS CT."""
    base = dict(spinning_hz=8000.0, points=512, f1_points=1024, center_ppm=40.0, width_ppm=300.0,
                f1_center_ppm=60.0, f1_width_ppm=4000.0, orientations=12)
    site = [{"label": "A", "shift_ppm": 60.0, "cq_mhz": 4.0, "eta_q": 0.3}]
    sync = ps.simulate(_model(sites=site, **base))
    free = ps.simulate(_model(sites=site, t1_mode="free", **base))
    assert np.abs(free.f2_projection() - sync.f2_projection()).max() <= 1e-6 * sync.f2_projection().max()
    p1 = free.f1_projection()
    peaks = [i for i in range(1, p1.size - 1) if p1[i] > p1[i - 1] and p1[i] >= p1[i + 1] and p1[i] > 1e-3 * p1.max()]
    spacing_ppm = 8000.0 / (3 - two_dimensional_scale(2.5, "mqmas", 3).ratio) / (free.metadata["nu_ref_hz"] * 1e-6)
    gaps = np.diff(free.f1_ppm[peaks])
    assert len(peaks) >= 3 and np.allclose(gaps, spacing_ppm, atol=1.01 * free.dx1_ppm)
    assert "not rotor-synchronised" in " ".join(free.metadata["notes"])


def test_free_t1_stmas_covers_its_f1_manifold_and_refuses_what_memory_cannot_hold(monkeypatch):
    """Non-synchronised STMAS spreads the satellites' first-order manifold over F1 sidebands; the automatic F1
    axis holds them (each site integrates to its weight), and a case beyond the memory budget is refused."""
    m = _model(sites=[{"label": "A", "shift_ppm": 60.0, "cq_mhz": 3.0, "eta_q": 0.3}], experiment="stmas",
               t1_mode="free", spinning_hz=20000.0, orientations=12, f1_points=256)
    s = ps.simulate(m)
    assert s.intensity.sum() * s.dx1_ppm * s.dx2_ppm == pytest.approx(1.0, abs=1e-4)
    import powderspin.engine.two_dimensional as td
    monkeypatch.setattr(td, "LINES_MEMORY_BUDGET", 1000)
    with pytest.raises(ModelError, match="t1_mode = 'free'.*MB"):
        ps.simulate(m)
