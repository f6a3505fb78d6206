"""Reading and writing measured 1D spectra (powderspin.io.spectra).

The spectra here are made inside the tests by simple analytic functions (a
Lorentzian, a triangle); nothing in this file checks physics against invented
numbers.  Outside references: nmrglue (its JCAMP-DX decoder, its Bruker
writer and reader, and its unit conversion) and numpy's own .npy files.
Every test uses a few hundred points at most, so the file runs in seconds.
"""

from __future__ import annotations

import math
import os
import re
import stat
import tomllib
import warnings
from pathlib import Path

import numpy as np
import pytest

from powderspin.engine.spectrum import Spectrum
from powderspin.files import OutputExistsError
from powderspin.io.results import spectrum_csv_text
from powderspin.io.spectra import (
    MATCH_TOLERANCE,
    MIN_POINTS,
    DataError,
    MeasuredSpectrum,
    compare_with_model,
    read_spectrum,
    write_jcamp,
    write_spectrum_text,
)
from powderspin.physics.nuclides import UnknownNuclideError, get_nuclide

BAD = Path(__file__).resolve().parents[1] / "bad_inputs" / "data"
NU_AL_94 = get_nuclide("27Al").larmor_hz(9.4)  # nu_ref of 27Al at 9.4 T from the nuclide table


def lorentzian(x, x0, fwhm):
    """Peak-normalised Lorentzian line (analytic)."""
    return 1.0 / (1.0 + ((x - x0) / (0.5 * fwhm)) ** 2)


def triangle(x, x0, half_width):
    """A triangle, exactly zero outside |x - x0| < half_width: long runs of equal differences."""
    return np.maximum(0.0, 1.0 - np.abs(x - x0) / half_width)


def spectrum_from_hz(hz, y, nu=NU_AL_94, *, imag=None, nucleus="27Al", field=9.4, source="made in a test"):
    hz = np.asarray(hz, dtype=float)
    return MeasuredSpectrum(hz=hz, ppm=1e6 * hz / nu, intensity=y, imag=imag, nu_ref_hz=nu, source=source,
                            nucleus=nucleus, field_tesla=field)


def assert_close_to_max(got, want, rel=1e-9):
    """Agreement to `rel` of the largest magnitude (the usual meaning for a spectrum)."""
    scale = max(float(np.max(np.abs(want))), 1e-300)
    assert float(np.max(np.abs(np.asarray(got) - np.asarray(want)))) <= rel * scale


# ---------------------------------------------------------------------------
# plain text
# ---------------------------------------------------------------------------
DELIMITERS = {"csv": ",", "tsv": "\t", "whitespace": "   "}
SUFFIX = {"csv": ".csv", "tsv": ".tsv", "whitespace": ".dat"}


@pytest.mark.parametrize("order", ["ascending", "descending"])
@pytest.mark.parametrize("unit", ["ppm", "hz", "khz"])
@pytest.mark.parametrize("header", [True, False])
@pytest.mark.parametrize("kind", ["csv", "tsv", "whitespace"])
def test_text_round_trip(tmp_path, kind, header, unit, order):
    n = 257
    ppm = np.linspace(-120.0, 180.0, n)
    hz = ppm * NU_AL_94 / 1e6
    y = lorentzian(ppm, 35.0, 12.0)
    axis = {"ppm": ppm, "hz": hz, "khz": hz / 1e3}[unit]
    if order == "descending":
        axis, values = axis[::-1], y[::-1]
    else:
        values = y
    sep = DELIMITERS[kind]
    lines = ["# measured somewhere, exported for a test"]
    if header:
        lines.append(sep.join([unit.upper() if unit == "ppm" else unit, "Intensity"]))
    lines += [f"{a:.17g}{sep}{v:.17g}" for a, v in zip(axis, values)]
    path = tmp_path / f"spec{SUFFIX[kind]}"
    path.write_text("\n".join(lines) + "\n")
    options = {} if header else {"axis": unit}
    spec = read_spectrum(path, nucleus="27Al", field_tesla=9.4, **options)
    assert spec.source == str(path)
    assert np.all(np.diff(spec.hz) > 0)
    np.testing.assert_allclose(spec.hz, hz, rtol=1e-9, atol=1e-9 * np.max(np.abs(hz)))
    np.testing.assert_allclose(spec.ppm, ppm, rtol=1e-9, atol=1e-9 * np.max(np.abs(ppm)))
    assert_close_to_max(spec.intensity, y)
    assert spec.imag is None
    assert spec.nu_ref_hz == NU_AL_94 and spec.nucleus == "27Al" and spec.field_tesla == 9.4
    assert spec.metadata["axis_in_file"] == f"{unit}, {order}"


def test_reads_the_csv_that_powderspin_writes(tmp_path):
    # Spectrum.csv_text is powderspin's own writer of simulated spectra.
    nu = get_nuclide("31P").larmor_hz(11.7)
    hz = np.linspace(-30e3, 30e3, 301)
    y = lorentzian(hz, 2500.0, 900.0)
    sim = Spectrum(hz=hz, ppm=1e6 * hz / nu, intensity=y, site_labels=("P1",), site_intensities=[y],
                   metadata={"nucleus": "31P", "field_tesla": 11.7, "nu_ref_hz": nu, "spinning_hz": 10000.0,
                             "methods": {"P1": "perturbation"}})
    path = tmp_path / "sim.csv"
    path.write_text(spectrum_csv_text(sim))
    spec = read_spectrum(path)
    assert spec.nucleus == "31P" and spec.field_tesla == 11.7 and spec.nu_ref_hz == nu
    assert spec.metadata["nu_ref_source"] == "stated by the file"
    assert spec.metadata["field_source"] == "stated by the file"
    assert spec.metadata["file.spinning_hz"] == "10000.0"
    np.testing.assert_allclose(spec.hz, hz, rtol=1e-9)
    assert_close_to_max(spec.intensity, y)


def test_own_csv_per_site_columns_are_ignored(tmp_path):
    nu = NU_AL_94
    hz = np.linspace(-20e3, 20e3, 64)
    a, b = lorentzian(hz, -3000.0, 800.0), 0.5 * lorentzian(hz, 4000.0, 1500.0)
    rows = [f"{1e6 * h / nu:.8g},{h:.10g},{p + q:.10g},{p:.10g},{q:.10g}" for h, p, q in zip(hz, a, b)]
    path = tmp_path / "sites.csv"
    path.write_text(f"# nucleus: 27Al\n# nu_ref_hz: {nu:.17g}\nppm,hz,intensity,AlO4,AlO6\n" + "\n".join(rows) + "\n")
    spec = read_spectrum(path)
    assert spec.metadata["ignored_columns"] == ("alo4", "alo6")
    assert_close_to_max(spec.intensity, a + b, rel=1e-9)


def test_nu_ref_implied_by_ppm_and_hz_columns(tmp_path):
    hz = np.linspace(-20e3, 20e3, 64)
    y = lorentzian(hz, 0.0, 700.0)
    rows = [f"{1e6 * h / NU_AL_94:.8g},{h:.10g},{v:.10g}" for h, v in zip(hz, y)]
    path = tmp_path / "both.csv"
    path.write_text("ppm,hz,intensity\n" + "\n".join(rows) + "\n")
    spec = read_spectrum(path)
    assert spec.metadata["nu_ref_source"] == "implied by the file's ppm and Hz columns"
    assert abs(spec.nu_ref_hz / NU_AL_94 - 1) < 1e-7  # ppm printed to 8 significant digits
    with pytest.raises(DataError, match="imply the reference frequency"):
        read_spectrum(path, nu_ref_hz=1.01 * NU_AL_94)


def test_ppm_and_hz_columns_that_disagree(tmp_path):
    hz = np.linspace(-20e3, 20e3, 64)
    ppm = 1e6 * hz / NU_AL_94
    ppm[40] += 5.0
    path = tmp_path / "disagree.csv"
    path.write_text("ppm,hz,intensity\n" + "\n".join(f"{p:.17g},{h:.17g},1" for p, h in zip(ppm, hz)) + "\n")
    with pytest.raises(DataError, match=r"line 42: the ppm and Hz columns disagree"):
        read_spectrum(path)


def test_real_and_imaginary_columns(tmp_path):
    hz = np.linspace(-5e3, 5e3, 101)
    x = hz / 400.0
    re_, im = 1 / (1 + x**2), x / (1 + x**2)  # absorption and dispersion of one Lorentzian
    text = "hz;real;imag\n" + "\n".join(f"{h:.17g};{a:.17g};{b:.17g}" for h, a, b in zip(hz, re_, im)) + "\n"
    (tmp_path / "c.csv").write_text(text)
    spec = read_spectrum(tmp_path / "c.csv", nu_ref_hz=100e6)
    assert np.array_equal(spec.intensity, re_) and np.array_equal(spec.imag, im)
    # without a header, a third column is the imaginary part
    (tmp_path / "c.txt").write_text("\n".join(f"{h:.17g} {a:.17g} {b:.17g}" for h, a, b in zip(hz, re_, im)) + "\n")
    spec = read_spectrum(tmp_path / "c.txt", axis="hz", nu_ref_hz=100e6)
    assert np.array_equal(spec.imag, im)


def test_header_in_a_comment_line_and_inline_comments(tmp_path):
    ppm = np.linspace(50.0, -50.0, 41)
    y = lorentzian(ppm, 0.0, 8.0)
    rows = [f"{p:.17g}\t{v:.17g}" + ("\t# the peak" if i == 20 else "") for i, (p, v) in enumerate(zip(ppm, y))]
    path = tmp_path / "hashheader.tsv"
    path.write_text("# exported\n#ppm\tintensity\n" + "\n".join(rows) + "\n")
    spec = read_spectrum(path, nu_ref_hz=1e8)
    assert spec.metadata["axis_in_file"] == "ppm, descending"
    assert float(spec.ppm[np.argmax(spec.intensity)]) == 0.0


def test_crlf_and_byte_order_mark(tmp_path):
    hz = np.linspace(-1e3, 1e3, 21)
    text = "\ufeffhz,intensity\r\n" + "\r\n".join(f"{h:.17g},{v:.17g}" for h, v in zip(hz, lorentzian(hz, 0, 300)))
    (tmp_path / "w.csv").write_bytes(text.encode("utf-8"))
    assert read_spectrum(tmp_path / "w.csv", nu_ref_hz=1e8).hz.size == 21


def test_axis_option_must_agree_with_the_header(tmp_path):
    hz = np.linspace(-1e3, 1e3, 21)
    (tmp_path / "h.csv").write_text("hz,intensity\n" + "\n".join(f"{h:.17g},1" for h in hz) + "\n")
    assert read_spectrum(tmp_path / "h.csv", axis="hz", nu_ref_hz=1e8).hz.size == 21
    with pytest.raises(DataError, match="option axis='ppm', but the header names the axis column 'hz'"):
        read_spectrum(tmp_path / "h.csv", axis="ppm", nu_ref_hz=1e8)


def test_axis_rounded_when_printed_is_still_uniform(tmp_path):
    # 0.0737 ppm steps printed with 2 decimals: steps of 0.07 and 0.08, i.e. 8 % off the mean step,
    # all of it rounding.  Accepted; the JCAMP writer accepts it too.
    ppm = np.linspace(10.0, -8.8, 256)
    path = tmp_path / "rounded.csv"
    path.write_text("ppm,intensity\n" + "\n".join(f"{p:.2f},{v:.6f}" for p, v in
                                                  zip(ppm, lorentzian(ppm, 1.0, 2.0))) + "\n")
    spec = read_spectrum(path, nucleus="27Al", field_tesla=9.4)
    assert spec.metadata["axis_precision_hz"] == pytest.approx(0.005 * NU_AL_94 / 1e6)
    write_jcamp(tmp_path / "rounded.jdx", spec)
    # the same steps printed with 6 decimals are a real non-uniformity
    steps = np.where(np.arange(255) % 2 == 0, -0.07, -0.08)
    axis = 10.0 + np.concatenate([[0.0], np.cumsum(steps)])
    path.write_text("ppm,intensity\n" + "\n".join(f"{p:.6f},1" for p in axis) + "\n")
    with pytest.raises(DataError, match="not uniform"):
        read_spectrum(path, nucleus="27Al", field_tesla=9.4)


def test_resample_onto_a_uniform_axis(tmp_path):
    # Axis points displaced from a uniform grid by up to 30 % of a step; a Gaussian sampled on them.
    n = 200
    u = np.linspace(-4000.0, 4000.0, n)
    h = u[1] - u[0]
    x = u + 0.3 * h * np.sin(np.arange(n))
    x[0], x[-1] = u[0], u[-1]
    sigma = 600.0
    f = np.exp(-0.5 * (x / sigma) ** 2)
    path = tmp_path / "uneven.csv"
    path.write_text("hz,intensity\n" + "\n".join(f"{a:.17g},{b:.17g}" for a, b in zip(x, f)) + "\n")
    with pytest.raises(DataError, match="resample=True"):
        read_spectrum(path, nu_ref_hz=1e8)
    spec = read_spectrum(path, nu_ref_hz=1e8, resample=True)
    assert spec.hz.size == n
    np.testing.assert_allclose(spec.hz, u, rtol=0, atol=1e-9)
    # Linear interpolation error bound: |f - p| <= (d^2 / 8) max|f''|, d the largest gap
    # between the original points; max|f''| of a Gaussian is 1 / sigma^2 (standard results).
    d = float(np.max(np.diff(x)))
    bound = d**2 / 8 / sigma**2
    assert float(np.max(np.abs(spec.intensity - np.exp(-0.5 * (u / sigma) ** 2)))) <= bound
    assert "linear interpolation onto 200 uniform points" in spec.metadata["resampled"]


# ---------------------------------------------------------------------------
# reference frequency, nucleus and field
# ---------------------------------------------------------------------------
def _hz_file(tmp_path, head=""):
    hz = np.linspace(-1e4, 1e4, 33)
    path = tmp_path / "r.csv"
    path.write_text(head + "hz,intensity\n" + "\n".join(f"{h:.17g},{v:.17g}" for h, v in
                                                      zip(hz, lorentzian(hz, 0, 500))) + "\n")
    return path


def test_reference_from_each_source(tmp_path):
    path = _hz_file(tmp_path)
    s = read_spectrum(path, nu_ref_hz=104.3e6)
    assert (s.nu_ref_hz, s.nucleus, s.field_tesla) == (104.3e6, None, None)
    assert s.metadata["nu_ref_source"] == "given"
    s = read_spectrum(path, nu_ref_hz=NU_AL_94, nucleus="al-27")
    assert s.nucleus == "27Al" and s.field_tesla == pytest.approx(9.4, rel=1e-12)
    assert s.metadata["field_source"] == "implied by the reference frequency and the nucleus"
    s = read_spectrum(path, nucleus="27Al", field_tesla=9.4)
    assert s.nu_ref_hz == NU_AL_94 and s.metadata["nu_ref_source"] == "nucleus and field (given)"
    path = _hz_file(tmp_path, "# nucleus: 27Al\n# field_tesla: 9.4\n")
    s = read_spectrum(path)
    assert s.nu_ref_hz == NU_AL_94 and s.metadata["nu_ref_source"] == "nucleus and field (stated by the file)"
    # a given value that agrees with the file (within MATCH_TOLERANCE) is accepted
    assert read_spectrum(path, field_tesla=9.4 * (1 + 0.5 * MATCH_TOLERANCE)).field_tesla == 9.4


def test_given_values_may_not_contradict_the_file(tmp_path):
    path = _hz_file(tmp_path, f"# nu_ref_hz: {NU_AL_94:.17g}\n")
    with pytest.raises(DataError, match="the file states the reference frequency"):
        read_spectrum(path, nu_ref_hz=NU_AL_94 * (1 + 3 * MATCH_TOLERANCE))


def test_bad_options(tmp_path):
    path = _hz_file(tmp_path)
    for kwargs, words in [({"nu_ref_hz": -1.0}, "option nu_ref_hz"), ({"field_tesla": math.nan}, "option field_tesla"),
                          ({"nucleus": "27Xx"}, "option nucleus"), ({"nu_ref_hz": 1e8, "resample": "yes"},
                                                                     "option resample")]:
        with pytest.raises(DataError, match=words):
            read_spectrum(path, **kwargs)


# ---------------------------------------------------------------------------
# .npy
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("layout", ["rows", "columns"])
def test_npy_both_orientations(tmp_path, layout):
    khz = np.linspace(30.0, -30.0, 121)
    y = lorentzian(khz, -4.0, 2.5)
    arr = np.vstack([khz, y]) if layout == "rows" else np.column_stack([khz, y])
    np.save(tmp_path / "s.npy", arr)
    spec = read_spectrum(tmp_path / "s.npy", axis="khz", nucleus="27Al", field_tesla=9.4)
    np.testing.assert_allclose(spec.hz, 1e3 * khz[::-1], rtol=1e-12)
    assert np.array_equal(spec.intensity, y[::-1])
    assert spec.metadata["format"] == f"NumPy .npy ({layout})"


def test_npy_with_imaginary_part(tmp_path):
    hz = np.linspace(-2e3, 2e3, 64)
    x = hz / 300.0
    z = (1 - 1j * x) / (1 + x**2)
    np.save(tmp_path / "three.npy", np.vstack([hz, z.real, z.imag]))
    np.save(tmp_path / "cplx.npy", np.vstack([hz.astype(complex), z]))
    for name in ("three.npy", "cplx.npy"):
        spec = read_spectrum(tmp_path / name, axis="hz", nu_ref_hz=1e8)
        assert np.array_equal(spec.intensity, z.real) and np.array_equal(spec.imag, z.imag)


def test_npy_object_array_is_refused(tmp_path):
    np.save(tmp_path / "obj.npy", np.array([{"a": 1}, None], dtype=object), allow_pickle=True)
    with pytest.raises(DataError, match="Python objects"):
        read_spectrum(tmp_path / "obj.npy", axis="hz", nu_ref_hz=1e8)


def test_npy_damaged_file(tmp_path):
    np.save(tmp_path / "cut.npy", np.vstack([np.arange(64.0), np.ones(64)]))
    data = (tmp_path / "cut.npy").read_bytes()
    (tmp_path / "cut.npy").write_bytes(data[: len(data) // 2])
    with pytest.raises(DataError, match="not a readable .npy array"):
        read_spectrum(tmp_path / "cut.npy", axis="hz", nu_ref_hz=1e8)


# ---------------------------------------------------------------------------
# JCAMP-DX
# ---------------------------------------------------------------------------
# ASDF pseudo-digits (McDonald & Wilks 1988, from memory): SQZ @A-I / a-i, DIF %J-R / j-r, DUP S-Z s.
_SQZ = {c: (i, 1) for i, c in enumerate("@ABCDEFGHI")} | {c: (i, -1) for i, c in enumerate("abcdefghi", 1)}
_DIF = {c: (i, 1) for i, c in enumerate("%JKLMNOPQR")} | {c: (i, -1) for i, c in enumerate("jklmnopqr", 1)}
_DUP = {c: i for i, c in enumerate("STUVWXYZs", 1)}


def decode_difdup_with_checks(lines):
    """A slow, independent DIF/DUP decoder that also verifies every Y-value check.

    Each line: abscissa, then an SQZ ordinate, then DIF differences with DUP
    counts.  The first ordinate of a line repeats the last of the previous
    line (the check) and is dropped.  Returns the ordinates and the number of
    checks verified.
    """
    values: list[int] = []
    checks = 0
    for line in lines:
        x_text, body = line.split(" ", 1)
        tokens = re.findall(r"[@A-Ia-i%J-Rj-rS-Zs][0-9]*", body)
        assert "".join(tokens) == body, f"unexpected characters in {line!r}"
        line_values: list[int] = []
        last_dif = None
        for t in tokens:
            head, rest = t[0], t[1:]
            if head in _SQZ:
                d, sign = _SQZ[head]
                line_values.append(sign * int(str(d) + rest))
                last_dif = None
            elif head in _DIF:
                d, sign = _DIF[head]
                last_dif = sign * int(str(d) + rest)
                line_values.append(line_values[-1] + last_dif)
            else:
                count = int(str(_DUP[head]) + rest)
                assert last_dif is not None, "DUP must follow a DIF token in our files"
                for _ in range(count - 1):
                    line_values.append(line_values[-1] + last_dif)
        if values:
            assert line_values[0] == values[-1], "Y-value check failed"
            checks += 1
            values.extend(line_values[1:])
        else:
            values.extend(line_values)
    return values, checks


@pytest.mark.parametrize("shape", ["lorentzian", "triangle"])
@pytest.mark.parametrize("compress", [False, True])
def test_jcamp_round_trip(tmp_path, compress, shape):
    nu = get_nuclide("23Na").larmor_hz(11.7)
    hz = np.linspace(-25e3, 25e3, 301)
    y = lorentzian(hz, 1200.0, 700.0) if shape == "lorentzian" else triangle(hz, -2000.0, 6000.0)
    spec = spectrum_from_hz(hz, y, nu, nucleus="23Na", field=11.7)
    path = write_jcamp(tmp_path / "s.jdx", spec, compress=compress)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # nmrglue reads our file without a complaint
        back = read_spectrum(path)
    np.testing.assert_allclose(back.hz, hz, rtol=1e-9, atol=1e-9 * 25e3)
    assert_close_to_max(back.intensity, y)
    # nu_ref goes through ##.OBSERVE FREQUENCY in MHz, written with repr: equal to rounding
    assert back.nucleus == "23Na" and back.nu_ref_hz == pytest.approx(nu, rel=1e-15) and back.field_tesla == 11.7
    text = path.read_text()
    lines = text.splitlines()
    assert max(len(line) for line in lines) <= 80
    for label in ("##TITLE=", "##JCAMP-DX= 5.01", "##DATA TYPE= NMR SPECTRUM", "##.OBSERVE FREQUENCY=",
                  "##.OBSERVE NUCLEUS= ^23Na", "##XUNITS= HZ", "##YUNITS= ARBITRARY UNITS", "##XFACTOR=",
                  "##YFACTOR=", "##FIRSTX=", "##LASTX=", "##NPOINTS= 301", "##XYDATA= (X++(Y..Y))", "##END="):
        assert label in text
    data = lines[lines.index("##XYDATA= (X++(Y..Y))") + 1: lines.index("##END=")]
    yfactor = float(re.search(r"##YFACTOR= (\S+)", text).group(1))
    if compress:
        values, checks = decode_difdup_with_checks(data)
        assert checks == len(data) - 1  # every line after the first opens with a verified check
        if shape == "triangle":
            assert any(c in "STUVWXYZs" for c in "".join(data))  # the flat tails use DUP counts
    else:
        values = [int(v) for line in data for v in line.split()[1:]]
    assert len(values) == 301
    assert_close_to_max(np.array(values) * yfactor, y)


def test_jcamp_compressed_is_smaller(tmp_path):
    hz = np.linspace(-25e3, 25e3, 512)
    spec = spectrum_from_hz(hz, triangle(hz, 0.0, 5000.0))
    plain = write_jcamp(tmp_path / "p.jdx", spec)
    small = write_jcamp(tmp_path / "c.jdx", spec, compress=True)
    assert small.stat().st_size < 0.5 * plain.stat().st_size


def test_jcamp_written_file_through_nmrglue_directly(tmp_path):
    # nmrglue's own reader and its udic guess see the observe frequency and sweep width we wrote.
    import nmrglue as ng

    hz = np.linspace(-8e3, 12e3, 200)
    spec = spectrum_from_hz(hz, lorentzian(hz, 0.0, 400.0))
    path = write_jcamp(tmp_path / "n.jdx", spec, compress=True)
    dic, data = ng.jcampdx.read(str(path))
    udic = ng.jcampdx.guess_udic(dic, data)
    assert udic[0]["obs"] == pytest.approx(NU_AL_94 / 1e6, rel=1e-15)
    assert udic[0]["sw"] == pytest.approx(20e3, rel=1e-12)
    assert udic[0]["label"] == "27Al" and udic[0]["size"] == 200


def _sqz_lines(x, ints, per_line=10):
    """SQZ-only XYDATA lines, built here independently of the writer."""
    def sqz(v):
        s = str(abs(v))
        return ("@ABCDEFGHI" if v >= 0 else "@abcdefghi")[int(s[0])] + s[1:]
    return ["".join([f"{x[i]:.4f}"] + [sqz(int(v)) for v in ints[i:i + per_line]])
            for i in range(0, len(ints), per_line)]


def _jcamp_text(labels, lines):
    return "\n".join(["##TITLE= a test line", "##JCAMP-DX= 5.01", "##DATA TYPE= NMR SPECTRUM",
                      "##ORIGIN= tests", "##OWNER= tests"] + labels + ["##XYDATA= (X++(Y..Y))"]
                     + lines + ["##END="]) + "\n"


def test_jcamp_ppm_axis_squeezed_form(tmp_path):
    # XUNITS=PPM, descending as usually exported, SQZ form; 13C at 100.6 MHz.
    n = 128
    ppm = np.linspace(220.0, -10.0, n)
    ints = np.rint(1e5 * lorentzian(ppm, 77.0, 1.5)).astype(int)
    labels = ["##.OBSERVE FREQUENCY= 100.6", "##.OBSERVE NUCLEUS= ^13C", "##XUNITS= PPM",
              "##YUNITS= ARBITRARY UNITS", "##XFACTOR= 1", "##YFACTOR= 0.001", "##FIRSTX= 220", "##LASTX= -10",
              f"##NPOINTS= {n}"]
    (tmp_path / "c.dx").write_text(_jcamp_text(labels, _sqz_lines(ppm, ints)))
    spec = read_spectrum(tmp_path / "c.dx")
    np.testing.assert_allclose(spec.ppm, ppm[::-1], rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(spec.hz, ppm[::-1] * 100.6, rtol=1e-12, atol=1e-9)
    assert np.array_equal(spec.intensity, ints[::-1] * 0.001)
    assert spec.nucleus == "13C" and spec.nu_ref_hz == 100.6e6
    assert spec.field_tesla == pytest.approx(100.6e6 / get_nuclide("13C").larmor_hz(1.0), rel=1e-12)


@pytest.mark.parametrize("label,point,shift", [("##.SHIFT REFERENCE= (INTERNAL, reference, 1, 120.0)", 0, 120.0),
                                              ("##.SHIFT REFERENCE= (EXTERNAL, reference, 64, 3.5)", 63, 3.5),
                                              ("##$OFFSET= 120.0", 0, 120.0)])
def test_jcamp_shift_reference_moves_the_axis(tmp_path, label, point, shift):
    # X in Hz relative to some other origin; the shift reference names the ppm of one point (file order).
    n = 100
    x = np.linspace(30000.0, 10000.0, n)
    ints = np.rint(1e4 * lorentzian(x, 20000.0, 400.0)).astype(int)
    labels = ["##.OBSERVE FREQUENCY= 150.0", "##.OBSERVE NUCLEUS= ^27Al", label, "##XUNITS= HZ",
              "##YUNITS= ARBITRARY UNITS", "##XFACTOR= 1", "##YFACTOR= 1", "##FIRSTX= 30000", "##LASTX= 10000",
              f"##NPOINTS= {n}"]
    (tmp_path / "r.jdx").write_text(_jcamp_text(labels, _sqz_lines(x, ints)))
    spec = read_spectrum(tmp_path / "r.jdx")
    ppm_in_file_order = spec.ppm[::-1]
    assert ppm_in_file_order[point] == pytest.approx(shift, abs=1e-9)
    assert np.diff(spec.hz) == pytest.approx(np.full(n - 1, 20000.0 / (n - 1)), rel=1e-9)
    assert "shift_reference" in spec.metadata


def test_jcamp_ntuples_real_and_imaginary(tmp_path):
    n = 64
    hz = np.linspace(8000.0, -8000.0, n)
    x = hz / 900.0
    re_, im = np.rint(1e6 / (1 + x**2)).astype(int), np.rint(1e6 * x / (1 + x**2)).astype(int)

    def table(v):
        return [f"{hz[i]:.1f} " + " ".join(str(t) for t in v[i:i + 8]) for i in range(0, n, 8)]

    text = "\n".join(["##TITLE= complex line", "##JCAMP-DX= 5.01", "##DATA TYPE= NMR SPECTRUM",
                      "##DATA CLASS= NTUPLES", "##ORIGIN= tests", "##OWNER= tests", "##.OBSERVE FREQUENCY= 100.0",
                      "##.OBSERVE NUCLEUS= ^13C", "##NTUPLES= NMR SPECTRUM",
                      "##VAR_NAME= FREQUENCY, SPECTRUM/REAL, SPECTRUM/IMAG", "##SYMBOL= X, R, I",
                      "##VAR_TYPE= INDEPENDENT, DEPENDENT, DEPENDENT", "##VAR_FORM= AFFN, AFFN, AFFN",
                      f"##VAR_DIM= {n}, {n}, {n}", "##UNITS= HZ, ARBITRARY UNITS, ARBITRARY UNITS",
                      "##FIRST= 8000, 0, 0", "##LAST= -8000, 0, 0", "##FACTOR= 1, 1e-6, 1e-6", "##PAGE= N=1",
                      "##DATA TABLE= (X++(R..R)), XYDATA"] + table(re_)
                     + ["##PAGE= N=2", "##DATA TABLE= (X++(I..I)), XYDATA"] + table(im)
                     + ["##END NTUPLES= NMR SPECTRUM", "##END="]) + "\n"
    (tmp_path / "nt.jdx").write_text(text)
    spec = read_spectrum(tmp_path / "nt.jdx")
    assert_close_to_max(spec.intensity, re_[::-1] * 1e-6, rel=1e-15)
    assert_close_to_max(spec.imag, im[::-1] * 1e-6, rel=1e-15)
    np.testing.assert_allclose(spec.hz, hz[::-1], rtol=1e-12)


def test_jcamp_content_in_a_txt_file(tmp_path):
    hz = np.linspace(-5e3, 5e3, 64)
    write_jcamp(tmp_path / "a.jdx", spectrum_from_hz(hz, lorentzian(hz, 0, 300)))
    (tmp_path / "a.txt").write_text((tmp_path / "a.jdx").read_text())
    assert read_spectrum(tmp_path / "a.txt").metadata["format"] == "JCAMP-DX XYDATA"


def test_jcamp_refuses_axis_option(tmp_path):
    hz = np.linspace(-5e3, 5e3, 64)
    path = write_jcamp(tmp_path / "a.jdx", spectrum_from_hz(hz, lorentzian(hz, 0, 300)))
    with pytest.raises(DataError, match="states its own axis"):
        read_spectrum(path, axis="hz")


def test_jcamp_writer_needs_a_uniform_axis(tmp_path):
    hz = np.linspace(-5e3, 5e3, 64) + 2.0 * np.sin(np.arange(64))
    hz[0], hz[-1] = -5e3, 5e3
    with pytest.raises(ValueError, match="uniform"):
        write_jcamp(tmp_path / "u.jdx", spectrum_from_hz(hz, np.ones(64)))
    assert not (tmp_path / "u.jdx").exists()


# ---------------------------------------------------------------------------
# Bruker processed data, written with nmrglue's Bruker writer
# ---------------------------------------------------------------------------
def _write_bruker(root, *, si=512, sf=104.2869, offset=260.0, sw=52000.0, isfloat=True, big=False, nc=0,
                  with_acqus=True, with_imag=False, center_ppm=12.0):
    import nmrglue as ng

    ppm = offset - np.arange(si) * sw / (sf * si)  # the axis the parameters define (checked below)
    y = 1e4 * lorentzian(ppm, center_ppm, 3.0)
    procs = {"SI": si, "XDIM": si, "SF": sf, "OFFSET": offset, "SW_p": sw, "NC_proc": nc,
             "BYTORDP": 1 if big else 0, "DTYPP": 2 if isfloat else 0, "AXNUC": "27Al",
             "_coreheader": ["##TITLE= processing parameters for a test", "##JCAMPDX= 5.0"], "_comments": []}
    exp = Path(root) / "7"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ng.bruker.write_pdata(str(exp), {"procs": dict(procs)}, y.copy(), write_procs=True, pdata_folder=1,
                              scale_data=True, big=big, isfloat=isfloat)
        if with_imag:
            ng.bruker.write_pdata(str(exp), {"procs": dict(procs)}, 0.5 * y.copy(), pdata_folder=1,
                                  scale_data=True, big=big, isfloat=isfloat, bin_file="1i")
        if with_acqus:
            acqus = {"NUC1": "27Al", "SFO1": sf, "BF1": sf, "_coreheader": ["##TITLE= acquisition parameters"],
                     "_comments": []}
            ng.bruker.write_jcamp(acqus, str(exp / "acqus"))
    return exp, ppm, y


@pytest.mark.parametrize("which", ["experiment", "pdata", "1r file"])
def test_bruker_processed_float_data(tmp_path, which):
    exp, ppm, y = _write_bruker(tmp_path)
    path = {"experiment": exp, "pdata": exp / "pdata" / "1", "1r file": exp / "pdata" / "1" / "1r"}[which]
    spec = read_spectrum(path)
    np.testing.assert_allclose(spec.ppm, ppm[::-1], rtol=0, atol=1e-12)
    np.testing.assert_allclose(spec.hz, ppm[::-1] * 104.2869, rtol=1e-12, atol=1e-9)
    assert np.array_equal(spec.intensity, y[::-1])
    assert spec.nu_ref_hz == pytest.approx(104.2869e6, rel=1e-15)
    assert spec.nucleus == "27Al" and spec.imag is None
    assert spec.field_tesla == pytest.approx(104.2869e6 / get_nuclide("27Al").larmor_hz(1.0), rel=1e-12)


def test_bruker_axis_agrees_with_nmrglue_unit_conversion(tmp_path):
    # Reference library: nmrglue's own udic guess and unit converter (without acqus it uses
    # car = OFFSET * SF - SW_p / 2, point spacing SW_p / SI).
    import nmrglue as ng

    exp, ppm, y = _write_bruker(tmp_path, with_acqus=False)
    dic, data = ng.bruker.read_pdata(str(exp / "pdata" / "1"))
    uc = ng.fileiobase.uc_from_udic(ng.bruker.guess_udic(dic, data))
    spec = read_spectrum(exp)
    np.testing.assert_allclose(spec.ppm, uc.ppm_scale()[::-1], rtol=0, atol=1e-9)
    assert spec.ppm[np.argmax(spec.intensity)] == pytest.approx(12.0, abs=0.5 * 52000.0 / 104.2869 / 512)
    assert spec.nucleus == "27Al"  # from procs AXNUC when there is no acqus


def test_bruker_int32_big_endian_with_scaling_and_imaginary(tmp_path):
    exp, ppm, y = _write_bruker(tmp_path, isfloat=False, big=True, nc=-8, with_imag=True, with_acqus=False)
    spec = read_spectrum(exp / "pdata" / "1")
    # int32 storage of y * 2**8 (the writer truncates to integers): within one step of 2**-8
    assert np.max(np.abs(spec.intensity - y[::-1])) < 2.0**-8
    assert np.max(np.abs(spec.imag - 0.5 * y[::-1])) < 2.0**-8
    assert spec.metadata["bruker.NC_proc"] == -8


def test_bruker_problems(tmp_path):
    exp, _, _ = _write_bruker(tmp_path / "a")
    procs = exp / "pdata" / "1" / "procs"
    procs.write_text(procs.read_text().replace("##$SI= 512", "##$SI= 500"))
    with pytest.raises(DataError, match="1r holds 512 points but procs says SI = 500"):
        read_spectrum(exp)
    procs.write_text(procs.read_text().replace("##$SF= 104.2869\n", ""))
    with pytest.raises(DataError, match="procs lacks a numeric SF"):
        read_spectrum(exp)
    procs.unlink()
    with pytest.raises(DataError, match="has 1r but no procs file"):
        read_spectrum(exp / "pdata" / "1")
    exp, _, _ = _write_bruker(tmp_path / "b")
    (exp / "pdata" / "1").rename(exp / "pdata" / "3")
    with pytest.raises(DataError, match="has no pdata/1; give one of its processed-data directories "
                                        r"\(pdata/3\)"):
        read_spectrum(exp)
    (exp / "pdata" / "3" / "2rr").write_bytes(b"")
    with pytest.raises(DataError, match="multi-dimensional"):
        read_spectrum(exp / "pdata" / "3")


# ---------------------------------------------------------------------------
# writers
# ---------------------------------------------------------------------------
def test_text_writer_round_trip_is_exact(tmp_path):
    hz = np.linspace(-7e3, 9e3, 300)
    x = hz / 350.0
    spec = spectrum_from_hz(hz, 1 / (1 + x**2), imag=x / (1 + x**2))
    out = write_spectrum_text(tmp_path / "o.csv", spec)
    back = read_spectrum(out)
    for name in ("hz", "ppm", "intensity", "imag"):
        assert np.array_equal(getattr(back, name), getattr(spec, name)), name
    assert (back.nucleus, back.field_tesla, back.nu_ref_hz) == ("27Al", 9.4, NU_AL_94)
    assert back.metadata["file.source"] == "made in a test"


def test_writers_refuse_to_overwrite(tmp_path):
    hz = np.linspace(-5e3, 5e3, 64)
    spec = spectrum_from_hz(hz, lorentzian(hz, 0, 300))
    for writer, name in ((write_spectrum_text, "a.csv"), (write_jcamp, "a.jdx")):
        path = tmp_path / name
        path.write_text("mine")
        with pytest.raises(OutputExistsError, match="force=True"):
            writer(path, spec)
        assert path.read_text() == "mine"
        writer(path, spec, force=True)
        assert path.read_text() != "mine"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.csv", "a.jdx"]  # no temporary files left


def test_writers_never_overwrite_the_source(tmp_path):
    hz = np.linspace(-5e3, 5e3, 64)
    src = write_spectrum_text(tmp_path / "measured.csv", spectrum_from_hz(hz, lorentzian(hz, 0, 300)))
    before = src.read_bytes()
    spec = read_spectrum(src)
    for writer in (write_spectrum_text, write_jcamp):
        with pytest.raises(OutputExistsError, match="read from"):
            writer(src, spec, force=True)
    assert src.read_bytes() == before


@pytest.mark.parametrize("mask", [0o022, 0o027, 0o077])
def test_writers_respect_the_umask(tmp_path, mask):
    hz = np.linspace(-5e3, 5e3, 64)
    spec = spectrum_from_hz(hz, lorentzian(hz, 0, 300))
    old = os.umask(mask)
    try:
        a = write_spectrum_text(tmp_path / "sub" / "a.csv", spec)
        b = write_jcamp(tmp_path / "sub" / "b.jdx", spec, compress=True)
    finally:
        os.umask(old)
    for p in (a, b):
        assert stat.S_IMODE(p.stat().st_mode) == 0o666 & ~mask


# ---------------------------------------------------------------------------
# comparison with a model
# ---------------------------------------------------------------------------
def test_compare_with_model():
    hz = np.linspace(-5e3, 5e3, 64)
    y = lorentzian(hz, 0, 300)
    spec = spectrum_from_hz(hz, y)
    assert compare_with_model(spec, "27Al", 9.4) == []
    assert compare_with_model(spec, "Al-27", 9.4 * (1 + 0.5 * MATCH_TOLERANCE)) == []
    msgs = compare_with_model(spec, "23Na", 9.4)
    assert len(msgs) == 1 and "nucleus is 27Al but the model's is 23Na" in msgs[0]
    msgs = compare_with_model(spec, "27Al", 9.4 * (1 + 3 * MATCH_TOLERANCE))
    assert len(msgs) == 2 and "field" in msgs[0] and "reference frequency" in msgs[1]
    # a field implied by nu_ref is covered by the reference-frequency warning alone
    implied = MeasuredSpectrum(hz=hz, ppm=1e6 * hz / NU_AL_94, intensity=y, imag=None, nu_ref_hz=NU_AL_94,
                               source="t", nucleus="27Al", field_tesla=9.4,
                               metadata={"field_source": "implied by the reference frequency and the nucleus"})
    msgs = compare_with_model(implied, "27Al", 14.1)
    assert len(msgs) == 1 and "reference frequency" in msgs[0]
    # nothing stated but nu_ref: still checked
    bare = MeasuredSpectrum(hz=hz, ppm=1e6 * hz / 1e8, intensity=y, imag=None, nu_ref_hz=1e8, source="t")
    assert len(compare_with_model(bare, "27Al", 9.4)) == 1
    with pytest.raises(UnknownNuclideError):
        compare_with_model(spec, "27Xx", 9.4)
    with pytest.raises(ValueError):
        compare_with_model(spec, "27Al", -1.0)


# ---------------------------------------------------------------------------
# the value
# ---------------------------------------------------------------------------
def test_measured_spectrum_is_read_only():
    hz = np.linspace(-5e3, 5e3, 64)
    spec = spectrum_from_hz(hz, lorentzian(hz, 0, 300))
    with pytest.raises(ValueError):
        spec.intensity[0] = 1.0
    with pytest.raises(TypeError):
        spec.metadata["x"] = 1
    with pytest.raises(AttributeError):
        spec.nu_ref_hz = 1.0


@pytest.mark.parametrize("change,words", [
    ({"hz": np.linspace(5e3, -5e3, 64)}, "ascending"),
    ({"ppm": np.zeros(64)}, "ppm must equal"),
    ({"intensity": np.ones(10)}, "intensity"),
    ({"nu_ref_hz": 0.0}, "nu_ref_hz"),
    ({"field_tesla": -2.0}, "field_tesla"),
])
def test_measured_spectrum_checks_its_fields(change, words):
    hz = np.linspace(-5e3, 5e3, 64)
    kwargs = dict(hz=hz, ppm=1e6 * hz / 1e8, intensity=np.ones(64), imag=None, nu_ref_hz=1e8, source="t")
    kwargs.update(change)
    if "hz" in change:
        kwargs["ppm"] = 1e6 * change["hz"] / 1e8
    with pytest.raises(ValueError, match=words):
        MeasuredSpectrum(**kwargs)


# ---------------------------------------------------------------------------
# bad data: one case per file, from the manifest
# ---------------------------------------------------------------------------
CASES = tomllib.loads((BAD / "cases.toml").read_text())["case"]


def test_manifest_covers_every_file():
    listed = {c["file"] for c in CASES}
    present = {p.name for p in BAD.iterdir()} - {"cases.toml", "make_files.py", "__pycache__"}
    assert present <= listed, f"files without a case: {sorted(present - listed)}"
    assert len(CASES) >= 15


@pytest.mark.parametrize("case", CASES, ids=[f"{c['file']}-{i}" for i, c in enumerate(CASES)])
def test_bad_data(case):
    path = BAD / case["file"]
    with pytest.raises(DataError) as info:
        read_spectrum(path, **case.get("options", {}))
    message = str(info.value)
    assert "\n" not in message and "\r" not in message
    assert message.startswith(str(path))
    assert case["file"] in message
    for word in case["expect"]:
        assert word in message, f"{word!r} not in {message!r}"
    # a clear error of our own, not a traceback from inside numpy or nmrglue
    err = info.value
    assert err.__cause__ is None and (err.__context__ is None or err.__suppress_context__)


def test_data_error_survives_pickling():
    import pickle

    err = pickle.loads(pickle.dumps(DataError("a.csv", "bad value", line=7)))
    assert isinstance(err, DataError) and str(err) == "a.csv, line 7: bad value" and err.line == 7


def test_minimum_points_boundary(tmp_path):
    for n, ok in ((MIN_POINTS - 1, False), (MIN_POINTS, True)):
        hz = np.linspace(-1e3, 1e3, n)
        (tmp_path / "m.csv").write_text("hz,intensity\n" + "\n".join(f"{h:.17g},1" for h in hz) + "\n")
        if ok:
            assert read_spectrum(tmp_path / "m.csv", nu_ref_hz=1e8).hz.size == MIN_POINTS
        else:
            with pytest.raises(DataError, match=f"at least {MIN_POINTS}"):
                read_spectrum(tmp_path / "m.csv", nu_ref_hz=1e8)
