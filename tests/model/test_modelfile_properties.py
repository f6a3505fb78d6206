"""Property tests of the model reader (hypothesis): any document gives a valid model or a ModelError.

Documents are built from the key table (powderspin.model.schema.KEYS) with random
values of every type TOML has, and from random bytes.  The reader must either
return a Model or raise the package's own error type (ModelError, a
ValueError), never anything else, and never hang (hypothesis' deadline).
"""

from __future__ import annotations

import math
import tempfile
from pathlib import Path

import tomli_w
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from powderspin.model.modelfile import load_model, parse_model
from powderspin.model.schema import KEYS, keys_of
from powderspin.model.values import Model, ModelError

NUMBERS = st.one_of(
    st.integers(min_value=-10**9, max_value=10**9),
    st.floats(allow_nan=True, allow_infinity=True, width=64),
    st.sampled_from([0, 1, -1, 0.5, 9.4, 14.1, 1e-9, 1e9, 54.7356, 16, 2048, 65536]),
)
TEXTS = st.one_of(st.text(max_size=12), st.sampled_from(["27Al", "31P", "2H", "auto", "central", "all", "inf",
                                                          "exact", "perturbation", "histogram", "interpolate",
                                                          "3/2:1/2", "1/2:-1/2", "tri-octant-8", "A"]))
SCALARS = st.one_of(NUMBERS, TEXTS, st.booleans())
VALUES = st.one_of(
    SCALARS,
    st.lists(SCALARS, max_size=4),
    st.fixed_dictionaries({}, optional={"start": NUMBERS, "min": NUMBERS, "max": NUMBERS, "same_as": TEXTS}),
)


def _table(name):
    keys = list(keys_of(name))
    return st.dictionaries(st.one_of(st.sampled_from(keys), st.text(max_size=8)), VALUES, max_size=8)


DOCS = st.fixed_dictionaries(
    {},
    optional={
        "nucleus": st.one_of(TEXTS, NUMBERS),
        "measurement": st.one_of(_table("measurement"), st.lists(_table("measurement"), max_size=3), SCALARS),
        "site": st.one_of(st.lists(_table("site"), max_size=3), _table("site"), SCALARS),
        "fit": st.one_of(_table("fit"), SCALARS),
    },
)


def _outcome(call):
    try:
        return call()
    except ModelError:
        return None


@settings(max_examples=400, deadline=2000, suppress_health_check=[HealthCheck.too_slow])
@given(DOCS)
def test_random_documents_give_a_model_or_a_model_error(doc):
    result = _outcome(lambda: parse_model(doc))
    assert result is None or isinstance(result, Model)


@settings(max_examples=200, deadline=2000, suppress_health_check=[HealthCheck.too_slow])
@given(DOCS)
def test_random_documents_through_a_file(doc):
    def clean(v):  # TOML has no None and no NaN/inf keys problems; tomli_w writes what TOML can hold
        return v
    try:
        text = tomli_w.dumps(doc)
    except (TypeError, ValueError):
        return  # not representable as TOML (e.g. mixed types in a way tomli_w refuses)
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "m.toml"
        p.write_text(text, encoding="utf-8")
        result = _outcome(lambda: load_model(p))
    assert result is None or isinstance(result, Model)


@settings(max_examples=300, deadline=2000)
@given(st.binary(max_size=400))
def test_random_bytes_give_a_model_error(data):
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "m.toml"
        p.write_bytes(data)
        result = _outcome(lambda: load_model(p))
    assert result is None or isinstance(result, Model)


@settings(max_examples=200, deadline=3000, suppress_health_check=[HealthCheck.too_slow])
@given(st.sampled_from([k for k in KEYS if k.kind == "number" and k.table in ("measurement", "site")]),
       st.floats(allow_nan=True, allow_infinity=True))
def test_any_number_for_any_key(spec, value):
    doc = {"nucleus": "27Al", "measurement": {"field_tesla": 9.4}, "site": [{"label": "A"}]}
    target = doc["measurement"] if spec.table == "measurement" else doc["site"][0]
    if spec.name in ("span_ppm", "skew"):
        target.update(span_ppm=10.0, skew=0.0)
    if spec.name in ("aniso_ppm", "eta_cs"):
        target.update(aniso_ppm=10.0, eta_cs=0.0)
    target[spec.name] = value
    result = _outcome(lambda: parse_model(doc))
    inside = math.isfinite(value) and spec.low <= value <= spec.high
    if result is not None and spec.name != "spinning_hz":
        assert inside or (spec.low_open and value > spec.low), (spec.name, value)


MEAS_KEYS = list(keys_of("measurement"))
SITE_KEYS = list(keys_of("site"))


@st.composite
def _mutated(draw):
    """A valid model with a few keys replaced by random values (reaches the deep checks)."""
    nucleus = draw(st.sampled_from(["27Al", "23Na", "2H", "31P", "17O", "93Nb"]))
    meas = {"field_tesla": draw(st.sampled_from([4.7, 9.4, 14.1])), "points": 64, "orientations": 4}
    sites = [{"label": "A", "cq_mhz": 0.0 if nucleus == "31P" else 2.0},
             {"label": "B", "shift_ppm": 10.0, "span_ppm": 50.0, "skew": 0.1}]
    if nucleus == "2H":
        meas["transitions"] = "all"
    for _ in range(draw(st.integers(1, 3))):
        if draw(st.booleans()):
            meas[draw(st.sampled_from(MEAS_KEYS))] = draw(VALUES)
        else:
            sites[draw(st.integers(0, 1))][draw(st.sampled_from(SITE_KEYS))] = draw(VALUES)
    return {"nucleus": nucleus, "measurement": meas, "site": sites}


@settings(max_examples=600, deadline=3000, suppress_health_check=[HealthCheck.too_slow])
@given(_mutated())
def test_mutated_models_give_a_model_or_a_model_error(doc):
    result = _outcome(lambda: parse_model(doc))
    assert result is None or isinstance(result, Model)
