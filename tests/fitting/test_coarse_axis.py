"""Sampling on any axis: a point of a simulated spectrum is the continuous spectrum at its frequency.

Checks: a Gaussian line on a coarse axis against the analytic Gaussian density at the points (the normal density,
common practice); and a fit on a coarse axis of data made by sampling a fine simulation at every tenth point recovers
the parameters with a bias below a tenth of the standard error at SNR 300 (the criterion of the task; the spectra
are the engine's own, since the property tested is the sampling, not the physics).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import powderspin as ps
from powderspin.engine.lineshape import sampling_oversampling
from powderspin.fitting.fitter import fit
from powderspin.io.spectra import MeasuredSpectrum


def test_a_gaussian_line_on_a_coarse_axis_is_sampled_not_smoothed():
    fwhm, dx, points = 300.0, 103.0, 256
    nu = ps.get_nuclide("31P").larmor_hz(9.4)
    width_ppm = dx * points / nu * 1e6
    m = ps.make_model("31P", {"field_tesla": 9.4, "points": points, "center_ppm": 0.37, "width_ppm": width_ppm,
                              "gauss_hz": fwhm}, [{"label": "P", "shift_ppm": 0.0}])
    s = ps.simulate(m)
    sd = fwhm / (2 * math.sqrt(2 * math.log(2)))
    exact = np.exp(-0.5 * (s.hz / sd) ** 2) / (sd * math.sqrt(2 * math.pi)) * nu * 1e-6  # density per ppm
    assert sampling_oversampling(dx, fwhm) > 1
    assert np.max(np.abs(s.intensity - exact)) <= 2e-3 * exact.max(), np.max(np.abs(s.intensity - exact)) / exact.max()


def _model(values, points, width_ppm, free=False):
    shift, span, skew, gauss = values

    def f(v, lo, hi):
        return {"start": v, "min": lo, "max": hi} if free else v

    return ps.make_model("31P", {"field_tesla": 9.4, "spinning_hz": 4000.0, "points": points, "center_ppm": 0.0,
                                 "width_ppm": width_ppm, "orientations": "coarse", "gauss_hz": f(gauss, 100.0, 1000.0)},
                         [{"label": "P", "shift_ppm": f(shift, -10.0, 20.0), "span_ppm": f(span, 80.0, 250.0),
                           "skew": f(skew, -1.0, 1.0)}])


def test_fit_on_a_coarse_axis_of_finely_simulated_data_is_unbiased():
    truth = (5.0, 150.0, 0.3, 300.0)
    nu = ps.get_nuclide("31P").larmor_hz(9.4)
    coarse_points, dx = 512, 103.0
    width_ppm = coarse_points * dx / nu * 1e6
    fine = ps.simulate(_model(truth, 10 * coarse_points, width_ppm))
    hz, ppm, y = fine.hz[4::10], fine.ppm[4::10], fine.intensity[4::10] / fine.intensity.max()
    clean = MeasuredSpectrum(hz, ppm, y, None, fine.nu_ref_hz, "fine, every tenth point")
    noisy = MeasuredSpectrum(hz, ppm, y + np.random.default_rng(7).normal(0.0, 1.0 / 300.0, y.size), None,
                             fine.nu_ref_hz, "with noise")
    start = _model(truth, coarse_points, width_ppm, free=True)
    r0 = fit(start, [clean], profile="none")
    r1 = fit(start, [noisy], profile="none")
    names = ["P.shift_ppm", "P.span_ppm", "P.skew", "measurement 1.gauss_hz"]
    for n, t in zip(names, truth):
        assert abs(r0.values[n] - t) < 0.1 * r1.stderr[n], (n, r0.values[n], t, r1.stderr[n])


def _czjzek_model(values, points, width_ppm, free=()):
    shift, sigma, gauss = values

    def f(name, v, lo, hi):
        return {"start": v, "min": lo, "max": hi} if name in free else v

    return ps.make_model("27Al", {"field_tesla": 9.4, "spinning_hz": "inf", "points": points, "center_ppm": 20.0,
                                  "width_ppm": width_ppm, "method": "perturbation",
                                  "gauss_hz": f("gauss", gauss, 200.0, 1000.0)},
                         [{"label": "A", "shift_ppm": f("shift", shift, 50.0, 70.0),
                           "czjzek_sigma_mhz": f("sigma", sigma, 1.0, 3.0)}])


@pytest.mark.slow
def test_czjzek_site_on_a_coarse_axis_is_unbiased():
    """A site with a Czjzek EFG distribution gets the same sampling as a single site: finer rendering and the hat
    correction of the Gaussian (the criterion of the coarse-axis test above; the spectra are the engine's own)."""
    truth = (60.0, 2.0, 300.0)
    nu = ps.get_nuclide("27Al").larmor_hz(9.4)
    coarse_points, dx = 256, 103.0
    width_ppm = coarse_points * dx / nu * 1e6
    # the fine spectrum's kernel grid is the fit's (the same ranges of sigma and of the Gaussian, whose lower bound
    # spaces the nodes; one producer), so that the two differ by their sampling only
    fine = ps.simulate(_czjzek_model(truth, 10 * coarse_points, width_ppm, free=("gauss", "sigma")))
    assert "point values" in fine.metadata["sampling"]["A"]
    hz, ppm, y = fine.hz[4::10], fine.ppm[4::10], fine.intensity[4::10] / fine.intensity.max()
    clean = MeasuredSpectrum(hz, ppm, y, None, fine.nu_ref_hz, "fine, every tenth point")
    noisy = MeasuredSpectrum(hz, ppm, y + np.random.default_rng(11).normal(0.0, 1.0 / 300.0, y.size), None,
                             fine.nu_ref_hz, "with noise")
    start = _czjzek_model(truth, coarse_points, width_ppm, free=("shift", "sigma", "gauss"))
    r0 = fit(start, [clean], profile="none")
    r1 = fit(start, [noisy], profile="none")
    assert r0.spectra[0].metadata["sampling"]["A"].startswith("point values (rendered")
    names = ["A.shift_ppm", "A.czjzek_sigma_mhz", "measurement 1.gauss_hz"]
    for n, t in zip(names, truth):
        assert abs(r0.values[n] - t) < 0.1 * r1.stderr[n], (n, r0.values[n], t, r1.stderr[n])
