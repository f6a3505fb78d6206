"""Shift and electric-field-gradient tensors, Euler angles and spherical components.

Conventions (see also DEVELOPERS.md)
------------------------------------
Shift tensors are accepted in three forms and stored one way inside
(:class:`ShiftTensor` keeps the Haeberlen parameters):

* IUPAC principal values ``d11 >= d22 >= d33`` (ppm);
* Haeberlen: ``iso``, reduced anisotropy ``aniso = d_zz - iso`` and
  ``eta = (d_yy - d_xx) / aniso`` with
  ``|d_zz - iso| >= |d_xx - iso| >= |d_yy - iso|``;
* Herzfeld-Berger: span ``Omega = d11 - d33 >= 0`` and skew
  ``kappa = 3 (d22 - iso) / Omega`` in [-1, 1].

The principal axes x, y, z of a shift tensor are the Haeberlen axes.  When
``|d11 - iso| == |d33 - iso|`` (skew 0) the z axis is taken along d33.

The EFG in its principal frame is ``V = diag(-(1-eta)/2, -(1+eta)/2, 1)`` in
units of V_zz, so ``eta = (V_xx - V_yy)/V_zz`` lies in [0, 1].

Euler angles (alpha, beta, gamma) are ZYZ *active* rotations,
``R = Rz(alpha) Ry(beta) Rz(gamma)``.  The relative orientation of a site's
shift tensor is the rotation that carries the EFG principal axes onto the
shift principal axes: the columns of ``R`` are the shift-tensor axes written
in the EFG frame, and the shift tensor in the EFG frame is
``R diag(d_xx, d_yy, d_zz) R^T``.

Worked example: ``euler_deg = (0, 90, 0)`` is a rotation by 90 degrees about
y, which carries z onto x.  The shift tensor's unique (z) axis then lies
along the EFG x axis, so in the EFG frame ``delta[0, 0] = d_zz`` and
``delta[2, 2] = d_xx`` (tested in ``tests/physics/test_tensors.py``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = [
    "TensorError",
    "ShiftTensor",
    "efg_principal",
    "rotation_matrix",
    "is_axis_permutation",
    "spherical_components",
    "cartesian_from_spherical",
]

_TOL = 1e-12


class TensorError(ValueError):
    """A tensor parameter is outside its allowed range.

    A ``ValueError`` subclass; the message names the field, the value and the
    allowed range.

    Parameters
    ----------
    message : str
        Field name, offending value and allowed range, e.g. ``"eta_cs = 1.5 is
        outside the allowed range [0, 1]"``.

    References
    ----------
    R. K. Harris et al., Pure Appl. Chem. 80 (2008) 59 (the conventions that
    fix the allowed ranges of the shift-tensor parameters).

    Examples
    --------
    >>> try:
    ...     ShiftTensor(0.0, 10.0, 1.5)
    ... except TensorError as e:
    ...     print(e)
    eta_cs = 1.5 is outside the allowed range [0, 1]
    """


def _finite(name: str, value: float, allowed: str = "(-inf, inf), finite") -> float:
    """``float(value)``, or a TensorError naming the field, the value and ``allowed``."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise TensorError(
            f"{name} = {value!r} is not a number; the allowed range is {allowed}"
        ) from None
    if not math.isfinite(v):
        raise TensorError(
            f"{name} = {value!r} is not finite; the allowed range is {allowed}"
        )
    return v


@dataclass(frozen=True)
class ShiftTensor:
    """A chemical-shift tensor (ppm) in the Haeberlen convention.

    Parameters
    ----------
    iso_ppm : float
        Isotropic shift delta_iso (ppm).
    aniso_ppm : float
        Reduced anisotropy delta_aniso = d_zz - delta_iso (ppm), any sign.
    eta : float
        Shift asymmetry (d_yy - d_xx)/delta_aniso in [0, 1]; ignored (set to 0)
        when ``aniso_ppm == 0``.

    References
    ----------
    U. Haeberlen, *High Resolution NMR in Solids*, Adv. Magn. Reson. Suppl. 1
    (1976); J. Mason, Solid State Nucl. Magn. Reson. 2 (1993) 285 (IUPAC and
    span/skew conventions); J. Herzfeld, A. E. Berger, J. Chem. Phys. 73 (1980)
    6021.

    Examples
    --------
    >>> t = ShiftTensor.from_span_skew(10.0, 150.0, 0.5)
    >>> [round(x, 6) for x in t.principal_iupac]
    [72.5, 35.0, -77.5]
    >>> round(ShiftTensor.from_principal(t.principal_iupac).skew, 12)
    0.5
    """

    iso_ppm: float
    aniso_ppm: float = 0.0
    eta: float = 0.0

    def __post_init__(self):
        iso = _finite("shift_ppm", self.iso_ppm)
        an = _finite("aniso_ppm", self.aniso_ppm)
        eta = _finite("eta_cs", self.eta, "[0, 1]")
        if not (-_TOL <= eta <= 1 + _TOL):
            raise TensorError(f"eta_cs = {self.eta!r} is outside the allowed range [0, 1]")
        eta = min(max(eta, 0.0), 1.0)
        if an == 0.0:
            eta = 0.0
        object.__setattr__(self, "iso_ppm", iso)
        object.__setattr__(self, "aniso_ppm", an)
        object.__setattr__(self, "eta", eta)

    # ----- constructors -------------------------------------------------
    @classmethod
    def from_span_skew(cls, iso_ppm: float, span_ppm: float, skew: float) -> "ShiftTensor":
        """Build from Herzfeld-Berger span (ppm, >= 0) and skew in [-1, 1].

        Parameters
        ----------
        iso_ppm : float
            Isotropic shift delta_iso (ppm).
        span_ppm : float
            Span Omega = d11 - d33 (ppm), >= 0.
        skew : float
            Skew kappa = 3 (d22 - delta_iso)/Omega, in [-1, 1].

        Returns
        -------
        ShiftTensor
            The same tensor in the Haeberlen convention.

        References
        ----------
        J. Herzfeld, A. E. Berger, J. Chem. Phys. 73 (1980) 6021; J. Mason,
        Solid State Nucl. Magn. Reson. 2 (1993) 285.

        Examples
        --------
        >>> t = ShiftTensor.from_span_skew(0.0, 90.0, 1.0)   # axial, d11 = d22
        >>> round(t.aniso_ppm, 6), t.eta == 0.0
        (-60.0, True)
        """
        span = _finite("span_ppm", span_ppm, "[0, inf)")
        kappa = _finite("skew", skew, "[-1, 1]")
        if span < 0:
            raise TensorError(f"span_ppm = {span_ppm!r} is outside the allowed range [0, inf)")
        if not (-1 - _TOL <= kappa <= 1 + _TOL):
            raise TensorError(f"skew = {skew!r} is outside the allowed range [-1, 1]")
        kappa = min(max(kappa, -1.0), 1.0)
        iso = _finite("shift_ppm", iso_ppm)
        # principal values relative to the isotropic shift, so that the
        # isotropic shift is kept exactly as given
        t = cls.from_principal((span * (3.0 - kappa) / 6.0, kappa * span / 3.0, -span * (3.0 + kappa) / 6.0))
        return cls(iso, t.aniso_ppm, t.eta)

    @classmethod
    def from_principal(cls, principal_ppm) -> "ShiftTensor":
        """Build from three principal values (ppm, any order; sorted to IUPAC).

        Parameters
        ----------
        principal_ppm : sequence of 3 float
            Principal values (ppm) in any order; they are sorted to
            d11 >= d22 >= d33.  Their mean is the isotropic shift.

        Returns
        -------
        ShiftTensor
            Haeberlen parameters; when ``|d11 - iso| == |d33 - iso|`` the
            z axis is taken along d33.

        References
        ----------
        J. Mason, Solid State Nucl. Magn. Reson. 2 (1993) 285; U. Haeberlen,
        *High Resolution NMR in Solids*, Adv. Magn. Reson. Suppl. 1 (1976).

        Examples
        --------
        >>> t = ShiftTensor.from_principal([-77.5, 72.5, 35.0])
        >>> round(t.iso_ppm, 6), round(t.aniso_ppm, 6), round(t.eta, 6)
        (10.0, -87.5, 0.428571)
        """
        try:
            raw = list(principal_ppm)
        except TypeError:
            raise TensorError(
                f"principal_ppm = {principal_ppm!r} must be a sequence of exactly 3 values (ppm)"
            ) from None
        if len(raw) != 3:
            raise TensorError(
                f"principal_ppm = {principal_ppm!r} needs exactly 3 values, got {len(raw)}"
            )
        vals = [_finite(f"principal_ppm[{i}]", v) for i, v in enumerate(raw)]
        d11, d22, d33 = sorted(vals, reverse=True)
        iso = (d11 + d22 + d33) / 3.0
        # d11 is the Haeberlen z value when it lies further from d22 than d33
        # does (equivalently |d11 - iso| > |d33 - iso|).  Differences of the
        # sorted values are free of the rounding in ``iso``; a tie within a
        # few ulps of the values (skew 0) puts z along d33, as documented.
        gap_hi, gap_lo = d11 - d22, d22 - d33
        tie_tol = 16.0 * np.finfo(float).eps * max(abs(d11), abs(d22), abs(d33))
        if gap_hi - gap_lo > tie_tol:
            zz, xx, yy = d11, d33, d22
        else:
            zz, xx, yy = d33, d11, d22
        aniso = zz - iso
        if abs(aniso) <= _TOL * max(1.0, abs(iso)):
            return cls(iso, 0.0, 0.0)
        eta = (yy - xx) / aniso
        return cls(iso, aniso, min(max(eta, 0.0), 1.0))

    # ----- derived views ------------------------------------------------
    @property
    def principal_haeberlen(self) -> tuple[float, float, float]:
        """(d_xx, d_yy, d_zz) in ppm along the tensor's own x, y, z axes.

        Returns
        -------
        tuple of 3 float
            Haeberlen-ordered principal values (ppm),
            ``|d_zz - iso| >= |d_xx - iso| >= |d_yy - iso|``.

        References
        ----------
        U. Haeberlen, *High Resolution NMR in Solids*, Adv. Magn. Reson.
        Suppl. 1 (1976).

        Examples
        --------
        >>> ShiftTensor(0.0, 30.0, 0.5).principal_haeberlen
        (-22.5, -7.5, 30.0)
        """
        d = self.aniso_ppm
        return (
            self.iso_ppm - d * (1.0 + self.eta) / 2.0,
            self.iso_ppm - d * (1.0 - self.eta) / 2.0,
            self.iso_ppm + d,
        )

    @property
    def principal_iupac(self) -> tuple[float, float, float]:
        """(d11, d22, d33) in ppm, d11 >= d22 >= d33.

        Returns
        -------
        tuple of 3 float
            IUPAC-ordered principal values (ppm), highest shift first.

        References
        ----------
        J. Mason, Solid State Nucl. Magn. Reson. 2 (1993) 285.

        Examples
        --------
        >>> ShiftTensor(0.0, 30.0, 0.5).principal_iupac
        (30.0, -7.5, -22.5)
        """
        return tuple(sorted(self.principal_haeberlen, reverse=True))

    @property
    def span_ppm(self) -> float:
        """Span Omega = d11 - d33 (ppm).

        Returns
        -------
        float
            Span in ppm, >= 0.

        References
        ----------
        J. Mason, Solid State Nucl. Magn. Reson. 2 (1993) 285.

        Examples
        --------
        >>> ShiftTensor(0.0, 30.0, 0.5).span_ppm
        52.5
        """
        p = self.principal_iupac
        return p[0] - p[2]

    @property
    def skew(self) -> float:
        """Skew kappa = 3 (d22 - iso)/Omega; undefined for Omega = 0, returned as 0.

        Returns
        -------
        float
            Skew (dimensionless) in [-1, 1].

        References
        ----------
        J. Mason, Solid State Nucl. Magn. Reson. 2 (1993) 285.

        Examples
        --------
        >>> round(ShiftTensor(0.0, 30.0, 0.5).skew, 6)
        -0.428571
        >>> ShiftTensor(5.0).skew
        0.0
        """
        span = self.span_ppm
        if span == 0.0:
            return 0.0
        return min(max(3.0 * (self.principal_iupac[1] - self.iso_ppm) / span, -1.0), 1.0)

    @property
    def is_isotropic(self) -> bool:
        """True when the tensor has no anisotropy (aniso_ppm == 0).

        Returns
        -------
        bool
            True for a purely isotropic shift.

        References
        ----------
        U. Haeberlen, *High Resolution NMR in Solids*, Adv. Magn. Reson.
        Suppl. 1 (1976).

        Examples
        --------
        >>> ShiftTensor(5.0).is_isotropic, ShiftTensor(5.0, 1.0).is_isotropic
        (True, False)
        """
        return self.aniso_ppm == 0.0

    def matrix(self, euler_rad=(0.0, 0.0, 0.0)) -> np.ndarray:
        """3x3 tensor (ppm) in the reference frame reached by the Euler rotation.

        The columns of ``rotation_matrix(*euler_rad)`` are this tensor's
        principal axes in the reference (EFG) frame.

        Parameters
        ----------
        euler_rad : tuple of 3 float, optional
            ZYZ active Euler angles (alpha, beta, gamma) in radians of the
            tensor's principal frame relative to the reference frame.

        Returns
        -------
        numpy.ndarray, shape (3, 3)
            ``R diag(d_xx, d_yy, d_zz) R^T`` in ppm (isotropic part included).

        References
        ----------
        M. Mehring, *Principles of High Resolution NMR in Solids* (1983), app. B.

        Examples
        --------
        >>> import math
        >>> m = ShiftTensor(0.0, 30.0, 0.0).matrix((0.0, math.pi / 2, 0.0))
        >>> round(float(m[0, 0]), 9), round(float(m[2, 2]), 9)
        (30.0, -15.0)
        """
        r = rotation_matrix(*euler_rad)
        return r @ np.diag(self.principal_haeberlen) @ r.T


def efg_principal(eta_q: float) -> np.ndarray:
    """EFG principal values (V_xx, V_yy, V_zz) in units of V_zz.

    Parameters
    ----------
    eta_q : float
        Quadrupolar asymmetry in [0, 1].

    Returns
    -------
    numpy.ndarray
        ``[-(1 - eta)/2, -(1 + eta)/2, 1]``.

    References
    ----------
    A. Abragam, *The Principles of Nuclear Magnetism* (1961), chapter on electric quadrupole effects (from memory).

    Examples
    --------
    >>> efg_principal(0.0).tolist()
    [-0.5, -0.5, 1.0]
    """
    eta = _finite("eta_q", eta_q, "[0, 1]")
    if not (-_TOL <= eta <= 1 + _TOL):
        raise TensorError(f"eta_q = {eta_q!r} is outside the allowed range [0, 1]")
    eta = min(max(eta, 0.0), 1.0)
    return np.array([-(1.0 - eta) / 2.0, -(1.0 + eta) / 2.0, 1.0])


def _rz(a: float) -> np.ndarray:
    c, s = math.cos(a), math.sin(a)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def _ry(b: float) -> np.ndarray:
    c, s = math.cos(b), math.sin(b)
    return np.array([[c, 0.0, s], [0.0, 1.0, 0.0], [-s, 0.0, c]])


def rotation_matrix(alpha: float, beta: float, gamma: float) -> np.ndarray:
    """Active ZYZ rotation ``Rz(alpha) Ry(beta) Rz(gamma)`` (angles in radians).

    Parameters
    ----------
    alpha, beta, gamma : float
        ZYZ Euler angles in radians.

    Returns
    -------
    numpy.ndarray, shape (3, 3)
        Proper orthogonal matrix; its columns are the rotated x, y, z axes.

    References
    ----------
    M. E. Rose, *Elementary Theory of Angular Momentum* (1957), ch. IV.

    Examples
    --------
    >>> import numpy as np
    >>> np.round(rotation_matrix(0.0, np.pi / 2, 0.0) @ [0, 0, 1], 12).tolist()
    [1.0, 0.0, 0.0]
    """
    return _rz(alpha) @ _ry(beta) @ _rz(gamma)


def is_axis_permutation(r: np.ndarray, tol: float = 1e-9) -> bool:
    """True when a rotation only permutes (and flips) the coordinate axes.

    Parameters
    ----------
    r : array_like, shape (3, 3)
        Rotation matrix (dimensionless).
    tol : float, optional
        Tolerance on each element being 0 or +-1.

    Returns
    -------
    bool
        True when every element of ``r`` is 0 or +-1 within ``tol``, i.e. two
        tensors related by ``r`` share principal axes.

    References
    ----------
    H. Goldstein, C. Poole, J. Safko, *Classical Mechanics*, 3rd ed. (2002),
    ch. 4 (orthogonal transformations) (from memory).

    Examples
    --------
    >>> import math
    >>> is_axis_permutation(rotation_matrix(0.0, math.pi / 2, 0.0))
    True
    >>> is_axis_permutation(rotation_matrix(0.0, 0.3, 0.0))
    False
    """
    a = np.abs(np.asarray(r))
    return bool(np.all((a < tol) | (np.abs(a - 1.0) < tol)))


def spherical_components(t: np.ndarray) -> dict[int, np.ndarray]:
    """Irreducible spherical components of a real 3x3 Cartesian tensor.

    Returns a dict ``{0: array([T00]), 2: array([T2,-2 ... T2,2])}`` with
    ``T00 = Tr(t)/3`` and the rank-2 part normalised so that
    ``T20 = sqrt(3/2) (t_zz - Tr/3)``, ``T2,+-1 = -+(t_xz +- i t_yz)`` and
    ``T2,+-2 = (t_xx - t_yy +- 2 i t_xy)/2`` for a symmetric tensor (the
    components of ``r r^T`` are proportional to ``r^2 Y_2m(r)``, Condon-Shortley
    phase).  The antisymmetric (rank-1) part of ``t`` is discarded.

    Rotations, with ``R = rotation_matrix(alpha, beta, gamma)`` and
    ``D = powderspin.physics.wigner.wigner_D(2, alpha, beta, gamma)``: if ``T`` are the
    components of ``t`` and ``T'`` those of ``R t R^T`` (the tensor carried
    actively by R; e.g. ``t`` in its principal frame and ``R t R^T`` the same
    tensor in the reference frame whose axes R carries onto the principal
    axes), then

    * ``T'_{2m} = sum_k conj(D_{m k}) T_{2k}`` (``= sum_k D_{k m}(R^-1) T_{2k}``),
    * equivalently ``T_{2k} = sum_m T'_{2m} D_{m k}``: components in the
      rotated (principal) frame follow from those in the reference frame
      through ``D(alpha, beta, gamma)`` -- the usual frame-to-frame rule.

    Note that ``T'_{2m} = sum_k D_{m k} T_{2k}`` (without the conjugate) does
    *not* hold for these components.

    Parameters
    ----------
    t : array_like, shape (3, 3)
        Real Cartesian tensor (any unit, e.g. ppm or units of V_zz).

    Returns
    -------
    dict
        ``{0: array([T00]), 2: complex array([T2,-2, ..., T2,2])}`` in the
        units of ``t``.

    References
    ----------
    M. Mehring, *Principles of High Resolution NMR in Solids* (1983), app. B.

    Examples
    --------
    >>> import numpy as np
    >>> c = spherical_components(np.diag([-0.5, -0.5, 1.0]))
    >>> round(float(c[2][2].real), 12), round(float(abs(c[2][0])), 12)
    (1.224744871392, 0.0)
    """
    t = np.asarray(t, dtype=float)
    if t.shape != (3, 3):
        raise TensorError(f"tensor must be 3x3, got shape {t.shape}")
    s = 0.5 * (t + t.T)
    tr = np.trace(s) / 3.0
    c = np.empty(5, dtype=complex)
    c[2] = math.sqrt(1.5) * (s[2, 2] - tr)
    c[3] = -(s[0, 2] + 1j * s[1, 2])
    c[1] = s[0, 2] - 1j * s[1, 2]
    c[4] = 0.5 * (s[0, 0] - s[1, 1] + 2j * s[0, 1])
    c[0] = 0.5 * (s[0, 0] - s[1, 1] - 2j * s[0, 1])
    return {0: np.array([tr]), 2: c}


def cartesian_from_spherical(comp: dict[int, np.ndarray]) -> np.ndarray:
    """Inverse of :func:`spherical_components` for a symmetric tensor.

    Parameters
    ----------
    comp : dict
        ``{0: array([T00]), 2: array([T2,-2 ... T2,2])}`` as returned by
        :func:`spherical_components` (same units as the tensor).

    Returns
    -------
    numpy.ndarray, shape (3, 3)
        The real symmetric Cartesian tensor.

    References
    ----------
    M. Mehring, *Principles of High Resolution NMR in Solids* (1983), app. B.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.array([[1.0, 0.2, 0.3], [0.2, -2.0, 0.5], [0.3, 0.5, 4.0]])
    >>> bool(np.allclose(cartesian_from_spherical(spherical_components(t)), t))
    True
    """
    tr = float(np.real(comp[0][0]))
    c = comp[2]
    zz = float(np.real(c[2])) / math.sqrt(1.5)
    xz = float(np.real(c[1]))
    yz = -float(np.imag(c[1]))
    xmy = float(np.real(c[4] + c[0]))
    xy = float(np.imag(c[4])) / 1.0
    xx = (xmy - zz) / 2.0
    yy = (-xmy - zz) / 2.0
    t = np.array([[xx, xy, xz], [xy, yy, yz], [xz, yz, zz]])
    return t + tr * np.eye(3)
