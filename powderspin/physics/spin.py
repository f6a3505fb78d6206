"""Spin angular-momentum operators for any spin quantum number I = 1/2 ... 9/2 (and beyond).

Basis order: |I, m> with m = I, I-1, ..., -I (index 0 is m = +I).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["SpinOperators", "spin_operators", "magnetic_numbers", "check_spin"]


def check_spin(spin: float, name: str = "spin") -> float:
    """Validate a spin quantum number: a positive multiple of 1/2.

    Parameters
    ----------
    spin : float
        Nuclear spin quantum number I (dimensionless), 1/2 ... 20.
    name : str, optional
        Field name used in the error message.

    Returns
    -------
    float
        I rounded to the nearest multiple of 1/2.

    Raises
    ------
    ValueError
        If ``spin`` is not a positive multiple of 1/2 in [1/2, 20].

    References
    ----------
    J. J. Sakurai, *Modern Quantum Mechanics* (1994), sec. 3.5 (allowed values
    of the angular-momentum quantum number).

    Examples
    --------
    >>> check_spin(2.5)
    2.5
    >>> try:
    ...     check_spin(0.7)
    ... except ValueError as e:
    ...     print(e)
    spin = 0.7 must be a positive multiple of 1/2 (1/2 ... 20)
    """
    try:
        s = float(spin)
    except (TypeError, ValueError):
        s = math.nan
    # isfinite first: round(inf) would raise OverflowError, not ValueError
    if not (math.isfinite(s) and s > 0 and abs(2 * s - round(2 * s)) < 1e-12 and s <= 20):
        raise ValueError(f"{name} = {spin!r} must be a positive multiple of 1/2 (1/2 ... 20)")
    return round(2 * s) / 2.0


def magnetic_numbers(spin: float) -> np.ndarray:
    """Magnetic quantum numbers m = I, I-1, ..., -I (the basis order).

    Parameters
    ----------
    spin : float
        Nuclear spin quantum number I, a positive multiple of 1/2.

    Returns
    -------
    numpy.ndarray, shape (2I+1,)
        m values in descending order.

    References
    ----------
    J. J. Sakurai, *Modern Quantum Mechanics* (1994), sec. 3.5.

    Examples
    --------
    >>> magnetic_numbers(1.5).tolist()
    [1.5, 0.5, -0.5, -1.5]
    """
    s = check_spin(spin)
    return s - np.arange(int(round(2 * s)) + 1)


@dataclass(frozen=True)
class SpinOperators:
    """Matrices of Ix, Iy, Iz, I+ and I- in the |I, m> basis (m descending).

    Built by :func:`spin_operators`; the matrices are read-only.

    Parameters
    ----------
    spin : float
        Nuclear spin quantum number I.
    x, y, z, plus, minus : numpy.ndarray, shape (2I+1, 2I+1)
        Complex matrices of Ix, Iy, Iz, I+ and I- (units of hbar).

    References
    ----------
    J. J. Sakurai, *Modern Quantum Mechanics* (1994), sec. 3.5.

    Examples
    --------
    >>> ops = spin_operators(1.0)
    >>> ops.dimension, ops.plus[0, 1].real.round(6).tolist()
    (3, 1.414214)
    """

    spin: float
    x: np.ndarray
    y: np.ndarray
    z: np.ndarray
    plus: np.ndarray
    minus: np.ndarray

    @property
    def dimension(self) -> int:
        """Number of Zeeman levels 2I + 1.

        Returns
        -------
        int
            Size of the matrices.

        References
        ----------
        J. J. Sakurai, *Modern Quantum Mechanics* (1994), sec. 3.5.

        Examples
        --------
        >>> spin_operators(2.5).dimension
        6
        """
        return self.z.shape[0]


def spin_operators(spin: float) -> SpinOperators:
    """Spin operators for spin quantum number ``spin``.

    Parameters
    ----------
    spin : float
        I, a positive multiple of 1/2 (e.g. 0.5, 2.5).

    Returns
    -------
    SpinOperators
        Complex (2I+1)x(2I+1) matrices, basis m = I ... -I, with
        ``<m+1|I+|m> = sqrt(I(I+1) - m(m+1))``.

    References
    ----------
    J. J. Sakurai, *Modern Quantum Mechanics* (1994), sec. 3.5.

    Examples
    --------
    >>> ops = spin_operators(0.5)
    >>> ops.z.real.tolist()
    [[0.5, 0.0], [0.0, -0.5]]
    """
    s = check_spin(spin)
    m = magnetic_numbers(s)
    n = m.size
    plus = np.zeros((n, n), dtype=complex)
    for j in range(1, n):
        # row j-1 has m[j] + 1
        plus[j - 1, j] = np.sqrt(s * (s + 1) - m[j] * (m[j] + 1))
    minus = plus.conj().T.copy()
    x = 0.5 * (plus + minus)
    y = -0.5j * (plus - minus)
    z = np.diag(m).astype(complex)
    for a in (x, y, z, plus, minus):
        a.flags.writeable = False
    return SpinOperators(s, x, y, z, plus, minus)
