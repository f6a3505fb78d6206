"""Slow, obvious evaluation of homogeneous polynomials in B0's direction on the rotor cone.

Twin of ``powderspin.engine._kernels._cone_polynomial``; plain numpy, no powderspin imports.
The cone about the rotor axis ``n`` is parametrised with a perpendicular pair (u, v) passed in
by the caller, so the phase origin can be matched to the kernel's.
"""

from __future__ import annotations

import numpy as np

__all__ = ["cone_polynomial"]


def cone_polynomial(n, u, v, rotor_angle_rad, phases, exponents, coef):
    """Sum_c coef[r, c] b_x^a b_y^b b_z^c at b(phi) = cos(theta) n + sin(theta)(cos(phi) u + sin(phi) v).

    Returns (R, phases).
    """
    phi = 2 * np.pi * np.arange(phases) / phases
    b = (np.cos(rotor_angle_rad) * np.asarray(n)[None, :]
         + np.sin(rotor_angle_rad) * (np.cos(phi)[:, None] * np.asarray(u)[None, :]
                                      + np.sin(phi)[:, None] * np.asarray(v)[None, :]))
    out = np.zeros((coef.shape[0], phases))
    for c, (a, bb, cc) in enumerate(np.asarray(exponents)):
        mono = b[:, 0] ** a * b[:, 1] ** bb * b[:, 2] ** cc
        out += coef[:, c:c + 1] * mono[None, :]
    return out
