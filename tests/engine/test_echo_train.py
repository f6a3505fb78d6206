"""(Q)CPMG echo trains: the spikelet comb against a time-domain echo train, and its envelope."""

from __future__ import annotations

import numpy as np
import pytest

import powderspin as ps
from powderspin.engine.echo_train import echo_train_comb, spikelet_positions_hz
from powderspin.engine.lineshape import make_axis
from powderspin.model.values import ModelError
from powderspin.simulator import Simulator

POINTS = 4096


def _models(**train):
    """A static 93Nb central-transition pattern (I = 9/2) on an axis whose centre is a point, with and without
    the echo train."""
    base = {"field_tesla": 9.4, "points": POINTS, "orientations": 48, "gauss_hz": 2000.0}
    site = [{"cq_mhz": 18.0, "eta_q": 0.3, "shift_ppm": -1000.0}]
    auto = Simulator(ps.make_model("93Nb", base, site))
    lo, hi = auto.axis.hz.min(), auto.axis.hz.max()
    nu0 = auto.nu_ref_hz
    width_ppm = 1.6 * (hi - lo) / nu0 * 1e6
    center_ppm = 0.5 * (hi + lo) / nu0 * 1e6
    ax = make_axis(POINTS, nu0, center_ppm, width_ppm)
    carrier_ppm = float(ax.ppm[POINTS // 2])
    meas = dict(base, center_ppm=center_ppm, width_ppm=width_ppm)
    plain = ps.make_model("93Nb", meas, site)
    comb = ps.make_model("93Nb", dict(meas, carrier_ppm=carrier_ppm, **train), site)
    return plain, comb, carrier_ppm


def test_spikelets_equal_a_time_domain_echo_train():
    # N whole echoes k tau apart, scaled by r^k: the spectrum is the pattern times sum_k r^k
    # exp(-i 2 pi nu k tau) (Fourier shift theorem; R. N. Bracewell, The Fourier Transform and Its
    # Applications (1965), from memory); built here in the time domain with numpy.fft from the plain
    # pattern, with tau a whole number of dwell times, so the discrete shift theorem is exact.
    lag, echoes, r = 32, 4, 0.8
    plain, _, _ = _models()
    s = Simulator(plain)
    ax = s.axis
    dx = abs(ax.dx_hz)
    tau = lag / (POINTS * dx)
    t2_ms = -tau / np.log(r) * 1e3
    _, comb_model, carrier_ppm = _models(echo_train_period_us=tau * 1e6, echo_train_echoes=echoes,
                                         echo_train_t2_ms=t2_ms)
    pattern = s.spectrum().intensity
    spikes = Simulator(comb_model, axis=ax).spectrum().intensity
    # frequencies relative to the carrier (an axis point) in DFT order
    k0 = int(np.argmin(np.abs(ax.ppm - carrier_ppm)))
    order = np.argsort(ax.hz)
    p_sorted = pattern[order]
    j0 = int(np.where(order == k0)[0][0])
    spec = np.roll(p_sorted, -j0)  # index j = offset j dx from the carrier (negative offsets wrap)
    echo = np.fft.ifft(spec)
    train = sum(r ** k * np.roll(echo, k * lag) for k in range(echoes))
    expect = np.roll(np.fft.fft(train).real, j0)
    got = spikes[order]
    # the engine averages the comb over each point's bin: term k carries sinc(k tau dx) >= 1 - (pi x)^2 / 6
    x = (echoes - 1) * tau * dx
    tol = (np.pi * x) ** 2 / 6 * sum(r ** k for k in range(echoes)) * pattern.max() + 1e-9 * pattern.max()
    assert x < 0.03
    np.testing.assert_allclose(got, expect, rtol=0, atol=tol)


def test_spikelet_envelope_is_the_pattern_at_the_spikelet_positions():
    # QCPMG: spikelets 1/tau apart whose envelope follows the static powder pattern (F. H. Larsen,
    # H. J. Jakobsen, P. D. Ellis, N. C. Nielsen, J. Phys. Chem. A 101 (1997) 8597, from memory)
    plain, _, _ = _models()
    s = Simulator(plain)
    ax = s.axis
    dx = abs(ax.dx_hz)
    # spikelets 256 points apart, so each is resolved (8 tau dx = 1/32: the bin averages of the comb at the
    # tops, sinc(k tau dx), are within 2e-3 of 1)
    tau = 1.0 / (256 * dx)
    _, comb_model, carrier_ppm = _models(echo_train_period_us=tau * 1e6, echo_train_echoes=8)
    pattern = s.spectrum().intensity
    spikes = Simulator(comb_model, axis=ax).spectrum().intensity
    pos = spikelet_positions_hz(ax, carrier_ppm * ax.nu_ref_hz * 1e-6, tau)
    idx = np.array([int(np.argmin(np.abs(ax.hz - p))) for p in pos])
    assert np.max(np.abs(ax.hz[idx] - pos)) < 1e-6 * dx * POINTS
    assert len(idx) >= 12
    height = 8.0
    np.testing.assert_allclose(spikes[idx] / height, pattern[idx], rtol=0, atol=2e-3 * pattern.max())
    # between spikelets the comb of 8 echoes has its zeros (Dirichlet kernel): far below the envelope
    mid = idx[:-1] + 128
    assert np.max(np.abs(spikes[mid])) < 0.05 * height * pattern.max()
    # "envelope" output: exactly the pattern times the spikelet height
    _, env_model, _ = _models(echo_train_period_us=tau * 1e6, echo_train_echoes=8, echo_train_output="envelope")
    env = Simulator(env_model, axis=ax).spectrum()
    np.testing.assert_allclose(env.intensity, pattern * height, rtol=1e-12, atol=0)
    assert env.metadata["echo_train"]["spikelet_spacing_hz"] == pytest.approx(1 / tau)


def test_comb_mean_over_whole_periods_is_one():
    # int_0^{1/tau} cos(2 pi nu k tau) d nu = 0 for k >= 1: only the first echo survives the average, so a
    # spikelet spectrum keeps the area of a pattern that is smooth on the scale of 1/tau
    ax = make_axis(4000, 1e8, 0.0, 400.0)  # 10 Hz per point, 40 kHz
    for echoes, t2 in [(1, None), (16, None), (64, 2e-3)]:
        c = echo_train_comb(ax, float(ax.hz[1000]), 1.0 / (200 * abs(ax.dx_hz)), echoes, t2)
        assert c.mean() == pytest.approx(1.0, abs=1e-12)


def test_comb_rejects_bad_values():
    ax = make_axis(64, 1e8, 0.0, 10.0)
    with pytest.raises(ValueError, match="period_s"):
        echo_train_comb(ax, 0.0, 0.0, 4)
    with pytest.raises(ValueError, match="echoes"):
        echo_train_comb(ax, 0.0, 1e-3, 0)
    with pytest.raises(ModelError, match="echo_train_echoes"):
        ps.make_model("93Nb", {"field_tesla": 9.4, "echo_train_period_us": 100.0, "echo_train_echoes": 0},
                      [{"cq_mhz": 10.0}])
