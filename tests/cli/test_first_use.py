"""First use, second round: bad inputs of every class, from the command line and from Python.

Command line: the cases of tests/bad_inputs/first_use/cases.toml, each run through the entry point in a
temporary folder holding copies of that folder's files: status 2, one ``error:`` line naming the flag, key or
file, no traceback, nothing created or changed.  Python: the same classes through the API, each raising the
documented exception type with a message naming the keyword.  Also: the files people export (a headerless,
tab-separated, descending ppm file; a byte-order mark; a JCAMP-DX point table) fit without options.
"""

from __future__ import annotations

import shutil
import tomllib
from pathlib import Path

import numpy as np
import pytest

import powderspin as ps
from powderspin.cli.main import main

HERE = Path(__file__).resolve().parents[1] / "bad_inputs" / "first_use"
CASES = tomllib.loads((HERE / "cases.toml").read_text())["case"]


def _snapshot(folder: Path) -> dict:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def _copy(tmp_path: Path) -> None:
    for f in HERE.iterdir():
        if f.is_file() and f.name != "make_files.py":
            shutil.copy(f, tmp_path / f.name)


def test_every_class_has_cases_and_there_are_enough():
    assert {c["class"] for c in CASES} == set(range(1, 9))
    assert len(CASES) + len(API_CASES) >= 40


@pytest.mark.parametrize("case", CASES, ids=[c["name"] for c in CASES])
def test_bad_input_from_the_command_line(case, tmp_path, capsys, monkeypatch):
    _copy(tmp_path)
    for name in case.get("create", []):
        (tmp_path / name).write_text("mine\n")
    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv("POWDERSPIN_CACHE", raising=False)
    for k, v in case.get("env", {}).items():
        monkeypatch.setenv(k, v)
    if "POWDERSPIN_CACHE" not in case.get("env", {}) and case["args"][0] in ("simulate", "fit", "cache"):
        monkeypatch.setenv("POWDERSPIN_CACHE", str(tmp_path.parent / f"{tmp_path.name}-library"))
    before = _snapshot(tmp_path)
    status = main(list(case["args"]))
    err = capsys.readouterr().err
    assert status == 2, err
    lines = [line for line in err.splitlines() if line.strip() and not line.startswith(("note:", "caution:"))]
    assert len(lines) == 1 and lines[0].startswith("error: "), err
    assert "Traceback" not in err
    for word in case["expect"]:
        assert word in lines[0], f"{word!r} not in {lines[0]!r}"
    assert "axis='" not in lines[0] and "accept_mismatch=" not in lines[0]  # flags, never Python keywords
    assert _snapshot(tmp_path) == before


# -- the Python API: as strict as the command line, with the documented exception types

def _model():
    return ps.make_model("31P", {"field_tesla": 9.4, "points": 128, "orientations": 8},
                         [{"label": "P", "shift_ppm": {"start": 0.0, "min": -10.0, "max": 10.0},
                           "gauss_hz": {"start": 300.0, "min": 10.0, "max": 3000.0}}])


def _plain():
    return ps.make_model("31P", {"field_tesla": 9.4, "orientations": 8, "lorentz_hz": 300.0, "points": 128},
                         [{"label": "P", "span_ppm": 150.0, "skew": 0.5}])


def _spectrum():
    return ps.simulate(_plain())


API_CASES = [
    # class 1
    ("load_model of deep nesting", lambda: ps.load_model(HERE / "deep.toml"), "ModelError", ["nested", "line 6"]),
    ("posterior beyond memory", lambda: ps.fit(_model(), [HERE / "line.csv"], posterior=True, steps=10 ** 15),
     "FitError", ["steps", "memory"]),
    ("starts beyond the limit", lambda: ps.fit(_model(), [HERE / "line.csv"], global_search=True, starts=10 ** 12),
     "FitError", ["starts", "allowed range"]),
    ("array where a data path is expected", lambda: ps.fit(_model(), [np.zeros((2, 10))]), "FitError",
     ["data item 1", "ndarray"]),
    ("read_spectrum overflow", lambda: ps.read_spectrum(HERE / "axis_overflow.csv"), "DataError",
     ["line 11", "'1e309'"]),
    # class 2
    ("constant data", lambda: ps.fit(_model(), [HERE / "constant.csv"]), "FitError", ["no signal"]),
    ("pure noise", lambda: ps.fit(_model(), [HERE / "noise.csv"]), "FitError", ["no signal"]),
    ("header of another field", lambda: ps.fit(_model(), [HERE / "other_field.csv"]), "MismatchError",
     ["14.1 T", "accept_mismatch=True"]),
    ("span without skew", lambda: ps.make_model("31P", {"field_tesla": 9.4}, [{"span_ppm": 100.0}]), "ModelError",
     ["span_ppm needs skew"]),
    # class 3
    ("output in a missing folder is made by the API, but None is refused",
     lambda: ps.write_spectrum(_spectrum(), None), "OutputPathError", ["output", "None"]),
    ("plot path None", lambda: ps.save_plot(_spectrum(), None), "OutputPathError", ["plot", "None"]),
    # class 4
    ("headerless file without a model", lambda: ps.read_spectrum(HERE / "headerless_far.txt"), "AxisUnitError",
     ["no header row", "axis='ppm'"]),
    ("headerless file the data cannot tell", lambda: ps.fit(_model(), [HERE / "headerless_far.txt"]),
     "AxisUnitError", ["axis='ppm'"]),
    ("JCAMP-DX point text", lambda: ps.read_spectrum(HERE / "points_text.jdx"), "DataError", ["line 17", "'abc'"]),
    # class 5
    ("plan fields as text", lambda: ps.plan(_plain(), fields="9.4"), "PlanError", ["fields", "not text"]),
    ("plan rates as text", lambda: ps.plan(_plain(), [9.4], rates_hz="5000"), "PlanError", ["rates_hz", "not text"]),
    ("plan n_rates as a float", lambda: ps.plan(_plain(), [9.4], n_rates=5.0), "PlanError", ["n_rates", "whole"]),
    ("plan snr as text", lambda: ps.plan(_plain(), [9.4], snr="100"), "PlanError", ["snr", "text"]),
    ("plan rotors as a mapping", lambda: ps.plan(_plain(), [9.4], rotors={"4 mm": 1}), "PlanError", ["rotors"]),
    ("fit starts as a float", lambda: ps.fit(_model(), [HERE / "line.csv"], global_search=True, starts=2.5),
     "FitError", ["starts", "whole number"]),
    ("fit walkers as text", lambda: ps.fit(_model(), [HERE / "line.csv"], posterior=True, walkers="32"),
     "FitError", ["walkers", "text"]),
    ("fit seed as a float", lambda: ps.fit(_model(), [HERE / "line.csv"], seed=1.5), "FitError", ["seed"]),
    ("fit global_search as text", lambda: ps.fit(_model(), [HERE / "line.csv"], global_search="yes"), "FitError",
     ["global_search", "True or False"]),
    ("fit regions as text", lambda: ps.fit(_model(), [HERE / "line.csv"], regions="10:-10"), "FitError",
     ["regions", "pairs"]),
    ("fit region of text numbers", lambda: ps.fit(_model(), [HERE / "line.csv"], regions=[("10", "-10")]),
     "FitError", ["region 1", "two shifts"]),
    ("fit noise region as text", lambda: ps.fit(_model(), [HERE / "line.csv"], noise_region="20:12"), "FitError",
     ["noise region", "not text"]),
    ("fit baseline order as a float", lambda: ps.fit(_model(), [HERE / "line.csv"], baseline_order=1.0),
     "FitError", ["baseline_order = 1.0", "integer"]),
    ("plan precision as text", lambda: ps.plan(_plain(), [9.4], precision="no"), "PlanError",
     ["precision", "True or False"]),
    ("fit axis unknown", lambda: ps.fit(_model(), [HERE / "line.csv"], axis="mhz"), "FitError", ["axis", "'mhz'"]),
    ("load_model of None", lambda: ps.load_model(None), "ModelError", ["model file", "None"]),
    ("read_spectrum of None", lambda: ps.read_spectrum(None), "DataError", ["None"]),
    ("read_spectrum of an array", lambda: ps.read_spectrum(np.zeros(3)), "DataError", ["ndarray"]),
    ("points as a numpy float", lambda: ps.make_model("31P", {"field_tesla": 9.4, "points": np.float32(256)},
                                                        [{}]), "ModelError", ["points = 256.0", "integer"]),
    # class 6
    ("library max_bytes not whole", lambda: _library_with_bad_cap(), "CacheError", ["max_bytes"]),
    # class 8
    ("field of 600 from Python", lambda: ps.make_model("31P", {"field_tesla": 600}, [{}]), "ModelError",
     ["field_tesla = 600", "did you mean 14.1 T"]),
    ("field of 800 as a numpy float", lambda: ps.make_model("31P", {"field_tesla": np.float32(800)}, [{}]),
     "ModelError", ["field_tesla = 800", "did you mean 18.8 T"]),
]


def _library_with_bad_cap():
    from powderspin.disorder.library import LineshapeLibrary

    return LineshapeLibrary("/tmp/powderspin-unused-library", max_bytes=2.5)



@pytest.mark.parametrize("case", API_CASES, ids=[c[0] for c in API_CASES])
def test_bad_input_from_python(case, tmp_path, monkeypatch):
    name, call, error, words = case
    monkeypatch.chdir(tmp_path)
    before = _snapshot(HERE)
    with pytest.raises(getattr(ps, error)) as info:
        call()
    text = str(info.value)
    assert "\n" not in text
    for word in words:
        assert word in text, f"{word!r} not in {text!r}"
    assert "--" not in text.replace("--force", "")  # keywords, never flags, from Python
    assert _snapshot(HERE) == before and list(tmp_path.iterdir()) == []


def test_every_public_exception_is_exported():
    import inspect
    import pkgutil

    import powderspin

    found = set()
    for mod in pkgutil.walk_packages(powderspin.__path__, "powderspin."):
        if mod.name.startswith("powderspin.cli") or mod.name.endswith("__main__"):
            continue
        module = __import__(mod.name, fromlist=["_"])
        for name in getattr(module, "__all__", ()):
            obj = getattr(module, name, None)
            if inspect.isclass(obj) and issubclass(obj, Exception):
                found.add(name)
    missing = sorted(n for n in found if not hasattr(ps, n))
    assert not missing, missing


def test_numpy_scalars_are_accepted_like_python_numbers():
    a = ps.make_model("31P", {"field_tesla": np.float32(9.4), "points": np.int16(128), "orientations": 8},
                      [{"span_ppm": np.float64(100.0), "skew": np.float32(0.25)}])
    b = ps.make_model("31P", {"field_tesla": float(np.float32(9.4)), "points": 128, "orientations": 8},
                      [{"span_ppm": 100.0, "skew": float(np.float32(0.25))}])
    assert a == b


# -- files as people export them fit without options

def _export(tmp_path, name, writer):
    truth = ps.make_model("27Al", {"field_tesla": 9.4, "points": 512, "center_ppm": 0.0, "width_ppm": 400.0,
                                   "gauss_hz": 300.0}, [{"label": "Al", "shift_ppm": 10.0, "cq_mhz": 3.0,
                                                         "eta_q": 0.3}])
    s = ps.simulate(truth)
    y = s.intensity / s.intensity.max() + np.random.default_rng(1).normal(0.0, 0.01, s.ppm.size)
    order = np.argsort(s.ppm)[::-1]  # ppm descending, as spectrometers export
    path = tmp_path / name
    writer(path, s.ppm[order], y[order])
    return path


FIT_MODEL = """nucleus = "27Al"
[measurement]
field_tesla = 9.4
gauss_hz = 300.0
[[site]]
label = "Al"
shift_ppm = { start = 5.0, min = -20.0, max = 40.0 }
cq_mhz = { start = 2.5, min = 1.0, max = 5.0 }
eta_q = 0.3
"""


def _tab_headerless(path, ppm, y):
    path.write_text("".join(f"{a:.5f}\t{b:.6f}\n" for a, b in zip(ppm, y)))


def _bom_csv(path, ppm, y):
    path.write_text("ppm,intensity\n" + "".join(f"{a:.5f},{b:.6f}\n" for a, b in zip(ppm, y)), encoding="utf-8-sig")


def _jcamp_points(path, ppm, y):
    head = ("##TITLE=synthetic 27Al\n##JCAMP-DX=5.01\n##DATA TYPE=NMR SPECTRUM\n##XUNITS=PPM\n"
            "##YUNITS=ARBITRARY UNITS\n##.OBSERVE NUCLEUS=^27Al\n##XYPOINTS=(XY..XY)\n")
    path.write_text(head + "".join(f"{a:.5f}, {b:.6f}\n" for a, b in zip(ppm, y)) + "##END=\n")


@pytest.mark.parametrize("name,writer", [("export.txt", _tab_headerless), ("export.csv", _bom_csv),
                                         ("export.jdx", _jcamp_points)])
def test_exported_files_fit_without_options(tmp_path, capsys, name, writer):
    data = _export(tmp_path, name, writer)
    model = tmp_path / "model.toml"
    model.write_bytes(b"\xef\xbb\xbf" + FIT_MODEL.encode())  # a model file with a byte-order mark too
    status = main(["fit", str(model), str(data), "-o", str(tmp_path / "res.toml"), "-q"])
    out, err = capsys.readouterr()
    assert status == 0, err
    assert "Al.shift_ppm" in out
    r = ps.fit(str(model), [str(data)])
    assert abs(r.values["Al.cq_mhz"] - 3.0) < 5 * r.stderr["Al.cq_mhz"] + 1e-3
    if name.endswith(".txt"):
        assert any("read in ppm" in n for n in r.notes)


def test_a_cache_folder_on_a_read_only_mount_is_a_note_and_memory_only(tmp_path, monkeypatch, capsys):
    """EROFS (a read-only mount) is simulated: the folder check says so, the run keeps kernels in memory."""
    import argparse
    import errno
    import os
    import tempfile

    from powderspin.cli import common

    real = tempfile.mkstemp
    library = tmp_path / "library"
    library.mkdir()

    def read_only(*args, dir=None, **kwargs):
        if dir is not None and os.path.samefile(dir, library):
            raise OSError(errno.EROFS, os.strerror(errno.EROFS))
        return real(*args, dir=dir, **kwargs)

    monkeypatch.setattr(tempfile, "mkstemp", read_only)
    monkeypatch.setenv("POWDERSPIN_CACHE", str(library))
    assert common._writable_folder(library) == "it is on a read-only file system"
    store = common.kernel_store(argparse.Namespace(cache=None, no_cache=False, quiet=False))
    assert store.library is None
    err = capsys.readouterr().err
    assert err.startswith("note: $POWDERSPIN_CACHE") and "read-only" in err and err.count("\n") == 1
