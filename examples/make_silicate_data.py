"""Make the SYNTHETIC 23Na spectra of the sodium silicate 2D fit example (an invented scenario).

An invented sodium silicate with three Na sites (all numbers invented for
illustration), "recorded" at 11.7 T as a 3QMAS spectrum at infinite spinning
rate and a 1D MAS spectrum at 20 kHz.  Both are simulated by powderspin and
Gaussian noise from a fixed seed is added; they are not measurements.

    python examples/make_silicate_data.py [FOLDER]    # default: this folder

writes silicate_23na_3qmas.npz (f1_ppm, f2_ppm, intensity, metadata; F1 on
powderspin's sheared isotropic scale, stated in the metadata) and
silicate_23na_mas.csv.  examples/silicate_fit.toml fits both together.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np

import powderspin as ps
from powderspin.io.results import write_spectrum

HERE = Path(__file__).resolve().parent
SEED = 20261205
#: the invented truth
SITES = [
    {"label": "Na1", "weight": 1.0, "shift_ppm": 12.0, "cq_mhz": 1.8, "eta_q": 0.3},
    {"label": "Na2", "weight": 1.0, "shift_ppm": 4.0, "cq_mhz": 2.6, "eta_q": 0.7},
    {"label": "Na3", "weight": 0.6, "shift_ppm": -2.0, "cq_mhz": 3.3, "eta_q": 0.15},
]
TWO_D = {"field_tesla": 11.7, "spinning_hz": "inf", "experiment": "mqmas", "mq_order": 3, "points": 256,
         "f1_points": 96, "center_ppm": 0.0, "width_ppm": 60.0, "f1_center_ppm": 10.0, "f1_width_ppm": 30.0,
         "gauss_hz": 200.0, "f1_gauss_hz": 150.0, "orientations": 48}
ONE_D = {"field_tesla": 11.7, "spinning_hz": 20000.0, "points": 512, "center_ppm": 0.0, "width_ppm": 80.0,
         "gauss_hz": 200.0, "orientations": 48}
#: noise standard deviation as a fraction of the largest point
NOISE = 0.01


def main(folder: Path) -> None:
    rng = np.random.default_rng(SEED)
    s2 = ps.simulate(ps.make_model("23Na", TWO_D, SITES))
    y2 = s2.intensity + rng.normal(0.0, NOISE * s2.intensity.max(), s2.shape)
    meta = {k: s2.metadata[k] for k in ("nucleus", "field_tesla", "nu_ref_hz", "experiment", "mq_order",
                                        "f1_convention")}
    meta["note"] = "SYNTHETIC data of an invented sodium silicate (examples/make_silicate_data.py)"
    np.savez(folder / "silicate_23na_3qmas.npz", f1_ppm=s2.f1_ppm, f2_ppm=s2.f2_ppm, intensity=y2,
             metadata=np.array(json.dumps(meta)))
    s1 = ps.simulate(ps.make_model("23Na", ONE_D, SITES))
    y1 = s1.intensity + rng.normal(0.0, NOISE * s1.intensity.max(), s1.intensity.shape)
    noisy = ps.Spectrum(s1.hz, s1.ppm, y1, ("data",), y1[None, :],
                        {"nucleus": "23Na", "field_tesla": 11.7, "nu_ref_hz": s1.metadata["nu_ref_hz"],
                         "note": "SYNTHETIC data of an invented sodium silicate"})
    write_spectrum(noisy, folder / "silicate_23na_mas.csv", force=True)


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else HERE)
