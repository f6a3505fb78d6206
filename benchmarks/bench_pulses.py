"""Finite-pulse excitation weights: warm timings and ratios.

Target (DEVELOPERS.md, 'Performance'): finite-pulse weights for 1e4 orientations of an I = 5/2 site
<= 1 s after compilation.  Printed beside it: the ideal (small-tip) simulation of the same site on the same
orientations with and without the pulse, the weights under spinning, and a plain numpy/scipy version of the weights
(scipy.linalg.expm per orientation) on a subset, scaled.

Run:  python benchmarks/bench_pulses.py
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
from scipy.linalg import expm

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import best_time  # noqa: E402

from powderspin.engine.frequencies import site_frame  # noqa: E402
from powderspin.engine.pulses import PulseSequence, rotating_frame_levels, site_excitation  # noqa: E402
from powderspin.engine.site_lines import compute_lines, render_lines, site_job  # noqa: E402
from powderspin.engine.threads import kernel_threads  # noqa: E402
from powderspin.model.modelfile import make_model  # noqa: E402
from powderspin.physics.orientations import select_orientations  # noqa: E402
from powderspin.physics.spin import spin_operators  # noqa: E402
from powderspin.simulator import Simulator  # noqa: E402

SUBDIVISIONS = 140  # an octant set of about 1e4 directions


def numpy_weights(levels, nu1, t):
    """Plain scipy: expm of the rotating-frame Hamiltonian per orientation, CT signal."""
    ops = spin_operators(2.5)
    ix, iz = ops.x, ops.z
    out = np.empty(len(levels))
    for i, lv in enumerate(levels):
        u = expm(-2j * np.pi * (np.diag(lv) + nu1 * ix) * t)
        rho = u @ iz @ u.conj().T
        out[i] = (3.0 * rho[3, 2] / 1j).real
    return out


def main() -> None:
    oset = select_orientations("octant", SUBDIVISIONS)
    n = oset.size
    meas = {"field_tesla": 14.1, "points": 4096, "orientations": SUBDIVISIONS, "method": "perturbation",
            "transitions": "all"}
    site = {"cq_mhz": 4.0, "eta_q": 0.4}
    model = make_model("27Al", meas, [site])
    frame = site_frame(model.sites[0], model.nucleus, 14.1)
    m_up = [2.5, 1.5, 0.5, -0.5, -1.5]
    rows = []
    for kind, seq in (("single pulse", PulseSequence("single", 50e3, (2e-6,))),
                      ("spin echo", PulseSequence("echo", 50e3, (2e-6, 4e-6)))):
        for threads in (1, 2):
            with kernel_threads(threads):
                t = best_time(lambda: site_excitation(frame, oset.vectors, m_up, seq), repeat=5)
            rows.append((f"{kind}, {n} orientations, all 5 transitions, {threads} thread(s)", t))
    axis = Simulator(model).axis
    ideal_job = site_job(model.sites[0], model.measurement, model.nucleus, "perturbation", oset)
    pulsed_model = make_model("27Al", dict(meas, pulse_sequence="single", pulse_us=2.0, rf_khz=50.0), [site])
    pulsed_job = site_job(pulsed_model.sites[0], pulsed_model.measurement, model.nucleus, "perturbation", oset)

    def lines_and_render(job):
        return render_lines(compute_lines(job, orientations=oset), axis, gauss_hz=500.0).intensity

    with kernel_threads(2):
        t_ideal = best_time(lambda: lines_and_render(ideal_job), repeat=5)
        t_pulsed = best_time(lambda: lines_and_render(pulsed_job), repeat=5)
        theta = np.arccos(1 / np.sqrt(3))
        seq = PulseSequence("single", 50e3, (2e-6,))
        t_mas = best_time(lambda: site_excitation(frame, oset.vectors, m_up, seq, rotor_angle_rad=theta,
                                                  spinning=True), repeat=3)
    lv = rotating_frame_levels(frame, oset.vectors[:500])
    t0 = time.perf_counter()
    numpy_weights(lv, 50e3, 2e-6)
    t_np = (time.perf_counter() - t0) * n / 500
    print("finite-pulse weights, I = 5/2 (27Al, C_Q 4 MHz, nu1 50 kHz), warm, best of 5:")
    for label, t in rows:
        print(f"  {label:<60s} {t * 1e3:8.1f} ms   (target <= 1000 ms)")
    print(f"  ideal lines + rendering of the same site and orientations, 2 threads    {t_ideal * 1e3:8.1f} ms")
    print(f"  the same with the single pulse (weights included), 2 threads           {t_pulsed * 1e3:8.1f} ms   "
          f"(ratio {t_pulsed / t_ideal:.1f})")
    print(f"  single pulse under spinning (weights averaged over 8 rotor phases)     {t_mas * 1e3:8.1f} ms")
    print(f"  plain scipy expm per orientation, CT only (scaled from 500)          {t_np * 1e3:8.1f} ms   "
          f"(engine single pulse, 2 threads, is {t_np / rows[1][1]:.0f}x faster)")


if __name__ == "__main__":
    main()
