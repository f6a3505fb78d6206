"""``powderspin fit``: fit a model with free parameters to measured spectra; write the result, CSV and report."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from .common import CliError, add_cache_options, compile_note, kernel_store, parse_range, terminal_progress

__all__ = ["add_parser", "run", "run_fit", "fit_outputs"]


def add_parser(sub) -> None:
    """Add the ``fit`` command to the subparsers ``sub``."""
    f = sub.add_parser("fit", help="fit a model with free parameters to measured spectra")
    f.add_argument("model", help="model file (TOML) with free parameters { start, min, max }")
    f.add_argument("data", nargs="*", help="measured spectrum per measurement, in order (overrides data = ...)")
    f.add_argument("-o", "--output", required=True,
                   help="result file to write (.toml, a model file); the CSV goes beside it")
    f.add_argument("--report", help="also write the report figure (.png, .pdf or .svg)")
    f.add_argument("--global", dest="global_search", action="store_true",
                   help="global search: least squares from your start and from candidates of a lineshape-library "
                        "scan (static or infinite-rate central transitions) or of differential evolution; lists "
                        "every distinct minimum that fits almost as well")
    f.add_argument("--starts", type=int,
                   help="least-squares starts with --global, yours included (default 1 + max(8, 3 x free parameters))")
    f.add_argument("--seed", type=int, default=0, help="seed of the --global search and the posterior sampler")
    f.add_argument("--profile", choices=("auto", "all", "none"), default="auto",
                   help="profile-likelihood intervals: where chi-square is not quadratic within one standard error "
                        "(auto, the default), for every parameter (all) or none")
    f.add_argument("--posterior", action="store_true",
                   help="also sample the posterior (emcee) and write a corner plot beside the report")
    f.add_argument("--walkers", type=int, help="posterior walkers (default max(16, 4 x free parameters))")
    f.add_argument("--steps", type=int, default=2000, help="posterior steps per walker (default 2000)")
    f.add_argument("--burn", type=int, help="posterior steps discarded (default a quarter of --steps)")
    f.add_argument("--max-steps", type=int,
                   help="extend the posterior chain up to this many steps until it spans 50 autocorrelation times "
                        "(default 5 x --steps)")
    f.add_argument("--region", action="append", metavar="A:B",
                   help="fit region in ppm (repeatable); overrides [fit] regions")
    f.add_argument("--noise-region", metavar="A:B", help="signal-free region in ppm for the noise level")
    f.add_argument("--axis", choices=("ppm", "hz", "khz"),
                   help="unit of the data files' axis column when the files do not name it")
    f.add_argument("--force", action="store_true", help="overwrite existing output files")
    f.add_argument("-q", "--quiet", action="store_true", help="no progress bars")
    add_cache_options(f)
    f.set_defaults(func=run)



def fit_outputs(args, n_meas: int):
    """Every file the fit command writes: (path, role, suffixes)."""
    from ..io.results import csv_paths
    from ..plotting.report import REPORT_SUFFIXES

    out = Path(args.output)
    if out.suffix.lower() != ".toml":
        raise CliError(f"-o {args.output!r}: the result is a model file; give a name ending in .toml")
    files = [(out, "result file")] + [(c, "fit CSV") for c in csv_paths(out, n_meas)]
    if args.report:
        files.append((Path(args.report), "report", REPORT_SUFFIXES))
    if args.posterior:
        base = Path(args.report) if args.report else out.with_suffix(".png")
        files.append((base.with_name(f"{base.stem}-corner{base.suffix}"), "corner plot", REPORT_SUFFIXES))
    return files


def run_fit(model, data, args, outputs, protect, *, force: bool, quiet: bool):
    """Fit, then write every output; if one write fails, remove what this run wrote."""
    from ..fitting.fitter import fit
    from ..io.results import write_result
    from ..plotting.report import save_corner, save_report

    regions = [parse_range(r, "--region") for r in args.region] if args.region else None
    noise = parse_range(args.noise_region, "--noise-region")
    progress = terminal_progress(argparse.Namespace(quiet=quiet), delay=1.0)
    try:
        result = fit(model, data, regions=regions, noise_region=noise, axis=args.axis,
                     global_search=args.global_search, starts=args.starts, seed=args.seed,
                     posterior=args.posterior, walkers=args.walkers, steps=args.steps, burn=args.burn,
                     max_steps=getattr(args, "max_steps", None), profile=getattr(args, "profile", "auto"),
                     progress=progress, kernel_store=kernel_store(args))
    finally:
        progress.close()
    written = []
    try:
        written += write_result(result, outputs[0][0], force=force, protect=protect)
        for path, role, *_ in outputs:
            if role == "report":
                written.append(save_report(result, path, force=force, protect=protect))
            elif role == "corner plot":
                written.append(save_corner(result, path, force=force, protect=protect))
    except BaseException:
        for p in written:
            try:
                Path(p).unlink()
            except OSError:
                pass
        raise
    return result, written


def run(args) -> int:
    from ..files import check_outputs
    from ..fitting.data import FitError, data_items
    from ..model.modelfile import load_model

    model_path = Path(args.model)
    model = load_model(model_path)
    n_meas = len(model.measurements)
    if args.data and len(args.data) != n_meas:
        raise FitError(f"{len(args.data)} data file(s) given for {n_meas} measurement(s); give one per measurement, "
                       "in the order of the [[measurement]] tables")
    if not model.free:
        raise FitError(f"{args.model}: the model has no free parameters: mark at least one as "
                       "{ start = ..., min = ..., max = ... }, e.g. cq_mhz = { start = 3.0, min = 1.0, max = 8.0 }")
    data = data_items(model, list(args.data) if args.data else None)
    for p in data:
        if not Path(p).exists():
            raise FitError(f"data file {str(p)!r} does not exist")
    outputs = fit_outputs(args, n_meas)
    protect = [model_path] + [Path(p) for p in data]
    check_outputs(outputs, force=args.force, protect=protect)
    compile_note(args)
    result, written = run_fit(model, data, args, outputs, protect, force=args.force, quiet=args.quiet)
    print(result.summary(), end="")
    for p in written:
        print(f"wrote {p}", file=sys.stderr)
    return 0
