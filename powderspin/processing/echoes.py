"""Echoes: finding an echo top, and co-adding the echoes of a CPMG/QCPMG train into one whole echo.

An echo train holds echoes whose tops are ``period`` apart (the time from one
refocusing pulse to the next).  Co-adding the echoes gives one whole echo with
the signal of all of them; its transform is the powder pattern at the
resolution 1/period allows.  Transforming the whole train instead gives the
spikelet spectrum: the pattern sampled every 1/period Hz (F. H. Larsen,
H. J. Jakobsen, P. D. Ellis, N. C. Nielsen, J. Phys. Chem. A 101 (1997) 8597;
from memory).

Each echo is cut out about its own top (a whole number of points, ``period``
rounded down to an even number) and moved so that its top falls exactly on
the middle point: the fractional part of the shift is applied as a phase ramp
on the segment's discrete Fourier transform (band-limited interpolation;
exact for a signal that has decayed at the segment's ends).
"""

from __future__ import annotations

import numpy as np

from ..io.spectra import DataError

__all__ = ["find_echo_top", "coadd_echoes"]


def find_echo_top(data: np.ndarray, start: int = 0, stop: int | None = None) -> float:
    """Position (fractional, in points) of the largest magnitude in ``data[start:stop]``.

    The magnitude is smoothed over 3 points, and the maximum refined by a
    parabola through it and its neighbours.

    Parameters
    ----------
    data : ndarray of complex
    start, stop : int, optional
        The range searched.

    Returns
    -------
    float

    Examples
    --------
    >>> t = np.arange(256)
    >>> round(find_echo_top(np.exp(-((t - 100.3) / 12.0) ** 2)), 1)
    100.3
    """
    a = np.abs(np.asarray(data))
    stop = a.size if stop is None else min(stop, a.size)
    start = max(0, start)
    if stop - start < 3:
        return float(start)
    m = np.convolve(a, np.ones(3) / 3.0, mode="same")
    k = start + int(np.argmax(m[start:stop]))
    if 0 < k < a.size - 1:
        y0, y1, y2 = a[k - 1], a[k], a[k + 1]
        den = y0 - 2 * y1 + y2
        if den < 0:
            d = 0.5 * (y0 - y2) / den
            if abs(d) <= 1:
                return float(k + d)
    return float(k)


def coadd_echoes(data: np.ndarray, first_top: float, period_points: float, count: int | None = None,
                 source: str = "data") -> tuple[np.ndarray, int, dict]:
    """Co-add the echoes of a train into one whole echo (module notes).

    Parameters
    ----------
    data : ndarray of complex
        The echo train.
    first_top : float
        Position of the first echo top (points).
    period_points : float
        Echo period (points); at least 8.
    count : int, optional
        Echoes to add (default: every whole echo in the data; an echo whose
        segment would reach before the first point or past the last is left
        out).
    source : str
        The data, for messages.

    Returns
    -------
    echo : ndarray of complex
        The co-added whole echo, ``L`` points (``period`` rounded down to an
        even number), its top on point ``L // 2``.
    top : int
        ``L // 2``.
    info : dict
        Echoes added, segment length, the tops used.

    Raises
    ------
    DataError
        A period shorter than 8 points, or fewer whole echoes than asked for.

    Examples
    --------
    >>> t = np.arange(4096)
    >>> train = sum(np.exp(-((t - (60.0 + 128.0 * k)) / 6.0) ** 2) for k in range(32))
    >>> echo, top, info = coadd_echoes(train, 60.0, 128.0)   # the first echo is cut off at the start
    >>> info["echoes"], top, round(float(echo[top].real), 6)
    (31, 64, 31.0)
    """
    s = np.asarray(data, dtype=complex)
    if period_points < 8:
        raise DataError(source, f"echo_period_us gives {period_points:.3g} points per echo; at least 8 are needed")
    seg = int(np.floor(period_points)) // 2 * 2
    half = seg // 2
    tops = []
    k = 0
    while True:
        t = first_top + k * period_points
        i0 = int(np.round(t)) - half
        if i0 < 0 or i0 + seg > s.size:
            if i0 < 0:
                k += 1
                if k > s.size:
                    break
                continue
            break
        tops.append(t)
        k += 1
        if count is not None and len(tops) == count:
            break
    if not tops or (count is not None and len(tops) < count):
        raise DataError(source, f"the data hold {len(tops)} whole echoes of {seg} points from the first top at point "
                        f"{first_top:.1f}; echo_count = {count} asks for more")
    nu = np.fft.fftfreq(seg)
    acc = np.zeros(seg, dtype=complex)
    for t in tops:
        i0 = int(np.round(t)) - half
        piece = s[i0:i0 + seg]
        shift = half - (t - i0)           # move the top onto point `half`
        acc += np.fft.ifft(np.fft.fft(piece) * np.exp(-2j * np.pi * nu * shift))
    info = {"echoes": len(tops), "segment_points": seg, "first_top_points": float(tops[0]),
            "period_points": float(period_points)}
    return acc, half, info
