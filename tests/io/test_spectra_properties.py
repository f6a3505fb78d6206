"""Property tests of the data readers (hypothesis): any text, JCAMP-DX or CSV file gives a spectrum or a DataError.

Files are built from rows of numbers written the ways exports write them (tabs, commas, spaces, descending
axes, a byte-order mark, comment and key lines) with hostile values mixed in: numbers beyond the largest
double ('1e309'), tiny and huge exponents, NaN and infinity words, text, empty cells, ragged rows; and from
random bytes.  The reader must return a MeasuredSpectrum with finite values or raise DataError (a
ValueError) with a one-line message naming the file, never anything else (no OverflowError, no
RecursionError, no numpy warning turned error).
"""

from __future__ import annotations

import tempfile
import warnings
from pathlib import Path

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from powderspin.io.spectra import DataError, MeasuredSpectrum, read_spectrum

HOSTILE = st.sampled_from(["1e309", "-1e309", "1e-400", "1e308", "9" * 400, "nan", "inf", "-inf", "NaN", "abc",
                           "", "1,5", "0x10", "1e", "--1", "+", ".", "1.2.3", "1_000", "\u00b5", "1e+308",
                           "4.9e-324", "2.5E+02"])
NUMBER = st.one_of(st.floats(allow_nan=False, allow_infinity=False, width=64).map(repr),
                   st.integers(-10**6, 10**6).map(str),
                   st.floats(-1e3, 1e3).map(lambda x: f"{x:.6f}"))
CELL = st.one_of(NUMBER, NUMBER, NUMBER, HOSTILE)
HEADERS = st.sampled_from(["", "ppm,intensity\n", "hz\tintensity\n", "khz intensity\n", "ppm;real;imag\n",
                           "# nucleus: 27Al\n# field_tesla: 9.4\nppm,intensity\n", "# nu_ref_hz: 1e309\nhz,intensity\n",
                           "# field_tesla: -3\n", "intensity,ppm\n", "\ufeffppm,intensity\n"])
SUFFIXES = st.sampled_from([".csv", ".txt", ".tsv", ".dat", ".jdx"])


@st.composite
def text_files(draw):
    delim = draw(st.sampled_from(["\t", ",", " ", ";", "  "]))
    ncols = draw(st.integers(1, 4))
    nrows = draw(st.integers(0, 40))
    rows = []
    descending = draw(st.booleans())
    for i in range(nrows):
        k = ncols if draw(st.integers(0, 9)) else draw(st.integers(1, 4))
        cells = [draw(CELL) for _ in range(k)]
        if cells and draw(st.booleans()):
            cells[0] = f"{(nrows - i if descending else i) * 0.5:.3f}"  # a plausible axis most of the time
        rows.append(delim.join(cells))
    body = draw(HEADERS) + "\n".join(rows) + draw(st.sampled_from(["", "\n", "\r\n"]))
    if draw(st.booleans()):
        body = body.replace("\n", "\r\n")
    return body


@st.composite
def jcamp_files(draw):
    labels = ["##TITLE=fuzz", "##JCAMP-DX=5.01", "##DATA TYPE=NMR SPECTRUM"]
    for label in ("XUNITS", "FIRSTX", "LASTX", "NPOINTS", "XFACTOR", "YFACTOR", ".OBSERVE FREQUENCY",
                  ".OBSERVE NUCLEUS"):
        if draw(st.booleans()):
            value = draw(st.one_of(st.sampled_from(["PPM", "HZ", "^27Al", "104.2", "0"]), CELL))
            labels.append(f"##{label}={value}")
    form = draw(st.sampled_from(["##XYPOINTS=(XY..XY)", "##XYDATA=(XY..XY)", "##XYDATA=(X++(Y..Y))"]))
    labels.append(form)
    n = draw(st.integers(0, 30))
    for i in range(n):
        if "XY..XY" in form:
            labels.append(f"{draw(CELL)}, {draw(CELL)}" + draw(st.sampled_from(["", ";", " $$ note"])))
        else:
            labels.append(" ".join([str(i)] + [draw(CELL) for _ in range(draw(st.integers(0, 5)))]))
    if draw(st.booleans()):
        labels.append("##END=")
    return "\n".join(labels) + "\n"


def _check(path: Path):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the JCAMP-DX reader warns about what it skips; errors are what count
        try:
            spec = read_spectrum(path, axis="ppm" if path.suffix != ".jdx" else None, nucleus="27Al",
                                 field_tesla=9.4)
        except DataError as e:
            text = str(e)
            assert "\n" not in text and path.name in text, text
            return None
    assert isinstance(spec, MeasuredSpectrum)
    assert np.all(np.isfinite(spec.hz)) and np.all(np.isfinite(spec.intensity))
    return spec


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(text_files(), SUFFIXES.filter(lambda s: s != ".jdx"), st.booleans())
def test_any_text_file_gives_a_spectrum_or_a_data_error(body, suffix, bom):
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / f"fuzz{suffix}"
        p.write_bytes((b"\xef\xbb\xbf" if bom else b"") + body.encode("utf-8"))
        _check(p)


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(jcamp_files())
def test_any_jcamp_file_gives_a_spectrum_or_a_data_error(body):
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "fuzz.jdx"
        p.write_text(body)
        _check(p)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.binary(max_size=400), SUFFIXES)
def test_any_bytes_give_a_spectrum_or_a_data_error(data, suffix):
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / f"fuzz{suffix}"
        p.write_bytes(data)
        _check(p)


def test_the_overflow_the_fuzzing_found_is_one_line():
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "big.csv"
        p.write_text("ppm,intensity\n1.0,2.0\n1e309,3.0\n")
        try:
            read_spectrum(p, nucleus="27Al", field_tesla=9.4)
        except DataError as e:
            assert "line 3" in str(e) and "'1e309'" in str(e)
        else:  # pragma: no cover
            raise AssertionError("1e309 was read")
