"""Make the SYNTHETIC 27Al MAS spectrum of the glass fit example (an invented scenario).

An invented sodium aluminosilicate glass: four-coordinated aluminium with a
Czjzek distribution of EFG tensors and a Gaussian distribution of isotropic
shifts, plus a small five-coordinated fraction (all numbers invented for
illustration), "recorded" at 14.1 T with fast MAS (the centre band, i.e. the
infinite-rate limit).  The spectrum is simulated by powderspin on a finer
kernel grid than a fit uses (half the edge move, twice the nodes), and
Gaussian noise from a fixed seed is added; it is not a measurement.

    python examples/make_glass_data.py          # rewrites examples/glass_27al_14p1T.csv
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

import powderspin as ps
from powderspin.disorder.site import DistributedSite
from powderspin.disorder.store import KernelStore
from powderspin.engine.lineshape import broaden, make_axis

HERE = Path(__file__).resolve().parent
SEED = 20240612
FIELD = 14.1
#: the invented truth
SITES = [
    {"label": "AlO4", "weight": 0.9, "shift_ppm": 63.0, "czjzek_sigma_mhz": 2.3, "shift_fwhm_ppm": 11.0},
    {"label": "AlO5", "weight": 0.1, "shift_ppm": 33.0, "czjzek_sigma_mhz": 2.6, "shift_fwhm_ppm": 11.0},
]
POINTS = 512
PPM_HI, PPM_LO = 150.0, -80.0
#: noise standard deviation as a fraction of the largest point
NOISE = 0.008
SCALE = 250.0


def spectrum() -> tuple[np.ndarray, np.ndarray, float]:
    """The noise-free spectrum (ppm, intensity) on the data axis, from a refined kernel grid."""
    meas = {"field_tesla": FIELD, "spinning_hz": "inf", "points": POINTS}
    model = ps.make_model("27Al", meas, SITES)
    axis = make_axis(POINTS, model.larmor_hz, center_ppm=0.5 * (PPM_HI + PPM_LO),
                     width_ppm=(PPM_HI - PPM_LO) * POINTS / (POINTS - 1))
    total = np.zeros(POINTS)
    store = KernelStore(None)
    for k, site in enumerate(model.sites):
        ds = DistributedSite(model, k, 0)
        ks = ds.kernels(axis, store, fraction=0.25, node_limits=(48, 320, 33))
        y = ks.fractions(ks.grid.weights(ds.dist), axis, site.shift.iso_ppm * model.larmor_hz * 1e-6)
        y = broaden(y, axis.dx_hz, 0.0, site.shift_fwhm_ppm * model.larmor_hz * 1e-6)
        total += site.weight * y / axis.dx_ppm
    return axis.ppm, total, model.larmor_hz


def main(out: Path = HERE) -> Path:
    ppm, y, nu_ref = spectrum()
    rng = np.random.default_rng(SEED)
    y = SCALE * y
    y = y + rng.normal(0.0, NOISE * y.max(), y.size)
    lines = [
        "# SYNTHETIC 27Al MAS spectrum of an invented sodium aluminosilicate glass: made by powderspin",
        f"# (examples/make_glass_data.py, noise seed {SEED}); not a measurement",
        "# nucleus: 27Al",
        f"# field_tesla: {FIELD}",
        f"# nu_ref_hz: {nu_ref!r}",
        "ppm,intensity",
    ]
    lines += [f"{a:.10f},{b:.8e}" for a, b in zip(ppm[::-1], y[::-1])]
    p = out / "glass_27al_14p1T.csv"
    p.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return p


if __name__ == "__main__":
    print("wrote", main(Path(sys.argv[1]) if len(sys.argv) > 1 else HERE))
