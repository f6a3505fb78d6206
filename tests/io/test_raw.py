"""Raw time-domain data: Bruker and Agilent/Varian folders written by nmrglue's writers, .npy and text FIDs,
and one case per kind of bad input (SYNTHETIC data; not measurements)."""

from __future__ import annotations

import numpy as np
import pytest

from powderspin.io.raw import FIELD_TOLERANCE, RawFID, check_against_model, is_raw_data, read_raw
from powderspin.io.spectra import DataError
from powderspin.physics.nuclides import get_nuclide
from tests.processing.synthetic import write_bruker

DWELL = 1e-5


def _fid(n=1024, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(n) * DWELL
    return np.exp(2j * np.pi * 1234.0 * t - 300.0 * t) + 0.01 * (rng.normal(size=n) + 1j * rng.normal(size=n))


@pytest.mark.parametrize("integer", [True, False])
def test_bruker_folder_read_like_nmrglue(tmp_path, integer):
    import nmrglue as ng

    nu = get_nuclide("27Al").larmor_hz(9.4)
    write_bruker(tmp_path, _fid(), dwell_s=DWELL, sfo1_mhz=(nu + 2500.0) / 1e6, bf1_mhz=nu / 1e6, nucleus="27Al",
                 group_delay=67.985, integer=integer)
    raw = read_raw(tmp_path)
    # the samples are nmrglue's own reading of the file (an outside reader of the format)
    _, theirs = ng.bruker.read(str(tmp_path))
    np.testing.assert_array_equal(raw.data, theirs)
    assert raw.points == 1024 and raw.dwell_s == pytest.approx(DWELL, rel=1e-15)
    assert raw.carrier_hz == pytest.approx(nu + 2500.0, rel=1e-12) and raw.base_hz == pytest.approx(nu, rel=1e-12)
    assert raw.nucleus == "27Al" and raw.group_delay_points == 67.985
    # the field is the one at which the nucleus's unified-scale frequency is the base frequency (Harris 2001)
    assert raw.field_tesla == pytest.approx(9.4, rel=1e-12)
    assert raw.metadata["group_delay_source"] == "acqus GRPDLY"
    assert is_raw_data(tmp_path) and is_raw_data(tmp_path / "fid")


def test_group_delay_of_old_files_from_nmrglues_table(tmp_path):
    from nmrglue.fileio.bruker import bruker_dsp_table

    write_bruker(tmp_path, _fid(), dwell_s=DWELL, sfo1_mhz=104.3, bf1_mhz=104.3, nucleus="27Al", decim=32, dspfvs=12)
    raw = read_raw(tmp_path)
    assert raw.group_delay_points == bruker_dsp_table[12][32]
    assert "DECIM = 32" in raw.metadata["group_delay_source"]


def test_ser_rows(tmp_path):
    fids = np.array([_fid(seed=k) for k in range(3)])
    write_bruker(tmp_path, fids, dwell_s=DWELL, sfo1_mhz=104.3, bf1_mhz=104.3, nucleus="27Al", group_delay=20.0,
                 integer=False, name="ser")
    raw = read_raw(tmp_path, expect="ser")
    assert raw.data.shape == (3, 1024)
    # the rows keep their relative sizes (written together)
    np.testing.assert_allclose(raw.row(1).data / raw.row(0).data[0], fids[1] / fids[0][0], rtol=1e-12)


def test_varian_folder(tmp_path):
    import nmrglue as ng

    udic = ng.fileiobase.create_blank_udic(1)
    udic[0].update(size=1024, complex=True, sw=1.0 / DWELL, obs=105.868, car=0.0, label="Na23")
    dic = ng.varian.create_dic(udic)
    for name, value in (("sw", "100000"), ("sfrq", "105.868"), ("tn", "Na23")):
        dic["procpar"][name] = ng.varian.create_pdic_param(name, [value])
    dic["procpar"]["tn"]["basictype"] = "2"
    data = _fid()
    ng.varian.write(str(tmp_path), dic, data.astype("complex64"), overwrite=True)
    raw = read_raw(tmp_path)
    assert raw.nucleus == "23Na" and raw.points == 1024
    assert raw.dwell_s == pytest.approx(DWELL) and raw.carrier_hz == pytest.approx(105.868e6)
    np.testing.assert_allclose(raw.data, data, rtol=1e-6, atol=1e-6)
    assert raw.group_delay_points == 0.0


def test_truncated_varian_fid(tmp_path):
    import nmrglue as ng

    udic = ng.fileiobase.create_blank_udic(1)
    udic[0].update(size=1024, complex=True, sw=1.0 / DWELL, obs=105.868, car=0.0, label="Na23")
    dic = ng.varian.create_dic(udic)
    for name, value in (("sw", "100000"), ("sfrq", "105.868"), ("tn", "Na23")):
        dic["procpar"][name] = ng.varian.create_pdic_param(name, [value])
    ng.varian.write(str(tmp_path), dic, _fid().astype("complex64"), overwrite=True)
    fid = tmp_path / "fid"
    fid.write_bytes(fid.read_bytes()[:4000])
    _expect(tmp_path, "truncated")


def test_npy_and_text_fids(tmp_path):
    data = _fid(256)
    np.save(tmp_path / "a.npy", data)
    np.save(tmp_path / "b.npy", np.vstack([data.real, data.imag]))
    (tmp_path / "c.txt").write_text("# re im\n" + "".join(f"{float(z.real)!r} {float(z.imag)!r}\n" for z in data))
    for name in ("a.npy", "b.npy", "c.txt"):
        raw = read_raw(tmp_path / name, dwell_us=10.0, nucleus="27Al", carrier_mhz=104.28692316637851)
        np.testing.assert_array_equal(raw.data, data)
        assert raw.field_tesla == pytest.approx(9.4, rel=1e-9)


def _expect(path, frag, **kw):
    with pytest.raises(DataError) as e:
        read_raw(path, **kw)
    msg = str(e.value)
    assert "\n" not in msg and frag in msg, msg


def test_bad_inputs(tmp_path):
    # a folder without parameters
    d = tmp_path / "noparams"
    d.mkdir()
    (d / "fid").write_bytes(b"\0" * 4096)
    _expect(d, "no parameters (acqus or procpar)")
    # a truncated FID: fewer bytes than TD says
    t = tmp_path / "trunc"
    write_bruker(t, _fid(), dwell_s=DWELL, sfo1_mhz=104.3, bf1_mhz=104.3, nucleus="27Al", group_delay=10.0)
    (t / "fid").write_bytes((t / "fid").read_bytes()[:3000])
    _expect(t, "truncated")
    # a ser file where one FID is expected
    s = tmp_path / "ser"
    write_bruker(s, np.array([_fid(), _fid(seed=1)]), dwell_s=DWELL, sfo1_mhz=104.3, bf1_mhz=104.3,
                 nucleus="27Al", group_delay=10.0, integer=False, name="ser")
    _expect(s, "ser file")
    # a nucleus that disagrees with the file
    _expect(t.parent / "ser", "ser", nucleus="23Na")
    ok = tmp_path / "ok"
    write_bruker(ok, _fid(), dwell_s=DWELL, sfo1_mhz=104.3, bf1_mhz=104.3, nucleus="27Al", group_delay=10.0)
    _expect(ok, "states the nucleus 27Al", nucleus="23Na")
    # .npy without its dwell time; an unknown suffix
    np.save(tmp_path / "x.npy", _fid())
    _expect(tmp_path / "x.npy", "dwell_us")
    (tmp_path / "x.bin").write_bytes(b"1")
    _expect(tmp_path / "x.bin", "unsupported raw-data file", dwell_us=1.0)


def test_model_disagreements_name_both_values():
    raw = RawFID(np.ones(32, complex), DWELL, 104.3e6, 104.3e6, "27Al", 9.4, 0.0, "exp/1")
    check_against_model(raw, "27Al", 9.4 * (1 + 0.9 * FIELD_TOLERANCE))           # within 0.1 %: accepted
    with pytest.raises(DataError, match=r"9\.4 T but the model says field_tesla = 9\.42 T"):
        check_against_model(raw, "27Al", 9.42)
    with pytest.raises(DataError, match="observe 27Al but the model's nucleus is 23Na"):
        check_against_model(raw, "23Na", 9.4)
