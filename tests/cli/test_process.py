"""``powderspin process`` and ``powderspin fit`` on raw data folders (SYNTHETIC data written through nmrglue's
Bruker writer): outputs, the processing recorded, parameter recovery, and one case per kind of bad input (one line,
status 2, nothing written)."""

from __future__ import annotations

import json
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest

import powderspin as ps
from powderspin.io.raw import RawFID
from powderspin.io.spectra import read_spectrum
from powderspin.processing import process
from tests.processing.synthetic import fid_from_spectrum, simulate_on_fft_grid, write_bruker

DWELL = 1e-5
M = 4096
N = 2048
GRPDLY = 71.33
OFFSET = -800.0
TRUTH = {"label": "Al", "shift_ppm": 58.0, "cq_mhz": 4.2, "eta_q": 0.45}
MEAS = {"spinning_hz": "inf", "lorentz_hz": 200.0, "gauss_hz": 150.0}


def _run(args, cwd):
    return subprocess.run([sys.executable, "-m", "powderspin", *args], cwd=cwd, capture_output=True, text=True,
                          timeout=600)


@pytest.fixture(scope="module")
def folders(tmp_path_factory):
    root = tmp_path_factory.mktemp("raw")
    g, nu = simulate_on_fft_grid("27Al", 9.4, [TRUTH], M, DWELL, OFFSET, **MEAS)
    kw = dict(dwell_s=DWELL, sfo1_mhz=(nu + OFFSET) / 1e6, bf1_mhz=nu / 1e6, nucleus="27Al", group_delay=GRPDLY)
    raw = fid_from_spectrum(g, DWELL, N, group_delay=GRPDLY, phase0_deg=-65.0, phase1_deg=40.0, dc=0.03 + 0.02j,
                            noise=4e-3, seed=5)
    write_bruker(root / "exp" / "1", raw, **kw)
    clean = fid_from_spectrum(g, DWELL, N, group_delay=GRPDLY, noise=4e-3, seed=5)   # same noise, no errors
    write_bruker(root / "exp" / "2", clean, **kw)
    write_bruker(root / "ser" / "1", np.array([raw, clean]), name="ser", integer=False, **kw)
    return root, g, nu


def _model_text(field=9.4, nucleus="27Al", data=None):
    data_line = f'data = "{data}"\n' if data else ""
    return (f'nucleus = "{nucleus}"\n[measurement]\nfield_tesla = {field}\nspinning_hz = "inf"\n'
            f'lorentz_hz = 200.0\ngauss_hz = 150.0\n{data_line}'
            '[[site]]\nlabel = "Al"\nshift_ppm = { start = 55.0, min = 20.0, max = 90.0 }\n'
            'cq_mhz = { start = 3.5, min = 1.0, max = 8.0 }\neta_q = { start = 0.3, min = 0.0, max = 1.0 }\n'
            '[fit]\nregions = [[140.0, -60.0]]\n[processing]\nzero_fill_points = 4096\n')


@pytest.mark.slow
def test_process_command_writes_spectrum_and_figure(folders, tmp_path):
    root, g, nu = folders
    r = _run(["process", str(root / "exp" / "1"), "-o", "s.csv", "--plot", "s.png", "--baseline", "polynomial"],
             tmp_path)
    assert r.returncode == 0, r.stderr
    assert (tmp_path / "s.png").stat().st_size > 0
    spec = read_spectrum(tmp_path / "s.csv")
    assert spec.nucleus == "27Al" and spec.field_tesla == pytest.approx(9.4, rel=1e-12)
    assert spec.nu_ref_hz == pytest.approx(nu, rel=1e-12)
    rec = json.loads(spec.metadata["file.processing"])
    assert rec["group_delay"]["points"] == GRPDLY and rec["baseline"]["mode"] == "polynomial"
    assert "signal-free" in r.stderr
    # JCAMP-DX output too
    r = _run(["process", str(root / "exp" / "1"), "-o", "s.jdx", "-q"], tmp_path)
    assert r.returncode == 0, r.stderr and (tmp_path / "s.jdx").stat().st_size > 0
    # a ser file with --row
    r = _run(["process", str(root / "ser" / "1"), "--row", "1", "-o", "row.csv", "-q"], tmp_path)
    assert r.returncode == 0, r.stderr


def _no_parameters(root, d):
    (d / "p").mkdir()
    (d / "p" / "fid").write_bytes(b"\0" * 64)
    return ["p"]


BAD = [
    ("no parameters", _no_parameters, "no parameters"),
    ("truncated fid", None, "truncated"),
    ("ser where a fid is expected", lambda root, d: [str(root / "ser" / "1")], "ser file"),
    ("field mismatch", lambda root, d: (d / "m.toml").write_text(_model_text(field=14.1)) and
     [str(root / "exp" / "1"), "--model", "m.toml"], "9.4 T but the model says field_tesla = 14.1 T"),
    ("nucleus mismatch", lambda root, d: (d / "m.toml").write_text(_model_text(nucleus="23Na")) and
     [str(root / "exp" / "1"), "--model", "m.toml"], "observe 27Al but the model's nucleus is 23Na"),
    ("bad option", lambda root, d: [str(root / "exp" / "1"), "--zero-fill-points", "8"], "zero_fill_points"),
]


@pytest.mark.parametrize("name, make, expect", BAD, ids=[b[0] for b in BAD])
def test_process_bad_input(folders, tmp_path, name, make, expect):
    root, g, nu = folders
    if make is None:   # a copy of a good folder with its fid cut short
        import shutil
        shutil.copytree(root / "exp" / "1", tmp_path / "t")
        fid = tmp_path / "t" / "fid"
        fid.write_bytes(fid.read_bytes()[:5000])
        args = ["t"]
    else:
        args = make(root, tmp_path)
    before = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}
    r = _run(["process", *args, "-o", "out.csv", "--plot", "out.png"], tmp_path)
    assert r.returncode == 2, (r.stdout, r.stderr)
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and expect in lines[0], r.stderr
    after = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}
    assert after == before


@pytest.mark.slow
def test_fit_on_the_folder_as_well_as_on_the_clean_spectrum(tmp_path):
    """Twenty noise draws: the folders (group delay, phase errors, DC offset, noise) fitted through the [processing]
    table recover C_Q, eta and delta_iso as well as the clean spectra with the same noise (processed without any
    error to correct).

    The noise enters before the phase errors and the filter (``noise_first``), as receiver noise does, so that
    each folder, once corrected, holds the same noise as its clean spectrum: the comparison is paired and measures
    what the unknown phase costs, not the luck of two noise draws.  Automatic phasing reads the zero order from
    the first points of the FID (about 0.4 deg RMS here), and the shift moves by 0.08 ppm per degree of zero-order
    phase error: with the processed phase taken as exact the folders' shift was off by 0.020 ppm RMS against 0.013
    ppm from the clean spectra (40 draws).  The fit therefore refines the residual phase against the model
    (dispersion columns, powderspin/fitting/problem.py); over 60 draws the folders' RMS deviations are then
    1.07 (shift), 1.00 (C_Q) and 1.00 (eta) times the clean spectra's, and the stated standard error of the
    shift grows from 0.0119 to 0.0138 ppm (the phase's share of the uncertainty, as the Fisher information of
    the joint problem predicts).

    Checks: RMS deviation from the truth below three stated standard errors for both; the folders' RMS deviation
    at most twice the clean spectra's plus half a standard error; and "as well as": at most 1.3 times the clean
    spectra's for each parameter (our criterion: the shift's ratio over 20 of those 60 draws, chosen at random,
    has median 1.07, 95th percentile 1.24 and 99th 1.32; C_Q and eta stay within 1.14)."""
    g, nu = simulate_on_fft_grid("27Al", 9.4, [TRUTH], M, DWELL, OFFSET, **MEAS)
    kw = dict(dwell_s=DWELL, sfo1_mhz=(nu + OFFSET) / 1e6, bf1_mhz=nu / 1e6, nucleus="27Al", group_delay=GRPDLY)
    model = ps.parse_model(tomllib.loads(_model_text()), source=str(tmp_path / "m.toml"))
    keys = {"shift_ppm": TRUTH["shift_ppm"], "cq_mhz": TRUTH["cq_mhz"], "eta_q": TRUTH["eta_q"]}
    dev = {k: ([], [], []) for k in keys}
    phase_dev, phase_err = [], []
    for seed in range(20):
        e0 = (-65.0 + 20 * seed + 180.0) % 360.0 - 180.0
        raw = fid_from_spectrum(g, DWELL, N, group_delay=GRPDLY, phase0_deg=e0, phase1_deg=40.0,
                                dc=0.03 + 0.02j, noise=4e-3, seed=seed, noise_first=True)
        folder = write_bruker(tmp_path / f"exp{seed}", raw, **kw)
        clean = fid_from_spectrum(g, DWELL, N, group_delay=GRPDLY, noise=4e-3, seed=seed, noise_first=True)
        on_folder = ps.fit(model, [str(folder)])
        spec = process(RawFID(clean, DWELL, nu + OFFSET, nu, "27Al", 9.4, GRPDLY, "clean"), phase="none",
                       dc_offset="none", zero_fill_points=4096)
        on_clean = ps.fit(model, [spec])
        ph = json.loads(on_folder.data[0].metadata["processing"])["phase"]
        # the zero order in the end (processing + fit) against the synthetic error's correction (-e0), at the carrier
        phase_dev.append((ph["phase0_deg"] + ph["refined_by_fit"]["phase0_deg"] + e0 + 180.0) % 360.0 - 180.0)
        phase_err.append(ph["refined_by_fit"]["phase0_stderr_deg"])
        for k, true in keys.items():
            name = f"Al.{k}"
            dev[k][0].append(on_folder.values[name] - true)
            dev[k][1].append(on_clean.values[name] - true)
            dev[k][2].append(on_clean.stderr[name])
    for k, (a, b, e) in dev.items():
        rms_a, rms_b, err = (float(np.sqrt(np.mean(np.square(v)))) for v in (a, b, e))
        print(f"{k}: RMS deviation folder {rms_a:.4g}, clean {rms_b:.4g}, ratio {rms_a / rms_b:.3f}, "
              f"standard error {err:.4g}")
        assert rms_a < 3 * err and rms_b < 3 * err, (k, rms_a, rms_b, err)
        assert rms_a <= 2.0 * rms_b + 0.5 * err, (k, rms_a, rms_b, err)
        assert rms_a <= 1.3 * rms_b, (k, rms_a, rms_b)
    # the refined zero order is as good as its stated error (within 1.5 x: an RMS over 20 draws scatters by about
    # 1 / sqrt(40) = 16 %)
    rms_phase, err_phase = (float(np.sqrt(np.mean(np.square(v)))) for v in (phase_dev, phase_err))
    print(f"zero-order phase after the fit: RMS deviation {rms_phase:.3g} deg, stated error {err_phase:.3g} deg")
    assert rms_phase < 1.5 * err_phase, (rms_phase, err_phase)
    rec = json.loads(on_folder.data[0].metadata["processing"])
    assert rec["options"] == {"zero_fill_points": 4096}
    refined = rec["phase"]["refined_by_fit"]
    assert abs(refined["phase0_deg"]) < 2.0 and refined["phase0_stderr_deg"] > 0
    assert any("phase was refined" in n for n in on_folder.notes)


def test_fit_command_records_the_processing(folders, tmp_path):
    root, g, nu = folders
    (tmp_path / "m.toml").write_text(_model_text())
    r = _run(["fit", "m.toml", str(root / "exp" / "1"), "-o", "res.toml", "-q"], tmp_path)
    assert r.returncode == 0, r.stderr
    doc = tomllib.loads((tmp_path / "res.toml").read_text())
    assert doc["processing"] == {"zero_fill_points": 4096}            # the model's table, kept
    rec = doc["fit"]["result"]["processing"][0]
    assert rec["group_delay"]["points"] == GRPDLY and rec["phase"]["mode"] == "auto"
    assert Path(doc["measurement"]["data"]).name == "1"
    # a model whose field disagrees with the data's by more than 0.1 %: one line, status 2, nothing written
    (tmp_path / "far.toml").write_text(_model_text(field=9.5))
    r = _run(["fit", "far.toml", str(root / "exp" / "1"), "-o", "far_res.toml", "-q"], tmp_path)
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert "model says field_tesla = 9.5 T" in r.stderr and not (tmp_path / "far_res.toml").exists()


def test_help_lists_every_processing_key(capsys):
    from powderspin.cli.main import main
    from powderspin.model.schema import keys_of

    assert main(["process", "--help"]) == 0
    out = capsys.readouterr().out
    for name in keys_of("processing"):
        assert "--" + name.replace("_", "-") in out, name


def test_stepped_sub_spectra_on_the_command_line(tmp_path):
    """Two .npy FIDs recorded 30 kHz apart: each placed by its own carrier, combined (skyline and sum)."""
    t = np.arange(2048) * DWELL
    nu = ps.get_nuclide("27Al").larmor_hz(9.4)
    for name, carrier in (("a.npy", nu - 15e3), ("b.npy", nu + 15e3)):
        line = nu + 2e3 - carrier                                # one line 2 kHz above 0 ppm
        np.save(tmp_path / name, np.exp(2j * np.pi * line * t - np.pi * 300.0 * t))
    common = ["--dwell-us", "10", "--nucleus", "27Al", "--base-mhz", str(nu / 1e6), "-q"]
    for mode in ("skyline", "sum"):
        args = ["process", "a.npy", "b.npy", "-o", f"{mode}.csv", "--combine", mode, *common,
                "--carrier-mhz", str((nu - 15e3) / 1e6), "--carrier-mhz", str((nu + 15e3) / 1e6)]
        r = _run(args, tmp_path)
        assert r.returncode == 0, r.stderr
        spec = read_spectrum(tmp_path / f"{mode}.csv")
        assert json.loads(spec.metadata["file.processing"])["combination"] == mode
        # the axis spans both windows (100 kHz each, carriers 30 kHz apart) and the line sits at +2 kHz
        assert spec.hz[-1] - spec.hz[0] == pytest.approx(130e3, rel=1e-3)
        assert spec.hz[np.argmax(spec.intensity)] == pytest.approx(2e3, abs=2 * (spec.hz[1] - spec.hz[0]))
    r = _run(["process", "a.npy", "b.npy", "-o", "x.csv", *common, "--carrier-mhz", "1", "--carrier-mhz", "2",
              "--carrier-mhz", "3"], tmp_path)
    assert r.returncode == 2 and "--carrier-mhz given 3 times for 2 DATA" in r.stderr
    assert not (tmp_path / "x.csv").exists()
