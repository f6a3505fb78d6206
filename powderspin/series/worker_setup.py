"""Set-up of the worker processes a series starts (a Dask preload): Ctrl-C is the client's to handle.

A Ctrl-C on the terminal reaches every process of the foreground group, the
LocalCluster's worker processes included.  The command stops the series and
closes the cluster itself (exit status 130, one line); workers that also took
the signal would each print a traceback, and a nanny would restart them.  So
the workers ignore SIGINT: they stop when the cluster closes them.  Loaded by
Dask in each worker (``distributed.worker.preload``), before any task.
"""

from __future__ import annotations

import signal
import threading

__all__ = ["dask_setup"]


def dask_setup(worker) -> None:  # noqa: ARG001 - the preload hook's signature
    """Ignore SIGINT in this worker process (Dask calls this once per worker, on its event loop)."""
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGINT, signal.SIG_IGN)
