"""The Simulator: one model and measurement, decided once, simulated again and again.

One representation, two producers, one consumer (DEVELOPERS.md):

1. each site becomes a hashable :class:`~powderspin.engine.site_lines.SiteJob`;
   the producer (perturbative or exact; ``"auto"`` decided once per site), the
   orientation set and the number of rotor phases are fixed there;
2. :func:`~powderspin.engine.site_lines.compute_lines` gives each transition's
   line position and sideband intensities at every orientation;
3. :func:`~powderspin.engine.site_lines.render_lines` bins them with triangle
   interpolation, translates them by the isotropic shift, weighs and broadens
   them; the sites are summed.

A :class:`Simulator` makes every decision of that chain once, when it is
built: the spectral axis, each site's producer, orientation set and number
of rotor phases, and the kernel grid of each site with an EFG distribution.
It then answers "the spectrum at these parameter values" and "the Jacobian
at these values" as often as asked, reusing what did not change: a site whose
tensors did not change is not recomputed, and a site whose lines and shift did
not change is not binned again (a step in a weight or a broadening costs one
FFT per site).  Fits, plans, series and the browser explorer all simulate
through it; :func:`simulate` is the one-line form.

Parameter values are given as a mapping from
:class:`~powderspin.model.values.ParameterAddress` (or its name, such as
``"AlO4.cq_mhz"``) to a number, or as a sequence in the order of
:attr:`Simulator.parameters` (the model's free parameters unless others are
named).  Ties of the model are applied.
"""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path
from typing import Mapping, Sequence

import numpy as np

from . import __version__
from .disorder.grid import parameter_range, shift_fwhm_hz
from .disorder.site import DistributedSite
from .disorder.store import default_kernel_store
from .engine.echo_train import echo_train_comb
from .engine.lineshape import Axis, baseline_values, hat_corrected_gauss, make_axis, sampling_oversampling, voigt_fwhm
from .engine.pulses import regime_note
from .engine.site_lines import (
    ORIENTATION_TARGET,
    SiteLines,
    check_high_field,
    choose_method,
    choose_orientations,
    compute_lines,
    estimate_span_hz,
    render_lines,
    sideband_rows,
    site_job,
)
from .engine.spectrum import Spectrum
from .engine.spectrum2d import Spectrum2D
from .engine.threads import kernel_threads
from .engine.two_dimensional import compute_f1_lines, free_t1_bands, mq_excitation, mq_pulses, render_two_dimensional
from .model.modelfile import load_model
from .model.values import IDEAL_MQ_PULSES, Model, ModelError, ParameterAddress, selected_transitions
from .physics.multiple_quantum import isotropic_shifts_ppm, two_dimensional_scale
from .physics.orientations import OrientationSet, orientation_set_by_name
from .progress import emit

__all__ = ["Simulator", "SimulationCache", "simulate", "simulate_all", "estimate_spans_hz", "as_model",
           "LOST_NOTE_FRACTION"]

#: a note is added when more than this fraction of a site's intensity lies off the axis
LOST_NOTE_FRACTION = 1e-3


def as_model(model, where: str = "simulate") -> Model:
    """A Model from a Model or the path of a model file.

    Parameters
    ----------
    model : Model or str or os.PathLike
    where : str, optional
        The caller, for the message.

    Returns
    -------
    Model

    Raises
    ------
    ModelError
        For anything else (an array, None, ...), naming what was given.

    Examples
    --------
    >>> as_model(3)
    Traceback (most recent call last):
    ...
    powderspin.model.values.ModelError: simulate: expected a Model or the path of a model file, got int
    """
    if isinstance(model, Model):
        return model
    if isinstance(model, (str, Path)) or hasattr(model, "__fspath__"):
        return load_model(model)
    raise ModelError(f"{where}: expected a Model or the path of a model file, got {type(model).__name__}")


class _Memo(dict):
    """A dict that forgets its oldest entries beyond ``size`` entries."""

    def __init__(self, size: int):
        super().__init__()
        self.size = max(4, int(size))

    def __setitem__(self, key, value):
        super().__setitem__(key, value)
        while len(self) > self.size:
            del self[next(iter(self))]


class _ArrayMemo(dict):
    """A dict of arrays that forgets its oldest entries beyond ``max_bytes`` of array data."""

    def __init__(self, max_bytes: int):
        super().__init__()
        self.max_bytes = max(0, int(max_bytes))
        self.nbytes = 0

    def __setitem__(self, key, value):
        if key in self:
            self.nbytes -= self[key].nbytes
            super().__delitem__(key)
        super().__setitem__(key, value)
        self.nbytes += value.nbytes
        while self.nbytes > self.max_bytes and len(self) > 1:
            self.nbytes -= super().pop(next(iter(self))).nbytes


class SimulationCache:
    """What Simulators keep between calls: lines by job and binned lines by (job, axis, binning).

    Both memos forget their oldest entries beyond a size.  Simulators built
    one after another for the same sample (a fit that pins a choice and
    builds again, a plan's candidate rates) may share one cache.

    Parameters
    ----------
    lines : int, optional
        Most ``SiteJob -> SiteLines`` entries kept.
    rendered : int, optional
        Most binned-lines entries kept.
    weights_mb : float, optional
        Memory (MB) for the per-orientation finite-pulse MQMAS efficiencies, kept by (job, pulses): the nodes
        of an EFG distribution in 2D are far more than the lines memo holds, and their efficiencies cost
        several times their lines.

    Examples
    --------
    >>> c = SimulationCache(lines=8, rendered=8)
    >>> len(c.lines), len(c.rendered)
    (0, 0)
    """

    def __init__(self, lines: int = 64, rendered: int = 256, weights_mb: float = 128.0):
        self.lines = _Memo(lines)
        self.rendered = _Memo(rendered)
        self.weights = _ArrayMemo(int(weights_mb * 2 ** 20))


def _widest_broadening_hz(model: Model, meas) -> float:
    nu_ref = model.nucleus.larmor_hz(meas.field_tesla)
    return max(s.lorentz_hz + meas.lorentz_hz + 2 * math.hypot(s.gauss_hz, meas.gauss_hz, shift_fwhm_hz(s, nu_ref))
               for s in model.sites)


def _frac(m: float) -> str:
    if abs(m - round(m)) < 1e-12:
        return str(int(round(m)))
    return f"{int(round(2 * m))}/2"


def _site_record(site) -> dict:
    return {k: (list(v) if isinstance(v, tuple) else v) for k, v in site.as_keys().items()}


def _has_distribution(model: Model, k: int) -> bool:
    """A site rendered from kernels: an EFG distribution now, or a free/tied Czjzek width."""
    if model.sites[k].has_efg_distribution:
        return True
    return any(p.address.table == "site" and p.address.index == k and p.address.key == "czjzek_sigma_mhz"
               for p in model.free + model.tied)


def _per_site_orientations(orientations, n_sites: int) -> list:
    if orientations is None:
        return [None] * n_sites
    if isinstance(orientations, OrientationSet):
        return [orientations] * n_sites
    if isinstance(orientations, str):
        return [orientation_set_by_name(orientations)] * n_sites
    sets = list(orientations)
    if len(sets) != n_sites:
        raise ModelError(f"simulate: orientations has {len(sets)} entries for {n_sites} sites")
    return [orientation_set_by_name(o) if isinstance(o, str) else o for o in sets]


class Simulator:
    """A model and one of its measurements, with every decision of the pipeline made once.

    Building a Simulator decides, at the model's own parameter values: the
    spectral axis (given, the measurement's ``center_ppm``/``width_ppm``, or
    sized from the computed lines), each site's producer (``method = "auto"``:
    perturbation theory unless it is off by more than half a point), each
    site's orientation set (``orientations = "auto"``: the smallest set that
    meets the accuracy target), each site's number of rotor phases under
    finite-rate spinning (``rotor_phases = "auto"``: doubled until the
    outermost bands hold less than 1e-6 of the intensity) and the kernel grid
    of each site with an EFG distribution (covering the range of its free
    parameters).  Later calls never re-decide; a Simulator built from
    ``sim.model_at(values)`` decides again at other values.

    Parameters
    ----------
    model : Model or str or os.PathLike
        The model, or the path of a model file.
    measurement : int, optional
        Which measurement (0-based) of a model with several.
    axis : Axis, optional
        The spectral axis (e.g. a measured spectrum's); the measurement's
        ``points``, ``center_ppm`` and ``width_ppm`` are then not used.
    orientations : OrientationSet or str or sequence, optional
        Override the measurement's orientation choice: one set (or set name)
        for every site, or one per site.
    methods : sequence of str, optional
        The producer of each site (``"perturbation"`` or ``"exact"``),
        overriding ``method = "auto"``.
    parameters : sequence of ParameterAddress or str, optional
        The parameters that values refer to, in order (default: the model's
        free parameters).
    kernel_store : powderspin.disorder.store.KernelStore, optional
        Where the kernels of sites with an EFG distribution are kept (default:
        :func:`powderspin.disorder.store.default_kernel_store` of the lineshape
        library folder, made only when the model has such a site).
    allow_strong_coupling : bool, optional
        Compute sites whose quadrupolar frequency exceeds half the Larmor
        frequency (refused by default: the high-field picture fails there).
    progress : callable, optional
        Subscriber of the progress protocol (:mod:`powderspin.progress`):
        stages ``"lines"`` and ``"kernels"``, labelled by site.
    cache : SimulationCache, optional
        Memos shared with other Simulators of the same sample.
    f1_axis : Axis, optional
        The F1 axis of a 2D measurement (e.g. a measured spectrum's); the
        measurement's ``f1_points``, ``f1_center_ppm`` and ``f1_width_ppm`` are
        then not used.
    point_values : bool, optional
        True (default): a point is the continuous spectrum at its frequency
        (sites rendered finer where their lines are narrow, the Gaussian
        narrowed by the binning hats' variance;
        :func:`powderspin.engine.lineshape.sampling_oversampling`).  False:
        a point is the hat-weighted bin average (what the planner's measures,
        which render parts of sites directly, are defined on).

    Attributes
    ----------
    model : Model
        The model as given (its values are the defaults of every call).
    index : int
        The measurement's index.
    axis : Axis
        The spectral axis.
    methods : tuple of str
        Each site's producer.
    orientations : tuple of str
        Each site's orientation set (name; the kernel set's name for a
        distributed site).
    rotor_phases : tuple of int
        Each site's rotor phases per period (0 when static or infinitely fast,
        or for a distributed site).
    parameters : tuple of ParameterAddress
    notes : tuple of str
        What was noted while deciding (strong coupling, the exact route, ...).

    See Also
    --------
    simulate : the one-line form.
    powderspin.fitting.fit : fits through a Simulator per measurement.

    References
    ----------
    D. W. Alderman, M. S. Solum, D. M. Grant, J. Chem. Phys. 84 (1986) 3717
    (triangle interpolation); M. H. Levitt, J. Magn. Reson. 82 (1989) 427
    (sidebands); A. Samoson, Chem. Phys. Lett. 119 (1985) 29 (second-order
    quadrupolar shifts).

    Examples
    --------
    >>> import powderspin as ps
    >>> m = ps.make_model("27Al", {"field_tesla": 14.1, "spinning_hz": "inf", "points": 512},
    ...                   [{"label": "A", "shift_ppm": 60.0, "cq_mhz": {"start": 3.0, "min": 1.0, "max": 8.0}}])
    >>> sim = Simulator(m)
    >>> [a.name(m) for a in sim.parameters]
    ['A.cq_mhz']
    >>> y3 = sim.spectrum().intensity
    >>> y4 = sim.spectrum({"A.cq_mhz": 4.0}).intensity
    >>> bool(abs(y4 - y3).max() > 0), sim.methods
    (True, ('perturbation',))
    >>> sim.jacobian([3.0]).shape
    (512, 1)
    """

    def __init__(self, model, measurement: int = 0, *, axis: Axis | None = None, orientations=None, methods=None,
                 parameters=None, kernel_store=None, allow_strong_coupling: bool = False, progress=None,
                 cache: SimulationCache | None = None, f1_axis: Axis | None = None,
                 point_values: bool = True):
        model = as_model(model)
        if isinstance(measurement, bool) or not isinstance(measurement, (int, np.integer)) or \
                not 0 <= measurement < len(model.measurements):
            raise ModelError(f"simulate: measurement = {measurement!r} must be an index in "
                             f"[0, {len(model.measurements) - 1}]")
        measurement = int(measurement)
        self.model = model
        self.index = measurement
        self.allow_strong_coupling = bool(allow_strong_coupling)
        self.progress = progress
        meas = model.measurements[measurement]
        nuc = model.nucleus
        n = len(model.sites)
        self._two_d = None
        if meas.is_two_dimensional:
            self._init_two_dimensional(model, measurement, axis=axis, orientations=orientations, methods=methods,
                                       parameters=parameters, cache=cache, f1_axis=f1_axis, kernel_store=kernel_store)
            return
        if f1_axis is not None:
            raise ModelError("simulate: f1_axis is for a 2D measurement (experiment = 'mqmas' or 'stmas'); this one "
                             "is experiment = '1d'")
        self.nu_ref_hz = nu_ref = nuc.larmor_hz(meas.field_tesla)
        notes = check_high_field(model.sites, nuc, meas.field_tesla, allow_strong_coupling=allow_strong_coupling)
        self.parameters = self._addresses(parameters)
        self._tied_sources = {t.source for t in model.tied}
        n_param = len(self.parameters)
        self.cache = cache if cache is not None else SimulationCache(lines=max(16, 4 * (n_param + 3) * n),
                                                                     rendered=max(32, 8 * (n_param + 3) * n))
        if methods is not None and len(methods) != n:
            raise ModelError(f"simulate: methods has {len(methods)} entries for {n} sites")
        given_sets = _per_site_orientations(orientations, n)
        offset_hz = meas.shift_offset_ppm * nu_ref * 1e-6
        widest = _widest_broadening_hz(model, meas)
        explicit_axis = axis is not None or (meas.center_ppm is not None and meas.width_ppm is not None)

        def axis_from(spans) -> Axis:
            lo = min(s[0] for s in spans) - 4 * widest
            hi = max(s[1] for s in spans) + 4 * widest
            return make_axis(meas.points, nu_ref, meas.center_ppm, meas.width_ppm, (lo, hi))

        # sites with an EFG distribution: weighted sums of cached kernels (powderspin.disorder)
        self._distributed: dict[int, DistributedSite] = {}
        for k in range(n):
            if _has_distribution(model, k):
                if meas.pulse_sequence != "ideal" and meas.carrier_ppm is not None:
                    raise ModelError(
                        f"site '{model.sites[k].label}': finite-pulse excitation (pulse_sequence = "
                        f"{meas.pulse_sequence!r}) of a site with an EFG distribution is computed on resonance "
                        "only; remove carrier_ppm (each site is then excited at its own isotropic shift)")
                d = DistributedSite(model, k, measurement, allow_strong_coupling=allow_strong_coupling)
                self._distributed[k] = d
                notes.extend(t for t in d.notes if t not in notes)
        if self._distributed and kernel_store is None:
            kernel_store = default_kernel_store()
        self.kernel_store = kernel_store

        def span_of(k, site):
            if k in self._distributed:
                lo, hi = self._distributed[k].span_hz()
                sh = site.shift.iso_ppm * nu_ref * 1e-6 + offset_hz
                return (lo + sh, hi + sh)
            return tuple(x + offset_hz for x in estimate_span_hz(site, meas, nuc))

        if axis is not None:
            if abs(axis.nu_ref_hz - nu_ref) > 1e-9 * nu_ref:
                raise ModelError(f"simulate: the axis has nu_ref = {axis.nu_ref_hz:.9g} Hz but the measurement's is "
                                 f"{nu_ref:.9g} Hz ({nuc.name} at {meas.field_tesla:g} T)")
        elif explicit_axis:
            axis = make_axis(meas.points, nu_ref, meas.center_ppm, meas.width_ppm)
        else:
            axis = axis_from([span_of(k, s) for k, s in enumerate(model.sites)])
        # each site's producer (against half a point of the, perhaps provisional, axis) and orientation set
        self._methods: list = []
        self._sets: list = []
        self._job_meas: list = []
        self._orientation_error: dict = {}
        for k, site in enumerate(model.sites):
            if k in self._distributed:
                self._methods.append(None)
                self._sets.append(None)
                self._job_meas.append(None)
                continue
            if methods is not None:
                method = methods[k]
            else:
                method, note = choose_method(site, meas, nuc, 0.5 * axis.dx_hz)
                if note:
                    notes.append(note)
            oset = given_sets[k]
            if oset is None and meas.orientations == "auto":
                oset, err = choose_orientations(site, meas, nuc, method, axis,
                                                shift_hz=site.shift.iso_ppm * nu_ref * 1e-6 + offset_hz,
                                                lines_memo=self.cache.lines)
                self._orientation_error[site.label] = err
            if oset is None:
                oset = orientation_set_by_name(site_job(site, meas, nuc, method).orientations)
            self._methods.append(method)
            self._sets.append(oset)
            self._job_meas.append(meas)
        # the lines at the model's values: decides each site's rotor phases, which are then kept
        self._phases: list = [0] * n
        finite = meas.spinning_hz > 0 and math.isfinite(meas.spinning_hz)
        first_lines: list = [None] * n
        for k, site in enumerate(model.sites):
            if k in self._distributed:
                continue
            job = site_job(site, meas, nuc, self._methods[k], self._sets[k])
            lines = self._lines(job, k, site.label)
            first_lines[k] = lines
            if finite:
                self._phases[k] = lines.phases
                if meas.rotor_phases == "auto":
                    pinned_meas = replace(meas, rotor_phases=int(lines.phases))
                    self._job_meas[k] = pinned_meas
                    pinned = site_job(site, pinned_meas, nuc, self._methods[k], self._sets[k])
                    self.cache.lines[pinned] = replace(lines, job=pinned)
        if not explicit_axis:
            spans = []
            for k, site in enumerate(model.sites):
                if first_lines[k] is None:
                    spans.append(span_of(k, site))
                else:
                    sh = (site.shift.iso_ppm - first_lines[k].job.iso_ppm) * nu_ref * 1e-6 + offset_hz
                    spans.append(tuple(x + sh for x in first_lines[k].frequency_range()))
            axis = axis_from(spans)
        self.axis = axis
        if meas.pulse_sequence != "ideal":
            seq = site_job(model.sites[0], meas, nuc, "perturbation").pulse if n else None
            text = regime_note(nuc.spin, seq) if seq is not None else ""
            if text:
                notes.append(text)
        self._comb = None
        if meas.echo_train_period_us is not None:
            carrier = meas.carrier_ppm * nu_ref * 1e-6 if meas.carrier_ppm is not None else axis.center_hz
            self._comb = echo_train_comb(axis, carrier, meas.echo_train_period_us * 1e-6, meas.echo_train_echoes,
                                         None if meas.echo_train_t2_ms is None else meas.echo_train_t2_ms * 1e-3,
                                         meas.echo_train_output)
            self._comb.flags.writeable = False
        self._notes = list(notes)
        # a point is the continuous spectrum at its frequency: render finer where the narrowest line is too few
        # points wide (decided once, from the smallest broadening each site can have, so a fit's objective is smooth)
        self._oversampling = []
        for k, site in enumerate(model.sites):
            lor = parameter_range(model, "site", k, "lorentz_hz")[0] + \
                parameter_range(model, "measurement", measurement, "lorentz_hz")[0]
            gau = math.hypot(parameter_range(model, "site", k, "gauss_hz")[0],
                             parameter_range(model, "measurement", measurement, "gauss_hz")[0],
                             parameter_range(model, "site", k, "shift_fwhm_ppm")[0] * nu_ref * 1e-6)
            self._oversampling.append(sampling_oversampling(axis.dx_hz, voigt_fwhm(max(lor, 0.0), gau))
                                      if point_values else 1)
        self.point_values = bool(point_values)

    def _init_two_dimensional(self, model: Model, index: int, *, axis, orientations, methods, parameters, cache,
                              f1_axis, kernel_store):
        """A 2D measurement: F2 decided by a 1D Simulator of its central transition, then the F1 axis."""
        meas = model.measurements[index]
        scale = two_dimensional_scale(model.nucleus.spin, meas.experiment, meas.mq_order)
        inner = Simulator(_central_transition_twin(model, index), index, axis=axis, orientations=orientations,
                          methods=methods, parameters=parameters, allow_strong_coupling=self.allow_strong_coupling,
                          progress=self.progress, cache=cache, kernel_store=kernel_store)
        self._two_d = scale
        self._two_d_convention = scale.describe()
        self._inner = inner
        for name in ("nu_ref_hz", "parameters", "_tied_sources", "cache", "axis", "_distributed", "kernel_store",
                     "_methods", "_sets", "_job_meas", "_orientation_error", "_phases"):
            setattr(self, name, getattr(inner, name))
        notes = list(inner.notes)
        if meas.spinning_hz > 0 and math.isfinite(meas.spinning_hz):
            if meas.t1_mode == "free":
                notes.append("t1 is not rotor-synchronised: F1 sidebands n nu_r / (p - R) apart; each band pair "
                             "carries the real part of its rotor-phase-averaged amplitude (may be negative)")
            else:
                notes.append("t1 is rotor-synchronised: F1 sidebands fold onto the centre band (F1 spectral width = "
                             "spinning rate in the unsheared t1 scale)")
        self._notes = notes
        f = self.nu_ref_hz * 1e-6
        if f1_axis is not None:
            if abs(f1_axis.nu_ref_hz - self.nu_ref_hz) > 1e-9 * self.nu_ref_hz:
                raise ModelError(f"simulate: the F1 axis has nu_ref = {f1_axis.nu_ref_hz:.9g} Hz but the "
                                 f"measurement's is {self.nu_ref_hz:.9g} Hz")
            self.f1_axis = f1_axis
            return
        if meas.f1_center_ppm is not None and meas.f1_width_ppm is not None:
            self.f1_axis = make_axis(meas.f1_points, self.nu_ref_hz, meas.f1_center_ppm, meas.f1_width_ppm)
            return
        lo, hi, ct_span = math.inf, -math.inf, 0.0
        for k, site in enumerate(model.sites):
            for lines, f1, sh, _ in self._two_d_parts(model, k):
                ext = (0.0, 0.0)
                if f1.band_weights is not None:  # free t1: the F1 bands that carry intensity
                    big = np.max(np.abs(f1.band_weights), axis=(0, 1))
                    on = f1.band_f1_hz[big > 1e-4 * big.max()]
                    ext = (float(on.min()), float(on.max()))
                lo = min(lo, float(f1.f1_hz.min()) + sh + ext[0])
                hi = max(hi, float(f1.f1_hz.max()) + sh + ext[1])
                ct_span = max(ct_span, float(np.ptp(lines.mean)))
        # margin: the F1 broadening, and half the widest centre-band CT pattern (at least 1 ppm), so the F1 axis
        # shows the sites with room for their neighbours' usual spread
        widest_shift = max(s.shift_fwhm_ppm for s in model.sites) * f
        pad = max(4.0 * (meas.f1_lorentz_hz + meas.f1_gauss_hz) + 2.0 * widest_shift, 0.5 * ct_span, f)
        self.f1_axis = make_axis(meas.f1_points, self.nu_ref_hz, meas.f1_center_ppm, meas.f1_width_ppm,
                                 (lo - pad, hi + pad))

    def _two_d_lines(self, model: Model, k: int):
        """(CT lines, F1 lines) of site k of a 2D measurement."""
        site = model.sites[k]
        job = site_job(site, self._job_meas[k], model.nucleus, self._methods[k], self._sets[k])
        lines = self._inner._lines(job, k, site.label)
        return lines, self._f1_of(lines, model.measurements[self.index], site.shift.iso_ppm, model.nucleus)

    def _f1_of(self, lines, meas, shift_ppm: float = 0.0, nucleus=None):
        """F1 lines of a site's CT lines (memoised), with the F1 band pairs when t1 is not synchronised and the
        per-orientation efficiency of finite MQMAS pulses (``mq_pulses``)."""
        free = meas.t1_mode == "free" and meas.spinning_hz > 0 and math.isfinite(meas.spinning_hz)
        pulses = mq_pulses(meas, nucleus or self.model.nucleus, self._two_d, shift_ppm, lines.job.iso_ppm)
        key = ("f1", lines.job, self._two_d, free, pulses)
        f1 = self.cache.lines.get(key)
        if f1 is None:
            base = self.cache.lines.get(("f1", lines.job, self._two_d, free, None)) if pulses is not None else None
            if base is None:
                base = compute_f1_lines(lines, self._two_d)
                if free:
                    base = free_t1_bands(lines, base)
            f1 = base
            if pulses is not None:  # the efficiencies by node (job, pulses): they outlive the F1 entry
                eff = self.cache.weights.get((lines.job, pulses))
                if eff is None:
                    f1 = mq_excitation(lines, base, pulses)
                    self.cache.weights[(lines.job, pulses)] = f1.excitation
                else:
                    f1 = replace(base, pulses=pulses, excitation=eff)
            self.cache.lines[key] = f1
        return f1

    def _two_d_parts(self, model: Model, k: int) -> list:
        """(CT lines, F1 lines, translation Hz, share) of site k: one part, or one per node of its EFG distribution.

        An EFG distribution is sampled on the (C_Q, eta) grid of :mod:`powderspin.physics.distributions`, each
        node a site of its own; a shift distribution is applied when rendering, along the diagonal.
        """
        site = model.sites[k]
        meas = model.measurements[self.index]
        f = self.nu_ref_hz * 1e-6
        base = (site.shift.iso_ppm + meas.shift_offset_ppm) * f
        if not (site.has_efg_distribution or k in self._distributed):
            lines, f1 = self._two_d_lines(model, k)
            return [(lines, f1, base - lines.job.iso_ppm * f, 1.0)]
        plain = replace(site, czjzek_sigma_mhz=0.0, cq_distribution_mhz=None, eta_distribution=None,
                        shift_fwhm_ppm=0.0)
        efg = [(plain, 1.0)]
        if site.has_efg_distribution:
            grid = self._efg_grid_2d(model, k)
            top = float(grid.weights.max())
            efg = [(replace(plain, cq_mhz=float(c), eta_q=float(e)), float(grid.weights[i, j]))
                   for i, c in enumerate(grid.cq_mhz) for j, e in enumerate(grid.eta)
                   if grid.weights[i, j] > 1e-9 * top]
        nuc = model.nucleus
        twin = _central_transition_twin(model, self.index).measurements[self.index]
        method = "exact" if meas.method == "exact" else "perturbation"
        parts = []
        with kernel_threads(1):  # many small calls (engine/threads.py)
            for variant, w_e in efg:
                job = site_job(variant, twin, nuc, method)
                lines = self.cache.lines.get(job)
                if lines is None:
                    lines = compute_lines(job)
                    self.cache.lines[job] = lines
                f1 = self._f1_of(lines, meas, site.shift.iso_ppm, nuc)
                parts.append((lines, f1, base - lines.job.iso_ppm * f, w_e))
        return parts

    def _efg_grid_2d(self, model: Model, k: int):
        """The (C_Q, eta) grid of site k's EFG distribution, spaced for the F2 axis and broadening."""
        from .physics.distributions import czjzek_grid, explicit_grid

        site = model.sites[k]
        meas = model.measurements[self.index]
        if site.czjzek_sigma_mhz > 0:
            # the grid's spacing criterion (powderspin.physics.distributions.czjzek_grid) at the F2 resolution:
            # the point spacing, or what broadens the site more (its broadening, its shift distribution)
            res = max(self.axis.dx_hz, site.lorentz_hz + meas.lorentz_hz, math.hypot(site.gauss_hz, meas.gauss_hz),
                      site.shift_fwhm_ppm * self.nu_ref_hz * 1e-6)
            key = ("czjzek-2d", site.czjzek_sigma_mhz, site.cq_mhz, site.eta_q, model.nucleus.spin, self.nu_ref_hz,
                   res)
            grid = self.cache.lines.get(key)
            if grid is None:
                grid = czjzek_grid(site.czjzek_sigma_mhz, model.nucleus.spin, self.nu_ref_hz, res,
                                   cq0_mhz=site.cq_mhz, eta0=site.eta_q)
                self.cache.lines[key] = grid
            return grid

        def dist(given, value):
            if given is None:
                return {"values": [value], "weights": [1.0]}
            return {"values": list(given[0]), "weights": list(given[1])}

        return explicit_grid(dist(site.cq_distribution_mhz, site.cq_mhz), dist(site.eta_distribution, site.eta_q))

    def _render_site_2d(self, model: Model, k: int):
        meas = model.measurements[self.index]
        site = model.sites[k]
        parts = self._two_d_parts(model, k)
        common = dict(weight=site.weight, lorentz_hz=site.lorentz_hz + meas.lorentz_hz,
                      gauss_hz=math.hypot(site.gauss_hz, meas.gauss_hz), f1_lorentz_hz=meas.f1_lorentz_hz,
                      f1_gauss_hz=meas.f1_gauss_hz, memo=self.cache.rendered, shift_fwhm_ppm=site.shift_fwhm_ppm)
        if len(parts) == 1:
            lines, f1, sh, _ = parts[0]
            return render_two_dimensional(lines, f1, self.axis, self.f1_axis, shift_hz=sh, **common), lines, sh
        r = render_two_dimensional(None, None, self.axis, self.f1_axis, parts=parts, **common)
        return r, parts[0][0], parts[0][2]

    def _spectrum_2d(self, values) -> Spectrum2D:
        model = self.model_at(values)
        meas = model.measurements[self.index]
        nuc = model.nucleus
        scale = self._two_d
        notes = list(self._notes)
        parts = self._render(model)
        ys = []
        for site, (r, _, _) in zip(model.sites, parts):
            ys.append(r.intensity)
            if r.lost_fraction > LOST_NOTE_FRACTION and site.weight > 0:
                notes.append(f"site '{site.label}': {r.lost_fraction:.2%} of its intensity lies outside the axes "
                             "(widen width_ppm / f1_width_ppm or move center_ppm / f1_center_ppm)")
        ys = np.array(ys)
        total = ys.sum(axis=0)
        if meas.scale != 1.0:
            ys = ys * meas.scale
            total = total * meas.scale
        labels = [s.label for s in model.sites]
        cogs = {}
        for s in model.sites:
            d1, d2 = isotropic_shifts_ppm(scale, s.cq_mhz, s.eta_q, self.nu_ref_hz,
                                          s.shift.iso_ppm + meas.shift_offset_ppm)
            cogs[s.label] = {"f1": d1, "f2": d2}
        meta = {
            "powderspin_version": __version__,
            "nucleus": nuc.name,
            "spin": nuc.spin_label,
            "field_tesla": meas.field_tesla,
            "nu_ref_hz": self.nu_ref_hz,
            "experiment": meas.experiment,
            "f1_convention": dict(self._two_d_convention),
            "centres_of_gravity_ppm": cogs,
            "centres_of_gravity_note": ("second-order theory at the magic angle and infinite rate "
                                        "(powderspin.physics.multiple_quantum)"),
            "excitation": _excitation_record_2d(model, meas, scale, parts),
            "spinning_hz": "inf" if meas.is_infinite_rate else meas.spinning_hz,
            "rotor_angle_deg": meas.rotor_angle_deg,
            "t1_mode": meas.t1_mode,
            "f2_sidebands": ("none (infinite rate)" if meas.is_infinite_rate else
                             "the central transition's, each at the F1 position of its F1 band (the shear acts "
                             "on the rotor-averaged frequencies; a frequency-domain shear would move them in F1)"),
            "method": {lab: lines.method for lab, (_, lines, _) in zip(labels, parts)},
            "orientations": {lab: f"{lines.orientations.name} ({lines.orientations.size} directions)"
                             for lab, (_, lines, _) in zip(labels, parts)},
            "rotor_phases": {lab: lines.phases for lab, (_, lines, _) in zip(labels, parts)},
            "lorentz_hz": meas.lorentz_hz,
            "gauss_hz": meas.gauss_hz,
            "f1_lorentz_hz": meas.f1_lorentz_hz,
            "f1_gauss_hz": meas.f1_gauss_hz,
            "shift_offset_ppm": meas.shift_offset_ppm,
            "points": [self.f1_axis.points, self.axis.points],
            "sites": {s.label: _site_record(s) for s in model.sites},
            "intensity_units": ("density per ppm^2; each site integrates to its weight"
                                + (" times its excited fraction" if meas.mq_pulses != "ideal" else "")),
            "notes": notes,
        }
        if meas.experiment == "mqmas":
            meta["mq_order"] = meas.mq_order
        if meas.scale != 1.0:
            meta["scale"] = meas.scale
        if len(model.measurements) > 1:
            meta["measurement"] = f"{self.index + 1} of {len(model.measurements)}"
        if model.source:
            meta["model"] = model.source
        a1, a2 = self.f1_axis, self.axis
        return Spectrum2D(a1.hz, a1.ppm, a2.hz, a2.ppm, total, tuple(labels), ys, meta)

    def _one_dimensional_only(self, what: str) -> None:
        if self._two_d is not None:
            raise ModelError(f"simulate: {what} is for 1D measurements; this one is experiment = "
                             f"{self.measurement.experiment!r} (its F2 dimension is the measurement with "
                             "experiment = \"1d\")")

    @property
    def is_two_dimensional(self) -> bool:
        """True when the measurement is an MQMAS or STMAS experiment (:meth:`spectrum` returns a Spectrum2D).

        Returns
        -------
        bool
        """
        return self._two_d is not None

    # -- what was decided

    @property
    def methods(self) -> tuple:
        """Each site's producer, ``"perturbation"`` or ``"exact"`` (a distributed site's: at its first render).

        Returns
        -------
        tuple of str
        """
        return tuple(m if m is not None else (self._distributed[k].method or "auto")
                     for k, m in enumerate(self._methods))

    @property
    def orientations(self) -> tuple:
        """Each site's orientation set name.

        Returns
        -------
        tuple of str
        """
        out = []
        for k, s in enumerate(self._sets):
            if s is not None:
                out.append(s.name)
            else:
                ks = getattr(self._distributed[k], "kernel_set", None)
                out.append(ks.orientations if ks is not None else "")
        return tuple(out)

    @property
    def orientation_sets(self) -> tuple:
        """Each site's orientation set (None for a site with an EFG distribution).

        Returns
        -------
        tuple of OrientationSet or None
        """
        return tuple(self._sets)

    @property
    def rotor_phases(self) -> tuple:
        """Each site's rotor phases per period (0 when static, infinitely fast or distributed).

        Returns
        -------
        tuple of int
        """
        return tuple(int(p) for p in self._phases)

    @property
    def measurement(self):
        """The measurement (:class:`~powderspin.model.values.Measurement`) at the model's values."""
        return self.model.measurements[self.index]

    @property
    def notes(self) -> tuple:
        """What was noted while deciding (strong coupling, the exact route, a coarse distribution grid, ...).

        Returns
        -------
        tuple of str
        """
        return tuple(self._notes)

    # -- parameter values

    def _addresses(self, parameters) -> tuple:
        model = self.model
        if parameters is None:
            return tuple(p.address for p in model.free)
        out = []
        for p in parameters:
            out.append(self._address(p))
        return tuple(out)

    def _address(self, p) -> ParameterAddress:
        if isinstance(p, ParameterAddress):
            return p
        if isinstance(p, str):
            return self.model.address_of(p)
        raise ModelError(f"parameters: {p!r} must be a ParameterAddress or a name such as 'AlO4.cq_mhz'")

    def values_mapping(self, values) -> dict:
        """Parameter values as a mapping ParameterAddress -> float.

        Parameters
        ----------
        values : mapping, sequence or None
            A mapping (addresses or names as keys), a sequence in the order of
            :attr:`parameters`, or None (no change).

        Returns
        -------
        dict

        Raises
        ------
        ModelError
            A sequence of the wrong length, an unknown name, a value that is
            not a finite number.
        """
        if values is None:
            return {}
        if isinstance(values, Mapping):
            items = [(self._address(a), v) for a, v in values.items()]
        else:
            if isinstance(values, (str, bytes)):
                raise ModelError(f"values: expected numbers, got the text {values!r}")
            seq = list(np.asarray(values, dtype=float).ravel()) if not isinstance(values, Sequence) else list(values)
            if len(seq) != len(self.parameters):
                raise ModelError(f"values: {len(seq)} value(s) given for {len(self.parameters)} parameter(s) "
                                 f"({', '.join(a.name(self.model) for a in self.parameters)})")
            items = list(zip(self.parameters, seq))
        out = {}
        for a, v in items:
            if isinstance(v, bool):
                raise ModelError(f"{a.name(self.model)}: expected a number, got {v!r}")
            try:
                f = float(v)
            except (TypeError, ValueError):
                raise ModelError(f"{a.name(self.model)}: expected a number, got {v!r}") from None
            if not math.isfinite(f):
                raise ModelError(f"{a.name(self.model)} = {v!r} is not a finite number")
            out[a] = f
        return out

    def model_at(self, values=None) -> Model:
        """The model with new parameter values (ties applied).

        Parameters
        ----------
        values : mapping, sequence or None

        Returns
        -------
        Model
        """
        mapping = self.values_mapping(values)
        if not mapping:
            return self.model
        return self.model.with_parameters(mapping)

    # -- the pipeline

    def _lines(self, job, k: int, label: str) -> SiteLines:
        lines = self.cache.lines.get(job)
        if lines is None:
            oset = self._sets[k]
            lines = compute_lines(job, orientations=oset if oset.name == job.orientations else None,
                                  progress=self.progress, label=label)
            self.cache.lines[job] = lines
        return lines

    def _distributed_site(self, model: Model, k: int) -> DistributedSite:
        """The distributed site for the current tensors (its kernels depend on the shift anisotropy)."""
        d = self._distributed[k]
        s, t = model.sites[k], d.site
        if (s.shift.aniso_ppm, s.shift.eta, tuple(s.euler_deg)) != (t.shift.aniso_ppm, t.shift.eta,
                                                                     tuple(t.euler_deg)):
            d = DistributedSite(model, k, self.index, allow_strong_coupling=self.allow_strong_coupling)
            self._distributed[k] = d
        return d

    def _render_site(self, model: Model, k: int):
        """(RenderedSite, SiteLines or None, translation Hz) of site k of ``model``."""
        if self._two_d is not None:
            return self._render_site_2d(model, k)
        meas = model.measurements[self.index]
        site = model.sites[k]
        f = self.nu_ref_hz * 1e-6
        offset_hz = meas.shift_offset_ppm * f
        gauss = math.hypot(site.gauss_hz, meas.gauss_hz, shift_fwhm_hz(site, self.nu_ref_hz))
        lorentz = site.lorentz_hz + meas.lorentz_hz
        axis, q = self._site_axis(k)
        r, lines, sh = self._render_site_on(model, k, axis, meas, model.nucleus, site, f, offset_hz, gauss, lorentz)
        if q > 1:
            r = replace(r, intensity=np.ascontiguousarray(r.intensity[(q - 1) // 2::q]))
        return self._echo_train(r), lines, sh

    def _site_axis(self, k: int):
        """The axis site k is rendered on (finer by its oversampling factor q) and q."""
        q = self._oversampling[k]
        if q == 1:
            return self.axis, 1
        return Axis(self.axis.center_hz, self.axis.width_hz, self.axis.points * q, self.nu_ref_hz), q

    def _render_site_on(self, model, k, axis, meas, nuc, site, f, offset_hz, gauss, lorentz):
        if k in self._distributed:
            d = self._distributed_site(model, k)

            def kernel_progress(done, total, _label=site.label):
                emit(self.progress, "kernels", done, total, label=_label, unit="line shapes")

            sh = site.shift.iso_ppm * f + offset_hz
            r = d.render(axis, shift_hz=sh, store=self.kernel_store, weight=site.weight, lorentz_hz=lorentz,
                         gauss_hz=gauss, progress=None if self.progress is None else kernel_progress, site=site,
                         point_values=self.point_values)
            return r, None, sh
        lines, sh = self._site_lines(model, k)
        r = render_lines(lines, axis, shift_hz=sh, weight=site.weight, lorentz_hz=lorentz,
                         gauss_hz=hat_corrected_gauss(gauss, axis.dx_hz) if self.point_values else gauss,
                         binning=meas.binning, memo=self.cache.rendered)
        return r, lines, sh

    def _echo_train(self, r):
        """The rendered site as an echo train's spectrum (spikelets or their envelope), when one is measured."""
        if self._comb is None:
            return r
        return replace(r, intensity=r.intensity * self._comb)

    def _site_lines(self, model: Model, k: int):
        """(SiteLines, translation Hz) of site k of ``model`` (not a distributed site), from the memo when there."""
        site = model.sites[k]
        job = site_job(site, self._job_meas[k], model.nucleus, self._methods[k], self._sets[k])
        lines = self._lines(job, k, site.label)
        f = self.nu_ref_hz * 1e-6
        sh = (site.shift.iso_ppm - job.iso_ppm) * f + model.measurements[self.index].shift_offset_ppm * f
        return lines, sh

    def _render(self, model: Model):
        if model is not self.model:
            check_high_field(model.sites, model.nucleus, model.measurements[self.index].field_tesla,
                             allow_strong_coupling=self.allow_strong_coupling)
        return [self._render_site(model, k) for k in range(len(model.sites))]

    def site_intensities(self, values=None) -> np.ndarray:
        """Each site's spectrum at the given values, unscaled (density per ppm; a site integrates to its weight).

        Parameters
        ----------
        values : mapping, sequence or None
            Parameter values (see the module notes); None: the model's own.

        Returns
        -------
        numpy.ndarray, shape (n_sites, points)
            The measurement's ``scale`` and ``baseline`` are not applied.

        Examples
        --------
        >>> import powderspin as ps
        >>> m = ps.make_model("31P", {"field_tesla": 9.4, "points": 256, "center_ppm": 0.0, "width_ppm": 40.0},
        ...                   [{"label": "a", "weight": 2.0, "gauss_hz": 200.0}])
        >>> y = Simulator(m).site_intensities()
        >>> y.shape, round(float(y.sum() * 40.0 / 256), 3)
        ((1, 256), 2.0)
        """
        model = self.model_at(values)
        return np.array([r.intensity for r, _, _ in self._render(model)])

    def spectrum(self, values=None) -> Spectrum:
        """The spectrum at the given values, with its metadata and sideband table.

        Parameters
        ----------
        values : mapping, sequence or None
            Parameter values (see the module notes); None: the model's own.

        Returns
        -------
        Spectrum or Spectrum2D
            A 2D measurement (``experiment = "mqmas"``/``"stmas"``) gives a
            :class:`~powderspin.engine.spectrum2d.Spectrum2D` (sheared, F1 the
            isotropic dimension; :mod:`powderspin.engine.two_dimensional`).
            Otherwise: axis in Hz and ppm, per-site and summed intensities (densities per
            ppm; each site integrates to its weight), the metadata that made
            it and, under finite-rate spinning, the sideband table.  The
            measurement's ``scale`` (default 1) multiplies every site, and its
            ``baseline`` polynomial (default none) is added to the sum: this is
            how a fit's result file reproduces the fitted curve.

        Examples
        --------
        >>> import powderspin as ps
        >>> m = ps.make_model("27Al", {"field_tesla": 14.1, "points": 512}, [{"cq_mhz": 3.0, "eta_q": 0.3}])
        >>> round(Simulator(m).spectrum().area(), 3)
        1.0
        """
        if self._two_d is not None:
            return self._spectrum_2d(values)
        model = self.model_at(values)
        meas = model.measurements[self.index]
        nuc = model.nucleus
        nu_ref = self.nu_ref_hz
        axis = self.axis
        notes = list(self._notes)
        parts = self._render(model)
        ys, sidebands = [], []
        for k, (site, (r, lines, sh)) in enumerate(zip(model.sites, parts)):
            ys.append(r.intensity)
            if r.lost_fraction > LOST_NOTE_FRACTION and site.weight > 0:
                notes.append(f"site '{site.label}': {r.lost_fraction:.2%} of its intensity lies outside the axis "
                             "(widen width_ppm or move center_ppm)")
            if lines is not None:
                notes.extend(f"site '{site.label}': {t}" for t in lines.notes
                             if f"site '{site.label}': {t}" not in notes)
                if lines.phases > 1:
                    sidebands.extend(sideband_rows(site.label, site.weight, lines, nu_ref, sh))
        for d in self._distributed.values():
            notes.extend(t for t in d.notes if t not in notes)
        ys = np.array(ys)
        total = ys.sum(axis=0)
        if meas.scale != 1.0:
            ys = ys * meas.scale
            total = total * meas.scale
        if meas.baseline:
            total = total + baseline_values(meas.baseline, axis)
        m_upper = selected_transitions(nuc.spin, meas.transitions)
        labels = [s.label for s in model.sites]
        meta = {
            "powderspin_version": __version__,
            "nucleus": nuc.name,
            "spin": nuc.spin_label,
            "field_tesla": meas.field_tesla,
            "nu_ref_hz": nu_ref,
            "spinning_hz": "inf" if meas.is_infinite_rate else meas.spinning_hz,
            "rotor_angle_deg": meas.rotor_angle_deg if not meas.is_static else "n/a (static)",
            "transitions": [f"{_frac(m)}:{_frac(m - 1)}" for m in m_upper],
            "method": {lab: (lines.method if lines is not None else self._distributed[k].method)
                       for k, (lab, (_, lines, _)) in enumerate(zip(labels, parts))},
            "orientations": {lab: (f"{lines.orientations.name} ({lines.orientations.size} directions)"
                                   if lines is not None else self._distributed[k].kernel_set.orientations)
                             for k, (lab, (_, lines, _)) in enumerate(zip(labels, parts))},
            "orientation_error": {label: f"{err:.2g} of the maximum, RMS (estimated; target "
                                         f"{ORIENTATION_TARGET:g})" for label, err in self._orientation_error.items()},
            "rotor_phases": {lab: lines.phases for lab, (_, lines, _) in zip(labels, parts) if lines is not None},
            "binning": meas.binning,
            "sampling": {lab: ("point values" if q == 1 else f"point values (rendered {q} times finer)")
                         for lab, q in zip(labels, self._oversampling)},
            "lorentz_hz": meas.lorentz_hz,
            "gauss_hz": meas.gauss_hz,
            "shift_offset_ppm": meas.shift_offset_ppm,
            "points": axis.points,
            "sites": {s.label: _site_record(s) for s in model.sites},
            "intensity_units": "density per ppm; each site integrates to its weight"
                               + (" times its excited fraction" if meas.pulse_sequence != "ideal" else "")
                               + ("; times the echo-train comb" if meas.echo_train_period_us is not None else ""),
            "notes": notes,
        }
        if meas.pulse_sequence != "ideal":
            meta["excitation"] = {
                "pulse_sequence": meas.pulse_sequence, "pulse_us": meas.pulse_us, "rf_khz": meas.rf_khz,
                "echo_pulse_us": (meas.echo_pulse_us if meas.echo_pulse_us is not None else 2 * meas.pulse_us)
                if meas.pulse_sequence == "echo" else None,
                "carrier_ppm": meas.carrier_ppm if meas.carrier_ppm is not None else "each site's shift",
                "excited_fraction": {lab: float(lines.excited_fraction if lines is not None
                                                else self._distributed[k].excited_fraction)
                                     for k, (lab, (_, lines, _)) in enumerate(zip(labels, parts))},
                "meaning": "each site integrates to its weight times its excited fraction (relative to a hard "
                           "90 degree pulse)",
            }
        if meas.echo_train_period_us is not None:
            meta["echo_train"] = {"period_us": meas.echo_train_period_us, "echoes": meas.echo_train_echoes,
                                  "t2_ms": meas.echo_train_t2_ms, "output": meas.echo_train_output,
                                  "spikelet_spacing_hz": 1e6 / meas.echo_train_period_us}
        if self._distributed:
            meta["distributions"] = {model.sites[k].label: d.describe() for k, d in self._distributed.items()}
        if meas.scale != 1.0:
            meta["scale"] = meas.scale
        if meas.baseline:
            meta["baseline"] = list(meas.baseline)
        if len(model.measurements) > 1:
            meta["measurement"] = f"{self.index + 1} of {len(model.measurements)}"
        if model.source:
            meta["model"] = model.source
        return Spectrum(axis.hz, axis.ppm, total, tuple(labels), ys, meta, tuple(sidebands))

    # -- derivatives

    def default_steps(self, values=None) -> np.ndarray:
        """Forward-difference steps: 1e-6 of each value, or of 1 % of its range near zero; backward at an upper bound.

        Parameters
        ----------
        values : mapping, sequence or None

        Returns
        -------
        numpy.ndarray
        """
        theta = self._vector(values)
        lo, hi = self.bounds()
        span = np.where(np.isfinite(hi - lo), hi - lo, 1.0)
        h = 1e-6 * np.maximum(np.abs(theta), 0.01 * span)
        return np.where(theta + h > hi, -h, h)

    def bounds(self) -> tuple[np.ndarray, np.ndarray]:
        """Lower and upper bounds of :attr:`parameters` (a free parameter's own, else the key's allowed range).

        Returns
        -------
        tuple of 2 numpy.ndarray
        """
        free = {p.address: p for p in self.model.free}
        lo, hi = [], []
        for a in self.parameters:
            if a in free:
                lo.append(free[a].min)
                hi.append(free[a].max)
            else:
                spec = a.spec()
                lo.append(spec.low)
                hi.append(spec.high)
        return np.array(lo, dtype=float), np.array(hi, dtype=float)

    def _vector(self, values) -> np.ndarray:
        base = {a: self.model.parameter_value(a) for a in self.parameters}
        base.update(self.values_mapping(values))
        return np.array([base[a] for a in self.parameters], dtype=float)

    def jacobian(self, values=None, *, steps=None, base: np.ndarray | None = None) -> np.ndarray:
        """Forward-difference derivatives of the unscaled total spectrum with respect to :attr:`parameters`.

        A site parameter that nothing is tied to changes only its own site, so
        its column is that site simulated alone (a third of the rendering);
        other columns difference the whole spectrum.  Both reuse the memos, so
        a parameter that only translates, weighs or broadens a site never
        recomputes frequencies.

        Parameters
        ----------
        values : mapping, sequence or None
            Where (see the module notes); None: the model's own values.
        steps : sequence of float, optional
            One step per parameter (default :meth:`default_steps`; a negative
            step differences backwards).
        base : numpy.ndarray (n_sites, points), optional
            :meth:`site_intensities` at ``values``, when the caller has it.

        Returns
        -------
        numpy.ndarray, shape (points, n_parameters)
        """
        theta = self._vector(values)
        h = self.default_steps(theta) if steps is None else np.asarray(steps, dtype=float)
        model0 = self.model_at(theta)
        y0 = self.site_intensities(theta) if base is None else np.asarray(base)
        total0 = y0.sum(axis=0)
        cols = []
        alone = not model0.tied
        for q, a in enumerate(self.parameters):
            t = theta.copy()
            t[q] += h[q]
            if alone and a.table == "site":
                k = a.index
                mk = self.model_at(t)
                r, _, _ = self._render_site(mk, k)
                cols.append(((r.intensity - y0[k]) / h[q]).ravel())
            else:
                cols.append(((self.site_intensities(t).sum(axis=0) - total0) / h[q]).ravel())
        return np.column_stack(cols) if cols else np.zeros((total0.size, 0))

    # -- what the planner reads

    def centrebands(self, values=None) -> np.ndarray:
        """Each site's centre band (band 0 of its sideband manifold) alone, rendered as the spectrum is.

        Parameters
        ----------
        values : mapping, sequence or None

        Returns
        -------
        numpy.ndarray, shape (n_sites, points)
            Static and infinite-rate sites: the whole site.  Sites with an EFG
            distribution (rendered from kernels without bands): the whole site.
        """
        self._one_dimensional_only("centrebands")
        model = self.model_at(values)
        meas = model.measurements[self.index]
        out = []
        for k, site in enumerate(model.sites):
            lines, sh = (None, 0.0) if k in self._distributed else self._site_lines(model, k)
            if lines is None or lines.phases == 1:
                out.append(self._render_site(model, k)[0].intensity)
                continue
            if lines.intensity is None:
                raise ModelError(f"site '{site.label}': its sideband array exceeds the memory budget; choose a smaller "
                                 "orientation set (orientations) or a faster spinning rate")
            masked = np.zeros_like(lines.intensity)
            masked[..., 0] = lines.intensity[..., 0]
            sub = replace(lines, intensity=masked)
            gauss = math.hypot(site.gauss_hz, meas.gauss_hz, shift_fwhm_hz(site, self.nu_ref_hz))
            axis, q = self._site_axis(k)
            y = render_lines(sub, axis, shift_hz=sh, weight=site.weight, lorentz_hz=site.lorentz_hz + meas.lorentz_hz,
                             gauss_hz=hat_corrected_gauss(gauss, axis.dx_hz) if self.point_values else gauss,
                             binning=meas.binning).intensity
            out.append(y[(q - 1) // 2::q] if q > 1 else y)
        return np.array(out)

    def band_intensities(self, values=None) -> list:
        """Each site's integrated band intensities (band n at index ``n mod P``; one entry when static or infinite).

        Parameters
        ----------
        values : mapping, sequence or None

        Returns
        -------
        list of numpy.ndarray
            Normalised to a total of 1 per site; ``[1.0]`` for a distributed site.
        """
        self._one_dimensional_only("band_intensities")
        model = self.model_at(values)
        return [np.ones(1) if k in self._distributed else np.asarray(self._site_lines(model, k)[0].band_intensity)
                for k in range(len(model.sites))]

    def centres_of_gravity_hz(self, values=None) -> np.ndarray:
        """Each site's centre of gravity (Hz from nu_ref): the rotor-averaged mean line position, shift included.

        Parameters
        ----------
        values : mapping, sequence or None

        Returns
        -------
        numpy.ndarray, shape (n_sites,)
            NaN for a site with an EFG distribution.
        """
        self._one_dimensional_only("centres_of_gravity_hz")
        model = self.model_at(values)
        out = []
        for k in range(len(model.sites)):
            if k in self._distributed:
                out.append(math.nan)
                continue
            lines, sh = self._site_lines(model, k)
            tot = float(lines.band_intensity.sum())
            out.append(float(lines.band_position_hz.sum() / tot) + sh if tot > 0 else math.nan)
        return np.array(out)


def _excitation_record_2d(model: Model, meas, scale, parts):
    """The 2D spectrum's excitation metadata: the words for ideal excitation, or the modelled pulses."""
    if meas.mq_pulses == "ideal":
        return "ideal: each site's 2D integral equals its weight"
    pulses = mq_pulses(meas, model.nucleus, scale)
    rec = {"model": ("modelled: finite pulses propagated per crystallite under first-order quadrupolar + "
                     "second-order + shift level energies and the RF (static during each pulse, averaged over the "
                     "rotor phase at which the pulses arrive); each site's 2D integral is its weight times its "
                     "excited fraction"),
           **pulses.describe(),
           "carrier_ppm": meas.carrier_ppm if meas.carrier_ppm is not None else "on resonance with each site",
           "efficiency_reference": ("the central-transition signal of a hard 90 degree pulse; each pathway in "
                                    "the receiver phase of its hard-pulse limit"),
           "excited_fraction": {s.label: r.excited_fraction for s, (r, _, _) in zip(model.sites, parts)}}
    if meas.t1_mode == "free" and not meas.is_infinite_rate:
        rec["note"] = "the conversion pulse is taken at the excitation pulse's rotor phase (exact for synchronised t1)"
    return rec


def _central_transition_twin(model: Model, index: int) -> Model:
    """The model with measurement ``index`` made a 1D central-transition spectrum (the F2 dimension of a 2D one)."""
    return model.with_measurement(index, experiment="1d", **IDEAL_MQ_PULSES)


def estimate_spans_hz(model, measurement: int = 0) -> list[tuple[float, float]]:
    """A quick estimate of the frequency range (Hz) each site's lines cover, before anything is computed.

    Perturbative offsets on 96 probe directions (and 8 rotor phases when
    spinning: the sideband manifold follows the static pattern's extent,
    M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300), isotropic shift
    included, referencing offset not.  Used to size an axis before a
    Simulator is built (a plan's axes, a fit's overlap check).

    Parameters
    ----------
    model : Model or str or pathlib.Path
    measurement : int, optional

    Returns
    -------
    list of (float, float)
        (lowest, highest) offset from nu_ref (Hz) per site.

    Examples
    --------
    >>> import powderspin as ps
    >>> m = ps.make_model("31P", {"field_tesla": 9.4}, [{"span_ppm": 100.0, "skew": 0.0}])
    >>> lo, hi = estimate_spans_hz(m)[0]
    >>> lo < 0 < hi
    True
    """
    model = as_model(model)
    meas = model.measurements[measurement]
    return [estimate_span_hz(s, meas, model.nucleus) for s in model.sites]


def simulate(model, *, measurement: int = 0, orientations=None, axis: Axis | None = None, progress=None,
             allow_strong_coupling: bool = False, kernel_store=None) -> Spectrum:
    """Simulate the spectrum of a model (one measurement).

    Parameters
    ----------
    model : Model or str or pathlib.Path
        Nucleus, measurement(s) and sites, or the path of a model file.
    measurement : int, optional
        Which measurement (0-based) of a model with several.
    orientations : OrientationSet or str or sequence, optional
        Override the measurement's orientation choice: one set for every
        site, or one set (or set name) per site.
    axis : Axis, optional
        The spectral axis to render on (e.g. a measured spectrum's); the
        measurement's ``points``, ``center_ppm`` and ``width_ppm`` are then
        not used.
    progress : callable, optional
        Subscriber of the progress protocol (:mod:`powderspin.progress`).
    allow_strong_coupling : bool, optional
        Compute sites whose quadrupolar frequency exceeds half the Larmor
        frequency (refused by default: the high-field picture fails there).
    kernel_store : powderspin.disorder.store.KernelStore, optional
        Where the kernels of sites with an EFG distribution are kept and
        looked up (default: the store of the lineshape library folder,
        :func:`powderspin.disorder.store.default_kernel_store`).  Sites with a
        distribution are weighted sums of cached kernels
        (:mod:`powderspin.disorder`); ``shift_fwhm_ppm`` adds a Gaussian
        broadening of ``shift_fwhm_ppm * nu_ref * 1e-6`` Hz.

    Returns
    -------
    Spectrum or Spectrum2D
        As :meth:`Simulator.spectrum` at the model's own values: a
        :class:`~powderspin.engine.spectrum2d.Spectrum2D` for a measurement with
        ``experiment = "mqmas"`` or ``"stmas"``.

    See Also
    --------
    Simulator : simulate one model again and again at other parameter values.
    simulate_all : every measurement of a model.

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
    return Simulator(model, measurement, axis=axis, orientations=orientations, kernel_store=kernel_store,
                     allow_strong_coupling=allow_strong_coupling, progress=progress).spectrum()


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
    model = as_model(model)
    return tuple(simulate(model, measurement=j, **options) for j in range(len(model.measurements)))
