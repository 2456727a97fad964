"""LinearResult.as_correlated(): the three outputs as correlated numbers of the ``uncertainties`` package."""

import numpy as np
import pytest
import uncertainties

import perierr
from perierr.models.focusing import Focused


def relative_gap(a, b) -> float:
    """Largest |a - b| in units of sqrt(C_ii C_jj) of b (the covariance's own scale, element by element)."""
    s = np.sqrt(np.diag(b))
    return float(np.max(np.abs(a - b) / np.outer(s, s)))


@pytest.mark.parametrize("focused", [False, True], ids=["straight_line", "focused_with_mass_error"])
def test_covariance_and_nominal_values_are_the_linear_ones(close_star, focused):
    model = perierr.StraightLine()
    if focused:  # the mass adds a nuisance variance g g^T var to J Sigma J^T
        model = Focused(model, mass_msun=0.8, mass_error_msun=0.2)
    lin = perierr.linearize(close_star, model)
    values = lin.as_correlated()
    assert len(values) == 3
    # uncertainties.covariance_matrix recomputes the covariance from the values' derivatives
    cov = np.array(uncertainties.covariance_matrix(values))
    assert relative_gap(cov, lin.cov) < 1e-12
    np.testing.assert_array_equal([v.nominal_value for v in values], lin.value)


def test_a_derived_quantity_has_the_linear_sigma(close_star):
    # d/v (the time-like ratio pc / (km/s)): first-order propagation by hand, sigma^2 = g C g^T with
    # g = (d(d/v)/dt, d(d/v)/dd, d(d/v)/dv) = (0, 1/v, -d/v^2) (Taylor series, e.g. Bevington & Robinson
    # 2003, eq. 3.13); C is the linear covariance of (t, d, v). The d-v correlation term matters.
    lin = perierr.linearize(close_star, perierr.StraightLine())
    t, d, v = lin.as_correlated()
    d0, v0 = lin.value[1], lin.value[2]
    g = np.array([0.0, 1.0 / v0, -d0 / v0**2])
    by_hand = float(np.sqrt(g @ lin.cov @ g))
    ratio = d / v
    assert ratio.nominal_value == pytest.approx(d0 / v0, rel=1e-15)
    assert ratio.std_dev == pytest.approx(by_hand, rel=1e-12)
    # and the correlation is not negligible here: ignoring it changes the sigma
    without = float(np.sqrt(g[1] ** 2 * lin.cov[1, 1] + g[2] ** 2 * lin.cov[2, 2]))
    assert abs(without / by_hand - 1) > 1e-3


def test_outputs_held_exact_stay_exact():
    # every input error zero: the linear covariance is zero and the values carry a sigma of exactly 0
    # (uncertainties.correlated_values normalizes zero variances by 1, its documented special case)
    star = perierr.ObservedStar.from_values(
        ra=120.5, dec=-12.25, parallax=25.0, parallax_error=0.0, pmra=3.1, pmra_error=0.0, pmdec=-4.2,
        pmdec_error=0.0, radial_velocity=-22.0, radial_velocity_error=0.0,
    )
    lin = perierr.linearize(star, perierr.StraightLine())
    assert [v.std_dev for v in lin.as_correlated()] == [0.0, 0.0, 0.0]
