"""CPMG/QCPMG echo trains (SYNTHETIC: powderspin's own static pattern turned into a train of whole echoes)."""

from __future__ import annotations

import numpy as np
import pytest

from powderspin.io.raw import RawFID
from powderspin.processing import process, processing_record
from powderspin.processing.echoes import coadd_echoes, find_echo_top
from tests.processing.synthetic import fft_axis_hz, simulate_on_fft_grid

DWELL = 2e-6            # 500 kHz window
M = 8192                # fine grid of the simulated pattern
PERIOD = 1024.4         # echo period in points (fractional on purpose)
L = 1024                # points of a co-added whole echo
ECHOES = 24
T2 = 0.03               # echo-train decay (s)
SITE = [{"label": "Nb", "cq_mhz": 60.0, "eta_q": 0.2}]


@pytest.fixture(scope="module")
def train():
    # static CT pattern of an invented 93Nb site at 9.4 T, Lorentzian 3 kHz so that an echo dies within its period
    g, nu = simulate_on_fft_grid("93Nb", 9.4, SITE, M, DWELL, 0.0, lorentz_hz=3000.0)
    gu = np.fft.ifftshift(g)
    nu_m = np.fft.fftfreq(M)
    first = PERIOD / 2 + 3.3
    n_total = int(first + (ECHOES - 0.5) * PERIOD) + 1
    s = np.zeros(n_total, dtype=complex)
    for k in range(ECHOES):
        tk = first + k * PERIOD
        a, d = int(np.floor(tk)), tk - np.floor(tk)
        h = np.fft.ifft(gu * np.exp(-2j * np.pi * nu_m * d))          # h[q] = echo(q - d), top at q = d
        q = np.arange(-int(PERIOD // 2) + 1, int(PERIOD // 2))
        n = a + q
        ok = (n >= 0) & (n < n_total)
        s[n[ok]] += np.exp(-tk * DWELL / T2) * h[q[ok] % M]
    rng = np.random.default_rng(11)
    s += 2e-3 * np.max(np.abs(s)) * (rng.normal(size=s.size) + 1j * rng.normal(size=s.size))
    return g, nu, s, first


def test_coadded_echoes_give_the_static_pattern(train):
    """The transform of the co-added whole echo is the pattern sampled every 1/(L dw) (the echo has died within
    its segment, so cutting it changes nothing): 1 % RMS of the maximum."""
    g, nu, s, first = train
    raw = RawFID(s, DWELL, nu, nu, "93Nb", None, 0.0, "memory")
    spec = process(raw, echo_train="coadd", echo_period_us=PERIOD * DWELL * 1e6, zero_fill_points=L)
    ref = g[:: M // L]                                   # the pattern at the L-point grid (same frequencies)
    np.testing.assert_allclose(spec.hz, fft_axis_hz(M, DWELL)[:: M // L], atol=1e-6)
    y = spec.intensity
    rms = np.sqrt(np.mean((y / y.max() - ref / ref.max()) ** 2))
    assert rms < 0.01
    rec = processing_record(spec)["echo_train"]
    assert rec["mode"] == "coadd" and rec["echoes"] == ECHOES and rec["segment_points"] == L
    assert rec["first_top_points"] == pytest.approx(first, abs=0.1)


def test_spikelets_at_multiples_of_the_inverse_period(train):
    """Transforming the whole train gives spikelets at f = j / tau (tau the echo period): the train is periodic
    (Fourier series; F. H. Larsen et al., J. Phys. Chem. A 101 (1997) 8597, from memory), with the pattern as
    their envelope."""
    g, nu, s, first = train
    raw = RawFID(s, DWELL, nu, nu, "93Nb", None, 0.0, "memory")
    spec = process(raw, echo_train="spikelets", echo_period_us=PERIOD * DWELL * 1e6, zero_fill_points=1 << 17)
    spacing = 1.0 / (PERIOD * DWELL)
    assert processing_record(spec)["echo_train"]["spikelet_spacing_hz"] == pytest.approx(spacing)
    assert processing_record(spec)["echo_train"]["echoes"] == ECHOES     # every echo whose top lies in the data
    y, hz = spec.intensity, spec.hz
    step = hz[1] - hz[0]
    f_grid = fft_axis_hz(M, DWELL)
    heights, expected = [], []
    for j in range(-8, 9):                               # spikelets within the pattern
        f = j * spacing
        window = np.abs(hz - f) < 0.5 * spacing
        peak = hz[window][np.argmax(y[window])]
        assert abs(peak - f) <= 1.5 * step, (j, peak, f)
        heights.append(np.max(y[window]))
        expected.append(np.interp(f, f_grid, g))
    heights, expected = np.array(heights), np.array(expected)
    # the envelope follows the pattern (each spikelet carries the pattern smoothed over about 1/tau by the
    # echoes' own decay): within 5 % of the maximum
    assert np.max(np.abs(heights / heights.max() - expected / expected.max())) < 0.05


def test_echo_helpers():
    t = np.arange(2048)
    echo = np.exp(-((t - 700.25) / 20.0) ** 2)
    assert find_echo_top(echo) == pytest.approx(700.25, abs=0.05)
    with pytest.raises(Exception, match="at least 8"):
        coadd_echoes(echo, 700.0, 4.0)
    with pytest.raises(Exception, match="asks for more"):
        coadd_echoes(echo, 700.0, 256.0, count=20)
