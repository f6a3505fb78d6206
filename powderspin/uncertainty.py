"""Standard errors from a Jacobian or a Fisher matrix: one rule for parameters the data do not fix.

A fit has the Jacobian J of its whitened residual; a plan has the Fisher
information F = J^T J / sigma^2 of a would-be experiment (or the sum of two).
Both need the covariance C = F^-1 and must agree on what "not determined"
means, so both come here.

The rule
--------
The columns are first scaled to unit length (a parameter in MHz and one in
ppm are then comparable), and the scaled problem is decomposed: singular
values s_i of the scaled Jacobian, or eigenvalues lambda_i = s_i^2 of the
scaled Fisher matrix.  A direction is **not determined** when

    s_i <= RCOND * s_max      (equivalently  lambda_i <= RCOND^2 * lambda_max),

with ``RCOND = 1e-7``: the data would have to fix that combination of
parameters 10^7 times less well than the best one, far beyond what any
measured spectrum supports and near where the Fisher matrix's own rounding
(about 1e-16 relative) makes eigenvalues meaningless.  Every parameter with a
component larger than 1e-6 along such a direction gets an infinite variance
(and zero covariance with the others); so does a parameter whose column is
zero (it does not change the spectrum).  The rest of C is the pseudo-inverse
on the determined directions.

Quantities derived from the parameters (weights normalised to fractions,
scales, means of distributions) get their covariance by the delta method,
``C_q = G C G^T`` with G the Jacobian of the derived quantities; a derived
quantity that depends on an undetermined parameter is itself undetermined.

References
----------
G. H. Golub, C. F. Van Loan, *Matrix Computations*, 4th ed. (2013), section
5.5 (rank-deficient least squares and the truncated SVD) (from memory);
W. H. Press et al., *Numerical Recipes*, 3rd ed. (2007), section 15.6
(confidence limits from the covariance) (from memory).
"""

from __future__ import annotations

import numpy as np

__all__ = ["RCOND", "NULL_COMPONENT", "covariance_from_jacobian", "covariance_from_fisher", "propagate",
           "correlation", "standard_errors"]

#: a direction whose scaled singular value is at most RCOND times the largest is not determined
RCOND = 1e-7
#: a parameter with a component above this along an undetermined direction is not determined
NULL_COMPONENT = 1e-6


def _mark_undetermined(cov: np.ndarray, null_vectors: np.ndarray, dead: np.ndarray) -> np.ndarray:
    """Infinite variance for every parameter along a null direction (columns of ``null_vectors``)."""
    if null_vectors.size or dead.any():
        bad = dead.copy()
        if null_vectors.size:
            bad |= np.any(np.abs(null_vectors) > NULL_COMPONENT, axis=1)
        cov[bad, :] = 0.0
        cov[:, bad] = 0.0
        cov[bad, bad] = np.inf
    return cov


def covariance_from_jacobian(jac: np.ndarray) -> np.ndarray:
    """(J^T J)^-1 by a truncated SVD of the column-scaled Jacobian; inf for undetermined parameters.

    Parameters
    ----------
    jac : numpy.ndarray, shape (n_points, p)
        Jacobian of the whitened residual (or of the model divided by the noise).

    Returns
    -------
    numpy.ndarray, shape (p, p)

    See Also
    --------
    covariance_from_fisher : the same rule for a Fisher matrix.

    Examples
    --------
    >>> j = np.array([[1.0, 0.0], [0.0, 2.0], [0.0, 0.0]])
    >>> covariance_from_jacobian(j).tolist()
    [[1.0, 0.0], [0.0, 0.25]]
    >>> float(covariance_from_jacobian(np.array([[1.0, 2.0], [2.0, 4.0]]))[0, 0])   # only a combination is fixed
    inf
    """
    j = np.asarray(jac, dtype=float)
    p = j.shape[1]
    if p == 0:
        return np.zeros((0, 0))
    norms = np.sqrt(np.sum(j * j, axis=0))
    dead = norms == 0
    norms = np.where(dead, 1.0, norms)
    _, s, vt = np.linalg.svd(j / norms, full_matrices=False)
    keep = s > s.max() * RCOND if s.size and s.max() > 0 else np.zeros(s.size, bool)
    inv = (vt[keep].T / s[keep] ** 2) @ vt[keep]
    cov = inv / np.outer(norms, norms)
    null = vt[~keep].T
    if s.size < p:  # fewer points than parameters: the missing directions are undetermined too
        full_v = np.linalg.svd(j / norms, full_matrices=True)[2]
        null = full_v[~np.concatenate([keep, np.zeros(p - s.size, bool)])].T
    return _mark_undetermined(cov, null, dead)


def covariance_from_fisher(fisher: np.ndarray) -> np.ndarray:
    """F^-1 by a truncated eigen-decomposition of the scaled Fisher matrix; inf for undetermined parameters.

    Parameters
    ----------
    fisher : numpy.ndarray, shape (p, p)
        Symmetric Fisher information ``J^T J / sigma^2`` (possibly summed over
        experiments).

    Returns
    -------
    numpy.ndarray, shape (p, p)

    See Also
    --------
    covariance_from_jacobian

    Examples
    --------
    >>> covariance_from_fisher(np.diag([4.0, 1.0])).tolist()
    [[0.25, 0.0], [0.0, 1.0]]
    """
    f = np.asarray(fisher, dtype=float)
    if f.size == 0:
        return np.zeros((0, 0))
    d = np.sqrt(np.clip(np.diag(f), 0.0, None))
    dead = d == 0
    d = np.where(dead, 1.0, d)
    fs = f / np.outer(d, d)
    w, v = np.linalg.eigh(fs)
    top = max(float(w.max()), 0.0) if w.size else 0.0
    keep = w > top * RCOND ** 2 if top > 0 else np.zeros(w.size, bool)
    inv = (v[:, keep] / w[keep]) @ v[:, keep].T
    cov = inv / np.outer(d, d)
    return _mark_undetermined(cov, v[:, ~keep], dead)


def propagate(cov: np.ndarray, g: np.ndarray) -> np.ndarray:
    """Covariance of derived quantities by the delta method, ``G C G^T``, keeping undetermined ones infinite.

    Parameters
    ----------
    cov : numpy.ndarray, shape (p, p)
        Covariance of the parameters (inf on the diagonal where undetermined).
    g : numpy.ndarray, shape (q, p)
        Jacobian of the q derived quantities with respect to the parameters.

    Returns
    -------
    numpy.ndarray, shape (q, q)
        A quantity that depends (``g != 0``) on an undetermined parameter
        has an infinite variance.

    Examples
    --------
    >>> c = np.diag([1.0, np.inf])
    >>> propagate(c, np.array([[2.0, 0.0], [1.0, 1.0]])).diagonal().tolist()
    [4.0, inf]
    """
    c = np.asarray(cov, dtype=float)
    g = np.asarray(g, dtype=float)
    finite = np.isfinite(np.diag(c))
    cc = np.where(np.outer(finite, finite), c, 0.0)
    out = g @ cc @ g.T
    if (~finite).any():
        rows = np.any(np.abs(g[:, ~finite]) > 0, axis=1)
        for r in np.flatnonzero(rows):
            out[r, :] = 0.0
            out[:, r] = 0.0
            out[r, r] = np.inf
    return out


def standard_errors(cov: np.ndarray) -> np.ndarray:
    """Square roots of the diagonal (inf where undetermined).

    Parameters
    ----------
    cov : numpy.ndarray, shape (p, p)

    Returns
    -------
    numpy.ndarray, shape (p,)

    Examples
    --------
    >>> standard_errors(np.diag([4.0, np.inf])).tolist()
    [2.0, inf]
    """
    d = np.diag(np.asarray(cov, dtype=float))
    return np.where(np.isfinite(d), np.sqrt(np.clip(d, 0.0, None)), np.inf)


def correlation(cov: np.ndarray) -> np.ndarray:
    """Correlation matrix of a covariance (0 off the diagonal for undetermined parameters).

    Parameters
    ----------
    cov : numpy.ndarray, shape (p, p)

    Returns
    -------
    numpy.ndarray, shape (p, p)
        Entries in [-1, 1], ones on the diagonal.

    Examples
    --------
    >>> correlation(np.array([[4.0, 2.0], [2.0, 4.0]])).tolist()
    [[1.0, 0.5], [0.5, 1.0]]
    """
    c = np.asarray(cov, dtype=float)
    d = np.sqrt(np.diag(c))
    with np.errstate(invalid="ignore", divide="ignore"):
        r = c / np.outer(d, d)
    r = np.where(np.isfinite(r), r, 0.0)
    np.fill_diagonal(r, 1.0)
    return np.clip(r, -1.0, 1.0)
