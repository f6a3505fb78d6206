"""Baseline correction through automatically found signal-free regions (SYNTHETIC spectra: Gaussian lines on
known baselines with seeded noise)."""

from __future__ import annotations

import numpy as np
import pytest

from powderspin.processing.baseline import correct_baseline, noise_level

N = 8192
U = np.linspace(-1.0, 1.0, N)
LINES = ((-0.4, 0.03, 1.0), (0.1, 0.06, 0.5), (0.55, 0.01, 2.0))    # centre, width, height (invented)


def _spectrum(baseline, seed=3, sigma=0.004):
    rng = np.random.default_rng(seed)
    y = sum(h * np.exp(-((U - c) / w) ** 2) for c, w, h in LINES)
    return y + baseline + rng.normal(0.0, sigma, N), sigma


@pytest.mark.parametrize("kind, degree", [("polynomial", 3), ("spline", 1)])
def test_baseline_recovered_and_regions_avoid_the_lines(kind, degree):
    true = 0.05 - 0.08 * U + 0.1 * U ** 2 + 0.06 * U ** 3
    y, sigma = _spectrum(true)
    res = correct_baseline(y, kind, degree)
    assert res.fitted
    # the baseline within a few noise standard deviations of the true one, everywhere
    assert np.max(np.abs(res.baseline - true)) < 4 * sigma, np.max(np.abs(res.baseline - true))
    for first, last in res.regions:                  # no region reaches into a line (2 widths: 2 % of its height)
        for c, w, _ in LINES:
            assert not (U[first] - 2 * w < c < U[last] + 2 * w)
    assert res.free.sum() > 0.5 * N


def test_no_room_for_a_baseline():
    """A pattern that fills the window leaves no signal-free points: no baseline, and the result says why."""
    y = np.exp(-(U / 0.9) ** 2) + np.random.default_rng(0).normal(0, 1e-3, N)
    res = correct_baseline(y, "polynomial", 1)
    assert not res.fitted and np.all(res.baseline == 0) and "no baseline" in res.note


def test_noise_level_robust_to_lines():
    y, sigma = _spectrum(0.0, sigma=0.01)
    assert noise_level(y) == pytest.approx(sigma, rel=0.05)
