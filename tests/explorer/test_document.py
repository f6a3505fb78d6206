"""The explorer's Bokeh document without a browser: one labelled entry and slider per parameter, named models."""

from __future__ import annotations

import pytest

import powderspin as ps

pytest.importorskip("bokeh", reason="the explorer needs bokeh (pip install 'powderspin[explore]')")


def test_document_has_a_labelled_entry_per_parameter():
    from bokeh.document import Document

    from powderspin.explorer.page import build_page
    from powderspin.explorer.state import ExplorerState

    model = ps.make_model("27Al", [{"field_tesla": 9.4, "spinning_hz": "inf", "points": 256},
                                   {"field_tesla": 14.1, "spinning_hz": "inf", "points": 256}],
                          [{"label": "A", "shift_ppm": 50.0, "cq_mhz": {"start": 4.0, "min": 1.0, "max": 8.0}},
                           {"label": "B", "shift_ppm": 5.0, "cq_mhz": 2.0, "gauss_hz": {"same_as": "A.gauss_hz"}}])
    doc = Document()
    state = ExplorerState(model)
    build_page(doc, lambda: state, "two.toml")
    for c in state.controls:
        entry = doc.get_model_by_name(f"entry:{c.name}")
        slider = doc.get_model_by_name(f"slider:{c.name}")
        assert entry.tags == ["ps-entry", c.name] and slider.tags == ["ps-slider", c.name]
        assert float(entry.value) == state.values[c.name]
        assert slider.start <= state.values[c.name] <= slider.end
    cq = doc.get_model_by_name("slider:A.cq_mhz")
    assert (cq.start, cq.end) == (1.0, 8.0)  # a free parameter's slider spans its min/max
    assert doc.get_model_by_name("entry:B.gauss_hz") is None
    assert doc.get_model_by_name("tied-note").text.endswith("B.gauss_hz follows A.gauss_hz")
    for name in ("curves", "fit_values", "download", "status", "fit-button", "cancel-button", "save-button",
                 "measurement-select", "unit-switch", "entry:field_tesla", "entry:spinning_hz"):
        assert doc.get_model_by_name(name) is not None, name
    assert doc.get_model_by_name("fit-button").disabled  # no data: nothing to fit
    x = doc.get_model_by_name("spectrum-plot").x_range
    assert x.start > x.end  # ppm decreasing to the right (common practice)
