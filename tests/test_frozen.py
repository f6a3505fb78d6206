"""Result values pickle: each one made here goes through pickle and comes back equal, still read-only.

These are the values that travel to and from Dask workers (a plan's candidates, a global fit's starts, a series'
fits) or that a user may save with pickle.
"""

from __future__ import annotations

import pickle
from dataclasses import fields
from types import MappingProxyType

import numpy as np
import pytest

import powderspin as ps
from powderspin.engine.spectrum2d import Spectrum2D
from powderspin.fitting.two_dimensional import TwoDimensionalFit
from powderspin.io.raw import RawFID
from powderspin.io.spectra import MeasuredSpectrum, write_spectrum_text
from powderspin.io.spectra2d import MeasuredSpectrum2D
from powderspin.planning.two_dimensional import plan_f1_resolution


def _equal(a, b):
    """Equal values: arrays by their elements (NaN equal to NaN), mappings by items, dataclasses field by field."""
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        return np.array_equal(np.asarray(a), np.asarray(b), equal_nan=True)
    if isinstance(a, MappingProxyType) or isinstance(a, dict):
        return type(a) is type(b) and a.keys() == b.keys() and all(_equal(a[k], b[k]) for k in a)
    if isinstance(a, (tuple, list)):
        return type(a) is type(b) and len(a) == len(b) and all(_equal(x, y) for x, y in zip(a, b))
    if hasattr(a, "__dataclass_fields__") and not isinstance(a, type):
        return type(a) is type(b) and all(_equal(getattr(a, f.name), getattr(b, f.name)) for f in fields(a))
    if isinstance(a, float) and isinstance(b, float) and np.isnan(a) and np.isnan(b):
        return True
    return a == b


def _read_only(value):
    """Every mapping field is still a mapping proxy and every array field still unwritable."""
    for f in fields(value):
        v = getattr(value, f.name)
        if isinstance(v, np.ndarray):
            assert not v.flags.writeable, f.name
        if isinstance(v, dict):
            raise AssertionError(f"{f.name} came back as a writable dict")


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("frozen")
    model = ps.make_model("31P", {"field_tesla": 9.4, "points": 256, "orientations": 8, "lorentz_hz": 300.0},
                          [{"label": "P", "shift_ppm": 0.0, "span_ppm": 150.0, "skew": 0.5}])
    plan = ps.plan(model, [9.4, 14.1], rates_hz=[2000, 5000, 20000], snr=200)
    spec = ps.simulate(model)
    y = spec.intensity + np.random.default_rng(1).normal(0.0, 0.01 * spec.intensity.max(), spec.intensity.size)
    measured = MeasuredSpectrum(spec.hz, spec.ppm, y, None, spec.nu_ref_hz, "synthetic", nucleus="31P",
                                field_tesla=9.4)
    write_spectrum_text(tmp / "d.csv", measured)
    start = ps.make_model("31P", {"field_tesla": 9.4, "points": 256, "orientations": 8, "lorentz_hz": 300.0},
                          [{"label": "P", "shift_ppm": {"start": 2.0, "min": -10.0, "max": 10.0}, "span_ppm": 150.0,
                            "skew": 0.5}])
    fit = ps.fit(start, [tmp / "d.csv"])
    al = ps.make_model("27Al", {"field_tesla": 14.1, "orientations": 8, "lorentz_hz": 200.0},
                       [{"label": "A", "shift_ppm": 60.0, "cq_mhz": 4.0, "eta_q": 0.2},
                        {"label": "B", "shift_ppm": 10.0, "cq_mhz": 6.0, "eta_q": 0.5}])
    values = {
        "Spectrum": spec,
        "RateResult": plan.fields[0].rates[-1],
        "FieldPlan": plan.fields[0],
        "Plan": plan,
        "MeasuredSpectrum": measured,
        "FitResult": fit,
        "F1Resolution": plan_f1_resolution(al, [14.1])[0],
        "RawFID": RawFID(np.exp(-np.arange(16) / 4.0) + 0j, 1e-5, 1e8, 1e8, "31P", 9.4, 0.0, "synthetic",
                         {"acqus": {"TD": 32}}),
        "MeasuredSpectrum2D": MeasuredSpectrum2D(np.array([1.0, 0.0]), np.array([2.0, 1.0, 0.0]),
                                                 np.arange(6.0).reshape(2, 3), 1e8, "synthetic", {"kind": "3QMAS"}),
        "Spectrum2D": Spectrum2D(np.array([1.0, 0.0]), np.array([0.1, 0.0]), np.array([2.0, 1.0, 0.0]),
                                 np.array([0.2, 0.1, 0.0]), np.arange(6.0).reshape(2, 3), ("a",),
                                 np.arange(6.0).reshape(1, 2, 3), {"nucleus": "27Al"}),
        "TwoDimensionalFit": TwoDimensionalFit(al, {"A.cq_mhz": 4.0}, {"A.cq_mhz": 0.1}, 10.0, 1.0, True, "ok", 12),
    }
    return values


NAMES = ["Spectrum", "RateResult", "FieldPlan", "Plan", "MeasuredSpectrum", "FitResult", "F1Resolution", "RawFID",
         "MeasuredSpectrum2D", "Spectrum2D", "TwoDimensionalFit"]


@pytest.mark.parametrize("name", NAMES)
def test_value_pickles_round_trip(made, name):
    value = made[name]
    back = pickle.loads(pickle.dumps(value))
    assert type(back) is type(value)
    assert _equal(back, value)
    _read_only(back)


def test_plan_round_trip_keeps_its_json(made):
    p = made["Plan"]
    back = pickle.loads(pickle.dumps(p))
    assert _equal(back.to_dict(), p.to_dict())
    assert back.pairs and all(isinstance(d, MappingProxyType) for d in back.pairs)


def test_read_only_mappings_come_back_read_only(made):
    back = pickle.loads(pickle.dumps(made["RateResult"]))
    with pytest.raises(TypeError):
        back.stderr["P.shift_ppm"] = 0.0
