"""Processing raw FIDs: SYNTHETIC folders written through nmrglue's Bruker writer from powderspin's own spectra
(tests/processing/synthetic.py), with a known fractional group delay, zero- and first-order phase errors, a DC
offset and seeded noise."""

from __future__ import annotations

import json

import numpy as np
import pytest

from powderspin.io.raw import RawFID, read_raw
from powderspin.processing import ProcessingOptions, process, processing_record
from powderspin.processing.options import ProcessingError
from tests.processing.synthetic import fft_axis_hz, fid_from_spectrum, simulate_on_fft_grid, write_bruker

DWELL = 1e-5          # 100 kHz window
M = 8192              # points of the transform (and of the simulated spectrum)
N = 4096              # points recorded
OFFSET = 1500.0       # carrier above the base frequency (Hz)
GRPDLY = 67.985       # a fractional digital-filter delay (points)
SITES = [{"label": "AlO4", "shift_ppm": 62.0, "cq_mhz": 3.0, "eta_q": 0.5},
         {"label": "AlO6", "shift_ppm": 4.0, "cq_mhz": 5.0, "eta_q": 0.3, "weight": 0.6}]


@pytest.fixture(scope="module")
def pattern():
    g, nu = simulate_on_fft_grid("27Al", 9.4, SITES, M, DWELL, OFFSET, spinning_hz="inf", lorentz_hz=150.0,
                                 gauss_hz=100.0)
    return g, nu


def _folder(path, pattern, **kw):
    g, nu = pattern
    fid = fid_from_spectrum(g, DWELL, N, group_delay=GRPDLY, **kw)
    return write_bruker(path, fid, dwell_s=DWELL, sfo1_mhz=(nu + OFFSET) / 1e6, bf1_mhz=nu / 1e6, nucleus="27Al",
                        group_delay=GRPDLY)


def _rms(y, ref):
    return float(np.sqrt(np.mean((y / np.max(y) - ref / np.max(ref)) ** 2)))


def test_exact_group_delay_removal_leaves_no_phase(tmp_path, pattern):
    """Design notes section 10: the fractional delay removed as exp(+2 pi i f G dw) after the transform is exact;
    nmrglue's default (whole points) leaves a first-order phase of 360 x (fraction of G) across the window."""
    import nmrglue as ng

    g, nu = pattern
    fid = fid_from_spectrum(g, DWELL, M, group_delay=GRPDLY)   # every point of the period: no truncation at all
    d = write_bruker(tmp_path, fid, dwell_s=DWELL, sfo1_mhz=(nu + OFFSET) / 1e6, bf1_mhz=nu / 1e6,
                     nucleus="27Al", group_delay=GRPDLY, integer=False)
    spec = process(d, phase="none", dc_offset="none", zero_fill_points=M)
    # the real part is g / 2 (the causal FID's transform), to rounding: no residual phase at all
    assert np.max(np.abs(spec.intensity - g / 2)) < 1e-9 * np.max(g)
    dic, data = ng.bruker.read(str(d))
    truncated = ng.bruker.remove_digital_filter({"acqus": {"DECIM": 1, "DSPFVS": 20, "GRPDLY": GRPDLY}}, data)
    theirs = np.fft.fftshift(np.fft.fft(truncated, M))
    # with the delay cut to whole points, the rest (0.985 points) is a first-order phase of ~355 deg per
    # window, and the lineshape is off by more than 1 % RMS
    assert _rms(theirs.real, g) > 0.01


@pytest.mark.parametrize("e0, e1", [(37.0, 25.0), (-120.0, -60.0), (170.0, 150.0)])
def test_phase_and_lineshape_recovered(tmp_path, pattern, e0, e1):
    """Automatic phasing recovers the phase within 1 degree wherever the pattern is, and the lineshape within
    1 % RMS (relative to its maximum)."""
    g, nu = pattern
    d = _folder(tmp_path, pattern, phase0_deg=e0, phase1_deg=e1, dc=0.02 - 0.01j, noise=1e-3, seed=7)
    spec = process(d, zero_fill_points=M)
    rec = processing_record(spec)
    p0, p1 = rec["phase"]["phase0_deg"], rec["phase"]["phase1_deg"]
    x = fft_axis_hz(M, DWELL) * DWELL
    where = g > 0.01 * g.max()
    residual = (p0 + e0 + (p1 + e1) * x[where] + 180.0) % 360.0 - 180.0
    assert np.max(np.abs(residual)) < 1.0, (p0, p1)
    assert abs((p0 + e0 + 180.0) % 360.0 - 180.0) < 1.0
    assert _rms(spec.intensity, g) < 0.01
    # the axis: 0 ppm at the base frequency, each point at carrier + its offset
    np.testing.assert_allclose(spec.hz, OFFSET + fft_axis_hz(M, DWELL), rtol=0, atol=1e-6)
    assert spec.nu_ref_hz == pytest.approx(nu, rel=1e-12) and spec.field_tesla == pytest.approx(9.4, rel=1e-12)
    assert rec["dc_offset"]["mode"] == "tail"


def test_every_step_recorded_and_optional(tmp_path, pattern):
    d = _folder(tmp_path, pattern, noise=1e-3)
    spec = process(d, dc_offset="none", exponential_hz=30.0, gaussian_hz=20.0, baseline="polynomial",
                   baseline_degree=2)
    rec = json.loads(spec.metadata["processing"])
    for key in ("data", "format", "points", "dwell_us", "carrier_mhz", "dc_offset", "group_delay", "apodisation",
                "first_point", "zero_fill_points", "transform", "phase", "referencing", "baseline",
                "powderspin_version"):
        assert key in rec, key
    assert rec["dc_offset"] == {"mode": "none"}
    assert rec["phase"]["mode"] == "auto"
    manual = processing_record(process(d, phase="manual", phase0_deg=10.0, phase1_deg=-5.0))
    assert manual["phase"] == {"mode": "manual", "phase0_deg": 10.0, "phase1_deg": -5.0}
    assert rec["group_delay"]["points"] == GRPDLY and rec["group_delay"]["source"] == "acqus GRPDLY"
    assert rec["zero_fill_points"] == 8192                    # next power of two >= twice 4096
    assert rec["baseline"]["fitted"] and rec["baseline"]["regions_ppm"]
    assert rec["options"]["exponential_hz"] == 30.0
    for hi, lo in rec["baseline"]["regions_ppm"]:              # no region holds either site's centre
        assert not (lo <= 62.0 <= hi) and not (lo <= 4.0 <= hi)


def _fwhm(hz, y):
    above = hz[y >= 0.5 * y.max()]
    return above[-1] - above[0]


@pytest.mark.parametrize("kind", ["exponential_hz", "gaussian_hz"])
def test_apodisation_widths_in_hz(kind):
    """A line without decay acquires exactly the requested full width at half height: exp(-pi L t) <-> Lorentzian of
    FWHM L; exp(-(pi G t)^2 / (4 ln 2)) <-> Gaussian of FWHM G (standard Fourier pairs; common practice)."""
    n = 16384
    t = np.arange(n) * DWELL
    fid = np.exp(2j * np.pi * 2000.0 * t)
    raw = RawFID(fid, DWELL, 100e6, 100e6, "27Al", None, 0.0, "memory")
    spec = process(raw, **{kind: 200.0}, phase="none", dc_offset="none", zero_fill_points=4 * 65536)
    step = spec.hz[1] - spec.hz[0]
    assert _fwhm(spec.hz, spec.intensity) == pytest.approx(200.0, abs=2 * step)


def test_whole_and_half_echo(pattern):
    """An echo symmetric about a fractional top: the whole echo transforms to the absorption pattern without any
    phase (its two halves cancel the dispersion); the half echo from the top is phased automatically."""
    g, nu = pattern
    herm = np.fft.ifft(np.fft.ifftshift(g))                     # whole echo with its top at t = 0
    top = 1000.37
    spec_shift = np.fft.fft(herm) * np.exp(-2j * np.pi * np.fft.fftfreq(M) * top)
    echo = np.fft.ifft(spec_shift)[:N]                          # the top at point 1000.37
    raw = RawFID(echo, DWELL, nu + OFFSET, nu, "27Al", None, 0.0, "memory")
    whole = process(raw, echo="whole", phase="none", dc_offset="none", zero_fill_points=M)
    assert _rms(whole.intensity, g) < 1e-6
    rec = processing_record(whole)
    assert rec["echo"]["top_points"] == pytest.approx(top, abs=0.05)    # found from the largest magnitude
    given = process(raw, echo="whole", echo_top_points=top, phase="none", dc_offset="none", zero_fill_points=M)
    assert _rms(given.intensity, g) < 1e-6
    half = process(raw, echo="half", echo_top_points=top, dc_offset="none", zero_fill_points=M)
    # cutting at a point 0.37 dwell times before the top (and halving it) is an approximation: 1 % RMS
    assert _rms(half.intensity, g) < 0.01


def test_bad_options_and_rows(tmp_path, pattern):
    d = _folder(tmp_path, pattern)
    with pytest.raises(ProcessingError, match="zero_fill_points = 100 is fewer than the 4096 points"):
        process(d, zero_fill_points=100)
    with pytest.raises(ProcessingError, match=r"exponential_hz = -1\.0 must be in \[0, 1000000\] Hz"):
        ProcessingOptions(exponential_hz=-1.0)
    with pytest.raises(ProcessingError, match="unknown key 'lb'"):
        ProcessingOptions.from_table({"lb": 3.0})
    with pytest.raises(ProcessingError, match="needs proton_mhz"):
        ProcessingOptions(referencing="unified")
    raw = read_raw(d)
    with pytest.raises(Exception, match="only row 0 exists"):
        process(raw, row=2)
