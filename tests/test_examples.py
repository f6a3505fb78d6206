"""Every example in README.md and examples/ runs (design card: examples are tested)."""

from __future__ import annotations

import re
import shlex
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


def _run(args, cwd):
    return subprocess.run([sys.executable, "-m", "powderspin", *args], cwd=cwd, capture_output=True, text=True,
                          timeout=600)


@pytest.mark.parametrize("toml", sorted((ROOT / "examples").glob("*.toml")), ids=lambda p: p.name)
def test_example_models_simulate(toml, tmp_path):
    r = _run(["simulate", str(toml), "-o", str(tmp_path / "out.csv"), "--plot", str(tmp_path / "out.png")],
             tmp_path)
    assert r.returncode == 0, r.stderr
    import tomllib

    meas = tomllib.loads(toml.read_text())["measurement"]
    names = [f"out-m{j + 1}.csv" for j in range(len(meas))] if isinstance(meas, list) and len(meas) > 1 else \
        ["out.csv"]
    for name in names:
        assert (tmp_path / name).read_text().count("\n") > 100


def test_quickstart_script(tmp_path):
    r = subprocess.run([sys.executable, str(ROOT / "examples" / "quickstart.py"), str(tmp_path)],
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    assert (tmp_path / "quickstart.png").exists() and (tmp_path / "quickstart.csv").exists()


@pytest.mark.slow
def test_demo_command(tmp_path):
    r = _run(["demo", "--out", str(tmp_path / "d")], tmp_path)
    assert r.returncode == 0, r.stderr
    d = tmp_path / "d"
    for name in ("demo_fit.toml", "demo_fit-m1.csv", "demo_fit-m2.csv", "demo_fit.png"):
        assert (d / name).exists(), name
    assert "SYNTHETIC" in r.stdout and "reduced chi-square" in r.stdout
    # the result file reproduces the fitted curves (CSV precision: 10-12 significant digits); it shows its values
    # to the digits their standard errors support and keeps the full values for the reader
    r_sim = _run(["simulate", str(d / "demo_fit.toml"), "-o", str(tmp_path / "again.csv"), "-q"], tmp_path)
    assert r_sim.returncode == 0, r_sim.stderr
    for j in (1, 2):
        fit_rows = [l for l in (d / f"demo_fit-m{j}.csv").read_text().splitlines() if not l.startswith("#")]
        sim_rows = [l for l in (tmp_path / f"again-m{j}.csv").read_text().splitlines() if not l.startswith("#")]
        col = fit_rows[0].split(",").index("fit")
        fitted = [float(r.split(",")[col]) for r in fit_rows[1:]]
        again = [float(r.split(",")[2]) for r in sim_rows[1:]]
        top = max(abs(x) for x in fitted)
        assert max(abs(a - b) for a, b in zip(fitted, again)) <= 1e-9 * top
    # the demo owns its folder: a rerun replaces its own files without --force ...
    r2 = _run(["demo", "--out", str(d)], tmp_path)
    assert r2.returncode == 0, r2.stderr
    # ... but never touches a folder it did not make
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "demo_fit.toml").write_text("precious")
    r3 = _run(["demo", "--out", str(tmp_path / "mine")], tmp_path)
    assert r3.returncode == 0, r3.stderr
    assert (tmp_path / "mine" / "demo_fit.toml").read_text() == "precious"
    assert (tmp_path / "mine-2" / "demo_fit.toml").exists()


def test_demo_data_are_the_examples():
    """The demo fits the packaged copies of the example's synthetic spectra and model."""
    pkg = ROOT / "powderspin" / "data"
    for name in ("alpo_27al_9p4T.csv", "alpo_27al_14p1T.csv"):
        assert (pkg / name).read_bytes() == (ROOT / "examples" / name).read_bytes()
    assert (pkg / "demo_fit.toml").read_bytes() == (ROOT / "examples" / "alpo_fit.toml").read_bytes()


def test_readme_python_block(tmp_path, monkeypatch):
    text = (ROOT / "README.md").read_text()
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    assert blocks
    import matplotlib

    matplotlib.use("Agg")
    monkeypatch.chdir(tmp_path)
    for b in blocks:
        b = b.replace('"examples/', f'"{ROOT / "examples"}/')  # README paths are relative to the repository
        exec(compile(b, "README.md", "exec"), {})


@pytest.mark.slow
def test_readme_command_lines(tmp_path):
    text = (ROOT / "README.md").read_text()
    cmds = [l.strip() for l in text.splitlines() if l.startswith("    powderspin ")]
    assert len(cmds) >= 3
    for c in cmds:
        args = shlex.split(c)[1:]
        args = [str(ROOT / a) if a.startswith("examples/") else a for a in args]
        r = _run(args, tmp_path)
        assert r.returncode == 0, (c, r.stderr)


def test_glass_example_data_are_reproducible(tmp_path):
    """examples/make_glass_data.py remakes the committed synthetic spectrum (fixed seed)."""
    r = subprocess.run([sys.executable, str(ROOT / "examples" / "make_glass_data.py"), str(tmp_path)],
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    new = (tmp_path / "glass_27al_14p1T.csv").read_text().splitlines()
    old = (ROOT / "examples" / "glass_27al_14p1T.csv").read_text().splitlines()
    assert len(new) == len(old) and [a for a in new if a.startswith("#")] == [b for b in old if b.startswith("#")]
    rows = [(a, b) for a, b in zip(new, old) if not a.startswith("#") and not a.startswith("ppm,")]
    top = max(abs(float(b.split(",")[1])) for _, b in rows)
    for a, b in rows:
        xa, ya = (float(v) for v in a.split(","))
        xb, yb = (float(v) for v in b.split(","))
        assert xa == xb and abs(ya - yb) <= 1e-9 * top
