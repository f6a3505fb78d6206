"""Rank decomposition, refocusing ratios and the sheared F1 scale of MQMAS and STMAS."""

from __future__ import annotations

from fractions import Fraction

import pytest

from powderspin.physics.multiple_quantum import (
    F1_SCALES,
    allowed_mq_orders,
    isotropic_shifts_ppm,
    rank_coefficients,
    two_dimensional_scale,
)


@pytest.mark.parametrize("spin,order,published", [
    # L. Frydman, J. S. Harwood, J. Am. Chem. Soc. 117 (1995) 5367 (I = 3/2, 3Q: -7/9);
    # A. Medek, J. S. Harwood, L. Frydman, J. Am. Chem. Soc. 117 (1995) 12779 (I = 5/2: 19/12, -25/12);
    # S. E. Ashbrook, S. Wimperis, Prog. Nucl. Magn. Reson. Spectrosc. 45 (2004) 53, table of ratios
    # (I = 7/2, 3Q: 101/45) -- the values as written in design.md section 8, from memory of these papers
    (1.5, 3, Fraction(-7, 9)),
    (2.5, 3, Fraction(19, 12)),
    (2.5, 5, Fraction(-25, 12)),
    (3.5, 3, Fraction(101, 45)),
])
def test_mqmas_ratio_matches_published(spin, order, published):
    s = two_dimensional_scale(spin, "mqmas", order)
    assert s.ratio == pytest.approx(float(published), abs=1e-12)
    assert s.ratio_fraction == str(published)


@pytest.mark.parametrize("spin,published", [
    # Z. Gan, J. Am. Chem. Soc. 122 (2000) 3242 and S. E. Ashbrook, S. Wimperis, Prog. Nucl. Magn. Reson.
    # Spectrosc. 45 (2004) 53: STMAS ratios -8/9, 7/24, 28/45, 55/72 (from memory)
    (1.5, Fraction(-8, 9)),
    (2.5, Fraction(7, 24)),
    (3.5, Fraction(28, 45)),
    (4.5, Fraction(55, 72)),
])
def test_stmas_ratio_matches_published(spin, published):
    assert two_dimensional_scale(spin, "stmas").ratio == pytest.approx(float(published), abs=1e-12)


@pytest.mark.parametrize("spin", [1.5, 2.5, 3.5, 4.5])
def test_symmetric_coefficients_follow_the_published_polynomials(spin):
    """The symmetric-transition coefficients C0(I, m) = 2m [I(I+1) - 3m^2] and C4(I, m) = 2m [18 I(I+1) - 34 m^2 - 5]
    (Frydman and Harwood, J. Am. Chem. Soc. 117 (1995) 5367; Ashbrook and Wimperis, Prog. Nucl. Magn. Reson.
    Spectrosc. 45 (2004) 53; from memory) are proportional to our Q_0 and Q_4, and the rank-2 part has the
    coefficient C2(I, m) = 2m [8 I(I+1) - 12 m^2 - 3] (same sources, from memory)."""
    x = spin * (spin + 1)
    ms = [m / 2 for m in range(1, int(2 * spin) + 1, 2)]
    ref = {L: [2 * m * f(m) for m in ms] for L, f in {
        0: lambda m: x - 3 * m * m, 2: lambda m: 8 * x - 12 * m * m - 3, 4: lambda m: 18 * x - 34 * m * m - 5}.items()}
    ours = {L: [rank_coefficients(spin, m, -m)[i] for m in ms] for i, L in enumerate((0, 2, 4))}
    for L in (0, 2, 4):
        k = ours[L][0] / ref[L][0]
        assert ours[L] == pytest.approx([k * r for r in ref[L]], rel=1e-12, abs=1e-12)


@pytest.mark.parametrize("spin", [1.5, 2.5, 3.5, 4.5])
def test_ct_rank0_is_samoson_qis(spin):
    """Powder centre of gravity of the CT: delta_QIS = -(3/40) (P_Q/nu0)^2 [I(I+1) - 3/4] / [I^2 (2I-1)^2] 1e6
    (A. Samoson, Chem. Phys. Lett. 119 (1985) 29)."""
    s = two_dimensional_scale(spin, "stmas")
    cq, eta, nu0 = 3.0, 0.4, 104.26e6
    _, f2 = isotropic_shifts_ppm(s, cq, eta, nu0)
    pq2 = (cq * 1e6) ** 2 * (1 + eta * eta / 3)
    ref = -(3 / 40) * pq2 / nu0 ** 2 * (spin * (spin + 1) - 0.75) / (spin ** 2 * (2 * spin - 1) ** 2) * 1e6
    assert f2 == pytest.approx(ref, rel=1e-12)


@pytest.mark.parametrize("spin", [1.5, 2.5, 3.5, 4.5])
@pytest.mark.parametrize("experiment", ["mqmas", "stmas"])
def test_isotropic_shift_from_the_two_centres(spin, experiment):
    """In this sheared scale delta_iso = (17 delta_F1 + 10 delta_F2) / 27 for every spin and order
    (J.-P. Amoureux, C. Fernandez, Solid State Nucl. Magn. Reson. 10 (1998) 211; from memory), and for
    I = 3/2 3QMAS delta_F1 - delta_iso = -(10/17) delta_QIS (design.md section 8)."""
    orders = allowed_mq_orders(spin) if experiment == "mqmas" else (1,)
    for p in orders:
        s = two_dimensional_scale(spin, experiment, p if experiment == "mqmas" else 3)
        f1, f2 = isotropic_shifts_ppm(s, 4.0, 0.7, 130.3e6, 12.5)
        assert (17 * f1 + 10 * f2) / 27 == pytest.approx(12.5, abs=1e-12)
        assert s.f1_qis_fraction == "-10/17"


def test_describe_names_the_convention():
    d = two_dimensional_scale(1.5, "mqmas", 3).describe()
    assert "(p - R)" in d["f1_definition"] and d["refocusing_ratio"] == "-7/9"
    assert "delta_iso" in d["f1_centre_of_gravity"] and "delta_QIS" in d["f2_centre_of_gravity"]


@pytest.mark.parametrize("spin,order", [(1.5, 5), (2.5, 7), (2.5, 1), (2.5, 4), (3.5, 9)])
def test_bad_mq_order_names_the_key_and_range(spin, order):
    with pytest.raises(ValueError, match=r"mq_order = .* allowed: 3"):
        two_dimensional_scale(spin, "mqmas", order)


@pytest.mark.parametrize("spin", [0.5, 1.0, 3.0])
def test_spins_without_a_central_transition_are_refused(spin):
    with pytest.raises(ValueError, match="half-integer spin of at least 3/2"):
        two_dimensional_scale(spin, "mqmas", 3)


@pytest.mark.parametrize("spin", [1.5, 2.5, 3.5, 4.5])
@pytest.mark.parametrize("experiment", ["mqmas", "stmas"])
def test_f1_scale_factors_follow_their_stated_formulas(spin, experiment):
    """Each F1 scale is a multiple of the isotropic one, derived from the code's R and p: t1_evolution = p - R
    (the sheared t1 frequency nu_t1 - R nu_CT of a pure shift d is p d - R d), total_evolution = (p - R) / (1 + |R|)
    (that frequency per unit of t1 + |R| t1)."""
    orders = allowed_mq_orders(spin) if experiment == "mqmas" else (3,)
    for p in orders:
        s = two_dimensional_scale(spin, experiment, p)
        assert s.f1_scale_factor("isotropic") == 1.0
        assert s.f1_scale_factor("t1_evolution") == pytest.approx(s.order - s.ratio, rel=1e-14)
        assert s.f1_scale_factor("total_evolution") == pytest.approx((s.order - s.ratio) / (1 + abs(s.ratio)),
                                                                    rel=1e-14)
        for name in F1_SCALES:
            d = s.describe(name)
            assert d["f1_scale"] == name and d["f1_scale_description"] == F1_SCALES[name]
            assert float(Fraction(d["f1_scale_factor"])) == pytest.approx(s.f1_scale_factor(name), rel=1e-9)


@pytest.mark.parametrize("spin,order,t1_factor,total_factor", [
    # a pure shift after shearing with R = -7/9 (I = 3/2) lies at (3 + 7/9) = 34/9 delta_iso; scaled by 1 + |R|,
    # at 17/8 delta_iso; for I = 5/2 (R = 19/12) at 17/12 and 17/31 delta_iso (S. E. Ashbrook, S. Wimperis,
    # Prog. Nucl. Magn. Reson. Spectrosc. 45 (2004) 53, from memory of its discussion of F1 scaling)
    (1.5, 3, Fraction(34, 9), Fraction(17, 8)),
    (2.5, 3, Fraction(17, 12), Fraction(17, 31)),
])
def test_f1_scale_factors_match_the_published_values(spin, order, t1_factor, total_factor):
    s = two_dimensional_scale(spin, "mqmas", order)
    assert s.f1_scale_factor("t1_evolution") == pytest.approx(float(t1_factor), abs=1e-12)
    assert s.f1_scale_factor("total_evolution") == pytest.approx(float(total_factor), abs=1e-12)


def test_unknown_f1_scale_lists_the_allowed_ones():
    with pytest.raises(ValueError, match="'isotropic', 't1_evolution', 'total_evolution'"):
        two_dimensional_scale(1.5, "mqmas", 3).f1_scale_factor("ratio")
