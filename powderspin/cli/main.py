"""Command line: a thin layer over the Python API.

    powderspin simulate MODEL.toml -o OUT.csv [--plot OUT.png] [--sidebands [FILE]] [--force] [-q]
                        [--cache DIR | --no-cache]
    powderspin fit MODEL.toml [DATA ...] -o RESULT.toml [--report FIT.png] [--global] [--posterior]
                   [--region A:B]... [--noise-region A:B] [--axis ppm|hz|khz] [--force] [-q]
                   [--cache DIR | --no-cache]
    powderspin plan MODEL.toml [--fields T ...] [--rotors NAME ...] [--rotor-table FILE] [--max-rate HZ]
                    [--rates HZ ...] [--threshold 0.01] [--snr 100] [--json OUT.json] [--plot OUT.png]
                    [--force] [-q]
    powderspin nuclide 27Al --field 14.1 | --list
    powderspin cache info | path | clear [--cache DIR]
    powderspin demo [--out DIR]
    powderspin --version

Every error is one line on standard error (``error: ...``) with exit status 2;
Ctrl-C stops at once with status 130 and leaves no partial output.  Outputs
are checked before any computing and written atomically; an existing file is
replaced only with ``--force`` and an input file never.
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

__all__ = ["main", "build_parser", "SPINNING_CAUTION", "CliError"]

SPINNING_CAUTION = (
    "caution: simulated spinning rates say nothing about what a rotor can take; never exceed the "
    "manufacturer's rated spinning rate for your rotor, cap and probe (rotor failure can injure), "
    "and follow your laboratory's rules."
)

#: marker file that says a folder was made by ``powderspin demo`` (so a rerun may replace its files)
DEMO_MARKER = ".powderspin-demo"


class CliError(Exception):
    """A command-line problem reported as one line with exit status 2.

    Parameters
    ----------
    message : str

    Examples
    --------
    >>> str(CliError("bad range"))
    'bad range'
    """


def _note(args, text: str) -> None:
    if not getattr(args, "quiet", False):
        print(text, file=sys.stderr)


def _compile_note(args) -> None:
    """Say once that the kernels will compile, when (and only when) their cache is missing."""
    try:
        from ..engine import _kernels as k

        missing = [d for d in (k._perturbative_offsets, k._perturbative_sidebands, k._bin_tent)
                   if not Path(d._cache._cache_file._index_path).exists()]
    except Exception:  # the check is a courtesy; never let it stop a run
        return
    if missing:
        print("note: compiling the numerical kernels for the first time (up to a minute); later runs reuse them",
              file=sys.stderr)


class _Progress:
    """Progress of simulate: a bar per site (lines) or per kernel grid, shown after two seconds."""

    def __init__(self, quiet: bool):
        from ..progress import StagedProgress

        self.bars = StagedProgress(quiet, delay=2.0)

    def __call__(self, label, done, total):
        unit = "line shapes" if str(label).endswith(": kernel grid") else "orientations"
        self.bars.update(f"site {label}", done, total=total, unit=unit)

    def close(self):
        self.bars.close()


def _parse_range(text: str | None, what: str):
    if text is None:
        return None
    try:
        a, b = text.split(":")
        lo, hi = float(a), float(b)
    except ValueError:
        raise CliError(f"{what} = {text!r} must be two numbers A:B, e.g. 120:-40") from None
    if not (math.isfinite(lo) and math.isfinite(hi)) or lo == hi:
        raise CliError(f"{what} = {text!r} must be two different finite numbers A:B")
    return (lo, hi)


def _plot_options(args) -> dict:
    opts = {"unit": args.unit, "limits": _parse_range(args.range, "--range")}
    if args.zoom is not None:
        if not args.zoom > 1:
            raise CliError(f"--zoom = {args.zoom:g} must be > 1 (a vertical magnification)")
        opts["vertical_zoom"] = args.zoom
    return opts


def _cmd_simulate(args) -> int:
    from ..files import STDOUT, check_outputs
    from ..model.modelfile import load_model
    from ..plotting.spectrum import PLOT_SUFFIXES

    model_path = Path(args.model)
    model = load_model(model_path)
    plot_opts = _plot_options(args)
    n_meas = len(model.measurements)
    which = range(n_meas) if args.measurement is None else [args.measurement - 1]
    if args.measurement is not None and not (1 <= args.measurement <= n_meas):
        raise CliError(f"--measurement = {args.measurement} must be in [1, {n_meas}] (the model has {n_meas})")

    def name_for(base: str | None, j: int) -> str | None:
        if base is None or base == STDOUT or len(which) == 1:
            return base
        p = Path(base)
        return str(p.with_name(f"{p.stem}-m{j + 1}{p.suffix}"))

    if args.output == STDOUT and len(which) > 1:
        raise CliError("-o -: the model has several measurements; give a file name (one CSV per measurement "
                       "is written, NAME-m1.csv, NAME-m2.csv, ...) or --measurement N")
    sidebands_file = args.sidebands if isinstance(args.sidebands, str) else None
    outputs = []
    for j in which:
        outputs.append((name_for(args.output, j), "output"))
        if args.plot:
            outputs.append((name_for(args.plot, j), "plot", PLOT_SUFFIXES))
        if sidebands_file:
            outputs.append((name_for(sidebands_file, j), "sideband table"))
    check_outputs(outputs, force=args.force, protect=[model_path])
    from ..engine.site_lines import check_high_field
    from ..simulator import simulate

    for j in which:
        for text in check_high_field(model.sites, model.nucleus, model.measurements[j].field_tesla,
                                     allow_strong_coupling=args.allow_strong_coupling):
            print(f"note: {text}", file=sys.stderr)
    _compile_note(args)
    store = _kernel_store(args)
    progress = _Progress(args.quiet)
    spectra = []
    try:
        for j in which:
            spectra.append((j, simulate(model, measurement=j, progress=progress,
                                        allow_strong_coupling=args.allow_strong_coupling, kernel_store=store)))
    finally:
        progress.close()
    for j, spec in spectra:
        for note in spec.metadata.get("notes", []):
            if "nu_Q is" in note:
                continue  # already said before computing
            print(f"note: {note}", file=sys.stderr)
        meas = model.measurements[j]
        if meas.spinning_hz > 0 and math.isfinite(meas.spinning_hz):
            _note(args, SPINNING_CAUTION)
        out = name_for(args.output, j)
        spec.write_csv(out, force=args.force, protect=[model_path])
        if out != STDOUT:
            print(f"wrote {out} ({spec.hz.size} points, {len(spec.site_labels)} site(s))", file=sys.stderr)
        if args.plot:
            from ..plotting.spectrum import save_plot

            p = name_for(args.plot, j)
            save_plot(spec, p, force=args.force, protect=[model_path], **plot_opts)
            print(f"wrote {p}", file=sys.stderr)
        if sidebands_file:
            from ..files import write_text_atomic

            p = name_for(sidebands_file, j)
            write_text_atomic(p, spec.sideband_csv_text(), force=args.force, protect=[model_path],
                              role="sideband table")
            print(f"wrote {p}", file=sys.stderr)
        if args.sidebands is True or sidebands_file:
            stream = sys.stderr if args.output == STDOUT else sys.stdout
            print(spec.sideband_table(), end="", file=stream)
    return 0


def _library(args):
    """The lineshape library named by --cache (else $POWDERSPIN_CACHE, else the user cache folder)."""
    from ..disorder.library import LineshapeLibrary

    path = getattr(args, "cache", None)
    if path is not None:
        p = Path(path)
        if p.exists() and not p.is_dir():
            raise CliError(f"--cache {path!r} is a file; give a folder for the lineshape library")
    return LineshapeLibrary(path)


def _kernel_store(args):
    """The kernel store of a command: --no-cache keeps kernels in memory only."""
    from ..disorder.sites import KernelStore, default_kernel_store

    if getattr(args, "no_cache", False):
        return KernelStore(None)
    lib = _library(args)
    return default_kernel_store(lib.path)


def _cmd_cache(args) -> int:
    from ..disorder.library import cache_summary_text

    lib = _library(args)
    if args.action == "path":
        print(lib.path)
    elif args.action == "info":
        print(cache_summary_text(lib))
        print("  on the command line: --cache DIR (simulate, fit, cache) or --no-cache (simulate, fit)")
    else:
        removed = lib.clear()
        print(f"removed {removed} entr{'y' if removed == 1 else 'ies'} from {lib.path}")
    return 0


class _FitProgress:
    """Progress of a fit (evaluations, lowest chi-square), its kernel grid and posterior sampling."""

    def __init__(self, quiet: bool):
        from ..progress import StagedProgress

        self.bars = StagedProgress(quiet, delay=1.0)

    def __call__(self, stage, done, value):
        if stage == "posterior":
            self.bars.update("posterior", done, total=int(value), unit="steps")
        elif stage == "kernels":
            self.bars.update("kernel grid", done, total=int(value), unit="line shapes")
        else:
            self.bars.update("fit", done, unit="evaluations", postfix=f"chi-square {value:.6g}")

    def close(self):
        self.bars.close()


def _fit_outputs(args, n_meas: int):
    """Every file the fit command writes: (path, role, suffixes)."""
    from ..fitting.fitter import csv_paths
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


def _run_fit(model, data, args, outputs, protect, *, force: bool, quiet: bool):
    """Fit, then write every output; if one write fails, remove what this run wrote."""
    from ..fitting.fitter import fit, write_result
    from ..plotting.report import save_corner, save_report

    regions = [_parse_range(r, "--region") for r in args.region] if args.region else None
    noise = _parse_range(args.noise_region, "--noise-region")
    progress = _FitProgress(quiet)
    try:
        result = fit(model, data, regions=regions, noise_region=noise, axis=args.axis,
                     global_search=args.global_search, starts=args.starts, seed=args.seed,
                     posterior=args.posterior, walkers=args.walkers, steps=args.steps, burn=args.burn,
                     progress=progress, kernel_store=_kernel_store(args))
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


def _cmd_fit(args) -> int:
    from ..files import check_outputs
    from ..fitting.fitter import FitError, _data_paths
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
    data = _data_paths(model, list(args.data) if args.data else None)
    for p in data:
        if not Path(p).exists():
            raise FitError(f"data file {str(p)!r} does not exist")
    outputs = _fit_outputs(args, n_meas)
    protect = [model_path] + [Path(p) for p in data]
    check_outputs(outputs, force=args.force, protect=protect)
    _compile_note(args)
    result, written = _run_fit(model, data, args, outputs, protect, force=args.force, quiet=args.quiet)
    print(result.summary(), end="")
    for p in written:
        print(f"wrote {p}", file=sys.stderr)
    return 0


def _cmd_nuclide(args) -> int:
    from ..physics import nuclides as nuc_mod

    if args.list:
        field = 1.0 if args.field is None else args.field
        if args.field is not None:
            from ..model.values import check_number

            check_number("nuclide", "field_tesla", args.field, "measurement")
        print(nuc_mod.nuclide_table(field))
        return 0
    if args.name is None:
        raise CliError("nuclide: give a nucleus (e.g. 27Al) or --list")
    nucleus = nuc_mod.get_nuclide(args.name)
    if args.field is None:
        raise CliError("nuclide: --field is required (the magnetic field in tesla, e.g. --field 14.1)")
    from ..model.values import check_number

    check_number("nuclide", "field_tesla", args.field, "measurement")
    print(nuc_mod.nuclide_summary(nucleus, args.field))
    return 0


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


def _cmd_demo(args) -> int:
    from ..files import check_outputs, write_text_atomic
    from ..fitting.fitter import csv_paths
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
    _compile_note(args)
    fields = " and ".join(f"{m.field_tesla:g} T" for m in model.measurements)
    print(f"demo: fit {len(model.sites)} {model.nucleus.name} sites to two SYNTHETIC spectra (an invented "
          f"aluminophosphate) at {fields}, {model.measurement.spinning_hz / 1e3:g} kHz MAS; model: "
          f"{_demo_model_path()}")
    outdir.mkdir(parents=True, exist_ok=True)
    write_text_atomic(outdir / DEMO_MARKER, "made by powderspin demo; its files may be replaced by a rerun\n",
                      force=True)
    ns = argparse.Namespace(region=None, noise_region=None, axis=None, global_search=False, starts=None, seed=0,
                            posterior=False, walkers=None, steps=2000, burn=None)
    result, written = _run_fit(model, None, ns, outputs, [_demo_model_path()], force=True, quiet=args.quiet)
    print(result.summary(), end="")
    print("wrote " + ", ".join(str(p) for p in written))
    print(f"check: powderspin simulate {result_path} -o fitted.csv   (gives the fitted curves)")
    _note(args, SPINNING_CAUTION)
    return 0


# ---------------------------------------------------------------------------
# plan


def _numbers(values, what: str, unit: str) -> list | None:
    """Numbers of a multi-valued option, parsed here so that a bad one is a one-line error."""
    if values is None:
        return None
    out = []
    for v in values:
        try:
            x = float(v)
        except ValueError:
            raise CliError(f"{what}: {v!r} is not a number ({unit})") from None
        out.append(x)
    return out


class _PlanProgress:
    """One progress bar over the plan's candidate experiments, shown after two seconds."""

    def __init__(self, quiet: bool):
        from ..progress import StagedProgress

        self.bars = StagedProgress(quiet, delay=2.0)

    def __call__(self, done, total):
        self.bars.update("plan", done, total=total, unit="experiments")

    def close(self):
        self.bars.close()


def _cmd_plan(args) -> int:
    from ..files import STDOUT, check_outputs
    from ..model.modelfile import load_model
    from ..plotting.spectrum import PLOT_SUFFIXES

    model_path = Path(args.model)
    protect = [model_path] + ([Path(args.rotor_table)] if args.rotor_table else [])
    outputs = []
    if args.json:
        outputs.append((args.json, "JSON output"))
    if args.plot:
        outputs.append((args.plot, "plot", PLOT_SUFFIXES))
    check_outputs(outputs, force=args.force, protect=protect)
    fields = _numbers(args.fields, "--fields", "tesla")
    rates = _numbers(args.rates, "--rates", "Hz")
    model = load_model(model_path)
    from ..planning.planner import load_rotor_table, plan

    table = load_rotor_table(args.rotor_table) if args.rotor_table else None
    _compile_note(args)
    progress = _PlanProgress(args.quiet)
    try:
        result = plan(model, fields, rotors=args.rotors, rotor_table=table, max_rate_hz=args.max_rate,
                      rates_hz=rates, n_rates=args.rate_count, threshold=args.threshold, snr=args.snr,
                      precision=not args.no_precision, progress=progress)
    finally:
        progress.close()
    stream = sys.stderr if args.json == STDOUT else sys.stdout
    print(result.table_text(), end="", file=stream)
    if args.json:
        result.write_json(args.json, force=args.force, protect=protect)
        if args.json != STDOUT:
            print(f"wrote {args.json}", file=sys.stderr)
    if args.plot:
        result.save_plot(args.plot, force=args.force, protect=protect)
        print(f"wrote {args.plot}", file=sys.stderr)
    return 0


def _add_plan_parser(sub) -> None:
    from ..model.schema import PLAN_DEFAULT_MIN_RATE_HZ as DEFAULT_MIN_RATE_HZ
    from ..model.schema import PLAN_DEFAULT_RATE_COUNT as DEFAULT_RATE_COUNT
    from ..model.schema import PLAN_DEFAULT_SNR as DEFAULT_SNR
    from ..model.schema import PLAN_DEFAULT_THRESHOLD as DEFAULT_THRESHOLD

    p = sub.add_parser("plan", help="choose field, rotor and spinning rate by simulation, with the precision "
                                    "each choice gives")
    p.add_argument("model", help="model file (TOML): the sample's sites and broadening")
    p.add_argument("--fields", nargs="*", metavar="T",
                   help="fields to consider in tesla (default 9.4 14.1 18.8 and the model's own)")
    p.add_argument("--rotors", nargs="*", metavar="NAME", help="rotors to consider, e.g. 3.2 1.3 (default all)")
    p.add_argument("--rotor-table", metavar="FILE", help="TOML rotor table replacing the built-in typical values")
    p.add_argument("--max-rate", type=str, metavar="HZ", help="fastest candidate spinning rate in Hz")
    p.add_argument("--rates", nargs="*", metavar="HZ", help="candidate spinning rates in Hz (default: a grid)")
    p.add_argument("--rate-count", type=str, default=str(DEFAULT_RATE_COUNT), metavar="N",
                   help=f"rates in the default grid, log-spaced from {DEFAULT_MIN_RATE_HZ:g} Hz (default "
                        f"{DEFAULT_RATE_COUNT})")
    p.add_argument("--threshold", type=str, default=str(DEFAULT_THRESHOLD),
                   help="largest sideband-on-centreband overlap allowed (default 0.01)")
    p.add_argument("--snr", type=str, default=str(DEFAULT_SNR),
                   help="signal-to-noise ratio: tallest point / noise per point (default 100)")
    p.add_argument("--no-precision", action="store_true", help="skip the standard errors and the ranking")
    p.add_argument("--json", metavar="OUT.json", help="write every number behind the plan as JSON ('-': stdout)")
    p.add_argument("--plot", metavar="OUT.png", help="write a figure (.png, .pdf or .svg)")
    p.add_argument("--force", action="store_true", help="overwrite existing output files")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar (the cautions are always printed)")
    p.set_defaults(func=_cmd_plan_checked)


def _cmd_plan_checked(args) -> int:
    for name, what, unit in (("max_rate", "--max-rate", "Hz"), ("threshold", "--threshold", ""),
                             ("snr", "--snr", "")):
        v = getattr(args, name)
        if v is not None:
            setattr(args, name, _numbers([v], what, unit or "a number")[0])
    try:
        args.rate_count = int(args.rate_count)
    except ValueError:
        raise CliError(f"--rate-count: {args.rate_count!r} is not a whole number") from None
    return _cmd_plan(args)


def _add_cache_options(p) -> None:
    g = p.add_mutually_exclusive_group()
    g.add_argument("--cache", metavar="DIR",
                   help="lineshape library folder for distributed-site kernels (default $POWDERSPIN_CACHE or the "
                        "user cache folder; see 'powderspin cache path')")
    g.add_argument("--no-cache", action="store_true", help="do not read or write the lineshape library")


def _interrupted(e: BaseException) -> bool:
    """True when a KeyboardInterrupt is somewhere in the cause/context chain of ``e``."""
    seen = set()
    while e is not None and id(e) not in seen:
        if isinstance(e, KeyboardInterrupt):
            return True
        seen.add(id(e))
        e = e.__cause__ or e.__context__
    return False


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors are one line, like every other error of the command."""

    def error(self, message):  # noqa: D401 - argparse's hook
        self.exit(2, f"error: {self.prog}: {message} (see {self.prog} --help)\n")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``powderspin`` command.

    Returns
    -------
    argparse.ArgumentParser

    Examples
    --------
    >>> build_parser().parse_args(["nuclide", "27Al", "--field", "9.4"]).field
    9.4
    """
    from .. import __version__

    p = _Parser(prog="powderspin", description="Solid-state NMR powder patterns: simulate and fit.")
    p.add_argument("--version", action="version", version=f"powderspin {__version__}")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)

    s = sub.add_parser("simulate", help="simulate the spectrum of a TOML model file")
    s.add_argument("model", help="model file (TOML)")
    s.add_argument("-o", "--output", required=True, help="CSV file to write ('-' for standard output)")
    s.add_argument("--plot", help="also write a figure (.png, .pdf or .svg)")
    s.add_argument("--sidebands", nargs="?", const=True, default=None, metavar="FILE",
                   help="print the sideband table; with FILE also write it as CSV")
    s.add_argument("--measurement", type=int, help="simulate only measurement N (1-based) of several")
    s.add_argument("--unit", choices=("ppm", "khz"), default="ppm", help="plot axis unit (default ppm)")
    s.add_argument("--range", help="plot axis range A:B in the plot unit, e.g. 120:-40")
    s.add_argument("--zoom", type=float, help="also plot the sum magnified N times (shows satellites)")
    s.add_argument("--allow-strong-coupling", action="store_true",
                   help="compute sites whose nu_Q exceeds half the Larmor frequency (refused by default)")
    s.add_argument("--force", action="store_true", help="overwrite existing output files")
    s.add_argument("-q", "--quiet", action="store_true", help="no progress bars or cautions")
    _add_cache_options(s)
    s.set_defaults(func=_cmd_simulate)

    c = sub.add_parser("cache", help="the lineshape library: where it is, what it holds, clear it")
    c.add_argument("action", choices=("info", "path", "clear"),
                   help="info: entries and size; path: the folder; clear: remove every entry")
    c.add_argument("--cache", metavar="DIR", help="library folder (default $POWDERSPIN_CACHE or the user cache folder)")
    c.set_defaults(func=_cmd_cache)

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
    _add_cache_options(f)
    f.set_defaults(func=_cmd_fit)

    _add_plan_parser(sub)

    n = sub.add_parser("nuclide", help="print the NMR data of a nucleus, or list them all")
    n.add_argument("name", nargs="?", help="nucleus, e.g. 27Al")
    n.add_argument("--field", type=float, help="magnetic field in tesla (required with a nucleus)")
    n.add_argument("--list", action="store_true",
                   help="list every nucleus in the table (frequencies at --field, default 1 T)")
    n.set_defaults(func=_cmd_nuclide)

    d = sub.add_parser("demo", help="fit the bundled example (two synthetic spectra) and write the result and a report")
    d.add_argument("--out", default="powderspin-demo", help="output folder (default ./powderspin-demo)")
    d.add_argument("-q", "--quiet", action="store_true", help="no progress bar or cautions")
    d.add_argument("--force", action="store_true", help=argparse.SUPPRESS)  # accepted; the demo owns its folder
    d.set_defaults(func=_cmd_demo)
    return p


def main(argv=None) -> int:
    """Run the ``powderspin`` command line.

    Model and input errors and refused overwrites are printed as one
    ``error: ...`` line on standard error, with exit status 2; Ctrl-C gives
    one line and status 130.

    Parameters
    ----------
    argv : list of str, optional
        Arguments after the program name; ``sys.argv[1:]`` when None.

    Returns
    -------
    int
        Exit status: 0 on success, 2 for bad input or an existing output
        file, 130 when interrupted.

    References
    ----------
    R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (the nuclear data
    printed by ``nuclide``).

    Examples
    --------
    >>> main(["nuclide", "27Al", "--field", "14.1"])
    27Al: spin 5/2, quadrupolar (6 levels)
      reference frequency at 14.1 T: 156.4... MHz ...
    0
    >>> main(["simulate", "/nonexistent/model.toml", "-o", "/nonexistent/out.csv"])
    2
    """
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as e:  # argparse: usage errors exit 2 after one message, --help/--version exit 0
        return int(e.code or 0)
    try:
        return args.func(args)
    except KeyboardInterrupt:
        print("interrupted; no output was written for the unfinished step", file=sys.stderr)
        return 130
    except BrokenPipeError:  # the reader of standard output went away (e.g. `| head`): stop quietly
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except SystemError as e:  # an interrupt that arrives inside a compiled kernel
        if _interrupted(e):
            print("interrupted; no output was written for the unfinished step", file=sys.stderr)
            return 130
        raise
    except (ValueError, OSError, CliError) as e:  # input errors, files: one clear line, no traceback
        print(f"error: {e}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
