"""Slow, obvious spectra of a site with a distribution of EFG tensors, by brute-force sampling.

Independent of the kernel grid of :mod:`powderspin.disorder.site`: no (C_Q, eta)
grid, no orientation set, no triangle interpolation, no scaling of unit
patterns.  Each sampled (C_Q, eta) (e.g. from
:func:`powderspin.physics.distributions.sample_czjzek`) is one "site" seen by
``n_axes`` random rotor axes (uniform on the sphere); for each axis the B0
direction is walked round the cone at the rotor angle
(:func:`tests.reference.mas_numpy.cone_directions` in vector form), the EFG is
written in the laboratory frame explicitly (``R^T V R`` with the lab rotation
of :func:`tests.reference.exact_numpy.lab_rotation`, vectorised), and the
central-transition offset is the literal level-energy difference
``E2(1/2) - E2(-1/2)`` of :func:`tests.reference.perturbative_numpy.level_energy_second`
(design notes section 2), averaged over the rotor phases (infinitely fast
spinning) or taken at one direction (static).  All lines are histogrammed
with equal weight and convolved with a Gaussian written out as a matrix.

Sources: G. Czjzek et al., Phys. Rev. B 23 (1981) 2513 (the random tensors);
design notes section 2 (level energies); the Gaussian line shape
exp(-4 ln 2 x^2 / FWHM^2) (common practice).
"""

from __future__ import annotations

import numpy as np

from .exact_numpy import efg_principal_values
from .perturbative_numpy import level_energy_second

__all__ = ["ct_offsets", "gaussian_convolution", "histogram_spectrum", "lab_rotations", "random_unit_vectors"]


def random_unit_vectors(n, rng):
    """n directions uniform on the sphere (normalised Gaussian vectors)."""
    v = rng.standard_normal((n, 3))
    return v / np.linalg.norm(v, axis=1, keepdims=True)


def lab_rotations(b):
    """Rotations (n, 3, 3) whose columns are lab x, y, z (z = b), as exact_numpy.lab_rotation, for many b."""
    b = np.asarray(b, dtype=float)
    theta = np.arccos(np.clip(b[:, 2], -1.0, 1.0))
    phi = np.arctan2(b[:, 1], b[:, 0])
    cp, sp, ct, st = np.cos(phi), np.sin(phi), np.cos(theta), np.sin(theta)
    rz = np.zeros((len(b), 3, 3))
    rz[:, 0, 0], rz[:, 0, 1], rz[:, 1, 0], rz[:, 1, 1], rz[:, 2, 2] = cp, -sp, sp, cp, 1.0
    ry = np.zeros((len(b), 3, 3))
    ry[:, 0, 0], ry[:, 0, 2], ry[:, 1, 1], ry[:, 2, 0], ry[:, 2, 2] = ct, st, 1.0, -st, ct
    return rz @ ry


def ct_offsets(spin, nu0_hz, cq_hz, eta_q, b):
    """Second-order CT offsets (Hz) for B0 directions b (n, 3) in the EFG principal frame.

    ``cq_hz`` and ``eta_q`` are scalars or arrays of n values (one crystallite each).
    """
    n = len(b)
    eta = np.broadcast_to(np.asarray(eta_q, dtype=float), (n,))
    lam = np.stack([efg_principal_values(e) for e in eta]) if eta.size < 64 else \
        np.stack([-(1 - eta) / 2, -(1 + eta) / 2, np.ones(n)], axis=1)
    r = lab_rotations(b)

    def v(i, k):  # lab component (R^T diag(lam) R)_ik, written out
        return (r[:, 0, i] * lam[:, 0] * r[:, 0, k] + r[:, 1, i] * lam[:, 1] * r[:, 1, k]
                + r[:, 2, i] * lam[:, 2] * r[:, 2, k])

    comp = {1: -(v(0, 2) + 1j * v(1, 2)), 2: (v(0, 0) - v(1, 1) + 2j * v(0, 1)) / 2}
    cq = np.broadcast_to(np.asarray(cq_hz, dtype=float), (n,))
    return (level_energy_second(spin, cq, nu0_hz, 0.5, comp)
            - level_energy_second(spin, cq, nu0_hz, -0.5, comp))


def site_lines(spin, nu0_hz, cq_hz, eta_q, n_axes, rng, rotor_angle_rad=None, phases=8):
    """CT line positions (Hz) for random rotor axes (MAS, infinite rate) or random B0 directions (static).

    ``cq_hz`` and ``eta_q`` are scalars (one site, ``n_axes`` crystallites) or arrays of k sampled values
    (k sites with ``n_axes`` crystallites each; the result is flat, k * n_axes lines).
    """
    cq = np.repeat(np.atleast_1d(np.asarray(cq_hz, dtype=float)), n_axes)
    eta = np.repeat(np.atleast_1d(np.asarray(eta_q, dtype=float)), n_axes)
    axes = random_unit_vectors(len(cq), rng)
    if rotor_angle_rad is None:
        return ct_offsets(spin, nu0_hz, cq, eta, axes)
    trial = np.where(np.abs(axes[:, :1]) < 0.9, [[1.0, 0.0, 0.0]], [[0.0, 1.0, 0.0]])
    u = np.cross(axes, trial)
    u /= np.linalg.norm(u, axis=1, keepdims=True)
    w = np.cross(axes, u)
    total = np.zeros(len(cq))
    for k in range(phases):
        ph = 2 * np.pi * k / phases
        b = np.cos(rotor_angle_rad) * axes + np.sin(rotor_angle_rad) * (np.cos(ph) * u + np.sin(ph) * w)
        total += ct_offsets(spin, nu0_hz, cq, eta, b)
    return total / phases


def histogram_spectrum(lines_hz, edges_hz):
    """Fraction of the lines in each bin."""
    h, _ = np.histogram(lines_hz, bins=edges_hz)
    return h / float(len(lines_hz))


def gaussian_convolution(y, dx_hz, fwhm_hz):
    """Convolution with a unit-area Gaussian of the given FWHM, as an explicit matrix (no FFT)."""
    n = len(y)
    x = (np.arange(n)[:, None] - np.arange(n)[None, :]) * dx_hz
    g = np.exp(-4 * np.log(2) * x**2 / fwhm_hz**2)
    g *= dx_hz * 2 * np.sqrt(np.log(2) / np.pi) / fwhm_hz
    return g @ y
