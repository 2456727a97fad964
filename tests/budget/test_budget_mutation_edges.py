"""Edges of the budget engine found by mutation testing (tools/mutation_run.py budget).

Each test checks a documented rule against an independent computation written here:
the conditional variance of a Gaussian by the Schur complement with ``numpy.linalg.inv``,
the pseudo-inverse by ``numpy.linalg.pinv``, the Shapley effects of a linear model of
independent inputs in closed form.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from numpy.testing import assert_allclose

from perierr.budget import LinearBudget, shapley_gaussian
from perierr.budget.game import RANK_TOL, _pinv_psd, explained_variance
from perierr.sampling.gaussian import resolve_seed


def _random_corr(rng, k):
    a = rng.normal(size=(k, k + 2))
    c = a @ a.T
    d = np.sqrt(np.diag(c))
    return c / np.outer(d, d)


def _explained_brute(g, r):
    """Var(E[Y | Z_w]) = Var(Y) - g^T (R - R_:w R_ww^-1 R_w:) g for every subset (full-rank R).

    Schur complement of a Gaussian's conditional covariance (Rasmussen & Williams 2006, eq. A.6),
    one subset at a time with numpy.linalg.inv.
    """
    k = r.shape[0]
    out = np.zeros((2**k, g.shape[0]))
    total = np.einsum("mi,ij,mj->m", g, r, g)
    for mask in range(1, 2**k):
        w = [i for i in range(k) if mask >> i & 1]
        cond = r - r[:, w] @ np.linalg.inv(r[np.ix_(w, w)]) @ r[w, :]
        out[mask] = total - np.einsum("mi,ij,mj->m", g, cond, g)
    return out


@pytest.mark.parametrize("k", [1, 2, 3, 4])
def test_explained_variance_equals_the_schur_complement_for_every_subset(k):
    rng = np.random.default_rng(100 + k)
    r = _random_corr(rng, k)
    g = rng.normal(size=(2, k))  # two outputs
    got = explained_variance(g, r)
    assert got.shape == (2**k, 2)
    # double-precision linear algebra on well-conditioned matrices (condition number < 1e3): 1e-10 relative
    assert_allclose(got, _explained_brute(g, r), rtol=1e-10, atol=1e-12)
    # the empty subset explains nothing; the full set explains Var(Y) = g^T R g
    assert_allclose(got[0], 0.0, atol=0)
    assert_allclose(got[-1], np.einsum("mi,ij,mj->m", g, r, g), rtol=1e-12)


def test_explained_variance_broadcasts_stacks_of_stars_against_one_gradient():
    # leading axes of the gradient and of the correlation broadcast (docstring): three stars, one gradient
    rng = np.random.default_rng(7)
    k = 3
    rs = np.stack([_random_corr(rng, k) for _ in range(3)])
    g = rng.normal(size=(1, k))
    got = explained_variance(g, rs)
    assert got.shape == (3, 2**k, 1)
    for s in range(3):
        assert_allclose(got[s], _explained_brute(g, rs[s]), rtol=1e-10, atol=1e-12)
    gs = rng.normal(size=(3, 1, k))
    got2 = explained_variance(gs, rs[0])
    assert got2.shape == (3, 2**k, 1)
    for s in range(3):
        assert_allclose(got2[s], _explained_brute(gs[s], rs[0]), rtol=1e-10, atol=1e-12)


def test_explained_variance_with_two_perfectly_correlated_inputs():
    # Z_0 = Z_1 exactly: knowing either one explains the same as knowing both, Var(E[Y|Z_0]) = (g0 + g1)^2
    # for Y = g0 Z0 + g1 Z1 + g2 Z2 with Z2 independent (closed form, common practice, no source)
    r = np.array([[1.0, 1.0, 0.0], [1.0, 1.0, 0.0], [0.0, 0.0, 1.0]])
    g = np.array([[0.5, 1.5, 2.0]])
    got = explained_variance(g, r)[:, 0]
    pair = (0.5 + 1.5) ** 2
    expected = {0b001: pair, 0b010: pair, 0b011: pair, 0b100: 4.0, 0b101: pair + 4.0, 0b110: pair + 4.0,
                0b111: pair + 4.0}
    for mask, value in expected.items():
        assert got[mask] == pytest.approx(value, rel=1e-12), mask


def test_pinv_psd_matches_numpy_pinv_on_full_and_deficient_ranks():
    rng = np.random.default_rng(3)
    full = _random_corr(rng, 4)
    v = rng.normal(size=(4, 2))
    deficient = v @ v.T  # rank 2
    stack = np.stack([full, deficient])
    got = _pinv_psd(stack)
    # numpy.linalg.pinv with hermitian=True is the same Moore-Penrose inverse (numpy documentation)
    assert_allclose(got[0], np.linalg.pinv(full, hermitian=True), rtol=1e-9, atol=1e-12)
    assert_allclose(got[1], np.linalg.pinv(deficient, hermitian=True, rcond=1e-12), rtol=1e-9, atol=1e-12)
    # the Moore-Penrose conditions A A+ A = A and A+ A A+ = A+ (Penrose 1955)
    assert_allclose(deficient @ got[1] @ deficient, deficient, atol=1e-12)
    assert_allclose(got[1] @ deficient @ got[1], got[1], atol=1e-12)


def test_pinv_psd_drops_eigenvalues_at_the_cut_off_and_keeps_those_above():
    # the rule: eigenvalues w > RANK_TOL are inverted, the others are treated as exact relations (inverse 0)
    d = np.diag([2.0, RANK_TOL * 10, RANK_TOL, RANK_TOL / 10])
    got = _pinv_psd(d)
    assert_allclose(np.diag(got), [0.5, 1 / (RANK_TOL * 10), 0.0, 0.0], rtol=1e-12)
    assert_allclose(got - np.diag(np.diag(got)), 0.0, atol=0)


def _linear(g):
    return lambda x: x @ g[:, None]


def test_shapley_gaussian_independent_linear_model_gives_the_closed_form():
    # Y = sum g_i X_i with independent Gaussian X_i: Sh_i / Var(Y) = g_i^2 sigma_i^2 / sum_j g_j^2 sigma_j^2
    # (Owen 2014, SIAM/ASA JUQ 2, 245; Song, Nelson & Staum 2016, Sect. 3)
    g = np.array([1.0, -2.0, 0.5])
    sigma = np.array([1.0, 0.5, 3.0])
    expected = (g * sigma) ** 2 / np.sum((g * sigma) ** 2)
    est = shapley_gaussian(_linear(g), np.zeros(3), np.diag(sigma**2), players=["a", "b", "c"], outputs=["y"],
                           n_outer=3000, n_inner=4, n_boot=100, seed=11)
    assert est.shares.shape == (1, 3)
    # Monte Carlo check at 5 bootstrap standard errors (standard errors computed by the estimator)
    assert np.all(np.abs(est.shares[0] - expected) < 5 * est.se[0])
    assert est.shares[0].sum() == pytest.approx(1.0, abs=1e-12)


def test_shapley_gaussian_generator_seed_follows_the_one_seed_rule():
    # resolve_seed's documented rule (perierr.sampling.gaussian): a Generator gives one integer
    # (seed.integers(2**63)) and the computation proceeds exactly as with that integer
    g = np.array([1.0, 2.0])
    kwargs = dict(players=["a", "b"], outputs=["y"], n_outer=200, n_inner=3, n_boot=20)
    cov = np.array([[1.0, 0.3], [0.3, 1.0]])
    from_generator = shapley_gaussian(_linear(g), np.zeros(2), cov, seed=np.random.default_rng(5), **kwargs)
    as_integer = resolve_seed(np.random.default_rng(5))
    from_integer = shapley_gaussian(_linear(g), np.zeros(2), cov, seed=as_integer, **kwargs)
    assert_allclose(from_generator.shares, from_integer.shares, rtol=0, atol=0)
    assert_allclose(from_generator.low, from_integer.low, rtol=0, atol=0)


def test_linear_budget_names_its_columns_as_a_tuple_and_checks_their_count():
    shares = np.full((3, 2), 0.5)
    budget = LinearBudget(shares, shares, np.ones(3), ["parallax", "radial_velocity"])
    assert budget.inputs == ("parallax", "radial_velocity")
    assert isinstance(budget.inputs, tuple)
    assert budget.share("distance_pc") == {"parallax": 0.5, "radial_velocity": 0.5}
    with pytest.raises(ValueError, match=r"shapley: a budget table of shape \(3, 2\) for 3 inputs"):
        LinearBudget(shares, shares, np.ones(3), ["a", "b", "c"])
    with pytest.raises(ValueError, match=r"shapley: a budget table of shape \(3, 2\) for 1 inputs"):
        LinearBudget(shares, shares, np.ones(3), ("a",))


def test_every_subset_mask_has_its_players():
    # the bitmask convention of the game (module docstring): bit i set means player i is in the subset
    from perierr.budget.game import members

    k = 4
    inside = members(k)
    for mask, row in enumerate(inside):
        assert [i for i in range(k) if row[i]] == [i for i in range(k) if mask >> i & 1]
    assert sum(1 for _ in itertools.product([0, 1], repeat=k)) == inside.shape[0]


def test_explained_variance_of_a_two_level_batch_equals_the_one_star_values():
    # the documented shapes are (..., m, k) and (..., k, k): a (2, 5) batch of stars with k = 3 inputs gives,
    # for each star, b_w^T R_ww^+ b_w computed here with numpy.linalg.pinv on the subset (Song, Nelson & Staum
    # 2016, Theorem 1: the explained variance of a linear model of Gaussian inputs)
    rng = np.random.default_rng(11)
    k, m = 3, 2
    corr = np.stack([np.stack([_random_corr(rng, k) for _ in range(5)]) for _ in range(2)])
    grad = rng.normal(size=(2, 5, m, k))
    got = explained_variance(grad, corr)
    assert got.shape == (2, 5, 2**k, m)
    for a, b in itertools.product(range(2), range(5)):
        r, g = corr[a, b], grad[a, b]
        bvec = r @ g.T
        for mask in range(1, 2**k):
            w = [i for i in range(k) if mask >> i & 1]
            expect = np.einsum("im,ij,jm->m", bvec[w], np.linalg.pinv(r[np.ix_(w, w)]), bvec[w])
            assert_allclose(got[a, b, mask], expect, rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("shape", [(3,), (2, 3), (3, 2), (1, 3, 3)])
def test_a_budget_table_of_the_wrong_shape_is_refused_with_the_shape_expected(shape):
    # the documented layout: a row per output (t_ph, d_ph, v_ph) and a column per input (common practice, no
    # source); a one-dimensional table used to be accepted and failed later in share()
    inputs = ("parallax", "pmra", "pmdec")
    good = np.full((3, 3), 1 / 3)
    with pytest.raises(ValueError, match=r"expected \(3, 3\)"):
        LinearBudget(np.ones(shape), good, np.ones(3), inputs)
    with pytest.raises(ValueError, match=r"covariance: .*expected \(3, 3\)"):
        LinearBudget(good, np.ones(shape), np.ones(3), inputs)
