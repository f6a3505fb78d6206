"""``powderspin fit`` / ``simulate`` with 2D data: other F1 scales, processed spectrometer data, chosen F2 slices,
the long-form CSV and the report; bad input gives one line, status 2, nothing written (SYNTHETIC data throughout)."""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest

from powderspin.cli.main import main

MODEL = """nucleus = "23Na"
[measurement]
field_tesla = 11.7
spinning_hz = "inf"
experiment = "mqmas"
points = 128
f1_points = 32
orientations = 12
gauss_hz = 150.0
f1_gauss_hz = 300.0
center_ppm = 0.0
width_ppm = 60.0
f1_center_ppm = 8.0
f1_width_ppm = 40.0
{extra}
[[site]]
label = "Na1"
eta_q = 0.6
shift_ppm = {shift}
cq_mhz = {cq}
"""

FREE = {"shift": "{ start = 5.6, min = -20.0, max = 30.0 }", "cq": "{ start = 1.65, min = 0.5, max = 4.0 }"}


def _write(tmp_path, name, text):
    p = tmp_path / name
    p.write_text(text)
    return p


def _truth(tmp_path, scale_option=()):
    """Simulate the true spectrum with the CLI (optionally on another F1 scale), then add noise with a fixed seed."""
    truth = _write(tmp_path, "truth.toml", MODEL.format(extra="", shift=5.0, cq=1.5))
    clean = tmp_path / "clean.npz"
    assert main(["simulate", str(truth), "-o", str(clean), "-q", *scale_option]) == 0
    d = dict(np.load(clean))
    rng = np.random.default_rng(151)
    d["intensity"] = d["intensity"] + rng.normal(0.0, 0.01 * d["intensity"].max(), d["intensity"].shape)
    out = tmp_path / "mq.npz"
    np.savez(out, **d)
    return out, json.loads(str(d["metadata"]))


def _fit_model(tmp_path, ref="file", extra=""):
    return _write(tmp_path, "fit.toml", MODEL.format(extra=f'data = "mq.npz"\nf1_referencing = "{ref}"\n{extra}',
                                                      **FREE))


def _values(path):
    from powderspin.model.modelfile import load_model

    m = load_model(path)
    return m.sites[0].cq_mhz, m.sites[0].shift.iso_ppm


def test_simulate_on_another_f1_scale_names_it_and_fits_the_same(tmp_path, capsys):
    iso_dir, t1_dir = tmp_path / "iso", tmp_path / "t1"
    iso_dir.mkdir()
    t1_dir.mkdir()
    _, meta_iso = _truth(iso_dir)
    _, meta = _truth(t1_dir, ["--f1-scale", "t1_evolution"])
    assert meta["f1_convention"]["f1_scale"] == "t1_evolution" and meta["f1_convention"]["f1_scale_factor"] == "34/9"
    assert "p - R" in meta["f1_convention"]["f1_scale_description"]
    assert meta["centres_of_gravity_ppm"]["Na1"]["f1"] == pytest.approx(
        34 / 9 * meta_iso["centres_of_gravity_ppm"]["Na1"]["f1"], rel=1e-12)
    results = []
    for d, ref in ((iso_dir, "isotropic"), (t1_dir, "file"), (t1_dir, "t1_evolution")):
        model = _fit_model(d, ref)
        out = d / f"res-{ref}.toml"
        assert main(["fit", str(model), "-o", str(out), "-q"]) == 0
        results.append(_values(out))
    cq0, sh0 = results[0]
    assert cq0 == pytest.approx(1.5, abs=0.05) and sh0 == pytest.approx(5.0, abs=0.3)
    for cq, sh in results[1:]:
        # the same noisy values on an F1 axis 34/9 times as wide: the same parameters (written to the digits
        # their standard errors support)
        assert cq == pytest.approx(cq0, rel=1e-3) and sh == pytest.approx(sh0, abs=1e-2)


def test_f1_scale_needs_a_2d_measurement(tmp_path, capsys):
    one = _write(tmp_path, "one.toml", MODEL.format(extra="", shift=5.0, cq=1.5).replace('experiment = "mqmas"',
                                                                                        'experiment = "1d"'))
    out = tmp_path / "one.csv"
    assert main(["simulate", str(one), "-o", str(out), "--f1-scale", "t1_evolution"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--f1-scale t1_evolution: is for a 2D (MQMAS/STMAS) measurement" in err[0]
    assert not out.exists()


def test_fit_of_chosen_slices_writes_the_long_form_csv_and_report(tmp_path, capsys):
    data, meta = _truth(tmp_path)
    centre = meta["centres_of_gravity_ppm"]["Na1"]["f1"]
    model = _fit_model(tmp_path)
    out, report = tmp_path / "res.toml", tmp_path / "res.png"
    assert main(["fit", str(model), "-o", str(out), "--report", str(report), "-q", "--slice", f"{centre:.3f}",
                 "--f1-region", f"{centre + 3:.3f}:{centre - 3:.3f}", "--region", "25:-30"]) == 0
    err = capsys.readouterr().err
    assert f"wrote {out}" in err and f"wrote {tmp_path / 'res.csv'}" in err and f"wrote {report}" in err
    assert report.read_bytes()[:4] == b"\x89PNG"
    cq, sh = _values(out)
    assert cq == pytest.approx(1.5, abs=0.05) and sh == pytest.approx(5.0, abs=0.3)
    text = (tmp_path / "res.csv").read_text()
    comments = [r for r in text.splitlines() if r.startswith("#")]
    assert any(r.startswith("# f1_referencing: isotropic (stated by the file)") for r in comments)
    assert any(r.startswith("# fitted Na1.cq_mhz: ") for r in comments)
    rows = list(csv.reader(r for r in text.splitlines() if not r.startswith("#")))
    assert rows[0] == ["f1_ppm", "f2_ppm", "data", "fit", "Na1", "residual", "in_fit"]
    table = np.array(rows[1:], dtype=float)
    d = np.load(data)
    assert table.shape == (d["f1_ppm"].size * d["f2_ppm"].size, 7)
    np.testing.assert_allclose(table[:, 2], d["intensity"].ravel(), rtol=1e-11, atol=1e-12 * d["intensity"].max())
    np.testing.assert_allclose(table[:, 3] + table[:, 5], table[:, 2], rtol=1e-9, atol=1e-9 * d["intensity"].max())
    np.testing.assert_allclose(table[:, 4], table[:, 3], rtol=1e-9, atol=1e-12)   # one site: site = fit
    used = table[table[:, 6] == 1]
    assert used[:, 1].max() <= 25 and used[:, 1].min() >= -30
    assert np.all(np.abs(used[:, 0] - centre) <= 3.0 + 1e-9)
    assert 0 < used.shape[0] < table.shape[0]


def test_fit_reads_bruker_processed_2d_data(tmp_path, capsys):
    import powderspin as ps
    from powderspin.model.modelfile import load_model
    from tests.io.test_processed2d import write_bruker_2d

    truth = load_model(_write(tmp_path, "truth.toml", MODEL.format(extra="", shift=5.0, cq=1.5)))
    s = ps.simulate(truth)
    noisy = s.intensity + np.random.default_rng(3).normal(0.0, 0.01 * s.intensity.max(), s.shape)
    from powderspin.engine.spectrum2d import Spectrum2D

    exp, _ = write_bruker_2d(tmp_path, Spectrum2D(s.f1_hz, s.f1_ppm, s.f2_hz, s.f2_ppm, noisy, s.site_labels,
                                                  s.site_intensities, s.metadata))
    model = _write(tmp_path, "fit.toml", MODEL.format(extra="", **FREE))
    out = tmp_path / "res.toml"
    assert main(["fit", str(model), str(exp), "-o", str(out), "-q", "--f1-referencing", "isotropic"]) == 0
    cq, sh = _values(out)
    assert cq == pytest.approx(1.5, abs=0.05) and sh == pytest.approx(5.0, abs=0.3)


@pytest.mark.parametrize("kind,words", [
    ("no-proc2s", "has 2rr but no proc2s file"),
    ("other-field", "contradicts the file's"),
    ("no-referencing", "f1_referencing must be given"),
    ("slice-outside", "slice_f1_ppm = 500 lies outside the data's F1 axis"),
    ("f1-region-1d", "--f1-region and --slice choose F2 slices of 2D (MQMAS/STMAS) data"),
])
def test_bad_2d_input_one_line_status_2_nothing_written(tmp_path, capsys, kind, words):
    import powderspin as ps
    from powderspin.model.modelfile import load_model
    from tests.io.test_processed2d import write_bruker_2d

    truth = load_model(_write(tmp_path, "truth.toml", MODEL.format(extra="", shift=5.0, cq=1.5)))
    s = ps.simulate(truth)
    exp, _ = write_bruker_2d(tmp_path, s, proc2s=kind != "no-proc2s")
    text = MODEL.format(extra="", **FREE)
    args = ["--f1-referencing", "isotropic"]
    if kind == "other-field":
        text = text.replace("field_tesla = 11.7", "field_tesla = 11.75")
    elif kind == "no-referencing":
        args = []
    elif kind == "slice-outside":
        args += ["--slice", "500"]
    elif kind == "f1-region-1d":
        text = text.replace('experiment = "mqmas"', 'experiment = "1d"')
        args = ["--f1-region", "10:0"]
    model = _write(tmp_path, "fit.toml", text)
    out = tmp_path / "res.toml"
    assert main(["fit", str(model), str(exp), "-o", str(out), *args]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and words in err[0], err
    assert not out.exists() and not (tmp_path / "res.csv").exists()


# ---------------------------------------------------------------------------
# --global, --posterior and --noise-region with a 2D measurement: the bundled example (SYNTHETIC data)
# ---------------------------------------------------------------------------
def _example(tmp_path):
    import shutil
    from pathlib import Path

    root = Path(__file__).resolve().parents[2] / "examples"
    for name in ("silicate_fit.toml", "silicate_23na_3qmas.npz", "silicate_23na_mas.csv"):
        shutil.copy(root / name, tmp_path / name)
    return tmp_path / "silicate_fit.toml"


@pytest.mark.slow
def test_global_posterior_and_noise_region_on_the_2d_example(tmp_path, capsys):
    """The three options together on the joint 3QMAS + MAS example; the result file carries the minima, the
    posterior (summary and each parameter's interval) and the curvature check, as a 1D result file does.  The
    chain is kept tiny (the test is of the plumbing, so its shortness is warned about); F2 above 20 ppm holds no
    signal of the example (examples/make_silicate_data.py)."""
    import tomllib

    model = _example(tmp_path)
    out = tmp_path / "res.toml"
    assert main(["fit", str(model), "-o", str(out), "-q", "--noise-region", "30:20", "--global", "--starts", "1",
                 "--posterior", "--walkers", "18", "--steps", "10", "--max-steps", "10", "--profile", "none"]) == 0
    captured = capsys.readouterr()
    assert "noise from the noise region" in captured.out and "posterior median" in captured.out
    assert "global search: the start only" in captured.out
    assert "posterior chain is too short" in captured.out
    for name in ("res.toml", "res-m1.csv", "res-m2.csv", "res-corner.png"):
        assert f"wrote {tmp_path / name}" in captured.err
    d = tomllib.loads(out.read_text())
    res = d["fit"]["result"]
    assert res["noise_source"] == "noise region" and len(res["noise"]) == 2
    assert len(res["minima"]) == 1 and set(res["minima"][0]["values"]) == set(res["parameters"])
    assert res["posterior"]["walkers"] == 18 and res["quadratic_check"]
    assert all(len(s["interval"]["cq_mhz"]) == 2 for s in d["site"])
    from powderspin.model.modelfile import load_model

    assert len(load_model(out).sites) == 3  # the result file is a model file


@pytest.mark.parametrize("flags,words", [
    (["--noise-region", "500:400"], "--noise-region [500, 400] ppm holds 0 point(s) of the data's F2 axis; it needs "
                                    "at least 8 (the F2 axis covers"),
    (["--global", "--starts", "0"], "--starts 0 is outside the allowed range"),
    (["--posterior", "--walkers", "3"], "--walkers 3 must be at least twice the number of free parameters (9)"),
    (["--posterior", "--steps", "5"], "--steps 5 must be at least 10"),
    (["--noise-region", "30"], "--noise-region"),
])
def test_bad_global_posterior_noise_values_with_2d_data(tmp_path, capsys, flags, words):
    model = _example(tmp_path)
    out = tmp_path / "res.toml"
    assert main(["fit", str(model), "-o", str(out), "-q", *flags]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and words in err[0], err
    assert not out.exists() and not list(tmp_path.glob("res*"))
