"""What a plan found: frozen results per site, rate, field and plan, their definitions and the table text.

:meth:`Plan.to_dict` gives every number behind a plan (the JSON written by
:func:`powderspin.io.results.write_plan_json`); :meth:`Plan.table_text` the
table ``powderspin plan`` prints.  Figures are drawn by
:mod:`powderspin.plotting.plan`.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Mapping

import numpy as np

from .. import __version__
from ..engine.lineshape import Axis
from ..frozen import reduce_through_init
from ..model.values import Model
from .precision import reference_floor
from .rotors import RotorTable

__all__ = ["SiteSummary", "RateResult", "FieldPlan", "ParameterInfo", "Plan", "DEFINITIONS", "CAUTIONS"]

#: The cautions printed with every plan and recorded in its JSON (rotors and rates are named there).
CAUTIONS = (
    "Never exceed the rated spinning rate of the actual rotor, cap and probe you use: a rotor that fails "
    "at speed can injure.",
    "The rotor rates and volumes in this plan are typical values of the trade, not ratings; the "
    "manufacturer's ratings and your laboratory's rules decide.",
    "Keep ferromagnetic objects, and people with pacemakers or other implanted devices, away from the magnet.",
    "Handle cryogens (liquid nitrogen and helium) only with training.",
)


@dataclass(frozen=True)
class SiteSummary:
    """Field-dependent figures of one site (widths measured without broadening).

    Attributes
    ----------
    label : str
    static_width_hz, static_width_ppm : float
        Central span holding 99 % of the static pattern of the selected
        transitions (the CT for half-integer quadrupolar nuclei).
    mas_width_hz, mas_width_ppm : float
        The same for the centreband at infinitely fast magic-angle spinning.
    quadrupolar_induced_shift_ppm : float
        Centre of gravity of the static pattern less the isotropic shift.
    span_hz : float
        Shift-tensor span Omega (d11 - d33) in Hz.
    method, orientations : str
        The frequency producer and the orientation set used at this field.

    Examples
    --------
    >>> SiteSummary("P", 1.0, 1.0, 0.0, 0.0, 0.0, 0.0, "perturbation", "tri-octant-8").label
    'P'
    """

    label: str
    static_width_hz: float
    static_width_ppm: float
    mas_width_hz: float
    mas_width_ppm: float
    quadrupolar_induced_shift_ppm: float
    span_hz: float
    method: str
    orientations: str


@dataclass(frozen=True)
class RateResult:
    """What one candidate (field, spinning rate) gives.

    Attributes
    ----------
    rate_hz : float
    computed : bool
        False when the rate could not be simulated (``reason`` says why); it
        then counts as failing the threshold.
    reason : str
    overlap : tuple of tuple of float
        ``overlap[i][j]``: sidebands of site i on the centreband of site j
        (see the module notes).
    max_overlap : float
    worst : tuple of 2 int
        (i, j) of the largest overlap.
    sideband_fraction : tuple of float
        Share of each site's intensity in bands n != 0.
    resolution : tuple of tuple of float
        ``resolution[i][j]``: shared area of the centrebands of sites i != j
        over the smaller one (0 on the diagonal).
    max_resolution_overlap : float
    rotors : tuple of str
        Rotors whose typical maximum reaches the rate, largest volume first.
    rotor_phases : int
        Rotor phases per period used.
    noise_sigma : float
        Noise standard deviation per point for the plan's SNR (density per ppm).
    stderr, relative : Mapping of str to float
        Standard errors (parameter units; weights as fractions) and relative
        standard errors (inf: not determined; NaN: no precision computed).
    criterion : float
        Largest relative standard error of the ranked parameters, at the
        plan's SNR.
    relative_signal : float
        Sample volume of the largest rotor reaching the rate over the largest
        volume considered (the SNR scales with it).
    rotor_criterion : float
        ``criterion / relative_signal``: the criterion with that rotor.
    worst_parameter : str
    fisher : ndarray (p, p) or None
        Fisher information of the parameters with the scale profiled out.
    log_det : float
        log det of the covariance of the scaled parameters (a tie-breaker).

    Examples
    --------
    >>> import powderspin as ps
    >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
    ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
    >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
    >>> r = p.fields[0].rate(20000.0)
    >>> r.computed, r.passes(p.threshold), r.rotors[0]
    (True, True, '3.2 mm')
    """

    rate_hz: float
    computed: bool
    reason: str = ""
    overlap: tuple = ()
    max_overlap: float = math.inf
    worst: tuple = (0, 0)
    sideband_fraction: tuple = ()
    resolution: tuple = ()
    max_resolution_overlap: float = math.inf
    rotors: tuple = ()
    rotor_phases: int = 0
    noise_sigma: float = math.nan
    stderr: Mapping = field(default_factory=dict)
    relative: Mapping = field(default_factory=dict)
    criterion: float = math.nan
    relative_signal: float = math.nan
    rotor_criterion: float = math.nan
    worst_parameter: str = ""
    fisher: Any = None
    log_det: float = math.nan

    __reduce__ = reduce_through_init  # picklable: to and from Dask workers (powderspin.frozen)

    def __post_init__(self):
        object.__setattr__(self, "stderr", MappingProxyType(dict(self.stderr)))
        object.__setattr__(self, "relative", MappingProxyType(dict(self.relative)))
        if self.fisher is not None:
            f = np.array(self.fisher, dtype=float)
            f.flags.writeable = False
            object.__setattr__(self, "fisher", f)

    def passes(self, threshold: float) -> bool:
        """Whether every sideband-on-centreband overlap is below ``threshold``.

        Parameters
        ----------
        threshold : float

        Returns
        -------
        bool

        Examples
        --------
        >>> RateResult(5000.0, True, max_overlap=0.002).passes(0.01)
        True
        """
        return self.computed and self.max_overlap < threshold


@dataclass(frozen=True)
class FieldPlan:
    """The plan at one field.

    Attributes
    ----------
    field_tesla, nu_ref_hz : float
    axis : Axis
        The planning axis at this field.
    sites : tuple of SiteSummary
    rates : tuple of RateResult
        One per candidate rate, ascending.
    recommended_rate_hz : float or None
        Lowest candidate rate keeping every overlap below the threshold.
    reason : str
        Why that rate (or why none).
    recommended_rotors : tuple of str
        Rotors reaching the recommended rate, largest sample volume first.
    resolution_rate_hz : float or None
        The rate at which the centreband resolution below is measured.
    max_resolution_overlap : float
        Largest centreband overlap between different sites there.
    spectrum : Spectrum or None
        The simulated spectrum at ``resolution_rate_hz`` (for the figure).
    notes : tuple of str

    Examples
    --------
    >>> import powderspin as ps
    >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
    ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
    >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
    >>> f = p.fields[0]
    >>> f.recommended_rate_hz, f.recommended_rotors[:2]
    (20000.0, ('3.2 mm', '2.5 mm'))
    """

    field_tesla: float
    nu_ref_hz: float
    axis: Axis
    sites: tuple
    rates: tuple
    recommended_rate_hz: float | None
    reason: str
    recommended_rotors: tuple
    resolution_rate_hz: float | None
    max_resolution_overlap: float
    spectrum: Any = None
    notes: tuple = ()

    def rate(self, rate_hz: float) -> RateResult:
        """The result at one candidate rate.

        Parameters
        ----------
        rate_hz : float

        Returns
        -------
        RateResult

        Raises
        ------
        KeyError
            When ``rate_hz`` is not a candidate.

        Examples
        --------
        >>> import powderspin as ps
        >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
        ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
        >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
        >>> p.fields[0].rate(5000.0).rate_hz
        5000.0
        """
        for r in self.rates:
            if abs(r.rate_hz - rate_hz) <= 1e-9 * max(1.0, rate_hz):
                return r
        raise KeyError(f"{rate_hz:g} Hz is not a candidate rate at {self.field_tesla:g} T")


@dataclass(frozen=True)
class ParameterInfo:
    """A parameter of the precision analysis.

    Attributes
    ----------
    name : str
        ``"LABEL.key"`` (weights: the site's fraction of the total).
    value : float
    unit : str
    reference : float
        What its standard error is divided by for the relative error.
    at_bound : bool
        On an edge of its allowed range (left out of the ranking).

    Examples
    --------
    >>> ParameterInfo("A.cq_mhz", 3.0, "MHz", 3.0, False).reference
    3.0
    """

    name: str
    value: float
    unit: str
    reference: float
    at_bound: bool


@dataclass(frozen=True)
class Plan:
    """A plan: per field the candidate rates, overlaps, widths, precision and the recommendation.

    Attributes
    ----------
    model : Model
        The model planned for (its first measurement's broadening and
        transitions are used; its field and rate are the planner's to choose).
    source : str
        The model file, when read from one.
    fields : tuple of FieldPlan
        Ascending field.
    rates_hz : tuple of float
        The candidate rates.
    threshold, snr : float
    point_spacing_hz : float
        Point spacing of every planning axis (the SNR is per point of it).
    rotor_table : RotorTable
    parameters : tuple of ParameterInfo
        The parameters of the precision analysis (empty when not computed).
    parameter_source : str
        Which parameters and why.
    best_field_tesla : float
    best_field_reason : str
    ranking : tuple of (float, float, float, str)
        (field T, rate Hz, rotor criterion, worst parameter) of every
        computed candidate, best first.
    pairs : tuple of dict
        The best pairs of candidates for a global fit, best first
        (``fields``, ``rates_hz``, ``criterion``, ``worst_parameter``,
        ``stderr``).
    notes : tuple of str
    cautions : tuple of str
    timings : Mapping of str to float
        Seconds: ``total``; ``lines`` (the planner's own frequency and
        sideband computations), ``render`` (its own renders of widths and
        centrebands) and ``simulate`` (every spectrum through
        :func:`~powderspin.simulator.simulate`: each candidate's and those of
        its Jacobian) are the simulation; the rest is bookkeeping.

    Examples
    --------
    >>> import powderspin as ps
    >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
    ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
    >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
    >>> [f.field_tesla for f in p.fields], p.rates_hz
    ([9.4], (5000.0, 20000.0))
    """

    model: Model
    source: str
    fields: tuple
    rates_hz: tuple
    threshold: float
    snr: float
    point_spacing_hz: float
    rotor_table: RotorTable
    parameters: tuple
    parameter_source: str
    best_field_tesla: float
    best_field_reason: str
    ranking: tuple
    pairs: tuple
    notes: tuple
    cautions: tuple
    timings: Mapping

    __reduce__ = reduce_through_init  # picklable: to and from Dask workers (powderspin.frozen)

    def __post_init__(self):
        object.__setattr__(self, "timings", MappingProxyType(dict(self.timings)))

    def field(self, field_tesla: float) -> FieldPlan:
        """The plan at one field.

        Parameters
        ----------
        field_tesla : float

        Returns
        -------
        FieldPlan

        Examples
        --------
        >>> import powderspin as ps
        >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
        ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
        >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
        >>> p.field(9.4).nu_ref_hz > 0
        True
        """
        for f in self.fields:
            if abs(f.field_tesla - field_tesla) < 1e-9:
                return f
        raise KeyError(f"{field_tesla:g} T is not a field of this plan")

    @property
    def recommends(self) -> bool:
        """Whether any field has a recommended rate (the cautions then apply).

        Returns
        -------
        bool

        Examples
        --------
        >>> import powderspin as ps
        >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
        ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
        >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
        >>> p.recommends
        True
        """
        return any(f.recommended_rate_hz is not None for f in self.fields)

    # ----- JSON ----------------------------------------------------------
    def to_dict(self) -> dict:
        """Every number behind the plan, JSON-ready (infinite and undefined values as null).

        Returns
        -------
        dict
            Keys: ``format``, ``powderspin_version``, ``model``, ``nucleus``,
            ``definitions``, ``settings``, ``rotor_table``, ``parameters``,
            ``fields`` (each with ``recommended_rate_hz``), ``best_field``,
            ``precision_ranking``, ``best_pairs``, ``notes``, ``cautions``,
            ``timings_s``.  The README lists them.

        Examples
        --------
        >>> import powderspin as ps
        >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
        ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
        >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
        >>> d = p.to_dict()
        >>> d["fields"][0]["recommended_rate_hz"], d["cautions"] == list(CAUTIONS)
        (20000.0, True)
        """
        labels = [s.label for s in self.model.sites]
        vol_ref = self.rotor_table.largest_volume_ul()
        out = {
            "format": "powderspin plan 1",
            "powderspin_version": __version__,
            "model": self.source,
            "nucleus": self.model.nucleus.name,
            "sites": labels,
            "definitions": dict(DEFINITIONS),
            "settings": {
                "fields_tesla": [f.field_tesla for f in self.fields],
                "rates_hz": list(self.rates_hz),
                "threshold": self.threshold,
                "snr": self.snr,
                "point_spacing_hz": self.point_spacing_hz,
                "transitions": _transitions_text(self.model.measurement.transitions),
                "rotor_angle_deg": self.model.measurement.rotor_angle_deg,
            },
            "rotor_table": {
                "source": self.rotor_table.source,
                "description": self.rotor_table.description,
                "rotors": [{"name": r.name, "outer_diameter_mm": r.outer_diameter_mm,
                            "max_rate_hz": r.max_rate_hz, "sample_volume_ul": r.sample_volume_ul,
                            "relative_signal": r.sample_volume_ul / vol_ref,
                            "relative_time_for_equal_snr": (vol_ref / r.sample_volume_ul) ** 2}
                           for r in self.rotor_table.rotors],
            },
            "parameter_source": self.parameter_source,
            "parameters": [{"name": p.name, "value": p.value, "unit": p.unit, "reference": p.reference,
                            "at_bound": p.at_bound} for p in self.parameters],
            "fields": [_field_dict(f, labels, self.threshold) for f in self.fields],
            "best_field": {"field_tesla": self.best_field_tesla, "reason": self.best_field_reason},
            "precision_ranking": [{"field_tesla": f, "rate_hz": r, "rotor_criterion": c, "worst_parameter": w,
                                   "meets_threshold": self.field(f).rate(r).passes(self.threshold)}
                                  for f, r, c, w in self.ranking],
            "best_pairs": [dict(p) for p in self.pairs],
            "notes": list(self.notes),
            "cautions": list(self.cautions),
            "timings_s": dict(self.timings),
        }
        return _json_ready(out)

    def json_text(self) -> str:
        """The plan as JSON text (see :meth:`to_dict`).

        Returns
        -------
        str

        Examples
        --------
        >>> import powderspin as ps
        >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
        ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
        >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
        >>> import json
        >>> json.loads(p.json_text())["format"]
        'powderspin plan 1'
        """
        return json.dumps(self.to_dict(), indent=1, allow_nan=False) + "\n"

    # ----- text ----------------------------------------------------------
    def table_text(self) -> str:
        """The plan as a readable table (what ``powderspin plan`` prints).

        Returns
        -------
        str

        Examples
        --------
        >>> import powderspin as ps
        >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
        ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
        >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
        >>> "recommended: 20 kHz" in p.table_text()
        True
        """
        return _table_text(self)


#: plain-language definitions written into the JSON
DEFINITIONS = MappingProxyType({
    "width": "central span holding 99 % of a lineshape's intensity (between its 0.5 % and 99.5 % points), "
             "measured without broadening; static: static pattern of the selected transitions; MAS: centreband "
             "at infinitely fast magic-angle spinning",
    "quadrupolar_induced_shift": "centre of gravity of the static pattern of the selected transitions less "
                                 "the isotropic shift (ppm)",
    "span_hz": "shift-tensor span Omega = d11 - d33 in Hz",
    "sideband_fraction": "share of a site's intensity in sidebands (bands n != 0)",
    "overlap": "overlap[i][j] = sum(min(S_i, C_j)) / sum(C_j): S_i the sidebands (n != 0) of site i, C_j the "
               "centreband (n = 0) of site j, rendered with the model's broadening and weights on the planning "
               "axis; i = j included",
    "resolution": "resolution[i][j] = sum(min(C_i, C_j)) / min(sum(C_i), sum(C_j)) for different sites i, j: "
                  "shared centreband area over the smaller centreband",
    "recommended_rate": "lowest candidate rate at which every overlap is below the threshold",
    "rotors": "rotors whose typical maximum rate reaches the rate, largest sample volume first; sample volume "
              "is the proxy for signal; relative_time_for_equal_snr = (largest volume / volume)^2",
    "best_field": "smallest largest resolution[i][j] at the field's recommended rate (or its fastest candidate "
                  "rate when none is recommended); ties within 0.001 go to a field with a recommendation, then "
                  "to the higher field",
    "snr": "tallest point of the simulated spectrum / standard deviation of white noise per point of the "
           "planning axis (point_spacing_hz)",
    "stderr": "square roots of the diagonal of the inverse Fisher information F = J^T J / sigma^2, J the "
              "Jacobian of the simulated spectrum with respect to the parameters and the intensity scale (solved "
              "linearly, as the fit does), sigma = max(spectrum) / snr; weights as fractions of the total",
    "relative_stderr": "stderr / max(|value|, floor) for parameters with a natural zero, stderr / floor for "
                       "location-like ones (floors: PARAMETER_REFERENCES)",
    "criterion": "largest relative standard error at the given snr (parameters on an edge of their range left "
                 "out)",
    "relative_signal": "sample volume of the largest rotor reaching the rate / largest volume considered",
    "rotor_criterion": "criterion / relative_signal: snr is taken as the SNR with the largest-volume rotor, and a "
                       "smaller rotor gives snr * relative_signal (signal proportional to the sample volume, same "
                       "scans); the ranking uses it; the gain in signal with the field is not included",
    "best_pair": "pair of candidates minimising the criterion of their summed Fisher information, each weighted "
                 "by relative_signal^2 and with its own scale profiled out; chosen among candidates that meet the "
                 "threshold (all computed ones when fewer than two do)",
})


def _transitions_text(t):
    return t if isinstance(t, str) else list(t)


def _json_ready(x):
    if isinstance(x, dict):
        return {str(k): _json_ready(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_json_ready(v) for v in x]
    if isinstance(x, np.ndarray):
        return [_json_ready(v) for v in x.tolist()]
    if isinstance(x, (np.floating, float)):
        v = float(x)
        return v if math.isfinite(v) else None
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, MappingProxyType):
        return _json_ready(dict(x))
    return x


def _field_dict(f: FieldPlan, labels, threshold: float) -> dict:
    rates = []
    for r in f.rates:
        d = {"rate_hz": r.rate_hz, "computed": r.computed, "reason": r.reason or None,
             "passes_threshold": r.passes(threshold), "rotors": list(r.rotors), "rotor_phases": r.rotor_phases}
        if r.computed:
            d.update({
                "max_overlap": r.max_overlap,
                "worst_overlap": {"sidebands_of": labels[r.worst[0]], "centreband_of": labels[r.worst[1]]},
                "overlap": [list(row) for row in r.overlap],
                "sideband_fraction": dict(zip(labels, r.sideband_fraction)),
                "resolution": [list(row) for row in r.resolution],
                "max_resolution_overlap": r.max_resolution_overlap,
                "noise_sigma": r.noise_sigma,
                "stderr": dict(r.stderr),
                "relative_stderr": dict(r.relative),
                "criterion": r.criterion,
                "relative_signal": r.relative_signal,
                "rotor_criterion": r.rotor_criterion,
                "worst_parameter": r.worst_parameter or None,
                "fisher": None if r.fisher is None else r.fisher.tolist(),
                "log_det_covariance": r.log_det,
            })
        rates.append(d)
    return {
        "field_tesla": f.field_tesla,
        "nu_ref_hz": f.nu_ref_hz,
        "axis": {"points": f.axis.points, "center_hz": f.axis.center_hz, "width_hz": f.axis.width_hz,
                 "point_spacing_hz": f.axis.dx_hz},
        "sites": [{"label": s.label, "static_width_hz": s.static_width_hz, "static_width_ppm": s.static_width_ppm,
                   "mas_width_hz": s.mas_width_hz, "mas_width_ppm": s.mas_width_ppm,
                   "quadrupolar_induced_shift_ppm": s.quadrupolar_induced_shift_ppm, "span_hz": s.span_hz,
                   "method": s.method, "orientations": s.orientations} for s in f.sites],
        "rates": rates,
        "recommended_rate_hz": f.recommended_rate_hz,
        "reason": f.reason,
        "recommended_rotors": list(f.recommended_rotors),
        "resolution_rate_hz": f.resolution_rate_hz,
        "max_resolution_overlap": f.max_resolution_overlap,
        "notes": list(f.notes),
    }


def _pct(v: float) -> str:
    if not math.isfinite(v):
        return "-"
    return f"{100 * v:.2g} %" if v < 0.1 else f"{100 * v:.0f} %"


def _pct_number(v: float) -> str:
    """A fraction as a number of percent, without the sign (the column heading says %)."""
    if not math.isfinite(v):
        return "-"
    return f"{100 * v:.2g}" if v < 0.1 else f"{100 * v:.0f}"


def _num(v: float, digits: int = 3) -> str:
    return "-" if v is None or not math.isfinite(v) else f"{v:.{digits}g}"


#: the error columns of the plan table: (heading, unit, keys, relative?); each column is one kind of number
_ERROR_COLUMNS = (
    ("rel err", "%", None, True),                                # stderr / |value| of parameters with a natural zero
    ("shift err", "ppm", ("shift_ppm", "shift_offset_ppm"), False),
    ("skew err", "", ("skew",), False),
    ("angle err", "deg", ("euler_deg",), False),
)


def _key_of(name: str) -> str:
    key = name.rpartition(".")[2]
    return key.partition("[")[0]


def _error_columns(p: Plan) -> list:
    """The error columns the plan's parameters need, with the parameters of each."""
    cols = []
    usable = [q for q in p.parameters if not q.at_bound]
    for head, unit, keys, relative in _ERROR_COLUMNS:
        if relative:
            members = [q for q in usable if reference_floor(_key_of(q.name))[0] == "scale"]
        else:
            members = [q for q in usable if _key_of(q.name) in keys]
        if members:
            cols.append((head, unit, members, relative))
    return cols


def _column_value(r: RateResult, members, relative: bool) -> float:
    """Largest error of a column's parameters at the SNR of the largest rotor reaching the rate."""
    scale = 1.0 / r.relative_signal if r.relative_signal > 0 else math.inf
    worst = -math.inf
    for q in members:
        e = r.stderr.get(q.name, math.nan)
        if not math.isfinite(e):
            if e == math.inf:
                return math.inf
            continue
        v = 100.0 * e / q.reference if relative else e
        worst = max(worst, v * scale)
    return worst if worst > -math.inf else math.nan


def _table_text(p: Plan) -> str:
    labels = [s.label for s in p.model.sites]
    lw = max(8, max(len(x) for x in labels))
    out = []
    src = f" (model {p.source})" if p.source else ""
    largest = max(p.rotor_table.rotors, key=lambda r: r.sample_volume_ul)
    out.append(f"plan for {p.model.nucleus.name}, {len(labels)} site(s){src}")
    out.append(f"threshold: every sideband-on-centreband overlap below {_pct(p.threshold)}")
    out.append(f"SNR {p.snr:g} is the signal-to-noise ratio (tallest point / noise per {p.point_spacing_hz:.3g} Hz "
               f"point) with the {largest.name} rotor ({largest.sample_volume_ul:g} uL, the largest considered); "
               "a smaller rotor gives less, in proportion to its sample volume")
    out.append("widths: central 99 % of the intensity, without broadening; QIS: quadrupolar-induced shift")
    prec = bool(p.ranking)
    cols = _error_columns(p) if prec else []
    for f in p.fields:
        out.append("")
        out.append(f"{f.field_tesla:g} T ({p.model.nucleus.name} at {f.nu_ref_hz / 1e6:.6g} MHz)")
        out.append(f"  {'site':<{lw}}  {'static width':>16}  {'MAS width':>16}  {'QIS':>8}  {'span':>8}")
        out.append(f"  {'':<{lw}}  {'kHz':>7} {'ppm':>8}  {'kHz':>7} {'ppm':>8}  {'ppm':>8}  {'kHz':>8}")
        for s in f.sites:
            out.append(f"  {s.label:<{lw}}  {s.static_width_hz / 1e3:>7.3g} {s.static_width_ppm:>8.4g}  "
                       f"{s.mas_width_hz / 1e3:>7.3g} {s.mas_width_ppm:>8.4g}  "
                       f"{s.quadrupolar_induced_shift_ppm + 0.0:>8.2f}  {s.span_hz / 1e3:>8.3g}")
        pw = max(2 * lw + 4, 29)
        head = f"  {'rate':>8}  {'overlap':>8}  {'sidebands of -> centreband of':<{pw}}  {'in sb':>7}  "
        units = f"  {'kHz':>8}  {'%':>8}  {'':<{pw}}  {'%':>7}  "
        head += f"{'largest rotor':<14}"
        units += f"{'reaching it':<14}"
        if cols:
            head += f"  {'SNR':>6}"
            units += f"  {'(rotor)':>6}"
            for h, u, _, _ in cols:
                head += f"  {h:>9}"
                units += f"  {u:>9}"
        out.append(head.rstrip())
        out.append(units.rstrip())
        for r in f.rates:
            mark = "*" if f.recommended_rate_hz is not None and r.rate_hz == f.recommended_rate_hz else " "
            if not r.computed:
                out.append(f" {mark}{r.rate_hz / 1e3:>8.4g}  not computed: {r.reason[:80]}")
                continue
            pair = f"{labels[r.worst[0]]} -> {labels[r.worst[1]]}"
            rot = r.rotors[0] if r.rotors else "none"
            if len(r.rotors) > 1:
                rot += f" (+{len(r.rotors) - 1})"
            line = (f" {mark}{r.rate_hz / 1e3:>8.4g}  {_pct_number(r.max_overlap):>8}  {pair:<{pw}}  "
                    f"{_pct_number(max(r.sideband_fraction)):>7}  {rot:<14}")
            if cols:
                line += f"  {_num(p.snr * r.relative_signal):>6}"
                for _, _, members, relative in cols:
                    line += f"  {_num(_column_value(r, members, relative)):>9}"
            out.append(line.rstrip())
        if f.recommended_rate_hz is not None:
            vol = {r.name: r for r in p.rotor_table.rotors}
            rots = ", ".join(f"{n} ({vol[n].sample_volume_ul:g} uL)" for n in f.recommended_rotors) or \
                "none in the table"
            out.append(f"  recommended: {f.recommended_rate_hz / 1e3:g} kHz (*); rotors reaching it (typical "
                       f"maxima), largest first: {rots}")
        else:
            out.append("  recommended: none")
        out.append(f"  why: {f.reason}")
        for n in f.notes:
            out.append(f"  note: {n}")
    out.append("")
    out.append("overlap: largest share of a centreband under sidebands (%); in sb: largest share of a site in "
               "sidebands (%)")
    if cols:
        out.append("errors: standard errors a fit would give at the SNR of the largest rotor reaching the rate (the "
                   "SNR column), the largest of each kind: rel err, the error over the value (%) of C_Q, eta, "
                   "span, widths and fractions; shift err in ppm; skew err in skew units; angle err in degrees")
    if prec:
        out.append(f"precision: {p.parameter_source}")
    out.append(f"best field by centreband resolution: {p.best_field_tesla:g} T ({p.best_field_reason})")
    if prec:
        clean = [t for t in p.ranking if p.field(t[0]).rate(t[1]).passes(p.threshold)]
        out.append("best single experiments meeting the threshold, by score at the rotor's SNR (lower is better; "
                   "the score is the largest error over its reference: the value for relative errors, 1 ppm for "
                   "shifts, 0.1 for skew, 10 degrees for angles):" + ("" if clean else " none"))
        for k, (ft, rt, c, w) in enumerate(clean[:5]):
            out.append(f"  {k + 1}. {ft:g} T at {rt / 1e3:g} kHz: {_num(c)} ({w})")
        if p.ranking and (not clean or p.ranking[0] != clean[0]):
            ft, rt, c, w = p.ranking[0]
            out.append(f"  best of all, with overlapping sidebands: {ft:g} T at {rt / 1e3:g} kHz: {_num(c)} ({w})")
        if p.pairs:
            b = p.pairs[0]
            out.append(f"best pair for a global fit: {b['fields_tesla'][0]:g} T at {b['rates_hz'][0] / 1e3:g} kHz + "
                       f"{b['fields_tesla'][1]:g} T at {b['rates_hz'][1] / 1e3:g} kHz: {_num(b['criterion'])} "
                       f"({b['worst_parameter']})")
    else:
        out.append("precision: not computed")
    for n in p.notes:
        out.append(f"note: {n}")
    if p.cautions:
        out.append("")
        out.append("CAUTION")
        for c in p.cautions:
            out.append(f"  - {c}")
    return "\n".join(out) + "\n"
