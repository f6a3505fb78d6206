"""What one page of the explorer holds: a model, its data, the current values, the curves, a fit and saving.

Nothing here knows about the browser: :class:`ExplorerState` takes text typed
into an entry and answers with the new curves or a one-line refusal, runs a fit
with a progress callback and a cancel flag, writes the current model, and makes
the figure and CSV for download.  :mod:`powderspin.explorer.page` puts it on a
Bokeh document; every browser tab gets its own state.

Values and ranges
-----------------
Every parameter a fit could vary (``free=True`` in
:data:`powderspin.model.schema.KEYS`) gets a control, free or fixed, except a
tied parameter (it follows its source).  Its name is the one fit results use
(``"Tet.cq_mhz"``, ``"measurement 1.gauss_hz"``).  An entry accepts any
value in the key's allowed range (the schema) and, for a free parameter,
within its ``min``/``max``; anything else is refused with that range.  The
slider spans a free parameter's ``min``/``max``; for a fixed one the schema
range is mostly far wider than any real value (C_Q up to 1000 MHz), so the
slider spans a window around the value (:func:`slider_window`) that grows when
the entry is set beyond it.

Data and scale
--------------
A measurement with data is simulated on the data's own axis (as a fit
does).  A model without a fitted ``scale``/``baseline`` is drawn with the
least-squares factor that best matches the data (shown on the page and
written with the model on saving), so that data and simulation overlay.
"""

from __future__ import annotations

import io
import math
import os
import threading
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from ..fitting.data import data_axis, data_items, read_measured
from ..model.values import ModelError, ParameterAddress, fittable_keys
from ..simulator import Simulator

__all__ = ["Control", "ExplorerState", "FitCancelled", "slider_window", "load_inputs"]

#: the order of a site's controls
_SITE_ORDER = ("weight", "shift_ppm", "cq_mhz", "eta_q", "span_ppm", "skew", "aniso_ppm", "eta_cs", "euler_deg",
               "lorentz_hz", "gauss_hz", "shift_fwhm_ppm", "czjzek_sigma_mhz")
_MEAS_ORDER = ("lorentz_hz", "gauss_hz", "shift_offset_ppm")


class FitCancelled(Exception):
    """Raised from the progress callback of a fit when its Cancel was pressed."""


@dataclass(frozen=True)
class Control:
    """One parameter's control: its name (as fit results spell it), address, unit, ranges and value.

    Attributes
    ----------
    name : str
        ``"Tet.cq_mhz"``, ``"Tet.euler_deg[1]"``, ``"measurement 1.gauss_hz"``.
    address : ParameterAddress
    unit : str
    low, high : float
        What the entry accepts (the free range, else the schema's range).
    low_open : bool
        The lower limit itself is refused.
    slider_low, slider_high : float
        The slider's span.
    free : bool
        Whether a fit varies it.
    """

    name: str
    address: ParameterAddress
    unit: str
    low: float
    high: float
    low_open: bool
    slider_low: float
    slider_high: float
    free: bool

    def range_text(self) -> str:
        """The accepted range as text.

        Examples
        --------
        >>> a = ParameterAddress("site", 0, "cq_mhz")
        >>> Control("A.cq_mhz", a, "MHz", 1.0, 8.0, False, 1.0, 8.0, True).range_text()
        '[1, 8]'
        """
        return f"{'(' if self.low_open else '['}{self.low:.10g}, {self.high:.10g}]"


def slider_window(key: str, value: float, low: float, high: float) -> tuple[float, float]:
    """The slider span of a fixed parameter: a window around its value, inside the allowed range.

    Parameters
    ----------
    key : str
        The model-file key.
    value : float
        The current value.
    low, high : float
        The allowed range.

    Returns
    -------
    tuple of 2 float

    Examples
    --------
    >>> slider_window("cq_mhz", 3.0, -1000.0, 1000.0)
    (0.0, 10.0)
    >>> slider_window("eta_q", 0.4, 0.0, 1.0)
    (0.0, 1.0)
    """
    a = abs(value)
    if key in ("cq_mhz", "czjzek_sigma_mhz"):
        lo, hi = (0.0, max(2 * a, 10.0)) if value >= 0 else (-max(2 * a, 10.0), 0.0)
    elif key in ("shift_ppm", "shift_offset_ppm"):
        half = max(0.5 * a, 50.0 if key == "shift_ppm" else 10.0)
        lo, hi = value - half, value + half
    elif key in ("span_ppm",):
        lo, hi = 0.0, max(2 * a, 200.0)
    elif key in ("aniso_ppm",):
        lo, hi = -max(2 * a, 200.0), max(2 * a, 200.0)
    elif key in ("lorentz_hz", "gauss_hz"):
        lo, hi = 0.0, max(4 * a, 2000.0)
    elif key == "shift_fwhm_ppm":
        lo, hi = 0.0, max(4 * a, 50.0)
    elif key == "weight":
        lo, hi = 0.0, max(2 * a, 1.0)
    elif key == "euler_deg":
        lo, hi = (0.0, 180.0) if 0.0 <= value <= 180.0 else (-360.0, 360.0)
    else:
        lo, hi = low, high
    return (max(lo, low), min(hi, high))


def load_inputs(model_path, data_paths=(), axis_unit: str | None = None):
    """Read a model file and its measured spectra; any problem is one exception with a one-line message.

    Parameters
    ----------
    model_path : str or pathlib.Path
    data_paths : sequence of path, optional
        One spectrum per measurement (overrides the model's ``data`` keys); by
        default the model's own ``data`` files, where it names them.
    axis_unit : {"ppm", "hz", "khz"}, optional
        Unit of a data file's axis column when the file does not name it.

    Returns
    -------
    model : Model
    data : list
        One :class:`~powderspin.io.spectra.MeasuredSpectrum` or None per measurement.
    paths : list
        The data file of each measurement (str) or None.
    warnings : list of str

    Raises
    ------
    powderspin.model.values.ModelError, powderspin.fitting.data.FitError, powderspin.io.spectra.DataError
        Bad model, a wrong number of data files, a missing or unreadable file.
    """
    from ..fitting.data import FitError
    from ..model.modelfile import load_model

    model = load_model(model_path)
    n = len(model.measurements)
    data_paths = list(data_paths or ())
    if data_paths and len(data_paths) != n:
        raise FitError(f"{len(data_paths)} data file(s) given for {n} measurement(s); give one per measurement, in "
                       "the order of the [[measurement]] tables")
    if data_paths:
        items = data_items(model, data_paths)
    elif all(m.data for m in model.measurements):
        items = data_items(model, None)
    else:  # data for some measurements only
        base = Path(model.source).parent if model.source else Path(".")
        items = [str(base / m.data) if m.data else None for m in model.measurements]
    data, paths, warnings = [], [], []
    for j, item in enumerate(items):
        if item is None:
            data.append(None)
            paths.append(None)
            continue
        spec, path, warns, notes = read_measured(item, model, j, axis_unit)
        data_axis(spec, model.nucleus.larmor_hz(model.measurements[j].field_tesla), f"measurement {j + 1}")
        data.append(spec)
        paths.append(str(Path(path).resolve()) if path else None)
        warnings.extend(warns + notes)
    return model, data, paths, warnings


def _controls(model) -> list[Control]:
    """The controls of a model's sites and measurements (broadening and referencing of each)."""
    free = {p.address: p for p in model.free}
    tied = {t.address for t in model.tied}
    out = []

    def add(addr):
        if addr in tied:
            return
        try:
            value = model.parameter_value(addr)
        except ModelError:
            return
        spec = addr.spec()
        if addr in free:
            p = free[addr]
            lo, hi, lopen = max(p.min, spec.low), min(p.max, spec.high), spec.low_open and p.min <= spec.low
            s_lo, s_hi = lo, hi
        else:
            lo, hi, lopen = spec.low, spec.high, spec.low_open
            s_lo, s_hi = slider_window(addr.key, value, lo, hi)
        out.append(Control(addr.name(model), addr, spec.unit, lo, hi, lopen, s_lo, s_hi, addr in free))

    quadrupolar = model.nucleus.is_quadrupolar
    site_keys = fittable_keys("site")
    for i, site in enumerate(model.sites):
        for key in _SITE_ORDER:
            if key not in site_keys:
                continue
            if key in ("cq_mhz", "eta_q") and not quadrupolar:
                continue
            if key == "czjzek_sigma_mhz" and site.czjzek_sigma_mhz == 0.0 and \
                    ParameterAddress("site", i, key) not in free:
                continue
            if key == "euler_deg":
                anisotropic = site.shift_form != "iso"
                variable = any(ParameterAddress("site", i, key, k) in free for k in range(3))
                if not (variable or any(site.euler_deg) or (quadrupolar and anisotropic)):
                    continue
                for k in range(3):
                    add(ParameterAddress("site", i, key, k))
                continue
            add(ParameterAddress("site", i, key))
    for j in range(len(model.measurements)):
        for key in _MEAS_ORDER:
            add(ParameterAddress("measurement", j, key))
    return out


class ExplorerState:
    """One page's model, data, current values and curves.

    Parameters
    ----------
    model : Model
    data : sequence of MeasuredSpectrum or None, optional
        One per measurement (None where there is none).
    data_paths : sequence of str or None, optional
        Where each spectrum was read from (for a fit and for saving).
    model_path : str, optional
        The model file (never overwritten by Save).

    Examples
    --------
    >>> import powderspin as ps
    >>> m = ps.make_model("27Al", {"field_tesla": 14.1, "spinning_hz": "inf", "points": 256},
    ...                   [{"label": "A", "shift_ppm": 60.0, "cq_mhz": 3.0}])
    >>> st = ExplorerState(m)
    >>> [c.name for c in st.controls][:3]
    ['A.weight', 'A.shift_ppm', 'A.cq_mhz']
    >>> st.set_text("A.cq_mhz", "4,0")
    "A.cq_mhz: '4,0' is not a number (MHz); allowed [-1000, 1000]"
    >>> st.set_text("A.cq_mhz", "4.5") is None, st.values["A.cq_mhz"]
    (True, 4.5)
    """

    def __init__(self, model, data=None, data_paths=None, model_path: str | None = None):
        n = len(model.measurements)
        self.base_model = model
        self.data = list(data) if data is not None else [None] * n
        self.data_paths = list(data_paths) if data_paths is not None else [None] * n
        self.model_path = model_path
        self.index = 0
        self.overrides: dict = {}  # field_tesla / spinning_hz of the shown measurement, when changed
        self.fit_result = None
        self._lock = threading.Lock()
        self._select(0, keep_values=False)
        self.last = self.curves()

    # -- building

    def _select(self, index: int, keep_values: bool) -> None:
        self.index = index
        if not keep_values:
            self.controls = _controls(self.base_model)
            self.by_name = {c.name: c for c in self.controls}
            self.values = {c.name: self.base_model.parameter_value(c.address) for c in self.controls}
        self._build()

    def _measurement_model(self):
        """The base model with the shown measurement's field and spinning overrides."""
        if not self.overrides:
            return self.base_model
        return self.base_model.with_measurement(self.index, **self.overrides)

    @property
    def shows_data(self) -> bool:
        """Whether the shown measurement has data at the field and rate it was recorded at."""
        return self.data[self.index] is not None and not self.overrides

    def _build(self) -> None:
        model = self._measurement_model()
        axis = None
        if self.shows_data:
            nu_ref = model.nucleus.larmor_hz(model.measurements[self.index].field_tesla)
            axis, _, _ = data_axis(self.data[self.index], nu_ref, f"measurement {self.index + 1}")
        # the current values decide producers and orientation sets, as a fit from them would
        start = model.with_parameters(self._address_values())
        self.sim = Simulator(start, self.index, axis=axis, parameters=[c.address for c in self.controls])
        self.model = model

    def _address_values(self) -> dict:
        return {c.address: self.values[c.name] for c in self.controls}

    # -- changing values

    def check_value(self, name: str, text) -> tuple[float | None, str | None]:
        """Parse and range-check one entry; returns (value, None) or (None, message).

        Parameters
        ----------
        name : str
        text : str or float

        Returns
        -------
        tuple
        """
        c = self.by_name.get(name)
        if c is None:
            return None, f"{name}: no such parameter on this page"
        unit = c.unit or "dimensionless"
        raw = str(text).strip()
        if raw == "":
            return None, f"{name}: empty; give a number ({unit}) in {c.range_text()}"
        try:
            v = float(raw)
        except ValueError:
            return None, f"{name}: {raw!r} is not a number ({unit}); allowed {c.range_text()}"
        if not math.isfinite(v):
            return None, f"{name}: {raw!r} is not a finite number; allowed {c.range_text()}"
        low_bad = v <= c.low if c.low_open else v < c.low
        if low_bad or v > c.high:
            what = "its free range (min, max of the model)" if c.free else "the allowed range"
            spec = c.address.spec()
            why = f" ({spec.why})" if spec.why and not c.free else ""
            return None, f"{name} = {v:g} is outside {what} {c.range_text()}{why}"
        return v, None

    def set_text(self, name: str, text) -> str | None:
        """Set one parameter from text; returns None when taken, else the one-line refusal (values unchanged).

        Parameters
        ----------
        name : str
        text : str or float

        Returns
        -------
        str or None
        """
        v, msg = self.check_value(name, text)
        if msg is not None:
            return msg
        old = self.values[name]
        self.values[name] = v
        try:
            self.last = self.curves()
        except (ModelError, ValueError) as e:
            self.values[name] = old
            return f"{name} = {v:g} refused: {e}"
        return None

    def set_measurement(self, index: int) -> str | None:
        """Show another measurement (site values are kept)."""
        if not 0 <= index < len(self.base_model.measurements):
            return f"measurement {index + 1}: the model has {len(self.base_model.measurements)}"
        overrides = self.overrides
        self.overrides = {}
        try:
            self._select(index, keep_values=True)
            self.last = self.curves()
        except (ModelError, ValueError) as e:
            self.overrides = overrides
            return str(e)
        return None

    def set_condition(self, key: str, text) -> str | None:
        """Change the shown measurement's field (``field_tesla``) or spinning rate (``spinning_hz``).

        Parameters
        ----------
        key : {"field_tesla", "spinning_hz"}
        text : str

        Returns
        -------
        str or None
            None when taken, else the one-line refusal.
        """
        from ..model.values import check_number

        name = f"measurement {self.index + 1}.{key}"
        raw = str(text).strip()
        if key == "spinning_hz" and raw.lower() in ("inf", "infinite"):
            v = math.inf
        else:
            try:
                v = float(raw)
            except ValueError:
                spec_range = "[0.1, 40]" if key == "field_tesla" else '0, [10, 200000] or "inf"'
                return f"{name}: {raw!r} is not a number; allowed {spec_range}"
            try:
                v = check_number(name, key, v, "measurement")
            except ModelError as e:
                return str(e)
        meas = self.base_model.measurements[self.index]
        overrides = dict(self.overrides)
        if getattr(meas, key) == v:
            overrides.pop(key, None)
        else:
            overrides[key] = v
        old = self.overrides
        self.overrides = overrides
        try:
            self._build()
            self.last = self.curves()
        except (ModelError, ValueError) as e:
            self.overrides = old
            self._build()
            return f"{name} = {raw} refused: {e}"
        return None

    # -- curves

    def curves(self) -> dict:
        """The shown curves: x in ppm and kHz, data, simulation, each site, residual, the scale used.

        Returns
        -------
        dict
            ``ppm``, ``khz``, ``total``, ``sites`` (list of arrays), ``labels``,
            ``data`` and ``residual`` (None without data), ``scale``.
        """
        with self._lock:
            spec = self.sim.spectrum(self._address_values())
        total = np.asarray(spec.intensity, dtype=float)
        sites = np.asarray(spec.site_intensities, dtype=float)
        data = residual = None
        scale = 1.0
        meas = self.sim.measurement
        if self.shows_data:
            data = np.asarray(self.data[self.index].intensity, dtype=float)
            if meas.scale == 1.0 and not meas.baseline:
                ss = float(total @ total)
                scale = float(total @ data) / ss if ss > 0 else 1.0
                total = total * scale
                sites = sites * scale
            residual = data - total
        return {"ppm": np.asarray(spec.ppm, dtype=float), "khz": np.asarray(spec.hz, dtype=float) / 1e3,
                "total": total, "sites": list(sites), "labels": list(spec.site_labels), "data": data,
                "residual": residual, "scale": scale, "notes": list(spec.metadata.get("notes", ()))}

    # -- the model as it stands

    def current_model(self, *, pin: bool = True):
        """The model at the current values (free parameters start there), ready to save.

        With ``pin`` the shown measurement's axis, orientation sets, rotor
        phases and data scale are written into it, so that simulating the
        saved file gives the curve on the page.

        Returns
        -------
        Model
        """
        model = self.model.with_parameters(self._address_values())
        values = self._address_values()
        free = tuple(replace(p, start=values.get(p.address, p.start)) for p in model.free)
        model = replace(model, free=free)
        if not pin:
            return model
        sim = self.sim
        ax = sim.axis
        changes = {"points": ax.points, "center_ppm": ax.center_hz / ax.nu_ref_hz * 1e6,
                   "width_ppm": ax.width_hz / ax.nu_ref_hz * 1e6}
        meas = model.measurements[self.index]
        sets = [s for s in sim.orientation_sets if s is not None]
        if meas.orientations == "auto" and sets:
            names = {s.name for s in sets}
            levels = [int(n.rsplit("-", 1)[1]) for n in names if n.startswith("tri-") and n.rsplit("-", 1)[1].isdigit()]
            if len(names) == 1:
                changes["orientations"] = next(iter(names))
            elif levels and len(levels) == len(names):
                changes["orientations"] = max(levels)
        phases = [p for p in sim.rotor_phases if p > 0]
        if meas.rotor_phases == "auto" and phases and len(set(phases)) == 1:
            changes["rotor_phases"] = phases[0]
        c = self.curves()
        if c["data"] is not None and meas.scale == 1.0 and not meas.baseline:
            changes["scale"] = c["scale"]
        return model.with_measurement(self.index, **changes)

    # -- fitting

    def run_fit(self, progress=None, cancel: threading.Event | None = None):
        """Fit the model from the current values, as ``powderspin fit`` does (the page's values are not changed).

        Safe to call from a worker thread: it reads the state and builds its
        own Simulators; :meth:`adopt_fit` then moves the values (on the page's
        own thread).

        Parameters
        ----------
        progress : callable, optional
            Subscriber of :mod:`powderspin.progress`.
        cancel : threading.Event, optional
            When set, the fit stops at its next evaluation with :class:`FitCancelled`.

        Returns
        -------
        FitResult

        Raises
        ------
        FitCancelled, powderspin.fitting.data.FitError
        """
        from ..fitting.data import FitError
        from ..fitting.fitter import fit

        if self.overrides:
            raise FitError("the fit uses the field and spinning rate the data were recorded at; set them back first")
        if any(d is None for d in self.data):
            raise FitError("every measurement needs data for a fit; give the spectra on the command line "
                           "(powderspin explore MODEL DATA ...) or as data = \"file\" in the model")
        if not self.base_model.free:
            raise FitError("the model has no free parameters: mark at least one as { start = ..., min = ..., "
                           "max = ... }")
        start = self._fit_start()

        def report(event):
            if cancel is not None and cancel.is_set():
                raise FitCancelled("fit cancelled")
            if progress is not None:
                progress(event)

        return fit(start, list(self.data), progress=report)

    def adopt_fit(self, result) -> None:
        """Take a fit's result: its model becomes the page's model and the controls move to the fitted values."""
        self.fit_result = result
        fitted = result.model
        self.base_model = fitted
        self.controls = _controls(fitted)
        self.by_name = {c.name: c for c in self.controls}
        self.values = {c.name: fitted.parameter_value(c.address) for c in self.controls}
        self._build()
        self.last = self.curves()

    def _fit_start(self):
        """The model a fit starts from: the base model when nothing moved, else the current values as starts."""
        base = self.base_model
        if all(base.parameter_value(c.address) == self.values[c.name] for c in self.controls):
            return base
        return self.current_model(pin=False)

    # -- files

    def save(self, path_text: str, *, replace_existing: bool = False) -> tuple[str | None, str]:
        """Write the current model (after a fit: the fitted model) as a model file.

        Parameters
        ----------
        path_text : str
            Where; must end in ``.toml``, in a folder that exists, and not be
            the model file or a data file.
        replace_existing : bool, optional
            Overwrite an existing file (the page's explicit confirmation).

        Returns
        -------
        (path or None, message)
            The path written and a confirmation, or None and the refusal.
        """
        from ..files import OutputExistsError
        from ..model.modelfile import write_model

        raw = str(path_text).strip()
        if not raw:
            return None, "save: give a file name ending in .toml"
        p = Path(os.path.expanduser(raw))  # a relative path is taken from the folder the server started in
        if p.suffix.lower() != ".toml":
            return None, f"save: {raw!r} must end in .toml (a model file)"
        if not p.parent.is_dir():
            return None, f"save: the folder {str(p.parent)!r} does not exist; give a path in an existing folder"
        inputs = [(Path(self.model_path), "the model file")] if self.model_path else []
        inputs += [(Path(x), "a data file") for x in self.data_paths if x]
        protect = [q for q, _ in inputs]
        for q, what in inputs:
            try:
                if p.resolve() == q.resolve():
                    return None, f"save: {raw!r} is an input of this page ({what}); choose another name"
            except OSError:
                pass
        if p.is_dir():
            return None, f"save: {raw!r} is a folder; give a file name ending in .toml"
        if p.exists() and not replace_existing:
            return None, f"save: {raw!r} exists; tick 'replace existing file' to overwrite it"
        try:
            model = self.current_model()
            model = self._with_data_paths(model, p)
            header = "# written by powderspin explore" + (" after a fit" if self.fit_result is not None else "")
            written = write_model(model, p, force=replace_existing, protect=protect, header=header)
        except OutputExistsError:
            return None, f"save: {raw!r} exists; tick 'replace existing file' to overwrite it"
        except (ModelError, OSError, ValueError) as e:
            return None, f"save: {e}"
        return written, f"saved {written}"

    def _with_data_paths(self, model, target: Path):
        """Data paths relative to the saved file; none for a measurement shown at another field or rate."""
        meas = list(model.measurements)
        for j, path in enumerate(self.data_paths):
            if self.overrides and j == self.index:
                meas[j] = replace(meas[j], data=None)
            elif path:
                try:
                    rel = os.path.relpath(path, target.resolve().parent)
                except ValueError:
                    rel = path
                meas[j] = replace(meas[j], data=rel)
        return replace(model, measurements=tuple(meas), source="")

    def csv_text(self, unit: str = "ppm") -> str:
        """The shown curves as CSV text (ppm, kHz, data, simulation, each site, residual).

        Returns
        -------
        str
        """
        c = self.curves()
        cols = {"ppm": c["ppm"], "khz": c["khz"]}
        if c["data"] is not None:
            cols["data"] = c["data"]
        cols["simulation"] = c["total"]
        for lab, y in zip(c["labels"], c["sites"]):
            cols[f"site {lab}"] = y
        if c["residual"] is not None:
            cols["residual"] = c["residual"]
        meas = self.sim.measurement
        head = [f"# powderspin explore: {self.base_model.nucleus.name}, {meas.field_tesla:g} T, spinning "
                f"{'inf' if math.isinf(meas.spinning_hz) else f'{meas.spinning_hz:g}'} Hz",
                f"# scale to data: {c['scale']:.10g}",
                ",".join(f'"{k}"' if "," in k else k for k in cols)]
        arr = np.column_stack(list(cols.values()))
        buf = io.StringIO()
        np.savetxt(buf, arr, delimiter=",", fmt="%.10g")
        return "\n".join(head) + "\n" + buf.getvalue()

    def figure_bytes(self, fmt: str, unit: str = "ppm") -> bytes:
        """The shown curves as a PNG or SVG figure (matplotlib).

        Parameters
        ----------
        fmt : {"png", "svg"}
        unit : {"ppm", "khz"}

        Returns
        -------
        bytes
        """
        from .figure import curves_figure

        fig = curves_figure(self.curves(), unit, title=self._title())
        buf = io.BytesIO()
        fig.savefig(buf, format=fmt, dpi=120 if fmt == "png" else None)
        return buf.getvalue()

    def _title(self) -> str:
        meas = self.sim.measurement
        rate = "static" if meas.spinning_hz == 0 else ("infinite rate" if math.isinf(meas.spinning_hz)
                                                      else f"{meas.spinning_hz / 1e3:g} kHz MAS")
        return f"{self.base_model.nucleus.name}, {meas.field_tesla:g} T, {rate}"
