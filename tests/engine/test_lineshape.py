"""Axis, broadening and baselines of the lineshape module."""

from __future__ import annotations

import math

import numpy as np

from powderspin.engine.lineshape import Axis, baseline_values, broaden, make_axis


def test_axis_points_are_bin_centres_and_ppm_follows_nu_ref():
    ax = make_axis(1000, 100e6, center_ppm=10.0, width_ppm=100.0)
    assert ax.points == 1000 and abs(ax.dx_ppm - 0.1) < 1e-12
    assert abs(ax.ppm[0] - (10.0 - 50.0 + 0.05)) < 1e-9
    assert np.allclose(ax.ppm, ax.hz / 100e6 * 1e6)


def test_broadening_keeps_the_area_and_gives_the_analytic_widths():
    # Source: the unit-area Lorentzian (L/2pi)/((x)^2 + (L/2)^2) and Gaussian of FWHM G (textbook forms);
    # a single point broadened must reproduce them sampled at the points.
    n, dx = 4096, 5.0
    y = np.zeros(n)
    y[n // 2] = 1.0 / dx
    x = (np.arange(n) - n // 2) * dx
    lz = broaden(y, dx, lorentz_hz=200.0)
    ref = (200.0 / (2 * math.pi)) / (x ** 2 + 100.0 ** 2)
    kept = 2 / math.pi * math.atan(n * dx / 2 / 100.0)  # the Lorentzian's area within the axis
    assert abs(lz.sum() * dx - kept) < 5e-4
    assert np.max(np.abs(lz - ref)) < 2e-3 * ref.max()
    g = broaden(y, dx, gauss_hz=300.0)
    s = 300.0 / (2 * math.sqrt(2 * math.log(2)))
    gref = np.exp(-0.5 * (x / s) ** 2) / (s * math.sqrt(2 * math.pi))
    assert abs(g.sum() * dx - 1.0) < 1e-12
    assert np.max(np.abs(g - gref)) < 1e-3 * gref.max()


def test_baseline_runs_from_minus_one_to_one_across_the_axis():
    ax = Axis(center_hz=0.0, width_hz=4.0, points=4, nu_ref_hz=100e6)
    assert baseline_values([1.0, 2.0], ax).tolist() == [-0.5, 0.5, 1.5, 2.5]
    assert baseline_values([], ax).tolist() == [0.0] * 4
