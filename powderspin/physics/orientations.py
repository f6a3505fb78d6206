"""Powder orientation sets: directions on the unit sphere with quadrature weights.

A powder average is an average over crystallite orientations.  For the
frequencies computed by powderspin only the direction ``n`` of the
laboratory axis that matters (the static field B0, or the rotor axis under
spinning) expressed in the crystallite's reference frame is needed: the
remaining Euler angle either leaves a static frequency unchanged or, under
spinning, amounts to a shift of the rotor phase, over which the consumer
averages.  An :class:`OrientationSet` therefore holds unit vectors
``n`` (``vectors``, shape ``(N, 3)``) with weights summing to 1, so that

    mean over the sphere of f(n)  ~=  sum_i weights[i] * f(vectors[i]).

Conventions
-----------
* ``beta`` is the polar angle of ``n`` from the z axis of the crystallite
  frame and ``alpha`` its azimuth from the x axis, both in radians,
  ``n = (sin beta cos alpha, sin beta sin alpha, cos beta)``; ``alpha`` is
  reported in ``[0, 2 pi)``.
* ``symmetry`` says which part of the sphere the set covers:

  ``"sphere"``      the whole sphere, for any function.
  ``"hemisphere"``  ``z >= 0``; valid when ``f(n) = f(-n)``, i.e. only
                    even-rank terms appear (always true for the tensors of
                    NMR frequencies).
  ``"octant"``      ``x, y, z >= 0``; valid when additionally ``f`` is
                    invariant under each reflection x -> -x, y -> -y,
                    z -> -z (all tensors share principal axes).

  The weights of a reduced set integrate the *symmetrised* function over
  the full sphere: for a function with that symmetry the reduced-set sum
  equals the full-sphere average.
* Triangulated sets also carry ``triangles`` (vertex indices, counter-
  clockwise seen from outside the sphere) and ``triangle_weights`` (the
  exact solid angle of each spherical triangle divided by the solid angle
  of the covered region), used for triangle ("tent") interpolation of
  powder patterns.
* ``degree`` is the largest spherical-harmonic degree L such that every
  harmonic Y_l^m with l <= L that respects the set's symmetry is integrated
  to 1e-10 (absolute error of the integral over the sphere), where known;
  measured values for the shipped and example sets are in
  ``orientation_sets/README.md`` of the source tree.

The Lebedev rules are shipped as package data in
``powderspin/data/orientation_sets/`` and read through
:mod:`importlib.resources`, so they are there in any kind of install.

Set names (accepted by :func:`orientation_set_by_name`, and the ``name``
field of every generated set):

``zcw-<symmetry>-<N>``          ZCW lattice with N points (a Fibonacci number)
``lebedev-<degree>``            Lebedev rule of that algebraic degree
``gl-<nbeta>x<nalpha>[-<sym>]`` Gauss-Legendre(cos beta) x uniform(alpha)
``tri-<symmetry>-<s>``          subdivided octahedron, s subdivisions per edge
"""

from __future__ import annotations

import functools
import importlib.resources
import io
import math
import numbers
import re
from dataclasses import dataclass
from importlib.resources.abc import Traversable

import numpy as np

__all__ = [
    "SYMMETRIES",
    "ACCURACY_LEVELS",
    "LEBEDEV_PUBLISHED_DEGREES",
    "OrientationSet",
    "OrientationSetError",
    "OrientationSetFileMissing",
    "zcw",
    "zcw_sizes",
    "lebedev",
    "lebedev_degrees",
    "gauss_legendre_grid",
    "triangulated",
    "select_orientations",
    "orientation_set_by_name",
    "symmetry_rank",
]

#: The allowed values of ``symmetry``.
SYMMETRIES = ("sphere", "hemisphere", "octant")

#: Named accuracy levels of :func:`select_orientations` -> subdivisions per
#: octahedron edge.  Vertices per octant: (s + 1)(s + 2)/2 = 1540, 5050, 20100.
ACCURACY_LEVELS = (("coarse", 54), ("medium", 99), ("auto", 99), ("fine", 199))

#: Algebraic degrees of the published Lebedev rules (V. I. Lebedev and
#: D. N. Laikov, Doklady Mathematics 59 (1999) 477; the same list is in the
#: scipy.integrate.lebedev_rule documentation).  Only some of them are
#: shipped; see :func:`lebedev_degrees`.
LEBEDEV_PUBLISHED_DEGREES = (
    3, 5, 7, 9, 11, 13, 15, 17, 19, 21, 23, 25, 27, 29, 31, 35,
    41, 47, 53, 59, 65, 71, 77, 83, 89, 95, 101, 107, 113, 119, 125, 131,
)

def symmetry_rank(symmetry: str) -> int:
    """How much of the sphere a symmetry's sets cover: octant 0 < hemisphere 1 < sphere 2.

    A set of larger rank can stand in for one of smaller rank.

    Parameters
    ----------
    symmetry : {"sphere", "hemisphere", "octant"}

    Returns
    -------
    int

    Examples
    --------
    >>> symmetry_rank("octant") < symmetry_rank("hemisphere") < symmetry_rank("sphere")
    True
    """
    return {"octant": 0, "hemisphere": 1, "sphere": 2}[_check_symmetry(symmetry)]


# Solid angle covered by each symmetry (steradian).
_REGION_SOLID_ANGLE = {"sphere": 4.0 * math.pi, "hemisphere": 2.0 * math.pi,
                       "octant": 0.5 * math.pi}

# Range of the ZCW count index: N = F(index + 2), from 3 to 2 178 309 points.
_ZCW_MIN_INDEX = 2
_ZCW_MAX_INDEX = 30

# Range of subdivisions per octahedron edge for triangulated sets
# (1024 gives 4.2e6 vertices on the full sphere).
_TRI_MIN_SUBDIVISIONS = 1
_TRI_MAX_SUBDIVISIONS = 1024

# Range for the Gauss-Legendre product grid.
_GL_MAX_POINTS = 4096

_NAME_PATTERNS = (
    "zcw-<sphere|hemisphere|octant>-<N>  (N a ZCW size, e.g. zcw-sphere-6765)",
    "lebedev-<degree>  (e.g. lebedev-17)",
    "gl-<n_beta>x<n_alpha>[-<sphere|hemisphere|octant>]  (e.g. gl-32x64-hemisphere)",
    "tri-<sphere|hemisphere|octant>-<subdivisions>  (e.g. tri-octant-64)",
)


class OrientationSetError(ValueError):
    """Invalid argument or inconsistent data for an orientation set.

    A ``ValueError`` subclass; the message names the field, the value and the
    allowed range.

    Parameters
    ----------
    message : str
        Field, offending value and allowed range.

    References
    ----------
    .. [1] M. Edén, M. H. Levitt, J. Magn. Reson. 132 (1998) 220 (the grids
       whose parameters are checked).

    Examples
    --------
    >>> try:
    ...     zcw(1)
    ... except OrientationSetError as e:
    ...     print(e)
    count_index must be in [2, 30], got 1
    """


class OrientationSetFileMissing(OrientationSetError, FileNotFoundError):
    """A shipped orientation-set data file is not where it should be.

    Both an :class:`OrientationSetError` (so a ``ValueError``) and a
    ``FileNotFoundError``.

    Parameters
    ----------
    message : str
        The missing file and the set that needs it.

    References
    ----------
    .. [1] V. I. Lebedev, D. N. Laikov, Doklady Mathematics 59 (1999) 477
       (the shipped Lebedev rules).

    Examples
    --------
    >>> issubclass(OrientationSetFileMissing, FileNotFoundError)
    True
    >>> issubclass(OrientationSetFileMissing, ValueError)
    True
    """


def _orientation_set_dir() -> Traversable:
    """Folder of the shipped orientation-set files (package data).

    ``powderspin/data/orientation_sets``, reached through
    :mod:`importlib.resources` so that it is found in an editable install,
    an installed wheel or a zipped package alike.
    """
    return importlib.resources.files("powderspin") / "data" / "orientation_sets"


# ---------------------------------------------------------------------------
# The value type
# ---------------------------------------------------------------------------


def _frozen(array: np.ndarray) -> np.ndarray:
    array = np.array(array, copy=True)
    array.flags.writeable = False
    return array


@dataclass(frozen=True, eq=False)
class OrientationSet:
    """Directions on the unit sphere with quadrature weights.

    Parameters
    ----------
    name : str
        Canonical name (see the module docstring); round-trips through
        :func:`orientation_set_by_name` for generated sets.
    symmetry : {"sphere", "hemisphere", "octant"}
        Part of the sphere covered; see the module docstring.
    vectors : ndarray of float64, shape (N, 3)
        Unit vectors (dimensionless), the laboratory axis (B0 or rotor
        axis) in the crystallite frame.
    weights : ndarray of float64, shape (N,)
        Quadrature weights summing to 1 (some Lebedev rules have a negative
        weight).
    triangles : ndarray of int64, shape (M, 3), optional
        Vertex indices of a triangulation of the covered region.
    triangle_weights : ndarray of float64, shape (M,), optional
        Solid angle of each spherical triangle over the solid angle of the
        covered region (sums to 1).
    degree : int or None
        Largest spherical-harmonic degree integrated to 1e-10, where known.

    Notes
    -----
    The arrays are copied and made read-only, so a set can be shared (the
    generators cache them).  Equality is identity (``eq=False``), since
    arrays have no single truth value.

    References
    ----------
    .. [1] M. Edén, M. H. Levitt, J. Magn. Reson. 132 (1998) 220 (powder
       averaging grids and their accuracy).

    Examples
    --------
    >>> import numpy as np
    >>> s = OrientationSet("two-poles", "sphere", np.array([[0., 0., 1.], [0., 0., -1.]]),
    ...                    np.array([0.5, 0.5]))
    >>> s.size, s.has_triangles
    (2, False)
    """

    name: str
    symmetry: str
    vectors: np.ndarray
    weights: np.ndarray
    triangles: np.ndarray | None = None
    triangle_weights: np.ndarray | None = None
    degree: int | None = None

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name:
            raise OrientationSetError(f"name must be a non-empty string, got {self.name!r}")
        _check_symmetry(self.symmetry)
        vectors = np.asarray(self.vectors, dtype=np.float64)
        if vectors.ndim != 2 or vectors.shape[1] != 3 or vectors.shape[0] < 1:
            raise OrientationSetError(
                f"vectors must have shape (N, 3) with N >= 1, got shape {vectors.shape}")
        if not np.all(np.isfinite(vectors)):
            raise OrientationSetError("vectors must be finite")
        norm_error = np.max(np.abs(np.linalg.norm(vectors, axis=1) - 1.0))
        if norm_error > 1e-12:
            raise OrientationSetError(
                f"vectors must be unit vectors; largest | |n| - 1 | is {norm_error:.3g} (allowed 1e-12)")
        weights = np.asarray(self.weights, dtype=np.float64)
        if weights.shape != (vectors.shape[0],):
            raise OrientationSetError(
                f"weights must have shape ({vectors.shape[0]},), got {weights.shape}")
        if not np.all(np.isfinite(weights)):
            raise OrientationSetError("weights must be finite")
        if abs(weights.sum() - 1.0) > 1e-12:
            raise OrientationSetError(
                f"weights must sum to 1 (to 1e-12), they sum to {weights.sum()!r}")
        _check_within_symmetry(vectors, self.symmetry, "vectors")
        if (self.triangles is None) != (self.triangle_weights is None):
            raise OrientationSetError(
                "triangles and triangle_weights must both be given or both be None")
        triangles = triangle_weights = None
        if self.triangles is not None:
            triangles = np.asarray(self.triangles)
            if triangles.ndim != 2 or triangles.shape[1] != 3 or triangles.shape[0] < 1:
                raise OrientationSetError(
                    f"triangles must have shape (M, 3) with M >= 1, got {triangles.shape}")
            if not np.issubdtype(triangles.dtype, np.integer):
                raise OrientationSetError(
                    f"triangles must hold integer vertex indices, got dtype {triangles.dtype}")
            triangles = triangles.astype(np.int64)
            if triangles.min() < 0 or triangles.max() >= vectors.shape[0]:
                raise OrientationSetError(
                    f"triangle vertex indices must lie in [0, {vectors.shape[0] - 1}], "
                    f"got range [{triangles.min()}, {triangles.max()}]")
            triangle_weights = np.asarray(self.triangle_weights, dtype=np.float64)
            if triangle_weights.shape != (triangles.shape[0],):
                raise OrientationSetError(
                    f"triangle_weights must have shape ({triangles.shape[0]},), "
                    f"got {triangle_weights.shape}")
            if np.any(triangle_weights < 0) or abs(triangle_weights.sum() - 1.0) > 1e-12:
                raise OrientationSetError(
                    "triangle_weights must be >= 0 and sum to 1 (to 1e-12), "
                    f"they sum to {triangle_weights.sum()!r}")
        if self.degree is not None and (
                isinstance(self.degree, bool) or not isinstance(self.degree, numbers.Integral)
                or self.degree < 0):
            raise OrientationSetError(f"degree must be None or an int >= 0, got {self.degree!r}")
        object.__setattr__(self, "vectors", _frozen(vectors))
        object.__setattr__(self, "weights", _frozen(weights))
        object.__setattr__(self, "triangles", None if triangles is None else _frozen(triangles))
        object.__setattr__(self, "triangle_weights",
                           None if triangle_weights is None else _frozen(triangle_weights))
        object.__setattr__(self, "degree", None if self.degree is None else int(self.degree))

    @property
    def size(self) -> int:
        """Number of orientations N.

        Returns
        -------
        int

        References
        ----------
        .. [1] M. Edén, M. H. Levitt, J. Magn. Reson. 132 (1998) 220.

        Examples
        --------
        >>> zcw(3).size
        5
        """
        return int(self.vectors.shape[0])

    @property
    def beta(self) -> np.ndarray:
        """Polar angle of each vector from the z axis, radians in [0, pi].

        Returns
        -------
        numpy.ndarray, shape (N,)
            beta in radians (read-only).

        References
        ----------
        .. [1] M. Edén, M. H. Levitt, J. Magn. Reson. 132 (1998) 220.

        Examples
        --------
        >>> import numpy as np
        >>> s = OrientationSet("x-z", "octant", np.array([[1., 0., 0.], [0., 0., 1.]]),
        ...                    np.array([0.5, 0.5]))
        >>> np.degrees(s.beta).round(6).tolist()
        [90.0, 0.0]
        """
        out = np.arccos(np.clip(self.vectors[:, 2], -1.0, 1.0))
        out.flags.writeable = False
        return out

    @property
    def alpha(self) -> np.ndarray:
        """Azimuth of each vector from the x axis, radians in [0, 2 pi).

        Returns
        -------
        numpy.ndarray, shape (N,)
            alpha in radians (read-only); 0 on the z axis.

        References
        ----------
        .. [1] M. Edén, M. H. Levitt, J. Magn. Reson. 132 (1998) 220.

        Examples
        --------
        >>> import numpy as np
        >>> s = OrientationSet("x-y", "octant", np.array([[1., 0., 0.], [0., 1., 0.]]),
        ...                    np.array([0.5, 0.5]))
        >>> np.degrees(s.alpha).round(6).tolist()
        [0.0, 90.0]
        """
        out = np.mod(np.arctan2(self.vectors[:, 1], self.vectors[:, 0]), 2.0 * np.pi)
        out[out >= 2.0 * np.pi] = 0.0
        out.flags.writeable = False
        return out

    @property
    def has_triangles(self) -> bool:
        """True when the set carries a triangulation.

        Returns
        -------
        bool
            True when ``triangles`` and ``triangle_weights`` are present, as
            triangle ("tent") interpolation needs.

        References
        ----------
        .. [1] D. W. Alderman, M. S. Solum, D. M. Grant, J. Chem. Phys. 84
           (1986) 3717.

        Examples
        --------
        >>> triangulated(2, "octant").has_triangles, zcw(3).has_triangles
        (True, False)
        """
        return self.triangles is not None

    def __repr__(self) -> str:
        tri = f", triangles={self.triangles.shape[0]}" if self.has_triangles else ""
        return (f"OrientationSet(name={self.name!r}, symmetry={self.symmetry!r}, "
                f"size={self.size}{tri}, degree={self.degree})")


# ---------------------------------------------------------------------------
# Validation helpers
# ---------------------------------------------------------------------------


def _check_symmetry(symmetry: object, field: str = "symmetry") -> str:
    if not isinstance(symmetry, str) or symmetry not in SYMMETRIES:
        raise OrientationSetError(
            f"{field} must be one of {', '.join(repr(s) for s in SYMMETRIES)}; got {symmetry!r}")
    return symmetry


def _check_int(value: object, field: str, low: int, high: int) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise OrientationSetError(
            f"{field} must be an integer in [{low}, {high}], got {value!r}")
    if not low <= int(value) <= high:
        raise OrientationSetError(f"{field} must be in [{low}, {high}], got {int(value)}")
    return int(value)


def _check_within_symmetry(vectors: np.ndarray, symmetry: str, field: str) -> None:
    tol = -1e-12
    if symmetry == "hemisphere" and vectors[:, 2].min() < tol:
        raise OrientationSetError(
            f"{field} of a 'hemisphere' set must have z >= 0; smallest z is {vectors[:, 2].min():.3g}")
    if symmetry == "octant" and vectors.min() < tol:
        raise OrientationSetError(
            f"{field} of an 'octant' set must have x, y, z >= 0; smallest component is "
            f"{vectors.min():.3g}")


def _unit_vectors(beta: np.ndarray, alpha: np.ndarray) -> np.ndarray:
    sb = np.sin(beta)
    return np.stack([sb * np.cos(alpha), sb * np.sin(alpha), np.cos(beta)], axis=1)


# ---------------------------------------------------------------------------
# Zaremba-Conroy-Wolfsberg lattices
# ---------------------------------------------------------------------------


@functools.lru_cache(maxsize=None)
def _fibonacci(k: int) -> int:
    a, b = 0, 1
    for _ in range(k):
        a, b = b, a + b
    return a


def zcw_sizes(symmetry: str = "sphere") -> dict[int, int]:
    """Sizes of the available ZCW lattices.

    Parameters
    ----------
    symmetry : {"sphere", "hemisphere", "octant"}
        Region covered; the sizes are the same for all three.

    Returns
    -------
    dict
        ``{count_index: N}`` with ``N = F(count_index + 2)`` (Fibonacci
        numbers, F(0) = 0, F(1) = 1), for count_index from 2 to 30
        (N = 3 ... 2 178 309).

    References
    ----------
    .. [1] M. Edén, M. H. Levitt, J. Magn. Reson. 132 (1998) 220.

    Examples
    --------
    >>> zcw_sizes()[18]
    6765
    """
    _check_symmetry(symmetry)
    return {m: _fibonacci(m + 2) for m in range(_ZCW_MIN_INDEX, _ZCW_MAX_INDEX + 1)}


# ZCW constants (c1, c2, c3) of Edén and Levitt (1998); values from memory of
# that paper.  cos(beta_j) = c1 (c2 (j/N) - 1) and
# alpha_j = (2 pi / c3) frac(j F_m / N).
# sphere:     c1 = 1,  c2 = 2, c3 = 1  ->  cos beta in [-1, 1), alpha in [0, 2 pi)
# hemisphere: c1 = -1, c2 = 1, c3 = 1  ->  cos beta in (0, 1],  alpha in [0, 2 pi)
# octant:     c1 = -1, c2 = 1, c3 = 4  ->  cos beta in (0, 1],  alpha in [0, pi/2)
_ZCW_CONSTANTS = {"sphere": (1.0, 2.0, 1.0), "hemisphere": (-1.0, 1.0, 1.0),
                  "octant": (-1.0, 1.0, 4.0)}


@functools.lru_cache(maxsize=64)
def _zcw_cached(count_index: int, symmetry: str) -> OrientationSet:
    n_points = _fibonacci(count_index + 2)
    generator = _fibonacci(count_index)
    c1, c2, c3 = _ZCW_CONSTANTS[symmetry]
    j = np.arange(n_points, dtype=np.int64)
    # frac(j F_m / N) in exact integer arithmetic (j F_m < 2e12 fits int64).
    frac = ((j * generator) % n_points) / n_points
    cos_beta = c1 * (c2 * (j / n_points) - 1.0)
    alpha = (2.0 * np.pi / c3) * frac
    sin_beta = np.sqrt(np.maximum(0.0, 1.0 - cos_beta * cos_beta))
    vectors = np.stack([sin_beta * np.cos(alpha), sin_beta * np.sin(alpha), cos_beta], axis=1)
    if symmetry == "octant":
        vectors = np.maximum(vectors, 0.0)  # cos(pi/2 - tiny) rounding
    weights = np.full(n_points, 1.0 / n_points)
    # Not a polynomial-exact rule: only the constant is exact (degree 0); the
    # reduced sets are trivially exact at l = 1 too, where no symmetric
    # harmonic exists.  Measured errors are in orientation_sets/README.md
    # of the source tree.
    degree = 0 if symmetry == "sphere" else 1
    return OrientationSet(f"zcw-{symmetry}-{n_points}", symmetry, vectors, weights,
                          degree=degree)


def zcw(count_index: int, symmetry: str = "sphere") -> OrientationSet:
    """Zaremba-Conroy-Wolfsberg (ZCW) lattice of ``F(count_index + 2)`` directions.

    The j-th of N = F(m + 2) points (F the Fibonacci numbers, m =
    ``count_index``) has

        cos(beta_j) = c1 (c2 j / N - 1),  alpha_j = (2 pi / c3) frac(j F(m) / N),

    all weights 1/N, with (c1, c2, c3) = (1, 2, 1) for the sphere,
    (-1, 1, 1) for the hemisphere and (-1, 1, 4) for the octant.

    Parameters
    ----------
    count_index : int
        Fibonacci index m, 2 <= m <= 30 (N = 3 ... 2 178 309); see
        :func:`zcw_sizes`.
    symmetry : {"sphere", "hemisphere", "octant"}
        Region covered.

    Returns
    -------
    OrientationSet
        Named ``"zcw-<symmetry>-<N>"``, no triangles.

    References
    ----------
    .. [1] M. Edén, M. H. Levitt, J. Magn. Reson. 132 (1998) 220 (the
       constants c1, c2, c3 are quoted from memory of that paper).
    .. [2] S. K. Zaremba, Ann. Mat. Pura Appl. 73 (1966) 293; H. Conroy,
       J. Chem. Phys. 47 (1967) 5307; V. B. Cheng, H. H. Suzukawa,
       M. Wolfsberg, J. Chem. Phys. 59 (1973) 3992 (citations from memory).

    Examples
    --------
    >>> s = zcw(18)
    >>> s.name, s.size
    ('zcw-sphere-6765', 6765)
    """
    count_index = _check_int(count_index, "count_index", _ZCW_MIN_INDEX, _ZCW_MAX_INDEX)
    _check_symmetry(symmetry)
    return _zcw_cached(count_index, symmetry)


# ---------------------------------------------------------------------------
# Lebedev rules (shipped files)
# ---------------------------------------------------------------------------


def _lebedev_path(degree: int) -> Traversable:
    return _orientation_set_dir() / f"lebedev_{degree:03d}.csv"


def lebedev_degrees() -> tuple[int, ...]:
    """Degrees of the Lebedev rules shipped with the package.

    The files live in ``powderspin/data/orientation_sets/``.

    Returns
    -------
    tuple of int
        Sorted algebraic degrees for which a file ``lebedev_DDD.csv`` exists.

    References
    ----------
    .. [1] V. I. Lebedev, D. N. Laikov, Doklady Mathematics 59 (1999) 477.

    Examples
    --------
    >>> 17 in lebedev_degrees()
    True
    """
    folder = _orientation_set_dir()
    if not folder.is_dir():
        return ()
    found = []
    for entry in folder.iterdir():
        match = re.fullmatch(r"lebedev_(\d{3})\.csv", entry.name)
        if match and entry.is_file():
            found.append(int(match.group(1)))
    return tuple(sorted(found))


@functools.lru_cache(maxsize=None)
def _lebedev_cached(degree: int) -> OrientationSet:
    path = _lebedev_path(degree)
    if not path.is_file():
        raise OrientationSetFileMissing(
            f"Lebedev rule of degree {degree} needs the file {path}, which is missing; "
            "regenerate the shipped rules with `python tools/make_sets.py` "
            f"(shipped degrees: {list(lebedev_degrees())})")
    text = path.read_text(encoding="utf-8")
    table = np.loadtxt(io.StringIO(text), delimiter=",", comments="#", dtype=np.float64,
                       ndmin=2)
    if table.shape[1] != 4:
        raise OrientationSetError(
            f"{path} must have 4 columns x, y, z, weight; found {table.shape[1]}")
    return OrientationSet(f"lebedev-{degree}", "sphere", table[:, :3], table[:, 3],
                          degree=degree)


def lebedev(degree: int) -> OrientationSet:
    """Lebedev quadrature rule on the sphere, exact for harmonics up to ``degree``.

    The rules have octahedral symmetry; their points form the orbits
    a1 (6 points), a2 (12), a3 (8), b_k (24, (l, l, m)), c_k (24,
    (p, q, 0)) and d_k (48, (r, s, t)).  They are generated by
    ``tools/make_sets.py`` (in the source tree), which solves the moment
    equations for that orbit structure, and loaded from the package data
    folder ``powderspin/data/orientation_sets/``.

    Parameters
    ----------
    degree : int
        Algebraic degree of the rule, one of :data:`LEBEDEV_PUBLISHED_DEGREES`
        whose file is shipped (see :func:`lebedev_degrees`).

    Returns
    -------
    OrientationSet
        Named ``"lebedev-<degree>"``, symmetry ``"sphere"``, no triangles.
        The 74-point rule (degree 13) has negative weights.

    Raises
    ------
    OrientationSetError
        If ``degree`` is not a published degree.
    OrientationSetFileMissing
        If the file for a published degree is not shipped.

    References
    ----------
    .. [1] V. I. Lebedev, Zh. Vychisl. Mat. Mat. Fiz. 16 (1976) 293
       (citation from memory).
    .. [2] V. I. Lebedev, D. N. Laikov, Doklady Mathematics 59 (1999) 477.

    Examples
    --------
    >>> s = lebedev(17)
    >>> s.size, s.degree
    (110, 17)
    """
    if isinstance(degree, bool) or not isinstance(degree, numbers.Integral) \
            or int(degree) not in LEBEDEV_PUBLISHED_DEGREES:
        raise OrientationSetError(
            f"degree must be a published Lebedev degree {list(LEBEDEV_PUBLISHED_DEGREES)}; "
            f"got {degree!r} (shipped: {list(lebedev_degrees())})")
    return _lebedev_cached(int(degree))


# ---------------------------------------------------------------------------
# Gauss-Legendre product grids
# ---------------------------------------------------------------------------


def _gl_degree(n_beta: int, n_alpha: int, symmetry: str) -> int:
    # sphere: cos(beta) polynomials up to 2 n_beta - 1, e^{i m alpha} for
    # |m| < n_alpha.  Reduced sets: the first symmetric harmonic missed is
    # l = 2 n_beta (m = 0), or the first even l >= |m| for the first |m|
    # the alpha sum does not cancel (n_alpha hemisphere, 4 n_alpha octant).
    if symmetry == "sphere":
        return min(2 * n_beta - 1, n_alpha - 1)
    first_m = n_alpha if symmetry == "hemisphere" else 4 * n_alpha
    first_even_l = first_m + (first_m % 2)
    return min(2 * n_beta, first_even_l) - 1


@functools.lru_cache(maxsize=64)
def _gl_cached(n_beta: int, n_alpha: int, symmetry: str) -> OrientationSet:
    x, w = np.polynomial.legendre.leggauss(n_beta)
    if symmetry == "sphere":
        cos_beta, w_beta = x, w / 2.0
        alpha_range = 2.0 * np.pi
    else:
        cos_beta, w_beta = (x + 1.0) / 2.0, w / 2.0
        alpha_range = 2.0 * np.pi if symmetry == "hemisphere" else 0.5 * np.pi
    alpha = (np.arange(n_alpha) + 0.5) * (alpha_range / n_alpha)
    cb, al = np.meshgrid(cos_beta, alpha, indexing="ij")
    sb = np.sqrt(np.maximum(0.0, 1.0 - cb * cb))
    vectors = np.stack([sb * np.cos(al), sb * np.sin(al), cb], axis=-1).reshape(-1, 3)
    weights = np.repeat(w_beta / w_beta.sum(), n_alpha) / n_alpha
    weights = weights / weights.sum()
    if symmetry == "octant":
        vectors = np.maximum(vectors, 0.0)
    return OrientationSet(f"gl-{n_beta}x{n_alpha}-{symmetry}", symmetry, vectors, weights,
                          degree=_gl_degree(n_beta, n_alpha, symmetry))


def gauss_legendre_grid(n_beta: int, n_alpha: int, symmetry: str = "sphere") -> OrientationSet:
    """Product grid: Gauss-Legendre in cos(beta) times the midpoint rule in alpha.

    Parameters
    ----------
    n_beta : int
        Gauss-Legendre nodes in cos(beta) (over [-1, 1] for the sphere,
        [0, 1] for the reduced sets), 1 ... 4096.
    n_alpha : int
        Equally spaced azimuths alpha_k = (k + 1/2) * range / n_alpha with
        range 2 pi (sphere, hemisphere) or pi/2 (octant), 1 ... 4096.
    symmetry : {"sphere", "hemisphere", "octant"}
        Region covered.

    Returns
    -------
    OrientationSet
        Named ``"gl-<n_beta>x<n_alpha>-<symmetry>"``, ``n_beta * n_alpha``
        points.  Its ``degree`` is min(2 n_beta - 1, n_alpha - 1) for the
        sphere; for the reduced sets (symmetric harmonics only)
        min(2 n_beta, l_m) - 1 with l_m the first even degree >= n_alpha
        (hemisphere) or 4 n_alpha (octant).

    References
    ----------
    .. [1] M. Abramowitz, I. A. Stegun, Handbook of Mathematical Functions
       (1964), 25.4.29 (Gauss-Legendre quadrature; section number from
       memory).
    .. [2] M. Edén, M. H. Levitt, J. Magn. Reson. 132 (1998) 220 (product
       grids compared with other powder schemes).

    Examples
    --------
    >>> s = gauss_legendre_grid(8, 16)
    >>> s.size, s.degree
    (128, 15)
    """
    n_beta = _check_int(n_beta, "n_beta", 1, _GL_MAX_POINTS)
    n_alpha = _check_int(n_alpha, "n_alpha", 1, _GL_MAX_POINTS)
    _check_symmetry(symmetry)
    return _gl_cached(n_beta, n_alpha, symmetry)


# ---------------------------------------------------------------------------
# Triangulated sets (subdivided octahedron)
# ---------------------------------------------------------------------------

_FACE_SIGNS = {
    "octant": ((1, 1, 1),),
    "hemisphere": ((1, 1, 1), (-1, 1, 1), (-1, -1, 1), (1, -1, 1)),
    "sphere": ((1, 1, 1), (-1, 1, 1), (-1, -1, 1), (1, -1, 1),
               (1, 1, -1), (-1, 1, -1), (-1, -1, -1), (1, -1, -1)),
}


def _solid_angles(a: np.ndarray, b: np.ndarray, c: np.ndarray) -> np.ndarray:
    """Solid angle of spherical triangles with unit-vector corners (steradian).

    Van Oosterom-Strackee formula, tan(Omega/2) = |a.(b x c)| /
    (1 + a.b + b.c + c.a); the triple product is taken as
    a.((b - a) x (c - a)) to avoid cancellation for small triangles.
    """
    d1, d2 = b - a, c - a
    triple = (a[:, 0] * (d1[:, 1] * d2[:, 2] - d1[:, 2] * d2[:, 1])
              + a[:, 1] * (d1[:, 2] * d2[:, 0] - d1[:, 0] * d2[:, 2])
              + a[:, 2] * (d1[:, 0] * d2[:, 1] - d1[:, 1] * d2[:, 0]))
    denominator = 1.0 + np.einsum("ij,ij->i", a, b) + np.einsum("ij,ij->i", b, c) \
        + np.einsum("ij,ij->i", c, a)
    return 2.0 * np.arctan2(np.abs(triple), denominator)


@functools.lru_cache(maxsize=16)
def _triangulated_cached(subdivisions: int, symmetry: str) -> OrientationSet:
    s = subdivisions
    # Barycentric grid of the first-octant face: lattice points (i, j, k),
    # i + j + k = s, numbered row by row.
    i_idx, j_idx = np.meshgrid(np.arange(s + 1), np.arange(s + 1), indexing="ij")
    keep = i_idx + j_idx <= s
    i_idx, j_idx = i_idx[keep], j_idx[keep]
    local = -np.ones((s + 1, s + 1), dtype=np.int64)
    local[i_idx, j_idx] = np.arange(i_idx.size)
    # "Up" triangles (i, j), (i+1, j), (i, j+1) for i + j <= s - 1 and
    # "down" triangles (i+1, j), (i+1, j+1), (i, j+1) for i + j <= s - 2;
    # both are counter-clockwise seen from outside (their edge vectors'
    # cross product is (1, 1, 1) in lattice units).
    ui, uj = np.nonzero(np.add.outer(np.arange(s), np.arange(s)) <= s - 1)
    di, dj = np.nonzero(np.add.outer(np.arange(s), np.arange(s)) <= s - 2)
    face_triangles = np.concatenate([
        np.stack([local[ui, uj], local[ui + 1, uj], local[ui, uj + 1]], axis=1),
        np.stack([local[di + 1, dj], local[di + 1, dj + 1], local[di, dj + 1]], axis=1),
    ])
    face_lattice = np.stack([i_idx, j_idx, s - i_idx - j_idx], axis=1)
    face_vectors = face_lattice / np.linalg.norm(face_lattice, axis=1)[:, None]
    # Exact solid angles of one face's triangles; the other faces are
    # mirror images with the same solid angles.
    face_omega = _solid_angles(face_vectors[face_triangles[:, 0]],
                               face_vectors[face_triangles[:, 1]],
                               face_vectors[face_triangles[:, 2]])
    signs = np.array(_FACE_SIGNS[symmetry], dtype=np.int64)
    # Merge the vertices shared between faces through a table indexed by
    # the lattice point (x, y) and the side z < 0 (a zero z has no side).
    width = 2 * s + 1
    lattice = signs[:, None, :] * face_lattice[None, :, :]
    codes = ((lattice[..., 0] + s) * width + (lattice[..., 1] + s)) * 2 + (lattice[..., 2] < 0)
    used = np.zeros(2 * width * width, dtype=bool)
    used[codes.reshape(-1)] = True
    numbering = np.cumsum(used) - 1
    vertex_of = numbering[codes]  # (faces, n_face) -> global vertex index
    n_vertices = int(numbering[-1]) + 1
    vectors = np.empty((n_vertices, 3))
    for f in range(signs.shape[0]):
        vectors[vertex_of[f]] = signs[f] * face_vectors
    triangles = np.empty((signs.shape[0], face_triangles.shape[0], 3), dtype=np.int64)
    for f in range(signs.shape[0]):
        # A reflection with an odd number of sign flips reverses the sense.
        template = face_triangles if np.prod(signs[f]) > 0 else face_triangles[:, ::-1]
        triangles[f] = vertex_of[f][template]
    triangles = triangles.reshape(-1, 3)
    triangle_weights = np.tile(face_omega, signs.shape[0]) / _REGION_SOLID_ANGLE[symmetry]
    # Vertex weights: a third of each adjacent triangle's weight.
    weights = np.bincount(triangles.reshape(-1), weights=np.repeat(triangle_weights / 3.0, 3),
                          minlength=n_vertices)
    # The mesh is invariant under the octahedral group, so no harmonic of
    # degree 1 ... 3 has a symmetric part: degree 3 (measured in the README).
    return OrientationSet(f"tri-{symmetry}-{s}", symmetry, vectors, weights,
                          triangles=triangles, triangle_weights=triangle_weights, degree=3)


def triangulated(subdivisions: int, symmetry: str = "octant") -> OrientationSet:
    """Subdivided octahedron projected onto the sphere, with its triangulation.

    Each octahedron face covered by ``symmetry`` (1 face for the octant,
    the 4 upper ones for the hemisphere, all 8 for the sphere) is cut into
    ``subdivisions**2`` triangles by a barycentric grid; the vertices are
    projected radially onto the unit sphere and shared vertices merged, so
    the triangulation is a proper mesh.

    Parameters
    ----------
    subdivisions : int
        Subdivisions s of each octahedron edge, 1 ... 1024.  Vertices:
        (s+1)(s+2)/2 (octant), 2 s^2 + 2 s + 1 (hemisphere), 4 s^2 + 2
        (sphere); triangles: s^2 per face.
    symmetry : {"octant", "hemisphere", "sphere"}
        Region covered.

    Returns
    -------
    OrientationSet
        Named ``"tri-<symmetry>-<s>"``.  ``triangle_weights`` are the exact
        solid angles (Van Oosterom-Strackee) over the region's solid angle;
        vertex ``weights`` are a third of the weights of the adjacent
        triangles.

    References
    ----------
    .. [1] D. W. Alderman, M. S. Solum, D. M. Grant, J. Chem. Phys. 84
       (1986) 3717 (triangulated powder averaging and interpolation).
    .. [2] A. van Oosterom, J. Strackee, IEEE Trans. Biomed. Eng. 30
       (1983) 125 (solid angle of a plane triangle).

    Examples
    --------
    >>> s = triangulated(4)
    >>> s.size, s.triangles.shape
    (15, (16, 3))
    """
    subdivisions = _check_int(subdivisions, "subdivisions", _TRI_MIN_SUBDIVISIONS,
                              _TRI_MAX_SUBDIVISIONS)
    _check_symmetry(symmetry)
    return _triangulated_cached(subdivisions, symmetry)


def _tri_vertex_count(subdivisions: int, symmetry: str) -> int:
    s = subdivisions
    return {"octant": (s + 1) * (s + 2) // 2, "hemisphere": 2 * s * s + 2 * s + 1,
            "sphere": 4 * s * s + 2}[symmetry]


# ---------------------------------------------------------------------------
# Automatic choice and names
# ---------------------------------------------------------------------------


def select_orientations(symmetry: str, accuracy: str | int = "auto",
                        interpolate: bool = True) -> OrientationSet:
    """Choose an orientation set for a powder average.

    Parameters
    ----------
    symmetry : {"sphere", "hemisphere", "octant"}
        Symmetry of the frequency function (see the module docstring).
    accuracy : {"coarse", "medium", "auto", "fine"} or int
        Named level or the subdivisions per octahedron edge (1 ... 1024).
        The levels give 54, 99 and 199 subdivisions ("auto" = "medium"),
        i.e. 1540, 5050 and 20100 vertices per octant; the hemisphere and
        the sphere use the same subdivisions, so the density on the sphere
        is the same (4 and 8 times as many points).
    interpolate : bool
        True returns the triangulated set (for tent interpolation); False
        returns the ZCW lattice of the same symmetry whose size is closest
        (in ratio) to the triangulated set's vertex count.

    Returns
    -------
    OrientationSet

    References
    ----------
    .. [1] D. W. Alderman, M. S. Solum, D. M. Grant, J. Chem. Phys. 84
       (1986) 3717.
    .. [2] M. Edén, M. H. Levitt, J. Magn. Reson. 132 (1998) 220.

    Examples
    --------
    >>> select_orientations("octant").name
    'tri-octant-99'
    >>> select_orientations("octant", interpolate=False).name
    'zcw-octant-4181'
    """
    _check_symmetry(symmetry)
    levels = dict(ACCURACY_LEVELS)
    if isinstance(accuracy, str):
        if accuracy not in levels:
            raise OrientationSetError(
                f"accuracy must be one of {', '.join(repr(k) for k in levels)} or an integer "
                f"number of subdivisions in [{_TRI_MIN_SUBDIVISIONS}, {_TRI_MAX_SUBDIVISIONS}]; "
                f"got {accuracy!r}")
        subdivisions = levels[accuracy]
    elif isinstance(accuracy, numbers.Integral) and not isinstance(accuracy, bool):
        subdivisions = _check_int(accuracy, "accuracy", _TRI_MIN_SUBDIVISIONS,
                                  _TRI_MAX_SUBDIVISIONS)
    else:
        raise OrientationSetError(
            f"accuracy must be one of {', '.join(repr(k) for k in levels)} or an integer "
            f"number of subdivisions in [{_TRI_MIN_SUBDIVISIONS}, {_TRI_MAX_SUBDIVISIONS}]; "
            f"got {accuracy!r}")
    if not isinstance(interpolate, (bool, np.bool_)):
        raise OrientationSetError(f"interpolate must be True or False, got {interpolate!r}")
    if interpolate:
        return triangulated(subdivisions, symmetry)
    target = _tri_vertex_count(subdivisions, symmetry)
    sizes = zcw_sizes(symmetry)
    best = min(sizes, key=lambda m: abs(math.log(sizes[m] / target)))
    return zcw(best, symmetry)


def orientation_set_by_name(name: str) -> OrientationSet:
    """Orientation set from its name.

    Parameters
    ----------
    name : str
        One of the patterns

        - ``zcw-<sphere|hemisphere|octant>-<N>`` (N a ZCW size, see
          :func:`zcw_sizes`), e.g. ``"zcw-sphere-6765"``;
        - ``lebedev-<degree>``, e.g. ``"lebedev-17"``;
        - ``gl-<n_beta>x<n_alpha>[-<sphere|hemisphere|octant>]`` (default
          sphere), e.g. ``"gl-32x64-hemisphere"``;
        - ``tri-<sphere|hemisphere|octant>-<subdivisions>``, e.g.
          ``"tri-octant-64"``.

        Case and surrounding blanks are ignored.

    Returns
    -------
    OrientationSet
        Its ``name`` is the canonical form of ``name``.

    References
    ----------
    .. [1] M. Edén, M. H. Levitt, J. Magn. Reson. 132 (1998) 220.
    .. [2] V. I. Lebedev, D. N. Laikov, Doklady Mathematics 59 (1999) 477.

    Examples
    --------
    >>> orientation_set_by_name("zcw-octant-1597").size
    1597
    >>> orientation_set_by_name("gl-4x8").name
    'gl-4x8-sphere'
    """
    if not isinstance(name, str):
        raise OrientationSetError(
            f"name must be a string matching one of: {'; '.join(_NAME_PATTERNS)}; got {name!r}")
    key = name.strip().lower()
    sym = "(sphere|hemisphere|octant)"
    match = re.fullmatch(rf"zcw-{sym}-(\d+)", key)
    if match:
        symmetry, size = match.group(1), int(match.group(2))
        by_size = {n: m for m, n in zcw_sizes(symmetry).items()}
        if size not in by_size:
            raise OrientationSetError(
                f"ZCW size in name {name!r} must be one of {sorted(by_size)}; got {size}")
        return zcw(by_size[size], symmetry)
    match = re.fullmatch(r"lebedev-(\d+)", key)
    if match:
        return lebedev(int(match.group(1)))
    match = re.fullmatch(rf"gl-(\d+)x(\d+)(?:-{sym})?", key)
    if match:
        return gauss_legendre_grid(int(match.group(1)), int(match.group(2)),
                                   match.group(3) or "sphere")
    match = re.fullmatch(rf"tri-{sym}-(\d+)", key)
    if match:
        return triangulated(int(match.group(2)), match.group(1))
    raise OrientationSetError(
        f"unknown orientation set name {name!r}; accepted patterns: {'; '.join(_NAME_PATTERNS)}")
