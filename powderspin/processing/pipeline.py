"""From a FID to a referenced spectrum: the processing steps, each optional and each recorded.

The steps, in order (each can be switched off; every value used is recorded
in ``spectrum.metadata["processing"]``, a JSON text, so that a result file can
say exactly how its data were made):

1. **Row**: one FID of a series (``row``).
2. **DC offset** (``dc_offset = "tail"``): the mean of the last tenth of the
   points (where the signal has decayed) is subtracted; a receiver offset
   would otherwise put a spike at the carrier.  Not applied to echo trains,
   whose last points hold echoes.
3. **Echo train** (``echo_train``): ``"coadd"`` co-adds the echoes into one
   whole echo (:func:`powderspin.processing.echoes.coadd_echoes`), which is
   then processed as a whole echo; ``"spikelets"`` keeps the train and starts
   it at the first echo top (a half echo), giving the spikelet spectrum.
4. **Time origin**:
   - a FID: the digital filter delays the signal by ``G`` dwell times
     (fractional; ``group_delay_points`` or the data's parameters).  Points
     may be dropped from the start (``left_shift_points`` = k); the
     remaining delay ``G - k`` is removed exactly after the transform as the
     first-order phase ``exp(+2 pi i f (G - k) dw)`` (design notes, section
     10: with the stored FID rotating as exp(+2 pi i f t), a delay of tau
     multiplies the spectrum by exp(-2 pi i f tau)).  ``group_delay = "keep"``
     leaves the delay in the data (the phasing step may then take it out).
   - ``echo = "half"``: the data start at the echo top (found from the
     largest magnitude, or ``echo_top_points``); the fractional part of the
     top is removed as the same first-order phase.
   - ``echo = "whole"``: the whole echo is transformed about its top: the
     points from the top on come first, the points before it are wrapped to
     the end of the zero-filled array, and the fractional part of the top is
     removed as a phase.  For an echo symmetric about its top this gives the
     absorption spectrum without first-order phase.
5. **Apodisation**: exponential ``exp(-pi L |t|)`` (adds a Lorentzian of full
   width L Hz) and Gaussian ``exp(-(pi G t)^2 / (4 ln 2))`` (adds a Gaussian of
   full width G Hz), t measured from the time origin (the echo top).
6. **First point**: halved when the first point is the time origin (a FID
   without delay, or a half echo): the discrete transform then approximates
   the continuous one without a baseline offset (G. Otting, H. Widmer,
   G. Wagner, K. Wüthrich, J. Magn. Reson. 66 (1986) 187; from memory).
7. **Zero filling** to ``zero_fill_points`` (default the next power of two at
   least twice the FID's length).
8. **Fourier transform**: ``numpy.fft.fftshift(numpy.fft.fft(...))``; the
   points run up in frequency, the carrier on point ``n // 2`` (module notes of
   :mod:`powderspin.io.raw`).
9. **Phase** (:mod:`powderspin.processing.phasing`): automatic (causality
   and the signal at the time origin, or minimum entropy), manual or none.
10. **Baseline** (:mod:`powderspin.processing.baseline`): polynomial or
    smoothing spline through automatically found signal-free regions, which
    are reported in ppm.
11. **Referencing** (:mod:`powderspin.processing.referencing`).

The result is a :class:`~powderspin.io.spectra.MeasuredSpectrum` (ascending
Hz offsets from nu_ref, ppm, the real part as intensity, the imaginary part),
the same value the fit reads from a spectrum file.
"""

from __future__ import annotations

import json
import math
from dataclasses import replace

import numpy as np

from ..io.raw import RawFID, read_raw
from ..io.spectra import DataError, MeasuredSpectrum
from .baseline import correct_baseline
from .echoes import coadd_echoes, find_echo_top
from .options import ProcessingError, ProcessingOptions
from .phasing import apply_phase, auto_phase, causal_phase
from .referencing import reference_frequency

__all__ = ["process", "processing_record", "DC_TAIL_FRACTION"]

#: the fraction of the FID at its end whose mean is the receiver's DC offset
DC_TAIL_FRACTION = 0.1


def _next_pow2(n: int) -> int:
    return 1 << max(4, int(math.ceil(math.log2(max(n, 1)))))


def _clean(value):
    """Plain JSON values without None (TOML has no null)."""
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items() if v is not None}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value if v is not None]
    if isinstance(value, (np.floating, float)):
        return float(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    return value


def processing_record(spectrum) -> dict:
    """The processing record of a spectrum made by :func:`process` (empty for any other spectrum).

    Parameters
    ----------
    spectrum : MeasuredSpectrum

    Returns
    -------
    dict

    Examples
    --------
    >>> import numpy as np
    >>> from powderspin.io.raw import RawFID
    >>> fid = np.exp((2j * np.pi * 1000.0 - 200.0) * np.arange(1024) * 1e-5)
    >>> raw = RawFID(fid, 1e-5, 104.26e6, 104.26e6, "27Al", None, 0.0, "memory")
    >>> processing_record(process(raw))["phase"]["mode"]
    'auto'
    """
    text = spectrum.metadata.get("processing")
    if not text:
        return {}
    return json.loads(text)


def process(data, options: ProcessingOptions | None = None, *, reference=None, **changes) -> MeasuredSpectrum:
    """Process raw time-domain data into a referenced spectrum (module notes give the steps).

    Parameters
    ----------
    data : RawFID or str or os.PathLike
        The FID, or anything :func:`powderspin.io.raw.read_raw` reads (a
        spectrometer folder, for ``.npy``/text FIDs read them first with
        their dwell time).
    options : ProcessingOptions, optional
        The settings (default: every default of the ``[processing]`` keys).
    reference : RawFID or path, optional
        Data of a secondary reference compound: its tallest line, processed
        with the same options, is taken to have ``reference_shift_ppm``
        (which must be given); this fills in ``reference_mhz``.
    **changes
        Individual options, overriding ``options`` (the ``[processing]``
        keys, e.g. ``exponential_hz=50.0``).

    Returns
    -------
    MeasuredSpectrum
        Ascending in Hz from nu_ref; ``metadata["processing"]`` is the JSON
        record of every step (:func:`processing_record`).

    Raises
    ------
    DataError
        Unreadable data, or data that lack what a step needs.
    ProcessingError
        An option outside its range.

    See Also
    --------
    powderspin.io.raw.read_raw, powderspin.processing.stepped.combine_stepped

    References
    ----------
    .. [1] L. Chen et al., J. Magn. Reson. 158 (2002) 164 (automatic phasing).
    .. [2] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (referencing).

    Examples
    --------
    >>> import numpy as np
    >>> from powderspin.io.raw import RawFID
    >>> from powderspin.processing.referencing import tallest_line_hz
    >>> t = np.arange(2048) * 1e-5
    >>> fid = (np.exp(2j * np.pi * 1200.0 * t) + 0.5 * np.exp(-2j * np.pi * 3000.0 * t)) * np.exp(-np.pi * 100.0 * t)
    >>> raw = RawFID(fid * np.exp(1j * np.deg2rad(40.0)), 1e-5, 104.26e6 + 2000.0, 104.26e6, "27Al", None, 0.0,
    ...              "memory")
    >>> spec = process(raw, exponential_hz=20.0)
    >>> round(tallest_line_hz(spec.hz, spec.intensity))      # carrier + 1200 Hz, from 0 ppm
    3200
    >>> round(processing_record(spec)["phase"]["phase0_deg"])
    -40
    """
    opts = options if options is not None else ProcessingOptions()
    if reference is not None:  # the secondary reference is filled in below from the reference data
        changes = {**changes, "referencing": "spectrometer"}
    if changes:
        opts = replace(opts, **changes)
    if not isinstance(data, RawFID):
        data = read_raw(data, expect="any" if opts.row is not None else "fid")
    raw = data
    source = raw.source
    if reference is not None:
        if opts.reference_shift_ppm is None:
            raise ProcessingError("processing: a reference data set needs reference_shift_ppm (the shift of its "
                                  "tallest line on the unified scale)")
        ref_raw = reference if isinstance(reference, RawFID) else read_raw(reference, expect="fid")
        ref_opts = replace(opts, referencing="spectrometer", reference_mhz=None, row=None, echo_train="none",
                           baseline="none")
        ref_spec = process(ref_raw, ref_opts)
        from .referencing import tallest_line_hz
        line_abs = tallest_line_hz(ref_spec.hz, ref_spec.intensity) + ref_spec.nu_ref_hz
        opts = replace(opts, referencing="secondary", reference_mhz=line_abs / 1e6)
        reference_note = {"data": ref_raw.source, "tallest_line_mhz": line_abs / 1e6}
    else:
        reference_note = None
    rec: dict = {"data": source, "format": raw.metadata.get("format"), "options": opts.changed()}

    # 1. row
    if raw.data.ndim == 2:
        if opts.row is None:
            raise DataError(source, f"holds {raw.data.shape[0]} FIDs; choose one with row = N (--row N)")
        raw = raw.row(opts.row)
        rec["row"] = opts.row
    elif opts.row not in (None, 0):
        raise DataError(source, f"row = {opts.row}: the data hold one FID; only row 0 exists")
    s = np.array(raw.data, dtype=complex)
    n = s.size
    dw = raw.dwell_s
    rec["points"] = n
    rec["dwell_us"] = dw * 1e6
    if raw.carrier_hz is None:
        raise DataError(source, "the carrier (transmitter) frequency is unknown; give carrier_mhz for a .npy or "
                        "text FID")
    rec["carrier_mhz"] = raw.carrier_hz / 1e6

    # 2. DC offset
    if opts.dc_offset == "tail" and opts.echo_train == "none":
        k = max(4, int(round(DC_TAIL_FRACTION * n)))
        dc = s[-k:].mean()
        s = s - dc
        rec["dc_offset"] = {"mode": "tail", "tail_points": k, "subtracted": [float(dc.real), float(dc.imag)]}
    else:
        rec["dc_offset"] = {"mode": "none" if opts.dc_offset == "none" else "not applied to an echo train"}

    # 3. echo train
    echo = opts.echo
    top = opts.echo_top_points
    if opts.echo_train != "none":
        period = opts.echo_period_us * 1e-6 / dw
        first = top if top is not None else find_echo_top(s, 0, int(1.5 * period) + 1)
        if opts.echo_train == "coadd":
            s, top_i, info = coadd_echoes(s, first, period, opts.echo_count, source)
            rec["echo_train"] = {"mode": "coadd", **info}
            echo, top = "whole", float(top_i)
        else:
            if opts.echo_count is not None:
                end = int(round(first + (opts.echo_count - 0.5) * period))
                s = s[: max(end, int(first) + 2)]
                echoes = opts.echo_count
            else:  # every echo whose top lies in the data
                echoes = int(math.floor((s.size - 1 - first) / period)) + 1
            rec["echo_train"] = {"mode": "spikelets", "first_top_points": float(first), "period_points": period,
                                 "spikelet_spacing_hz": 1.0 / (opts.echo_period_us * 1e-6), "echoes": echoes}
            echo, top = "half", float(first)
        n = s.size

    # 4. time origin
    G = 0.0
    if echo == "none":
        if opts.group_delay == "remove":
            G = raw.group_delay_points if opts.group_delay_points is None else float(opts.group_delay_points)
            rec["group_delay"] = {"mode": "removed as an exact first-order phase", "points": G,
                                  "source": "given" if opts.group_delay_points is not None
                                  else raw.metadata.get("group_delay_source", "none")}
        else:
            rec["group_delay"] = {"mode": "kept"}
        k = opts.left_shift_points
        if k >= n - 8:
            raise ProcessingError(f"processing: left_shift_points = {k} leaves fewer than 8 of the {n} points")
        s = s[k:]
        delay = G - k
        rec["left_shift_points"] = k
        t_after = (np.arange(s.size) - delay) * dw
        t_before = np.zeros(0)
        after, before = s, s[:0]
        first_is_origin = delay == 0
    else:
        if top is None:
            top = find_echo_top(s)
            top_source = "largest magnitude"
        else:
            top_source = "given" if opts.echo_train == "none" else "echo train"
        if not 0 <= top < n - 8:
            raise ProcessingError(f"processing: echo_top_points = {top:g} must lie within the first {n - 8} points")
        ti = int(round(top))
        delay = top - ti
        after, before = s[ti:], s[:ti] if echo == "whole" else s[:0]
        t_after = (np.arange(after.size) - delay) * dw
        t_before = (np.arange(before.size) - top) * dw
        first_is_origin = echo == "half"
        rec["echo"] = {"mode": echo, "top_points": float(top), "top_source": top_source}
        rec["group_delay"] = {"mode": "contained in the echo top"}

    # 5. apodisation
    lb, gb = opts.exponential_hz, opts.gaussian_hz

    def window(t):
        w = np.ones(t.size)
        if lb > 0:
            w *= np.exp(-np.pi * lb * np.abs(t))
        if gb > 0:
            w *= np.exp(-(np.pi * gb * t) ** 2 / (4.0 * np.log(2.0)))
        return w

    if lb > 0 or gb > 0:
        after = after * window(t_after)
        before = before * window(t_before)
    rec["apodisation"] = {"exponential_hz": lb, "gaussian_hz": gb}

    # 6. first point
    if first_is_origin and after.size:
        after = after.copy()
        after[0] *= 0.5
        rec["first_point"] = "halved (it is the time origin)"
    else:
        rec["first_point"] = "kept"

    # 7. zero filling
    used = after.size + before.size
    z_n = opts.zero_fill_points if opts.zero_fill_points is not None else _next_pow2(2 * used)
    if z_n < used:
        raise ProcessingError(f"processing: zero_fill_points = {z_n} is fewer than the {used} points of the data; "
                              f"give at least {used}")
    z = np.zeros(z_n, dtype=complex)
    z[: after.size] = after
    if before.size:
        z[z_n - before.size:] = before
    rec["zero_fill_points"] = z_n

    # 8. transform (+ exact delay)
    spec = np.fft.fftshift(np.fft.fft(z))
    f = (np.arange(z_n) - z_n // 2) / (z_n * dw)
    if delay != 0:
        spec = spec * np.exp(2j * np.pi * f * delay * dw)
    rec["transform"] = {"points": z_n, "step_hz": 1.0 / (z_n * dw), "delay_removed_points": float(delay)}

    # 9. phase
    if opts.phase == "auto":
        p0, p1 = causal_phase(spec, whole_echo=echo == "whole")
        rec["phase"] = {"mode": "auto", "criterion": "causality and the signal at the time origin",
                        "phase0_deg": p0, "phase1_deg": p1}
    elif opts.phase == "entropy":
        p0, p1 = auto_phase(spec)
        rec["phase"] = {"mode": "entropy", "criterion": "minimum entropy (Chen et al. 2002)", "phase0_deg": p0,
                        "phase1_deg": p1}
    elif opts.phase == "manual":
        p0, p1 = opts.phase0_deg, opts.phase1_deg
        rec["phase"] = {"mode": "manual", "phase0_deg": p0, "phase1_deg": p1}
    else:
        p0 = p1 = 0.0
        rec["phase"] = {"mode": "none"}
    if p0 or p1:
        spec = apply_phase(spec, p0, p1)

    # 11 (before 10, which reports ppm). referencing
    nu_ref, how = reference_frequency(opts, raw.nucleus, raw.base_hz, source)
    hz = raw.carrier_hz + f - nu_ref
    ppm = 1e6 * hz / nu_ref
    rec["referencing"] = {"mode": opts.referencing, "nu_ref_hz": nu_ref, "how": how}
    if reference_note is not None:
        rec["referencing"]["reference_data"] = reference_note

    # 10. baseline
    real = spec.real.copy()
    if opts.baseline != "none":
        b = correct_baseline(real, opts.baseline, opts.baseline_degree)
        if b.fitted:
            real = real - b.baseline
        rec["baseline"] = {"mode": opts.baseline, "degree": opts.baseline_degree, "fitted": b.fitted,
                           "note": b.note,
                           "regions_ppm": [[float(ppm[j]), float(ppm[i])] for i, j in b.regions]}
    else:
        rec["baseline"] = {"mode": "none"}

    from .. import __version__
    rec["powderspin_version"] = __version__
    meta = {"format": f"processed from raw data ({raw.metadata.get('format', 'FID')})",
            "processing": json.dumps(_clean(rec), separators=(",", ":")),
            "nu_ref_source": how, "nucleus_source": "stated by the data" if raw.nucleus else "unknown"}
    if raw.field_tesla is not None:
        meta["field_source"] = raw.metadata.get("field_source", "stated by the data")
    return MeasuredSpectrum(hz=hz, ppm=ppm, intensity=real, imag=spec.imag.copy(), nu_ref_hz=nu_ref, source=source,
                            nucleus=raw.nucleus, field_tesla=raw.field_tesla, metadata=meta)
