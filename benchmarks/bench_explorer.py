"""Explorer redraw latency in a real browser: a C_Q entry changed -> the new simulation painted.

    python benchmarks/bench_explorer.py [--repeat N] [--points N]

Starts ``powderspin explore`` on a one-site 27Al MAS model (12 kHz, 512
points on the data axis of a synthetic spectrum) and drives it in headless
Chromium (Debian's chromium and chromium-driver).  Each repeat commits a new
C_Q in the entry (found by its aria-label) and measures in the page the time
to the frame painted after the new simulation arrived (the page's
``curves`` data changed): browser -> server -> Simulator -> browser ->
paint.  For comparison, in the same run: the server's own share, the
:class:`~powderspin.explorer.state.ExplorerState` update alone in Python (one
``set_text``: simulation, scale to the data, residual).  Target (design
notes): <= 100 ms for a one-site MAS model.  Printed: best and median of N
repeats and the ratio of the browser figure to the Python-only one.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tests.explorer.helpers import (  # noqa: E402
    BROWSER_MISSING,
    Served,
    open_page,
    redraw_ms,
    start_browser,
    write_inputs,
)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=20)
    args = ap.parse_args()
    if BROWSER_MISSING:
        sys.exit(BROWSER_MISSING)
    from powderspin.explorer.state import ExplorerState, load_inputs

    with tempfile.TemporaryDirectory() as tmp:
        model, data = write_inputs(Path(tmp) / "in")
        st = ExplorerState(*load_inputs(model, [data])[:3])
        values = [f"{2.5 + 0.05 * (k % 40):.2f}" for k in range(args.repeat + 3)]
        py = []
        for v in values:
            t0 = time.perf_counter()
            st.set_text("Tet.cq_mhz", v)
            py.append((time.perf_counter() - t0) * 1e3)
        py = py[3:]
        served = Served(model, data)
        driver = start_browser(Path(tmp) / "profile")
        try:
            open_page(driver, served.url)
            for v in values[:3]:  # warm: first calls compile and fill memos
                redraw_ms(driver, "Tet.cq_mhz", v)
            both = [redraw_ms(driver, "Tet.cq_mhz", v) for v in values[3:]]
        finally:
            driver.quit()
            served.stop()
    arrived = [a for a, _ in both]
    browser = [b for _, b in both]
    med_b, med_p = statistics.median(browser), statistics.median(py)
    print(f"explorer redraw, one-site 27Al MAS (12 kHz, 512 points), {args.repeat} repeats")
    print(f"  browser (entry -> painted frame): best {min(browser):6.1f} ms, median {med_b:6.1f} ms "
          "(target <= 100 ms)")
    print(f"  browser (entry -> new data in the page): best {min(arrived):6.1f} ms, "
          f"median {statistics.median(arrived):6.1f} ms")
    print(f"  Python state update alone:       best {min(py):6.1f} ms, median {med_p:6.1f} ms")
    print(f"  ratio browser / Python (median): {med_b / med_p:.1f}x")


if __name__ == "__main__":
    main()
