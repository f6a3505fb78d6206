"""One browser tab of the explorer: a Bokeh document around an :class:`~powderspin.explorer.state.ExplorerState`.

Layout (top to bottom): a strip with the file name, the measurement choice,
field and spinning-rate entries and the ppm/kHz switch; the spectrum (data,
simulation, each site) over the residual beside a panel of parameter
controls (per parameter: its name, a slider, a number entry and a line for
refusals); a strip with Fit, Cancel and the fit's progress and results; a
strip with Save and the downloads.

Every number entry is an HTML ``input`` whose ``aria-label`` is the
parameter's name as fit results spell it (``Tet.cq_mhz``); the field and
rate entries are labelled ``field_tesla`` and ``spinning_hz`` (they belong to
the measurement shown).  Bokeh draws widgets inside shadow roots, so a
small script sets the labels on the inputs once the views exist.

Named models a test (or a script) may read back in the page with
``Bokeh.documents[0].get_model_by_name(...)``: ``curves`` (columns ``x``,
``data``, ``simulation``, ``residual``, ``site_0`` ...), ``fit_values``
(``name``, ``value``, ``stderr`` after a fit), ``download`` (the last
download: ``name``, ``mime``, ``b64``), ``status`` and ``msg:NAME`` (the
inline messages).
"""

from __future__ import annotations

import base64
import math
import threading
import time
from html import escape

import numpy as np
from bokeh.events import DocumentReady
from bokeh.layouts import column, row
from bokeh.models import (
    Button,
    Checkbox,
    ColumnDataSource,
    CustomJS,
    Div,
    InlineStyleSheet,
    RadioButtonGroup,
    Range1d,
    Select,
    Slider,
    Span,
    TextInput,
)
from bokeh.plotting import figure

from ..fitting.result import format_value
from ..progress import ProgressEvent
from .palette import (
    ACCENT,
    COMPONENT_COLOURS,
    DATA_COLOUR,
    ERROR_COLOUR,
    PANEL_BACKGROUND,
    RESIDUAL_COLOUR,
    SIMULATION_COLOUR,
)
from .state import ExplorerState, FitCancelled

__all__ = ["build_page", "LABEL_SCRIPT"]

#: sets aria-label on the <input> of every entry (tags ["ps-entry", NAME]) and on slider handles
LABEL_FUNCTION = """
function label_inputs() {
  let n = 0;
  for (const view of Bokeh.index.all_views()) {
    const tags = view.model.tags;
    if (!tags || tags.length < 2) continue;
    if (tags[0] === "ps-entry" && view.input_el != null) {
      view.input_el.setAttribute("aria-label", tags[1]);
      view.input_el.setAttribute("inputmode", "decimal");
      n += 1;
    } else if (tags[0] === "ps-slider" && view.shadow_el != null) {
      for (const h of view.shadow_el.querySelectorAll("[role=slider]")) {
        h.setAttribute("aria-label", tags[1] + " slider");
      }
    }
  }
  document.body.dataset.psLabelled = String(n);
  return n;
}
"""

#: label once the views exist (and again shortly after, for views built late)
LABEL_SCRIPT = LABEL_FUNCTION + """
label_inputs();
for (const ms of [100, 400, 1000, 2500]) { setTimeout(label_inputs, ms); }
"""

#: a slider whose span changed draws its handle anew: label it again after that
_RELABEL_SCRIPT = LABEL_FUNCTION + "setTimeout(label_inputs, 0);"

_DOWNLOAD_SCRIPT = """
const d = source.data;
if (d.b64 == null || d.b64.length === 0 || !d.b64[0]) return;
const bin = atob(d.b64[0]);
const bytes = new Uint8Array(bin.length);
for (let i = 0; i < bin.length; i++) { bytes[i] = bin.charCodeAt(i); }
const url = URL.createObjectURL(new Blob([bytes], {type: d.mime[0]}));
const a = document.createElement("a");
a.href = url;
a.download = d.name[0];
document.body.appendChild(a);
a.click();
setTimeout(() => { URL.revokeObjectURL(url); a.remove(); }, 1000);
"""

#: a moving stripe while a fit runs (its length is unknown in advance)
_BUSY_CSS = f"""
.ps-busy {{ height: 4px; width: 100%; background: linear-gradient(90deg, transparent 0%, {ACCENT} 50%,
  transparent 100%); background-size: 40% 100%; background-repeat: no-repeat; animation: ps-run 1.2s linear
  infinite; margin-bottom: 3px; }}
@keyframes ps-run {{ from {{ background-position: -40% 0; }} to {{ background-position: 140% 0; }} }}
"""

_MSG_STYLE = {"color": ERROR_COLOUR, "font-size": "12px", "margin": "0 0 4px 4px"}
_OK_STYLE = {"color": ACCENT, "font-size": "12px"}


def _fmt(v: float) -> str:
    return "inf" if math.isinf(v) else f"{v:.10g}"


class _Page:
    """The widgets of one tab and their callbacks (all run on the document's thread, except the fit)."""

    def __init__(self, doc, state: ExplorerState, title: str):
        self.doc = doc
        self.state = state
        self.title = title
        self.unit = "ppm"
        self.syncing = False
        self.fit_thread = None
        self.cancel = threading.Event()
        self.sliders: dict = {}
        self.entries: dict = {}
        self.messages: dict = {}

    # -- building

    def build(self):
        st = self.state
        self.status = Div(text="", name="status", styles=_OK_STYLE, html_attributes={"role": "status"})
        head = Div(text=f"<b>powderspin explore</b> &middot; {escape(self.title)}",
                   styles={"font-size": "16px", "color": ACCENT})
        strip = [head]
        n_meas = len(st.base_model.measurements)
        if n_meas > 1:
            self.meas_select = Select(title="measurement", value="1", options=[str(j + 1) for j in range(n_meas)],
                                      width=110, name="measurement-select")
            self.meas_select.on_change("value", self._on_measurement)
            strip.append(self.meas_select)
        meas = st.sim.measurement
        self.field_entry = self._entry("field_tesla", _fmt(meas.field_tesla), "field (T)")
        self.rate_entry = self._entry("spinning_hz", _fmt(meas.spinning_hz), "spinning (Hz)")
        self.field_entry.on_change("value", lambda a, o, n: self._on_condition("field_tesla", n))
        self.rate_entry.on_change("value", lambda a, o, n: self._on_condition("spinning_hz", n))
        self.cond_msg = Div(text="", name="msg:conditions", styles=_MSG_STYLE, html_attributes={"role": "alert"})
        self.unit_switch = RadioButtonGroup(labels=["ppm", "kHz"], active=0, name="unit-switch")
        self.unit_switch.on_change("active", self._on_unit)
        strip += [self.field_entry, self.rate_entry, self.unit_switch]
        caution = Div(text="Simulated rates say nothing about what a rotor can take: never exceed the rated "
                           "spinning rate of your rotor, cap and probe, and follow your laboratory's rules.",
                      styles={"font-size": "11px", "color": "#555", "max-width": "520px"})

        self.source = ColumnDataSource(self._columns(st.last), name="curves")
        self._plots()
        controls = self._control_panel()
        fit_strip = self._fit_strip()
        file_strip = self._file_strip()
        left = column(self.plot, self.resid_plot, fit_strip, self.fit_out, file_strip, self.file_msg)
        page = column(row(*strip), self.cond_msg, caution, row(left, controls), self.status,
                      styles={"background": PANEL_BACKGROUND, "padding": "10px"})
        self.doc.add_root(page)
        for source in (self.fit_values, self.download):  # read by the page's scripts (and tests)
            self.doc.add_root(source)
        self.doc.title = f"powderspin explore: {self.title}"
        self.doc.js_on_event(DocumentReady, CustomJS(code=LABEL_SCRIPT))
        self._show_notes(st.last)

    def _entry(self, key: str, value: str, title: str) -> TextInput:
        """An entry for the shown measurement's field or rate (aria-label ``field_tesla``, ``spinning_hz``)."""
        return TextInput(value=value, title=title, width=120, tags=["ps-entry", key], name=f"entry:{key}")

    def _plots(self):
        tools = "xpan,xwheel_zoom,box_zoom,reset,save"
        x = self.source.data["x"]
        hi, lo = float(np.max(x)), float(np.min(x))
        self.x_range = Range1d(start=hi, end=lo, reset_start=hi, reset_end=lo)  # start > end: reversed axis
        p = figure(height=380, width=720, x_range=self.x_range, tools=tools, toolbar_location="above",
                   name="spectrum-plot")
        p.background_fill_color = "#fffdf8"
        p.border_fill_color = PANEL_BACKGROUND
        p.grid.grid_line_color = "#e6e0d4"
        has_data = self.state.data[self.state.index] is not None
        self.data_glyph = p.line("x", "data", source=self.source, color=DATA_COLOUR, line_width=1.2,
                                 legend_label="data", name="data-line")
        self.data_glyph.visible = has_data
        self.site_glyphs = []
        labels = self.state.last["labels"]
        for k, lab in enumerate(labels if len(labels) > 1 else []):  # one site: its component is the simulation
            g = p.line("x", f"site_{k}", source=self.source, color=COMPONENT_COLOURS[k % len(COMPONENT_COLOURS)],
                       line_width=1.1, line_dash="dashed", legend_label=f"site {lab}")
            self.site_glyphs.append(g)
        p.line("x", "simulation", source=self.source, color=SIMULATION_COLOUR, line_width=2.0,
               legend_label="simulation", name="simulation-line")
        p.legend.location = "top_left"
        p.legend.click_policy = "hide"
        p.legend.background_fill_alpha = 0.6
        p.yaxis.axis_label = "intensity"
        p.xaxis.axis_label = "shift / ppm"
        r = figure(height=150, width=720, x_range=self.x_range, tools=tools, toolbar_location=None,
                   name="residual-plot")
        r.background_fill_color = "#fffdf8"
        r.border_fill_color = PANEL_BACKGROUND
        r.grid.grid_line_color = "#e6e0d4"
        r.line("x", "residual", source=self.source, color=RESIDUAL_COLOUR, line_width=1.0)
        r.add_layout(Span(location=0.0, dimension="width", line_color="#999", line_width=0.8))
        r.yaxis.axis_label = "residual"
        r.xaxis.axis_label = "shift / ppm"
        r.visible = has_data
        self.plot, self.resid_plot = p, r

    def _control_panel(self):
        st = self.state
        rows = []
        current = None
        for c in st.controls:
            owner = c.name.rpartition(".")[0]
            if owner != current:
                current = owner
                what = "measurement" if c.address.table == "measurement" else "site"
                rows.append(Div(text=f"<b>{escape(owner if what == 'measurement' else 'site ' + owner)}</b>",
                                styles={"color": ACCENT, "margin-top": "6px"}))
            rows.append(self._control_row(c))
        tied = self.state.base_model.tied
        if tied:
            rows.append(Div(text="<b>tied</b><br>" + "<br>".join(
                f"{escape(t.name)} follows {escape(t.source_name)}" for t in tied),
                styles={"color": ACCENT, "margin-top": "6px", "font-size": "12px"}, name="tied-note"))
        return column(*rows, width=460, height=560,
                      styles={"overflow-y": "auto", "overflow-x": "hidden", "padding-left": "12px"}, name="controls")

    def _control_row(self, c):
        v = self.state.values[c.name]
        lo, hi = min(c.slider_low, v), max(c.slider_high, v)
        if not hi > lo:
            hi = lo + 1.0
        slider = Slider(start=lo, end=hi, value=v, step=(hi - lo) / 1000.0, title=None, show_value=False,
                        width=140, tags=["ps-slider", c.name], name=f"slider:{c.name}")
        entry = TextInput(value=_fmt(v), width=100, tags=["ps-entry", c.name], name=f"entry:{c.name}")
        label = Div(text=f"{escape(c.name.rpartition('.')[2])}" + (f" <small>({c.unit})</small>" if c.unit else "")
                    + (" <small>&#9679; free</small>" if c.free else ""), width=140)
        msg = Div(text="", name=f"msg:{c.name}", styles=_MSG_STYLE, html_attributes={"role": "alert"}, width=420)
        slider.on_change("value", lambda a, o, n, name=c.name: self._on_slider(name, n))
        slider.js_on_change("end", CustomJS(code=_RELABEL_SCRIPT))
        slider.js_on_change("start", CustomJS(code=_RELABEL_SCRIPT))
        entry.on_change("value", lambda a, o, n, name=c.name: self._on_entry(name, n))
        self.sliders[c.name], self.entries[c.name], self.messages[c.name] = slider, entry, msg
        return column(row(label, slider, entry), msg)

    def _fit_strip(self):
        self.fit_button = Button(label="Fit", button_type="primary", width=90, name="fit-button",
                                 disabled=not (self.state.base_model.free and all(
                                     d is not None for d in self.state.data)))
        self.cancel_button = Button(label="Cancel", width=90, disabled=True, name="cancel-button")
        self.progress = Div(text="", name="fit-progress", width=480, html_attributes={"role": "status"},
                            stylesheets=[InlineStyleSheet(css=_BUSY_CSS)])
        self.fit_out = Div(text="", name="fit-results", width=720)
        self.fit_values = ColumnDataSource({"name": [], "value": [], "stderr": []}, name="fit_values")
        self.fit_button.on_click(self._on_fit)
        self.cancel_button.on_click(self._on_cancel)
        return row(self.fit_button, self.cancel_button, self.progress)

    def _file_strip(self):
        self.save_path = TextInput(placeholder="path of the model file to write (.toml)", width=330,
                                   tags=["ps-entry", "save path"], name="entry:save path")
        self.replace_box = Checkbox(label="replace existing file", active=False, name="replace-existing")
        save = Button(label="Save model", width=110, name="save-button")
        save.on_click(self._on_save)
        self.file_msg = Div(text="", name="msg:save", styles=_MSG_STYLE, html_attributes={"role": "alert"},
                            width=720)
        self.download = ColumnDataSource({"name": [], "mime": [], "b64": []}, name="download")
        self.download.js_on_change("data", CustomJS(args={"source": self.download}, code=_DOWNLOAD_SCRIPT))
        buttons = []
        for fmt, label in (("png", "PNG"), ("svg", "SVG"), ("csv", "CSV")):
            b = Button(label=f"Download {label}", width=120, name=f"download-{fmt}")
            b.on_click(lambda f=fmt: self._on_download(f))
            buttons.append(b)
        return column(row(self.save_path, self.replace_box, save), row(*buttons))

    # -- drawing

    def _columns(self, c: dict) -> dict:
        x = c["khz"] if self.unit == "khz" else c["ppm"]
        nan = np.full(x.shape, np.nan)
        cols = {"x": x, "simulation": c["total"],
                "data": c["data"] if c["data"] is not None else nan,
                "residual": c["residual"] if c["residual"] is not None else nan}
        for k, y in enumerate(c["sites"]):
            cols[f"site_{k}"] = y if len(c["sites"]) > 1 else nan
        return cols

    def _redraw(self, reset_range: bool = False):
        c = self.state.last
        cols = self._columns(c)
        old = self.source.data
        if not reset_range and set(cols) == set(old) and np.array_equal(np.asarray(old["x"]), cols["x"]):
            # only the curves that changed go to the browser (the axis and the data stay)
            changed = {k: v for k, v in cols.items() if k not in ("x", "data")}
            self.source.data.update(changed)
        else:
            self.source.data = cols
        has_data = c["data"] is not None
        self.data_glyph.visible = has_data
        self.resid_plot.visible = has_data
        if reset_range:
            hi, lo = float(np.max(cols["x"])), float(np.min(cols["x"]))
            self.x_range.update(start=hi, end=lo, reset_start=hi, reset_end=lo)
        label = "frequency offset / kHz" if self.unit == "khz" else "shift / ppm"
        self.plot.xaxis.axis_label = label
        self.resid_plot.xaxis.axis_label = label
        self._show_notes(c)

    def _show_notes(self, c):
        """The status line: what the page shows and the simulation's notes (set only when it changes: a new
        text makes the browser lay the page out again, which costs more than the redraw itself)."""
        bits = []
        if c["data"] is not None:
            bits.append("simulation scaled to the data by least squares")
        elif self.state.data[self.state.index] is not None:
            bits.append("data hidden: they were recorded at another field or spinning rate")
        bits += c.get("notes", [])[:3]
        text = " &middot; ".join(escape(b) for b in bits)
        if self.status.text != text:
            self.status.text = text

    # -- callbacks

    def _busy(self, where) -> bool:
        if self.fit_thread is not None:
            where.text = "a fit is running: wait for it or press Cancel"
            return True
        return False

    def _apply(self, name: str, text) -> bool:
        msg_div = self.messages[name]
        if self._busy(msg_div):
            return False
        try:
            msg = self.state.set_text(name, text)
        except Exception as e:  # never let one value stop the page
            msg = f"{name}: {e}"
        text = "" if msg is None else escape(msg)  # the message quotes what was typed: never HTML
        if msg_div.text != text:
            msg_div.text = text
        if msg is None:
            self._redraw()
            return True
        return False

    def _on_slider(self, name, value):
        if self.syncing:
            return
        if self._apply(name, value):
            self._sync(name, entry=_fmt(self.state.values[name]))

    def _on_entry(self, name, text):
        if self.syncing:
            return
        if self._apply(name, text):
            self._sync(name, slider=self.state.values[name])

    def _sync(self, name, entry=None, slider=None):
        self.syncing = True
        try:
            if entry is not None:
                self.entries[name].value = entry
            if slider is not None:
                s = self.sliders[name]
                if slider < s.start or slider > s.end:
                    lo, hi = min(s.start, slider), max(s.end, slider)
                    s.update(start=lo, end=hi, step=(hi - lo) / 1000.0)
                s.value = slider
        finally:
            self.syncing = False

    def _sync_all(self):
        for name in self.entries:
            v = self.state.values.get(name)
            if v is not None:
                self._sync(name, entry=_fmt(v), slider=v)
                self.messages[name].text = ""

    def _on_condition(self, key, text):
        if self.syncing or self._busy(self.cond_msg):
            return
        try:
            msg = self.state.set_condition(key, text)
        except Exception as e:
            msg = f"{key}: {e}"
        self.cond_msg.text = "" if msg is None else escape(msg)
        if msg is None:
            self._redraw(reset_range=True)

    def _on_measurement(self, attr, old, new):
        if self._busy(self.cond_msg):
            return
        msg = self.state.set_measurement(int(new) - 1)
        self.cond_msg.text = "" if msg is None else escape(msg)
        if msg is None:
            meas = self.state.sim.measurement
            self.syncing = True
            try:
                self.field_entry.value = _fmt(meas.field_tesla)
                self.rate_entry.value = _fmt(meas.spinning_hz)
            finally:
                self.syncing = False
            self._sync_all()
            self._redraw(reset_range=True)

    def _on_unit(self, attr, old, new):
        self.unit = "khz" if new == 1 else "ppm"
        self._redraw(reset_range=True)

    def _on_fit(self):
        if self.fit_thread is not None:
            return
        self.cancel.clear()
        self.fit_button.disabled = True
        self.cancel_button.disabled = False
        self.progress.text = "<div class='ps-busy'></div>fit: starting"
        self.fit_out.text = ""
        doc = self.doc
        last = [0.0]

        def progress(event: ProgressEvent):
            now = time.monotonic()
            if now - last[0] < 0.15:
                return
            last[0] = now
            if event.stage == "fit":
                chi = "" if math.isnan(event.value) else f", lowest chi-square {event.value:.5g}"
                text = f"fit: {event.done} evaluations{chi}"
            elif event.total:
                text = f"{event.description}: {event.done} of {event.total} {event.unit}"
            else:
                text = f"{event.description}: {event.done} {event.unit}"
            later(lambda t=text: self.fit_thread is not None
                  and setattr(self.progress, "text", "<div class='ps-busy'></div>" + escape(t)))

        def later(fn):
            try:
                doc.add_next_tick_callback(fn)
            except Exception:  # the tab was closed: nobody to tell
                self.cancel.set()

        def work():
            try:
                result = self.state.run_fit(progress=progress, cancel=self.cancel)
            except FitCancelled:
                later(lambda: self._fit_done(None, "fit cancelled; the values are unchanged"))
            except Exception as e:  # shown on the page; the server goes on
                later(lambda m=f"fit refused: {e}": self._fit_done(None, m))
            else:
                later(lambda: self._fit_done(result, None))

        self.fit_thread = threading.Thread(target=work, name="powderspin-explore-fit", daemon=True)
        self.fit_thread.start()

    def _on_cancel(self):
        self.cancel.set()
        self.progress.text = "<div class='ps-busy'></div>fit: cancelling"

    def _fit_done(self, result, message):
        self.fit_thread = None
        self.fit_button.disabled = False
        self.cancel_button.disabled = True
        if result is None:
            self.progress.text = escape(message)
            return
        try:
            self.state.adopt_fit(result)
        except Exception as e:
            self.progress.text = escape(f"fit finished but its values could not be shown: {e}")
            return
        self.progress.text = (f"fit done: reduced chi-square {result.reduced_chi_square:.4g}, "
                              f"{result.n_evaluations} evaluations, {result.time_s:.2f} s"
                              + ("" if result.success else escape(f" (stopped early: {result.message})")))
        names = list(result.names)
        self.fit_values.data = {"name": names, "value": [float(result.values[n]) for n in names],
                                "stderr": [float(result.stderr[n]) for n in names]}
        rows = "".join(f"<tr><td>{escape(n)}</td><td style='padding-left:12px'>"
                       f"{format_value(result.values[n], result.stderr[n])}</td></tr>" for n in names)
        extra = "".join(f"<div style='color:{ERROR_COLOUR}'>warning: {escape(w)}</div>" for w in result.warnings)
        extra += "".join(f"<div style='color:#555'>note: {escape(w)}</div>" for w in result.notes)
        self.fit_out.text = f"<table>{rows}</table>{extra}"
        self._sync_all()
        self._redraw()

    def _on_save(self):
        path, msg = self.state.save(self.save_path.value, replace_existing=bool(self.replace_box.active))
        self.file_msg.styles = _OK_STYLE if path is not None else _MSG_STYLE
        self.file_msg.text = escape(msg)
        if path is not None:
            self.replace_box.active = False

    def _on_download(self, fmt):
        try:
            if fmt == "csv":
                payload, mime = self.state.csv_text(self.unit).encode(), "text/csv"
            else:
                payload = self.state.figure_bytes(fmt, self.unit)
                mime = "image/png" if fmt == "png" else "image/svg+xml"
        except Exception as e:
            self.file_msg.styles = _MSG_STYLE
            self.file_msg.text = escape(f"download: {e}")
            return
        stem = "powderspin-explore"
        self.download.data = {"name": [f"{stem}.{fmt}"], "mime": [mime],
                              "b64": [base64.b64encode(payload).decode("ascii")]}

    def closed(self):
        self.cancel.set()


def build_page(doc, make_state, title: str = "") -> None:
    """Fill a Bokeh document with one explorer page.

    Parameters
    ----------
    doc : bokeh.document.Document
    make_state : callable
        Returns a new :class:`ExplorerState` (one per tab).
    title : str, optional
        The model file's name, shown at the top.
    """
    page = _Page(doc, make_state(), title)
    page.build()
    doc.on_session_destroyed(lambda ctx: page.closed())
