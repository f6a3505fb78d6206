"""``powderspin simulate`` with a 2D (MQMAS, STMAS) measurement: .npz, text matrix, contour plot, bad input."""

from __future__ import annotations

import json

import numpy as np
import pytest

from powderspin.cli.main import main
from powderspin.io.spectra2d import spectrum_2d_text

MODEL = """nucleus = "23Na"
[measurement]
field_tesla = 11.7
spinning_hz = "inf"
experiment = "mqmas"
points = 256
f1_points = 64
orientations = 16
gauss_hz = 100.0
f1_gauss_hz = 100.0
[[site]]
label = "Na1"
shift_ppm = 5.0
cq_mhz = 1.5
eta_q = 0.6
[[site]]
label = "Na2"
shift_ppm = -8.0
cq_mhz = 2.6
eta_q = 0.1
"""


def _model(tmp_path, text=MODEL):
    p = tmp_path / "m.toml"
    p.write_text(text)
    return p


def test_writes_npz_and_contour_plot(tmp_path, capsys):
    model = _model(tmp_path)
    out, png = tmp_path / "mq.npz", tmp_path / "mq.png"
    assert main(["simulate", str(model), "-o", str(out), "--plot", str(png), "-q"]) == 0
    d = np.load(out)
    n1, n2 = d["f1_ppm"].size, d["f2_ppm"].size
    assert (n1, n2) == (64, 256) and d["intensity"].shape == (n1, n2)
    assert d["site_intensities"].shape == (2, n1, n2) and list(d["site_labels"]) == ["Na1", "Na2"]
    assert np.allclose(d["site_intensities"].sum(axis=0), d["intensity"])
    meta = json.loads(str(d["metadata"]))
    assert meta["f1_convention"]["refocusing_ratio"] == "-7/9"
    assert set(meta["centres_of_gravity_ppm"]) == {"Na1", "Na2"}
    dx1 = d["f1_ppm"][1] - d["f1_ppm"][0]
    dx2 = d["f2_ppm"][1] - d["f2_ppm"][0]
    assert d["intensity"].sum() * dx1 * dx2 == pytest.approx(2.0, rel=1e-3)
    assert png.read_bytes()[:4] == b"\x89PNG" and png.stat().st_size > 5000
    assert "(64 x 256 points, 2 site(s))" in capsys.readouterr().err


def test_writes_a_text_matrix_a_spreadsheet_opens(tmp_path):
    model = _model(tmp_path)
    out = tmp_path / "mq.csv"
    assert main(["simulate", str(model), "-o", str(out), "-q"]) == 0
    text = out.read_text()
    rows = [r for r in text.splitlines() if not r.startswith("#")]
    head = rows[0].split(",")
    assert head[0] == "f1_ppm\\f2_ppm" and len(head) == 257
    block = np.array([[float(x) for x in r.split(",")] for r in rows[1:65]])
    npz = tmp_path / "mq.npz"
    assert main(["simulate", str(model), "-o", str(npz), "-q"]) == 0
    d = np.load(npz)
    assert np.allclose(block[:, 0], d["f1_ppm"], rtol=1e-9) and np.allclose(block[:, 1:], d["intensity"],
                                                                               rtol=1e-9, atol=1e-300)
    assert text.count("# site: ") == 2


@pytest.mark.parametrize("change,words", [
    ("mq_order = 5\n", "mq_order = 5 is not available for I = 3/2; allowed: 3"),
    ("spinning_hz = 0.0\n", None),
])
def test_bad_input_one_line_exit_2_nothing_written(tmp_path, capsys, change, words):
    text = MODEL.replace("f1_points = 64\n", "f1_points = 64\n" + change)
    if change.startswith("spinning_hz"):
        text = MODEL.replace('spinning_hz = "inf"', "spinning_hz = 0.0")
        words = "needs a spinning sample"
    model = _model(tmp_path, text)
    out = tmp_path / "mq.npz"
    assert main(["simulate", str(model), "-o", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and words in err[0]
    assert not out.exists()


def test_refuses_1d_only_formats_before_computing(tmp_path, capsys):
    model = _model(tmp_path)
    assert main(["simulate", str(model), "-o", str(tmp_path / "mq.jdx")]) == 2
    assert "a 2D spectrum is written as .npz, .csv, .txt" in capsys.readouterr().err
    assert not (tmp_path / "mq.jdx").exists()


def test_text_form_lists_every_site(tmp_path):
    import powderspin as ps
    s = ps.simulate(str(_model(tmp_path)))
    assert spectrum_2d_text(s).count("# site: ") == 2


FIT_MODEL = """nucleus = "23Na"
[measurement]
field_tesla = 11.7
spinning_hz = "inf"
experiment = "mqmas"
points = 128
f1_points = 32
orientations = 12
gauss_hz = 150.0
f1_gauss_hz = 150.0
data = "mq.npz"
{ref}
[[site]]
label = "Na1"
shift_ppm = {{ start = 4.0, min = -20.0, max = 30.0 }}
cq_mhz = {{ start = 1.7, min = 0.5, max = 4.0 }}
eta_q = 0.6
"""


def _synthetic_2d(tmp_path):
    import powderspin as ps
    from powderspin.engine.spectrum2d import Spectrum2D
    from powderspin.io.spectra2d import write_spectrum_2d
    truth = ps.make_model("23Na", {"field_tesla": 11.7, "spinning_hz": "inf", "experiment": "mqmas", "points": 128,
                                   "f1_points": 32, "orientations": 12, "gauss_hz": 150.0, "f1_gauss_hz": 150.0},
                          [{"label": "Na1", "shift_ppm": 5.0, "cq_mhz": 1.5, "eta_q": 0.6}])
    s = ps.simulate(truth)
    y = s.intensity + np.random.default_rng(5).normal(0.0, 0.005 * s.intensity.max(), s.shape)  # SYNTHETIC data
    noisy = Spectrum2D(s.f1_hz, s.f1_ppm, s.f2_hz, s.f2_ppm, y, s.site_labels, s.site_intensities, s.metadata)
    write_spectrum_2d(noisy, tmp_path / "mq.npz")


def test_fit_command_fits_2d_data(tmp_path, capsys):
    _synthetic_2d(tmp_path)
    model = _model(tmp_path, FIT_MODEL.format(ref='f1_referencing = "file"'))
    out = tmp_path / "res.toml"
    report = tmp_path / "fit.png"
    assert main(["fit", str(model), "-o", str(out), "--report", str(report), "-q"]) == 0
    assert report.read_bytes()[:4] == b"\x89PNG"
    text = capsys.readouterr().out
    assert "converged" in text and "Na1.cq_mhz" in text
    from powderspin.model.modelfile import load_model
    fitted = load_model(out)
    assert fitted.sites[0].cq_mhz == pytest.approx(1.5, abs=0.05)
    assert fitted.sites[0].shift.iso_ppm == pytest.approx(5.0, abs=0.2)


def test_fit_command_needs_the_f1_referencing(tmp_path, capsys):
    _synthetic_2d(tmp_path)
    model = _model(tmp_path, FIT_MODEL.format(ref=""))
    out = tmp_path / "res.toml"
    assert main(["fit", str(model), "-o", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "f1_referencing must be given" in err[0]
    assert not out.exists()
    assert main(["fit", str(model), "-o", str(out), "-q", "--f1-referencing", "file"]) == 0
