"""Finite-pulse MQMAS excitation through the Simulator, the model file, the 2D plot and the 2D fit."""

from __future__ import annotations

import numpy as np
import pytest

from powderspin.fitting.two_dimensional import fit_two_dimensional
from powderspin.io.spectra2d import MeasuredSpectrum2D
from powderspin.model.modelfile import make_model
from powderspin.model.values import ModelError
from powderspin.simulator import Simulator, simulate

PULSES = {"mq_pulses": "z-filter", "mq_rf_khz": 100.0, "mq_excite_us": 3.5, "mq_convert_us": 1.2,
          "zfilter_rf_khz": 10.0}


def _model(extra=None, orientations=16, free_weight=False):
    meas = {"field_tesla": 14.1, "spinning_hz": "inf", "experiment": "mqmas", "points": 128, "f1_points": 64,
            "orientations": orientations, "gauss_hz": 300.0, "f1_gauss_hz": 200.0, **(extra or {})}
    w = {"start": 1.0, "min": 0.1, "max": 5.0} if free_weight else 1.0
    sites = [{"label": "A", "shift_ppm": 60.0, "cq_mhz": 3.0, "eta_q": 0.4},
             {"label": "B", "shift_ppm": 10.0, "cq_mhz": 7.0, "eta_q": 0.2, "weight": w}]
    return make_model("27Al", meas, sites)


def _integrals(spec):
    dx = abs(spec.f1_ppm[1] - spec.f1_ppm[0]) * abs(spec.f2_ppm[1] - spec.f2_ppm[0])
    return spec.site_intensities.sum(axis=(1, 2)) * dx


def test_ideal_excitation_site_integrals_equal_weights():
    # ideal excitation (the default, mq_pulses = "ideal"): each site's 2D integral is its weight (the
    # normalisation of the binning, DEVELOPERS.md "Triangle interpolation"; wide axes keep everything)
    spec = simulate(_model({"width_ppm": 400.0, "center_ppm": 0.0, "f1_width_ppm": 300.0, "f1_center_ppm": 30.0}))
    np.testing.assert_allclose(_integrals(spec), [1.0, 1.0], rtol=1e-5)
    assert spec.metadata["excitation"].startswith("ideal")


def test_modelled_excitation_weights_each_site_by_its_excited_fraction():
    axes = {"width_ppm": 400.0, "center_ppm": 0.0, "f1_width_ppm": 300.0, "f1_center_ppm": 30.0}
    spec = simulate(_model({**axes, **PULSES}))
    exc = spec.metadata["excitation"]
    frac = [exc["excited_fraction"][k] for k in ("A", "B")]
    np.testing.assert_allclose(_integrals(spec), frac, rtol=1e-5)
    # a larger C_Q is excited differently (the point of modelling it), and both less than a hard 90 degree pulse
    assert 0 < frac[1] < 1 and 0 < frac[0] < 1 and abs(frac[0] - frac[1]) > 0.1 * max(frac)
    assert exc["sequence"] == "z-filter" and exc["echo_pathway"] == "0 -> +3 -> 0 -> -1"
    assert exc["selective_us"] == pytest.approx(1e6 / (4 * 3.0 * 10e3))  # selective 90: 1 / (4 (I + 1/2) nu1)
    # the F1 and F2 positions are those of the ideal spectrum: only the weights change
    ideal = simulate(_model(axes))
    assert spec.f1_ppm.tolist() == ideal.f1_ppm.tolist() and spec.f2_ppm.tolist() == ideal.f2_ppm.tolist()


def test_pulses_are_kept_in_the_model_file(tmp_path):
    from powderspin.model.modelfile import load_model, write_model

    m = _model(PULSES)
    path = tmp_path / "m.toml"
    write_model(m, path)
    back = load_model(path).measurements[0]
    for k, v in PULSES.items():
        assert getattr(back, k) == v
    assert back.mq_pathway == "echo"


@pytest.mark.parametrize("extra,words", [
    ({"mq_rf_khz": 100.0}, "mq_rf_khz given with mq_pulses = \"ideal\""),
    ({"mq_pulses": "two-pulse", "mq_rf_khz": 100.0}, "needs mq_excite_us, mq_convert_us"),
    ({**PULSES, "zfilter_rf_khz": None}, "needs zfilter_rf_khz"),
    ({"mq_pulses": "two-pulse", "mq_rf_khz": 100.0, "mq_excite_us": 3.0, "mq_convert_us": 1.0,
      "zfilter_rf_khz": 5.0}, "is for mq_pulses = \"z-filter\""),
    ({**PULSES, "experiment": "stmas"}, "is for experiment = \"mqmas\""),
    ({**PULSES, "mq_rf_khz": 5000.0}, "mq_rf_khz"),
    ({**PULSES, "mq_pathway": "forward"}, "mq_pathway"),
    ({"pulse_sequence": "single", "pulse_us": 1.0, "rf_khz": 50.0}, "pulse_sequence = 'single' is for 1D"),
])
def test_bad_pulse_keys_are_one_clear_error(extra, words):
    extra = {k: v for k, v in extra.items() if v is not None}
    with pytest.raises(ModelError, match=None) as e:
        _model(extra)
    assert words in str(e.value)
    assert "\n" not in str(e.value)


def test_plot_says_whether_excitation_is_modelled():
    from powderspin.plotting.spectrum2d import plot_spectrum_2d

    for extra, words in (({}, "excitation: ideal"), (PULSES, "excitation: modelled (z-filter)")):
        fig = plot_spectrum_2d(simulate(_model(extra, orientations=8)))
        assert any(words in ax.get_title() for ax in fig.axes)


def test_fitted_populations_warn_only_with_ideal_excitation():
    # populations from MQMAS with ideal excitation are not quantitative (L. Frydman, J. S. Harwood, J. Am. Chem.
    # Soc. 117 (1995) 5367; intensities depend on C_Q / nu1): the fit warns unless the pulses are modelled
    for extra, warned in (({}, True), (PULSES, False)):
        model = _model(extra, orientations=8, free_weight=True)
        truth = simulate(_model(extra, orientations=8))
        y = truth.intensity + np.random.default_rng(2).normal(0, 1e-3 * truth.intensity.max(), truth.shape)
        data = MeasuredSpectrum2D(truth.f1_ppm, truth.f2_ppm, y, truth.metadata["nu_ref_hz"], "synthetic")
        r = fit_two_dimensional(model, {0: data}, max_evaluations=5)
        assert any("site weights fitted to MQMAS" in w for w in r.warnings) is warned


def test_efficiencies_are_computed_once_per_simulator():
    # a fit step that changes only a broadening reuses the per-orientation efficiencies (SimulationCache)
    sim = Simulator(_model(PULSES, orientations=8))
    sim.spectrum()
    keys = [k for k in sim.cache.lines if isinstance(k, tuple) and k and k[0] == "f1" and k[-1] is not None]
    assert len(keys) == 2
    before = {id(sim.cache.lines[k]) for k in keys}
    sim.spectrum()
    assert {id(sim.cache.lines[k]) for k in keys} == before


def test_efficiencies_of_an_efg_distribution_are_kept_by_node(monkeypatch):
    # a Czjzek site in 2D has more nodes than the lines memo holds; the efficiencies are kept by (job, pulses), so a
    # step that moves no node (here a new shift) computes none, and gives what a fresh Simulator gives
    import powderspin.simulator as S

    meas = {"field_tesla": 14.1, "spinning_hz": "inf", "experiment": "mqmas", "points": 128, "f1_points": 64,
            "orientations": 8, "gauss_hz": 1500.0, "f1_gauss_hz": 300.0, **PULSES}
    site = {"label": "glass", "shift_ppm": {"start": 60.0, "min": 0.0, "max": 100.0}, "cq_mhz": 0.0,
            "czjzek_sigma_mhz": 2.0}
    model = make_model("27Al", meas, [site])
    sim = Simulator(model)
    sim.spectrum()
    assert len(sim._two_d_parts(sim.model, 0)) > sim.cache.lines.size  # the case that needs the node memo
    calls = []
    real = S.mq_excitation
    monkeypatch.setattr(S, "mq_excitation", lambda *a: calls.append(1) or real(*a))
    got = sim.spectrum([61.0])
    assert calls == []
    monkeypatch.setattr(S, "mq_excitation", real)
    want = Simulator(model).spectrum([61.0])
    np.testing.assert_allclose(got.intensity, want.intensity, rtol=0, atol=1e-12 * np.abs(want.intensity).max())


def test_weights_memo_forgets_the_oldest_beyond_its_budget():
    from powderspin.simulator import SimulationCache

    c = SimulationCache(weights_mb=3 * 8e3 / 2 ** 20)  # room for three arrays of 1000 floats
    for k in range(5):
        c.weights[k] = np.zeros(1000)
    assert list(c.weights) == [2, 3, 4] and c.weights.nbytes == 24000
    c.weights[3] = np.zeros(10)  # replacing an entry counts its new size only
    assert c.weights.nbytes == 16080
