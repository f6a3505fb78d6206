"""The command line: files, refusals to overwrite, clear errors."""

from __future__ import annotations

import numpy as np

from powderspin.cli.main import main

MODEL = """nucleus = "31P"
[measurement]
field_tesla = 9.4
points = 512
center_ppm = 0.0
width_ppm = 300.0
lorentz_hz = 200.0
[[site]]
label = "P1"
span_ppm = 120.0
skew = 0.3
[[site]]
label = "P2"
shift_ppm = 20.0
"""


def _read_csv(path):
    lines = path.read_text().splitlines()
    comments = [l for l in lines if l.startswith("#")]
    body = [l for l in lines if not l.startswith("#")]
    # the sum column, then one column per site (named by label)
    assert body[0].split(",")[:3] == ["ppm", "hz", "intensity"]
    data = np.array([[float(x) for x in l.split(",")] for l in body[1:]])
    if data.shape[1] > 3:
        np.testing.assert_allclose(data[:, 3:].sum(axis=1), data[:, 2], rtol=1e-8, atol=1e-12)
    data = data[:, :3]
    return comments, data


def test_simulate_writes_csv_and_plot(tmp_path, capsys):
    model = tmp_path / "m.toml"
    model.write_text(MODEL)
    out, png = tmp_path / "o.csv", tmp_path / "o.png"
    assert main(["simulate", str(model), "-o", str(out), "--plot", str(png)]) == 0
    comments, data = _read_csv(out)
    assert any(c.startswith("# nucleus: 31P") for c in comments)
    assert any(c.startswith("# nu_ref_hz:") for c in comments)
    assert data.shape == (512, 3)
    assert np.all(np.diff(data[:, 1]) > 0)  # ascending hz
    assert np.allclose(data[:, 0], data[:, 1] / float([c for c in comments if "nu_ref_hz" in c][0].split(":")[1]) * 1e6,
                       rtol=1e-6, atol=1e-6)
    assert png.stat().st_size > 1000 and png.read_bytes()[:4] == b"\x89PNG"
    assert model.read_text() == MODEL


def test_refuses_to_overwrite_without_force(tmp_path, capsys):
    model = tmp_path / "m.toml"
    model.write_text(MODEL)
    out = tmp_path / "o.csv"
    out.write_text("precious")
    assert main(["simulate", str(model), "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert "exists" in err and "--force" in err
    assert out.read_text() == "precious"
    assert main(["simulate", str(model), "-o", str(out), "--force"]) == 0
    assert out.read_text().startswith("#")
    # the model file itself is never an output
    assert main(["simulate", str(model), "-o", str(model), "--force"]) == 2
    assert "input file" in capsys.readouterr().err
    assert model.read_text() == MODEL


def test_bad_model_gives_one_clear_line(tmp_path, capsys):
    model = tmp_path / "m.toml"
    model.write_text(MODEL.replace("skew = 0.3", "skew = 3.0"))
    assert main(["simulate", str(model), "-o", str(tmp_path / "o.csv")]) == 2
    err = capsys.readouterr().err
    assert "skew = 3.0 is outside the allowed range [-1, 1]" in err
    assert "Traceback" not in err
    assert not (tmp_path / "o.csv").exists()


def test_nuclide_command(capsys):
    assert main(["nuclide", "27Al", "--field", "14.1"]) == 0
    out = capsys.readouterr().out
    assert "5/2" in out and "156.4" in out  # 27Al at 14.1 T: 156.4 MHz (common practice, 600 MHz 1H)
    assert main(["nuclide", "27Ag", "--field", "14.1"]) == 2
    assert "did you mean" in capsys.readouterr().err


def test_sideband_table(tmp_path, capsys):
    model = tmp_path / "m.toml"
    model.write_text(MODEL.replace("points = 512", "points = 512\nspinning_hz = 4000"))
    assert main(["simulate", str(model), "-o", str(tmp_path / "o.csv"), "--sidebands"]) == 0
    out = capsys.readouterr()
    assert "band" in out.out and "position_hz" in out.out
    assert "rated spinning rate" in out.err  # safety caution printed with spinning


def test_output_that_is_a_folder_is_a_clear_error(tmp_path, capsys):
    model = tmp_path / "m.toml"
    model.write_text(MODEL)
    folder = tmp_path / "out"
    folder.mkdir()
    (folder / "keep.txt").write_text("x")
    assert main(["simulate", str(model), "-o", str(folder), "--force"]) == 2
    assert "error:" in capsys.readouterr().err
    assert (folder / "keep.txt").read_text() == "x"


def test_nuclide_and_help_do_not_load_the_compiled_kernels():
    """`powderspin nuclide` and `--help` start quickly: numba (and the kernels) are not imported."""
    import subprocess
    import sys

    code = ("import sys, contextlib, io\n"
            "from powderspin.cli.main import main\n"
            "with contextlib.redirect_stdout(io.StringIO()):\n"
            "    main(['nuclide', '27Al', '--field', '9.4'])\n"
            "    main(['simulate', '--help'])\n"
            "print('numba' in sys.modules, 'powderspin.engine._kernels' in sys.modules)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.stdout.strip() == "False False", out.stderr
