"""Preposterior analysis (perierr.plan.preposterior): closed forms, limits, priors, seeds, bad input.

Every star here is invented (a linear toy model, a weak-parallax star made up for the prior checks, and the
demo's fictional Kestrel-4).
"""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, optimize
from scipy.stats import norm

from perierr.demo import demo_path
from perierr.errors import InputError
from perierr.models import StraightLine
from perierr.plan import decide_goal, make_measurement, spread_goal
from perierr.plan.preposterior import _row_quantiles, preposterior
from perierr.priors import resolve_prior
from perierr.sampling.reweight import reweight
from perierr.star import ObservedStar
from perierr.star.reading import read_star_file
from perierr.summary import weighted_quantiles
from perierr.units import MAS_PC

Z90 = norm.ppf(0.95)  # 1.6449: the 5 % and 95 % points of a standard normal (scipy)


# ------------------------------------------------------------------------------------------- a linear toy model


class _Outputs:
    def __init__(self, values):
        self.values = values

    def as_array(self):
        return self.values


class LinearModel:
    """(t, d, v) = A x + c: a forward model whose perihelion is linear in the observables (test only)."""

    def __init__(self, a_matrix, offset):
        self.a_matrix = np.asarray(a_matrix, dtype=float)
        self.offset = np.asarray(offset, dtype=float)

    def evaluate_draws(self, observables, rng, *, reference=None):
        return _Outputs(observables @ self.a_matrix.T + self.offset)


MEAN = np.array([10.0, 20.0, 50.0, 5.0, -3.0, 20.0])  # deg, deg, mas, mas/yr, mas/yr, km/s (invented)
SIG = np.array([1e-6, 1e-6, 0.5, 0.3, 0.3, 1.0])
CORR = np.eye(6)
CORR[2, 3] = CORR[3, 2] = 0.3
CORR[2, 5] = CORR[5, 2] = -0.2
CORR[3, 4] = CORR[4, 3] = 0.25
COV = CORR * np.outer(SIG, SIG)
LIN_STAR = ObservedStar(MEAN, COV, name="invented linear star")
A = np.array([0.0, 0.0, 0.03, 0.01, -0.01, 0.005])  # d_ph gradient [pc per unit]; parallax dominates
MU = 1.0  # today's mean d_ph [pc], far from 0 so d stays positive
LIN = LinearModel(np.stack([0.1 * A, A, 2.0 * A]), [0.0, MU - A @ MEAN, 30.0 - 2.0 * A @ MEAN])
SD_TODAY = math.sqrt(A @ COV @ A)


def kalman_cov(cov, index, s):
    """Information form of the update (Bar-Shalom, Li & Kirubarajan 2001, Sect. 5.2): inv(inv(S) + e e^T / s^2)."""
    e = np.zeros(6)
    e[index] = 1.0
    return np.linalg.inv(np.linalg.inv(cov) + np.outer(e, e) / s**2)


def settle_closed_form(mu, tau, sigma1, threshold, alpha):
    """P(settle) for a linear Gaussian model.

    After the new value y the posterior of d is N(m, sigma1^2) with m = a.mean' ~ N(mu, tau^2) over the
    futures (tau^2 = a^T (Sigma - Sigma') a, the variance of the Kalman mean shift). P = Phi((D - m) / sigma1);
    P > 1 - alpha <=> m < D - z sigma1 and P < alpha <=> m > D + z sigma1 (z = Phi^-1(1 - alpha)), so
    P(settle) = Phi((D - z sigma1 - mu) / tau) + 1 - Phi((D + z sigma1 - mu) / tau)  (scipy.stats.norm).
    """
    z = norm.ppf(1.0 - alpha)
    lo, hi = (threshold - z * sigma1 - mu) / tau, (threshold + z * sigma1 - mu) / tau
    return norm.cdf(lo) + norm.sf(hi), (lo, hi)


def inner_error(sigma1, tau, bounds, alpha, n_inner):
    """MC error of P(settle) from the inner draws.

    The inner draws are common to every future, so P_k = F_n((D - m_k) / sigma1) with F_n the empirical CDF
    of one standard-normal sample: the settling bounds move by the sample quantile's error
    sqrt(alpha (1 - alpha) / n) / phi(z) (asymptotic order statistics, e.g. David & Nagaraja 2003, Sect. 10.2),
    shifting P(settle) by (sigma1 / tau) phi(bound) per bound.
    """
    se_z = math.sqrt(alpha * (1.0 - alpha) / n_inner) / norm.pdf(norm.ppf(1.0 - alpha))
    return (sigma1 / tau) * (norm.pdf(bounds[0]) + norm.pdf(bounds[1])) * se_z


def test_linear_gaussian_closed_form():
    alpha, s, k, n = 0.05, 0.25, 2000, 4000
    threshold = MU + 0.6 * SD_TODAY
    cov1 = kalman_cov(COV, 2, s)
    sigma1 = math.sqrt(A @ cov1 @ A)
    tau = math.sqrt(A @ (COV - cov1) @ A)
    expect, bounds = settle_closed_form(MU, tau, sigma1, threshold, alpha)
    res = preposterior(
        LIN_STAR, LIN, [make_measurement("parallax", s)], goal=decide_goal(f"{threshold!r} pc", alpha),
        n_future=k, n_inner=n, seed=11, thresholds=(),
    )  # fmt: skip
    out = res.outcomes[0]
    se = math.sqrt(expect * (1 - expect) / k)  # binomial MC error
    tol = 4.0 * math.hypot(se, inner_error(sigma1, tau, bounds, alpha, n))
    assert 0.2 < expect < 0.8  # an informative case, not a trivial 0 or 1
    assert out.p_settle == pytest.approx(expect, abs=tol)
    assert res.p_settle_se == pytest.approx(math.sqrt(out.p_settle * (1 - out.p_settle) / k), rel=1e-12)
    # the future width is the same for every future of a linear Gaussian model: 2 z_0.95 sigma'
    # (order-statistic error of a 90 % width: sqrt(0.09 / n) / phi(z_0.95) sigma', asymptotic, as above)
    width = out.width90["distance_pc"]
    assert np.ptp(width) == pytest.approx(0.0, abs=1e-9 * sigma1)
    se_w = math.sqrt(0.09 / n) / norm.pdf(Z90) * sigma1
    assert out.expected_width("distance_pc") == pytest.approx(2 * Z90 * sigma1, abs=4 * se_w)
    # each future's standard deviation is sigma' and the error of its mean sigma' / sqrt(n) (standard error of a
    # mean, common practice); the sample std of n normal draws has relative error 1 / sqrt(2 (n - 1))
    rel = 4 / math.sqrt(2 * (n - 1))
    assert out.std["distance_pc"] == pytest.approx(np.full(k, sigma1), rel=rel)
    assert out.mean_se["distance_pc"] == pytest.approx(np.full(k, sigma1 / math.sqrt(n)), rel=rel)
    # the future means of d: mean mu, variance tau^2 (chi-square error of a sample variance: sqrt(2 / (K - 1)))
    means = out.mean["distance_pc"]
    assert means.mean() == pytest.approx(MU, abs=4 * tau / math.sqrt(k))
    assert means.var(ddof=1) == pytest.approx(tau**2, rel=4 * math.sqrt(2 / (k - 1)))
    # today's answer on the same inner draws: P = Phi((D - mu) / sigma) (binomial error), not settled
    p_today = norm.cdf((threshold - MU) / SD_TODAY)
    assert res.today.value == pytest.approx(p_today, abs=4 * math.sqrt(p_today * (1 - p_today) / n))
    assert res.today.settled is False
    # lands on today's mean: m = mu, so P = Phi((D - mu) / sigma')
    p_mean = norm.cdf((threshold - MU) / sigma1)
    assert out.on_mean.value == pytest.approx(p_mean, abs=4 * math.sqrt(p_mean * (1 - p_mean) / n))
    gain = 1.0 - sigma1 / SD_TODAY
    assert res.expected_gain("distance_pc") == pytest.approx(gain, abs=0.03)


def test_limit_useless_measurement_keeps_today():
    # s -> infinity: the new datum carries no information; every future is today (common draws)
    for threshold in (MU + 0.5 * SD_TODAY, MU + 2.5 * SD_TODAY):
        res = preposterior(
            LIN_STAR, LIN, [make_measurement("parallax", 1e8)], goal=decide_goal(f"{threshold!r} pc"),
            n_future=50, n_inner=1000, seed=5, thresholds=(),
        )  # fmt: skip
        out = res.outcomes[0]
        assert out.p_settle == pytest.approx(float(res.today.settled), abs=0.0)
        for q in ("time_myr", "distance_pc", "speed_kms"):
            assert out.width90[q] == pytest.approx(np.full(50, res.today.width90[q]), rel=1e-6)
        assert out.value == pytest.approx(np.full(50, res.today.value), abs=1e-12)
    # Phi(2.5) = 0.9938 > 0.95 (scipy): settled today; Phi(0.5) = 0.69 is not
    assert res.today.settled is True


def test_limit_exact_measurement_of_the_dominant_input():
    # s = 0 conditions on x_i: Var(E[d | x_i]) = (a^T Sigma e_i)^2 / Sigma_ii, the regression of d on x_i
    # (conditional Gaussian, e.g. Anderson 2003, An Introduction to Multivariate Statistical Analysis, Thm 2.5.1)
    alpha, k, n = 0.05, 1500, 4000
    tau = abs(A @ COV[:, 2]) / math.sqrt(COV[2, 2])
    sigma1 = math.sqrt(SD_TODAY**2 - tau**2)
    threshold = MU + 0.4 * SD_TODAY
    expect, bounds = settle_closed_form(MU, tau, sigma1, threshold, alpha)
    res = preposterior(
        LIN_STAR, LIN, {"parallax": 0.0}, goal=decide_goal(f"{threshold!r} pc", alpha),
        n_future=k, n_inner=n, seed=2, thresholds=(),
    )  # fmt: skip
    out = res.outcomes[0]
    means = out.mean["distance_pc"]
    assert means.var(ddof=1) == pytest.approx(tau**2, rel=4 * math.sqrt(2 / (k - 1)))
    se = math.sqrt(expect * (1 - expect) / k)
    assert out.p_settle == pytest.approx(expect, abs=4 * math.hypot(se, inner_error(sigma1, tau, bounds, alpha, n)))
    # the exact parallax makes every future's parallax equal to its y (y = x_i, no noise)
    assert np.ptp(out.width90["distance_pc"]) == pytest.approx(0.0, abs=1e-9)
    assert out.expected_width("distance_pc") == pytest.approx(
        2 * Z90 * sigma1, abs=4 * math.sqrt(0.09 / n) / norm.pdf(Z90) * sigma1
    )


def test_spread_goal_on_the_linear_model():
    # width90 goals: the future width is 2 z sigma' for every future, so P(settle) is 0 or 1
    s = 0.25
    sigma1 = math.sqrt(A @ kalman_cov(COV, 2, s) @ A)
    for target, expect in ((2 * Z90 * sigma1 * 1.1, 1.0), (2 * Z90 * sigma1 * 0.9, 0.0)):
        res = preposterior(
            LIN_STAR, LIN, [make_measurement("parallax", s)], goal=spread_goal("width90", "d_ph", target),
            n_future=30, n_inner=4000, seed=4, thresholds=(),
        )  # fmt: skip
        assert res.p_settle == pytest.approx(expect, abs=0.0)
        assert res.outcomes[0].on_mean.settled is bool(expect)


# ------------------------------------------------------------------------------------ a weak parallax and a prior

WEAK = ObservedStar.from_values(
    name="invented weak-parallax star", ra=120.0, dec=-40.0, ra_error=0.3, dec_error=0.3,
    parallax=3.0, parallax_error=0.9, pmra=1.5, pmra_error=0.4, pmdec=-0.8, pmdec_error=0.4,
    radial_velocity=-60.0, radial_velocity_error=2.0,
)  # fmt: skip
L_PC = 300.0  # an exponentially decreasing space density with an invented length scale
PRIOR = resolve_prior(f"edsd:L={L_PC}pc")


class DistanceModel:
    """Test model whose 'perihelion distance' is the star's distance 1000 / parallax [pc] (zeros elsewhere)."""

    def evaluate_draws(self, observables, rng, *, reference=None):
        r = MAS_PC / observables[:, 2]
        return _Outputs(np.stack([np.zeros_like(r), r, np.zeros_like(r)], axis=1))


def posterior_moments():
    """Moments of today's posterior under the EDSD prior, by quadrature (scipy.integrate.quad).

    p(plx | data) propto N(plx; 3.0, 0.9^2) P(r) |dr/dplx| with r = 1000 / plx and
    P(r) = r^2 exp(-r / L) / (2 L^3) (Bailer-Jones 2015, PASP 127, 994, eq. 18), |dr/dplx| = r^2 / 1000.
    Returns the parallax's mean, variance and 4th central moment, and the mean of the distance.
    """

    def dens(p):
        r = MAS_PC / p
        return norm.pdf(p, 3.0, 0.9) * r**4 * math.exp(-r / L_PC)

    def quad(f):
        return integrate.quad(f, 1e-3, 3.0 + 12 * 0.9, limit=200, points=[0.3, 1.0, 3.0])[0]

    z0 = quad(dens)
    m1 = quad(lambda p: p * dens(p)) / z0
    m2, m4 = (quad(lambda p, k=k: (p - m1) ** k * dens(p)) / z0 for k in (2, 4))
    return m1, m2, m4, quad(lambda p: MAS_PC / p * dens(p)) / z0


def test_prior_predictive_and_martingale():
    s, k, n = 0.3, 1000, 2000
    m1, m2, m4, r_today = posterior_moments()
    res = preposterior(
        WEAK, DistanceModel(), [make_measurement("parallax", s)], goal=decide_goal("400 pc"), prior=PRIOR,
        n_future=k, n_inner=n, seed=21, thresholds=(),
    )  # fmt: skip
    out = res.outcomes[0]
    # predictive of the new parallax: today's posterior of the parallax plus the new noise
    y = out.y[:, 0]
    var_y = m2 + s**2
    assert y.mean() == pytest.approx(m1, abs=4 * math.sqrt(var_y / k))
    m4_y = m4 + 6 * m2 * s**2 + 3 * s**4  # 4th central moment of a sum of independent variables
    assert y.var(ddof=1) == pytest.approx(var_y, abs=4 * math.sqrt((m4_y - var_y**2) / k))
    assert m1 < 2.5  # the prior matters: the posterior mean parallax is well below the measured 3.0 mas
    # law of total expectation: E over futures of E[r | future] = E[r | today]
    # (a posterior mean is a martingale; e.g. Bernardo & Smith 1994, Bayesian Theory, Sect. 3.3).
    # Errors: the spread of the futures' means over K, and each future's importance-sampling error (mean_se,
    # common to the futures through the shared inner draws, so not divided by K)
    means = out.mean["distance_pc"]
    inner = math.sqrt(np.mean(out.mean_se["distance_pc"] ** 2))
    assert means.mean() == pytest.approx(r_today, abs=4 * math.sqrt(means.var(ddof=1) / k + inner**2))
    assert res.today.mean["distance_pc"] == pytest.approx(r_today, abs=4 * res.today.mean_se["distance_pc"])
    assert res.settings["prior"]["name"] == "edsd"
    assert 0 < out.effective_size.min() < n  # the future posteriors are weighted


@pytest.mark.parametrize("plx_error", [0.9, 0.5])
def test_prior_weighted_interval_and_probability_match_quadrature(plx_error):
    # today's 90 % interval of the distance and P(r < 400 pc) under the prior, against quadrature of the
    # posterior (scipy.integrate.quad, scipy.optimize.brentq). Quantile error: sqrt(p (1 - p) / ESS) / f(q)
    # (asymptotic order statistics with the Kish effective size, Owen 2013, Sect. 9.3); Kish's size ignores
    # that these weights grow with r, and the spread over seeds is about twice that here, so 2 x 4 errors.
    # With a 0.5 mas error no draw has parallax <= 0 (every draw is evaluated).
    star = ObservedStar(WEAK.mean, WEAK.cov * np.where(np.arange(6) == 2, plx_error / 0.9, 1.0)[:, None]
                        * np.where(np.arange(6) == 2, plx_error / 0.9, 1.0)[None, :])  # fmt: skip
    assert star.sigma[2] == pytest.approx(plx_error, rel=1e-12)
    res = preposterior(
        star, DistanceModel(), [make_measurement("parallax", 0.3)], goal=decide_goal("400 pc"), prior=PRIOR,
        n_future=20, n_inner=50_000, seed=21, thresholds=(),
    )  # fmt: skip

    def dens(p):
        r = MAS_PC / p
        return norm.pdf(p, 3.0, plx_error) * r**4 * math.exp(-r / L_PC)

    top = 3.0 + 12 * plx_error
    z0 = integrate.quad(dens, 1e-3, top, limit=200, points=[0.3, 1.0, 3.0])[0]

    def cdf(p):  # of the parallax posterior
        return integrate.quad(dens, 1e-3, p, limit=200)[0] / z0

    ends, slopes = [], []
    for level in (0.05, 0.95):  # P(r < R) = P(plx > 1000 / R)
        p = optimize.brentq(lambda p, q=level: 1.0 - cdf(p) - q, 0.01, top, xtol=1e-12)
        ends.append(MAS_PC / p)
        slopes.append(dens(p) / z0 * p**2 / MAS_PC)  # density of r: f(plx) |dplx / dr|
    ess = res.today.effective_size
    se = math.sqrt(0.05 * 0.95 / ess) * math.hypot(1 / slopes[0], 1 / slopes[1])
    assert res.today.width90["distance_pc"] == pytest.approx(ends[1] - ends[0], abs=2 * 4 * se)
    # unweighted Gaussian draws would give 1000 / (3 -+ 1.645 sigma) - about 460 pc (0.9 mas), 200 pc (0.5 mas)
    gaussian = MAS_PC / (3.0 - Z90 * plx_error) - MAS_PC / (3.0 + Z90 * plx_error)
    assert abs(res.today.width90["distance_pc"] - gaussian) > 3 * 2 * 4 * se  # the prior matters
    p400 = 1.0 - cdf(MAS_PC / 400.0)
    assert res.today.value == pytest.approx(p400, abs=2 * 4 * math.sqrt(p400 * (1 - p400) / ess))


def test_prior_martingale_of_perihelion_distance():
    # the same property for d_ph of the straight line, against a large importance-reweighted run of today
    k, n = 800, 2000
    res = preposterior(
        WEAK, StraightLine(), [make_measurement("parallax", 0.3)], goal=decide_goal("5 pc"), prior=PRIOR,
        n_future=k, n_inner=n, seed=22, thresholds=(),
    )  # fmt: skip
    ref = reweight(WEAK, PRIOR, n=400_000, seed=8)
    d = StraightLine().evaluate(ref.values).distance_pc
    today = float(np.dot(ref.weights, d))
    se_ref = math.sqrt(np.dot(ref.weights, (d - today) ** 2) / ref.effective_size)
    out = res.outcomes[0]
    means = out.mean["distance_pc"]
    inner = math.sqrt(np.mean(out.mean_se["distance_pc"] ** 2))
    assert means.mean() == pytest.approx(today, abs=4 * math.sqrt(means.var(ddof=1) / k + inner**2 + se_ref**2))


# ------------------------------------------------------------------------------------------------ the demo star

KESTREL = read_star_file(demo_path("kestrel-4.toml"))
RV = make_measurement("radial_velocity", 0.3)


def test_demo_star_expected_probability_is_today():
    # E over futures of P_k = P today (law of total expectation again, for the indicator of d_ph < D)
    res = preposterior(KESTREL, "straight_line", [RV], goal=decide_goal("20000 au"), n_future=400, seed=3)
    p = res.outcomes[0].probabilities["20000 au"]
    today = res.today.probabilities["20000 au"]
    tol = 4 * math.sqrt(p.var(ddof=1) / p.size + today * (1 - today) / res.n_inner)
    assert p.mean() == pytest.approx(today, abs=tol)
    assert res.today.value == today
    d = res.to_dict()
    assert d["outcomes"][0]["lands_on_mean"]["label"] == "lands on today's mean"
    assert d["inner_resolution"] == pytest.approx(1 / 2000, rel=1e-12)
    assert d["seed"] == 3


def test_precision_settings_share_the_draws():
    grid = [1e6, 0.3, 0.0]
    res = preposterior(KESTREL, "straight_line", ["radial_velocity"], precisions=grid, n_future=60, n_inner=500,
                       seed=9)  # fmt: skip
    one = preposterior(KESTREL, "straight_line", [RV], n_future=60, n_inner=500, seed=9)
    assert len(res.outcomes) == 3
    assert res.outcomes[1].p_settle == one.p_settle
    np.testing.assert_array_equal(res.outcomes[1].value, one.outcomes[0].value)
    assert res.outcomes[0].p_settle == float(res.today.settled)  # a useless measurement settles nothing new
    # exact rv: the future width is set by the other inputs only (never wider than at 0.3 km/s)
    assert res.outcomes[2].expected_width("time_myr") < res.outcomes[1].expected_width("time_myr")


# ----------------------------------------------------------------------------------------- seeds and ordering


def test_seed_reproducibility_and_measurement_order():
    plx = make_measurement("parallax", 0.02)
    common = dict(goal=decide_goal("20000 au"), n_future=40, n_inner=400)
    a = preposterior(KESTREL, "straight_line", [plx, RV], seed=17, **common)
    b = preposterior(KESTREL, "straight_line", [RV, plx], seed=17, **common)
    c = preposterior(KESTREL, "straight_line", [plx, RV], seed=18, **common)
    assert a.to_dict() == b.to_dict()
    np.testing.assert_array_equal(a.outcomes[0].y, b.outcomes[0].y)
    assert not np.array_equal(a.outcomes[0].value, c.outcomes[0].value)
    assert a.seed == 17 and c.seed == 18
    g = preposterior(KESTREL, "straight_line", [plx, RV], seed=np.random.default_rng(4), **common)
    h = preposterior(KESTREL, "straight_line", [plx, RV], seed=g.seed, **common)
    assert g.to_dict() == h.to_dict()


# --------------------------------------------------------------------------------------------------- bad input


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        (dict(measurements={"colour": 0.1}), "input"),
        (dict(measurements={"radial_velocity": -0.1}), "radial_velocity precision"),
        (dict(measurements=["radial_velocity"], precisions=[0.3, -1.0]), "precisions"),
        (dict(measurements=["radial_velocity"]), "measurements"),
        (dict(n_future=5), "n_future"),
        (dict(n_inner=10), "n_inner"),
        (dict(alpha=0.5), "alpha"),
        (dict(alpha=0.0), "alpha"),
        (dict(goal="20000 au"), "goal"),
        (dict(goal=spread_goal("width90", "d_ph", "1000 au"), alpha=0.1), "alpha"),
        (dict(seed=-1), "seed"),
    ],
)
def test_bad_input_names_the_field(kwargs, field):
    args = dict(measurements=[RV], n_future=20, n_inner=100)
    args.update(kwargs)
    with pytest.raises(InputError) as err:
        preposterior(KESTREL, "straight_line", args.pop("measurements"), **args)
    assert err.value.field == field


# --------------------------------------------------------------------------------- row-wise weighted quantiles


@settings(max_examples=40, deadline=None, derandomize=True, database=None)
@given(st.integers(1, 40), st.integers(0, 2**31 - 1), st.booleans())
def test_row_quantiles_match_the_one_definition(n, seed, weighted):
    # equal weights: numpy's method="hazen" (Hyndman & Fan 1996, definition 5); weighted: summary's definition
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(3, n)).round(1)  # rounding makes ties
    w = rng.uniform(0.1, 2.0, size=(3, n)) if weighted else np.ones((3, n))
    w[0, : n // 2] = 0.0  # zero weight: left out, as draws with parallax <= 0
    got = _row_quantiles(x, w, (0.05, 0.5, 0.95))
    for r in range(3):
        keep = w[r] > 0
        if not keep.any():
            assert np.all(np.isnan(got[r]))
            continue
        if weighted:
            ref = weighted_quantiles(x[r, keep], [0.05, 0.5, 0.95], w[r, keep])
        else:
            ref = np.quantile(x[r, keep], [0.05, 0.5, 0.95], method="hazen")
        np.testing.assert_allclose(got[r], ref, rtol=1e-12, atol=1e-12)
