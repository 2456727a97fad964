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
