"""What every command shares: one-line errors, notes, ranges, the lineshape library, the compile note."""

from __future__ import annotations

import contextvars
import math
import sys
from pathlib import Path

__all__ = ["terminal_progress", "CliError", "SPINNING_CAUTION", "note", "compile_note", "end_compile_note",
           "parse_range", "numbers",
           "add_cache_options", "library", "kernel_store", "interrupted", "outputs_together", "signal_handlers",
           "warning_lines"]

SPINNING_CAUTION = (
    "caution: simulated spinning rates say nothing about what a rotor can take; never exceed the "
    "manufacturer's rated spinning rate for your rotor, cap and probe (rotor failure can injure), "
    "and follow your laboratory's rules."
)

#: True while the command line's main runs a command (it owns the process's signal handlers then)
_COMMAND_RUNNING: contextvars.ContextVar = contextvars.ContextVar("powderspin_command_running", default=False)


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

    listener = _FirstCompile()
    event.register("numba:compile", listener)
    # kept with this command's arguments, so that the command's end (end_compile_note) takes it off again: a
    # process that runs many commands (a notebook, the tests) does not collect listeners
    vars(args).setdefault("_compile_listeners", []).append(listener)


def end_compile_note(args) -> None:
    """Take off the compile listeners :func:`compile_note` put on for this command."""
    listeners = vars(args).pop("_compile_listeners", []) if hasattr(args, "__dict__") else []
    if listeners:
        from numba.core import event

        for listener in listeners:
            event.unregister("numba:compile", listener)


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


def _library_source(args) -> tuple[str | None, str]:
    """The library folder asked for and how it was named: ``--cache``, ``$POWDERSPIN_CACHE`` or the default."""
    import os

    from ..disorder.library import ENV_VAR

    path = getattr(args, "cache", None)
    if path is not None:
        return path, f"--cache {path!r}"
    env = os.environ.get(ENV_VAR, "")
    if env.strip():
        return env, f"${ENV_VAR} = {env!r}"
    return None, "the lineshape library"


def _writable_folder(p: Path) -> str | None:
    """Why the folder ``p`` (or the folder that would hold it) cannot be written, else None."""
    import errno

    from ..files import folder_write_error

    probe = p
    while not probe.exists() and probe != probe.parent:
        probe = probe.parent
    if not probe.is_dir():
        return f"{str(probe)!r} is not a folder"
    e = folder_write_error(probe)
    if e is None:
        return None
    if e.errno == errno.EROFS:
        return "it is on a read-only file system"
    return f"it cannot be written ({e.strerror or e})"


def library(args, *, must_write: bool = False):
    """The lineshape library named by --cache (else $POWDERSPIN_CACHE, else the user cache folder).

    A folder that is a file is an error, whichever way it was named; one that
    cannot be written is an error when ``must_write`` (``cache clear``), and
    otherwise a note (the kernels are then kept in memory only: see
    :func:`kernel_store`).
    """
    from ..disorder.library import LineshapeLibrary

    path, named = _library_source(args)
    lib = LineshapeLibrary(path)
    p = lib.path
    if (p.exists() or p.is_symlink()) and not p.is_dir():
        raise CliError(f"{named} is {'a file' if p.is_file() else 'not a folder'}; give a folder for the lineshape "
                       "library")
    if must_write:
        problem = _writable_folder(p)
        if problem is not None:
            raise CliError(f"{named} ({p}): {problem}")
    return lib


def kernel_store(args):
    """The kernel store of a command: --no-cache keeps kernels in memory only, and so does a library that cannot
    be written (with a note naming how the folder was chosen)."""
    from ..disorder.store import KernelStore, default_kernel_store

    if getattr(args, "no_cache", False):
        return KernelStore(None)
    lib = library(args)
    problem = _writable_folder(lib.path)
    if problem is not None:
        _, named = _library_source(args)
        note(args, f"note: {named} ({lib.path}): {problem}; kernels are kept in memory for this run only")
        return KernelStore(None)
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


def add_dask_options(p, work: str) -> None:
    """``--workers N`` and ``--scheduler ADDRESS``: run ``work`` (e.g. "run the starts") on a Dask client.

    One wording for every command that runs independent evaluations on Dask (``fit --global``, ``plan``);
    :func:`check_dask_options` checks them and :func:`dask_mapper` opens the client.
    """
    p.add_argument("--workers", type=int, metavar="N",
                   help=f"{work} on a local Dask cluster of N single-threaded processes")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help=f"{work} on a running Dask scheduler (e.g. tcp://head-node:8786)")


def check_dask_options(args) -> bool:
    """Refuse ``--workers`` with ``--scheduler`` and fewer than 1 worker; whether either was given."""
    workers, scheduler = getattr(args, "workers", None), getattr(args, "scheduler", None)
    if workers is not None and scheduler is not None:
        raise CliError("--workers and --scheduler: give one (the scheduler's cluster has its own workers)")
    if workers is not None and workers < 1:
        raise CliError(f"--workers {workers}: give at least 1 worker process")
    return workers is not None or scheduler is not None


def dask_mapper(args, stack):
    """With ``--workers``/``--scheduler``: a ``map`` that runs on a Dask client (else None).

    The client is :func:`powderspin.series.runner.series_client` (the series' one) and the map
    :func:`powderspin.series.runner.dask_map`.  The client starts at the first call (so the checks of the
    command's inputs refuse bad ones before any cluster starts) and is entered on ``stack``: it closes when
    ``stack`` does.
    """
    if getattr(args, "workers", None) is None and getattr(args, "scheduler", None) is None:
        return None
    from ..series.runner import dask_map, series_client

    opened = []

    def run(function, items, **options):
        if not opened:
            opened.append(dask_map(stack.enter_context(series_client(workers=args.workers,
                                                                     scheduler=args.scheduler))))
        return opened[0](function, items, **options)

    return run


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


def _finish_without_interrupts() -> None:
    """Once every output is in place, the command finishes: later SIGINT/SIGTERM are ignored (main restores them).

    Only inside :class:`signal_handlers` (the command line's ``main``), which puts the handlers back.
    """
    import signal
    import threading

    if _COMMAND_RUNNING.get() and threading.current_thread() is threading.main_thread():
        for sig in (signal.SIGINT, getattr(signal, "SIGTERM", None)):
            if sig is not None:
                signal.signal(sig, signal.SIG_IGN)


def outputs_together():
    """The output transaction of a command: every file it writes appears together at the end, or none does.

    After the files are in place the rest of the command (its "wrote ..."
    lines) cannot be interrupted, so that status 130 always means that
    nothing was written.
    """
    from ..files import output_transaction

    return output_transaction(on_commit=_finish_without_interrupts)


class signal_handlers:
    """While a command runs, SIGTERM stops it like Ctrl-C (a KeyboardInterrupt); the old handlers come back after."""

    def __enter__(self):
        import signal
        import threading

        self.token = _COMMAND_RUNNING.set(True)
        self.saved = {}
        if threading.current_thread() is not threading.main_thread():
            return self
        for sig in (signal.SIGINT, getattr(signal, "SIGTERM", None)):
            if sig is not None:
                self.saved[sig] = signal.getsignal(sig)
        if getattr(signal, "SIGTERM", None) is not None:
            signal.signal(signal.SIGTERM, _terminate)
        if self.saved.get(signal.SIGINT) is signal.default_int_handler:  # not when the caller ignores Ctrl-C
            signal.signal(signal.SIGINT, _interrupt)
        return self

    def __exit__(self, *exc):
        import signal

        for sig, handler in self.saved.items():
            if handler is not None:
                signal.signal(sig, handler)
        _COMMAND_RUNNING.reset(self.token)
        return False


class Terminated(KeyboardInterrupt):
    """SIGTERM, raised where Ctrl-C would raise KeyboardInterrupt."""


def _in_finaliser(frame) -> bool:
    """True when an exception raised in the interrupted code would be printed and swallowed instead of stopping it.

    That is a finaliser (``__del__``), or Python code that C calls back through
    ctypes: the compiler's object-cache hooks in llvmlite run while numba
    compiles a kernel, and an exception there is "ignored" (a traceback on
    stderr, and the command goes on as if Ctrl-C had not been pressed).  Also
    the short steps of :data:`powderspin.files.UNINTERRUPTED_CODE`, which
    would leave a trial file behind if cut.
    """
    from ..files import UNINTERRUPTED_CODE

    while frame is not None:
        code = frame.f_code
        if code.co_name == "__del__" or "llvmlite" in code.co_filename or code in UNINTERRUPTED_CODE:
            return True
        frame = frame.f_back
    return False


def _later(signum: int) -> None:
    """Deliver the signal again in a moment (from a helper thread; the main thread handles it)."""
    import os
    import threading
    import time

    def again():
        time.sleep(0.05)
        os.kill(os.getpid(), signum)

    threading.Thread(target=again, daemon=True).start()


def _interrupt(signum, frame):
    if _in_finaliser(frame):  # an exception raised there would be printed and ignored: try again outside it
        _later(signum)
        return
    raise KeyboardInterrupt()


def _terminate(signum, frame):
    if _in_finaliser(frame):
        _later(signum)
        return
    raise Terminated()


class warning_lines:
    """While a command runs, Python warnings print as one ``warning: ...`` line (no source line, no category)."""

    def __enter__(self):
        import warnings

        self.saved = warnings.showwarning

        def show(message, category, filename, lineno, file=None, line=None):
            print(f"warning: {' '.join(str(message).split())}", file=file or sys.stderr)

        warnings.showwarning = show
        return self

    def __exit__(self, *exc):
        import warnings

        warnings.showwarning = self.saved
        return False
