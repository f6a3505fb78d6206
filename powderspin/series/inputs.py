"""What a series reads: the data files (names, globs or a manifest CSV), their series variables, and content hashes.

A series is one model fitted to many spectra.  The spectra are given as file
names, as glob patterns (``spectra/*.csv``), or as a manifest: a CSV file with
a ``file`` column (paths relative to the manifest's folder) and optional
further columns, the series variables (temperature, time, composition, ...),
which are carried into the table of results.  Every problem with these inputs
raises :class:`SeriesError` (a ``ValueError``) with one line naming the file,
column or option, before anything is computed or written.
"""

from __future__ import annotations

import csv
import glob
import hashlib
import json
import math
import os
from dataclasses import dataclass, field
from pathlib import Path

__all__ = ["SeriesError", "SeriesItem", "collect_items", "read_manifest", "file_digest", "input_hash",
           "numeric_variable", "FORMAT"]

#: the format tag of the series' own records (part of every content hash)
FORMAT = "powderspin series 1"


class SeriesError(ValueError):
    """A series cannot be set up with the given files, manifest, variable or output folder.

    A ``ValueError`` subclass; the message is one line naming what is wrong
    and what is allowed.

    Parameters
    ----------
    message : str

    Examples
    --------
    >>> str(SeriesError("no files matched"))
    'no files matched'
    """


@dataclass(frozen=True)
class SeriesItem:
    """One spectrum of a series: its file, its series variables and the stem of its result files.

    Parameters
    ----------
    path : str
        The data file (absolute).
    label : str
        The file as the user named it (the table's ``file`` column).
    variables : tuple of (str, str)
        Series variables from the manifest, in column order (text as written).
    stem : str
        Name of the result files (``<stem>.toml``, ``<stem>.csv``).

    Examples
    --------
    >>> SeriesItem("/d/a.csv", "a.csv", (("temperature_k", "300"),), "a").variable("temperature_k")
    '300'
    """

    path: str
    label: str
    variables: tuple = field(default=())
    stem: str = ""

    def variable(self, name: str) -> str:
        """The text of one series variable ('' when the manifest left it empty).

        Parameters
        ----------
        name : str

        Returns
        -------
        str

        Examples
        --------
        >>> SeriesItem("/d/a.csv", "a.csv", (("t", "1.5"),)).variable("t")
        '1.5'
        """
        return dict(self.variables)[name]


_GLOB_CHARS = set("*?[")


def read_manifest(path) -> tuple[list[str], list[tuple[str, tuple]]]:
    """Read a manifest CSV: a ``file`` column and optional series-variable columns.

    Parameters
    ----------
    path : str or pathlib.Path
        The manifest (UTF-8 CSV with a header row; lines starting with ``#``
        are comments).  Files are relative to the manifest's folder.

    Returns
    -------
    columns : list of str
        The series-variable columns (every column except ``file``), in order.
    rows : list of (str, tuple)
        Each row's file (as written) and its ``(column, text)`` pairs.

    Raises
    ------
    SeriesError
        A missing or unreadable manifest, no header, no ``file`` column, a
        column named twice or unnamed, a row with another number of cells, an
        empty ``file`` cell, or no rows.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     m = pathlib.Path(d) / "series.csv"
    ...     _ = m.write_text("file,temperature_k\\na.csv,300\\nb.csv,320\\n")
    ...     read_manifest(m)
    (['temperature_k'], [('a.csv', (('temperature_k', '300'),)), ('b.csv', (('temperature_k', '320'),))])
    """
    p = Path(path)
    if not p.is_file():
        raise SeriesError(f"manifest {str(path)!r} does not exist or is not a file")
    try:
        text = p.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as e:
        raise SeriesError(f"manifest {str(path)!r} cannot be read: {e}") from None
    lines = [(k + 1, ln) for k, ln in enumerate(text.splitlines()) if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise SeriesError(f"manifest {str(path)!r} is empty; it needs a header row with a 'file' column and one row "
                          "per spectrum")
    rows = list(csv.reader([ln for _, ln in lines]))
    head = [h.strip() for h in rows[0]]
    if "file" not in head:
        raise SeriesError(f"manifest {str(path)!r}: the header {','.join(head)!r} has no 'file' column; the first "
                          "row must name the columns, one of them 'file' (the data file of each spectrum)")
    for h in head:
        if not h:
            raise SeriesError(f"manifest {str(path)!r}: the header has an unnamed column; name every column")
        if head.count(h) > 1:
            raise SeriesError(f"manifest {str(path)!r}: the column {h!r} is named twice; column names must be unique")
    k_file = head.index("file")
    columns = [h for h in head if h != "file"]
    out = []
    for (line_no, _), row in zip(lines[1:], rows[1:]):
        if len(row) != len(head):
            raise SeriesError(f"manifest {str(path)!r} line {line_no}: {len(row)} cell(s) for {len(head)} columns")
        name = row[k_file].strip()
        if not name:
            raise SeriesError(f"manifest {str(path)!r} line {line_no}: the 'file' cell is empty")
        out.append((name, tuple((h, row[k].strip()) for k, h in enumerate(head) if k != k_file)))
    if not out:
        raise SeriesError(f"manifest {str(path)!r} lists no spectra (a header and no rows)")
    return columns, out


def collect_items(files=(), manifest=None, variable: str | None = None,
                  output_dir=None) -> tuple[list[SeriesItem], list[str], str | None]:
    """The spectra of a series, in the order given, with their series variables and result-file stems.

    Parameters
    ----------
    files : sequence of str or path, optional
        Data files or glob patterns (a pattern that matches nothing is an
        error; matches are sorted by name).
    manifest : str or path, optional
        A manifest CSV (:func:`read_manifest`); not together with ``files``.
    variable : str, optional
        The series variable (a manifest column): the x axis of the trends and
        the order of a chained series.  Default: the manifest's first variable
        column, else none (file order).
    output_dir : str or path, optional
        The output folder: a data file inside it is refused.

    Returns
    -------
    items : list of SeriesItem
    columns : list of str
        The manifest's variable columns (empty without a manifest).
    variable : str or None
        The series variable.

    Raises
    ------
    SeriesError
        Files and a manifest together, neither, no file matched, a file named
        twice, a variable that is not a manifest column, two files whose
        result names would be the same, a data file inside the output folder.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     for n in ("s1.csv", "s2.csv"):
    ...         _ = (pathlib.Path(d) / n).write_text("x")
    ...     items, cols, var = collect_items([str(pathlib.Path(d) / "s*.csv")])
    ...     [i.stem for i in items], cols, var
    (['s1', 's2'], [], None)
    """
    files = [str(f) for f in (files or ())]
    columns: list[str] = []
    pairs: list[tuple[str, str, tuple]] = []  # (path, label, variables)
    if manifest is not None and files:
        raise SeriesError("give either data files or --manifest, not both")
    if manifest is not None:
        columns, rows = read_manifest(manifest)
        base = Path(manifest).resolve().parent
        for name, vars_ in rows:
            p = Path(name)
            pairs.append((str(p if p.is_absolute() else base / p), name, vars_))
    else:
        if not files:
            raise SeriesError("no data files given: name the spectra (files or glob patterns) or give --manifest")
        for f in files:
            if not Path(f).exists() and _GLOB_CHARS & set(f):
                found = sorted(glob.glob(f))
                if not found:
                    raise SeriesError(f"the pattern {f!r} matched no files")
                pairs += [(str(Path(g).resolve()), g, ()) for g in found]
            else:
                pairs.append((str(Path(f).resolve()), f, ()))
    if variable is not None and variable not in columns:
        have = ", ".join(repr(c) for c in columns) if columns else "none (give a manifest with variable columns)"
        raise SeriesError(f"--variable {variable!r} is not a column of the manifest; its series variables are: {have}")
    if variable is None and columns:
        variable = columns[0]
    seen_path: dict[str, str] = {}
    seen_stem: dict[str, str] = {}
    out_dir = Path(output_dir).resolve() if output_dir is not None else None
    items = []
    for path, label, vars_ in pairs:
        key = os.path.normcase(path)
        if key in seen_path:
            raise SeriesError(f"the data file {label!r} is listed twice (also as {seen_path[key]!r}); list each "
                              "spectrum once")
        seen_path[key] = label
        stem = Path(path).stem if Path(path).suffix else Path(path).name
        stem = stem.rstrip(".") or "spectrum"
        if stem.lower() in ("table", "trends"):
            stem = f"{stem}-fit"
        if stem.lower() in seen_stem:
            raise SeriesError(f"the data files {seen_stem[stem.lower()]!r} and {label!r} would both write the result "
                              f"{stem}.toml; rename one (result files are named after the data file)")
        seen_stem[stem.lower()] = label
        if out_dir is not None and Path(path).parent == out_dir:
            raise SeriesError(f"the data file {label!r} is inside the output folder {str(output_dir)!r}; give "
                              "another output folder")
        items.append(SeriesItem(path, label, vars_, stem))
    return items, columns, variable


def numeric_variable(items, variable: str | None) -> list[float] | None:
    """The series variable of every item as numbers, or None when there is none or a value is not a number.

    Parameters
    ----------
    items : sequence of SeriesItem
    variable : str or None

    Returns
    -------
    list of float or None

    Examples
    --------
    >>> items = [SeriesItem("/a", "a", (("t", "300"),)), SeriesItem("/b", "b", (("t", "310.5"),))]
    >>> numeric_variable(items, "t")
    [300.0, 310.5]
    >>> numeric_variable(items, None) is None
    True
    """
    if variable is None:
        return None
    out = []
    for it in items:
        try:
            v = float(it.variable(variable))
        except ValueError:
            return None
        if not math.isfinite(v):
            return None
        out.append(v)
    return out


def file_digest(path) -> str | None:
    """sha256 of a data file's bytes (of every file below it, with their names, for a folder); None if missing.

    Parameters
    ----------
    path : str or pathlib.Path

    Returns
    -------
    str or None
        Hexadecimal digest.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = pathlib.Path(d) / "a.csv"
    ...     _ = p.write_bytes(b"1,2")
    ...     file_digest(p) == hashlib.sha256(b"1,2").hexdigest(), file_digest(pathlib.Path(d) / "missing.csv")
    (True, None)
    """
    p = Path(path)
    h = hashlib.sha256()
    if p.is_file():
        with open(p, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)
        return h.hexdigest()
    if p.is_dir():
        for q in sorted(x for x in p.rglob("*") if x.is_file()):
            h.update(str(q.relative_to(p)).encode() + b"\0")
            h.update(bytes.fromhex(file_digest(q)))
        return h.hexdigest()
    return None


def input_hash(model_dict: dict, data_digest: str | None, options: dict, previous: str | None = None) -> str:
    """The content hash that decides whether a stored result is still valid.

    Parameters
    ----------
    model_dict : dict
        The model as a model file's dict (:func:`powderspin.model.modelfile.model_to_dict`).
    data_digest : str or None
        :func:`file_digest` of the data file.
    options : dict
        Every fit option that changes the result (regions, noise region,
        baseline order, axis unit, global search, starts, seed, chaining).
    previous : str or None
        In a chained series, the hash of the spectrum the fit starts from.

    Returns
    -------
    str
        sha256 (hexadecimal) of the canonical JSON of all of it, with the
        package version and :data:`FORMAT`.

    Examples
    --------
    >>> a = input_hash({"nucleus": "23Na"}, "00", {"chain": False})
    >>> a == input_hash({"nucleus": "23Na"}, "00", {"chain": True}), len(a)
    (False, 64)
    """
    from .. import __version__

    doc = {"format": FORMAT, "version": __version__, "model": model_dict, "data": data_digest,
           "options": options, "previous": previous}
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"), default=repr)
    return hashlib.sha256(text.encode()).hexdigest()
