"""What a fit found: frozen results that say whether the fit succeeded, and their result-file form.

:class:`FitResult` holds the fitted model, the values with standard errors,
the covariance and correlations, the statistics, the optimiser's verdict
(``success``, ``message``, ``n_evaluations``) and the warnings.
:meth:`FitResult.to_dict` gives the nested dict of the result file (a model
file with the fitted values and result tables); the files themselves are
written by :mod:`powderspin.io.results`.
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Mapping

import numpy as np

from ..frozen import reduce_through_init
from ..model.modelfile import model_to_dict
from ..model.values import Model

__all__ = ["FitResult", "PosteriorSummary", "format_value"]


def supported_digits(e: float) -> int | None:
    """Decimal places a value with standard error ``e`` is written to: the error's two significant digits, plus one.

    The guard digit keeps rounding far below the error (a twentieth of it at most), so that a
    rounded result still reproduces the fit.  None when the error gives no guide (0, infinite, NaN).

    Examples
    --------
    >>> supported_digits(0.0123), supported_digits(25.0), supported_digits(float("inf")) is None
    (4, 1, True)
    """
    if not (math.isfinite(e) and e > 0):
        return None
    return 2 - int(math.floor(math.log10(e)))


def round_to_error(v: float, e: float) -> float:
    """``v`` rounded to :func:`supported_digits` of its standard error (unchanged when the error gives no guide).

    Examples
    --------
    >>> round_to_error(3.14159265358979, 0.0123), round_to_error(1234.5678, 25.0)
    (3.1416, 1234.6)
    """
    d = supported_digits(e)
    if d is None or not math.isfinite(v):
        return float(v)
    return float(round(v, d)) if d > -300 else float(v)


def _value_entries(d: dict, meas: list) -> dict:
    """Every number of the site and measurement tables, by parameter name (``A.cq_mhz``, ``A.euler_deg[1]``,
    ``measurement 1.baseline[0]``)."""
    out = {}
    owners = [(t.get("label", ""), t) for t in d.get("site", [])]
    owners += [(f"measurement {j + 1}", t) for j, t in enumerate(meas)]
    for owner, t in owners:
        for k, v in t.items():
            if isinstance(v, float):
                out[f"{owner}.{k}"] = v
            elif isinstance(v, list) and v and all(isinstance(x, float) for x in v):
                out.update({f"{owner}.{k}[{i}]": x for i, x in enumerate(v)})
    return out


def _two_digits(e: float) -> float:
    """A standard error to two significant digits."""
    if not (math.isfinite(e) and e > 0):
        return float(e)
    return float(f"{e:.2g}")


def format_value(v: float, e: float) -> str:
    """A value with its standard error, to the digits the error supports.

    Parameters
    ----------
    v, e : float
        Value and standard error (same unit).

    Returns
    -------
    str

    Examples
    --------
    >>> format_value(3.14159, 0.0123)
    '3.142 +- 0.012'
    >>> format_value(2.0, float("inf"))
    '2 +- inf'
    """
    if not math.isfinite(e) or e <= 0:
        return f"{v:.6g} +- {e:.3g}"
    digits = max(0, 1 - int(math.floor(math.log10(e))))
    if digits > 10 or abs(v) >= 1e7:
        return f"{v:.6g} +- {e:.2g}"
    return f"{v:.{digits}f} +- {e:.{digits}f}"


def _unit_of(name: str) -> str:
    """The unit of a fitted parameter from the key table ("AlO4.cq_mhz" -> "MHz"; "" when dimensionless)."""
    from ..model.schema import key_spec

    owner, _, key = name.rpartition(".")
    key = key.partition("[")[0]
    try:
        u = key_spec("measurement" if owner.startswith("measurement ") else "site", key).unit
    except (KeyError, ValueError):
        return ""
    return {"deg": "degrees"}.get(u, u or "")


def _rounded_errors(table) -> dict:
    out = {}
    for k, v in dict(table).items():
        out[k] = [_two_digits(float(x)) for x in v] if isinstance(v, (list, tuple)) else _two_digits(float(v))
    return out


@dataclass(frozen=True)
class PosteriorSummary:
    """Posterior samples of the free parameters (emcee) and their summary.

    Attributes
    ----------
    names : tuple of str
        The free parameters, in the order of the columns of ``samples``.
    median, low, high : tuple of float
        Median and 16 % / 84 % quantiles of each parameter (weights
        normalised to sum 1, as reported).
    samples : ndarray (n, p)
        The chain after burn-in, walkers merged (read-only).
    walkers, steps, burn : int
        Walkers, steps per walker and discarded steps per walker.
    autocorrelation_steps : tuple of float
        Integrated autocorrelation time of each parameter (steps).
    converged : bool
        The kept chain is at least 50 autocorrelation times long.
    acceptance : float
        Mean acceptance fraction.

    Examples
    --------
    >>> s = PosteriorSummary(("a",), (1.0,), (0.9,), (1.1,), np.zeros((4, 1)), 2, 4, 2, (1.0,), False, 0.4)
    >>> s.interval("a")
    (0.9, 1.1)
    """

    names: tuple
    median: tuple
    low: tuple
    high: tuple
    samples: np.ndarray
    walkers: int
    steps: int
    burn: int
    autocorrelation_steps: tuple
    converged: bool
    acceptance: float

    def __post_init__(self):
        a = np.array(self.samples, dtype=float)
        a.flags.writeable = False
        object.__setattr__(self, "samples", a)

    def interval(self, name: str) -> tuple[float, float]:
        """The 16 % and 84 % quantiles of one parameter.

        Parameters
        ----------
        name : str

        Returns
        -------
        tuple of 2 float

        Examples
        --------
        >>> s = PosteriorSummary(("a",), (1.0,), (0.9,), (1.1,), np.zeros((4, 1)), 2, 4, 2, (1.0,), True, 0.4)
        >>> s.interval("a")[1]
        1.1
        """
        k = self.names.index(name)
        return (self.low[k], self.high[k])

    def to_dict(self) -> dict:
        """The summary as plain JSON-ready values (without the samples).

        Returns
        -------
        dict

        Examples
        --------
        >>> s = PosteriorSummary(("a",), (1.0,), (0.9,), (1.1,), np.zeros((4, 1)), 2, 4, 2, (1.0,), True, 0.4)
        >>> s.to_dict()["converged"]
        True
        """
        return {"walkers": self.walkers, "steps": self.steps, "burn": self.burn,
                "autocorrelation_steps": [float(t) for t in self.autocorrelation_steps],
                "converged": self.converged, "acceptance": round(self.acceptance, 4)}


@dataclass(frozen=True)
class FitResult:
    """What a fit found.

    Attributes
    ----------
    model : Model
        The fitted model: free parameters replaced by their fitted values
        (ties kept), weights normalised to sum 1, each measurement's axis set
        to its data's (``points``, ``center_ppm``, ``width_ppm``) and its
        solved ``scale`` and ``baseline`` set, so that
        :func:`~powderspin.simulator.simulate` gives the fitted curve.
    names : tuple of str
        The free parameters (``"AlO4.cq_mhz"``, ``"measurement 1.gauss_hz"``).
    values, stderr : Mapping of str to float
        Fitted values and standard errors (weights normalised to sum 1).
    covariance : ndarray (p, p)
        Covariance of the reported values, in the order of ``names`` (inf on
        the diagonal where the data do not determine a parameter).
    correlation : ndarray (p, p)
        Correlation matrix of the free parameters, in the order of ``names``.
    success : bool
        The optimiser met its convergence test (False: it stopped early, e.g.
        at ``max_evaluations``; the values are then not a minimum).
    message : str
        The optimiser's verdict in words.
    n_evaluations : int
        Simulations of the model (every measurement) the fit made.
    reduced_chi_square, chi_square : float
        ``chi^2 / dof`` and ``chi^2 = sum ((data - fit) / sigma)^2`` over the
        fit regions.
    degrees_of_freedom : int
        Points in the fit regions less free and linear parameters.
    spectra : tuple of Spectrum
        The best fit of each measurement on its data axis (scale and
        baseline applied; site columns scaled).
    data : tuple
        The measured spectra (:class:`powderspin.io.spectra.MeasuredSpectrum`).
    data_paths : tuple of str or None
        Where each measured spectrum was read from.
    masks : tuple of ndarray of bool
        Which points of each measurement the fit used.
    noise : tuple of float
        The noise level sigma of each measurement (data units).
    noise_source : {"noise region", "residual"}
        Where sigma came from.
    scales, scale_stderr : tuple of float
        Each measurement's scale as written in ``model`` (data units per
        density per ppm, multiplied by the sum of the weights) and its error.
    baselines, baseline_stderr : tuple of tuple of float
        Each measurement's baseline coefficients (``u`` from -1 to 1 across
        the axis) and their errors.
    site_stderr, measurement_stderr : tuple of Mapping
        Standard errors by model-file key, per site and per measurement
        (``euler_deg`` as a list of 3, 0 for components that were fixed).
    warnings : tuple of str
        Plain-language warnings (parameters the data do not determine, an
        optimiser that stopped early, ...).
    notes : tuple of str
        What else the user should know (a held weight, a refined method, ...).
    time_s : float
        Wall time of the fit (s).
    starts, starts_at_best : int
        Least-squares starts and how many reached the best chi-square.
    posterior : PosteriorSummary or None
        The posterior samples, when asked for.
    minima : tuple of powderspin.fitting.search.Minimum
        After a global search: every distinct minimum within
        :data:`powderspin.fitting.search.MINIMA_MARGIN` of the lowest chi-square
        (lowest first, values folded), with the number of starts that ended
        in it.
    curvature : tuple of powderspin.fitting.curvature.CurvatureRow
        Predicted against actual chi-square changes at one standard error
        along each parameter and each principal direction.
    profile_intervals : Mapping of str to (float, float)
        Profile-likelihood intervals (chi-square + 1, the others
        re-optimised) where the quadratic picture failed (or all, when asked).
    derived : Mapping of str to (float, float)
        Quantities derived from the fitted values, with standard errors by
        the delta method: for each site with an EFG distribution its mean
        C_Q and mean P_Q = C_Q (1 + eta^2/3)^(1/2) (``"LABEL.mean_cq_mhz"``,
        ``"LABEL.mean_pq_mhz"``).
    excitation : Mapping
        With the pulses modelled: per measurement (index as text), per site label, the excited fraction,
        the population corrected for excitation (the normalised weight) and its error, and the apparent
        population the integrated intensities would give (see
        :func:`powderspin.fitting.fitter.excitation_report`); empty otherwise.

    Examples
    --------
    See :func:`powderspin.fitting.fitter.fit`.
    """

    model: Model
    names: tuple
    values: Mapping
    stderr: Mapping
    covariance: np.ndarray
    correlation: np.ndarray
    success: bool
    message: str
    n_evaluations: int
    reduced_chi_square: float
    chi_square: float
    degrees_of_freedom: int
    spectra: tuple
    data: tuple
    data_paths: tuple
    masks: tuple
    noise: tuple
    noise_source: str
    scales: tuple
    scale_stderr: tuple
    baselines: tuple
    baseline_stderr: tuple
    site_stderr: tuple
    measurement_stderr: tuple
    warnings: tuple
    notes: tuple
    time_s: float
    starts: int = 1
    starts_at_best: int = 1
    posterior: PosteriorSummary | None = None
    derived: Mapping = field(default_factory=dict)
    excitation: Mapping = field(default_factory=dict)
    minima: tuple = ()
    curvature: tuple = ()
    profile_intervals: Mapping = field(default_factory=dict)

    __reduce__ = reduce_through_init  # picklable: to and from Dask workers (powderspin.frozen)

    def __post_init__(self):
        for k in ("values", "stderr", "derived", "excitation", "profile_intervals"):
            object.__setattr__(self, k, MappingProxyType(dict(getattr(self, k))))
        for k in ("correlation", "covariance"):
            c = np.array(getattr(self, k), dtype=float)
            c.flags.writeable = False
            object.__setattr__(self, k, c)
        object.__setattr__(self, "site_stderr", tuple(MappingProxyType(dict(d)) for d in self.site_stderr))
        object.__setattr__(self, "measurement_stderr",
                           tuple(MappingProxyType(dict(d)) for d in self.measurement_stderr))

    @property
    def evaluations(self) -> int:
        """Same as :attr:`n_evaluations` (the name of earlier releases)."""
        return self.n_evaluations

    def residual(self, measurement: int = 0) -> np.ndarray:
        """Data minus fit of one measurement, on its whole axis (data units).

        Parameters
        ----------
        measurement : int, optional

        Returns
        -------
        numpy.ndarray

        Examples
        --------
        See :func:`powderspin.fitting.fitter.fit`.
        """
        return np.asarray(self.data[measurement].intensity) - self.spectra[measurement].intensity

    def summary(self) -> str:
        """The fitted values, errors and warnings as a few lines of text.

        Returns
        -------
        str

        Examples
        --------
        See :func:`powderspin.fitting.fitter.fit`.
        """
        lines = []
        w = max((len(n) for n in self.names), default=4)
        for n in self.names:
            v, e = self.values[n], self.stderr[n]
            unit = _unit_of(n)
            line = f"  {n:<{w}}  {format_value(v, e).replace(' +- ', ' ± ')}" + (f" {unit}" if unit else "")
            line += interval_text(n, self.posterior, self.profile_intervals)
            lines.append(line)
        head = (f"fit: reduced chi-square {self.reduced_chi_square:.4g} ({self.degrees_of_freedom} degrees of "
                f"freedom; noise from the {self.noise_source}), {self.n_evaluations} evaluations, "
                f"{self.time_s:.2f} s")
        if self.starts > 1:
            head += f", {self.starts_at_best} of {self.starts} starts reached the best fit"
        out = [head] + lines
        for n, (v, e) in self.derived.items():
            out.append(f"  {n:<{w}}  {format_value(v, e).replace(' +- ', ' ± ')}   (derived)")
        if self.posterior is not None:
            out.append(posterior_line(self.posterior))
        for j, sites in self.excitation.items():
            where = "" if len(self.excitation) == 1 and j == "0" else f" (measurement {int(j) + 1})"
            out.append(f"populations corrected for excitation{where}:")
            for label, d in sites.items():
                out.append(f"  {label:<{w}}  {format_value(d['population'], d['population_stderr'])}   excited "
                           f"fraction {d['excited_fraction']:.4g}; an ideal-excitation reading would say "
                           f"{format_value(d['apparent_population'], d['apparent_population_stderr'])}")
        out += [f"note: {t}" for t in self.notes]
        out += [f"warning: {t}" for t in self.warnings]
        return "\n".join(out) + "\n"

    def to_dict(self, path=None) -> dict:
        """The result as the nested dict of a result file: a model file with result tables.

        Parameters
        ----------
        path : str or pathlib.Path, optional
            Where the result file will be written: ``data`` paths are written
            relative to its folder.

        Returns
        -------
        dict
            :func:`powderspin.model.modelfile.model_to_dict` of the fitted
            model plus a ``stderr`` (and after sampling ``interval``) table in
            each fitted site and measurement, and ``[fit.result]``.

        See Also
        --------
        powderspin.io.results.write_result

        Examples
        --------
        See :func:`powderspin.io.results.write_result`.
        """
        d = model_to_dict(self.model)
        meas = d["measurement"] if isinstance(d["measurement"], list) else [d["measurement"]]
        base = Path(path).resolve().parent if path is not None else None
        full = _value_entries(d, meas)
        self._round_values(d, meas)
        rounded = _value_entries(d, meas)
        exact_values = {n: [rounded[n], v] for n, v in full.items() if n in rounded and rounded[n] != v}
        for j, t in enumerate(meas):
            if self.data_paths[j] is not None and base is not None:
                t["data"] = os.path.relpath(Path(self.data_paths[j]).resolve(), base)
            if self.measurement_stderr[j]:
                t["stderr"] = _rounded_errors(self.measurement_stderr[j])
        for i, t in enumerate(d["site"]):
            if self.site_stderr[i]:
                t["stderr"] = _rounded_errors(self.site_stderr[i])
        if self.posterior is not None:
            posterior_interval_tables(self.model, self.posterior, d, meas)
        fit = d.setdefault("fit", {})
        res: dict = {
            "success": bool(self.success),
            "message": str(self.message),
            "reduced_chi_square": float(f"{self.reduced_chi_square:.4g}"),
            "chi_square": float(f"{self.chi_square:.6g}"),
            "degrees_of_freedom": int(self.degrees_of_freedom),
            "noise_source": self.noise_source,
            "noise": [float(f"{s:.4g}") for s in self.noise],
            "evaluations": int(self.n_evaluations),
            "time_s": round(float(self.time_s), 3),
            "parameters": list(self.names),
            "correlation": [[round(float(v), 6) for v in row] for row in self.correlation],
            "scales": [float(s) for s in self.scales],
            "baselines": [list(b) for b in self.baselines],
            "warnings": list(self.warnings),
            "notes": list(self.notes),
        }
        if self.derived:
            res["derived"] = {n: round_to_error(v, e) for n, (v, e) in self.derived.items()}
            res["derived_stderr"] = {n: _two_digits(e) for n, (_, e) in self.derived.items()}
        if self.excitation:
            res["excitation"] = {j: {lab: dict(d) for lab, d in sites.items()} for j, sites in self.excitation.items()}
        if exact_values:  # read back by the model reader: simulating the file gives the fitted curve exactly
            res["exact_values"] = exact_values
        if self.starts > 1:
            res["starts"] = int(self.starts)
            res["starts_at_best"] = int(self.starts_at_best)
        res.update(search_tables(self.minima, self.curvature, self.profile_intervals, self.posterior))
        records = [getattr(s, "metadata", {}).get("processing") for s in self.data]
        if any(records):  # how raw data were processed, one table per measurement ({} for a spectrum file)
            res["processing"] = [json.loads(r) if r else {} for r in records]
        fit["result"] = res
        return d

    def _round_values(self, d: dict, meas: list) -> None:
        """Fitted values written to the digits their standard errors support (full values: the fit CSV)."""
        for n in self.names:
            try:
                a = self.model.address_of(n)
            except ValueError:
                continue
            target = d["site"][a.index] if a.table == "site" else meas[a.index]
            if a.key not in target:
                continue
            value = target[a.key]
            if a.item is not None and isinstance(value, list):
                value[a.item] = round_to_error(value[a.item], self.stderr[n])
            elif isinstance(value, float):
                target[a.key] = round_to_error(value, self.stderr[n])
        for j, t in enumerate(meas):  # the linear parameters alike
            if isinstance(t.get("scale"), float) and j < len(self.scale_stderr):
                t["scale"] = round_to_error(t["scale"], float(self.scale_stderr[j]))
            errs = self.baseline_stderr[j] if j < len(self.baseline_stderr) else ()
            if isinstance(t.get("baseline"), list) and len(errs) == len(t["baseline"]):
                t["baseline"] = [round_to_error(float(b), float(e)) for b, e in zip(t["baseline"], errs)]


def interval_text(name: str, posterior, profile_intervals) -> str:
    """The posterior median and 16-84 % interval and the profile interval of one parameter, as text for a summary.

    Parameters
    ----------
    name : str
    posterior : PosteriorSummary or None
    profile_intervals : Mapping of str to (float, float)

    Returns
    -------
    str
        Empty when there is neither.
    """
    line = ""
    if posterior is not None and name in posterior.names:
        lo, hi = posterior.interval(name)
        med = posterior.median[posterior.names.index(name)]
        line += f"   posterior median {med:.6g}, 16-84 %: [{lo:.6g}, {hi:.6g}]"
    if name in profile_intervals:
        a, b = profile_intervals[name]
        line += f"   profile interval [{a:.6g}, {b:.6g}]"
    return line


def posterior_line(p) -> str:
    """One line of a summary on a posterior sample: its size, autocorrelation and acceptance.

    Parameters
    ----------
    p : PosteriorSummary

    Returns
    -------
    str
    """
    return (f"posterior: {p.walkers} walkers x {p.steps} steps, first {p.burn} discarded; longest "
            f"autocorrelation time {max(p.autocorrelation_steps):.3g} steps; acceptance {p.acceptance:.2f}")


def search_tables(minima, curvature, profile_intervals, posterior) -> dict:
    """The ``[fit.result]`` entries of a global search, the curvature check and a posterior sample (1D and 2D fits).

    Parameters
    ----------
    minima : sequence of powderspin.fitting.search.Minimum
    curvature : sequence of powderspin.fitting.curvature.CurvatureRow
    profile_intervals : Mapping of str to (float, float)
    posterior : PosteriorSummary or None

    Returns
    -------
    dict
        ``profile_intervals``, ``quadratic_check``, ``minima`` and
        ``posterior``, each only when there is something to write.
    """
    res: dict = {}
    if profile_intervals:
        res["profile_intervals"] = {n: [float(a), float(b)] for n, (a, b) in profile_intervals.items()}
    if curvature:
        res["quadratic_check"] = [{"direction": c.label, "predicted": float(c.predicted),
                                   "minus": float(c.minus), "plus": float(c.plus), "quadratic": bool(c.quadratic)}
                                  for c in curvature]
    if minima:
        res["minima"] = [{"chi_square": float(mn.chi_square), "starts": int(mn.starts),
                          "values": {n: float(v) for n, v in mn.values.items()}} for mn in minima]
    if posterior is not None:
        res["posterior"] = posterior.to_dict()
    return res


def posterior_interval_tables(model: Model, post, d: dict, meas: list) -> None:
    """Write each sampled parameter's 16-84 % interval into an ``interval`` table of its site or measurement.

    Parameters
    ----------
    model : Model
        The fitted model (names to addresses).
    post : PosteriorSummary
    d : dict
        :func:`powderspin.model.modelfile.model_to_dict` of the model (changed in place).
    meas : list of dict
        Its measurement tables.
    """
    for k, n in enumerate(post.names):
        try:
            a = model.address_of(n)
        except ValueError:
            continue
        target = (d["site"][a.index] if a.table == "site" else meas[a.index]).setdefault("interval", {})
        pair = [float(post.low[k]), float(post.high[k])]
        if a.item is not None:
            e = target.setdefault("euler_deg", [[0.0, 0.0], [0.0, 0.0], [0.0, 0.0]])
            e[a.item] = pair
        else:
            target[a.key] = pair
