"""Writing output files safely: checked before any work, written atomically.

Every file powderspin writes (CSV, figures, model files, fit results, cache
entries) goes through :func:`atomic_output`: the content is written to a
temporary file in the destination folder, which is moved into place with an
atomic rename only when it is complete.  A reader never sees half a file, an
error or Ctrl-C leaves nothing behind, and an existing file is never replaced
unless the caller asks for it.  New files get the permissions the user's
umask allows, like files made by other tools (a temporary file alone would be
private, mode 0600).

:func:`check_outputs` checks a command's outputs before any computing starts,
so that a bad output name costs nothing.

A command that writes several files (a spectrum and its figure, a plan's JSON
and plot, a fit's result, CSV files and report) opens one
:func:`output_transaction`: every atomic write inside it goes to a temporary
file beside its destination, and only when the block ends without error are
all of them moved into place together (with interrupts held back for those
few renames).  An error, a full disk, Ctrl-C or SIGTERM anywhere before that
leaves none of them, and a file replaced with ``force`` is put back if a later
rename fails.
"""

from __future__ import annotations

import contextlib
import contextvars
import os
import signal
import sys
import tempfile
import threading
from pathlib import Path
from typing import Callable, Iterable, Iterator

__all__ = [
    "OutputExistsError",
    "OutputPathError",
    "STDOUT",
    "check_outputs",
    "atomic_output",
    "write_text_atomic",
    "write_via",
    "OutputTransaction",
    "output_transaction",
    "output_path",
    "folder_write_error",
    "write_texts_together",
]

#: the output name that means standard output (text outputs only)
STDOUT = "-"


class OutputExistsError(FileExistsError):
    """An output file exists and overwriting was not requested.

    A ``FileExistsError`` subclass; the message names the file.

    Parameters
    ----------
    message : str
        The file and how to allow overwriting (``force=True`` / ``--force``).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_text_atomic(pathlib.Path(d) / "a.txt", "x")
    ...     try:
    ...         write_text_atomic(p, "y")
    ...     except OutputExistsError:
    ...         print("refused")
    refused
    """


class OutputPathError(OSError):
    """An output cannot be written where asked (a folder, no permission, bad suffix, ...).

    An ``OSError`` subclass whose message names the user's path (never a
    temporary file).

    Parameters
    ----------
    message : str

    Examples
    --------
    >>> try:
    ...     check_outputs([("/", "output")])
    ... except OutputPathError as e:
    ...     print(e)
    output '/' is a directory; give a file name
    """


def output_path(path, role: str = "output") -> Path:
    """An output's name as a Path; None, arrays and other objects are refused naming the role.

    Examples
    --------
    >>> output_path("a.csv").name
    'a.csv'
    >>> try:
    ...     output_path(None, "plot")
    ... except OutputPathError as e:
    ...     print(e)
    plot must be a file name (text or pathlib.Path), got None
    """
    if not isinstance(path, (str, os.PathLike)) or isinstance(path, bytes):
        got = "None" if path is None else type(path).__name__
        raise OutputPathError(f"{role} must be a file name (text or pathlib.Path), got {got}")
    text = os.fspath(path)
    if not str(text).strip():
        raise OutputPathError(f"{role} is an empty name; give a file name")
    return Path(text)


def _umask() -> int:
    """The process umask, read without changing it where the system allows (Linux /proc)."""
    try:
        with open("/proc/self/status", encoding="ascii", errors="replace") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError, IndexError):
        pass
    mask = os.umask(0o022)  # no other portable way to read it
    os.umask(mask)
    return mask


def _same_file(a: Path, b: Path) -> bool:
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b)
    except OSError:
        return False


def check_outputs(outputs: Iterable, *, force: bool = False, protect: Iterable = (),
                  make_folders: bool = True) -> None:
    """Check output paths before any work is done.

    Parameters
    ----------
    outputs : iterable of (path, role) or (path, role, suffixes)
        Each output, what it is (for messages: ``"output"``, ``"plot"``,
        ``"report"``, ...) and optionally the allowed suffixes (e.g.
        ``(".png", ".pdf", ".svg")``).  ``"-"`` (standard output) is allowed
        only for roles without suffix limits.
    force : bool, optional
        Existing files may be replaced.
    protect : iterable of path, optional
        Input files that must never be overwritten, even with ``force``.
    make_folders : bool, optional
        Missing folders of an output will be made (the default of the
        Python API).  The command line passes False: an output in a folder
        that does not exist is refused (a mistyped folder name should not
        quietly become a new folder).

    Raises
    ------
    OutputExistsError
        An output exists and ``force`` is False, or is an input file (never
        replaced, even with ``force``).
    OutputPathError
        An output is a folder, named twice, has a suffix that is not
        allowed, its folder does not exist (``make_folders=False``) or
        cannot be written.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     check_outputs([(pathlib.Path(d) / "a.csv", "output"), (pathlib.Path(d) / "a.png", "plot", (".png",))])
    ...     try:
    ...         check_outputs([(pathlib.Path(d) / "a.csv", "output"), (pathlib.Path(d) / "a.csv", "plot")])
    ...     except OutputPathError as e:
    ...         print(str(e).split(":")[0])
    plot '...a.csv' is the same file as output '...a.csv'
    """
    seen: dict[str, tuple[str, str]] = {}
    protect = [Path(p) for p in protect]
    for entry in outputs:
        path, role = entry[0], entry[1]
        suffixes = tuple(entry[2]) if len(entry) > 2 and entry[2] else ()
        text = str(output_path(path, role)) if not (isinstance(path, str) and path == STDOUT) else STDOUT
        if text == STDOUT:
            if suffixes:
                raise OutputPathError(f"{role} cannot be standard output ('-'); give a file name ending in "
                                      + " or ".join(suffixes))
            if STDOUT in seen:
                raise OutputPathError(f"{role} '-': standard output is already used by {seen[STDOUT][0]}")
            seen[STDOUT] = (role, text)
            continue
        p = Path(text)
        if suffixes and p.suffix.lower() not in suffixes:
            raise OutputPathError(
                f"{role} {text!r} has the suffix {p.suffix or '(none)'!r}; allowed: {', '.join(suffixes)}"
            )
        key = os.path.normcase(os.path.abspath(text))
        if key in seen:
            other_role, other = seen[key]
            raise OutputPathError(f"{role} {text!r} is the same file as {other_role} {other!r}: give another name")
        seen[key] = (role, text)
        if p.is_dir():
            raise OutputPathError(f"{role} {text!r} is a directory; give a file name")
        for q in protect:
            if str(q) and (_same_file(p, q) or os.path.abspath(text) == os.path.abspath(q)):
                raise OutputExistsError(f"{role} {text!r} is an input file (it is read from); choose another name")
        if p.exists() or p.is_symlink():
            if not force:
                raise OutputExistsError(f"{role} {text!r} exists; pass --force (force=True) to overwrite it")
            if not p.is_file():
                raise OutputPathError(f"{role} {text!r} exists and is not a regular file; give another name")
        parent = p.parent if str(p.parent) else Path(".")
        if not make_folders and not parent.is_dir():
            raise OutputPathError(f"{role} {text!r}: the folder {str(parent)!r} does not exist; make it first "
                                  "(outputs are never written into folders made on the fly)")
        probe = parent
        while not probe.exists() and probe != probe.parent:
            probe = probe.parent
        if not probe.is_dir():
            raise OutputPathError(f"{role} {text!r}: {str(probe)!r} is not a directory")
        e = folder_write_error(probe)  # the only sure test of a folder is to make (and remove) a file in it
        if e is not None:
            raise OutputPathError(f"{role} {text!r} cannot be written: {e.strerror or e}")


def folder_write_error(folder) -> OSError | None:
    """Make a file in ``folder`` and remove it: the error when that fails, else None.

    The command line's signal handlers hold Ctrl-C and SIGTERM back while this
    runs (:data:`UNINTERRUPTED_CODE`), so an interrupt never leaves the trial
    file behind.

    Parameters
    ----------
    folder : str or pathlib.Path

    Returns
    -------
    OSError or None

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     print(folder_write_error(d))
    None
    """
    try:
        fd, trial = tempfile.mkstemp(prefix=".powderspin-check-", dir=str(folder))
    except OSError as e:
        return e
    closed = None
    try:
        os.close(fd)
    except OSError as e:
        closed = e
    try:
        os.unlink(trial)
    except OSError as e:
        return e
    return closed


@contextlib.contextmanager
def atomic_output(path, *, force: bool = False, protect: Iterable = (), role: str = "output",
                  suffix: str = ".part", prefix: str | None = None, sync: bool = False,
                  checked: bool = True) -> Iterator[Path]:
    """Give a temporary path to write; move it to ``path`` when the block succeeds.

    Parameters
    ----------
    path : str or pathlib.Path
        Destination; missing parent folders are made.
    force : bool, optional
        Replace an existing file.
    protect : iterable of path, optional
        Files never to replace (the inputs).
    role : str, optional
        What the file is, for messages.
    suffix : str, optional
        Suffix of the temporary file (some writers pick the format from it).
    prefix : str, optional
        Prefix of the temporary file (default ``".<name>."``, hidden).
    sync : bool, optional
        Flush the file to disk (``fsync``) before the rename, for files that
        other processes rely on (the lineshape library's entries).
    checked : bool, optional
        Check the output first (:func:`check_outputs`); a writer filling its
        own folder (the lineshape library) may skip this.

    Yields
    ------
    pathlib.Path
        The temporary file (already created, empty) in the destination folder.

    Raises
    ------
    OutputExistsError, OutputPathError
        As :func:`check_outputs`; errors of the OS name ``path``, not the
        temporary file.  On any error or interrupt the temporary file is
        removed and ``path`` is untouched.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     dest = pathlib.Path(d) / "out.txt"
    ...     with atomic_output(dest) as tmp:
    ...         _ = tmp.write_text("done")
    ...     dest.read_text()
    'done'
    """
    if checked:
        check_outputs([(path, role)], force=force, protect=protect)
    p = Path(path)
    try:
        if str(p.parent) and not p.parent.exists():
            p.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{p.name}." if prefix is None else prefix, suffix=suffix,
                                   dir=str(p.parent if str(p.parent) else "."))
        os.close(fd)
    except OSError as e:
        raise OutputPathError(f"{role} {str(p)!r} cannot be written: {e.strerror or e}") from None
    tmp_path = Path(tmp)
    transaction = _CURRENT.get() if checked else None
    staged = False
    try:
        yield tmp_path
        os.chmod(tmp_path, 0o666 & ~_umask())
        if sync:
            with open(tmp_path, "rb") as fh:
                os.fsync(fh.fileno())
        if p.exists() and not force:  # appeared while we were writing
            raise OutputExistsError(f"{role} {str(p)!r} exists; pass --force (force=True) to overwrite it")
        if transaction is not None:
            transaction._stage(tmp_path, p, role, force)
            staged = True
        else:
            os.replace(tmp_path, p)
    except OSError as e:
        if isinstance(e, (OutputExistsError, OutputPathError)):
            raise
        raise OutputPathError(f"{role} {str(p)!r} cannot be written: {e.strerror or e}") from None
    finally:
        if not staged:
            with contextlib.suppress(OSError):
                if tmp_path.exists():
                    tmp_path.unlink()


def write_text_atomic(path, text: str, *, force: bool = False, protect: Iterable = (),
                      role: str = "output") -> Path | None:
    """Write a text file atomically (``"-"``: standard output); never overwrite without ``force``.

    Parameters
    ----------
    path : str or pathlib.Path
        Output file, or ``"-"`` for standard output.
    text : str
        Content, written as UTF-8 with ``\\n`` line ends.
    force : bool, optional
        Overwrite an existing file.
    protect : iterable of path, optional
        Files that must never be overwritten (e.g. the input model).
    role : str, optional
        What the file is, for messages.

    Returns
    -------
    pathlib.Path or None
        The file written (None for standard output).

    See Also
    --------
    atomic_output : the general form, for writers that take a file name.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_text_atomic(pathlib.Path(d) / "sub" / "a.txt", "one")
    ...     p = write_text_atomic(p, "two", force=True)
    ...     p.read_text()
    'two'
    """
    if isinstance(path, str) and path == STDOUT:
        sys.stdout.write(text)
        sys.stdout.flush()
        return None
    with atomic_output(path, force=force, protect=protect, role=role) as tmp:
        with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
    return Path(path)


def write_via(path, writer: Callable[[Path], None], *, force: bool = False, protect: Iterable = (),
              role: str = "output") -> Path:
    """Write a file with a function that takes a file name (matplotlib, h5py), atomically.

    Parameters
    ----------
    path : str or pathlib.Path
        Destination.
    writer : callable
        ``writer(tmp_path)`` writes the whole file to ``tmp_path`` (which has
        the destination's suffix).
    force, protect, role
        As :func:`atomic_output`.

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_via(pathlib.Path(d) / "x.bin", lambda t: t.write_bytes(b"ok"))
    ...     p.read_bytes()
    b'ok'
    """
    check_outputs([(path, role)], force=force, protect=protect)
    p = Path(path)
    with atomic_output(p, force=force, protect=protect, role=role, suffix=p.suffix or ".part") as tmp:
        writer(tmp)
    return p


#: the transaction that atomic writes of this context join (None: each write is moved into place at once)
_CURRENT: contextvars.ContextVar = contextvars.ContextVar("powderspin_output_transaction", default=None)
_HELD_SIGNALS = {signal.SIGINT, signal.SIGTERM} if hasattr(signal, "SIGTERM") else {signal.SIGINT}


class OutputTransaction:
    """Files written together: staged as temporary files, moved into place all at once or not at all.

    Made by :func:`output_transaction`; see there.

    Parameters
    ----------
    on_commit : callable, optional
        Called with no arguments right after every file is in place, while
        interrupts are still held back (the command line uses it to make the
        rest of a finished command uninterruptible).

    Attributes
    ----------
    written : list of pathlib.Path
        The destinations moved into place by :meth:`commit`, in order.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     with output_transaction() as t:
    ...         _ = write_text_atomic(pathlib.Path(d) / "a.txt", "one")
    ...         staged = sorted(q.name for q in pathlib.Path(d).iterdir() if not q.name.startswith("."))
    ...     print(staged, [q.name for q in t.written])
    [] ['a.txt']
    """

    def __init__(self, on_commit: Callable[[], None] | None = None):
        self._staged: list[tuple[Path, Path, str, bool]] = []
        self.written: list[Path] = []
        self._on_commit = on_commit

    def _stage(self, tmp: Path, dest: Path, role: str, force: bool) -> None:
        self._staged.append((tmp, dest, role, force))

    def discard(self) -> None:
        """Remove every staged temporary file; no destination is touched."""
        for tmp, *_ in self._staged:
            with contextlib.suppress(OSError):
                tmp.unlink()
        self._staged = []

    def commit(self) -> list[Path]:
        """Move every staged file into place; on any failure put everything back as it was.

        Returns
        -------
        list of pathlib.Path
            The destinations, in the order they were written.

        Raises
        ------
        OutputExistsError, OutputPathError
            A destination appeared meanwhile (without ``force``) or a rename
            failed; no destination is changed then.
        """
        hold = threading.current_thread() is threading.main_thread() and hasattr(signal, "pthread_sigmask")
        old_mask = signal.pthread_sigmask(signal.SIG_BLOCK, _HELD_SIGNALS) if hold else None
        done: list[tuple[Path, Path | None]] = []  # (destination, backup of the file it replaced)
        try:
            try:
                for tmp, dest, role, force in self._staged:
                    if (dest.exists() or dest.is_symlink()) and not force:
                        raise OutputExistsError(f"{role} {str(dest)!r} exists; pass --force (force=True) to "
                                                "overwrite it")
                for tmp, dest, role, force in self._staged:
                    backup = None
                    if dest.exists():
                        fd, name = tempfile.mkstemp(prefix=f".{dest.name}.", suffix=".old", dir=str(dest.parent))
                        os.close(fd)
                        backup = Path(name)
                        os.replace(dest, backup)
                    try:
                        os.replace(tmp, dest)
                    except OSError as e:
                        if backup is not None:
                            os.replace(backup, dest)
                        raise OutputPathError(f"{role} {str(dest)!r} cannot be written: {e.strerror or e}") from None
                    done.append((dest, backup))
            except BaseException:
                for dest, backup in reversed(done):
                    with contextlib.suppress(OSError):
                        if backup is not None:
                            os.replace(backup, dest)
                        else:
                            dest.unlink()
                self.discard()
                raise
            for _, backup in done:
                if backup is not None:
                    with contextlib.suppress(OSError):
                        backup.unlink()
            self.written = [dest for dest, _ in done]
            self._staged = []
            if self._on_commit is not None:
                self._on_commit()
        finally:
            if old_mask is not None:
                signal.pthread_sigmask(signal.SIG_SETMASK, old_mask)
        return self.written


@contextlib.contextmanager
def output_transaction(on_commit: Callable[[], None] | None = None) -> Iterator[OutputTransaction]:
    """Write every output of one job all together or not at all.

    Inside the block, every atomic write (:func:`atomic_output`,
    :func:`write_text_atomic`, :func:`write_via` and the writers built on
    them: spectra, figures, plans, fit results) is staged as a temporary file
    beside its destination.  When the block ends without error, all staged
    files are moved into place together, with SIGINT and SIGTERM held back
    for those renames; if one rename fails, the files already moved are put
    back (a file replaced with ``force`` is restored).  When the block ends
    with an error, Ctrl-C or SIGTERM (raised as an exception), every staged
    file is removed and nothing is changed.  Text written to standard output
    (``"-"``) is not staged.

    Parameters
    ----------
    on_commit : callable, optional
        Called right after every file is in place, before interrupts are let
        through again.

    Yields
    ------
    OutputTransaction
        Its ``written`` attribute lists the files once the block has ended.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     a, b = pathlib.Path(d) / "a.txt", pathlib.Path(d) / "b.txt"
    ...     try:
    ...         with output_transaction():
    ...             _ = write_text_atomic(a, "first")
    ...             raise RuntimeError("the second output failed")
    ...     except RuntimeError:
    ...         pass
    ...     print(a.exists(), sorted(pathlib.Path(d).iterdir()))
    False []
    """
    transaction = OutputTransaction(on_commit)
    token = _CURRENT.set(transaction)
    try:
        try:
            yield transaction
        finally:
            _CURRENT.reset(token)
    except BaseException:
        transaction.discard()
        raise
    transaction.commit()



def write_texts_together(texts: Iterable, *, force: bool = False, protect: Iterable = ()) -> list[Path]:
    """Write several text files all together or not at all.

    Parameters
    ----------
    texts : iterable of (path, str, str)
        Destination, text and role (for messages) of each file.
    force : bool, optional
        Replace existing files.
    protect : iterable of path, optional
        Files that must never be written (the inputs).

    Returns
    -------
    list of pathlib.Path
        The destinations, in order.

    Notes
    -----
    Inside an :func:`output_transaction` the files join it (it places them,
    or removes them on failure); otherwise they form a transaction of their
    own.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     d = pathlib.Path(d)
    ...     out = write_texts_together([(d / "a.txt", "one", "A"), (d / "b.txt", "two", "B")])
    ...     print([q.name for q in out])
    ['a.txt', 'b.txt']
    """
    texts = list(texts)
    protect = list(protect)
    if _CURRENT.get() is not None:
        return [write_text_atomic(q, text, force=force, protect=protect, role=role) for q, text, role in texts]
    with output_transaction() as t:
        for q, text, role in texts:
            write_text_atomic(q, text, force=force, protect=protect, role=role)
    return list(t.written)

#: code during which the command line's signal handlers defer Ctrl-C and SIGTERM: short steps that would leave a
#: file behind if cut (the writability probe; making, finishing or removing a temporary output, whose frame is on
#: the stack only then, not while the caller writes into it; moving staged files into place)
UNINTERRUPTED_CODE = frozenset({folder_write_error.__code__, atomic_output.__wrapped__.__code__,
                                OutputTransaction.commit.__code__})
