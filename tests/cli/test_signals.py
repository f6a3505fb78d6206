"""Where a signal handler must not raise: code whose exceptions Python prints and swallows."""

import sys

from powderspin.cli.common import _in_finaliser


def _frame_from(filename: str, name: str):
    """A real frame whose code says it lives in ``filename`` and is called ``name``."""
    src = f"def {name}(get):\n    return get()\n"
    scope = {}
    exec(compile(src, filename, "exec"), scope)
    return scope[name](lambda: sys._getframe(1))


def test_ordinary_code_is_interrupted_at_once():
    assert not _in_finaliser(sys._getframe())


def test_finaliser_defers_the_signal():
    assert _in_finaliser(_frame_from("/x/y/module.py", "__del__"))


def test_compiler_callback_defers_the_signal():
    # llvmlite's object-cache hooks are called from C through ctypes while numba compiles: an exception
    # raised there is reported as "Exception ignored on calling ctypes callback function" and lost
    frame = _frame_from("/site-packages/llvmlite/binding/executionengine.py", "_raw_object_cache_notify")
    assert _in_finaliser(frame)


def test_folder_probe_defers_the_signal(tmp_path, monkeypatch):
    # the writability probe makes and removes a trial file: a signal inside it (even inside tempfile's own
    # code) is delivered after it, so an interrupted command never leaves ".powderspin-check-*" behind
    import tempfile

    from powderspin import files

    seen = []
    real = tempfile.mkstemp

    def spying_mkstemp(*args, **kwargs):
        seen.append(sys._getframe())
        return real(*args, **kwargs)

    monkeypatch.setattr(files.tempfile, "mkstemp", spying_mkstemp)
    assert files.folder_write_error(tmp_path) is None
    assert seen and _in_finaliser(seen[0])
    assert list(tmp_path.iterdir()) == []


def test_folder_probe_reports_the_error(tmp_path):
    from powderspin.files import folder_write_error

    err = folder_write_error(tmp_path / "no such folder")
    assert isinstance(err, OSError)


def test_temporary_output_is_made_and_moved_with_the_signal_deferred(tmp_path, monkeypatch):
    # atomic_output's own frame is on the stack while it makes, finishes or removes the temporary file (not
    # while the caller writes into it): a signal there is delivered after that step
    import tempfile

    from powderspin import files

    seen = []
    real = tempfile.mkstemp

    def spying_mkstemp(*args, **kwargs):
        seen.append(sys._getframe())
        return real(*args, **kwargs)

    monkeypatch.setattr(files.tempfile, "mkstemp", spying_mkstemp)
    with files.atomic_output(tmp_path / "out.txt") as tmp:
        assert not _in_finaliser(sys._getframe())  # the caller's writing can be interrupted at once
        tmp.write_text("x")
    assert len(seen) >= 2 and all(_in_finaliser(f) for f in seen)
    assert [q.name for q in tmp_path.iterdir()] == ["out.txt"]
