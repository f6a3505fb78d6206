"""The 2D contour figure: the trade's orientation, projections, CS and QIS axes (common practice)."""

from __future__ import annotations

import numpy as np
import pytest

import powderspin as ps
from powderspin.plotting.spectrum2d import plot_spectrum_2d


@pytest.fixture(scope="module")
def spec():
    m = ps.make_model("27Al", {"field_tesla": 9.4, "spinning_hz": "inf", "experiment": "mqmas", "points": 128,
                               "f1_points": 64, "orientations": 12, "gauss_hz": 300.0, "f1_gauss_hz": 300.0},
                      [{"label": "a", "shift_ppm": 60.0, "cq_mhz": 3.0}, {"label": "b", "shift_ppm": 10.0,
                                                                         "cq_mhz": 5.0, "eta_q": 0.5}])
    return ps.simulate(m)


def test_orientation_projections_and_guide_lines(spec):
    fig = plot_spectrum_2d(spec)
    main, top, right = fig.axes
    x0, x1 = main.get_xlim()
    y0, y1 = main.get_ylim()
    assert x0 > x1          # F2 ppm decreasing to the right
    assert y0 > y1          # F1 ppm decreasing upwards (larger values at the bottom)
    labels = [line.get_label() for line in main.get_lines()]
    assert "CS axis" in labels and "QIS axis" in labels
    # the QIS line of site a passes through (delta_iso, delta_iso) with slope k_F1 = -10/17
    qis = [line for line in main.get_lines() if line.get_linestyle() == ":"][0]
    x, y = qis.get_data()
    assert np.allclose(np.diff(y) / np.diff(x), -10 / 17)
    assert np.interp(60.0, x[::-1] if x[0] > x[-1] else x, y[::-1] if x[0] > x[-1] else y) == pytest.approx(60.0)
    assert len(top.get_lines()) == 3 and len(right.get_lines()) == 3   # sum and the two sites


@pytest.mark.parametrize("kw,words", [({"levels": 1}, "levels"), ({"lowest": 1.5}, "lowest"),
                                      ({"limits": "all"}, "limits")])
def test_bad_options(spec, kw, words):
    with pytest.raises(ValueError, match=words):
        plot_spectrum_2d(spec, **kw)
