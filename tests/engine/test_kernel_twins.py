"""Every compiled kernel has a slow twin and a test; the fused MAS kernel and the band summary are checked here.

The table in DEVELOPERS.md ("Kernels, their twins and their tests") lists
every ``@njit`` function of ``powderspin/engine/_kernels.py``; a kernel missing from
it fails :func:`test_every_kernel_is_in_the_developers_table`.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest

from powderspin.engine import _kernels as _k
from powderspin.engine.frequencies import site_frame
from powderspin.engine.spinning import perturbative_sidebands
from powderspin.model.values import MAGIC_ANGLE_DEG, Site
from powderspin.physics.nuclides import get_nuclide
from powderspin.physics.tensors import ShiftTensor
from tests.reference import mas_numpy

ROOT = Path(__file__).resolve().parents[2]


def _kernel_names() -> set[str]:
    text = (ROOT / "powderspin" / "engine" / "_kernels.py").read_text()
    return set(re.findall(r"@njit\([^)]*\)\s*\ndef (\w+)\(", text))


def test_every_kernel_is_in_the_developers_table():
    text = (ROOT / "DEVELOPERS.md").read_text()
    start = text.index("<!-- kernel table: start -->")
    end = text.index("<!-- kernel table: end -->")
    table = text[start:end]
    rows = re.findall(r"^\| `(\w+)` \|", table, flags=re.M)
    listed = set(rows)
    assert len(rows) == len(listed), "a kernel has more than one row"
    kernels = _kernel_names()
    assert kernels, "no kernels found: the pattern above no longer matches _kernels.py"
    assert kernels - listed == set(), f"kernels missing from the DEVELOPERS.md table: {sorted(kernels - listed)}"
    assert listed - kernels == set(), f"table rows for kernels that no longer exist: {sorted(listed - kernels)}"
    # every row names a twin (a file in tests/reference or 'inline') and an existing test file
    for row in re.findall(r"^\| `\w+` \|.*$", table, flags=re.M):
        cells = [c.strip() for c in row.strip("|").split("|")]
        assert len(cells) == 3, row
        tests = re.findall(r"`(tests/[\w/]+\.py)", cells[2])
        assert tests and all((ROOT / t).exists() for t in tests), row
        for ref in re.findall(r"`(tests/reference/\w+\.py)", cells[1]):
            assert (ROOT / ref).exists(), row


@pytest.mark.parametrize("nucleus,site,ms,rate", [
    # 31P shift anisotropy alone: Herzfeld-Berger regime, bands out to several times the rate
    ("31P", Site(shift=ShiftTensor(5.0, 80.0, 0.4)), (0.5,), 3000.0),
    # 27Al: central transition and a satellite, second-order terms, a tilted shift tensor
    ("27Al", Site(shift=ShiftTensor(40.0, 30.0, 0.2), cq_mhz=2.5, eta_q=0.6, euler_deg=(20.0, 40.0, 60.0)),
     (0.5, 1.5), 15000.0),
])
def test_fused_mas_kernel_matches_numpy_twin(nucleus, site, ms, rate):
    nuc = get_nuclide(nucleus)
    frame = site_frame(site, nuc, 9.4)
    rng = np.random.default_rng(7)
    axes = rng.normal(size=(5, 3))
    axes /= np.linalg.norm(axes, axis=1)[:, None]
    theta = math.radians(MAGIC_ANGLE_DEG)
    p = 128
    mean, amp = perturbative_sidebands(frame, axes, ms, rotor_angle_rad=theta, phases=p, rate_hz=rate)
    delta = frame.shift_tensor_ppm
    ref_mean, ref_amp = mas_numpy.mas_sidebands(nuc.spin, frame.nu0_hz, site.cq_hz, site.eta_q, delta, axes, ms,
                                                theta, rate, p)
    np.testing.assert_allclose(mean, ref_mean, rtol=0, atol=1e-6 * max(1.0, np.abs(ref_mean).max()))
    # the twin integrates the phase numerically (Simpson, 8192 points per period): agreement to 1e-7
    np.testing.assert_allclose(amp, ref_amp, rtol=0, atol=1e-7)


def test_band_summary_matches_numpy_twin():
    rng = np.random.default_rng(3)
    amp = rng.random((37, 3, 16))
    amp /= amp.sum(axis=2, keepdims=True)
    w = rng.random((37, 3))
    mean = rng.normal(scale=1000.0, size=(37, 3))
    got = _k._band_summary(amp, w, mean)
    ref = mas_numpy.band_summary(amp, w, mean)
    for g, r in zip(got, ref):
        np.testing.assert_allclose(g, r, rtol=1e-12, atol=1e-12)


def test_pair_coefficients_match_literal_level_energies():
    """_pair_coefficients against E1/E2 written literally (DEVELOPERS.md, 'Physics formulas') for random invariants."""
    from tests.reference import perturbative_numpy as pn

    spin, cq, nu0 = 2.5, 4.0e6, 104.2e6
    k = cq / (2 * spin * (2 * spin - 1))
    x = spin * (spin + 1)
    c2 = -(k * k) / (2 * nu0)
    rng = np.random.default_rng(5)
    for m, mm in ((0.5, -0.5), (2.5, 1.5), (1.5, -1.5)):
        dm, c1, ca, cb = _k._pair_coefficients(m, mm, x, k, c2)
        vzz, a, bq = rng.normal(size=3)
        got = c1 * vzz + ca * abs(a) + cb * abs(bq)
        e1 = pn.level_energy_first(spin, cq, m, vzz) - pn.level_energy_first(spin, cq, mm, vzz)
        want = e1 + _e2(spin, cq, nu0, m, abs(a), abs(bq)) - _e2(spin, cq, nu0, mm, abs(a), abs(bq))
        assert dm == m - mm
        assert got == pytest.approx(want, rel=1e-12, abs=1e-9)


def _e2(spin, cq, nu0, m, a, b):
    # DEVELOPERS.md, 'Physics formulas': E2(m) = -(K^2/(2 nu0)) m [(4X - 8m^2 - 1) A - (2X - 2m^2 - 1) B / 4]
    k = cq / (2 * spin * (2 * spin - 1))
    x = spin * (spin + 1)
    return -(k * k / (2 * nu0)) * m * ((4 * x - 8 * m * m - 1) * a - (2 * x - 2 * m * m - 1) * b / 4)
