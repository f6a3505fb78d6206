"""Fitting 2D MQMAS data: two sites that overlap in 1D are recovered; the 1D projection of the same data cannot."""

from __future__ import annotations

import numpy as np
import pytest

import powderspin as ps
from powderspin.fitting.data import FitError
from powderspin.fitting.two_dimensional import fit_two_dimensional
from powderspin.io.spectra import MeasuredSpectrum
from powderspin.io.spectra2d import MeasuredSpectrum2D

# an invented pair of AlO4 sites whose 1D MAS central transitions overlap (F2 centres about 52.7 and 49.8 ppm at
# 9.4 T) but whose sheared F1 centres (about 64.3 and 53.3 ppm) are apart
TRUE = {"A.cq_mhz": 3.5, "A.shift_ppm": 60.0, "A.eta_q": 0.5, "B.cq_mhz": 2.0, "B.shift_ppm": 52.0, "B.eta_q": 0.2}
START = {"A.cq_mhz": 3.0, "A.shift_ppm": 58.0, "A.eta_q": 0.35, "B.cq_mhz": 2.5, "B.shift_ppm": 54.0,
         "B.eta_q": 0.35}


def _model(values, experiment):
    def free(k, lo, hi):
        return {"start": values[k], "min": lo, "max": hi}

    sites = [{"label": s, "cq_mhz": free(f"{s}.cq_mhz", 1.0, 6.0), "shift_ppm": free(f"{s}.shift_ppm", 40.0, 80.0),
              "eta_q": free(f"{s}.eta_q", 0.0, 1.0)} for s in ("A", "B")]
    meas = {"field_tesla": 9.4, "spinning_hz": "inf", "experiment": experiment, "points": 256, "f1_points": 64,
            "orientations": 24, "gauss_hz": 600.0, "f1_gauss_hz": 300.0, "center_ppm": 50.0, "width_ppm": 60.0,
            "f1_center_ppm": 58.0, "f1_width_ppm": 30.0}
    return ps.make_model("27Al", meas, sites)


@pytest.mark.slow
def test_2d_fit_separates_what_the_1d_projection_cannot():
    """Recovery within 3 standard errors (issue 15's criterion) from SYNTHETIC data with a fixed noise seed; the
    F2 projection of the same noisy data, fitted the same way, leaves site B's C_Q and eta_Q undetermined and the
    shifts an order of magnitude less certain.  The F1 dimension adds delta_iso + k_F1 delta_QIS, a second
    combination of shift and C_Q^2 (1 + eta^2/3) (design.md section 8)."""
    true2 = ps.simulate(_model(TRUE, "mqmas"))
    rng = np.random.default_rng(20261205)
    y2 = true2.intensity + rng.normal(0.0, 0.01 * true2.intensity.max(), true2.intensity.shape)
    nu = true2.metadata["nu_ref_hz"]
    r2 = fit_two_dimensional(_model(START, "mqmas"), {0: MeasuredSpectrum2D(true2.f1_ppm, true2.f2_ppm, y2, nu,
                                                                             "synthetic 2D")})
    assert r2.success
    for k, v in TRUE.items():
        assert abs(r2.values[k] - v) < 3 * r2.stderr[k], (k, r2.values[k], r2.stderr[k])
    y1 = y2.sum(axis=0) * true2.dx1_ppm  # the same data, projected onto F2
    r1 = fit_two_dimensional(_model(START, "1d"), {0: MeasuredSpectrum(true2.f2_hz, true2.f2_ppm, y1, None, nu,
                                                                        "F2 projection")})
    assert r1.stderr["B.cq_mhz"] > 0.1 * TRUE["B.cq_mhz"] and r1.stderr["B.eta_q"] > 0.5
    assert r2.stderr["B.cq_mhz"] < 0.05 * TRUE["B.cq_mhz"]
    for s in ("A", "B"):
        assert r1.stderr[f"{s}.shift_ppm"] > 10 * r2.stderr[f"{s}.shift_ppm"]


def test_fit_refuses_mismatched_data():
    true2 = ps.simulate(_model(TRUE, "mqmas").with_measurement(0, f1_points=16, points=64))
    d2 = MeasuredSpectrum2D(true2.f1_ppm, true2.f2_ppm, true2.intensity, 1.0e8, "wrong field")
    with pytest.raises(FitError, match="nu_ref"):
        fit_two_dimensional(_model(START, "mqmas"), {0: d2})
    one = MeasuredSpectrum(true2.f2_hz, true2.f2_ppm, true2.f2_projection(), None, true2.metadata["nu_ref_hz"], "1d")
    with pytest.raises(FitError, match="must be a 2D spectrum"):
        fit_two_dimensional(_model(START, "mqmas"), {0: one})


def test_free_weights_with_2d_data_are_warned_about():
    m = ps.make_model("27Al", {"field_tesla": 9.4, "spinning_hz": "inf", "experiment": "mqmas", "points": 64,
                               "f1_points": 16, "orientations": 8, "gauss_hz": 600.0, "f1_gauss_hz": 300.0},
                      [{"label": "A", "cq_mhz": 3.5, "shift_ppm": 60.0},
                       {"label": "B", "cq_mhz": 2.0, "shift_ppm": 52.0,
                        "weight": {"start": 1.0, "min": 0.1, "max": 5.0}}])
    s = ps.simulate(m)
    y = s.intensity + np.random.default_rng(1).normal(0, 1e-3 * s.intensity.max(), s.shape)
    r = fit_two_dimensional(m, {0: MeasuredSpectrum2D(s.f1_ppm, s.f2_ppm, y, s.metadata["nu_ref_hz"], "x")})
    assert any("not quantitative" in w for w in r.warnings)
    assert r.values["B.weight"] == pytest.approx(1.0, abs=5 * r.stderr["B.weight"])


def test_joint_fit_of_2d_and_1d_measurements_shares_the_site_parameters():
    """One model, two measurements (3QMAS at 9.4 T and 1D MAS at 14.1 T) sharing the site's parameters; each
    measurement keeps its own scale (SYNTHETIC data, fixed seed)."""
    def model(cq, shift):
        site = [{"label": "A", "cq_mhz": {"start": cq, "min": 1.0, "max": 6.0},
                 "shift_ppm": {"start": shift, "min": 40.0, "max": 80.0}, "eta_q": 0.4}]
        two = {"field_tesla": 9.4, "spinning_hz": "inf", "experiment": "mqmas", "points": 96, "f1_points": 24,
               "orientations": 12, "gauss_hz": 300.0, "f1_gauss_hz": 300.0}
        one = {"field_tesla": 14.1, "spinning_hz": "inf", "points": 256, "orientations": 12, "gauss_hz": 300.0}
        return ps.make_model("27Al", [two, one], site)
    truth = model(3.2, 61.0)
    rng = np.random.default_rng(7)
    s2 = ps.simulate(truth, measurement=0)
    s1 = ps.simulate(truth, measurement=1)
    d2 = MeasuredSpectrum2D(s2.f1_ppm, s2.f2_ppm, 3.0 * s2.intensity + rng.normal(0, 0.01 * 3 * s2.intensity.max(),
                                                                                      s2.shape),
                            s2.metadata["nu_ref_hz"], "synthetic 2D")
    d1 = MeasuredSpectrum(s1.hz, s1.ppm, 0.5 * s1.intensity + rng.normal(0, 0.005 * s1.intensity.max(), s1.hz.size),
                          None, s1.metadata["nu_ref_hz"], "synthetic 1D")
    # the data axes are the simulations' own, so the fit's Simulators render on the same grids
    r = fit_two_dimensional(model(2.8, 58.0), {0: d2, 1: d1})
    assert r.success
    assert abs(r.values["A.cq_mhz"] - 3.2) < 3 * r.stderr["A.cq_mhz"]
    assert abs(r.values["A.shift_ppm"] - 61.0) < 3 * r.stderr["A.shift_ppm"]
    assert r.scales[0] == pytest.approx(3.0, rel=0.05) and r.scales[1] == pytest.approx(0.5, rel=0.05)


# ---------------------------------------------------------------------------
# parts of the data: F2 regions, F1 regions, single F2 slices; data on another F1 scale
# ---------------------------------------------------------------------------
def test_selection_mask_rows_and_columns():
    from powderspin.fitting.two_dimensional import selection_mask_2d

    f1, f2 = np.arange(10.0), np.arange(20.0)
    assert selection_mask_2d(f1, f2).all()
    m = selection_mask_2d(f1, f2, regions=[(15.0, 5.0)], f1_regions=[(3.0, 1.0)], slice_f1_ppm=[7.4])
    assert np.flatnonzero(m.any(axis=1)).tolist() == [1, 2, 3, 7]
    assert np.flatnonzero(m.any(axis=0)).tolist() == list(range(5, 16))
    assert m.sum() == 4 * 11
    with pytest.raises(FitError, match=r"slice_f1_ppm = 12 lies outside the data's F1 axis \[0, 9\] ppm"):
        selection_mask_2d(f1, f2, slice_f1_ppm=[12.0])


def _one_site(values=None, **meas_extra):
    # the start lies within the F1 line width of the truth (a start whose F1 line misses the data's has no gradient
    # to follow: a local search needs a start near the answer)
    v = {"cq": 2.35, "shift": 6.6} if values is None else values
    meas = {"field_tesla": 11.7, "spinning_hz": "inf", "experiment": "mqmas", "points": 128, "f1_points": 48,
            "orientations": 12, "gauss_hz": 150.0, "f1_gauss_hz": 400.0, "center_ppm": 0.0, "width_ppm": 60.0,
            "f1_center_ppm": 10.0, "f1_width_ppm": 40.0, **meas_extra}
    site = {"label": "Na", "eta_q": 0.4, "cq_mhz": {"start": v["cq"], "min": 0.5, "max": 5.0},
            "shift_ppm": {"start": v["shift"], "min": -30.0, "max": 40.0}}
    return ps.make_model("23Na", meas, [site])


@pytest.fixture(scope="module")
def noisy_one_site():
    """SYNTHETIC 3QMAS data of one 23Na site (fixed noise seed)."""
    truth = ps.simulate(_one_site({"cq": 2.2, "shift": 6.0}))
    rng = np.random.default_rng(15)
    y = truth.intensity + rng.normal(0.0, 0.01 * truth.intensity.max(), truth.shape)
    from powderspin.engine.spectrum2d import Spectrum2D

    return Spectrum2D(truth.f1_hz, truth.f1_ppm, truth.f2_hz, truth.f2_ppm, y, truth.site_labels,
                      truth.site_intensities, truth.metadata)


def test_fitting_chosen_f2_slices_recovers_the_site(noisy_one_site):
    s = noisy_one_site
    centre = s.metadata["centres_of_gravity_ppm"]["Na"]["f1"]
    d = MeasuredSpectrum2D(s.f1_ppm, s.f2_ppm, s.intensity, s.metadata["nu_ref_hz"], "synthetic")
    r = fit_two_dimensional(_one_site(), {0: d}, slice_f1_ppm=[centre - 2.0, centre, centre + 2.0],
                            regions=[(20.0, -25.0)])
    assert r.success
    rows = np.flatnonzero(r.masks[0].any(axis=1))
    assert rows.size == 3 and r.masks[0].sum() == 3 * int(((s.f2_ppm <= 20) & (s.f2_ppm >= -25)).sum())
    assert abs(r.values["Na.cq_mhz"] - 2.2) < 3 * r.stderr["Na.cq_mhz"]
    assert abs(r.values["Na.shift_ppm"] - 6.0) < 3 * r.stderr["Na.shift_ppm"]
    assert r.selection["slice_f1_ppm"] == pytest.approx([centre - 2.0, centre, centre + 2.0])
    # the fitted spectrum on the data's axes, its scale applied: the residual over the fitted rows is noise-like
    res = (s.intensity - r.spectra[0].intensity)[r.masks[0]]
    assert np.std(res) < 1.5 * 0.01 * s.intensity.max()
    # an F1 region through the site gives a result consistent with the slices'
    r2 = fit_two_dimensional(_one_site(), {0: d}, f1_regions=[(centre + 3.0, centre - 3.0)])
    assert abs(r2.values["Na.cq_mhz"] - r.values["Na.cq_mhz"]) < 3 * r.stderr["Na.cq_mhz"]


def test_selection_without_points_is_refused(noisy_one_site):
    s = noisy_one_site
    d = MeasuredSpectrum2D(s.f1_ppm, s.f2_ppm, s.intensity, s.metadata["nu_ref_hz"], "synthetic")
    with pytest.raises(FitError, match="measurement 1: no data point lies in the fit regions"):
        fit_two_dimensional(_one_site(), {0: d}, regions=[(500.0, 400.0)])
    with pytest.raises(FitError, match="slice_f1_ppm = 900 lies outside"):
        fit_two_dimensional(_one_site(), {0: d}, slice_f1_ppm=[900.0])
    with pytest.raises(FitError, match="f1_regions / slice_f1_ppm choose F2 slices of 2D data"):
        fit_two_dimensional(_one_site().with_measurement(0, experiment="1d"),
                            {0: MeasuredSpectrum(s.f2_hz, s.f2_ppm, s.f2_projection(), None,
                                                 s.metadata["nu_ref_hz"], "1d")}, slice_f1_ppm=[5.0])


@pytest.mark.parametrize("name", ["t1_evolution", "total_evolution"])
def test_data_on_another_f1_scale_fit_to_the_same_parameters(tmp_path, noisy_one_site, name):
    """The same data written on another F1 scale (Spectrum2D.on_f1_scale) and read back with that scale named give
    the parameters of the isotropic-scale fit (the scales are exact multiples; powderspin.physics.multiple_quantum)."""
    from powderspin.io.spectra2d import read_spectrum_2d, write_spectrum_2d
    from powderspin.physics.multiple_quantum import two_dimensional_scale

    s = noisy_one_site
    write_spectrum_2d(s, tmp_path / "iso.npz")
    write_spectrum_2d(s.on_f1_scale(name), tmp_path / "other.npz")
    scale = two_dimensional_scale(1.5, "mqmas", 3)
    iso = read_spectrum_2d(tmp_path / "iso.npz", f1_referencing="isotropic")
    other = read_spectrum_2d(tmp_path / "other.npz", f1_referencing=name, experiment_scale=scale)
    stated = read_spectrum_2d(tmp_path / "other.npz", f1_referencing="file", experiment_scale=scale)
    np.testing.assert_allclose(other.f1_ppm, iso.f1_ppm, rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(stated.f1_ppm, iso.f1_ppm, rtol=1e-12, atol=1e-9)
    r0 = fit_two_dimensional(_one_site(), {0: iso})
    r1 = fit_two_dimensional(_one_site(), {0: other})
    for k in r0.values:
        assert r1.values[k] == pytest.approx(r0.values[k], rel=1e-6)
        assert r1.stderr[k] == pytest.approx(r0.stderr[k], rel=1e-4)
    # the intensities are the file's (density per ppm^2 of its own F1 axis): the solved scale takes the factor
    c = scale.f1_scale_factor(name)
    assert r1.scales[0] * c == pytest.approx(r0.scales[0], rel=1e-6)
