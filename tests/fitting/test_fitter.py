"""Fitting: parameter recovery with honest errors, global search, global (two-field) fits, posterior, result files.

Synthetic data come from the slow, independent references in
``tests/reference/fit_spectra.py`` (dense Gauss-Legendre powder grids, the
high-field formulas written out with explicit rotations, sidebands from the
phase integral, and Herzfeld-Berger Bessel sums for shift-anisotropy
sidebands), never from the fast engine being fitted.  Noise is Gaussian with
a fixed seed per trial.

Sizes, and why they suffice: 128-512 points and the "medium" orientation set
(99 subdivisions per octant edge) for the quadrupolar patterns, "coarse" (54)
for the shift-anisotropy sidebands.  Each case first checks that the engine
at the true values differs from the reference by less than a fifth of the
noise at SNR 200 at every point, so that the fits measure the statistics of
the method rather than the engine's powder error; trials start at the truth
(the global-search test covers poor starts).
"""

from __future__ import annotations

import ast
import functools

import numpy as np
import pytest

import powderspin as ps
from powderspin.engine.lineshape import make_axis
from powderspin.fitting.fitter import FitError, fit
from powderspin.io.results import result_to_toml, write_result
from powderspin.io.spectra import MeasuredSpectrum as _Spectrum
from tests.reference import fit_spectra as fr
from tests.reference import herzfeld_berger as hb

TRIALS = 20


def _data(axis, y, source="synthetic"):
    return _Spectrum(hz=axis.hz, ppm=axis.ppm, intensity=y, imag=None, nu_ref_hz=axis.nu_ref_hz, source=source)


def _axis(nucleus, field, center_hz, width_hz, points):
    nu = ps.get_nuclide(nucleus).larmor_hz(field)
    return make_axis(points, nu, center_hz / nu * 1e6, width_hz / nu * 1e6)


# ---------------------------------------------------------------------------
# the cases: truth, the reference spectrum and the model to fit

# Each case: nucleus, measurement keys, site list with free parameters given as
# (truth, min, max), the axis (center Hz offset, width Hz, points) and a function
# giving the reference spectrum on that axis.

def _quad_ref(mode, cq, eta, iso, gauss, axis, nu0):
    f, w = fr.crystallite_lines(2.5, nu0, cq * 1e6, eta, [iso] * 3, mode=mode, grid=(300, 300))
    return fr.spectrum_from_lines(axis.hz, f, w, gauss)


CASES = {
    # static 27Al central transition at 9.4 T (second-order powder pattern)
    "static-ct": dict(
        nucleus="27Al", field=9.4, meas={"orientations": "medium", "method": "perturbation"},
        sites=[{"label": "A", "shift_ppm": (40.0, 20.0, 60.0), "cq_mhz": (4.0, 2.0, 6.0), "eta_q": (0.3, 0.0, 1.0)}],
        meas_free={"gauss_hz": (1000.0, 300.0, 3000.0)}, axis=(40.0, -2000.0, 30000.0, 128)),
    # 27Al CT at infinitely fast MAS
    "mas-inf-ct": dict(
        nucleus="27Al", field=9.4, meas={"spinning_hz": "inf", "orientations": "medium", "method": "perturbation"},
        sites=[{"label": "A", "shift_ppm": (40.0, 20.0, 60.0), "cq_mhz": (5.0, 3.0, 7.0), "eta_q": (0.6, 0.0, 1.0)}],
        meas_free={"gauss_hz": (500.0, 100.0, 1500.0)}, axis=(30.0, 0.0, 16000.0, 256)),
    # 27Al CT at 5 kHz MAS with its sidebands
    "mas-finite-ct": dict(
        nucleus="27Al", field=9.4, meas={"spinning_hz": 5000.0, "orientations": "medium", "method": "perturbation"},
        sites=[{"label": "A", "shift_ppm": (40.0, 20.0, 60.0), "cq_mhz": (5.0, 3.0, 7.0), "eta_q": (0.4, 0.0, 1.0)}],
        meas_free={"gauss_hz": (600.0, 200.0, 2000.0)}, axis=(30.0, 0.0, 40000.0, 256)),
    # two 27Al sites at infinitely fast MAS, one weight free
    "mas-two-site": dict(
        nucleus="27Al", field=9.4, meas={"spinning_hz": "inf", "orientations": "medium", "method": "perturbation"},
        sites=[{"label": "A", "weight": 0.6, "shift_ppm": (60.0, 45.0, 75.0), "cq_mhz": (3.5, 2.0, 5.0),
                "eta_q": (0.5, 0.0, 1.0)},
               {"label": "B", "weight": (0.4, 0.05, 2.0), "shift_ppm": (10.0, -5.0, 25.0), "cq_mhz": (5.0, 3.0, 7.0),
                "eta_q": (0.7, 0.0, 1.0)}],
        meas_free={"gauss_hz": (300.0, 100.0, 1000.0)}, axis=(20.0, 0.0, 16000.0, 256)),
    # 31P shift anisotropy under 4 kHz MAS: the sideband manifold (Herzfeld and Berger)
    "csa-sidebands": dict(
        nucleus="31P", field=9.4, meas={"spinning_hz": 4000.0, "orientations": "coarse"},
        sites=[{"label": "P", "shift_ppm": (5.0, -10.0, 20.0), "span_ppm": (150.0, 80.0, 250.0),
                "skew": (0.3, -1.0, 1.0)}],
        meas_free={"gauss_hz": (700.0, 200.0, 2000.0)}, axis=(5.0, 0.0, 64000.0, 512)),
}


def _truth(case) -> dict:
    out = {}
    for s in case["sites"]:
        for k, v in s.items():
            if isinstance(v, tuple):
                out[f"{s['label']}.{k}"] = v[0]
    for k, v in case["meas_free"].items():
        out[f"measurement 1.{k}"] = v[0]
    return out


def _start_model(case, start=None):
    start = start or {}

    def val(name, v):
        if not isinstance(v, tuple):
            return v
        return {"start": start.get(name, v[0]), "min": v[1], "max": v[2]}

    sites = [{k: val(f"{s['label']}.{k}", v) for k, v in s.items()} for s in case["sites"]]
    meas = dict(case["meas"], field_tesla=case["field"])
    meas.update({k: val(f"measurement 1.{k}", v) for k, v in case["meas_free"].items()})
    return ps.make_model(case["nucleus"], meas, sites)


@functools.lru_cache(maxsize=None)
def _reference(name):
    """Noise-free reference spectrum of a case on its axis (slow, independent route)."""
    case = CASES[name]
    t = _truth(case)
    ppm_c, off, width, points = case["axis"]
    nu0 = ps.get_nuclide(case["nucleus"]).larmor_hz(case["field"])
    axis = _axis(case["nucleus"], case["field"], ppm_c * nu0 * 1e-6 + off, width, points)
    g = t["measurement 1.gauss_hz"]
    if name in ("static-ct", "mas-inf-ct"):
        mode = "static" if name == "static-ct" else "infinite"
        y = _quad_ref(mode, t["A.cq_mhz"], t["A.eta_q"], t["A.shift_ppm"], g, axis, nu0)
    elif name == "mas-finite-ct":
        pos, inten = fr.sideband_lines(2.5, nu0, t["A.cq_mhz"] * 1e6, t["A.eta_q"], [t["A.shift_ppm"]] * 3, 5000.0,
                                       grid=(100, 100), phases=256, bands=12)
        y = fr.spectrum_from_lines(axis.hz, pos, inten, g)
    elif name == "mas-two-site":
        ya = _quad_ref("infinite", t["A.cq_mhz"], t["A.eta_q"], t["A.shift_ppm"], g, axis, nu0)
        yb = _quad_ref("infinite", t["B.cq_mhz"], t["B.eta_q"], t["B.shift_ppm"], g, axis, nu0)
        wa = case["sites"][0]["weight"]
        y = wa * ya / ya.sum() + t["B.weight"] * yb / yb.sum()
    else:  # csa-sidebands: Herzfeld-Berger band intensities at iso + n nu_r
        iso, span, skew = t["P.shift_ppm"], t["P.span_ppm"], t["P.skew"]
        d22 = iso + skew * span / 3  # skew = 3 (d22 - iso) / span (design.md section 2)
        d11, d33 = iso - skew * span / 6 + span / 2, iso - skew * span / 6 - span / 2
        orders = np.arange(-20, 21)
        inten = hb.sideband_intensities(np.array([d11, d22, d33]) * nu0 * 1e-6, 4000.0, orders, n_beta=64,
                                        n_alpha=64)
        y = fr.spectrum_from_lines(axis.hz, iso * nu0 * 1e-6 + orders * 4000.0, inten, g)
    return axis, y / y.max()


def _engine_at_truth(name, axis):
    case = CASES[name]
    m = _start_model(case)
    m = m.with_measurement(0, points=axis.points, center_ppm=axis.center_hz / axis.nu_ref_hz * 1e6,
                           width_ppm=axis.width_hz / axis.nu_ref_hz * 1e6)
    return ps.simulate(m).intensity


def _trials(name, snr):
    case = CASES[name]
    axis, y0 = _reference(name)
    model = _start_model(case)
    fits = []
    for seed in range(TRIALS):
        rng = np.random.default_rng(1000 * seed + snr)
        y = y0 + rng.normal(0.0, 1.0 / snr, y0.size)
        fits.append(fit(model, [_data(axis, y)]))
    return fits


@pytest.mark.parametrize("name", sorted(CASES))
def test_engine_matches_reference_at_truth(name):
    """The engine at the true values reproduces the independent reference to a fifth of the SNR-200 noise."""
    axis, y0 = _reference(name)
    e = _engine_at_truth(name, axis)
    c = (y0 @ e) / (e @ e)  # the scale is solved by the fit; compare shapes
    assert np.max(np.abs(y0 - c * e)) < 0.2 / 200


@pytest.mark.parametrize("snr", [50, 200])
@pytest.mark.parametrize("name", sorted(CASES))
def test_parameter_recovery(name, snr):
    """Fitted values within 2 standard errors of the truth in >= 90 % of 20 trials; errors match the scatter.

    Standard errors come from the Jacobian scaled by the residual variance (no
    noise region).  Coverage: at least 90 % of all fitted values of the case
    (every parameter, 20 trials) lie within 2 standard errors of the truth,
    and at least 75 % for each parameter alone.  Why pooled: an exact 2-sigma
    interval covers 95.4 % (normal distribution, common practice), so one
    parameter over 20 trials falls to 17 or fewer hits with probability
    6.5 % (binomial), and among the ~45 parameter checks here a few would fail
    by chance for a perfect method; pooled over 80-160 values the chance of
    falling below 90 % is negligible, while a bias or a wrong error of any one
    parameter still shows.  The mean standard error of every parameter must
    lie within a factor 1.5 of the standard deviation of its fitted values
    over the trials (with 20 trials that standard deviation itself scatters
    by about 1/sqrt(2 x 19) = 16 %, common practice for normal samples).
    Pooled over the parameters, the geometric mean of those ratios must lie
    within [0.8, 1.25].
    """
    truth = _truth(CASES[name])
    fits = _trials(name, snr)
    hits = 0
    ratios = []
    for p, t in truth.items():
        vals = np.array([f.values[p] for f in fits])
        errs = np.array([f.stderr[p] for f in fits])
        if p.endswith(".weight"):  # reported normalised to sum 1
            total = CASES[name]["sites"][0]["weight"] + t
            t = t / total
        inside = np.abs(vals - t) <= 2 * errs
        hits += int(inside.sum())
        assert inside.sum() >= 0.75 * TRIALS, (p, vals, errs)
        ratio = errs.mean() / vals.std(ddof=1)
        assert 1 / 1.5 <= ratio <= 1.5, (p, ratio)
        ratios.append(ratio)
    assert hits >= 0.9 * TRIALS * len(truth)
    # pooled over the case's parameters the scatter's own uncertainty averages down, so errors that are
    # systematically mis-scaled (a wrong noise level, a missing degrees-of-freedom factor) fail a tighter
    # band: the geometric mean of the ratios must lie within [0.8, 1.25] (measured: 0.91 to 1.14)
    pooled = float(np.exp(np.mean(np.log(ratios))))
    assert 0.8 <= pooled <= 1.25, (pooled, ratios)


# ---------------------------------------------------------------------------
# global search, global (two-field) fits, posterior


def test_global_search_from_a_poor_start():
    """C_Q 50 % too high and eta_Q at the wrong end of its range: the multi-start search still finds the truth."""
    case = CASES["static-ct"]
    axis, y0 = _reference("static-ct")
    y = y0 + np.random.default_rng(5).normal(0.0, 1.0 / 200, y0.size)
    model = _start_model(case, start={"A.cq_mhz": 6.0, "A.eta_q": 1.0})  # truth 4.0 and 0.3
    r = fit(model, [_data(axis, y)], global_search=True, starts=8, seed=3)
    truth = _truth(case)
    for p, t in truth.items():
        assert abs(r.values[p] - t) <= 3 * r.stderr[p], (p, r.values[p], r.stderr[p])
    assert r.starts == 8 and 1 <= r.starts_at_best <= 8
    local = fit(model, [_data(axis, y)])
    assert r.chi_square <= local.chi_square + 1e-6 * local.chi_square


def _two_field_reference(field, axis_center_ppm, width_hz, points):
    """27Al CT at infinitely fast MAS with a large Gaussian broadening (1.5 kHz): a featureless line."""
    nu0 = ps.get_nuclide("27Al").larmor_hz(field)
    axis = _axis("27Al", field, axis_center_ppm * nu0 * 1e-6, width_hz, points)
    f, w = fr.crystallite_lines(2.5, nu0, 3.0e6, 0.5, [30.0] * 3, mode="infinite", grid=(150, 150))
    y = fr.spectrum_from_lines(axis.hz, f, w, 1500.0)
    return axis, y / y.max()


def test_two_field_fit_separates_cq_from_shift():
    """One broad featureless line per field fixes only its centre of gravity, delta_iso + delta_QIS(C_Q).

    The quadrupolar-induced shift scales as 1/B0^2 (A. Samoson, Chem. Phys.
    Lett. 119 (1985) 29), so at one field C_Q and delta_iso trade off along
    that line; two fields give two centres with different QIS and fix both.
    The global fit must give smaller standard errors for both than either
    field alone.
    """
    ref = {9.4: _two_field_reference(9.4, 20.0, 24000.0, 128), 14.1: _two_field_reference(14.1, 25.0, 24000.0, 128)}
    rng = np.random.default_rng(11)
    data = {b: _data(ax, y + rng.normal(0.0, 0.01, y.size)) for b, (ax, y) in ref.items()}
    site = {"label": "A", "shift_ppm": {"start": 28.0, "min": 0.0, "max": 60.0},
            "cq_mhz": {"start": 3.5, "min": 0.5, "max": 8.0}, "eta_q": 0.5}

    def meas(b):
        return {"field_tesla": b, "spinning_hz": "inf", "orientations": "coarse", "method": "perturbation",
                "gauss_hz": {"start": 1200.0, "min": 100.0, "max": 4000.0}}

    single = {b: fit(ps.make_model("27Al", meas(b), [site]), [data[b]]) for b in ref}
    both = fit(ps.make_model("27Al", [meas(9.4), meas(14.1)], [site]), [data[9.4], data[14.1]])
    for p in ("A.cq_mhz", "A.shift_ppm"):
        assert both.stderr[p] < min(single[9.4].stderr[p], single[14.1].stderr[p]), p
    # at one field the two trade off strongly (and the fit says so); together they are far less correlated
    k = list(single[9.4].names)
    c1 = single[9.4].correlation[k.index("A.cq_mhz"), k.index("A.shift_ppm")]
    kb = list(both.names)
    c2 = both.correlation[kb.index("A.cq_mhz"), kb.index("A.shift_ppm")]
    assert abs(c1) > 0.95 and abs(c2) < abs(c1)
    assert any("trade off" in w for w in single[9.4].warnings)
    assert abs(both.values["A.cq_mhz"] - 3.0) <= 3 * both.stderr["A.cq_mhz"]
    assert abs(both.values["A.shift_ppm"] - 30.0) <= 3 * both.stderr["A.shift_ppm"]


@pytest.mark.slow
def test_posterior_intervals_agree_with_jacobian_errors():
    """emcee 16/84 % half-widths within 30 % of the Jacobian standard errors for a well-determined case.

    Shift and Gaussian width of a static 27Al CT at SNR 100: nearly linear
    in the parameters, so the posterior is close to Gaussian and its 16-84 %
    half-width equals the standard error (common practice).  The sampling
    error of that half-width with ~300 independent samples is a few percent.
    """
    axis, y0 = _reference("static-ct")
    y = y0 + np.random.default_rng(21).normal(0.0, 0.01, y0.size)
    m = ps.make_model("27Al", {"field_tesla": 9.4, "orientations": "coarse", "method": "perturbation",
                               "gauss_hz": {"start": 1000.0, "min": 300.0, "max": 3000.0}},
                      [{"label": "A", "shift_ppm": {"start": 40.0, "min": 20.0, "max": 60.0}, "cq_mhz": 4.0,
                        "eta_q": 0.3}])
    r = fit(m, [_data(axis, y)], posterior=True, walkers=12, steps=1000, burn=200, seed=4)
    post = r.posterior
    # the chain is extended beyond 1000 steps until it spans 50 autocorrelation times
    assert post.steps >= 1000 and post.samples.shape == (12 * (post.steps - 200), 2)
    for p in r.names:
        lo, hi = post.interval(p)
        half = 0.5 * (hi - lo)
        assert abs(half / r.stderr[p] - 1.0) < 0.3, (p, half, r.stderr[p])
        assert abs(post.median[post.names.index(p)] - r.values[p]) < 0.5 * r.stderr[p]
    assert 0.1 < post.acceptance < 0.9
    assert "interval" in result_to_toml(r)


# ---------------------------------------------------------------------------
# the result model reproduces the fit


def test_result_file_reproduces_the_fit(tmp_path):
    """write_result -> load_model -> simulate gives the fitted curves to 1e-10 (ties, weights, baseline, 2 fields)."""
    nu = {b: ps.get_nuclide("27Al").larmor_hz(b) for b in (9.4, 14.1)}
    data = []
    rng = np.random.default_rng(8)
    for b in (9.4, 14.1):
        axis = _axis("27Al", b, 30.0 * nu[b] * 1e-6, 20000.0, 128)
        fa, wa = fr.crystallite_lines(2.5, nu[b], 3.5e6, 0.4, [60.0] * 3, mode="infinite", grid=(80, 80))
        fb, wb = fr.crystallite_lines(2.5, nu[b], 5.0e6, 0.7, [10.0] * 3, mode="infinite", grid=(80, 80))
        y = 0.6 * fr.spectrum_from_lines(axis.hz, fa, wa, 400.0) + 0.4 * fr.spectrum_from_lines(axis.hz, fb, wb, 400.0)
        y = y / y.max() + 0.02 + 0.01 * (axis.ppm / 100.0) + rng.normal(0.0, 0.005, y.size)
        data.append(_data(axis, y))
    meas = [{"field_tesla": b, "spinning_hz": "inf", "orientations": "coarse",
             "shift_offset_ppm": {"start": 0.0, "min": -2.0, "max": 2.0} if b == 14.1 else 0.0} for b in (9.4, 14.1)]
    sites = [{"label": "A", "weight": 0.5, "shift_ppm": {"start": 58.0, "min": 40.0, "max": 80.0},
              "cq_mhz": {"start": 3.0, "min": 1.0, "max": 6.0}, "eta_q": 0.4,
              "gauss_hz": {"start": 300.0, "min": 50.0, "max": 2000.0}},
             {"label": "B", "weight": {"start": 0.5, "min": 0.0, "max": 3.0},
              "shift_ppm": {"start": 12.0, "min": -10.0, "max": 30.0}, "cq_mhz": 5.0, "eta_q": 0.7,
              "gauss_hz": {"same_as": "A.gauss_hz"}}]
    model = ps.make_model("27Al", meas, sites, {"baseline_order": 1})
    r = fit(model, data)
    assert abs(sum(s.weight for s in r.model.sites) - 1.0) < 1e-12
    assert r.model.sites[1].gauss_hz == r.model.sites[0].gauss_hz
    files = write_result(r, tmp_path / "res.toml")
    assert [f.name for f in files] == ["res.toml", "res-m1.csv", "res-m2.csv"]
    again = ps.load_model(files[0])
    assert not again.free and len(again.tied) == 1
    # the result file shows each value to the digits its standard error supports and keeps the full values in
    # [fit.result] exact_values, which the reader puts back: simulating the file gives the fitted curve exactly
    for j in range(2):
        y = ps.simulate(again, measurement=j).intensity
        ref = r.spectra[j].intensity
        assert np.max(np.abs(y - ref)) <= 1e-10 * np.max(np.abs(ref))
        assert len(again.measurements[j].baseline) == 2
    # a value the user edits after the fit is taken as edited, not replaced by the stored full value
    text = files[0].read_text()
    shown = next(line for line in text.splitlines() if line.startswith("cq_mhz = "))
    edited = tmp_path / "edited.toml"
    edited.write_text(text.replace(shown, "cq_mhz = 3.3", 1))
    assert ps.load_model(edited).sites[0].cq_mhz == 3.3
    # the fit CSV also carries the full values; with them the curve is the fitted one to 1e-10
    full, linear = {}, {}
    for j, csv_file in enumerate(files[1:]):
        for line in csv_file.read_text().splitlines():
            if line.startswith("# fitted "):
                name, _, rest = line[len("# fitted "):].partition(": ")
                full[name] = float(rest.split(" +- ")[0])
            elif line.startswith(("# scale: ", "# baseline: ")):
                key, _, rest = line[2:].partition(": ")
                linear.setdefault(j, {})[key] = ast.literal_eval(rest)  # a float, a list of floats
    assert set(full) == set(r.names) and all(full[n] == r.values[n] for n in r.names)
    exact = again.with_parameters({again.address_of(n): v for n, v in full.items()})
    for j in range(2):
        exact = exact.with_measurement(j, scale=linear[j]["scale"], baseline=tuple(linear[j]["baseline"]))
    for j in range(2):
        y = ps.simulate(exact, measurement=j).intensity
        ref = r.spectra[j].intensity
        assert np.max(np.abs(y - ref)) <= 1e-10 * np.max(np.abs(ref))
    # the fitted curve is the least-squares one: residual orthogonal to the scale and baseline columns
    for j in range(2):
        res = r.residual(j)
        assert abs(res @ np.ones_like(res)) < 1e-6 * np.abs(res).sum() * res.size ** 0.5
    with pytest.raises(Exception):
        write_result(r, tmp_path / "res.toml")  # exists


def test_fit_errors_are_one_line_value_errors():
    m = ps.make_model("31P", {"field_tesla": 9.4}, [{"shift_ppm": 1.0}])
    with pytest.raises(FitError, match="no free parameters"):
        fit(m, [])
    m2 = ps.make_model("31P", {"field_tesla": 9.4}, [{"shift_ppm": {"start": 0.0, "min": -5.0, "max": 5.0}}])
    with pytest.raises(FitError, match="has no data"):
        fit(m2)
    axis = _axis("31P", 9.4, 0.0, 5000.0, 64)
    with pytest.raises(FitError, match="outside the data"):
        fit(m2, [_data(axis, np.ones(64))], regions=[(500.0, 400.0)])
    assert issubclass(FitError, ValueError)


def test_a_fit_says_when_the_optimiser_stopped_early(tmp_path):
    # The optimiser's verdict is part of the result: max_evaluations = 3 cannot converge, and the result
    # object, its summary and the result file all say so.
    truth = ps.make_model("31P", {"field_tesla": 9.4, "points": 256, "center_ppm": 0.0, "width_ppm": 40.0},
                          [{"label": "P", "shift_ppm": 3.0, "lorentz_hz": 300.0}])
    s = ps.simulate(truth)
    y = 5.0 * s.intensity + np.random.default_rng(1).normal(0.0, 0.01, s.hz.size)
    data = ps.MeasuredSpectrum(s.hz, s.ppm, y, None, s.nu_ref_hz, "synthetic")
    start = ps.make_model("31P", {"field_tesla": 9.4},
                          [{"label": "P", "shift_ppm": {"start": 0.0, "min": -10.0, "max": 10.0},
                            "lorentz_hz": {"start": 200.0, "min": 10.0, "max": 2000.0}}])
    r = ps.fit(start, [data], max_evaluations=3)
    assert r.success is False and "stopped" in r.message
    assert r.warnings[0] == r.message and "warning: the optimiser stopped" in r.summary()
    write_result(r, tmp_path / "r.toml")
    res = ps.load_model(tmp_path / "r.toml")  # still a valid model file
    import tomllib

    table = tomllib.loads((tmp_path / "r.toml").read_text())["fit"]["result"]
    assert table["success"] is False and "stopped" in table["message"] and res.sites[0].label == "P"
    good = ps.fit(start, [data])
    assert good.success and good.message.startswith("converged")
    assert good.covariance.shape == (2, 2) and good.n_evaluations == good.evaluations > 3
    np.testing.assert_allclose(np.sqrt(np.diag(good.covariance)), [good.stderr[n] for n in good.names])
