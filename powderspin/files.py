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
"""

from __future__ import annotations

import contextlib
import os
import sys
import tempfile
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


def check_outputs(outputs: Iterable, *, force: bool = False, protect: Iterable = ()) -> None:
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

    Raises
    ------
    OutputExistsError
        An output exists and ``force`` is False, or is an input file (never
        replaced, even with ``force``).
    OutputPathError
        An output is a folder, named twice, has a suffix that is not
        allowed, or its folder cannot be written.

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
        text = str(path)
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
        probe = parent
        while not probe.exists() and probe != probe.parent:
            probe = probe.parent
        if not probe.is_dir():
            raise OutputPathError(f"{role} {text!r}: {str(probe)!r} is not a directory")
        try:  # the only sure test of a folder is to make (and remove) a file in it
            fd, trial = tempfile.mkstemp(prefix=".powderspin-check-", dir=str(probe))
            os.close(fd)
            os.unlink(trial)
        except OSError as e:
            raise OutputPathError(f"{role} {text!r} cannot be written: {e.strerror or e}") from None


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
    p = Path(path)
    if checked:
        check_outputs([(p, role)], force=force, protect=protect)
    try:
        if str(p.parent) and not p.parent.exists():
            p.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{p.name}." if prefix is None else prefix, suffix=suffix,
                                   dir=str(p.parent if str(p.parent) else "."))
        os.close(fd)
    except OSError as e:
        raise OutputPathError(f"{role} {str(p)!r} cannot be written: {e.strerror or e}") from None
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        os.chmod(tmp_path, 0o666 & ~_umask())
        if sync:
            with open(tmp_path, "rb") as fh:
                os.fsync(fh.fileno())
        if p.exists() and not force:  # appeared while we were writing
            raise OutputExistsError(f"{role} {str(p)!r} exists; pass --force (force=True) to overwrite it")
        os.replace(tmp_path, p)
    except OSError as e:
        if isinstance(e, (OutputExistsError, OutputPathError)):
            raise
        raise OutputPathError(f"{role} {str(p)!r} cannot be written: {e.strerror or e}") from None
    finally:
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
    if str(path) == STDOUT:
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
    p = Path(path)
    with atomic_output(p, force=force, protect=protect, role=role, suffix=p.suffix or ".part") as tmp:
        writer(tmp)
    return p
