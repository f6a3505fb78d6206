"""Model files written back as TOML read in again to the same model."""

from __future__ import annotations

import math
import tomllib

import pytest

from powderspin.modelfile import load_model, model_to_toml, parse_model, write_model

from powderspin.files import OutputExistsError


def _model():
    return parse_model({
        "nucleus": "27Al",
        "measurement": {"field_tesla": 14.1, "spinning_hz": "inf", "rotor_angle_deg": 60.0,
                        "transitions": ["3/2:1/2", "1/2:-1/2"], "points": 1024, "center_ppm": 20.0,
                        "width_ppm": 300.0, "lorentz_hz": 50.0},
        "site": [
            {"label": "A", "weight": 0.4, "shift_ppm": 60.0, "cq_mhz": {"start": 3.0, "min": 0.5, "max": 8.0},
             "eta_q": 0.4, "span_ppm": 40.0, "skew": -0.2, "euler_deg": [10.0, 20.0, 30.0], "gauss_hz": 80.0},
            {"label": "B", "principal_ppm": [40.0, 10.0, -20.0], "cq_mhz": 1.0},
        ],
    })


def test_round_trip_keeps_every_value():
    m = _model()
    back = parse_model(tomllib.loads(model_to_toml(m)))
    assert back.sites == m.sites
    assert back.measurement == m.measurement
    assert math.isinf(back.measurement.spinning_hz)
    assert back.free == m.free


def test_write_model_refuses_to_overwrite(tmp_path):
    p = tmp_path / "m.toml"
    p.write_text("mine")
    with pytest.raises(OutputExistsError):
        write_model(_model(), p)
    assert p.read_text() == "mine"
    write_model(_model(), p, force=True)
    assert load_model(p).sites == _model().sites
