"""The plan says at which parameter values its precision was computed, and takes a fit's values when given."""

from __future__ import annotations

import numpy as np
import pytest

import powderspin as ps
from powderspin.planning.rotors import PlanError


def _model():
    return ps.make_model("31P", {"field_tesla": 9.4, "points": 256, "orientations": 8, "lorentz_hz": 300.0},
                         [{"label": "P", "shift_ppm": 0.0, "span_ppm": {"start": 150.0, "min": 50.0, "max": 300.0},
                           "skew": 0.5}])


def test_plan_names_the_values_and_uses_the_given_ones():
    m = _model()
    a = ps.plan(m, [9.4], rates_hz=[5000, 20000], snr=200)
    b = ps.plan(m, [9.4], rates_hz=[5000, 20000], snr=200, values={"P.span_ppm": 250.0})
    assert "start values" in a.parameter_source and "P.span_ppm = 150" in a.parameter_source
    assert "given values" in b.parameter_source and "P.span_ppm = 250" in b.parameter_source
    assert "precision: " in b.table_text()
    ea = a.fields[0].rate(5000.0).stderr["P.span_ppm"]
    eb = b.fields[0].rate(5000.0).stderr["P.span_ppm"]
    assert np.isfinite(ea) and np.isfinite(eb) and ea != eb


def test_plan_refuses_values_of_unknown_parameters():
    with pytest.raises(PlanError, match="values"):
        ps.plan(_model(), [9.4], rates_hz=[5000], values={"Q.span_ppm": 1.0})
