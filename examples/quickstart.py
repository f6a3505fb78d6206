"""Build a model in Python, simulate it and save the arrays and a figure.

Run:  python examples/quickstart.py OUTDIR
"""

import sys
from pathlib import Path

from matplotlib.figure import Figure

import powderspin as ps

out = Path(sys.argv[1] if len(sys.argv) > 1 else "quickstart-output")
out.mkdir(parents=True, exist_ok=True)

model = ps.make_model(
    "27Al",
    {"field_tesla": 14.1, "spinning_hz": "inf", "points": 2048},
    [{"label": "AlO6", "shift_ppm": 8.0, "cq_mhz": 5.5, "eta_q": 0.6}],
)
spectrum = ps.simulate(model)
print(f"centre of gravity {spectrum.first_moment_ppm():.2f} ppm, area {spectrum.area():.4f}")
fig = Figure()  # matplotlib without pyplot: no backend to choose
ps.plot_spectrum(spectrum, fig.add_subplot())
fig.savefig(out / "quickstart.png")
ps.write_spectrum(spectrum, out / "quickstart.csv", force=True)
print(f"wrote {out / 'quickstart.png'} and {out / 'quickstart.csv'}")
