"""Referencing at 9.4 T and 14.1 T for 27Al, 23Na and 17O: the IUPAC unified scale from the published Xi values
and the secondary-reference route (SYNTHETIC FIDs of single lines at known shifts)."""

from __future__ import annotations

import numpy as np
import pytest

from powderspin.io.raw import RawFID
from powderspin.processing import process
from powderspin.processing.referencing import secondary_reference_hz, tallest_line_hz, unified_reference_hz
from tests.processing.synthetic import write_bruker

# Xi (%) as published by R. K. Harris, E. D. Becker, S. M. Cabral de Menezes, R. Goodfellow, P. Granger,
# Pure Appl. Chem. 73 (2001) 1795, Table 4 (values from memory; the 2008 update, Pure Appl. Chem. 80 (2008) 59,
# leaves them unchanged): 27Al in Al(NO3)3/D2O, 23Na in NaCl/D2O, 17O in D2O.
PUBLISHED_XI = {"27Al": 26.056859, "23Na": 26.451900, "17O": 13.556457}
# 1H frequencies of tetramethylsilane on two magnets, as a spectrometer would state them (invented, typical of
# "400" and "600 MHz" instruments)
PROTON_MHZ = {9.4: 400.13, 14.1: 600.13}
DWELL = 2e-5


def _line_fid(offset_hz, n=4096, width_hz=20.0):
    t = np.arange(n) * DWELL
    return np.exp(2j * np.pi * offset_hz * t - np.pi * width_hz * t)


@pytest.mark.parametrize("field", [9.4, 14.1])
@pytest.mark.parametrize("nucleus", ["27Al", "23Na", "17O"])
def test_unified_and_secondary_scales(nucleus, field, tmp_path):
    proton_hz = PROTON_MHZ[field] * 1e6
    nu_ref = PUBLISHED_XI[nucleus] / 100.0 * proton_hz          # the definition of the unified scale (Harris 2001)
    assert unified_reference_hz(nucleus, proton_hz) == pytest.approx(nu_ref, rel=1e-12)
    sample_ppm = 37.25                                          # a line of the sample, at a known shift
    carrier = nu_ref * (1 + 20e-6)                              # the transmitter 20 ppm above 0 ppm
    line_hz = nu_ref * (1 + 1e-6 * sample_ppm)
    raw = RawFID(_line_fid(line_hz - carrier), DWELL, carrier, carrier, nucleus, None, 0.0, "memory")
    unified = process(raw, referencing="unified", proton_mhz=PROTON_MHZ[field], zero_fill_points=32768)
    found = tallest_line_hz(unified.hz, unified.intensity) / unified.nu_ref_hz * 1e6
    assert found == pytest.approx(sample_ppm, abs=1e-3)
    # secondary route: a reference compound's line at delta_ref, observed at nu_ref (1 + 1e-6 delta_ref)
    # (delta = (nu - nu_ref) / nu_ref, Harris 2001); the same scale to 0.01 ppm at every point
    delta_ref = 7.21
    observed_hz = nu_ref * (1 + 1e-6 * delta_ref)
    assert secondary_reference_hz(observed_hz, delta_ref) == pytest.approx(nu_ref, rel=1e-14)
    secondary = process(raw, referencing="secondary", reference_mhz=observed_hz / 1e6, reference_shift_ppm=delta_ref,
                        zero_fill_points=32768)
    assert np.max(np.abs(secondary.ppm - unified.ppm)) < 0.01
    # the reference measured as data of its own (its tallest line), in a spectrometer folder
    ref_dir = write_bruker(tmp_path / "ref", _line_fid(observed_hz - carrier), dwell_s=DWELL,
                           sfo1_mhz=carrier / 1e6, bf1_mhz=carrier / 1e6, nucleus=nucleus, group_delay=0.0)
    from_data = process(raw, referencing="secondary", reference_shift_ppm=delta_ref, reference=ref_dir,
                        zero_fill_points=32768)
    assert np.max(np.abs(from_data.ppm - unified.ppm)) < 0.01
    # the spectrometer route: 0 ppm at the stated base frequency
    spectrometer = process(raw, zero_fill_points=32768)
    assert spectrometer.nu_ref_hz == carrier
