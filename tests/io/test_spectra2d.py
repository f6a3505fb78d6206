"""Reading measured 2D spectra: round trips through our writers, explicit F1 referencing, bad files."""

from __future__ import annotations

import numpy as np
import pytest

import powderspin as ps
from powderspin.io.spectra import DataError
from powderspin.io.spectra2d import read_spectrum_2d, write_spectrum_2d


@pytest.fixture(scope="module")
def spec():
    m = ps.make_model("23Na", {"field_tesla": 11.7, "spinning_hz": "inf", "experiment": "mqmas", "points": 128,
                               "f1_points": 32, "orientations": 12, "gauss_hz": 100.0, "f1_gauss_hz": 100.0},
                      [{"label": "a", "shift_ppm": 5.0, "cq_mhz": 2.0, "eta_q": 0.3}])
    return ps.simulate(m)


@pytest.mark.parametrize("suffix", [".npz", ".csv", ".txt"])
def test_round_trip(tmp_path, spec, suffix):
    p = write_spectrum_2d(spec, tmp_path / f"mq{suffix}")
    m = read_spectrum_2d(p, f1_referencing="file")
    assert np.allclose(m.f1_ppm, spec.f1_ppm, rtol=1e-9) and np.allclose(m.f2_ppm, spec.f2_ppm, rtol=1e-9)
    assert np.allclose(m.intensity, spec.intensity, rtol=1e-9, atol=1e-300)
    assert m.nu_ref_hz == pytest.approx(spec.metadata["nu_ref_hz"], rel=1e-12)
    assert m.metadata["f1_referencing"] == "isotropic (stated by the file)"


def test_descending_axes_and_a_linear_f1_map(tmp_path, spec):
    p = tmp_path / "flipped.npz"
    np.savez(p, f1_ppm=spec.f1_ppm[::-1] * 2.0, f2_ppm=spec.f2_ppm[::-1], intensity=spec.intensity[::-1, ::-1])
    m = read_spectrum_2d(p, f1_referencing=(0.5, 0.0), nu_ref_hz=spec.metadata["nu_ref_hz"])
    assert np.allclose(m.f1_ppm, spec.f1_ppm) and np.allclose(m.intensity, spec.intensity)
    m2 = read_spectrum_2d(p, f1_referencing=(-0.5, 10.0), nu_ref_hz=spec.metadata["nu_ref_hz"])
    assert np.all(np.diff(m2.f1_ppm) > 0) and np.allclose(m2.intensity, spec.intensity[::-1])


def _bad(tmp_path, **arrays):
    p = tmp_path / "bad.npz"
    np.savez(p, **arrays)
    return p


@pytest.mark.parametrize("kind,words", [
    ("no-ref", "f1_referencing must be given"),
    ("word", "f1_referencing = 'sheared' is not one of"),
    ("file-unstated", "does not state powderspin's isotropic F1 scale"),
    ("shape", "intensity has shape"),
    ("short", "the F2 axis must have at least 16 points"),
    ("uneven", "the F1 axis must be uniformly spaced"),
    ("missing", "missing: intensity"),
    ("no-nu", "no reference frequency"),
])
def test_bad_files_one_clear_error(tmp_path, spec, kind, words):
    f1, f2, y = spec.f1_ppm, spec.f2_ppm, spec.intensity
    nu = spec.metadata["nu_ref_hz"]
    kw = {"f1_referencing": "isotropic", "nu_ref_hz": nu}
    if kind == "no-ref":
        p, kw = _bad(tmp_path, f1_ppm=f1, f2_ppm=f2, intensity=y), {"f1_referencing": None}
    elif kind == "word":
        p, kw = _bad(tmp_path, f1_ppm=f1, f2_ppm=f2, intensity=y), {"f1_referencing": "sheared"}
    elif kind == "file-unstated":
        p, kw = _bad(tmp_path, f1_ppm=f1, f2_ppm=f2, intensity=y), {"f1_referencing": "file", "nu_ref_hz": nu}
    elif kind == "shape":
        p = _bad(tmp_path, f1_ppm=f1, f2_ppm=f2, intensity=y.T)
    elif kind == "short":
        p = _bad(tmp_path, f1_ppm=f1, f2_ppm=f2[:8], intensity=y[:, :8])
    elif kind == "uneven":
        g = f1.copy()
        g[3] += 0.3 * (f1[1] - f1[0])
        p = _bad(tmp_path, f1_ppm=g, f2_ppm=f2, intensity=y)
    elif kind == "missing":
        p = _bad(tmp_path, f1_ppm=f1, f2_ppm=f2)
    else:
        p, kw = _bad(tmp_path, f1_ppm=f1, f2_ppm=f2, intensity=y), {"f1_referencing": "isotropic"}
    with pytest.raises(DataError, match=words) as e:
        read_spectrum_2d(p, **kw)
    assert "\n" not in str(e.value) and str(p) in str(e.value)
