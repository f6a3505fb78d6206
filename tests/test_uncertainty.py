"""One rule for parameters the data do not fix: the Jacobian and Fisher routes agree with numpy and each other."""

from __future__ import annotations

import numpy as np

from powderspin.uncertainty import (
    RCOND,
    correlation,
    covariance_from_fisher,
    covariance_from_jacobian,
    propagate,
    standard_errors,
)


def test_well_conditioned_covariance_is_the_inverse():
    # Source: numpy.linalg.inv of J^T J (the textbook covariance of linear least squares).
    rng = np.random.default_rng(4)
    j = rng.normal(size=(200, 4)) * np.array([1.0, 1e3, 1e-2, 5.0])
    ref = np.linalg.inv(j.T @ j)
    np.testing.assert_allclose(covariance_from_jacobian(j), ref, rtol=1e-9)
    np.testing.assert_allclose(covariance_from_fisher(j.T @ j), ref, rtol=1e-7)


def test_both_routes_apply_the_same_rule():
    # Two parameters that enter only as a sum: neither is determined; a third is.
    rng = np.random.default_rng(5)
    a, b = rng.normal(size=(2, 300))
    j = np.column_stack([a, a, b])
    for cov in (covariance_from_jacobian(j), covariance_from_fisher(j.T @ j)):
        err = standard_errors(cov)
        assert np.isinf(err[0]) and np.isinf(err[1]) and np.isfinite(err[2])
    # a column that changes nothing
    j0 = np.column_stack([a, np.zeros(300)])
    assert np.isinf(standard_errors(covariance_from_jacobian(j0))[1])
    assert np.isinf(standard_errors(covariance_from_fisher(j0.T @ j0))[1])


def test_the_cutoff_is_rcond_on_scaled_singular_values():
    # A direction fixed 1e-6 as well as the best one is kept; one fixed 1e-8 as well is not (RCOND = 1e-7).
    u = np.linalg.qr(np.random.default_rng(6).normal(size=(50, 2)))[0]
    v = np.array([[1.0, 1.0], [1.0, -1.0]]) / np.sqrt(2)
    for s2, determined in ((1e-6, True), (1e-8, False)):
        j = u @ np.diag([1.0, s2]) @ v
        assert np.isfinite(standard_errors(covariance_from_jacobian(j))).all() == determined
        assert np.isfinite(standard_errors(covariance_from_fisher(j.T @ j))).all() == determined
    assert RCOND == 1e-7


def test_delta_method_and_correlation():
    # Source: var(a x + b y) = a^2 var x + b^2 var y + 2 a b cov(x, y) (the delta method for a linear map).
    c = np.array([[4.0, 1.0], [1.0, 9.0]])
    g = np.array([[2.0, 3.0]])
    assert propagate(c, g)[0, 0] == 4 * 4.0 + 9 * 9.0 + 2 * 2 * 3 * 1.0
    assert abs(correlation(c)[0, 1] - 1.0 / 6.0) < 1e-15
    undetermined = np.diag([1.0, np.inf])
    assert np.isinf(propagate(undetermined, np.array([[1.0, 1e-9]]))[0, 0])
    assert propagate(undetermined, np.array([[1.0, 0.0]]))[0, 0] == 1.0
