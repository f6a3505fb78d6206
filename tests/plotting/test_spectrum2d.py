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


def test_fit_report_outlines_the_fitted_part_and_slices(spec):
    """Data and fit side by side, the residual, each site's F2 slice; a partial fit's boundary drawn in green."""
    from powderspin.io.spectra2d import MeasuredSpectrum2D
    from powderspin.plotting.spectrum2d import plot_fit_2d

    d = MeasuredSpectrum2D(spec.f1_ppm, spec.f2_ppm, spec.intensity * 1.01, spec.metadata["nu_ref_hz"], "x")
    mask = np.zeros(spec.shape, dtype=bool)
    j = int(np.argmin(np.abs(spec.f1_ppm - spec.metadata["centres_of_gravity_ppm"]["a"]["f1"])))
    mask[j - 3:j + 4, 30:90] = True
    fig = plot_fit_2d(d, spec, mask=mask)
    data_ax, fit_ax, res_ax, slice_ax = fig.axes
    assert data_ax.get_title() == "data" and fit_ax.get_title() == "fit" and res_ax.get_title().startswith("residual")
    assert "(fitted part)" in res_ax.get_title()
    for a in (data_ax, fit_ax, res_ax):
        assert any(np.allclose(c.get_edgecolor()[0][:3], (0.172549, 0.627451, 0.172549), atol=1e-3)
                   for c in a.collections), "green boundary of the fitted points"  # matplotlib's C2
    labels = [line.get_label() for line in slice_ax.get_lines()]
    assert "data" in labels and any(lab.startswith("a (F1") for lab in labels) and "fitted points" in labels
    whole = plot_fit_2d(d, spec)
    assert "(fitted part)" not in whole.axes[2].get_title()
    with pytest.raises(ValueError, match="mask has shape"):
        plot_fit_2d(d, spec, mask=mask[:, :10])


def test_other_f1_scale_draws_the_cs_axis_with_its_factor(spec):
    t = spec.on_f1_scale("total_evolution")
    fig = plot_spectrum_2d(t)
    cs = [line for line in fig.axes[0].get_lines() if line.get_label() == "CS axis"][0]
    x, y = cs.get_data()
    assert np.allclose(np.diff(y) / np.diff(x), 17 / 31)   # I = 5/2 3QMAS: (p - R) / (1 + |R|), R = 19/12
    qis = [line for line in fig.axes[0].get_lines() if line.get_linestyle() == ":"][0]
    qx, qy = qis.get_data()
    assert np.allclose(np.diff(qy) / np.diff(qx), 17 / 31 * -10 / 17)
    assert "total_evolution" in fig.axes[0].get_ylabel()
