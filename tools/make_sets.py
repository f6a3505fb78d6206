"""Regenerate the shipped orientation sets and their accuracy tables.

Usage (from the repository root)::

    python tools/make_sets.py                    # Lebedev files + README tables
    python tools/make_sets.py --tables           # README tables only
    python tools/make_sets.py --degrees 17 19    # some Lebedev rules only

The Lebedev files are written into the package-data folder
``powderspin/data/orientation_sets/`` (shipped in every install and read
through importlib.resources); the accuracy tables go into
``orientation_sets/README.md`` at the repository root.  Both paths are taken
relative to this script, so it works from any working directory.  The
script imports powderspin from the same checkout.

Lebedev rules
-------------
A Lebedev rule is invariant under the octahedral group O_h (48 elements).
Its points form orbits of the group:

    a1  6 points  (1, 0, 0) and images
    a2 12 points  (1, 1, 0)/sqrt 2 and images
    a3  8 points  (1, 1, 1)/sqrt 3 and images
    b_k 24 points (l, l, m), m = sqrt(1 - 2 l^2)     one free parameter
    c_k 24 points (p, q, 0), p^2 + q^2 = 1            one free parameter
    d_k 48 points (r, s, t)                           two free parameters

each with one weight.  Because the rule is O_h invariant it integrates every
odd harmonic exactly and, for each even l, it integrates all harmonics of
degree l once it integrates the O_h-invariant ones.  The moment equations

    sum_i w_i P_l(n_i . u) = 0   for even l = 4 ... L - 1 and probe directions u,
    sum_i w_i = 1,

(P_l Legendre polynomials; by the addition theorem the left side is
(4 pi / (2l + 1)) sum_m Q(Y_lm)* Y_lm(u), which vanishes for all u exactly
when the rule Q integrates every Y_lm of degree l; 16 random probe
directions u over-determine the system) are solved by Levenberg-Marquardt
(scipy.optimize.least_squares) with variable projection (the weights,
which enter linearly, are eliminated by linear least squares) from
stratified random starts: b and c parameters spread evenly along their
arcs, d generators by randomised farthest-point sampling of the
fundamental triangle.  A few Gauss-Newton steps on all unknowns polish
the converged solution.

The orbit structure of each degree comes from the published point count N
(V. I. Lebedev, D. N. Laikov, Doklady Mathematics 59 (1999) 477): N mod 24
decides whether a2 is present (a1 and a3 always are, except for the 6-point
rule), equating the number of unknowns with the number of O_h-invariant
harmonics of even degree < L (generating function 1/((1 - t^4)(1 - t^6)))
fixes the number of d orbits, and the split of the remaining 24-point orbits
between b and c types is one for which the equations have a real solution
(found by trying the splits; for degrees 31 and 41 two splits work and the
one whose rule has the larger smallest weight is kept, see B_ORBITS).
Where several solutions exist the one with all weights positive is kept;
for degrees 13, 25 and 27 every solution found has a negative weight.

Accuracy tables
---------------
For each listed set the script measures, with scipy.special.sph_harm_y, the
largest error over m of the integral over the sphere of Y_l^m,

    | 4 pi sum_i w_i Y_l^m(n_i) - sqrt(4 pi) delta_l0 |,

for the harmonics that respect the set's symmetry (sphere: all; hemisphere:
even l; octant: even l, even m, real part), and writes two tables into
orientation_sets/README.md between the marker lines.
"""

from __future__ import annotations

import argparse
import itertools
import math
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy.optimize import least_squares
from scipy.special import sph_harm_y

REPO = Path(__file__).resolve().parent.parent
#: Where the Lebedev files go: the package-data folder.
SETS_DIR = REPO / "powderspin" / "data" / "orientation_sets"
#: The README whose accuracy tables this script rewrites.
README = REPO / "orientation_sets" / "README.md"
sys.path.insert(0, str(REPO))

from powderspin.physics import orientations as ori  # noqa: E402

# ---------------------------------------------------------------------------
# Orbits of the octahedral group
# ---------------------------------------------------------------------------

_SIGNS = np.array(list(itertools.product((1.0, -1.0), repeat=3)))
_PERMS = np.array(list(itertools.permutations(range(3))))


def _unique_rows(points: np.ndarray) -> np.ndarray:
    rounded = np.round(points, 12) + 0.0
    _, index = np.unique(rounded, axis=0, return_index=True)
    return points[np.sort(index)]


_C_POSITIONS = ((0, 1), (1, 0), (0, 2), (2, 0), (1, 2), (2, 1))


def _orbit_map(kind: str, vals) -> np.ndarray:
    """Images of a generator under O_h; linear in ``vals``.

    'b': vals (l, m) -> the 24 points (+-l, +-l, +-m) and permutations;
    'c': vals (p, q) -> the 24 points with entries +-p, +-q, 0;
    'd': vals (r, s, t) -> the 48 points with entries +-r, +-s, +-t.
    """
    if kind == "b":
        l_, m_ = vals
        base = np.array([[l_, l_, m_], [l_, m_, l_], [m_, l_, l_]])
        return (base[:, None, :] * _SIGNS[None, :, :]).reshape(-1, 3)
    if kind == "c":
        p, q = vals
        out = np.zeros((24, 3))
        row = 0
        for i, j in _C_POSITIONS:
            for s1 in (1.0, -1.0):
                for s2 in (1.0, -1.0):
                    out[row, i] = s1 * p
                    out[row, j] = s2 * q
                    row += 1
        return out
    if kind == "d":
        gen = np.asarray(vals, dtype=float)
        return (gen[_PERMS][:, None, :] * _SIGNS[None, :, :]).reshape(-1, 3)
    raise ValueError(f"unknown orbit kind {kind!r}")


def orbit_points(kind: str, params: tuple[float, ...] = (), derivatives: bool = False):
    """Points of one O_h orbit, always ORBIT_SIZE[kind] of them.

    kind 'a1', 'a2', 'a3' take no parameter; 'b' takes theta (generator
    (sin theta / sqrt 2, sin theta / sqrt 2, cos theta)); 'c' takes phi
    (generator (cos phi, sin phi, 0)); 'd' takes (theta, phi) (generator
    (sin theta cos phi, sin theta sin phi, cos theta)).  For parameters on
    a symmetry element the listed points repeat (see expand_rule).  With
    ``derivatives`` also return the derivatives of the points with respect
    to each parameter, shape (n_params, n_points, 3).
    """
    if kind == "a1":
        pts = np.vstack([np.eye(3), -np.eye(3)])
    elif kind == "a2":
        s = 1.0 / math.sqrt(2.0)
        pts = np.array([[0.0, a, b] for a in (s, -s) for b in (s, -s)]
                       + [[a, 0.0, b] for a in (s, -s) for b in (s, -s)]
                       + [[a, b, 0.0] for a in (s, -s) for b in (s, -s)])
    elif kind == "a3":
        pts = _SIGNS / math.sqrt(3.0)
    if kind[0] == "a":
        return (pts, np.zeros((0,) + pts.shape)) if derivatives else pts
    if kind == "b":
        (theta,) = params
        st, ct = math.sin(theta), math.cos(theta)
        r2 = math.sqrt(2.0)
        pts = _orbit_map("b", (st / r2, ct))
        der = [_orbit_map("b", (ct / r2, -st))]
    elif kind == "c":
        (phi,) = params
        sp, cp = math.sin(phi), math.cos(phi)
        pts = _orbit_map("c", (cp, sp))
        der = [_orbit_map("c", (-sp, cp))]
    elif kind == "d":
        theta, phi = params
        st, ct, sp, cp = math.sin(theta), math.cos(theta), math.sin(phi), math.cos(phi)
        pts = _orbit_map("d", (st * cp, st * sp, ct))
        der = [_orbit_map("d", (ct * cp, ct * sp, -st)), _orbit_map("d", (-st * sp, st * cp, 0.0))]
    else:
        raise ValueError(f"unknown orbit kind {kind!r}")
    return (pts, np.array(der)) if derivatives else pts


ORBIT_SIZE = {"a1": 6, "a2": 12, "a3": 8, "b": 24, "c": 24, "d": 48}

# Published point counts (Lebedev and Laikov 1999; also listed in the
# scipy.integrate.lebedev_rule documentation).
PUBLISHED_POINTS = {3: 6, 5: 14, 7: 26, 9: 38, 11: 50, 13: 74, 15: 86, 17: 110, 19: 146,
                    21: 170, 23: 194, 25: 230, 27: 266, 29: 302, 31: 350, 35: 434, 41: 590,
                    47: 770, 53: 974, 59: 1202}

# Number of b orbits chosen for each degree (the rest of the 24-point orbits
# are c orbits); found by trying the splits, see the module docstring.  For
# degrees 31 and 41 two splits gave rules with positive weights (31: 5 or 6
# b orbits, smallest weight * N 0.562 and 0.567; 41: 8 or 9, 0.060 and
# 0.183); the split with the larger smallest weight is kept, and it is the
# one that reproduces the published rule (tests compare with
# scipy.integrate.lebedev_rule).
B_ORBITS = {3: 0, 5: 0, 7: 0, 9: 0, 11: 1, 13: 1, 15: 2, 17: 3, 19: 3, 21: 3, 23: 4,
            25: 5, 27: 5, 29: 6, 31: 6, 35: 7, 41: 9}

# Seeds of the random starts (only the search time depends on them).
SEEDS = {d: 1000 + d for d in B_ORBITS}


def invariant_count(l: int) -> int:
    """Number of O_h-invariant harmonics of degree l (l even)."""
    return sum(1 for i in range(l // 4 + 1) for j in range(l // 6 + 1) if 4 * i + 6 * j == l)


def orbit_structure(degree: int, n_b: int | None = None) -> list[str]:
    """Orbit kinds of the rule of this degree, from its point count."""
    n_points = PUBLISHED_POINTS[degree]
    residue = n_points % 24
    fixed = {6: ["a1"], 14: ["a1", "a3"], 2: ["a1", "a2", "a3"], 18: ["a1", "a2"]}[residue]
    rest = n_points - sum(ORBIT_SIZE[k] for k in fixed)
    k24 = rest // 24  # n_b + n_c + 2 n_d
    equations = sum(invariant_count(l) for l in range(0, degree, 2))
    n_d = 2 * k24 - (equations - len(fixed))
    n_bc = k24 - 2 * n_d
    if n_b is None:
        n_b = B_ORBITS[degree]
    if not (0 <= n_d and 0 <= n_b <= n_bc):
        raise ValueError(f"no orbit structure for degree {degree}")
    return fixed + ["b"] * n_b + ["c"] * (n_bc - n_b) + ["d"] * n_d


class MomentProblem:
    """Residuals of the moment equations for an orbit structure, with Jacobian."""

    def __init__(self, degree: int, kinds: list[str], n_probe: int = 16, seed: int = 12345):
        self.degree = degree
        self.kinds = kinds
        rng = np.random.default_rng(seed)
        u = rng.normal(size=(n_probe, 3))
        self.probes = u / np.linalg.norm(u, axis=1)[:, None]
        self.n_points = sum(ORBIT_SIZE[k] for k in kinds)
        self.starts = np.cumsum([0] + [ORBIT_SIZE[k] for k in kinds])[:-1]
        self._cache_x = None

    @staticmethod
    def n_params(kind: str) -> int:
        return {"b": 1, "c": 1, "d": 2}.get(kind, 0)

    def unpack(self, x: np.ndarray):
        i = 0
        for kind in self.kinds:
            n = self.n_params(kind)
            yield kind, x[i], tuple(x[i + 1:i + 1 + n])
            i += 1 + n

    def _evaluate(self, x: np.ndarray):
        if self._cache_x is not None and np.array_equal(x, self._cache_x):
            return self._cache
        pts, ders, wts = [], [[], []], []
        for kind, w, par in self.unpack(x):
            p, d = orbit_points(kind, par, derivatives=True)
            pts.append(p)
            wts.append(np.full(p.shape[0], w))
            for j in range(2):
                ders[j].append(d[j] if j < d.shape[0] else np.zeros_like(p))
        pts = np.vstack(pts)
        w = np.concatenate(wts)
        proj = pts @ self.probes.T                    # n . u
        dproj = [np.vstack(ders[j]) @ self.probes.T for j in range(2)]
        # Legendre recurrences for P_l(n.u) and P_l'(n.u).
        p_prev, p_cur = np.ones_like(proj), proj.copy()
        dp_prev, dp_cur = np.zeros_like(proj), np.ones_like(proj)
        rows_p, rows_d0, rows_d1 = [np.ones((len(self.kinds), 1))], [], []
        segs = self.starts
        for k in range(1, self.degree - 1):
            p_next = ((2 * k + 1) * proj * p_cur - k * p_prev) / (k + 1)
            dp_next = dp_prev + (2 * k + 1) * p_cur
            p_prev, p_cur, dp_prev, dp_cur = p_cur, p_next, dp_cur, dp_next
            l_ = k + 1
            if l_ % 2 == 0 and l_ >= 4:
                scale = math.sqrt(2 * l_ + 1)
                rows_p.append(scale * np.add.reduceat(p_cur, segs, axis=0))
                rows_d0.append(scale * np.add.reduceat(dp_cur * dproj[0], segs, axis=0))
                rows_d1.append(scale * np.add.reduceat(dp_cur * dproj[1], segs, axis=0))
        sizes = np.array([[ORBIT_SIZE[k]] for k in self.kinds], dtype=float)
        orbit_sums = np.hstack([sizes] + rows_p[1:])            # (orbits, equations)
        d0 = np.hstack([np.zeros_like(sizes)] + rows_d0)
        d1 = np.hstack([np.zeros_like(sizes)] + rows_d1)
        orbit_w = np.array([w_ for _, w_, _ in self.unpack(x)])
        residual = orbit_w @ orbit_sums
        residual[0] -= 1.0
        cols = []
        for i, kind in enumerate(self.kinds):
            cols.append(orbit_sums[i])
            if self.n_params(kind) >= 1:
                cols.append(orbit_w[i] * d0[i])
            if self.n_params(kind) == 2:
                cols.append(orbit_w[i] * d1[i])
        self._cache_x = x.copy()
        self._cache = (residual, np.array(cols).T)
        return self._cache

    # Variable projection: the weights enter linearly, so for given orbit
    # parameters they are the linear least-squares solution; the search then
    # runs over the parameters only (G. H. Golub, V. Pereyra, SIAM J. Numer.
    # Anal. 10 (1973) 413; Jacobian approximation of L. Kaufman, BIT 15
    # (1975) 49).
    def full_vector(self, params: np.ndarray, weights: np.ndarray) -> np.ndarray:
        x, i = [], 0
        for kind, w in zip(self.kinds, weights):
            n = self.n_params(kind)
            x += [w] + list(params[i:i + n])
            i += n
        return np.array(x)

    def _projected(self, params: np.ndarray):
        x = self.full_vector(params, np.ones(len(self.kinds)))
        _, jac = self._evaluate(x)
        owners = self._column_owner()
        a_cols = [j for j, (i, is_w) in enumerate(owners) if is_w]
        p_cols = [j for j, (i, is_w) in enumerate(owners) if not is_w]
        a_mat = jac[:, a_cols]
        rhs = np.zeros(a_mat.shape[0])
        rhs[0] = 1.0
        w, *_ = np.linalg.lstsq(a_mat, rhs, rcond=None)
        r = a_mat @ w - rhs
        q, _ = np.linalg.qr(a_mat)
        dcols = jac[:, p_cols] * np.array([w[owners[j][0]] for j in p_cols])[None, :]
        # (jac holds the parameter columns for unit weights; scale by w.)
        jv = dcols - q @ (q.T @ dcols)
        return r, jv, w

    def _column_owner(self):
        owners = []
        for i, kind in enumerate(self.kinds):
            owners.append((i, True))
            owners += [(i, False)] * self.n_params(kind)
        return owners

    def params_of(self, x: np.ndarray) -> np.ndarray:
        return np.array([p for _, _, par in self.unpack(x) for p in par])

    def residual(self, x: np.ndarray) -> np.ndarray:
        return self._evaluate(x)[0]

    def jacobian(self, x: np.ndarray) -> np.ndarray:
        return self._evaluate(x)[1]

    def start(self, rng: np.random.Generator, uniform: bool = False) -> np.ndarray:
        """Random start: b and c parameters stratified along their arcs, or
        (``uniform``) drawn uniformly; d generators spread over the
        fundamental triangle."""
        x = []
        n_b, n_c, n_d = (self.kinds.count(k) for k in "bcd")
        ib = ic = 0
        d_gens = _fundamental_samples(n_d, rng) if n_d else []
        idd = 0
        for kind in self.kinds:
            w0 = rng.uniform(0.7, 1.3) * ORBIT_SIZE[kind] / self.n_points
            if kind[0] == "a":
                x.append(w0)
            elif kind == "b":
                if uniform:
                    x += [w0, rng.uniform(0.02, math.pi / 2 - 0.005)]
                else:
                    x += [w0, (ib + 0.5 + rng.uniform(-0.35, 0.35)) / n_b * math.pi / 2]
                ib += 1
            elif kind == "c":
                if uniform:
                    x += [w0, rng.uniform(0.02, math.pi / 4 - 0.005)]
                else:
                    x += [w0, (ic + 0.5 + rng.uniform(-0.35, 0.35)) / n_c * math.pi / 4]
                ic += 1
            else:
                p = d_gens[idd]
                idd += 1
                x += [w0, math.acos(p[2]), math.atan2(p[1], p[0])]
        return np.array(x)


def _fundamental_samples(n: int, rng: np.random.Generator) -> np.ndarray:
    """n points spread over the fundamental triangle x >= y >= z >= 0, away from its edges."""
    cand = np.abs(rng.normal(size=(20000, 3)))
    cand /= np.linalg.norm(cand, axis=1)[:, None]
    cand = np.sort(cand, axis=1)[:, ::-1]
    corners = [np.array([1.0, 0, 0]), np.array([1.0, 1, 0]) / math.sqrt(2),
               np.array([1.0, 1, 1]) / math.sqrt(3)]
    edge = []
    for p, q in itertools.combinations(corners, 2):
        for t in np.linspace(0, 1, 60):
            v = (1 - t) * p + t * q
            edge.append(v / np.linalg.norm(v))
    edge = np.array(edge)
    dist = np.min(np.linalg.norm(cand[:, None, :] - edge[None, :, :], axis=2), axis=1)
    chosen = []
    for _ in range(n):
        top = np.argsort(dist)[-20:]
        j = rng.choice(top)
        chosen.append(cand[j])
        dist = np.minimum(dist, np.linalg.norm(cand - cand[j], axis=1))
    return np.array(chosen)


def expand_rule(problem: MomentProblem, x: np.ndarray):
    """Points, weights and orbit descriptions of a solution."""
    pts, wts, desc = [], [], []
    for kind, w, par in problem.unpack(x):
        p = orbit_points(kind, par)
        if _unique_rows(p).shape[0] != ORBIT_SIZE[kind]:
            return None  # degenerate orbit (a parameter on a symmetry element)
        pts.append(p)
        wts.append(np.full(p.shape[0], w))
        desc.append((kind, w, p[0]))
    pts = np.vstack(pts)
    if _unique_rows(pts).shape[0] != pts.shape[0]:
        return None  # two orbits coincide
    return pts, np.concatenate(wts), desc


def solve_lebedev(degree: int, max_tries: int = 400, verbose: bool = True):
    """Solve the moment equations for the rule of this degree."""
    kinds = orbit_structure(degree)
    problem = MomentProblem(degree, kinds)
    rng = np.random.default_rng(SEEDS[degree])
    negative = None
    t0 = time.time()
    for attempt in range(max_tries):
        # Alternate stratified and uniform starts.
        params = problem.params_of(problem.start(rng, uniform=bool(attempt % 2)))
        if params.size:
            fit = least_squares(lambda p: problem._projected(p)[0], params,
                                jac=lambda p: problem._projected(p)[1], method="lm",
                                xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=150)
            params = fit.x
        residual, _, weights = problem._projected(params)
        if np.max(np.abs(residual)) > 1e-12:
            continue
        # Polish all unknowns with a few Gauss-Newton steps.
        x = problem.full_vector(params, weights)
        for _ in range(3):
            step = np.linalg.lstsq(problem.jacobian(x), -problem.residual(x), rcond=None)[0]
            x = x + step
        rule = expand_rule(problem, x)
        if rule is None:
            continue
        pts, wts, desc = rule
        final = float(np.max(np.abs(problem.residual(x))))
        if verbose:
            print(f"  degree {degree}: attempt {attempt} converged, residual "
                  f"{final:.1e}, min weight * N "
                  f"{wts.min() * wts.size:.4f} ({time.time() - t0:.0f} s)", flush=True)
        if wts.min() > 0:
            return pts, wts, desc, kinds
        # Keep the most accurate solution with a negative weight while
        # looking for one without.
        if negative is None or final < negative[0]:
            negative = (final, (pts, wts, desc, kinds))
        if attempt > 40:
            break
    if negative is not None:
        return negative[1]
    raise RuntimeError(f"no solution found for degree {degree} in {max_tries} attempts")


def write_lebedev(degree: int, verbose: bool = True) -> Path:
    pts, wts, desc, kinds = solve_lebedev(degree, verbose=verbose)
    wts = wts / wts.sum()
    path = SETS_DIR / f"lebedev_{degree:03d}.csv"
    counts = {k: kinds.count(k) for k in ("a1", "a2", "a3", "b", "c", "d")}
    lines = [
        f"# Lebedev rule of algebraic degree {degree}, {pts.shape[0]} points",
        "# generated by tools/make_sets.py (moment equations for the "
        "octahedral orbit structure)",
        "# orbits: " + ", ".join(f"{k} x {v}" for k, v in counts.items() if v),
        "# generators (kind, weight, x, y, z):",
    ]
    for kind, w, g in desc:
        lines.append(f"#   {kind} {w / wts.sum():.17g} {g[0]:.17g} {g[1]:.17g} {g[2]:.17g}")
    lines.append("# x, y, z, weight (weights sum to 1)")
    for p, w in zip(pts, wts):
        lines.append(f"{p[0]:.17g},{p[1]:.17g},{p[2]:.17g},{w:.17g}")
    _write_atomically(path, "\n".join(lines) + "\n")
    return path


def _write_atomically(path: Path, text: str) -> None:
    """Write ``text`` to a temporary file beside ``path``, then move it into place."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as handle:
            handle.write(text)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


# ---------------------------------------------------------------------------
# Accuracy measurement
# ---------------------------------------------------------------------------

THRESHOLD = 1e-10


def allowed(symmetry: str, l: int) -> bool:
    return symmetry == "sphere" or l % 2 == 0


def degree_errors(oset, l: int) -> float:
    """Largest error over m of the integral of Y_l^m (symmetric ones only)."""
    theta = np.arccos(np.clip(oset.vectors[:, 2], -1.0, 1.0))
    phi = np.arctan2(oset.vectors[:, 1], oset.vectors[:, 0])
    if oset.symmetry == "octant":
        ms = np.arange(0, l + 1, 2)
    else:
        ms = np.arange(0, l + 1)
    y = sph_harm_y(l, ms[:, None], theta[None, :], phi[None, :])
    q = 4.0 * np.pi * (y @ oset.weights)
    if oset.symmetry == "octant":
        q = q.real
    exact = math.sqrt(4.0 * np.pi) if l == 0 else 0.0
    return float(np.max(np.abs(q - exact)))


def measured_degree(oset, max_degree: int = 200):
    """(L, l1, err(l1), l2, err(l2)): exact up to L, then the next two allowed degrees."""
    l_ = 0
    while l_ <= max_degree:
        if allowed(oset.symmetry, l_) and degree_errors(oset, l_) > THRESHOLD:
            break
        l_ += 1
    first = l_
    second = first + 1
    while not allowed(oset.symmetry, second):
        second += 1
    return first - 1, first, degree_errors(oset, first), second, degree_errors(oset, second)


# Sets listed in the README tables.
def table_sets() -> list[str]:
    names = [f"lebedev-{d}" for d in ori.lebedev_degrees()]
    names += ["gl-8x16-sphere", "gl-16x32-sphere", "gl-8x16-hemisphere", "gl-8x4-octant",
              "gl-16x8-octant"]
    for sym in ori.SYMMETRIES:
        names += [f"zcw-{sym}-{n}" for n in (144, 987, 6765, 46368)]
    names += ["tri-octant-8", "tri-octant-54", "tri-octant-99", "tri-octant-199",
              "tri-hemisphere-99", "tri-sphere-8", "tri-sphere-99"]
    return names


def error_profile_sets() -> list[str]:
    names = []
    for sym in ori.SYMMETRIES:
        names += [f"zcw-{sym}-{n}" for n in (144, 987, 6765, 46368)]
    names += ["tri-octant-54", "tri-octant-99", "tri-octant-199", "tri-sphere-99"]
    return names


PROFILE_DEGREES = (1, 2, 3, 4, 5, 6, 7, 8)


def lebedev_listing() -> list[str]:
    out = ["Shipped Lebedev rules (smallest weight times N; a negative value marks a "
           "negative weight):", "", "| degree | N | orbits | smallest weight x N |",
           "|---|---|---|---|"]
    for degree in ori.lebedev_degrees():
        s = ori.lebedev(degree)
        header = (SETS_DIR / f"lebedev_{degree:03d}.csv").read_text().splitlines()
        orbits = next(line.split(":", 1)[1].strip() for line in header
                      if line.startswith("# orbits:"))
        out.append(f"| {degree} | {s.size} | {orbits} | {s.weights.min() * s.size:.4f} |")
    return out + [""]


def accuracy_tables() -> str:
    out = lebedev_listing() + ["Exactness: L is the largest degree such that every symmetric Y_l^m with "
           "l <= L is integrated to 1e-10; l1 = L + 1 and l2 are the next two degrees "
           "that carry symmetric harmonics, with the largest error there.", "",
           "| set | symmetry | N | degree field | L | l1 | error at l1 | l2 | error at l2 |",
           "|---|---|---|---|---|---|---|---|---|"]
    for name in table_sets():
        s = ori.orientation_set_by_name(name)
        big_l, l1, e1, l2, e2 = measured_degree(s)
        out.append(f"| {name} | {s.symmetry} | {s.size} | {s.degree} | {big_l} | {l1} | "
                   f"{e1:.2e} | {l2} | {e2:.2e} |")
    out += ["", "Error profile: largest error over the symmetric Y_l^m of degree l "
            "(\"-\": no symmetric harmonic of that degree).", "",
            "| set | N | " + " | ".join(f"l={l}" for l in PROFILE_DEGREES) + " |",
            "|---|---|" + "---|" * len(PROFILE_DEGREES)]
    for name in error_profile_sets():
        s = ori.orientation_set_by_name(name)
        cells = [f"{degree_errors(s, l):.2e}" if allowed(s.symmetry, l) else "-"
                 for l in PROFILE_DEGREES]
        out.append(f"| {name} | {s.size} | " + " | ".join(cells) + " |")
    return "\n".join(out)


START = "<!-- accuracy tables: start (written by make_sets.py) -->"
END = "<!-- accuracy tables: end -->"


def write_tables() -> None:
    readme = README
    text = readme.read_text()
    if START not in text or END not in text:
        raise RuntimeError(f"{readme} lacks the marker lines {START!r} / {END!r}")
    head, rest = text.split(START, 1)
    _, tail = rest.split(END, 1)
    table = accuracy_tables()
    print(table)
    _write_atomically(readme, head + START + "\n\n" + table + "\n\n" + END + tail)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--tables", action="store_true", help="only rewrite the README tables")
    parser.add_argument("--degrees", type=int, nargs="*", default=None,
                        help="Lebedev degrees to regenerate (default: all in B_ORBITS)")
    args = parser.parse_args(argv)
    if not args.tables:
        for degree in (args.degrees or sorted(B_ORBITS)):
            print(f"Lebedev degree {degree}: orbits {orbit_structure(degree)}", flush=True)
            print(f"  wrote {write_lebedev(degree)}", flush=True)
        ori._lebedev_cached.cache_clear()
    write_tables()


if __name__ == "__main__":
    main()
