"""The numpydoc examples of every public module run and give what they show."""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import matplotlib
import pytest

import powderspin

matplotlib.use("Agg")

MODULES = sorted(m.name for m in pkgutil.walk_packages(powderspin.__path__, "powderspin.")
                 if m.name not in ("powderspin.__main__",))


@pytest.mark.parametrize("name", ["powderspin"] + MODULES)
def test_module_examples(name):
    mod = importlib.import_module(name)
    result = doctest.testmod(mod, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE, verbose=False)
    assert result.failed == 0, f"{result.failed} docstring example(s) failed in {name}"
