"""The planner under a distance prior: weak and non-positive parallaxes, the posterior what-if.

The invented star below has a weak parallax (3.0 +- 0.9 mas, 30 % error); every other value is invented
too. The straight-line model keeps the file fast.
"""

import math
import warnings

import numpy as np
import pytest
from scipy import integrate, stats

import perierr
from perierr.errors import InputError, PerierrWarning
from perierr.plan import common_draws, gain_curves, make_measurement, plan, what_if
from perierr.star import ObservedStar
from perierr.summary import weighted_quantiles
from perierr.units import PARALLAX

PRIOR = "edsd:L=1350pc"
L_PC = 1350.0
MODEL = "straight_line"
N_WHATIF = 3000


def weak_star(parallax=3.0):
    """An invented star with a weak parallax (not a real object); no correlations."""
    return ObservedStar.from_values(
        name="invented weak-parallax star", ra=150.0, dec=20.0, ra_error=0.05, dec_error=0.05,
        parallax=parallax, parallax_error=0.9, pmra=0.4, pmra_error=0.08, pmdec=-0.3, pmdec_error=0.08,
        radial_velocity=-60.0, radial_velocity_error=1.5,
    )  # fmt: skip


STAR = weak_star()


def quiet(fn, *args, **kwargs):
    """Run with the expected cautions of a weak parallax silenced (they are asserted elsewhere)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return fn(*args, **kwargs)


def edsd_distance_posterior(parallax, sigma, length):
    """Grid of distances and the normalized CDF of the EDSD posterior of one Gaussian parallax.

    p(r | parallax) proportional to r^2 exp(-r / L) N(parallax; 1000 / r, sigma) (Bailer-Jones 2015, PASP 127,
    994, eqs. 2 and 18), integrated with scipy's cumulative trapezoid rule on a fine grid.
    """
    r = np.geomspace(1.0, 40_000.0, 400_001)  # relative step 2.6e-5
    log_post = 2 * np.log(r) - r / length + stats.norm.logpdf(parallax, 1000.0 / r, sigma)
    dens = np.exp(log_post - log_post.max())
    cdf = integrate.cumulative_trapezoid(dens, r, initial=0.0)
    return r, dens / cdf[-1], cdf / cdf[-1]


def grid_quantile(r, cdf, q):
    return float(np.interp(q, cdf, r))


@pytest.fixture(scope="module")
def weak_plan():
    """The weak star planned end to end under the EDSD prior: a what-if, a goal, curves and the budget."""
    goal = perierr.plan.spread_goal("width90", "t_ph", "5 Myr")
    return quiet(
        plan, STAR, model=MODEL, measure={"parallax": 0.1}, goals=[goal], solve_for=["parallax"], n=3000,
        n_whatif=N_WHATIF, seed=21, distance_prior=PRIOR, n_points=4,
        budget_options={"n_outer": 100, "width": False, "n_boot": 10},
    )  # fmt: skip


def test_weak_parallax_planned_end_to_end(weak_plan):
    p = weak_plan
    # the global budget needs parallax / error >= 5.5 (conditional Gaussian draws): left out and said so
    assert p.budget is None
    assert any(c.code == "budget-not-computed" and "5.5" in c.message for c in p.cautions)
    assert p.curves is not None and p.required and p.what_if is not None
    assert p.prior["name"] == "edsd" and p.prior["parameters"] == {"L_pc": L_PC}
    # the what-if's linear parts exist (nominal parallax > 0), including the linear budgets
    assert p.what_if.budget_current is not None and p.what_if.linear_improved is not None
    # the improved t_ph interval under the prior: an exact-ish parallax leaves the rv error (1.5 km/s) and the
    # remaining parallax error; t_ph = -r v_r / v^2 (straight line, common practice, no source) so its 90 % width
    # is 2 x 1.645 x sigma_t with sigma_t/t = hypot(sigma_r/r, sigma_v/v) to first order
    wi = p.what_if
    d = wi.mc_improved.summaries["time_myr"]
    sig_plx = (1 / 0.9**2 + 1 / 0.1**2) ** -0.5
    rel = math.hypot(sig_plx / 3.0, 1.5 / 60.0)
    width = d.quantile(0.95) - d.quantile(0.05)
    assert width == pytest.approx(2 * 1.6448536 * rel * abs(d.median), rel=0.1)
    # the goal (90 % width of t_ph <= 5 Myr) is solved for the parallax: the answer meets it when fed back
    r = p.required[0]
    assert r.status == "reachable" and r.achieved <= 5.0
    assert r.settings["effective_size_at_precision"] > 0
    # the whole plan renders to strict JSON
    import json

    json.dumps(p.to_dict(), allow_nan=False)


def test_today_equals_analyze_under_the_prior(weak_plan):
    # analyze and the plan sample the same posterior the same way (here: MCMC, the reweighting effective size
    # being too small for this weak parallax); they agree within their Monte Carlo errors
    a = quiet(perierr.analyze, STAR, model=MODEL, distance_prior=PRIOR, n_samples=N_WHATIF, seed=21,
              compare=False)
    today = weak_plan.today
    assert today.samples.method == a.monte_carlo.samples.method == "mcmc"
    for q in ("time_myr", "distance_pc", "speed_kms"):
        s_plan, s_an = today.summaries[q], a.monte_carlo.summaries[q]
        for level in (0.16, 0.5, 0.84):
            err = math.hypot(s_plan.quantile_error(level), s_an.quantile_error(level))
            # asymptotic order-statistic errors (Stuart & Ord, Kendall's Advanced Theory of Statistics, 10.10)
            assert s_plan.quantile(level) == pytest.approx(s_an.quantile(level), abs=5 * err)


def test_parallax_measurement_narrows_as_the_grid_posterior(weak_plan):
    wi = weak_plan.what_if
    assert wi.settings["samplers"]["improved"] == "reweight"  # the sharpened likelihood reweights well
    s = wi.mc_improved.samples
    dist = 1000.0 / s.values[:, PARALLAX]
    got = weighted_quantiles(dist, [0.05, 0.5, 0.95], s.weights)
    sig_new = (1 / 0.9**2 + 1 / 0.1**2) ** -0.5  # inverse-variance combination (Taylor 1997, Sect. 7.2)
    r, dens, cdf = edsd_distance_posterior(3.0, sig_new, L_PC)
    ess = s.effective_size
    for q, value in zip((0.05, 0.5, 0.95), got):
        ref = grid_quantile(r, cdf, q)
        # asymptotic standard error of a sample quantile sqrt(q (1 - q) / n) / f(x_q) (Stuart & Ord 10.10),
        # with the effective sample size for n
        se = math.sqrt(q * (1 - q) / ess) / float(np.interp(ref, r, dens))
        assert value == pytest.approx(ref, abs=5 * se)
    # narrower than today's posterior by far: today's 90 % interval of the distance (grid reference)
    r0, _, cdf0 = edsd_distance_posterior(3.0, 0.9, L_PC)
    today_width = grid_quantile(r0, cdf0, 0.95) - grid_quantile(r0, cdf0, 0.05)
    assert got[2] - got[0] < 0.05 * today_width


def test_the_prior_is_kept_in_the_improved_answer():
    # the same measurement with and without the prior, on the same common draws
    m = [make_measurement("parallax", 0.1)]
    with_prior = quiet(what_if, STAR, MODEL, m, n=6000, seed=4, distance_prior=PRIOR, prior_method="reweight")
    without = quiet(what_if, STAR, MODEL, m, n=6000, seed=4)
    med_prior = weighted_quantiles(1000.0 / with_prior.mc_improved.samples.values[:, PARALLAX], [0.5],
                                   with_prior.mc_improved.samples.weights)[0]  # fmt: skip
    med_none = np.median(1000.0 / without.mc_improved.samples.values[:, PARALLAX])
    # without a prior the median distance is 1000 / parallax (the median maps through a monotone function)
    assert med_none == pytest.approx(1000.0 / 3.0, rel=2e-3)
    # with it, the EDSD posterior median (grid quadrature); the shift is the prior's r^2 exp(-r/L) pull
    sig_new = (1 / 0.9**2 + 1 / 0.1**2) ** -0.5
    r, dens, cdf = edsd_distance_posterior(3.0, sig_new, L_PC)
    expected_shift = grid_quantile(r, cdf, 0.5) - 1000.0 / 3.0
    assert expected_shift > 1.0  # about 1.3 pc: several Monte Carlo errors
    assert med_prior - med_none == pytest.approx(expected_shift, abs=0.35)


def test_measuring_an_input_without_influence_changes_nothing():
    # straight-line perihelion: d_ph = r v_t / v, t_ph = -r v_r / v^2 (common practice, no source): ra does not
    # enter, and with no correlations measuring it leaves every other input as it was
    m = [make_measurement("ra", 0.001)]
    with pytest.warns(PerierrWarning, match="effective sample size"):
        wi = what_if(STAR, MODEL, m, n=3000, seed=8, distance_prior=PRIOR, prior_method="reweight")
    for q in ("time_myr", "distance_pc", "speed_kms"):
        a, b = wi.mc_current.summaries[q], wi.mc_improved.summaries[q]
        for level in (0.05, 0.5, 0.95):
            assert b.quantile(level) == pytest.approx(a.quantile(level), rel=1e-12)
    assert wi.effective_size[1] == pytest.approx(wi.effective_size[0], rel=1e-12)


def test_effective_sample_size_reported(weak_plan):
    wi = weak_plan.what_if
    w = wi.mc_improved.samples.weights
    kish = 1.0 / np.sum((w / w.sum()) ** 2)  # Kish 1965, Survey Sampling, Sect. 11.7
    assert wi.settings["effective_size"]["improved"] == pytest.approx(kish, rel=1e-12)
    assert wi.prior_improved.effective_size == pytest.approx(kish, rel=1e-12)
    assert 0.9 * N_WHATIF < kish <= N_WHATIF  # a likelihood 9x narrower than today's: nearly equal weights
    assert weak_plan.prior["today_effective_size"] == pytest.approx(weak_plan.today.samples.effective_size)
    c = weak_plan.curves
    assert set(c.effective_size) == {"today", *c.inputs}
    # better parallaxes need weights that vary less: the effective size grows along the parallax curve
    assert np.all(np.diff(c.effective_size["parallax"]) > 0)
    assert c.effective_size["parallax"][-1] > 0.9 * 3000


def test_curve_point_equals_the_reweighted_what_if():
    # one precision of the curve and the what-if of the same measurement share their common draws: the same
    # weighted statistics (Hazen quantiles of the weighted CDF, Hyndman & Fan 1996 definition 5)
    draws = common_draws(3000, seed=3)
    c = quiet(gain_curves, STAR, MODEL, inputs=["parallax"], precisions={"parallax": [0.2, 0.1]}, draws=draws,
              distance_prior=PRIOR)  # fmt: skip
    wi = quiet(what_if, STAR, MODEL, [make_measurement("parallax", 0.1)], draws=draws, distance_prior=PRIOR,
               prior_method="reweight")  # fmt: skip
    lo, hi = wi.mc_improved.summaries["distance_pc"].interval(0.9)
    assert c.curves["parallax"]["distance_pc.width90"][-1] == pytest.approx(hi - lo, rel=1e-9)
    assert c.curves["parallax"]["distance_pc.median"][-1] == pytest.approx(
        wi.mc_improved.summaries["distance_pc"].median, rel=1e-9
    )


def test_same_seed_same_result():
    # forced reweighting keeps this fast (MCMC is seeded by the same integer, as in analyze)
    kw = dict(model=MODEL, measure={"radial_velocity": 0.5}, n=1000, n_whatif=1500, seed=99, distance_prior=PRIOR,
              prior_method="reweight", n_points=3, budget=False, curves=True)  # fmt: skip
    a, b = quiet(plan, STAR, **kw), quiet(plan, STAR, **kw)
    for q in ("time_myr", "distance_pc"):
        assert a.what_if.mc_improved.summaries[q].median == b.what_if.mc_improved.summaries[q].median
        assert a.today.summaries[q].quantile(0.95) == b.today.summaries[q].quantile(0.95)
    np.testing.assert_array_equal(a.curves.curves["parallax"]["distance_pc.width90"],
                                  b.curves.curves["parallax"]["distance_pc.width90"])  # fmt: skip


def test_nonpositive_parallax_refused_without_prior_with_a_pointer():
    star = weak_star(parallax=-0.4)
    with pytest.raises(InputError) as info:
        plan(star, model=MODEL, curves=False, budget=False)
    assert info.value.field == "parallax"
    assert "without a distance prior" in info.value.expected and "distance_prior=" in info.value.expected
    with pytest.raises(InputError, match="distance_prior="):
        gain_curves(star, MODEL, n=500)


@pytest.mark.slow
def test_nonpositive_parallax_planned_under_the_prior():
    # a parallax of -0.4 +- 0.9 mas: analyze samples it by MCMC (its nominal parallax cannot be inverted); so
    # does the planner, and the linearized parts are left out (None) with a note
    star = weak_star(parallax=-0.4)
    p = quiet(plan, star, model=MODEL, measure={"parallax": 0.1}, n=1000, n_whatif=1500, seed=2,
              distance_prior=PRIOR, curves=False, budget=True)  # fmt: skip
    assert p.what_if.linear_current is None and p.what_if.budget_current is None and p.budget is None
    assert p.today.samples.method == "mcmc"
    assert any(c.code == "no-linearization" for c in p.cautions)
    # the improved likelihood (parallax -0.4 +- 0.0994 mas) lies almost wholly at parallax <= 0: the posterior
    # is the prior's far tail; its median distance from the grid posterior restricted to r > 0
    s = p.what_if.mc_improved.samples
    got = weighted_quantiles(1000.0 / s.values[:, PARALLAX], [0.5], s.weights)[0]
    r, _, cdf = edsd_distance_posterior(-0.4, (1 / 0.9**2 + 1 / 0.1**2) ** -0.5, L_PC)
    assert got == pytest.approx(grid_quantile(r, cdf, 0.5), rel=0.05)
