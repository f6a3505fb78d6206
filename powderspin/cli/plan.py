"""``powderspin plan``: choose field, rotor and spinning rate by simulation, with the precision each gives."""

from __future__ import annotations

import sys
from pathlib import Path

from .common import CliError, compile_note, numbers, terminal_progress

__all__ = ["add_parser", "run"]


def _run(args) -> int:
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
    fields = numbers(args.fields, "--fields", "tesla")
    rates = numbers(args.rates, "--rates", "Hz")
    model = load_model(model_path)
    from ..io.results import write_plan_json
    from ..planning.planner import plan
    from ..planning.rotors import load_rotor_table
    from ..plotting.plan import save_plan_plot

    table = load_rotor_table(args.rotor_table) if args.rotor_table else None
    at = None
    if args.values:
        fitted = load_model(args.values)
        try:
            at = {q.name: fitted.parameter_value(fitted.address_of(q.name)) for q in model.free}
        except ValueError as e:
            raise CliError(f"--values {args.values!r}: {e}; give the result file of a fit of this model") from None
    compile_note(args)
    progress = terminal_progress(args, delay=2.0)
    try:
        result = plan(model, fields, rotors=args.rotors, rotor_table=table, max_rate_hz=args.max_rate,
                      rates_hz=rates, n_rates=args.rate_count, threshold=args.threshold, snr=args.snr,
                      precision=not args.no_precision, progress=progress, values=at)
    finally:
        progress.close()
    stream = sys.stderr if args.json == STDOUT else sys.stdout
    print(result.table_text(), end="", file=stream)
    if args.json:
        write_plan_json(result, args.json, force=args.force, protect=protect)
        if args.json != STDOUT:
            print(f"wrote {args.json}", file=sys.stderr)
    if args.plot:
        save_plan_plot(result, args.plot, force=args.force, protect=protect)
        print(f"wrote {args.plot}", file=sys.stderr)
    return 0


def add_parser(sub) -> None:
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
    p.add_argument("--values", metavar="RESULT.toml",
                   help="compute the precision at a fit's values (a result file of 'powderspin fit') instead of the "
                        "model's start values")
    p.add_argument("--json", metavar="OUT.json", help="write every number behind the plan as JSON ('-': stdout)")
    p.add_argument("--plot", metavar="OUT.png", help="write a figure (.png, .pdf or .svg)")
    p.add_argument("--force", action="store_true", help="overwrite existing output files")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar (the cautions are always printed)")
    p.set_defaults(func=run)


def run(args) -> int:
    for name, what, unit in (("max_rate", "--max-rate", "Hz"), ("threshold", "--threshold", ""),
                             ("snr", "--snr", "")):
        v = getattr(args, name)
        if v is not None:
            setattr(args, name, numbers([v], what, unit or "a number")[0])
    try:
        args.rate_count = int(args.rate_count)
    except ValueError:
        raise CliError(f"--rate-count: {args.rate_count!r} is not a whole number") from None
    return _run(args)
