"""``powderspin explore`` on the command line: bad input before anything starts, Ctrl-C, the --host warning."""

from __future__ import annotations

import sys
import urllib.request

import pytest

from powderspin.cli.main import main
from tests.explorer.helpers import Served, write_inputs


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    return write_inputs(tmp_path_factory.mktemp("cli-explore"))


def _one_line(capsys) -> str:
    out = capsys.readouterr()
    assert out.out == ""
    lines = out.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ")
    return lines[0]


def test_bad_inputs_give_one_line_and_status_2(inputs, tmp_path, capsys):
    model, data = inputs
    assert main(["explore", str(tmp_path / "none.toml"), "--no-browser"]) == 2
    assert "none.toml" in _one_line(capsys)
    bad = tmp_path / "bad.toml"
    bad.write_text(model.read_text().replace("eta_q = { start = 0.3", "eta_q = { start = 1.3"))
    assert main(["explore", str(bad), "--no-browser"]) == 2
    assert "eta_q" in _one_line(capsys)
    assert main(["explore", str(model), str(data), str(data), "--no-browser"]) == 2
    assert "2 data file(s) given for 1 measurement(s)" in _one_line(capsys)
    assert main(["explore", str(model), str(tmp_path / "missing.csv"), "--no-browser"]) == 2
    assert "missing.csv" in _one_line(capsys)
    garbage = tmp_path / "garbage.csv"
    garbage.write_text("ppm,intensity\n1,2\nthree,4\n")
    assert main(["explore", str(model), str(garbage), "--no-browser"]) == 2
    assert "garbage.csv" in _one_line(capsys)
    assert main(["explore", str(model), "--port", "70000", "--no-browser"]) == 2
    assert "[0, 65535]" in _one_line(capsys)


def test_port_in_use_gives_one_line(inputs, capsys):
    pytest.importorskip("bokeh")
    import socket

    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen(1)
        port = taken.getsockname()[1]
        assert main(["explore", str(inputs[0]), "--port", str(port), "--no-browser"]) == 2
    line = _one_line(capsys)
    assert f"port {port}" in line and "--port" in line


def test_missing_bokeh_says_how_to_install(inputs, monkeypatch, capsys):
    monkeypatch.setitem(sys.modules, "bokeh", None)  # import bokeh now raises ImportError
    assert main(["explore", str(inputs[0]), "--no-browser"]) == 2
    assert "pip install 'powderspin[explore]'" in _one_line(capsys)


class _FakeLoop:
    def add_callback(self, fn):
        pass

    def start(self):
        raise KeyboardInterrupt


class _FakeServer:
    port = 5999
    io_loop = _FakeLoop()

    def start(self):
        pass

    def stop(self):
        pass


def test_other_host_warns_and_ctrl_c_gives_130(inputs, monkeypatch, capsys):
    pytest.importorskip("bokeh")
    import powderspin.explorer.server as server

    seen = {}

    def fake(make_state, title, host, port, extra):
        seen.update(host=host, port=port, extra=extra, title=title)
        return _FakeServer()

    monkeypatch.setattr(server, "make_server", fake)
    assert main(["explore", str(inputs[0]), "--host", "0.0.0.0", "--no-browser"]) == 130
    out = capsys.readouterr()
    assert out.out == "http://0.0.0.0:5999/explore\n"
    err = out.err.strip().splitlines()
    assert err[0].startswith("warning: --host 0.0.0.0 serves the page beyond this computer")
    assert err[-1] == "powderspin explore: stopped (Ctrl-C)" and len(err) == 2
    assert seen == {"host": "0.0.0.0", "port": 0, "extra": [], "title": "tet.toml"}
    assert main(["explore", str(inputs[0]), "--no-browser"]) == 130
    assert "warning" not in capsys.readouterr().err and seen["host"] == "127.0.0.1"


@pytest.mark.slow
def test_served_page_and_ctrl_c(inputs):
    pytest.importorskip("bokeh")
    model, data = inputs
    s = Served(model, data)
    try:
        assert s.url == f"http://127.0.0.1:{s.port}/explore"
        with urllib.request.urlopen(s.url, timeout=30) as r:
            page = r.read().decode()
        assert "powderspin explore" in page and "/static/js/bokeh" in page
        assert "cdn." not in page and "https://" not in page  # BokehJS comes from the local server
    finally:
        rc = s.stop()
    assert rc == 130
    assert "".join(s.err).strip().splitlines() == ["powderspin explore: stopped (Ctrl-C)"]
