"""Slow spinning: the sideband manifold is never aliased silently.

27Al, C_Q = 10 MHz, eta = 0, all transitions, 9.4 T: at slow spinning the
sideband manifold spans the whole first-order satellite pattern (about
+-3 MHz, thousands of rotor periods' worth of bands).  Its envelope must
follow the static powder pattern (M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70
(1979) 3300: for an inhomogeneous interaction the sideband manifold's moments
equal the static ones, and at slow spinning the envelope approaches the
static lineshape), so the share of the intensity in wide regions of the
spectrum is compared with the static spectrum computed in the same run.

The orientation set (20 subdivisions, 231 octant directions) is small to keep
the test fast; the static reference uses the same set, so the comparison tests
the sideband consumer, not the powder average.  Both use perturbation theory
(the subject here is the consumer; the producers are checked elsewhere).
"""

from __future__ import annotations

import pytest

from powderspin.model.modelfile import make_model
from powderspin.model.values import ModelError
from powderspin.simulator import simulate


def _spectrum(rate_hz, **extra):
    meas = {"field_tesla": 9.4, "spinning_hz": rate_hz, "transitions": "all", "points": 8192,
            "method": "perturbation", "center_ppm": 0.0, "width_ppm": 60000.0, "orientations": 20,
            "gauss_hz": 3000.0}
    meas.update(extra)
    return simulate(make_model("27Al", meas, [{"label": "A", "cq_mhz": 10.0, "eta_q": 0.0}]))


def _shares(spec):
    hz, y = spec.hz, spec.intensity
    tot = y.sum()
    return y[hz > 2.1e6].sum() / tot, y[(hz > 1.6e6) & (hz < 2.0e6)].sum() / tot


@pytest.fixture(scope="module")
def static_shares():
    return _shares(_spectrum(0.0))


@pytest.mark.parametrize("rate_hz", [1000.0, 500.0])
def test_slow_spinning_envelope_follows_the_static_pattern(rate_hz, static_shares):
    spec = _spectrum(rate_hz)
    high, band = _shares(spec)
    # the static shares of these regions: about 0.0156 and 0.0076
    assert static_shares[0] == pytest.approx(0.0156, abs=5e-4)
    assert high == pytest.approx(static_shares[0], rel=0.03)
    assert band == pytest.approx(static_shares[1], rel=0.05)
    assert spec.metadata["rotor_phases"]["A"] > 4096  # beyond the old silent cap


def test_a_manifold_beyond_the_phase_limit_is_refused():
    with pytest.raises(ModelError, match=r"needs about \d+ rotor phases \(rotor_phases\)"):
        _spectrum(20.0)


def test_fixed_phases_that_alias_give_a_note_not_silence():
    spec = _spectrum(1000.0, rotor_phases=1024)
    assert any("rotor_phases = 1024" in n for n in spec.metadata["notes"])
