"""Synthetic series for the series tests: spectra written as files, made by independent routes with seeded noise."""

from __future__ import annotations

import numpy as np

import powderspin as ps
from powderspin.engine.lineshape import make_axis
from powderspin.io.spectra import MeasuredSpectrum, write_spectrum_text
from tests.reference import fit_spectra as fr

NA = "23Na"
FIELD = 9.4
GAUSS_HZ = 250.0
POINTS = 256


def na_axis():
    nu = ps.get_nuclide(NA).larmor_hz(FIELD)
    return make_axis(POINTS, nu, -10.0, 160.0), nu


def two_site_truth(t_k: float) -> dict:
    """Invented linear drifts (test scenario): C_Q of site A and its share of the sodium change with temperature."""
    u = (t_k - 250.0) / 100.0
    return {"A.cq_mhz": 2.4 - 0.6 * u, "A.fraction": 0.65 - 0.25 * u, "A.shift_ppm": 2.0, "B.shift_ppm": -15.0}


def write_two_site_series(folder, temperatures, *, snr=150.0, seed=7):
    """23Na central transition at infinitely fast MAS, two sites, by the slow reference route of
    tests/reference/fit_spectra.py (dense powder grid, explicit rotations); seeded Gaussian noise.

    Returns the manifest path (columns file, temperature_k)."""
    axis, nu0 = na_axis()
    rng = np.random.default_rng(seed)
    lines = ["file,temperature_k"]
    for t in temperatures:
        tr = two_site_truth(t)
        fa, wa = fr.crystallite_lines(1.5, nu0, tr["A.cq_mhz"] * 1e6, 0.3, [tr["A.shift_ppm"]] * 3, mode="infinite",
                                      grid=(120, 120))
        fb, wb = fr.crystallite_lines(1.5, nu0, 1.1e6, 0.0, [tr["B.shift_ppm"]] * 3, mode="infinite",
                                      grid=(120, 120))
        ya = fr.spectrum_from_lines(axis.hz, fa, wa / wa.sum(), GAUSS_HZ)
        yb = fr.spectrum_from_lines(axis.hz, fb, wb / wb.sum(), GAUSS_HZ)
        y = tr["A.fraction"] * ya + (1 - tr["A.fraction"]) * yb
        y = y / y.max() + rng.normal(0.0, 1.0 / snr, y.size)
        name = f"na_{int(t)}K.csv"
        write_spectrum_text(folder / name, MeasuredSpectrum(axis.hz, axis.ppm, y, None, nu0, "synthetic", nucleus=NA,
                                                            field_tesla=FIELD))
        lines.append(f"{name},{t}")
    manifest = folder / "manifest.csv"
    manifest.write_text("\n".join(lines) + "\n")
    return manifest


def two_site_model(cq_start=2.0):
    return ps.make_model(NA, {"field_tesla": FIELD, "spinning_hz": "inf", "orientations": "medium",
                              "method": "perturbation", "gauss_hz": GAUSS_HZ}, [
        {"label": "A", "weight": {"start": 0.5, "min": 0.05, "max": 5.0}, "eta_q": 0.3,
         "shift_ppm": {"start": 0.0, "min": -10.0, "max": 10.0},
         "cq_mhz": {"start": cq_start, "min": 1.0, "max": 4.0}},
        {"label": "B", "weight": 0.5, "cq_mhz": 1.1, "eta_q": 0.0,
         "shift_ppm": {"start": -12.0, "min": -30.0, "max": 0.0}}], fit={"noise_region": [68.0, 50.0]})


def write_line_series(folder, shifts, *, fwhm_hz=160.0, snr=100.0, seed=3, prefix="p"):
    """31P Gaussian lines of FWHM fwhm_hz at given shifts (the analytic Gaussian sampled at the points, common
    practice), seeded noise."""
    nu = ps.get_nuclide("31P").larmor_hz(9.4)
    axis = make_axis(512, nu, 10.0, 60.0)
    rng = np.random.default_rng(seed)
    paths = []
    for k, d in enumerate(shifts):
        x = axis.hz - d * nu * 1e-6
        y = np.exp(-4.0 * np.log(2.0) * (x / fwhm_hz) ** 2)
        y = y / y.max() + rng.normal(0.0, 1.0 / snr, y.size)
        p = folder / f"{prefix}{k:02d}.csv"
        write_spectrum_text(p, MeasuredSpectrum(axis.hz, axis.ppm, y, None, nu, "synthetic", nucleus="31P",
                                                field_tesla=9.4))
        paths.append(p)
    return paths


def line_model(start=0.0, fwhm_hz=160.0):
    return ps.make_model("31P", {"field_tesla": 9.4, "gauss_hz": fwhm_hz},
                         [{"label": "P", "shift_ppm": {"start": start, "min": -20.0, "max": 40.0}}])
