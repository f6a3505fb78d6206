"""Model files: keys, ranges and clear errors (the key table in powderspin/model/schema.py)."""

from __future__ import annotations

import math

import pytest

from powderspin.model.modelfile import load_model, make_model, parse_model
from powderspin.model.values import MAGIC_ANGLE_DEG, ModelError, selected_transitions


def _data(**meas):
    return {"nucleus": "27Al", "measurement": dict({"field_tesla": 14.1}, **meas),
            "site": [{"shift_ppm": 60.0, "cq_mhz": 3.0, "eta_q": 0.3}]}


def test_magic_angle_value():
    # arccos(1/sqrt 3) = 54.7356 deg (common practice)
    assert MAGIC_ANGLE_DEG == pytest.approx(54.7356, abs=1e-4)


def test_defaults_and_free_parameters():
    d = _data()
    d["site"][0]["cq_mhz"] = {"start": 3.0, "min": 0.5, "max": 8.0}
    m = parse_model(d)
    assert m.sites[0].cq_mhz == 3.0
    assert m.free[0].address.key == "cq_mhz" and m.free[0].min == 0.5 and m.free[0].max == 8.0
    assert m.measurement.rotor_angle_deg == pytest.approx(MAGIC_ANGLE_DEG)


@pytest.mark.parametrize(
    "mutate,needle",
    [
        (lambda d: d["site"][0].update(eta_q=1.5), "eta_q = 1.5 is outside the allowed range [0, 1]"),
        (lambda d: d["measurement"].update(field_tesla=-2.0),
         "field_tesla = -2.0 is outside the allowed range [0.1, 40]"),
        (lambda d: d["site"][0].update(span_ppm=10.0, skew=1.4), "skew = 1.4 is outside the allowed range [-1, 1]"),
        (lambda d: d["site"][0].update(span_ppm=-10.0, skew=0.0),
         "span_ppm = -10.0 is outside the allowed range [0, 100000]"),
        (lambda d: d["measurement"].update(transitions=["7/2:5/2"]), "needs |m| <= I = 5/2"),
        (lambda d: d["measurement"].update(transitions=["3/2:-1/2"]), "single-quantum"),
        (lambda d: d["measurement"].update(method="magic"), "method = 'magic' is not one of"),
        (lambda d: d["measurement"].update(spinning_hz=-5.0), "spinning_hz = -5.0 is outside the allowed range"),
        (lambda d: d["measurement"].update(rotor_angle_deg=95.0),
         "rotor_angle_deg = 95.0 is outside the allowed range [0, 90]"),
        (lambda d: d["measurement"].update(points=10), "points = 10 must be an integer in [16"),
        (lambda d: d["measurement"].update(rotor_phases=48), "rotor_phases = 48 must be 'auto' or a power of 2"),
        (lambda d: d["measurement"].update(feild_tesla=3.0), "unknown key 'feild_tesla' (did you mean 'field_tesla'?)"),
        (lambda d: d["site"][0].update(cq=3.0), "unknown key 'cq'"),
        (lambda d: d["site"][0].update(span_ppm=10.0, skew=0.0, aniso_ppm=5.0), "one way only"),
        (lambda d: d.update(nucleus="27Ag"), "did you mean"),
        (lambda d: d["site"][0].update(weight=-1.0), "weight = -1.0 is outside the allowed range"),
    ],
)
def test_bad_values_name_key_value_and_range(mutate, needle):
    d = _data()
    mutate(d)
    with pytest.raises(ValueError) as e:
        parse_model(d)
    assert needle in str(e.value)


def test_spin_half_rejects_cq():
    with pytest.raises(ModelError, match="spin 1/2"):
        parse_model({"nucleus": "31P", "measurement": {"field_tesla": 9.4}, "site": [{"cq_mhz": 1.0}]})


def test_transition_selection():
    assert selected_transitions(2.5, "central") == (0.5,)
    assert selected_transitions(2.5, "all") == (2.5, 1.5, 0.5, -0.5, -1.5)
    assert selected_transitions(1.5, ("3/2:1/2", "-1/2:-3/2")) == (1.5, -0.5)
    assert selected_transitions(1.0, "all") == (1.0, 0.0)  # integer spin: the +-1 <-> 0 pair
    # an integer spin has no central transition: refused, with the way forward named
    with pytest.raises(ModelError, match="no central transition.*all"):
        selected_transitions(1.0, "central")


def test_infinite_rate_and_files(tmp_path):
    p = tmp_path / "m.toml"
    p.write_text('nucleus = "23Na"\n[measurement]\nfield_tesla = 9.4\nspinning_hz = "inf"\n[[site]]\ncq_mhz = 2.0\n')
    m = load_model(p)
    assert math.isinf(m.measurement.spinning_hz)
    assert p.read_text().startswith('nucleus = "23Na"')  # the input is untouched
    with pytest.raises(ModelError, match="does not exist"):
        load_model(tmp_path / "missing.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text("nucleus = \n")
    with pytest.raises(ModelError, match="not valid TOML"):
        load_model(bad)


def test_make_model_accepts_dicts_and_sites():
    m = make_model("27Al", {"field_tesla": 9.4}, [{"cq_mhz": 2.0}])
    m2 = make_model("27Al", m.measurement, [m.sites[0]])
    assert m2.sites[0] == m.sites[0]
    with pytest.raises(ModelError):
        make_model("27Al", {}, [42])
