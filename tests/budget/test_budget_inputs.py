"""Budget inputs beyond the six observables (the star's mass), and how shares read in reports and JSON."""

import json
import re
import warnings

import numpy as np
import pytest

from perierr import ObservedStar, analyze
from perierr.budget import global_budget
from perierr.errors import PerierrWarning
from perierr.models import StraightLine
from perierr.models.focusing import Focused, hyperbolic_perihelion
from perierr.report import format_analysis
from perierr.report.shares import format_share


def slow_star():
    """An invented slow, close encounter where the star's own gravity matters (not a real star)."""
    return ObservedStar.from_values(
        name="slow invented", ra=40.0, dec=10.0, parallax=100.0, parallax_error=0.05,
        pmra=0.08, pmra_error=0.002, pmdec=-0.06, pmdec_error=0.002, radial_velocity=-1.0,
        radial_velocity_error=0.01, ra_error=0.02, dec_error=0.02, ra_pmra_corr=0.4, mass=0.5, mass_error=0.2,
    )


def quiet_analyze(star, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return analyze(star, **kw)


def test_mass_derivative_matches_finite_differences_of_the_hyperbola():
    # central differences of the closed-form pericentre (Murray & Dermott 1999, Sect. 2.5), step 1e-4 Msun
    star = slow_star()
    model = Focused(StraightLine(), mass_msun=0.5, mass_error_msun=0.2)
    raw = StraightLine().evaluate(star.mean[None, :])
    h = 1e-4
    qp, vp = hyperbolic_perihelion(raw.distance_pc, raw.speed_kms, 0.5 + h)
    qm, vm = hyperbolic_perihelion(raw.distance_pc, raw.speed_kms, 0.5 - h)
    want = np.array([0.0, (qp - qm)[0] / (2 * h), (vp - vm)[0] / (2 * h)])
    np.testing.assert_allclose(model.mass_jacobian(star.mean), want, rtol=1e-6, atol=0)


def test_mass_is_an_input_of_the_linear_budget_under_focusing():
    star = slow_star()
    # the straight line: the mass's share is checked against the hyperbola around the straight-line encounter
    a = quiet_analyze(star, model="straight_line", focusing=True, n_samples=5_000, seed=3)
    b = a.budget
    assert b.inputs == ("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity", "mass")
    # the mass is independent of the astrometry: Shapley share = J_M^2 sigma_M^2 / Var
    # (Owen & Prieur 2017, SIAM/ASA JUQ 5, 986), with J_M from finite differences of the hyperbola
    raw = StraightLine().evaluate(star.mean[None, :])
    h = 1e-4
    qp, vp = hyperbolic_perihelion(raw.distance_pc, raw.speed_kms, 0.5 + h)
    qm, vm = hyperbolic_perihelion(raw.distance_pc, raw.speed_kms, 0.5 - h)
    for q, j_m in (("distance_pc", (qp - qm)[0] / (2 * h)), ("speed_kms", (vp - vm)[0] / (2 * h))):
        k = ("time_myr", "distance_pc", "speed_kms").index(q)
        assert b.share(q)["mass"] == pytest.approx(j_m**2 * 0.2**2 / b.variance[k], rel=1e-5)
    assert b.share("speed_kms")["mass"] > 0.5  # this slow encounter's speed error is set by the mass
    assert b.share("time_myr")["mass"] == 0.0  # focusing leaves t_ph alone (module docstring)
    # the linear variance includes the mass term, sigma^2 = J Sigma J^T + J_M^2 sigma_M^2, in the budget and in
    # the reported linear sigma alike
    jsj = a.linear.jacobian[1] @ a.star.cov @ a.linear.jacobian[1]
    assert b.variance[1] == pytest.approx(jsj + ((qp - qm)[0] / (2 * h) * 0.2) ** 2, rel=1e-5)
    assert a.linear.sigma[1] ** 2 == pytest.approx(b.variance[1], rel=1e-12)
    # and the Monte Carlo spread of v_ph (truncated-normal mass draws) agrees with it within 10 %
    assert a.monte_carlo.summaries["speed_kms"].std == pytest.approx(a.linear.sigma[2], rel=0.1)
    doc = json.loads(json.dumps(a.to_dict()))
    assert doc["budget"]["inputs"] == list(b.inputs)
    assert set(doc["budget"]["distance_pc"]) == set(b.inputs)
    for q in ("time_myr", "distance_pc", "speed_kms"):
        assert doc["budget"][q] == pytest.approx(b.share(q), abs=0)


def test_without_mass_error_the_mass_is_not_an_input():
    star = slow_star()
    model = Focused(StraightLine(), mass_msun=0.5, mass_error_msun=0.0)
    a = quiet_analyze(star, model=model, n_samples=2_000, seed=1)
    assert a.budget.inputs[-1] == "radial_velocity"


def test_global_budget_gives_the_mass_its_share_and_agrees_with_linear():
    star = slow_star()
    model = Focused(StraightLine(), mass_msun=0.5, mass_error_msun=0.05)
    g = global_budget(star, model, seed=4, n_outer=3000, width=False, outputs=("distance_pc", "speed_kms"))
    assert g.inputs[-1] == "mass"
    assert g.to_dict()["inputs"] == list(g.inputs)
    # a nearly linear case (mass error 10 %): Monte Carlo shares within 4 bootstrap standard errors of the
    # closed form (Owen & Prieur 2017), plus 0.005 for the remaining curvature
    se = g.variance.se
    assert np.all(np.abs(g.variance.shares - g.linear_variance) < 4 * se + 0.005)
    assert g.variance.share("speed_kms")["mass"] > 0.2
    assert set(g.groups["by_kind"].players) == {"position", "parallax", "proper_motion", "radial_velocity", "mass"}


@pytest.mark.parametrize(
    ("value", "kwargs", "text"),
    [
        (-1e-9, {}, "0.0%"),
        (-0.0004, {}, "0.0%"),
        (-0.0006, {}, "-0.1%"),  # a covariance contribution keeps its sign
        (1.0000004, {"bounded": True}, "100.0%"),
        (1.0006, {"bounded": True}, "100.0%"),
        (-0.0006, {"bounded": True}, "0.0%"),
        (0.3624, {}, "36.2%"),
        (-0.0002, {"decimals": 3, "percent": False}, "0.000"),
        (float("nan"), {}, "undefined"),
    ],
)
def test_format_share(value, kwargs, text):
    # common practice, no source: a share is never printed as -0.0 % or above 100 %
    assert format_share(value, **kwargs) == text


def test_report_prints_every_input_and_no_negative_zero_or_excess():
    star = slow_star()
    a = quiet_analyze(star, focusing=True, n_samples=5_000, seed=3, parallax_offset=(-0.02, 0.01))
    text = format_analysis(a)
    section = text.split("Who sets the error")[1].split("largest share")[0]
    for label in ("ra", "pmra", "radial_velocity", "parallax zero-pt", "star mass"):
        assert re.search(rf"^  {re.escape(label)}\s", section, flags=re.M), label
    percents = [float(x) for x in re.findall(r"(-?\d+\.\d)%", section)]
    assert len(percents) == 4 * 8
    assert "-0.0%" not in section
    shapley = [float(x) for x in re.findall(r"(-?\d+\.\d)% \(", section)]
    assert all(0.0 <= x <= 100.0 for x in shapley)


def test_what_if_budget_keeps_the_mass():
    # the planner's linear budgets use the same inputs as analyze(): the mass stays an input
    from perierr.plan import make_measurement, what_if

    star = slow_star()
    model = Focused(StraightLine(), mass_msun=0.5, mass_error_msun=0.2)
    wi = what_if(star, model, [make_measurement("radial_velocity", 0.001, dec=10.0)], n=2_000, seed=1)
    a = quiet_analyze(star, model=model, n_samples=2_000, seed=1)
    assert wi.budget_current.inputs == a.budget.inputs == tuple(a.budget.inputs)
    np.testing.assert_allclose(wi.budget_current.shapley, a.budget.shapley, atol=1e-12)
    # a better radial velocity leaves the mass an even larger share of Var(v_ph)
    assert wi.budget_improved.share("speed_kms")["mass"] > wi.budget_current.share("speed_kms")["mass"]


def test_global_budget_mass_draws_follow_the_truncated_normal():
    # the game maps a standard-normal deviate z to the mass with the same quantile of the normal truncated
    # at zero (scipy.stats.truncnorm) that the Monte Carlo draws from
    from scipy.stats import norm, truncnorm

    model = Focused(StraightLine(), mass_msun=0.1, mass_error_msun=0.1)
    star = slow_star()
    z = np.array([-3.0, -1.0, 0.0, 1.5])
    ph = model.evaluate_nuisance(np.repeat(star.mean[None, :], 4, axis=0), z[:, None], reference=star.mean)
    masses = truncnorm.ppf(norm.cdf(z), -1.0, np.inf, loc=0.1, scale=0.1)
    assert np.all(masses > 0)
    raw = StraightLine().evaluate(np.repeat(star.mean[None, :], 4, axis=0))
    q, _ = hyperbolic_perihelion(raw.distance_pc, raw.speed_kms, masses)
    np.testing.assert_allclose(ph.distance_pc, q, rtol=1e-12)


def test_a_stack_of_jacobians_broadcasts_against_one_covariance():
    from perierr.budget import linear_shapley

    rng = np.random.default_rng(8)
    a = rng.normal(size=(6, 6))
    cov = a @ a.T + np.eye(6)
    jac = rng.normal(size=(5, 3, 6))
    got = linear_shapley(jac, cov)
    np.testing.assert_allclose(got, np.stack([linear_shapley(j, cov) for j in jac]), atol=1e-13)
