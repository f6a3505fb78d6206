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
