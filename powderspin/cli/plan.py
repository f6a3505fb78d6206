"""``powderspin plan``: choose field, rotor and spinning rate by simulation, with the precision each gives."""

from __future__ import annotations

import contextlib
import math
import sys
from pathlib import Path

from .common import (
    CliError,
    add_dask_options,
    check_dask_options,
    compile_note,
    dask_mapper,
    numbers,
    outputs_together,
    terminal_progress,
)

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
    check_outputs(outputs, force=args.force, protect=protect, make_folders=False)
    fields = numbers(args.fields, "--fields", "tesla")
    rates = numbers(args.rates, "--rates", "Hz")
    model = load_model(model_path)
    if args.mqmas:
        from ..physics.multiple_quantum import allowed_mq_orders

        if not allowed_mq_orders(model.nucleus.spin):
            raise CliError(f"--mqmas: {model.nucleus.name} (I = {model.nucleus.spin_label}) has no multiple-quantum "
                           "transitions to correlate with a central transition (a half-integer spin >= 3/2 is needed)")
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
        with contextlib.ExitStack() as stack:  # with --workers/--scheduler: the candidates on a Dask client
            result = plan(model, fields, rotors=args.rotors, rotor_table=table, max_rate_hz=args.max_rate,
                          rates_hz=rates, n_rates=args.rate_count, threshold=args.threshold, snr=args.snr,
                          precision=not args.no_precision, progress=progress, values=at,
                          map_candidates=dask_mapper(args, stack))
    finally:
        progress.close()
    with outputs_together():  # the JSON and the plot appear together at the end, or neither does
        if args.plot:
            save_plan_plot(result, args.plot, force=args.force, protect=protect)
        if args.json and args.json != STDOUT:
            write_plan_json(result, args.json, force=args.force, protect=protect)
        stream = sys.stderr if args.json == STDOUT else sys.stdout
        print(result.table_text(), end="", file=stream)
        if args.mqmas:
            from ..planning.two_dimensional import f1_resolution_text, plan_f1_resolution

            print(f1_resolution_text(plan_f1_resolution(model, fields, threshold=args.threshold)), end="",
                  file=stream)
        if args.json == STDOUT:
            write_plan_json(result, args.json, force=args.force, protect=protect)
    for path in (args.json, args.plot):
        if path and path != STDOUT:
            print(f"wrote {path}", file=sys.stderr)
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
    p.add_argument("--mqmas", action="store_true",
                   help="also tell, per field, whether the sites are resolved in F1 of 3QMAS and 5QMAS")
    p.add_argument("--values", metavar="RESULT.toml",
                   help="compute the precision at a fit's values (a result file of 'powderspin fit') instead of the "
                        "model's start values")
    add_dask_options(p, "run the candidates (every field x rate)")
    p.add_argument("--json", metavar="OUT.json", help="write every number behind the plan as JSON ('-': stdout)")
    p.add_argument("--plot", metavar="OUT.png", help="write a figure (.png, .pdf or .svg)")
    p.add_argument("--force", action="store_true", help="overwrite existing output files")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar (the cautions are always printed)")
    p.set_defaults(func=run)


def _in_range(flag: str, text: str, value: float, low: float, high: float, *, open_low: bool = True,
              open_high: bool = False, unit: str = "") -> float:
    ok = (value > low if open_low else value >= low) and (value < high if open_high else value <= high)
    if not (math.isfinite(value) and ok):
        lb, rb = "(" if open_low else "[", ")" if open_high else "]"
        raise CliError(f"{flag} {text} is outside the allowed range {lb}{low:g}, {high:g}{rb}{unit}")
    return value


def run(args) -> int:
    from ..model.schema import field_hint, key_spec

    check_dask_options(args)

    texts = {}
    for name, what, unit in (("max_rate", "--max-rate", "Hz"), ("threshold", "--threshold", ""),
                             ("snr", "--snr", "")):
        v = getattr(args, name)
        texts[name] = v
        if v is not None:
            setattr(args, name, numbers([v], what, unit or "a number")[0])
    if args.max_rate is not None:
        _in_range("--max-rate", texts["max_rate"], args.max_rate, 0.0, 2.0e5, unit=" Hz")
    _in_range("--threshold", texts["threshold"], args.threshold, 0.0, 1.0, open_high=True)
    _in_range("--snr", texts["snr"], args.snr, 0.0, 1e9)
    try:
        text = args.rate_count
        args.rate_count = int(text)
    except ValueError:
        raise CliError(f"--rate-count {args.rate_count!r} is not a whole number") from None
    if not 2 <= args.rate_count <= 200:
        raise CliError(f"--rate-count {text} is outside the allowed range [2, 200]")
    spec = key_spec("measurement", "field_tesla")
    for text, value in zip(args.fields or [], numbers(args.fields, "--fields", "tesla") or []):
        if not (spec.low <= value <= spec.high):
            raise CliError(f"--fields {text} T is outside the allowed range {spec.range_text()} T ({spec.why})"
                           + field_hint(value))
    for text, value in zip(args.rates or [], numbers(args.rates, "--rates", "Hz") or []):
        _in_range("--rates", text, value, 0.0, 2.0e5, unit=" Hz")
    return _run(args)
