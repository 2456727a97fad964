"""Summaries at the edges of the float range and at the edge of the level tolerance.

Expected values: numpy (np.quantile method="hazen", np.std), closed-form moments of small invented samples,
and the standard error of a standard deviation, s sqrt((kurtosis - 1) / n) / 2 (delta method on the sample
variance, e.g. Kendall & Stuart, The Advanced Theory of Statistics, vol. 1, eq. 10.8; from memory).
"""

import math
import warnings

import numpy as np
import pytest

from perierr.summary import LEVEL_TOLERANCE, summarize


def test_a_spread_that_overflows_is_named_as_such_and_not_as_infinite_draws():
    # every draw is finite, but (x - mean)^2 = 1e400 overflows: the note must say so, not count infinite draws
    x = [-1e200, 1e200, 1e200, -1e200]
    s = summarize(x, name="d")
    assert s.note.startswith("the spread of the draws overflows the float range: ")
    assert "infinite or undefined" not in s.note
    assert s.std == math.inf and s.std_se == math.inf and math.isnan(s.skewness)
    assert s.median == np.quantile(x, 0.5, method="hazen") == 0.0  # the quantiles are still defined
    assert s.quantile(0.95) == np.quantile(x, 0.95, method="hazen") == 1e200


def test_a_spread_whose_fourth_power_overflows_falls_back_to_the_normal_shape_quietly():
    # draws (0, 0, 0, 1) * 1e80: m2 = 3/16 1e160, m2^1.5 ~ 8e238 is finite but m2^2 ~ 3.5e318 is not, so the
    # shape falls back to skewness 0, kurtosis 3 (the normal's), without a floating-point warning
    x = np.array([0.0, 0.0, 0.0, 1.0]) * 1e80
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        s = summarize(x)
    assert s.note == ""
    assert s.std == pytest.approx(np.std(x, ddof=1), rel=1e-14)  # numpy; 0.5e80 exactly in real numbers
    assert s.skewness == 0.0
    # SE of s with kurtosis 3: s sqrt(2 / n) / 2
    assert s.std_se == pytest.approx(0.5 * s.std * math.sqrt(2.0 / 4), rel=1e-14)
    assert s.quantile(0.84) == pytest.approx(np.quantile(x, 0.84, method="hazen"), rel=1e-14)


def test_a_tiny_spread_whose_square_underflows_keeps_its_exact_kurtosis_under_strict_float_modes():
    # draws -d, 998 zeros, +d with d = 1e-76: mean 0 exactly, m2 = 2 d^2 / n, m4 = 2 d^4 / n, so the kurtosis
    # m4 / m2^2 = n / 2 = 500 (closed form); m2^2 = 4e-310 is subnormal (an underflow the summary must absorb
    # even where the caller asked numpy to raise on underflow)
    n, d = 1000, 1e-76
    x = np.zeros(n)
    x[0], x[-1] = -d, d
    with np.errstate(under="raise"):
        s = summarize(x)
    s_exact = math.sqrt(2.0 * d * d / (n - 1))  # sample standard deviation, ddof = 1
    assert s.std == pytest.approx(s_exact, rel=1e-14)
    assert abs(s.skewness) < 1e-12  # symmetric sample: m3 = 0 up to the rounding of the dot product
    # SE of s: s sqrt((kurtosis - 1) / n) / 2 with kurtosis n / 2; the subnormal m2^2 keeps ~13 digits
    assert s.std_se == pytest.approx(0.5 * s_exact * math.sqrt((n / 2 - 1) / n), rel=1e-10)


def test_a_level_exactly_one_tolerance_away_is_the_stored_level():
    # 2e-9 - 1e-9 == 1e-9 exactly in binary floating point (2e-9 is the double of 1e-9), so the level 2e-9 is
    # LEVEL_TOLERANCE (1e-9) from the stored 1e-9: "within" includes the bound; a hair further is refused
    assert 2e-9 - 1e-9 == LEVEL_TOLERANCE
    x = np.random.default_rng(3).standard_normal(200)
    s = summarize(x, levels=(1e-9,))
    expected = np.quantile(x, 1e-9, method="hazen")  # below the first mid-point: the smallest draw
    assert s.quantile(2e-9) == s.quantile(1e-9) == expected == x.min()
    assert s.quantile_error(2e-9) == s.quantile_error(1e-9)
    with pytest.raises(KeyError, match="was not computed"):
        s.quantile(2.000001e-9)



def test_128_separate_quantile_levels_of_a_large_sample_are_numpys():
    # 128 levels, each beyond the bracket of the one before (the large-sample path brackets a level with a
    # 4.5-sigma binomial margin measured on a pilot of about 6 n^(2/3) draws, as its docstring says), give 128
    # disjoint brackets: the region codes then reach 256 and need 16 bits. The lowest level sits just above its
    # margin, so a lost count below the first bracket would shift that quantile without tripping the bracket
    # check. Expected: numpy's method="hazen" (Hyndman & Fan 1996, definition 5), the documented definition.
    from perierr.summary import weighted_quantiles

    n = 6_000_000
    pilot = len(range(0, n, max(1, n // max(2000, int(6.0 * n ** (2.0 / 3.0))))))  # the strided pilot's size

    def margin(p):
        return 4.5 * math.sqrt(max(p * (1 - p), 1 / pilot) / pilot) + 2 / pilot

    levels = [1.6e-4]
    while len(levels) < 128:
        q = levels[-1]
        levels.append(q + 1.15 * (margin(q) + margin(q + 2 * margin(q))))
    levels = np.round(np.array(levels), 12)
    assert levels[-1] < 1.0
    x = np.random.default_rng(3).normal(size=n)  # invented draws
    np.testing.assert_allclose(weighted_quantiles(x, levels), np.quantile(x, levels, method="hazen"), rtol=0,
                               atol=1e-12)


@pytest.mark.parametrize(
    ("weights", "said"),
    [([0.0, 0.0, 0.0, 0.0], "all zero"), ([1.0, np.nan, 1.0, 1.0], "nan at draw 1"),
     ([1.0, 1.0, -0.5, 1.0], "-0.5 at draw 2"), ([1.0, 1.0, 1.0], "shape (3,)")],
)
def test_weights_that_define_no_distribution_are_refused_naming_the_field(weights, said):
    # a weighted sample needs finite weights >= 0 with a positive sum (common practice, no source): all-zero,
    # NaN or negative weights gave NaN or meaningless summaries before
    from perierr.errors import InputError

    with pytest.raises(InputError, match="weights") as caught:
        summarize([1.0, 2.0, 3.0, 4.0], name="d", weights=weights)
    assert said in str(caught.value).lower()


def test_zero_weights_on_some_draws_leave_them_out():
    # draws of weight 0 count for nothing (common practice, no source): the summary of the rest
    s = summarize([1.0, 2.0, 3.0, 100.0], name="d", weights=[1.0, 1.0, 1.0, 0.0])
    assert s.mean == pytest.approx(2.0, rel=1e-12)
    assert s.median == pytest.approx(2.0, rel=1e-12)
