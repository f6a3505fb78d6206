"""Command line: a thin layer over the Python API.

    powderspin simulate MODEL.toml -o OUT.csv [--plot OUT.png] [--sidebands] [--force]
    powderspin nuclide 27Al [--field 14.1]
    powderspin demo [--out DIR] [--force]
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

__all__ = ["main"]

SPINNING_CAUTION = (
    "caution: simulated spinning rates say nothing about what a rotor can take; never exceed the "
    "manufacturer's rated spinning rate for your rotor, cap and probe (rotor failure can injure), "
    "and follow your laboratory's rules."
)


def _demo_model_path() -> Path:
    return Path(__file__).resolve().parent / "data" / "demo.toml"


def _cmd_simulate(args) -> int:
    from .model import load_model
    from .simulation import simulate
    from .spectrum import write_text_safely

    model = load_model(args.model)
    out = Path(args.output)
    plot = Path(args.plot) if args.plot else None
    for p in [out] + ([plot] if plot else []):
        if p.exists() and p.resolve() == Path(args.model).resolve():
            raise SystemExit(f"error: output {str(p)!r} is the model file; choose another name")
        if p.exists() and not args.force:
            raise SystemExit(f"error: output {str(p)!r} exists; pass --force to overwrite it")
    spec = simulate(model)
    for note in spec.metadata.get("notes", []):
        print(f"note: {note}", file=sys.stderr)
    if model.measurement.spinning_hz > 0 and math.isfinite(model.measurement.spinning_hz):
        print(SPINNING_CAUTION, file=sys.stderr)
    write_text_safely(out, spec.csv_text(), force=args.force, protect=[args.model])
    print(f"wrote {out} ({spec.hz.size} points, {len(spec.site_labels)} site(s))")
    if plot:
        from .plotting import save_plot

        save_plot(spec, plot, force=args.force)
        print(f"wrote {plot}")
    if args.sidebands:
        print(spec.sideband_table(), end="")
    return 0


def _cmd_nuclide(args) -> int:
    from .nuclides import get_nuclide, nuclide_summary

    print(nuclide_summary(get_nuclide(args.name), args.field))
    return 0


def _cmd_demo(args) -> int:
    from .model import load_model
    from .plotting import save_plot
    from .simulation import simulate
    from .spectrum import write_text_safely

    outdir = Path(args.out)
    outdir.mkdir(parents=True, exist_ok=True)
    csv, png = outdir / "demo_spectrum.csv", outdir / "demo_spectrum.png"
    for p in (csv, png):
        if p.exists() and not args.force:
            raise SystemExit(f"error: output {str(p)!r} exists; pass --force to overwrite it")
    model = load_model(_demo_model_path())
    print("note: the first run compiles the numerical kernels (up to a minute); later runs reuse them",
          file=sys.stderr)
    print(f"demo: {model.nucleus.name}, {len(model.sites)} sites, {model.measurement.field_tesla} T, "
          f"{model.measurement.spinning_hz / 1e3:g} kHz MAS (model: {_demo_model_path()})")
    spec = simulate(model)
    write_text_safely(csv, spec.csv_text(), force=args.force)
    save_plot(spec, png, force=args.force)
    print(spec.sideband_table(), end="")
    print(f"wrote {csv} and {png}")
    print(SPINNING_CAUTION, file=sys.stderr)
    return 0


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="powderspin", description="Solid-state NMR powder patterns.")
    sub = p.add_subparsers(dest="command", required=True)

    s = sub.add_parser("simulate", help="simulate the spectrum of a TOML model file")
    s.add_argument("model", help="model file (TOML)")
    s.add_argument("-o", "--output", required=True, help="CSV file to write (ppm,hz,intensity)")
    s.add_argument("--plot", help="also write a figure (PNG)")
    s.add_argument("--sidebands", action="store_true", help="print the sideband table")
    s.add_argument("--force", action="store_true", help="overwrite existing output files")
    s.set_defaults(func=_cmd_simulate)

    n = sub.add_parser("nuclide", help="print the NMR data of a nucleus")
    n.add_argument("name", help="nucleus, e.g. 27Al")
    n.add_argument("--field", type=float, default=14.1, help="magnetic field in tesla (default 14.1)")
    n.set_defaults(func=_cmd_nuclide)

    d = sub.add_parser("demo", help="simulate the bundled example and write a CSV and a PNG")
    d.add_argument("--out", default="powderspin-demo", help="output folder (default ./powderspin-demo)")
    d.add_argument("--force", action="store_true", help="overwrite existing output files")
    d.set_defaults(func=_cmd_demo)
    return p


def main(argv=None) -> int:
    """Run the ``powderspin`` command line: ``simulate``, ``nuclide`` or ``demo``.

    Model and input errors (ValueError) and refused overwrites are printed as
    one ``error: ...`` line on standard error, with exit status 2.

    Parameters
    ----------
    argv : list of str, optional
        Arguments after the program name; ``sys.argv[1:]`` when None.  Fields
        are given in tesla (``--field``), model files use Hz, ppm and degrees.

    Returns
    -------
    int
        Exit status: 0 on success, 2 for bad input or an existing output file.

    References
    ----------
    R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (the nuclear data
    printed by ``nuclide``); M. H. Levitt, J. Magn. Reson. 82 (1989) 427
    (the sidebands printed by ``simulate --sidebands``).

    Examples
    --------
    >>> main(["nuclide", "27Al", "--field", "14.1"])
    27Al: spin 5/2, quadrupolar (6 levels)
      reference frequency at 14.1 T: 156.4... MHz ...
    0
    >>> main(["simulate", "/nonexistent/model.toml", "-o", "/nonexistent/out.csv"])
    2
    """
    args = build_parser().parse_args(argv)
    try:
        return args.func(args)
    except ValueError as e:  # model and input errors: one clear line, no traceback
        print(f"error: {e}", file=sys.stderr)
        return 2
    except OSError as e:  # existing outputs, unwritable folders, an output that is a directory ...
        print(f"error: {e}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
