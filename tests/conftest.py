"""Test-wide settings: the lineshape library of every test run lives in a temporary folder.

Tests (and the command-line processes they start, which inherit the environment) must never
read or fill the user's own cache folder, so ``POWDERSPIN_CACHE`` points into pytest's
temporary directory for the whole session (one folder per xdist worker).
"""

from __future__ import annotations

import os

import pytest

# Sleeping OpenMP waits (the command line sets the same): with spinning waits every parallel kernel stalls
# behind the other pytest worker's threads on a 2-core machine.  Set before numba starts its thread pool.
os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")


@pytest.fixture(autouse=True, scope="session")
def _private_lineshape_library(tmp_path_factory):
    saved = os.environ.get("POWDERSPIN_CACHE")
    os.environ["POWDERSPIN_CACHE"] = str(tmp_path_factory.mktemp("lineshape-library"))
    yield
    if saved is None:
        os.environ.pop("POWDERSPIN_CACHE", None)
    else:
        os.environ["POWDERSPIN_CACHE"] = saved
