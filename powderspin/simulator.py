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
from .engine.lineshape import Axis, baseline_values, hat_corrected_gauss, make_axis, sampling_oversampling, voigt_fwhm
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
from .model.modelfile import load_model
from .model.values import Model, ModelError, ParameterAddress, selected_transitions
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

    Examples
    --------
    >>> c = SimulationCache(lines=8, rendered=8)
    >>> len(c.lines), len(c.rendered)
    (0, 0)
    """

    def __init__(self, lines: int = 64, rendered: int = 256):
        self.lines = _Memo(lines)
        self.rendered = _Memo(rendered)


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
                 cache: SimulationCache | None = None, point_values: bool = True):
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
        meas = model.measurements[self.index]
        nuc = model.nucleus
        site = model.sites[k]
        f = self.nu_ref_hz * 1e-6
        offset_hz = meas.shift_offset_ppm * f
        gauss = math.hypot(site.gauss_hz, meas.gauss_hz, shift_fwhm_hz(site, self.nu_ref_hz))
        lorentz = site.lorentz_hz + meas.lorentz_hz
        axis, q = self._site_axis(k)
        r, lines, sh = self._render_site_on(model, k, axis, meas, nuc, site, f, offset_hz, gauss, lorentz)
        if q > 1:
            r = replace(r, intensity=np.ascontiguousarray(r.intensity[(q - 1) // 2::q]))
        return r, lines, sh

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
                         gauss_hz=gauss, progress=None if self.progress is None else kernel_progress, site=site)
            return r, None, sh
        job = site_job(site, self._job_meas[k], nuc, self._methods[k], self._sets[k])
        lines = self._lines(job, k, site.label)
        sh = (site.shift.iso_ppm - job.iso_ppm) * f + offset_hz
        r = render_lines(lines, axis, shift_hz=sh, weight=site.weight, lorentz_hz=lorentz,
                         gauss_hz=hat_corrected_gauss(gauss, axis.dx_hz) if self.point_values else gauss,
                         binning=meas.binning,
                         memo=self.cache.rendered)
        return r, lines, sh

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
        Spectrum
            Axis in Hz and ppm, per-site and summed intensities (densities per
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
            "intensity_units": "density per ppm; each site integrates to its weight",
            "notes": notes,
        }
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
                cols.append((r.intensity - y0[k]) / h[q])
            else:
                cols.append((self.site_intensities(t).sum(axis=0) - total0) / h[q])
        return np.column_stack(cols) if cols else np.zeros((self.axis.points, 0))

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
        model = self.model_at(values)
        meas = model.measurements[self.index]
        out = []
        for k, (site, (r, lines, sh)) in enumerate(zip(model.sites, self._render(model))):
            if lines is None or lines.phases == 1:
                out.append(r.intensity)
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
        model = self.model_at(values)
        return [np.ones(1) if lines is None else np.asarray(lines.band_intensity)
                for _, lines, _ in self._render(model)]

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
        model = self.model_at(values)
        out = []
        for _, lines, sh in self._render(model):
            if lines is None:
                out.append(math.nan)
                continue
            tot = float(lines.band_intensity.sum())
            out.append(float(lines.band_position_hz.sum() / tot) + sh if tot > 0 else math.nan)
        return np.array(out)


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
    Spectrum
        As :meth:`Simulator.spectrum` at the model's own values.

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
