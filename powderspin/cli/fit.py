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
                   help="least squares from many starts within the bounds (Sobol set); keep the best")
    f.add_argument("--starts", type=int, help="number of starts with --global (default max(8, 4 x free parameters))")
    f.add_argument("--seed", type=int, default=0, help="seed of the --global starts and the posterior sampler")
    f.add_argument("--workers", type=int, metavar="N",
                   help="with --global: run the starts on a local Dask cluster of N single-threaded processes")
    f.add_argument("--scheduler", metavar="ADDRESS",
                   help="with --global: run the starts on a running Dask scheduler (e.g. tcp://head-node:8786)")
    f.add_argument("--posterior", action="store_true",
                   help="also sample the posterior (emcee) and write a corner plot beside the report")
    f.add_argument("--walkers", type=int, help="posterior walkers (default max(16, 4 x free parameters))")
    f.add_argument("--steps", type=int, default=2000, help="posterior steps per walker (default 2000)")
    f.add_argument("--burn", type=int, help="posterior steps discarded (default a quarter of --steps)")
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
    import contextlib

    progress = terminal_progress(argparse.Namespace(quiet=quiet), delay=1.0)
    parallel = getattr(args, "workers", None) is not None or getattr(args, "scheduler", None) is not None
    try:
        with contextlib.ExitStack() as stack:
            map_starts = None
            if parallel:
                from ..series.runner import dask_map, series_client

                client = stack.enter_context(series_client(workers=args.workers, scheduler=args.scheduler))
                map_starts = dask_map(client)
            result = fit(model, data, regions=regions, noise_region=noise, axis=args.axis,
                         global_search=args.global_search, starts=args.starts, seed=args.seed,
                         posterior=args.posterior, walkers=args.walkers, steps=args.steps, burn=args.burn,
                         progress=progress, kernel_store=kernel_store(args), map_starts=map_starts)
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
    if (args.workers is not None or args.scheduler is not None) and not args.global_search:
        raise CliError("--workers and --scheduler run the starts of a global search in parallel; add --global")
    if args.workers is not None and args.scheduler is not None:
        raise CliError("--workers and --scheduler: give one (the scheduler's cluster has its own workers)")
    if args.workers is not None and args.workers < 1:
        raise CliError(f"--workers {args.workers}: give at least 1 worker process")
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
