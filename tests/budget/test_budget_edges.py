"""Edge cases of the error budgets (perierr.budget) that the other budget tests leave open.

Written against the survivors of the mutation run of the budget group (issue 16): defaults and
the JSON blocks, zero-variance outputs, the bootstrap's definitions, the width statistic, the
global budget's input checks and model contract, batching of large stacks, and the conditioning
algebra on degenerate or inconsistent covariances. Every expected value comes from a closed
form or an independent computation in this file (numpy/scipy), never from the code under test.

References used below:

* Shapley 1953 (the value as the average over orderings; efficiency, symmetry, null player);
* Owen & Prieur 2017, SIAM/ASA JUQ 5, 986: independent Gaussian inputs of a linear model get
  ``Sh_i = J_i^2 sigma_i^2 / Var(Y)`` (from memory);
* Iooss & Prieur 2019, IJUQ 9, 493: two correlated inputs, closed form (from memory);
* Efron & Tibshirani 1993, An Introduction to the Bootstrap, Ch. 6 and 13: the bootstrap standard
  error (B - 1 denominator) and the percentile interval (from memory);
* Hyndman & Fan 1996, Am. Stat. 50, 361: sample quantile type 8 (median-unbiased), virtual index
  ``p (n + 1/3) + 1/3`` (1-based; from memory);
* the sample variance of n Gaussian draws is ``V chi2_{n-1} / (n - 1)``, with variance
  ``2 V^2 / (n - 1)`` (textbook).

All stars are invented.
"""

import itertools
import json
import math
import tracemalloc
import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose

from perierr import ObservedStar
from perierr.budget import (
    GlobalBudget,
    ShapleyEstimate,
    extend_inputs,
    global_budget,
    group_masks,
    linear_budget,
    linear_costs,
    linear_shapley,
    shapley_gaussian,
)
from perierr.budget.game import RANK_TOL, explained_variance, standardize
from perierr.budget.global_mc import conditional_costs
from perierr.budget.linear import clip_rounding
from perierr.errors import InputError
from perierr.models.base import ForwardModel, Nuisance, Perihelion

OBS = ("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity")
OUTS = ("time_myr", "distance_pc", "speed_kms")
Z90 = 1.6448536269514722  # scipy.stats.norm.ppf(0.95), checked in test_linear_width_shares_of_a_toy_model


# --------------------------------------------------------------------------------------------
# A linear toy model that records how the budget calls it
# --------------------------------------------------------------------------------------------


class LinearToy(ForwardModel):
    """Outputs linear in the observables (and in nuisance deviates); counts and records every call.

    ``nuisances`` are (name, gradient (3,), standard deviation): the parameter is ``nominal + sd z``
    for a standard-normal deviate z, so each adds ``gradient * sd * z`` to the outputs.
    """

    name = "linear toy"

    def __init__(self, center, jac, nuisances=()):
        self.center = np.asarray(center, dtype=float)
        self.jac = np.asarray(jac, dtype=float)
        self.extra = tuple(nuisances)
        self.rows = 0
        self.references = []
        self.shapes = []
        self.deviate_shapes = []

    def _linear(self, observables, reference):
        x = np.asarray(observables)
        self.rows += x.shape[0]
        self.shapes.append(x.shape)
        self.references.append(None if reference is None else np.array(reference, dtype=float))
        return (x[:, :6] - self.center) @ self.jac.T

    def evaluate(self, observables, *, reference=None):
        y = self._linear(observables, reference)
        return Perihelion(y[:, 0], y[:, 1], y[:, 2])

    def jacobian(self, point):
        return self.jac.copy()

    def nuisance(self, point):
        return tuple(Nuisance(n, np.asarray(g, dtype=float), sd * sd) for n, g, sd in self.extra)

    def evaluate_nuisance(self, observables, deviates, *, reference=None):
        y = self._linear(observables, reference)
        z = np.asarray(deviates, dtype=float)
        self.deviate_shapes.append(z.shape)
        for i, (_, g, sd) in enumerate(self.extra):
            y = y + np.outer(z[:, i] * sd, g)
        return Perihelion(y[:, 0], y[:, 1], y[:, 2])


def toy_star(**over):
    """An invented star with independent inputs (no correlations) and a negative pmra."""
    fields = dict(
        ra=210.0, dec=-12.0, ra_error=0.03, dec_error=0.04, parallax=12.0, parallax_error=0.08,
        pmra=-7.5, pmra_error=0.06, pmdec=3.2, pmdec_error=0.05, radial_velocity=-28.0,
        radial_velocity_error=0.7,
    )
    fields.update(over)
    return ObservedStar.from_values(**fields)


#: standardized gradients (d output / d input x sigma_input) of the toy: every input matters
A_STD = np.array(
    [
        [0.3, -0.2, 1.1, 0.4, -0.6, 0.9],
        [0.8, 0.5, -0.7, 1.2, 0.1, -0.3],
        [0.2, 0.9, 0.4, -0.5, 0.7, 0.6],
    ]
)


def toy_model(star, a_std=A_STD, nuisances=()):
    return LinearToy(star.mean, a_std / np.where(star.sigma > 0, star.sigma, 1.0), nuisances)


def independent_shares(a):
    """Owen & Prieur 2017: independent inputs of a linear model, Sh_i = a_i^2 / sum a^2 (a = J sigma)."""
    a = np.atleast_2d(a)
    v = (a * a).sum(axis=1, keepdims=True)
    return np.where(v > 0, a * a / np.where(v > 0, v, 1.0), 0.0)


def shapley_by_orderings(k, cost):
    """Shapley 1953: average over all k! orderings of the cost increments; cost(frozenset) -> (m,)."""
    memo = {}

    def c(s):
        if s not in memo:
            memo[s] = np.asarray(cost(s), dtype=float)
        return memo[s]

    total = c(frozenset(range(k)))
    eff = np.zeros((total.size, k))
    orders = list(itertools.permutations(range(k)))
    for order in orders:
        before = frozenset()
        for i in order:
            now = before | {i}
            eff[:, i] += c(now) - c(before)
            before = now
    return eff / len(orders)


# --------------------------------------------------------------------------------------------
# global_budget: defaults, settings, the model contract
# --------------------------------------------------------------------------------------------


def test_global_budget_defaults_call_the_model_as_documented():
    # global_budget docstring: the variance game costs n_outer * n_inner * (2**k - 1) model calls and the width
    # game width_outer * width_inner * (2**k - 1); the signature's defaults are 2000, 3, 128, 256 and
    # n_boot = 200. The rows are counted in the model itself, and settings must report them.
    star = toy_star()
    model = toy_model(star)
    g = global_budget(star, model, seed=3)
    n_subsets = 2**6 - 1
    assert model.rows == n_subsets * (2000 * 3 + 128 * 256)
    assert g.settings == {
        "seed": 3, "n_outer": 2000, "n_inner": 3, "n_boot": 200, "width_outer": 128, "width_inner": 256,
        "model_calls": model.rows,
    }
    # ForwardModel.evaluate contract: rows of the six observables, and the nominal point as the reference
    # (the map-based orbit model linearizes around it)
    assert all(shape[1] == 6 for shape in model.shapes)
    assert all(ref is not None and np.array_equal(ref, star.mean) for ref in model.references)
    # a nearly free check of the JSON block while the budget is at hand: the width table is there
    assert g.to_dict()["width90"] == g.width.to_dict()
    assert g.width.low.shape == g.width.shares.shape == (2, 6)


def test_global_budget_without_width_counts_only_the_variance_game():
    star = toy_star()
    model = toy_model(star)
    g = global_budget(star, model, seed=4, n_outer=40, n_inner=2, n_boot=5, width=False)
    assert model.rows == (2**6 - 1) * 40 * 2
    assert g.settings == {
        "seed": 4, "n_outer": 40, "n_inner": 2, "n_boot": 5, "width_outer": None, "width_inner": None,
        "model_calls": model.rows,
    }
    assert g.width is None and g.to_dict()["width90"] is None


def test_global_budget_default_n_boot_is_200():
    # the documented default (signature) has the same effect as passing it: identical bootstrap intervals
    star = toy_star()
    kw = dict(seed=6, n_outer=60, width=False)
    default = global_budget(star, toy_model(star), **kw)
    explicit = global_budget(star, toy_model(star), n_boot=200, **kw)
    other = global_budget(star, toy_model(star), n_boot=201, **kw)
    for a, b in ((default.variance.se, explicit.variance.se), (default.variance.low, explicit.variance.low)):
        np.testing.assert_array_equal(a, b)
    assert not np.array_equal(default.variance.se, other.variance.se)  # n_boot does change them


def test_two_nuisance_parameters_enter_as_independent_inputs():
    # A model with two nuisance parameters (e.g. the star's mass and a zero-point): each enters the game as a
    # standard-normal deviate; with independent inputs of a linear model the linear shares are
    # a_i^2 / sum a^2 (Owen & Prieur 2017), with a = J sigma for the observables and gradient * sd for the
    # nuisances. The model receives the six observables and the deviates separately (ForwardModel contract).
    star = toy_star()
    extra = (("mass", (0.0, 0.9, 0.2), 0.5), ("zero_point", (0.7, -0.3, 0.0), 1.5))
    model = toy_model(star, nuisances=extra)
    g = global_budget(star, model, seed=5, n_outer=400, width_outer=16, width_inner=32, n_boot=40)
    assert g.inputs == OBS + ("mass", "zero_point")
    a = np.concatenate([A_STD[:2], np.array([[sd * gr[q] for _, gr, sd in extra] for q in (0, 1)])], axis=1)
    want = independent_shares(a)
    assert_allclose(g.linear_variance, want, rtol=0, atol=1e-12)
    # a linear model: the Monte Carlo estimator is unbiased for these shares; 4 bootstrap standard errors
    assert np.all(np.abs(g.variance.shares - want) <= 4 * g.variance.se + 1e-12)
    assert all(shape[1] == 6 for shape in model.shapes)
    assert all(shape[1] == 2 for shape in model.deviate_shapes)
    assert all(ref is not None and np.array_equal(ref, star.mean) for ref in model.references)
    # each nuisance parameter is a group of its own in the default partitions
    assert g.groups["by_kind"].players == ("position", "parallax", "proper_motion", "radial_velocity", "mass",
                                           "zero_point")


def test_linear_width_shares_of_a_toy_model():
    # width game of a linear Gaussian model with independent inputs: c_W(u) = 2 z95 sqrt(sum_{i in u} a_i^2)
    # (Gaussian conditioning, textbook), Shapley values by all 6! orderings (Shapley 1953)
    from scipy.stats import norm

    assert Z90 == pytest.approx(norm.ppf(0.95), rel=1e-15)
    star = toy_star()
    g = global_budget(star, toy_model(star), seed=8, n_outer=50, width_outer=8, width_inner=16, n_boot=5)
    a = A_STD[:2]
    eff = shapley_by_orderings(6, lambda s: 2 * Z90 * np.sqrt((a[:, sorted(s)] ** 2).sum(axis=1)))
    want = eff / (2 * Z90 * np.sqrt((a**2).sum(axis=1)))[:, None]
    assert_allclose(g.linear_width, want, rtol=0, atol=1e-12)
    doc = json.loads(json.dumps(g.to_dict()))
    for j, q in enumerate(("time_myr", "distance_pc")):
        assert doc["linear"]["width90"][q] == pytest.approx(dict(zip(OBS, want[j])), abs=1e-12)
        assert doc["linear"]["variance"][q] == pytest.approx(dict(zip(OBS, independent_shares(a)[j])), abs=1e-12)


def test_global_budget_json_block():
    # the plan's JSON carries this block (perierr.plan.planner); its keys and the sub-blocks
    star = toy_star()
    g = global_budget(star, toy_model(star), seed=9, n_outer=60, width_outer=8, width_inner=16, n_boot=10)
    d = g.to_dict()
    assert set(d) == {"method", "inputs", "variance", "width90", "groups", "linear", "nonlinearity", "settings"}
    # the method names the estimator and its reference (README, "The error budget beyond linear")
    assert d["method"] == (
        "Shapley effects, Monte Carlo with conditional Gaussian sampling (Song, Nelson & Staum 2016); "
        "bootstrap intervals"
    )
    assert d["inputs"] == list(OBS)
    assert d["variance"] == g.variance.to_dict()
    assert d["width90"] == g.width.to_dict()
    assert set(d["groups"]) == {"astrometry_vs_rv", "by_kind"}
    assert d["groups"]["by_kind"] == g.groups["by_kind"].to_dict()
    assert set(d["linear"]) == {"variance", "width90"}
    assert d["nonlinearity"] == g.nonlinearity()
    assert d["settings"] == g.settings
    json.dumps(d)  # strict JSON


def test_outputs_that_do_not_vary_or_depend_on_one_input():
    # t_ph constant (a zero Jacobian row): nothing to share, so every table has a row of zeros (the convention
    # linear_budget documents), never NaN or an error. d_ph depends on ra only, ra independent of the rest:
    # by efficiency and the null-player property (Shapley 1953) ra takes the whole share, the rest 0.
    star = toy_star()
    a = np.zeros((3, 6))
    a[1, 0] = 0.7
    g = global_budget(star, toy_model(star, a_std=a), seed=10, n_outer=50, width_outer=8, width_inner=16,
                      n_boot=10)
    want = np.zeros((2, 6))
    want[1, 0] = 1.0
    for table in (g.linear_variance, g.linear_width, g.variance.shares, g.width.shares):
        assert_allclose(table, want, rtol=0, atol=1e-12)
    for est in (g.variance, g.width):
        assert est.total[0] == 0.0
        for arr in (est.low, est.high, est.se):
            assert_allclose(arr[0], 0.0, rtol=0, atol=0)


# --------------------------------------------------------------------------------------------
# global_budget: the parallax checks
# --------------------------------------------------------------------------------------------


def small_budget(star):
    return global_budget(star, toy_model(star), seed=1, n_outer=10, n_inner=2, n_boot=5, width=False)


def test_global_budget_parallax_checks():
    # docstring: InputError if the nominal parallax is <= 0, or if parallax / error < 5.5
    with pytest.raises(InputError, match="inverts the parallax"):
        small_budget(toy_star(parallax=0.0, parallax_error=0.1))
    with pytest.raises(InputError, match="inverts the parallax"):
        small_budget(toy_star(parallax=-2.0, parallax_error=0.1))
    with pytest.raises(InputError, match="5.5") as err:
        small_budget(toy_star(parallax=5.4, parallax_error=1.0))
    assert err.value.field == "parallax_error"
    # the ratio uses the parallax error, whatever the other errors (here pmra held exact)
    with pytest.raises(InputError, match="5.5"):
        small_budget(toy_star(parallax=0.5, parallax_error=0.2, pmra_error=0.0))
    # accepted: ratio exactly 5.5 (the bound is "< 5.5"), ratio 6, and a negative pmra
    for plx in (5.5, 6.0):
        star = toy_star(parallax=plx, parallax_error=1.0)
        assert star.mean[2] / star.sigma[2] == plx and star.mean[3] < 0
        assert small_budget(star).inputs == OBS


def test_parallax_held_exact_is_accepted_without_floating_point_warnings():
    # parallax_error = 0: the ratio is infinite, the check passes; no division-by-zero warning on the way
    star = toy_star(parallax_error=0.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        g = small_budget(star)
    assert_allclose(g.linear_variance[:, 2], 0.0, rtol=0, atol=0)  # an exact input is a null player


# --------------------------------------------------------------------------------------------
# GlobalBudget.nonlinearity: the rounding allowance around the bootstrap interval
# --------------------------------------------------------------------------------------------


def estimate(shares, low, high, players=("a", "b", "c", "d", "e", "f"), total=(1.0,)):
    shares, low, high = (np.atleast_2d(np.asarray(x, dtype=float)) for x in (shares, low, high))
    return ShapleyEstimate(tuple(players), ("distance_pc",), shares, low, high, np.full(shares.shape, 0.01),
                           np.asarray(total, dtype=float))


def test_nonlinearity_flags_linear_shares_outside_the_interval():
    # An input whose linear share lies outside the bootstrap interval is flagged; 1e-12 is allowed for rounding,
    # ends included (common practice, no source). Inputs: at low, at high, far above, exactly 1e-12 below low,
    # exactly 1e-12 above high, 1e-9 below low.
    low = np.array([0.2, 0.2, 0.2, 0.2, 0.2, 0.2])
    high = np.array([0.4, 0.4, 0.4, 0.4, 0.4, 0.4])
    lin = np.array([low[0], high[1], high[2] + 0.5, low[3] - 1e-12, high[4] + 1e-12, low[5] - 1e-9])
    shares = np.full(6, 0.3)
    gb = GlobalBudget(estimate(shares, low, high), None, {}, lin[None, :], lin[None, :])
    info = gb.nonlinearity()["distance_pc"]
    assert info["inputs_outside_interval"] == ["c", "f"]
    assert info["agrees_with_linear"] is False
    assert info["max_abs_difference"] == pytest.approx(0.5 + 0.1, abs=1e-15)
    inside = GlobalBudget(estimate(shares, low, high), None, {}, shares[None, :], shares[None, :])
    assert inside.nonlinearity()["distance_pc"] == {
        "max_abs_difference": 0.0, "inputs_outside_interval": [], "agrees_with_linear": True,
    }


# --------------------------------------------------------------------------------------------
# shapley_gaussian: defaults, seeds, the estimate's JSON, the bootstrap's definitions
# --------------------------------------------------------------------------------------------


class Counting:
    """A linear function of the inputs that counts the rows it is given."""

    def __init__(self, a):
        self.a = np.atleast_2d(np.asarray(a, dtype=float))
        self.rows = 0

    def __call__(self, x):
        self.rows += x.shape[0]
        return x @ self.a.T


def test_shapley_gaussian_defaults_and_seed():
    # documented design: n_outer * n_inner draws per non-empty subset, defaults 2000 and 3; the default
    # n_boot = 200 has the effect of passing 200; an integer seed reproduces the result
    f = Counting([[1.0, -2.0, 0.5]])
    kw = dict(players=("a", "b", "c"), outputs=("y",), seed=11)
    est = shapley_gaussian(f, np.zeros(3), np.eye(3), **kw)
    assert f.rows == (2**3 - 1) * 2000 * 3
    again = shapley_gaussian(Counting(f.a), np.zeros(3), np.eye(3), **kw)
    explicit = shapley_gaussian(Counting(f.a), np.zeros(3), np.eye(3), n_boot=200, **kw)
    for other in (again, explicit):
        for name in ("shares", "low", "high", "se", "total"):
            np.testing.assert_array_equal(getattr(est, name), getattr(other, name))


def test_estimate_total_is_the_variance_and_to_dict_carries_every_field():
    # Y = a . X with independent N(mu, s^2) inputs: Var(Y) = sum a^2 s^2. The estimate's total is the mean over
    # n_outer of unbiased sample variances of n_inner draws: standard error V sqrt(2 / ((n_inner - 1) n_outer))
    # (chi-square, textbook); tolerance 4.5 standard errors. Shares: a_i^2 s_i^2 / V (Owen & Prieur 2017),
    # within 4 bootstrap standard errors.
    a = np.array([1.5, -0.8, 0.4])
    s = np.array([2.0, 1.0, 3.0])
    v = float((a * a * s * s).sum())
    n_outer, n_inner = 3000, 3
    est = shapley_gaussian(
        lambda x: (x @ a)[:, None], np.array([1.0, -4.0, 10.0]), np.diag(s * s), players=("p", "q", "r"),
        outputs=("y",), n_outer=n_outer, n_inner=n_inner, n_boot=100, seed=12, confidence=0.8,
    )
    se_total = v * math.sqrt(2 / ((n_inner - 1) * n_outer))
    assert abs(est.total[0] - v) < 4.5 * se_total
    want = a * a * s * s / v
    assert np.all(np.abs(est.shares[0] - want) <= 4 * est.se[0])
    assert est.confidence == 0.8
    d = json.loads(json.dumps(est.to_dict()))
    assert set(d) == {"y", "players", "confidence"}
    assert d["players"] == ["p", "q", "r"] and d["confidence"] == 0.8
    assert set(d["y"]) == {"p", "q", "r", "total"}
    assert d["y"]["total"] == pytest.approx(est.total[0], rel=1e-15)
    for i, p in enumerate(("p", "q", "r")):
        assert d["y"][p] == pytest.approx(
            {"share": est.shares[0, i], "low": est.low[0, i], "high": est.high[0, i], "se": est.se[0, i]}, rel=1e-15
        )
        assert est.low[0, i] < est.high[0, i]


def test_bootstrap_interval_and_standard_error_definitions():
    # With two bootstrap replicates s1, s2 of a share, the definitions fix everything exactly:
    # standard error with the B - 1 denominator = |s1 - s2| / sqrt(2) (Efron & Tibshirani 1993, Ch. 6), and the
    # percentile interval at level c (Ch. 13) with linear interpolation between the two (numpy.percentile
    # default, Hyndman & Fan type 7) spans c |s1 - s2|. Hence high - low = c sqrt(2) se; at c = 0 the interval
    # collapses to the middle of the two.
    def f(x):
        return np.stack([x[:, 0] + 0.5 * x[:, 1], x[:, 0] * x[:, 1]], axis=1)

    kw = dict(players=("a", "b"), outputs=("lin", "prod"), n_outer=300, n_boot=2)
    for c in (0.95, 0.5, 0.0):
        est = shapley_gaussian(f, np.array([1.0, 2.0]), np.eye(2), seed=13, confidence=c, **kw)
        assert np.all(est.se > 1e-6)  # the two replicates differ
        assert_allclose(est.high - est.low, c * math.sqrt(2) * est.se, rtol=1e-9, atol=1e-15)
        assert np.all(est.high >= est.low)
    # c = 0: low == high exactly (both the median of the two replicates)
    np.testing.assert_array_equal(est.low, est.high)


def test_an_output_with_zero_variance_gets_zero_shares_not_nan():
    # an output that no input moves: nothing to share; zeros (as linear_budget documents), with zero intervals
    est = shapley_gaussian(
        lambda x: np.stack([x[:, 0] - x[:, 1], np.full(x.shape[0], 3.0)], axis=1), np.zeros(2), np.eye(2),
        players=("a", "b"), outputs=("y", "const"), n_outer=200, n_boot=20, seed=14,
    )
    assert est.total[1] == 0.0
    for arr in (est.shares, est.low, est.high, est.se):
        np.testing.assert_array_equal(arr[1], 0.0)
    assert_allclose(est.shares[0], [0.5, 0.5], atol=4 * est.se[0].max() + 1e-12)  # symmetry (Shapley 1953)


def type8_quantile_mean(n, p):
    """E of the Hyndman & Fan (1996) type-8 sample quantile of n standard normal draws.

    Virtual 1-based index h = p (n + 1/3) + 1/3, clipped to [1, n], linear interpolation between the order
    statistics; E[X_(k)] is the integral of Phi^-1 over the Beta(k, n + 1 - k) law of the k-th uniform order
    statistic (textbook; scipy.stats.beta.expect does the quadrature).
    """
    from scipy.stats import beta, norm

    h = min(max(p * (n + 1 / 3) + 1 / 3, 1.0), float(n))
    j = int(math.floor(h))
    frac = h - j

    def order_mean(k):
        return beta.expect(norm.ppf, args=(k, n + 1 - k))

    return order_mean(j) if frac == 0 else (1 - frac) * order_mean(j) + frac * order_mean(j + 1)


def test_width_statistic_uses_median_unbiased_quantiles():
    # Y = X1 + X2 with independent N(0, 2) inputs: Y ~ N(0, 4). The width game's total is the mean over outer
    # draws of the type-8 90 % sample width of n_inner = 20 draws; its expectation is 2 sd E[q95 - q05] (above).
    # numpy's default type 7 would give 16 % less, the variance statistic 4 (not a width at all).
    # Standard error from the spread of the per-draw widths of an independent run (conditional_costs).
    n_inner, n_outer = 20, 1500
    sd = 2.0
    want = sd * (type8_quantile_mean(n_inner, 0.95) - type8_quantile_mean(n_inner, 0.05))

    def f(x):
        return (x[:, 0] + x[:, 1])[:, None]

    cov = 2.0 * np.eye(2)
    est = shapley_gaussian(f, np.zeros(2), cov, players=("a", "b"), outputs=("y",), n_outer=n_outer,
                           n_inner=n_inner, n_boot=10, seed=15, statistic="width")
    per_draw = conditional_costs(f, np.zeros(2), cov, n_outer=n_outer, n_inner=n_inner,
                                 rng=np.random.default_rng(16), statistic="width")[-1, 0]
    se = per_draw.std(ddof=1) / math.sqrt(n_outer)
    assert abs(est.total[0] - want) < 4.5 * se
    assert abs(per_draw.mean() - want) < 4.5 * se
    assert_allclose(est.shares[0], [0.5, 0.5], atol=4 * est.se[0].max() + 1e-12)


def test_float32_outputs_are_handled_in_double_precision():
    # metamorphic: a function returning float32 gives the same estimate as the same values cast to float64
    # (the sample variances must not be accumulated in single precision); offset 1e6 makes float32 arithmetic
    # on them visibly wrong (common practice, no source)
    a = np.array([1.0, 0.5])

    def f32(x):
        return (1e6 + x @ a).astype(np.float32)[:, None]

    def f64(x):
        return f32(x).astype(np.float64)

    kw = dict(players=("a", "b"), outputs=("y",), n_outer=500, n_boot=10)
    e32 = shapley_gaussian(f32, np.zeros(2), np.eye(2), seed=17, **kw)
    e64 = shapley_gaussian(f64, np.zeros(2), np.eye(2), seed=17, **kw)
    assert_allclose(e32.total, e64.total, rtol=1e-12)
    assert_allclose(e32.shares, e64.shares, rtol=0, atol=1e-12)


# --------------------------------------------------------------------------------------------
# linear_budget and LinearBudget
# --------------------------------------------------------------------------------------------


def test_linear_budget_json_dominant_and_covariance_contributions():
    # Two correlated inputs (Iooss & Prieur 2019 closed form):
    # Sh1 = [b1^2 s1^2 (1 - r^2/2) + r b1 b2 s1 s2 + b2^2 s2^2 r^2 / 2] / Var; covariance contributions
    # b_i (Sigma b)_i / Var (definition in perierr.budget.linear's docstring).
    s1, s2, r = 2.0, 0.5, 0.6
    cov = np.array([[s1 * s1, r * s1 * s2], [r * s1 * s2, s2 * s2]])
    jac = np.array([[0.1, 3.0], [1.3, -0.7], [0.0, 2.0]])  # t_ph: "b" dominates, d_ph: "a" dominates
    b = linear_budget(jac, cov, inputs=("a", "b"))
    sh = np.zeros((3, 2))
    contrib = np.zeros((3, 2))
    for q, (b1, b2) in enumerate(jac):
        var = b1**2 * s1**2 + 2 * r * b1 * b2 * s1 * s2 + b2**2 * s2**2
        sh[q, 0] = (b1**2 * s1**2 * (1 - r**2 / 2) + r * b1 * b2 * s1 * s2 + b2**2 * s2**2 * r**2 / 2) / var
        sh[q, 1] = 1 - sh[q, 0]
        contrib[q] = jac[q] * (cov @ jac[q]) / var
    assert_allclose(b.shapley, sh, rtol=0, atol=1e-12)
    assert abs(contrib[1, 1]) > 0.05 and np.abs(contrib - sh).max() > 0.05  # the two kinds differ here
    d = json.loads(json.dumps(b.to_dict()))
    assert set(d) == {*OUTS, "covariance_contributions", "inputs", "method"}
    assert d["inputs"] == ["a", "b"]
    assert d["method"] == "linearized Shapley effects (closed form, Gaussian inputs, correlation coordinates)"
    for q, out in enumerate(OUTS):
        assert d[out] == pytest.approx(dict(zip("ab", sh[q])), abs=1e-12)
        assert d["covariance_contributions"][out] == pytest.approx(dict(zip("ab", contrib[q])), abs=1e-12)
    # dominant: documented default output d_ph
    assert sh[1, 0] > sh[1, 1] and sh[0, 1] > sh[0, 0]
    assert b.dominant() == "a" and b.dominant("time_myr") == "b"


def test_linear_budget_output_with_zero_variance():
    # a zero Jacobian row: zero variance, a row of zeros in both tables (documented), dominant None, and no
    # floating-point warning on the way; the other rows are J^2 s^2 / Var (independent inputs, Owen & Prieur)
    s = np.array([0.5, 2.0, 1.0, 0.1, 3.0, 0.7])
    jac = np.array([[0.0] * 6, [1.0, 0.2, -0.5, 4.0, 0.1, 0.3], [0.3, 0.3, 0.3, 0.3, 0.3, 0.3]])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        b = linear_budget(jac, np.diag(s * s))
        direct = linear_shapley(jac, np.diag(s * s))
    want = independent_shares(jac * s)
    for table in (b.shapley, b.covariance, direct):
        assert_allclose(table, want, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(b.shapley[0], 0.0)
    np.testing.assert_array_equal(b.covariance[0], 0.0)
    assert b.variance[0] == 0.0
    assert b.dominant("time_myr") is None


def test_shape_checks_name_the_jacobian():
    cov = np.eye(6)
    with pytest.raises(InputError, match="jacobian"):
        linear_budget(np.ones((2, 6)), cov)  # two outputs instead of three
    with pytest.raises(InputError, match="jacobian"):
        linear_shapley(np.ones((3, 5)), cov)  # five columns for six inputs
    with pytest.raises(InputError, match="jacobian"):
        linear_shapley(np.ones((3, 5)), np.ones((6, 5)))  # a covariance that is not square


def test_extend_inputs_appends_independent_inputs():
    # two new inputs at once: block-diagonal covariance, columns appended; the budget of independent inputs is
    # then J^2 s^2 / Var (Owen & Prieur 2017)
    jac = np.array([[1.0, 2.0], [0.5, -1.0], [0.0, 3.0]])
    cov = np.diag([0.25, 4.0])
    cols = np.array([[0.3, 1.0], [2.0, -0.5], [1.0, 1.0]])
    j2, c2 = extend_inputs(jac, cov, cols, [9.0, 0.01])
    assert_allclose(j2, np.concatenate([jac, cols], axis=1), rtol=0, atol=0)
    assert_allclose(c2, np.diag([0.25, 4.0, 9.0, 0.01]), rtol=0, atol=0)
    b = linear_budget(j2, c2, inputs=("a", "b", "m", "z"))
    assert_allclose(b.shapley, independent_shares(j2 * np.sqrt([0.25, 4.0, 9.0, 0.01])), rtol=0, atol=1e-12)


def test_clip_rounding():
    # within 1e-12 (strictly) of 0 or 1 -> exactly 0 or 1; everything else kept (docstring)
    x = np.array([-5e-13, 5e-13, 1 - 5e-13, 1 + 5e-13, 0.3, -1 + 1e-13, 2 - 1e-13, 1e-12, -1e-12, 0.999])
    want = np.array([0.0, 0.0, 1.0, 1.0, 0.3, -1 + 1e-13, 2 - 1e-13, 1e-12, -1e-12, 0.999])
    np.testing.assert_array_equal(clip_rounding(x), want)


def test_large_stacks_are_computed_in_bounded_blocks():
    # 2048 invented stars (four blocks of 512) with independent inputs: every star's shares are
    # J^2 s^2 / Var (Owen & Prieur 2017), including those past the first block; the peak memory of the stack is
    # that of one block (docstring: bounded memory)
    rng = np.random.default_rng(18)

    def stack(n):
        j = rng.normal(size=(n, 3, 6))
        s = rng.uniform(0.1, 2.0, (n, 6))
        return j, s, np.einsum("ni,ij->nij", s * s, np.eye(6))

    j1, s1, c1 = stack(512)
    j4, s4, c4 = stack(2048)
    tracemalloc.start()
    linear_shapley(j1, c1)
    peak_one = tracemalloc.get_traced_memory()[1]
    tracemalloc.reset_peak()
    got = linear_shapley(j4, c4)
    peak_four = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert_allclose(got, independent_shares((j4 * s4[:, None, :]).reshape(-1, 6)).reshape(2048, 3, 6),
                    rtol=0, atol=1e-12)
    assert peak_four < 1.6 * peak_one, (peak_four, peak_one)


# --------------------------------------------------------------------------------------------
# The game: groups, standardization, explained variance
# --------------------------------------------------------------------------------------------


def test_group_masks_error_names_the_missing_inputs():
    with pytest.raises(InputError, match="partition") as err:
        group_masks(OBS, {"astrometry": ("ra", "dec", "parallax", "pmra")})
    assert err.value.value == ["pmdec", "radial_velocity"]


def test_standardize_degenerate_and_inconsistent_covariances():
    # docstring: an input with zero variance gets unit variance and NO correlation (an independent dummy), even
    # when the covariance given has stray off-diagonal terms for it; a variance that is negative by rounding
    # is held exact (sigma 0); the correlation matrix is symmetric even when the input is not exactly.
    cov = np.array([[0.0, 0.3, 0.0], [0.3, 4.0, 1.0], [0.0, 1.0, -1e-30]])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        sigma, corr = standardize(cov)
    assert_allclose(sigma, [0.0, 2.0, 0.0], rtol=0, atol=0)
    assert_allclose(corr, np.eye(3), rtol=0, atol=0)
    rng = np.random.default_rng(19)
    a = rng.normal(size=(4, 4))
    cov = a @ np.diag([1.0, 2.0, 3.0, 4.0]) @ a.T
    cov[0, 1] *= 1 + 1e-9  # a slightly asymmetric covariance (as from a rounded update)
    s = np.sqrt(np.diag(cov))
    sigma, corr = standardize(cov)
    np.testing.assert_array_equal(corr, corr.T)
    want = 0.5 * (cov + cov.T) / np.outer(s, s)
    np.fill_diagonal(want, 1.0)
    assert_allclose(corr, want, rtol=1e-14, atol=0)


def test_explained_variance_broadcasts_stacks():
    # docstring: gradient (..., m, k) and corr (..., k, k) broadcast. Reference: b_w^T R_ww^-1 b_w with b = R g,
    # by numpy.linalg.solve on each full-rank subset (Gaussian conditioning, textbook)
    rng = np.random.default_rng(20)

    def corr3():
        a = rng.normal(size=(3, 4))
        c = a @ a.T
        d = np.sqrt(np.diag(c))
        return c / np.outer(d, d)

    def reference(g, r):
        b = r @ g.T
        out = np.zeros((8, g.shape[0]))
        for mask in range(1, 8):
            w = [i for i in range(3) if mask >> i & 1]
            out[mask] = np.einsum("im,im->m", b[w], np.linalg.solve(r[np.ix_(w, w)], b[w]))
        return out

    gs = rng.normal(size=(4, 2, 3))
    r = corr3()
    got = explained_variance(gs, r)
    assert got.shape == (4, 8, 2)
    assert_allclose(got, np.stack([reference(g, r) for g in gs]), rtol=1e-10, atol=1e-12)
    rs = np.stack([corr3() for _ in range(4)])
    got = explained_variance(gs[0], rs)
    assert got.shape == (4, 8, 2)
    assert_allclose(got, np.stack([reference(gs[0], q) for q in rs]), rtol=1e-10, atol=1e-12)


def test_explained_variance_drops_near_exact_relations_like_a_pseudo_inverse():
    # corr(x0, x1) = 1 - 1e-11: the difference direction has eigenvalue ~2e-11 < RANK_TOL and is treated as an
    # exact relation; x2 correlates slightly differently with x0 and x1 (PSD: |0.5 - 0.500001| < sqrt(2e-11)).
    # Reference: scipy.linalg.pinvh with the same absolute cut-off (atol = RANK_TOL, rtol = 0), an independent
    # pseudo-inverse; the value of each subset is b_w^T R_ww^+ b_w (module docstring).
    from scipy.linalg import pinvh

    r = np.array([[1.0, 1 - 1e-11, 0.5], [1 - 1e-11, 1.0, 0.500001], [0.5, 0.500001, 1.0]])
    assert 0 < np.linalg.eigvalsh(r)[0] < RANK_TOL
    g = np.array([[1.0, 2.0, 3.0], [0.5, -1.0, 2.0]])
    b = r @ g.T
    want = np.zeros((8, 2))
    for mask in range(1, 8):
        w = [i for i in range(3) if mask >> i & 1]
        want[mask] = np.einsum("im,im->m", b[w], pinvh(r[np.ix_(w, w)], atol=RANK_TOL, rtol=0.0) @ b[w])
    assert_allclose(explained_variance(g, r), want, rtol=0, atol=1e-13)


def test_linear_costs_of_independent_inputs():
    # c(u) = E[Var(Y | X_-u)] = sum_{i in u} J_i^2 s_i^2 for independent inputs (textbook)
    jac = np.array([[1.0, -2.0, 0.5]])
    s = np.array([0.3, 1.5, 2.0])
    got = linear_costs(jac, np.diag(s * s))
    want = np.array([[sum((jac[0, i] * s[i]) ** 2 for i in range(3) if m >> i & 1)] for m in range(8)])
    assert_allclose(got, want, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("statistic", ["WIDTH", "widths", None, "std"])
def test_conditional_costs_refuse_a_statistic_they_do_not_know(statistic):
    # conditional_costs docstring: statistic is "variance" or "width"; anything else is refused by name
    # (it used to fall through to the width game)
    with pytest.raises(InputError, match=f"statistic = {statistic!r}: expected one of variance, width"):
        conditional_costs(lambda x: x[:, :1], np.zeros(2), np.eye(2), n_outer=4, n_inner=4,
                          rng=np.random.default_rng(0), statistic=statistic)
