"""The experiment planner (powderspin.planning.planner and `powderspin plan`).

Check sources (named again beside each test):

* recommended rates against spectra made independently by the slow references in
  tests/reference/ (nothing from powderspin): quadrupolar central-transition
  sidebands from the literal high-field formulas and a numerical phase
  integral (``fit_spectra.sideband_lines``; M. M. Maricq, J. S. Waugh, J. Chem.
  Phys. 70 (1979) 3300; M. H. Levitt, J. Magn. Reson. 82 (1989) 427), and
  shift-anisotropy sidebands from the Bessel-function sums of J. Herzfeld,
  A. E. Berger, J. Chem. Phys. 73 (1980) 6021 (``herzfeld_berger``) with
  analytic Lorentzian lines;
* widths: the second-order CT width falls as 1/B0 in Hz and the shift span
  grows as B0 (both from the high-field frequencies, DEVELOPERS.md 'Physics
  formulas'); the static shift pattern's central 99 % against the analytic
  Bloembergen-Rowland density (N. Bloembergen, T. J. Rowland, Acta Metall. 1
  (1953) 731); the quadrupolar-induced shift against A. Samoson, Chem. Phys.
  Lett. 119 (1985) 29;
* the Fisher-information standard errors against the scatter of fits
  (powderspin.fitting.fitter.fit) to 20 seeded noisy simulations at the same SNR
  (the Cramer-Rao bound is reached by least squares for Gaussian noise when
  the errors are small; C. R. Rao, Bull. Calcutta Math. Soc. 37 (1945) 81,
  from memory);
* quantiles of a Gaussian against scipy.stats.norm.

Sizes: small orientation sets (8 to 24 subdivisions per octant edge) and a few
hundred points suffice because every lineshape here is broadened by 200-300 Hz,
several points wide, which smooths the tent-interpolated powder average far
below the 1 % threshold, and the overlaps and widths are integrals over many
points.  The reference spectra use 60 x 60 crystallites (sidebands) or 32 x 32
quadrature nodes (Herzfeld-Berger); their agreement with the planner to a few
per cent of the overlap shows the sizes are enough.
"""

from __future__ import annotations

import json
import math
import shutil
import tomllib
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate, optimize, stats

import powderspin as ps
from powderspin.cli.main import main
from powderspin.engine.lineshape import Axis
from powderspin.planning.planner import (
    CAUTIONS,
    PlanError,
    candidate_rates,
    central_width_hz,
    default_rotor_table,
    load_rotor_table,
    overlap_fraction,
)
from tests.interrupting import interrupt_when_busy
from tests.reference import bloembergen_rowland as br
from tests.reference import fit_spectra as fr
from tests.reference import herzfeld_berger as hb

BAD = Path(__file__).resolve().parents[1] / "bad_inputs" / "plan"


def _overlap(covering, covered):
    # the overlap written out again from its definition: sum(min(S, C)) / sum(C)
    s = np.clip(covering, 0.0, None)
    c = np.clip(covered, 0.0, None)
    return float(np.minimum(s, c).sum() / c.sum())


def _recommended_and_below(field_plan):
    rec = field_plan.recommended_rate_hz
    assert rec is not None, field_plan.reason
    lower = [r.rate_hz for r in field_plan.rates if r.rate_hz < rec]
    assert lower, "the recommendation is the slowest candidate; the test needs a slower one"
    return rec, max(lower)


# ---------------------------------------------------------------------------
# recommended rates against independent references


def test_quadrupolar_site_recommended_rate_against_reference_sidebands():
    # Source: fit_spectra.sideband_lines (literal second-order CT frequencies, numerical phase integral,
    # |F_n|^2 per crystallite; Maricq and Waugh 1979, Levitt 1989); Gaussian broadening by a sampled Gaussian.
    # 27Al, C_Q = 8 MHz, eta = 0.2, 9.4 T, central transition: the site's own second-order sidebands
    # fall on its own centreband when spinning is too slow.
    m = ps.make_model("27Al", {"field_tesla": 9.4, "points": 512, "width_ppm": 400.0, "orientations": 24,
                               "gauss_hz": 300.0}, [{"label": "Al", "cq_mhz": 8.0, "eta_q": 0.2}])
    rates = [5000, 6000, 7000, 8000, 9000, 10000, 12000]
    p = ps.plan(m, [9.4], rates_hz=rates, precision=False)
    f = p.fields[0]
    rec, below = _recommended_and_below(f)
    nu0 = ps.get_nuclide("27Al").larmor_hz(9.4)
    bands = 24
    for rate, should_pass in ((rec, True), (below, False)):
        pos, inten = fr.sideband_lines(2.5, nu0, 8.0e6, 0.2, [0.0] * 3, rate, grid=(60, 60), phases=256,
                                       bands=bands)
        centre = fr.spectrum_from_lines(f.axis.hz, pos[:, bands], inten[:, bands], 300.0)
        others = np.arange(2 * bands + 1) != bands
        side = fr.spectrum_from_lines(f.axis.hz, pos[:, others], inten[:, others], 300.0)
        ref = _overlap(side, centre)
        assert (ref < p.threshold) == should_pass, (rate, ref)
        got = f.rate(rate).overlap[0][0]
        assert got == pytest.approx(ref, rel=0.15, abs=1e-3), (rate, got, ref)


def test_shift_anisotropy_recommended_rate_against_herzfeld_berger():
    # Source: Herzfeld and Berger 1980 (tests/reference/herzfeld_berger.py, Bessel sums, quadrature over the
    # powder) for the band intensities; spin-1/2 bands are lines at delta_iso + n * rate; analytic unit-area
    # Lorentzian of FWHM G, G / (2 pi) / (x^2 + G^2 / 4), sampled at the axis points.
    # 31P, span 200 ppm, skew 0.3, 9.4 T.
    m = ps.make_model("31P", {"field_tesla": 9.4, "points": 512, "width_ppm": 400.0, "orientations": 16,
                              "lorentz_hz": 200.0}, [{"label": "P", "span_ppm": 200.0, "skew": 0.3}])
    rates = [4000, 6000, 8000, 10000, 12000, 15000]
    p = ps.plan(m, [9.4], rates_hz=rates, precision=False)
    f = p.fields[0]
    rec, below = _recommended_and_below(f)
    nu0 = f.nu_ref_hz
    d = np.array(m.sites[0].shift.principal_iupac) * nu0 * 1e-6
    x = f.axis.hz
    g = 200.0

    def line(c):
        return (g / (2 * np.pi)) / ((x - c) ** 2 + g * g / 4)

    orders = np.arange(-12, 13)
    for rate, should_pass in ((rec, True), (below, False)):
        inten = hb.sideband_intensities(d, rate, orders, n_beta=32, n_alpha=32)
        assert inten.sum() > 0.999  # +-12 bands hold the manifold at these rates
        centre = inten[12] * line(0.0)
        side = sum(i * line(n * rate) for i, n in zip(inten, orders) if n != 0)
        ref = _overlap(side, centre)
        assert (ref < p.threshold) == should_pass, (rate, ref)
        assert f.rate(rate).overlap[0][0] == pytest.approx(ref, rel=0.05), rate


# ---------------------------------------------------------------------------
# widths and shifts against the physics


def test_second_order_width_falls_as_inverse_field_and_span_grows_with_field():
    # Source: second-order CT frequencies scale as C_Q^2 / nu0 (DEVELOPERS.md 'Level energies in high field'),
    # so the CT pattern in Hz shrinks as 1/B0 (in ppm as 1/B0^2); the first-order shift scales as nu0.
    al = ps.make_model("27Al", {"field_tesla": 9.4, "points": 2048, "width_ppm": 300.0, "orientations": 48,
                                "gauss_hz": 200.0}, [{"label": "Al", "cq_mhz": 8.0, "eta_q": 0.2}])
    p = ps.plan(al, [9.4, 18.8], rates_hz=[20000], precision=False)
    lo, hi = p.fields[0].sites[0], p.fields[1].sites[0]
    assert lo.static_width_hz / hi.static_width_hz == pytest.approx(2.0, rel=0.01)
    assert lo.mas_width_hz / hi.mas_width_hz == pytest.approx(2.0, rel=0.01)
    assert lo.static_width_ppm / hi.static_width_ppm == pytest.approx(4.0, rel=0.02)
    # Samoson 1985: delta_QIS = -(3/40) (P_Q/nu0)^2 [I(I+1) - 3/4] / [I^2 (2I-1)^2] 1e6 ppm
    for f, s in zip(p.fields, (lo, hi)):
        pq = 8.0e6 * math.sqrt(1 + 0.2 ** 2 / 3)
        qis = -(3 / 40) * (pq / f.nu_ref_hz) ** 2 * (35 / 4 - 3 / 4) / (6.25 * 16) * 1e6
        assert s.quadrupolar_induced_shift_ppm == pytest.approx(qis, rel=0.01)
    P = ps.make_model("31P", {"field_tesla": 9.4, "points": 2048, "width_ppm": 400.0, "orientations": 24,
                              "lorentz_hz": 100.0}, [{"label": "P", "span_ppm": 200.0, "skew": 0.3}])
    p = ps.plan(P, [9.4, 18.8], rates_hz=[20000], precision=False)
    lo, hi = p.fields[0].sites[0], p.fields[1].sites[0]
    assert hi.span_hz / lo.span_hz == pytest.approx(18.8 / 9.4, rel=1e-9)
    assert lo.span_hz == pytest.approx(200.0 * p.fields[0].nu_ref_hz * 1e-6, rel=1e-9)
    assert hi.static_width_hz / lo.static_width_hz == pytest.approx(2.0, rel=0.01)
    assert lo.quadrupolar_induced_shift_ppm == pytest.approx(0.0, abs=1e-9)
    # the measured static width against the central 99 % of the analytic Bloembergen-Rowland density
    w1, w2, w3 = (v * p.fields[0].nu_ref_hz * 1e-6 for v in P.sites[0].shift.principal_iupac)

    def cdf(w):
        pts = [w2] if w3 < w2 < w else None
        return integrate.quad(lambda t: float(br.density(np.array([t]), w1, w2, w3)[0]), w3, w, points=pts,
                              limit=200)[0]

    a = optimize.brentq(lambda w: cdf(w) - 0.005, w3, w1, xtol=1e-6)
    b = optimize.brentq(lambda w: cdf(w) - 0.995, w3, w1, xtol=1e-6)
    assert lo.static_width_hz == pytest.approx(b - a, rel=0.01)


def test_central_width_of_a_gaussian_and_of_a_block():
    # Source: scipy.stats.norm quantiles; a uniform block's 100 % span is its extent.
    ax = Axis(center_hz=0.0, width_hz=20000.0, points=4000, nu_ref_hz=100e6)
    sd = 700.0
    y = stats.norm.pdf(ax.hz, scale=sd)
    want = stats.norm.ppf(0.995, scale=sd) - stats.norm.ppf(0.005, scale=sd)
    assert central_width_hz(y, ax) == pytest.approx(want, rel=2e-3)
    block = ((ax.hz > -1000) & (ax.hz < 3000)).astype(float)
    assert central_width_hz(block, ax, 1.0) == pytest.approx(4000.0, abs=ax.dx_hz)
    assert math.isnan(central_width_hz(np.zeros(10), Axis(0.0, 10.0, 10, 1e8)))


def test_overlap_measure():
    # Source: the definition sum(min(S, C)) / sum(C); two equal unit-area Gaussians a distance d apart share
    # 2 Phi(-d / (2 sigma)) of their area (scipy.stats.norm.cdf).
    x = np.linspace(-5000, 5000, 20001)
    sd, d = 300.0, 500.0
    a = stats.norm.pdf(x, scale=sd)
    b = stats.norm.pdf(x, loc=d, scale=sd)
    assert overlap_fraction(a, b) == pytest.approx(2 * stats.norm.cdf(-d / (2 * sd)), rel=1e-4)
    assert overlap_fraction(a, a) == pytest.approx(1.0)
    assert overlap_fraction(10 * a, a) == pytest.approx(1.0)
    assert overlap_fraction(a, np.zeros_like(a)) == 0.0


# ---------------------------------------------------------------------------
# precision


def _scatter(model, plan_, rate, snr, names, seed):
    from powderspin.io.spectra import MeasuredSpectrum

    f = plan_.fields[0]
    m = model.with_measurement(0, spinning_hz=rate)
    # the plan's points are bin averages (its planning axis has at least four points per line width)
    spec = ps.Simulator(m, axis=f.axis, point_values=False).spectrum()
    y0 = np.asarray(spec.intensity)
    sigma = y0.max() / snr
    assert sigma == pytest.approx(f.rate(rate).noise_sigma, rel=1e-9)  # the plan's SNR: tallest point / noise
    rng = np.random.default_rng(seed)
    vals = []
    for _ in range(20):
        y = 3.0 * y0 + rng.normal(0.0, 3.0 * sigma, y0.size)  # any scale: the fit solves it
        res = ps.fit(m, [MeasuredSpectrum(spec.hz, spec.ppm, y, None, spec.nu_ref_hz, "synthetic")])
        vals.append([res.values[n] for n in names])
    return np.std(np.array(vals), axis=0, ddof=1)


def _check_errors_against_scatter(free, rate, snr, names, sd, err):
    """Each Fisher error within a factor 1.5 of the scatter, and the check is able to fail.

    The pooled geometric mean of the ratios must lie within [0.8, 1.25] (over several parameters the
    16 % uncertainty of each scatter averages down), and errors computed for a noise level three times
    too low (the SNR mistaken by 3x) must fall outside the per-parameter band.
    """
    ratios = np.array([s / err[n] for n, s in zip(names, sd)])
    print("scatter / Fisher error:", dict(zip(names, np.round(ratios, 3))))
    for n, r in zip(names, ratios):
        assert 1 / 1.5 <= r <= 1.5, (n, r)
    assert 0.8 <= float(np.exp(np.log(ratios).mean())) <= 1.25, ratios
    wrong = ps.plan(free, [free.measurement.field_tesla], rates_hz=[rate], snr=3 * snr).fields[0].rate(rate).stderr
    for n, s in zip(names, sd):
        assert not 1 / 1.5 <= s / wrong[n] <= 1.5, (n, s, wrong[n])


def test_fisher_errors_match_the_scatter_of_fits_quadrupolar():
    # Source: the scatter of 20 least-squares fits (powderspin.fitting.fitter.fit) to seeded noisy spectra; the
    # standard deviation of 20 samples is itself uncertain by about 1/sqrt(38) = 16 %, so a factor 1.5 is
    # a 2.5-sigma band.
    free = ps.make_model("27Al", {"field_tesla": 14.1, "points": 512, "width_ppm": 200.0, "orientations": 24,
                                  "gauss_hz": 300.0},
                         [{"label": "A", "shift_ppm": {"start": 40.0, "min": 20.0, "max": 60.0},
                           "cq_mhz": {"start": 5.0, "min": 3.0, "max": 7.0},
                           "eta_q": {"start": 0.4, "min": 0.0, "max": 1.0}}])
    rate, snr = 8000.0, 50.0
    p = ps.plan(free, [14.1], rates_hz=[rate], snr=snr)
    err = p.fields[0].rate(rate).stderr
    names = ["A.shift_ppm", "A.cq_mhz", "A.eta_q"]
    assert sorted(err) == sorted(names)
    sd = _scatter(free, p, rate, snr, names, seed=7)
    _check_errors_against_scatter(free, rate, snr, names, sd, err)


def test_fisher_errors_match_the_scatter_of_fits_weights_and_shifts():
    # Source: as above; two 31P sites, the weight reported as a fraction of the total (as the fit reports it).
    free = ps.make_model("31P", {"field_tesla": 9.4, "points": 512, "width_ppm": 300.0, "orientations": 16,
                                 "lorentz_hz": 250.0},
                         [{"label": "A", "shift_ppm": {"start": 10.0, "min": 0.0, "max": 20.0}, "weight": 0.6,
                           "span_ppm": {"start": 150.0, "min": 50.0, "max": 300.0}, "skew": 0.4},
                          {"label": "B", "shift_ppm": {"start": -5.0, "min": -15.0, "max": 5.0},
                           "weight": {"start": 0.4, "min": 0.05, "max": 2.0}, "span_ppm": 60.0, "skew": -0.2}])
    rate, snr = 5000.0, 40.0
    p = ps.plan(free, [9.4], rates_hz=[rate], snr=snr)
    err = p.fields[0].rate(rate).stderr
    names = ["A.shift_ppm", "A.span_ppm", "B.shift_ppm", "B.weight"]
    assert set(names) <= set(err)
    assert err["A.weight"] == pytest.approx(err["B.weight"], rel=1e-9)  # the fractions sum to 1
    sd = _scatter(free, p, rate, snr, names, seed=11)
    _check_errors_against_scatter(free, rate, snr, names, sd, err)


def test_default_parameters_ranking_and_best_pair():
    # Source: the ranking's stated rules (module notes): with no free parameters each site's shift, C_Q,
    # eta_Q and the weights of all sites but the first; errors fall as 1/SNR; a pair's summed Fisher
    # information is never worse than either experiment alone.
    m = ps.make_model("27Al", {"field_tesla": 14.1, "points": 256, "width_ppm": 250.0, "orientations": 12,
                               "gauss_hz": 400.0},
                      [{"label": "A", "shift_ppm": 60.0, "cq_mhz": 4.0, "eta_q": 0.3},
                       {"label": "B", "shift_ppm": 5.0, "cq_mhz": 6.0, "eta_q": 0.0, "weight": 0.5}])
    p = ps.plan(m, [9.4, 18.8], rates_hz=[6000, 12000, 24000], snr=100)
    names = [q.name for q in p.parameters]
    assert names == ["A.shift_ppm", "A.cq_mhz", "A.eta_q", "B.shift_ppm", "B.cq_mhz", "B.eta_q", "A.weight",
                     "B.weight"]
    assert [q.name for q in p.parameters if q.at_bound] == ["B.eta_q"]  # eta_Q = 0: left out of the ranking
    assert "no free parameters" in p.parameter_source
    r = p.field(18.8).rate(12000.0)
    assert r.worst_parameter != "B.eta_q"
    p2 = ps.plan(m, [18.8], rates_hz=[6000, 12000, 24000], snr=200)  # same rates: same planning axis
    for n, e in p2.fields[0].rate(12000.0).stderr.items():
        assert e == pytest.approx(r.stderr[n] / 2, rel=1e-6), n
    # rotor weighting: the criterion with the rotor is the criterion over the relative sample volume
    table = default_rotor_table()
    assert r.relative_signal == pytest.approx(table.find("4 mm").sample_volume_ul / table.largest_volume_ul())
    assert r.rotor_criterion == pytest.approx(r.criterion / r.relative_signal)
    crits = [t[2] for t in p.ranking]
    assert crits == sorted(crits)
    best = p.pairs[0]
    singles = {(f.field_tesla, x.rate_hz): x.rotor_criterion for f in p.fields for x in f.rates}
    pair = [(ft, rt) for ft, rt in zip(best["fields_tesla"], best["rates_hz"])]
    assert best["criterion"] <= min(singles[k] for k in pair) * (1 + 1e-9)


# ---------------------------------------------------------------------------
# rotors, rates and the recommendation


def test_rotor_table_and_rates():
    # Source: the built-in table's stated figures (typical values of the trade, from memory).
    t = default_rotor_table()
    assert [r.name for r in t.rotors] == ["7 mm", "4 mm", "3.2 mm", "2.5 mm", "1.9 mm", "1.6 mm", "1.3 mm",
                                          "0.7 mm"]
    assert "not ratings" in t.description
    assert t.find("3.2mm") is t.find(" 3.2 ") is t.find(3.2)
    assert [r.name for r in t.reaching(40000.0)] == ["1.9 mm", "1.6 mm", "1.3 mm", "0.7 mm"]
    assert t.reaching(120000.0) == ()
    with pytest.raises(PlanError, match="unknown rotor '5 mm'"):
        t.find("5 mm")
    rates = candidate_rates(111000.0, 20, 2000.0)
    assert len(rates) == 20 and rates[0] == 2000.0 and rates[-1] == 111000.0
    assert all(b / a < 1.3 for a, b in zip(rates, rates[1:]))
    lab = load_rotor_table(BAD / "rotors_slow.toml")
    assert [(r.name, r.max_rate_hz, r.sample_volume_ul) for r in lab.rotors] == [("7 mm", 7000.0, 300.0)]


def test_the_packaged_rotor_table_is_package_data():
    # Source: common practice of setuptools; the table must reach every install (pyproject package-data).
    pyproject = tomllib.loads((Path(__file__).resolve().parents[2] / "pyproject.toml").read_text())
    patterns = pyproject["tool"]["setuptools"]["package-data"]["powderspin"]
    assert "data/*.toml" in patterns


def test_no_rate_works_gives_null_with_a_reason(tmp_path):
    # Source: the stated rule (lowest candidate rate keeping every overlap below the threshold, else none).
    m = ps.make_model("27Al", {"field_tesla": 9.4, "points": 256, "width_ppm": 400.0, "orientations": 12,
                               "gauss_hz": 300.0}, [{"label": "Al", "cq_mhz": 8.0, "eta_q": 0.2}])
    p = ps.plan(m, [9.4], rates_hz=[3000, 4000], precision=False)
    f = p.fields[0]
    assert f.recommended_rate_hz is None and f.recommended_rotors == ()
    assert "no candidate rate keeps every overlap below" in f.reason
    d = json.loads(p.json_text())
    assert d["fields"][0]["recommended_rate_hz"] is None
    assert "no candidate rate" in d["fields"][0]["reason"]
    assert d["cautions"] == list(CAUTIONS)


def test_two_sites_sidebands_on_another_centreband_and_best_field():
    # Source: the definitions: sidebands of one site sit at its centreband +- n * rate (Maricq and Waugh
    # 1979), so a rate equal to the distance between two sites puts the first sideband of one on the other.
    m = ps.make_model("31P", {"field_tesla": 9.4, "points": 512, "width_ppm": 300.0, "orientations": 12,
                              "lorentz_hz": 150.0},
                      [{"label": "A", "shift_ppm": 0.0, "span_ppm": 120.0, "skew": 0.0},
                       {"label": "B", "shift_ppm": 30.0, "weight": 0.3}])
    nu = ps.get_nuclide("31P").larmor_hz(9.4)
    hit = round(30.0 * nu * 1e-6)  # the first sideband of A on B's centreband
    p = ps.plan(m, [9.4, 14.1], rates_hz=[hit, 1.37 * hit, 2 * hit], precision=False)
    r = p.field(9.4).rate(float(hit))
    assert r.overlap[0][1] > r.overlap[0][0]  # A's sidebands cover B more than they cover A
    assert r.max_overlap == r.overlap[0][1] and r.worst == (0, 1)
    assert r.overlap[1][0] == 0.0 and r.overlap[1][1] == 0.0  # B has no anisotropy: no sidebands
    assert r.sideband_fraction[1] == pytest.approx(0.0, abs=1e-9)
    # resolution: the shift difference in Hz grows with B0, so the Lorentzian tails (area beyond a distance d
    # falling as 1/d) share less at the higher field, which is then the best one
    assert p.field(14.1).max_resolution_overlap < 0.8 * p.field(9.4).max_resolution_overlap
    assert p.best_field_tesla == 14.1


# ---------------------------------------------------------------------------
# the command


def test_plan_command_writes_json_and_figure_and_prints_cautions(tmp_path, capsys):
    model = tmp_path / "good.toml"
    shutil.copy(BAD / "good.toml", model)
    out, png = tmp_path / "plan.json", tmp_path / "plan.png"
    argv = ["plan", str(model), "--fields", "9.4", "14.1", "--rates", "2000", "5000", "10000", "20000",
            "--snr", "200", "--json", str(out), "--plot", str(png), "-q"]
    assert main(argv) == 0
    text = capsys.readouterr().out
    assert "recommended: 20 kHz" in text and "CAUTION" in text
    for c in CAUTIONS:
        assert c in text
    d = json.loads(out.read_text())
    assert [f["recommended_rate_hz"] for f in d["fields"]] == [20000.0, 20000.0]
    assert d["fields"][0]["recommended_rotors"][0] == "3.2 mm"
    assert d["cautions"] == list(CAUTIONS)
    assert {"overlap", "resolution", "snr", "width", "stderr", "rotor_criterion"} <= set(d["definitions"])
    assert png.stat().st_size > 10000
    before = out.read_bytes()
    assert main(argv) == 2  # never overwritten without --force
    assert out.read_bytes() == before
    assert main(argv + ["--force", "--no-precision"]) == 0
    assert json.loads(out.read_text())["precision_ranking"] == []


def _snapshot(folder: Path) -> dict:
    return {p.name: p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


CASES = tomllib.loads((BAD / "cases.toml").read_text())["case"]


def test_there_are_enough_bad_input_cases():
    assert len(CASES) >= 25


@pytest.mark.parametrize("case", CASES, ids=[c["name"] for c in CASES])
def test_bad_input_through_the_command_line(case, tmp_path, monkeypatch, capsys):
    for p in BAD.iterdir():
        if p.is_file():
            shutil.copy(p, tmp_path / p.name)
    existing = tmp_path / "existing.json"
    existing.write_text("precious")
    monkeypatch.chdir(tmp_path)
    before = _snapshot(tmp_path)
    args = [a.replace("{existing}", str(existing)) for a in case["args"]]
    status = main(["plan", *args, "-q"])
    err = capsys.readouterr().err
    assert status == 2, err
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert lines[0].startswith("error: ") and "Traceback" not in err
    for word in case["expect"]:
        assert word in lines[0], f"{word!r} not in {lines[0]!r}"
    assert _snapshot(tmp_path) == before  # nothing written, nothing changed


SLOW_PLAN = """nucleus = "27Al"
[measurement]
field_tesla = 14.1
points = 4096
orientations = 96
lorentz_hz = 100.0
[[site]]
label = "A"
shift_ppm = 60.0
cq_mhz = 5.0
eta_q = 0.4
[[site]]
label = "B"
shift_ppm = 10.0
cq_mhz = 9.0
eta_q = 0.6
"""


@pytest.mark.slow
def test_ctrl_c_stops_a_plan_at_once_with_130_and_no_output(tmp_path):
    model = tmp_path / "slow.toml"
    model.write_text(SLOW_PLAN)
    out = tmp_path / "plan.json"
    code, stderr, stdout, stopped_after = interrupt_when_busy(
        ["plan", model, "--fields", "9.4", "14.1", "18.8", "23.5", "--rate-count", "60", "--json", out],
        "experiments")
    assert code == 130, stderr
    lines = [line for line in stderr.splitlines() if line.strip() and not line.startswith("note:")
             and "experiments" not in line]
    assert len(lines) == 1 and "interrupted" in lines[0], stderr
    assert "Traceback" not in stderr
    assert stdout == ""  # no table either
    assert sorted(p.name for p in tmp_path.iterdir()) == ["slow.toml"]
    # a candidate takes a fraction of a second on an idle machine; allow for a loaded one
    assert stopped_after < 30.0, f"took {stopped_after:.1f} s to stop"


def test_readme_rotor_table_example_is_a_valid_table(tmp_path):
    # Source: the README's own example of a laboratory's rotor table must read as it says.
    import re

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text()
    blocks = [b for b in re.findall(r"```toml\n(.*?)```", readme, flags=re.S) if "[[rotor]]" in b]
    assert len(blocks) == 1
    p = tmp_path / "lab.toml"
    p.write_text(blocks[0])
    t = load_rotor_table(p)
    assert [(r.name, r.max_rate_hz, r.sample_volume_ul) for r in t.rotors] == [("4 mm", 14000.0, 50.0)]


# ----------------------------------------------------------------------------- the redesign's promises


def _numbers_agree(a, b, path=""):
    """Every number of two plan JSONs agrees to 1e-9; Fisher matrices relative to sqrt(F_ii F_jj)."""
    if isinstance(a, dict):
        assert set(a) == set(b), path
        for k in a:
            if k not in ("timings_s", "powderspin_version"):
                _numbers_agree(a[k], b[k], f"{path}/{k}")
    elif isinstance(a, list):
        assert len(a) == len(b), path
        if path.endswith("/fisher") and a:
            fa, fb = np.array(a, float), np.array(b, float)
            d = np.sqrt(np.outer(np.diag(fa), np.diag(fa)))
            assert np.max(np.abs(fa - fb) / d) < 1e-9, path
            return
        for k, (x, y) in enumerate(zip(a, b)):
            _numbers_agree(x, y, f"{path}[{k}]")
    elif isinstance(a, float) and isinstance(b, float):
        assert abs(a - b) <= 1e-9 * max(abs(a), abs(b)), (path, a, b)
    elif isinstance(a, (int, float)) and not isinstance(a, bool):
        assert a == b, path


def test_the_plan_example_is_what_it_was_before_the_simulator():
    # Source: the JSON of `powderspin plan examples/plan_alpo.toml` made by the planner before it ran through
    # the Simulator (its own copy of the pipeline; tests/planning/plan_alpo_before_redesign.json).  Every
    # number must agree to 1e-9 (Fisher elements relative to their diagonal scale).
    ROOT = Path(__file__).resolve().parents[2]
    before = json.loads((Path(__file__).parent / "plan_alpo_before_redesign.json").read_text())
    now = ps.plan(ps.load_model(ROOT / "examples" / "plan_alpo.toml")).to_dict()
    _numbers_agree(before, now)


@pytest.mark.slow
def test_the_planner_calls_no_pipeline_stage_itself(monkeypatch):
    # Every spectrum of a plan goes through the Simulator: the stage functions are called from
    # powderspin.simulator (or deeper in the engine), never from powderspin.planning.
    import inspect

    import powderspin.engine.site_lines as stage
    import powderspin.simulator as simulator_module

    callers = []
    for module in (stage, simulator_module):
        for name in ("site_job", "compute_lines", "render_lines", "choose_method", "choose_orientations"):
            original = getattr(module, name)

            def spy(*a, _f=original, **k):
                callers.append(inspect.stack()[1].frame.f_globals.get("__name__", ""))
                return _f(*a, **k)

            monkeypatch.setattr(module, name, spy)
    m = ps.make_model("27Al", {"field_tesla": 14.1, "orientations": 10, "lorentz_hz": 200.0},
                      [{"label": "A", "shift_ppm": 60.0, "cq_mhz": 4.0, "eta_q": 0.3},
                       {"label": "B", "shift_ppm": 10.0, "cq_mhz": 6.0, "eta_q": 0.5}])
    ps.plan(m, [9.4, 14.1], rates_hz=[8000, 16000])
    assert callers, "the spies saw nothing"
    assert not [c for c in callers if c.startswith("powderspin.planning")], sorted(set(callers))
