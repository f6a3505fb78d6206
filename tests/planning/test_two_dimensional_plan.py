"""Planning F1 resolution of MQMAS: centres, overlaps, field dependence, bad input."""

from __future__ import annotations

import pytest

import powderspin as ps
from powderspin.physics.multiple_quantum import isotropic_shifts_ppm, two_dimensional_scale
from powderspin.planning.rotors import PlanError
from powderspin.planning.two_dimensional import plan_f1_resolution

SITES = [{"label": "A", "shift_ppm": 60.0, "cq_mhz": 3.5, "eta_q": 0.5},
         {"label": "B", "shift_ppm": 52.0, "cq_mhz": 2.0, "eta_q": 0.2}]


def _model(nucleus="27Al", sites=SITES, **meas):
    m = {"field_tesla": 9.4, "orientations": 16, "gauss_hz": 400.0}
    m.update(meas)
    return ps.make_model(nucleus, m, sites)


def test_sites_overlapping_in_1d_are_resolved_in_f1():
    res = plan_f1_resolution(_model(), [9.4, 18.8], orders=(3, 5))
    assert [(r.field_tesla, r.mq_order) for r in res] == [(9.4, 3), (9.4, 5), (18.8, 3), (18.8, 5)]
    for r in res:
        assert r.f1_overlaps["A | B"] < r.f2_overlaps["A | B"]
    assert res[0].f2_overlaps["A | B"] > 0.3            # at 9.4 T the 1D central transitions overlap ...
    assert res[0].resolved                              # ... and F1 resolves them
    # in the isotropic F1 scale the centres do not depend on the order (k_F1 = -10/17 for every order)
    assert res[0].f1_centres_ppm == res[1].f1_centres_ppm
    assert any("F2 broadening is used in F1" in n for n in res[0].notes)


def test_f1_centres_follow_second_order_theory_and_the_field():
    """F1 centre delta_iso + k_F1 delta_QIS (design.md section 8; Samoson 1985 for delta_QIS); the quadrupolar part
    of a shift in ppm falls as 1/B0^2 (second-order term ~ nu_Q^2 / nu0 in Hz)."""
    res = plan_f1_resolution(_model(), [9.4, 18.8], orders=(3,))
    nuc = ps.make_model("27Al", {"field_tesla": 9.4}, [{}]).nucleus
    for r in res:
        want = isotropic_shifts_ppm(two_dimensional_scale(2.5, "mqmas", 3), 3.5, 0.5, nuc.larmor_hz(r.field_tesla),
                                    60.0)
        assert r.f1_centres_ppm["A"] == pytest.approx(want[0]) and r.f2_centres_ppm["A"] == pytest.approx(want[1])
    q = [(r.f1_centres_ppm["A"] - 60.0) for r in res]
    assert q[0] / q[1] == pytest.approx((18.8 / 9.4) ** 2, rel=1e-9)


def test_orders_the_spin_lacks_are_noted():
    res = plan_f1_resolution(_model("23Na", [{"label": "a", "cq_mhz": 2.0}, {"label": "b", "cq_mhz": 1.0}]),
                             [9.4], orders=(3, 5))
    assert res[1].mq_order == 5 and not res[1].f1_overlaps and "not available" in res[1].notes[-1]


@pytest.mark.parametrize("kw,words", [({"fields": [80.0]}, "outside the allowed range"),
                                      ({"threshold": 1.5}, "threshold = 1.5 must lie in"),
                                      ({"nucleus": "31P"}, "no multiple-quantum transitions")])
def test_bad_input(kw, words):
    nucleus = kw.pop("nucleus", "27Al")
    sites = [{"label": "p"}] if nucleus == "31P" else SITES
    with pytest.raises(PlanError, match=words):
        plan_f1_resolution(_model(nucleus, sites), **kw)


PLAN_MODEL = """nucleus = "27Al"
[measurement]
field_tesla = 9.4
spinning_hz = 15000.0
experiment = "mqmas"
gauss_hz = 400.0
orientations = 16
[[site]]
label = "A"
shift_ppm = 60.0
cq_mhz = 3.5
eta_q = 0.5
[[site]]
label = "B"
shift_ppm = 52.0
cq_mhz = 2.0
eta_q = 0.2
"""


def test_plan_command_with_mqmas_table(tmp_path, capsys):
    """A model whose measurement is 2D is planned as its 1D central transition, and --mqmas adds the F1 table."""
    from powderspin.cli.main import main
    p = tmp_path / "m.toml"
    p.write_text(PLAN_MODEL)
    assert main(["plan", str(p), "--fields", "9.4", "--rates", "20000", "--no-precision", "--mqmas", "-q"]) == 0
    out = capsys.readouterr().out
    assert "MQMAS F1 resolution" in out and "A | B" in out
    row = [line for line in out.splitlines() if line.strip().startswith("9.4      3")][0]
    assert row.split()[-1] == "yes"


def test_plan_command_refuses_mqmas_for_spin_half(tmp_path, capsys):
    from powderspin.cli.main import main
    p = tmp_path / "p.toml"
    p.write_text('nucleus = "31P"\n[measurement]\nfield_tesla = 9.4\n[[site]]\nlabel = "P"\n')
    assert main(["plan", str(p), "--mqmas", "-q"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--mqmas" in err[0] and "no multiple-quantum" in err[0]
