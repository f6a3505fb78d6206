"""Fitting a series of spectra on Dask: independent or chained fits, results written as they arrive, resumable.

The flow of :func:`fit_series`:

1. **Checks first.** The model (it must have free parameters), the spectra
   (:func:`~powderspin.series.inputs.collect_items`), the series variable and
   the output folder are checked before anything is computed or written.
2. **Content hashes.** Each spectrum's hash covers the model, the data file's
   bytes, every fit option, the package version and, in a chain, the hash of
   the spectrum before it.  A result file in the folder whose recorded hash
   matches is reused (its row is read back); the rest are fitted.  ``force``
   refits everything.
3. **Dask.** One task per spectrum (:func:`~powderspin.series.tasks.fit_one`)
   on a ``distributed`` client: the one given, one connected to a scheduler
   address, or a ``LocalCluster`` of single-threaded worker processes (one per
   core by default).  The model is scattered to the workers once; a task
   ships only its small job record.  In a chained series each task depends on
   the previous one's future, so Dask runs them in order and reruns a lost
   one.  When a site has an EFG distribution, the first spectrum is fitted
   alone first, so that its kernel grid is built once into the shared
   lineshape library before the other workers read it.
4. **As each result arrives** its result file and fit CSV are written
   atomically (the client writes; workers need not see the folder), its row
   is filled and ``table.csv`` is rewritten (atomically, at most every few
   seconds, and at the end).  A failed spectrum gets its one-line error in its
   row; the others go on.  ``trends.png`` is drawn at the end.

References
----------
M. Rocklin, "Dask: parallel computation with blocked algorithms and task
scheduling", Proc. 14th Python in Science Conf. (2015) 130 (the scheduler).
"""

from __future__ import annotations

import contextlib
import csv
import io
import logging
import math
import os
import time
import tomllib
from dataclasses import dataclass
from pathlib import Path

from ..model.modelfile import model_to_dict
from ..progress import emit
from .inputs import SeriesError, collect_items, file_digest, input_hash, numeric_variable
from .tasks import FitOptions, SeriesJob, TaskOutcome, fit_one, one_line

__all__ = ["fit_series", "SeriesResult", "SeriesRow", "series_client", "table_csv_text", "MARKER", "TABLE_NAME",
           "TRENDS_NAME", "worker_environment", "pre_spawn_environment", "dask_map"]

#: the file that marks a folder as a series' output (it may then be refilled)
MARKER = ".powderspin-series"
TABLE_NAME = "table.csv"
TRENDS_NAME = "trends.png"
#: seconds between rewrites of table.csv while the series runs
TABLE_INTERVAL_S = 5.0
#: Dask settings of the LocalCluster's workers: no statistical profiler (it samples every thread's stack every
#: 10 ms, and each sample takes the GIL from the running fit; the dashboard's profile pages are empty then), and
#: Ctrl-C left to the client (powderspin.series.worker_setup)
WORKER_CONFIG = {"distributed.worker.profile.enabled": False,
                 "distributed.worker.preload": ["powderspin.series.worker_setup"]}


@dataclass(frozen=True)
class SeriesRow:
    """One spectrum's row of the series table.

    Attributes
    ----------
    file : str
        The data file as listed.
    variables : tuple of (str, str)
        The series variables (manifest columns).
    status : str
        ``"ok"`` or the one-line error.
    values : tuple of (str, float)
        Column -> number (free parameters, ``_stderr`` columns, derived
        quantities, fractions, ``reduced_chi_square``, ``time_s``).
    reused : bool
        Read back from a result file of an earlier run (not fitted now).
    """

    file: str
    variables: tuple
    status: str
    values: tuple = ()
    reused: bool = False

    @property
    def ok(self) -> bool:
        """The fit succeeded."""
        return self.status == "ok"

    def get(self, name: str, default=math.nan) -> float:
        """One column's number (``default`` when the row has none)."""
        return dict(self.values).get(name, default)


@dataclass(frozen=True)
class SeriesResult:
    """What a series run produced.

    Attributes
    ----------
    rows : tuple of SeriesRow
        One per spectrum, in the order listed.
    parameters : tuple of str
        The free parameters (names as in fit results).
    variable : str or None
        The series variable (x axis of the trends).
    columns : tuple of str
        The columns of ``table.csv``.
    output_dir : pathlib.Path
    fitted, reused, failed : int
        Spectra fitted in this run, reused from an earlier run, failed.
    files : tuple of pathlib.Path
        ``table.csv`` and (when drawn) ``trends.png``.
    dashboard : str or None
        The Dask dashboard's address, when the cluster had one.

    Examples
    --------
    See :func:`fit_series`.
    """

    rows: tuple
    parameters: tuple
    variable: str | None
    columns: tuple
    output_dir: Path
    fitted: int
    reused: int
    failed: int
    files: tuple
    dashboard: str | None = None

    def column(self, name: str) -> list:
        """One column of the table, one entry per row (NaN where a row has no number).

        Parameters
        ----------
        name : str

        Returns
        -------
        list of float
        """
        return [r.get(name) for r in self.rows]

    def summary(self) -> str:
        """One line: how many spectra were fitted, reused and failed."""
        n = len(self.rows)
        return (f"series: {n} spectra, {n - self.failed} ok, {self.failed} failed ({self.fitted} fitted now, "
                f"{self.reused} reused from earlier runs); table {self.output_dir / TABLE_NAME}")


def pre_spawn_environment() -> dict:
    """Dask's environment for new worker processes, less ``MALLOC_TRIM_THRESHOLD_`` (it made every fit 1.6x dearer).

    ``distributed``'s nanny sets the variables of its ``distributed.nanny.pre-spawn-environ`` setting before it
    starts a worker process; by default they include ``MALLOC_TRIM_THRESHOLD_=65536``, which returns freed memory
    to the system sooner.  Setting that threshold turns off glibc's dynamic mmap threshold (the mallopt(3) manual
    page: setting any of M_TRIM_THRESHOLD, M_TOP_PAD, M_MMAP_THRESHOLD or M_MMAP_MAX does; from memory), so every
    array above 128 kB is then mapped afresh and its pages faulted in and zeroed each time it is made.  A fit
    makes many such temporaries: in the series benchmark's fit the worker took 20 times the minor page faults and
    1.6 times the CPU time of the same fit in the main process (``benchmarks/bench_series.py`` prints both).  The
    other variables (one thread for OpenMP, MKL and OpenBLAS) are kept.

    Returns
    -------
    dict

    Examples
    --------
    >>> "MALLOC_TRIM_THRESHOLD_" in pre_spawn_environment()
    False
    """
    import dask

    env = dict(dask.config.get("distributed.nanny.pre-spawn-environ", default={}) or {})
    env.pop("MALLOC_TRIM_THRESHOLD_", None)
    return env


def worker_environment() -> dict:
    """Environment of the worker processes a series starts: compiled kernels on one thread, sleeping waits.

    Returns
    -------
    dict
        ``NUMBA_NUM_THREADS=1`` and ``OMP_NUM_THREADS=1`` (each worker runs one
        fit at a time on one core, so workers do not fight over cores),
        ``OMP_WAIT_POLICY=PASSIVE``, and ``POWDERSPIN_CACHE`` when set here.

    Examples
    --------
    >>> worker_environment()["NUMBA_NUM_THREADS"]
    '1'
    """
    env = {"NUMBA_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "OMP_WAIT_POLICY": "PASSIVE"}
    if os.environ.get("POWDERSPIN_CACHE"):
        env["POWDERSPIN_CACHE"] = os.environ["POWDERSPIN_CACHE"]
    return env


class _CancelRaceFilter(logging.Filter):
    """Drops one known-harmless log record of ``distributed``: Ctrl-C while the main thread waits on the client.

    ``distributed.utils.sync`` schedules a ``cancel`` callback when the wait is
    interrupted; if the interrupt lands before the awaited future exists, the
    callback raises a NameError that the event loop logs with a traceback.
    Nothing is lost (the command is stopping anyway), so the record is noise
    that would hide the one line the user should read.
    """

    def filter(self, record: logging.LogRecord) -> bool:
        exc = record.exc_info[1] if record.exc_info else None
        if not isinstance(exc, NameError):
            return True
        tb = exc.__traceback__
        while tb is not None and tb.tb_next is not None:
            tb = tb.tb_next
        code = tb.tb_frame.f_code if tb is not None else None
        return not (code is not None and code.co_name == "cancel"
                    and Path(code.co_filename).parts[-2:] == ("distributed", "utils.py"))


@contextlib.contextmanager
def _quiet_cancel_race():
    """While a client is open, the event loop's logger leaves out the race described in :class:`_CancelRaceFilter`."""
    log = logging.getLogger("tornado.application")
    flt = _CancelRaceFilter()
    log.addFilter(flt)
    try:
        yield
    finally:
        log.removeFilter(flt)


@contextlib.contextmanager
def series_client(client=None, *, workers: int | None = None, scheduler: str | None = None):
    """A ``distributed.Client`` for a series (see :func:`_series_client`), with the cancel race kept out of the log."""
    with _quiet_cancel_race(), _series_client(client, workers=workers, scheduler=scheduler) as c:
        yield c


@contextlib.contextmanager
def _series_client(client=None, *, workers: int | None = None, scheduler: str | None = None):
    """A ``distributed.Client`` for a series: the one given, one at a scheduler address, or a new LocalCluster.

    Parameters
    ----------
    client : distributed.Client, optional
        Used as it is (not closed afterwards).
    workers : int, optional
        Worker processes of a new LocalCluster (default: one per core), each
        with one thread.
    scheduler : str, optional
        Address of a running scheduler (``tcp://host:8786``).

    Yields
    ------
    distributed.Client
    """
    if client is not None:
        yield client
        return
    from distributed import Client

    if scheduler is not None:
        try:
            c = Client(scheduler, timeout="20s")
        except (OSError, TimeoutError) as e:
            raise SeriesError(f"--scheduler {scheduler!r}: cannot connect ({' '.join(str(e).split())[:200]}); "
                              "start one with 'dask scheduler' or check the address") from None
        try:
            yield c
        finally:
            c.close()
        return
    import dask
    from distributed import LocalCluster

    n = workers if workers is not None else (os.cpu_count() or 1)
    # ":0": any free port, so that several series (or users) on one machine do not collide.  WORKER_CONFIG: fewer
    # wake-ups of each worker's event-loop thread, which otherwise takes the GIL from the fit 100 times a second.
    # pre_spawn_environment: without the malloc setting that made every fit in a worker 1.6x dearer
    spawn = {"distributed.nanny.pre-spawn-environ": pre_spawn_environment()}
    with dask.config.set(WORKER_CONFIG), dask.config.set(spawn):
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, silence_logs=logging.ERROR,
                               dashboard_address=":0", env=worker_environment())
    try:
        c = Client(cluster)
        try:
            yield c
        finally:
            c.close()
    finally:
        cluster.close()


def dask_map(client):
    """A ``map(function, items)`` that runs on a Dask client, in the items' order.

    The one way independent evaluations run on Dask outside a series:
    ``fit(..., map_starts=...)`` (``fit --global --workers N``) and
    ``plan(..., map_candidates=...)`` (``plan --workers N``).

    Parameters
    ----------
    client : distributed.Client

    Returns
    -------
    callable
        ``run(function, items, on_result=None) -> list``: one task per item;
        the results in the order of the items.  ``on_result(k, value)``, when
        given, is called here as each result arrives (in any order), e.g. for
        a progress bar.

    Examples
    --------
    >>> from distributed import Client
    >>> with Client(processes=False, n_workers=1, threads_per_worker=1, dashboard_address=":0") as c:
    ...     dask_map(c)(abs, [-1, 2, -3])
    [1, 2, 3]
    """
    def run(function, items, on_result=None):
        futures = client.map(function, list(items), pure=False)
        if on_result is None:
            return client.gather(futures)
        from distributed import as_completed

        where = {f.key: k for k, f in enumerate(futures)}
        out = [None] * len(futures)
        for f in as_completed(futures):
            k = where[f.key]
            out[k] = f.result()
            on_result(k, out[k])
        return out

    return run


def _format_number(v) -> str:
    if isinstance(v, str):
        return v
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    return f"{v:.10g}"


def table_csv_text(result_rows, columns, variables) -> str:
    """The series table as CSV text: ``file``, the series variables, then the columns.

    Parameters
    ----------
    result_rows : sequence of SeriesRow
    columns : sequence of str
        Numeric columns (parameters, ``_stderr``, derived, fractions,
        ``reduced_chi_square``) in order; ``status`` and ``time_s`` go last.
    variables : sequence of str
        The manifest's variable columns.

    Returns
    -------
    str

    Examples
    --------
    >>> r = SeriesRow("a.csv", (("t", "300"),), "ok", (("A.cq_mhz", 2.5), ("A.cq_mhz_stderr", 0.01)))
    >>> print(table_csv_text([r], ["A.cq_mhz", "A.cq_mhz_stderr"], ["t"]), end="")
    file,t,A.cq_mhz,A.cq_mhz_stderr,status,time_s
    a.csv,300,2.5,0.01,ok,
    """
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["file", *variables, *columns, "status", "time_s"])
    for r in result_rows:
        vals = dict(r.values)
        v = dict(r.variables)
        w.writerow([r.file, *(v.get(c, "") for c in variables), *(_format_number(vals.get(c)) for c in columns),
                    r.status, _format_number(vals.get("time_s"))])
    return buf.getvalue()


def _check_folder(out: Path, force: bool) -> None:
    if out.exists() and not out.is_dir():
        raise SeriesError(f"-o {str(out)!r} is a file; give a folder for the series' results")
    if out.is_dir() and any(out.iterdir()) and not (out / MARKER).exists():
        raise SeriesError(f"-o {str(out)!r} holds files a series did not write; give a new or empty folder (a series "
                          "folder is refilled only when it holds the series marker file)")
    probe = out
    while not probe.exists() and probe != probe.parent:
        probe = probe.parent
    if not os.access(probe, os.W_OK):
        raise SeriesError(f"-o {str(out)!r} cannot be written (no permission in {str(probe)!r})")


def _stored(path: Path, wanted: str):
    """The series record of an earlier result file when its hash is ``wanted`` (else None)."""
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
        rec = doc["fit"]["result"]["series"]
    except (OSError, ValueError, KeyError, TypeError):
        return None
    if not isinstance(rec, dict) or rec.get("input_sha256") != wanted:
        return None
    return rec


def _write_atomic(path: Path, text: str) -> None:
    from ..files import write_text_atomic

    write_text_atomic(path, text, force=True, role="series result")


def fit_series(model, files=(), output_dir=None, *, manifest=None, variable: str | None = None, chain: bool = False,
               client=None, workers: int | None = None, scheduler: str | None = None, force: bool = False,
               regions=None, noise_region=None, baseline_order=None, axis: str | None = None,
               global_search: bool = False, starts: int | None = None, seed: int = 0,
               max_evaluations: int | None = None, library=None, plot: bool = True, progress=None,
               on_dashboard=None) -> SeriesResult:
    """Fit one model to a series of spectra on Dask; write a table, per-spectrum results and the trends.

    Parameters
    ----------
    model : Model or str or pathlib.Path
        A model with free parameters (or its file).
    files : sequence of str or path, optional
        Data files or glob patterns, in series order.
    output_dir : str or path
        The results folder: ``table.csv``, ``trends.png`` and per spectrum
        ``<stem>.toml`` (the usual result file) and ``<stem>.csv`` (data, fit,
        residual).  It must be new, empty, or a folder of an earlier series.
    manifest : str or path, optional
        A CSV with a ``file`` column and series-variable columns (instead of
        ``files``).
    variable : str, optional
        The series variable (a manifest column; default the first): x axis of
        the trends and the order of a chain.
    chain : bool, optional
        Each fit starts from the previous spectrum's result (in the order of
        the series variable, else as listed) instead of the model's start.
    client : distributed.Client, optional
        Run on this client.
    workers : int, optional
        Worker processes of the LocalCluster started otherwise (default one
        per core; one thread each).
    scheduler : str, optional
        Connect to a running scheduler at this address instead.
    force : bool, optional
        Refit every spectrum, even those with a valid earlier result.
    regions, noise_region, baseline_order, axis, global_search, starts, seed, max_evaluations
        As :func:`powderspin.fitting.fitter.fit`, the same for every spectrum.
    library : str or path or False, optional
        The lineshape library folder shared by the workers (default
        ``$POWDERSPIN_CACHE``, else the user cache folder); False keeps
        kernels in each worker's memory.
    plot : bool, optional
        Draw ``trends.png``.
    progress : callable, optional
        Subscriber of the progress protocol: stage ``"series"`` (``done``
        spectra finished of ``total``; ``label`` "F failed, R running";
        ``value`` the failures).
    on_dashboard : callable, optional
        Called with the Dask dashboard's address when the cluster has one.

    Returns
    -------
    SeriesResult

    Raises
    ------
    powderspin.series.inputs.SeriesError
        Bad files, manifest, variable or output folder (nothing is written).
    powderspin.fitting.data.FitError
        A model without free parameters.

    See Also
    --------
    powderspin.fitting.fitter.fit : one spectrum.
    powderspin.plotting.series.plot_trends : the trend figure.

    References
    ----------
    M. Rocklin, Proc. 14th Python in Science Conf. (2015) 130 (Dask).

    Examples
    --------
    Three synthetic 31P lines whose shift moves (made here, seeded noise),
    fitted on an in-process Dask client:

    >>> import tempfile, pathlib, numpy as np, powderspin as ps
    >>> from distributed import Client
    >>> from powderspin.io.spectra import write_spectrum_text
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> for k, shift in enumerate([1.0, 2.0, 3.0]):
    ...     t = ps.make_model("31P", {"field_tesla": 9.4, "points": 256, "center_ppm": 0.0, "width_ppm": 40.0},
    ...                       [{"label": "P", "shift_ppm": shift, "lorentz_hz": 300.0}])
    ...     s = ps.simulate(t)
    ...     y = s.intensity + np.random.default_rng(k).normal(0.0, 0.002, s.hz.size)
    ...     _ = write_spectrum_text(d / f"s{k}.csv", ps.MeasuredSpectrum(s.hz, s.ppm, y, None, s.nu_ref_hz, "syn"))
    >>> start = ps.make_model("31P", {"field_tesla": 9.4}, [{"label": "P", "lorentz_hz": 300.0,
    ...                       "shift_ppm": {"start": 0.0, "min": -10.0, "max": 10.0}}])
    >>> with Client(processes=False, n_workers=1, threads_per_worker=1, dashboard_address=None) as c:
    ...     r = ps.fit_series(start, [str(d / "s*.csv")], d / "out", client=c, plot=False)
    >>> [round(v, 1) for v in r.column("P.shift_ppm")], r.failed
    ([1.0, 2.0, 3.0], 0)
    """
    from ..fitting.fitter import _free_parameters
    from ..simulator import as_model

    if output_dir is None:
        raise SeriesError("give the output folder (-o DIR)")
    model = as_model(model, "series")
    free, _ = _free_parameters(model)
    names = [p.name for p in model.free]
    out = Path(output_dir)
    items, var_columns, variable = collect_items(files, manifest, variable, out)
    _check_folder(out, force)
    if workers is not None and (isinstance(workers, bool) or int(workers) != workers or workers < 1):
        raise SeriesError(f"--workers {workers!r}: give a whole number of worker processes, at least 1")
    options = FitOptions(None if regions is None else tuple(tuple(float(x) for x in r) for r in regions),
                         None if noise_region is None else tuple(float(x) for x in noise_region),
                         baseline_order, axis, bool(global_search), starts, int(seed), max_evaluations)
    if library is False:
        lib = None
    else:
        from ..disorder.library import LineshapeLibrary

        lib = str(LineshapeLibrary(library).path)
    # -- the order of a chain: by the series variable when it is a number, else as listed
    order = list(range(len(items)))
    xs = numeric_variable(items, variable)
    if chain and xs is not None:
        order.sort(key=lambda i: xs[i])
    model_dict = model_to_dict(model)
    opt_dict = dict(options.as_dict(), chain=bool(chain))
    hashes: list[str] = [""] * len(items)
    previous = None
    for i in order:
        hashes[i] = input_hash(model_dict, file_digest(items[i].path), opt_dict, previous if chain else None)
        previous = hashes[i]
    # -- what is done already
    out.mkdir(parents=True, exist_ok=True)
    (out / MARKER).write_text("This folder holds the results of a powderspin series; a rerun refills it.\n")
    rows: list[SeriesRow | None] = [None] * len(items)
    carries: list[dict | None] = [None] * len(items)
    reused = 0
    for i, it in enumerate(items):
        rec = None if force else _stored(out / f"{it.stem}.toml", hashes[i])
        if rec is not None:
            vals = tuple((k, float(v)) for k, v in rec.get("row", {}).items())
            rows[i] = SeriesRow(it.label, it.variables, str(rec.get("status", "ok")), vals, reused=True)
            carries[i] = dict(rec.get("carry", {})) or None
            reused += 1
    todo = [i for i in order if rows[i] is None]
    failed = sum(1 for r in rows if r is not None and not r.ok)
    done = len(items) - len(todo)
    state = {"last_table": time.monotonic()}
    columns_seen: dict[str, None] = {}
    for n in names:
        columns_seen[n] = None
        columns_seen[f"{n}_stderr"] = None

    def columns() -> list[str]:
        cols = dict(columns_seen)
        for r in rows:
            if r is not None:
                for k, _ in r.values:
                    if k != "time_s":
                        cols.setdefault(k, None)
        rest = [c for c in cols if c != "reduced_chi_square"]
        return rest + ["reduced_chi_square"]

    def write_table() -> Path:
        shown = [r if r is not None else SeriesRow(it.label, it.variables, "not fitted yet")
                 for r, it in zip(rows, items)]
        p = out / TABLE_NAME
        _write_atomic(p, table_csv_text(shown, columns(), var_columns))
        state["last_table"] = time.monotonic()
        return p

    emit(progress, "series", done, len(items), label=f"{failed} failed", unit="spectra", value=failed)
    dashboard = None
    fitted = 0
    if todo:
        with series_client(client, workers=workers, scheduler=scheduler) as c:
            dashboard = _dashboard(c)
            if dashboard and on_dashboard is not None:
                on_dashboard(dashboard)
            from distributed import as_completed

            # a key of its own (hash=False): an earlier run with the same model may be releasing its copy
            model_f = c.scatter(model, broadcast=True, hash=False)

            def job(i):
                return SeriesJob(i, items[i].path, str((out / f"{items[i].stem}.toml").resolve()), hashes[i], lib)

            index_of = {}

            def submit(i, start):
                key = f"powderspin-series-{hashes[i][:16]}-{i}"
                index_of[key] = i
                return c.submit(fit_one, job(i), model_f, options, start, key=key, pure=False)

            futures = []
            pending = list(todo)
            pilot = None
            if any(s.has_efg_distribution for s in model.sites) or any(p.address.key == "czjzek_sigma_mhz"
                                                                         for p in model.free):
                pilot = pending.pop(0)  # its kernel grid is built once, into the shared library, before the rest
            ac = as_completed()
            prev = None
            if chain:
                for i in order:
                    if rows[i] is not None:  # reused: the chain goes on from its stored result
                        prev = carries[i] if carries[i] is not None else prev
                        continue
                    f = submit(i, prev)
                    futures.append(f)
                    ac.add(f)
                    prev = f
                pending = []
            elif pilot is not None:
                f = submit(pilot, None)
                futures.append(f)
                ac.add(f)
            else:
                for i in pending:
                    f = submit(i, None)
                    futures.append(f)
                    ac.add(f)
                pending = []
            for f in ac:
                try:
                    outcome: TaskOutcome = f.result()
                except (KeyboardInterrupt, SystemExit):
                    raise
                except Exception as e:  # Dask gave up on the task (its workers kept dying, a lost dependency)
                    outcome = TaskOutcome(index_of[f.key], False, f"Dask could not run this fit: {one_line(e)}")
                i = outcome.index
                it = items[i]
                if outcome.toml_text is not None:
                    _write_atomic(out / f"{it.stem}.toml", outcome.toml_text)
                    _write_atomic(out / f"{it.stem}.csv", outcome.csv_text)
                vals = dict(outcome.row)
                vals.setdefault("time_s", round(outcome.time_s, 3))
                rows[i] = SeriesRow(it.label, it.variables, outcome.status, tuple(vals.items()))
                fitted += int(outcome.fitted)
                failed += int(not rows[i].ok)
                done += 1
                if pending:  # the pilot is back: the kernels are in the library; now the rest
                    for k in pending:
                        g = submit(k, None)
                        futures.append(g)
                        ac.add(g)
                    pending = []
                running = _running(c, len(items) - done)
                emit(progress, "series", done, len(items), label=f"{failed} failed, {running} running", unit="spectra",
                     value=failed)
                if time.monotonic() - state["last_table"] > TABLE_INTERVAL_S:
                    write_table()
    files_written = [write_table()]
    result_rows = tuple(rows)
    if plot:
        from ..plotting.series import save_trends

        files_written.append(save_trends(result_rows, names, variable, xs, out / TRENDS_NAME))
    return SeriesResult(result_rows, tuple(names), variable, tuple(columns()), out, fitted, reused, failed,
                        tuple(files_written), dashboard)


def _dashboard(c) -> str | None:
    try:
        info = c.scheduler_info()
        if "dashboard" in info.get("services", {}):
            return c.dashboard_link
    except Exception:  # the address is a courtesy
        return None
    return None


def _running(c, remaining: int) -> int:
    try:
        return min(remaining, sum(len(v) for v in c.processing().values()))
    except Exception:  # a courtesy for the progress bar
        return 0
