"""Slow, obvious twins of the fused MAS kernel and of the band summary.

Twin of ``powderspin.engine._kernels._perturbative_sidebands``: for each rotor axis
``n`` the B0 direction is walked round its cone at many rotor phases
(``b(phi) = cos(theta_R) n + sin(theta_R) (cos(phi) u + sin(phi) v)`` with any
orthonormal pair ``u, v`` perpendicular to ``n``: the sideband intensities do
not depend on the phase origin), the perturbative offsets are evaluated with
the literal level-energy formulas of :mod:`tests.reference.perturbative_numpy`,
and the sideband intensities come from the fine numerical phase integral of
:mod:`tests.reference.sidebands_numpy` (not from an FFT of a few samples).

Twin of ``powderspin.engine._kernels._band_summary``: plain numpy sums over the
orientation and transition axes.

Sources: M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300; M. H.
Levitt, J. Magn. Reson. 82 (1989) 427 (gamma-averaged sideband intensities
|F_n|^2).
"""

from __future__ import annotations

import numpy as np

from .perturbative_numpy import perturbative_transitions
from .sidebands_numpy import sideband_intensities, trig_interpolant

__all__ = ["cone_directions", "mas_sidebands", "band_summary"]


def cone_directions(n, rotor_angle_rad, phases):
    """B0 directions on the cone about the unit vector ``n`` at ``phases`` equally spaced rotor phases."""
    n = np.asarray(n, dtype=float) / np.linalg.norm(n)
    trial = np.array([1.0, 0.0, 0.0]) if abs(n[0]) < 0.9 else np.array([0.0, 1.0, 0.0])
    u = np.cross(n, trial)
    u /= np.linalg.norm(u)
    v = np.cross(n, u)
    phi = 2 * np.pi * np.arange(phases) / phases
    return (np.cos(rotor_angle_rad) * n[None, :]
            + np.sin(rotor_angle_rad) * (np.cos(phi)[:, None] * u[None, :] + np.sin(phi)[:, None] * v[None, :]))


def mas_sidebands(spin, nu0_hz, cq_hz, eta_q, shift_tensor_ppm, axes, ms, rotor_angle_rad, rate_hz, phases,
                  samples=64, fine=8192):
    """Centre-band positions (N, T) and sideband intensities (N, T, phases) in FFT order.

    ``samples`` phases of the literal perturbative offsets define each
    trajectory exactly (it is a trigonometric polynomial of degree <= 4), and
    ``fine`` points of the numerical phase integral give |F_n|^2; bands beyond
    +-phases/2 are folded in as an FFT of ``phases`` samples would alias them,
    so that the twin and the kernel describe the same discrete quantity.
    """
    axes = np.atleast_2d(np.asarray(axes, dtype=float))
    mean = np.empty((len(axes), len(ms)))
    amp = np.empty((len(axes), len(ms), phases))
    for i, n in enumerate(axes):
        b = cone_directions(n, rotor_angle_rad, samples)
        traj = perturbative_transitions(spin, nu0_hz, cq_hz, eta_q, shift_tensor_ppm, b, ms)  # (samples, T)
        for t in range(len(ms)):
            nu = trig_interpolant(traj[:, t])
            m, inten = sideband_intensities(nu, rate_hz, samples_per_period=fine)
            mean[i, t] = m
            order = np.fft.fftfreq(fine, 1.0 / fine).astype(int)
            folded = np.zeros(phases)
            np.add.at(folded, order % phases, inten)
            amp[i, t] = folded
    return mean, amp


def band_summary(amp, weights, mean):
    """Per band: weighted intensity, weighted position sum and largest single intensity."""
    w = weights[:, :, None] * amp
    return w.sum(axis=(0, 1)), (w * mean[:, :, None]).sum(axis=(0, 1)), amp.max(axis=(0, 1))
