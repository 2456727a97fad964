"""The planner with a parallax zero-point, error inflation and focusing: as analyze applies them.

Every star below is invented (not a real object); the zero-point values are invented too.
"""

import math
import warnings

import numpy as np
import pytest

import perierr
from perierr.calibration import ZERO_POINT
from perierr.errors import PerierrWarning
from perierr.models import StraightLine
from perierr.plan import plan
from perierr.star import ObservedStar
from perierr.units import PARALLAX

MODEL = "straight_line"
OFFSET = (-0.05, 0.03)  # zero-point Z and its error [mas]; corrected parallax = parallax - Z
N = 4000


def invented_star(**over):
    fields = dict(
        name="invented calibration star", ra=80.0, dec=-10.0, ra_error=0.02, dec_error=0.02,
        parallax=10.0, parallax_error=0.03, pmra=4.0, pmra_error=0.04, pmdec=-2.5, pmdec_error=0.04,
        radial_velocity=-20.0, radial_velocity_error=0.5, parallax_pmra_corr=0.2,
    )  # fmt: skip
    fields.update(over)
    return ObservedStar.from_values(**fields)


STAR = invented_star()


def quiet(fn, *args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return fn(*args, **kwargs)


def close(a, b, level=0.5, k=5.0):
    """Two summaries' quantiles agree within k combined Monte Carlo errors (asymptotic order statistics)."""
    err = math.hypot(a.quantile_error(level), b.quantile_error(level))
    return abs(a.quantile(level) - b.quantile(level)) <= k * err


def fd_jacobian(point, h=1e-6):
    """Central finite differences of the straight-line model (Press et al., Numerical Recipes, Sect. 5.7)."""
    model = StraightLine()
    cols = []
    for i in range(6):
        step = h * max(1.0, abs(point[i]))
        up, down = np.array(point, dtype=float), np.array(point, dtype=float)
        up[i] += step
        down[i] -= step
        f = model.evaluate(np.stack([up, down])).as_array()
        cols.append((f[0] - f[1]) / (2 * step))
    return np.stack(cols, axis=1)


@pytest.fixture(scope="module")
def zp_plan():
    return quiet(
        plan, STAR, model=MODEL, parallax_offset=OFFSET, measure={"parallax": 0.01}, curves=False, n=1000,
        n_whatif=N, seed=31, budget_options={"n_outer": 300, "width": False, "n_boot": 20},
    )  # fmt: skip


def test_zero_point_today_as_analyze(zp_plan):
    a = quiet(perierr.analyze, STAR, model=MODEL, parallax_offset=OFFSET, n_samples=N, seed=31, compare=False)
    # the same calibration (Lindegren et al. 2021, A&A 649, A4: corrected = parallax - Z; variances add)
    assert zp_plan.star.mean[PARALLAX] == pytest.approx(10.05, abs=1e-12)
    assert zp_plan.star.sigma[PARALLAX] == pytest.approx(math.hypot(0.03, 0.03), rel=1e-12)
    np.testing.assert_allclose(zp_plan.star.cov, a.star.cov, rtol=1e-14)
    today = zp_plan.what_if.mc_current
    for q in ("time_myr", "distance_pc", "speed_kms"):
        for level in (0.05, 0.5, 0.95):
            assert close(today.summaries[q], a.monte_carlo.summaries[q], level)
    # and it moved the answer: the median d_ph of the uncorrected star is off by about J_parallax x Z
    raw = quiet(plan, STAR, model=MODEL, measure={"parallax": 0.01}, curves=False, budget=False, n=1000,
                n_whatif=N, seed=31).what_if.mc_current  # fmt: skip
    j = fd_jacobian(STAR.mean)
    shift = today.summaries["distance_pc"].median - raw.summaries["distance_pc"].median
    assert shift == pytest.approx(-j[1, PARALLAX] * OFFSET[0], rel=0.05)
    assert zp_plan.calibration.zero_point_mas == OFFSET[0] and zp_plan.to_dict()["calibration"]


def test_zero_point_is_an_input_of_the_budgets(zp_plan):
    wi = zp_plan.what_if
    assert ZERO_POINT in wi.budget_current.inputs and ZERO_POINT in zp_plan.budget.inputs
    a = quiet(perierr.analyze, STAR, model=MODEL, parallax_offset=OFFSET, n_samples=1000, seed=1, compare=False)
    # an input independent of all others has the Shapley share of its own variance contribution
    # (Owen & Prieur 2017, SIAM/ASA JUQ 5, 986): (dd/dZ sigma_Z)^2 / Var(d), with dd/dZ = -dd/dparallax
    j = fd_jacobian(zp_plan.star.mean)
    cat = np.array(zp_plan.star.cov)
    cat[PARALLAX, PARALLAX] -= OFFSET[1] ** 2
    var_d = j[1] @ cat @ j[1] + (j[1, PARALLAX] * OFFSET[1]) ** 2
    expected = (j[1, PARALLAX] * OFFSET[1]) ** 2 / var_d
    assert wi.budget_current.share("distance_pc")[ZERO_POINT] == pytest.approx(expected, rel=1e-4)
    assert a.budget.share("distance_pc")[ZERO_POINT] == pytest.approx(expected, rel=1e-4)
    k = zp_plan.budget.inputs.index(ZERO_POINT)
    jd = zp_plan.budget.variance.outputs.index("distance_pc")
    assert zp_plan.budget.linear_variance[jd, k] == pytest.approx(expected, rel=1e-4)
    # the Monte Carlo share (300 outer draws) agrees with it within a few bootstrap half-widths
    est = zp_plan.budget.variance
    half = max(est.high[jd, k] - est.low[jd, k], 0.02)
    assert abs(est.shares[jd, k] - expected) < 2 * half
    # after a 0.01 mas parallax: the update acts on the corrected parallax (catalogue - Z), so the budget's total
    # variance is J S' J^T with S' the Kalman (inverse-variance) update of the calibrated covariance
    s0 = zp_plan.star.cov
    col = s0[:, PARALLAX]
    s1 = s0 - np.outer(col, col) / (s0[PARALLAX, PARALLAX] + 0.01**2)  # Kalman 1960 / Gelb 1974, Sect. 4.2
    assert wi.budget_improved.variance[1] == pytest.approx(j[1] @ s1 @ j[1], rel=1e-4)
    assert ZERO_POINT in wi.budget_improved.inputs
    # the zero-point's share shrinks with the parallax's: the new value measures their difference
    assert wi.budget_improved.share("distance_pc")[ZERO_POINT] < 0.2 * expected


def test_error_inflation_as_analyze():
    factors = {"radial_velocity": 3.0}
    p = quiet(plan, STAR, model=MODEL, error_inflation=factors, curves=False, budget=False, n=N, seed=5)
    a = quiet(perierr.analyze, STAR, model=MODEL, error_inflation=factors, n_samples=N, seed=5, compare=False)
    assert p.star.sigma[5] == pytest.approx(1.5, rel=1e-12)
    for level in (0.05, 0.95):
        assert close(p.today.summaries["time_myr"], a.monte_carlo.summaries["time_myr"], level)
    # the widths grow as the linear sigma (J S J^T, first-order propagation) with the inflated covariance
    plain = quiet(plan, STAR, model=MODEL, curves=False, budget=False, n=N, seed=5)
    j = fd_jacobian(STAR.mean)
    ratio = math.sqrt((j[0] @ p.star.cov @ j[0]) / (j[0] @ STAR.cov @ j[0]))
    w1 = np.subtract(*p.today.summaries["time_myr"].interval(0.9)[::-1])
    w0 = np.subtract(*plain.today.summaries["time_myr"].interval(0.9)[::-1])
    assert w1 / w0 == pytest.approx(ratio, rel=0.03)
    assert p.calibration.error_inflation["radial_velocity"] == 3.0


def slow_close_star():
    """An invented slow, close encounter where the star's own gravity matters (not a real object)."""
    return ObservedStar.from_values(
        name="invented slow star", ra=30.0, dec=40.0, ra_error=0.01, dec_error=0.01, parallax=50.0,
        parallax_error=0.02, pmra=0.012, pmra_error=0.002, pmdec=0.009, pmdec_error=0.002,
        radial_velocity=-3.0, radial_velocity_error=0.05, mass=1.0,
    )  # fmt: skip


def test_focusing_as_analyze():
    star = slow_close_star()
    p = quiet(plan, star, model=MODEL, focusing=True, curves=False, budget=False, n=N, seed=17)
    a = quiet(perierr.analyze, star, model=MODEL, focusing=True, n_samples=N, seed=17, compare=False)
    assert p.model["name"] == a.model["name"] == "straight_line+focusing"
    for q in ("distance_pc", "speed_kms"):
        for level in (0.16, 0.5, 0.84):
            assert close(p.today.summaries[q], a.monte_carlo.summaries[q], level)
    # on the same common draws, the focused d_ph is the two-body pericentre of the unfocused one:
    # q = |a| (e - 1), |a| = mu / v^2, e = sqrt(1 + b^2 v^4 / mu^2) (Murray & Dermott 1999, Sect. 2.5),
    # mu = G (1 + M) with G = 4.3009e-3 pc (km/s)^2 / Msun (IAU/astropy constants)
    bare = quiet(plan, star, model=MODEL, curves=False, budget=False, n=N, seed=17).today
    b, v = bare.perihelion.distance_pc, bare.perihelion.speed_kms
    mu = 4.300917e-3 * 2.0
    a_semi = mu / v**2
    e = np.sqrt(1 + b**2 * v**4 / mu**2)
    expected = np.median(a_semi * (e - 1))
    assert p.today.summaries["distance_pc"].median == pytest.approx(expected, rel=1e-4)
    assert expected < 0.97 * np.median(b)  # focusing matters here: a few per cent closer
