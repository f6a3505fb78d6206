"""The compile note appears when a powderspin kernel compiles, and never when every kernel comes from numba's cache."""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
from pathlib import Path

import numba
import pytest

from powderspin.cli.common import compile_note, end_compile_note

ROOT = Path(__file__).resolve().parents[2]


def test_note_printed_when_a_package_kernel_compiles(capsys):
    args = argparse.Namespace(quiet=False)
    compile_note(args)

    def _twice(x):
        return 2.0 * x

    _twice.__module__ = "powderspin.engine._note_probe"  # stands for a package kernel; compiled fresh, not cached
    try:
        assert numba.njit(_twice)(1.5) == 3.0
    finally:
        end_compile_note(args)  # as the command's end does: no listener outlives its command
    err = capsys.readouterr().err
    assert err.count("compiling the numerical kernels") == 1


@pytest.mark.slow
def test_no_note_when_the_kernels_are_cached(tmp_path):
    model = tmp_path / "m.toml"
    model.write_text('nucleus = "31P"\n[measurement]\nfield_tesla = 9.4\npoints = 256\n'
                     '[[site]]\nlabel = "P"\nspan_ppm = 100.0\nskew = 0.2\n')
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    cmd = [sys.executable, "-m", "powderspin", "simulate", str(model), "-o", str(tmp_path / "a.csv")]
    subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=600)  # warms the cache if needed
    cmd[-1] = str(tmp_path / "b.csv")
    out = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=600)
    assert out.returncode == 0, out.stderr
    assert "compiling" not in out.stderr
