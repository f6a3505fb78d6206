"""Remake the small data files of the fit command's bad-input cases (cases.toml).

    python tests/bad_inputs/fit/make_files.py

line.csv: a synthetic 31P line (Gaussian shape, invented numbers) at 9.4 T from
+20 to -20 ppm; far.csv: the same shape on an axis from 620 to 580 ppm, far
from any line of the models here.
"""

from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
NU_REF_HZ = 162015384.535488  # 31P at 9.4 T (the nuclide table's value; the files state it)


def write(name, ppm, y):
    lines = ["# SYNTHETIC test spectrum (tests/bad_inputs/fit/make_files.py); not a measurement",
             "# nucleus: 31P", "# field_tesla: 9.4", f"# nu_ref_hz: {NU_REF_HZ}", "ppm,intensity"]
    lines += [f"{a:.6f},{b:.6e}" for a, b in zip(ppm, y)]
    (HERE / name).write_text("\n".join(lines) + "\n", encoding="utf-8")


ppm = np.linspace(20.0, -20.0, 64)
rng = np.random.default_rng(7)
y = np.exp(-0.5 * ((ppm - 2.0) / 1.5) ** 2) + rng.normal(0.0, 0.01, ppm.size)
write("line.csv", ppm, y)
write("far.csv", ppm + 600.0, y)
