"""Wigner rotation matrices of any integer rank (used for ranks 2 and 4).

Convention: ``D^l_{m'm}(alpha, beta, gamma) = exp(-i m' alpha) d^l_{m'm}(beta)
exp(-i m gamma)`` with Wigner's small-d formula, i.e. the matrix elements
``<l m'| exp(-i alpha J_z) exp(-i beta J_y) exp(-i gamma J_z) |l m>`` of the
rotation operator for the active rotation ``Rz(alpha) Ry(beta) Rz(gamma)``
(:func:`powderspin.physics.tensors.rotation_matrix`); ``d^1_{10}(beta) =
-sin(beta)/sqrt 2``.  Matrices are indexed ``[m' + l, m + l]``.

Acting on the spherical components of
:func:`powderspin.physics.tensors.spherical_components` (proportional to
``r^l Y_lm``): if ``T`` are the components of a Cartesian tensor ``t`` and
``T'`` those of ``R t R^T``, then ``T'_{l m'} = sum_m conj(D^l_{m' m}) T_{l m}``,
equivalently ``T_{l m} = sum_{m'} T'_{l m'} D^l_{m' m}`` (components in the
frame whose axes R reaches follow from the reference-frame components through
``D(alpha, beta, gamma)``).  Consistent with ``conj(D^l_{m 0}(alpha, beta, 0))
= sqrt(4 pi/(2l+1)) Y_lm(beta, alpha)``.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["wigner_small_d", "wigner_D"]


def _check_rank(rank) -> int:
    """The rank as an int, or ValueError naming it and the allowed range."""
    try:
        ok = not isinstance(rank, bool) and int(rank) == rank and rank >= 0
    except (TypeError, ValueError, OverflowError):
        ok = False
    if not ok:
        raise ValueError(f"rank = {rank!r} must be a non-negative integer (0, 1, 2, ...)")
    return int(rank)


def _check_angle(name: str, value) -> float:
    """The angle (radians) as a float, or ValueError naming it."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        v = math.nan
    if not math.isfinite(v):
        raise ValueError(f"{name} = {value!r} must be a finite angle in radians (-inf, inf)")
    return v


def wigner_small_d(rank: int, beta: float) -> np.ndarray:
    """Reduced Wigner matrix d^l(beta), shape (2l+1, 2l+1).

    Parameters
    ----------
    rank : int
        l >= 0.
    beta : float
        Rotation angle about y in radians.

    Returns
    -------
    numpy.ndarray, shape (2l+1, 2l+1)
        Real matrix ``d^l_{m'm}(beta)`` indexed ``[m' + l, m + l]``.

    References
    ----------
    E. P. Wigner, *Group Theory* (1959), eq. 15.27; M. E. Rose, *Elementary
    Theory of Angular Momentum* (1957), eq. 4.13.

    Examples
    --------
    >>> import numpy as np
    >>> d = wigner_small_d(2, np.pi / 3)
    >>> round(float(d[2, 2]), 12)  # d^2_00 = P2(cos beta)
    -0.125
    """
    l = _check_rank(rank)
    b = _check_angle("beta", beta)
    c, s = math.cos(b / 2.0), math.sin(b / 2.0)
    f = math.factorial
    d = np.zeros((2 * l + 1, 2 * l + 1))
    for mp in range(-l, l + 1):
        for m in range(-l, l + 1):
            pre = math.sqrt(f(l + mp) * f(l - mp) * f(l + m) * f(l - m))
            tot = 0.0
            for k in range(max(0, m - mp), min(l + m, l - mp) + 1):
                num = (-1) ** (mp - m + k)
                den = f(l + m - k) * f(k) * f(l - mp - k) * f(mp - m + k)
                tot += num / den * c ** (2 * l + m - mp - 2 * k) * s ** (mp - m + 2 * k)
            d[mp + l, m + l] = pre * tot
    return d


def wigner_D(rank: int, alpha: float, beta: float, gamma: float) -> np.ndarray:
    """Wigner rotation matrix D^l(alpha, beta, gamma), shape (2l+1, 2l+1).

    Parameters
    ----------
    rank : int
        l >= 0 (2 and 4 are the ranks NMR needs).
    alpha, beta, gamma : float
        ZYZ Euler angles in radians.

    Returns
    -------
    numpy.ndarray, shape (2l+1, 2l+1)
        Complex unitary matrix ``D^l_{m'm} = exp(-i m' alpha) d^l_{m'm}(beta)
        exp(-i m gamma)`` indexed ``[m' + l, m + l]``.

    References
    ----------
    M. E. Rose, *Elementary Theory of Angular Momentum* (1957), ch. IV.

    Examples
    --------
    >>> import numpy as np
    >>> D = wigner_D(4, 0.1, 0.2, 0.3)
    >>> bool(np.allclose(D @ D.conj().T, np.eye(9)))
    True
    """
    l = _check_rank(rank)
    a, g = _check_angle("alpha", alpha), _check_angle("gamma", gamma)
    m = np.arange(-l, l + 1)
    d = wigner_small_d(l, beta)
    return np.exp(-1j * m * a)[:, None] * d * np.exp(-1j * m * g)[None, :]
