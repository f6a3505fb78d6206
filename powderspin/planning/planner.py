"""Planning an experiment: field, rotor and spinning rate chosen by simulation, with the precision each buys.

Before booking magnet time a spectroscopist chooses the field B0, the rotor
and the spinning rate.  Spin too slowly and sidebands of one site fall on the
centreband of another (or a site's own second-order and shift-anisotropy
sidebands land on its own central line); spin fast and a smaller rotor holds
less sample; at a low field the second-order quadrupolar broadening (falling
as 1/B0 in Hz, 1/B0^2 in ppm) may merge sites.  :func:`plan` answers these
questions by simulating the sample with the engine at every candidate field
and spinning rate, not by rules of thumb, and says how precisely each
experiment would determine the model's parameters.

How a plan is made
------------------
For each field the planner builds one spectral axis (the *planning axis*,
below), decides each site's frequency producer and orientation set once, and
then, for each candidate rate, computes every site's lines (the centreband,
band n = 0, and the sideband manifold, bands n != 0, kept apart), renders
them with the model's broadening and weights, and measures:

- **Widths** (per site, per field), measured on the powder pattern *without*
  broadening (broadening tails would dominate any intensity-based width): the
  width of a lineshape is the span between the points below which 0.5 % and
  99.5 % of its intensity lie, i.e. the central span holding 99 % of it
  (positions interpolated within points).  The *static width* is that of the
  static pattern of the selected transitions (the central transition, CT,
  of a half-integer quadrupolar nucleus); the *MAS width* that of the
  centreband at infinitely fast magic-angle spinning.
- **Quadrupolar-induced shift** (ppm): the centre of gravity of the static
  pattern of the selected transitions less the isotropic shift (for the CT,
  the shift of A. Samoson, Chem. Phys. Lett. 119 (1985) 29).
- **Span in Hz**: the shift tensor's span Omega = d11 - d33 times nu_ref.
- **Sideband fraction**: the share of a site's intensity in bands n != 0.
- **Sideband-on-centreband overlap** O[i][j], for every site i (its
  sidebands) and every site j (its centreband), i = j included::

      O[i][j] = sum_k min(S_i[k], C_j[k]) / sum_k C_j[k]

  with S_i the rendered sideband manifold of site i (all bands n != 0) and
  C_j the rendered centreband of site j, both with the model's broadening
  and weights, on the planning axis.  It is the share of j's centreband
  area that lies under sideband intensity of i (0: clear; 1: buried).
- **Centreband resolution** R[i][j] between two different sites::

      R[i][j] = sum_k min(C_i[k], C_j[k]) / min(sum_k C_i[k], sum_k C_j[k])

  the share of the smaller centreband that lies under the other one.

The recommendation for a field is the lowest candidate rate at which every
O[i][j] is below the threshold (default 1 %), with the rotors whose typical
maximum rate reaches it, largest sample volume first.  The best field is the
one whose largest R[i][j] (at its recommended rate, or at its fastest
candidate rate when none is recommended) is smallest; fields within 0.1 % of
each other are ranked by having a recommendation, then by the higher field.

Rotors and sensitivity
----------------------
The built-in rotor table (``powderspin/data/rotors.toml``) lists common
outer diameters with *typical* maximum rates and sample volumes, values of
the trade written from memory: they are not ratings.  ``rotor_table`` (a TOML
file of the same form) replaces it.  The sample volume is the stated proxy
for signal: of the rotors that reach a rate, the one holding the most sample
is recommended, and each rotor's signal relative to the largest one listed
and the experiment time it needs for the same signal-to-noise ratio (the
square of the inverse, since noise averages down as the square root of the
number of scans) are reported.

Precision
---------
The signal-to-noise ratio (SNR) is the tallest point of the simulated
spectrum (all sites, all bands, with broadening) divided by the standard
deviation of the noise per point, the noise being white and independent
from point to point on the planning axis.  The precision of an experiment
is the Cramer-Rao bound of the fitting model: with J the Jacobian of the
simulated spectrum with respect to the parameters theta and the intensity
scale s (solved linearly, as :func:`powderspin.fitting.fitter.fit` does, so that
its column is the spectrum itself) and sigma = max(spectrum) / SNR, the
Fisher information is ``F = J^T J / sigma^2`` and the covariance its
inverse.  J is taken by forward differences of spectra simulated with
:meth:`~powderspin.model.values.Model.with_parameters` and
:func:`~powderspin.simulator.simulate` on the planning axis, with each
site's producer, orientation set and rotor phases fixed and the lines
memoised (a parameter that only moves or weighs a site renders again without
computing new frequencies).

The parameters are the model's free parameters; a model with none uses each
site's physically relevant ones: ``shift_ppm``, ``cq_mhz`` and ``eta_q``
(quadrupolar sites), ``span_ppm`` and ``skew`` (or ``aniso_ppm`` and
``eta_cs``, as the site gives its tensor) when the shift is anisotropic, and
the weight of every site but the first (weights are relative; the scale
absorbs their sum).  Broadening is taken as known.  Weights are reported as
fractions of the total (delta method), as the fit reports them.

Ranking
-------
Each parameter's *relative standard error* is its standard error divided by
a reference: ``max(|value|, floor)`` for parameters with a natural zero
(weights, C_Q, eta, span, anisotropy, broadening) and a fixed reference for
location-like ones (shifts: 1 ppm; skew: 0.1; Euler angles: 10 deg); see
:data:`PARAMETER_REFERENCES`.  An experiment's *criterion* is the largest
relative standard error of its parameters (parameters sitting on an edge of
their allowed range, such as eta_Q = 0, where the Fisher information says
little, are left out and named).

The sensitivity cost of a smaller rotor enters the ranking through the
sample volume: ``snr`` is taken to be the SNR with the largest-volume rotor
considered (volume V_ref); an experiment at a rate that needs a smaller
rotor (the largest one that reaches the rate, volume V) has the SNR
``snr * V / V_ref`` (same scans, signal proportional to the sample), so its
standard errors grow by V_ref / V and its Fisher information shrinks by
(V / V_ref)^2.  Both are reported: ``stderr``/``criterion`` at the given SNR,
and ``rotor_criterion`` with the rotor's volume.  The single experiments are
ranked by ``rotor_criterion``, and the best pair for a global fit is the pair
of candidates (from those that meet the overlap threshold, or all when fewer
than two do) whose summed volume-weighted Fisher information (each
experiment with its own scale, profiled out) gives the smallest criterion.
The gain in signal with the field is not included (it depends on the probe).

The planning axis
-----------------
One point spacing in Hz for every field: the model's own spacing at its own
field (its ``points`` over its ``width_ppm``, or over the range its lines
cover), made finer if needed so that the narrowest line (broadening FWHM) is
at least four points wide.  At each field the axis covers every site's
static pattern with margins, so sidebands fall on it at every candidate
rate.  A site without any broadening gets a Lorentzian of
:data:`DEFAULT_LINEWIDTH_HZ` for planning (noted), since overlaps of
infinitely sharp lines are not defined.

Safety
------
The planner recommends real hardware settings.  Every plan (it names rotors
and rates even when it recommends none) prints and records :data:`CAUTIONS`: never exceed the
rated spinning rate of the actual rotor, cap and probe (rotor failure can
injure); the table's rates are typical, not ratings; defer to the
manufacturer and local rules; keep ferromagnetic objects and people with
implanted devices away from magnets; handle cryogens only with training.

References
----------
.. [1] M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300 (sidebands).
.. [2] J. Herzfeld, A. E. Berger, J. Chem. Phys. 73 (1980) 6021.
.. [3] A. Samoson, Chem. Phys. Lett. 119 (1985) 29 (quadrupolar-induced shift).
.. [4] H. Cramer, *Mathematical Methods of Statistics* (1946); C. R. Rao,
   Bull. Calcutta Math. Soc. 37 (1945) 81 (the information bound) (from memory).
.. [5] J. J. Olivero, R. L. Longbothum, J. Quant. Spectrosc. Radiat. Transfer
   17 (1977) 233 (Voigt FWHM).
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping
from dataclasses import dataclass, replace
from types import MappingProxyType

import numpy as np

from ..checks import is_real, real_numbers, show
from ..engine.lineshape import Axis
from ..engine.site_lines import STRONG_COUPLING_LIMIT_RATIO, quadrupole_to_zeeman_ratio
from ..engine.threads import kernel_threads
from ..model.schema import (
    PLAN_DEFAULT_MIN_RATE_HZ,
    PLAN_DEFAULT_RATE_COUNT,
    PLAN_DEFAULT_SNR,
    PLAN_DEFAULT_THRESHOLD,
    key_spec,
)
from ..model.values import IDEAL_MQ_PULSES, Measurement, Model, ModelError, check_number
from ..physics.orientations import OrientationSetError, orientation_set_by_name
from ..progress import emit
from ..simulator import SimulationCache, Simulator, as_model, estimate_spans_hz
from ..uncertainty import covariance_from_fisher
from .measures import candidate_rates, central_width_hz, overlap_fraction, resolution_overlap, voigt_fwhm
from .precision import criterion as _criterion
from .precision import (
    errors,
    fisher_information,
    parameter_step,
    precision_parameters,
    reference_floor,
    reported,
    with_precision,
)
from .precision import log_det as _log_det
from .results import CAUTIONS, FieldPlan, ParameterInfo, Plan, RateResult, SiteSummary
from .rotors import PlanError, RotorTable, default_rotor_table, load_rotor_table

__all__ = ["plan", "PlanError", "DEFAULT_FIELDS_T", "DEFAULT_THRESHOLD", "DEFAULT_SNR", "DEFAULT_RATE_COUNT",
           "DEFAULT_MIN_RATE_HZ", "DEFAULT_LINEWIDTH_HZ"]

#: fields considered when none are given (T; 400, 600 and 800 MHz for 1H), with the model's own field
DEFAULT_FIELDS_T = (9.4, 14.1, 18.8)
#: largest sideband-on-centreband overlap a recommended rate allows
DEFAULT_THRESHOLD = PLAN_DEFAULT_THRESHOLD
#: signal-to-noise ratio (tallest point / noise standard deviation per point)
DEFAULT_SNR = PLAN_DEFAULT_SNR
#: candidate rates in the default grid
DEFAULT_RATE_COUNT = PLAN_DEFAULT_RATE_COUNT
#: slowest rate of the default grid (Hz); slower magic-angle spinning is seldom stable (common practice)
DEFAULT_MIN_RATE_HZ = PLAN_DEFAULT_MIN_RATE_HZ
#: Lorentzian FWHM (Hz) given for planning to a site with no broadening at all
DEFAULT_LINEWIDTH_HZ = 100.0
#: most points of a planning axis
MAX_AXIS_POINTS = 1 << 16
#: narrowest line (FWHM) spans at least this many points of the planning axis
POINTS_PER_LINEWIDTH = 4.0
#: two fields' resolutions closer than this are ranked by the other keys
RESOLUTION_TIE = 1e-3


def _as_model(model) -> Model:
    try:
        model = as_model(model, "plan")
    except ModelError as e:
        if str(e).startswith("plan: expected"):
            raise PlanError(str(e)) from None
        raise
    # a 2D (MQMAS/STMAS) measurement is planned as its 1D central transition (its F2 dimension);
    # powderspin.planning.two_dimensional plans the F1 resolution
    for j, m in enumerate(model.measurements):
        if m.is_two_dimensional:
            model = model.with_measurement(j, experiment="1d", **IDEAL_MQ_PULSES)
    return model


def _check_fields(fields, model: Model) -> tuple:
    if fields is None:
        fields = sorted(set(DEFAULT_FIELDS_T) | {model.measurement.field_tesla})
    fields = real_numbers(fields, "fields", PlanError)
    if not fields:
        raise PlanError("fields: give at least one field in tesla, e.g. --fields 9.4 14.1 18.8")
    spec = key_spec("measurement", "field_tesla")
    out = []
    for f in fields:
        try:
            v = check_number("fields", "field_tesla", f, "measurement")
        except ModelError:
            raise PlanError(f"fields: {f!r} T is outside the allowed range {spec.range_text()} T "
                            f"({spec.why})") from None
        out.append(v)
    return tuple(sorted(set(out)))


def _check_positive(name: str, value, low: float, high: float, unit: str = "", open_high: bool = False) -> float:
    if not is_real(value):
        what = "text" if isinstance(value, (str, bytes)) else type(value).__name__
        raise PlanError(f"{name} must be a number, got {what} ({show(value)})")
    v = float(value)
    hi_ok = v < high if open_high else v <= high
    if not (math.isfinite(v) and v > low and hi_ok):
        rb = ")" if open_high else "]"
        raise PlanError(f"{name} = {show(value)} is outside the allowed range ({low:g}, {high:g}{rb}{unit}")
    return v


def _select_rotors(table: RotorTable, rotors) -> RotorTable:
    if rotors is None:
        return table
    if isinstance(rotors, (str, int, float)) or is_real(rotors):
        rotors = [rotors]
    if isinstance(rotors, (dict, set, bytes)) or not hasattr(rotors, "__iter__"):
        raise PlanError(f"rotors must be a list of rotor names, got {type(rotors).__name__} ({show(rotors)})")
    rotors = [r.item() if isinstance(r, np.generic) else r for r in rotors]
    if not rotors:
        raise PlanError("rotors: give at least one rotor name, e.g. --rotors 3.2 1.3")
    chosen = []
    for name in rotors:
        r = table.find(name)
        if r not in chosen:
            chosen.append(r)
    return replace(table, rotors=tuple(chosen))


def _check_rates(table: RotorTable, rates_hz, max_rate_hz, n_rates, min_rate_hz) -> tuple:
    fastest = max(table.rotors, key=lambda r: r.max_rate_hz)
    top_all = fastest.max_rate_hz
    beyond = (f"the typical maximum of every rotor considered (fastest: {fastest.name}, {top_all:g} Hz; "
              f"table: {table.source})")
    cap = top_all
    if max_rate_hz is not None:
        m = _check_positive("max rate", max_rate_hz, 0.0, 2.0e5, " Hz")
        if m > top_all:
            raise PlanError(f"max rate {m:g} Hz is above {beyond}; give at most {top_all:g} Hz, or a rotor table "
                            "with the rotors you have (--rotor-table)")
        cap = m
    if rates_hz is not None:
        rates = []
        for r in real_numbers(rates_hz, "rates_hz", PlanError, example="[10000, 15000]"):
            v = _check_positive("rates", r, 0.0, 2.0e5, " Hz")
            spec = key_spec("measurement", "spinning_hz")
            if v < 10.0:
                raise PlanError(f"rates: {v:g} Hz is below 10 Hz ({spec.why})")
            if v > top_all:
                raise PlanError(f"rates: {v:g} Hz is above {beyond}")
            if v > cap:
                raise PlanError(f"rates: {v:g} Hz is above the max rate {cap:g} Hz")
            rates.append(v)
        if not rates:
            raise PlanError("rates: give at least one spinning rate in Hz, e.g. --rates 10000 12500 15000")
        return tuple(sorted(set(rates)))
    low = _check_positive("min rate", min_rate_hz, 9.999, 2.0e5, " Hz")
    if not cap > low:
        raise PlanError(f"max rate {cap:g} Hz must exceed the slowest candidate rate {low:g} Hz")
    n = n_rates
    if isinstance(n, (bool, np.bool_)) or not isinstance(n, (int, np.integer)) or not (2 <= int(n) <= 200):
        raise PlanError(f"n_rates = {show(n)} must be a whole number (an int) in [2, 200]")
    return candidate_rates(cap, int(n), low)


def _template(model: Model) -> tuple[Measurement, list]:
    """The first measurement, stripped of what the planner chooses; the notes it gives."""
    notes = []
    meas = model.measurement
    if len(model.measurements) > 1:
        notes.append(f"the model has {len(model.measurements)} measurements; the first one's broadening, "
                     "transitions and rotor angle are used")
    if meas.spinning_hz != 0.0:
        notes.append("the model's spinning_hz is not used: the planner tries the candidate rates")
    t = replace(meas, spinning_hz=0.0, center_ppm=None, width_ppm=None, rotor_phases="auto", scale=1.0,
                baseline=(), data=None)
    return t, notes


def _site_broadening(site, meas) -> tuple[float, float]:
    return site.lorentz_hz + meas.lorentz_hz, math.hypot(site.gauss_hz, meas.gauss_hz)


def _planning_sites(model: Model, meas: Measurement) -> tuple[Model, list]:
    """Sites with no broadening get DEFAULT_LINEWIDTH_HZ (Lorentzian) for planning."""
    notes = []
    sites = list(model.sites)
    changed = False
    for i, s in enumerate(sites):
        lz, gs = _site_broadening(s, meas)
        if lz <= 0 and gs <= 0:
            sites[i] = replace(s, lorentz_hz=DEFAULT_LINEWIDTH_HZ)
            changed = True
            notes.append(f"site '{s.label}' has no broadening; {DEFAULT_LINEWIDTH_HZ:g} Hz (Lorentzian FWHM) is used "
                         "for planning (overlaps of infinitely sharp lines are not defined)")
    if changed:
        model = replace(model, sites=tuple(sites))
    return model, notes


def _point_spacing_hz(model: Model, meas: Measurement) -> float:
    """The model's own point spacing at its own field, made finer for the narrowest line."""
    orig = model.measurement
    nuc = model.nucleus
    nu_ref = nuc.larmor_hz(orig.field_tesla)
    if orig.width_ppm is not None:
        dx = orig.width_ppm * nu_ref * 1e-6 / orig.points
    else:
        lo = hi = None
        static = replace(meas, field_tesla=orig.field_tesla, spinning_hz=0.0)
        widest = max(voigt_fwhm(*_site_broadening(s, meas)) for s in model.sites)
        for a, b in estimate_spans_hz(replace(model, measurements=(static,))):
            lo = a if lo is None else min(lo, a)
            hi = b if hi is None else max(hi, b)
        span = (hi - lo) + 8 * widest
        dx = 1.2 * span / orig.points
    narrowest = min(voigt_fwhm(*_site_broadening(s, meas)) for s in model.sites)
    return float(min(dx, narrowest / POINTS_PER_LINEWIDTH))


def _field_axis(model: Model, meas: Measurement, field_t: float, dx: float, slowest_rate: float, notes: list):
    nuc = model.nucleus
    nu_ref = nuc.larmor_hz(field_t)
    static = replace(meas, field_tesla=field_t, spinning_hz=0.0)
    offset = meas.shift_offset_ppm * nu_ref * 1e-6
    lo = hi = None
    for s, (a, b) in zip(model.sites, estimate_spans_hz(replace(model, measurements=(static,)))):
        w = voigt_fwhm(*_site_broadening(s, meas))
        margin = 0.1 * (b - a) + 8 * w + 2 * slowest_rate
        a, b = a + offset - margin, b + offset + margin
        lo = a if lo is None else min(lo, a)
        hi = b if hi is None else max(hi, b)
    points = int(math.ceil((hi - lo) / dx))
    points += points % 2
    if points > MAX_AXIS_POINTS:
        dx = (hi - lo) / MAX_AXIS_POINTS
        points = MAX_AXIS_POINTS
        notes.append(f"{field_t:g} T: the lines span {(hi - lo) / 1e3:.4g} kHz, more than {MAX_AXIS_POINTS} points "
                     f"at the planned spacing; the spacing there is {dx:.4g} Hz")
    points = max(points, 64)
    return Axis(center_hz=0.5 * (lo + hi), width_hz=points * dx, points=points, nu_ref_hz=nu_ref)


class _Clock:
    def __init__(self):
        self.t = {"setup": 0.0, "candidates": 0.0}

    def add(self, key, t0):
        self.t[key] += time.perf_counter() - t0


@dataclass
class _FieldSetup:
    field_tesla: float
    nu_ref: float
    axis: Axis
    meas: Measurement          # at this field, static, template broadening
    methods_mas: list
    sets_mas: list
    sites: list                # SiteSummary
    notes: list
    cache: SimulationCache


def _at(model: Model, meas: Measurement) -> Model:
    """The model with ``meas`` as its only measurement (its free measurement parameters kept)."""
    return replace(model, measurements=(meas,) + tuple(model.measurements[1:]))


def _unbroadened(model: Model) -> Model:
    """Every site with weight 1 and no broadening (the widths are measured on the bare patterns)."""
    sites = tuple(replace(s, weight=1.0, lorentz_hz=0.0, gauss_hz=0.0, shift_fwhm_ppm=0.0) for s in model.sites)
    meas = tuple(replace(m, lorentz_hz=0.0, gauss_hz=0.0) for m in model.measurements)
    return replace(model, sites=sites, measurements=meas, free=(), tied=())


def _setup_field(model: Model, meas: Measurement, field_t: float, dx: float, slowest: float, orientations,
                 clock: _Clock) -> _FieldSetup:
    nuc = model.nucleus
    notes: list = []
    for s in model.sites:
        ratio = quadrupole_to_zeeman_ratio(s, nuc, field_t)
        if ratio > STRONG_COUPLING_LIMIT_RATIO:
            raise PlanError(
                f"fields: at {field_t:g} T site '{s.label}' has nu_Q/nu0 = {ratio:.2g} (C_Q = {s.cq_mhz:g} MHz), "
                f"beyond {STRONG_COUPLING_LIMIT_RATIO:g}, where a high-field NMR spectrum no longer describes it; "
                f"leave {field_t:g} T out or check cq_mhz")
    axis = _field_axis(model, meas, field_t, dx, slowest, notes)
    nu_ref = axis.nu_ref_hz
    static = replace(meas, field_tesla=field_t, spinning_hz=0.0)
    inf = replace(meas, field_tesla=field_t, spinning_hz=math.inf)
    if orientations is not None:
        static = replace(static, orientations=orientations)
        inf = replace(inf, orientations=orientations)
    offset = meas.shift_offset_ppm * nu_ref * 1e-6
    cache = SimulationCache(lines=16 * len(model.sites), rendered=64 * len(model.sites))
    t0 = time.perf_counter()
    # producers and orientation sets, decided with the model's broadening (as every spectrum of the plan is)
    sim_static = Simulator(_at(model, static), axis=axis, cache=cache, point_values=False)
    sim_inf = Simulator(_at(model, inf), axis=axis, cache=cache, point_values=False)
    notes.extend(f"{field_t:g} T: {t}" for t in sim_inf.notes)
    # widths and the quadrupolar-induced shift, on the bare patterns
    bare = _unbroadened(model)
    bare_static = Simulator(_unbroadened(_at(bare, static)), axis=axis, methods=sim_static.methods,
                            orientations=sim_static.orientation_sets, cache=cache, point_values=False)
    bare_inf = Simulator(_unbroadened(_at(bare, inf)), axis=axis, methods=sim_inf.methods,
                         orientations=sim_inf.orientation_sets, cache=cache, point_values=False)
    ys = bare_static.site_intensities()
    yi = bare_inf.site_intensities()
    cogs = bare_static.centres_of_gravity_hz()
    summaries = []
    for k, s in enumerate(model.sites):
        w_static = central_width_hz(ys[k], axis)
        w_mas = central_width_hz(yi[k], axis)
        qis_hz = cogs[k] - s.shift.iso_ppm * nu_ref * 1e-6 - offset
        summaries.append(SiteSummary(
            label=s.label, static_width_hz=w_static, static_width_ppm=w_static / nu_ref * 1e6,
            mas_width_hz=w_mas, mas_width_ppm=w_mas / nu_ref * 1e6,
            quadrupolar_induced_shift_ppm=qis_hz / nu_ref * 1e6,
            span_hz=s.shift.span_ppm * nu_ref * 1e-6, method=sim_inf.methods[k],
            orientations=sim_inf.orientations[k]))
    clock.add("setup", t0)
    return _FieldSetup(field_t, nu_ref, axis, static, list(sim_inf.methods), list(sim_inf.orientation_sets),
                       summaries, notes, cache)


# ----- one candidate


@dataclass(frozen=True)
class _Candidate:
    """One candidate (field, rate) as a task of ``map_candidates``: what its evaluation reads, all of it picklable.

    ``sets`` holds each site's orientation set, or its name where the set's generator gives this very set again by
    name (it is then rebuilt, once per process, where the task runs, instead of shipped with every task).
    """

    model: Model
    axis: Axis
    meas: Measurement          # at the field, static, template broadening
    methods: tuple
    sets: tuple
    rate_hz: float
    table: RotorTable
    params: tuple
    snr: float
    threads: int | None


@dataclass(frozen=True)
class _CandidateOutcome:
    """What a candidate task returns: its result, its spectrum (None when not computed) and its seconds."""

    result: RateResult
    spectrum: object
    seconds: float


def _shipped_set(s):
    """The orientation set as it travels to a task: its name when the name gives this very set back, else itself."""
    if s is None:
        return None
    try:
        if orientation_set_by_name(s.name) is s:
            return s.name
    except OrientationSetError:
        pass
    return s


def _candidate_task(c: _Candidate) -> _CandidateOutcome:
    """Evaluate one candidate where the task runs (a Dask worker), with a simulation memo of its own."""
    t0 = time.perf_counter()
    sets = [orientation_set_by_name(s) if isinstance(s, str) else s for s in c.sets]
    n = len(c.model.sites)
    cache = SimulationCache(lines=16 * n, rendered=64 * n)
    with kernel_threads(c.threads):
        res, spec = _evaluate_rate(c.model, c.axis, c.meas, list(c.methods), sets, cache, c.rate_hz, c.table,
                                   list(c.params), c.snr)
    return _CandidateOutcome(res, spec, time.perf_counter() - t0)


def _evaluate_rate(model: Model, axis: Axis, static: Measurement, methods: list, sets: list, cache: SimulationCache,
                   rate: float, table: RotorTable, params: list | None, snr: float):
    meas = replace(static, spinning_hz=rate, rotor_phases="auto")
    reach = table.reaching(rate)
    rotors = tuple(r.name for r in reach)
    rel_signal = reach[0].sample_volume_ul / table.largest_volume_ul() if reach else 0.0
    options = dict(axis=axis, methods=methods, orientations=sets, cache=cache)
    try:  # each site's rotor phases, then the largest for every site (so the Jacobian's spectra cannot jump)
        phases = max(Simulator(_at(model, meas), point_values=False, **options).rotor_phases)
    except ModelError as e:
        return RateResult(rate, False, reason=str(e), rotors=rotors, relative_signal=rel_signal), None
    fixed = replace(meas, rotor_phases=int(phases))
    base_model = _at(model, fixed)
    sim = Simulator(base_model, parameters=[q.address for q in params or ()], point_values=False, **options)
    spec = sim.spectrum()
    y0 = np.asarray(spec.intensity, dtype=float)
    # each site's centreband alone; its sidebands are the rest of its simulated spectrum (binning and broadening
    # are linear)
    centre = sim.centrebands()
    side = [np.clip(np.asarray(spec.site_intensities[k]) - centre[k], 0.0, None) for k in range(len(model.sites))]
    n = len(model.sites)
    ov = [[overlap_fraction(side[i], centre[j]) if model.sites[j].weight > 0 else 0.0 for j in range(n)]
          for i in range(n)]
    flat = [(ov[i][j], i, j) for i in range(n) for j in range(n)]
    worst_v, wi, wj = max(flat)
    res = [[0.0 if i == j else resolution_overlap(centre[i], centre[j]) for j in range(n)] for i in range(n)]
    max_res = max((res[i][j] for i in range(n) for j in range(n) if i != j), default=0.0)
    frac = tuple(float(1.0 - b[0] / b.sum()) if b.sum() > 0 else 0.0 for b in sim.band_intensities())
    sigma = float(np.max(y0)) / snr if np.max(y0) > 0 else math.nan
    fisher = None
    if params:
        jac = sim.jacobian(steps=[parameter_step(q) for q in params],
                           base=np.asarray(spec.site_intensities, dtype=float))
        fisher = fisher_information(jac, y0, sigma)
    result = RateResult(rate, True, overlap=tuple(tuple(r) for r in ov), max_overlap=float(worst_v), worst=(wi, wj),
                        sideband_fraction=frac, resolution=tuple(tuple(r) for r in res),
                        max_resolution_overlap=float(max_res), rotors=rotors, rotor_phases=int(phases),
                        noise_sigma=sigma, stderr={}, relative={}, criterion=math.nan, worst_parameter="",
                        fisher=fisher, log_det=math.nan, relative_signal=rel_signal)
    return result, spec


def plan(model, fields=None, *, rotors=None, rotor_table=None, max_rate_hz=None, rates_hz=None,
         n_rates: int = DEFAULT_RATE_COUNT, min_rate_hz: float = DEFAULT_MIN_RATE_HZ,
         threshold: float = DEFAULT_THRESHOLD, snr: float = DEFAULT_SNR, precision: bool = True,
         orientations=None, progress=None, threads: int | None = 1, values=None, map_candidates=None) -> Plan:
    """Plan an experiment: simulate the sample at each candidate field and spinning rate.

    For each field, the candidate rates are tried from the slowest; at each
    the sideband-on-centreband overlaps of every pair of sites (a site with
    itself included), the centreband resolution and, with ``precision``, the
    standard errors the experiment would give are computed.  The module
    notes define every measure.

    Parameters
    ----------
    model : Model or str or pathlib.Path
        The sample: nucleus, sites and the broadening and transitions of its
        (first) measurement; its field and spinning rate are not used.
    fields : sequence of float, optional
        Fields to consider (T); default :data:`DEFAULT_FIELDS_T` and the
        model's own field.
    rotors : sequence of str, optional
        Rotor names to consider (``"3.2 mm"`` or ``"3.2"``); default every
        rotor of the table.
    rotor_table : RotorTable or str or pathlib.Path, optional
        A table (or TOML file) replacing the built-in one.
    max_rate_hz : float, optional
        Fastest candidate rate (Hz), e.g. the fastest your probe allows.
    rates_hz : sequence of float, optional
        The candidate rates (Hz) themselves, instead of the default grid.
    n_rates : int, optional
        Number of rates of the default grid (log-spaced from
        ``min_rate_hz`` to the fastest rotor or ``max_rate_hz``).
    min_rate_hz : float, optional
        Slowest rate of the default grid (Hz).
    threshold : float, optional
        Largest sideband-on-centreband overlap allowed, in (0, 1).
    snr : float, optional
        Signal-to-noise ratio: tallest point / noise standard deviation per
        point of the planning axis.
    precision : bool, optional
        Compute the standard errors, the ranking and the best pair.
    orientations : str or int, optional
        Orientation set for every site (as the model key ``orientations``),
        overriding the model's; ``"auto"`` chooses per site and field.
    progress : callable, optional
        Subscriber of the progress protocol (:mod:`powderspin.progress`): stage ``"plan"``, unit
        experiments, after each candidate (and each field's set-up).
    threads : int or None, optional
        Threads of the compiled kernels while planning (default 1; None keeps
        numba's setting).  A plan makes thousands of small kernel calls, for
        which starting parallel work costs more than it saves
        (``benchmarks/bench_plan.py`` measures both).
    values : FitResult or Mapping of str to float, optional
        Parameter values at which to compute the precision (a fit result's
        fitted values, or ``{"A.cq_mhz": 4.1, ...}``); default the model's own
        values (the start values of free parameters).  The plan says which
        (``Plan.parameter_source``).
    map_candidates : callable, optional
        How the candidates (every field x rate) are evaluated:
        ``map_candidates(function, items, on_result=callback)`` returns
        ``[function(item) for item in items]`` computed anywhere and calls
        ``callback(k, value)`` here as each value arrives, e.g.
        :func:`powderspin.series.runner.dask_map` of a Dask client
        (``powderspin plan --workers N``).  Every field's set-up (axis,
        producers, orientation sets, widths) is made here first, so a kernel
        grid is built once, before any task starts; each task then evaluates
        one candidate with a simulation memo of its own.  The plan is the
        serial one (only ``timings["candidates"]`` then sums the tasks'
        seconds).  Default: one after the other, here.

    Returns
    -------
    Plan

    Raises
    ------
    PlanError
        Bad fields, rates, rotors, rotor table, threshold or SNR; a field
        where the high-field picture fails for a site.
    powderspin.model.values.ModelError
        A model that cannot be read.

    See Also
    --------
    powderspin.simulator.simulate : the engine the plan runs.
    powderspin.fitting.fitter.fit : the fit whose precision the plan predicts.

    References
    ----------
    M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300; J. Herzfeld,
    A. E. Berger, J. Chem. Phys. 73 (1980) 6021 (sidebands); A. Samoson,
    Chem. Phys. Lett. 119 (1985) 29 (quadrupolar-induced shift); C. R. Rao,
    Bull. Calcutta Math. Soc. 37 (1945) 81 (information bound) (from memory).

    Examples
    --------
    A 31P site with a 150 ppm span at two fields and four rates:

    >>> import powderspin as ps
    >>> m = ps.make_model("31P", {"field_tesla": 9.4, "points": 256, "orientations": 8, "lorentz_hz": 300.0},
    ...                   [{"label": "P", "shift_ppm": 0.0, "span_ppm": 150.0, "skew": 0.5}])
    >>> p = ps.plan(m, [9.4, 14.1], rates_hz=[2000, 5000, 10000, 20000], snr=200)
    >>> [f.recommended_rate_hz for f in p.fields], p.fields[0].recommended_rotors[0]
    ([20000.0, 20000.0], '3.2 mm')
    >>> p.fields[0].rate(10000.0).passes(p.threshold)
    False
    >>> sorted(p.fields[0].rate(10000.0).stderr)
    ['P.shift_ppm', 'P.skew', 'P.span_ppm']
    >>> d = p.to_dict()
    >>> d["fields"][0]["recommended_rate_hz"], len(d["cautions"]) > 0
    (20000.0, True)
    """
    if map_candidates is not None and not callable(map_candidates):
        raise PlanError(f"map_candidates must be callable (e.g. powderspin.series.runner.dask_map(client)), got "
                        f"{type(map_candidates).__name__}")
    with kernel_threads(threads):
        return _plan(model, fields, rotors, rotor_table, max_rate_hz, rates_hz, n_rates, min_rate_hz, threshold, snr,
                     precision, orientations, progress, values, map_candidates, threads)


def _plan(model, fields, rotors, rotor_table, max_rate_hz, rates_hz, n_rates, min_rate_hz, threshold, snr, precision,
          orientations, progress, values=None, map_candidates=None, threads=1) -> Plan:
    t_start = time.perf_counter()
    model = _as_model(model)
    at_text = "the model's values (start values of free parameters)"
    if values is not None:
        from_result = not isinstance(values, Mapping)
        given = dict(values.values if from_result else values)
        try:
            model = model.with_parameters({model.address_of(n): float(v) for n, v in given.items()})
        except (ValueError, TypeError) as e:
            raise PlanError(f"values: {e}") from None
        at_text = "the fit result's values" if from_result else "the given values"
    source = model.source or ""
    if not model.sites:
        raise PlanError("model: at least one [[site]] is needed")
    if not isinstance(precision, (bool, np.bool_)):
        raise PlanError(f"precision must be True or False, got {show(precision)}")
    fields_t = _check_fields(fields, model)
    threshold = _check_positive("threshold", threshold, 0.0, 1.0, "", open_high=True)
    snr = _check_positive("snr", snr, 0.0, 1e9)
    if rotor_table is None:
        table = default_rotor_table()
    elif isinstance(rotor_table, RotorTable):
        table = rotor_table
    else:
        table = load_rotor_table(rotor_table)
    table = _select_rotors(table, rotors)
    rates = _check_rates(table, rates_hz, max_rate_hz, n_rates, min_rate_hz)
    if orientations is not None:
        try:
            Measurement(field_tesla=9.4, orientations=orientations)
        except ModelError as e:
            raise PlanError(f"orientations: {e}") from None
    meas, notes = _template(model)
    model, more = _planning_sites(model, meas)
    notes += more
    dx = _point_spacing_hz(model, meas)
    model = replace(model, measurements=(meas,) + tuple(model.measurements[1:]))
    params, param_text = (precision_parameters(model) if precision else ([], "precision not computed"))
    if precision and params:
        param_text += "; computed at " + at_text + ": " + ", ".join(f"{q.name} = {q.value:.6g}" for q in params)
    clock = _Clock()
    total = len(fields_t) * (1 + len(rates))
    done = 0
    field_plans = []
    setups = []
    for ft in fields_t:
        setup = _setup_field(model, meas, ft, dx, rates[0], orientations, clock)
        setups.append(setup)
        done += 1
        emit(progress, "plan", done, total, unit="experiments")
        if map_candidates is not None:
            continue  # every field's set-up first (here, so that kernel grids are built once); then the candidates
        results, spectra = [], {}
        for r in rates:
            t0 = time.perf_counter()
            res, spec = _evaluate_rate(model, setup.axis, setup.meas, setup.methods_mas, setup.sets_mas, setup.cache,
                                       r, table, params, snr)
            clock.add("candidates", t0)
            results.append(res)
            spectra[r] = spec
            done += 1
            emit(progress, "plan", done, total, unit="experiments")
        field_plans.append((setup, results, spectra))
    if map_candidates is not None:
        jobs = [_Candidate(model, s.axis, s.meas, tuple(s.methods_mas), tuple(_shipped_set(x) for x in s.sets_mas),
                           r, table, tuple(params), snr, threads) for s in setups for r in rates]
        arrived = [done]

        def on_result(k, outcome):
            arrived[0] += 1
            emit(progress, "plan", arrived[0], total, unit="experiments")

        outcomes = map_candidates(_candidate_task, jobs, on_result=on_result)
        clock.t["candidates"] += sum(o.seconds for o in outcomes)
        for k, setup in enumerate(setups):
            mine = outcomes[k * len(rates):(k + 1) * len(rates)]
            field_plans.append((setup, [o.result for o in mine], {r: o.spectrum for r, o in zip(rates, mine)}))
    # -- precision: errors, criterion
    info: list = []
    refs: dict = {}
    skip: set = set()
    plist: list = []
    if params:
        info, g = reported(model, params)
        for n, v, u, k in info:
            kind, fl = reference_floor(k)
            refs[n] = max(abs(v), fl) if kind == "scale" else fl
        for q in params:
            if q.value <= q.lo or q.value >= q.hi:
                skip.add(q.name)
        for n, v, u, k in info:
            at = n in skip
            plist.append(ParameterInfo(n, v, u, refs[n], at))
        if skip:
            notes.append("left out of the ranking (on an edge of their allowed range, where the Fisher information "
                         "says little): " + ", ".join(sorted(skip)))
        prefs = [refs.get(q.name, max(abs(q.value), reference_floor(q.address.key)[1])) for q in params]
        for k, (setup, results, spectra) in enumerate(field_plans):
            field_plans[k] = (setup, [with_precision(r, info, g, refs, skip, prefs) for r in results], spectra)
    # -- recommendation per field
    fplans = []
    for setup, results, spectra in field_plans:
        fplans.append(_field_plan(setup, results, spectra, threshold, table))
    best_t, best_reason = _best_field(fplans)
    ranking, pairs = (), ()
    if params:
        ranking = tuple(sorted(((f.field_tesla, r.rate_hz, r.rotor_criterion, r.worst_parameter)
                                for f in fplans for r in f.rates if r.computed),
                               key=lambda t: (_sort_key(t[2]), t[1], -t[0])))
        pairs = _best_pairs(fplans, threshold, info, g, refs, skip, prefs, notes)
    timings = {"total": time.perf_counter() - t_start, **clock.t}
    cautions = CAUTIONS  # printed with every plan: it names rotors and rates even when it recommends none
    return Plan(model=model, source=source, fields=tuple(fplans), rates_hz=tuple(rates), threshold=threshold,
                snr=snr, point_spacing_hz=dx, rotor_table=table, parameters=tuple(plist),
                parameter_source=param_text, best_field_tesla=best_t, best_field_reason=best_reason,
                ranking=ranking, pairs=pairs, notes=tuple(notes), cautions=cautions, timings=timings)


def _sort_key(v: float) -> float:
    return math.inf if not math.isfinite(v) else v


def _field_plan(setup: _FieldSetup, results: list, spectra: dict, threshold: float, table: RotorTable) -> FieldPlan:
    rec = next((r for r in results if r.passes(threshold)), None)
    computed = [r for r in results if r.computed]
    notes = list(setup.notes)
    if rec is not None:
        rotors = rec.rotors
        lower = [r for r in results if r.rate_hz < rec.rate_hz]
        if lower:
            worst = max(lower, key=lambda r: r.rate_hz)
            why = (f"lowest candidate rate at which every sideband-on-centreband overlap is below "
                   f"{threshold:.3g} (here {rec.max_overlap:.3g}); at {worst.rate_hz:g} Hz "
                   + (f"the largest is {worst.max_overlap:.3g}" if worst.computed else "it could not be computed"))
        else:
            why = (f"the slowest candidate rate already keeps every overlap below {threshold:.3g} (here "
                   f"{rec.max_overlap:.3g}); slower rates were not tried")
        if not rotors:
            why += "; no rotor of the table reaches it"
        rate = rec.rate_hz
        res_rate = rec.rate_hz
        res_val = rec.max_resolution_overlap
    else:
        rotors = ()
        rate = None
        if computed:
            best = min(computed, key=lambda r: r.max_overlap)
            why = (f"no candidate rate keeps every overlap below {threshold:.3g}; the smallest largest overlap is "
                   f"{best.max_overlap:.3g} at {best.rate_hz:g} Hz (sidebands of site {best.worst[0] + 1} on the "
                   f"centreband of site {best.worst[1] + 1}); try faster rotors, another field or a higher "
                   "threshold")
            fastest = max(computed, key=lambda r: r.rate_hz)
            res_rate, res_val = fastest.rate_hz, fastest.max_resolution_overlap
        else:
            why = "no candidate rate could be simulated: " + (results[0].reason if results else "no rates")
            res_rate, res_val = None, math.inf
    return FieldPlan(field_tesla=setup.field_tesla, nu_ref_hz=setup.nu_ref, axis=setup.axis, sites=tuple(setup.sites),
                     rates=tuple(results), recommended_rate_hz=rate, reason=why, recommended_rotors=tuple(rotors),
                     resolution_rate_hz=res_rate, max_resolution_overlap=res_val,
                     spectrum=spectra.get(res_rate) if res_rate is not None else None, notes=tuple(notes))


def _best_field(fplans: list) -> tuple[float, str]:
    def key(f):
        return (round(f.max_resolution_overlap / RESOLUTION_TIE) if math.isfinite(f.max_resolution_overlap)
                else math.inf, 0 if f.recommended_rate_hz is not None else 1, -f.field_tesla)

    best = min(fplans, key=key)
    n_sites = len(best.sites)
    if n_sites < 2:
        why = ("one site: no pair of centrebands to resolve; the highest field"
               + (" with a recommended rate" if best.recommended_rate_hz is not None else "")
               + " is taken (narrower second-order lines in ppm, more signal)")
    else:
        why = (f"largest centreband overlap between different sites {best.max_resolution_overlap:.3g} "
               f"at {best.resolution_rate_hz:g} Hz, the smallest of the fields")
        if best.recommended_rate_hz is None:
            why += " (no rate meets the sideband threshold there)"
    return best.field_tesla, why


def _best_pairs(fplans, threshold, info, g, refs, skip, prefs, notes, keep: int = 10) -> tuple:
    cands = [(f, r) for f in fplans for r in f.rates if r.computed and r.fisher is not None]
    clean = [(f, r) for f, r in cands if r.passes(threshold)]
    pool = clean if len(clean) >= 2 else cands
    if len(pool) < 2:
        return ()
    if pool is cands and len(clean) < 2:
        notes.append("fewer than two candidates meet the overlap threshold; the best pair is chosen among all "
                     "computed candidates")
    out = []
    for a in range(len(pool)):
        for b in range(a + 1, len(pool)):
            (fa, ra), (fb, rb) = pool[a], pool[b]
            if not (ra.relative_signal > 0 and rb.relative_signal > 0):
                continue
            cov = covariance_from_fisher(ra.fisher * ra.relative_signal ** 2 + rb.fisher * rb.relative_signal ** 2)
            stderr, rel = errors(cov, info, g, refs)
            crit, name = _criterion(rel, skip)
            ld = _log_det(cov, prefs)
            out.append({"fields_tesla": [fa.field_tesla, fb.field_tesla], "rates_hz": [ra.rate_hz, rb.rate_hz],
                        "rotors": [ra.rotors[0] if ra.rotors else None, rb.rotors[0] if rb.rotors else None],
                        "relative_signal": [ra.relative_signal, rb.relative_signal], "criterion": crit,
                        "worst_parameter": name, "log_det_covariance": ld, "stderr": stderr})
    out.sort(key=lambda d: (_sort_key(d["criterion"]), _sort_key(d["log_det_covariance"])))
    return tuple(MappingProxyType(d) for d in out[:keep])


