"""A persistent library of computed arrays (lineshape kernels), one HDF5 file per entry.

The engine stores lineshape kernels that are expensive to compute (for
distributions, fits and planning) so that the next run, or another process,
can reuse them.  The library is generic: an entry is a set of named numeric
numpy arrays, looked up by a *key*, a mapping of everything that changes the
result.

Layout and format
-----------------
* One small HDF5 file per entry, named by its content hash
  ``<hash[:2]>/<hash>.h5`` under the library folder (two-character
  subfolders keep each folder small).
* The hash is the sha256 hex digest of the canonical JSON of
  ``{"key": key, "version": package version}`` (see :func:`canonical_key_json`):
  keys sorted, no whitespace, floats written by ``repr`` so that they
  round-trip exactly.  An entry therefore never serves another package
  version.
* The arrays are HDF5 datasets in the group ``arrays`` (numeric dtypes only:
  bool, integer, float, complex; nothing is pickled).  The attributes of the
  file hold the key as canonical JSON, the package version, the creation time
  (ISO 8601, UTC), the hash, a free-text description and a sha256 checksum of
  the arrays (name, dtype, shape and bytes of each array in name order).
* A marker file, ``powderspin-library.txt``, is written when the library first
  stores something in a new or empty folder.  :meth:`LineshapeLibrary.clear`
  refuses to work on a folder without it, and the library refuses to store
  entries in a non-empty folder without it.

Concurrency
-----------
HDF5 does not make concurrent writers safe: opening a file in ``"w"`` mode
while another process has it open empties it (h5py issue 1864).  Entries are
therefore never opened for writing in place.  A writer fills a temporary file
in the entry's folder, closes and syncs it, then moves it into place with
``os.replace`` (atomic on POSIX and Windows).  Readers open entries read-only
(HDF5 file locking off, since entries never change once in place), so a reader
sees either the whole old entry, the whole new one, or none.

Damaged entries
---------------
A truncated file, a file that is not HDF5, an entry whose stored key differs
from the requested one (a hash collision or a tampered file), an entry whose
checksum does not match its arrays, or one written by another package version
is reported once per file and problem per process (a
:class:`DamagedEntryWarning`), removed, and treated as a miss, so the caller
rebuilds it.

Size cap
--------
After each store, if the library holds more than ``max_bytes`` (default
2 GB), the least recently used entries are removed until it fits.  Every
successful :meth:`LineshapeLibrary.get` sets the entry's modification time to
now, so the modification time is the time of last use.  The entry just
written is never removed, so a single entry larger than the cap is kept.

Examples
--------
>>> import tempfile, numpy as np
>>> from powderspin.disorder.library import LineshapeLibrary
>>> tmp = tempfile.TemporaryDirectory()
>>> lib = LineshapeLibrary(tmp.name)
>>> key = {"nucleus": "27Al", "cq_mhz": 5.0, "eta": 0.3, "points": 512}
>>> lib.get(key) is None
True
>>> _ = lib.put(key, {"intensity": np.linspace(0.0, 1.0, 5)}, description="test")
>>> lib.get(key)["intensity"]
array([0.  , 0.25, 0.5 , 0.75, 1.  ])
"""

from __future__ import annotations

import functools
import hashlib
import json
import math
import numbers
import os
import re
import warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

import h5py
import numpy as np

from .. import __version__
from ..files import atomic_output

__all__ = [
    "DEFAULT_MAX_BYTES",
    "ENV_VAR",
    "MARKER_NAME",
    "CacheError",
    "DamagedEntryWarning",
    "LibraryInfo",
    "LineshapeLibrary",
    "cache_summary_text",
    "canonical_key_json",
    "default_library_path",
    "key_hash",
]

DEFAULT_MAX_BYTES = 2_000_000_000
"""Default size cap of a library (bytes, 2 GB)."""

ENV_VAR = "POWDERSPIN_CACHE"
"""Environment variable naming the library folder when none is given."""

MARKER_NAME = "powderspin-library.txt"
"""Marker file that identifies a folder as a powderspin lineshape library."""

_FORMAT = 1
_ENTRY_RE = re.compile(r"^[0-9a-f]{64}\.h5$")
_SUBDIR_RE = re.compile(r"^[0-9a-f]{2}$")
_TMP_PREFIX = ".tmp-"
_TMP_SUFFIX = ".h5part"
_STALE_TMP_SECONDS = 24 * 3600
_NAME_RE = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_REQUIRED_ATTRS = ("format", "key_json", "package_version", "created_utc", "hash", "checksum", "description")
_MARKER_TEXT = (
    "This folder is a powderspin lineshape library (a cache of computed arrays).\n"
    "Every entry can be rebuilt: delete entries with LineshapeLibrary.clear() or\n"
    "delete the whole folder. Do not keep other files here.\n"
)


class CacheError(ValueError):
    """A library folder or a key or array given to the library is not usable.

    A ``ValueError`` subclass; the message names the folder, key or array and
    what is allowed.

    Parameters
    ----------
    message : str
        What is wrong and what is allowed.

    Examples
    --------
    >>> try:
    ...     canonical_key_json({"cq_mhz": float("nan")})
    ... except CacheError as e:
    ...     print(e)
    cache key 'cq_mhz' is NaN; keys must be finite numbers, +-inf, str, bool, None, lists or dicts
    """


class DamagedEntryWarning(UserWarning):
    """An unreadable or inconsistent library entry was found, removed and treated as missing.

    Examples
    --------
    >>> issubclass(DamagedEntryWarning, UserWarning)
    True
    """


# --------------------------------------------------------------------------- keys


def _canonical(value, where: str):
    """The JSON-ready canonical form of one key value (``where`` names it in errors)."""
    if value is None or isinstance(value, (str, bool, np.bool_)):
        return bool(value) if isinstance(value, np.bool_) else value
    if isinstance(value, numbers.Integral):
        return int(value)
    if isinstance(value, numbers.Real):
        v = float(value)
        if math.isnan(v):
            raise CacheError(
                f"cache key {where!r} is NaN; keys must be finite numbers, +-inf, str, bool, None, lists or dicts"
            )
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return v
    if isinstance(value, Mapping):
        out = {}
        for k, v in value.items():
            if not isinstance(k, str):
                raise CacheError(f"cache key {where!r} has a non-string field name {k!r}; field names must be str")
            out[k] = _canonical(v, f"{where}.{k}" if where else k)
        return out
    if isinstance(value, (list, tuple)):
        return [_canonical(v, f"{where}[{i}]") for i, v in enumerate(value)]
    raise CacheError(
        f"cache key {where!r} has a value of type {type(value).__name__}; "
        "allowed are str, int, float, bool, None, lists and dicts"
    )


def canonical_key_json(key: Mapping) -> str:
    """The canonical JSON text of a cache key.

    Field names are sorted, there is no whitespace, floats are written with
    ``repr`` (so they round-trip exactly), tuples become lists, numpy scalars
    become Python numbers, and +-infinity is written as the string ``"inf"`` /
    ``"-inf"`` (so ``float("inf")`` and ``"inf"`` are the same key, as in the
    model files' ``spinning_hz = "inf"``).  Integers and floats are kept
    apart: ``1`` and ``1.0`` are *different* keys (a float would lose the
    exactness of large integer counts); callers that want them equal must
    convert first.

    Parameters
    ----------
    key : Mapping
        Field names (str) to values: str, int, float, bool, None, lists or
        nested mappings of these.

    Returns
    -------
    str
        Canonical JSON text (ASCII).

    Raises
    ------
    CacheError
        If a value is NaN or of another type; the message names the field.

    See Also
    --------
    key_hash : the entry name derived from this text.

    Examples
    --------
    >>> canonical_key_json({"b": 2.5, "a": [1, True, None], "c": {"z": float("inf"), "y": "x"}})
    '{"a":[1,true,null],"b":2.5,"c":{"y":"x","z":"inf"}}'
    >>> canonical_key_json({"x": 1}) == canonical_key_json({"x": 1.0})
    False
    >>> canonical_key_json({"x": 0.1 + 0.2})
    '{"x":0.30000000000000004}'
    """
    if not isinstance(key, Mapping):
        raise CacheError(f"a cache key must be a mapping of field names to values, not {type(key).__name__}")
    return _dumps(_canonical(key, ""))


def _dumps(canonical) -> str:
    return json.dumps(canonical, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False)


def key_hash(key: Mapping, version: str = __version__) -> str:
    """The sha256 hex digest that names a key's entry.

    It is the digest of the canonical JSON (:func:`canonical_key_json`) of
    ``{"key": key, "version": version}``, so the same key under another
    package version names another entry.

    Parameters
    ----------
    key : Mapping
        The cache key.
    version : str, optional
        Package version (default: the installed powderspin version).

    Returns
    -------
    str
        64 lowercase hexadecimal characters.

    See Also
    --------
    canonical_key_json

    Examples
    --------
    >>> h = key_hash({"cq_mhz": 5.0, "eta": 0.2})
    >>> len(h), h == key_hash({"eta": 0.2, "cq_mhz": 5.0})
    (64, True)
    >>> key_hash({"cq_mhz": 5.0}, "0.0.1") == key_hash({"cq_mhz": 5.0}, "0.0.2")
    False
    """
    if not isinstance(key, Mapping):
        raise CacheError(f"a cache key must be a mapping of field names to values, not {type(key).__name__}")
    text = _dumps({"key": _canonical(key, ""), "version": str(version)})
    return hashlib.sha256(text.encode("ascii")).hexdigest()


# --------------------------------------------------------------------------- arrays


def _normalise_arrays(arrays) -> dict[str, np.ndarray]:
    """Validated, C-contiguous, native-byte-order copies of ``arrays`` in name order."""
    if not isinstance(arrays, Mapping):
        raise CacheError(f"the arrays to store must be a mapping of names to numpy arrays, not {type(arrays).__name__}")
    out = {}
    for name in sorted(arrays, key=str):
        if not isinstance(name, str) or not _NAME_RE.match(name):
            raise CacheError(
                f"array name {name!r} is not allowed; names are letters, digits and '_', not starting with a digit"
            )
        a = np.asarray(arrays[name])
        if a.dtype.kind not in "biufc":
            raise CacheError(
                f"array {name!r} has dtype {a.dtype}; only bool, integer, float and complex arrays can be stored"
            )
        out[name] = np.array(a, dtype=a.dtype.newbyteorder("="), order="C")  # a copy, shape kept (0-d too)
    return out


def _checksum(arrays: Mapping[str, np.ndarray]) -> str:
    """sha256 over name, dtype, shape and bytes of each array, in name order."""
    h = hashlib.sha256()
    for name in sorted(arrays):
        a = np.asarray(arrays[name])
        h.update(name.encode("utf-8") + b"\0")
        h.update(a.dtype.str.encode("ascii") + b"\0")
        h.update(repr(a.shape).encode("ascii") + b"\0")
        h.update(a.tobytes(order="C"))
    return h.hexdigest()


def _h5_open_read(path: Path) -> h5py.File:
    """Open an entry read-only; HDF5 file locking is off (entries never change in place)."""
    try:
        return h5py.File(path, "r", locking=False)
    except TypeError:  # pragma: no cover - h5py without the locking keyword
        return h5py.File(path, "r")


@functools.lru_cache(maxsize=None)
def _report_once(path: str, problem: str) -> None:
    """Warn about a damaged entry; the cache makes it once per file and problem per process."""
    warnings.warn(
        f"lineshape library entry {path}: {problem}; it was removed and will be rebuilt",
        DamagedEntryWarning,
        stacklevel=4,
    )


def _iso_utc(timestamp: float) -> str:
    return datetime.fromtimestamp(timestamp, tz=timezone.utc).isoformat(timespec="seconds")


def _human_bytes(n: int) -> str:
    for unit, size in (("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if n >= size:
            return f"{n / size:.3g} {unit}"
    return f"{n} B"


def default_library_path() -> Path:
    """The library folder used when none is given.

    ``$POWDERSPIN_CACHE`` if set and not empty, otherwise the folder
    ``lineshapes`` in the platform's user cache folder for powderspin
    (``platformdirs.user_cache_dir("powderspin")``, e.g.
    ``~/.cache/powderspin/lineshapes`` on Linux).

    Returns
    -------
    pathlib.Path
        The folder (it need not exist yet).

    Examples
    --------
    >>> import os
    >>> saved = os.environ.pop("POWDERSPIN_CACHE", None)
    >>> default_library_path().name
    'lineshapes'
    >>> os.environ["POWDERSPIN_CACHE"] = "/tmp/my-library"
    >>> default_library_path().name
    'my-library'
    >>> if saved is None:
    ...     del os.environ["POWDERSPIN_CACHE"]
    ... else:
    ...     os.environ["POWDERSPIN_CACHE"] = saved
    """
    env = os.environ.get(ENV_VAR, "")
    if env.strip():
        return Path(env).expanduser()
    import platformdirs

    return Path(platformdirs.user_cache_dir("powderspin")) / "lineshapes"


# --------------------------------------------------------------------------- info


@dataclass(frozen=True)
class LibraryInfo:
    """What a lineshape library holds.

    Parameters
    ----------
    path : pathlib.Path
        The library folder.
    enabled : bool
        False for a disabled library (it stores and finds nothing).
    marked : bool
        True if the folder carries the library's marker file.
    entries : int
        Number of entry files.
    total_bytes : int
        Their total size (bytes).
    max_bytes : int
        The size cap (bytes).
    oldest_use, newest_use : datetime.datetime or None
        Least and most recent use (store or successful lookup), UTC; None
        when there are no entries.

    Examples
    --------
    >>> info = LibraryInfo(Path("/tmp/x"), True, True, 0, 0, 2_000_000_000, None, None)
    >>> print(info)
    lineshape library: /tmp/x
      entries: 0 (0 B of 2 GB cap)
      last used: never
    """

    path: Path
    enabled: bool
    marked: bool
    entries: int
    total_bytes: int
    max_bytes: int
    oldest_use: datetime | None
    newest_use: datetime | None

    def __str__(self) -> str:
        lines = [f"lineshape library: {self.path}" + ("" if self.enabled else " (disabled)")]
        lines.append(f"  entries: {self.entries} ({_human_bytes(self.total_bytes)} of "
                     f"{_human_bytes(self.max_bytes)} cap)")
        if self.newest_use is None:
            lines.append("  last used: never")
        else:
            lines.append(f"  least recently used entry: {self.oldest_use.isoformat(timespec='seconds')}")
            lines.append(f"  most recently used entry: {self.newest_use.isoformat(timespec='seconds')}")
        return "\n".join(lines)


# --------------------------------------------------------------------------- library


class LineshapeLibrary:
    """A persistent, size-capped, multi-process-safe store of named numpy arrays.

    Parameters
    ----------
    path : str or os.PathLike, optional
        The library folder.  Default: ``$POWDERSPIN_CACHE`` if set, otherwise
        the user cache folder (:func:`default_library_path`).  The folder is
        created on the first store.
    enabled : bool, optional
        If False, :meth:`get` always misses and :meth:`put` stores nothing.
    max_bytes : int, optional
        Size cap in bytes (default 2 GB); least recently used entries are
        removed after each store to stay under it.  Settable later.

    Raises
    ------
    CacheError
        If ``max_bytes`` is not a positive integer.

    See Also
    --------
    cache_summary_text

    References
    ----------
    The HDF5 format: The HDF Group, *HDF5 File Format Specification*; the
    hazard of opening an HDF5 file for writing while another process reads it
    is reported publicly as h5py issue 1864.

    Examples
    --------
    >>> import tempfile, numpy as np
    >>> tmp = tempfile.TemporaryDirectory()
    >>> lib = LineshapeLibrary(tmp.name, max_bytes=10_000_000)
    >>> calls = []
    >>> def build():
    ...     calls.append(1)
    ...     return {"x": np.arange(3.0)}
    >>> lib.get_or_build({"n": 3}, build)["x"]
    array([0., 1., 2.])
    >>> lib.get_or_build({"n": 3}, build)["x"]
    array([0., 1., 2.])
    >>> len(calls), lib.info().entries
    (1, 1)
    >>> LineshapeLibrary(enabled=False).get({"n": 3}) is None
    True
    """

    def __init__(self, path: str | os.PathLike | None = None, *, enabled: bool = True,
                 max_bytes: int = DEFAULT_MAX_BYTES):
        self._path = Path(path).expanduser() if path is not None else default_library_path()
        self._enabled = bool(enabled)
        self.max_bytes = max_bytes

    # -- properties

    @property
    def path(self) -> Path:
        """The library folder (it may not exist yet)."""
        return self._path

    @property
    def enabled(self) -> bool:
        """False for a disabled library."""
        return self._enabled

    @property
    def max_bytes(self) -> int:
        """Size cap in bytes."""
        return self._max_bytes

    @max_bytes.setter
    def max_bytes(self, value: int) -> None:
        if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value <= 0:
            raise CacheError(f"max_bytes = {value!r} is not allowed; it must be a positive integer (bytes)")
        self._max_bytes = int(value)

    def __repr__(self) -> str:
        return f"LineshapeLibrary({str(self._path)!r}, enabled={self._enabled}, max_bytes={self._max_bytes})"

    def entry_path(self, key: Mapping) -> Path:
        """The file that holds (or would hold) a key's entry.

        Parameters
        ----------
        key : Mapping
            The cache key.

        Returns
        -------
        pathlib.Path
            ``<library>/<hash[:2]>/<hash>.h5``.

        Examples
        --------
        >>> lib = LineshapeLibrary("/tmp/lib")
        >>> p = lib.entry_path({"a": 1})
        >>> p.parent.name == p.stem[:2], p.suffix
        (True, '.h5')
        """
        h = key_hash(key)
        return self._path / h[:2] / f"{h}.h5"

    # -- reading

    def get(self, key: Mapping) -> dict[str, np.ndarray] | None:
        """The arrays stored under ``key``, or None (a miss).

        A damaged, inconsistent or foreign-version entry is reported once
        (:class:`DamagedEntryWarning`), removed and treated as a miss.  A hit
        marks the entry as just used (its modification time is set to now).

        Parameters
        ----------
        key : Mapping
            The cache key.

        Returns
        -------
        dict of str to numpy.ndarray, or None
            The arrays, or None if there is no valid entry (or the library is
            disabled).

        Examples
        --------
        >>> import tempfile, numpy as np
        >>> tmp = tempfile.TemporaryDirectory()
    >>> lib = LineshapeLibrary(tmp.name)
        >>> lib.get({"a": 1}) is None
        True
        >>> _ = lib.put({"a": 1}, {"y": np.ones(2, dtype=np.float32)})
        >>> lib.get({"a": 1})
        {'y': array([1., 1.], dtype=float32)}
        """
        canonical = canonical_key_json(key)
        if not self._enabled:
            return None
        path = self.entry_path(key)
        try:
            st = os.stat(path)
        except OSError:
            return None
        arrays, problem = self._read_entry(path, canonical)
        if problem is not None:
            self._discard(path, st, problem)
            return None
        try:
            os.utime(path)
        except OSError:
            pass  # removed by another process, or a read-only folder: the data read are still valid
        return arrays

    def _read_entry(self, path: Path, canonical: str) -> tuple[dict | None, str | None]:
        """(arrays, None) for a valid entry, (None, problem) for a damaged one, (None, None) if gone."""
        try:
            f = _h5_open_read(path)
        except FileNotFoundError:
            return None, None
        except OSError as e:
            if not path.exists():
                return None, None
            first = str(e).splitlines()[0] if str(e) else type(e).__name__
            return None, f"not a readable HDF5 file ({first})"
        try:
            with f:
                attrs = {}
                for name in _REQUIRED_ATTRS:
                    if name not in f.attrs:
                        return None, f"attribute {name!r} is missing"
                    v = f.attrs[name]
                    attrs[name] = v.decode("utf-8") if isinstance(v, bytes) else v
                if attrs["package_version"] != __version__:
                    return None, (f"written by powderspin {attrs['package_version']}, "
                                  f"this is {__version__}")
                if int(attrs["format"]) != _FORMAT:
                    return None, f"entry format {attrs['format']} is not {_FORMAT}"
                if attrs["key_json"] != canonical or attrs["hash"] != path.stem:
                    return None, "its stored key differs from the requested key (hash collision or altered file)"
                if "arrays" not in f or not isinstance(f["arrays"], h5py.Group):
                    return None, "group 'arrays' is missing"
                arrays = {}
                for name, ds in f["arrays"].items():
                    if not isinstance(ds, h5py.Dataset):
                        return None, f"'arrays/{name}' is not a dataset"
                    arrays[name] = np.asarray(ds[()])
        except OSError as e:
            first = str(e).splitlines()[0] if str(e) else type(e).__name__
            return None, f"its data cannot be read ({first})"
        except (KeyError, ValueError, TypeError) as e:
            return None, f"its contents are inconsistent ({type(e).__name__}: {e})"
        if _checksum(arrays) != attrs["checksum"]:
            return None, "checksum mismatch (the stored arrays were altered or damaged)"
        return dict(sorted(arrays.items())), None

    def _discard(self, path: Path, st: os.stat_result, problem: str) -> None:
        """Report a damaged entry once and remove it, unless another process has replaced it since."""
        _report_once(str(path), problem)
        try:
            now = os.stat(path)
            if (now.st_ino, now.st_dev) == (st.st_ino, st.st_dev):
                os.remove(path)
        except OSError:
            pass  # already removed (or replaced) by another process

    # -- writing

    def _ensure_folder(self) -> None:
        """Create the library folder and its marker, or refuse a foreign non-empty folder."""
        marker = self._path / MARKER_NAME
        if marker.is_file():
            return
        self._path.mkdir(parents=True, exist_ok=True)
        if marker.is_file():
            return
        others = [p.name for p in self._path.iterdir() if p.name != MARKER_NAME]
        if others:
            raise CacheError(
                f"lineshape library folder {self._path} is not empty and has no {MARKER_NAME} marker, so it "
                f"does not look like a powderspin library; choose a new or empty folder (path or ${ENV_VAR})"
            )
        try:
            fd = os.open(marker, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
        except FileExistsError:
            return  # another process made it first
        with os.fdopen(fd, "w", encoding="ascii") as fh:
            fh.write(_MARKER_TEXT)

    def put(self, key: Mapping, arrays: Mapping[str, np.ndarray], description: str = "") -> Path:
        """Store arrays under ``key`` (atomically), then enforce the size cap.

        Parameters
        ----------
        key : Mapping
            The cache key (see :func:`canonical_key_json`).
        arrays : Mapping of str to array_like
            Named numeric arrays (bool, integer, float or complex); names are
            letters, digits and ``_``.
        description : str, optional
            Free text stored with the entry.

        Returns
        -------
        pathlib.Path
            The entry's file (in a disabled library: the file it would have
            been; nothing is written).

        Raises
        ------
        CacheError
            For a bad key, array name or dtype, or a foreign folder.
        OSError
            If the file cannot be written (disk full, no permission).

        Examples
        --------
        >>> import tempfile, numpy as np
        >>> tmp = tempfile.TemporaryDirectory()
    >>> lib = LineshapeLibrary(tmp.name)
        >>> p = lib.put({"site": "A"}, {"axis": np.arange(4), "s": np.zeros((2, 4))}, "two arrays")
        >>> p.exists(), sorted(lib.get({"site": "A"}))
        (True, ['axis', 's'])
        """
        canonical = canonical_key_json(key)
        data = _normalise_arrays(arrays)
        path = self.entry_path(key)
        if not self._enabled:
            return path
        if not isinstance(description, str):
            raise CacheError(f"description must be a str, not {type(description).__name__}")
        self._ensure_folder()
        path.parent.mkdir(exist_ok=True)
        # the one atomic-output helper: a temporary file in the entry's folder, flushed to disk and renamed
        # into place, so no entry is ever opened for writing where readers look (h5py issue 1864)
        with atomic_output(path, force=True, role="lineshape-library entry", prefix=_TMP_PREFIX, suffix=_TMP_SUFFIX,
                           sync=True, checked=False) as tmp:
            with h5py.File(tmp, "w", locking=False) as f:
                g = f.create_group("arrays")
                for name, a in data.items():
                    g.create_dataset(name, data=a)
                f.attrs["format"] = _FORMAT
                f.attrs["key_json"] = canonical
                f.attrs["package_version"] = __version__
                f.attrs["created_utc"] = datetime.now(timezone.utc).isoformat(timespec="seconds")
                f.attrs["hash"] = path.stem
                f.attrs["description"] = description
                f.attrs["checksum"] = _checksum(data)
        self._evict(keep=path)
        return path

    def get_or_build(self, key: Mapping, build: Callable[[], Mapping[str, np.ndarray]],
                     description: str = "") -> dict[str, np.ndarray]:
        """The arrays under ``key``; on a miss, ``build()`` them and store them.

        If storing fails with an OS error (disk full, read-only folder), the
        built arrays are returned all the same and a warning says why they
        were not stored.

        Parameters
        ----------
        key : Mapping
            The cache key: everything that changes the result.
        build : callable
            Called with no arguments on a miss; returns a mapping of names to
            numeric arrays.
        description : str, optional
            Free text stored with a new entry.

        Returns
        -------
        dict of str to numpy.ndarray
            The arrays, in name order.

        Examples
        --------
        >>> import tempfile, numpy as np
        >>> tmp = tempfile.TemporaryDirectory()
    >>> lib = LineshapeLibrary(tmp.name)
        >>> lib.get_or_build({"n": 2}, lambda: {"v": np.full(2, 7)})
        {'v': array([7, 7])}
        """
        found = self.get(key)
        if found is not None:
            return found
        data = _normalise_arrays(build())
        if self._enabled:
            try:
                self.put(key, data, description)
            except OSError as e:
                warnings.warn(f"lineshape library {self._path}: could not store an entry ({e}); "
                              "the result is used without being stored", RuntimeWarning, stacklevel=2)
        return data

    # -- maintenance

    def _entries(self) -> list[tuple[Path, os.stat_result]]:
        """(path, stat) of every entry file (entries removed meanwhile are skipped)."""
        out = []
        try:
            subdirs = [d for d in os.scandir(self._path) if _SUBDIR_RE.match(d.name) and d.is_dir()]
        except OSError:
            return out
        for d in subdirs:
            try:
                files = list(os.scandir(d.path))
            except OSError:
                continue
            for e in files:
                if _ENTRY_RE.match(e.name):
                    try:
                        out.append((Path(e.path), e.stat()))
                    except OSError:
                        continue
        return out

    def _stale_temporaries(self, min_age_seconds: float) -> list[Path]:
        """Temporary files left by writers that stopped, older than ``min_age_seconds``."""
        out = []
        now = datetime.now(timezone.utc).timestamp()
        try:
            subdirs = [d for d in os.scandir(self._path) if _SUBDIR_RE.match(d.name) and d.is_dir()]
        except OSError:
            return out
        for d in subdirs:
            try:
                for e in os.scandir(d.path):
                    if e.name.startswith(_TMP_PREFIX) and e.name.endswith(_TMP_SUFFIX):
                        try:
                            if now - e.stat().st_mtime > min_age_seconds:
                                out.append(Path(e.path))
                        except OSError:
                            continue
            except OSError:
                continue
        return out

    def _evict(self, keep: Path) -> None:
        """Remove least recently used entries (never ``keep``) until the library fits its cap."""
        entries = self._entries()
        total = sum(st.st_size for _, st in entries)
        if total > self._max_bytes:
            for p, st in sorted(entries, key=lambda e: (e[1].st_mtime, e[0].name)):
                if total <= self._max_bytes:
                    break
                if p == keep:
                    continue
                try:
                    os.remove(p)
                except OSError:
                    pass  # removed by another process: its bytes are gone all the same
                total -= st.st_size
        for t in self._stale_temporaries(_STALE_TMP_SECONDS):
            try:
                os.remove(t)
            except OSError:
                pass

    def info(self) -> LibraryInfo:
        """Size, count and last-use times of the library's entries.

        Returns
        -------
        LibraryInfo
            Frozen summary; ``str()`` gives readable text.

        Examples
        --------
        >>> import tempfile, numpy as np
        >>> tmp = tempfile.TemporaryDirectory()
    >>> lib = LineshapeLibrary(tmp.name)
        >>> _ = lib.put({"a": 1}, {"x": np.zeros(10)})
        >>> info = lib.info()
        >>> info.entries, info.marked, info.total_bytes > 80
        (1, True, True)
        """
        entries = self._entries()
        times = [st.st_mtime for _, st in entries]
        return LibraryInfo(
            path=self._path,
            enabled=self._enabled,
            marked=(self._path / MARKER_NAME).is_file(),
            entries=len(entries),
            total_bytes=sum(st.st_size for _, st in entries),
            max_bytes=self._max_bytes,
            oldest_use=datetime.fromtimestamp(min(times), tz=timezone.utc) if times else None,
            newest_use=datetime.fromtimestamp(max(times), tz=timezone.utc) if times else None,
        )

    def clear(self) -> int:
        """Remove every entry (and temporary files older than a minute); keep all other files.

        Returns
        -------
        int
            Number of entries removed (by this call).

        Raises
        ------
        CacheError
            If the folder exists but has no library marker file (it does not
            look like a powderspin library).

        Examples
        --------
        >>> import tempfile, numpy as np
        >>> tmp = tempfile.TemporaryDirectory()
    >>> lib = LineshapeLibrary(tmp.name)
        >>> _ = lib.put({"a": 1}, {"x": np.zeros(3)})
        >>> lib.clear(), lib.info().entries
        (1, 0)
        """
        if not self._path.exists():
            return 0
        if not (self._path / MARKER_NAME).is_file():
            raise CacheError(
                f"refusing to clear {self._path}: it has no {MARKER_NAME} marker, so it does not look like a "
                "powderspin lineshape library"
            )
        removed = 0
        for p, _ in self._entries():
            try:
                os.remove(p)
                removed += 1
            except OSError:
                pass
        for t in self._stale_temporaries(60.0):
            try:
                os.remove(t)
            except OSError:
                pass
        return removed


def cache_summary_text(library: LineshapeLibrary) -> str:
    """A few lines describing a library, for ``powderspin cache info``.

    Parameters
    ----------
    library : LineshapeLibrary
        The library to describe.

    Returns
    -------
    str
        Folder, entries and size against the cap, last-use times, and where
        the folder setting came from.

    See Also
    --------
    LineshapeLibrary.info

    Examples
    --------
    >>> import tempfile, numpy as np
    >>> tmp = tempfile.TemporaryDirectory()
    >>> lib = LineshapeLibrary(os.path.join(tmp.name, "lib"), max_bytes=1_000_000)
    >>> print(cache_summary_text(lib))  # doctest: +ELLIPSIS
    lineshape library: ...lib
      entries: 0 (0 B of 1 MB cap)
      last used: never
      folder not created yet (it is made on the first store)
      set the folder with $POWDERSPIN_CACHE or LineshapeLibrary(path)
    """
    info = library.info()
    lines = [str(info)]
    if not library.path.exists():
        lines.append("  folder not created yet (it is made on the first store)")
    elif not info.marked and any(library.path.iterdir()):
        lines.append(f"  warning: no {MARKER_NAME} marker: this folder does not look like a powderspin library")
    lines.append(f"  set the folder with ${ENV_VAR} or LineshapeLibrary(path)")
    return "\n".join(lines)
