"""Disordered sites: shift and EFG distributions, kernel grids, the lineshape library in use.

Sources named beside each check:
- Czjzek distribution: G. Czjzek et al., Phys. Rev. B 23 (1981) 2513; extended model: G. Le Caer,
  R. A. Brand, J. Phys.: Condens. Matter 10 (1998) 10715; NMR use: J.-B. d'Espinose de Lacaillerie,
  C. Fretigny, D. Massiot, J. Magn. Reson. 192 (2008) 244.
- Quadrupolar-induced shift of the CT centre of gravity: A. Samoson, Chem. Phys. Lett. 119 (1985) 29.
- Brute-force spectra: tests/reference/distribution_numpy.py (random tensors, literal level energies
  of design notes section 2, histograms, an explicit Gaussian matrix); not the kernel grid.
- A Gaussian distribution of a translation is a convolution, and convolving adds variances
  (probability theory; common practice for inhomogeneous broadening).

Sizes: 512-point axes and broadenings of a few hundred Hz keep every grid to a few thousand line
shapes (the scaled path computes one producer call per eta sub-sample); the brute-force reference
uses 3.2e5 random crystallites, whose histogram noise after the broadening is about 0.3 % of the
maximum, well inside the 1 % tolerance.  Cache tests count kernel computations and library hits,
never wall time (times are printed only).
"""

from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import time
import tomllib
import warnings
from pathlib import Path

import h5py
import numpy as np
import pytest

import powderspin as ps
from powderspin.cli.main import main
from powderspin.disorder.grid import EfgDistribution, _principal_cq_eta_fast, oversampling, plan_grid
from powderspin.disorder.library import DamagedEntryWarning, LineshapeLibrary
from powderspin.disorder.site import DistributedSite
from powderspin.disorder.store import KernelStore
from powderspin.engine.lineshape import broaden, make_axis
from powderspin.model.modelfile import model_to_toml, parse_model
from powderspin.model.values import ModelError, ParameterAddress, Site
from powderspin.physics.distributions import (
    efg_from_components,
    principal_cq_eta,
    quadrupolar_induced_shift_ppm,
    sample_czjzek,
)
from tests.reference import distribution_numpy as ref

ROOT = Path(__file__).resolve().parents[2]
BAD = ROOT / "tests" / "bad_inputs" / "disorder"
MAGIC = math.acos(1 / math.sqrt(3))
AL_MAS = {"field_tesla": 9.4, "spinning_hz": "inf", "points": 512, "center_ppm": 20.0, "width_ppm": 200.0}


def _rms(a, b):
    return float(np.sqrt(np.mean((np.asarray(a) - np.asarray(b)) ** 2)) / np.max(np.abs(b)))


def _simulate(meas, sites, store=None, nucleus="27Al", **kw):
    m = ps.make_model(nucleus, meas, sites)
    return ps.simulate(m, kernel_store=store if store is not None else KernelStore(None), **kw)


# ----------------------------------------------------------------------------- keys and model files


def test_keys_round_trip_through_a_model_file():
    m = ps.make_model("27Al", AL_MAS, [
        {"label": "A", "shift_ppm": 60.0, "czjzek_sigma_mhz": {"start": 2.0, "min": 1.0, "max": 3.0},
         "shift_fwhm_ppm": {"start": 8.0, "min": 2.0, "max": 20.0}},
        {"label": "B", "cq_mhz": 4.0, "eta_q": 0.2, "czjzek_sigma_mhz": 0.5},
        {"label": "C", "cq_distribution_mhz": {"values": [3.0, 1.0], "weights": [1.0, 2.0]}, "eta_q": 0.4},
        {"label": "D", "eta_distribution": {"values": [0.1, 0.9], "weights": [1, 3]}, "cq_mhz": 2.0,
         "shift_fwhm_ppm": {"same_as": "A.shift_fwhm_ppm"}},
    ])
    text = model_to_toml(m)
    back = parse_model(tomllib.loads(text))
    assert back.sites == m.sites and back.free == m.free and back.tied == m.tied
    assert back.sites[2].cq_distribution_mhz == ((3.0, 1.0), (1.0, 2.0))  # written as given, not sorted
    assert [f.name for f in m.free] == ["A.shift_fwhm_ppm", "A.czjzek_sigma_mhz"]
    m2 = m.with_parameters({ParameterAddress("site", 0, "czjzek_sigma_mhz"): 2.5,
                            ParameterAddress("site", 0, "shift_fwhm_ppm"): 12.0})
    assert m2.sites[0].czjzek_sigma_mhz == 2.5 and m2.sites[3].shift_fwhm_ppm == 12.0
    assert m2.sites[2] == m.sites[2]


def test_site_level_errors_name_the_keys():
    with pytest.raises(ModelError, match="czjzek_sigma_mhz and cq_distribution_mhz"):
        Site(label="x", czjzek_sigma_mhz=1.0, cq_distribution_mhz=((1.0,), (1.0,)))
    with pytest.raises(ModelError, match="eta_distribution replaces eta_q"):
        Site(label="x", eta_q=0.3, eta_distribution={"values": [0.1], "weights": [1]})
    with pytest.raises(ModelError, match=r"site 'x': shift_fwhm_ppm = -1 is outside the allowed range \[0, 10000\]"):
        Site(label="x", shift_fwhm_ppm=-1)


# ----------------------------------------------------------------------------- shift distribution


@pytest.mark.parametrize("nucleus, meas, site", [
    # 31P static shift anisotropy (spin 1/2: a shift distribution is allowed, an EFG one is not)
    ("31P", {"field_tesla": 9.4, "points": 512, "center_ppm": 0.0, "width_ppm": 300.0, "orientations": 16},
     {"span_ppm": 120.0, "skew": 0.3, "shift_ppm": 5.0, "gauss_hz": 150.0}),
    # 27Al second-order CT at infinite-rate MAS
    ("27Al", dict(AL_MAS, orientations=16), {"cq_mhz": 3.0, "eta_q": 0.2, "shift_ppm": 40.0, "gauss_hz": 200.0}),
])
def test_shift_fwhm_equals_an_explicit_average_of_shifted_spectra(nucleus, meas, site):
    # A Gaussian distribution of the isotropic shift is the average of translated spectra; the
    # average is done here by Gauss-Hermite quadrature over explicitly shifted simulations.
    fwhm = 9.0
    got = _simulate(meas, [dict(site, shift_fwhm_ppm=fwhm)], nucleus=nucleus).intensity
    sd = fwhm / (2 * math.sqrt(2 * math.log(2)))
    # shifts every 0.2 ppm out to 5 sd, Gaussian weights (the trapezoidal rule converges exponentially
    # for a smooth integrand once the spacing is below the line broadening)
    x = np.arange(-5 * sd, 5 * sd + 1e-9, 0.25)
    w = np.exp(-0.5 * (x / sd) ** 2)
    w /= w.sum()
    # one Simulator with the shift as its parameter: the lines are computed once and translated
    sim = ps.Simulator(ps.make_model(nucleus, meas, [site]), methods=["perturbation"],
                       parameters=[ps.ParameterAddress("site", 0, "shift_ppm")], kernel_store=KernelStore(None))
    avg = sum(wi * sim.spectrum([site["shift_ppm"] + xi]).intensity for xi, wi in zip(x, w))
    assert _rms(got, avg) < 1e-3


def test_shift_fwhm_adds_its_variance_in_ppm_at_every_field():
    # Convolution adds variances; a width in ppm adds the same variance in ppm at any field,
    # unlike gauss_hz (a width in Hz), whose ppm variance falls as 1/B0^2.
    fwhm = 6.0
    add = (fwhm / (2 * math.sqrt(2 * math.log(2)))) ** 2
    for field in (9.4, 18.8):
        meas = {"field_tesla": field, "points": 2048, "center_ppm": 0.0, "width_ppm": 200.0, "orientations": 16}
        site = {"span_ppm": 40.0, "skew": 0.0}

        def var(s):
            p, y = s.ppm, s.intensity
            mu = (p * y).sum() / y.sum()
            return ((p - mu) ** 2 * y).sum() / y.sum()

        v0 = var(_simulate(meas, [site], nucleus="31P"))
        v1 = var(_simulate(meas, [dict(site, shift_fwhm_ppm=fwhm)], nucleus="31P"))
        assert v1 - v0 == pytest.approx(add, rel=2e-3)


# ----------------------------------------------------------------------------- Czjzek against brute force


@pytest.mark.parametrize("spinning, sigma, gauss", [("inf", 2.0, 500.0), (0, 1.2, 600.0)])
def test_czjzek_site_matches_an_average_over_sampled_tensors(spinning, sigma, gauss):
    # Reference: sample_czjzek (C_Q, eta), each seen by 40 random crystallites, CT offsets from the
    # literal level energies (tests/reference/distribution_numpy.py), a histogram and an explicit
    # Gaussian: no kernel grid, orientation set or unit-pattern scaling is involved.
    meas = {"field_tesla": 9.4, "spinning_hz": spinning, "points": 512, "center_ppm": -15.0,
            "width_ppm": 160.0 if spinning == "inf" else 240.0}
    spec = _simulate(meas, [{"label": "Al", "czjzek_sigma_mhz": sigma, "gauss_hz": gauss}])
    nu0 = spec.metadata["nu_ref_hz"]
    hz = spec.hz
    dx = hz[1] - hz[0]
    edges = np.concatenate([hz - dx / 2, [hz[-1] + dx / 2]])
    rng = np.random.default_rng(20240611)
    cq, eta = sample_czjzek(8000, sigma, rng)
    angle = MAGIC if spinning == "inf" else None
    lines = np.concatenate([ref.site_lines(2.5, nu0, cq[i:i + 1000] * 1e6, eta[i:i + 1000], 40, rng, angle)
                            for i in range(0, cq.size, 1000)])
    want = ref.gaussian_convolution(ref.histogram_spectrum(lines, edges), dx, gauss) / (dx / nu0 * 1e6)
    assert _rms(spec.intensity, want) < 0.01


def test_centre_of_gravity_follows_the_averaged_quadrupolar_induced_shift():
    # Samoson (1985): the CT centre of gravity under MAS is delta_iso + delta_QIS(P_Q); delta_QIS is
    # linear in P_Q^2 and <P_Q^2> = 5 sigma^2 for the Czjzek model (sum of five component variances).
    for field, sigma in ((9.4, 2.0), (14.1, 1.0)):
        meas = {"field_tesla": field, "spinning_hz": "inf", "points": 1024, "center_ppm": 0.0, "width_ppm": 300.0}
        spec = _simulate(meas, [{"czjzek_sigma_mhz": sigma, "shift_ppm": 60.0, "gauss_hz": 300.0}])
        nu0 = spec.metadata["nu_ref_hz"]
        want = 60.0 + float(quadrupolar_induced_shift_ppm(math.sqrt(5 * sigma**2), 2.5, nu0))
        # the grid leaves out a tail of 1e-4 of the probability (its share of <P_Q^2> is below 1e-3)
        assert spec.first_moment_ppm() == pytest.approx(want, abs=2e-3 * abs(want - 60.0) + 0.01)


def test_extended_czjzek_limits():
    # Le Caer and Brand (1998): the extended model is a fixed tensor plus a Czjzek tensor, so sigma -> 0
    # gives the fixed site and C_Q0 -> 0 gives the pure Czjzek model.
    fixed = _simulate(AL_MAS, [{"shift_ppm": 50.0, "cq_mhz": 4.0, "eta_q": 0.3, "gauss_hz": 200.0}]).intensity
    narrow = _simulate(AL_MAS, [{"shift_ppm": 50.0, "cq_mhz": 4.0, "eta_q": 0.3, "czjzek_sigma_mhz": 0.005,
                                 "gauss_hz": 200.0}]).intensity
    assert _rms(narrow, fixed) < 2e-3
    pure = _simulate(AL_MAS, [{"shift_ppm": 50.0, "czjzek_sigma_mhz": 1.5, "gauss_hz": 200.0}]).intensity
    centred = _simulate(AL_MAS, [{"shift_ppm": 50.0, "cq_mhz": 0.001, "czjzek_sigma_mhz": 1.5,
                                  "gauss_hz": 200.0}]).intensity
    assert _rms(centred, pure) < 5e-3


def test_explicit_grid_is_the_weighted_sum_of_fixed_sites():
    # the same orientation set for the grid's kernels and the fixed sites ("auto" would choose a set per
    # fixed site by accuracy, which differs within its 0.3 % target from the kernels' set)
    meas = dict(AL_MAS, orientations="medium")
    cqv, cw, ev, ew = [2.0, 3.0, 4.5], [1.0, 2.0, 1.0], [0.1, 0.8], [3.0, 1.0]
    got = _simulate(meas, [{"shift_ppm": 50.0, "gauss_hz": 200.0, "cq_distribution_mhz": {"values": cqv, "weights": cw},
                              "eta_distribution": {"values": ev, "weights": ew}}]).intensity
    want = sum(a * b * _simulate(meas, [{"shift_ppm": 50.0, "gauss_hz": 200.0, "cq_mhz": c, "eta_q": e}]).intensity
               for c, a in zip(cqv, cw) for e, b in zip(ev, ew)) / (sum(cw) * sum(ew))
    assert _rms(got, want) < 1e-4
    # one grid alone: the other parameter is the site's own
    got = _simulate(meas, [{"shift_ppm": 50.0, "gauss_hz": 200.0, "eta_q": 0.5,
                              "cq_distribution_mhz": {"values": cqv, "weights": cw}}]).intensity
    want = sum(a * _simulate(meas, [{"shift_ppm": 50.0, "gauss_hz": 200.0, "cq_mhz": c, "eta_q": 0.5}]).intensity
               for c, a in zip(cqv, cw)) / sum(cw)
    assert _rms(got, want) < 1e-4


# ----------------------------------------------------------------------------- the grid


def _kernel_spectrum(model, axis, store, **kw):
    ds = DistributedSite(model, 0, 0)
    ks = ds.kernels(axis, store, **kw)
    y = ks.fractions(ks.grid.weights(ds.dist), axis, model.sites[0].shift.iso_ppm * model.larmor_hz * 1e-6)
    return broaden(y, axis.dx_hz, 0.0, model.sites[0].gauss_hz), ks


@pytest.mark.parametrize("spinning, sigma, gauss", [("inf", 2.0, 150.0), (0, 1.5, 500.0)])
def test_grid_converges_under_refinement(spinning, sigma, gauss):
    # Halving the edge-move fraction and doubling the nodes changes the spectrum by far less than
    # the 0.5 % (of the maximum, RMS) this test allows.
    m = ps.make_model("27Al", {"field_tesla": 9.4, "spinning_hz": spinning},
                      [{"czjzek_sigma_mhz": sigma, "gauss_hz": gauss, "shift_ppm": 3.3}])
    ax = make_axis(512, m.larmor_hz, center_ppm=-10.0, width_ppm=160.0 if spinning == "inf" else 300.0)
    store = KernelStore(None)
    y0, k0 = _kernel_spectrum(m, ax, store)
    y1, k1 = _kernel_spectrum(m, ax, store, fraction=0.25, node_limits=(48, 320, 33))
    print(f"grid {k0.grid.shape} nodes, criterion {k0.grid.criterion_shape}; refined {k1.grid.shape}, "
          f"{k1.grid.criterion_shape}; change {_rms(y0, y1):.2e}")
    assert k1.grid.criterion_shape[0] >= 2 * k0.grid.criterion_shape[0] - 1
    assert _rms(y0, y1) < 5e-3


@pytest.mark.slow
def test_scaled_path_equals_direct_path():
    # The scaled path (one unit pattern per eta, scaled by C_Q^2) against full site computations of
    # every sub-sample: the second-order CT offset is exactly proportional to C_Q^2 (design notes s. 2).
    m = ps.make_model("27Al", {"field_tesla": 9.4, "spinning_hz": "inf"}, [{"czjzek_sigma_mhz": 1.0,
                                                                          "gauss_hz": 800.0}])
    ax = make_axis(256, m.larmor_hz, center_ppm=-5.0, width_ppm=80.0)
    ys = []
    for path in ("scaled", "direct"):
        ds = DistributedSite(m, 0, 0)
        ds.path = path
        ks = ds.kernels(ax, KernelStore(None))
        assert ks.path == path
        ys.append(ks.fractions(ks.grid.weights(ds.dist), ax, 0.0))
    assert _rms(ys[0], ys[1]) < 1e-5


def test_grid_follows_the_criterion_and_its_weights_the_czjzek_moments():
    d = EfgDistribution("czjzek", 2.0)
    g = plan_grid(d, 2.5, 104.26e6, 200.0)
    # the same spacing rule as distributions.czjzek_grid at the same resolution
    from powderspin.physics.distributions import czjzek_grid

    ref_grid = czjzek_grid(2.0, 2.5, 104.26e6, 200.0)
    assert g.criterion_shape == ref_grid.shape
    s = np.concatenate([[0.0], np.sort(g.cq_samples_mhz) ** 2])
    assert np.max(np.diff(s)) <= ref_grid.cq_edges_mhz[-1] ** 2 / ref_grid.shape[0] * (1 + 1e-9)
    h = g.cq_mhz[1] - g.cq_mhz[0]
    assert np.max(np.diff(np.concatenate([[g.cq_mhz[0]], g.cq_samples_mhz, [g.cq_mhz[-1]]]))) <= 0.5 * h + 1e-12
    # <P_Q^2> = 5 sigma^2 (five component variances; Czjzek 1981) from the node weights, for the sigma the
    # grid was made for and for a smaller one on the same grid (the tail left out holds 1e-4 of the mass)
    g2 = plan_grid(d, 2.5, 104.26e6, 200.0, sigma_min_mhz=0.8)
    for sigma in (2.0, 1.3, 0.8):
        w = g2.weights(EfgDistribution("czjzek", sigma))
        pq2 = float((w * g2.cq_mhz[:, None] ** 2 * (1 + g2.eta[None, :] ** 2 / 3)).sum())
        assert w.sum() == pytest.approx(1.0) and (w >= 0).all()
        assert pq2 == pytest.approx(5 * sigma**2, rel=1e-3)
    # extended weights: seeded tensors; their principal values from the closed form agree with eigvalsh
    u = np.random.default_rng(3).normal(size=(5000, 5)) * 1.3 + [3.0, 0.2, 0, 0, 0]
    c1, e1 = _principal_cq_eta_fast(u)
    c2, e2 = principal_cq_eta(efg_from_components(u))
    np.testing.assert_allclose(c1, c2, rtol=1e-10)
    np.testing.assert_allclose(e1, e2, atol=1e-8)
    de = EfgDistribution("extended", 0.6, 4.0, 0.3)
    ge = plan_grid(de, 2.5, 104.26e6, 300.0)
    we = ge.weights(de)
    assert we.sum() == pytest.approx(1.0) and (we >= 0).all()
    mean_c = float((we.sum(axis=1) * ge.cq_mhz).sum())
    ref_c = float(np.mean(principal_cq_eta(efg_from_components(
        np.random.default_rng(9).normal(size=(200_000, 5)) * 0.6 + [4.0, 0.3 * 4.0 / math.sqrt(3), 0, 0, 0]))[0]))
    assert mean_c == pytest.approx(ref_c, rel=2e-3)


def test_oversampling_rule():
    assert oversampling(10.0, 1000.0) == 1
    assert oversampling(10.0, 0.0) == 8
    for fwhm in (20.0, 50.0, 117.0):
        q = oversampling(10.0, fwhm)
        # the linear share spreads a line by at most half a fine step: <= a tenth of the Gaussian's sd
        assert 10.0 / q / 2 <= fwhm / 2.3548 / 10 * (1 + 1e-9) or q == 8


def test_a_fit_keeps_the_grid_while_sigma_shift_and_broadening_change():
    # The grid extent comes from the upper bound of a free sigma, the spacing from the lower bound of a
    # free broadening and the kernel window from the range of a free shift: changing them inside their
    # ranges reuses the kernels (no row is built again).
    m = ps.make_model("27Al", AL_MAS, [{"label": "A", "czjzek_sigma_mhz": {"start": 1.5, "min": 1.0, "max": 2.5},
                                        "shift_ppm": {"start": 60.0, "min": 50.0, "max": 70.0},
                                        "gauss_hz": {"start": 500.0, "min": 300.0, "max": 2000.0}}])
    store = KernelStore(None)
    first = ps.simulate(m, kernel_store=store)
    built = store.stats.rows_built
    assert built > 0
    addr = {f.name: f.address for f in m.free}
    m2 = m.with_parameters({addr["A.czjzek_sigma_mhz"]: 2.4, addr["A.shift_ppm"]: 52.0, addr["A.gauss_hz"]: 900.0})
    second = ps.simulate(m2, kernel_store=store)
    assert store.stats.rows_built == built and store.stats.sets_from_memory == 1
    assert not np.allclose(first.intensity, second.intensity)
    # the result equals a simulation of the same values as fixed parameters on a grid of their own
    fixed = _simulate(AL_MAS, [{"label": "A", "czjzek_sigma_mhz": 2.4, "shift_ppm": 52.0, "gauss_hz": 900.0}])
    assert _rms(second.intensity, fixed.intensity) < 5e-3


# ----------------------------------------------------------------------------- the lineshape library


GLASS = """nucleus = "27Al"
[measurement]
field_tesla = 9.4
spinning_hz = "inf"
points = 512
center_ppm = 30.0
width_ppm = 200.0
gauss_hz = 300.0
[[site]]
label = "Al4"
shift_ppm = 62.0
czjzek_sigma_mhz = SIGMA
"""


def _glass(tmp_path, sigma=2.0, name="glass.toml"):
    p = tmp_path / name
    p.write_text(GLASS.replace("SIGMA", repr(sigma)))
    return p


def test_second_identical_simulation_computes_no_kernels(tmp_path):
    lib = LineshapeLibrary(tmp_path / "lib")
    model = ps.load_model(_glass(tmp_path))
    store = KernelStore(lib)
    t0 = time.perf_counter()
    first = ps.simulate(model, kernel_store=store)
    t1 = time.perf_counter()
    n_first, rows = store.stats.line_shapes, store.stats.rows_built
    second = ps.simulate(model, kernel_store=store)
    t2 = time.perf_counter()
    fresh = KernelStore(LineshapeLibrary(tmp_path / "lib"))  # a new process would start like this
    third = ps.simulate(model, kernel_store=fresh)
    t3 = time.perf_counter()
    print(f"first {t1 - t0:.3f} s ({n_first} line shapes, {rows} rows), second {t2 - t1:.4f} s (memory), "
          f"third {t3 - t2:.3f} s (library)")
    assert n_first > 0 and store.stats.line_shapes == n_first  # no kernel computed the second time: >= 10x fewer
    assert fresh.stats.line_shapes == 0 and fresh.stats.rows_from_library == rows
    np.testing.assert_array_equal(first.intensity, second.intensity)
    np.testing.assert_array_equal(first.intensity, third.intensity)
    assert lib.info().entries == rows


def _run_cli(args, cwd, env=None):
    e = dict(os.environ, **(env or {}))
    return subprocess.run([sys.executable, "-m", "powderspin", *args], cwd=cwd, capture_output=True, text=True,
                          timeout=600, env=e)


def _csv_intensity(path):
    rows = [line for line in path.read_text().splitlines() if not line.startswith("#")][1:]
    return np.array([float(r.split(",")[2]) for r in rows])


@pytest.mark.slow
def test_two_processes_fill_one_library_at_once(tmp_path):
    # One file per entry, written to a temporary file and renamed into place (h5py issue 1864 is the hazard).
    model = _glass(tmp_path, 1.7)
    lib = tmp_path / "shared"
    procs = [subprocess.Popen([sys.executable, "-m", "powderspin", "simulate", str(model), "-o", f"out{k}.csv",
                               "--cache", str(lib), "-q"], cwd=tmp_path, stderr=subprocess.PIPE, text=True)
             for k in range(2)]
    for p in procs:
        assert p.wait(timeout=600) == 0, p.stderr.read()
    ref_run = _run_cli(["simulate", str(model), "-o", "ref.csv", "--no-cache", "-q"], tmp_path)
    assert ref_run.returncode == 0, ref_run.stderr
    want = _csv_intensity(tmp_path / "ref.csv")
    for k in range(2):
        got = _csv_intensity(tmp_path / f"out{k}.csv")
        np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-15)
    assert not list(lib.rglob("*.h5part"))
    with warnings.catch_warnings():
        warnings.simplefilter("error", DamagedEntryWarning)
        store = KernelStore(LineshapeLibrary(lib))
        ps.simulate(ps.load_model(model), kernel_store=store)
    assert store.stats.rows_built == 0 and store.stats.rows_from_library > 0


def test_damaged_entries_are_reported_and_rebuilt_through_simulate(tmp_path):
    lib_path = tmp_path / "lib"
    model = ps.load_model(_glass(tmp_path, 1.3))
    good = ps.simulate(model, kernel_store=KernelStore(LineshapeLibrary(lib_path)))
    entries = sorted(lib_path.rglob("*.h5"))
    assert len(entries) >= 3
    truncated, noise, other = entries[:3]
    truncated.write_bytes(truncated.read_bytes()[:300])
    noise.write_bytes(np.random.default_rng(1).bytes(4096))
    with h5py.File(other, "r+") as f:
        f.attrs["package_version"] = "0.0.0-other"
    store = KernelStore(LineshapeLibrary(lib_path))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        again = ps.simulate(model, kernel_store=store)
    messages = [str(w.message) for w in caught if issubclass(w.category, DamagedEntryWarning)]
    assert len(messages) == 3, messages
    assert any(truncated.name in m and "HDF5" in m for m in messages)
    assert any(noise.name in m and "HDF5" in m for m in messages)
    assert any(other.name in m and "0.0.0-other" in m for m in messages)
    assert store.stats.rows_built == 3
    np.testing.assert_array_equal(again.intensity, good.intensity)
    with warnings.catch_warnings():
        warnings.simplefilter("error", DamagedEntryWarning)
        store2 = KernelStore(LineshapeLibrary(lib_path))
        ps.simulate(model, kernel_store=store2)
    assert store2.stats.rows_built == 0


@pytest.mark.slow
def test_size_cap_evicts_the_least_recently_used_kernels(tmp_path):
    # Two grids of about the same size under a cap of one and a half grids: storing the second
    # evicts entries of the first (the least recently used), never the second's.
    lib_path = tmp_path / "lib"
    a, b = ps.load_model(_glass(tmp_path, 2.0, "a.toml")), ps.load_model(_glass(tmp_path, 2.1, "b.toml"))
    ps.simulate(a, kernel_store=KernelStore(LineshapeLibrary(lib_path)))
    entries_a = set(lib_path.rglob("*.h5"))
    size_a = LineshapeLibrary(lib_path).info().total_bytes
    cap = int(size_a * 1.5)
    time.sleep(0.05)  # distinct modification times (the library orders entries by last use)
    ps.simulate(b, kernel_store=KernelStore(LineshapeLibrary(lib_path, max_bytes=cap)))
    left = set(lib_path.rglob("*.h5"))
    assert LineshapeLibrary(lib_path).info().total_bytes <= cap
    assert entries_a - left, "nothing of the older grid was evicted"
    sb = KernelStore(LineshapeLibrary(lib_path, max_bytes=cap))
    ps.simulate(b, kernel_store=sb)
    sa = KernelStore(LineshapeLibrary(lib_path, max_bytes=cap))
    ps.simulate(a, kernel_store=sa)
    print(f"b: {sb.stats.rows_from_library} rows from the library, {sb.stats.rows_built} built; "
          f"a: {sa.stats.rows_from_library} from the library, {sa.stats.rows_built} built")
    assert sb.stats.rows_built == 0  # the recently used grid is whole
    # the evicted rows of the older grid are built again (and, being stored, evict its remaining older
    # rows in turn: least recently used first)
    assert sa.stats.rows_built >= len(entries_a - left) > 0


@pytest.mark.slow
def test_ctrl_c_during_a_grid_build_stops_cleanly(tmp_path):
    # A grid on the direct path (finite-rate spinning: every line shape is a full computation with
    # sidebands) takes tens of seconds; Ctrl-C once the first kernel row is stored must stop it with
    # status 130, one line on standard error, no output and no partial library entry.
    model = tmp_path / "slow.toml"
    model.write_text(GLASS.replace("SIGMA", "2.0").replace('spinning_hz = "inf"', "spinning_hz = 12000")
                     .replace("gauss_hz = 300.0", "gauss_hz = 400.0"))
    lib = tmp_path / "lib"
    proc = subprocess.Popen([sys.executable, "-m", "powderspin", "simulate", str(model), "-o", "out.csv",
                             "--cache", str(lib), "-q"], cwd=tmp_path, stderr=subprocess.PIPE,
                            stdout=subprocess.DEVNULL, text=True)
    deadline = time.monotonic() + 300
    while not list(lib.rglob("*.h5")) and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.05)
    assert proc.poll() is None, "the build finished before it could be interrupted"
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert err == "interrupted; no output was written\n", err
    assert not (tmp_path / "out.csv").exists()
    assert not list(lib.rglob("*.h5part")) and not list(lib.rglob(".tmp-*"))
    entries = list(lib.rglob("*.h5"))
    assert entries
    library = LineshapeLibrary(lib)
    with warnings.catch_warnings():
        warnings.simplefilter("error", DamagedEntryWarning)
        for entry in entries:  # every entry in place is complete: its stored key finds it, checksum and all
            with h5py.File(entry, "r") as f:
                key = json.loads(f.attrs["key_json"])
            assert library.get(key) is not None


def test_cache_commands(tmp_path, capsys):
    lib = tmp_path / "lib"
    model = _glass(tmp_path, 1.4)
    assert main(["cache", "path", "--cache", str(lib)]) == 0
    assert capsys.readouterr().out.strip() == str(lib)
    assert main(["simulate", str(model), "-o", str(tmp_path / "o.csv"), "--cache", str(lib), "-q"]) == 0
    assert main(["cache", "info", "--cache", str(lib)]) == 0
    out = capsys.readouterr().out
    n = LineshapeLibrary(lib).info().entries
    assert n > 0 and f"entries: {n} (" in out
    assert main(["cache", "clear", "--cache", str(lib)]) == 0
    assert f"removed {n} entries" in capsys.readouterr().out
    assert LineshapeLibrary(lib).info().entries == 0
    # the environment variable is the default folder
    os.environ["POWDERSPIN_CACHE"], saved = str(tmp_path / "env-lib"), os.environ["POWDERSPIN_CACHE"]
    try:
        assert main(["cache", "path"]) == 0
        assert capsys.readouterr().out.strip() == str(tmp_path / "env-lib")
    finally:
        os.environ["POWDERSPIN_CACHE"] = saved
    # a folder that is not a library is never cleared
    foreign = tmp_path / "mine"
    foreign.mkdir()
    (foreign / "thesis.tex").write_text("precious")
    assert main(["cache", "clear", "--cache", str(foreign)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "refusing to clear" in err and str(foreign) in err
    assert (foreign / "thesis.tex").read_text() == "precious"
    # --no-cache leaves no folder behind
    assert main(["simulate", str(model), "-o", str(tmp_path / "o2.csv"), "--no-cache", "--cache", str(tmp_path / "x"),
                 "-q"]) == 2
    assert main(["simulate", str(model), "-o", str(tmp_path / "o2.csv"), "--no-cache", "-q"]) == 0


# ----------------------------------------------------------------------------- bad inputs through the command line


CASES = tomllib.loads((BAD / "cases.toml").read_text())["case"]


def test_bad_input_manifest_covers_every_file():
    listed = {c["file"] for c in CASES}
    present = {p.name for p in BAD.iterdir()} - {"cases.toml"}
    assert present <= listed, f"files without a case: {sorted(present - listed)}"


@pytest.mark.parametrize("case", CASES, ids=[f"{c['file']}-{i}" for i, c in enumerate(CASES)])
def test_bad_input(case, tmp_path, capsys):
    src = BAD / case["file"]
    model = tmp_path / case["file"]
    model.write_text(src.read_text())
    out = tmp_path / "out.csv"
    args = [str(tmp_path / a) if a.endswith(".toml") else a
            for a in case.get("args", ["--cache", str(tmp_path / "lib")])]
    rc = main(["simulate", str(model), "-o", str(out), "-q", *args])
    err = capsys.readouterr().err
    assert rc == 2, err
    assert err.count("\n") == 1 and err.startswith("error: "), err
    assert "Traceback" not in err
    for word in case["expect"]:
        assert word in err, f"{word!r} not in {err!r}"
    assert not out.exists() and not (tmp_path / "lib").exists()
    assert model.read_text() == src.read_text()


def test_readme_key_table_matches_the_schema():
    # the README's table of the distribution keys states each key's unit and allowed range as schema.KEYS does
    from powderspin.model.schema import key_spec

    text = (ROOT / "README.md").read_text()
    for key in ("shift_fwhm_ppm", "czjzek_sigma_mhz", "cq_distribution_mhz", "eta_distribution"):
        row = next(line for line in text.splitlines() if line.startswith(f"| `{key}` |"))
        cells = [c.strip() for c in row.strip("|").split("|")]
        spec = key_spec("site", key)
        assert cells[1] == spec.unit, row
        assert cells[2].endswith(f"{spec.low:g} to {spec.high:g}"), row
        assert (spec.free and "may be free" in cells[3]) or (not spec.free and "may be free" not in cells[3]), row


def test_point_values_of_a_czjzek_site_have_the_hat_sharing_undone():
    """Rendered with ``point_values``, a point is the broadened pattern at its frequency, as for a single site.

    The hat sharing of the kernels and of the translation smooths the pattern by triangles of variances s^2/6 and
    dx^2/6 (the variance of a triangle of half-width h is h^2/6; common practice); narrowing the Gaussian by that
    variance removes the second-order term of the error, so what is left is of fourth order in step / FWHM
    (Taylor expansion of the smoothed pattern; common practice).  The reference is the same site rendered on a 9
    times finer axis and sampled at the coarse points (odd factor: the points coincide).
    """
    from powderspin.disorder.site import DistributedSite
    from powderspin.disorder.store import KernelStore
    from powderspin.engine.lineshape import Axis

    m = ps.make_model("27Al", dict(AL_MAS, method="perturbation"),
                      [{"label": "A", "shift_ppm": 60.0, "czjzek_sigma_mhz": 2.0, "gauss_hz": 300.0}])
    nu = m.nucleus.larmor_hz(9.4)
    dx = 60.0  # five points per FWHM: the smoothing is visible
    coarse = Axis(20.0 * nu * 1e-6, 256 * dx, 256, nu)
    fine = Axis(coarse.center_hz, coarse.width_hz, 9 * 256, nu)
    store = KernelStore(None)
    sh = 60.0 * nu * 1e-6
    ref = DistributedSite(m, 0, 0).render(fine, shift_hz=sh, store=store, point_values=True).intensity[4::9]
    ds = DistributedSite(m, 0, 0)
    plain = ds.render(coarse, shift_hz=sh, store=store).intensity
    corrected = ds.render(coarse, shift_hz=sh, store=store, point_values=True).intensity
    err_plain = np.max(np.abs(plain - ref)) / ref.max()
    err_corr = np.max(np.abs(corrected - ref)) / ref.max()
    print(f"largest error, of the maximum: bin values {err_plain:.3g}, point values {err_corr:.3g}")
    assert err_corr < 0.25 * err_plain, (err_corr, err_plain)
