"""Spinning samples: warm timings and ratios to plain numpy and a time-domain reference.

Targets (DEVELOPERS.md, 'Performance'): MAS CT + shift anisotropy with sidebands,
>= 4000 orientations x 64 rotor phases <= 10 ms; a satellite-transition
manifold at 10 kHz for C_Q = 3 MHz <= 0.5 s; exact route for I = 9/2 under
MAS <= 2 s.

Run:  python benchmarks/bench_spinning.py
"""

from __future__ import annotations

import math
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(ROOT))
from _common import best_time, numpy_tent  # noqa: E402

from powderspin.engine.frequencies import site_frame  # noqa: E402
from powderspin.engine.lineshape import bin_lines, make_axis  # noqa: E402
from powderspin.engine.site_lines import compute_lines, site_job  # noqa: E402
from powderspin.model.modelfile import make_model  # noqa: E402
from powderspin.physics.orientations import triangulated  # noqa: E402
from powderspin.simulator import simulate  # noqa: E402


def numpy_mas(frame, vecs, m, theta, p, rate):
    """Plain numpy version of the same steps: trajectories, FFTs, |F_n|^2."""
    spin, k, nu0 = frame.spin, frame.quad_constant_hz, frame.nu0_hz
    x = spin * (spin + 1)
    n = vecs
    e = np.where(np.abs(n[:, :1]) <= np.min(np.abs(n[:, 1:]), axis=1, keepdims=True),
                 np.array([[1.0, 0, 0]]), np.where(np.abs(n[:, 1:2]) <= np.abs(n[:, 2:3]),
                                                   np.array([[0, 1.0, 0]]), np.array([[0, 0, 1.0]])))
    u = np.cross(n, e)
    u /= np.linalg.norm(u, axis=1)[:, None]
    v = np.cross(n, u)
    ph = 2 * np.pi * np.arange(p) / p
    b = (math.cos(theta) * n[:, None, :] + math.sin(theta) * (np.cos(ph)[None, :, None] * u[:, None, :]
                                                               + np.sin(ph)[None, :, None] * v[:, None, :]))
    vd = frame.efg_principal_values
    vzz = (b**2) @ vd
    a = (b**2) @ (vd**2) - vzz**2
    bq = 2 * np.sum(vd**2) - 3 * vzz**2 - 4 * a
    dzz = np.einsum("npi,ij,npj->np", b, frame.shift_tensor_ppm, b)

    def e2(mm):
        return -(k * k / (2 * nu0)) * mm * ((4 * x - 8 * mm * mm - 1) * a - (2 * x - 2 * mm * mm - 1) * bq / 4)

    traj = 1.5 * k * (2 * m - 1) * vzz + e2(m) - e2(m - 1) + nu0 * 1e-6 * dzz
    c = np.fft.fft(traj, axis=1) / p
    mean = c[:, 0].real
    kk = np.fft.fftfreq(p, 1.0 / p)
    g = np.zeros_like(c)
    nz = (kk != 0) & (np.abs(kk) < p / 2)
    g[:, nz] = c[:, nz] / (1j * kk[nz] * rate)
    xi = np.fft.ifft(g, axis=1).real * p
    f = np.fft.fft(np.exp(1j * xi), axis=1) / p
    return mean, np.abs(f) ** 2


def case_mas_ct_csa():
    site = {"shift_ppm": 60.0, "cq_mhz": 3.0, "eta_q": 0.4, "span_ppm": 80.0, "skew": 0.3,
            "euler_deg": [20.0, 50.0, 10.0]}
    rate, p = 12500.0, 64
    model = make_model("27Al", {"field_tesla": 14.1, "spinning_hz": rate, "points": 4096, "rotor_phases": p,
                                "method": "perturbation", "orientations": 45}, [site])
    fr = site_frame(model.sites[0], model.nucleus, 14.1)
    oset = triangulated(45, fr.symmetry)
    job = site_job(model.sites[0], model.measurement, model.nucleus, "perturbation", oset, carry_shift=True)
    sl = compute_lines(job, orientations=oset)
    axis = make_axis(4096, fr.nu0_hz, None, None, sl.frequency_range())

    def engine():
        s = compute_lines(job, orientations=oset)
        return bin_lines(axis, s.mean, s.intensity, s.weights, oset, "interpolate", rate, 1e-12)

    def plain():
        mean, amp = numpy_mas(fr, np.asarray(oset.vectors), 0.5, math.radians(model.measurement.rotor_angle_deg),
                              p, rate)
        n = np.fft.fftfreq(p, 1.0 / p)
        freqs = mean[:, None] + n[None, :] * rate
        return numpy_tent(freqs, np.asarray(oset.triangles), np.asarray(oset.triangle_weights), amp,
                          axis.left_edge_hz, axis.dx_hz, axis.points)

    a, b = engine(), plain()
    t_e = best_time(engine, repeat=15)
    t_n = best_time(plain, repeat=3)
    t_full = best_time(lambda: simulate(model), repeat=5)
    print(f"MAS 27Al CT + CSA, {oset.size} orientations x {p} phases, 4096 points: core {t_e * 1e3:.2f} ms "
          f"(target 10 ms) | full simulate() {t_full * 1e3:.1f} ms | plain numpy {t_n * 1e3:.1f} ms "
          f"| ratio numpy/core {t_n / t_e:.1f} | max diff {np.abs(a - b).max() / b.max():.1e} (relative)")
    _time_domain_ratio(t_e)


def _time_domain_ratio(t_engine):
    """The brute-force time-domain reference (tests/reference/time_domain.py) on a CT + CSA case."""
    from tests.reference import time_domain as td

    rate, spp, points = 12500.0, 64, 1024
    nu0 = make_model("27Al", {"field_tesla": 14.1}, [{}]).nucleus.larmor_hz(14.1)
    dx = spp * rate / points
    site = {"shift_ppm": 60.0, "cq_mhz": 3.0, "eta_q": 0.4, "span_ppm": 80.0, "skew": 0.3}
    meas = {"field_tesla": 14.1, "spinning_hz": rate, "points": points, "center_ppm": (0.5 * dx) / nu0 * 1e6,
            "width_ppm": points * dx / nu0 * 1e6, "lorentz_hz": 10 * dx, "method": "perturbation",
            "rotor_phases": 64}
    model = make_model("27Al", meas, [site])
    s = model.sites[0]
    efg = np.diag([-(1 - s.eta_q) / 2, -(1 + s.eta_q) / 2, 1.0])
    shift = np.diag(s.shift.principal_haeberlen)
    spec = simulate(model)
    t0 = time.perf_counter()
    ref = td.spectrum(spec.hz, 2.5, (0.5,), nu0, s.cq_hz, efg, shift, rate, math.radians(54.7356103), 10 * dx, spp,
                      n_beta=48, n_alpha=48, n_gamma=32, region="octant")
    t_td = time.perf_counter() - t0
    t_sim = best_time(lambda: simulate(model), repeat=5)
    y = spec.intensity / (spec.intensity.sum() * dx)
    rms = np.sqrt(np.mean((y - ref) ** 2)) / np.sqrt(np.mean(ref**2))
    print(f"  time-domain reference (48x48 powder x 32 gamma, {points} points): {t_td:.2f} s vs engine "
          f"simulate() {t_sim * 1e3:.1f} ms: ratio {t_td / t_sim:.0f} | relative RMS difference {rms:.2%}")


def case_satellites():
    model = make_model("27Al", {"field_tesla": 14.1, "spinning_hz": 10000.0, "transitions": "all",
                                "points": 8192, "method": "perturbation"},
                       [{"cq_mhz": 3.0, "eta_q": 0.2}])
    t = best_time(lambda: simulate(model), repeat=3)
    spec = simulate(model)
    print(f"27Al all transitions, 10 kHz MAS, C_Q 3 MHz: {t * 1e3:.0f} ms (target 500 ms); "
          f"{spec.metadata['rotor_phases']['site 1']} phases, {spec.metadata['orientations']['site 1']}, "
          f"{len(spec.sidebands)} bands in the table")


def case_exact_92():
    model = make_model("93Nb", {"field_tesla": 9.4, "spinning_hz": 20000.0, "transitions": "central",
                                "points": 4096, "method": "exact"},
                       [{"cq_mhz": 25.0, "eta_q": 0.3}])
    t = best_time(lambda: simulate(model), repeat=3)
    spec = simulate(model)
    print(f"93Nb (I = 9/2) exact route, 20 kHz MAS, C_Q 25 MHz: {t * 1e3:.0f} ms (target 2000 ms); "
          f"{spec.metadata['rotor_phases']['site 1']} phases, {spec.metadata['orientations']['site 1']}")


def main():
    import numba

    print(f"numba threads: {numba.get_num_threads()}")
    case_mas_ct_csa()
    case_satellites()
    case_exact_92()


if __name__ == "__main__":
    main()
