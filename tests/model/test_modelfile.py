"""Model files written back as TOML read in again to the same model."""

from __future__ import annotations

import math
import tomllib

import pytest

from powderspin.files import OutputExistsError
from powderspin.model.modelfile import load_model, model_to_toml, parse_model, write_model


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


def _multi():
    return parse_model({
        "nucleus": "27Al",
        "measurement": [
            {"field_tesla": 9.4, "spinning_hz": 12000.0, "gauss_hz": {"start": 100.0, "min": 0.0, "max": 900.0},
             "shift_offset_ppm": 0.5, "data": "a.csv"},
            {"field_tesla": 18.8, "spinning_hz": 20000.0, "lorentz_hz": 30.0},
        ],
        "site": [
            {"label": "AlO4", "shift_ppm": {"start": 60.0, "min": 40.0, "max": 80.0}, "cq_mhz": 4.0,
             "gauss_hz": 80.0, "euler_deg": [0.0, {"start": 30.0, "min": 0.0, "max": 90.0}, 0.0],
             "aniso_ppm": 20.0, "eta_cs": 0.3},
            {"label": "AlO6", "cq_mhz": 2.0, "gauss_hz": {"same_as": "AlO4.gauss_hz"},
             "principal_ppm": [15.0, 5.0, -5.0]},
        ],
        "fit": {"regions": [[90.0, 40.0], [20.0, -30.0]], "baseline_order": 1, "noise_region": [200.0, 150.0]},
    })


def test_round_trip_of_ties_measurements_and_fit_settings():
    m = _multi()
    back = parse_model(tomllib.loads(model_to_toml(m)))
    assert back.sites == m.sites and back.measurements == m.measurements
    assert back.free == m.free and back.tied == m.tied and back.fit == m.fit
    assert [f.name for f in m.free] == ["measurement 1.gauss_hz", "AlO4.shift_ppm", "AlO4.euler_deg[1]"]
    assert m.tied[0].name == "AlO6.gauss_hz" and m.tied[0].source_name == "AlO4.gauss_hz"
    assert m.sites[1].gauss_hz == 80.0  # follows AlO4 at once


def test_with_parameters_applies_ties_and_keeps_the_original():
    m = _multi()
    a = {f.name: f.address for f in m.free}
    m2 = m.with_parameters({a["AlO4.shift_ppm"]: 63.0, a["AlO4.euler_deg[1]"]: 45.0,
                            a["measurement 1.gauss_hz"]: 222.0})
    assert m2.sites[0].shift.iso_ppm == 63.0 and m2.sites[0].euler_deg == (0.0, 45.0, 0.0)
    assert m2.measurements[0].gauss_hz == 222.0
    assert m.sites[0].shift.iso_ppm == 60.0  # the original is unchanged
    from powderspin.model.values import ParameterAddress

    m3 = m.with_parameters({ParameterAddress("site", 0, "gauss_hz"): 150.0})
    assert m3.sites[1].gauss_hz == 150.0  # the tie follows
    with pytest.raises(ValueError, match="tied"):
        m.with_parameters({ParameterAddress("site", 1, "gauss_hz"): 1.0})
    with pytest.raises(ValueError, match="outside the allowed range"):
        m.with_parameters({a["AlO4.shift_ppm"]: 1e9})


@pytest.mark.parametrize("mutate,needle", [
    (lambda d: d["site"][1].update(label="AlO4"), "labels must be unique"),
    (lambda d: d["site"][1].update(gauss_hz={"same_as": "AlO5.gauss_hz"}), "there is no site 'AlO5'"),
    (lambda d: d["site"][1].update(gauss_hz={"same_as": "AlO4.lorentz_hz"}), "same key"),
    (lambda d: d["site"][0].update(cq_mhz={"start": 9.0, "min": 1.0, "max": 8.0}), "outside its own range"),
    (lambda d: d["site"][0].update(cq_mhz={"min": 1.0}), "needs 'start'"),
    (lambda d: d["measurement"][0].update(points={"start": 100}), "must be an integer"),
])
def test_parameter_errors_name_the_key(mutate, needle):
    d = {
        "nucleus": "27Al",
        "measurement": [{"field_tesla": 9.4}],
        "site": [{"label": "AlO4", "cq_mhz": 4.0, "gauss_hz": 50.0}, {"label": "AlO6", "cq_mhz": 2.0}],
    }
    mutate(d)
    with pytest.raises(ValueError, match=needle):
        parse_model(d)


# ---- the echo-train keys of [processing] and [measurement]: one value each (schema: KeySpec.linked_to)

def _echo_model(measurement: dict, processing: dict, n_meas: int = 1):
    meas = [{"field_tesla": 9.4, **measurement} for _ in range(n_meas)]
    return parse_model({"nucleus": "93Nb", "measurement": meas if n_meas > 1 else meas[0],
                        "site": [{"cq_mhz": 60.0, "eta_q": 0.2}], "processing": processing})


def test_schema_links_each_echo_train_key_to_its_twin():
    from powderspin.model.schema import key_spec

    for table, name, other in [("processing", "echo_period_us", "measurement.echo_train_period_us"),
                               ("processing", "echo_count", "measurement.echo_train_echoes")]:
        assert key_spec(table, name).linked_to == other
        back_table, back_name = other.split(".")
        assert key_spec(back_table, back_name).linked_to == f"{table}.{name}"


def test_spikelet_processing_gives_the_measurement_its_period_and_echoes():
    m = _echo_model({}, {"echo_train": "spikelets", "echo_period_us": 200.0, "echo_count": 16})
    meas = m.measurements[0]
    assert meas.echo_train_period_us == 200.0 and meas.echo_train_echoes == 16
    back = parse_model(tomllib.loads(model_to_toml(m)))          # written in both places now: they agree
    assert back.measurements[0].echo_train_period_us == 200.0 and dict(back.processing)["echo_count"] == 16


def test_measurement_period_fills_the_processing():
    from powderspin.processing import ProcessingOptions

    m = _echo_model({"echo_train_period_us": 180.0, "echo_train_output": "envelope"}, {"echo_train": "coadd"})
    assert dict(m.processing)["echo_period_us"] == 180.0
    assert "echo_count" not in dict(m.processing)                  # co-adding: every echo in the data
    assert ProcessingOptions.from_table(dict(m.processing)).echo_period_us == 180.0


def test_one_value_written_twice_apart_is_refused():
    with pytest.raises(ValueError) as e:
        _echo_model({"echo_train_period_us": 250.0}, {"echo_train": "spikelets", "echo_period_us": 200.0})
    text = str(e.value)
    assert "\n" not in text
    assert text == ("measurement: echo_train_period_us = 250 but [processing] echo_period_us = 200: one value (the "
                    "echo period), written twice; write it once, in [processing] echo_period_us (the measurement "
                    "takes it from there)")
    with pytest.raises(ValueError, match="echo_train_echoes = 32 but .processing. echo_count = 16"):
        _echo_model({"echo_train_echoes": 32}, {"echo_train": "spikelets", "echo_period_us": 200.0,
                                                "echo_count": 16})


def test_old_files_with_both_keys_agreeing_still_read():
    m = _echo_model({"echo_train_period_us": 200.0, "echo_train_echoes": 16},
                    {"echo_train": "spikelets", "echo_period_us": 200.0, "echo_count": 16})
    assert m.measurements[0].echo_train_period_us == 200.0


def test_coadded_data_with_a_spikelet_comb_are_refused():
    with pytest.raises(ValueError, match='echo_train = "coadd" co-adds the echoes.*write echo_train_output = '
                                         '"envelope"'):
        _echo_model({"echo_train_period_us": 200.0}, {"echo_train": "coadd"})


def test_measurements_with_different_periods_and_one_processing_table_are_refused():
    m = {"nucleus": "93Nb", "site": [{"cq_mhz": 60.0}], "processing": {"echo_train": "spikelets"},
         "measurement": [{"field_tesla": 9.4, "echo_train_period_us": 200.0},
                         {"field_tesla": 9.4, "echo_train_period_us": 300.0}]}
    with pytest.raises(ValueError, match=r"different echo_train_period_us \(200, 300\).*separate model files"):
        parse_model(m)
