"""``powderspin series``: fit one model to many spectra on Dask; a table, per-spectrum results and the trends."""

from __future__ import annotations

import sys

from .common import CliError, add_cache_options, parse_range, terminal_progress

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    """Add the ``series`` command to the subparsers ``sub``."""
    s = sub.add_parser("series", help="fit one model to a series of spectra (in parallel, on Dask)")
    s.add_argument("model", help="model file (TOML) with free parameters { start, min, max }")
    s.add_argument("files", nargs="*", help="data files or glob patterns (quoted), in series order")
    s.add_argument("-o", "--output", required=True, metavar="DIR",
                   help="results folder: table.csv, trends.png and one result file per spectrum")
    s.add_argument("--manifest", metavar="CSV",
                   help="CSV with a 'file' column and series-variable columns (temperature, time, ...)")
    s.add_argument("--variable", metavar="COLUMN",
                   help="the series variable: a manifest column (default the first); x axis of the trends")
    s.add_argument("--chain", action="store_true",
                   help="start each fit from the previous spectrum's result, in the order of the series variable")
    s.add_argument("--workers", type=int, metavar="N",
                   help="worker processes of the local Dask cluster (default one per core; one thread each)")
    s.add_argument("--scheduler", metavar="ADDRESS",
                   help="run on a running Dask scheduler instead (e.g. tcp://head-node:8786)")
    s.add_argument("--force", action="store_true", help="refit every spectrum, even those with a valid result")
    s.add_argument("--region", action="append", metavar="A:B",
                   help="fit region in ppm (repeatable); overrides [fit] regions")
    s.add_argument("--noise-region", metavar="A:B", help="signal-free region in ppm for the noise level")
    s.add_argument("--axis", choices=("ppm", "hz", "khz"),
                   help="unit of the data files' axis column when the files do not name it")
    s.add_argument("--global", dest="global_search", action="store_true",
                   help="each fit from many starts within the bounds (Sobol set)")
    s.add_argument("--starts", type=int, help="number of starts with --global")
    s.add_argument("--seed", type=int, default=0, help="seed of the --global starts")
    s.add_argument("--no-plot", action="store_true", help="do not draw trends.png")
    s.add_argument("-q", "--quiet", action="store_true", help="no progress bar")
    add_cache_options(s)
    s.set_defaults(func=run)


def run(args) -> int:
    from ..model.modelfile import load_model
    from ..series.runner import fit_series

    if args.workers is not None and args.workers < 1:
        raise CliError(f"--workers {args.workers}: give at least 1 worker process")
    if args.workers is not None and args.scheduler is not None:
        raise CliError("--workers and --scheduler: give one (the scheduler's cluster has its own workers)")
    if args.manifest is None and not args.files:
        raise CliError("no data files given: name the spectra (files or quoted glob patterns) or give --manifest")
    regions = [parse_range(r, "--region") for r in args.region] if args.region else None
    noise = parse_range(args.noise_region, "--noise-region")
    model = load_model(args.model)
    bars = terminal_progress(args, delay=1.0)

    def dashboard(link):
        if not args.quiet:
            print(f"note: Dask dashboard at {link}", file=sys.stderr)

    try:
        result = fit_series(model, args.files, args.output, manifest=args.manifest, variable=args.variable,
                            chain=args.chain, workers=args.workers, scheduler=args.scheduler, force=args.force,
                            regions=regions, noise_region=noise, axis=args.axis, global_search=args.global_search,
                            starts=args.starts, seed=args.seed, library=False if args.no_cache else args.cache,
                            plot=not args.no_plot, progress=bars, on_dashboard=dashboard)
    finally:
        bars.close()
    print(result.summary())
    for r in result.rows:
        if not r.ok:
            print(f"failed: {r.file}: {r.status}", file=sys.stderr)
    return 1 if result.failed else 0
