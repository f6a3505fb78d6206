"""What every command shares: one-line errors, notes, ranges, the lineshape library, the compile note."""

from __future__ import annotations

import math
import sys
from pathlib import Path

__all__ = ["terminal_progress", "CliError", "SPINNING_CAUTION", "note", "compile_note", "parse_range", "numbers",
           "add_cache_options", "library", "kernel_store", "interrupted"]

SPINNING_CAUTION = (
    "caution: simulated spinning rates say nothing about what a rotor can take; never exceed the "
    "manufacturer's rated spinning rate for your rotor, cap and probe (rotor failure can injure), "
    "and follow your laboratory's rules."
)

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


def note(args, text: str) -> None:
    if not getattr(args, "quiet", False):
        print(text, file=sys.stderr)


def compile_note(args) -> None:
    """Say once, when (and only when) one of powderspin's kernels actually starts compiling.

    A listener on numba's ``numba:compile`` event, which numba raises only
    for a real compilation, never when it loads a kernel from its on-disk
    cache; so runs whose kernels are all cached print nothing.
    """
    try:
        from numba.core import event
    except Exception:  # the note is a courtesy; never let it stop a run
        return

    class _FirstCompile(event.Listener):
        said = False

        def on_start(self, ev):
            disp = (ev.data or {}).get("dispatcher") if isinstance(ev.data, dict) else None
            module = getattr(getattr(disp, "py_func", None), "__module__", "") or ""
            if not self.said and module.startswith("powderspin"):
                self.said = True
                print("note: compiling the numerical kernels for the first time (up to a minute); later runs "
                      "reuse them", file=sys.stderr, flush=True)

        def on_end(self, ev):
            pass

    event.register("numba:compile", _FirstCompile())


def parse_range(text: str | None, what: str):
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


def library(args):
    """The lineshape library named by --cache (else $POWDERSPIN_CACHE, else the user cache folder)."""
    from ..disorder.library import LineshapeLibrary

    path = getattr(args, "cache", None)
    if path is not None:
        p = Path(path)
        if p.exists() and not p.is_dir():
            raise CliError(f"--cache {path!r} is a file; give a folder for the lineshape library")
    return LineshapeLibrary(path)


def kernel_store(args):
    """The kernel store of a command: --no-cache keeps kernels in memory only."""
    from ..disorder.store import KernelStore, default_kernel_store

    if getattr(args, "no_cache", False):
        return KernelStore(None)
    lib = library(args)
    return default_kernel_store(lib.path)


def numbers(values, what: str, unit: str) -> list | None:
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


def add_cache_options(p) -> None:
    g = p.add_mutually_exclusive_group()
    g.add_argument("--cache", metavar="DIR",
                   help="lineshape library folder for distributed-site kernels (default $POWDERSPIN_CACHE or the "
                        "user cache folder; see 'powderspin cache path')")
    g.add_argument("--no-cache", action="store_true", help="do not read or write the lineshape library")


def interrupted(e: BaseException) -> bool:
    """True when a KeyboardInterrupt is somewhere in the cause/context chain of ``e``."""
    seen = set()
    while e is not None and id(e) not in seen:
        if isinstance(e, KeyboardInterrupt):
            return True
        seen.add(id(e))
        e = e.__cause__ or e.__context__
    return False


def terminal_progress(args, delay: float = 2.0):
    """The progress bars of a command: on a terminal only, never with ``-q``.

    ``POWDERSPIN_PROGRESS=always`` shows them on any stream (logs, tests that
    watch a command's progress), ``never`` hides them.
    """
    import os

    from ..progress import TerminalProgress

    mode = os.environ.get("POWDERSPIN_PROGRESS", "auto").strip().lower()
    quiet = getattr(args, "quiet", False) or mode == "never"
    return TerminalProgress(quiet, delay=delay, always=mode == "always")
