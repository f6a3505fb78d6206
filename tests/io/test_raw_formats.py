"""Raw FIDs in the Tecmag ``.tnt`` and Magritek Spinsolve (``data.1d`` + ``acqu.par``) formats (SYNTHETIC data, not
measurements).

nmrglue reads these formats but has no writer for them: the small writers below lay the bytes and text out exactly
as nmrglue's readers (``nmrglue.fileio.tecmag.read``, ``nmrglue.fileio.spinsolve.read``) expect them, and every
test checks powderspin's samples against nmrglue's own reading of the same file as well as against the known FID.
"""

from __future__ import annotations

import subprocess
import sys
import tomllib

import numpy as np
import pytest

from powderspin.io.raw import is_raw_data, read_raw
from powderspin.io.spectra import DataError, read_spectrum
from powderspin.physics.nuclides import get_nuclide
from tests.processing.synthetic import fid_from_spectrum, simulate_on_fft_grid


def _run(args, cwd):
    return subprocess.run([sys.executable, "-m", "powderspin", *args], cwd=cwd, capture_output=True, text=True,
                          timeout=600)


def _decay(n, dwell_s, offset_hz, rate_per_s):
    """The known FID: a decaying complex exponential at offset_hz above the carrier (module sense of rotation)."""
    t = np.arange(n) * dwell_s
    return np.exp(2j * np.pi * offset_hz * t - rate_per_s * t)


# --------------------------------------------------------------------------
# writers (the layouts nmrglue's readers expect)
# --------------------------------------------------------------------------
def write_tnt(path, fid, *, dwell_s, ob_freq_mhz, nucleus, sw_hz=None, obs_channel=1):
    """A Tecmag .tnt file: magic, then tagged sections (tag, flag, length) TMAG, DATA and TMG2."""
    from nmrglue.fileio import tecmag

    fid = np.atleast_2d(fid)                          # rows = FIDs
    tmag = np.zeros(1, tecmag.TNTTMAG)
    tmag["actual_npts"][0] = [fid.shape[1], fid.shape[0], 1, 1]
    tmag["npts"][0] = tmag["actual_npts"][0]
    tmag["dwell"][0] = [dwell_s, 0, 0, 0]
    tmag["sw"][0] = [1.0 / dwell_s if sw_hz is None else sw_hz, 0, 0, 0]
    tmag["ob_freq"][0][obs_channel - 1] = ob_freq_mhz
    tmag["nuclei"][0][obs_channel - 1] = nucleus.encode()
    tmag["obs_channel"] = obs_channel
    tmag["date"] = b"SYNTHETIC"
    data = fid.reshape(-1).astype("<c8")              # the first dimension (points of one FID) fastest
    tmg2 = np.zeros(1, tecmag.TNTTMG2)

    def section(tag, payload):
        return tag + np.uint32(1).tobytes() + np.uint32(len(payload)).astype("<u4").tobytes() + payload

    blob = b"TNT1.005" + section(b"TMAG", tmag.tobytes()) + section(b"DATA", data.tobytes()) \
        + section(b"TMG2", tmg2.tobytes())
    path.write_bytes(blob)
    return path


def write_spinsolve(folder, fid, *, dwell_s, b1freq_mhz, lowest_hz, nucleus, extra=None):
    """A Spinsolve folder: acqu.par (key = value lines) and data.1d (32-byte header, time axis, interleaved pairs)."""
    folder.mkdir(parents=True, exist_ok=True)
    pars = {"bandwidth": 1e-3 / dwell_s, "b1Freq": b1freq_mhz, "lowestFrequency": lowest_hz,
            "rxChannel": f'"{nucleus}"', "Sample": '"SYNTHETIC"', **(extra or {})}
    (folder / "acqu.par").write_text("".join(f"{k} = {v}\n" for k, v in pars.items()))
    n = fid.size
    head = np.array([0, 0, 0, 0, n, 1, 1, 1], dtype="<u4")
    body = np.empty(3 * n, dtype="<f4")
    body[:n] = np.arange(n) * dwell_s * 1e6           # the time axis (microseconds)
    body[n::2], body[n + 1::2] = fid.real, fid.imag
    (folder / "data.1d").write_bytes(head.tobytes() + body.tobytes())
    return folder


# --------------------------------------------------------------------------
# Tecmag
# --------------------------------------------------------------------------
TNT_DWELL = 4e-6
TNT_FIELD = 9.4
TNT_OFFSET = 3000.0


def _tnt(tmp_path, name="a.tnt", n=2048, **kw):
    nu = get_nuclide("27Al").larmor_hz(TNT_FIELD)
    fid = _decay(n, TNT_DWELL, TNT_OFFSET, 400.0)
    return write_tnt(tmp_path / name, fid, dwell_s=TNT_DWELL, ob_freq_mhz=nu / 1e6, nucleus="27Al", **kw), fid, nu


def test_tecmag_read_like_nmrglue_and_the_known_fid(tmp_path):
    import nmrglue as ng

    path, fid, nu = _tnt(tmp_path)
    raw = read_raw(path)
    dic, theirs = ng.tecmag.read(str(path))
    np.testing.assert_array_equal(raw.data, np.asarray(theirs)[:, 0, 0, 0])           # nmrglue's own reading
    np.testing.assert_allclose(raw.data, fid, rtol=0, atol=2e-7)                # the known FID, complex64-rounded
    assert raw.points == 2048 and raw.dwell_s == TNT_DWELL
    assert raw.carrier_hz == pytest.approx(nu, rel=1e-12) and raw.base_hz == raw.carrier_hz
    assert raw.nucleus == "27Al" and raw.group_delay_points == 0.0
    # the field at which 27Al's unified-scale frequency (Xi) is the base frequency (Harris et al., Pure Appl. Chem.
    # 73 (2001) 1795)
    assert raw.field_tesla == pytest.approx(TNT_FIELD, rel=1e-12)
    assert raw.metadata["format"] == "Tecmag .tnt" and is_raw_data(path)


def test_tecmag_series_and_channel(tmp_path):
    nu = get_nuclide("23Na").larmor_hz(14.1)
    fids = np.array([_decay(256, 1e-5, 1000.0 * (k + 1), 300.0) for k in range(3)])
    path = write_tnt(tmp_path / "s.tnt", fids, dwell_s=1e-5, ob_freq_mhz=nu / 1e6, nucleus="Na23", obs_channel=2)
    raw = read_raw(path, expect="ser")
    assert raw.data.shape == (3, 256) and raw.nucleus == "23Na"
    np.testing.assert_allclose(raw.data, fids, rtol=0, atol=2e-7)
    assert raw.field_tesla == pytest.approx(14.1, rel=1e-12)
    with pytest.raises(DataError, match="holds 3 FIDs"):
        read_raw(path)


def _expect(path, frag, **kw):
    with pytest.raises(DataError) as e:
        read_raw(path, **kw)
    msg = str(e.value)
    assert "\n" not in msg and frag in msg and str(path) in msg, msg


def test_tecmag_bad_files(tmp_path):
    path, _, _ = _tnt(tmp_path)
    whole = path.read_bytes()
    cut = tmp_path / "cut.tnt"
    cut.write_bytes(whole[:len(whole) - 2000])
    _expect(cut, "truncated")
    bad = tmp_path / "bad.tnt"
    bad.write_bytes(b"XXXX" + whole[4:])
    _expect(bad, "not a Tecmag .tnt file")
    contra, _, _ = _tnt(tmp_path, "contra.tnt", sw_hz=1.0 / (4 * TNT_DWELL))
    _expect(contra, "sw = 62500.0 Hz contradicts dwell")
    half, _, _ = _tnt(tmp_path, "half.tnt", sw_hz=1.0 / (2 * TNT_DWELL))     # a +/- half width: accepted
    assert read_raw(half).dwell_s == TNT_DWELL
    _expect(path, "a .tnt file states it", dwell_us=4.0)
    _expect(path, "states the nucleus 27Al", nucleus="23Na")


# --------------------------------------------------------------------------
# Spinsolve
# --------------------------------------------------------------------------
SS_DWELL = 2e-4            # 5 kHz bandwidth
SS_FIELD = 1.4
SS_CARRIER_ABOVE_BASE = 100.0
SS_OFFSET = 150.0


def _spinsolve(folder, n=2048, **kw):
    b1 = get_nuclide("1H").larmor_hz(SS_FIELD)
    fid = _decay(n, SS_DWELL, SS_OFFSET, 20.0)
    lowest = SS_CARRIER_ABOVE_BASE - 0.5 / SS_DWELL
    return write_spinsolve(folder, fid, dwell_s=SS_DWELL, b1freq_mhz=b1 / 1e6, lowest_hz=lowest, nucleus="1H",
                           **kw), fid, b1


def test_spinsolve_read_like_nmrglue_and_the_known_fid(tmp_path):
    import nmrglue as ng

    folder, fid, b1 = _spinsolve(tmp_path / "ss")
    raw = read_raw(folder)
    dic, theirs = ng.spinsolve.read(str(folder), specfile="data.1d")
    np.testing.assert_array_equal(raw.data, theirs)                             # nmrglue's own reading
    np.testing.assert_allclose(raw.data, fid, rtol=0, atol=2e-7)                # the known FID, float32-rounded
    assert raw.points == 2048 and raw.dwell_s == pytest.approx(SS_DWELL, rel=1e-12)
    assert raw.base_hz == pytest.approx(b1, rel=1e-12)
    assert raw.carrier_hz == pytest.approx(b1 + SS_CARRIER_ABOVE_BASE, rel=1e-12)
    # nmrglue's own axis puts the transmitter at car = lowestFrequency + sw/2 Hz from b1Freq
    assert raw.carrier_hz - raw.base_hz == pytest.approx(ng.spinsolve.guess_udic(dic, theirs)[0]["car"], abs=1e-6)
    assert raw.nucleus == "1H" and raw.group_delay_points == 0.0
    # the field at which 1H's unified-scale frequency is b1Freq (Harris et al., Pure Appl. Chem. 73 (2001) 1795)
    assert raw.field_tesla == pytest.approx(SS_FIELD, rel=1e-12)
    assert is_raw_data(folder) and is_raw_data(folder / "data.1d")
    assert read_raw(folder / "data.1d").points == 2048


def test_spinsolve_bad_folders(tmp_path):
    folder, _, _ = _spinsolve(tmp_path / "ss")
    whole = (folder / "data.1d").read_bytes()
    (folder / "data.1d").write_bytes(whole[:-400])
    _expect(folder, "data.1d file is truncated")
    nopar, _, _ = _spinsolve(tmp_path / "nopar")
    (nopar / "acqu.par").unlink()
    _expect(nopar, "no parameters (acqu.par)")
    nobw, _, _ = _spinsolve(tmp_path / "nobw")
    text = (nobw / "acqu.par").read_text().replace("bandwidth", "bandwith")
    (nobw / "acqu.par").write_text(text)
    _expect(nobw, "acqu.par lacks a usable bandwidth")
    ok, _, _ = _spinsolve(tmp_path / "ok")
    _expect(ok, "series of FIDs", expect="ser")


# --------------------------------------------------------------------------
# through the command line
# --------------------------------------------------------------------------
def _peak_ppm(spec):
    k = int(np.argmax(spec.intensity))
    return float(spec.ppm[k]), float(abs(spec.ppm[1] - spec.ppm[0]))


@pytest.mark.parametrize("fmt", ["tecmag", "spinsolve"])
def test_process_puts_the_line_at_its_shift(tmp_path, fmt):
    if fmt == "tecmag":
        data, _, nu = _tnt(tmp_path)
        # the carrier is the base frequency: the line is TNT_OFFSET above 0 ppm
        expected, nucleus, field = 1e6 * TNT_OFFSET / nu, "27Al", TNT_FIELD
    else:
        data, _, nu = _spinsolve(tmp_path / "ss")
        expected, nucleus, field = 1e6 * (SS_CARRIER_ABOVE_BASE + SS_OFFSET) / nu, "1H", SS_FIELD
    r = _run(["process", str(data), "-o", "s.csv", "-q"], tmp_path)
    assert r.returncode == 0, r.stderr
    spec = read_spectrum(tmp_path / "s.csv")
    assert spec.nucleus == nucleus and spec.field_tesla == pytest.approx(field, rel=1e-12)
    peak, step = _peak_ppm(spec)
    # the tallest point is the grid point nearest the line (within half a point, plus rounding of the written axis)
    assert abs(peak - expected) <= 0.5 * step * 1.001, (peak, expected, step)


@pytest.mark.parametrize("fmt", ["tecmag", "spinsolve"])
def test_process_refuses_a_truncated_file(tmp_path, fmt):
    if fmt == "tecmag":
        data, _, _ = _tnt(tmp_path)
        data.write_bytes(data.read_bytes()[:-5000])
    else:
        data, _, _ = _spinsolve(tmp_path / "ss")
        (data / "data.1d").write_bytes((data / "data.1d").read_bytes()[:-5000])
    before = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}
    r = _run(["process", str(data), "-o", "out.csv", "--plot", "out.png"], tmp_path)
    assert r.returncode == 2, (r.stdout, r.stderr)
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and "truncated" in lines[0], r.stderr
    assert {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()} == before


TRUTH = {"label": "Al", "shift_ppm": 58.0, "cq_mhz": 4.2, "eta_q": 0.45}


def test_fit_command_on_a_tnt_file(tmp_path):
    """``powderspin fit`` on a .tnt file (powderspin's own 27Al fast-MAS central-transition pattern turned into a
    FID with noise): the fitted C_Q, eta and shift are within three stated standard errors of the truth."""
    dwell, m, n = 1e-5, 4096, 2048
    g, nu = simulate_on_fft_grid("27Al", 9.4, [TRUTH], m, dwell, 0.0, spinning_hz="inf", lorentz_hz=200.0,
                                 gauss_hz=150.0)
    fid = fid_from_spectrum(g, dwell, n, noise=4e-3, seed=3)
    write_tnt(tmp_path / "al.tnt", fid, dwell_s=dwell, ob_freq_mhz=nu / 1e6, nucleus="27Al")
    (tmp_path / "m.toml").write_text(
        'nucleus = "27Al"\n[measurement]\nfield_tesla = 9.4\nspinning_hz = "inf"\nlorentz_hz = 200.0\n'
        'gauss_hz = 150.0\n[[site]]\nlabel = "Al"\nshift_ppm = { start = 55.0, min = 20.0, max = 90.0 }\n'
        'cq_mhz = { start = 3.5, min = 1.0, max = 8.0 }\neta_q = { start = 0.3, min = 0.0, max = 1.0 }\n'
        '[fit]\nregions = [[140.0, -60.0]]\n[processing]\nzero_fill_points = 4096\n')
    r = _run(["fit", "m.toml", "al.tnt", "-o", "res.toml", "-q"], tmp_path)
    assert r.returncode == 0, r.stderr
    doc = tomllib.loads((tmp_path / "res.toml").read_text())
    site = doc["site"][0]
    for key in ("shift_ppm", "cq_mhz", "eta_q"):
        assert abs(site[key] - TRUTH[key]) < 3 * site["stderr"][key], (key, site[key], site["stderr"][key])
    assert doc["fit"]["result"]["processing"][0]["phase"]["mode"] == "auto"
    # a model at another field: one line, status 2, nothing written
    (tmp_path / "far.toml").write_text((tmp_path / "m.toml").read_text().replace("9.4", "9.5"))
    r = _run(["fit", "far.toml", "al.tnt", "-o", "far.toml.out", "-q"], tmp_path)
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert "model says field_tesla = 9.5 T" in r.stderr and not (tmp_path / "far.toml.out").exists()
