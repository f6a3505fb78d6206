"""Fitting sites with distributions: recovery from slow-route synthetic data, kernel reuse, derived means.

Sources named beside each check:
- Synthetic data from the slow route (tests/reference/distribution_numpy.py): Czjzek tensors sampled
  with powderspin.physics.distributions.sample_czjzek (G. Czjzek et al., Phys. Rev. B 23 (1981) 2513), each
  seen by random rotor axes, CT offsets from the literal level energies (design notes section 2),
  a histogram, and the shift distribution as an explicit Gaussian matrix (a Gaussian distribution
  of a translation is a Gaussian convolution: probability theory).  No kernel grid is involved.
- Standard errors cover the truth within 2 se in about 95 % of repeated experiments (least-squares
  asymptotics for Gaussian noise: common practice); the test asks for 90 % of 20 seeded trials.
- <P_Q> = sigma 8 sqrt(2)/(3 sqrt(pi)) for the Czjzek model (chi distribution with 5 degrees of
  freedom; scipy.stats.chi is the outside reference) and <C_Q> = (15/16) <P_Q> (derived in
  powderspin.disorder.summary.distribution_means; checked here against sampled tensors).

Size: 3e6 reference crystallites (their histogram noise after the shift Gaussian is 4e-4 of the
maximum, far below the 2 % noise added) and 512-point spectra keep the file to about 20 s.
"""

from __future__ import annotations

import math
import time

import numpy as np
import pytest
from scipy import stats

import powderspin as ps
from powderspin.disorder.library import LineshapeLibrary
from powderspin.disorder.store import KernelStore
from powderspin.disorder.summary import distribution_means
from powderspin.engine.lineshape import make_axis
from powderspin.io.spectra import MeasuredSpectrum
from powderspin.physics.distributions import (
    efg_from_components,
    principal_cq_eta,
    sample_czjzek,
    sample_extended_czjzek,
)
from tests.reference import distribution_numpy as ref

FIELD = 14.1
SIGMA, SHIFT, FWHM = 2.0, 60.0, 6.0


@pytest.fixture(scope="module")
def reference():
    nu0 = ps.get_nuclide("27Al").larmor_hz(FIELD)
    ax = make_axis(512, nu0, center_ppm=30.0, width_ppm=160.0)
    rng = np.random.default_rng(7)
    cq, eta = sample_czjzek(60_000, SIGMA, rng)
    lines = np.concatenate([ref.site_lines(2.5, nu0, cq[i:i + 2000] * 1e6, eta[i:i + 2000], 50, rng,
                                           math.acos(1 / math.sqrt(3))) for i in range(0, cq.size, 2000)])
    edges = np.concatenate([ax.hz - ax.dx_hz / 2, [ax.hz[-1] + ax.dx_hz / 2]])
    h = ref.histogram_spectrum(lines + SHIFT * nu0 * 1e-6, edges)
    y0 = ref.gaussian_convolution(h, ax.dx_hz, FWHM * nu0 * 1e-6) / ax.dx_ppm
    return ax, y0


def _start_model():
    return ps.make_model("27Al", {"field_tesla": FIELD, "spinning_hz": "inf"}, [
        {"label": "Al4", "shift_ppm": {"start": 58.0, "min": 50.0, "max": 70.0},
         "czjzek_sigma_mhz": {"start": 1.6, "min": 1.2, "max": 3.0},
         "shift_fwhm_ppm": {"start": 4.0, "min": 3.0, "max": 15.0}}])


@pytest.mark.slow
def test_sigma_and_shift_width_are_recovered_within_two_standard_errors(reference):
    ax, y0 = reference
    store = KernelStore(None)
    z = []
    t0 = time.perf_counter()
    for k in range(20):
        noise = np.random.default_rng(1000 + k).normal(0.0, 50 * y0.max() * 0.02, y0.size)
        data = MeasuredSpectrum(ax.hz, ax.ppm, 50 * y0 + noise, None, ax.nu_ref_hz, "synthetic")
        r = ps.fit(_start_model(), [data], kernel_store=store)
        z.append([(r.values[n] - t) / r.stderr[n] for n, t in
                  (("Al4.czjzek_sigma_mhz", SIGMA), ("Al4.shift_fwhm_ppm", FWHM), ("Al4.shift_ppm", SHIFT))])
    z = np.array(z)
    inside = (np.abs(z) < 2).mean(axis=0)
    print(f"20 fits in {time.perf_counter() - t0:.2f} s; within 2 se: sigma {inside[0]:.0%}, shift_fwhm "
          f"{inside[1]:.0%}, shift {inside[2]:.0%}; mean z {np.round(z.mean(axis=0), 2)}; "
          f"kernel rows built {store.stats.rows_built}")
    assert inside[0] >= 0.9 and inside[1] >= 0.9
    assert abs(z[:, 0].mean()) < 1.0 and abs(z[:, 1].mean()) < 1.0  # no gross bias


def test_a_second_identical_fit_builds_no_kernels(reference, tmp_path):
    ax, y0 = reference
    data = MeasuredSpectrum(ax.hz, ax.ppm, 50 * y0 + np.random.default_rng(5).normal(0, 1.0, y0.size), None,
                            ax.nu_ref_hz, "synthetic")
    lib = tmp_path / "lib"
    first_store = KernelStore(LineshapeLibrary(lib))
    t0 = time.perf_counter()
    r1 = ps.fit(_start_model(), [data], kernel_store=first_store)
    t1 = time.perf_counter()
    again_store = KernelStore(LineshapeLibrary(lib))  # a new process: memory empty, library full
    r2 = ps.fit(_start_model(), [data], kernel_store=again_store)
    t2 = time.perf_counter()
    r3 = ps.fit(_start_model(), [data], kernel_store=again_store)  # same process: memory
    t3 = time.perf_counter()
    print(f"first fit {t1 - t0:.2f} s ({first_store.stats.line_shapes} line shapes computed), second {t2 - t1:.2f} s "
          f"({again_store.stats.rows_from_library} kernel entries from the library), third {t3 - t2:.3f} s (memory)")
    assert first_store.stats.line_shapes > 0 and first_store.stats.rows_built > 0
    assert again_store.stats.line_shapes == 0 and again_store.stats.rows_built == 0  # >= 10x fewer: none
    for r in (r2, r3):
        assert r.values == r1.values


def test_derived_means_and_their_errors():
    # <P_Q> = sigma * sqrt(2) Gamma(3) / Gamma(5/2) (chi_5 mean, scipy.stats.chi); <C_Q> = 15/16 <P_Q>;
    # both checked against the extended model's sampled tensors at C_Q0 = 0 (the pure model).
    m = distribution_means(ps.Site(czjzek_sigma_mhz=SIGMA))
    assert m["mean_pq_mhz"] == pytest.approx(SIGMA * stats.chi(5).mean(), rel=1e-12)
    cq, eta = sample_czjzek(400_000, SIGMA, np.random.default_rng(11))
    assert m["mean_cq_mhz"] == pytest.approx(cq.mean(), rel=3e-3)
    assert m["mean_pq_mhz"] == pytest.approx((cq * np.sqrt(1 + eta**2 / 3)).mean(), rel=3e-3)
    ext = distribution_means(ps.Site(cq_mhz=4.0, eta_q=0.3, czjzek_sigma_mhz=0.6))
    c2, e2 = sample_extended_czjzek(400_000, 4.0, 0.3, 0.6, np.random.default_rng(12))
    assert ext["mean_cq_mhz"] == pytest.approx(c2.mean(), rel=2e-3)
    assert ext["mean_pq_mhz"] == pytest.approx((c2 * np.sqrt(1 + e2**2 / 3)).mean(), rel=2e-3)
    # the closed form of principal values behind the extended means agrees with eigvalsh
    u = np.random.default_rng(3).normal(size=(2000, 5))
    assert np.allclose(principal_cq_eta(efg_from_components(u))[0],
                       np.abs(np.linalg.eigvalsh(efg_from_components(u))).max(axis=1))


def test_fit_reports_the_means_with_delta_method_errors(reference):
    ax, y0 = reference
    data = MeasuredSpectrum(ax.hz, ax.ppm, 50 * y0 + np.random.default_rng(3).normal(0, 1.0, y0.size), None,
                            ax.nu_ref_hz, "synthetic")
    r = ps.fit(_start_model(), [data], kernel_store=KernelStore(None))
    v, e = r.derived["Al4.mean_pq_mhz"]
    # pure Czjzek: <P_Q> is sigma times a constant, so its error is the same multiple of sigma's
    k = stats.chi(5).mean()
    assert v == pytest.approx(k * r.values["Al4.czjzek_sigma_mhz"], rel=1e-12)
    assert e == pytest.approx(k * r.stderr["Al4.czjzek_sigma_mhz"], rel=1e-3)
    vc, ec = r.derived["Al4.mean_cq_mhz"]
    assert vc == pytest.approx(15 / 16 * v, rel=1e-12) and ec == pytest.approx(15 / 16 * e, rel=1e-3)
    text = r.summary()
    assert "Al4.mean_cq_mhz" in text and "(derived)" in text
    res = r.to_dict()["fit"]["result"]
    # the result file writes the digits the standard error supports (two of the error, one guard digit)
    from powderspin.fitting.result import round_to_error

    assert res["derived"]["Al4.mean_pq_mhz"] == round_to_error(v, e)
    assert abs(res["derived"]["Al4.mean_pq_mhz"] - v) <= 0.05 * e
    assert res["derived_stderr"]["Al4.mean_pq_mhz"] == pytest.approx(e, rel=0.05)


@pytest.mark.slow
def test_extended_czjzek_fit_frees_the_fixed_tensor_and_sigma():
    # The extended model's fixed part (C_Q0, eta0) and sigma may be fitted together; data made by the engine
    # itself (this checks the machinery: the seeded tensors behind the weights make the objective smooth).
    meas = {"field_tesla": 9.4, "spinning_hz": "inf", "points": 384, "center_ppm": 20.0, "width_ppm": 140.0}
    truth = ps.make_model("27Al", meas, [{"label": "A", "shift_ppm": 50.0, "cq_mhz": 4.5, "eta_q": 0.4,
                                          "czjzek_sigma_mhz": 0.8, "gauss_hz": 300.0}])
    store = KernelStore(None)
    s = ps.simulate(truth, kernel_store=store)
    y = 10 * s.intensity + np.random.default_rng(2).normal(0.0, 0.005 * 10 * s.intensity.max(), s.hz.size)
    start = ps.make_model("27Al", {"field_tesla": 9.4, "spinning_hz": "inf"}, [
        {"label": "A", "shift_ppm": {"start": 49.0, "min": 40.0, "max": 60.0},
         "cq_mhz": {"start": 4.0, "min": 3.0, "max": 6.0}, "eta_q": 0.4,
         "czjzek_sigma_mhz": {"start": 0.6, "min": 0.4, "max": 1.2}, "gauss_hz": 300.0}])
    r = ps.fit(start, [MeasuredSpectrum(s.hz, s.ppm, y, None, s.nu_ref_hz, "synthetic")], kernel_store=store)
    for name, true in (("A.cq_mhz", 4.5), ("A.czjzek_sigma_mhz", 0.8), ("A.shift_ppm", 50.0)):
        assert abs(r.values[name] - true) < 4 * r.stderr[name] + 1e-3 * true, (name, r.values[name], r.stderr[name])
    assert set(r.derived) == {"A.mean_cq_mhz", "A.mean_pq_mhz"} and all(np.isfinite(e) for _, e in r.derived.values())
