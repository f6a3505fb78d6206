"""Fit timings (warm): one-site MAS fit (4 free parameters), a two-site fit, two-field global fits.

    python benchmarks/bench_fit.py [--repeat N]

Each fit is run on synthetic data (made by the engine itself with a fixed
noise seed: this measures speed, not accuracy) from a start about 10 % off.
Printed per case: the best wall time of N repeats, the number of model
evaluations (each simulates every measurement), the share of the time spent
simulating (the Simulator) and, for comparison in the same run, the same fit with the
kernels on 2 threads, and a straightforward fit: scipy's own forward-difference
Jacobian, the scale as a third nonlinear parameter and no memo of site lines
(every evaluation recomputes every site).  Targets (design notes): one-site
MAS fit <= 1 s, two-site example <= 3 s, two-field global fit <= 5 s.
"""

from __future__ import annotations

import argparse
import math
import time

import _common  # noqa: F401  (sets the OpenMP wait policy before powderspin starts its kernels)
import numpy as np

import powderspin as ps
from powderspin.fitting.data import data_axis
from powderspin.io.spectra import MeasuredSpectrum as _Spectrum
from powderspin.simulator import Simulator


def synthetic(model_keys, sites, points, ppm_range, seed=1, snr=200.0):
    """Data per measurement: the engine's spectrum of the true model plus Gaussian noise."""
    out = []
    rng = np.random.default_rng(seed)
    for meas in model_keys:
        hi, lo = ppm_range
        keys = dict(meas, points=points, center_ppm=0.5 * (hi + lo), width_ppm=(hi - lo) * points / (points - 1),
                    orientations="fine")
        keys = {k: (v["start"] if isinstance(v, dict) else v) for k, v in keys.items()}
        s = ps.simulate(ps.make_model("27Al", keys, sites))
        y = s.intensity + rng.normal(0.0, s.intensity.max() / snr, s.hz.size)
        out.append(_Spectrum(hz=s.hz, ppm=s.ppm, intensity=y, imag=None, nu_ref_hz=s.nu_ref_hz, source="synthetic"))
    return out


def free(v, lo, hi, off=1.1):
    return {"start": min(hi, max(lo, v * off)), "min": lo, "max": hi}


def case_one_site():
    truth = [{"label": "A", "shift_ppm": 60.0, "cq_mhz": 4.0, "eta_q": 0.35}]
    meas = [{"field_tesla": 14.1, "spinning_hz": 14000.0, "gauss_hz": 300.0}]
    data = synthetic(meas, truth, 512, (100.0, 20.0))
    model = ps.make_model("27Al", [{"field_tesla": 14.1, "spinning_hz": 14000.0,
                                    "gauss_hz": free(300.0, 50.0, 2000.0)}],
                          [{"label": "A", "shift_ppm": free(60.0, 40.0, 80.0, 1.02), "cq_mhz": free(4.0, 1.0, 8.0),
                            "eta_q": free(0.35, 0.0, 1.0)}])
    return "one-site MAS, 4 free parameters (target <= 1 s)", model, data


def case_two_site():
    truth = [{"label": "Al(IV)", "weight": 0.7, "shift_ppm": 61.0, "cq_mhz": 4.2, "eta_q": 0.35},
             {"label": "Al(V)", "weight": 0.3, "shift_ppm": 33.0, "cq_mhz": 6.8, "eta_q": 0.7}]
    meas = [{"field_tesla": 14.1, "spinning_hz": 12500.0, "lorentz_hz": 150.0}]
    data = synthetic(meas, truth, 1024, (120.0, -60.0))
    model = ps.make_model("27Al", [{"field_tesla": 14.1, "spinning_hz": 12500.0,
                                    "lorentz_hz": free(150.0, 20.0, 1000.0)}],
                          [{"label": "Al(IV)", "weight": 0.7, "shift_ppm": free(61.0, 40.0, 80.0, 1.02),
                            "cq_mhz": free(4.2, 1.0, 8.0), "eta_q": free(0.35, 0.0, 1.0)},
                           {"label": "Al(V)", "weight": free(0.3, 0.0, 2.0), "shift_ppm": free(33.0, 20.0, 50.0, 1.03),
                            "cq_mhz": free(6.8, 2.0, 9.0), "eta_q": free(0.7, 0.0, 1.0)}])
    return "two-site MAS (the demo.toml sites), 8 free parameters (target <= 3 s)", model, data


def case_two_field():
    truth = [{"label": "A", "shift_ppm": 30.0, "cq_mhz": 5.0, "eta_q": 0.5}]
    meas = [{"field_tesla": b, "spinning_hz": 14000.0, "gauss_hz": 400.0} for b in (9.4, 14.1)]
    data = synthetic(meas, truth, 512, (80.0, -40.0))
    model = ps.make_model("27Al", [{"field_tesla": b, "spinning_hz": 14000.0, "gauss_hz": free(400.0, 50.0, 2000.0)}
                                   for b in (9.4, 14.1)],
                          [{"label": "A", "shift_ppm": free(30.0, 10.0, 50.0, 1.05), "cq_mhz": free(5.0, 1.0, 9.0),
                            "eta_q": free(0.5, 0.0, 1.0)}])
    return "two-field global fit, one site, 5 free parameters (target <= 5 s)", model, data


def case_example():
    model = ps.load_model(__file__.replace("benchmarks/bench_fit.py", "examples/alpo_fit.toml"))
    return "the aluminophosphate example: 3 sites, 2 fields, 13 free parameters (the demo)", model, None


class Timed:
    """Wraps Simulator.site_intensities (every spectrum a fit computes) to add up the time spent in it."""

    def __init__(self):
        self.total = 0.0
        self.inner = Simulator.site_intensities
        timed = self

        def wrapper(sim, *a, **k):
            t = time.perf_counter()
            try:
                return timed.inner(sim, *a, **k)
            finally:
                timed.total += time.perf_counter() - t

        self.wrapper = wrapper


def run(model, data, repeat, threads=1):
    best, share, evals = math.inf, 0.0, 0
    for _ in range(repeat):
        timed = Timed()
        Simulator.site_intensities = timed.wrapper
        try:
            t = time.perf_counter()
            r = ps.fit(model, data, threads=threads)
            dt = time.perf_counter() - t
        finally:
            Simulator.site_intensities = timed.inner
        if dt < best:
            best, share, evals = dt, timed.total / dt, r.n_evaluations
    return best, evals, share, r


def straightforward(model, data):
    """scipy's own Jacobian, the scale as a nonlinear parameter, every site recomputed at every evaluation."""
    from scipy.optimize import least_squares

    axis, _, _ = data_axis(data[0], model.nucleus.larmor_hz(model.measurement.field_tesla), "measurement")
    y = np.asarray(data[0].intensity)
    params = list(model.free)
    calls = [0]

    def resid(z):
        calls[0] += 1
        m = model.with_parameters({p.address: v for p, v in zip(params, z[:-1])})
        return z[-1] * ps.simulate(m, axis=axis).intensity - y

    s0 = y.max() / max(ps.simulate(model, axis=axis).intensity.max(), 1e-300)
    lo = [p.min for p in params] + [0.0]
    hi = [p.max for p in params] + [np.inf]
    import numba

    before = numba.get_num_threads()
    numba.set_num_threads(1)  # as the fit runs them
    try:
        t = time.perf_counter()
        least_squares(resid, [p.start for p in params] + [s0], bounds=(lo, hi), method="trf", x_scale="jac")
        return time.perf_counter() - t, calls[0]
    finally:
        numba.set_num_threads(before)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    print("warming up (compiles the kernels on a first run) ...")
    name, model, data = case_one_site()
    ps.fit(model, data)
    for make in (case_one_site, case_two_site, case_two_field, case_example):
        name, model, data = make()
        best, evals, share, r = run(model, data, args.repeat)
        print(f"\n{name}")
        print(f"  {best:.3f} s (best of {args.repeat}), {evals} evaluations, {share:.0%} of the time simulating, "
              f"{best / max(evals, 1) * 1e3:.1f} ms per evaluation; reduced chi-square {r.reduced_chi_square:.3g}")
        b2, e2, _, _ = run(model, data, 1, threads=2)
        print(f"  kernels on 2 threads: {b2:.3f} s ({b2 / best:.2f} x the 1-thread time)")
        if make is case_one_site:
            t_naive, calls = straightforward(model, data)
            print(f"  straightforward fit (scipy Jacobian, scale nonlinear, no memo): {t_naive:.3f} s, {calls} "
                  f"evaluations ({t_naive / best:.1f} x slower)")


if __name__ == "__main__":
    main()
