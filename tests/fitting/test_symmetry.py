"""Equivalent relative orientations: derived equivalences, folding into the fundamental domain, mirrored starts.

The check of the equivalences is independent of the engine's rotation code: scipy's Rotation (a reference library)
builds R = Rz(alpha) Ry(beta) Rz(gamma) (intrinsic ZYZ), and two triples describe the same pair of tensors, up to the
symmetries a powder spectrum cannot see, exactly when the shift tensors in the EFG frame, T = R D R^T, satisfy
T' = S T S for a diagonal sign matrix S: S V S = V for the diagonal EFG tensor V (its point group D2h, common
practice), and improper S (mirrors) are allowed because a powder holds every crystallite's mirror image (the powder
average over all field directions b includes S b; common practice).
"""

from __future__ import annotations

from itertools import product

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

import powderspin as ps
from powderspin.fitting.fitter import fit
from powderspin.fitting.symmetry import euler_equivalents, fold_euler_deg, in_fundamental_domain
from tests.fitting import hard_cases as hc

D = np.diag([1.0, -0.3, -0.7])  # a shift tensor with three different principal values (traceless part)


def _t(a, b, g):
    r = Rotation.from_euler("ZYZ", [a, b, g], degrees=True).as_matrix()
    return r @ D @ r.T


def _same_class(e1, e2) -> bool:
    t1, t2 = _t(*e1), _t(*e2)
    return any(np.allclose(np.diag(s) @ t1 @ np.diag(s), t2, atol=1e-12) for s in product((1.0, -1.0), repeat=3))


@pytest.mark.parametrize("angles", [(40.0, 60.0, 25.0), (170.0, 135.0, 300.0), (12.0, 95.0, 200.0)])
def test_every_listed_equivalent_is_the_same_pair_of_tensors(angles):
    eq = euler_equivalents(*angles)
    assert len({tuple(np.round(e, 9)) for e in eq}) == 16
    for e in eq:
        assert _same_class(angles, e), e
    # and nothing else on a coarse scan of one angle is (the class has exactly these members)
    for da in (30.0, 90.0, 120.0):
        assert not _same_class(angles, (angles[0] + da, angles[1], angles[2]))


@pytest.mark.parametrize("angles", [(40.0, 60.0, 25.0), (-40.0, 60.0, -25.0), (220.0, 120.0, 155.0),
                                    (40.0, -60.0, 25.0), (310.0, 170.0, 10.0)])
def test_folding_lands_in_the_domain_and_keeps_the_class(angles):
    f = fold_euler_deg(*angles)
    assert in_fundamental_domain(*f)
    assert _same_class(angles, f)


def test_folding_is_one_answer_per_class():
    rng = np.random.default_rng(0)
    for a, b, g in rng.uniform([0, 0, 0], [360, 180, 360], (50, 3)):
        f = fold_euler_deg(a, b, g)
        for e in euler_equivalents(a, b, g):
            assert np.allclose(fold_euler_deg(*e), f, atol=1e-7), (a, b, g, e)


def test_equivalent_triples_give_identical_spectra():
    """The engine agrees: each equivalent triple gives the same static CT + shift-anisotropy spectrum (93Nb)."""
    meas = {"field_tesla": 9.4, "points": 256, "orientations": "coarse", "method": "perturbation", "gauss_hz": 1500.0}

    def spec(e):
        return ps.simulate(ps.make_model("93Nb", meas, [dict(label="X", shift_ppm=-1000.0, cq_mhz=20.0, eta_q=0.4,
                                                             span_ppm=300.0, skew=0.3, euler_deg=list(e))])).intensity

    y0 = spec((40.0, 60.0, 25.0))
    for e in euler_equivalents(40.0, 60.0, 25.0):
        assert np.max(np.abs(spec(e) - y0)) <= 1e-9 * y0.max(), e
    assert np.max(np.abs(spec((130.0, 60.0, 25.0)) - y0)) > 0.01 * y0.max()


def test_mirrored_starts_report_the_same_folded_angles():
    """Fits started at the truth and at its mirror images end at the same reported (folded) angles."""
    d, noise = hc.data("nb93", 11)
    t = hc.truth("nb93")
    out = []
    for a, b, g in [(40.0, 60.0, 25.0), (140.0, 60.0, 155.0), (40.0, 120.0, 155.0)]:
        r = fit(hc.model("nb93", t[:6] + [a, b, g]), [d], noise_region=noise)
        out.append([r.values[n] for n in hc.NAMES[6:]])
        assert in_fundamental_domain(*out[-1])
        if (a, b, g) != (40.0, 60.0, 25.0):
            assert any("folded" in n for n in r.notes)
    for o in out[1:]:
        assert np.allclose(o, out[0], atol=0.05 * 3), (o, out[0])
