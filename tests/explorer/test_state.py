"""The explorer's page state without a browser: values, refusals, curves, saving, fitting, measurements."""

from __future__ import annotations

import threading

import numpy as np
import pytest

import powderspin as ps
from powderspin.explorer.state import ExplorerState, FitCancelled, load_inputs, slider_window
from powderspin.fitting.data import FitError
from tests.explorer.helpers import write_inputs


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    return write_inputs(tmp_path_factory.mktemp("state-inputs"))


@pytest.fixture
def state(inputs):
    model, data = inputs
    m, d, paths, _ = load_inputs(model, [data])
    return ExplorerState(m, d, paths, model_path=str(model))


def test_controls_cover_every_parameter_by_its_fit_name(state):
    names = [c.name for c in state.controls]
    assert names == ["Tet.weight", "Tet.shift_ppm", "Tet.cq_mhz", "Tet.eta_q", "Tet.lorentz_hz", "Tet.gauss_hz",
                     "Tet.shift_fwhm_ppm", "measurement 1.lorentz_hz", "measurement 1.gauss_hz",
                     "measurement 1.shift_offset_ppm"]
    cq = state.by_name["Tet.cq_mhz"]
    assert (cq.free, cq.low, cq.high, cq.slider_low, cq.slider_high) == (True, 1.0, 6.0, 1.0, 6.0)
    g = state.by_name["measurement 1.gauss_hz"]
    assert (g.free, g.low, g.high) == (False, 0.0, 1.0e7) and g.slider_low == 0.0 and g.slider_high >= 600.0


def test_refusals_name_the_parameter_and_range(state):
    before = state.last["total"].copy()
    assert state.set_text("Tet.cq_mhz", "x") == "Tet.cq_mhz: 'x' is not a number (MHz); allowed [1, 6]"
    assert state.set_text("Tet.cq_mhz", "") == "Tet.cq_mhz: empty; give a number (MHz) in [1, 6]"
    assert "outside its free range" in state.set_text("Tet.cq_mhz", "6.5")
    assert "outside the allowed range [0, 1000000]" in state.set_text("Tet.weight", "-1")
    assert "not a finite number" in state.set_text("Tet.eta_q", "inf")
    assert state.set_text("nope.cq_mhz", "1") == "nope.cq_mhz: no such parameter on this page"
    np.testing.assert_array_equal(state.last["total"], before)


def test_values_the_model_refuses_as_a_whole():
    """A value in the key's range that the model refuses: a broadening wider than the axis."""
    model = ps.make_model("31P", {"field_tesla": 9.4, "points": 256, "center_ppm": 0.0, "width_ppm": 100.0},
                          [{"label": "P", "span_ppm": 50.0, "skew": 0.2}])
    st = ExplorerState(model)
    before = st.last["total"].copy()
    msg = st.set_text("measurement 1.gauss_hz", "9000000")
    assert msg.startswith("measurement 1.gauss_hz = 9e+06 refused:") and "wider than the axis" in msg
    assert st.values["measurement 1.gauss_hz"] == 0.0
    np.testing.assert_array_equal(st.last["total"], before)
    assert st.set_text("P.span_ppm", "80") is None


def test_curves_follow_values_and_are_the_simulators(state, inputs):
    assert state.set_text("Tet.cq_mhz", "4.0") is None
    c = state.last
    m = ps.load_model(inputs[0])
    sim = ps.Simulator(m, 0, axis=state.sim.axis)
    y = sim.spectrum({"Tet.cq_mhz": 4.0}).intensity
    np.testing.assert_allclose(c["total"], c["scale"] * y, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(c["residual"], c["data"] - c["total"])
    # the least-squares scale makes the residual orthogonal to the simulation (normal equations)
    assert abs(float(c["residual"] @ c["total"])) < 1e-9 * float(c["total"] @ c["total"])
    np.testing.assert_allclose(c["khz"], c["ppm"] * state.sim.axis.nu_ref_hz * 1e-9, rtol=1e-12)


def test_saved_model_reproduces_the_curve_and_inputs_are_protected(state, inputs, tmp_path):
    model, data = inputs
    assert state.set_text("Tet.eta_q", "0.7") is None
    target = tmp_path / "out.toml"
    path, msg = state.save(str(target))
    assert path == target and msg.startswith("saved")
    np.testing.assert_allclose(ps.simulate(target).intensity, state.last["total"], rtol=1e-10,
                               atol=1e-12 * state.last["total"].max())
    saved = ps.load_model(target)
    assert saved.free[2].start == 0.7
    assert (target.parent / saved.measurements[0].data).resolve() == data.resolve()
    text = model.read_text()
    for bad, expect in ((str(model), "the model file"), (str(data), "must end in .toml"),
                        (str(tmp_path / "missing" / "x.toml"), "does not exist"), ("", "give a file name"),
                        (str(tmp_path), "must end in .toml"), (str(target), "exists")):
        p, msg = state.save(bad)
        assert p is None and expect in msg
    assert model.read_text() == text
    assert state.save(str(target), replace_existing=True)[0] == target


def test_other_field_hides_the_data_and_refuses_a_fit(state, tmp_path):
    assert state.set_condition("field_tesla", "9.4") is None
    assert state.last["data"] is None and state.sim.measurement.field_tesla == 9.4
    with pytest.raises(FitError, match="set them back"):
        state.run_fit()
    path, _ = state.save(str(tmp_path / "elsewhere.toml"))
    saved = ps.load_model(path)
    assert saved.measurements[0].field_tesla == 9.4 and saved.measurements[0].data is None  # data belong to 14.1 T
    np.testing.assert_allclose(ps.simulate(path).intensity, state.last["total"], rtol=1e-9,
                               atol=1e-12 * state.last["total"].max())
    assert "[0.1, 40]" in state.set_condition("field_tesla", "50")
    assert "is not a number" in state.set_condition("spinning_hz", "fast")
    assert state.set_condition("spinning_hz", "inf") is None
    assert state.set_condition("field_tesla", "14.1") is None and state.set_condition("spinning_hz", "12000") is None
    assert state.last["data"] is not None and not state.overrides


def test_fit_runs_cancels_and_moves_the_values(state, tmp_path):
    stop = threading.Event()
    stop.set()
    with pytest.raises(FitCancelled):
        state.run_fit(cancel=stop)
    seen = []
    result = state.run_fit(progress=seen.append)
    assert seen and seen[-1].stage in ("fit", "lines")
    r2 = ps.fit(ps.load_model(state.model_path), list(state.data))
    for n in result.names:  # the same fit as `powderspin fit` from the model's own start
        assert result.values[n] == pytest.approx(r2.values[n], rel=1e-9, abs=1e-12)
    state.adopt_fit(result)
    assert state.values["Tet.cq_mhz"] == pytest.approx(result.values["Tet.cq_mhz"], rel=1e-12)
    path, _ = state.save(str(tmp_path / "fitted.toml"))
    np.testing.assert_allclose(ps.simulate(path).intensity, result.spectra[0].intensity, rtol=1e-9,
                               atol=1e-12 * result.spectra[0].intensity.max())


def test_measurement_choice_keeps_site_values():
    model = ps.make_model("27Al", [{"field_tesla": 9.4, "spinning_hz": "inf", "points": 256},
                                   {"field_tesla": 18.8, "spinning_hz": "inf", "points": 256}],
                          [{"label": "A", "shift_ppm": 50.0, "cq_mhz": 4.0},
                           {"label": "B", "shift_ppm": 5.0, "cq_mhz": 2.0, "gauss_hz": {"same_as": "A.gauss_hz"}}])
    st = ExplorerState(model)
    assert "B.gauss_hz" not in st.by_name  # tied: follows A.gauss_hz
    assert st.set_text("A.cq_mhz", "5") is None
    assert st.set_measurement(1) is None
    assert st.sim.measurement.field_tesla == 18.8 and st.values["A.cq_mhz"] == 5.0
    assert "measurement 2.gauss_hz" in st.by_name and "measurement 1.gauss_hz" in st.by_name
    assert st.set_text("measurement 2.gauss_hz", "400") is None and st.set_text("measurement 1.gauss_hz", "9") is None
    assert st.set_measurement(0) is None and st.values["measurement 2.gauss_hz"] == 400.0
    assert st.sim.measurement.field_tesla == 9.4 and st.values["A.cq_mhz"] == 5.0
    assert st.set_measurement(2) is not None
    with pytest.raises(FitError, match="needs data"):
        st.run_fit()


def test_slider_window_stays_in_the_allowed_range():
    assert slider_window("shift_ppm", 0.0, -1e5, 1e5) == (-50.0, 50.0)
    assert slider_window("gauss_hz", 100.0, 0.0, 1e7) == (0.0, 2000.0)
    assert slider_window("cq_mhz", -3.0, -1000.0, 1000.0) == (-10.0, 0.0)
    assert slider_window("euler_deg", 270.0, -360.0, 360.0) == (-360.0, 360.0)


def test_csv_and_figures(state):
    text = state.csv_text()
    head = text.splitlines()[2].split(",")
    assert head == ["ppm", "khz", "data", "simulation", "site Tet", "residual"]
    arr = np.loadtxt(text.splitlines()[3:], delimiter=",")
    np.testing.assert_allclose(arr[:, 3], state.last["total"], rtol=1e-9)
    assert state.figure_bytes("png").startswith(b"\x89PNG")
    assert b"<svg" in state.figure_bytes("svg", unit="khz")
