"""Weighted summaries (the fast bracketed quantile selection) and reweighted draws."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal
from scipy import stats

from perierr import ObservedStar
from perierr.priors import ExponentialDensity, UniformDensity
from perierr.sampling.gaussian import draw_gaussian
from perierr.sampling.reweight import importance_weights, reweight
from perierr.summary import _binned_weighted_quantiles, _stable_sorted, summarize, weighted_quantiles

PROBS = np.array([0.001, 0.05, 0.16, 0.4999, 0.5, 0.5001, 0.84, 0.95, 0.999])

#: Monte Carlo checks allow K_SE standard errors computed in the test (4, as in tests/test_propagation.py:
#: two-sided false-alarm probability 6e-5 per check; the seeds are fixed).
K_SE = 4.0


def sorted_definition(x, probs, w):
    """Mid-point weighted CDF of a full stable sort, linearly interpolated (the definition)."""
    order = np.argsort(x, kind="stable")
    cdf = (np.cumsum(w[order]) - 0.5 * w[order]) / w.sum()
    return np.interp(probs, cdf, x[order])


def test_equal_weights_give_hyndman_fan_type_5_quantiles():
    # With equal weights the mid-point CDF is p_k = (k - 1/2) / n: Hyndman & Fan 1996
    # (Am. Stat. 50, 361), definition 5, which numpy implements as method="hazen".
    rng = np.random.default_rng(3)
    for n in (1_000, 60_000, 400_000):  # the sorted path and the bracketed path
        x = rng.lognormal(0.0, 1.5, n)
        got = weighted_quantiles(x, PROBS, np.full(n, 2.5))
        assert_allclose(got, np.quantile(x, PROBS, method="hazen"), rtol=1e-12, atol=0)


@pytest.mark.parametrize("n", [50_000, 130_000, 1_000_000])
def test_bracketed_selection_equals_full_sort_at_several_sizes(n):
    # The pilot size scales as n^(2/3); every size must give the sorted definition exactly
    # (up to the summation order of the CDF, 1e-9 of the range; common practice, no source).
    rng = np.random.default_rng(n)
    x = rng.standard_t(3, n)
    w = np.exp(rng.normal(0.0, 1.2, n))  # ESS / n about 0.24, like a weak-parallax reweighting
    got = _binned_weighted_quantiles(x, PROBS, w)
    assert_allclose(got, sorted_definition(x, PROBS, w), rtol=0, atol=1e-9 * np.ptp(x))


def test_ties_on_bracket_edges_and_zero_weights_follow_the_stable_order():
    # Heavy ties (values on a 0.05 grid) put bracket edges on tied values, and zero weights are
    # nodes of the CDF like any other; the stable order fixes the CDF at ties (numpy argsort
    # kind="stable" is the reference).
    rng = np.random.default_rng(8)
    n = 200_000
    x = np.round(rng.normal(size=n) / 0.05) * 0.05
    w = np.where(rng.random(n) < 0.1, 0.0, rng.exponential(size=n))
    got = _binned_weighted_quantiles(x, PROBS, w)
    assert_allclose(got, sorted_definition(x, PROBS, w), rtol=0, atol=1e-9 * np.ptp(x))


@settings(max_examples=40, deadline=None)
@given(
    n=st.integers(1, 3_000),
    grid=st.sampled_from([0.0, 0.1, 1.0]),
    seed=st.integers(0, 2**32 - 1),
    probs=st.lists(st.floats(0.0, 1.0), min_size=1, max_size=12),
)
def test_bracketed_selection_equals_full_sort_property(n, grid, seed, probs):
    # Invariant: for any sample, weights and levels the bracketed selection is the sorted
    # definition (tolerance 1e-9 of the range: summation order; common practice, no source).
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    if grid:
        x = np.round(x / grid) * grid
    w = rng.exponential(size=n) + 1e-3
    p = np.asarray(probs)
    got = _binned_weighted_quantiles(x, p, w)
    assert_allclose(got, sorted_definition(x, p, w), rtol=0, atol=1e-9 * max(np.ptp(x), 1.0))


@settings(max_examples=30, deadline=None)
@given(n=st.integers(1, 500), seed=st.integers(0, 2**32 - 1))
def test_fast_sort_gives_the_stable_order(n, seed):
    # The default argsort is only used when it cannot differ from numpy's stable argsort.
    rng = np.random.default_rng(seed)
    x = rng.integers(0, max(2, n // 3), n).astype(float)  # many ties
    w = np.arange(n, dtype=float)  # weights tell the positions apart
    xs, ws = _stable_sorted(x, w)
    order = np.argsort(x, kind="stable")
    assert_array_equal(xs, x[order])
    assert_array_equal(ws, w[order])


def test_weighted_moments_match_numpy_reliability_weights():
    # numpy.average and numpy.cov(aweights=..., ddof=1) (reliability weights) are the reference:
    # the std uses the Kish-size correction n_eff / (n_eff - 1), which equals numpy's
    # 1 / (V1 - V2 / V1) normalization; quantile errors use the Kish n_eff.
    rng = np.random.default_rng(21)
    n = 80_000
    x = rng.gamma(2.0, 3.0, n)
    w = rng.exponential(size=n)
    s = summarize(x, weights=w)
    n_eff = w.sum() ** 2 / np.dot(w, w)
    assert s.effective_size == pytest.approx(n_eff, rel=1e-12)
    assert s.mean == pytest.approx(np.average(x, weights=w), rel=1e-12)
    assert s.std == pytest.approx(np.sqrt(np.cov(x, aweights=w, ddof=1)), rel=1e-10)
    q, d = 0.16, np.sqrt(0.16 * 0.84 / n_eff)
    band = sorted_definition(x, np.array([q - d, q + d]), w)
    assert s.quantile_se[0.16] == pytest.approx(0.5 * (band[1] - band[0]), rel=1e-9)


def invented(plx, eplx):
    """An invented star (no real star)."""
    return ObservedStar.from_values(
        name="invented", ra=33.0, dec=-12.0, parallax=plx, parallax_error=eplx, pmra=1.0, pmra_error=0.3,
        pmdec=0.5, pmdec_error=0.3, radial_velocity=-25.0, radial_velocity_error=1.5,
        parallax_pmra_corr=0.3,
    )


@pytest.mark.parametrize(
    "prior, cut_mas",
    [(ExponentialDensity(1000.0), 0.0), (UniformDensity(900.0), 1000.0 / 900.0)],
)
def test_reweight_removes_exactly_the_zero_weight_draws_in_order(prior, cut_mas):
    # A parallax of 0.8 +- 0.6 mas puts ~9 % of the draws at parallax <= 0 (and the uniform prior
    # cuts r > 900 pc): they are removed, the rest keep their order and values (the reference is
    # boolean indexing of the same seeded draws; common practice, no source).
    star = invented(0.8, 0.6)
    s = reweight(star, prior, n=20_000, seed=4)
    draws = draw_gaussian(star.mean, star.cov, 20_000, np.random.default_rng(4))
    w, keep = importance_weights(draws[:, 2], prior)
    assert_array_equal(s.values, draws[keep])
    assert s.info["n_zero_weight"] == 20_000 - int(keep.sum())
    # as many as the Gaussian parallax puts below the cut, P = Phi((cut - 0.8) / 0.6) (scipy.stats.norm),
    # within K_SE binomial standard errors sqrt(n p (1 - p))
    p = stats.norm.cdf((cut_mas - 0.8) / 0.6)
    assert abs(s.info["n_zero_weight"] - 20_000 * p) < K_SE * np.sqrt(20_000 * p * (1 - p))
    assert_allclose(s.weights.sum(), 1.0, rtol=1e-12)
    assert s.info["effective_size"] == pytest.approx(1.0 / np.dot(w, w), rel=1e-12)


def test_misleading_pilot_falls_back_to_the_full_sort(monkeypatch):
    # Weights that fool the strided pilot (its draws carry almost all their weight below -1) put
    # the brackets in the wrong place; the check must notice and sort everything, still giving
    # the sorted definition.
    import perierr.summary as summary

    rng = np.random.default_rng(5)
    n = 100_000
    x = rng.normal(size=n)
    w = np.ones(n)
    step = max(1, n // max(2_000, int(6.0 * n ** (2.0 / 3.0))))
    pilot = np.zeros(n, dtype=bool)
    pilot[::step] = True
    w[pilot] = np.where(x[pilot] < -1.0, 1e3, 1e-6)
    sizes = []
    real = summary._stable_sorted
    monkeypatch.setattr(summary, "_stable_sorted", lambda a, b: sizes.append(a.size) or real(a, b))
    got = _binned_weighted_quantiles(x, PROBS, w)
    assert n in sizes  # the full sort ran
    assert_allclose(got, sorted_definition(x, PROBS, w), rtol=0, atol=1e-9 * np.ptp(x))


def test_weighted_threshold_probability_and_binomial_error():
    # P(d < D) is the weight fraction below D; its error the binomial sqrt(p (1 - p) / n_eff)
    # with the Kish size (Kish 1965, Survey Sampling, Sect. 11.7), checked against numpy sums.
    from perierr.summary import threshold_probability

    rng = np.random.default_rng(17)
    d = rng.lognormal(1.0, 1.0, 200_000)
    w = rng.exponential(size=d.size)
    t = threshold_probability(d, 1.5, label="1.5 pc", weights=w)
    p = w[d < 1.5].sum() / w.sum()
    n_eff = w.sum() ** 2 / np.sum(w * w)
    assert t.probability == pytest.approx(p, rel=1e-12)
    assert t.se == pytest.approx(np.sqrt(p * (1 - p) / n_eff), rel=1e-10)
    assert t.count == int(np.count_nonzero(d < 1.5))
