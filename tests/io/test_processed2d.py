"""Processed 2D spectrometer data (Bruker 2rr, NMRPipe 2D) read through nmrglue.

The files are written with nmrglue's own writers from a spectrum we simulate (SYNTHETIC data), then read back:
the axes must come back to 1e-6 ppm and the stored intensities exactly.  The axis convention
ppm_i = OFFSET - i SW_p / (SF SI) is common practice (as for 1D Bruker data in io/spectra.py) and is also
checked against nmrglue's own unit conversion (a reference library).
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest

import powderspin as ps
from powderspin.io.processed2d import is_bruker_2d, is_pipe_file
from powderspin.io.spectra import DataError
from powderspin.io.spectra2d import read_spectrum_2d
from powderspin.physics.multiple_quantum import two_dimensional_scale

MEAS = {"field_tesla": 11.7, "spinning_hz": "inf", "experiment": "mqmas", "points": 128, "f1_points": 32,
        "orientations": 12, "gauss_hz": 100.0, "f1_gauss_hz": 100.0}


@pytest.fixture(scope="module")
def spec():
    """On Hz grids whose step and centre are exact in 32-bit floats (an NMRPipe header stores them so)."""
    from powderspin.engine.lineshape import Axis
    from powderspin.simulator import Simulator

    m = ps.make_model("23Na", MEAS, [{"label": "a", "shift_ppm": 5.0, "cq_mhz": 2.0, "eta_q": 0.3}])
    nu = m.nucleus.larmor_hz(MEAS["field_tesla"])
    f2 = -6000.0 + 62.5 * np.arange(128)
    f1 = -2000.0 + 187.5 * np.arange(32)
    s = Simulator(m, axis=Axis.from_points(f2, nu), f1_axis=Axis.from_points(f1, nu)).spectrum()
    assert not any("outside the axes" in n for n in s.metadata["notes"])
    return s


def _stored(y, nc):
    """Integer values a Bruker 2rr holds (int32), multiples of 2^max(nc, 0) so that 2^-nc scaling stays exact."""
    q = np.round(y / np.max(np.abs(y)) * 2.0 ** 28)
    step = 2.0 ** max(nc, 0)
    return np.round(q / step) * step


def write_bruker_2d(root, spec, *, nc=0, isfloat=False, proc2s=True, xdim=(16, 8), acqus=True):
    """A Bruker experiment folder with pdata/1 (2rr, procs, proc2s) holding the spectrum, descending axes."""
    import nmrglue as ng

    nu = spec.metadata["nu_ref_hz"]
    sf = nu / 1e6
    y = spec.intensity[::-1, ::-1]  # Bruker stores ppm descending in both dimensions
    y = y / np.max(np.abs(y)) * 1e5 if isfloat else _stored(y, nc)
    tables = {}
    for name, ppm, n, xd in (("procs", spec.f2_ppm, spec.f2_ppm.size, xdim[0]),
                             ("proc2s", spec.f1_ppm, spec.f1_ppm.size, xdim[1])):
        step_hz = (ppm[1] - ppm[0]) * sf
        tables[name] = {"SI": n, "XDIM": xd, "SF": sf, "OFFSET": float(ppm[-1]), "SW_p": float(step_hz * n),
                        "NC_proc": nc, "BYTORDP": 0, "DTYPP": 2 if isfloat else 0, "AXNUC": "23Na",
                        "_coreheader": ["##TITLE= processing parameters for a test", "##JCAMPDX= 5.0"],
                        "_comments": []}
    exp = Path(root) / "12"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ng.bruker.write_pdata(str(exp), dict(tables), y.copy(), write_procs=True, pdata_folder=1, scale_data=True,
                              isfloat=isfloat, submatrix_shape=(xdim[1], xdim[0]))
        if acqus:
            ng.bruker.write_jcamp({"NUC1": "23Na", "SFO1": sf, "BF1": sf, "_coreheader": ["##TITLE= acq"],
                                   "_comments": []}, str(exp / "acqus"))
    if not proc2s:
        for f in ("proc2s", "proc2"):
            (exp / "pdata" / "1" / f).unlink()
    return exp, y[::-1, ::-1]


@pytest.mark.parametrize("nc,isfloat", [(0, False), (3, False), (-2, False), (0, True)])
def test_bruker_2rr_axes_and_intensities(tmp_path, spec, nc, isfloat):
    exp, stored = write_bruker_2d(tmp_path, spec, nc=nc, isfloat=isfloat)
    for path in (exp, exp / "pdata" / "1"):
        m = read_spectrum_2d(path, f1_referencing="isotropic", nu_ref_hz=spec.metadata["nu_ref_hz"])
        np.testing.assert_allclose(m.f2_ppm, spec.f2_ppm, rtol=0, atol=1e-6)
        np.testing.assert_allclose(m.f1_ppm, spec.f1_ppm, rtol=0, atol=1e-6)
        assert np.array_equal(m.intensity, stored)  # exact: what 2rr holds, times 2^NC_proc
        assert m.nu_ref_hz == spec.metadata["nu_ref_hz"]
        assert m.metadata["format"].startswith("Bruker processed 2D") and m.metadata["nucleus_stated"] == "23Na"
    assert is_bruker_2d(exp) and not is_pipe_file(exp)


def test_bruker_axes_agree_with_nmrglue_unit_conversion(tmp_path, spec):
    # Reference library: nmrglue's udic guess and unit converter for each dimension of the same folder.
    import nmrglue as ng

    exp, _ = write_bruker_2d(tmp_path, spec, acqus=False)
    dic, data = ng.bruker.read_pdata(str(exp / "pdata" / "1"))
    with warnings.catch_warnings():
        # without acquisition files nmrglue says it cannot fill every udic field, then takes sw, obs and car of
        # each dimension from procs / proc2s (the fields this check uses)
        warnings.simplefilter("ignore", UserWarning)
        udic = ng.bruker.guess_udic(dic, data)
    m = read_spectrum_2d(exp, f1_referencing="isotropic")
    for dim, ours in ((0, m.f1_ppm), (1, m.f2_ppm)):
        theirs = ng.fileiobase.uc_from_udic(udic, dim=dim).ppm_scale()
        np.testing.assert_allclose(np.sort(theirs), ours, rtol=0, atol=1e-6)


def write_pipe_2d(path, spec, f1_obs_factor=1.0):
    """An NMRPipe 2D spectrum (real, both dimensions transformed) of the simulated spectrum."""
    import nmrglue as ng

    nu = spec.metadata["nu_ref_hz"]
    udic = {"ndim": 2}
    for dim, hz, label in ((0, spec.f1_hz, "F1"), (1, spec.f2_hz, "F2")):
        n = hz.size
        step = hz[1] - hz[0]
        obs = nu * (f1_obs_factor if dim == 0 else 1.0)
        # NMRPipe's centre point is n/2 (0-based) of the stored (descending) axis: car = frequency there
        car = hz[::-1][n // 2]
        udic[dim] = {"size": n, "complex": False, "encoding": "states" if dim == 0 else "direct", "sw": step * n,
                     "obs": obs / 1e6, "car": car, "label": label, "time": False, "freq": True}
    y = spec.intensity[::-1, ::-1].astype(np.float32)
    ng.pipe.write(str(path), ng.pipe.create_dic(udic), y, overwrite=True)
    return y[::-1, ::-1].astype(float)


def test_pipe_2d_axes_and_intensities(tmp_path, spec):
    p = tmp_path / "mq.ft2"
    stored = write_pipe_2d(p, spec)
    assert is_pipe_file(p)
    m = read_spectrum_2d(p, f1_referencing="isotropic", nu_ref_hz=spec.metadata["nu_ref_hz"])
    # the header keeps its numbers as 32-bit floats; the fixture's sw and centre are exact in them, and the
    # given nu_ref (which the header's observe frequency matches to 1e-7) turns Hz into ppm
    np.testing.assert_allclose(m.f2_ppm, spec.f2_ppm, rtol=0, atol=1e-6)
    np.testing.assert_allclose(m.f1_ppm, spec.f1_ppm, rtol=0, atol=1e-6)
    assert np.array_equal(m.intensity, stored)
    renamed = tmp_path / "no-suffix"
    renamed.write_bytes(p.read_bytes())  # recognised by its header, not its name
    assert np.array_equal(read_spectrum_2d(renamed, f1_referencing="isotropic").intensity, stored)


def test_named_f1_scale_of_processed_data_is_undone(tmp_path, spec):
    scale = two_dimensional_scale(1.5, "mqmas", 3)
    conv = spec.on_f1_scale("total_evolution")
    exp, _ = write_bruker_2d(tmp_path, conv)
    m = read_spectrum_2d(exp, f1_referencing="total_evolution", experiment_scale=scale,
                         nu_ref_hz=spec.metadata["nu_ref_hz"])
    np.testing.assert_allclose(m.f1_ppm, spec.f1_ppm, rtol=0, atol=1e-6)
    assert "total_evolution (given when reading)" in m.metadata["f1_referencing"]
    with pytest.raises(DataError, match="needs the experiment"):
        read_spectrum_2d(exp, f1_referencing="total_evolution")


@pytest.mark.parametrize("kind,words", [
    ("no-proc2s", "has 2rr but no proc2s file: the F1 processing parameters define the F1 axis"),
    ("time-domain", "holds only time-domain data (ser/fid)"),
    ("1d", "holds a processed 1D spectrum (1r)"),
    ("no-ref", "f1_referencing must be given"),
    ("file-ref", "does not state powderspin's isotropic F1 scale"),
    ("empty-dir", "is a directory but not Bruker processed 2D data"),
])
def test_bad_processed_data_one_line(tmp_path, spec, kind, words):
    kw = {"f1_referencing": "isotropic"}
    if kind == "no-proc2s":
        path, _ = write_bruker_2d(tmp_path, spec, proc2s=False)
    elif kind == "time-domain":
        path = tmp_path / "5"
        path.mkdir()
        (path / "ser").write_bytes(b"\0" * 64)
        (path / "acqus").write_text("##END=\n")
    elif kind == "1d":
        path = tmp_path / "1"
        path.mkdir()
        (path / "1r").write_bytes(b"\0" * 64)
    elif kind == "empty-dir":
        path = tmp_path / "empty"
        path.mkdir()
    else:
        path, _ = write_bruker_2d(tmp_path, spec)
        kw = {"f1_referencing": None} if kind == "no-ref" else {"f1_referencing": "file"}
    with pytest.raises(DataError) as e:
        read_spectrum_2d(path, **kw)
    text = str(e.value)
    assert words in text and "\n" not in text and str(path) in text


def test_pipe_refuses_a_1d_file(tmp_path):
    import nmrglue as ng

    udic = {"ndim": 1, 0: {"size": 64, "complex": False, "encoding": "direct", "sw": 1e4, "obs": 100.0, "car": 0.0,
                           "label": "X", "time": False, "freq": True}}
    p = tmp_path / "one.ft1"
    ng.pipe.write(str(p), ng.pipe.create_dic(udic), np.zeros(64, dtype=np.float32), overwrite=True)
    with pytest.raises(DataError, match="of 1 dimension"):
        read_spectrum_2d(p, f1_referencing="isotropic")
