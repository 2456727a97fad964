"""Edge cases of propagation and sampling (perierr.propagate, perierr.sampling), written to kill surviving mutants.

Expected values come from outside the package: numpy/scipy computed here (np.linalg.cholesky, np.average,
np.quantile with method="hazen" = Hyndman & Fan 1996 definition 5, and that definition's mid-point CDF written
out for weights), closed forms (J Sigma J^T for an exactly linear model), the documented rules of the
functions, and the 1/sqrt(n) law of Monte Carlo errors. All stars are invented.
"""

import json
import math
import os
import re
import warnings

import astropy.units as u
import numpy as np
import pytest

from perierr import InputError, ObservedStar, StraightLine, linearize, monte_carlo
from perierr.models.base import ForwardModel, Nuisance, Perihelion
from perierr.propagate import montecarlo as mc_module
from perierr.propagate.montecarlo import propagate_samples, scalar_info
from perierr.sampling import gaussian
from perierr.sampling.gaussian import Samples, draw_gaussian, psd_factor, require_draws, resolve_seed
from perierr.star import checks
from perierr.summary import DEFAULT_LEVELS

MAS_PER_DEG = 3.6e6  # definition of the milliarcsecond
K_AU_YR = (1 * u.au / u.yr).to_value(u.km / u.s)  # 1 au/yr in km/s (astropy)


def invented_star(parallax=20.0, parallax_error=0.5):
    """An invented star (not a real object), with correlated errors."""
    sig = np.array([0.05 / MAS_PER_DEG, 0.04 / MAS_PER_DEG, parallax_error, 0.3, 0.2, 1.0])
    corr = np.eye(6)
    corr[2, 3] = corr[3, 2] = 0.3
    corr[3, 5] = corr[5, 3] = -0.2
    mean = np.array([150.0, -20.0, parallax, 40.0, -25.0, -30.0])
    return ObservedStar(mean, corr * np.outer(sig, sig), name="Invented-A")


def straight_distance(x):
    """Straight-line d_ph = r v_t / |v| (Matthews 1994, QJRAS 35, 1), r = 1000/parallax, v_t = k mu r / 1000."""
    r = 1000.0 / x[:, 2]
    vt = K_AU_YR * np.hypot(x[:, 3], x[:, 4]) * r / 1000.0
    return r * vt / np.hypot(vt, x[:, 5])


def hazen_weighted(x, w, probs):
    """Quantiles by linear interpolation of the mid-point weighted CDF (Hyndman & Fan 1996, def. 5)."""
    order = np.argsort(x, kind="stable")
    xs, ws = x[order], w[order]
    cdf = (np.cumsum(ws) - 0.5 * ws) / ws.sum()
    return np.interp(probs, cdf, xs)


# --- checks --------------------------------------------------------------------------------------------------


def test_zero_parallax_is_refused_and_the_message_names_the_method():
    with pytest.raises(InputError):
        checks.require_positive_parallax(0.0, method="a method")
    mean = np.array([150.0, -20.0, -1.0, 40.0, -25.0, -30.0])
    star = ObservedStar(mean, np.diag([1e-12, 1e-12, 0.25, 0.09, 0.04, 1.0]))
    with pytest.raises(InputError) as info:
        linearize(star, StraightLine())
    assert info.value.expected.startswith("linearized propagation inverts the parallax")
    with pytest.raises(InputError) as info:
        monte_carlo(star, StraightLine(), n=1000, seed=1)
    assert info.value.expected.startswith("Monte Carlo by parallax inversion inverts the parallax")


@pytest.mark.parametrize("motion", [(1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, 1.0)])
def test_a_star_moving_in_one_component_only_has_a_perihelion(motion):
    # any nonzero velocity component makes the star move relative to the Sun
    checks.require_motion(np.array([1.0, 2.0, 10.0, *motion]))
    with pytest.raises(InputError):
        checks.require_motion(np.array([1.0, 2.0, 10.0, 0.0, 0.0, 0.0]))


def test_require_uncertainty_needs_one_nonzero_error():
    with pytest.raises(InputError):
        checks.require_uncertainty([0.0] * 6)
    checks.require_uncertainty([0.0, 0.0, 0.0, 0.0, 0.0, 0.5])  # one error below 1 is enough
    checks.require_uncertainty([1e-9] * 6)


# --- linearize with an exactly linear model ----------------------------------------------------------------------


class _Linear(ForwardModel):
    """outputs = A x: J Sigma J^T is then exact (closed form); optionally one nuisance parameter."""

    name = "toy_linear"
    A = [[1, 0, 2, 0, 0, 0], [0, 3, 0, 1, 0, 0], [0, 0, 0, 0, 1, -1]]

    def __init__(self, gradient=None, variance=0.0):
        self.gradient, self.variance = gradient, variance

    def evaluate(self, observables, *, reference=None):
        y = np.asarray(observables, dtype=float) @ np.array(self.A, dtype=float).T
        return Perihelion(y[:, 0], y[:, 1], y[:, 2])

    def jacobian(self, point):
        return self.A  # a plain nested list of integers, as a minimal custom model might return

    def nuisance(self, point):
        if self.gradient is None:
            return ()
        return (Nuisance("mass", np.asarray(self.gradient, dtype=float), self.variance),)


def test_linearize_of_a_linear_model_is_exact_and_json_ready():
    star = invented_star()
    res = linearize(star, _Linear())
    a = np.array(_Linear.A, dtype=float)
    assert res.jacobian.dtype == np.float64
    np.testing.assert_allclose(res.cov, a @ np.array(star.cov) @ a.T, rtol=1e-13, atol=0)
    np.testing.assert_allclose(res.value, a @ np.array(star.mean), rtol=1e-13)
    assert res.nuisance == ()
    d = res.to_dict()
    json.dumps(d)
    sig = np.sqrt(np.diag(res.cov))
    for q, unit, k in (("time_myr", "Myr", 0), ("distance_pc", "pc", 1), ("speed_kms", "km/s", 2)):
        assert d[q]["unit"] == unit and set(d[q]) == {"value", "sigma", "unit"}
        assert (d[q]["value"], d[q]["sigma"]) == pytest.approx((res.value[k], sig[k]), rel=1e-14)
    # correlation of outputs i, j = C_ij / (sigma_i sigma_j), each unordered pair once
    c = res.cov / np.outer(sig, sig)
    expected = {"time_myr|distance_pc": c[0, 1], "time_myr|speed_kms": c[0, 2], "distance_pc|speed_kms": c[1, 2]}
    assert d["correlations"] == pytest.approx(expected, rel=1e-12)
    assert set(d) == {"time_myr", "distance_pc", "speed_kms", "correlations", "jacobian"}
    for q, row in zip(("time_myr", "distance_pc", "speed_kms"), _Linear.A):
        assert d["jacobian"][q] == dict(zip(("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity"),
                                            map(float, row)))
        assert all(type(v) is float for v in d["jacobian"][q].values())


def test_linearize_adds_each_nuisance_variance():
    # an independent parameter with gradient g and variance v adds v g g^T (first-order propagation)
    star = invented_star()
    g, v = np.array([0.5, -2.0, 0.25]), 0.04
    res = linearize(star, _Linear(gradient=g, variance=v))
    a = np.array(_Linear.A, dtype=float)
    np.testing.assert_allclose(res.cov, a @ np.array(star.cov) @ a.T + v * np.outer(g, g), rtol=1e-13, atol=0)
    assert len(res.nuisance) == 1 and res.nuisance[0].name == "mass"


# --- sampling ------------------------------------------------------------------------------------------------------


def test_psd_factor_matches_cholesky_for_a_full_covariance():
    rng = np.random.default_rng(11)
    m = rng.normal(size=(5, 5))
    cov = m @ m.T + 0.5 * np.eye(5)
    np.testing.assert_allclose(psd_factor(cov), np.linalg.cholesky(cov), rtol=1e-10, atol=1e-12)


def test_psd_factor_of_a_single_precision_matrix_is_computed_in_double():
    rng = np.random.default_rng(12)
    m = rng.normal(size=(4, 4))
    cov32 = (m @ m.T + np.eye(4)).astype(np.float32)
    low = psd_factor(cov32)
    # the factor of the float32 values, taken exactly as float64, to double precision (numpy Cholesky)
    assert low.dtype == np.float64
    np.testing.assert_allclose(low, np.linalg.cholesky(cov32.astype(np.float64)), rtol=1e-12, atol=1e-13)


def _fake_sysconf(page, pages):
    def sysconf(name):
        values = {"SC_PAGE_SIZE": page, "SC_PHYS_PAGES": pages}
        if name not in values:
            raise ValueError("unrecognized configuration name")
        return values[name]
    return sysconf


def test_require_draws_types_and_default_field():
    assert require_draws(1000) == 1000 and type(require_draws(np.int64(1000))) is int
    for bad in (50, 1000.0, True, "1000"):
        with pytest.raises(InputError) as info:
            require_draws(bad)
        assert info.value.field == "samples"


def test_require_draws_memory_limit(monkeypatch):
    # a machine of 1,000,000 x 1,250 bytes: 80 % of it is 1e6 bytes, i.e. 1,000 draws of 1,000 bytes
    monkeypatch.setattr(gaussian.os, "sysconf", _fake_sysconf(1000, 1250))
    with pytest.raises(InputError) as info:
        require_draws(1001)
    assert info.value.field == "samples"
    most = int(re.search(r"at most about ([\d,]+) draws", info.value.expected).group(1).replace(",", ""))
    assert most == 1000
    assert require_draws(most) == most  # the advertised maximum is itself accepted


def test_require_draws_refuses_more_than_the_real_memory():
    total = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    n = int(total)  # at 1,000 bytes a draw this needs 1,000 times the machine's memory
    with pytest.raises(InputError) as info:
        require_draws(n, field="max_samples")
    assert info.value.field == "max_samples" and "memory" in info.value.expected


def test_require_draws_without_sysconf_passes_n_through(monkeypatch):
    def no_sysconf(name):
        raise OSError("no sysconf here")
    monkeypatch.setattr(gaussian.os, "sysconf", no_sysconf)
    assert require_draws(5000) == 5000


def test_fresh_seeds_fit_a_signed_64_bit_integer_and_use_its_range():
    # the recorded seed must round-trip through int64 (JSON readers, numpy) and keep 63 bits of entropy:
    # with 200 fresh seeds, all are in [0, 2**63) and (but for a chance of 2**-200) one is >= 2**62
    seeds = [resolve_seed(None) for _ in range(200)]
    assert all(type(s) is int and 0 <= s < 2**63 for s in seeds)
    assert max(seeds) >= 2**62
    assert resolve_seed(7) == 7 and resolve_seed(np.uint8(3)) == 3
    for bad in (-1, np.int64(-5), "3", 1.5):
        with pytest.raises((ValueError, TypeError)) as info:
            resolve_seed(bad)
        assert info.type is InputError and info.value.field == "seed" and info.value.value is bad


# --- propagate_samples ---------------------------------------------------------------------------------------------


def _draws(n=4000, seed=3, parallax=20.0, parallax_error=0.5):
    star = invented_star(parallax, parallax_error)
    return star, draw_gaussian(star.mean, star.cov, n, np.random.default_rng(seed))


def test_weighted_samples_use_their_weights_everywhere():
    _, x = _draws(parallax=2.0, parallax_error=1.0)  # about 2 % of draws at parallax <= 0
    rng = np.random.default_rng(21)
    w = rng.uniform(0.1, 3.0, size=x.shape[0])
    kept = x[:, 2] > 0
    d = straight_distance(x[kept])
    limit = round(float(np.median(d)), 3)  # a threshold that about half of the kept draws pass
    res = propagate_samples(Samples(x, weights=w, method="reweight"), StraightLine(), thresholds=(f"{limit} pc",))
    assert res.n_nonpositive_parallax == int((~kept).sum()) > 0
    s = res.summaries["distance_pc"]
    assert s.mean == pytest.approx(np.average(d, weights=w[kept]), rel=1e-9)  # weighted mean (definition)
    assert s.quantiles[0.84] == pytest.approx(hazen_weighted(d, w[kept], 0.84), rel=1e-9)
    lo, hi = res.interval()
    assert (lo, hi) == pytest.approx(tuple(hazen_weighted(d, w[kept], [0.05, 0.95])), rel=1e-9)
    # P(d < D) = sum of passing weights / sum of all weights; parallax <= 0 draws never pass
    passing = np.zeros(x.shape[0], bool)
    passing[kept] = d < limit
    assert 0.3 < passing.mean() < 0.7
    assert res.thresholds[0].probability == pytest.approx(w[passing].sum() / w.sum(), rel=1e-12)


def test_all_valid_weighted_samples_and_summary_labels():
    _, x = _draws()
    assert np.all(x[:, 2] > 0)
    w = np.random.default_rng(22).uniform(0.1, 3.0, size=x.shape[0])
    d = straight_distance(x)
    limit = round(float(np.median(d)), 3)  # a threshold that about half of the draws pass
    res = propagate_samples(Samples(x, weights=w), StraightLine(), thresholds=(f"{limit} pc",))
    assert 0.3 < np.mean(d < limit) < 0.7
    assert res.summaries["distance_pc"].mean == pytest.approx(np.average(d, weights=w), rel=1e-9)
    assert res.thresholds[0].probability == pytest.approx(w[d < limit].sum() / w.sum(), rel=1e-12)
    for q, unit in (("time_myr", "Myr"), ("distance_pc", "pc"), ("speed_kms", "km/s")):
        assert res.summaries[q].name == q and res.summaries[q].unit == unit
        assert res.to_dict()[q]["unit"] == unit


def test_interval_default_and_many_digit_level():
    _, x = _draws()
    res = propagate_samples(Samples(x), StraightLine())
    d = straight_distance(x)
    # unweighted quantiles are numpy's "hazen" definition (Hyndman & Fan 1996, def. 5)
    assert res.interval() == pytest.approx(tuple(np.quantile(d, [0.05, 0.95], method="hazen")), rel=1e-9)
    lo, hi = res.interval(level=2 / 3)
    assert (lo, hi) == pytest.approx(tuple(np.quantile(d, [1 / 6, 5 / 6], method="hazen")), rel=1e-9)


def test_every_reported_level_has_its_quantile():
    _, x = _draws()
    res = propagate_samples(Samples(x), StraightLine(), levels=(2 / 3, 0.25))
    assert len(res.levels) == len(DEFAULT_LEVELS) + 2
    for s in res.summaries.values():
        assert set(res.levels) == set(s.quantiles)
        assert s.quantiles[round(2 / 3, 12)] == pytest.approx(np.quantile(s_x(res, s.name), 2 / 3,
                                                                          method="hazen"), rel=1e-9)


def s_x(res, name):
    return res.perihelion.output(name)


def test_parallax_exactly_zero_counts_as_nonpositive():
    _, x = _draws(n=500)
    x = np.array(x)
    x[:7, 2] = 0.0
    res = propagate_samples(Samples(x), StraightLine(), thresholds=("1000 pc",))
    assert res.n_nonpositive_parallax == 7
    # aligned outputs (MonteCarloResult docstring): 500 rows, NaN exactly at the 7 draws with parallax 0
    assert res.perihelion.distance_pc.size == 500 and res.n_valid == 493
    np.testing.assert_array_equal(np.isnan(res.perihelion.distance_pc), np.arange(500) < 7)
    # every kept draw passes 1000 pc; the 7 unbounded ones do not: P = 493 / 500
    assert res.thresholds[0].probability == pytest.approx(493 / 500, rel=1e-15)


def test_a_single_kept_sample_is_summarized_and_none_is_refused():
    _, x = _draws(n=200)
    x = np.array(x)
    x[1:, 2] = -1.0
    res = propagate_samples(Samples(x), StraightLine())
    assert res.summaries["distance_pc"].median == pytest.approx(straight_distance(x[:1])[0], rel=1e-12)
    x[0, 2] = -1.0
    with pytest.raises(ValueError, match="every sample has parallax <= 0"):
        propagate_samples(Samples(x), StraightLine())


def test_worst_relative_error_without_the_16_84_quantiles_is_zero():
    # with no q16/q84 the spread (q84 - q16)/2 falls back to median - median = 0: nothing to compare with
    from perierr.summary import summarize

    _, x = _draws(n=500)
    res = propagate_samples(Samples(x), StraightLine())
    only = {q: summarize(s_x(res, q), levels=(0.25, 0.75)) for q in res.summaries}
    bare = mc_module.MonteCarloResult(res.samples, res.perihelion, res.valid, only, res.thresholds, (0.5,))
    assert bare.worst_relative_error() == 0.0


# --- a model with flags and diagnostics ----------------------------------------------------------------------------


class _Flagging(StraightLine):
    """Straight line that flags d_ph > 17.5 pc and reports diagnostics of every kind."""

    name = "toy_flagging"

    def evaluate(self, observables, *, reference=None):
        ph = super().evaluate(observables, reference=reference)
        info = {
            "method": "toy", "exact": np.bool_(True), "steps": np.int64(12), "tol": np.float64(0.25), "none": None,
            "window": [1.5, np.float64(2.5)], "sixteen": list(range(16)), "seventeen": list(range(17)),
            "short_array": np.arange(3.0), "per_sample": np.zeros(len(ph.time_myr)), "mixed": [1.0, object()],
            "nested": {"count": np.int64(3), "arr": np.ones(2)}, "only_arrays": {"arr": np.ones(2)},
        }
        return Perihelion(ph.time_myr, ph.distance_pc, ph.speed_kms, flags=ph.distance_pc > 17.5, info=info)


def test_scalar_info_keeps_exactly_the_json_scalars():
    out = scalar_info(_Flagging().evaluate(np.array([[150.0, -20.0, 20.0, 40.0, -25.0, -30.0]])).info)
    expected = {"method": "toy", "exact": True, "steps": 12, "tol": 0.25, "none": None, "window": [1.5, 2.5],
                "sixteen": list(range(16)), "nested": {"count": 3}}
    assert out == expected
    # plain Python types only, so that any JSON writer takes them
    assert type(out["exact"]) is bool and type(out["steps"]) is int and type(out["tol"]) is float
    assert type(out["window"][1]) is float and type(out["nested"]["count"]) is int
    json.dumps(out)


def test_monte_carlo_json_block_field_by_field():
    star = invented_star()
    res = monte_carlo(star, _Flagging(), n=3000, seed=99, thresholds=("50 pc",))
    d = res.to_dict()
    x = res.samples.values
    dist = straight_distance(x)
    assert d["n"] == 3000 and d["seed"] == 99 and d["method"] == "gaussian" and d["n_nonpositive_parallax"] == 0
    assert d["n_flagged"] == int(np.count_nonzero(dist > 17.5)) > 0
    assert d["distance_pc"]["median"] == pytest.approx(np.quantile(dist, 0.5, method="hazen"), rel=1e-9)
    assert d["thresholds"][0]["probability"] == pytest.approx(np.mean(dist < 50.0), rel=1e-12)
    assert d["model_info"]["nested"] == {"count": 3}
    assert "convergence" not in d
    json.dumps(d)
    plain = monte_carlo(star, StraightLine(), n=1000, seed=99).to_dict()
    assert plain["n_flagged"] == 0


# --- monte_carlo: defaults and the adaptive mode -----------------------------------------------------------------


def test_default_number_of_draws_is_100_000():
    res = monte_carlo(invented_star(), StraightLine(), seed=4)
    assert res.n == 100_000


def test_default_cap_is_ten_million_draws(monkeypatch):
    # with plenty of (pretended) memory, a first round above the default cap of 10,000,000 is refused
    monkeypatch.setattr(gaussian.os, "sysconf", _fake_sysconf(2**20, 2**30))

    def no_draws(*args, **kwargs):
        raise AssertionError("must refuse before drawing")

    monkeypatch.setattr(mc_module, "draw_gaussian", no_draws)
    with pytest.raises(InputError) as info:
        monte_carlo(invented_star(), StraightLine(), n=10_000_001, seed=1, target_error=0.1)
    assert info.value.field == "max_samples"


def test_adaptive_argument_checks():
    star = invented_star()
    with pytest.raises(InputError) as info:
        monte_carlo(star, StraightLine(), n=1000, seed=1, target_error=0.1, max_samples=5000.0)
    assert info.value.field == "max_samples" and "draws >= 1000" in info.value.expected
    with pytest.raises(ValueError, match="target_error"):
        monte_carlo(star, StraightLine(), n=1000, seed=1, target_error=0.0, max_samples=2000)


def test_adaptive_cap_is_honoured_and_rounds_counted():
    star = invented_star(parallax=2.0, parallax_error=1.0)
    with pytest.warns(UserWarning, match="not met"):
        res = monte_carlo(star, StraightLine(), n=1000, seed=8, target_error=1e-4, max_samples=1500)
    # the cap admits exactly one extra round: 1000 + 500 draws, and the target is reported as missed
    assert res.n == 1500
    conv = res.to_dict()["convergence"]
    assert conv == {"target_error": 1e-4, "achieved": res.worst_relative_error(), "rounds": 2, "met": False}
    assert res.convergence == conv
    # the final result is complete: validity, thresholds and levels of all 1500 draws
    assert np.array_equal(res.valid, res.samples.values[:, 2] > 0)
    assert res.n_nonpositive_parallax == int(np.count_nonzero(res.samples.values[:, 2] <= 0)) > 0
    assert res.levels == DEFAULT_LEVELS
    assert len(res.thresholds) == len(res.to_dict()["thresholds"]) > 0
    # a cap equal to the first round is allowed: no extra round, target reported as missed
    with pytest.warns(UserWarning, match="not met"):
        capped = monte_carlo(star, StraightLine(), n=1000, seed=8, target_error=1e-4, max_samples=1000)
    assert capped.n == 1000 and capped.convergence["rounds"] == 1 and not capped.convergence["met"]


def test_adaptive_target_met_in_the_first_round_draws_no_more():
    star = invented_star()
    first = monte_carlo(star, StraightLine(), n=1000, seed=31)
    target = first.worst_relative_error()  # the same seed makes the adaptive first round these very draws
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = monte_carlo(star, StraightLine(), n=1000, seed=31, target_error=target)
    assert res.n == 1000
    assert res.convergence == {"target_error": target, "achieved": target, "rounds": 1, "met": True}


def test_adaptive_rounds_follow_the_inverse_square_root_law():
    # Monte Carlo errors shrink as 1/sqrt(n): an error 3x the target needs about 9x the draws. The adaptive
    # mode must reach the target in a round or two and land within 1.5x of that prediction, not creep up.
    star = invented_star()
    first = monte_carlo(star, StraightLine(), n=1000, seed=31)
    ratio = 3.0
    target = first.worst_relative_error() / ratio
    res = monte_carlo(star, StraightLine(), n=1000, seed=31, target_error=target)
    predicted = 1000 * ratio**2
    assert res.convergence["met"] and res.worst_relative_error() <= target
    assert res.convergence["rounds"] <= 3
    assert predicted <= res.n <= 1.5 * predicted
    assert math.isclose(res.convergence["achieved"], res.worst_relative_error(), rel_tol=0, abs_tol=0)
