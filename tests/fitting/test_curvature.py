"""Curvature check, profile-likelihood intervals and posterior chains long enough by their autocorrelation time.

Sources: where chi-square is quadratic in the parameters, the interval where it rises by 1 with the others
re-optimised (the profile-likelihood interval) is value +- the standard error from the covariance (W. H. Press et al.,
Numerical Recipes, 3rd ed., Cambridge 2007, sec. 15.6); its coverage of the truth is 68.3 % (one standard error of a
normal variable; common practice).  emcee's advice that a chain should span at least 50 integrated autocorrelation
times: D. Foreman-Mackey et al., Publ. Astron. Soc. Pac. 125 (2013) 306, and the emcee documentation.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import powderspin as ps
from powderspin.fitting.fitter import fit
from powderspin.fitting.posterior import MIN_AUTOCORRELATION_TIMES
from tests.fitting import hard_cases as hc


def _line(snr=200.0, seed=1):
    truth = ps.make_model("31P", {"field_tesla": 9.4, "points": 256, "center_ppm": 0.0, "width_ppm": 40.0},
                          [{"label": "P", "shift_ppm": 3.0, "lorentz_hz": 300.0}])
    s = ps.simulate(truth)
    y = s.intensity / s.intensity.max() + np.random.default_rng(seed).normal(0.0, 1.0 / snr, s.hz.size)
    data = ps.MeasuredSpectrum(s.hz, s.ppm, y, None, s.nu_ref_hz, "synthetic")
    start = ps.make_model("31P", {"field_tesla": 9.4},
                          [{"label": "P", "shift_ppm": {"start": 0.0, "min": -10.0, "max": 10.0},
                            "lorentz_hz": {"start": 200.0, "min": 10.0, "max": 2000.0}}])
    return start, data


def test_a_nearly_quadratic_surface_passes_and_its_profile_matches_the_standard_error():
    start, data = _line()
    r = fit(start, [data], noise_region=(19.0, 12.0), profile="all")
    assert r.curvature and all(row.quadratic for row in r.curvature)
    assert not any("not quadratic" in w for w in r.warnings)
    for n in r.names:
        lo, hi = r.profile_intervals[n]
        v, e = r.values[n], r.stderr[n]
        assert abs((v - lo) / e - 1.0) < 0.1 and abs((hi - v) / e - 1.0) < 0.1, (n, lo, v, hi, e)
    assert not fit(start, [data], noise_region=(19.0, 12.0)).profile_intervals  # auto: only where needed


def test_predicted_change_is_one_along_principal_directions():
    start, data = _line()
    r = fit(start, [data], noise_region=(19.0, 12.0))
    rows = [row for row in r.curvature if row.label.startswith("principal")]
    assert rows and all(abs(row.predicted - 1.0) < 1e-6 for row in rows)


@pytest.mark.slow
def test_a_curved_surface_is_flagged_with_profile_intervals():
    """The static 59Co case with shift anisotropy at general angles: the eta/skew/gamma valley is curved."""
    d, noise = hc.data("co59", 1)
    r = fit(hc.model("co59", hc.truth("co59")), [d], noise_region=noise)
    bad = [row for row in r.curvature if not row.quadratic]
    assert bad
    assert r.profile_intervals
    assert any("not quadratic" in w for w in r.warnings)
    for n, (lo, hi) in r.profile_intervals.items():
        assert lo < r.values[n] < hi


@pytest.mark.slow
def test_profile_or_standard_error_intervals_cover_the_truth_at_the_nominal_rate():
    """20 noise seeds of the 59Co case: the reported one-sigma intervals cover the truth about 68 % of the time."""
    truth = dict(zip(hc.NAMES, hc.truth("co59")))
    hits = total = 0
    for seed in range(20):
        d, noise = hc.data("co59", 100 + seed, points=128)
        r = fit(hc.model("co59", hc.truth("co59"), points=128), [d], noise_region=noise)
        for n in r.names:
            lo, hi = r.profile_intervals.get(n, (r.values[n] - r.stderr[n], r.values[n] + r.stderr[n]))
            hits += lo <= truth[n] <= hi
            total += 1
    rate = hits / total
    # binomial spread of 20 independent trials (the parameters of one fit are correlated, so 20, not 180)
    sd = math.sqrt(0.683 * 0.317 / 20)
    assert abs(rate - 0.683) <= 3 * sd, rate


@pytest.mark.slow
def test_posterior_is_extended_until_it_spans_fifty_autocorrelation_times():
    start, data = _line()
    short = fit(start, [data], noise_region=(19.0, 12.0), posterior=True, walkers=8, steps=40, max_steps=60)
    assert not short.posterior.converged and short.posterior.steps == 60
    assert any("too short" in w for w in short.warnings)
    long = fit(start, [data], noise_region=(19.0, 12.0), posterior=True, walkers=8, steps=40, max_steps=4000)
    p = long.posterior
    assert p.converged and p.steps > 40
    assert p.steps - p.burn >= MIN_AUTOCORRELATION_TIMES * max(p.autocorrelation_steps)
    assert any("extended" in n for n in long.notes)
