"""Make the SYNTHETIC raw 27Al data folder of the processing example (an invented scenario, not a measurement).

An invented aluminium site in a calcined zeolite-like solid, "recorded" at 9.4 T under fast MAS
(infinite-rate limit) as a spectrometer would store it: a folder ``raw_27al_9p4T/1`` holding ``acqus`` and a
``fid`` of 32-bit integers, written through nmrglue's writer for that format.  The spectrum is simulated by
powderspin, turned into the FID an ideal digital filter would give (causal, delayed by a fractional group delay),
given a receiver phase, a small timing error (first-order phase), a DC offset and Gaussian noise from a fixed
seed.

    python examples/make_raw_data.py [OUTPUT_FOLDER]     # default: examples/

``powderspin process examples/raw_27al_9p4T/1 -o spectrum.csv`` turns it into a spectrum, and
``powderspin fit examples/raw_fit.toml -o result.toml`` fits it.
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

import numpy as np

import powderspin as ps
from powderspin.engine.lineshape import make_axis

HERE = Path(__file__).resolve().parent
SEED = 20261205
FIELD = 9.4
DWELL = 1e-5            # 100 kHz spectral width
M, N = 4096, 2048       # transform grid, recorded points
OFFSET = -800.0         # transmitter 800 Hz below the base frequency
GRPDLY = 71.33          # digital-filter delay (points)
SITE = {"label": "AlO4", "shift_ppm": 58.0, "cq_mhz": 4.2, "eta_q": 0.45}
MEAS = {"field_tesla": FIELD, "spinning_hz": "inf", "lorentz_hz": 200.0, "gauss_hz": 150.0}


def main(out: Path = HERE) -> Path:
    import nmrglue as ng

    nu = ps.get_nuclide("27Al").larmor_hz(FIELD)
    step = 1.0 / (M * DWELL)
    first = OFFSET - 0.5 / DWELL
    center_ppm = (first + 0.5 * (M - 1) * step) / nu * 1e6
    axis = make_axis(M, nu, center_ppm, step * M / nu * 1e6)
    g = ps.simulate(ps.make_model("27Al", MEAS, [SITE]), axis=axis).intensity
    herm = np.fft.ifft(np.fft.ifftshift(g))
    causal = herm.copy()
    causal[M // 2:] = 0.0
    causal[0] *= 0.5
    x = (np.arange(M) - M // 2) / M
    spec = np.fft.fftshift(np.fft.fft(causal)) * np.exp(1j * np.deg2rad(-65.0 + 40.0 * x)) \
        * np.exp(-2j * np.pi * x * GRPDLY)
    fid = np.fft.ifft(np.fft.ifftshift(spec))[:N]
    top = np.max(np.abs(fid))
    rng = np.random.default_rng(SEED)
    fid = fid + top * (0.03 + 0.02j + 4e-3 * (rng.normal(size=N) + 1j * rng.normal(size=N)))
    data = np.round(fid / np.max(np.abs(fid)) * 2.0e8)
    acqus = {"_coreheader": ["##TITLE= SYNTHETIC 27Al data made by examples/make_raw_data.py (not a measurement)",
                             "##JCAMPDX= 5.0"],
             "_comments": ["$$ SYNTHETIC: an invented scenario"],
             "TD": 2 * N, "SW_h": 1.0 / DWELL, "SFO1": (nu + OFFSET) / 1e6, "BF1": nu / 1e6, "O1": OFFSET,
             "NUC1": "27Al", "DTYPA": 0, "BYTORDA": 0, "GRPDLY": GRPDLY}
    folder = out / "raw_27al_9p4T" / "1"
    if folder.exists():
        shutil.rmtree(folder)
    folder.mkdir(parents=True)
    ng.bruker.write(str(folder), {"acqus": acqus}, data, overwrite=True, write_prog=False)
    (folder.parent / "README.txt").write_text(
        "SYNTHETIC raw data made by examples/make_raw_data.py (an invented scenario, not a measurement).\n")
    return folder


if __name__ == "__main__":
    print(main(Path(sys.argv[1]) if len(sys.argv) > 1 else HERE))
