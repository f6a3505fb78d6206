"""Sites, measurements and models: the values a simulation is made from.

A model file is TOML with the keys below (all frequencies in Hz, shifts in
ppm, angles in degrees in files and radians inside)::

    nucleus = "27Al"

    [measurement]
    field_tesla = 14.1
    spinning_hz = 0            # 0 = static, "inf" or inf = infinite rate
    rotor_angle_deg = 54.7356  # default: the magic angle
    transitions = "central"    # "central" | "all" | ["3/2:1/2", ...]
    method = "auto"            # "auto" | "perturbation" | "exact"
    points = 2048
    center_ppm = 0.0           # optional; chosen from the lines when absent
    width_ppm = 200.0          # optional
    orientations = "auto"      # "auto" | "coarse" | "fine" | a set name
    binning = "interpolate"    # "interpolate" (triangle tent) | "histogram"
    rotor_phases = "auto"      # number of rotor phases sampled per period
    lorentz_hz = 0.0
    gauss_hz = 0.0

    [[site]]
    label = "AlO4"
    weight = 1.0
    shift_ppm = 60.0
    cq_mhz = 3.0
    eta_q = 0.4
    span_ppm = 40 ; skew = 0.2   # or aniso_ppm + eta_cs, or principal_ppm = [d11, d22, d33]
    euler_deg = [0, 0, 0]        # shift frame relative to EFG frame (ZYZ, active)
    lorentz_hz = 0.0
    gauss_hz = 0.0

A number may be replaced by an inline table ``{ start = 3.0, min = 0.5,
max = 8.0 }`` marking a free parameter for fitting; simulations use
``start``.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field, replace
from fractions import Fraction
from pathlib import Path
from typing import Any

import numpy as np

from .nuclides import Nuclide, get_nuclide
from .tensors import ShiftTensor, TensorError

__all__ = [
    "ModelError",
    "MAGIC_ANGLE_DEG",
    "FreeParameter",
    "Site",
    "Measurement",
    "Model",
    "load_model",
    "parse_model",
    "parse_transition",
]

#: The magic angle arccos(1/sqrt 3) in degrees (about 54.7356), the default
#: rotor angle (E. R. Andrew, A. Bradbury, R. G. Eades, Nature 182 (1958) 1659).
MAGIC_ANGLE_DEG = math.degrees(math.acos(1.0 / math.sqrt(3.0)))


class ModelError(ValueError):
    """A model value is missing, unknown or outside its allowed range.

    A ``ValueError`` subclass whose message names the key, the value and the
    allowed range (or the allowed keys).

    Parameters
    ----------
    message : str
        Where the problem is (``"site 'AlO4': eta_q"``), the value and the
        allowed range.

    References
    ----------
    TOML v1.0.0 specification (toml.io), for the file syntax; R. K. Harris
    et al., Pure Appl. Chem. 80 (2008) 59, for the parameter conventions.

    Examples
    --------
    >>> try:
    ...     Site(eta_q=1.5)
    ... except ModelError as e:
    ...     print(e)
    site 'site': eta_q = 1.5 is outside the allowed range [0, 1]
    """


@dataclass(frozen=True)
class FreeParameter:
    """A parameter marked free in a model file: start value and bounds.

    Parameters
    ----------
    where : str
        The key it belongs to, e.g. ``"site 'AlO4'.cq_mhz"``.
    start : float
        Start value, in the unit of that key (MHz, ppm, Hz, degrees, ...);
        simulations use it.
    min, max : float
        Bounds in the same unit (default -inf, inf).

    References
    ----------
    W. H. Press et al., *Numerical Recipes*, 3rd ed. (2007), ch. 15
    (modelling of data; bounded parameters) (from memory).

    Examples
    --------
    >>> m = parse_model({"nucleus": "27Al",
    ...                  "site": [{"cq_mhz": {"start": 3.0, "min": 0.5, "max": 8.0}}]})
    >>> m.free[0]
    FreeParameter(where="site 'site 1'.cq_mhz", start=3.0, min=0.5, max=8.0)
    """

    where: str
    start: float
    min: float = -math.inf
    max: float = math.inf


@dataclass(frozen=True)
class Site:
    """One crystallographic site.

    Parameters
    ----------
    label : str
        Name shown in plots and tables.
    weight : float
        Relative population (>= 0); the site's selected transitions integrate
        to it.
    shift : ShiftTensor
        Chemical-shift tensor (ppm).
    cq_mhz : float
        Quadrupolar coupling constant C_Q = e^2 q Q / h (MHz); 0 for spin 1/2.
    eta_q : float
        Quadrupolar asymmetry in [0, 1].
    euler_deg : tuple of float
        ZYZ active Euler angles (degrees) of the shift principal frame relative
        to the EFG principal frame.
    lorentz_hz, gauss_hz : float
        Extra Lorentzian / Gaussian broadening of this site (FWHM, Hz).

    References
    ----------
    M. J. Duer, *Introduction to Solid-State NMR Spectroscopy* (2004)
    (shift and quadrupolar interactions) (from memory); J. Mason, Solid
    State Nucl. Magn. Reson. 2 (1993) 285 (shift-tensor conventions).

    Examples
    --------
    >>> s = Site(label="AlO4", cq_mhz=3.0, eta_q=0.4)
    >>> s.cq_hz, s.shift.iso_ppm
    (3000000.0, 0.0)
    """

    label: str = "site"
    weight: float = 1.0
    shift: ShiftTensor = field(default_factory=lambda: ShiftTensor(0.0))
    cq_mhz: float = 0.0
    eta_q: float = 0.0
    euler_deg: tuple[float, float, float] = (0.0, 0.0, 0.0)
    lorentz_hz: float = 0.0
    gauss_hz: float = 0.0

    def __post_init__(self):
        where = f"site '{self.label}'"
        _check_range(f"{where}: weight", self.weight, 0.0, math.inf)
        _check_range(f"{where}: cq_mhz", self.cq_mhz, -1e4, 1e4)
        _check_range(f"{where}: eta_q", self.eta_q, 0.0, 1.0)
        _check_range(f"{where}: lorentz_hz", self.lorentz_hz, 0.0, math.inf)
        _check_range(f"{where}: gauss_hz", self.gauss_hz, 0.0, math.inf)
        e = tuple(float(x) for x in self.euler_deg)
        if len(e) != 3 or not all(math.isfinite(x) for x in e):
            raise ModelError(f"{where}: euler_deg must be 3 finite angles in degrees, got {self.euler_deg!r}")
        object.__setattr__(self, "euler_deg", e)
        if not isinstance(self.shift, ShiftTensor):
            raise ModelError(f"{where}: shift must be a ShiftTensor")

    @property
    def euler_rad(self) -> tuple[float, float, float]:
        """The ZYZ Euler angles of the shift frame relative to the EFG frame, radians.

        Returns
        -------
        tuple of 3 float
            ``euler_deg`` converted to radians.

        References
        ----------
        M. E. Rose, *Elementary Theory of Angular Momentum* (1957), ch. IV.

        Examples
        --------
        >>> [round(a, 6) for a in Site(euler_deg=(0.0, 90.0, 180.0)).euler_rad]
        [0.0, 1.570796, 3.141593]
        """
        return tuple(math.radians(x) for x in self.euler_deg)

    @property
    def cq_hz(self) -> float:
        """Quadrupolar coupling constant C_Q = e^2 q Q / h in Hz.

        Returns
        -------
        float
            ``cq_mhz * 1e6``.

        References
        ----------
        A. Abragam, *The Principles of Nuclear Magnetism* (1961), chapter on
        electric quadrupole effects (from memory).

        Examples
        --------
        >>> Site(cq_mhz=2.5).cq_hz
        2500000.0
        """
        return self.cq_mhz * 1e6


@dataclass(frozen=True)
class Measurement:
    """How the spectrum is recorded and computed.

    Parameters
    ----------
    field_tesla : float
        Magnetic field B0 (T), > 0.
    spinning_hz : float
        Spinning rate (Hz): 0 = static, ``math.inf`` = infinitely fast.
    rotor_angle_deg : float
        Angle between rotor axis and B0 (degrees), default the magic angle.
    transitions : str or tuple of str
        ``"central"``, ``"all"`` or transitions ``"m1:m2"`` such as ``"3/2:1/2"``.
    method : str
        ``"auto"``, ``"perturbation"`` or ``"exact"``.
    points : int
        Number of points of the spectral axis.
    center_ppm, width_ppm : float or None
        Axis centre and full width (ppm); chosen from the lines when None.
    orientations : str or int
        ``"auto"``, ``"coarse"``, ``"fine"``, a subdivision count or a set name.
    binning : str
        ``"interpolate"`` (triangle interpolation) or ``"histogram"``.
    rotor_phases : str or int
        ``"auto"`` or the number of rotor phases per period (power of 2, >= 8).
    lorentz_hz, gauss_hz : float
        Broadening applied to every site (FWHM, Hz).

    References
    ----------
    E. R. Andrew, A. Bradbury, R. G. Eades, Nature 182 (1958) 1659 and
    I. J. Lowe, Phys. Rev. Lett. 2 (1959) 285 (magic-angle spinning).

    Examples
    --------
    >>> meas = Measurement(field_tesla=14.1, spinning_hz=12500.0)
    >>> round(meas.rotor_angle_deg, 4), meas.is_static, meas.transitions
    (54.7356, False, 'central')
    """

    field_tesla: float = 9.4
    spinning_hz: float = 0.0
    rotor_angle_deg: float = MAGIC_ANGLE_DEG
    transitions: Any = "central"
    method: str = "auto"
    points: int = 2048
    center_ppm: float | None = None
    width_ppm: float | None = None
    orientations: Any = "auto"
    binning: str = "interpolate"
    rotor_phases: Any = "auto"
    lorentz_hz: float = 0.0
    gauss_hz: float = 0.0

    def __post_init__(self):
        _check_range("measurement: field_tesla", self.field_tesla, 0.0, 100.0, open_low=True)
        sp = float(self.spinning_hz)
        if math.isnan(sp) or sp < 0:
            raise ModelError(
                f"measurement: spinning_hz = {self.spinning_hz!r} is outside the allowed range "
                "[0, inf] (0 = static, inf = infinite rate)"
            )
        object.__setattr__(self, "spinning_hz", sp)
        _check_range("measurement: rotor_angle_deg", self.rotor_angle_deg, 0.0, 90.0)
        if self.method not in ("auto", "perturbation", "exact"):
            raise ModelError(
                f"measurement: method = {self.method!r} is not one of 'auto', 'perturbation', 'exact'"
            )
        if self.binning not in ("interpolate", "histogram"):
            raise ModelError(
                f"measurement: binning = {self.binning!r} is not one of 'interpolate', 'histogram'"
            )
        if isinstance(self.points, bool) or int(self.points) != self.points or not (16 <= self.points <= 2**22):
            raise ModelError(f"measurement: points = {self.points!r} must be an integer in [16, 4194304]")
        object.__setattr__(self, "points", int(self.points))
        if self.center_ppm is not None:
            _check_range("measurement: center_ppm", self.center_ppm, -1e7, 1e7)
        if self.width_ppm is not None:
            _check_range("measurement: width_ppm", self.width_ppm, 0.0, 1e7, open_low=True)
        _check_range("measurement: lorentz_hz", self.lorentz_hz, 0.0, math.inf)
        _check_range("measurement: gauss_hz", self.gauss_hz, 0.0, math.inf)
        rp = self.rotor_phases
        if rp != "auto":
            if isinstance(rp, bool) or not isinstance(rp, (int, np.integer)) or rp < 8 or rp > 65536 or (rp & (rp - 1)):
                raise ModelError(
                    f"measurement: rotor_phases = {rp!r} must be 'auto' or a power of 2 in [8, 65536]"
                )
        t = self.transitions
        if isinstance(t, str):
            if t not in ("central", "all"):
                parse_transition(t, None)
                t = (t,)
        else:
            try:
                t = tuple(t)
            except TypeError:
                raise ModelError(
                    f"measurement: transitions = {self.transitions!r} must be 'central', 'all' or a list of 'm1:m2'"
                ) from None
            for s in t:
                if not isinstance(s, str):
                    raise ModelError(f"measurement: transitions entry {s!r} must be a string 'm1:m2'")
                parse_transition(s, None)
        object.__setattr__(self, "transitions", t)

    @property
    def is_static(self) -> bool:
        """True for a static sample (spinning_hz == 0 Hz).

        Returns
        -------
        bool

        References
        ----------
        M. J. Duer, *Introduction to Solid-State NMR Spectroscopy* (2004)
        (static and spinning powder patterns) (from memory).

        Examples
        --------
        >>> Measurement().is_static, Measurement(spinning_hz=5000.0).is_static
        (True, False)
        """
        return self.spinning_hz == 0.0

    @property
    def is_infinite_rate(self) -> bool:
        """True for the infinitely-fast-spinning limit (spinning_hz = inf Hz).

        Returns
        -------
        bool
            Only the rotor-averaged (centre-band) lines remain.

        References
        ----------
        M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300.

        Examples
        --------
        >>> Measurement(spinning_hz=math.inf).is_infinite_rate
        True
        """
        return math.isinf(self.spinning_hz)


@dataclass(frozen=True)
class Model:
    """A nucleus, a measurement and one or more sites.

    Parameters
    ----------
    nucleus : Nuclide
        The observed nucleus (:func:`powderspin.nuclides.get_nuclide`).
    measurement : Measurement
        Field (tesla), spinning rate (Hz), rotor angle (degrees), axis, ...
    sites : sequence of Site
        At least one site; ``cq_mhz`` must be 0 for a spin-1/2 nucleus.
    free : tuple of FreeParameter, optional
        Parameters marked free in the model file.
    source : str, optional
        Where the model came from (a file path), recorded in the metadata.

    References
    ----------
    TOML v1.0.0 specification (toml.io), for the model-file syntax.

    Examples
    --------
    >>> m = make_model("27Al", {"field_tesla": 14.1}, [{"cq_mhz": 3.0}])
    >>> m.nucleus.name, len(m.sites)
    ('27Al', 1)
    """

    nucleus: Nuclide
    measurement: Measurement
    sites: tuple[Site, ...]
    free: tuple[FreeParameter, ...] = ()
    source: str = ""

    def __post_init__(self):
        sites = tuple(self.sites)
        if not sites:
            raise ModelError("model: at least one [[site]] is needed")
        object.__setattr__(self, "sites", sites)
        if not self.nucleus.is_quadrupolar:
            for s in sites:
                if s.cq_mhz != 0.0:
                    raise ModelError(
                        f"site '{s.label}': cq_mhz = {s.cq_mhz} but {self.nucleus.name} has spin 1/2 "
                        "(no quadrupole moment); the allowed value is 0"
                    )
        # transitions must exist for this spin
        selected_transitions(self.nucleus.spin, self.measurement.transitions)

    def with_measurement(self, **changes) -> "Model":
        """A copy of the model with some measurement fields changed.

        Parameters
        ----------
        **changes
            :class:`Measurement` fields and new values, e.g.
            ``field_tesla=18.8`` (T) or ``spinning_hz=20000.0`` (Hz); they are
            validated as in :class:`Measurement`.

        Returns
        -------
        Model
            A new model; this one is unchanged.

        References
        ----------
        E. R. Andrew, A. Bradbury, R. G. Eades, Nature 182 (1958) 1659
        (magic-angle spinning).

        Examples
        --------
        >>> m = make_model("27Al", {"field_tesla": 14.1}, [{"cq_mhz": 3.0}])
        >>> m.with_measurement(field_tesla=18.8).measurement.field_tesla, m.measurement.field_tesla
        (18.8, 14.1)
        """
        return replace(self, measurement=replace(self.measurement, **changes))


# ---------------------------------------------------------------------------
# transitions


def parse_transition(text: str, spin: float | None) -> tuple[float, float]:
    """Parse ``"m1:m2"`` (e.g. ``"3/2:1/2"``, ``"-1/2:-3/2"``) into (m1, m2).

    Single-quantum transitions need ``m1 - m2 = +-1``; symmetric
    multiple-quantum transitions ``m:-m`` are also accepted.  Returns the pair
    ordered as (upper m, lower m).

    Parameters
    ----------
    text : str
        ``"m1:m2"`` with half-integer magnetic quantum numbers (``"3/2"``,
        ``"-1/2"``, ``"1"``).
    spin : float or None
        Nuclear spin I to check ``|m| <= I`` against; None skips that check.

    Returns
    -------
    tuple of 2 float
        (upper m, lower m).

    Raises
    ------
    ModelError
        If the text is malformed, the transition is neither single-quantum
        nor symmetric, or ``|m| > I``.

    References
    ----------
    A. Abragam, *The Principles of Nuclear Magnetism* (1961)
    (magnetic-dipole selection rule Delta m = +-1) (from memory); L. Frydman,
    J. S. Harwood, J. Am. Chem. Soc. 117 (1995) 5367 (symmetric
    multiple-quantum transitions).

    Examples
    --------
    >>> parse_transition("1/2:3/2", 2.5)
    (1.5, 0.5)
    >>> parse_transition("3/2:-3/2", 1.5)
    (1.5, -1.5)
    """
    try:
        a, b = text.split(":")
        m1, m2 = float(Fraction(a.strip())), float(Fraction(b.strip()))
    except (ValueError, ZeroDivisionError):
        raise ModelError(
            f"measurement: transition {text!r} is not of the form 'm1:m2' with m in half-integers, e.g. '3/2:1/2'"
        ) from None
    for m in (m1, m2):
        if abs(2 * m - round(2 * m)) > 1e-12:
            raise ModelError(f"measurement: transition {text!r}: {m} is not a multiple of 1/2")
    hi, lo = max(m1, m2), min(m1, m2)
    if not (abs(hi - lo - 1.0) < 1e-12 or abs(hi + lo) < 1e-12) or hi == lo:
        raise ModelError(
            f"measurement: transition {text!r} must be single-quantum (m1 - m2 = 1) or symmetric (m:-m)"
        )
    if spin is not None and (hi > spin + 1e-12 or lo < -spin - 1e-12):
        raise ModelError(
            f"measurement: transition {text!r} needs |m| <= I = {Fraction(spin).limit_denominator(2)}; "
            f"allowed m range is [-{Fraction(spin).limit_denominator(2)}, {Fraction(spin).limit_denominator(2)}]"
        )
    return hi, lo


def selected_transitions(spin: float, transitions) -> tuple[float, ...]:
    """Upper m of each selected single-quantum transition m -> m-1.

    Symmetric multiple-quantum transitions are rejected here: spectra show
    single-quantum coherences only.
    """
    if transitions == "central" or transitions == ("central",):
        if abs(spin - round(spin)) < 1e-12:
            # integer spin: no central transition; the pair +-1 <-> 0 instead
            return (1.0, 0.0)
        return (0.5,)
    if transitions == "all" or transitions == ("all",):
        return tuple(spin - np.arange(int(round(2 * spin))))
    out = []
    for t in transitions:
        hi, lo = parse_transition(t, spin)
        if abs(hi - lo - 1.0) > 1e-12:
            raise ModelError(
                f"measurement: transition {t!r} is multiple-quantum; spectra take single-quantum "
                "transitions 'm:m-1' only"
            )
        if hi not in out:
            out.append(hi)
    return tuple(out)


# ---------------------------------------------------------------------------
# file parsing

_MEAS_KEYS = {
    "field_tesla", "spinning_hz", "rotor_angle_deg", "transitions", "method", "points",
    "center_ppm", "width_ppm", "orientations", "binning", "rotor_phases", "lorentz_hz", "gauss_hz",
}
_SITE_KEYS = {
    "label", "weight", "shift_ppm", "cq_mhz", "eta_q", "span_ppm", "skew", "aniso_ppm", "eta_cs",
    "principal_ppm", "euler_deg", "lorentz_hz", "gauss_hz",
}
_TOP_KEYS = {"nucleus", "measurement", "site"}


def _check_range(name, value, lo, hi, open_low=False):
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ModelError(f"{name} must be a number, got {value!r}") from None
    bad = math.isnan(v) or v > hi or (v <= lo if open_low else v < lo)
    if bad:
        lb = "(" if open_low else "["
        raise ModelError(f"{name} = {value!r} is outside the allowed range {lb}{lo:g}, {hi:g}]")
    return v


def _unknown(keys, allowed, where):
    extra = sorted(set(keys) - allowed)
    if extra:
        import difflib

        hints = []
        for k in extra:
            close = difflib.get_close_matches(k, sorted(allowed), n=1)
            hints.append(f"'{k}'" + (f" (did you mean '{close[0]}'?)" if close else ""))
        raise ModelError(f"{where}: unknown key {', '.join(hints)}; allowed keys are {', '.join(sorted(allowed))}")


def _number(table, key, where, free, default=None):
    if key not in table:
        return default
    v = table[key]
    if isinstance(v, dict):
        _unknown(v.keys(), {"start", "min", "max"}, f"{where}.{key}")
        if "start" not in v:
            raise ModelError(f"{where}.{key}: a free parameter needs 'start'")
        lo = float(v.get("min", -math.inf))
        hi = float(v.get("max", math.inf))
        st = float(v["start"])
        if not (lo <= st <= hi):
            raise ModelError(f"{where}.{key}: start = {st} is outside its own range [{lo}, {hi}]")
        free.append(FreeParameter(f"{where}.{key}", st, lo, hi))
        return st
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise ModelError(f"{where}.{key} must be a number, got {v!r}")
    return float(v)


def _parse_site(i, t, free) -> Site:
    where = f"site[{i}]"
    if not isinstance(t, dict):
        raise ModelError(f"{where} must be a table")
    _unknown(t.keys(), _SITE_KEYS, where)
    label = str(t.get("label", f"site {i + 1}"))
    where = f"site '{label}'"
    iso = _number(t, "shift_ppm", where, free, 0.0)
    forms = [k for k in (("span_ppm", "skew"), ("aniso_ppm", "eta_cs"), ("principal_ppm",)) if any(x in t for x in k)]
    if len(forms) > 1:
        raise ModelError(
            f"{where}: give the shift anisotropy one way only: span_ppm + skew, aniso_ppm + eta_cs, or principal_ppm"
        )
    try:
        if forms and forms[0][0] == "span_ppm":
            shift = ShiftTensor.from_span_skew(
                iso, _number(t, "span_ppm", where, free, 0.0), _number(t, "skew", where, free, 0.0)
            )
        elif forms and forms[0][0] == "aniso_ppm":
            shift = ShiftTensor(iso, _number(t, "aniso_ppm", where, free, 0.0), _number(t, "eta_cs", where, free, 0.0))
        elif forms:
            p = t["principal_ppm"]
            if not isinstance(p, list) or len(p) != 3:
                raise ModelError(f"{where}.principal_ppm must be a list of 3 numbers (ppm)")
            if "shift_ppm" in t:
                raise ModelError(f"{where}: principal_ppm fixes the isotropic shift; do not also give shift_ppm")
            shift = ShiftTensor.from_principal(p)
        else:
            shift = ShiftTensor(iso)
    except TensorError as e:
        raise ModelError(f"{where}: {e}") from None
    euler = t.get("euler_deg", [0.0, 0.0, 0.0])
    if not isinstance(euler, list) or len(euler) != 3:
        raise ModelError(f"{where}.euler_deg must be a list of 3 angles in degrees")
    return Site(
        label=label,
        weight=_number(t, "weight", where, free, 1.0),
        shift=shift,
        cq_mhz=_number(t, "cq_mhz", where, free, 0.0),
        eta_q=_number(t, "eta_q", where, free, 0.0),
        euler_deg=tuple(float(x) for x in euler),
        lorentz_hz=_number(t, "lorentz_hz", where, free, 0.0),
        gauss_hz=_number(t, "gauss_hz", where, free, 0.0),
    )


def _parse_measurement(meas_t, free) -> Measurement:
    if not isinstance(meas_t, dict):
        raise ModelError("model: [measurement] must be a table")
    _unknown(meas_t.keys(), _MEAS_KEYS, "measurement")
    kw: dict[str, Any] = {}
    for k, v in meas_t.items():
        if k in ("transitions", "method", "orientations", "binning", "rotor_phases"):
            kw[k] = tuple(v) if isinstance(v, list) else v
        elif k == "points":
            kw[k] = v
        elif k == "spinning_hz" and isinstance(v, str):
            if v.strip().lower() not in ("inf", "infinite", "infinity"):
                raise ModelError(f"measurement.spinning_hz = {v!r}: give a number of Hz or \"inf\"")
            kw[k] = math.inf
        else:
            kw[k] = _number(meas_t, k, "measurement", free)
    meas = Measurement(**kw)
    return meas


def parse_model(data: dict, source: str = "") -> Model:
    """Build a :class:`Model` from a parsed TOML mapping, validating every key.

    Parameters
    ----------
    data : dict
        The parsed file: ``nucleus``, a ``measurement`` table and ``site``
        tables, with the keys of the module docstring (field in tesla,
        spinning rate in Hz, shifts in ppm, C_Q in MHz, angles in degrees).
    source : str, optional
        Where the mapping came from (recorded in the model and the metadata).

    Returns
    -------
    Model

    Raises
    ------
    ModelError
        For a missing, unknown or out-of-range key.

    References
    ----------
    TOML v1.0.0 specification (toml.io).

    Examples
    --------
    >>> m = parse_model({"nucleus": "27Al", "measurement": {"field_tesla": 14.1},
    ...                  "site": [{"cq_mhz": 3.0, "eta_q": 0.5}]})
    >>> m.sites[0].cq_mhz
    3.0
    """
    _unknown(data.keys(), _TOP_KEYS, "model")
    if "nucleus" not in data:
        raise ModelError("model: 'nucleus' is required, e.g. nucleus = \"27Al\"")
    nuc = get_nuclide(str(data["nucleus"]))
    meas_t = data.get("measurement", {})
    free: list[FreeParameter] = []
    meas = _parse_measurement(meas_t, free)
    sites_t = data.get("site", [])
    if isinstance(sites_t, dict):
        sites_t = [sites_t]
    sites = tuple(_parse_site(i, t, free) for i, t in enumerate(sites_t))
    return Model(nuc, meas, sites, tuple(free), source)


def load_model(path) -> Model:
    """Read and validate a TOML model file.

    Parameters
    ----------
    path : str or pathlib.Path
        Model file.

    Returns
    -------
    Model
        The validated model; its ``source`` is ``path``.

    Raises
    ------
    ModelError
        If the file is missing, is not valid TOML, or a value is wrong.

    References
    ----------
    TOML v1.0.0 specification (toml.io).

    Examples
    --------
    >>> from pathlib import Path
    >>> m = load_model(Path(__file__).parent / "data" / "demo.toml")
    >>> m.nucleus.name
    '27Al'
    """
    p = Path(path)
    if not p.is_file():
        raise ModelError(f"model file {str(p)!r} does not exist")
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as e:
        raise ModelError(f"model file {str(p)!r} is not valid TOML: {e}") from None
    return parse_model(data, str(p))


def make_site(**keys) -> Site:
    """Build a :class:`Site` from the model-file keys (same names, same checks).

    Parameters
    ----------
    **keys
        ``[[site]]`` keys: ``label``, ``weight``, ``shift_ppm``, ``cq_mhz``,
        ``eta_q``, one of ``span_ppm`` + ``skew`` / ``aniso_ppm`` + ``eta_cs``
        / ``principal_ppm`` (ppm), ``euler_deg`` (degrees), ``lorentz_hz``,
        ``gauss_hz`` (Hz).

    Returns
    -------
    Site

    References
    ----------
    J. Mason, Solid State Nucl. Magn. Reson. 2 (1993) 285; J. Herzfeld,
    A. E. Berger, J. Chem. Phys. 73 (1980) 6021 (shift-tensor conventions).

    Examples
    --------
    >>> s = make_site(label="AlO6", shift_ppm=8.0, cq_mhz=5.5, eta_q=0.6, span_ppm=20.0, skew=0.1)
    >>> round(s.shift.span_ppm, 6)
    20.0
    """
    return _parse_site(0, dict(keys), [])


def make_model(nucleus, measurement=None, sites=()) -> Model:
    """Build a :class:`Model` from a nucleus name, measurement keys and site key dicts.

    Parameters
    ----------
    nucleus : str or Nuclide
        e.g. ``"27Al"``.
    measurement : dict or Measurement, optional
        ``[measurement]`` keys (see the module docstring).
    sites : sequence of dict or Site
        Site keys as in a model file, or ready :class:`Site` values.

    Returns
    -------
    Model

    References
    ----------
    TOML v1.0.0 specification (toml.io), for the key names shared with model
    files.

    Examples
    --------
    >>> m = make_model("23Na", {"field_tesla": 11.7}, [{"cq_mhz": 2.0}])
    >>> m.measurement.field_tesla
    11.7
    """
    nuc = nucleus if isinstance(nucleus, Nuclide) else get_nuclide(str(nucleus))
    free: list[FreeParameter] = []
    if isinstance(measurement, Measurement):
        meas = measurement
    else:
        meas = _parse_measurement(dict(measurement or {}), free)
    built = []
    for i, s in enumerate(sites):
        if isinstance(s, Site):
            built.append(s)
        elif isinstance(s, dict):
            built.append(_parse_site(i, s, free))
        else:
            raise ModelError(f"sites[{i}] must be a dict of site keys or a Site, got {type(s).__name__}")
    return Model(nuc, meas, tuple(built), tuple(free))
