"""The key table is the single source of the model-file keys: the README, the reader and the values agree with it."""

from __future__ import annotations

import math
import tomllib
from pathlib import Path

import pytest

from powderspin.model.modelfile import model_to_toml, parse_model
from powderspin.model.schema import KEYS, REQUIRED, key_reference_markdown, keys_of

ROOT = Path(__file__).resolve().parents[2]


def test_readme_key_reference_matches_the_table():
    text = (ROOT / "README.md").read_text()
    start = text.index("<!-- key reference: start -->\n") + len("<!-- key reference: start -->\n")
    end = text.index("<!-- key reference: end -->")
    assert text[start:end] == key_reference_markdown(), (
        "README key reference is out of date: replace it with the output of `python -m powderspin.model.schema`")


def test_every_key_has_a_unit_doc_and_a_reason_for_its_range():
    for k in KEYS:
        assert k.doc, k.name
        if k.kind in ("number", "integer") and math.isfinite(k.high):
            assert k.why, f"{k.table}.{k.name} has a range but no reason for it"


@pytest.mark.parametrize("spec", [k for k in KEYS if k.kind == "number" and k.table in ("measurement", "site")],
                         ids=lambda k: f"{k.table}.{k.name}")
def test_each_number_key_is_refused_just_outside_its_range(spec):
    base = {"nucleus": "27Al", "measurement": {"field_tesla": 9.4}, "site": [{"label": "A", "cq_mhz": 2.0}]}
    table = base["measurement"] if spec.table == "measurement" else base["site"][0]
    if spec.name in ("span_ppm", "skew"):
        table.update(span_ppm=10.0, skew=0.0)
    if spec.name in ("aniso_ppm", "eta_cs"):
        table.update(aniso_ppm=10.0, eta_cs=0.0)
    # just above the top, just below the bottom (the bottom itself when it is open); a key with no finite
    # limit must still refuse a value that is not a number
    bad = []
    if math.isfinite(spec.high):
        bad.append(spec.high * 1.5 + 1.0)
    if math.isfinite(spec.low):
        bad.append(spec.low if spec.low_open else spec.low - 1.0 - 0.5 * abs(spec.low))
    if not bad:
        bad.append(math.nan)
    for value in bad:
        table[spec.name] = value
        with pytest.raises(ValueError) as e:
            parse_model(base)
        assert spec.name in str(e.value), value
        assert "allowed" in str(e.value) or value != value, (value, str(e.value))


def test_defaults_of_the_table_are_the_defaults_of_the_values():
    m = parse_model({"nucleus": "27Al", "measurement": {"field_tesla": 9.4}, "site": [{}]})
    for name, k in keys_of("measurement").items():
        if k.default in (REQUIRED, None) or name == "rotor_angle_deg":
            continue
        assert getattr(m.measurement, name) == k.default, name
    back = parse_model(tomllib.loads(model_to_toml(m)))
    assert back.measurement == m.measurement and back.sites == m.sites
