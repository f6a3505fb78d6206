"""Command line: a thin layer over the Python API.

    powderspin simulate MODEL.toml -o OUT.csv [--plot OUT.png] [--sidebands [FILE]] [--force] [-q]
                        [--cache DIR | --no-cache]
    powderspin fit MODEL.toml [DATA ...] -o RESULT.toml [--report FIT.png] [--global] [--posterior]
                   [--region A:B]... [--noise-region A:B] [--axis ppm|hz|khz] [--force] [-q]
                   [--cache DIR | --no-cache] [--workers N | --scheduler ADDRESS] (with --global)
    powderspin plan MODEL.toml [--fields T ...] [--rotors NAME ...] [--rotor-table FILE] [--max-rate HZ]
                    [--rates HZ ...] [--threshold 0.01] [--snr 100] [--json OUT.json] [--plot OUT.png]
                    [--force] [-q]
    powderspin series MODEL.toml FILES... -o DIR [--manifest CSV] [--variable COLUMN] [--chain]
                      [--workers N | --scheduler ADDRESS] [--force] [--region A:B]... [--noise-region A:B] [-q]
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
import os
import sys

from . import cache, demo, fit, nuclide, plan, series, simulate
from .common import CliError, interrupted

__all__ = ["main", "build_parser"]


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

    for command in (simulate, cache, fit, series, plan, nuclide, demo):
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
        return args.func(args)
    except KeyboardInterrupt:
        print("interrupted; no output was written for the unfinished step", file=sys.stderr)
        return 130
    except BrokenPipeError:  # the reader of standard output went away (e.g. `| head`): stop quietly
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except SystemError as e:  # an interrupt that arrives inside a compiled kernel
        if interrupted(e):
            print("interrupted; no output was written for the unfinished step", file=sys.stderr)
            return 130
        raise
    except (ValueError, OSError, CliError) as e:  # input errors, files: one clear line, no traceback
        print(f"error: {e}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
