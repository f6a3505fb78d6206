r"""Parameters with several values for one spectrum, and the one value a fit reports.

Relative orientation (Euler angles)
-----------------------------------
The shift tensor's principal frame is placed in the EFG principal frame by
the ZYZ active rotation ``R = Rz(alpha) Ry(beta) Rz(gamma)``; the shift
tensor in the EFG frame is ``R D R^T`` (``D`` diagonal).  Three symmetries
leave every high-field spectrum unchanged:

* **The EFG tensor's own symmetry** (point group D2h of a symmetric
  tensor): a half turn ``C`` about any of its principal axes leaves ``V``
  unchanged, so ``R -> C R`` describes the same pair of tensors.  ``C = Rz(pi)``
  gives ``alpha -> alpha + 180``.
* **The shift tensor's own symmetry**: ``R -> R C'``, ``C'`` a half turn
  about a shift principal axis.  ``C' = Rz(pi)`` gives ``gamma -> gamma + 180``;
  ``C' = Ry(pi)`` gives ``(alpha + 180, 180 - beta, 180 - gamma)`` (using
  ``Rz(g) Ry(pi) = Ry(pi) Rz(-g)`` and ``Ry(beta + pi) = Rz(pi) Ry(pi - beta) Rz(pi)``).
* **The powder average** cannot tell a crystallite from its mirror image: a
  reflection ``M`` of the whole crystallite changes the frequencies at field
  direction ``b`` into those at ``M b``, another orientation of the same
  powder (under spinning it reverses the sense of rotation, which leaves the
  sideband intensities ``|F_n|^2`` unchanged: M. H. Levitt, J. Magn. Reson. 82
  (1989) 427).  ``V`` is diagonal, so ``M V M = V``, and the shift tensor
  becomes ``(M R M) D (M R M)^T``.  The mirror ``y -> -y`` gives
  ``(-alpha, beta, -gamma)``; the mirror ``z -> -z`` gives ``(alpha, -beta, gamma)``.

Together they form a group of 16 operations: ``alpha -> +-alpha + {0, 180}``,
``gamma -> +-gamma + {0, 180}``, ``beta -> beta`` or ``180 - beta``, where the
signs of alpha and gamma flip together and a flip of beta flips the sign of
gamma.  **The fundamental domain reported by a fit** is

    0 <= alpha <= 90,  0 <= beta <= 90,  0 <= gamma < 180  (degrees),

one representative of every class (volume 1/16 of the whole range).  On its
edges, further equivalences remain (beta = 90 or alpha in {0, 90}:
``gamma -> 180 - gamma``, folded to gamma <= 90; beta = 0: only
alpha + gamma matters, folded to alpha = 0).  Where a tensor is axially
symmetric, one angle is not defined at all: ``eta_q = 0`` leaves alpha free
(a rotation about the EFG's z axis), an axial shift tensor (``eta_cs = 0``,
skew = +-1) leaves gamma free; a fit reports such an angle as 0 and says so.

Other multi-valued parameters
-----------------------------
* **Sign of C_Q.**  The central transition depends on C_Q only through
  second-order terms, quadratic in C_Q (design notes, section 2), so its sign
  is invisible; with only the central transition observed, a fit reports
  ``|C_Q|``.
* **Span/skew and the Haeberlen axes.**  Euler angles refer to the
  Haeberlen axes of the shift tensor (z the principal axis furthest from the
  isotropic value).  At skew = 0 the axes of d11 and d33 are equally far, and
  as the skew passes through 0 the z axis jumps from one to the other: the
  angles on both sides describe different frames.  A fit whose skew is
  within two standard errors of 0, with free angles, says so.
* **eta at 0 and 1.**  eta_q = 0 and an axial shift tensor make an angle
  undefined (above).  At eta_q = 1, ``V = diag(0, -1, 1)``, and a quarter turn
  about x changes V into -V, which the central transition cannot see: one
  more equivalence, of measure zero, that the fit does not fold.
"""

from __future__ import annotations

import math
from itertools import product

import numpy as np

from ..model.values import Model, selected_transitions

__all__ = ["euler_equivalents", "fold_euler_deg", "fold_vector", "in_fundamental_domain", "skew_switch_notes",
           "ANGLE_TOLERANCE_DEG"]

#: angles closer than this (degrees) are taken as equal when folding
ANGLE_TOLERANCE_DEG = 1e-6


def euler_equivalents(alpha: float, beta: float, gamma: float) -> list[tuple[float, float, float]]:
    """The 16 Euler triples (degrees) that give the same spectrum (see the module notes).

    Parameters
    ----------
    alpha, beta, gamma : float
        ZYZ Euler angles in degrees.

    Returns
    -------
    list of tuple of 3 float
        Every equivalent triple, angles reduced to [0, 360) (beta as given
        or 180 - beta), the input's class first.

    Examples
    --------
    >>> sorted(euler_equivalents(40.0, 60.0, 25.0))[:3]
    [(40.0, 60.0, 25.0), (40.0, 60.0, 205.0), (40.0, 120.0, 155.0)]
    >>> len(euler_equivalents(40.0, 60.0, 25.0))
    16
    """
    out = []
    for sa, flip, ta, tg in product((1.0, -1.0), (False, True), (0.0, 180.0), (0.0, 180.0)):
        sg = sa * (-1.0 if flip else 1.0)
        b = 180.0 - beta if flip else beta
        out.append(((sa * alpha + ta) % 360.0, b, (sg * gamma + tg) % 360.0))
    return out


def _canonical(a: float, b: float, g: float) -> tuple[float, float, float]:
    """Reduce beta to [0, 180] with (a, -b, g) = (a + 180, b, g + 180), then angles to [0, 360)."""
    b = b % 360.0
    if b > 180.0:
        b = 360.0 - b
        a, g = a + 180.0, g + 180.0
    return a % 360.0, b, g % 360.0


def in_fundamental_domain(alpha: float, beta: float, gamma: float) -> bool:
    """Whether a triple (degrees) lies in 0 <= alpha <= 90, 0 <= beta <= 90, 0 <= gamma < 180.

    Parameters
    ----------
    alpha, beta, gamma : float

    Returns
    -------
    bool

    Examples
    --------
    >>> in_fundamental_domain(40.0, 60.0, 25.0), in_fundamental_domain(-40.0, 60.0, -25.0)
    (True, False)
    """
    t = ANGLE_TOLERANCE_DEG
    a, b, g = _canonical(alpha, beta, gamma)
    return -t <= a <= 90.0 + t and -t <= b <= 90.0 + t and (g < 180.0 - t or g > 360.0 - t)


def fold_euler_deg(alpha: float, beta: float, gamma: float, *, efg_axial: bool = False,
                   shift_axial: bool = False) -> tuple[float, float, float]:
    """The representative of a triple's class in the fundamental domain (degrees).

    Parameters
    ----------
    alpha, beta, gamma : float
        ZYZ Euler angles (degrees) of the shift frame in the EFG frame.
    efg_axial, shift_axial : bool, optional
        eta_q = 0 (alpha undefined, reported 0) / an axial shift tensor
        (gamma undefined, reported 0).

    Returns
    -------
    tuple of 3 float

    Examples
    --------
    >>> fold_euler_deg(-40.0, 60.0, -25.0)
    (40.0, 60.0, 25.0)
    >>> fold_euler_deg(220.0, 120.0, 155.0)
    (40.0, 60.0, 25.0)
    >>> fold_euler_deg(40.0, 60.0, 25.0, efg_axial=True)
    (0.0, 60.0, 25.0)
    """
    a, b, g = _canonical(alpha, beta, gamma)
    t = ANGLE_TOLERANCE_DEG
    best = None
    for ea, eb, eg in euler_equivalents(a, b, g):
        if -t <= ea <= 90.0 + t and -t <= eb <= 90.0 + t and eg < 180.0 - t:
            best = (ea, eb, eg)
            break
    if best is None:  # only rounding at the edges can get here
        best = (a, b, g)
    a, b, g = best
    if efg_axial:
        a = 0.0
    if shift_axial:
        g = 0.0
    if b <= t:  # only alpha + gamma matters
        a, g = 0.0, (a + g) % 180.0
    if abs(b - 90.0) <= t or a <= t or abs(a - 90.0) <= t:
        g = min(g, (180.0 - g) % 180.0)
    return (_clean(a), _clean(b), _clean(g))


def _clean(v: float) -> float:
    r = round(v, 9)
    return 0.0 if r == 0 else float(r)


def _site_axial(model: Model, i: int) -> tuple[bool, bool]:
    s = model.sites[i]
    return s.eta_q == 0.0, (not s.shift.is_isotropic and s.shift.eta == 0.0)


def _into(v: float, lo: float, hi: float) -> float | None:
    """The value v + 360 k inside [lo, hi], if any."""
    k = math.ceil((lo - v) / 360.0 - 1e-12)
    w = v + 360.0 * k
    return w if w <= hi + 1e-9 else None


def fold_vector(free, x, lo, hi, model: Model):
    """Fold a vector of free parameters to its reported representative, where the bounds allow.

    Euler angles of each site go to the fundamental domain (see the module
    notes) when all three change consistently with the fixed ones and the
    bounds; with only the central transition observed a free C_Q becomes
    ``|C_Q|``.

    Parameters
    ----------
    free : sequence of FreeParameter
    x : numpy.ndarray
        Free-parameter values.
    lo, hi : numpy.ndarray
        Bounds.
    model : Model
        The model whose free parameters ``x`` sets (for the fixed angles and
        the tensors' symmetry).

    Returns
    -------
    (numpy.ndarray, list of str)
        The folded vector and notes on what was folded.
    """
    x = np.array(x, dtype=float)
    notes: list[str] = []
    at = model.with_parameters({fp.address: float(v) for fp, v in zip(free, x)})
    by_site: dict = {}
    for k, fp in enumerate(free):
        a = fp.address
        if a.table == "site" and a.key == "euler_deg" and a.item is not None:
            by_site.setdefault(a.index, {})[a.item] = k
    for i, items in by_site.items():
        site = at.sites[i]
        e = tuple(float(v) for v in site.euler_deg)
        efg_axial, shift_axial = _site_axial(at, i)
        efg_axial = efg_axial and 0 in items
        shift_axial = shift_axial and 2 in items
        target = fold_euler_deg(*e, efg_axial=efg_axial, shift_axial=shift_axial)
        cands = [target] + euler_equivalents(*target)
        chosen = None
        for c in cands:
            new = list(e)
            ok = True
            for item in range(3):
                if item in items:
                    k = items[item]
                    w = _into(c[item], lo[k], hi[k])
                    if w is None:
                        ok = False
                        break
                    new[item] = w
                elif abs(((c[item] - e[item]) + 180.0) % 360.0 - 180.0) > 1e-6:
                    ok = False
                    break
            if ok:
                chosen = new
                break
        if chosen is None:
            notes.append(f"{site.label}: the Euler angles ({e[0]:.6g}, {e[1]:.6g}, {e[2]:.6g}) deg are equivalent to "
                         f"({target[0]:.6g}, {target[1]:.6g}, {target[2]:.6g}) deg in the fundamental domain, which "
                         "the fixed angles or the given ranges exclude; reported as fitted")
            continue
        if any(abs(chosen[t] - e[t]) > 1e-9 for t in range(3)):
            for item, k in items.items():
                x[k] = chosen[item]
            notes.append(f"{site.label}: the fitted Euler angles ({e[0]:.6g}, {e[1]:.6g}, {e[2]:.6g}) deg were folded "
                         f"to the equivalent ({chosen[0]:.6g}, {chosen[1]:.6g}, {chosen[2]:.6g}) deg (same spectrum; "
                         "fundamental domain 0 <= alpha <= 90, 0 <= beta <= 90, 0 <= gamma < 180)")
        if efg_axial and 0 in items:
            notes.append(f"{site.label}: eta_q = 0, so alpha (a turn about the EFG's z axis) is not defined; "
                         "reported as 0")
        if shift_axial and 2 in items:
            notes.append(f"{site.label}: the shift tensor is axially symmetric, so gamma is not defined; "
                         "reported as 0")
    central = all(selected_transitions(model.nucleus.spin, m.transitions) == (0.5,)
                  for m in model.measurements) if model.nucleus.spin > 0.5 else False
    if central:
        for k, fp in enumerate(free):
            a = fp.address
            if a.table == "site" and a.key == "cq_mhz" and x[k] < 0 and lo[k] <= -x[k] <= hi[k]:
                notes.append(f"{fp.name}: the central transition does not depend on the sign of C_Q; "
                             f"{x[k]:.6g} reported as {-x[k]:.6g}")
                x[k] = -x[k]
    return x, notes


def skew_switch_notes(model: Model, free, values, stderr) -> list[str]:
    """Notes for sites whose free skew is within two standard errors of 0 while their Euler angles are free.

    Parameters
    ----------
    model : Model
    free : sequence of FreeParameter
    values, stderr : Mapping of str to float

    Returns
    -------
    list of str
    """
    out = []
    for i, site in enumerate(model.sites):
        names = {fp.address.key: fp.name for fp in free if fp.address.table == "site" and fp.address.index == i}
        if "skew" not in names or "euler_deg" not in names:
            continue
        v, e = values[names["skew"]], stderr[names["skew"]]
        if abs(v) <= 2.0 * e or abs(v) < 1e-6:
            out.append(f"{site.label}: skew = {v:.3g} is within two standard errors of 0, where the shift tensor's "
                       "Haeberlen z axis switches between the d11 and d33 axes; the Euler angles on either side of "
                       "skew = 0 describe different frames, so read them with care")
    return out
