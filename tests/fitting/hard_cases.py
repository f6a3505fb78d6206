"""Hard fitting cases: a static central transition with shift anisotropy and a quadrupolar coupling at a general
relative orientation (eight parameters and the broadening), with seeded noise and a known truth.

The synthetic spectra come from the engine itself: these cases test the search, the folding of equivalent values and
the intervals (properties of the optimiser and the statistics), not the physics, which the tests of
``tests/engine`` check against exact diagonalisation and analytic results.  A signal-free stretch at the high-ppm end
of the axis is the noise region, so chi-square values are comparable between fits.
"""

from __future__ import annotations

import functools

import numpy as np

import powderspin as ps
from powderspin.io.spectra import MeasuredSpectrum

#: (nucleus, C_Q MHz, span ppm, field T): 93Nb is spin 9/2, 59Co spin 7/2
CASES = {
    "nb93": ("93Nb", 20.0, 300.0, 9.4),
    "co59": ("59Co", 12.0, 400.0, 9.4),
}
TRUTH_ANGLES = (40.0, 60.0, 25.0)
NAMES = ("measurement 1.gauss_hz", "X.shift_ppm", "X.cq_mhz", "X.eta_q", "X.span_ppm", "X.skew", "X.euler_deg[0]",
         "X.euler_deg[1]", "X.euler_deg[2]")


def _meas(case, points):
    nuc, cq, span, field = CASES[case]
    return {"field_tesla": field, "points": points, "orientations": "coarse", "method": "perturbation"}


@functools.lru_cache(maxsize=None)
def _clean(case, points):
    nuc, cq, span, field = CASES[case]
    site = dict(label="X", shift_ppm=-1000.0, cq_mhz=cq, eta_q=0.4, span_ppm=span, skew=0.3,
                euler_deg=list(TRUTH_ANGLES))
    m = ps.make_model(nuc, dict(_meas(case, points), gauss_hz=1500.0), [site])
    s = ps.simulate(m)
    lo, hi = float(s.ppm.min()), float(s.ppm.max())
    meas = dict(_meas(case, points), center_ppm=0.5 * (lo + hi) + 0.15 * (hi - lo), width_ppm=1.3 * (hi - lo),
                gauss_hz=1500.0)
    s = ps.simulate(ps.make_model(nuc, meas, [site]))
    noise = (float(s.ppm.max()), float(s.ppm.max() - 0.12 * (s.ppm.max() - s.ppm.min())))
    return s, meas, noise


def truth(case) -> list:
    nuc, cq, span, field = CASES[case]
    return [1500.0, -1000.0, cq, 0.4, span, 0.3, *TRUTH_ANGLES]


def data(case, seed, snr=200.0, points=192):
    """The measured spectrum (tallest point 1, white noise 1/snr) and the noise region."""
    s, meas, noise = _clean(case, points)
    y = s.intensity / s.intensity.max() + np.random.default_rng(seed).normal(0.0, 1.0 / snr, s.hz.size)
    return MeasuredSpectrum(s.hz, s.ppm, y, None, s.nu_ref_hz, "synthetic"), noise


def model(case, start, points=192):
    """The model to fit, free parameters in the order of NAMES, starting at ``start``."""
    nuc, cq, span, field = CASES[case]
    _, meas, _ = _clean(case, points)

    def free(v, lo, hi):
        return {"start": float(v), "min": lo, "max": hi}

    st = list(start)
    return ps.make_model(nuc, dict(meas, gauss_hz=free(st[0], 500.0, 5000.0)), [dict(
        label="X", shift_ppm=free(st[1], -1100.0, -900.0), cq_mhz=free(st[2], 0.5 * cq, 1.5 * cq),
        eta_q=free(st[3], 0.0, 1.0), span_ppm=free(st[4], 0.5 * span, 1.5 * span), skew=free(st[5], -1.0, 1.0),
        euler_deg=[free(st[6], 0.0, 180.0), free(st[7], 0.0, 180.0), free(st[8], 0.0, 180.0)])])


def poor_start(case) -> list:
    nuc, cq, span, field = CASES[case]
    return [1000.0, -950.0, 0.7 * cq, 0.9, 0.7 * span, -0.3, 100.0, 30.0, 150.0]
