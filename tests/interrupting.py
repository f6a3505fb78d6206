"""Run a powderspin command and press Ctrl-C (SIGINT) once its progress bar shows it is at work."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import threading
import time


def interrupt_when_busy(args, marker: str, wait_s: float = 240.0):
    """Start ``python -m powderspin ARGS``, send SIGINT once ``marker`` appears on stderr, wait for the end.

    Returns
    -------
    returncode : int
    stderr : str
        Carriage returns turned into line ends.
    stdout : str
    stopped_after : float
        Seconds from the signal to the end of the process.
    """
    env = dict(os.environ, POWDERSPIN_PROGRESS="always")  # bars on a pipe: they say the command is at work
    proc = subprocess.Popen([sys.executable, "-m", "powderspin", *map(str, args)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env)
    chunks: list[str] = []

    def read():
        for piece in iter(lambda: proc.stderr.read(1), ""):
            chunks.append(piece)

    reader = threading.Thread(target=read, daemon=True)
    reader.start()
    deadline = time.monotonic() + wait_s
    while marker not in "".join(chunks) and time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.2)
    assert proc.poll() is None, "the command finished (or failed) before it could be interrupted: " + "".join(chunks)
    t0 = time.monotonic()
    proc.send_signal(signal.SIGINT)
    proc.wait(timeout=120)
    stopped_after = time.monotonic() - t0
    reader.join(timeout=10)
    return proc.returncode, "".join(chunks).replace("\r", "\n"), proc.stdout.read(), stopped_after
