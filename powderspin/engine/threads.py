"""How many threads the compiled kernels use: one context manager for every caller.

Fits, plans and series make thousands of small kernel calls, for which
starting parallel work costs more than it saves (badly so on a busy machine),
so they run the kernels on one thread; building a kernel grid on an idle
machine uses all of them.  Everything goes through :func:`kernel_threads`,
which restores numba's setting afterwards.

The environment is not changed on import.  numba's OpenMP threads spin while
idle unless ``OMP_WAIT_POLICY=PASSIVE`` is set before the OpenMP runtime
starts; the command line sets it (unless the user has), and Python users who
share a busy machine may set it themselves before importing powderspin.
"""

from __future__ import annotations

import contextlib
import os
import threading

__all__ = ["kernel_threads", "idle_threads", "split_work"]


def idle_threads() -> int:
    """All of numba's threads on an otherwise idle machine, else 1.

    Returns
    -------
    int
        numba's thread count when the 1-minute load average is below the
        number of cores less one half; 1 otherwise, or when the platform has
        no load average.

    Examples
    --------
    >>> idle_threads() >= 1
    True
    """
    import numba

    cores = os.cpu_count() or 1
    try:
        load = os.getloadavg()[0]
    except (AttributeError, OSError):  # no load average on this platform: the safe choice
        return 1
    return numba.config.NUMBA_NUM_THREADS if load < cores - 0.5 else 1


@contextlib.contextmanager
def kernel_threads(n: int | str | None):
    """Run the compiled kernels with ``n`` threads inside the block, then restore numba's setting.

    Parameters
    ----------
    n : int, "auto" or None
        Threads (clipped to numba's maximum); ``"auto"``: :func:`idle_threads`;
        None: leave numba's setting as it is.

    Examples
    --------
    >>> import numba
    >>> before = numba.get_num_threads()
    >>> with kernel_threads(1):
    ...     numba.get_num_threads()
    1
    >>> numba.get_num_threads() == before
    True
    """
    if n is None:
        yield
        return
    import numba

    if n == "auto":
        n = idle_threads()
    if isinstance(n, bool) or not isinstance(n, (int,)) and not hasattr(n, "__index__"):
        raise TypeError(f"threads = {n!r} must be a whole number, 'auto' or None")
    old = numba.get_num_threads()
    numba.set_num_threads(max(1, min(int(n), numba.config.NUMBA_NUM_THREADS)))
    try:
        yield
    finally:
        numba.set_num_threads(old)


def split_work(work, n: int, *, grain: int = 1) -> list:
    """Call ``work(a, b)`` on consecutive parts of ``range(n)``, side by side in Python threads.

    The serial kernels release the GIL (``nogil=True``), so parts run in parallel: one compiled
    serial kernel serves every thread count, where a ``parallel=True`` kernel compiles several times
    longer (measured in ``benchmarks/bench_slow_paths.py``).  The number of parts is numba's current
    thread count (see :func:`kernel_threads`), fewer when ``n`` holds fewer than two ``grain``-sized
    parts; part boundaries fall on multiples of ``grain``.  The first part runs in the calling thread.

    Parameters
    ----------
    work : callable
        ``work(a, b)`` for the items ``a ... b - 1``; its results are returned in order.
    n : int
        Number of items.
    grain : int, optional
        Parts hold a multiple of this many items (the last one the rest).

    Returns
    -------
    list
        ``[work(a0, b0), work(a1, b1), ...]`` over consecutive parts.

    Examples
    --------
    >>> split_work(lambda a, b: (a, b), 10, grain=4)[0][0], split_work(lambda a, b: (a, b), 10)[-1][1]
    (0, 10)
    """
    import numba

    grain = max(1, int(grain))
    blocks = -(-n // grain)
    parts = max(1, min(numba.get_num_threads(), blocks))
    if parts == 1:
        return [work(0, n)]
    per = -(-blocks // parts) * grain
    bounds = [(a, min(n, a + per)) for a in range(0, n, per)]
    results: list = [None] * len(bounds)
    errors: list = []

    def run(k):
        try:
            results[k] = work(*bounds[k])
        except BaseException as e:  # handed to the calling thread
            errors.append(e)

    threads = [threading.Thread(target=run, args=(k,), daemon=True) for k in range(1, len(bounds))]
    for t in threads:
        t.start()
    try:
        run(0)
    finally:
        for t in threads:
            t.join()
    if errors:
        raise errors[0]
    return results
