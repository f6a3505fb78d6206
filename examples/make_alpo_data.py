"""Make the SYNTHETIC 27Al MAS spectra of the aluminophosphate fit example (an invented scenario).

A calcined aluminophosphate with four-, five- and six-coordinated aluminium
(all numbers invented for illustration), "recorded" at 9.4 T and 14.1 T under
14 kHz MAS.  The spectra are simulated by powderspin with a fine orientation
set and Gaussian noise from a fixed seed is added; they are not measurements.

    python examples/make_alpo_data.py          # rewrites the CSV files

writes examples/alpo_27al_9p4T.csv and examples/alpo_27al_14p1T.csv and the
same files under powderspin/data/ (the demo fits those).
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

import numpy as np

import powderspin as ps

HERE = Path(__file__).resolve().parent
PACKAGE_DATA = HERE.parent / "powderspin" / "data"
SEED = 20240611
#: the invented truth
SITES = [
    {"label": "AlO4", "weight": 0.58, "shift_ppm": 39.5, "cq_mhz": 2.9, "eta_q": 0.55},
    {"label": "AlO5", "weight": 0.17, "shift_ppm": 14.0, "cq_mhz": 5.3, "eta_q": 0.65},
    {"label": "AlO6", "weight": 0.25, "shift_ppm": -11.5, "cq_mhz": 3.6, "eta_q": 0.35},
]
FIELDS = [(9.4, "alpo_27al_9p4T.csv", 250.0, 3.0), (14.1, "alpo_27al_14p1T.csv", 300.0, 4.0)]
POINTS = 512
PPM_HI, PPM_LO = 120.0, -90.0
#: noise standard deviation as a fraction of the largest point
NOISE = 0.006


def make(field: float, gauss_hz: float, scale: float, rng) -> tuple[np.ndarray, np.ndarray, float]:
    meas = {"field_tesla": field, "spinning_hz": 14000.0, "gauss_hz": gauss_hz, "orientations": "fine",
            "points": POINTS, "center_ppm": 0.5 * (PPM_HI + PPM_LO),
            "width_ppm": (PPM_HI - PPM_LO) * POINTS / (POINTS - 1)}
    spec = ps.simulate(ps.make_model("27Al", meas, SITES))
    y = scale * spec.intensity
    y = y + rng.normal(0.0, NOISE * y.max(), y.size)
    return spec.ppm, y, spec.nu_ref_hz


def main(out: Path = HERE) -> list[Path]:
    rng = np.random.default_rng(SEED)
    written = []
    for field, name, gauss, scale in FIELDS:
        ppm, y, nu_ref = make(field, gauss, scale, rng)
        lines = [
            "# SYNTHETIC 27Al MAS spectrum of an invented calcined aluminophosphate: made by powderspin",
            f"# (examples/make_alpo_data.py, noise seed {SEED}); not a measurement",
            "# nucleus: 27Al",
            f"# field_tesla: {field}",
            f"# nu_ref_hz: {nu_ref!r}",
            "# spinning_hz: 14000",
            "ppm,intensity",
        ]
        lines += [f"{a:.10f},{b:.8e}" for a, b in zip(ppm[::-1], y[::-1])]
        p = out / name
        p.write_text("\n".join(lines) + "\n", encoding="utf-8")
        written.append(p)
    return written


if __name__ == "__main__":
    files = main(Path(sys.argv[1]) if len(sys.argv) > 1 else HERE)
    if len(sys.argv) == 1:
        for f in files:
            shutil.copyfile(f, PACKAGE_DATA / f.name)
    print("wrote", ", ".join(str(f) for f in files))
