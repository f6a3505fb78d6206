"""Shared pieces of the explorer tests: a synthetic one-site spectrum, a served page, a headless Chromium."""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
CHROMEDRIVER = shutil.which("chromedriver")
BROWSER_MISSING = ("headless Chromium is not installed (Debian packages chromium and chromium-driver; "
                   ".ci/run installs them)") if not (CHROMIUM and CHROMEDRIVER) else ""
if BROWSER_MISSING and os.environ.get("POWDERSPIN_REQUIRE_BROWSER") == "1":  # CI: never skip silently
    raise RuntimeError(BROWSER_MISSING + "; POWDERSPIN_REQUIRE_BROWSER=1 asks for it")

#: the model of the browser tests: one 27Al site under MAS, three free parameters (an invented scenario)
MODEL_TEXT = """\
# one tetrahedral 27Al site under 12 kHz MAS (invented for the tests)
nucleus = "27Al"

[measurement]
field_tesla = 14.1
spinning_hz = 12000
orientations = "coarse"
gauss_hz = 150.0

[[site]]
label = "Tet"
shift_ppm = { start = 60.0, min = 50.0, max = 70.0 }
cq_mhz = { start = 3.0, min = 1.0, max = 6.0 }
eta_q = { start = 0.3, min = 0.0, max = 1.0 }
"""

TRUTH = {"label": "Tet", "shift_ppm": 61.2, "cq_mhz": 3.4, "eta_q": 0.45}


def write_inputs(folder: Path) -> tuple[Path, Path]:
    """The model file and a SYNTHETIC spectrum (simulated truth plus seeded noise) in ``folder``."""
    import powderspin as ps

    folder.mkdir(parents=True, exist_ok=True)
    model = folder / "tet.toml"
    model.write_text(MODEL_TEXT)
    meas = {"field_tesla": 14.1, "spinning_hz": 12000.0, "orientations": "medium", "gauss_hz": 150.0,
            "points": 512, "center_ppm": 40.0, "width_ppm": 160.0}
    spec = ps.simulate(ps.make_model("27Al", meas, [TRUTH]))
    rng = np.random.default_rng(20261205)
    y = 2.5 * spec.intensity
    y = y + rng.normal(0.0, 0.01 * y.max(), y.size)
    lines = ["# SYNTHETIC 27Al MAS spectrum made by the explorer tests (not a measurement)",
             "# nucleus: 27Al", "# field_tesla: 14.1", f"# nu_ref_hz: {spec.nu_ref_hz!r}", "ppm,intensity"]
    lines += [f"{p:.10f},{v:.8e}" for p, v in zip(spec.ppm[::-1], y[::-1])]
    data = folder / "tet.csv"
    data.write_text("\n".join(lines) + "\n")
    return model, data


class Served:
    """``powderspin explore`` in a child process; ``url`` is the line it printed."""

    def __init__(self, *args, wait_s: float = 180.0):
        env = dict(os.environ, NUMBA_NUM_THREADS=os.environ.get("NUMBA_NUM_THREADS", "1"))
        self.proc = subprocess.Popen([sys.executable, "-m", "powderspin", "explore", *map(str, args), "--no-browser"],
                                     stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
        self.err: list[str] = []
        threading.Thread(target=lambda: self.err.extend(iter(self.proc.stderr.readline, "")), daemon=True).start()
        self.url = ""
        deadline = time.monotonic() + wait_s
        while time.monotonic() < deadline:
            line = self.proc.stdout.readline()
            if line:
                self.url = line.strip()
                break
            if self.proc.poll() is not None:
                break
        if not self.url:
            self.stop()
            raise RuntimeError("the explorer did not start: " + "".join(self.err))
        self.port = int(self.url.rsplit(":", 1)[1].split("/", 1)[0])

    def stop(self) -> int:
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGINT)
            try:
                self.proc.wait(timeout=60)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
        return self.proc.returncode


def start_browser(profile: Path):
    """Headless Chromium through chromedriver, with a fresh profile and its network log on."""
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    opts = webdriver.ChromeOptions()
    opts.binary_location = CHROMIUM
    for a in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
              "--disable-background-networking", "--disable-component-update", "--disable-sync",
              "--disable-dev-shm-usage", "--window-size=1300,1000", f"--user-data-dir={profile}"):
        opts.add_argument(a)
    opts.set_capability("goog:loggingPrefs", {"performance": "ALL"})
    driver = webdriver.Chrome(service=Service(CHROMEDRIVER), options=opts)
    driver.set_script_timeout(60)
    return driver


#: finds an element through Bokeh's shadow roots
DEEP = """
function deep(root, sel) {
  const hit = root.querySelector(sel);
  if (hit) return hit;
  for (const el of root.querySelectorAll('*')) {
    if (el.shadowRoot) { const f = deep(el.shadowRoot, sel); if (f) return f; }
  }
  return null;
}
"""


def doc_model(driver, name: str, attr: str):
    """A property of a named Bokeh model in the page (arrays as lists)."""
    return driver.execute_script(
        "const m = Bokeh.documents[0].get_model_by_name(arguments[0]); if (m == null) return null;"
        "const v = m[arguments[1]]; if (v != null && ArrayBuffer.isView(v)) return Array.from(v); return v;",
        name, attr)


def column(driver, source: str, col: str):
    return driver.execute_script(
        "const d = Bokeh.documents[0].get_model_by_name(arguments[0]).data; const v = d[arguments[1]];"
        "return v == null ? null : Array.from(v);", source, col)


def entry(driver, label: str):
    """The <input> whose aria-label is ``label``."""
    return driver.execute_script(DEEP + "return deep(document, arguments[0]);", f'input[aria-label="{label}"]')


def type_into(driver, label: str, text: str) -> None:
    """Replace an entry's text as a user does, and commit it with Enter."""
    from selenium.webdriver.common.keys import Keys

    el = entry(driver, label)
    driver.execute_script("arguments[0].scrollIntoView({block: 'center', inline: 'nearest'});", el)
    el.click()
    el.send_keys(Keys.END + Keys.BACKSPACE * (len(el.get_attribute("value") or "") + 2) + text + Keys.ENTER)


def click(driver, name: str) -> None:
    """Click the button of the Bokeh model named ``name`` (a real DOM click on its <button>)."""
    driver.execute_script(
        "for (const v of Bokeh.index.all_views()) { if (v.model.name === arguments[0]) {"
        "  v.shadow_el.querySelector('button').click(); return; } }"
        "throw new Error('no button ' + arguments[0]);", name)


def wait_for(fn, timeout: float = 30.0, step: float = 0.05):
    """Poll ``fn`` until it returns something truthy; return that (or fail after ``timeout`` seconds)."""
    deadline = time.monotonic() + timeout
    last = None
    while time.monotonic() < deadline:
        last = fn()
        if last:
            return last
        time.sleep(step)
    raise AssertionError(f"timed out after {timeout} s (last: {last!r})")


def open_page(driver, url: str) -> None:
    driver.get(url)
    wait_for(lambda: driver.execute_script("return Number(document.body.dataset.psLabelled || 0)") > 0, 60)


#: times (ms) from committing an entry to the new simulation's arrival in the page and to the frame painted with it
#: (the second animation frame after the arrival runs once the first, which draws the new data, is painted)
LATENCY_SCRIPT = DEEP + """
const [label, text, done] = arguments;
const src = Bokeh.documents[0].get_model_by_name('curves');
const input = deep(document, 'input[aria-label="' + label + '"]');
let t_data = null;
const t0 = performance.now();
const arrived = () => {
  if (t_data != null) return;
  t_data = performance.now() - t0;
  requestAnimationFrame(() => requestAnimationFrame(() => done([t_data, performance.now() - t0])));
};
src.connect(src.change, arrived);
src.connect(src.properties.data.change, arrived);
input.value = text;
input.dispatchEvent(new Event('change'));
"""


def redraw_ms(driver, label: str, text: str) -> tuple[float, float]:
    """Milliseconds from a committed entry to the new simulation in the page, and to the painted frame."""
    t_data, t_paint = driver.execute_async_script(LATENCY_SCRIPT, label, text)
    return float(t_data), float(t_paint)
