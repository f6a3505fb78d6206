"""The Spectrum value: areas, centres of gravity, sideband rows and its plain-values form."""

from __future__ import annotations

import numpy as np

import powderspin as ps
from powderspin.engine.spectrum import SidebandRow, Spectrum


def test_area_is_the_weight_and_the_first_moment_the_shift():
    # Source: a Gaussian line integrates to its weight and is centred at its shift (common practice);
    # the rectangle rule is exact to rounding for a line many points wide.
    m = ps.make_model("31P", {"field_tesla": 9.4, "points": 2048, "center_ppm": 0.0, "width_ppm": 200.0},
                      [{"label": "a", "weight": 2.5, "shift_ppm": 12.5, "gauss_hz": 500.0}])
    s = ps.simulate(m)
    assert abs(s.area() - 2.5) < 1e-9
    assert abs(s.area(site=0) - 2.5) < 1e-9
    assert abs(s.first_moment_ppm() - 12.5) < 1e-9


def test_sideband_rows_with_nominal_positions():
    spec = Spectrum(hz=[0.0, 1.0], ppm=[0.0, 0.01], intensity=[1.0, 0.0], site_labels=("a",),
                    site_intensities=[[1.0, 0.0]], metadata={"spinning_hz": 1000.0},
                    sidebands=(SidebandRow("a", 0, 10.0, 0.1, 0.8), SidebandRow("a", -1, -993.0, -9.93, 0.2)))
    nominal = [h for _, h in spec.sideband_rows_with_nominal()]
    assert nominal == [10.0, -990.0]


def test_to_dict_holds_everything_and_is_read_only_inside():
    spec = Spectrum(hz=[-1.0, 0.0, 1.0], ppm=[-0.01, 0.0, 0.01], intensity=[0.0, 1.0, 0.0], site_labels=("a",),
                    site_intensities=[[0.0, 1.0, 0.0]], metadata={"nucleus": "31P"})
    d = spec.to_dict()
    assert d["site_labels"] == ["a"] and d["intensity"] == [0.0, 1.0, 0.0] and d["metadata"]["nucleus"] == "31P"
    assert not spec.intensity.flags.writeable
    assert isinstance(np.asarray(d["hz"]), np.ndarray)
