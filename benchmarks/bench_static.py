"""Static powder patterns: warm timings and ratios to a plain numpy version.

Targets (DEVELOPERS.md, 'Performance'): a static CT or shift-anisotropy pattern with
>= 1e4 orientations, triangle interpolation and 4096 points in <= 5 ms warm.

Run:  python benchmarks/bench_static.py
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import best_time, numpy_tent  # noqa: E402

from powderspin.engine.frequencies import site_frame  # noqa: E402
from powderspin.engine.lineshape import bin_lines, make_axis  # noqa: E402
from powderspin.engine.site_lines import compute_lines, site_job  # noqa: E402
from powderspin.model.modelfile import make_model  # noqa: E402
from powderspin.model.values import selected_transitions  # noqa: E402
from powderspin.physics.orientations import triangulated  # noqa: E402
from powderspin.simulator import simulate  # noqa: E402


def numpy_frequencies(frame, vecs, m):
    """Plain numpy: first-order shift + 1st/2nd-order quadrupolar offsets of m -> m-1."""
    spin, k, nu0 = frame.spin, frame.quad_constant_hz, frame.nu0_hz
    x = spin * (spin + 1)
    v = frame.efg_principal_values
    vzz = (vecs**2) @ v
    a = (vecs**2) @ (v**2) - vzz**2
    bq = 2 * np.sum(v**2) - 3 * vzz**2 - 4 * a
    dzz = np.einsum("ni,ij,nj->n", vecs, frame.shift_tensor_ppm, vecs)

    def e2(mm):
        return -(k * k / (2 * nu0)) * mm * ((4 * x - 8 * mm * mm - 1) * a - (2 * x - 2 * mm * mm - 1) * bq / 4)

    return 1.5 * k * (2 * m - 1) * vzz + e2(m) - e2(m - 1) + nu0 * 1e-6 * dzz


def run_case(label, nucleus, site, field=14.1, subdivisions=140, points=4096):
    model = make_model(nucleus, {"field_tesla": field, "points": points, "orientations": subdivisions,
                                 "method": "perturbation"}, [site])
    frame = site_frame(model.sites[0], model.nucleus, field)
    oset = triangulated(subdivisions, frame.symmetry)
    ms = selected_transitions(model.nucleus.spin, "central")
    job = site_job(model.sites[0], model.measurement, model.nucleus, "perturbation", oset, carry_shift=True)
    lines = compute_lines(job, orientations=oset)
    lo, hi = lines.frequency_range()
    axis = make_axis(points, frame.nu0_hz, None, None, (lo, hi))

    def engine():
        sl = compute_lines(job, orientations=oset)
        return bin_lines(axis, sl.mean, sl.intensity, sl.weights, oset, "interpolate")

    def plain_numpy():
        f = numpy_frequencies(frame, np.asarray(oset.vectors), ms[0])[:, None]
        return numpy_tent(f, np.asarray(oset.triangles), np.asarray(oset.triangle_weights),
                          np.ones_like(f), axis.left_edge_hz, axis.dx_hz, axis.points)

    diff = np.abs(engine() - plain_numpy()).max()
    t_e = best_time(engine, repeat=15)
    t_n = best_time(plain_numpy, repeat=3)
    t_full = best_time(lambda: simulate(model), repeat=7)
    print(f"{label:<38} {oset.size:>6} orientations, {points} points: "
          f"core {t_e * 1e3:7.2f} ms | full simulate() {t_full * 1e3:7.2f} ms | "
          f"plain numpy {t_n * 1e3:7.1f} ms | ratio numpy/core {t_n / t_e:5.1f} | max diff {diff:.1e}")
    return t_e


def main():
    import numba

    print(f"numba threads: {numba.get_num_threads()} (target: <= 5 ms per pattern, core)")
    run_case("27Al CT static (C_Q 5 MHz, eta 0.3)", "27Al", {"cq_mhz": 5.0, "eta_q": 0.3})
    run_case("31P shift anisotropy static", "31P", {"shift_ppm": 5.0, "span_ppm": 180.0, "skew": 0.4})


if __name__ == "__main__":
    main()
