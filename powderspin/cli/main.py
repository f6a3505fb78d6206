"""Command line: a thin layer over the Python API.

    powderspin simulate MODEL.toml -o OUT.csv [--plot OUT.png] [--sidebands [FILE]] [--force] [-q]
                        [--cache DIR | --no-cache]
    powderspin fit MODEL.toml [DATA or RAW FOLDER ...] -o RESULT.toml [--report FIT.png] [--global] [--posterior]
                   [--region A:B]... [--noise-region A:B] [--axis ppm|hz|khz] [--force] [-q]
                   [--cache DIR | --no-cache] [--workers N | --scheduler ADDRESS] (with --global)
    powderspin plan MODEL.toml [--fields T ...] [--rotors NAME ...] [--rotor-table FILE] [--max-rate HZ]
                    [--rates HZ ...] [--threshold 0.01] [--snr 100] [--json OUT.json] [--plot OUT.png]
                    [--force] [-q]
    powderspin process DATA [DATA ...] -o SPECTRUM.csv [--plot FIG] [--model MODEL.toml] [--combine skyline|sum]
                       [--exponential-hz L] [--phase auto|entropy|manual|none] [--baseline ...] ... [--force] [-q]
    powderspin series MODEL.toml FILES... -o DIR [--manifest CSV] [--variable COLUMN] [--chain]
                      [--workers N | --scheduler ADDRESS] [--force] [--region A:B]... [--noise-region A:B] [-q]
    powderspin nuclide 27Al --field 14.1 | --list
    powderspin cache info | path | clear [--cache DIR]
    powderspin demo [--out DIR]
    powderspin explore MODEL.toml [DATA ...] [--port N] [--host 127.0.0.1] [--no-browser]
    powderspin --version

Every error is one line on standard error (``error: ...``) with exit status 2;
Ctrl-C or SIGTERM stops at once with status 130 and leaves no output: every
file of a command is written together at its end, or none is.  Outputs
are checked before any computing and written atomically; an existing file is
replaced only with ``--force`` and an input file never.
"""

from __future__ import annotations

import argparse
import os
import sys

from . import cache, demo, explore, fit, nuclide, plan, process, series, simulate
from .common import CliError, Terminated, end_compile_note, interrupted, signal_handlers, warning_lines

__all__ = ["main", "build_parser", "console"]


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

    for command in (simulate, cache, fit, series, plan, nuclide, process, demo, explore):
        command.add_parser(sub)
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
    # Idle OpenMP threads of numba's "omp" threading layer spin by default, which on a shared or busy machine
    # makes every parallel kernel wait for descheduled spinners (measured 3-17x slower); sleeping waits cost
    # microseconds per kernel.  Set before numba starts its thread pool; a user's own setting wins.  The
    # library itself changes no environment variable on import.
    os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as e:  # argparse: usage errors exit 2 after one message, --help/--version exit 0
        return int(e.code or 0)
    try:
        with signal_handlers(), warning_lines():
            return _run(args)
    finally:
        end_compile_note(args)


def _interrupted_line(e: BaseException) -> str:
    what = "terminated (SIGTERM)" if isinstance(e, Terminated) else "interrupted"
    return f"{what}; no output was written"


def _run(args) -> int:
    try:
        return args.func(args)
    except KeyboardInterrupt as e:  # Ctrl-C, or SIGTERM (raised as a KeyboardInterrupt subclass)
        print(_interrupted_line(e), file=sys.stderr)
        return 130
    except BrokenPipeError:  # the reader of standard output went away (e.g. `| head`): stop quietly
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except SystemError as e:  # an interrupt that arrives inside a compiled kernel
        if interrupted(e):
            print("interrupted; no output was written", file=sys.stderr)
            return 130
        raise
    except (ValueError, OSError, CliError) as e:  # input errors, files: one clear line, no traceback
        text = getattr(e, "cli_text", None) or str(e)  # the command line's wording (flags, not keywords)
        print(f"error: {' '.join(text.split())}", file=sys.stderr)
        return 2


def console(argv=None) -> None:  # pragma: no cover - the program's entry point, run in subprocess tests
    """The ``powderspin`` program: :func:`main`, then exit with its status.

    After an interrupt the process ends at once (``os._exit``): objects left
    half-built by the interrupt (inside the compiler's bindings, say) are not
    finalised, so their complaints cannot follow the one line already printed.
    Every temporary file is gone by then.
    """
    status = main(argv)
    if status == 130:
        for stream in (sys.stdout, sys.stderr):
            try:
                stream.flush()
            except (OSError, ValueError):
                pass
        os._exit(130)
    sys.exit(status)


if __name__ == "__main__":  # pragma: no cover
    console()
