"""The per-site stage: hashable jobs, lines computed once, rendering repeated without producers."""

from __future__ import annotations

import math

import numpy as np
import pytest

import powderspin.engine.site_lines as stage
from powderspin.engine.lineshape import Axis
from powderspin.engine.site_lines import compute_lines, render_lines, site_job
from powderspin.model.modelfile import make_model
from powderspin.model.values import Measurement, ModelError, ParameterAddress, Site
from powderspin.physics.nuclides import get_nuclide
from powderspin.physics.tensors import ShiftTensor
from powderspin.simulator import Simulator, simulate

AL = get_nuclide("27Al")


@pytest.fixture
def count_producers(monkeypatch):
    """Count calls of every frequency producer used by the stage."""
    calls = {"n": 0, "log": []}
    for name in ("perturbative_offsets", "exact_offsets", "corrected_exact_offsets", "perturbative_sidebands",
                 "rotor_lines", "trajectory_sidebands"):
        original = getattr(stage, name)

        def counted(*a, _f=original, _name=name, **k):
            calls["n"] += 1
            calls["log"].append((_name, len(a[1]) if len(a) > 1 and hasattr(a[1], "__len__") else None))
            return _f(*a, **k)

        monkeypatch.setattr(stage, name, counted)
    return calls


def _model(**site_changes):
    site = {"label": "A", "shift_ppm": 55.0, "cq_mhz": 4.0, "eta_q": 0.3, "span_ppm": 40.0, "skew": 0.2,
            "euler_deg": [0.0, 30.0, 0.0], "gauss_hz": 100.0}
    site.update(site_changes)
    return make_model("27Al", {"field_tesla": 9.4, "spinning_hz": 12000.0, "points": 1024, "center_ppm": 20.0,
                               "width_ppm": 400.0, "orientations": 24, "lorentz_hz": 50.0}, [site])


def test_job_is_hashable_and_ignores_render_parameters():
    a = _model()
    b = _model(shift_ppm=70.0, gauss_hz=400.0, weight=3.0, label="B")
    meas = a.measurement
    ja = site_job(a.sites[0], meas, AL, "perturbation")
    jb = site_job(b.sites[0], replace_meas(meas, lorentz_hz=500.0), AL, "perturbation")
    assert ja == jb and hash(ja) == hash(jb)
    assert len({ja, jb}) == 1
    # what changes the lines changes the job
    assert site_job(_model(cq_mhz=4.1).sites[0], meas, AL, "perturbation") != ja
    assert site_job(a.sites[0], replace_meas(meas, spinning_hz=13000.0), AL, "perturbation") != ja
    # the exact route carries the isotropic shift (it enters the Zeeman term of the Hamiltonian)
    ex_a = site_job(a.sites[0], meas, AL, "exact")
    ex_b = site_job(b.sites[0], meas, AL, "exact")
    assert ex_a != ex_b and ex_a.iso_ppm == 55.0


def replace_meas(meas: Measurement, **changes) -> Measurement:
    from dataclasses import replace

    return replace(meas, **changes)


def test_rerender_with_new_broadening_weight_and_shift_calls_no_producer(count_producers):
    """Re-rendering matches a full simulate to 1e-12 and computes no frequencies."""
    m0 = _model()
    changes = {ParameterAddress("site", 0, "shift_ppm"): 71.5, ParameterAddress("site", 0, "gauss_hz"): 333.0,
               ParameterAddress("site", 0, "weight"): 2.5, ParameterAddress("measurement", 0, "lorentz_hz"): 120.0,
               ParameterAddress("measurement", 0, "shift_offset_ppm"): -1.25}
    sim = Simulator(m0, parameters=list(changes), point_values=False)
    assert count_producers["n"] > 0 and len(sim.cache.lines) == 2  # the auto-phase job and its pinned twin
    m1 = m0.with_parameters(changes)
    count_producers["n"] = 0
    again = sim.spectrum(changes)
    assert count_producers["n"] == 0
    # the same through the stage's own render step, from the memo's lines
    lines = next(iter(sim.cache.lines.values()))
    nu_ref = AL.larmor_hz(9.4)
    axis = Axis.from_points(again.hz, nu_ref)
    r = render_lines(lines, axis, shift_hz=(71.5 - 1.25) * nu_ref * 1e-6, weight=2.5, lorentz_hz=120.0,
                     gauss_hz=math.hypot(333.0, 0.0))
    assert count_producers["n"] == 0
    # a full computation from scratch, of bin averages as render_lines gives them (Simulator's point_values
    # sampling renders finer where lines are narrow; tests/engine/test_lineshape.py checks it)
    fresh = Simulator(m1, point_values=False).spectrum()
    scale = np.max(np.abs(fresh.intensity))
    np.testing.assert_allclose(again.intensity, fresh.intensity, rtol=0, atol=1e-12 * scale)
    np.testing.assert_allclose(r.intensity, fresh.intensity, rtol=0, atol=1e-12 * scale)


def test_parameters_that_change_lines_do_recompute(count_producers):
    m0 = _model()
    sim = Simulator(m0, parameters=["A.cq_mhz"])
    count_producers["n"] = 0
    sim.spectrum({"A.cq_mhz": 4.2})
    assert count_producers["n"] > 0 and len(sim.cache.lines) == 3


def test_auto_method_is_decided_once(count_producers, monkeypatch):
    """A site that needs the exact route computes its lines once (no perturbative pass first)."""
    decided = []
    original = stage.choose_method

    def spy(*a, **k):
        out = original(*a, **k)
        decided.append(out[0])
        return out

    import powderspin.simulator as sim

    monkeypatch.setattr(sim, "choose_method", spy)
    m = make_model("27Al", {"field_tesla": 4.7, "points": 512, "orientations": 20},
                   [{"label": "big", "cq_mhz": 18.0, "eta_q": 0.4}])
    spec = simulate(m)
    assert decided == ["exact"]
    assert spec.metadata["method"] == {"big": "exact"}
    # one exact pass over the orientation set (the fast exact route: second order plus the correction
    # fitted once per site from its own few hundred diagonalisations); perturbation theory only on the
    # 96 probe directions that size the provisional axis
    assert count_producers["log"] == [("perturbative_offsets", 96), ("corrected_exact_offsets", 231)]
    assert spec.metadata["orientations"]["big"] == "tri-octant-20 (231 directions)"


def test_translation_of_a_single_line_is_exact():
    """An isotropic 31P line (static) rendered at two shifts: same shape, moved by the shift."""
    p = get_nuclide("31P")
    job = site_job(Site(shift=ShiftTensor(0.0)), Measurement(9.4, orientations=4, binning="histogram"), p,
                   "perturbation")
    lines = compute_lines(job)
    nu_ref = p.larmor_hz(9.4)
    axis = Axis(0.0, 4000.0, 400, nu_ref)
    a = render_lines(lines, axis, shift_hz=-1000.0, binning="histogram", lorentz_hz=30.0).intensity
    b = render_lines(lines, axis, shift_hz=-1000.0 + 10 * axis.dx_hz, binning="histogram",
                     lorentz_hz=30.0).intensity
    np.testing.assert_allclose(b[10:300], a[:290], atol=1e-9 * a.max())


def test_lost_intensity_is_reported():
    m = make_model("31P", {"field_tesla": 9.4, "points": 256, "center_ppm": 0.0, "width_ppm": 50.0},
                   [{"label": "wide", "span_ppm": 200.0, "skew": 0.0}])
    spec = simulate(m)
    assert any("outside the axis" in n for n in spec.metadata["notes"])


def test_fixed_rotor_phases_that_alias_are_reported():
    m = make_model("31P", {"field_tesla": 9.4, "spinning_hz": 1000.0, "rotor_phases": 16, "points": 512},
                   [{"label": "P", "span_ppm": 200.0, "skew": 0.0}])
    spec = simulate(m)
    assert any("rotor_phases = 16" in n and "alias" in n for n in spec.metadata["notes"])


def test_strong_coupling_is_refused_unless_asked():
    m = make_model("27Al", {"field_tesla": 9.4, "points": 256, "orientations": 4},
                   [{"label": "huge", "cq_mhz": 500.0}])
    with pytest.raises(ModelError, match="nu_Q.*allow-strong-coupling"):
        simulate(m)
    notes = stage.check_high_field(m.sites, m.nucleus, 9.4, allow_strong_coupling=True)
    assert notes and "0.72" in notes[0]


def test_streamed_lines_render_like_stored_ones():
    """Lines too large for the memory budget are recomputed chunk by chunk when rendered: same result."""
    m = _model()
    meas = m.measurement
    job = site_job(m.sites[0], meas, AL, "perturbation")
    stored = compute_lines(job)
    streamed = compute_lines(job, memory_budget_bytes=0)
    assert stored.intensity is not None and streamed.intensity is None
    axis = Axis(0.0, 200e3, 1024, AL.larmor_hz(9.4))
    a = render_lines(stored, axis, lorentz_hz=50.0).intensity
    b = render_lines(streamed, axis, lorentz_hz=50.0).intensity
    np.testing.assert_allclose(b, a, rtol=0, atol=1e-12 * a.max())
    h = render_lines(stored, axis, binning="histogram").intensity
    hs = render_lines(streamed, axis, binning="histogram").intensity
    np.testing.assert_allclose(hs, h, rtol=0, atol=1e-12 * h.max())


@pytest.mark.parametrize("binning", ["interpolate", "histogram"])
def test_lines_binned_while_computed_equal_binned_stored_lines(binning, monkeypatch):
    """Lines too large to keep, binned chunk by chunk as they are computed (the orientation choice's
    route): the same fractions as bin_lines over the whole stored set (the plain route)."""
    from powderspin.engine.lineshape import bin_lines
    from powderspin.engine.site_lines import BIN_CUTOFF, _compute_lines

    m = _model()
    job = site_job(m.sites[0], m.measurement, AL, "perturbation")
    stored = compute_lines(job)
    axis = Axis(3e3, 200e3, 1024, AL.larmor_hz(9.4))
    ref = bin_lines(axis, stored.mean, stored.intensity, stored.weights, stored.orientations, binning,
                    stored.rate_hz, BIN_CUTOFF)
    # a budget of 0 bytes: nothing kept, every chunk binned as it comes; small chunks, so that
    # triangles span chunks and the window of vertices is exercised
    monkeypatch.setattr(stage, "_CHUNK_POINTS", 2048)
    assert stage._Producer(job, stored.orientations).chunk_size(stored.phases) * 8 < stored.orientations.size
    lines, frac = _compute_lines(job, None, None, "", 0, render=(axis, binning, BIN_CUTOFF))
    assert lines.intensity is None and frac is not None
    np.testing.assert_allclose(frac, ref, rtol=0, atol=1e-12 * ref.max())
    np.testing.assert_allclose(lines.band_intensity, stored.band_intensity, rtol=0, atol=1e-12)


def test_lines_taken_from_the_previous_set_equal_computed_ones(monkeypatch):
    """The orientation choice's next set holds the previous set's directions (a triangulated set of
    twice the subdivisions); lines taken from it equal lines computed afresh."""
    from powderspin.engine.site_lines import _compute_lines
    from powderspin.physics.orientations import select_orientations

    m = _model(span_ppm=0.0, euler_deg=[0.0, 0.0, 0.0])
    meas = m.measurement
    coarse, fine = (select_orientations("octant", s, interpolate=True) for s in (8, 16))
    job_c = site_job(m.sites[0], meas, AL, "perturbation", coarse)
    job_f = site_job(m.sites[0], meas, AL, "perturbation", fine)
    known = compute_lines(job_c, orientations=coarse)
    fresh = compute_lines(job_f, orientations=fine)
    assert fresh.phases == known.phases
    rows = stage._shared_rows(fine, coarse)
    assert (rows >= 0).sum() == coarse.size
    np.testing.assert_allclose(fine.vectors[rows >= 0], coarse.vectors[rows[rows >= 0]], rtol=0, atol=1e-12)
    calls = []
    real = stage._Producer.reused_lines
    monkeypatch.setattr(stage._Producer, "reused_lines", lambda self, *a: calls.append(1) or real(self, *a))
    reused, _ = _compute_lines(job_f, fine, None, "", stage.LINES_MEMORY_BUDGET, known=known)
    assert calls  # the shared directions were taken from the known lines
    np.testing.assert_allclose(reused.mean, fresh.mean, rtol=0, atol=1e-9)
    np.testing.assert_allclose(reused.intensity, fresh.intensity, rtol=0, atol=1e-12)
    np.testing.assert_allclose(reused.band_intensity, fresh.band_intensity, rtol=0, atol=1e-12)
