"""The [processing] table: every key from the one key table (schema.py), checked on reading, written back, and
turned into ProcessingOptions; the SYNTHETIC raw example folder is reproducible."""

from __future__ import annotations

import subprocess
import sys
import tomllib
from dataclasses import fields
from pathlib import Path

import numpy as np
import pytest

import powderspin as ps
from powderspin.io.raw import read_raw
from powderspin.model.modelfile import model_to_toml, parse_model
from powderspin.model.schema import keys_of
from powderspin.model.values import ModelError
from powderspin.processing import ProcessingOptions

ROOT = Path(__file__).resolve().parents[2]
BASE = {"nucleus": "27Al", "measurement": {"field_tesla": 9.4}, "site": [{"cq_mhz": 3.0}]}


def test_options_are_the_schema_keys():
    assert [f.name for f in fields(ProcessingOptions)] == list(keys_of("processing"))
    defaults = ProcessingOptions()
    for name, spec in keys_of("processing").items():
        assert getattr(defaults, name) == spec.default, name


def test_processing_table_round_trip():
    table = {"exponential_hz": 50, "phase": "manual", "phase0_deg": -12.5, "baseline": "spline",
             "zero_fill_points": 8192}
    m = parse_model({**BASE, "processing": table})
    assert dict(m.processing) == {"exponential_hz": 50.0, "phase": "manual", "phase0_deg": -12.5,
                                  "baseline": "spline", "zero_fill_points": 8192}
    again = parse_model(tomllib.loads(model_to_toml(m)))
    assert again.processing == m.processing
    opts = ProcessingOptions.from_table(dict(m.processing))
    assert opts.exponential_hz == 50.0 and opts.zero_fill_points == 8192
    assert parse_model(BASE).processing == ()


@pytest.mark.parametrize("table, frag", [
    ({"lb_hz": 3.0}, "unknown key 'lb_hz'"),
    ({"phase": "magic"}, 'must be one of "auto", "entropy", "manual", "none"'),
    ({"exponential_hz": -5.0}, "exponential_hz = -5.0 must be in [0, 1000000] Hz"),
    ({"zero_fill_points": 100.5}, "must be a whole number"),
    ({"proton_mhz": "400"}, "must be a number"),
])
def test_processing_table_bad_values(table, frag):
    with pytest.raises(ModelError) as e:
        parse_model({**BASE, "processing": table})
    assert frag in str(e.value)


def test_raw_example_is_reproducible(tmp_path):
    """examples/make_raw_data.py remakes the committed folder (fixed seed; integers may differ by rounding)."""
    r = subprocess.run([sys.executable, str(ROOT / "examples" / "make_raw_data.py"), str(tmp_path)],
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    new = read_raw(tmp_path / "raw_27al_9p4T" / "1")
    old = read_raw(ROOT / "examples" / "raw_27al_9p4T" / "1")
    assert np.max(np.abs(new.data - old.data)) <= 2.0
    assert (new.carrier_hz, new.base_hz, new.group_delay_points) == (old.carrier_hz, old.base_hz,
                                                                      old.group_delay_points)
    model = ps.load_model(ROOT / "examples" / "raw_fit.toml")
    assert dict(model.processing) == {"zero_fill_points": 4096}
