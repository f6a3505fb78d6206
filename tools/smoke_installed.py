"""Smoke test of an installed (non-editable) powderspin, run from outside the checkout.

Usage (what .ci/run does, from a temporary folder with a fresh virtual
environment that has the built wheel installed)::

    /tmp/x/venv/bin/python -I smoke_installed.py /path/to/checkout

Checks that powderspin is imported from that environment's site-packages,
not from the checkout and not as an editable install, that the Lebedev rules
came with the package data, and that a static 31P shift-anisotropy powder
pattern on a Lebedev set (histogram binning: Lebedev sets have no triangles)
integrates to the site weight, 1.  Exits non-zero with a one-line reason on
any failure.
"""

from __future__ import annotations

import json
import sys
from importlib import metadata
from pathlib import Path


def fail(reason: str) -> None:
    sys.exit(f"smoke test failed: {reason}")


def main(argv: list[str]) -> None:
    if len(argv) != 1:
        fail("usage: smoke_installed.py CHECKOUT_DIR")
    checkout = Path(argv[0]).resolve()

    import powderspin as ps
    from powderspin.physics.orientations import lebedev_degrees

    where = Path(ps.__file__).resolve()
    if checkout == where or checkout in where.parents:
        fail(f"powderspin was imported from the checkout ({where})")
    if "site-packages" not in where.parts:
        fail(f"powderspin was not imported from a site-packages folder ({where})")
    direct_url = metadata.distribution("powderspin").read_text("direct_url.json")
    if direct_url and json.loads(direct_url).get("dir_info", {}).get("editable"):
        fail("powderspin is installed in editable mode")

    degrees = lebedev_degrees()
    if 41 not in degrees:
        fail(f"the Lebedev rules are missing from the installed package (found {degrees})")

    model = ps.make_model(
        "31P",
        {"field_tesla": 9.4, "spinning_hz": 0, "points": 2048,
         "orientations": "lebedev-41", "binning": "histogram", "gauss_hz": 300.0},
        [{"label": "P1", "shift_ppm": 0.0, "span_ppm": 150.0, "skew": 0.4}],
    )
    spectrum = ps.simulate(model)
    area = spectrum.area()
    # Each site integrates to its weight (here 1), less what falls off the
    # automatically chosen axis; a Gaussian (unlike a Lorentzian) leaves no
    # tail worth counting there.  Measured in a checkout: 1 - 3e-16.
    if abs(area - 1.0) > 1e-6:
        fail(f"area of the 31P pattern is {area!r}, expected 1 within 1e-6")
    print(f"smoke test passed: powderspin {metadata.version('powderspin')} from {where.parent}, "
          f"lebedev-41 31P pattern area {area:.6f}")


if __name__ == "__main__":
    main(sys.argv[1:])
