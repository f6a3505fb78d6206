"""Frequency-stepped acquisitions: sub-spectra at several transmitter frequencies combined into one pattern.

A pattern wider than the excitation bandwidth is recorded piece by piece,
moving the transmitter between acquisitions.  Each sub-spectrum is processed
on its own and placed on the frequency scale by its own transmitter
frequency (:func:`powderspin.processing.process` does this: a point's
absolute frequency is its carrier plus its offset).  They are then put on one
uniform axis (linear interpolation; the finest step among them) and combined:

- ``"sum"`` (co-addition): the sum of the sub-spectra at each point;
- ``"skyline"``: at each point the largest of the sub-spectra that cover it
  (the skyline projection; e.g. R. W. Schurko, Acc. Chem. Res. 46 (2013)
  1985, for its use in wideline NMR; from memory).

Sub-spectra referenced to different frequencies (0 ppm) are first expressed
relative to the first one's.
"""

from __future__ import annotations

import json

import numpy as np

from ..io.spectra import DataError, MeasuredSpectrum

__all__ = ["combine_stepped"]


def combine_stepped(spectra, mode: str = "skyline") -> MeasuredSpectrum:
    """Combine sub-spectra of a frequency-stepped acquisition (module notes).

    Parameters
    ----------
    spectra : sequence of MeasuredSpectrum
        At least two, of one nucleus.
    mode : {"skyline", "sum"}

    Returns
    -------
    MeasuredSpectrum
        On a uniform axis spanning every sub-spectrum; ``metadata["processing"]``
        lists the parts (their own records and carriers) and the mode.

    Raises
    ------
    DataError
        Fewer than two spectra, different nuclei, or an unknown mode.

    Examples
    --------
    >>> hz = np.linspace(-5000.0, 5000.0, 101)
    >>> a = MeasuredSpectrum(hz, hz / 100.0, np.ones(101), None, 1e8, "a")
    >>> b = MeasuredSpectrum(hz + 8000.0, (hz + 8000.0) / 100.0, 2 * np.ones(101), None, 1e8, "b")
    >>> c = combine_stepped([a, b], "skyline")
    >>> float(c.hz[0]), float(c.hz[-1]), float(c.intensity[0]), float(c.intensity[-1])
    (-5000.0, 13000.0, 1.0, 2.0)
    """
    spectra = list(spectra)
    if mode not in ("skyline", "sum"):
        raise DataError("combine", f"mode = {mode!r} must be 'skyline' or 'sum'")
    if len(spectra) < 2:
        raise DataError("combine", "a frequency-stepped combination needs at least two sub-spectra; "
                        f"got {len(spectra)}")
    nucs = {s.nucleus for s in spectra if s.nucleus is not None}
    if len(nucs) > 1:
        raise DataError("combine", f"the sub-spectra observe different nuclei ({', '.join(sorted(nucs))})")
    nu0 = spectra[0].nu_ref_hz
    shifted = [np.asarray(s.hz) + (s.nu_ref_hz - nu0) for s in spectra]
    step = min(float(h[1] - h[0]) for h in shifted)
    lo = min(float(h[0]) for h in shifted)
    hi = max(float(h[-1]) for h in shifted)
    n = int(np.floor((hi - lo) / step + 1e-9)) + 1
    axis = lo + step * np.arange(n)
    if axis[-1] < hi - 1e-9 * abs(hi):
        axis = np.append(axis, axis[-1] + step)
    stack = np.full((len(spectra), axis.size), np.nan)
    for i, (h, s) in enumerate(zip(shifted, spectra)):
        inside = (axis >= h[0] - 1e-9 * step) & (axis <= h[-1] + 1e-9 * step)
        stack[i, inside] = np.interp(axis[inside], h, s.intensity)
    covered = np.any(np.isfinite(stack), axis=0)
    if mode == "sum":
        y = np.nansum(stack, axis=0)
    else:
        y = np.where(covered, np.nanmax(np.where(np.isfinite(stack), stack, -np.inf), axis=0), 0.0)
    parts = []
    for s in spectra:
        rec = s.metadata.get("processing")
        parts.append({"source": s.source, "nu_ref_hz": s.nu_ref_hz,
                      "processing": json.loads(rec) if rec else {}})
    meta = {"format": f"frequency-stepped combination ({mode})",
            "processing": json.dumps({"combination": mode, "parts": parts, "step_hz": step,
                                      "uncovered_points": int((~covered).sum())}, separators=(",", ":")),
            "nu_ref_source": spectra[0].metadata.get("nu_ref_source", "first sub-spectrum")}
    fields = [s.field_tesla for s in spectra if s.field_tesla is not None]
    return MeasuredSpectrum(hz=axis, ppm=1e6 * axis / nu0, intensity=y, imag=None, nu_ref_hz=nu0,
                            source=" + ".join(s.source for s in spectra), nucleus=spectra[0].nucleus,
                            field_tesla=fields[0] if fields else None, metadata=meta)
