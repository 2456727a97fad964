"""Linearized error budget: Shapley effects against closed forms."""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from perierr import StraightLine, linear_budget, linearize
from perierr.budget import linear_shapley


def test_two_input_correlated_closed_form():
    # Iooss & Prieur 2019, IJUQ 9, 493, linear Gaussian two-input case:
    # Sh1 = [b1^2 s1^2 (1 - r^2/2) + r b1 b2 s1 s2 + b2^2 s2^2 r^2 / 2] / Var(Y)
    for b1, b2, s1, s2, r in [(1.3, -0.7, 2.0, 0.5, 0.6), (1.0, 1.0, 1.0, 1.0, -0.9), (0.2, 3.0, 5.0, 0.1, 0.3)]:
        cov = np.array([[s1 * s1, r * s1 * s2], [r * s1 * s2, s2 * s2]])
        var = b1**2 * s1**2 + 2 * r * b1 * b2 * s1 * s2 + b2**2 * s2**2
        sh1 = (b1**2 * s1**2 * (1 - r**2 / 2) + r * b1 * b2 * s1 * s2 + b2**2 * s2**2 * r**2 / 2) / var
        got = linear_shapley([[b1, b2]], cov)[0]
        assert_allclose(got, [sh1, 1 - sh1], rtol=1e-10)


def test_independent_inputs_reduce_to_scaled_squares():
    # Owen & Prieur 2017, SIAM/ASA JUQ 5, 986: for independent inputs Sh_i = J_i^2 s_i^2 / Var.
    rng = np.random.default_rng(0)
    j = rng.normal(size=(3, 6))
    s = rng.uniform(0.1, 3, 6)
    shares = linear_budget(j, np.diag(s**2))
    want = (j * s) ** 2 / ((j * s) ** 2).sum(axis=1, keepdims=True)
    assert_allclose(shares.shapley, want, rtol=1e-10)
    assert_allclose(shares.covariance, want, rtol=1e-10)


def test_input_with_no_influence_gets_a_share_only_through_correlation():
    # Iooss & Prieur 2019: with Y = X1 and corr(X1, X2) = r, Sh2 = r^2 / 2.
    r = 0.8
    got = linear_shapley([[1.0, 0.0]], np.array([[1.0, r], [r, 1.0]]))[0]
    assert_allclose(got, [1 - r**2 / 2, r**2 / 2], rtol=1e-12)


@settings(max_examples=60, deadline=None)
@given(seed=st.integers(0, 2**32 - 1))
def test_shares_are_nonnegative_and_sum_to_one(seed):
    # Property (Song, Nelson & Staum 2016): Shapley effects are >= 0 and sum to Var(Y).
    rng = np.random.default_rng(seed)
    a = rng.normal(size=(6, 6))
    cov = a @ a.T + 1e-3 * np.eye(6)
    j = rng.normal(size=(3, 6))
    b = linear_budget(j, cov)
    assert np.all(b.shapley >= -1e-12)
    assert_allclose(b.shapley.sum(axis=1), 1.0, rtol=1e-9)
    assert_allclose(b.covariance.sum(axis=1), 1.0, rtol=1e-9)


def test_star_budget_sums_and_zero_influence_positions(close_star):
    lin = linearize(close_star, StraightLine())
    b = linear_budget(lin.jacobian, close_star.cov)
    assert_allclose(b.shapley.sum(axis=1), 1.0, rtol=1e-10)
    # In the straight-line model position has no direct influence: zero covariance term
    assert abs(b.share("distance_pc", "covariance")["ra"]) < 1e-12
    assert b.dominant("time_myr") == "radial_velocity"
    assert_allclose(b.variance, lin.sigma**2, rtol=1e-12)
