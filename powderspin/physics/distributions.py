r"""Distributions of electric-field gradients (EFG) in disordered solids.

In glasses, amorphous and defective solids every nucleus sees a somewhat
different EFG, so a site is described by a distribution of (C_Q, eta) rather
than by one pair.  This module holds the mathematics: the Czjzek and extended
Czjzek models, their sampling, their closed-form density, (C_Q, eta) grids
with cell weights for summing lineshapes, and the averaged quantities that
spectroscopists quote.

Conventions
-----------
The EFG in its principal frame is ``V = C_Q diag(-(1-eta)/2, -(1+eta)/2, 1)``
(the package-wide convention, see :mod:`powderspin.physics.tensors`): ``V_zz`` is
the principal value of largest magnitude, ``|V_zz| >= |V_yy| >= |V_xx|`` and
``eta = (V_xx - V_yy)/V_zz`` lies in [0, 1].  Everything is in frequency
units: the tensor is scaled so that ``V_zz = C_Q`` (MHz).  ``C_Q`` here is
``|V_zz|``: the sign of C_Q does not change these spectra (the second-order
central transition depends on C_Q^2, and the first-order satellite pattern of
a powder is symmetric under a sign change), so it is not observable and is
not kept.

**The five components.**  A traceless symmetric tensor has five independent
components ``U_1 .. U_5``.  We use the orthogonal basis

.. code-block:: text

    V_zz = U_1
    V_xx = -U_1/2 + (sqrt(3)/2) U_2      V_xy = (sqrt(3)/2) U_3
    V_yy = -U_1/2 - (sqrt(3)/2) U_2      V_xz = (sqrt(3)/2) U_4
                                         V_yz = (sqrt(3)/2) U_5

Each basis matrix ``B_i`` (``V = sum_i U_i B_i``) has ``Tr B_i^2 = 3/2`` and
``Tr B_i B_j = 0`` for ``i != j``, so ``(2/3) Tr V^2 = sum_i U_i^2``.  In the
principal frame ``U_1 = C_Q``, ``U_2 = eta C_Q / sqrt(3)`` and the rest
vanish, hence ``sum U_i^2 = C_Q^2 (1 + eta^2/3) = P_Q^2`` with the
quadrupolar product ``P_Q = C_Q sqrt(1 + eta^2/3)``.  Because the map U -> V
is an isometry (up to the factor 3/2) onto the traceless symmetric tensors
with the Frobenius norm, and rotations ``V -> R V R^T`` preserve that norm,
a spherical Gaussian in U is invariant under rotations of the tensor.

**Czjzek model** (G. Czjzek et al., Phys. Rev. B 23 (1981) 2513; for NMR,
J.-B. d'Espinose de Lacaillerie, C. Fretigny, D. Massiot, J. Magn. Reson.
192 (2008) 244): ``U_1 .. U_5`` are independent Gaussians of mean 0 and
standard deviation ``sigma`` (MHz).  Then ``P_Q / sigma`` follows the chi
distribution with 5 degrees of freedom, ``eta`` is independent of ``P_Q``,
and the joint density of (C_Q, eta) on ``C_Q >= 0``, ``0 <= eta <= 1`` is

.. code-block:: text

    P(C_Q, eta) = C_Q^4 eta (1 - eta^2/9) exp(-C_Q^2 (1 + eta^2/3) / (2 sigma^2))
                  / (sigma^5 sqrt(pi/2))

The normalisation is analytic: the C_Q integral gives
``3 sigma^5 sqrt(pi/2) (1 + eta^2/3)^(-5/2)``, and with ``w = 1 + eta^2/3``
the eta integral is ``(1/2) int_1^(4/3) (4 w^(-5/2) - w^(-3/2)) dw = 1/3``.
The same substitution gives the eta marginal in closed form,
``F(eta) = 1 + 3 w^(-1/2) - 4 w^(-3/2)``, and the C_Q marginal as a 1-D
integral over eta of the chi_5 CDF (P_Q and eta being independent).

**Extended Czjzek model** (G. Le Caer, R. A. Brand, J. Phys.: Condens.
Matter 10 (1998) 10715; d'Espinose de Lacaillerie et al. 2008): the tensor
is a fixed EFG ``V_0`` with (C_Q0, eta0) plus an independent Czjzek tensor of
width sigma.  The random part is isotropic, so the orientation of ``V_0``
does not matter: for any rotation R, ``R V_0 R^T + W = R (V_0 + R^T W R) R^T``,
``R^T W R`` has the same law as ``W``, and conjugation by R leaves the
principal values unchanged.  (The sign of C_Q0 does not matter either:
``-V_0 + W`` has the principal values of ``-(V_0 + W')`` with ``W' = -W``
of the same law.)

**What the (C_Q, eta) description leaves out.**  The principal axes of the
total tensor turn away from those of ``V_0`` by a random rotation.  For a
powder without shift anisotropy this does not matter (the powder average is
over all orientations of each tensor anyway).  With shift anisotropy the
relative orientation of the shift and EFG principal frames varies from
nucleus to nucleus; a (C_Q, eta) grid cannot represent that.  We assume that
the shift tensor keeps the site's stated orientation relative to the
principal frame of each random EFG (exact when the shift tensor is
isotropic).

Second-order central transition and grid spacing
-------------------------------------------------
For a half-integer spin I, the second-order central-transition (CT) offset
of a crystallite is (from the high-field level energies in DEVELOPERS.md,
specialised to m = 1/2)

.. code-block:: text

    nu_CT = -(a(I) C_Q^2 / (2 nu0)) g,   a(I) = [I(I+1) - 3/4] / [I(2I-1)]^2,
    g = (V_xz^2 + V_yz^2) - ((V_xx - V_yy)^2 + 4 V_xy^2) / 8

(laboratory-frame components of V/C_Q; rotor-averaged under infinitely fast
MAS).  Over a powder g fills [g_min(eta), g_max(eta)], so the pattern's two
edges are at ``-(a C_Q^2/(2 nu0)) g_max`` and ``-(a C_Q^2/(2 nu0)) g_min``
(:func:`ct_edges_hz`).  Its powder mean is ``g0 = (3/20)(1 + eta^2/3)``, the
quadrupolar-induced shift.  :func:`czjzek_grid` places nodes so that between
neighbouring nodes each edge moves by at most ``fraction * resolution_hz``
(default one half), so neighbouring patterns differ in width by at most one
resolution element.  Why one half: summing copies of a feature broadened
by a Gaussian of standard deviation ``s`` at positions ``delta`` apart leaves
a relative ripple of about ``2 exp(-2 pi^2 s^2 / delta^2)`` (Poisson
summation formula).  With a broadening of FWHM ``resolution_hz``
(``s = FWHM/2.355``) that is about 1e-6 for ``delta = FWHM/2`` but about
6 per cent for ``delta = FWHM``.

Examples
--------
>>> import numpy as np
>>> from powderspin.physics.distributions import sample_czjzek, czjzek_mean_pq_mhz
>>> cq, eta = sample_czjzek(200_000, 2.0, np.random.default_rng(1))
>>> pq = cq * np.sqrt(1 + eta**2 / 3)
>>> round(czjzek_mean_pq_mhz(2.0), 4), bool(abs(pq.mean() - czjzek_mean_pq_mhz(2.0)) < 0.02)
(4.2554, True)
"""

from __future__ import annotations

import functools
import math
import numbers
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from scipy import optimize, special

__all__ = [
    "DistributionError",
    "DistributionGrid",
    "efg_from_components",
    "principal_cq_eta",
    "czjzek_pdf",
    "czjzek_eta_cdf",
    "czjzek_cq_cdf",
    "czjzek_cell_mass",
    "czjzek_mean_pq_mhz",
    "czjzek_mean_pq_squared_mhz2",
    "sample_czjzek",
    "sample_extended_czjzek",
    "ct_spin_factor",
    "ct_g_extremes",
    "ct_edges_hz",
    "czjzek_grid",
    "explicit_grid",
    "mean_cq_mhz",
    "mean_pq_mhz",
    "mean_pq_squared_mhz2",
    "quadrupolar_induced_shift_ppm",
    "mean_quadrupolar_induced_shift_ppm",
]

_SQRT3_2 = math.sqrt(3.0) / 2.0
_EXPERIMENTS = ("mas", "static")
_MAGIC_COS = 1.0 / math.sqrt(3.0)


class DistributionError(ValueError):
    """A distribution parameter or grid is outside its allowed range.

    A ``ValueError`` subclass; the message names the key, the value and the
    allowed range.

    Parameters
    ----------
    message : str
        Key, offending value and allowed range.

    Examples
    --------
    >>> try:
    ...     explicit_grid({"values": [1.0], "weights": [1.0]}, {"values": [1.5], "weights": [1.0]})
    ... except DistributionError as e:
    ...     print(e)
    eta_distribution.values[0] = 1.5 is outside the allowed range [0, 1]
    """


# --------------------------------------------------------------------------- validation helpers


def _number(name: str, value, low: float = -math.inf, high: float = math.inf, *, low_open: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise DistributionError(f"{name} = {value!r} is not a number; the allowed range is "
                                f"{'(' if low_open else '['}{low:g}, {high:g}]")
    v = float(value)
    if not math.isfinite(v) or v < low or v > high or (low_open and v == low):
        raise DistributionError(f"{name} = {value!r} is outside the allowed range "
                                f"{'(' if low_open else '['}{low:g}, {high:g}]")
    return v


def _spin(spin) -> float:
    s = _number("spin", spin, 1.5, 9.5)
    if abs(2 * s - round(2 * s)) > 1e-9 or round(2 * s) % 2 != 1:
        raise DistributionError(f"spin = {spin!r} has no central transition; the allowed values are "
                                "half-integers 3/2 ... 9/2")
    return s


def _rng(rng) -> np.random.Generator:
    if isinstance(rng, np.random.Generator):
        return rng
    if rng is None or isinstance(rng, numbers.Integral):
        return np.random.default_rng(rng)
    raise DistributionError(f"rng = {rng!r} is not a numpy Generator or an integer seed")


# --------------------------------------------------------------------------- tensors


def efg_from_components(u) -> np.ndarray:
    """The traceless symmetric EFG tensors for components ``U_1 .. U_5``.

    Parameters
    ----------
    u : array_like, shape (..., 5)
        Components in MHz (module docstring: ``V_zz = U_1``,
        ``V_xx - V_yy = sqrt(3) U_2``, off-diagonals ``(sqrt(3)/2) U_3..5``).

    Returns
    -------
    numpy.ndarray, shape (..., 3, 3)
        Cartesian tensors with ``(2/3) Tr V^2 = sum U_i^2``.

    See Also
    --------
    principal_cq_eta

    References
    ----------
    G. Czjzek et al., Phys. Rev. B 23 (1981) 2513 (the five-component
    description of a random EFG).

    Examples
    --------
    >>> v = efg_from_components([4.0, 0.5 * 4.0 / np.sqrt(3), 0, 0, 0])
    >>> np.round(np.diag(v), 6)
    array([-1.,  -3.,  4.])
    >>> [round(float(x), 6) for x in principal_cq_eta(v)]
    [4.0, 0.5]
    """
    u = np.asarray(u, dtype=float)
    if u.shape[-1:] != (5,):
        raise DistributionError(f"components u must have a last axis of length 5, not shape {u.shape}")
    v = np.empty(u.shape[:-1] + (3, 3))
    v[..., 2, 2] = u[..., 0]
    v[..., 0, 0] = -0.5 * u[..., 0] + _SQRT3_2 * u[..., 1]
    v[..., 1, 1] = -0.5 * u[..., 0] - _SQRT3_2 * u[..., 1]
    v[..., 0, 1] = v[..., 1, 0] = _SQRT3_2 * u[..., 2]
    v[..., 0, 2] = v[..., 2, 0] = _SQRT3_2 * u[..., 3]
    v[..., 1, 2] = v[..., 2, 1] = _SQRT3_2 * u[..., 4]
    return v


def principal_cq_eta(tensors) -> tuple[np.ndarray, np.ndarray]:
    """C_Q = |V_zz| and eta of traceless symmetric tensors, from their principal values.

    Parameters
    ----------
    tensors : array_like, shape (..., 3, 3)
        Symmetric traceless tensors (frequency units).

    Returns
    -------
    cq : numpy.ndarray, shape (...)
        ``|V_zz|``, the largest principal value in magnitude.
    eta : numpy.ndarray, shape (...)
        ``(V_xx - V_yy) / V_zz`` with ``|V_zz| >= |V_yy| >= |V_xx|``, in [0, 1]
        (0 for a zero tensor).

    See Also
    --------
    efg_from_components

    Examples
    --------
    >>> cq, eta = principal_cq_eta(np.diag([1.0, 2.0, -3.0]))
    >>> float(cq), round(float(eta), 6)
    (3.0, 0.333333)
    """
    lam = np.linalg.eigvalsh(np.asarray(tensors, dtype=float))
    order = np.argsort(np.abs(lam), axis=-1)
    lam = np.take_along_axis(lam, order, axis=-1)
    vxx, vyy, vzz = lam[..., 0], lam[..., 1], lam[..., 2]
    cq = np.abs(vzz)
    with np.errstate(invalid="ignore", divide="ignore"):
        eta = np.where(cq > 0, (vxx - vyy) / np.where(vzz == 0, 1.0, vzz), 0.0)
    return cq, np.clip(eta, 0.0, 1.0)


# --------------------------------------------------------------------------- Czjzek density


def czjzek_pdf(cq_mhz, eta, sigma_mhz: float) -> np.ndarray:
    """Normalised Czjzek density P(C_Q, eta) (per MHz per unit eta).

    Parameters
    ----------
    cq_mhz : array_like
        C_Q >= 0 (MHz).
    eta : array_like
        Asymmetry in [0, 1].
    sigma_mhz : float
        Standard deviation of each of the five tensor components (MHz), > 0.

    Returns
    -------
    numpy.ndarray
        ``C_Q^4 eta (1 - eta^2/9) exp(-C_Q^2 (1 + eta^2/3)/(2 sigma^2)) /
        (sigma^5 sqrt(pi/2))``; 0 outside the domain.

    See Also
    --------
    czjzek_cq_cdf, czjzek_eta_cdf, sample_czjzek

    References
    ----------
    G. Czjzek et al., Phys. Rev. B 23 (1981) 2513; J.-B. d'Espinose de
    Lacaillerie, C. Fretigny, D. Massiot, J. Magn. Reson. 192 (2008) 244.

    Examples
    --------
    >>> from scipy.integrate import dblquad
    >>> round(dblquad(lambda e, c: czjzek_pdf(c, e, 1.5), 0, 20, 0, 1)[0], 10)
    1.0
    """
    s = _number("sigma_mhz", sigma_mhz, 0.0, low_open=True)
    c = np.asarray(cq_mhz, dtype=float)
    e = np.asarray(eta, dtype=float)
    inside = (c >= 0) & (e >= 0) & (e <= 1)
    val = c**4 * e * (1 - e**2 / 9) * np.exp(-(c**2) * (1 + e**2 / 3) / (2 * s * s)) / (s**5 * math.sqrt(math.pi / 2))
    return np.where(inside, val, 0.0)


def czjzek_eta_cdf(eta) -> np.ndarray:
    """Marginal CDF of eta in the Czjzek model (closed form, independent of sigma).

    Parameters
    ----------
    eta : array_like
        Asymmetry values (clipped to [0, 1]).

    Returns
    -------
    numpy.ndarray
        ``1 + 3 w^(-1/2) - 4 w^(-3/2)`` with ``w = 1 + eta^2/3``.

    See Also
    --------
    czjzek_pdf

    References
    ----------
    G. Czjzek et al., Phys. Rev. B 23 (1981) 2513 (the density integrated
    here; the integral is derived in the module docstring).

    Examples
    --------
    >>> czjzek_eta_cdf([0.0, 1.0]).round(12)
    array([0., 1.])
    >>> round(float(czjzek_eta_cdf(0.6304)), 3)  # the median
    0.5
    """
    e = np.clip(np.asarray(eta, dtype=float), 0.0, 1.0)
    w = 1 + e**2 / 3
    return 1 + 3 / np.sqrt(w) - 4 / w**1.5


def _eta_density(e):
    """Marginal density of eta in the Czjzek model: 3 eta (1 - eta^2/9) (1 + eta^2/3)^(-5/2)."""
    return 3 * e * (1 - e**2 / 9) / (1 + e**2 / 3) ** 2.5


def _chi5_cdf(x):
    """CDF of the chi distribution with 5 degrees of freedom (x >= 0).

    Integrating x^4 exp(-x^2/2) / (3 sqrt(pi/2)) by parts twice gives
    ``erf(x/sqrt 2) - sqrt(2/pi) exp(-x^2/2) (x + x^3/3)``.
    """
    x = np.asarray(x, dtype=float)
    with np.errstate(invalid="ignore", over="ignore"):
        tail = np.where(np.isinf(x), 0.0, math.sqrt(2 / math.pi) * np.exp(-0.5 * x * x) * (x + x**3 / 3))
    return special.erf(x / math.sqrt(2)) - tail


@functools.lru_cache(maxsize=8)
def _gauss_legendre(n: int) -> tuple[np.ndarray, np.ndarray]:
    x, w = np.polynomial.legendre.leggauss(n)
    return x, w


def czjzek_cell_mass(cq_edges_mhz, eta_edges, sigma_mhz: float, order: int = 24) -> np.ndarray:
    """Probability mass of the Czjzek density on each cell of a (C_Q, eta) grid.

    Since P_Q = C_Q sqrt(1 + eta^2/3) follows sigma * chi_5 independently of
    eta, the mass of ``[c_a, c_b] x [e_a, e_b]`` is the 1-D integral
    ``int_{e_a}^{e_b} p(eta) [F5(c_b sqrt(w)/sigma) - F5(c_a sqrt(w)/sigma)] d eta``
    (F5 the chi_5 CDF, ``w = 1 + eta^2/3``), done by Gauss-Legendre
    quadrature of the given order in each eta cell (the integrand is smooth).

    Parameters
    ----------
    cq_edges_mhz : array_like, shape (K+1,)
        Increasing C_Q cell edges (MHz, >= 0; the last may be inf).
    eta_edges : array_like, shape (M+1,)
        Increasing eta cell edges in [0, 1].
    sigma_mhz : float
        Czjzek width (MHz).
    order : int, optional
        Gauss-Legendre points per eta cell.

    Returns
    -------
    numpy.ndarray, shape (K, M)
        Cell masses (they sum to the mass inside the grid).

    See Also
    --------
    czjzek_pdf, czjzek_grid

    References
    ----------
    G. Czjzek et al., Phys. Rev. B 23 (1981) 2513.

    Examples
    --------
    >>> m = czjzek_cell_mass([0, 2, np.inf], [0, 0.5, 1], 1.0)
    >>> m.shape, round(float(m.sum()), 12)
    ((2, 2), 1.0)
    """
    s = _number("sigma_mhz", sigma_mhz, 0.0, low_open=True)
    c = np.asarray(cq_edges_mhz, dtype=float)
    e = np.asarray(eta_edges, dtype=float)
    x, w = _gauss_legendre(int(order))
    half = 0.5 * np.diff(e)
    mid = 0.5 * (e[1:] + e[:-1])
    nodes = mid[:, None] + half[:, None] * x[None, :]  # (M, order)
    wts = half[:, None] * w[None, :] * _eta_density(nodes)
    arg = c[:, None, None] * np.sqrt(1 + nodes**2 / 3)[None, :, :] / s
    cdf = _chi5_cdf(arg)  # (K+1, M, order)
    return np.einsum("kmo,mo->km", np.diff(cdf, axis=0), wts)


def czjzek_cq_cdf(cq_mhz, sigma_mhz: float, order: int = 16) -> np.ndarray:
    """Marginal CDF of C_Q in the Czjzek model, by Gauss-Legendre quadrature over eta.

    ``F(c) = int_0^1 p(eta) F5(c sqrt(1 + eta^2/3)/sigma) d eta``, with
    ``p(eta) = 3 eta (1 - eta^2/9)(1 + eta^2/3)^(-5/2)`` and F5 the chi_5 CDF.

    Parameters
    ----------
    cq_mhz : array_like
        C_Q values (MHz).
    sigma_mhz : float
        Czjzek width (MHz).
    order : int, optional
        Number of Gauss-Legendre points on [0, 1].

    Returns
    -------
    numpy.ndarray
        CDF values.

    See Also
    --------
    czjzek_cell_mass

    References
    ----------
    G. Czjzek et al., Phys. Rev. B 23 (1981) 2513.

    Examples
    --------
    >>> czjzek_cq_cdf([0.0, 1e3], 2.0).round(12)
    array([0., 1.])
    """
    s = _number("sigma_mhz", sigma_mhz, 0.0, low_open=True)
    c = np.maximum(np.asarray(cq_mhz, dtype=float), 0.0)
    x, w = _gauss_legendre(int(order))
    e = 0.5 * (x + 1)
    wts = 0.5 * w * _eta_density(e)
    out = _chi5_cdf(c.reshape(-1, 1) * np.sqrt(1 + e**2 / 3)[None, :] / s) @ wts
    return out.reshape(c.shape)


def czjzek_mean_pq_mhz(sigma_mhz: float) -> float:
    """Mean quadrupolar product <P_Q> of the Czjzek model.

    P_Q / sigma follows the chi distribution with 5 degrees of freedom, so
    ``<P_Q> = sigma sqrt(2) Gamma(3) / Gamma(5/2) = sigma 8 sqrt(2) / (3 sqrt(pi))``.

    Parameters
    ----------
    sigma_mhz : float
        Czjzek width (MHz).

    Returns
    -------
    float
        <P_Q> in MHz (about 2.128 sigma).

    See Also
    --------
    czjzek_mean_pq_squared_mhz2, mean_pq_mhz

    References
    ----------
    J.-B. d'Espinose de Lacaillerie, C. Fretigny, D. Massiot, J. Magn. Reson.
    192 (2008) 244.

    Examples
    --------
    >>> round(czjzek_mean_pq_mhz(1.0), 6)
    2.127692
    """
    s = _number("sigma_mhz", sigma_mhz, 0.0)
    return s * math.sqrt(2.0) * math.gamma(3.0) / math.gamma(2.5)


def czjzek_mean_pq_squared_mhz2(sigma_mhz: float) -> float:
    """Mean squared quadrupolar product <P_Q^2> = 5 sigma^2 of the Czjzek model.

    Parameters
    ----------
    sigma_mhz : float
        Czjzek width (MHz).

    Returns
    -------
    float
        <P_Q^2> in MHz^2 (the sum of five component variances).

    See Also
    --------
    czjzek_mean_pq_mhz, mean_quadrupolar_induced_shift_ppm

    References
    ----------
    G. Czjzek et al., Phys. Rev. B 23 (1981) 2513.

    Examples
    --------
    >>> czjzek_mean_pq_squared_mhz2(2.0)
    20.0
    """
    s = _number("sigma_mhz", sigma_mhz, 0.0)
    return 5.0 * s * s


# --------------------------------------------------------------------------- sampling


def sample_czjzek(n: int, sigma_mhz: float, rng=None) -> tuple[np.ndarray, np.ndarray]:
    """Draw (C_Q, eta) from the Czjzek model via random tensors and their principal values.

    Parameters
    ----------
    n : int
        Number of samples.
    sigma_mhz : float
        Standard deviation of each of the five components (MHz), >= 0.
    rng : numpy.random.Generator or int, optional
        Random generator or seed (seed everything for reproducible results).

    Returns
    -------
    cq_mhz, eta : numpy.ndarray, shape (n,)

    See Also
    --------
    sample_extended_czjzek, czjzek_pdf

    References
    ----------
    G. Czjzek et al., Phys. Rev. B 23 (1981) 2513.

    Examples
    --------
    >>> cq, eta = sample_czjzek(5, 1.0, np.random.default_rng(0))
    >>> cq.shape, bool(((eta >= 0) & (eta <= 1)).all())
    ((5,), True)
    """
    return sample_extended_czjzek(n, 0.0, 0.0, sigma_mhz, rng)


def sample_extended_czjzek(n: int, cq0_mhz: float, eta0: float, sigma_mhz: float,
                           rng=None) -> tuple[np.ndarray, np.ndarray]:
    """Draw (C_Q, eta) from the extended Czjzek model: a fixed EFG plus a Czjzek part.

    The fixed tensor is put in its principal frame; because the random part
    is isotropic, its orientation does not change the distribution of the
    principal values (module docstring), nor does the sign of C_Q0.

    Parameters
    ----------
    n : int
        Number of samples.
    cq0_mhz : float
        C_Q of the fixed tensor (MHz), >= 0.
    eta0 : float
        Asymmetry of the fixed tensor, in [0, 1].
    sigma_mhz : float
        Standard deviation of each of the five components of the random part
        (MHz), >= 0.
    rng : numpy.random.Generator or int, optional
        Random generator or seed.

    Returns
    -------
    cq_mhz, eta : numpy.ndarray, shape (n,)

    See Also
    --------
    sample_czjzek, czjzek_grid

    References
    ----------
    G. Le Caer, R. A. Brand, J. Phys.: Condens. Matter 10 (1998) 10715;
    J.-B. d'Espinose de Lacaillerie, C. Fretigny, D. Massiot, J. Magn. Reson.
    192 (2008) 244.

    Examples
    --------
    >>> cq, eta = sample_extended_czjzek(10_000, 5.0, 0.4, 0.05, np.random.default_rng(2))
    >>> round(float(np.median(cq)), 1), round(float(np.median(eta)), 2)
    (5.0, 0.4)
    """
    if isinstance(n, bool) or not isinstance(n, numbers.Integral) or n < 0:
        raise DistributionError(f"n = {n!r} is not allowed; it must be an integer >= 0")
    c0 = _number("cq0_mhz", cq0_mhz, 0.0)
    e0 = _number("eta0", eta0, 0.0, 1.0)
    s = _number("sigma_mhz", sigma_mhz, 0.0)
    gen = _rng(rng)
    out_c, out_e = [], []
    chunk = 250_000  # bounded memory: 250 000 tensors of 9 doubles at a time
    for start in range(0, int(n), chunk):
        m = min(chunk, int(n) - start)
        u = gen.normal(0.0, s, size=(m, 5)) if s > 0 else np.zeros((m, 5))
        u[:, 0] += c0
        u[:, 1] += e0 * c0 / math.sqrt(3.0)
        c, e = principal_cq_eta(efg_from_components(u))
        out_c.append(c)
        out_e.append(e)
    if not out_c:
        return np.zeros(0), np.zeros(0)
    return np.concatenate(out_c), np.concatenate(out_e)


# --------------------------------------------------------------------------- central-transition geometry


def ct_spin_factor(spin: float) -> float:
    """a(I) = [I(I+1) - 3/4] / [I(2I-1)]^2, the spin factor of the second-order CT.

    Parameters
    ----------
    spin : float
        Half-integer spin 3/2 ... 9/2.

    Returns
    -------
    float

    Examples
    --------
    >>> ct_spin_factor(2.5), ct_spin_factor(1.5)
    (0.08, 0.3333333333333333)
    """
    i = _spin(spin)
    return (i * (i + 1) - 0.75) / (i * (2 * i - 1)) ** 2


def _g_static(b, eta):
    """CT orientation factor g for field directions b (..., 3) in the EFG principal frame."""
    lam = np.array([-(1 - eta) / 2, -(1 + eta) / 2, 1.0])
    t = float((lam**2).sum())
    q = (b**2 * lam**2).sum(-1)  # |V b|^2
    z = (b**2 * lam).sum(-1)  # b.V.b
    return 1.5 * q - 1.125 * z**2 - t / 4


def _g_mas(n, eta, phases: int = 8):
    """g averaged over a rotor period at the magic angle, rotor axes n (..., 3)."""
    n = n / np.linalg.norm(n, axis=-1, keepdims=True)
    helper = np.where(np.abs(n[..., :1]) < 0.9, np.array([1.0, 0.0, 0.0]), np.array([0.0, 1.0, 0.0]))
    u = np.cross(n, helper)
    u /= np.linalg.norm(u, axis=-1, keepdims=True)
    v = np.cross(n, u)
    s = math.sqrt(1 - _MAGIC_COS**2)
    total = 0.0
    for k in range(phases):  # g is a trigonometric polynomial of degree 4 in the phase: 8 >= 5 phases are exact
        ph = 2 * math.pi * k / phases
        total = total + _g_static(_MAGIC_COS * n + s * (math.cos(ph) * u + math.sin(ph) * v), eta)
    return total / phases


# Points on the simplex u = n^2 used to read off the quadratic form of g.
_SIMPLEX_PROBES = np.array([[1, 0, 0], [0, 1, 0], [0, 0, 1], [0.5, 0.5, 0], [0.5, 0, 0.5], [0, 0.5, 0.5],
                            [1 / 3, 1 / 3, 1 / 3], [0.6, 0.3, 0.1], [0.1, 0.2, 0.7], [0.25, 0.6, 0.15]])


def _quadratic_form(eta: float, experiment: str) -> np.ndarray:
    """Symmetric Q with g = u^T Q u on the simplex u_i = n_i^2 (exact: g is even in each n_i, degree 4)."""
    n = np.sqrt(_SIMPLEX_PROBES)
    g = _g_static(n, eta) if experiment == "static" else _g_mas(n, eta)
    u = _SIMPLEX_PROBES
    design = np.stack([u[:, 0] ** 2, u[:, 1] ** 2, u[:, 2] ** 2,
                       2 * u[:, 0] * u[:, 1], 2 * u[:, 0] * u[:, 2], 2 * u[:, 1] * u[:, 2]], axis=1)
    q, *_ = np.linalg.lstsq(design, g, rcond=None)
    return np.array([[q[0], q[3], q[4]], [q[3], q[1], q[5]], [q[4], q[5], q[2]]])


def _simplex_extremes(q: np.ndarray) -> tuple[float, float]:
    """Exact min and max of u^T q u over the simplex (vertices, edges, interior stationary point)."""
    cands = [q[i, i] for i in range(3)]
    for i, j in ((0, 1), (0, 2), (1, 2)):
        # f(t) = q_ii t^2 + q_jj (1-t)^2 + 2 q_ij t (1-t)
        a = q[i, i] + q[j, j] - 2 * q[i, j]
        b = -2 * q[j, j] + 2 * q[i, j]
        if abs(a) > 1e-15:
            t = -b / (2 * a)
            if 0 < t < 1:
                cands.append(a * t * t + b * t + q[j, j])
    try:
        x = np.linalg.solve(q, np.ones(3))
        if abs(x.sum()) > 1e-15:
            u = x / x.sum()
            if (u > 0).all():
                cands.append(float(u @ q @ u))
    except np.linalg.LinAlgError:
        pass
    return float(min(cands)), float(max(cands))


def _check_experiment(experiment: str) -> str:
    if experiment not in _EXPERIMENTS:
        raise DistributionError(f"experiment = {experiment!r} is not allowed; use 'mas' (infinitely fast "
                                "magic-angle spinning) or 'static'")
    return experiment


def ct_g_extremes(eta: float, experiment: str = "mas") -> tuple[float, float]:
    """Range [g_min, g_max] of the CT orientation factor g over a powder.

    The CT offset of a crystallite is ``-(a(I) C_Q^2/(2 nu0)) g`` (module
    docstring).  g depends on the field direction only through the squares
    of its components in the EFG principal frame (also after rotor
    averaging), and is a quadratic form in them; its exact extremes over the
    simplex of squared components are found from the vertices, the edges and
    the interior stationary point.

    Parameters
    ----------
    eta : float
        Asymmetry in [0, 1].
    experiment : {"mas", "static"}, optional
        Infinitely fast magic-angle spinning (rotor-averaged g) or static.

    Returns
    -------
    g_min, g_max : float

    See Also
    --------
    ct_edges_hz

    References
    ----------
    The static eta = 0 values (-9/32 at theta = 90 deg, 1/2 at
    cos^2 theta = 5/9) are the standard singularities of the second-order CT
    pattern (DEVELOPERS.md, 'Physics formulas', derivable from second-order perturbation
    theory).

    Examples
    --------
    >>> [round(x, 6) for x in ct_g_extremes(0.0, "static")]
    [-0.28125, 0.5]
    >>> [round(x, 6) for x in ct_g_extremes(0.0, "mas")]
    [0.053571, 0.375]
    """
    e = _number("eta", eta, 0.0, 1.0)
    return _simplex_extremes(_quadratic_form(e, _check_experiment(experiment)))


def ct_edges_hz(cq_mhz, eta, spin: float, larmor_hz: float, experiment: str = "mas") -> tuple[np.ndarray, np.ndarray]:
    """Lowest and highest offset (Hz) of the second-order CT powder pattern.

    Parameters
    ----------
    cq_mhz : array_like
        C_Q (MHz).
    eta : array_like
        Asymmetry in [0, 1] (broadcast with ``cq_mhz``).
    spin : float
        Half-integer spin 3/2 ... 9/2.
    larmor_hz : float
        Larmor frequency nu0 (Hz), > 0.
    experiment : {"mas", "static"}, optional
        Infinitely fast MAS (the centre band) or static.

    Returns
    -------
    low_hz, high_hz : numpy.ndarray
        ``-(a C_Q^2/(2 nu0)) g_max`` and ``-(a C_Q^2/(2 nu0)) g_min``
        (isotropic shift not included).

    See Also
    --------
    ct_g_extremes, czjzek_grid

    References
    ----------
    A. Samoson, Chem. Phys. Lett. 119 (1985) 29 (second-order CT shifts);
    DEVELOPERS.md, 'Physics formulas' (the high-field level energies).

    Examples
    --------
    >>> lo, hi = ct_edges_hz(5.0, 0.0, 2.5, 104.26e6, "static")
    >>> round(float(lo)), round(float(hi))
    (-4796, 2698)
    """
    a = ct_spin_factor(spin)
    nu0 = _number("larmor_hz", larmor_hz, 0.0, low_open=True)
    _check_experiment(experiment)
    c, e = np.broadcast_arrays(np.asarray(cq_mhz, dtype=float), np.asarray(eta, dtype=float))
    values, inverse = np.unique(e.ravel(), return_inverse=True)
    table = np.array([ct_g_extremes(float(x), experiment) for x in values]).reshape(-1, 2)
    ext = table[inverse.ravel()].reshape(e.shape + (2,))
    scale = a * (c * 1e6) ** 2 / (2 * nu0)
    return -scale * ext[..., 1], -scale * ext[..., 0]


@functools.lru_cache(maxsize=4)
def ct_g_table(experiment: str, points: int = 401) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A table of eta with the extremes g_min(eta), g_max(eta) of the second-order CT pattern (read-only).

    Parameters
    ----------
    experiment : {"static", "mas"}
    points : int, optional
        Values of eta, equally spaced in [0, 1].

    Returns
    -------
    eta, g_min, g_max : numpy.ndarray
        See :func:`ct_g_extremes` for the meaning of g.

    Examples
    --------
    >>> eta, lo, hi = ct_g_table("mas", 5)
    >>> eta.tolist(), bool((lo < hi).all())
    ([0.0, 0.25, 0.5, 0.75, 1.0], True)
    """
    eta = np.linspace(0.0, 1.0, points)
    ext = np.array([_simplex_extremes(_quadratic_form(float(e), experiment)) for e in eta])
    for a in (eta, ext):
        a.setflags(write=False)
    return eta, ext[:, 0].copy(), ext[:, 1].copy()


# --------------------------------------------------------------------------- grids


@dataclass(frozen=True, eq=False)
class DistributionGrid:
    """A (C_Q, eta) product grid with the probability weight of each node.

    The weights are the probability masses of the cells around the nodes
    (integrated, not point values), renormalised to sum to 1; the mass that
    fell outside the grid before renormalisation is ``tail_mass``.

    Parameters
    ----------
    cq_mhz : numpy.ndarray, shape (K,)
        C_Q nodes (MHz), increasing.
    eta : numpy.ndarray, shape (M,)
        eta nodes, increasing, in [0, 1].
    weights : numpy.ndarray, shape (K, M)
        Node weights, >= 0, summing to 1.
    cq_edges_mhz, eta_edges : numpy.ndarray or None
        Cell edges (K+1 and M+1 values); None for explicit grids.
    tail_mass : float
        Probability outside the cells (dropped, then renormalised away).
    method : str
        "quadrature" (pure Czjzek), "sampling" (extended Czjzek) or
        "explicit" (user values and weights).
    resolution_hz, fraction : float or None
        The spacing criterion: each CT pattern edge moves by at most
        ``fraction * resolution_hz`` between neighbouring nodes.
    cq_edge_step_hz, eta_edge_step_hz : float or None
        The largest edge move between C_Q neighbours and between eta
        neighbours actually reached by the grid (Hz).
    n_samples : int
        Size of the sample behind "sampling" weights (0 otherwise).

    Examples
    --------
    >>> g = explicit_grid({"values": [2.0, 4.0], "weights": [1, 3]}, {"values": [0.5], "weights": [1]})
    >>> g.weights.tolist(), g.shape
    ([[0.25], [0.75]], (2, 1))
    """

    cq_mhz: np.ndarray
    eta: np.ndarray
    weights: np.ndarray
    cq_edges_mhz: np.ndarray | None
    eta_edges: np.ndarray | None
    tail_mass: float
    method: str
    resolution_hz: float | None = None
    fraction: float | None = None
    cq_edge_step_hz: float | None = None
    eta_edge_step_hz: float | None = None
    n_samples: int = 0

    def __post_init__(self):
        for name in ("cq_mhz", "eta", "weights", "cq_edges_mhz", "eta_edges"):
            a = getattr(self, name)
            if a is not None:
                a = np.array(a, dtype=float)
                a.setflags(write=False)
                object.__setattr__(self, name, a)

    @property
    def shape(self) -> tuple[int, int]:
        """(number of C_Q nodes, number of eta nodes)."""
        return self.weights.shape

    @property
    def size(self) -> int:
        """Number of nodes."""
        return int(self.weights.size)

    def __str__(self) -> str:
        k, m = self.shape
        lines = [f"(C_Q, eta) grid: {k} x {m} = {k * m} nodes ({self.method})",
                 f"  C_Q {self.cq_mhz[0]:.4g} ... {self.cq_mhz[-1]:.4g} MHz, eta {self.eta[0]:.3g} ... "
                 f"{self.eta[-1]:.3g}, tail mass dropped {self.tail_mass:.2g}"]
        if self.resolution_hz is not None:
            lines.append(f"  CT edges move <= {self.cq_edge_step_hz:.3g} Hz (C_Q) and {self.eta_edge_step_hz:.3g} Hz "
                         f"(eta) between neighbours; limit {self.fraction:g} x {self.resolution_hz:g} Hz")
        return "\n".join(lines)


def uniform_in_measure(t_table, x_table, lo, hi, cells):
    """Cell edges and midpoints equally spaced in an increasing measure t(x) between x = lo and hi.

    Parameters
    ----------
    t_table, x_table : numpy.ndarray
        The measure t tabulated against x (both increasing).
    lo, hi : float
        The range of x.
    cells : int

    Returns
    -------
    edges, mids : numpy.ndarray
        In x: ``cells + 1`` edges and ``cells`` midpoints.

    Examples
    --------
    >>> x = np.linspace(0.0, 1.0, 101)
    >>> edges, mids = uniform_in_measure(x ** 2, x, 0.0, 1.0, 2)
    >>> [round(float(v), 3) for v in edges]
    [0.0, 0.707, 1.0]
    """
    t_lo, t_hi = np.interp([lo, hi], x_table, t_table)
    t_edges = np.linspace(t_lo, t_hi, cells + 1)
    t_mid = 0.5 * (t_edges[1:] + t_edges[:-1])
    edges = np.interp(t_edges, t_table, x_table)
    edges[0], edges[-1] = lo, hi
    return edges, np.interp(t_mid, t_table, x_table)


def czjzek_grid(sigma_mhz: float, spin: float, larmor_hz: float, resolution_hz: float, *,
                cq0_mhz: float = 0.0, eta0: float = 0.0, experiment: str = "mas",
                tail_mass: float = 1e-4, fraction: float = 0.5, min_cells: int = 4,
                n_samples: int = 2_000_000, seed: int = 0, max_nodes: int = 250_000) -> DistributionGrid:
    """A (C_Q, eta) grid and cell weights for a Czjzek or extended Czjzek distribution.

    **Extent.**  The grid holds all but ``tail_mass`` of the probability.
    Pure Czjzek (``cq0_mhz = 0``): C_Q from 0 to the ``1 - tail_mass``
    quantile, eta over [0, 1].  Extended: C_Q and eta each between their
    ``tail_mass/4`` and ``1 - tail_mass/4`` sample quantiles (so at most
    ``tail_mass`` lies outside).

    **Spacing.**  Each edge of the second-order CT pattern
    (:func:`ct_edges_hz`) moves by at most ``fraction * resolution_hz``
    between neighbouring nodes, so the widths of neighbouring patterns differ
    by at most ``2 * fraction * resolution_hz`` (one resolution element at
    the default one half).  Pass as ``resolution_hz`` the larger of the
    spectrum's axis step and its line broadening.  The edges are
    ``-(a C_Q^2/(2 nu0)) g`` with g in [g_min(eta), g_max(eta)], so the
    criterion makes the nodes equally spaced in C_Q^2, with
    ``Delta(C_Q^2) <= 2 nu0 fraction resolution / (a max|g|)``, and in eta
    equally spaced in the total variation of the edges at the largest C_Q.
    Each axis has at least ``min_cells`` cells.  Nodes sit at the cell
    centres (in C_Q^2 and in that variation).

    **Weights.**  The probability mass of each cell, renormalised to 1.
    Pure Czjzek: exact 1-D Gauss-Legendre quadrature of the density over
    each cell (:func:`czjzek_cell_mass`).  Extended Czjzek: the fraction of
    a seeded sample of ``n_samples`` random tensors that falls in each cell
    (the cell masses are integrals of an indicator function over the 5-D
    Gaussian, whose discontinuities deny quadrature its usual advantage;
    sampling is unbiased, and its relative error per cell is about
    ``1/sqrt(count)``).

    Parameters
    ----------
    sigma_mhz : float
        Czjzek width (MHz), > 0.
    spin : float
        Half-integer spin 3/2 ... 9/2.
    larmor_hz : float
        Larmor frequency nu0 (Hz).
    resolution_hz : float
        Spectral resolution (Hz), > 0.
    cq0_mhz, eta0 : float, optional
        The fixed tensor of the extended model (``cq0_mhz = 0``: pure Czjzek).
    experiment : {"mas", "static"}, optional
        Which CT pattern the spacing follows (MAS: infinitely fast spinning).
    tail_mass : float, optional
        Probability allowed outside the grid, in (0, 0.1].
    fraction : float, optional
        Largest edge move between neighbours, as a fraction of the
        resolution, in (0, 1].
    min_cells : int, optional
        Fewest cells per axis.
    n_samples : int, optional
        Sample size for the extended model.
    seed : int, optional
        Seed of that sample.
    max_nodes : int, optional
        Refuse (with a clear error) grids with more nodes than this.

    Returns
    -------
    DistributionGrid

    Raises
    ------
    DistributionError
        For out-of-range inputs, or a grid larger than ``max_nodes``.

    See Also
    --------
    explicit_grid, czjzek_cell_mass, ct_edges_hz

    References
    ----------
    G. Czjzek et al., Phys. Rev. B 23 (1981) 2513; G. Le Caer, R. A. Brand,
    J. Phys.: Condens. Matter 10 (1998) 10715; J.-B. d'Espinose de
    Lacaillerie, C. Fretigny, D. Massiot, J. Magn. Reson. 192 (2008) 244.

    Examples
    --------
    >>> grid = czjzek_grid(1.0, 2.5, 104.26e6, 100.0)
    >>> grid.shape, round(float(grid.weights.sum()), 12), grid.tail_mass <= 1e-4
    ((79, 16), 1.0, True)
    >>> grid.cq_edge_step_hz <= 50.0 and grid.eta_edge_step_hz <= 50.0
    True
    """
    s = _number("sigma_mhz", sigma_mhz, 0.0, low_open=True)
    a = ct_spin_factor(spin)
    nu0 = _number("larmor_hz", larmor_hz, 0.0, low_open=True)
    res = _number("resolution_hz", resolution_hz, 0.0, low_open=True)
    c0 = _number("cq0_mhz", cq0_mhz, 0.0)
    e0 = _number("eta0", eta0, 0.0, 1.0)
    tail = _number("tail_mass", tail_mass, 0.0, 0.1, low_open=True)
    frac = _number("fraction", fraction, 0.0, 1.0, low_open=True)
    _check_experiment(experiment)
    for name, value, low in (("min_cells", min_cells, 1), ("n_samples", n_samples, 1000), ("max_nodes", max_nodes, 1)):
        if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < low:
            raise DistributionError(f"{name} = {value!r} is not allowed; it must be an integer >= {low}")

    samples = None
    if c0 == 0.0:
        method = "quadrature"
        c_lo = 0.0
        # aim a hair inside the target so that rounding never leaves more than tail_mass outside
        c_hi = optimize.brentq(lambda c: float(czjzek_cq_cdf(c, s)) - (1 - tail * (1 - 1e-6)), 0.0, 20 * s,
                               xtol=1e-13 * s)
        e_lo, e_hi = 0.0, 1.0
    else:
        method = "sampling"
        samples = sample_extended_czjzek(int(n_samples), c0, e0, s, np.random.default_rng(seed))
        c_lo, c_hi = np.quantile(samples[0], [tail / 4, 1 - tail / 4])
        e_lo, e_hi = np.quantile(samples[1], [tail / 4, 1 - tail / 4])
        if e_hi - e_lo < 1e-9:
            e_lo, e_hi = max(0.0, e_lo - 1e-6), min(1.0, e_hi + 1e-6)

    eta_t, gmin_t, gmax_t = ct_g_table(experiment)
    inside = (eta_t >= e_lo - 1e-3) & (eta_t <= e_hi + 1e-3)
    g_abs = float(np.max(np.maximum(np.abs(gmin_t[inside]), np.abs(gmax_t[inside]))))
    edge_per_s = a * 1e12 / (2 * nu0) * g_abs  # Hz of edge move per MHz^2 of C_Q^2
    s_lo, s_hi = c_lo**2, c_hi**2
    k = max(int(min_cells), math.ceil((s_hi - s_lo) * edge_per_s / (frac * res)))
    # eta: total variation of the edges at the largest C_Q, per unit eta
    slope = np.maximum(np.abs(np.gradient(gmin_t, eta_t)), np.abs(np.gradient(gmax_t, eta_t)))
    scale_hi = a * (c_hi * 1e6) ** 2 / (2 * nu0)
    density = scale_hi * slope + 1e-9 * frac * res  # the small constant keeps t(eta) strictly increasing
    t_table = np.concatenate([[0.0], np.cumsum(0.5 * (density[1:] + density[:-1]) * np.diff(eta_t))])
    t_span = float(np.diff(np.interp([e_lo, e_hi], eta_t, t_table))[0])
    m = max(int(min_cells), math.ceil(t_span / (frac * res)))
    if k * m > max_nodes:
        raise DistributionError(
            f"the (C_Q, eta) grid would need {k} x {m} = {k * m} nodes, more than max_nodes = {max_nodes}; "
            f"use a larger resolution_hz (now {res:g} Hz) or fraction (now {frac:g}), or raise max_nodes"
        )
    s_edges = np.linspace(s_lo, s_hi, k + 1)
    cq_edges = np.sqrt(s_edges)
    cq_nodes = np.sqrt(0.5 * (s_edges[1:] + s_edges[:-1]))
    eta_edges, eta_nodes = uniform_in_measure(t_table, eta_t, e_lo, e_hi, m)

    if method == "quadrature":
        mass = czjzek_cell_mass(cq_edges, eta_edges, s)
    else:
        counts, _, _ = np.histogram2d(samples[0], samples[1], bins=[cq_edges, eta_edges])
        mass = counts / float(n_samples)
    inside_mass = float(mass.sum())
    eta_step = float(np.max(np.abs(np.diff(np.interp(eta_nodes, eta_t, t_table))))) if m > 1 else 0.0
    return DistributionGrid(
        cq_mhz=cq_nodes, eta=eta_nodes, weights=mass / inside_mass,
        cq_edges_mhz=cq_edges, eta_edges=eta_edges, tail_mass=max(0.0, 1.0 - inside_mass), method=method,
        resolution_hz=res, fraction=frac,
        cq_edge_step_hz=float((s_edges[1] - s_edges[0]) * edge_per_s), eta_edge_step_hz=eta_step,
        n_samples=int(n_samples) if method == "sampling" else 0,
    )


def explicit_axis(name: str, spec, low: float, high: float) -> tuple[np.ndarray, np.ndarray]:
    """Check one explicit distribution ``{values, weights}``: values in [low, high], distinct, weights >= 0.

    Parameters
    ----------
    name : str
        Its key, for messages (``"cq_distribution_mhz"``).
    spec : mapping
        ``{"values": [...], "weights": [...]}``.
    low, high : float
        Allowed range of the values.

    Returns
    -------
    values, weights : numpy.ndarray
        Sorted by value; weights normalised to sum 1.

    Raises
    ------
    DistributionError
        Naming the key and what is wrong.

    Examples
    --------
    >>> v, w = explicit_axis("eta_distribution", {"values": [0.5, 0.1], "weights": [1, 3]}, 0.0, 1.0)
    >>> v.tolist(), w.tolist()
    ([0.1, 0.5], [0.75, 0.25])
    """
    if not isinstance(spec, Mapping):
        raise DistributionError(f"{name} must be a table {{values = [...], weights = [...]}}, "
                                f"not {type(spec).__name__}")
    unknown = sorted(set(spec) - {"values", "weights"})
    if unknown:
        raise DistributionError(f"{name}.{unknown[0]} is not a known key; the keys are 'values' and 'weights'")
    arrays = []
    for part in ("values", "weights"):
        if part not in spec:
            raise DistributionError(f"{name}.{part} is missing; give values = [...] and weights = [...]")
        seq = spec[part]
        if isinstance(seq, (str, bytes)) or not hasattr(seq, "__len__") or len(seq) == 0:
            raise DistributionError(f"{name}.{part} must be a non-empty list of numbers")
        arrays.append([_number(f"{name}.{part}[{i}]", v, low if part == "values" else 0.0,
                               high if part == "values" else math.inf) for i, v in enumerate(seq)])
    values, weights = (np.array(x) for x in arrays)
    if len(values) != len(weights):
        raise DistributionError(f"{name} has {len(values)} values but {len(weights)} weights; "
                                "the lengths must be equal")
    if weights.sum() <= 0:
        raise DistributionError(f"{name}.weights are all zero; at least one must be > 0")
    order = np.argsort(values, kind="stable")
    values, weights = values[order], weights[order]
    if np.any(np.diff(values) == 0):
        raise DistributionError(f"{name}.values must be distinct")
    return values, weights / weights.sum()


def explicit_grid(cq_distribution_mhz: Mapping, eta_distribution: Mapping) -> DistributionGrid:
    """A product grid from user-given 1-D distributions of C_Q and eta.

    Parameters
    ----------
    cq_distribution_mhz : Mapping
        ``{"values": [...], "weights": [...]}``: C_Q values (MHz, >= 0) and
        their weights (>= 0, not all 0); normalised to sum 1.
    eta_distribution : Mapping
        The same for eta (values in [0, 1]).

    Returns
    -------
    DistributionGrid
        Nodes sorted by value; weights the outer product of the two 1-D
        weights.

    Raises
    ------
    DistributionError
        Naming the key (``cq_distribution_mhz`` or ``eta_distribution``), the
        entry and the allowed range.

    See Also
    --------
    czjzek_grid

    Examples
    --------
    >>> g = explicit_grid({"values": [3.0, 1.0], "weights": [1.0, 1.0]},
    ...                   {"values": [0.0, 1.0], "weights": [3.0, 1.0]})
    >>> g.cq_mhz.tolist(), g.weights.tolist()
    ([1.0, 3.0], [[0.375, 0.125], [0.375, 0.125]])
    >>> try:
    ...     explicit_grid({"values": [1.0, 2.0], "weights": [1.0]}, {"values": [0.1], "weights": [1]})
    ... except DistributionError as e:
    ...     print(e)
    cq_distribution_mhz has 2 values but 1 weights; the lengths must be equal
    """
    cq, wc = explicit_axis("cq_distribution_mhz", cq_distribution_mhz, 0.0, math.inf)
    eta, we = explicit_axis("eta_distribution", eta_distribution, 0.0, 1.0)
    return DistributionGrid(cq_mhz=cq, eta=eta, weights=np.outer(wc, we), cq_edges_mhz=None, eta_edges=None,
                            tail_mass=0.0, method="explicit")


# --------------------------------------------------------------------------- averages


def _grid(grid) -> DistributionGrid:
    if not isinstance(grid, DistributionGrid):
        raise DistributionError(f"expected a DistributionGrid, not {type(grid).__name__}")
    return grid


def mean_cq_mhz(grid: DistributionGrid) -> float:
    """Weighted mean C_Q of a grid distribution (MHz).

    Parameters
    ----------
    grid : DistributionGrid

    Returns
    -------
    float

    See Also
    --------
    mean_pq_mhz

    Examples
    --------
    >>> g = explicit_grid({"values": [2.0, 4.0], "weights": [1, 1]}, {"values": [0.0], "weights": [1]})
    >>> mean_cq_mhz(g)
    3.0
    """
    g = _grid(grid)
    return float(g.weights.sum(axis=1) @ g.cq_mhz)


def _pq(g: DistributionGrid) -> np.ndarray:
    return g.cq_mhz[:, None] * np.sqrt(1 + g.eta[None, :] ** 2 / 3)


def mean_pq_mhz(grid: DistributionGrid) -> float:
    """Weighted mean quadrupolar product P_Q = C_Q (1 + eta^2/3)^(1/2) (MHz).

    Parameters
    ----------
    grid : DistributionGrid

    Returns
    -------
    float

    See Also
    --------
    czjzek_mean_pq_mhz, mean_pq_squared_mhz2

    References
    ----------
    A. Samoson, Chem. Phys. Lett. 119 (1985) 29 (the quadrupolar product).

    Examples
    --------
    >>> g = explicit_grid({"values": [3.0], "weights": [1]}, {"values": [1.0], "weights": [1]})
    >>> round(mean_pq_mhz(g), 6)
    3.464102
    """
    g = _grid(grid)
    return float((g.weights * _pq(g)).sum())


def mean_pq_squared_mhz2(grid: DistributionGrid) -> float:
    """Weighted mean of P_Q^2 = C_Q^2 (1 + eta^2/3) (MHz^2).

    Parameters
    ----------
    grid : DistributionGrid

    Returns
    -------
    float

    See Also
    --------
    mean_quadrupolar_induced_shift_ppm

    Examples
    --------
    >>> g = explicit_grid({"values": [3.0], "weights": [1]}, {"values": [1.0], "weights": [1]})
    >>> round(mean_pq_squared_mhz2(g), 9)
    12.0
    """
    g = _grid(grid)
    return float((g.weights * _pq(g) ** 2).sum())


def quadrupolar_induced_shift_ppm(pq_mhz, spin: float, larmor_hz: float) -> np.ndarray:
    """Quadrupolar-induced shift of the CT centre of gravity (ppm).

    ``delta_QIS = -(3/40) (P_Q/nu0)^2 [I(I+1) - 3/4] / [I^2 (2I-1)^2] * 1e6``.

    Parameters
    ----------
    pq_mhz : array_like
        Quadrupolar product P_Q (MHz).
    spin : float
        Half-integer spin 3/2 ... 9/2.
    larmor_hz : float
        Larmor frequency nu0 (Hz).

    Returns
    -------
    numpy.ndarray
        Shift in ppm (negative).

    See Also
    --------
    mean_quadrupolar_induced_shift_ppm

    References
    ----------
    A. Samoson, Chem. Phys. Lett. 119 (1985) 29.

    Examples
    --------
    >>> round(float(quadrupolar_induced_shift_ppm(5.0, 2.5, 104.26e6)), 3)
    -13.799
    """
    a = ct_spin_factor(spin)
    nu0 = _number("larmor_hz", larmor_hz, 0.0, low_open=True)
    p = np.asarray(pq_mhz, dtype=float) * 1e6
    return -(3.0 / 40.0) * (p / nu0) ** 2 * a * 1e6


def mean_quadrupolar_induced_shift_ppm(grid: DistributionGrid, spin: float, larmor_hz: float) -> float:
    """Quadrupolar-induced shift averaged over a grid distribution (ppm).

    The shift is linear in P_Q^2, so the average is the shift of <P_Q^2>;
    for the pure Czjzek model ``<P_Q^2> = 5 sigma^2``.

    Parameters
    ----------
    grid : DistributionGrid
    spin : float
        Half-integer spin 3/2 ... 9/2.
    larmor_hz : float
        Larmor frequency nu0 (Hz).

    Returns
    -------
    float

    See Also
    --------
    quadrupolar_induced_shift_ppm, czjzek_mean_pq_squared_mhz2

    References
    ----------
    A. Samoson, Chem. Phys. Lett. 119 (1985) 29.

    Examples
    --------
    >>> g = czjzek_grid(2.0, 2.5, 104.26e6, 200.0)
    >>> round(mean_quadrupolar_induced_shift_ppm(g, 2.5, 104.26e6), 1)
    -11.0
    >>> round(float(quadrupolar_induced_shift_ppm(np.sqrt(5 * 2.0**2), 2.5, 104.26e6)), 1)
    -11.0
    """
    return float(quadrupolar_induced_shift_ppm(math.sqrt(mean_pq_squared_mhz2(grid)), spin, larmor_hz))
