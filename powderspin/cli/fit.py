"""``powderspin fit``: fit a model with free parameters to measured spectra; write the result, CSV and report."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from .common import (
    CliError,
    add_cache_options,
    add_dask_options,
    check_dask_options,
    compile_note,
    dask_mapper,
    kernel_store,
    outputs_together,
    parse_range,
    terminal_progress,
)

__all__ = ["add_parser", "run", "run_fit", "fit_outputs"]


def add_parser(sub) -> None:
    """Add the ``fit`` command to the subparsers ``sub``."""
    f = sub.add_parser("fit", help="fit a model with free parameters to measured spectra")
    f.add_argument("model", help="model file (TOML) with free parameters { start, min, max }")
    f.add_argument("data", nargs="*", help="measured spectrum or raw data folder (fid/ser with acqus, fid with "
                        "procpar; processed with the model's [processing] table) per measurement, in order "
                        "(overrides data = ...)")
    f.add_argument("-o", "--output", required=True,
                   help="result file to write (.toml, a model file); the CSV goes beside it")
    f.add_argument("--report", help="also write the report figure (.png, .pdf or .svg)")
    f.add_argument("--unit", choices=("ppm", "khz"), default="ppm",
                   help="x axis of the report: shift in ppm (default) or offset in kHz")
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
    add_dask_options(f, "with --global: run the starts")
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
    f.add_argument("--f1-region", action="append", metavar="A:B",
                   help="2D data: F1 region in ppm whose F2 slices are fitted (repeatable); overrides [fit] "
                        "f1_regions; --region then limits F2")
    f.add_argument("--slice", action="append", type=float, metavar="F1_PPM",
                   help="2D data: fit the F2 slice at this F1 position in ppm, the nearest data row (repeatable); "
                        "overrides [fit] slice_f1_ppm")
    f.add_argument("--axis", choices=("ppm", "hz", "khz"),
                   help="unit of the data files' axis column when the files do not name it")
    f.add_argument("--accept-mismatch", action="store_true",
                   help="fit data whose own header states another nucleus or field than the model (refused otherwise)")
    f.add_argument("--f1-referencing", choices=("isotropic", "t1_evolution", "total_evolution", "file"),
                   help="F1 scale of 2D (MQMAS/STMAS) data files: powderspin's sheared isotropic scale, the sheared "
                        "t1 frequency (t1_evolution, p - R times it), per unit of the whole evolution time "
                        "(total_evolution, (p - R) / (1 + |R|) times it), or as stated in the file (overrides the "
                        "measurements' f1_referencing)")
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


def run_fit(model, data, args, outputs, protect, *, force: bool, quiet: bool, also_write=()):
    """Fit, then write every output together: if one write fails, none is written."""
    from ..fitting.fitter import fit
    from ..io.results import write_result
    from ..plotting.report import save_corner, save_report

    regions = [parse_range(r, "--region") for r in args.region] if args.region else None
    noise = parse_range(args.noise_region, "--noise-region")
    import contextlib

    progress = terminal_progress(argparse.Namespace(quiet=quiet), delay=1.0)
    try:
        with contextlib.ExitStack() as stack:
            map_starts = dask_mapper(args, stack)
            result = fit(model, data, regions=regions, noise_region=noise, axis=args.axis,
                         global_search=args.global_search, starts=args.starts, seed=args.seed,
                         posterior=args.posterior, walkers=args.walkers, steps=args.steps, burn=args.burn,
                         progress=progress, kernel_store=kernel_store(args), map_starts=map_starts,
                         max_steps=getattr(args, "max_steps", None), profile=getattr(args, "profile", "auto"),
                         accept_mismatch=getattr(args, "accept_mismatch", False))
    finally:
        progress.close()
    written = []
    with outputs_together():  # the result, its CSV files and the figures appear together, or none does
        from ..files import write_text_atomic

        for path, text in also_write:
            written.append(write_text_atomic(path, text, force=force, protect=protect))
        written += write_result(result, outputs[0][0], force=force, protect=protect)
        for path, role, *_ in outputs:
            if role == "report":
                written.append(save_report(result, path, force=force, protect=protect,
                                           unit=getattr(args, "unit", "ppm")))
            elif role == "corner plot":
                written.append(save_corner(result, path, force=force, protect=protect))
    return result, written


def _check_sampler_flags(args, n_free: int) -> None:
    """--starts, --walkers, --steps and --burn: ranges, and whether the sample fits in memory, before any work."""
    from ..fitting.fitter import MAX_STARTS, check_sampler_memory

    if args.starts is not None and not (1 <= args.starts <= MAX_STARTS):
        raise CliError(f"--starts {args.starts} is outside the allowed range [1, {MAX_STARTS}]")
    if args.walkers is not None and args.walkers < 2 * max(n_free, 1):
        raise CliError(f"--walkers {args.walkers} must be at least twice the number of free parameters ({n_free})")
    if args.steps < 10:
        raise CliError(f"--steps {args.steps} must be at least 10")
    if args.burn is not None and not (0 <= args.burn < args.steps):
        raise CliError(f"--burn {args.burn} must be in [0, --steps) = [0, {args.steps})")
    try:
        check_sampler_memory(n_free, args.walkers if args.posterior else None,
                             args.steps if args.posterior else None,
                             (args.starts or 1) if args.global_search else None,
                             names={"walkers": "--walkers", "steps": "--steps", "starts": "--starts"})
    except ValueError as e:
        raise CliError(str(e)) from None


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
    _check_sampler_flags(args, len(model.free))
    if (args.workers is not None or args.scheduler is not None) and not args.global_search:
        raise CliError("--workers and --scheduler run the starts of a global search in parallel; add --global")
    check_dask_options(args)
    data = data_items(model, list(args.data) if args.data else None)
    for p in data:
        if not Path(p).exists():
            raise FitError(f"data file {str(p)!r} does not exist")
    from ..io.raw import check_against_model, is_raw_data, read_raw
    for j, p in enumerate(data):  # raw data state their nucleus and field: check them before anything else
        if is_raw_data(p):
            check_against_model(read_raw(p, expect="any"), model.nucleus.name, model.measurements[j].field_tesla,
                                f"measurement {j + 1}")
    if any(m.is_two_dimensional for m in model.measurements):
        return _run_two_dimensional(model, model_path, data, args)
    if args.f1_region or args.slice:
        raise CliError("--f1-region and --slice choose F2 slices of 2D (MQMAS/STMAS) data; the model has no 2D "
                       "measurement")
    outputs = fit_outputs(args, n_meas)
    protect = [model_path] + [Path(p) for p in data]
    check_outputs(outputs, force=args.force, protect=protect, make_folders=False)
    compile_note(args)
    result, written = run_fit(model, data, args, outputs, protect, force=args.force, quiet=args.quiet)
    print(result.summary(), end="")
    for p in written:
        print(f"wrote {p}", file=sys.stderr)
    return 0


def _run_two_dimensional(model, model_path: Path, data, args) -> int:
    """A model with a 2D measurement: :func:`powderspin.fitting.two_dimensional.fit_two_dimensional`."""
    from ..files import check_outputs
    from ..fitting.data import read_measured
    from ..fitting.two_dimensional import fit_two_dimensional
    from ..io.spectra2d import read_spectrum_2d
    from ..physics.multiple_quantum import two_dimensional_scale

    regions = [parse_range(r, "--region") for r in args.region] if args.region else None
    noise = parse_range(args.noise_region, "--noise-region")
    f1_regions = [parse_range(r, "--f1-region") for r in args.f1_region] if args.f1_region else None
    out = Path(args.output)
    if out.suffix.lower() != ".toml":
        raise CliError(f"-o {args.output!r}: the result is a model file; give a name ending in .toml")
    from ..io.results import csv_paths

    protect = [model_path] + [Path(p) for p in data]
    two_d = [j for j, m in enumerate(model.measurements) if m.is_two_dimensional]
    reports = {}
    if args.report:
        from ..plotting.spectrum import PLOT_SUFFIXES

        rp = Path(args.report)
        for j in two_d:
            reports[j] = rp if len(two_d) == 1 else rp.with_name(f"{rp.stem}-m{j + 1}{rp.suffix}")
    csvs = csv_paths(out, len(model.measurements))
    corner = None
    if args.posterior:  # the corner plot beside the report (or the result), as for a 1D fit
        base = Path(args.report) if args.report else out.with_suffix(".png")
        corner = base.with_name(f"{base.stem}-corner{base.suffix}")
    from ..plotting.report import REPORT_SUFFIXES

    check_outputs([(out, "result file")] + [(c, "fit CSV") for c in csvs]
                  + [(r, "report", PLOT_SUFFIXES) for r in reports.values()]
                  + ([(corner, "corner plot", REPORT_SUFFIXES)] if corner else []), force=args.force, protect=protect)
    spectra = {}
    for j, (meas, item) in enumerate(zip(model.measurements, data)):
        if meas.is_two_dimensional:
            ref = args.f1_referencing or meas.f1_referencing
            spectra[j] = read_spectrum_2d(item, f1_referencing=ref,
                                          nu_ref_hz=model.nucleus.larmor_hz(meas.field_tesla),
                                          experiment_scale=two_dimensional_scale(model.nucleus.spin, meas.experiment,
                                                                                 meas.mq_order))
        else:
            spectra[j], _, warns, _ = read_measured(item, model, j, args.axis)
            for w in warns:
                print(f"warning: {w}", file=sys.stderr)
    if noise is not None:  # before any work: a noise region must hold points of every measurement's (F2) axis
        from ..fitting.data import FitError
        from ..fitting.two_dimensional import check_noise_region

        for j, sp in spectra.items():
            two = model.measurements[j].is_two_dimensional
            try:
                check_noise_region(sp.f2_ppm if two else sp.ppm, noise, f"measurement {j + 1}",
                                   "F2 axis" if two else "axis", "--noise-region")
            except FitError as e:
                raise CliError(str(e)) from None
    compile_note(args)
    import contextlib

    progress = terminal_progress(argparse.Namespace(quiet=args.quiet), delay=1.0)
    try:
        with contextlib.ExitStack() as stack:
            result = fit_two_dimensional(model, spectra, regions=regions, f1_regions=f1_regions,
                                         slice_f1_ppm=args.slice, noise_region=noise,
                                         global_search=args.global_search, starts=args.starts, seed=args.seed,
                                         posterior=args.posterior, walkers=args.walkers, steps=args.steps,
                                         burn=args.burn, max_steps=args.max_steps, progress=progress,
                                         map_starts=dask_mapper(args, stack), profile=args.profile)
    finally:
        progress.close()
    header = ("# fitted by powderspin fit (2D): the values are the fitted ones, each measurement's scale the solved "
              "intensity factor\n" + "".join(f"# {k} = {v:.8g} +- {result.stderr[k]:.3g}\n"
                                                for k, v in result.values.items()))
    written = []
    with outputs_together():  # the result, its CSV files and the reports appear together, or none does
        from ..io.results import write_result_2d

        written += write_result_2d(result, out, header=header, force=args.force, protect=protect)
        if reports:
            from ..plotting.spectrum2d import save_fit_report_2d

            for j, rp in reports.items():
                written.append(save_fit_report_2d(spectra[j], result.spectra[j], rp, force=args.force,
                                                  protect=protect + [out], mask=result.masks[j]))
        if corner is not None:
            from ..plotting.report import save_corner

            written.append(save_corner(result, corner, force=args.force, protect=protect + [out]))
    print(result.summary(), end="")
    for p in written:
        print(f"wrote {p}", file=sys.stderr)
    return 0
