"""Figures: written from Python without switching the caller's matplotlib backend; the trade's reversed axis."""

from __future__ import annotations

import matplotlib
import numpy as np
import pytest

import powderspin as ps
from powderspin.plotting.plan import plot_plan, save_plan_plot
from powderspin.plotting.report import save_report
from powderspin.plotting.spectrum import plot_spectrum, save_plot


@pytest.fixture
def spectrum():
    m = ps.make_model("27Al", {"field_tesla": 14.1, "spinning_hz": 15000.0, "points": 512, "orientations": 12},
                      [{"label": "A", "shift_ppm": 60.0, "cq_mhz": 3.0, "eta_q": 0.3, "gauss_hz": 200.0}])
    return ps.simulate(m)


def test_saving_figures_leaves_the_backend_as_it_was(spectrum, tmp_path):
    before = matplotlib.get_backend()
    save_plot(spectrum, tmp_path / "s.png")
    save_plot(spectrum, tmp_path / "s.svg", unit="khz")
    m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
                      [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
    save_plan_plot(ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False), tmp_path / "p.png")
    data = ps.MeasuredSpectrum(spectrum.hz, spectrum.ppm, spectrum.intensity + 1e-3, None, spectrum.nu_ref_hz, "x")
    start = ps.make_model("27Al", {"field_tesla": 14.1, "spinning_hz": 15000.0, "orientations": 12},
                          [{"label": "A", "shift_ppm": {"start": 58.0, "min": 40.0, "max": 80.0}, "cq_mhz": 3.0,
                            "eta_q": 0.3, "gauss_hz": 200.0}])
    save_report(ps.fit(start, [data]), tmp_path / "r.png")
    assert matplotlib.get_backend() == before
    assert all((tmp_path / n).stat().st_size > 1000 for n in ("s.png", "s.svg", "p.png", "r.png"))


def test_ppm_decreases_to_the_right(spectrum):
    # Common practice: spectra are drawn with the shift decreasing from left to right.
    from matplotlib.figure import Figure

    ax = plot_spectrum(spectrum, Figure().add_subplot())
    left, right = ax.get_xlim()
    assert left > right
    khz = plot_spectrum(spectrum, Figure().add_subplot(), unit="khz")
    assert khz.get_xlim()[0] > khz.get_xlim()[1]


def test_plan_figure_has_a_panel_per_field_and_the_ranking():
    m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
                      [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
    p = ps.plan(m, [9.4, 14.1], rates_hz=[5000, 20000], snr=200)
    fig = plot_plan(p)
    assert len(fig.axes) == 3
    assert np.isfinite(p.fields[0].rate(20000.0).criterion)
