"""The Simulator: decisions made once, values by name, sequence or mapping, derivatives, and simulate on top of it.

Checks against the pipeline's own pieces (a fresh simulate of the changed model is the reference for
every re-use) and against central finite differences for the Jacobian.
"""

from __future__ import annotations

import numpy as np
import pytest

import powderspin as ps
import powderspin.engine.site_lines as stage
import powderspin.simulator as simulator_module
from powderspin.model.values import ModelError, ParameterAddress
from powderspin.simulator import SimulationCache, Simulator


def _model(**site):
    s = {"label": "A", "shift_ppm": 55.0, "cq_mhz": {"start": 4.0, "min": 2.0, "max": 6.0},
         "eta_q": {"start": 0.3, "min": 0.0, "max": 1.0}, "gauss_hz": {"start": 150.0, "min": 10.0, "max": 900.0},
         "weight": 1.0}
    s.update(site)
    return ps.make_model("27Al", {"field_tesla": 9.4, "spinning_hz": 12000.0, "points": 512, "center_ppm": 20.0,
                                  "width_ppm": 300.0, "orientations": "auto"},
                         [s, {"label": "B", "shift_ppm": 5.0, "cq_mhz": 2.0, "eta_q": 0.7, "gauss_hz": 200.0}])


def test_decisions_are_made_once(monkeypatch):
    # Source: the pipeline's own deciders; a Simulator calls them while it is built and never again.
    calls = {"method": 0, "orientations": 0}
    for name, key in (("choose_method", "method"), ("choose_orientations", "orientations")):
        original = getattr(simulator_module, name)

        def counted(*a, _f=original, _k=key, **k):
            calls[_k] += 1
            return _f(*a, **k)

        monkeypatch.setattr(simulator_module, name, counted)
    sim = Simulator(_model())
    built = dict(calls)
    assert built == {"method": 2, "orientations": 2}
    for c in (3.0, 4.5, 5.5):
        sim.spectrum({"A.cq_mhz": c})
    sim.jacobian()
    assert calls == built
    assert sim.rotor_phases[0] > 0 and all(n.startswith("tri-") for n in sim.orientations)


def test_values_by_name_by_address_and_by_sequence_agree_with_a_fresh_simulation():
    # Source: simulate() of the model with the values written in (every memo bypassed).
    m = _model()
    sim = Simulator(m)
    a = ParameterAddress("site", 0, "cq_mhz")
    by_name = sim.spectrum({"A.cq_mhz": 4.6, "A.gauss_hz": 310.0}).intensity
    by_addr = sim.spectrum({a: 4.6, ParameterAddress("site", 0, "gauss_hz"): 310.0}).intensity
    by_seq = sim.spectrum([4.6, 0.3, 310.0]).intensity
    fresh = ps.simulate(m.with_parameters({a: 4.6, ParameterAddress("site", 0, "gauss_hz"): 310.0}),
                        orientations=list(sim.orientation_sets)).intensity
    np.testing.assert_array_equal(by_name, by_addr)
    np.testing.assert_array_equal(by_name, by_seq)
    np.testing.assert_allclose(by_name, fresh, rtol=0, atol=1e-12 * fresh.max())


def test_jacobian_matches_central_differences():
    # Source: central differences of the spectrum itself (second order in the step), at a step of 1e-4
    # of each value; the forward-difference Jacobian must agree to about that order.
    sim = Simulator(_model())
    theta = np.array([4.0, 0.3, 150.0])
    jac = sim.jacobian(theta)
    for k in range(3):
        h = 1e-4 * abs(theta[k])
        up, dn = theta.copy(), theta.copy()
        up[k] += h
        dn[k] -= h
        ref = (sim.site_intensities(up).sum(0) - sim.site_intensities(dn).sum(0)) / (2 * h)
        assert np.max(np.abs(jac[:, k] - ref)) < 2e-3 * np.max(np.abs(ref)), k


def _count_line_computations(monkeypatch) -> dict:
    """Count the Simulator's calls of the producer stage (``compute_lines``) from now on."""
    calls = {"n": 0}
    original = simulator_module.compute_lines

    def counted(*a, **k):
        calls["n"] += 1
        return original(*a, **k)

    monkeypatch.setattr(simulator_module, "compute_lines", counted)
    return calls


def test_a_weight_step_does_not_recompute_lines(monkeypatch):
    m = _model(weight={"start": 1.0, "min": 0.1, "max": 5.0})
    sim = Simulator(m)
    calls = _count_line_computations(monkeypatch)
    sim.spectrum({"A.weight": 2.0, "A.gauss_hz": 400.0})
    assert calls["n"] == 0
    sim.spectrum({"A.cq_mhz": 4.1})
    assert calls["n"] == 1


def test_bad_values_are_refused_with_the_name():
    sim = Simulator(_model())
    with pytest.raises(ModelError, match="3 parameter"):
        sim.spectrum([1.0])
    with pytest.raises(ModelError, match="no site 'Z'"):
        sim.spectrum({"Z.cq_mhz": 3.0})
    with pytest.raises(ModelError, match="A.cq_mhz.*number"):
        sim.spectrum({"A.cq_mhz": "three"})
    with pytest.raises(ModelError, match="A.cq_mhz.*finite"):
        sim.spectrum({"A.cq_mhz": float("nan")})
    with pytest.raises(ModelError, match="eta_q"):
        sim.spectrum({"A.eta_q": 1.5})


def test_a_shared_cache_lets_a_second_simulator_reuse_lines(monkeypatch):
    cache = SimulationCache()
    Simulator(_model(), cache=cache)
    calls = _count_line_computations(monkeypatch)
    Simulator(_model(), cache=cache).spectrum()
    assert calls["n"] == 0


def test_simulate_is_the_simulator_at_the_model_values():
    m = _model()
    a = ps.simulate(m)
    b = Simulator(m).spectrum()
    np.testing.assert_array_equal(a.intensity, b.intensity)
    assert a.metadata["method"] == b.metadata["method"]


def test_centrebands_and_band_intensities_add_up():
    # Source: the sideband sum rule (M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300): the bands of
    # a site hold all of its intensity, so the band intensities sum to 1 and the centreband is part of the site.
    m = _model()
    m = m.with_measurement(0, points=8192, width_ppm=3000.0)  # wide enough that nothing falls off the axis
    sim = Simulator(m)
    spec = sim.spectrum()
    centre = sim.centrebands()
    for k, bands in enumerate(sim.band_intensities()):
        assert abs(bands.sum() - 1.0) < 1e-9
        inside = centre[k].sum() / spec.site_intensities[k].sum()
        assert abs(inside - bands[0]) < 1e-6
    assert np.all(centre <= spec.site_intensities + 1e-9 * spec.site_intensities.max())  # FFT rounding


def test_the_stage_functions_are_what_the_simulator_uses():
    # the module names the stage functions the planner test spies on
    for name in ("site_job", "compute_lines", "render_lines", "choose_method", "choose_orientations"):
        assert getattr(simulator_module, name) is getattr(stage, name)
