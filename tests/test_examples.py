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
    assert (tmp_path / "out.csv").read_text().count("\n") > 100


def test_quickstart_script(tmp_path):
    r = subprocess.run([sys.executable, str(ROOT / "examples" / "quickstart.py"), str(tmp_path)],
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    assert (tmp_path / "quickstart.png").exists() and (tmp_path / "quickstart.csv").exists()


def test_demo_command(tmp_path):
    r = _run(["demo", "--out", str(tmp_path / "d")], tmp_path)
    assert r.returncode == 0, r.stderr
    assert (tmp_path / "d" / "demo_spectrum.csv").exists() and (tmp_path / "d" / "demo_spectrum.png").exists()
    # the demo owns its folder: a rerun replaces its own files without --force ...
    r2 = _run(["demo", "--out", str(tmp_path / "d")], tmp_path)
    assert r2.returncode == 0, r2.stderr
    # ... but never touches a folder it did not make
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "demo_spectrum.csv").write_text("precious")
    r3 = _run(["demo", "--out", str(tmp_path / "mine")], tmp_path)
    assert r3.returncode == 0, r3.stderr
    assert (tmp_path / "mine" / "demo_spectrum.csv").read_text() == "precious"
    assert (tmp_path / "mine-2" / "demo_spectrum.csv").exists()


def test_readme_python_block(tmp_path, monkeypatch):
    text = (ROOT / "README.md").read_text()
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    assert blocks
    import matplotlib

    matplotlib.use("Agg")
    monkeypatch.chdir(tmp_path)
    for b in blocks:
        exec(compile(b, "README.md", "exec"), {})


def test_readme_command_lines(tmp_path):
    text = (ROOT / "README.md").read_text()
    cmds = [l.strip() for l in text.splitlines() if l.startswith("    powderspin ")]
    assert len(cmds) >= 3
    for c in cmds:
        args = shlex.split(c)[1:]
        args = [str(ROOT / a) if a.startswith("examples/") else a for a in args]
        r = _run(args, tmp_path)
        assert r.returncode == 0, (c, r.stderr)
