"""Where kernels are kept: in memory per store, and on disk in the lineshape library (HDF5).

A :class:`KernelStore` is explicit: a Simulator, a fit or a command makes one (or is given one) and
passes it on; there is no process-wide store.  Reuse across calls comes from passing the same store,
and across processes from its library folder (:class:`powderspin.disorder.library.LineshapeLibrary`).
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass

import numpy as np

from ..engine.threads import kernel_threads
from .library import LineshapeLibrary, canonical_key_json, default_library_path

#: bytes of kernels kept in memory per process by a KernelStore
MEMORY_BUDGET_BYTES = 512 * 1024 * 1024


@dataclass
class StoreStats:
    """What a :class:`KernelStore` did (counts since it was made).

    Attributes
    ----------
    line_shapes : int
        Sub-sample line shapes computed (scaled or direct).
    producer_calls : int
        Frequency computations (:func:`~powderspin.engine.site_lines.compute_lines` calls).
    rows_built, rows_from_library, rows_from_memory : int
        Kernel rows (one per eta cell) built, read from the HDF5 library, found in memory.
    sets_from_memory : int
        Whole kernel sets found in memory (no row lookups at all).
    """

    line_shapes: int = 0
    producer_calls: int = 0
    rows_built: int = 0
    rows_from_library: int = 0
    rows_from_memory: int = 0
    sets_from_memory: int = 0


class KernelStore:
    """Kernels in memory (per process, least recently used dropped first) and in the HDF5 library.

    Parameters
    ----------
    library : LineshapeLibrary or None
        The persistent library (None: memory only, as ``--no-cache``).
    memory_bytes : int, optional
        Bytes of kernels kept in memory.
    build_threads : int, "auto" or None, optional
        Threads of the compiled kernels while kernels are built.  ``"auto"``
        (default): all of numba's threads when the machine is otherwise idle
        (1-minute load average below the number of cores less one half), else
        1; None leaves numba's setting.  A grid is many small computations: on
        an idle 2-core machine two threads built a 40 x 20 grid 1.5 times
        faster than one, but on a busy machine (other processes on both cores)
        they made it 3-4 times slower, because each small parallel call waits
        for a descheduled thread (``benchmarks/bench_disorder.py`` measures
        both; a pool of worker processes gained nothing).

    Examples
    --------
    >>> store = KernelStore(None)
    >>> store.stats.rows_built, store.library is None
    (0, True)
    """

    def __init__(self, library: LineshapeLibrary | None, *, memory_bytes: int = MEMORY_BUDGET_BYTES,
                 build_threads: int | str | None = "auto"):
        self.library = library if (library is None or library.enabled) else None
        self.memory_bytes = int(memory_bytes)
        self.build_threads = build_threads
        self.stats = StoreStats()
        self._memory: OrderedDict = OrderedDict()
        self._sizes: dict = {}

    def __repr__(self) -> str:
        return f"KernelStore({self.library!r}, memory entries={len(self._memory)})"

    def _remember(self, key, value, nbytes: int) -> None:
        self._memory[key] = value
        self._memory.move_to_end(key)
        self._sizes[key] = nbytes
        total = sum(self._sizes.values())
        while total > self.memory_bytes and len(self._memory) > 1:
            old, _ = self._memory.popitem(last=False)
            total -= self._sizes.pop(old)

    def recall(self, key):
        """A value kept in memory under a hashable key, or None.

        Parameters
        ----------
        key : hashable

        Returns
        -------
        object or None
        """
        v = self._memory.get(key)
        if v is not None:
            self._memory.move_to_end(key)
        return v

    def row(self, key: dict, build, description: str = "") -> dict:
        """The arrays of a kernel row: from memory, else the library, else ``build()`` (then kept in both).

        Parameters
        ----------
        key : dict
            Library key (JSON-ready).
        build : callable
            Returns a mapping of names to arrays.
        description : str, optional

        Returns
        -------
        dict of str to numpy.ndarray
        """
        text = canonical_key_json(key)
        got = self.recall(("row", text))
        if got is not None:
            self.stats.rows_from_memory += 1
            return got
        got = self.library.get(key) if self.library is not None else None
        if got is not None:
            self.stats.rows_from_library += 1
        else:
            with kernel_threads(self.build_threads):
                got = {k: np.asarray(v) for k, v in build().items()}
            self.stats.rows_built += 1
            if self.library is not None:
                try:
                    self.library.put(key, got, description)
                except OSError as e:
                    import warnings

                    warnings.warn(f"lineshape library {self.library.path}: could not store a kernel row ({e}); "
                                  "it is used without being stored", RuntimeWarning, stacklevel=2)
        self._remember(("row", text), got, sum(a.nbytes for a in got.values()))
        return got


def default_kernel_store(path=None, *, enabled: bool = True) -> KernelStore:
    """A new kernel store on a lineshape library folder (default: ``$POWDERSPIN_CACHE`` or the user cache).

    There is no process-wide store: every call makes a new one, with an
    empty memory.  Keep the store and pass it on (``Simulator(...,
    kernel_store=store)``, ``fit(..., kernel_store=store)``) to reuse its
    kernels in memory; different stores share kernels through their library
    folder on disk.

    Parameters
    ----------
    path : str or pathlib.Path, optional
        Library folder (default :func:`powderspin.disorder.library.default_library_path`).
    enabled : bool, optional
        False: memory only (nothing read from or written to disk).

    Returns
    -------
    KernelStore

    Examples
    --------
    >>> store = default_kernel_store(enabled=False)
    >>> store.library is None, store is default_kernel_store(enabled=False)
    (True, False)
    """
    if not enabled:
        return KernelStore(None)
    return KernelStore(LineshapeLibrary(default_library_path() if path is None else path))
