"""Two-dimensional MQMAS: warm timings and their ratio to the 1D MAS spectrum of the same site.

Target (design.md section 6): one 27Al site, 3QMAS, infinite rate, 256 x 512
points <= 50 ms warm.  Printed: the whole simulation (Simulator built, lines,
F1 positions, 2D binning, broadening in both dimensions), a re-simulation at a
new C_Q through one Simulator (what a fit step costs), and the same two for the
1D MAS central-transition spectrum of the same site, with the ratios.  Best of
several repeats (a shared machine; see DEVELOPERS.md, 'Performance').

Run:  python benchmarks/bench_mqmas.py
"""

from __future__ import annotations

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(ROOT))
from _common import best_time  # noqa: E402

from powderspin.engine.threads import kernel_threads  # noqa: E402
from powderspin.model.modelfile import make_model  # noqa: E402
from powderspin.simulator import Simulator, simulate  # noqa: E402


def main() -> None:
    meas = {"field_tesla": 14.1, "spinning_hz": "inf", "experiment": "mqmas", "mq_order": 3, "points": 512,
            "f1_points": 256, "gauss_hz": 150.0, "f1_gauss_hz": 150.0}
    site = {"label": "Al", "shift_ppm": 60.0, "cq_mhz": {"start": 4.0, "min": 1.0, "max": 10.0}, "eta_q": 0.4}
    two_d = make_model("27Al", meas, [site])
    one_d = two_d.with_measurement(0, experiment="1d")
    s2, s1 = Simulator(two_d), Simulator(one_d)
    print(f"orientation set: {s2.orientations[0]}; 2D shape {s2.spectrum().shape}")
    values = iter(4.0 + 1e-3 * k for k in range(1, 10000))
    for threads in (1, 2):
        with kernel_threads(threads):
            t2 = best_time(lambda: simulate(two_d), repeat=7)
            t1 = best_time(lambda: simulate(one_d), repeat=7)
            r2 = best_time(lambda: s2.spectrum([next(values)]), repeat=9)
            r1 = best_time(lambda: s1.spectrum([next(values)]), repeat=9)
        print(f"{threads} thread(s): 3QMAS 256 x 512, whole simulation  {t2 * 1e3:7.1f} ms (target 50 ms); "
              f"1D MAS {t1 * 1e3:6.1f} ms; ratio 2D/1D {t2 / t1:5.1f}")
        print(f"{threads} thread(s): 3QMAS 256 x 512, new C_Q (fit step) {r2 * 1e3:7.1f} ms;                "
              f"1D MAS {r1 * 1e3:6.1f} ms; ratio 2D/1D {r2 / r1:5.1f}")


def fit_two_sites() -> None:
    """A two-site 2D fit (6 free parameters) on synthetic data: target 5 s (issue 15)."""
    import time

    import numpy as np

    from powderspin.fitting.two_dimensional import fit_two_dimensional
    from powderspin.io.spectra2d import MeasuredSpectrum2D

    def model(v):
        def free(x, lo, hi):
            return {"start": x, "min": lo, "max": hi}
        sites = [{"label": "A", "cq_mhz": free(v[0], 1, 6), "shift_ppm": free(v[1], 40, 80), "eta_q": free(v[2], 0, 1)},
                 {"label": "B", "cq_mhz": free(v[3], 1, 6), "shift_ppm": free(v[4], 40, 80), "eta_q": free(v[5], 0, 1)}]
        meas = {"field_tesla": 9.4, "spinning_hz": "inf", "experiment": "mqmas", "points": 256, "f1_points": 64,
                "orientations": 24, "gauss_hz": 600.0, "f1_gauss_hz": 300.0, "center_ppm": 50.0, "width_ppm": 60.0,
                "f1_center_ppm": 58.0, "f1_width_ppm": 30.0}
        return make_model("27Al", meas, sites)

    truth = simulate(model([3.5, 60.0, 0.5, 2.0, 52.0, 0.2]))
    y = truth.intensity + np.random.default_rng(1).normal(0, 0.01 * truth.intensity.max(), truth.shape)
    data = MeasuredSpectrum2D(truth.f1_ppm, truth.f2_ppm, y, truth.metadata["nu_ref_hz"], "synthetic")
    start = model([3.0, 58.0, 0.35, 2.5, 54.0, 0.35])
    with kernel_threads(1):
        fit_two_dimensional(start, {0: data}, max_evaluations=3)  # warm
        t0 = time.perf_counter()
        r = fit_two_dimensional(start, {0: data})
        dt = time.perf_counter() - t0
    print(f"two-site 3QMAS fit, 64 x 256 points, 6 free: {dt:.2f} s (target 5 s), {r.n_evaluations} evaluations, "
          f"{1e3 * dt / max(1, r.n_evaluations):.1f} ms each")


def _three_propagator_weights(frame, vectors, seq, rotor_angle_rad, phases=8):
    """The previous route, kept here for the ratio: three full propagators per row (public pulse_propagators),
    the pathway by numpy einsum, the same efficiency rule."""
    import numpy as np

    from powderspin.engine.pulses import pathway_signs, pulse_propagators, rotating_frame_levels

    lv = rotating_frame_levels(frame, vectors, rotor_angle_rad=rotor_angle_rad, phases=phases,
                               carrier_offset_hz=seq.carrier_offset_hz)
    spin = (lv.shape[1] - 1) / 2
    mz = spin - np.arange(lv.shape[1])
    u1 = pulse_propagators(lv, seq.nu1_hz, seq.excite_s)
    u2 = pulse_propagators(lv, seq.nu1_hz, seq.convert_s)
    u3 = pulse_propagators(lv, seq.selective_nu1_hz, seq.selective_s) if seq.kind == "z-filter" else None
    hi, lo = int(round(spin - seq.order / 2)), int(round(spin + seq.order / 2))
    ct_lo, ct_hi = int(round(spin + 0.5)), int(round(spin - 0.5))
    amp = np.empty((lv.shape[0], 2), dtype=complex)
    for col, (a, b) in enumerate(((hi, lo), (lo, hi))):
        r1 = np.einsum("nq,q,nq->n", u1[:, a, :], mz, np.conj(u1[:, b, :]))
        if u3 is None:
            amp[:, col] = (spin + 0.5) * r1 * u2[:, ct_lo, a] * np.conj(u2[:, ct_hi, b])
        else:
            pop = r1[:, None] * u2[:, :, a] * np.conj(u2[:, :, b])
            amp[:, col] = (spin + 0.5) * np.einsum("nq,nq,nq->n", u3[:, ct_lo, :], pop, np.conj(u3[:, ct_hi, :]))
    signs = pathway_signs(spin, seq)
    cols = {seq.order: 0, -seq.order: 1}
    parts = [signs[cols[q]] * (1j * amp[:, cols[q]]).real for q in seq.t1_orders]
    return (np.mean(parts, axis=0) / ((spin + 0.5) ** 2 / 2)).reshape(-1, phases).mean(axis=1)


def finite_pulse_weights() -> None:
    """Finite-pulse 3QMAS weights of one 27Al site at the 2D default orientation set (z-filter, 8 rotor phases).

    Printed: the weights alone (every orientation x rotor phase) through the fused kernel and through the previous
    route (three full propagators per row and numpy einsum: ratio old/new, results compared), the same site's whole
    ideal-excitation 2D simulation and the ratio to it; then a fit step at a new C_Q with the pulses (the weights
    are recomputed: the job changed) against one without.  Targets (issue 15, MQMAS): weights <= 30 ms on one
    thread, a fit step with pulses within about 10x of the ideal one.
    """
    import math

    import numpy as np

    from powderspin.engine.two_dimensional import mq_excitation

    meas = {"field_tesla": 14.1, "spinning_hz": "inf", "experiment": "mqmas", "mq_order": 3, "points": 512,
            "f1_points": 256, "gauss_hz": 150.0, "f1_gauss_hz": 150.0}
    pulses = {"mq_pulses": "z-filter", "mq_rf_khz": 100.0, "mq_excite_us": 3.5, "mq_convert_us": 1.2,
              "zfilter_rf_khz": 10.0}
    site = {"label": "Al", "shift_ppm": 60.0, "cq_mhz": {"start": 4.0, "min": 1.0, "max": 10.0}, "eta_q": 0.4}
    ideal = make_model("27Al", meas, [site])
    real = make_model("27Al", {**meas, **pulses}, [site])
    s_ideal, s_real = Simulator(ideal), Simulator(real)
    s_real.spectrum()
    lines, f1 = s_real._two_d_lines(real, 0)
    seq = f1.pulses
    job = lines.job
    angle = math.radians(job.rotor_angle_deg)

    def old():
        return _three_propagator_weights(job.frame(), lines.orientations.vectors, seq, angle)

    diff = float(np.abs(old() - mq_excitation(lines, f1, seq).excitation).max())
    print(f"fused kernel against the three-propagator route: largest difference {diff:.1e}")
    values = iter(4.0 + 1e-3 * k for k in range(1, 10000))
    for threads in (1, 2):
        with kernel_threads(threads):
            tw = best_time(lambda: mq_excitation(lines, f1, seq), repeat=7)
            to = best_time(old, repeat=3)
            t2 = best_time(lambda: simulate(ideal), repeat=5)
            ri = best_time(lambda: s_ideal.spectrum([next(values)]), repeat=7)
            rr = best_time(lambda: s_real.spectrum([next(values)]), repeat=7)
        n = lines.orientations.size
        print(f"{threads} thread(s): 27Al 3QMAS z-filter weights, {n} orientations x 8 rotor phases: "
              f"{tw * 1e3:7.1f} ms (target 30 ms); three-propagator route {to * 1e3:7.1f} ms; ratio old/new "
              f"{to / tw:5.1f}; ideal 2D simulation {t2 * 1e3:6.1f} ms; weights/ideal {tw / t2:5.1f}")
        print(f"{threads} thread(s): fit step at a new C_Q with the pulses {rr * 1e3:7.1f} ms; "
              f"ideal {ri * 1e3:6.1f} ms; ratio {rr / ri:5.1f} (target about 10)")


def czjzek_with_pulses() -> None:
    """An EFG-distributed (Czjzek) 27Al site in 3QMAS, ideal and with finite z-filter pulses, on one thread.

    Each grid node is a site of its own with its own per-orientation efficiencies.  Printed: the nodes, and the
    time of a step at the same values, at a new shift (no node moves: the efficiencies come from the node memo)
    and at a new Czjzek width (every node moves: one efficiency computation per node), with the ratio
    pulses/ideal of each.
    """
    import time

    meas = {"field_tesla": 14.1, "spinning_hz": "inf", "experiment": "mqmas", "mq_order": 3, "points": 256,
            "f1_points": 128, "gauss_hz": 1500.0, "f1_gauss_hz": 300.0}
    pulses = {"mq_pulses": "z-filter", "mq_rf_khz": 100.0, "mq_excite_us": 3.5, "mq_convert_us": 1.2,
              "zfilter_rf_khz": 10.0}
    site = {"label": "glass", "shift_ppm": {"start": 60.0, "min": 0.0, "max": 100.0}, "cq_mhz": 0.0,
            "czjzek_sigma_mhz": {"start": 2.0, "min": 0.5, "max": 5.0}}
    steps = (("same values", [60.0, 2.0]), ("new shift", [61.0, 2.0]), ("new sigma", [61.0, 2.02]))
    times = {}
    for name, extra in (("ideal", {}), ("pulses", pulses)):
        sim = Simulator(make_model("27Al", {**meas, **extra}, [site]))
        with kernel_threads(1):
            sim.spectrum()
            for label, vals in steps:
                t0 = time.perf_counter()
                sim.spectrum(vals)
                times[name, label] = time.perf_counter() - t0
        parts = sim._two_d_parts(sim.model, 0)
    print(f"Czjzek 27Al site (sigma 2 MHz), 3QMAS 128 x 256: {len(parts)} nodes x {parts[0][0].orientations.size} "
          "orientations (x 8 rotor phases with pulses), 1 thread, one run each:")
    for label, _ in steps:
        ti, tp = times["ideal", label], times["pulses", label]
        print(f"  {label:12s} ideal {ti * 1e3:8.1f} ms; z-filter pulses {tp * 1e3:8.1f} ms; ratio {tp / ti:6.1f}")


if __name__ == "__main__":
    main()
    finite_pulse_weights()
    czjzek_with_pulses()
    fit_two_sites()
