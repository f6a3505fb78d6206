"""Make the SYNTHETIC variable-temperature 23Na series of the series example (fixed seed).

An invented sodium-ion cathode material with two sodium sites, measured at 40 temperatures from 200 K to 395 K
(9.4 T, fast MAS, central transition).  Invented trends: the quadrupolar coupling of site NaA falls linearly from
2.6 MHz to 1.6 MHz and its share of the sodium from 0.70 to 0.40; site NaB stays at C_Q = 1.1 MHz, -15 ppm.
Each spectrum is simulated with powderspin and Gaussian noise (seeded) is added.

    python examples/make_vt_sodium_series.py [OUT_DIR]     # default: examples/vt_sodium/

writes OUT_DIR/na23_TTTK.csv (ppm and intensity, with the nucleus and field in comment lines) and
OUT_DIR/manifest.csv (file, temperature_k; the truth in further columns true_cq_mhz, true_fraction).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

import powderspin as ps

SEED = 20261205
TEMPERATURES_K = np.arange(200.0, 400.0, 5.0)  # 40 spectra
NOISE = 0.004  # per point, relative to the tallest point of the first spectrum (roughly SNR 250)


def truth(t_k: float) -> tuple[float, float]:
    """The invented C_Q (MHz) and share of site NaA at temperature t_k (K)."""
    u = (t_k - 200.0) / 195.0
    return 2.6 - 1.0 * u, 0.70 - 0.30 * u


def make(out: Path) -> None:
    out.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(SEED)
    meas = {"field_tesla": 9.4, "spinning_hz": "inf", "transitions": "central", "points": 512,
            "center_ppm": -10.0, "width_ppm": 160.0, "lorentz_hz": 150.0}
    rows = ["# SYNTHETIC: made by examples/make_vt_sodium_series.py (invented material, fixed seed)",
            "file,temperature_k,true_cq_mhz,true_fraction"]
    scale = None
    for t in TEMPERATURES_K:
        cq, frac = truth(float(t))
        model = ps.make_model("23Na", meas, [
            {"label": "NaA", "weight": frac, "shift_ppm": 2.0, "cq_mhz": cq, "eta_q": 0.3},
            {"label": "NaB", "weight": 1.0 - frac, "shift_ppm": -15.0, "cq_mhz": 1.1, "eta_q": 0.0}])
        s = ps.simulate(model)
        if scale is None:
            scale = float(np.max(s.intensity))
        y = s.intensity / scale + rng.normal(0.0, NOISE, s.intensity.size)
        name = f"na23_{int(t):03d}K.csv"
        lines = ["# SYNTHETIC 23Na MAS spectrum (invented sodium-ion cathode material)", "# nucleus: 23Na",
                 "# field_tesla: 9.4", f"# temperature_k: {t:g}", "ppm,intensity"]
        lines += [f"{p:.7g},{v:.6g}" for p, v in zip(s.ppm, y)]
        (out / name).write_text("\n".join(lines) + "\n")
        rows.append(f"{name},{t:g},{cq:.4f},{frac:.4f}")
    (out / "manifest.csv").write_text("\n".join(rows) + "\n")
    print(f"wrote {len(TEMPERATURES_K)} SYNTHETIC spectra and manifest.csv to {out}")


if __name__ == "__main__":
    make(Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).resolve().parent / "vt_sodium")
