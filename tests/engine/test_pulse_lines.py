"""Finite pulses through the per-site stage and the Simulator: limits, offsets, keys and bad input."""

from __future__ import annotations

import math

import numpy as np
import pytest

import powderspin as ps
from powderspin.engine.site_lines import compute_lines, site_job
from powderspin.model.modelfile import model_to_dict, parse_model
from powderspin.model.values import Measurement, ModelError, Site
from powderspin.physics.nuclides import get_nuclide
from powderspin.physics.tensors import ShiftTensor
from powderspin.simulator import Simulator

AXIS = {"points": 512, "center_ppm": 20.0, "width_ppm": 600.0}


def test_ideal_job_and_lines_are_unchanged():
    meas = Measurement(14.1, orientations=12)
    job = site_job(Site(cq_mhz=3.0), meas, get_nuclide("27Al"), "perturbation")
    assert job.pulse is None and "pulse" not in job.key()
    lines = compute_lines(job)
    assert lines.excited_fraction == 1.0
    assert float((lines.orientations.weights[:, None] * lines.weights).sum()) == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize("meas_extra,method", [({}, "perturbation"), ({"spinning_hz": 12000.0}, "perturbation"),
                                               ({"spinning_hz": "inf"}, "perturbation"), ({}, "exact")])
def test_hard_short_pulse_scales_the_ideal_spectrum_by_sin_theta(meas_extra, method):
    # nu1 >> nu_Q, every line near the carrier: each transition is excited as sin(theta), theta = 2 pi nu1 t
    # (rotation of Iz by a hard pulse; A. Abragam (1961), from memory).  All transitions of 27Al, C_Q 30 kHz.
    base = dict(AXIS, field_tesla=14.1, transitions="all", orientations=12, method=method, gauss_hz=300.0,
                center_ppm=0.0, width_ppm=100.0, **meas_extra)
    sites = [{"cq_mhz": 0.03, "eta_q": 0.4, "span_ppm": 20.0, "skew": 0.2}]
    ideal = Simulator(ps.make_model("27Al", base, sites)).spectrum()
    pulsed = Simulator(ps.make_model("27Al", dict(base, pulse_sequence="single", pulse_us=0.1, rf_khz=300.0),
                                     sites)).spectrum()
    s = math.sin(math.radians(360 * 300e3 * 0.1e-6))
    np.testing.assert_allclose(pulsed.intensity, s * ideal.intensity, rtol=0, atol=1e-3 * ideal.intensity.max())
    assert pulsed.metadata["excitation"]["excited_fraction"]["site 1"] == pytest.approx(s, rel=1e-3)


def test_carrier_offset_follows_the_bloch_rotation_for_spin_half():
    # 31P without anisotropy, carrier Delta away: excitation (nu1 / nu_eff) sin(2 pi nu_eff t) (Bloch
    # equations in the rotating frame; A. Abragam (1961), ch. II, from memory)
    nu0 = get_nuclide("31P").larmor_hz(9.4)
    delta_hz = 30e3
    meas = dict(AXIS, field_tesla=9.4, orientations=8, gauss_hz=200.0, center_ppm=0.0, width_ppm=200.0,
                pulse_sequence="single", pulse_us=4.0, rf_khz=40.0, carrier_ppm=-delta_hz / nu0 * 1e6)
    s = Simulator(ps.make_model("31P", meas, [{"shift_ppm": 0.0}])).spectrum()
    neff = math.hypot(40e3, delta_hz)
    expect = 40e3 / neff * math.sin(2 * math.pi * neff * 4e-6)
    assert s.metadata["excitation"]["excited_fraction"]["site 1"] == pytest.approx(expect, abs=1e-9)


def test_exact_and_perturbative_routes_agree_on_the_excitation():
    base = dict(AXIS, field_tesla=9.4, orientations=12, pulse_sequence="echo", pulse_us=1.5, rf_khz=60.0)
    fr = {}
    for method in ("perturbation", "exact"):
        s = Simulator(ps.make_model("23Na", dict(base, method=method), [{"cq_mhz": 2.0, "eta_q": 0.6}])).spectrum()
        fr[method] = s.metadata["excitation"]["excited_fraction"]["site 1"]
    assert fr["exact"] == pytest.approx(fr["perturbation"], rel=1e-3)
    assert 0.0 < fr["exact"] < 1.0


def test_keys_round_trip_through_the_model_file():
    d = {"nucleus": "27Al", "measurement": {"field_tesla": 9.4, "pulse_sequence": "echo", "pulse_us": 2.0,
                                            "echo_pulse_us": 3.5, "rf_khz": 45.0, "carrier_ppm": 12.0,
                                            "echo_train_period_us": 250.0, "echo_train_echoes": 40,
                                            "echo_train_t2_ms": 8.0, "echo_train_output": "envelope"},
         "site": [{"cq_mhz": 4.0}]}
    m = parse_model(d)
    back = model_to_dict(m)["measurement"]
    for k, v in d["measurement"].items():
        assert back[k] == v
    plain = model_to_dict(parse_model({"nucleus": "27Al", "measurement": {"field_tesla": 9.4},
                                       "site": [{"cq_mhz": 4.0}]}))["measurement"]
    assert not any(k.startswith(("pulse", "echo", "rf_", "carrier")) for k in plain)


@pytest.mark.parametrize("keys,words", [
    ({"pulse_us": 2.0, "rf_khz": 50.0}, ["pulse_us", "rf_khz", "pulse_sequence"]),
    ({"pulse_sequence": "single", "pulse_us": 2.0}, ["rf_khz"]),
    ({"pulse_sequence": "echo", "rf_khz": 50.0}, ["pulse_us"]),
    ({"pulse_sequence": "single", "pulse_us": 2.0, "rf_khz": 50.0, "echo_pulse_us": 4.0}, ["echo_pulse_us"]),
    ({"pulse_sequence": "double"}, ["pulse_sequence", "'single'"]),
    ({"pulse_sequence": "single", "pulse_us": -1.0, "rf_khz": 50.0}, ["pulse_us", "(0, 1000]"]),
    ({"pulse_sequence": "single", "pulse_us": 1.0, "rf_khz": 5000.0}, ["rf_khz", "1000"]),
    ({"echo_train_period_us": 0.0}, ["echo_train_period_us"]),
    ({"echo_train_output": "comb"}, ["echo_train_output"]),
])
def test_bad_acquisition_keys_name_the_key(keys, words):
    with pytest.raises(ModelError) as e:
        ps.make_model("27Al", dict(field_tesla=9.4, **keys), [{"cq_mhz": 3.0}])
    for w in words:
        assert w in str(e.value)


def test_distributed_sites_refuse_an_offset_carrier():
    m = ps.make_model("27Al", dict(field_tesla=9.4, pulse_sequence="single", pulse_us=1.0, rf_khz=50.0,
                                   carrier_ppm=20.0), [{"czjzek_sigma_mhz": 2.0}])
    with pytest.raises(ModelError, match="carrier_ppm"):
        Simulator(m)


def test_explicit_grid_with_pulses_is_the_weighted_sum_of_fixed_sites_with_pulses():
    # a site with an explicit C_Q/eta distribution is the weighted sum of fixed sites (the definition of the
    # distribution); with finite pulses each member keeps its own excitation, so the sum must hold too
    meas = {"field_tesla": 9.4, "spinning_hz": "inf", "points": 512, "center_ppm": 20.0, "width_ppm": 200.0,
            "orientations": "medium", "pulse_sequence": "single", "pulse_us": 2.0, "rf_khz": 50.0}
    cqv, cw, ev, ew = [2.0, 3.0, 4.5], [1.0, 2.0, 1.0], [0.1, 0.8], [3.0, 1.0]
    from powderspin.disorder.store import KernelStore

    def sim(sites):
        # bin averages on both sides (sites with an EFG distribution are not yet sampled as point values)
        return ps.Simulator(ps.make_model("27Al", meas, sites), kernel_store=KernelStore(None),
                            point_values=False).spectrum()

    got = sim([{"shift_ppm": 50.0, "gauss_hz": 200.0, "cq_distribution_mhz": {"values": cqv, "weights": cw},
                "eta_distribution": {"values": ev, "weights": ew}}])
    want = sum(a * b * sim([{"shift_ppm": 50.0, "gauss_hz": 200.0, "cq_mhz": c, "eta_q": e}]).intensity
               for c, a in zip(cqv, cw) for e, b in zip(ev, ew)) / (sum(cw) * sum(ew))
    rms = float(np.sqrt(np.mean((got.intensity - want) ** 2)) / np.max(np.abs(want)))
    assert rms < 1e-4
    f = got.metadata["excitation"]["excited_fraction"]["site 1"]
    assert f == pytest.approx(float(want.sum() * 200.0 / 512), rel=1e-3)
    assert not any("outside the axis" in t for t in got.metadata["notes"])


def test_shift_anisotropy_and_pulse_share_one_job_per_shift_on_resonance():
    # on resonance (no carrier_ppm) the perturbative job does not depend on the isotropic shift, so a fit
    # that moves the shift reuses the lines
    meas = Measurement(9.4, orientations=8, pulse_sequence="single", pulse_us=1.0, rf_khz=50.0)
    al = get_nuclide("27Al")
    a = site_job(Site(cq_mhz=3.0, shift=ShiftTensor(10.0)), meas, al, "perturbation")
    b = site_job(Site(cq_mhz=3.0, shift=ShiftTensor(40.0)), meas, al, "perturbation")
    assert a == b
    off = Measurement(9.4, orientations=8, pulse_sequence="single", pulse_us=1.0, rf_khz=50.0, carrier_ppm=0.0)
    assert site_job(Site(cq_mhz=3.0, shift=ShiftTensor(10.0)), off, al, "perturbation") != \
        site_job(Site(cq_mhz=3.0, shift=ShiftTensor(40.0)), off, al, "perturbation")
