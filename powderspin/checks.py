"""Checks of the arguments of the public functions: the Python API is as strict as the command line.

Strings where numbers or lists are expected, floats where whole numbers are
expected, ``None`` or arrays where a path is expected are refused with one
message that names the keyword and says what is expected; numpy scalars of
every width (``np.float32``, ``np.int16``, ...) are accepted like Python's
``float`` and ``int``.  The exception type is the caller's documented one
(``ModelError``, ``FitError``, ``PlanError``, ...); all of them are
``ValueError`` subclasses.

The memory checks compare what a job will hold (a posterior chain, a global
search's starts) with the memory the system has available, before the job
starts.
"""

from __future__ import annotations

import math
import numbers
import os
from pathlib import Path

import numpy as np

__all__ = ["show", "is_real", "real_number", "whole_number", "real_numbers", "path_argument",
           "available_memory_bytes", "check_memory"]


def show(value) -> str:
    """The value as the user would write it: numpy scalars without their type, text quoted.

    Examples
    --------
    >>> show(np.float32(2.5)), show("9.4"), show(3)
    ('2.5', "'9.4'", '3')
    """
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, np.ndarray):
        return f"an array of shape {value.shape}"
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def is_real(value) -> bool:
    """True for a real number of any Python or numpy type (not a bool, not text).

    Examples
    --------
    >>> is_real(np.float32(1.0)), is_real(np.int8(3)), is_real(True), is_real("1")
    (True, True, False, False)
    """
    return isinstance(value, (numbers.Real, np.floating, np.integer)) and not isinstance(value, (bool, np.bool_))


def real_number(value, name: str, error=ValueError, *, low: float = -math.inf, high: float = math.inf,
                unit: str = "", finite: bool = True) -> float:
    """``value`` as a float, or ``error`` naming ``name`` and what is expected.

    Examples
    --------
    >>> real_number(np.float32(0.5), "threshold")
    0.5
    >>> try:
    ...     real_number("9.4", "field")
    ... except ValueError as e:
    ...     print(e)
    field must be a number, not text ('9.4')
    """
    if isinstance(value, (str, bytes)):
        raise error(f"{name} must be a number, not text ({show(value)})")
    if not is_real(value):
        raise error(f"{name} must be a number, got {type(value).__name__} ({show(value)})")
    v = float(value)
    if (finite and not math.isfinite(v)) or math.isnan(v) or not (low <= v <= high):
        raise error(f"{name} = {show(value)} is outside the allowed range [{low:g}, {high:g}]{unit}")
    return v


def whole_number(value, name: str, error=ValueError, *, low: float = -math.inf, high: float = math.inf) -> int:
    """``value`` as an int (any Python or numpy integer), or ``error`` naming ``name``.

    Floats are refused even when whole (``2.0``): a count is never a measurement.

    Examples
    --------
    >>> whole_number(np.int16(8), "starts", low=1)
    8
    >>> try:
    ...     whole_number(2.5, "starts", low=1)
    ... except ValueError as e:
    ...     print(e)
    starts must be a whole number (an int), got float (2.5)
    """
    if isinstance(value, (str, bytes)):
        raise error(f"{name} must be a whole number (an int), not text ({show(value)})")
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (numbers.Integral, np.integer)):
        raise error(f"{name} must be a whole number (an int), got {type(value).__name__} ({show(value)})")
    v = int(value)
    if not (low <= v <= high):
        hi = "" if high == math.inf else f"{high:g}"
        raise error(f"{name} = {v} is outside the allowed range [{low:g}, {hi or 'any'}]")
    return v


def real_numbers(value, name: str, error=ValueError, *, allow_single: bool = True,
                 example: str = "[9.4, 14.1]") -> list[float]:
    """A list of numbers from a sequence (or one number); text, mappings and sets are refused.

    Examples
    --------
    >>> real_numbers((9.4, np.float32(14.1)), "fields")
    [9.4, 14.100000381469727]
    >>> try:
    ...     real_numbers("9.4", "fields")
    ... except ValueError as e:
    ...     print(e)
    fields must be a list of numbers, not text ('9.4'); e.g. [9.4, 14.1]
    """
    if isinstance(value, (str, bytes)):
        raise error(f"{name} must be a list of numbers, not text ({show(value)}); e.g. {example}")
    if is_real(value) and allow_single:
        return [real_number(value, name, error, finite=False)]
    if isinstance(value, np.ndarray):
        if value.ndim != 1:
            raise error(f"{name} must be a list of numbers, got {show(value)}")
        value = value.tolist()
    if isinstance(value, (dict, set, frozenset)) or not hasattr(value, "__iter__"):
        raise error(f"{name} must be a list of numbers, got {type(value).__name__} ({show(value)})")
    out = []
    for i, v in enumerate(value):
        if not is_real(v):
            what = "text" if isinstance(v, (str, bytes)) else type(v).__name__
            raise error(f"{name}[{i}] must be a number, got {what} ({show(v)})")
        out.append(float(v))
    return out


def path_argument(value, name: str, error=ValueError) -> Path:
    """A file path from text or an ``os.PathLike``; None, arrays and other objects are refused.

    Examples
    --------
    >>> path_argument("a.csv", "path").name
    'a.csv'
    >>> try:
    ...     path_argument(None, "path")
    ... except ValueError as e:
    ...     print(e)
    path must be a file name (text or pathlib.Path), got None
    """
    if isinstance(value, (str, os.PathLike)) and not isinstance(value, bytes):
        text = os.fspath(value)
        if not str(text).strip():
            raise error(f"{name} is empty; give a file name")
        if "\x00" in str(text):
            raise error(f"{name} {show(value)} holds a NUL character; give a file name")
        return Path(text)
    got = "None" if value is None else f"{type(value).__name__} ({show(value)})"
    raise error(f"{name} must be a file name (text or pathlib.Path), got {got}")


def available_memory_bytes() -> int | None:
    """Memory the system can give a new job (``MemAvailable`` on Linux; free pages elsewhere), or None."""
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return int(os.sysconf("SC_AVPHYS_PAGES")) * int(os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return None


def _size(n: float) -> str:
    for unit, f in (("TB", 1e12), ("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if n >= f:
            return f"{n / f:.3g} {unit}"
    return f"{n:.0f} bytes"


def check_memory(nbytes: float, what: str, error=ValueError, *, share: float = 0.5) -> None:
    """Refuse a job that would hold more than ``share`` of the available memory.

    Parameters
    ----------
    nbytes : float
        What the job will hold.
    what : str
        The job and the settings that size it, for the message (e.g.
        ``"the posterior chain (walkers 64 x steps 1e9 x 3 parameters)"``).

    Examples
    --------
    >>> check_memory(1e3, "a small job")
    >>> try:
    ...     check_memory(1e30, "the posterior chain (--steps)")
    ... except ValueError as e:
    ...     print(str(e).split(";")[0])
    the posterior chain (--steps) would need 1e+18 TB of memory
    """
    avail = available_memory_bytes()
    if avail is None:
        avail = 8e9  # a cautious guess where the system does not say
    if nbytes > share * avail:
        raise error(f"{what} would need {_size(nbytes)} of memory; {_size(avail)} is available: "
                    "use smaller settings")
