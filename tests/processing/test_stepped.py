"""Frequency-stepped acquisitions: sub-spectra recorded at three transmitter frequencies, each processed from
its own FID and carrier, combined by co-addition and by the skyline projection (SYNTHETIC)."""

from __future__ import annotations

import numpy as np
import pytest

from powderspin.io.raw import RawFID
from powderspin.processing import combine_stepped, process
from tests.processing.synthetic import fid_from_spectrum, simulate_on_fft_grid

DWELL = 5e-6            # 200 kHz per sub-spectrum
M = 4096
SHIFT = 820             # carriers 820 points (about 40 kHz) apart
SITE = [{"label": "Ga", "cq_mhz": 12.0, "eta_q": 0.1}]


@pytest.fixture(scope="module")
def wide():
    # a static 71Ga CT pattern on a grid three sub-windows wide (the carriers fall on its points)
    big = M + 2 * SHIFT
    g, nu = simulate_on_fft_grid("71Ga", 9.4, SITE, big, DWELL * M / big, 0.0, lorentz_hz=500.0)
    return g, nu, big


def _parts(wide, window):
    g, nu, big = wide
    step = 1.0 / (M * DWELL)
    f_big = (np.arange(big) - big // 2) * step
    spectra = []
    for j in (-1, 0, 1):
        c = j * SHIFT * step
        idx = np.arange(M) - M // 2 + big // 2 + j * SHIFT
        f = f_big[idx]
        sub = g[idx] * window(f - c, SHIFT * step)
        fid = fid_from_spectrum(sub, DWELL, M, group_delay=0.0)
        raw = RawFID(fid, DWELL, nu + c, nu, "71Ga", None, 0.0, f"sub {j}")
        spectra.append(process(raw, phase="none", dc_offset="none", zero_fill_points=M))
    return g, f_big, spectra


def test_coaddition_of_windows_that_sum_to_one(wide):
    """cos^2 windows a step apart add up to 1 between the outer carriers (cos^2 + sin^2 = 1), so the co-added
    sub-spectra are the pattern there."""
    def cos2(df, d):
        return np.where(np.abs(df) < d, np.cos(0.5 * np.pi * df / d) ** 2, 0.0)
    g, f_big, spectra = _parts(wide, cos2)
    comb = combine_stepped(spectra, "sum")
    inner = np.abs(comb.hz) < SHIFT / (M * DWELL)              # between the outer carriers
    ref = np.interp(comb.hz[inner], f_big, g)
    assert np.max(np.abs(comb.intensity[inner] - ref / 2)) < 1e-9 * g.max()
    # the combined axis runs from the lowest sub-spectrum's first point to the highest's last
    assert comb.hz[0] == pytest.approx(spectra[0].hz[0]) and comb.hz[-1] == pytest.approx(spectra[2].hz[-1])


def test_skyline_of_overlapping_flat_windows(wide):
    """Flat windows that overlap: the largest sub-spectrum at each point is the pattern (skyline projection)."""
    def flat(df, d):
        return (np.abs(df) <= 0.6 * d).astype(float)
    g, f_big, spectra = _parts(wide, flat)
    comb = combine_stepped(spectra, "skyline")
    inner = (comb.hz > -1.6 * SHIFT / (M * DWELL)) & (comb.hz < 1.6 * SHIFT / (M * DWELL))
    ref = np.interp(comb.hz[inner], f_big, g) / 2
    # 1e-4: the windows' sharp edges ring beyond half the FID's period, which the causal FID cuts off
    assert np.max(np.abs(comb.intensity[inner] - ref)) < 1e-4 * g.max()
    assert "skyline" in comb.metadata["format"]
    with pytest.raises(Exception, match="at least two"):
        combine_stepped(spectra[:1])
