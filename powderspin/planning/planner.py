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

import json
import math
import time
import tomllib
from dataclasses import dataclass, field, replace
from importlib import resources
from pathlib import Path
from types import MappingProxyType
from typing import Any, Mapping

import numpy as np

from ..engine.lineshape import Axis
from ..model.schema import (
    PLAN_DEFAULT_MIN_RATE_HZ,
    PLAN_DEFAULT_RATE_COUNT,
    PLAN_DEFAULT_SNR,
    PLAN_DEFAULT_THRESHOLD,
    key_spec,
)
from ..model.values import Measurement, Model, ModelError, ParameterAddress, check_number

__all__ = [
    "PlanError",
    "Rotor",
    "RotorTable",
    "SiteSummary",
    "RateResult",
    "FieldPlan",
    "Plan",
    "plan",
    "default_rotor_table",
    "load_rotor_table",
    "candidate_rates",
    "overlap_fraction",
    "central_width_hz",
    "plot_plan",
    "CAUTIONS",
    "DEFAULT_FIELDS_T",
    "DEFAULT_THRESHOLD",
    "DEFAULT_SNR",
    "DEFAULT_RATE_COUNT",
    "DEFAULT_MIN_RATE_HZ",
    "DEFAULT_LINEWIDTH_HZ",
    "PARAMETER_REFERENCES",
    "WIDTH_FRACTION",
]

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
#: share of a lineshape's intensity its width holds (the central 99 %)
WIDTH_FRACTION = 0.99
#: relative forward-difference step of the Jacobian (of max(|value|, floor))
DIFF_STEP = 1e-5
#: most points of a planning axis
MAX_AXIS_POINTS = 1 << 16
#: narrowest line (FWHM) spans at least this many points of the planning axis
POINTS_PER_LINEWIDTH = 4.0
#: two fields' resolutions closer than this are ranked by the other keys
RESOLUTION_TIE = 1e-3

#: For each key: (kind, floor).  Relative standard error = stderr / max(|value|, floor) for
#: kind "scale" (a natural zero), stderr / floor for kind "location".  The floors are the
#: precision to which such values are usually quoted (common practice).
PARAMETER_REFERENCES: Mapping[str, tuple[str, float]] = MappingProxyType({
    "weight": ("scale", 0.01),
    "cq_mhz": ("scale", 0.1),
    "eta_q": ("scale", 0.1),
    "span_ppm": ("scale", 10.0),
    "aniso_ppm": ("scale", 10.0),
    "eta_cs": ("scale", 0.1),
    "lorentz_hz": ("scale", 10.0),
    "gauss_hz": ("scale", 10.0),
    "shift_ppm": ("location", 1.0),
    "shift_offset_ppm": ("location", 1.0),
    "skew": ("location", 0.1),
    "euler_deg": ("location", 10.0),
})

#: The cautions printed with every plan and recorded in its JSON (rotors and rates are named there).
CAUTIONS = (
    "Never exceed the rated spinning rate of the actual rotor, cap and probe you use: a rotor that fails "
    "at speed can injure.",
    "The rotor rates and volumes in this plan are typical values of the trade, not ratings; the "
    "manufacturer's ratings and your laboratory's rules decide.",
    "Keep ferromagnetic objects, and people with pacemakers or other implanted devices, away from the magnet.",
    "Handle cryogens (liquid nitrogen and helium) only with training.",
)


class PlanError(ValueError):
    """A plan cannot be made with the given model, fields, rates, rotors or settings.

    A ``ValueError`` subclass whose one-line message names the option or file,
    the value and what is allowed.

    Parameters
    ----------
    message : str

    Examples
    --------
    >>> str(PlanError("fields: give at least one field"))
    'fields: give at least one field'
    """


# ---------------------------------------------------------------------------
# rotors


@dataclass(frozen=True)
class Rotor:
    """A magic-angle-spinning rotor: name, typical top rate and sample volume.

    Attributes
    ----------
    name : str
        Name used on the command line, e.g. ``"3.2 mm"``.
    outer_diameter_mm : float or None
        Outer diameter (mm).
    max_rate_hz : float
        Typical highest spinning rate (Hz).  Not a rating: the manufacturer's
        rating for the actual rotor, cap and probe decides.
    sample_volume_ul : float
        Typical sample volume (microlitres), the planner's proxy for signal.

    Examples
    --------
    >>> r = default_rotor_table().find("3.2")
    >>> r.name, r.max_rate_hz
    ('3.2 mm', 24000.0)
    """

    name: str
    outer_diameter_mm: float | None
    max_rate_hz: float
    sample_volume_ul: float


@dataclass(frozen=True)
class RotorTable:
    """The rotors a plan may recommend.

    Attributes
    ----------
    rotors : tuple of Rotor
    source : str
        ``"built-in"`` or the file read.
    description : str
        What the figures are (the built-in table: typical values of the
        trade, from memory, not ratings).

    Examples
    --------
    >>> t = default_rotor_table()
    >>> [r.name for r in t.reaching(60000.0)]
    ['1.3 mm', '0.7 mm']
    """

    rotors: tuple
    source: str
    description: str

    def find(self, name) -> Rotor:
        """The rotor called ``name`` (``"3.2 mm"``, ``"3.2mm"`` or ``"3.2"``).

        Parameters
        ----------
        name : str or float

        Returns
        -------
        Rotor

        Raises
        ------
        PlanError
            For a name the table does not have (the message lists them).

        Examples
        --------
        >>> default_rotor_table().find("0.7mm").sample_volume_ul
        0.6
        """
        key = _rotor_key(name)
        for r in self.rotors:
            if _rotor_key(r.name) == key:
                return r
        raise PlanError(f"rotors: unknown rotor {str(name)!r}; the rotor table ({self.source}) has "
                        + ", ".join(repr(r.name) for r in self.rotors))

    def reaching(self, rate_hz: float) -> tuple:
        """The rotors whose typical maximum rate is at least ``rate_hz``, largest sample volume first.

        Parameters
        ----------
        rate_hz : float

        Returns
        -------
        tuple of Rotor

        Examples
        --------
        >>> [r.name for r in default_rotor_table().reaching(30000.0)][:2]
        ['2.5 mm', '1.9 mm']
        """
        ok = [r for r in self.rotors if r.max_rate_hz >= rate_hz]
        return tuple(sorted(ok, key=lambda r: (-r.sample_volume_ul, r.max_rate_hz, r.name)))

    def largest_volume_ul(self) -> float:
        """The largest sample volume in the table (microlitres): the reference for relative signal.

        Returns
        -------
        float

        Examples
        --------
        >>> default_rotor_table().largest_volume_ul()
        300.0
        """
        return max(r.sample_volume_ul for r in self.rotors)


def _rotor_key(name) -> str:
    s = str(name).strip().lower().replace(" ", "")
    if s.endswith("mm"):
        s = s[:-2]
    try:
        return repr(float(s))
    except ValueError:
        return s


_ROTOR_KEYS = {"name", "outer_diameter_mm", "max_rate_hz", "sample_volume_ul"}
_ROTOR_LIMITS = {
    "outer_diameter_mm": (0.0, 50.0, "mm", "magic-angle-spinning rotors are a fraction of a millimetre to some "
                          "centimetres across"),
    "max_rate_hz": (0.0, 2.0e5, "Hz", "the fastest magic-angle-spinning rotors reach about 150 kHz (common practice)"),
    "sample_volume_ul": (0.0, 1.0e5, "microlitres", "a rotor holds at most some millilitres"),
}


def _rotor_table_from(data: Any, source: str) -> RotorTable:
    where = f"rotor table {source}"
    if not isinstance(data, dict):
        raise PlanError(f"{where} must be a TOML table with [[rotor]] entries")
    extra = sorted(set(data) - {"description", "rotor"})
    if extra:
        raise PlanError(f"{where}: unknown key {extra[0]!r}; allowed are 'description' and [[rotor]] tables")
    items = data.get("rotor")
    if not isinstance(items, list) or not items:
        raise PlanError(f"{where} has no [[rotor]] entries; give at least one with name, max_rate_hz and "
                        "sample_volume_ul")
    desc = data.get("description", "")
    if not isinstance(desc, str):
        raise PlanError(f"{where}: description must be text")
    rotors = []
    seen = {}
    for i, t in enumerate(items):
        w = f"{where}: rotor {i + 1}"
        if not isinstance(t, dict):
            raise PlanError(f"{w} must be a table of rotor keys")
        bad = sorted(set(t) - _ROTOR_KEYS)
        if bad:
            raise PlanError(f"{w}: unknown key {bad[0]!r}; allowed keys are {', '.join(sorted(_ROTOR_KEYS))}")
        name = t.get("name")
        if not isinstance(name, str) or not name.strip():
            raise PlanError(f"{w}: name must be a non-empty text, e.g. name = \"3.2 mm\"")
        w = f"{where}: rotor {name!r}"
        vals = {}
        for key, (lo, hi, unit, why) in _ROTOR_LIMITS.items():
            if key not in t:
                if key == "outer_diameter_mm":
                    vals[key] = None
                    continue
                raise PlanError(f"{w}: {key} is missing ({unit}); every rotor needs max_rate_hz and sample_volume_ul")
            v = t[key]
            if isinstance(v, bool) or not isinstance(v, (int, float)):
                raise PlanError(f"{w}: {key} must be a number ({unit}), got {v!r}")
            if not (math.isfinite(v) and lo < v <= hi):
                raise PlanError(f"{w}: {key} = {v!r} is outside the allowed range ({lo:g}, {hi:g}] {unit} ({why})")
            vals[key] = float(v)
        k = _rotor_key(name)
        if k in seen:
            raise PlanError(f"{where}: the name {name!r} is given twice (rotors {seen[k]} and {i + 1})")
        seen[k] = i + 1
        rotors.append(Rotor(name.strip(), vals["outer_diameter_mm"], vals["max_rate_hz"], vals["sample_volume_ul"]))
    return RotorTable(tuple(rotors), source, desc)


def default_rotor_table() -> RotorTable:
    """The built-in rotor table: typical values of the trade (from memory), not ratings.

    Read from the package data file ``powderspin/data/rotors.toml``.

    Returns
    -------
    RotorTable

    See Also
    --------
    load_rotor_table : a laboratory's own table.

    Examples
    --------
    >>> [r.name for r in default_rotor_table().rotors][:3]
    ['7 mm', '4 mm', '3.2 mm']
    """
    text = resources.files("powderspin").joinpath("data", "rotors.toml").read_text(encoding="utf-8")
    return _rotor_table_from(tomllib.loads(text), "built-in")


def load_rotor_table(path) -> RotorTable:
    """Read a rotor table from a TOML file (it replaces the built-in one).

    The file holds an optional ``description`` and ``[[rotor]]`` tables with
    ``name`` (text, unique), ``max_rate_hz`` (Hz, in (0, 200000]),
    ``sample_volume_ul`` (microlitres, > 0) and optionally
    ``outer_diameter_mm``.

    Parameters
    ----------
    path : str or pathlib.Path

    Returns
    -------
    RotorTable

    Raises
    ------
    PlanError
        A missing or unreadable file, invalid TOML, an unknown or missing key,
        a value outside its range or a name given twice; the message names
        the file, the rotor and the key.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = pathlib.Path(d) / "lab.toml"
    ...     _ = p.write_text('[[rotor]]\\nname = "4 mm"\\nmax_rate_hz = 14000\\nsample_volume_ul = 50\\n')
    ...     [r.max_rate_hz for r in load_rotor_table(p).rotors]
    [14000.0]
    """
    p = Path(path)
    if not p.exists():
        raise PlanError(f"rotor table {str(p)!r} does not exist")
    if not p.is_file():
        raise PlanError(f"rotor table {str(p)!r} is not a regular file")
    try:
        raw = p.read_bytes()
        if len(raw) > 1 << 20:
            raise PlanError(f"rotor table {str(p)!r} is larger than 1 MB; a rotor table is a few lines of TOML")
        data = tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError:
        raise PlanError(f"rotor table {str(p)!r} is not UTF-8 text") from None
    except tomllib.TOMLDecodeError as e:
        raise PlanError(f"rotor table {str(p)!r} is not valid TOML: {e}") from None
    except OSError as e:
        raise PlanError(f"rotor table {str(p)!r} cannot be read: {e.strerror or e}") from None
    return _rotor_table_from(data, repr(str(p)))


# ---------------------------------------------------------------------------
# small measures


def overlap_fraction(covering, covered) -> float:
    """Share of ``covered``'s area that lies under ``covering``: ``sum(min(a, b)) / sum(b)``.

    Both are non-negative lineshapes on one axis (negative values, from
    rounding, count as zero).

    Parameters
    ----------
    covering : array_like
        E.g. a site's sideband manifold.
    covered : array_like
        E.g. a site's centreband.

    Returns
    -------
    float
        In [0, 1]; 0 when ``covered`` has no area.

    Examples
    --------
    >>> overlap_fraction([0.0, 1.0, 1.0], [1.0, 1.0, 0.0])
    0.5
    """
    a = np.clip(np.asarray(covering, dtype=float), 0.0, None)
    b = np.clip(np.asarray(covered, dtype=float), 0.0, None)
    total = float(b.sum())
    if total <= 0.0:
        return 0.0
    return float(np.minimum(a, b).sum() / total)


def central_width_hz(y, axis: Axis, fraction: float = WIDTH_FRACTION) -> float:
    """Width (Hz) of the central span holding ``fraction`` of a lineshape's intensity.

    Each point's intensity is spread evenly over its bin; the positions
    below which ``(1 - fraction)/2`` and ``(1 + fraction)/2`` of the
    intensity lie are interpolated linearly.

    Parameters
    ----------
    y : array_like
        Lineshape on ``axis`` (negative values count as zero).
    axis : Axis
    fraction : float, optional
        In (0, 1); default 0.99.

    Returns
    -------
    float
        NaN for a lineshape without intensity.

    Examples
    --------
    >>> ax = Axis(center_hz=0.0, width_hz=1000.0, points=10, nu_ref_hz=100e6)
    >>> round(central_width_hz([0, 0, 1, 1, 1, 1, 1, 1, 0, 0], ax, 1.0), 6)
    600.0
    """
    y = np.clip(np.asarray(y, dtype=float), 0.0, None)
    c = np.concatenate([[0.0], np.cumsum(y)])
    total = c[-1]
    if not total > 0:
        return math.nan
    edges = axis.hz[0] - 0.5 * axis.dx_hz + axis.dx_hz * np.arange(y.size + 1)
    lo_q, hi_q = 0.5 * (1 - fraction) * total, 0.5 * (1 + fraction) * total
    # first and last edges where the cumulative intensity passes each level (plateaus skipped)
    lo = _cross(c, edges, lo_q, first=True)
    hi = _cross(c, edges, hi_q, first=False)
    return float(max(0.0, hi - lo))


def _cross(c, edges, level, first: bool) -> float:
    if first:
        k = int(np.searchsorted(c, level, side="right"))
        k = min(max(k, 1), c.size - 1)
    else:
        k = int(np.searchsorted(c, level, side="left"))
        k = min(max(k, 1), c.size - 1)
    c0, c1 = c[k - 1], c[k]
    t = 0.0 if c1 == c0 else (level - c0) / (c1 - c0)
    return float(edges[k - 1] + t * (edges[k] - edges[k - 1]))


def _voigt_fwhm(lorentz_hz: float, gauss_hz: float) -> float:
    """FWHM of a Voigt profile (J. J. Olivero, R. L. Longbothum, JQSRT 17 (1977) 233)."""
    return 0.5346 * lorentz_hz + math.sqrt(0.2166 * lorentz_hz ** 2 + gauss_hz ** 2)


def candidate_rates(top_hz: float, count: int = DEFAULT_RATE_COUNT, low_hz: float = DEFAULT_MIN_RATE_HZ) -> tuple:
    """A grid of spinning rates: ``count`` values spaced evenly in log(rate) from ``low_hz`` to ``top_hz``.

    Values below ``top_hz`` are rounded as a spectroscopist sets rates: to
    100 Hz below 10 kHz, 500 Hz below 50 kHz and 1 kHz above; the top is
    kept exactly.

    Parameters
    ----------
    top_hz : float
        Fastest rate (Hz).
    count : int, optional
        Number of rates (at least 2).
    low_hz : float, optional
        Slowest rate (Hz).

    Returns
    -------
    tuple of float
        Ascending, without repeats (so possibly fewer than ``count``).

    Examples
    --------
    >>> candidate_rates(24000.0, 6)
    (2000.0, 3300.0, 5400.0, 8900.0, 14500.0, 24000.0)
    """
    if not (top_hz > low_hz > 0):
        raise PlanError(f"rates: the fastest candidate rate {top_hz:g} Hz must exceed the slowest {low_hz:g} Hz")
    count = int(count)
    if count < 2:
        raise PlanError(f"rate count {count} must be at least 2")
    raw = np.geomspace(low_hz, top_hz, count)
    out = []
    for k, r in enumerate(raw):
        if k == count - 1:
            v = float(top_hz)
        else:
            d = 100.0 if r < 1e4 else (500.0 if r < 5e4 else 1000.0)
            v = float(max(d, round(r / d) * d))
        if not out or v > out[-1]:
            out.append(v)
    return tuple(out)


# ---------------------------------------------------------------------------
# results


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
        from ..simulator import package_version

        labels = [s.label for s in self.model.sites]
        vol_ref = self.rotor_table.largest_volume_ul()
        out = {
            "format": "powderspin plan 1",
            "powderspin_version": package_version(),
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

    def write_json(self, path, *, force: bool = False, protect=()) -> Path | None:
        """Write the JSON atomically (``"-"``: standard output); never overwrites without ``force``.

        Parameters
        ----------
        path : str or pathlib.Path
        force : bool, optional
        protect : iterable of path, optional
            Input files never to overwrite.

        Returns
        -------
        pathlib.Path or None

        Examples
        --------
        >>> import powderspin as ps
        >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
        ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
        >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
        >>> import tempfile, pathlib, json
        >>> with tempfile.TemporaryDirectory() as d:
        ...     out = p.write_json(pathlib.Path(d) / "plan.json")
        ...     json.loads(out.read_text())["fields"][0]["recommended_rate_hz"]
        20000.0
        """
        from ..files import write_text_atomic

        return write_text_atomic(path, self.json_text(), force=force, protect=protect, role="JSON output")

    def save_plot(self, path, *, force: bool = False, protect=()) -> Path:
        """Write the figure (:func:`plot_plan`) as PNG, PDF or SVG, atomically.

        Parameters
        ----------
        path : str or pathlib.Path
        force : bool, optional
        protect : iterable of path, optional

        Returns
        -------
        pathlib.Path

        Examples
        --------
        >>> import powderspin as ps
        >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
        ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
        >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
        >>> import tempfile, pathlib
        >>> with tempfile.TemporaryDirectory() as d:
        ...     p.save_plot(pathlib.Path(d) / "plan.png").stat().st_size > 0
        True
        """
        from ..files import check_outputs, write_via
        from ..plotting.spectrum import PLOT_SUFFIXES

        p = Path(path)
        check_outputs([(p, "plot", PLOT_SUFFIXES)], force=force, protect=protect)
        import matplotlib

        matplotlib.use("Agg", force=False)
        import matplotlib.pyplot as plt

        fig = plot_plan(self)
        try:
            return write_via(p, lambda tmp: fig.savefig(tmp, dpi=110, format=p.suffix[1:].lower()), force=force,
                             protect=protect, role="plot")
        finally:
            plt.close(fig)

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


# ---------------------------------------------------------------------------
# the plan


def _as_model(model) -> Model:
    if isinstance(model, Model):
        return model
    if isinstance(model, (str, Path)):
        from ..model.modelfile import load_model

        return load_model(model)
    raise PlanError(f"plan: expected a Model or the path of a model file, got {type(model).__name__}")


def _check_fields(fields, model: Model) -> tuple:
    if fields is None:
        fields = sorted(set(DEFAULT_FIELDS_T) | {model.measurement.field_tesla})
    if isinstance(fields, (int, float)):
        fields = [fields]
    fields = list(fields)
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
    if isinstance(value, bool):
        raise PlanError(f"{name} must be a number, got {value!r}")
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise PlanError(f"{name} must be a number, got {value!r}") from None
    hi_ok = v < high if open_high else v <= high
    if not (math.isfinite(v) and v > low and hi_ok):
        rb = ")" if open_high else "]"
        raise PlanError(f"{name} = {value!r} is outside the allowed range ({low:g}, {high:g}{rb}{unit}")
    return v


def _select_rotors(table: RotorTable, rotors) -> RotorTable:
    if rotors is None:
        return table
    if isinstance(rotors, (str, int, float)):
        rotors = [rotors]
    rotors = list(rotors)
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
        for r in (rates_hz if not isinstance(rates_hz, (int, float)) else [rates_hz]):
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
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or not (2 <= int(n) <= 200):
        raise PlanError(f"rate count {n!r} must be an integer in [2, 200]")
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
    from ..engine.site_lines import estimate_span_hz

    orig = model.measurement
    nuc = model.nucleus
    nu_ref = nuc.larmor_hz(orig.field_tesla)
    if orig.width_ppm is not None:
        dx = orig.width_ppm * nu_ref * 1e-6 / orig.points
    else:
        lo = hi = None
        static = replace(meas, field_tesla=orig.field_tesla, spinning_hz=0.0)
        widest = max(_voigt_fwhm(*_site_broadening(s, meas)) for s in model.sites)
        for s in model.sites:
            a, b = estimate_span_hz(s, static, nuc)
            lo = a if lo is None else min(lo, a)
            hi = b if hi is None else max(hi, b)
        span = (hi - lo) + 8 * widest
        dx = 1.2 * span / orig.points
    narrowest = min(_voigt_fwhm(*_site_broadening(s, meas)) for s in model.sites)
    return float(min(dx, narrowest / POINTS_PER_LINEWIDTH))


def _field_axis(model: Model, meas: Measurement, field_t: float, dx: float, slowest_rate: float, notes: list):
    from ..engine.site_lines import estimate_span_hz

    nuc = model.nucleus
    nu_ref = nuc.larmor_hz(field_t)
    static = replace(meas, field_tesla=field_t, spinning_hz=0.0)
    offset = meas.shift_offset_ppm * nu_ref * 1e-6
    lo = hi = None
    for s in model.sites:
        a, b = estimate_span_hz(s, static, nuc)
        w = _voigt_fwhm(*_site_broadening(s, meas))
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


def _render_part(lines, axis: Axis, shift_hz: float, weight: float, lorentz: float, gauss: float, binning: str,
                 part: str) -> np.ndarray:
    """Render the centreband (band 0), the sidebands (bands != 0) or everything of one site."""
    from ..engine.site_lines import render_lines

    if lines.intensity is None:
        raise PlanError("a site's sideband array exceeds the memory budget; choose a smaller orientation set "
                        "(orientations) or faster candidate rates")
    amp = lines.intensity
    if part == "all" or (lines.phases == 1 and part == "centre"):
        sub = lines
    elif lines.phases == 1:
        return np.zeros(axis.points)
    else:
        masked = np.zeros_like(amp) if part == "centre" else amp.copy()
        if part == "centre":
            masked[..., 0] = amp[..., 0]
        else:
            masked[..., 0] = 0.0
        sub = replace(lines, intensity=masked)
    return render_lines(sub, axis, shift_hz=shift_hz, weight=weight, lorentz_hz=lorentz, gauss_hz=gauss,
                        binning=binning).intensity


class _Clock:
    def __init__(self):
        self.t = {"lines": 0.0, "render": 0.0, "simulate": 0.0}

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


def _setup_field(model: Model, meas: Measurement, field_t: float, dx: float, slowest: float, orientations,
                 clock: _Clock) -> _FieldSetup:
    from ..engine.site_lines import (
        STRONG_COUPLING_LIMIT_RATIO,
        check_high_field,
        choose_method,
        choose_orientations,
        compute_lines,
        quadrupole_to_zeeman_ratio,
        site_job,
    )

    nuc = model.nucleus
    notes: list = []
    for s in model.sites:
        ratio = quadrupole_to_zeeman_ratio(s, nuc, field_t)
        if ratio > STRONG_COUPLING_LIMIT_RATIO:
            raise PlanError(
                f"fields: at {field_t:g} T site '{s.label}' has nu_Q/nu0 = {ratio:.2g} (C_Q = {s.cq_mhz:g} MHz), "
                f"beyond {STRONG_COUPLING_LIMIT_RATIO:g}, where a high-field NMR spectrum no longer describes it; "
                f"leave {field_t:g} T out or check cq_mhz")
    high = check_high_field(model.sites, nuc, field_t)
    notes.extend(f"{field_t:g} T: {t}" for t in high)
    axis = _field_axis(model, meas, field_t, dx, slowest, notes)
    nu_ref = axis.nu_ref_hz
    static = replace(meas, field_tesla=field_t, spinning_hz=0.0)
    inf = replace(meas, field_tesla=field_t, spinning_hz=math.inf)
    offset = meas.shift_offset_ppm * nu_ref * 1e-6
    if orientations is not None:
        static = replace(static, orientations=orientations)
        inf = replace(inf, orientations=orientations)
    methods, sets, summaries = [], [], []
    for s in model.sites:
        m_static, _ = choose_method(s, static, nuc, 0.5 * axis.dx_hz)
        m_mas, note = choose_method(s, inf, nuc, 0.5 * axis.dx_hz)
        if note:
            notes.append(f"{field_t:g} T: {note}")
        shift_hz = s.shift.iso_ppm * nu_ref * 1e-6 + offset
        t0 = time.perf_counter()
        if static.orientations == "auto":
            set_static, _ = choose_orientations(s, static, nuc, m_static, axis, shift_hz=shift_hz)
            set_mas, _ = choose_orientations(s, inf, nuc, m_mas, axis, shift_hz=shift_hz)
        else:
            set_static = set_mas = None
        job_s = site_job(s, static, nuc, m_static, set_static)
        job_i = site_job(s, inf, nuc, m_mas, set_mas)
        if set_mas is None:
            from ..physics.orientations import orientation_set_by_name

            set_mas = orientation_set_by_name(job_i.orientations)
        ls = compute_lines(job_s, orientations=set_static if set_static is not None and
                           set_static.name == job_s.orientations else None)
        li = compute_lines(job_i, orientations=set_mas)
        clock.add("lines", t0)
        t0 = time.perf_counter()
        sh_s = (s.shift.iso_ppm - job_s.iso_ppm) * nu_ref * 1e-6 + offset
        sh_i = (s.shift.iso_ppm - job_i.iso_ppm) * nu_ref * 1e-6 + offset
        ys = _render_part(ls, axis, sh_s, 1.0, 0.0, 0.0, meas.binning, "all")
        yi = _render_part(li, axis, sh_i, 1.0, 0.0, 0.0, meas.binning, "all")
        clock.add("render", t0)
        w_static = central_width_hz(ys, axis)
        w_mas = central_width_hz(yi, axis)
        tot = float(ls.band_intensity.sum())
        cog = float(ls.band_position_hz.sum() / tot) if tot > 0 else math.nan
        qis_hz = cog - job_s.iso_ppm * nu_ref * 1e-6
        summaries.append(SiteSummary(
            label=s.label, static_width_hz=w_static, static_width_ppm=w_static / nu_ref * 1e6,
            mas_width_hz=w_mas, mas_width_ppm=w_mas / nu_ref * 1e6,
            quadrupolar_induced_shift_ppm=qis_hz / nu_ref * 1e6,
            span_hz=s.shift.span_ppm * nu_ref * 1e-6, method=m_mas, orientations=set_mas.name))
        methods.append(m_mas)
        sets.append(set_mas)
    return _FieldSetup(field_t, nu_ref, axis, static, methods, sets, summaries, notes)


# ----- parameters of the precision analysis


@dataclass(frozen=True)
class _Param:
    address: ParameterAddress
    name: str
    value: float
    lo: float
    hi: float
    unit: str


def _precision_parameters(model: Model) -> tuple[list, str]:
    if model.free:
        free = list(model.free)
        other = [q.name for q in free if q.address.table == "measurement" and q.address.index != 0]
        free = [q for q in free if not (q.address.table == "measurement" and q.address.index != 0)]
        weights = [p for p in free if p.address.table == "site" and p.address.key == "weight"]
        tied_w = {t.address.index for t in model.tied if t.address.table == "site" and t.address.key == "weight"}
        fixed = [i for i in range(len(model.sites))
                 if not any(p.address.index == i for p in weights) and i not in tied_w]
        text = "the model's free parameters"
        if other:
            text += " (" + ", ".join(other) + " left out: they belong to other measurements than the one planned)"
        if not free:
            return [], text + "; none is left"
        if weights and not fixed:
            free.remove(weights[0])
            text += (f" ({weights[0].name} held at its value: weights are relative and the scale absorbs their "
                     "sum)")
        out = [_Param(p.address, p.name, float(model.parameter_value(p.address)), p.min, p.max,
                      key_spec(p.address.table, p.address.key).unit) for p in free]
        return out, text
    out = []
    nuc = model.nucleus
    for i, s in enumerate(model.sites):
        keys = []
        if s.shift_form != "principal":
            keys.append("shift_ppm")
        if nuc.spin > 0.5 and s.cq_mhz != 0.0:
            keys += ["cq_mhz", "eta_q"]
        if not s.shift.is_isotropic:
            if s.shift_form == "span_skew":
                keys += ["span_ppm", "skew"]
            elif s.shift_form == "haeberlen":
                keys += ["aniso_ppm", "eta_cs"]
        if i > 0:
            keys.append("weight")
        for k in keys:
            a = ParameterAddress("site", i, k)
            spec = key_spec("site", k)
            out.append(_Param(a, a.name(model), float(model.parameter_value(a)), spec.low, spec.high, spec.unit))
    text = ("the model has no free parameters; each site's physically relevant ones are used: shift_ppm, "
            "cq_mhz and eta_q (quadrupolar sites), span_ppm and skew (or aniso_ppm and eta_cs) where the shift is "
            "anisotropic, and the weight of every site but the first (relative weights; the scale absorbs their "
            "sum); broadening is taken as known")
    return out, text


def _floor(key: str) -> tuple[str, float]:
    return PARAMETER_REFERENCES.get(key, ("scale", 1.0))


def _step(p: _Param) -> float:
    _, fl = _floor(p.address.key)
    h = DIFF_STEP * max(abs(p.value), fl)
    return -h if p.value + h > p.hi else h


def _reported(model: Model, params: list) -> tuple[list, np.ndarray]:
    """Reported quantities (weights as fractions of the total) and their Jacobian with respect to the parameters."""
    p = len(params)
    weight_cols = {q.address.index: k for k, q in enumerate(params)
                   if q.address.table == "site" and q.address.key == "weight"}
    names, values, units, keys = [], [], [], []
    rows = []
    for k, q in enumerate(params):
        if k in weight_cols.values():
            continue
        names.append(q.name)
        values.append(q.value)
        units.append(q.unit)
        keys.append(q.address.key if q.address.item is None else "euler_deg")
        r = np.zeros(p)
        r[k] = 1.0
        rows.append(r)
    if weight_cols:
        w = np.array([s.weight for s in model.sites], dtype=float)
        total = w.sum()
        for i, s in enumerate(model.sites):
            r = np.zeros(p)
            for j, k in weight_cols.items():
                r[k] = ((1.0 if i == j else 0.0) * total - w[i]) / total ** 2
            names.append(f"{s.label}.weight")
            values.append(w[i] / total if total > 0 else math.nan)
            units.append("")
            keys.append("weight")
            rows.append(r)
    return list(zip(names, values, units, keys)), np.array(rows).reshape(len(rows), p)


def _covariance(f: np.ndarray) -> np.ndarray:
    """Inverse of a Fisher matrix, inf on the diagonal for directions the data do not fix."""
    d = np.sqrt(np.clip(np.diag(f), 0.0, None))
    dead = d == 0
    d = np.where(dead, 1.0, d)
    fs = f / np.outer(d, d)
    w, v = np.linalg.eigh(fs)
    keep = w > max(w.max(), 0.0) * 1e-12 if w.size else w
    inv = (v[:, keep] / w[keep]) @ v[:, keep].T
    cov = inv / np.outer(d, d)
    if not keep.all() or dead.any():
        null = v[:, ~keep]
        bad = np.any(np.abs(null) > 1e-6, axis=1) | dead
        cov[bad, :] = 0.0
        cov[:, bad] = 0.0
        cov[bad, bad] = np.inf
    return cov


def _errors(cov_theta: np.ndarray, info: list, g: np.ndarray, refs: dict):
    finite = np.isfinite(np.diag(cov_theta))
    c = np.where(np.outer(finite, finite), cov_theta, 0.0)
    q = g @ c @ g.T
    inf_rows = np.any(np.abs(g[:, ~finite]) > 0, axis=1) if (~finite).any() else np.zeros(len(info), bool)
    err = np.sqrt(np.clip(np.diag(q), 0.0, None))
    err[inf_rows] = np.inf
    stderr = {n: float(e) for (n, *_), e in zip(info, err)}
    rel = {n: float(stderr[n] / refs[n]) for n, *_ in info}
    return stderr, rel


def _criterion(rel: Mapping, skip: set) -> tuple[float, str]:
    worst, name = -1.0, ""
    for n, v in rel.items():
        if n in skip:
            continue
        vv = math.inf if not math.isfinite(v) else v
        if vv > worst:
            worst, name = vv, n
    return (worst if worst >= 0 else math.nan), name


def _log_det(cov: np.ndarray, refs: list) -> float:
    r = np.asarray(refs, dtype=float)
    if not np.all(np.isfinite(np.diag(cov))):
        return math.inf
    s = cov / np.outer(r, r)
    sign, ld = np.linalg.slogdet(s)
    return float(ld) if sign > 0 else math.inf


# ----- one candidate


def _evaluate_rate(model: Model, setup: _FieldSetup, rate: float, table: RotorTable, params: list | None,
                   snr: float, clock: _Clock):
    from ..engine.site_lines import compute_lines, site_job
    from ..simulator import simulate

    nuc = model.nucleus
    axis = setup.axis
    nu_ref = setup.nu_ref
    meas = replace(setup.meas, spinning_hz=rate, rotor_phases="auto")
    offset = meas.shift_offset_ppm * nu_ref * 1e-6
    reach = table.reaching(rate)
    rotors = tuple(r.name for r in reach)
    rel_signal = reach[0].sample_volume_ul / table.largest_volume_ul() if reach else 0.0
    t0 = time.perf_counter()
    auto = []
    try:
        for s, m, oset in zip(model.sites, setup.methods_mas, setup.sets_mas):
            auto.append(compute_lines(site_job(s, meas, nuc, m, oset), orientations=oset))
    except ModelError as e:
        clock.add("lines", t0)
        return RateResult(rate, False, reason=str(e), rotors=rotors, relative_signal=rel_signal), None
    phases = max(sl.phases for sl in auto)
    fixed = replace(meas, rotor_phases=phases)
    memo: dict = {}
    lines = []
    for s, m, oset, sl in zip(model.sites, setup.methods_mas, setup.sets_mas, auto):
        job = site_job(s, fixed, nuc, m, oset)
        if sl.phases == phases:
            sl = replace(sl, job=job)
        else:
            sl = compute_lines(job, orientations=oset)
        memo[job] = sl
        lines.append(sl)
    clock.add("lines", t0)
    # the spectrum (for the figure and the precision analysis): the simulate path, on the planning axis
    t0 = time.perf_counter()
    base_model = model.with_measurement(0, **_meas_fields(fixed))
    sim_opts = dict(axis=axis, lines_memo=memo, methods=list(setup.methods_mas), orientations=list(setup.sets_mas))
    render_memo: dict = {}
    spec = simulate(base_model, render_memo=render_memo, **sim_opts)
    y0 = np.asarray(spec.intensity, dtype=float)
    clock.add("simulate", t0)
    t0 = time.perf_counter()
    # each site's centreband rendered alone; its sidebands are the rest of its simulated spectrum (binning and
    # broadening are linear)
    centre, side = [], []
    for k, (s, sl) in enumerate(zip(model.sites, lines)):
        lz, gs = _site_broadening(s, meas)
        sh = (s.shift.iso_ppm - sl.job.iso_ppm) * nu_ref * 1e-6 + offset
        c = _render_part(sl, axis, sh, s.weight, lz, gs, meas.binning, "centre")
        centre.append(c)
        side.append(np.clip(np.asarray(spec.site_intensities[k]) - c, 0.0, None))
    clock.add("render", t0)
    n = len(model.sites)
    ov = [[overlap_fraction(side[i], centre[j]) if model.sites[j].weight > 0 else 0.0 for j in range(n)]
          for i in range(n)]
    flat = [(ov[i][j], i, j) for i in range(n) for j in range(n)]
    worst_v, wi, wj = max(flat)
    res = [[0.0 if i == j else _resolution(centre[i], centre[j]) for j in range(n)] for i in range(n)]
    max_res = max((res[i][j] for i in range(n) for j in range(n) if i != j), default=0.0)
    frac = tuple(float(1.0 - sl.band_intensity[0] / sl.band_intensity.sum()) if sl.band_intensity.sum() > 0
                 else 0.0 for sl in lines)
    t0 = time.perf_counter()
    sigma = float(np.max(y0)) / snr if np.max(y0) > 0 else math.nan
    stderr, rel, crit, wname, fisher, ld = {}, {}, math.nan, "", None, math.nan
    if params:
        cols = []
        alone = not base_model.tied
        for q in params:
            h = _step(q)
            m_k = base_model.with_parameters({q.address: q.value + h})
            if alone and q.address.table == "site":
                # only this site's spectrum changes (no ties): simulate it alone, the same way
                k = q.address.index
                one = replace(m_k.with_sites([m_k.sites[k]]), measurements=m_k.measurements)
                yk = np.asarray(simulate(one, render_memo=render_memo, axis=axis, lines_memo=memo,
                                         methods=[setup.methods_mas[k]], orientations=[setup.sets_mas[k]]).intensity,
                                dtype=float)
                cols.append((yk - np.asarray(spec.site_intensities[k], dtype=float)) / h)
            else:
                yk = np.asarray(simulate(m_k, render_memo=render_memo, **sim_opts).intensity, dtype=float)
                cols.append((yk - y0) / h)
        jac = np.column_stack(cols + [y0])
        full = jac.T @ jac / sigma ** 2
        p = len(params)
        f_tt, f_ts, f_ss = full[:p, :p], full[:p, p], full[p, p]
        fisher = f_tt - np.outer(f_ts, f_ts) / f_ss if f_ss > 0 else f_tt
        fisher = 0.5 * (fisher + fisher.T)
    clock.add("simulate", t0)
    result = RateResult(rate, True, overlap=tuple(tuple(r) for r in ov), max_overlap=float(worst_v), worst=(wi, wj),
                        sideband_fraction=frac, resolution=tuple(tuple(r) for r in res),
                        max_resolution_overlap=float(max_res), rotors=rotors, rotor_phases=int(phases),
                        noise_sigma=sigma, stderr=stderr, relative=rel, criterion=crit, worst_parameter=wname,
                        fisher=fisher, log_det=ld, relative_signal=rel_signal)
    return result, spec


def _meas_fields(meas: Measurement) -> dict:
    return {"field_tesla": meas.field_tesla, "spinning_hz": meas.spinning_hz, "rotor_phases": meas.rotor_phases,
            "center_ppm": None, "width_ppm": None, "scale": 1.0, "baseline": (), "data": None,
            "orientations": meas.orientations}


def _resolution(a, b) -> float:
    a = np.clip(np.asarray(a), 0.0, None)
    b = np.clip(np.asarray(b), 0.0, None)
    small = min(float(a.sum()), float(b.sum()))
    if small <= 0:
        return 0.0
    return float(np.minimum(a, b).sum() / small)


def _with_precision(r: RateResult, info, g, refs, skip, prefs) -> RateResult:
    if r.fisher is None:
        return r
    cov = _covariance(r.fisher)
    stderr, rel = _errors(cov, info, g, refs)
    crit, name = _criterion(rel, skip)
    ld = _log_det(cov, prefs)
    rc = crit / r.relative_signal if r.relative_signal > 0 else math.inf
    return replace(r, stderr=stderr, relative=rel, criterion=crit, worst_parameter=name, log_det=ld,
                   rotor_criterion=rc)


def plan(model, fields=None, *, rotors=None, rotor_table=None, max_rate_hz=None, rates_hz=None,
         n_rates: int = DEFAULT_RATE_COUNT, min_rate_hz: float = DEFAULT_MIN_RATE_HZ,
         threshold: float = DEFAULT_THRESHOLD, snr: float = DEFAULT_SNR, precision: bool = True,
         orientations=None, progress=None, threads: int | None = 1) -> Plan:
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
        ``progress(done, total)`` after each candidate (and each field's set-up).
    threads : int or None, optional
        Threads of the compiled kernels while planning (default 1; None keeps
        numba's setting).  A plan makes thousands of small kernel calls, for
        which starting parallel work costs more than it saves
        (``benchmarks/bench_plan.py`` measures both).

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
    if threads is None:
        return _plan(model, fields, rotors, rotor_table, max_rate_hz, rates_hz, n_rates, min_rate_hz, threshold, snr,
                     precision, orientations, progress)
    import numba

    before = numba.get_num_threads()
    numba.set_num_threads(max(1, min(int(threads), numba.config.NUMBA_NUM_THREADS)))
    try:
        return _plan(model, fields, rotors, rotor_table, max_rate_hz, rates_hz, n_rates, min_rate_hz, threshold, snr,
                     precision, orientations, progress)
    finally:
        numba.set_num_threads(before)


def _plan(model, fields, rotors, rotor_table, max_rate_hz, rates_hz, n_rates, min_rate_hz, threshold, snr, precision,
          orientations, progress) -> Plan:
    t_start = time.perf_counter()
    model = _as_model(model)
    source = model.source or ""
    if not model.sites:
        raise PlanError("model: at least one [[site]] is needed")
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
    params, param_text = (_precision_parameters(model) if precision else ([], "precision not computed"))
    clock = _Clock()
    total = len(fields_t) * (1 + len(rates))
    done = 0
    field_plans = []
    for ft in fields_t:
        setup = _setup_field(model, meas, ft, dx, rates[0], orientations, clock)
        done += 1
        if progress is not None:
            progress(done, total)
        results, spectra = [], {}
        for r in rates:
            res, spec = _evaluate_rate(model, setup, r, table, params, snr, clock)
            results.append(res)
            spectra[r] = spec
            done += 1
            if progress is not None:
                progress(done, total)
        field_plans.append((setup, results, spectra))
    # -- precision: errors, criterion
    info: list = []
    refs: dict = {}
    skip: set = set()
    plist: list = []
    if params:
        info, g = _reported(model, params)
        for n, v, u, k in info:
            kind, fl = _floor(k)
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
        prefs = [refs.get(q.name, max(abs(q.value), _floor(q.address.key)[1])) for q in params]
        for k, (setup, results, spectra) in enumerate(field_plans):
            field_plans[k] = (setup, [_with_precision(r, info, g, refs, skip, prefs) for r in results], spectra)
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
            cov = _covariance(ra.fisher * ra.relative_signal ** 2 + rb.fisher * rb.relative_signal ** 2)
            stderr, rel = _errors(cov, info, g, refs)
            crit, name = _criterion(rel, skip)
            ld = _log_det(cov, prefs)
            out.append({"fields_tesla": [fa.field_tesla, fb.field_tesla], "rates_hz": [ra.rate_hz, rb.rate_hz],
                        "rotors": [ra.rotors[0] if ra.rotors else None, rb.rotors[0] if rb.rotors else None],
                        "relative_signal": [ra.relative_signal, rb.relative_signal], "criterion": crit,
                        "worst_parameter": name, "log_det_covariance": ld, "stderr": stderr})
    out.sort(key=lambda d: (_sort_key(d["criterion"]), _sort_key(d["log_det_covariance"])))
    return tuple(MappingProxyType(d) for d in out[:keep])


# ---------------------------------------------------------------------------
# text and figure


def _pct(v: float) -> str:
    if not math.isfinite(v):
        return "-"
    return f"{100 * v:.2g} %" if v < 0.1 else f"{100 * v:.0f} %"


def _num(v: float, digits: int = 3) -> str:
    return "-" if v is None or not math.isfinite(v) else f"{v:.{digits}g}"


def _table_text(p: Plan) -> str:
    labels = [s.label for s in p.model.sites]
    lw = max(8, max(len(x) for x in labels))
    out = []
    src = f" (model {p.source})" if p.source else ""
    out.append(f"plan for {p.model.nucleus.name}, {len(labels)} site(s){src}")
    out.append(f"threshold: every sideband-on-centreband overlap below {_pct(p.threshold)}; "
               f"SNR {p.snr:g} (tallest point / noise per {p.point_spacing_hz:.3g} Hz point, largest rotor)")
    out.append("widths: central 99 % of the intensity, without broadening; QIS: quadrupolar-induced shift")
    prec = bool(p.ranking)
    for f in p.fields:
        out.append("")
        out.append(f"{f.field_tesla:g} T ({p.model.nucleus.name} at {f.nu_ref_hz / 1e6:.6g} MHz)")
        out.append(f"  {'site':<{lw}}  {'static width':>16}  {'MAS width':>16}  {'QIS':>8}  {'span':>8}")
        out.append(f"  {'':<{lw}}  {'kHz':>7} {'ppm':>8}  {'kHz':>7} {'ppm':>8}  {'ppm':>8}  {'kHz':>8}")
        for s in f.sites:
            out.append(f"  {s.label:<{lw}}  {s.static_width_hz / 1e3:>7.3g} {s.static_width_ppm:>8.4g}  "
                       f"{s.mas_width_hz / 1e3:>7.3g} {s.mas_width_ppm:>8.4g}  "
                       f"{s.quadrupolar_induced_shift_ppm + 0.0:>8.2f}  {s.span_hz / 1e3:>8.3g}")
        head = (f"  {'rate/kHz':>8}  {'overlap':>8}  {'sidebands of -> centreband of':<{2 * lw + 4}}  "
                f"{'in sb':>7}  ")
        if prec:
            head += f"{'err@SNR':>8}  {'w/ rotor':>8}  "
        out.append(head + "largest rotor")
        for r in f.rates:
            mark = "*" if f.recommended_rate_hz is not None and r.rate_hz == f.recommended_rate_hz else " "
            if not r.computed:
                out.append(f" {mark}{r.rate_hz / 1e3:>8.4g}  not computed: {r.reason[:80]}")
                continue
            pair = f"{labels[r.worst[0]]} -> {labels[r.worst[1]]}"
            rot = r.rotors[0] if r.rotors else "none"
            if len(r.rotors) > 1:
                rot += f" (+{len(r.rotors) - 1})"
            line = (f" {mark}{r.rate_hz / 1e3:>8.4g}  {_pct(r.max_overlap):>8}  {pair:<{2 * lw + 4}}  "
                    f"{_pct(max(r.sideband_fraction)):>7}  ")
            if prec:
                line += f"{_num(r.criterion):>8}  {_num(r.rotor_criterion):>8}  "
            out.append(line + rot)
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
    out.append("overlap: largest share of a centreband under sidebands; in sb: largest share of a site in sidebands")
    if prec:
        out.append(f"err@SNR: largest relative standard error of {len(p.parameters)} parameter(s) at SNR {p.snr:g}; "
                   "w/ rotor: the same with the SNR the largest rotor reaching the rate gives (sample volume as "
                   "the proxy for signal)")
    out.append(f"best field by centreband resolution: {p.best_field_tesla:g} T ({p.best_field_reason})")
    if prec:
        clean = [t for t in p.ranking if p.field(t[0]).rate(t[1]).passes(p.threshold)]
        out.append("best single experiments meeting the threshold (w/ rotor; lower is better):"
                   + ("" if clean else " none"))
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


def plot_plan(p: Plan, fig=None):
    """Draw the plan: each field's spectrum at its recommended rate, sidebands marked, and the precision ranking.

    Parameters
    ----------
    p : Plan
    fig : matplotlib Figure, optional
        Drawn into a new figure when omitted.

    Returns
    -------
    matplotlib Figure

    See Also
    --------
    powderspin.plotting.spectrum.plot_spectrum

    Examples
    --------
    >>> import powderspin as ps
    >>> m = ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0},
    ...                   [{"label": "P", "span_ppm": 100.0, "skew": 0.0}])
    >>> p = ps.plan(m, [9.4], rates_hz=[5000, 20000], precision=False)
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> fig = plot_plan(p)
    >>> len(fig.axes)
    1
    """
    import matplotlib.pyplot as plt

    from ..plotting.spectrum import plot_spectrum

    rows = len(p.fields) + (1 if p.ranking else 0)
    if fig is None:
        fig = plt.figure(figsize=(8.0, 2.6 * rows + 0.4), layout="constrained")
    axes = fig.subplots(rows, 1, squeeze=False)[:, 0]
    for ax, f in zip(axes, p.fields):
        if f.spectrum is None:
            ax.text(0.5, 0.5, f"{f.field_tesla:g} T: no candidate rate could be simulated", ha="center",
                    transform=ax.transAxes)
            ax.set_axis_off()
            continue
        plot_spectrum(f.spectrum, ax, mark_sidebands=True)
        if f.recommended_rate_hz is not None:
            ax.set_title(f"{f.field_tesla:g} T, {f.recommended_rate_hz / 1e3:g} kHz (recommended)", fontsize=10)
        else:
            ax.set_title(f"{f.field_tesla:g} T, {f.resolution_rate_hz / 1e3:g} kHz (fastest candidate; no rate "
                         "meets the threshold)", fontsize=10)
    if p.ranking:
        ax = axes[-1]
        top = [t for t in p.ranking if math.isfinite(t[2])][:15]
        if top:
            labels = [f"{ft:g} T, {rt / 1e3:g} kHz" for ft, rt, _, _ in top]
            vals = [c for _, _, c, _ in top]
            colours = []
            for ft, rt, _, _ in top:
                r = p.field(ft).rate(rt)
                colours.append("0.3" if r.passes(p.threshold) else "0.75")
            ys = np.arange(len(top))
            ax.barh(ys, vals, color=colours)
            ax.set_yticks(ys, labels, fontsize=7)
            ax.invert_yaxis()
            ax.set_xscale("log")
            ax.set_xlabel(f"largest relative standard error, SNR {p.snr:g} scaled by each rotor's sample volume "
                          "(grey: sidebands overlap)")
            ax.set_title("precision ranking (best first)", fontsize=10)
        else:
            ax.text(0.5, 0.5, "no parameter is determined", ha="center", transform=ax.transAxes)
            ax.set_axis_off()
    return fig
