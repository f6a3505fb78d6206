"""The simulation pipeline: model -> per-site jobs -> lines -> rendered, summed spectrum.

One representation, two producers, one consumer (DEVELOPERS.md):

1. each site becomes a hashable :class:`~powderspin.engine.site_lines.SiteJob`; the
   producer (perturbative or exact, ``"auto"`` decided once per site) and the
   orientation set are fixed there;
2. :func:`~powderspin.engine.site_lines.compute_lines` gives each transition's line
   position and sideband intensities at every orientation;
3. :func:`~powderspin.engine.site_lines.render_lines` bins them with triangle
   interpolation, translates them by the isotropic shift, weighs and
   broadens them; the sites are summed.
"""

from __future__ import annotations

import functools
import math
from pathlib import Path

import numpy as np

from .disorder.sites import DistributedSite, default_kernel_store, shift_fwhm_hz
from .engine.lineshape import Axis, make_axis
from .engine.site_lines import (
    ORIENTATION_TARGET,
    SiteLines,
    check_high_field,
    choose_method,
    choose_orientations,
    compute_lines,
    estimate_span_hz,
    render_lines,
    site_job,
)
from .engine.spectrum import SidebandRow, Spectrum
from .model.values import Model, ModelError, selected_transitions, site_key_values
from .physics.orientations import OrientationSet, orientation_set_by_name

__all__ = ["simulate", "simulate_all", "package_version", "baseline_values", "LOST_NOTE_FRACTION"]

#: a note is added when more than this fraction of a site's intensity lies off the axis
LOST_NOTE_FRACTION = 1e-3


@functools.lru_cache(maxsize=1)
def package_version() -> str:
    """The installed package version (``importlib.metadata``), or ``"unknown"`` from a bare source tree.

    Returns
    -------
    str

    Examples
    --------
    >>> isinstance(package_version(), str)
    True
    """
    from importlib import metadata

    try:
        return metadata.version("powderspin")
    except metadata.PackageNotFoundError:  # pragma: no cover - running from an uninstalled tree
        return "unknown"


def _as_model(model) -> Model:
    if isinstance(model, Model):
        return model
    if isinstance(model, (str, Path)):
        from .model.modelfile import load_model

        return load_model(model)
    raise ModelError(f"simulate: expected a Model or the path of a model file, got {type(model).__name__}")


def _widest_broadening_hz(model: Model, meas) -> float:
    nu_ref = model.nucleus.larmor_hz(meas.field_tesla)
    return max(s.lorentz_hz + meas.lorentz_hz + 2 * math.hypot(s.gauss_hz, meas.gauss_hz, shift_fwhm_hz(s, nu_ref))
               for s in model.sites)


def simulate(model, *, measurement: int = 0, orientations: OrientationSet | None = None, progress=None,
             allow_strong_coupling: bool = False, lines_memo: dict | None = None, axis: Axis | None = None,
             methods=None, render_memo: dict | None = None, kernel_store=None) -> Spectrum:
    """Simulate the spectrum of a model (one measurement).

    Parameters
    ----------
    model : Model or str or pathlib.Path
        Nucleus, measurement(s) and sites, or the path of a model file.
    measurement : int, optional
        Which measurement (0-based) of a model with several.
    orientations : OrientationSet or sequence, optional
        Override the measurement's orientation choice: one set for every
        site, or one set (or set name) per site (a fit fixes them once).
    progress : callable, optional
        ``progress(site_label, done, total)`` while a site's lines are
        computed (work units are orientations).
    allow_strong_coupling : bool, optional
        Compute sites whose quadrupolar frequency exceeds half the Larmor
        frequency (refused by default: the high-field picture fails there).
    lines_memo : dict, optional
        ``SiteJob -> SiteLines`` memo shared between calls (a fit passes one
        so that unchanged sites are not recomputed).
    axis : Axis, optional
        The spectral axis to render on (e.g. a measured spectrum's); the
        measurement's ``points``, ``center_ppm`` and ``width_ppm`` are then
        not used.
    methods : sequence of str, optional
        The producer of each site (``"perturbation"`` or ``"exact"``),
        overriding the ``method = "auto"`` decision (a fit fixes it once, so
        that its objective does not jump between producers).
    render_memo : dict, optional
        Memo of binned lines shared between calls (see
        :func:`~powderspin.engine.site_lines.render_lines`): a fit passes one so that
        a site whose lines and translation did not change is not binned again.
    kernel_store : powderspin.disorder.sites.KernelStore, optional
        Where the kernels of sites with an EFG distribution are kept and
        looked up (default: the process-wide store of the lineshape library,
        :func:`powderspin.disorder.sites.default_kernel_store`).  Sites with a
        distribution are weighted sums of cached kernels
        (:mod:`powderspin.disorder.sites`); ``shift_fwhm_ppm`` adds a Gaussian
        broadening of ``shift_fwhm_ppm * nu_ref * 1e-6`` Hz.

    Returns
    -------
    Spectrum
        Axis in Hz and ppm, per-site and summed intensities (densities per ppm;
        each site integrates to its weight), the metadata that made it and,
        under finite-rate spinning, the sideband table.  A measurement's
        ``scale`` (default 1) multiplies every site, and its ``baseline``
        polynomial (default none) is added to the sum: this is how a fit's
        result file reproduces the fitted curve.

    See Also
    --------
    simulate_all : every measurement of a model.
    powderspin.engine.site_lines.compute_lines, powderspin.engine.site_lines.render_lines

    References
    ----------
    D. W. Alderman, M. S. Solum, D. M. Grant, J. Chem. Phys. 84 (1986) 3717
    (triangle interpolation); M. H. Levitt, J. Magn. Reson. 82 (1989) 427
    (sidebands); A. Samoson, Chem. Phys. Lett. 119 (1985) 29 (second-order
    quadrupolar shifts).

    Examples
    --------
    >>> from powderspin.model.modelfile import parse_model
    >>> m = parse_model({"nucleus": "27Al",
    ...                  "measurement": {"field_tesla": 14.1, "points": 512},
    ...                  "site": [{"shift_ppm": 60.0, "cq_mhz": 3.0, "eta_q": 0.3}]})
    >>> spec = simulate(m)
    >>> round(spec.area(), 3)
    1.0
    """
    model = _as_model(model)
    if not (isinstance(measurement, int) and 0 <= measurement < len(model.measurements)):
        raise ModelError(f"simulate: measurement = {measurement!r} must be an index in "
                         f"[0, {len(model.measurements) - 1}]")
    meas = model.measurements[measurement]
    nuc = model.nucleus
    nu_ref = nuc.larmor_hz(meas.field_tesla)
    notes = check_high_field(model.sites, nuc, meas.field_tesla, allow_strong_coupling=allow_strong_coupling)
    offset_hz = meas.shift_offset_ppm * nu_ref * 1e-6
    widest = _widest_broadening_hz(model, meas)
    explicit_axis = axis is not None or (meas.center_ppm is not None and meas.width_ppm is not None)

    def axis_from(spans) -> Axis:
        lo = min(s[0] for s in spans) - 4 * widest
        hi = max(s[1] for s in spans) + 4 * widest
        return make_axis(meas.points, nu_ref, meas.center_ppm, meas.width_ppm, (lo, hi))

    # sites with an EFG distribution: weighted sums of cached kernels (powderspin.disorder.sites)
    distributed = {k: DistributedSite(model, k, measurement, allow_strong_coupling=allow_strong_coupling)
                   for k, site in enumerate(model.sites) if _has_distribution(model, k)}
    for d in distributed.values():
        notes.extend(n for n in d.notes if n not in notes)

    def span_of(k, site):
        if k in distributed:
            lo, hi = distributed[k].span_hz()
            return (lo + site.shift.iso_ppm * nu_ref * 1e-6 + offset_hz, hi + site.shift.iso_ppm * nu_ref * 1e-6
                    + offset_hz)
        return tuple(x + offset_hz for x in estimate_span_hz(site, meas, nuc))

    if axis is not None:
        if abs(axis.nu_ref_hz - nu_ref) > 1e-9 * nu_ref:
            raise ModelError(f"simulate: the axis has nu_ref = {axis.nu_ref_hz:.9g} Hz but the measurement's is "
                             f"{nu_ref:.9g} Hz ({nuc.name} at {meas.field_tesla:g} T)")
    elif explicit_axis:
        axis = make_axis(meas.points, nu_ref, meas.center_ppm, meas.width_ppm)
    else:
        axis = axis_from([span_of(k, s) for k, s in enumerate(model.sites)])
    # the method is decided once per site, against half a point of the (estimated) axis
    if methods is not None and len(methods) != len(model.sites):
        raise ModelError(f"simulate: methods has {len(methods)} entries for {len(model.sites)} sites")
    per_site = _per_site_orientations(orientations, len(model.sites))
    memo = lines_memo if lines_memo is not None else {}
    jobs = []
    orientation_error = {}
    for k, site in enumerate(model.sites):
        if k in distributed:
            jobs.append(None)
            continue
        if methods is not None:
            method = methods[k]
        else:
            method, note = choose_method(site, meas, nuc, 0.5 * axis.dx_hz)
            if note:
                notes.append(note)
        oset = per_site[k]
        if oset is None and meas.orientations == "auto":
            oset, err = choose_orientations(site, meas, nuc, method, axis,
                                            shift_hz=site.shift.iso_ppm * nu_ref * 1e-6 + offset_hz, lines_memo=memo)
            orientation_error[site.label] = err
        jobs.append(site_job(site, meas, nuc, method, oset))
    lines: list[SiteLines] = []
    for k, (site, job) in enumerate(zip(model.sites, jobs)):
        if job is None:
            lines.append(None)
            continue
        sl = memo.get(job)
        if sl is None:
            cb = None if progress is None else (lambda d, t, _l=site.label: progress(_l, d, t))
            given = per_site[k]
            sl = compute_lines(job, orientations=given if given is not None and given.name == job.orientations
                               else None, progress=cb)
            memo[job] = sl
        lines.append(sl)
        notes.extend(f"site '{site.label}': {n}" for n in sl.notes)
    shifts = [(site.shift.iso_ppm - (job.iso_ppm if job is not None else 0.0)) * nu_ref * 1e-6 + offset_hz
              for site, job in zip(model.sites, jobs)]
    if not explicit_axis:
        axis = axis_from([span_of(k, site) if sl is None else tuple(x + sh for x in sl.frequency_range())
                          for k, (site, sl, sh) in enumerate(zip(model.sites, lines, shifts))])
    if distributed and kernel_store is None:
        kernel_store = default_kernel_store()
    ys = []
    sidebands: list[SidebandRow] = []
    for k, (site, sl, sh) in enumerate(zip(model.sites, lines, shifts)):
        gauss = math.hypot(site.gauss_hz, meas.gauss_hz, shift_fwhm_hz(site, nu_ref))
        if sl is None:
            cb = None if progress is None else (lambda d, t, _l=site.label: progress(f"{_l}: kernel grid", d, t))
            r = distributed[k].render(axis, shift_hz=sh, store=kernel_store, weight=site.weight,
                                      lorentz_hz=site.lorentz_hz + meas.lorentz_hz, gauss_hz=gauss, progress=cb)
        else:
            r = render_lines(sl, axis, shift_hz=sh, weight=site.weight, lorentz_hz=site.lorentz_hz + meas.lorentz_hz,
                             gauss_hz=gauss, binning=meas.binning, memo=render_memo)
        ys.append(r.intensity)
        if r.lost_fraction > LOST_NOTE_FRACTION and site.weight > 0:
            notes.append(f"site '{site.label}': {r.lost_fraction:.2%} of its intensity lies outside the axis "
                         "(widen width_ppm or move center_ppm)")
        if sl is not None and sl.phases > 1:
            sidebands.extend(sideband_rows(site.label, site.weight, sl, nu_ref, sh))
    ys = np.array(ys)
    total = ys.sum(axis=0)
    if meas.scale != 1.0:
        ys = ys * meas.scale
        total = total * meas.scale
    if meas.baseline:
        total = total + baseline_values(meas.baseline, axis)
    m_upper = selected_transitions(nuc.spin, meas.transitions)
    meta = {
        "powderspin_version": package_version(),
        "nucleus": nuc.name,
        "spin": nuc.spin_label,
        "field_tesla": meas.field_tesla,
        "nu_ref_hz": nu_ref,
        "spinning_hz": "inf" if meas.is_infinite_rate else meas.spinning_hz,
        "rotor_angle_deg": meas.rotor_angle_deg if not meas.is_static else "n/a (static)",
        "transitions": [f"{_frac(m)}:{_frac(m - 1)}" for m in m_upper],
        "method": {s.label: (sl.method if sl is not None else distributed[k].method)
                   for k, (s, sl) in enumerate(zip(model.sites, lines))},
        "orientations": {s.label: (f"{sl.orientations.name} ({sl.orientations.size} directions)" if sl is not None
                                   else distributed[k].kernel_set.orientations)
                         for k, (s, sl) in enumerate(zip(model.sites, lines))},
        "orientation_error": {label: f"{err:.2g} of the maximum, RMS (estimated; target "
                                     f"{ORIENTATION_TARGET:g})" for label, err in orientation_error.items()},
        "rotor_phases": {s.label: sl.phases for s, sl in zip(model.sites, lines) if sl is not None},
        "binning": meas.binning,
        "lorentz_hz": meas.lorentz_hz,
        "gauss_hz": meas.gauss_hz,
        "shift_offset_ppm": meas.shift_offset_ppm,
        "points": axis.points,
        "sites": {s.label: _site_record(s) for s in model.sites},
        "intensity_units": "density per ppm; each site integrates to its weight",
        "notes": notes,
    }
    if distributed:
        meta["distributions"] = {model.sites[k].label: d.describe() for k, d in distributed.items()}
    if meas.scale != 1.0:
        meta["scale"] = meas.scale
    if meas.baseline:
        meta["baseline"] = list(meas.baseline)
    if len(model.measurements) > 1:
        meta["measurement"] = f"{measurement + 1} of {len(model.measurements)}"
    if model.source:
        meta["model"] = model.source
    return Spectrum(axis.hz, axis.ppm, total, tuple(s.label for s in model.sites), ys, meta,
                    tuple(sidebands))


def _per_site_orientations(orientations, n_sites: int) -> list:
    if orientations is None:
        return [None] * n_sites
    if isinstance(orientations, OrientationSet):
        return [orientations] * n_sites
    sets = list(orientations)
    if len(sets) != n_sites:
        raise ModelError(f"simulate: orientations has {len(sets)} entries for {n_sites} sites")
    return [orientation_set_by_name(o) if isinstance(o, str) else o for o in sets]


def baseline_values(coefficients, axis: Axis) -> np.ndarray:
    """A polynomial baseline on an axis: ``sum_k b_k u**k``, u from -1 to 1 across the axis.

    Parameters
    ----------
    coefficients : sequence of float
        (b0, b1, ...), in the units of the spectrum's intensity.
    axis : Axis
        ``u = (hz - center_hz) / (width_hz / 2)``: -1 and 1 at the axis
        edges, whatever its unit or position.

    Returns
    -------
    numpy.ndarray, shape (axis.points,)

    Examples
    --------
    >>> ax = Axis(center_hz=0.0, width_hz=4.0, points=4, nu_ref_hz=100e6)
    >>> baseline_values([1.0, 2.0], ax).tolist()   # u = -0.75, -0.25, 0.25, 0.75
    [-0.5, 0.5, 1.5, 2.5]
    """
    u = (axis.hz - axis.center_hz) / (0.5 * axis.width_hz)
    out = np.zeros(axis.points)
    for b in reversed(tuple(coefficients)):  # Horner
        out = out * u + float(b)
    return out


def _has_distribution(model: Model, k: int) -> bool:
    """A site rendered from kernels: an EFG distribution now, or a free/tied Czjzek width."""
    if model.sites[k].has_efg_distribution:
        return True
    return any(p.address.table == "site" and p.address.index == k and p.address.key == "czjzek_sigma_mhz"
               for p in model.free + model.tied)


def simulate_all(model, **options) -> tuple[Spectrum, ...]:
    """Simulate every measurement of a model.

    Parameters
    ----------
    model : Model or str or pathlib.Path
    **options
        As :func:`simulate` (except ``measurement``).

    Returns
    -------
    tuple of Spectrum
        One per measurement, in model order.

    See Also
    --------
    simulate

    Examples
    --------
    >>> from powderspin.model.modelfile import make_model
    >>> m = make_model("23Na", [{"field_tesla": 9.4, "points": 256}, {"field_tesla": 18.8, "points": 256}],
    ...                [{"cq_mhz": 2.0}])
    >>> [s.metadata["field_tesla"] for s in simulate_all(m)]
    [9.4, 18.8]
    """
    model = _as_model(model)
    memo = options.pop("lines_memo", None)
    memo = {} if memo is None else memo
    return tuple(simulate(model, measurement=j, lines_memo=memo, **options) for j in range(len(model.measurements)))


def _site_record(site) -> dict:
    out = {}
    for k, v in site_key_values(site).items():
        out[k] = list(v) if isinstance(v, tuple) else v
    return out


def _frac(m: float) -> str:
    if abs(m - round(m)) < 1e-12:
        return str(int(round(m)))
    return f"{int(round(2 * m))}/2"


def sideband_rows(label: str, weight: float, lines: SiteLines, nu_ref: float, shift_hz: float = 0.0,
                  min_intensity: float = 1e-4) -> list[SidebandRow]:
    """Sideband table rows of one site: integrated intensity per band and its intensity-weighted position.

    Parameters
    ----------
    label : str
        The site's label.
    weight : float
        The site's weight (the rows' intensities sum to it).
    lines : SiteLines
    nu_ref : float
        Reference frequency (Hz), for the ppm column.
    shift_hz : float, optional
        Translation applied when rendering (Hz).
    min_intensity : float, optional
        Bands below this fraction of the site are left out.

    Returns
    -------
    list of SidebandRow

    References
    ----------
    J. Herzfeld, A. E. Berger, J. Chem. Phys. 73 (1980) 6021.

    Examples
    --------
    >>> from powderspin.model.modelfile import make_model
    >>> m = make_model("31P", {"field_tesla": 9.4, "spinning_hz": 5000.0, "points": 512},
    ...                [{"span_ppm": 100.0, "skew": 0.0}])
    >>> rows = simulate(m).sidebands
    >>> sorted({r.order for r in rows})[:3]
    [-4, -3, -2]
    """
    p = lines.phases
    n = np.fft.fftfreq(p, 1.0 / p).astype(int)
    inten, pos = lines.band_intensity, lines.band_position_hz
    rows = []
    for k in np.argsort(n):
        if inten[k] < min_intensity or inten[k] <= 0:
            continue
        hz = pos[k] / inten[k] + n[k] * lines.rate_hz + shift_hz
        rows.append(SidebandRow(label, int(n[k]), float(hz), float(hz / nu_ref * 1e6), float(inten[k] * weight)))
    return rows
