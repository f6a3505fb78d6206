"""SYNTHETIC raw data for the processing tests: powderspin's own spectra turned into FIDs (not measurements).

The model of the acquisition (an ideal linear-phase digital filter):

- the spectrum ``g`` (real, absorptive) is simulated by powderspin on the
  points of the discrete transform, ``f_k = (k - M/2) / (M dw)`` from the
  carrier;
- its inverse transform is the Hermitian ("whole echo") signal; the FID is its
  causal half (zero before t = 0); with a digital filter (a group delay) the
  value at t = 0 is half the signal's (the band-limited mid-point of the
  jump), so that the real part of the FID's transform is ``g / 2`` exactly;
  without one the receiver samples the full s(0) (and processing halves it);
- a phase error ``exp(i (e0 + e1 x))`` (x = f / SW) and the filter's group delay
  ``exp(-2 pi i f G dw)`` are applied to the transform; the stored FID is the
  first N points of its inverse (the points before the delayed start hold the
  band-limited ringing of the jump, as a real filter's output does);
- a complex DC offset and seeded complex Gaussian noise are added; with
  ``noise_first=True`` the noise enters before the phase error and the filter
  (as receiver noise passes the same filter and phase as the signal), so that
  two FIDs with the same seed and different phase errors hold the same noise
  once each is corrected (a paired comparison of processing).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

import powderspin as ps
from powderspin.engine.lineshape import make_axis


def fft_axis_hz(m: int, dwell_s: float) -> np.ndarray:
    """Offsets of the transform's points from the carrier (ascending)."""
    return (np.arange(m) - m // 2) / (m * dwell_s)


def simulate_on_fft_grid(nucleus, field, sites, m, dwell_s, carrier_offset_hz, **measurement):
    """powderspin's spectrum on the points of an m-point transform about the carrier; (g, nu_ref)."""
    nu_ref = ps.get_nuclide(nucleus).larmor_hz(field)
    sw = 1.0 / dwell_s
    step = sw / m
    first = carrier_offset_hz - sw / 2
    last = first + (m - 1) * step
    center_ppm = 0.5 * (first + last) / nu_ref * 1e6
    width_ppm = step * m / nu_ref * 1e6
    model = ps.make_model(nucleus, {"field_tesla": field, **measurement}, sites)
    axis = make_axis(m, nu_ref, center_ppm, width_ppm)
    spec = ps.simulate(model, axis=axis)
    expected = carrier_offset_hz + fft_axis_hz(m, dwell_s)
    assert np.allclose(spec.hz, expected, atol=1e-6 * step), "the simulated axis is not the transform's grid"
    return np.asarray(spec.intensity, dtype=float), nu_ref


def fid_from_spectrum(g, dwell_s, n_keep, *, group_delay=0.0, phase0_deg=0.0, phase1_deg=0.0,
                      dc=0.0, noise=0.0, seed=0, noise_first=False):
    """The stored FID of the absorptive spectrum g (module notes); dc and noise relative to the FID's largest point."""
    m = g.size
    herm = np.fft.ifft(np.fft.ifftshift(g))
    causal = herm.copy()
    causal[m // 2:] = 0.0
    if group_delay:
        causal[0] *= 0.5        # a digital filter samples the band-limited jump at its mid-point
    rng = np.random.default_rng(seed)
    top = np.max(np.abs(causal))
    if noise_first and noise:
        causal[:n_keep] += top * noise * (rng.normal(size=n_keep) + 1j * rng.normal(size=n_keep))
    spec = np.fft.fftshift(np.fft.fft(causal))
    x = (np.arange(m) - m // 2) / m
    f = x / dwell_s
    spec = spec * np.exp(1j * np.deg2rad(phase0_deg + phase1_deg * x)) * np.exp(-2j * np.pi * f * group_delay * dwell_s)
    fid = np.fft.ifft(np.fft.ifftshift(spec))[:n_keep]
    if noise_first:
        return fid + top * dc
    top = np.max(np.abs(fid))
    return fid + top * (dc + noise * (rng.normal(size=n_keep) + 1j * rng.normal(size=n_keep)))


def write_bruker(folder, fid, *, dwell_s, sfo1_mhz, bf1_mhz, nucleus, group_delay=None, decim=None, dspfvs=None,
                 integer=True, extra=None, name="fid"):
    """Write a Bruker-format experiment folder through nmrglue's writer."""
    import nmrglue as ng

    fid = np.atleast_2d(fid) if name == "ser" else np.asarray(fid)
    npts = fid.shape[-1]
    acqus = {"TD": 2 * npts, "SW_h": 1.0 / dwell_s, "SFO1": sfo1_mhz, "BF1": bf1_mhz,
             "O1": (sfo1_mhz - bf1_mhz) * 1e6, "NUC1": nucleus, "DTYPA": 0 if integer else 2, "BYTORDA": 0,
             "AQ_mod": 3}
    if group_delay is not None:
        acqus["GRPDLY"] = group_delay
    if decim is not None:
        acqus["DECIM"] = decim
    if dspfvs is not None:
        acqus["DSPFVS"] = dspfvs
    acqus.update(extra or {})
    acqus["_coreheader"] = ["##TITLE= SYNTHETIC data made by powderspin's tests (not a measurement)",
                            "##JCAMPDX= 5.0"]
    acqus["_comments"] = ["$$ SYNTHETIC: an invented scenario"]
    dic = {"acqus": acqus}
    data = fid
    if integer:
        data = np.round(fid / np.max(np.abs(fid)) * 2.0e8)
        data = data.real.astype(np.int64) + 1j * data.imag.astype(np.int64)
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    if name == "ser":
        dic["acqu2s"] = {"TD": fid.shape[0], "_coreheader": ["##TITLE= SYNTHETIC"], "_comments": []}
        ng.bruker.write(str(folder), dic, data, bin_file="ser", overwrite=True, write_prog=False)
    else:
        ng.bruker.write(str(folder), dic, data, overwrite=True, write_prog=False)
    return folder
