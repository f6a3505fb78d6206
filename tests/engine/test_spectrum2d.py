"""A simulated 2D spectrum drawn on the other F1 scales: positions from the stated formulas, integrals kept."""

from __future__ import annotations

import numpy as np
import pytest

import powderspin as ps
from powderspin.physics.multiple_quantum import F1_SCALES, two_dimensional_scale


def _spectrum(spin_nucleus, cq_mhz, experiment="mqmas", mq_order=3):
    meas = {"field_tesla": 11.7, "spinning_hz": "inf", "experiment": experiment, "mq_order": mq_order,
            "points": 128, "f1_points": 64, "orientations": 12, "gauss_hz": 150.0, "f1_gauss_hz": 150.0,
            "center_ppm": 10.0, "width_ppm": 80.0, "f1_center_ppm": 10.0, "f1_width_ppm": 60.0}
    return ps.simulate(ps.make_model(spin_nucleus, meas, [{"label": "a", "shift_ppm": 12.0, "cq_mhz": cq_mhz}]))


def _f1_centre(s):
    p = s.f1_projection()
    return float(np.sum(s.f1_ppm * p) / np.sum(p))


@pytest.mark.parametrize("nucleus,experiment,order", [("23Na", "mqmas", 3), ("27Al", "mqmas", 3),
                                                       ("27Al", "mqmas", 5), ("27Al", "stmas", 3)])
def test_a_site_without_quadrupolar_coupling_lies_at_c_delta_iso(nucleus, experiment, order):
    """C_Q = 0: on the isotropic scale F1 = delta_iso (design.md section 8, the diagonal); on another scale
    F1 = c delta_iso with c = p - R or (p - R) / (1 + |R|) (powderspin.physics.multiple_quantum, stated formulas)."""
    iso = _spectrum(nucleus, 0.0, experiment, order)
    assert _f1_centre(iso) == pytest.approx(12.0, abs=0.05)
    scale = two_dimensional_scale(ps.get_nuclide(nucleus).spin, experiment, order)
    for name in F1_SCALES:
        s = iso.on_f1_scale(name)
        c = scale.f1_scale_factor(name)
        assert _f1_centre(s) == pytest.approx(c * _f1_centre(iso), rel=1e-12)
        assert s.metadata["f1_convention"]["f1_scale"] == name and s.f1_scale == name
        assert s.metadata["centres_of_gravity_ppm"]["a"]["f1"] == pytest.approx(c * 12.0, rel=1e-12)
        # each site still integrates to its weight (density per ppm^2 of the new axes)
        assert s.intensity.sum() * s.dx1_ppm * s.dx2_ppm == pytest.approx(
            iso.intensity.sum() * iso.dx1_ppm * iso.dx2_ppm, rel=1e-12)
        np.testing.assert_allclose(s.f2_projection(), iso.f2_projection(), rtol=1e-12, atol=1e-15)


def test_quadrupolar_site_centre_and_way_back():
    iso = _spectrum("27Al", 3.0)
    t = iso.on_f1_scale("t1_evolution")
    d = t.metadata["f1_convention"]
    assert d["f1_scale_factor"] == "17/12" and "17/12" in d["f1_centre_of_gravity"]
    back = t.on_f1_scale("isotropic")
    np.testing.assert_allclose(back.f1_ppm, iso.f1_ppm, rtol=1e-13, atol=1e-12)
    np.testing.assert_allclose(back.intensity, iso.intensity, rtol=1e-12, atol=1e-300)
    assert back.metadata["f1_convention"] == iso.metadata["f1_convention"]


def test_bad_scale_name_and_foreign_spectrum():
    from powderspin.engine.spectrum2d import Spectrum2D

    with pytest.raises(ValueError, match="is not one of 'isotropic'"):
        _spectrum("23Na", 1.0).on_f1_scale("unscaled")
    bare = Spectrum2D([0.0, 1.0], [0.0, 1.0], [0.0], [0.0], [[1.0], [1.0]], ("a",), [[[1.0], [1.0]]])
    with pytest.raises(ValueError, match="must give its spin and experiment"):
        bare.on_f1_scale("t1_evolution")
