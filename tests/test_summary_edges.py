"""Edges of the summaries: quantile keys, thresholds, JSON blocks, moments at their limits, infinite draws,
the bracketed quantile selection against a full sort, and the Monte Carlo error brackets.

Written to kill the mutants of perierr/summary.py and perierr/thresholds.py that the other tests let
survive (tools/mutation_run.py, group "summary"); every check compares with a value computed here.
"""

import math
import re
import warnings

import astropy.units as u
import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy import stats

from perierr import summary
from perierr.errors import InputError
from perierr.summary import (
    ThresholdProbability,
    _binned_weighted_quantiles,
    _stable_sorted,
    level_key,
    summarize,
    threshold_probability,
    weighted_quantiles,
)
from perierr.thresholds import parse_thresholds

#: Monte Carlo checks allow K_SE standard errors computed in the test (as in tests/test_propagation.py).
K_SE = 4.0


def sorted_definition(x, probs, w):
    """Mid-point weighted CDF of a full stable sort, linearly interpolated (the definition, by hand)."""
    order = np.argsort(x, kind="stable")
    cdf = (np.cumsum(w[order]) - 0.5 * w[order]) / w.sum()
    return np.interp(probs, cdf, x[order])


@pytest.fixture
def sorts(monkeypatch):
    """Copies of every array the summaries sort (``_stable_sorted``), in call order."""
    seen = []
    real = summary._stable_sorted

    def spy(a, b):
        seen.append(np.array(a, copy=True))
        return real(a, b)

    monkeypatch.setattr(summary, "_stable_sorted", spy)
    return seen


# ------------------------------------------------------------------------------------- keys and labels
def test_level_keys_are_percentages_with_one_decimal_when_not_whole():
    # The docstring's examples (0.05 -> q05, 0.025 -> q02.5) and the README's JSON keys (q05 ... q95, q02.5).
    assert [level_key(q) for q in (0.05, 0.16, 0.5, 0.84, 0.95)] == ["q05", "q16", "q50", "q84", "q95"]
    assert level_key(0.025) == "q02.5" and level_key(0.975) == "q97.5" and level_key(0.001) == "q00.1"
    assert level_key(0.07) == "q07"  # 100 * 0.07 = 7.000000000000001 in binary: rounding, still whole
    # the tolerance is for the rounding of 100 q (1e-15 above): a percentage exactly 1e-9 away from a whole
    # number (100 q == 1e-9 for q one ulp above 1e-11, checked here) is not whole any more (the bound is
    # strict; hand check)
    q = 1.0000000000000001e-11
    assert 100.0 * q == 1e-9
    assert level_key(q) == "q00.0"


def test_threshold_labels_and_values():
    # A string keeps its text (stripped), a Quantity shows value and unit, a bare number is in pc;
    # values converted with astropy units (the reference).
    got = parse_thresholds([" 20000 au ", "0.5pc", 2 * u.pc, 150 * u.au, 1.5, 3])
    assert [label for label, _ in got] == ["20000 au", "0.5pc", "2 pc", "150 AU", "1.5 pc", "3 pc"]
    want = [(20000 * u.au).to_value(u.pc), 0.5, 2.0, (150 * u.au).to_value(u.pc), 1.5, 3.0]
    assert_allclose([pc for _, pc in got], want, rtol=1e-15)


@pytest.mark.parametrize("bad", ["0 pc", 0, 0.0 * u.au, "-1 pc", -2.0])
def test_threshold_must_be_positive(bad):
    # "does it pass within 0 pc?" has no meaning: zero and negative distances are refused, naming the field.
    with pytest.raises(InputError, match="positive distance") as exc:
        parse_thresholds([bad])
    assert exc.value.field == "threshold"


def test_threshold_errors_name_the_field_and_show_an_example():
    # The one-line error names the field and shows an accepted value (README "When something is wrong").
    with pytest.raises(InputError) as exc:
        parse_thresholds(["3 km/s"])
    assert exc.value.field == "threshold" and str(exc.value).startswith("threshold = ")
    assert "'0.5 pc'" in str(exc.value)
    with pytest.raises(InputError) as exc:
        parse_thresholds(["2"])  # text without a unit is never guessed
    assert exc.value.field == "threshold" and "e.g. '0.5 pc'" in str(exc.value)


# ------------------------------------------------------------------------------------------ JSON blocks
def test_output_summary_dict_has_the_readme_keys_and_the_summary_values():
    # README "JSON": median, mean, std, q05 ... q95, extra levels (q02.5), mc_error; the rest as in
    # tests/test_json_contract.py. Values are the attributes, key by key.
    rng = np.random.default_rng(30)
    s = summarize(rng.gamma(2.0, 1.5, 4000), name="distance", unit="pc", levels=(0.025, 0.05, 0.16, 0.84, 0.95))
    d = s.to_dict()
    keys = ["q02.5", "q05", "q16", "q50", "q84", "q95"]
    assert set(d) == {"median", "mean", "std", "mc_error", "skewness", "n", "effective_size", "unit", *keys}
    assert (d["median"], d["mean"], d["std"]) == (s.median, s.mean, s.std)
    assert (d["skewness"], d["n"], d["effective_size"], d["unit"]) == (s.skewness, 4000, 4000.0, "pc")
    assert set(d["mc_error"]) == {"mean", "std", *keys}
    assert (d["mc_error"]["mean"], d["mc_error"]["std"]) == (s.mean_se, s.std_se)
    for key, q in zip(keys, (0.025, 0.05, 0.16, 0.5, 0.84, 0.95)):
        assert d[key] == s.quantiles[q] and d["mc_error"][key] == s.quantile_se[q]
    noted = summarize(np.array([1.0, 2.0, np.inf]), unit="pc").to_dict()
    assert noted["note"].startswith("1 of 3 draws are infinite")


def test_threshold_dict_fields():
    # JSON names of a threshold entry (tests/test_json_contract.py): every field, its value.
    t = ThresholdProbability("20000 au", 0.097, 0.25, 0.05, 0.35, 12, 0.15)
    assert t.to_dict() == {"threshold": "20000 au", "distance_pc": 0.097, "probability": 0.25, "mc_error": 0.05,
                           "upper95": 0.35, "lower95": 0.15, "count": 12}


# ----------------------------------------------------------------------------------------------- interval
def test_interval_default_tolerance_and_message():
    rng = np.random.default_rng(31)
    x = rng.normal(size=2000)
    s = summarize(x)
    # default: the central 90 % interval, the 5 % and 95 % quantiles (numpy hazen is the reference)
    assert_allclose(s.interval(), np.quantile(x, [0.05, 0.95], method="hazen"), rtol=1e-12)
    # a level carrying float noise (here 2e-11) still finds its quantiles: levels match to 10 decimals
    assert s.interval(0.9 + 2e-11) == (s.quantiles[0.05], s.quantiles[0.95])
    with pytest.raises(KeyError, match=r"have 0\.05, 0\.16, 0\.5, 0\.84, 0\.95\); pass it in levels="):
        s.interval(0.5)


# ------------------------------------------------------------------------------------- small samples
def test_one_and_two_draws():
    # One draw: no spread (std 0 by convention, every error 0); two draws: the sample std with ddof=1
    # (numpy) and the quantiles of numpy's hazen rule; no draw: an error.
    one = summarize([3.25])
    assert one.n == 1 and one.mean == one.median == 3.25 and one.std == 0.0
    assert one.mean_se == 0.0 and one.std_se == 0.0 and one.skewness == 0.0
    assert set(one.quantile_se.values()) == {0.0} and set(one.quantiles.values()) == {3.25}
    two = summarize([1.0, 4.0])
    assert two.std == pytest.approx(np.std([1.0, 4.0], ddof=1), rel=1e-15, abs=0)
    assert two.mean_se == pytest.approx(two.std / math.sqrt(2), rel=1e-15, abs=0)
    levels = sorted(two.quantiles)
    assert_allclose([two.quantiles[q] for q in levels], np.quantile([1.0, 4.0], levels, method="hazen"), rtol=1e-15)
    with pytest.raises(ValueError, match="no samples"):
        summarize([])


def test_names_units_and_defaults_pass_through():
    s = summarize([1.0, 2.0, 4.0], name="time", unit="Myr")
    assert (s.name, s.unit, s.n, s.note) == ("time", "Myr", 3, "")
    plain = summarize([1.0, 2.0, 4.0])
    assert (plain.name, plain.unit, plain.note) == ("", "", "")


@pytest.mark.parametrize("level", [0.0, 1.0, 1.5, -0.1])
def test_levels_must_lie_strictly_inside_zero_one(level):
    with pytest.raises(ValueError, match="strictly between 0 and 1"):
        summarize([1.0, 2.0, 3.0], levels=(level,))


def test_levels_equal_to_twelve_decimals_are_one_level():
    # 0.16 and 0.16 + 3e-13 are the same level (float noise); 0.5 is always added.
    s = summarize(np.arange(100.0), levels=(0.16, 0.16 + 3e-13))
    assert sorted(s.quantiles) == [0.16, 0.5]


def test_error_brackets_of_a_small_sample_are_clipped_to_the_range():
    # n = 10: q -+ sqrt(q (1 - q) / n) leaves [0, 1] at the 5 % and 95 % levels; the bracket is clipped
    # there, i.e. it ends at the smallest / largest draw (numpy hazen with the clipped levels, by hand).
    x = np.array([0.3, 1.1, 2.0, 2.2, 3.7, 4.1, 5.0, 6.6, 7.2, 9.9])
    s = summarize(x)
    for q in (0.05, 0.16, 0.5, 0.84, 0.95):
        d = math.sqrt(q * (1 - q) / 10)
        lo, hi = np.quantile(x, [max(q - d, 0.0), min(q + d, 1.0)], method="hazen")
        assert s.quantile_se[q] == pytest.approx(0.5 * (hi - lo), rel=1e-12, abs=0), q
    assert 0.05 - math.sqrt(0.05 * 0.95 / 10) < 0 and 0.95 + math.sqrt(0.05 * 0.95 / 10) > 1


# ------------------------------------------------------------------------------------------- moments
@pytest.mark.parametrize("scale", [0.3, 40.0])
def test_skewness_and_std_error_match_scipy(scale):
    # Skewness m3 / m2^1.5 (scipy.stats.skew, bias=True); SE of a standard deviation s sqrt((kurt - 1) / n) / 2
    # with the kurtosis of scipy.stats.kurtosis(fisher=False) (delta method, textbook). Scales other than 1
    # so that factors of the spread do not cancel.
    rng = np.random.default_rng(32)
    x = scale * rng.gamma(1.5, 1.0, 5000)
    s = summarize(x)
    kurt = stats.kurtosis(x, fisher=False)
    assert s.skewness == pytest.approx(stats.skew(x), rel=1e-9, abs=0)
    assert s.std == pytest.approx(np.std(x, ddof=1), rel=1e-12, abs=0)
    assert s.std_se == pytest.approx(0.5 * np.std(x, ddof=1) * math.sqrt((kurt - 1) / x.size), rel=1e-9, abs=0)


def test_std_error_of_a_platykurtic_sample():
    # A uniform sample has kurtosis 1.8 (< 2): the SE uses kurt - 1 = 0.8 as it is (scipy for the kurtosis).
    x = np.random.default_rng(33).uniform(0.0, 5.0, 6000)
    s = summarize(x)
    kurt = stats.kurtosis(x, fisher=False)
    assert kurt < 2
    assert s.std_se == pytest.approx(0.5 * np.std(x, ddof=1) * math.sqrt((kurt - 1) / x.size), rel=1e-9, abs=0)


def test_weighted_shape_equals_the_repeated_sample():
    # Integer weights are repeat counts: the weighted skewness and kurtosis are those of np.repeat(x, w)
    # (scipy.stats); the std error uses the Kish size (Kish 1965) and the std the reliability-weight
    # correction (numpy.cov with aweights, ddof=1).
    rng = np.random.default_rng(34)
    x = 7.0 * rng.lognormal(0.0, 0.6, 800)
    w = rng.integers(1, 6, 800).astype(float)
    s = summarize(x, weights=w)
    rep = np.repeat(x, w.astype(int))
    n_eff = w.sum() ** 2 / np.dot(w, w)
    std = math.sqrt(np.cov(x, aweights=w, ddof=1))
    assert s.effective_size == pytest.approx(n_eff, rel=1e-12, abs=0)
    assert s.skewness == pytest.approx(stats.skew(rep), rel=1e-9, abs=0)
    kurt = stats.kurtosis(rep, fisher=False)
    assert s.std_se == pytest.approx(0.5 * std * math.sqrt((kurt - 1) / n_eff), rel=1e-9, abs=0)


def test_float32_weights_are_summed_in_double_precision():
    # The weights are read as float64 whatever their type: the Kish size and the weighted mean equal the
    # float64 sums (numpy.average on the float64 copy of the weights, rel 1e-12; float32 sums are ~1e-7 off).
    rng = np.random.default_rng(35)
    x = rng.normal(10.0, 2.0, 20_000)
    w32 = rng.exponential(size=x.size).astype(np.float32)
    w = w32.astype(float)
    s = summarize(x, weights=w32)
    assert s.effective_size == pytest.approx(w.sum() ** 2 / np.dot(w, w), rel=1e-12, abs=0)
    assert s.mean == pytest.approx(np.average(x, weights=w), rel=1e-12, abs=0)


def test_spread_below_rounding_has_no_shape():
    # Draws equal to within 1e-12 of their mean (here a few ulps of 1e6, skewed) are rounding: skewness 0
    # and kurtosis 3 by convention (docstring of OutputSummary), so std_se = s sqrt(2 / n) / 2.
    ulp = np.spacing(1e6)
    x = 1e6 + ulp * np.array([0.0, 0.0, 0.0, 0.0, 1.0, 7.0])
    s = summarize(x)
    assert 0 < s.std < 1e-12 * 1e6
    assert s.skewness == 0.0 and s.note == ""
    assert s.std_se == pytest.approx(0.5 * s.std * math.sqrt(2 / 6), rel=1e-12, abs=0)
    # ... and a small mean does not make a real spread look like rounding (skewness as scipy)
    y = 1e-6 * np.array([1.0, 1.0, 1.0, 1.0, 1.0 + 1e-9, 1.0 + 7e-9])
    assert summarize(y).skewness == pytest.approx(stats.skew(y), rel=1e-6, abs=0)


def test_spread_exactly_at_the_rounding_bound_counts_as_rounding():
    # "All draws equal to within 1e-12" (OutputSummary docstring) includes the bound: two draws
    # mu -+ d with d == 1e-12 mu exactly (mu = 5e15 2^-52, d = 5000 2^-52, all exact in binary; hand check)
    # have skewness 0 and kurtosis 3, so std_se = s sqrt(2 / 2) / 2 (their own kurtosis, 1, would give 0).
    mu, d = 5e15 * 2.0**-52, 5000 * 2.0**-52
    assert d == 1e-12 * mu
    s = summarize(np.array([mu - d, mu + d]))
    assert s.std == pytest.approx(d * math.sqrt(2), rel=1e-15, abs=0)
    assert s.skewness == 0.0 and s.std_se == pytest.approx(0.5 * s.std, rel=1e-15, abs=0)


def test_constant_draws():
    s = summarize(np.full(50, 2.5))
    assert s.std == 0.0 and s.skewness == 0.0 and s.std_se == 0.0 and s.note == ""
    assert set(s.quantiles.values()) == {2.5} and set(s.quantile_se.values()) == {0.0}


def test_underflowing_spread_keeps_std_and_a_normal_shape():
    # Draws near 1e-100: m2 ~ 1e-200 squares to 0 in double precision. std is still exact (numpy, ddof=1);
    # skewness and kurtosis fall back to 0 and 3, consistent with the rescaled normal sample within K_SE
    # standard errors (SE of skewness sqrt(6 / n), of kurtosis sqrt(24 / n): textbook, from memory).
    rng = np.random.default_rng(36)
    z = rng.standard_normal(20_000)
    s = summarize(1e-100 * z)
    n = z.size
    assert s.std == pytest.approx(1e-100 * np.std(z, ddof=1), rel=1e-12, abs=0) and s.note == ""
    assert abs(s.skewness - stats.skew(z)) < K_SE * math.sqrt(6 / n)
    kurt = stats.kurtosis(z, fisher=False)
    ratio = s.std_se / (0.5 * s.std * math.sqrt((kurt - 1) / n))
    # d ratio / d kurt = 1 / (2 (kurt - 1)) ~ 1/4
    assert abs(ratio - 1) < K_SE * math.sqrt(24 / n) / (2 * (kurt - 1))


# ----------------------------------------------------------------------------------- infinite draws
def test_infinite_draws_make_the_moments_undefined_and_say_so():
    # 100 of 1100 draws at +inf: mean and moments are not numbers (std, its error: inf; skewness: nan), the
    # note counts them; quantiles below the infinite draws are numpy hazen's with inf replaced by a huge
    # finite value (the reference); where both ends of an error bracket are inf the error is 0.
    rng = np.random.default_rng(37)
    x = np.concatenate([rng.normal(5.0, 1.0, 1000), np.full(100, np.inf)])
    rng.shuffle(x)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # "inf - inf stays quiet here"
        s = summarize(x)
    assert s.note.startswith("100 of 1,100 draws are infinite or undefined: the mean and the moments are not")
    assert "not finite numbers" in s.note
    assert s.std == math.inf and s.std_se == math.inf and s.mean_se == math.inf and math.isnan(s.skewness)
    finite = np.where(np.isinf(x), 1e300, x)
    for q in (0.05, 0.16, 0.5, 0.84):
        d = math.sqrt(q * (1 - q) / x.size)
        want = np.quantile(finite, [q, q - d, q + d], method="hazen")
        assert s.quantiles[q] == pytest.approx(want[0], rel=1e-12, abs=0)
        assert s.quantile_se[q] == pytest.approx(0.5 * (want[2] - want[1]), rel=1e-9, abs=0)
    assert s.quantiles[0.95] == math.inf and s.quantile_se[0.95] == 0.0


def test_weighted_infinite_draws_count_only_with_weight():
    # Non-finite draws with zero weight are not counted in the note (2 of 6 here: the two +inf with weight).
    x = np.array([1.0, 2.0, np.inf, -np.inf, 3.0, np.inf])
    w = np.array([1.0, 1.0, 0.5, 0.0, 1.0, 0.25])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        s = summarize(x, weights=w)
    assert s.note.startswith("2 of 6 draws are infinite or undefined")
    assert s.std == math.inf and s.std_se == math.inf


def test_overflowing_variance_is_not_a_number_quietly():
    # A finite mean (0) but a variance that overflows (1e200 squared): the moments are not finite numbers;
    # no floating-point warning escapes (numpy overflow is expected here).
    x = np.array([1e200, -1e200, 0.0, 1.0, -1.0])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        s = summarize(x)
    assert s.mean == 0.0 and s.std == math.inf and s.std_se == math.inf and math.isnan(s.skewness)
    assert "the mean and the moments are not finite numbers" in s.note
    assert s.median == 0.0


def test_note_on_infinite_draws_is_a_complete_sentence():
    note = summarize(np.array([1.0, 2.0, np.inf])).note
    assert not re.search(r"\bare\s*$", note), note


def test_zero_weight_infinite_draw_does_not_spoil_the_weighted_mean():
    # A zero-weight draw has no say, even an infinite one: the weighted mean of the weighted draws is
    # numpy.average over them (it was NaN from 0 * inf before issue 16's review).
    s = summarize(np.array([1.0, 2.0, np.inf]), weights=np.array([1.0, 1.0, 0.0]))
    assert s.mean == pytest.approx(np.average([1.0, 2.0], weights=[1.0, 1.0]), rel=1e-15, abs=0)


def test_quantiles_with_infinite_draws_by_hand():
    # The definition (linear interpolation of the mid-point CDF) with infinite draws, by hand: sorted
    # [-inf, 1, 2, 3, inf, inf], CDF nodes (k + 1/2) / 6. Between -inf and a finite draw: -inf; at a node:
    # the draw itself (even next to an infinite one); between two infinite draws: that infinity.
    x = np.array([3.0, -np.inf, 1.0, np.inf, 2.0, np.inf])
    probs = np.array([0.0, 0.05, 1 / 12, 0.2, 0.25, 0.3, 0.5, 0.6, 7 / 12, 0.8, 0.95, 1.0])
    want = [-np.inf, -np.inf, -np.inf, -np.inf, 1.0, 1.3, 2.5, np.inf, 3.0, np.inf, np.inf, np.inf]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert_allclose(weighted_quantiles(x, probs), want, rtol=1e-12)
        assert_allclose(weighted_quantiles(list(x), probs, np.ones(6)), want, rtol=1e-12)
    # weights (2, 1, 1, 3, 1, 1): sorted -inf(1) 1(1) 2(1) 3(2) inf(3) inf(1), total 9, nodes (0.5, 1.5,
    # 2.5, 4, 6.5, 8.5) / 9
    w = np.array([2.0, 1.0, 1.0, 3.0, 1.0, 1.0])
    probs = np.array([0.5 / 9, 1 / 9, 2 / 9, 3.25 / 9, 4 / 9, 0.5, 7 / 9, 0.99])
    want = [-np.inf, -np.inf, 1.5, 2.5, 3.0, np.inf, np.inf, np.inf]
    assert_allclose(weighted_quantiles(x, probs, w), want, rtol=1e-12)
    # the first node next to an infinite draw: one finite and one infinite draw, p on the finite one's node
    assert_array_equal(weighted_quantiles(np.array([1.0, np.inf]), [0.25, 0.5, 0.75, 0.9]), [1.0] + [np.inf] * 3)
    # draws at -inf and +inf only: each node gives its draw, and between them an infinite draw, never NaN
    got = weighted_quantiles(np.array([np.inf, -np.inf]), [0.1, 0.25, 0.5, 0.75, 0.9])
    assert_array_equal(got[[0, 1, 3, 4]], [-np.inf, -np.inf, np.inf, np.inf])
    assert np.isinf(got[2])


def test_quantiles_above_the_undefined_draws_are_undefined():
    # NaN draws sort last (numpy's order): levels between the defined draws interpolate between them, levels
    # that reach a NaN draw are NaN. Sorted [1, 2, nan], nodes 1/6, 1/2, 5/6 (by hand).
    got = weighted_quantiles(np.array([np.nan, 2.0, 1.0]), [0.3, 0.5, 0.7, 0.9])
    assert_allclose(got[:2], [1.4, 2.0], rtol=1e-12)
    assert np.isnan(got[2]) and np.isnan(got[3])


def test_float32_weights_with_infinite_draws_are_read_in_double_precision():
    # Weights 2^24 and 1 (float32 cannot hold 2^24 + 1): read as float64 the CDF nodes are exact,
    # (c - w/2) / T with T = 2^24 + 4; halfway between the nodes of 1 and 2 lies 1.5 (by hand).
    x = np.array([0.0, 1.0, 2.0, 3.0, np.inf])
    w = np.array([2.0**24, 1.0, 1.0, 1.0, 1.0], dtype=np.float32)
    total = 2.0**24 + 4
    got = weighted_quantiles(x, [(2.0**24 + 1.0) / total, (2.0**24 + 3.0) / total], w)
    assert_allclose(got, [1.5, np.inf], rtol=1e-6)


def test_result_is_double_precision_whatever_the_input_float_type():
    # As for finite draws (numpy.quantile returns float64), the quantiles of draws with infinities are float64
    # for float32 and long-double input alike; the values here are exact in every type (hazen, by hand).
    for dtype in (np.float32, np.longdouble):
        x = np.array([1.0, 2.0, 3.0, np.inf], dtype=dtype)
        got = weighted_quantiles(x, [0.25, 0.5, 0.95])
        assert got.dtype == np.float64
        assert_array_equal(got, [1.5, 2.5, np.inf])


# ---------------------------------------------------------------------------------------- sort order
def test_stable_sort_of_empty_and_of_draws_with_several_nans():
    # The stable order of numpy.argsort(kind="stable") is the reference; several NaN (numpy's default sort
    # reorders them) and no other ties; arrays that are one tie.
    xs, ws = _stable_sorted(np.array([]), np.array([]))
    assert xs.size == 0 and ws.size == 0
    rng = np.random.default_rng(38)
    x = rng.normal(size=300)
    x[rng.random(300) < 0.3] = np.nan
    w = np.arange(300.0)
    order = np.argsort(x, kind="stable")
    xs, ws = _stable_sorted(x, w)
    assert_array_equal(xs, x[order])
    assert_array_equal(ws, w[order])
    # all draws tied (two of them, or many; NaN too): the stable order is the given order
    for x in (np.full(2, 1.5), np.full(2, np.nan), np.full(1000, -3.0), np.full(1000, np.nan)):
        w = np.arange(float(x.size))
        xs, ws = _stable_sorted(x, w)
        assert_array_equal(ws, w)


# ------------------------------------------------------------------------ bracketed quantile selection
def test_the_bracketed_selection_starts_at_fifty_thousand_draws(sorts):
    # "Large samples are not fully sorted" from _BINNED_FROM = 50,000 draws on (weighted or not): there only a
    # subset is sorted; just below, the weighted path sorts everything. Values: numpy hazen (unit weights)
    # and the full-sort definition written above.
    rng = np.random.default_rng(39)
    probs = np.array([0.05, 0.5, 0.95])
    x = rng.normal(size=50_000)
    assert_allclose(weighted_quantiles(x, probs), np.quantile(x, probs, method="hazen"), rtol=0, atol=1e-12)
    assert len(sorts) == 1 and sorts[0].size < 25_000
    w = rng.exponential(size=50_000)
    assert_allclose(weighted_quantiles(x, probs, w), sorted_definition(x, probs, w), rtol=0, atol=1e-12)
    assert len(sorts) == 2 and sorts[1].size < 25_000
    y, v = x[:-1], w[:-1]
    assert_allclose(weighted_quantiles(y, probs, v), sorted_definition(y, probs, v), rtol=0, atol=1e-12)
    assert len(sorts) == 3 and sorts[2].size == 49_999


def designed_brackets(n, probs):
    """Draws of ``np.arange(n)`` inside the brackets that the documented design puts around ``probs``.

    The design (docstring of ``_binned_weighted_quantiles``): a strided pilot of about 6 n^(2/3) draws
    (at least 2,000; stride n // that, at least 1) whose mid-point CDF, for sorted unit-weight draws, is exact;
    around each level a 4.5-sigma binomial margin of the pilot plus two pilot spacings, open at an end that
    the pilot's CDF does not reach. Written out here for sorted draws 0, 1, ..., n - 1.
    """
    step = max(1, n // max(2000, int(6.0 * n ** (2.0 / 3.0))))
    sx = np.arange(0, n, step, dtype=float)
    m = sx.size
    scdf = (np.arange(m) + 0.5) / m
    margin = 4.5 * np.sqrt(np.maximum(probs * (1 - probs), 1.0 / m) / m) + 2.0 / m
    lo = np.where(probs - margin <= scdf[0], -np.inf, np.interp(probs - margin, scdf, sx))
    hi = np.where(probs + margin >= scdf[-1], np.inf, np.interp(probs + margin, scdf, sx))
    k = np.arange(n)
    inside = np.zeros(n, dtype=bool)
    for a, b in zip(lo, hi):
        inside |= (k >= a) & (k <= b)
    return k[inside]


@pytest.mark.parametrize("n", [3_000, 4_000, 200_000])
def test_the_bracketed_selection_sorts_the_documented_brackets(n, sorts):
    # Sorted unit-weight draws make the pilot exact, so the draws that get sorted are known in advance:
    # those of designed_brackets (to one draw at each bracket end). The quantiles are numpy hazen's,
    # here p n - 1/2 clipped to [0, n - 1] (Hyndman & Fan definition 5, by hand).
    x = np.arange(n, dtype=float)
    probs = np.array([0.0, 1e-5, 0.1, 0.5, 0.9, 1.0])
    got = _binned_weighted_quantiles(x, probs, np.ones(n))
    assert_allclose(got, np.clip(probs * n - 0.5, 0, n - 1), rtol=0, atol=1e-9 * n)
    assert len(sorts) == 1  # the brackets held: no full sort
    want = designed_brackets(n, probs)
    diff = np.setxor1d(sorts[0], want)
    assert diff.size <= 2 * probs.size, (sorts[0].size, want.size, diff[:10])  # one draw per bracket end


@pytest.mark.parametrize(
    "n, kind",
    [(60_000, "unit"), (130_000, "exp"), (1_000_000, "unit"), (200_000, "ties"), (200_000, "ties-exp")],
)
def test_the_bracketed_selection_is_exact_and_sorts_a_small_part(n, kind, sorts):
    # Against the full stable sort (written above, 1e-9 of the range: summation order; common practice, no
    # source), at levels 0 and 1, in the tails, at the median and next to each other; and the promise of
    # the docstring: no full sort, only the draws near the levels (less than a quarter of them here; with
    # ties, whole runs of tied draws: 10 values, ~10 % each, two levels (0.04, 0.06) sharing one value and
    # brackets ending on tied values, so only "not all of them").
    rng = np.random.default_rng(n)
    if kind.startswith("ties"):
        x = rng.integers(0, 10, n).astype(float)
        probs = np.array([0.0, 0.04, 0.06, 0.25, 0.5, 0.73, 1.0])
    else:
        x = rng.standard_t(4, n)
        probs = np.array([0.0, 0.001, 0.05, 0.16, 0.4999, 0.5, 0.5001, 0.84, 0.95, 0.999, 1.0])
    w = rng.exponential(size=n) if kind.endswith("exp") else np.ones(n)
    got = _binned_weighted_quantiles(x, probs, w)
    assert_allclose(got, sorted_definition(x, probs, w), rtol=0, atol=1e-9 * np.ptp(x))
    assert len(sorts) == 1 and sorts[0].size < (n if kind.startswith("ties") else n / 4), [a.size for a in sorts]


@pytest.mark.parametrize(
    "n, kind", [(3_000, "unit"), (3_000, "exp"), (60_000, "exp"), (300_000, "unit"), (120_000, "ties-exp")]
)
def test_monte_carlo_error_brackets_equal_the_full_sort(n, kind):
    # quantile_se = half the distance between the quantiles at q -+ sqrt(q (1 - q) / n_eff) (Conover 1999,
    # Sect. 3.2; Kish n_eff), for the sorted and the bracketed paths, with and without weights and with ties:
    # against numpy hazen (unit weights) or the full-sort definition written above (1e-9 of the range). For
    # uniform draws the closed-form order-statistic error is sqrt(q (1 - q) / n) (density 1); the half-width
    # spans m = 2 sqrt(q (1 - q) n) order statistics, relative scatter 1 / sqrt(m) (textbook), K_SE of them.
    rng = np.random.default_rng(n + len(kind))
    x = np.round(rng.normal(size=n), 1) if kind.startswith("ties") else rng.uniform(0.0, 1.0, n)
    w = rng.exponential(size=n) if kind.endswith("exp") else None
    levels = (0.01, 0.05, 0.16, 0.5, 0.84, 0.95, 0.99)
    s = summarize(x, levels=levels, weights=w)
    n_eff = n if w is None else w.sum() ** 2 / np.dot(w, w)
    for q in levels:
        d = math.sqrt(q * (1 - q) / n_eff)
        at = [q, max(q - d, 0.0), min(q + d, 1.0)]
        want = np.quantile(x, at, method="hazen") if w is None else sorted_definition(x, np.array(at), w)
        assert s.quantiles[q] == pytest.approx(want[0], rel=0, abs=1e-9 * np.ptp(x)), q
        assert s.quantile_se[q] == pytest.approx(0.5 * (want[2] - want[1]), rel=0, abs=1e-9 * np.ptp(x)), q
        if kind == "unit":
            m = 2 * math.sqrt(q * (1 - q) * n)
            assert abs(s.quantile_se[q] / math.sqrt(q * (1 - q) / n) - 1) < K_SE / math.sqrt(m), q


def test_a_pilot_that_puts_the_brackets_too_high_falls_back_to_the_full_sort(sorts):
    # Pilot draws above 1 carry almost all of the pilot's weight, so its brackets sit too high (the true
    # quantiles are lower): the check must notice (level below its bracket's first draw) and sort
    # everything, still giving the sorted definition.
    rng = np.random.default_rng(40)
    n = 100_000
    x = rng.normal(size=n)
    w = np.ones(n)
    step = max(1, n // max(2_000, int(6.0 * n ** (2.0 / 3.0))))
    w[::step] = np.where(x[::step] > 1.0, 1e3, 1e-6)
    probs = np.array([0.05, 0.5, 0.95])
    got = _binned_weighted_quantiles(x, probs, w)
    assert_allclose(got, sorted_definition(x, probs, w), rtol=0, atol=1e-9 * np.ptp(x))
    assert sorts[-1].size == n


@pytest.mark.parametrize("n_nan", [1, 127])
def test_nan_levels_give_nan_and_leave_the_others_exact(n_nan):
    # np.interp (the sorted definition) returns NaN at a NaN level; the bracketed selection must agree and
    # keep the other level exact, however many NaN levels there are (127 + 1 brackets need 16-bit codes).
    rng = np.random.default_rng(41)
    n = 60_000
    x = rng.normal(size=n)
    w = rng.uniform(0.5, 1.5, n)
    probs = np.concatenate([[0.0005], np.full(n_nan, np.nan)])
    got = _binned_weighted_quantiles(x, probs, w)
    assert got[0] == pytest.approx(sorted_definition(x, probs[:1], w)[0], abs=1e-9 * np.ptp(x))
    assert np.all(np.isnan(got[1:]))
    assert np.isnan(_binned_weighted_quantiles(x, [np.nan], w)[0])


@pytest.mark.slow
def test_more_than_127_separate_brackets(sorts):
    # 128 levels whose brackets do not touch need 2 x 128 region codes (16-bit): 4 million sorted draws,
    # levels placed one past the other with the documented margins (designed_brackets' formulas); the values
    # are numpy hazen's p n - 1/2 (by hand), with no full sort.
    n = 4_000_000
    step = max(1, n // max(2000, int(6.0 * n ** (2.0 / 3.0))))
    m = len(range(0, n, step))

    def margin(p):
        return 4.5 * math.sqrt(max(p * (1 - p), 1.0 / m) / m) + 2.0 / m

    probs, edge = [], 0.5 / m
    while len(probs) < 128:
        a, b = edge, 1.0  # smallest level whose bracket starts above the previous bracket's end
        for _ in range(80):
            a, b = (a, (a + b) / 2) if (a + b) / 2 - margin((a + b) / 2) > edge else ((a + b) / 2, b)
        probs.append(b + 2.0 / m)
        edge = probs[-1] + margin(probs[-1])
    assert edge < 1 - 0.5 / m  # the last bracket is closed too
    probs = np.array(probs)
    x = np.arange(n, dtype=float)
    got = _binned_weighted_quantiles(x, probs, np.ones(n))
    assert_allclose(got, probs * n - 0.5, rtol=0, atol=1e-6)
    assert len(sorts) == 1 and sorts[0].size < n


# ------------------------------------------------------------------------------ threshold probabilities
def test_threshold_counts_strictly_below():
    # P(d < D): a draw exactly at D does not pass (hand count: 0.2 and 0.1 of six draws).
    t = threshold_probability(np.array([0.2, 0.5, 0.5, 0.7, np.inf, 0.1]), 0.5, label="0.5 pc")
    assert t.count == 2 and t.probability == pytest.approx(2 / 6, rel=1e-15, abs=0)
    assert (t.label, t.distance_pc) == ("0.5 pc", 0.5)


@pytest.mark.parametrize("count, n", [(30, 100), (19, 20), (1, 20)])
def test_threshold_bounds_are_two_binomial_errors_clipped_to_zero_one(count, n):
    # p -+ 2 sqrt(p (1 - p) / n), clipped to [0, 1], when some but not all draws pass (hand formula,
    # the ThresholdProbability docstring; binomial standard error, textbook).
    d = np.concatenate([np.full(count, 0.1), np.full(n - count, 3.0)])
    t = threshold_probability(d, 1.0, label="1 pc")
    p = count / n
    se = math.sqrt(p * (1 - p) / n)
    assert t.probability == p and t.se == pytest.approx(se, rel=1e-12, abs=0)
    assert t.upper95 == pytest.approx(min(1.0, p + 2 * se), rel=1e-12, abs=0)
    assert t.lower95 == pytest.approx(max(0.0, p - 2 * se), rel=1e-12, abs=0.0)


def test_every_weighted_draw_passing_gives_probability_exactly_one():
    # Ten exponential weights (seed 4) whose dot product with "all pass" rounds one ulp above their sum:
    # the probability is still 1 (not 1 + 2e-16), its error 0, and the lower bound 0.05^(1/n_eff).
    w = np.random.default_rng(4).exponential(size=10)
    passing = np.ones(10, dtype=bool)
    assert float(np.dot(passing, w) / w.sum()) > 1.0  # the rounding this test is about
    t = threshold_probability(np.full(10, 0.1), 1.0, label="1 pc", weights=w)
    n_eff = w.sum() ** 2 / np.dot(w, w)
    assert t.probability == 1.0 and t.se == 0.0 and t.count == 10
    assert t.lower95 == pytest.approx(0.05 ** (1 / n_eff), rel=1e-12, abs=0)


def test_weighted_bounds_count_weight_not_draws():
    # draws of zero weight (outside a prior's support) neither pass nor fail: when all the weight passes, P = 1 and
    # the 95 % lower bound is the one for "every draw passed" with the Kish effective size n_eff = (sum w)^2 /
    # sum w^2 (Kish 1965, Survey Sampling), 0.05^(1/n_eff) -- not P - 2 se = 1; symmetrically for P = 0
    from perierr.thresholds import threshold_probability

    d = np.array([0.5, 0.6, 0.7, 5.0, 6.0])
    w = np.array([1.0, 2.0, 1.0, 0.0, 0.0])
    n_eff = 4.0**2 / 6.0
    t = threshold_probability(d, 1.0, label="1 pc", weights=w)
    assert (t.probability, t.se, t.count) == (1.0, 0.0, 3)
    assert t.lower95 == pytest.approx(0.05 ** (1 / n_eff), rel=1e-12) and t.upper95 == 1.0
    t = threshold_probability(np.array([5.0, 6.0, 7.0, 0.5, 0.6]), 1.0, label="1 pc", weights=w)
    assert (t.probability, t.count) == (0.0, 2)
    assert t.upper95 == pytest.approx(1 - 0.05 ** (1 / n_eff), rel=1e-12) and t.lower95 == 0.0
    # weights whose sum (numpy's pairwise summation) rounds differently from their dot product with the passing
    # mask: with all the weight passing P is still exactly 1 (here dot/sum = 1 - 2.2e-16)
    w = np.random.default_rng(0).random(1000)
    w[-3:] = 0.0
    far = np.where(np.arange(1000) < 997, 0.5, 5.0)
    assert float(np.dot(far < 1.0, w) / w.sum()) < 1.0  # the premise
    assert threshold_probability(far, 1.0, label="1 pc", weights=w).probability == 1.0
    # and the other way: one failing draw of negligible weight, dot/sum = 1 + 4.4e-16, P capped at 1
    w = np.random.default_rng(13).random(1000)
    w[-1] = 1e-300
    far = np.where(np.arange(1000) < 999, 0.5, 5.0)
    assert float(np.dot(far < 1.0, w) / w.sum()) > 1.0  # the premise
    t = threshold_probability(far, 1.0, label="1 pc", weights=w)
    assert t.probability == 1.0 and t.count == 999
