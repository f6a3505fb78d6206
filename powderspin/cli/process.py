"""``powderspin process``: raw time-domain data to a referenced spectrum (CSV or JCAMP-DX), with a figure.

One option per key of the ``[processing]`` table (``--exponential-hz`` for
``exponential_hz``, ...); ``--model`` takes the table from a model file (options
given on the command line win) and checks the data's nucleus and field against
the model's.  Several DATA are the sub-spectra of a frequency-stepped
acquisition, each processed on its own and combined (``--combine``).
"""

from __future__ import annotations

import sys
from pathlib import Path

from .common import CliError

__all__ = ["add_parser", "run", "OUTPUT_SUFFIXES"]

#: spectrum formats the command writes
OUTPUT_SUFFIXES = (".csv", ".txt", ".jdx", ".dx")


def _flag(name: str) -> str:
    return "--" + name.replace("_", "-")


def add_parser(sub) -> None:
    """Add the ``process`` command to the subparsers ``sub``."""
    from ..model.schema import keys_of

    p = sub.add_parser("process", help="process raw time-domain data (fid/ser folders, .tnt, .npy or text FIDs) into "
                                       "a referenced spectrum")
    p.add_argument("data", nargs="+", help="raw data: a spectrometer folder (fid or ser with acqus, fid with "
                                           "procpar, or data.1d with acqu.par), a .tnt file, a .npy or two-column "
                                           "text FID; several = frequency-stepped sub-spectra")
    p.add_argument("-o", "--output", required=True, help="spectrum to write: .csv/.txt (CSV) or .jdx/.dx (JCAMP-DX)")
    p.add_argument("--plot", help="also write a figure (.png, .pdf or .svg)")
    p.add_argument("--model", help="model file: its [processing] table, and its nucleus and field to check against")
    p.add_argument("--combine", choices=("skyline", "sum"), default="skyline",
                   help="how several sub-spectra are combined (default skyline)")
    p.add_argument("--reference-data", metavar="DIR",
                   help="raw data of a secondary reference compound: its tallest line has --reference-shift-ppm")
    p.add_argument("--dwell-us", type=float, help="dwell time of a .npy or text FID (microseconds)")
    p.add_argument("--nucleus", help="observed nucleus of a .npy or text FID, e.g. 27Al")
    p.add_argument("--carrier-mhz", type=float, action="append",
                   help="transmitter frequency of a .npy or text FID (MHz); once for all DATA, or once per DATA "
                        "(frequency-stepped)")
    p.add_argument("--base-mhz", type=float, help="frequency of 0 ppm of a .npy or text FID (MHz; default the carrier)")
    p.add_argument("--conjugate", action="store_true", help="the data rotate the other way (reverse the spectrum)")
    group = p.add_argument_group("processing (the keys of the [processing] table)")
    for name, spec in keys_of("processing").items():
        kw = {"dest": f"opt_{name}", "default": None, "help": spec.doc + (f" [{spec.unit}]" if spec.unit else "")}
        if spec.kind == "choice":
            kw["choices"] = spec.choices
        elif spec.kind == "integer":
            kw["type"] = int
            kw["metavar"] = "N"
        else:
            kw["type"] = float
            kw["metavar"] = spec.unit.upper() if spec.unit else "X"
        group.add_argument(_flag(name), **kw)
    p.add_argument("--force", action="store_true", help="overwrite existing output files")
    p.add_argument("-q", "--quiet", action="store_true", help="no notes on standard error")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..files import check_outputs
    from ..io.raw import check_against_model, read_raw
    from ..io.spectra import write_jcamp, write_spectrum_text
    from ..model.schema import keys_of
    from ..processing import ProcessingOptions, combine_stepped, process, processing_record
    from ..processing.options import ProcessingError

    out = Path(args.output)
    if out.suffix.lower() not in OUTPUT_SUFFIXES:
        raise CliError(f"-o {args.output!r}: the spectrum is written as {', '.join(OUTPUT_SUFFIXES)}; "
                       "give a name ending in one of them")
    outputs = [(out, "spectrum")]
    if args.plot:
        from ..plotting.spectrum import PLOT_SUFFIXES
        outputs.append((Path(args.plot), "plot", PLOT_SUFFIXES))
    inputs = [Path(d) for d in args.data] + ([Path(args.model)] if args.model else []) \
        + ([Path(args.reference_data)] if args.reference_data else [])
    check_outputs(outputs, force=args.force, protect=inputs)

    table = {}
    model = None
    if args.model:
        from ..model.modelfile import load_model
        model = load_model(args.model)
        table.update(dict(model.processing))
    for name in keys_of("processing"):
        value = getattr(args, f"opt_{name}")
        if value is not None:
            table[name] = value
    if args.reference_data:
        table["referencing"] = "spectrometer"      # process() makes it "secondary" from the reference data
    opts = ProcessingOptions.from_table(table)
    if args.reference_data and opts.reference_shift_ppm is None:
        raise ProcessingError("--reference-data needs --reference-shift-ppm (the shift of the reference compound's "
                              "tallest line on the unified scale)")

    carriers = args.carrier_mhz or [None]
    if len(carriers) not in (1, len(args.data)):
        raise CliError(f"--carrier-mhz given {len(carriers)} times for {len(args.data)} DATA; give it once for all, "
                       "or once per DATA in the same order")
    if len(carriers) == 1:
        carriers = carriers * len(args.data)
    spectra = []
    for k, d in enumerate(args.data):
        raw = read_raw(d, dwell_us=args.dwell_us, nucleus=args.nucleus, carrier_mhz=carriers[k],
                       base_mhz=args.base_mhz, expect="any" if opts.row is not None else "fid",
                       conjugate=args.conjugate)
        if model is not None:
            where = "" if len(args.data) == 1 else f"sub-spectrum {k + 1}"
            check_against_model(raw, model.nucleus.name, model.measurement.field_tesla, where)
        spectra.append(process(raw, opts, reference=args.reference_data))
    spec = spectra[0] if len(spectra) == 1 else combine_stepped(spectra, args.combine)

    written = []
    try:
        if out.suffix.lower() in (".jdx", ".dx"):
            written.append(write_jcamp(out, spec, force=args.force))
        else:
            written.append(write_spectrum_text(out, spec, force=args.force))
        if args.plot:
            from ..plotting.processed import save_processed_plot
            written.append(save_processed_plot(spec, args.plot, force=args.force, protect=inputs))
    except BaseException:
        for p in written:
            try:
                Path(p).unlink()
            except OSError:
                pass
        raise
    if not args.quiet:
        rec = processing_record(spectra[0])
        ph = rec.get("phase", {})
        line = f"{spec.nucleus or 'nucleus unknown'}: {spec.hz.size} points, 0 ppm at {spec.nu_ref_hz / 1e6:.7f} MHz"
        if "phase0_deg" in ph:
            line += f"; phase {ph['phase0_deg']:.2f} deg + {ph['phase1_deg']:.2f} deg across the window ({ph['mode']})"
        print(line, file=sys.stderr)
        bl = rec.get("baseline", {})
        if bl.get("mode", "none") != "none":
            print(f"baseline: {bl.get('note')}", file=sys.stderr)
            for hi, lo in bl.get("regions_ppm", [])[:12]:
                print(f"  signal-free {hi:.2f} to {lo:.2f} ppm", file=sys.stderr)
        for p in written:
            print(f"wrote {p}", file=sys.stderr)
    return 0
