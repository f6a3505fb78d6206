"""One spectrum of a series, fitted inside a Dask worker: the task, its inputs and what it sends back.

A task is a plain function of small frozen values (:class:`SeriesJob`,
:class:`FitOptions`, the model) so that Dask can ship it to any worker and
rerun it elsewhere when a worker is lost.  It never raises for a bad spectrum:
every error becomes the one-line ``status`` of its row.  It writes nothing;
the client writes each result atomically as it arrives (so workers need not
see the output folder).  Workers read the data files themselves, so on a
cluster the data (and the lineshape library) must be on a file system the
workers share, under the same paths.
"""

from __future__ import annotations

import functools
import math
import time
from dataclasses import dataclass, field, replace

from ..model.values import Model, ParameterAddress

__all__ = ["FitOptions", "SeriesJob", "TaskOutcome", "fit_one", "chain_start", "row_of", "result_toml_text",
           "store_for"]


@dataclass(frozen=True)
class FitOptions:
    """The fit options every spectrum of a series shares (those of :func:`powderspin.fitting.fitter.fit`).

    Examples
    --------
    >>> FitOptions(noise_region=(20.0, 10.0)).as_dict()["noise_region"]
    [20.0, 10.0]
    """

    regions: tuple | None = None
    noise_region: tuple | None = None
    baseline_order: int | None = None
    axis: str | None = None
    global_search: bool = False
    starts: int | None = None
    seed: int = 0
    max_evaluations: int | None = None

    def as_dict(self) -> dict:
        """The options as plain values (for the content hash).

        Returns
        -------
        dict
        """
        return {"regions": None if self.regions is None else [list(r) for r in self.regions],
                "noise_region": None if self.noise_region is None else list(self.noise_region),
                "baseline_order": self.baseline_order, "axis": self.axis, "global_search": self.global_search,
                "starts": self.starts, "seed": self.seed, "max_evaluations": self.max_evaluations}


@dataclass(frozen=True)
class SeriesJob:
    """What a task needs to know about its spectrum.

    Parameters
    ----------
    index : int
        Position in the series (as listed).
    path : str
        The data file (absolute; read by the worker).
    result_path : str
        Where the client will write the result file (for the relative
        ``data`` path inside it).
    input_hash : str
        The content hash (:func:`powderspin.series.inputs.input_hash`).
    library : str or None
        The lineshape library folder (None: kernels kept in memory only).
    """

    index: int
    path: str
    result_path: str
    input_hash: str
    library: str | None = None


@dataclass(frozen=True)
class TaskOutcome:
    """What a task sends back: the row's values, the result files' text, and the start of the next fit in a chain.

    Attributes
    ----------
    index : int
    ok : bool
        The fit converged.
    status : str
        ``"ok"`` or the one-line error.
    row : dict
        Column -> value (free parameters, their errors, derived quantities,
        fractions, reduced chi-square, time); empty when no fit was made.
    toml_text, csv_text : str or None
        The result file and the fit CSV (None when no fit was made).
    carry : dict or None
        Parameter name -> value to start the next fit of a chain from
        (the fitted values, or what this task started from when it failed).
    fitted : bool
        A fit was run (False for unreadable data).
    time_s : float
    """

    index: int
    ok: bool
    status: str
    row: dict = field(default_factory=dict)
    toml_text: str | None = None
    csv_text: str | None = None
    carry: dict | None = None
    fitted: bool = False
    time_s: float = 0.0


def one_line(e: BaseException) -> str:
    """An exception as one line of text (its type when the message is empty)."""
    text = " ".join(str(e).split())
    return text or type(e).__name__


@functools.cache
def store_for(library: str | None):
    """The kernel store of this worker process for a library folder (None: kernels in memory only).

    One store per folder and process, kept for the process's life, so that the
    fits of a series in one worker reuse the kernels in memory; workers share
    them through the folder.

    Parameters
    ----------
    library : str or None

    Returns
    -------
    powderspin.disorder.store.KernelStore

    Examples
    --------
    >>> store_for(None) is store_for(None), store_for(None).library is None
    (True, True)
    """
    from ..disorder.store import KernelStore, default_kernel_store

    return KernelStore(None) if library is None else default_kernel_store(library)


def _weight_free(model: Model) -> set[int]:
    return {p.address.index for p in model.free if p.address.table == "site" and p.address.key == "weight"}


def chain_start(model: Model, carry: dict | None) -> Model:
    """The model with its free parameters starting from ``carry`` (clipped to their bounds).

    Parameters
    ----------
    model : Model
    carry : dict or None
        Parameter name -> value (weights on the model's own scale, see
        :func:`_carry_of`); None leaves the model as it is.

    Returns
    -------
    Model

    Examples
    --------
    >>> import powderspin as ps
    >>> m = ps.make_model("31P", {"field_tesla": 9.4}, [{"label": "P",
    ...                   "shift_ppm": {"start": 0.0, "min": -5.0, "max": 5.0}}])
    >>> chain_start(m, {"P.shift_ppm": 7.0}).free[0].start
    5.0
    """
    if not carry:
        return model
    free = []
    values = {}
    for p in model.free:
        v = carry.get(p.name)
        if v is None or not math.isfinite(v):
            free.append(p)
            continue
        v = min(max(float(v), p.min), p.max)
        free.append(replace(p, start=v))
        values[p.address] = v
    out = replace(model, free=tuple(free))
    return out.with_parameters(values) if values else out


def _carry_of(start: Model, result) -> dict:
    """The fitted values as starts for the next fit: weights put back on the start model's scale.

    Weights are reported normalised; the scale absorbs their sum, so the start
    of the next fit keeps the reference weight (a weight that is not free, or
    the first free one, which the fit holds) at the start model's value.
    """
    carry = {n: float(v) for n, v in result.values.items()}
    free_w = _weight_free(start)
    if free_w:
        norm = [s.weight for s in result.model.sites]
        fixed = [i for i in range(len(start.sites)) if i not in free_w and norm[i] > 0]
        held = [p for p in start.free if p.address.table == "site" and p.address.key == "weight"][0]
        ref = fixed[0] if fixed else held.address.index
        ref_value = start.parameter_value(ParameterAddress("site", ref, "weight"))
        if norm[ref] > 0:
            c = ref_value / norm[ref]
            for i in free_w:
                carry[f"{start.sites[i].label}.weight"] = norm[i] * c
    return carry


def row_of(result, start: Model) -> dict:
    """A result's columns of the series table.

    Free parameters and their standard errors (``<name>``, ``<name>_stderr``;
    weights normalised), the derived quantities of distributions, each site's
    fraction when any weight is free (``<label>.fraction``, for the sites
    whose weight is not itself a free parameter column), the reduced
    chi-square and the fit's time.

    Parameters
    ----------
    result : FitResult
    start : Model

    Returns
    -------
    dict
    """
    row: dict = {}
    for n in result.names:
        row[n] = float(result.values[n])
        row[f"{n}_stderr"] = float(result.stderr[n])
    for n, (v, e) in result.derived.items():
        row[n] = float(v)
        row[f"{n}_stderr"] = float(e)
    if _weight_free(start) and len(start.sites) > 1:
        for i, s in enumerate(result.model.sites):
            if f"{s.label}.weight" in result.values:
                continue
            row[f"{s.label}.fraction"] = float(s.weight)
            row[f"{s.label}.fraction_stderr"] = float(result.site_stderr[i].get("weight", 0.0))
    row["reduced_chi_square"] = float(result.reduced_chi_square)
    row["time_s"] = round(float(result.time_s), 3)
    return row


def result_toml_text(result, path, series: dict) -> str:
    """The per-spectrum result file: the usual fit result plus a ``[fit.result.series]`` table.

    Parameters
    ----------
    result : FitResult
    path : str
        Where the file goes (for the relative ``data`` path).
    series : dict
        The series record: ``input_sha256``, ``status``, ``row`` and ``carry``.

    Returns
    -------
    str
    """
    import tomli_w

    d = result.to_dict(path)
    d["fit"]["result"]["series"] = series
    head = ("# powderspin series: the fit result of one spectrum (a model file: simulate it to get the fitted "
            "curve);\n# [fit.result.series] holds the series' record of it (content hash, table row)\n")
    return head + tomli_w.dumps(d)


def fit_one(job: SeriesJob, model: Model, options: FitOptions, carry=None) -> TaskOutcome:
    """Fit one spectrum of a series (the Dask task).

    Parameters
    ----------
    job : SeriesJob
    model : Model
        The series' model with free parameters.
    options : FitOptions
    carry : dict, TaskOutcome or None
        The start of a chained fit: a previous task's outcome (its
        ``carry``) or parameter values; None starts from the model.

    Returns
    -------
    TaskOutcome
        Never raises for a bad spectrum or a failed fit: the error is the
        status.  The compiled kernels run on one thread.

    Examples
    --------
    >>> import powderspin as ps
    >>> m = ps.make_model("31P", {"field_tesla": 9.4}, [{"label": "P",
    ...                   "shift_ppm": {"start": 0.0, "min": -5.0, "max": 5.0}}])
    >>> out = fit_one(SeriesJob(0, "/nonexistent/a.csv", "/tmp/a.toml", "0" * 64), m, FitOptions())
    >>> out.ok, out.status
    (False, "data file '/nonexistent/a.csv' (measurement 1) does not exist")
    """
    from ..fitting.fitter import fit
    from ..io.results import fit_csv_text

    if isinstance(carry, TaskOutcome):
        carry = carry.carry
    t0 = time.perf_counter()
    start = chain_start(model, carry)
    try:
        result = fit(start, [job.path], regions=options.regions, noise_region=options.noise_region,
                     baseline_order=options.baseline_order, axis=options.axis, global_search=options.global_search,
                     starts=options.starts, seed=options.seed, max_evaluations=options.max_evaluations,
                     threads=1, kernel_store=store_for(job.library))
    except (KeyboardInterrupt, SystemExit):
        raise
    except Exception as e:  # a bad spectrum must never stop the series: its error is its row's status
        return TaskOutcome(job.index, False, one_line(e), carry=carry, fitted=True,
                           time_s=time.perf_counter() - t0)
    row = row_of(result, model)
    status = "ok" if result.success else one_line(result.message)
    next_carry = _carry_of(start, result) if result.success else carry
    record = {"input_sha256": job.input_hash, "status": status, "row": row, "carry": next_carry or {}}
    toml_text = result_toml_text(result, job.result_path, record)
    return TaskOutcome(job.index, result.success, status, row, toml_text, fit_csv_text(result), next_carry, True,
                       time.perf_counter() - t0)
