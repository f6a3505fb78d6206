"""The 2D fit's global search, posterior and noise region (the 1D fit's modules, reused): SYNTHETIC 3QMAS data
with fixed noise seeds throughout."""

from __future__ import annotations

import numpy as np
import pytest

import powderspin as ps
from powderspin.fitting.data import FitError
from powderspin.fitting.two_dimensional import fit_two_dimensional, noise_from_region_2d
from powderspin.io.spectra2d import MeasuredSpectrum2D

# two invented 27Al sites whose 1D MAS central transitions overlap (as in test_two_dimensional_fit.py)
TRUE = {"A.cq_mhz": 3.5, "A.shift_ppm": 60.0, "A.eta_q": 0.5, "B.cq_mhz": 2.0, "B.shift_ppm": 52.0, "B.eta_q": 0.2}
# a start far from the truth: a local fit from it ends in a minimum many times worse (checked below)
POOR = {"A.cq_mhz": 1.5, "A.shift_ppm": 45.0, "A.eta_q": 0.9, "B.cq_mhz": 5.0, "B.shift_ppm": 70.0, "B.eta_q": 0.9}


def _two_sites(values):
    def free(k, lo, hi):
        return {"start": values[k], "min": lo, "max": hi}

    sites = [{"label": s, "cq_mhz": free(f"{s}.cq_mhz", 1.0, 6.0), "shift_ppm": free(f"{s}.shift_ppm", 40.0, 80.0),
              "eta_q": free(f"{s}.eta_q", 0.0, 1.0)} for s in "AB"]
    meas = {"field_tesla": 9.4, "spinning_hz": "inf", "experiment": "mqmas", "points": 128, "f1_points": 32,
            "orientations": 12, "gauss_hz": 600.0, "f1_gauss_hz": 300.0, "center_ppm": 50.0, "width_ppm": 80.0,
            "f1_center_ppm": 58.0, "f1_width_ppm": 40.0}
    return ps.make_model("27Al", meas, sites)


def _one_site(cq, shift):
    """One 23Na site, C_Q and delta_iso free; F2 from -40 to 40 ppm, the line between about -12 and 10 ppm."""
    meas = {"field_tesla": 11.7, "spinning_hz": "inf", "experiment": "mqmas", "points": 128, "f1_points": 32,
            "orientations": 12, "gauss_hz": 150.0, "f1_gauss_hz": 400.0, "center_ppm": 0.0, "width_ppm": 80.0,
            "f1_center_ppm": 10.0, "f1_width_ppm": 40.0}
    site = {"label": "Na", "eta_q": 0.4, "cq_mhz": {"start": cq, "min": 0.5, "max": 5.0},
            "shift_ppm": {"start": shift, "min": -30.0, "max": 40.0}}
    return ps.make_model("23Na", meas, [site])


def _noisy(model, sigma_fraction, seed):
    s = ps.simulate(model)
    sigma = sigma_fraction * float(s.intensity.max())
    y = s.intensity + np.random.default_rng(seed).normal(0.0, sigma, s.shape)
    return MeasuredSpectrum2D(s.f1_ppm, s.f2_ppm, y, s.metadata["nu_ref_hz"], "synthetic 2D"), sigma


#: a signal-free F2 range of _one_site's spectrum (its F2 pattern ends near 10 ppm)
QUIET_F2 = (40.0, 22.0)


@pytest.mark.slow
def test_global_search_from_a_poor_start_reaches_the_fit_from_the_truth():
    """The global search (differential-evolution candidates, each refined) from a poor start reaches a chi-square
    no worse than a local fit started at the true values; a local fit from the same poor start does not."""
    data, _ = _noisy(_two_sites(TRUE), 0.01, 5)
    from_truth = fit_two_dimensional(_two_sites(TRUE), {0: data}, profile="none")
    local = fit_two_dimensional(_two_sites(POOR), {0: data}, profile="none")
    found = fit_two_dimensional(_two_sites(POOR), {0: data}, global_search=True, starts=8, seed=0, profile="none")
    assert from_truth.success and found.success
    # no worse, within the optimiser's own convergence tolerance (ftol 1e-8 of the cost)
    assert found.chi_square <= from_truth.chi_square * (1.0 + 1e-6)
    assert local.chi_square > 5.0 * from_truth.chi_square  # the start is a poor one
    assert found.starts == 8 and found.minima and found.minima[0].chi_square == pytest.approx(found.chi_square)
    assert any(n.startswith("global search: differential evolution") for n in found.notes)
    # the sites are found (in either labelling: the two sites have the same free parameters and bounds)
    pairs = sorted((found.values[f"{s}.shift_ppm"], found.values[f"{s}.cq_mhz"]) for s in "AB")
    assert pairs[0][0] == pytest.approx(52.0, abs=3 * max(found.stderr["A.shift_ppm"], found.stderr["B.shift_ppm"]))
    assert pairs[1][1] == pytest.approx(3.5, abs=3 * max(found.stderr["A.cq_mhz"], found.stderr["B.cq_mhz"]))


@pytest.mark.slow
def test_posterior_half_widths_match_the_linearised_standard_errors():
    """A well-conditioned case: one 23Na site, C_Q and delta_iso free (eta_Q fixed), 1 % noise, noise from a
    signal-free F2 range.  Near a quadratic minimum the posterior is Gaussian with the covariance (J^T J)^-1, so
    half the 16-84 % interval equals the standard error (a normal distribution's central 68.27 %: common
    practice); checked within 25 %.  The chain must span 50 autocorrelation times (D. Foreman-Mackey, D. W. Hogg,
    D. Lang, J. Goodman, Publ. Astron. Soc. Pac. 125 (2013) 306, the emcee paper's advice, from memory)."""
    data, _ = _noisy(_one_site(2.2, 6.0), 0.01, 11)
    r = fit_two_dimensional(_one_site(2.3, 6.5), {0: data}, noise_region=QUIET_F2, posterior=True, walkers=8,
                            steps=400, seed=3)
    assert r.success and r.noise_source == "noise region"
    assert r.posterior is not None and r.posterior.converged
    for name in ("Na.cq_mhz", "Na.shift_ppm"):
        lo, hi = r.posterior.interval(name)
        assert 0.5 * (hi - lo) == pytest.approx(r.stderr[name], rel=0.25), name
    text = r.summary()
    assert "posterior median" in text and "walkers" in text
    d = r.to_dict()
    assert d["fit"]["result"]["posterior"]["walkers"] == 8
    assert len(d["site"][0]["interval"]["cq_mhz"]) == 2


def test_noise_region_gives_the_seeded_noise():
    """Sigma from a signal-free F2 range of every F1 row (each row's straight line removed, variances pooled)
    is within 10 % of the standard deviation of the seeded Gaussian noise (it is the sample standard deviation of
    32 x 29 values: its relative error is about 1 / sqrt(2 n), 2.4 % here; common practice)."""
    data, sigma = _noisy(_one_site(2.2, 6.0), 0.01, 11)
    assert noise_from_region_2d(data.intensity, data.f2_ppm, QUIET_F2) == pytest.approx(sigma, rel=0.10)
    r = fit_two_dimensional(_one_site(2.3, 6.5), {0: data}, noise_region=QUIET_F2, profile="none")
    assert r.noise_source == "noise region" and r.noise[0] == pytest.approx(sigma, rel=0.10)
    assert r.selection["noise_region"] == list(QUIET_F2)
    assert r.reduced_chi_square == pytest.approx(1.0, abs=0.1)
    # a straight baseline along F2 in every row does not change it
    ramp = MeasuredSpectrum2D(data.f1_ppm, data.f2_ppm, data.intensity + 0.05 * sigma * data.f2_ppm[None, :],
                              data.nu_ref_hz, "ramp")
    assert noise_from_region_2d(ramp.intensity, ramp.f2_ppm, QUIET_F2) == pytest.approx(
        noise_from_region_2d(data.intensity, data.f2_ppm, QUIET_F2), rel=1e-9)


def test_noise_region_without_data_points_is_refused():
    data, _ = _noisy(_one_site(2.2, 6.0), 0.01, 11)
    with pytest.raises(FitError, match=r"measurement 1: noise_region \[300, 200\] ppm holds 0 point\(s\) of the "
                                       r"data's F2 axis; it needs at least 8 \(the F2 axis covers 39\.6875 to "
                                       r"-39\.6875 ppm\)"):
        fit_two_dimensional(_one_site(2.3, 6.5), {0: data}, noise_region=(300.0, 200.0))
    with pytest.raises(FitError, match="noise_region = "):
        fit_two_dimensional(_one_site(2.3, 6.5), {0: data}, noise_region=(1.0, 2.0, 3.0))


def test_sampler_and_search_settings_are_checked_as_fit_checks_them():
    data, _ = _noisy(_one_site(2.2, 6.0), 0.01, 11)
    m = _one_site(2.3, 6.5)
    with pytest.raises(FitError, match="starts"):
        fit_two_dimensional(m, {0: data}, global_search=True, starts=0)
    with pytest.raises(FitError, match="steps"):
        fit_two_dimensional(m, {0: data}, posterior=True, steps=3)
    with pytest.raises(FitError, match="global_search must be True or False"):
        fit_two_dimensional(m, {0: data}, global_search="yes")
    with pytest.raises(FitError, match="profile"):
        fit_two_dimensional(m, {0: data}, profile="some")
    with pytest.raises(FitError, match="posterior sample"):  # memory, before any work
        fit_two_dimensional(m, {0: data}, posterior=True, walkers=10 ** 6, steps=10 ** 6)
