"""Every bad input is one clear line: exit status 2, the key or file named, no traceback, nothing written.

The model files and arguments are in tests/bad_inputs/models/ (one problem
each; cases.toml pairs each with the words its error must contain;
make_models.py writes them).  Each runs through the command line's entry
point exactly as a user's command would.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest

from powderspin.cli.main import main

HERE = Path(__file__).resolve().parents[1] / "bad_inputs" / "models"
CASES = tomllib.loads((HERE / "cases.toml").read_text())["case"]


def _snapshot(folder: Path) -> dict:
    return {p.name: p.read_bytes() for p in folder.iterdir()} if folder.exists() else {}


def _run(argv, capsys):
    status = main(argv)
    captured = capsys.readouterr()
    return status, captured.err


def _check(status, err, expect):
    assert status == 2, err
    lines = [l for l in err.splitlines() if l.strip() and not l.startswith("note:")]
    assert len(lines) == 1, err
    assert lines[0].startswith("error: "), err
    assert "Traceback" not in err
    for word in expect:
        assert word in lines[0], f"{word!r} not in {lines[0]!r}"


def test_there_are_enough_cases():
    assert len(CASES) >= 60


@pytest.mark.parametrize("case", CASES, ids=[c["file"] for c in CASES])
def test_bad_model_or_argument(case, tmp_path, capsys):
    model = HERE / case["file"]
    before_model = model.read_bytes()
    existing = tmp_path / "existing.csv"
    if "{existing}" in case["args"]:
        existing.write_text("precious")
    args = [a.replace("{tmp}", str(tmp_path)).replace("{model}", str(model)).replace("{existing}", str(existing))
            for a in case["args"]]
    argv = ["simulate", str(model)]
    if "-o" not in args:
        argv += ["-o", str(tmp_path / "out.csv")]
    before = _snapshot(tmp_path)
    status, err = _run(argv + args, capsys)
    _check(status, err, case["expect"] + ([case["file"]] if "model file" in err else []))
    assert _snapshot(tmp_path) == before  # nothing created or changed
    assert model.read_bytes() == before_model


@pytest.mark.parametrize("what", ["missing", "directory", "device"])
def test_model_paths_that_are_not_model_files(what, tmp_path, capsys):
    path = {"missing": str(tmp_path / "nothing.toml"), "directory": str(tmp_path), "device": "/dev/null"}[what]
    words = {"missing": ["does not exist"], "directory": ["is a directory"], "device": ["not a regular file"]}[what]
    status, err = _run(["simulate", path, "-o", str(tmp_path / "out.csv")], capsys)
    _check(status, err, words + [path])
    assert not (tmp_path / "out.csv").exists()


@pytest.mark.parametrize("argv,words", [
    (["nuclide", "27Al"], ["--field", "required"]),
    (["nuclide", "27Al", "--field", "0"], ["field_tesla = 0", "allowed range"]),
    (["nuclide", "129Xf", "--field", "9.4"], ["129Xf", "did you mean"]),
    (["nuclide"], ["nucleus", "--list"]),
    (["simulate"], ["the following arguments are required", "--help"]),
    (["fit", "m.toml", "--axis", "mhz"], ["--axis", "invalid choice", "--help"]),
    (["wobble"], ["invalid choice", "--help"]),
])
def test_bad_nuclide_commands(argv, words, capsys):
    status, err = _run(argv, capsys)
    _check(status, err, words)


DATA = Path(__file__).resolve().parents[1] / "bad_inputs" / "data"
# with a model, a ppm axis takes its reference frequency from the model's nucleus and field, so a
# file that states none is not an error for `fit`; every other case is
DATA_CASES = [c for c in tomllib.loads((DATA / "cases.toml").read_text())["case"]
              if set(c.get("options", {})) <= {"axis"} and c["file"] != "ppm_no_reference.csv"]
#: the fit command checks a missing file itself, with its own words; it reads raw data folders itself too
#: (powderspin.io.raw), and this one's acqus states no TD; a headerless file's unit is asked for with the command
#: line's flag (when the data do not tell it)
DATA_WORDS = {"missing.csv": ["does not exist"], "raw_only_experiment": ["acqus lacks a usable TD"],
              "no_header.txt": ["no header row", "--axis ppm", "--axis khz"]}
FIT_MODEL = """nucleus = "27Al"
[measurement]
field_tesla = 9.4
[[site]]
label = "Al"
shift_ppm = { start = 0.0, min = -10.0, max = 10.0 }
gauss_hz = { start = 300.0, min = 10.0, max = 3000.0 }
"""


@pytest.mark.parametrize("case", DATA_CASES, ids=[c["file"] for c in DATA_CASES])
def test_bad_data_files_through_the_fit_command(case, tmp_path, capsys):
    """The bad measured-spectrum files of tests/bad_inputs/data/ given to `powderspin fit` on the command line."""
    model = tmp_path / "model.toml"
    model.write_text(FIT_MODEL)
    data = DATA / case["file"]
    before = _snapshot(tmp_path)
    argv = ["fit", str(model), str(data), "-o", str(tmp_path / "result.toml"), "-q"]
    if "axis" in case.get("options", {}):
        argv += ["--axis", case["options"]["axis"]]
    status, err = _run(argv, capsys)
    axis = case.get("options", {}).get("axis")
    if axis is not None and axis not in ("ppm", "hz", "khz"):
        words = ["--axis", axis]  # refused by the command line before any file is read
    else:
        words = [case["file"].split("/")[-1]] + DATA_WORDS.get(case["file"], case["expect"])
    _check(status, err, words)
    assert _snapshot(tmp_path) == before


def test_enough_model_and_data_cases_through_the_cli():
    assert len(CASES) + len(DATA_CASES) >= 60
