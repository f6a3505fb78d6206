"""``powderspin demo``: fit the bundled invented example and write its result and report."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from .common import SPINNING_CAUTION, CliError, compile_note, note
from .fit import run_fit

__all__ = ["add_parser", "run", "DEMO_MARKER"]

#: marker file that says a folder was made by ``powderspin demo`` (so a rerun may replace its files)
DEMO_MARKER = ".powderspin-demo"


def add_parser(sub) -> None:
    """Add the ``demo`` command to the subparsers ``sub``."""
    d = sub.add_parser("demo", help="fit the bundled example (two synthetic spectra) and write the result and a report")
    d.add_argument("--out", default="powderspin-demo", help="output folder (default ./powderspin-demo)")
    d.add_argument("-q", "--quiet", action="store_true", help="no progress bar or cautions")
    d.add_argument("--force", action="store_true", help=argparse.SUPPRESS)  # accepted; the demo owns its folder
    d.set_defaults(func=run)


def _demo_model_path() -> Path:
    return Path(__file__).resolve().parents[1] / "data" / "demo_fit.toml"


def _demo_folder(requested: str) -> Path:
    """The demo's folder: its own (marked) folder may be reused; a foreign one is never touched."""
    base = Path(requested)
    candidates = [base] + [base.with_name(f"{base.name}-{k}") for k in range(2, 100)]
    for p in candidates:
        if not p.exists() or (p.is_dir() and (p / DEMO_MARKER).exists()):
            return p
    raise CliError(f"demo: {str(base)!r} and its numbered variants exist and were not made by the demo; "
                   "give --out NEW_FOLDER")


def run(args) -> int:
    from ..files import check_outputs
    from ..io.results import csv_paths
    from ..model.modelfile import load_model

    outdir = _demo_folder(args.out)
    if outdir != Path(args.out):
        print(f"note: {args.out!r} holds files the demo did not make; writing to {str(outdir)!r} instead",
              file=sys.stderr)
    result_path, png = outdir / "demo_fit.toml", outdir / "demo_fit.png"
    model = load_model(_demo_model_path())
    outputs = [(result_path, "result file")] + [(c, "fit CSV") for c in csv_paths(result_path, len(model.measurements))]
    outputs.append((png, "report", (".png",)))
    check_outputs(outputs, force=True)
    compile_note(args)
    fields = " and ".join(f"{m.field_tesla:g} T" for m in model.measurements)
    print(f"demo: fit {len(model.sites)} {model.nucleus.name} sites to two SYNTHETIC spectra (an invented "
          f"aluminophosphate) at {fields}, {model.measurement.spinning_hz / 1e3:g} kHz MAS; model: "
          f"{_demo_model_path()}")
    ns = argparse.Namespace(region=None, noise_region=None, axis=None, global_search=False, starts=None, seed=0,
                            posterior=False, walkers=None, steps=2000, burn=None)
    marker = (outdir / DEMO_MARKER, "made by powderspin demo; its files may be replaced by a rerun\n")
    # the folder, its marker and the fit's files appear together at the end (or, after an interrupt, none does)
    result, written = run_fit(model, None, ns, outputs, [_demo_model_path()], force=True, quiet=args.quiet,
                              also_write=[marker])
    written = [w for w in written if Path(w).name != DEMO_MARKER]
    print(result.summary(), end="")
    print("wrote " + ", ".join(str(p) for p in written))
    print(f"check: powderspin simulate {result_path} -o fitted.csv   (gives the fitted curves)")
    note(args, SPINNING_CAUTION)
    return 0
