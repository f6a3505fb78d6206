"""``powderspin simulate``: the spectrum of a model file, as CSV, a figure and a sideband table."""

from __future__ import annotations

import math
import sys
from pathlib import Path

from .common import (
    SPINNING_CAUTION,
    CliError,
    add_cache_options,
    compile_note,
    kernel_store,
    note,
    outputs_together,
    parse_range,
    terminal_progress,
)

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    """Add the ``simulate`` command to the subparsers ``sub``."""
    s = sub.add_parser("simulate", help="simulate the spectrum of a TOML model file")
    s.add_argument("model", help="model file (TOML)")
    s.add_argument("-o", "--output", required=True,
                   help="spectrum file to write, format by suffix: .csv/.txt, .jdx/.dx (JCAMP-DX), .npz/.npy "
                        "('-': CSV on standard output); a 2D (MQMAS/STMAS) measurement: .npz or a .csv/.txt "
                        "matrix")
    s.add_argument("--plot", help="also write a figure (.png, .pdf or .svg)")
    s.add_argument("--sidebands", nargs="?", const=True, default=None, metavar="FILE",
                   help="print the sideband table; with FILE also write it as CSV")
    s.add_argument("--measurement", type=int, help="simulate only measurement N (1-based) of several")
    s.add_argument("--unit", choices=("ppm", "khz"), default="ppm", help="plot axis unit (default ppm)")
    s.add_argument("--range", help="plot axis range A:B in the plot unit, e.g. 120:-40")
    s.add_argument("--zoom", type=float, help="also plot the sum magnified N times (shows satellites)")
    s.add_argument("--allow-strong-coupling", action="store_true",
                   help="compute sites whose nu_Q exceeds half the Larmor frequency (refused by default)")
    s.add_argument("--f1-scale", choices=("isotropic", "t1_evolution", "total_evolution"),
                   help="F1 scale of a 2D spectrum's output: isotropic (default; a site with C_Q = 0 on the "
                        "diagonal), t1_evolution (the sheared t1 frequency, p - R times it) or total_evolution "
                        "(per unit of t1 + |R| t1, (p - R) / (1 + |R|) times it); named in the metadata")
    s.add_argument("--force", action="store_true", help="overwrite existing output files")
    s.add_argument("-q", "--quiet", action="store_true", help="no progress bars or cautions")
    add_cache_options(s)
    s.set_defaults(func=run)



def _plot_options(args) -> dict:
    opts = {"unit": args.unit, "limits": parse_range(args.range, "--range")}
    if args.zoom is not None:
        if not args.zoom > 1:
            raise CliError(f"--zoom = {args.zoom:g} must be > 1 (a vertical magnification)")
        opts["vertical_zoom"] = args.zoom
    return opts


def run(args) -> int:
    from ..files import STDOUT, check_outputs
    from ..io.results import spectrum_format
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
    check_outputs(outputs, force=args.force, protect=[model_path], make_folders=False)
    if args.f1_scale is not None and not any(model.measurements[j].is_two_dimensional for j in which):
        raise CliError(f"--f1-scale {args.f1_scale}: is for a 2D (MQMAS/STMAS) measurement; this model simulates "
                       "none")
    for j in which:  # after the checks above, so that an input named as output is said first
        if model.measurements[j].is_two_dimensional:
            from ..io.spectra2d import spectrum_2d_format

            spectrum_2d_format(name_for(args.output, j))
        else:
            spectrum_format(name_for(args.output, j))
    from ..engine.site_lines import check_high_field
    from ..io.results import sideband_csv_text, write_spectrum
    from ..simulator import simulate

    for j in which:
        for text in check_high_field(model.sites, model.nucleus, model.measurements[j].field_tesla,
                                     allow_strong_coupling=args.allow_strong_coupling):
            print(f"note: {text}", file=sys.stderr)
    compile_note(args)
    store = kernel_store(args)
    progress = terminal_progress(args, delay=2.0)
    spectra = []
    try:
        for j in which:
            spec = simulate(model, measurement=j, progress=progress,
                            allow_strong_coupling=args.allow_strong_coupling, kernel_store=store)
            if model.measurements[j].is_two_dimensional and args.f1_scale not in (None, "isotropic"):
                spec = spec.on_f1_scale(args.f1_scale)
            spectra.append((j, spec))
    finally:
        progress.close()
    wrote = []
    tables = []
    with outputs_together():  # every file appears at the end, together, or none does
        for j, spec in spectra:
            for text in spec.metadata.get("notes", []):
                if "nu_Q is" in text:
                    continue  # already said before computing
                print(f"note: {text}", file=sys.stderr)
            meas = model.measurements[j]
            if meas.spinning_hz > 0 and math.isfinite(meas.spinning_hz):
                note(args, SPINNING_CAUTION)
            out = name_for(args.output, j)
            two_d = meas.is_two_dimensional
            if out == STDOUT:
                stdout_spectrum = spec
            else:
                write_spectrum(spec, out, force=args.force, protect=[model_path])
                size = f"{spec.shape[0]} x {spec.shape[1]} points" if two_d else f"{spec.hz.size} points"
                wrote.append(f"wrote {out} ({size}, {len(spec.site_labels)} site(s))")
            if args.plot:
                p = name_for(args.plot, j)
                if two_d:
                    from ..plotting.spectrum2d import save_plot_2d

                    save_plot_2d(spec, p, force=args.force, protect=[model_path])
                else:
                    from ..plotting.spectrum import save_plot

                    save_plot(spec, p, force=args.force, protect=[model_path], **plot_opts)
                wrote.append(f"wrote {p}")
            if sidebands_file:
                from ..files import write_text_atomic

                p = name_for(sidebands_file, j)
                write_text_atomic(p, sideband_csv_text(spec), force=args.force, protect=[model_path],
                                  role="sideband table")
                wrote.append(f"wrote {p}")
            if two_d and (args.sidebands is True or sidebands_file):
                print("note: --sidebands lists 1D sideband tables; a 2D spectrum has none (its F2 projection is the "
                      "1D central-transition spectrum: simulate it with experiment = \"1d\")", file=sys.stderr)
            elif args.sidebands is True or sidebands_file:
                tables.append(spec.sideband_table())
        if args.output == STDOUT:  # standard output last: it cannot be taken back
            write_spectrum(stdout_spectrum, STDOUT, force=args.force, protect=[model_path])
    for line in wrote:
        print(line, file=sys.stderr)
    stream = sys.stderr if args.output == STDOUT else sys.stdout
    for table in tables:
        print(table, end="", file=stream)
    return 0
