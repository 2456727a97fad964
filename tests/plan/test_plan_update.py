"""Covariance what-if update and measurement parsing (perierr.plan.update)."""

import astropy.units as u
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from perierr.errors import InputError
from perierr.plan import make_measurement, parse_measure, update_covariance, updated_star
from perierr.plan.update import to_catalogue
from perierr.star import ObservedStar


def invented_star():
    """An invented star (not a real object)."""
    return ObservedStar.from_values(
        ra=80.0, dec=60.0, ra_error=0.03, dec_error=0.02, parallax=25.0, parallax_error=0.04,
        pmra=3.0, pmra_error=0.04, pmdec=1.0, pmdec_error=0.05, radial_velocity=-25.0,
        radial_velocity_error=0.8, ra_parallax_corr=0.5, parallax_pmra_corr=-0.4,
    )


def test_inverse_variance_combination_of_two_measurements():
    cov = np.diag([4.0, 1.0, 9.0])
    new = update_covariance(cov, 2, 2.0)
    # textbook weighted mean of two independent measurements: 1/sigma^2 = 1/3^2 + 1/2^2
    # (Taylor 1997, An Introduction to Error Analysis, 2nd ed., Sect. 7.2)
    assert new[2, 2] == pytest.approx(1.0 / (1 / 9.0 + 1 / 4.0), rel=1e-14)
    np.testing.assert_array_equal(new[:2, :2], cov[:2, :2])


@settings(max_examples=60, deadline=None)
@given(
    arrays(np.float64, (4, 4), elements=st.floats(-2, 2)),
    st.integers(0, 3),
    st.floats(0.05, 20.0),
)
def test_update_matches_information_form(a, index, s):
    cov = a @ a.T + 0.3 * np.eye(4)
    new = update_covariance(cov, index, s)
    e = np.zeros(4)
    e[index] = 1.0
    # information form of the Gaussian measurement update: inv(S') = inv(S) + e e^T / s^2
    # (Bar-Shalom, Li & Kirubarajan 2001, Sect. 5.2)
    expected = np.linalg.inv(np.linalg.inv(cov) + np.outer(e, e) / s**2)
    np.testing.assert_allclose(new, expected, rtol=1e-8, atol=1e-10)
    # a measurement never adds uncertainty: S - S' is positive semi-definite
    assert np.linalg.eigvalsh(cov - new).min() > -1e-10


def test_exact_measurement_is_gaussian_conditioning_and_repeat_combines():
    rng = np.random.default_rng(4)
    a = rng.normal(size=(3, 3))
    cov = a @ a.T + 0.1 * np.eye(3)
    exact = update_covariance(cov, 0, 0.0)
    # Gaussian conditioning on x_0: S_rest - S_r0 S_0r / S_00 (any multivariate-normal textbook)
    cond = cov[1:, 1:] - np.outer(cov[1:, 0], cov[0, 1:]) / cov[0, 0]
    np.testing.assert_allclose(exact[1:, 1:], cond, rtol=1e-12)
    assert exact[0, 0] == 0.0
    # two measurements at s1, s2 equal one at 1/s^2 = 1/s1^2 + 1/s2^2 (inverse-variance combination)
    twice = update_covariance(update_covariance(cov, 1, 0.5), 1, 0.7)
    once = update_covariance(cov, 1, (1 / 0.5**2 + 1 / 0.7**2) ** -0.5)
    np.testing.assert_allclose(twice, once, rtol=1e-12)
    grid = update_covariance(cov, 2, np.array([1.0, 0.1]))
    assert grid.shape == (2, 3, 3)
    np.testing.assert_allclose(grid[1], update_covariance(cov, 2, 0.1), rtol=1e-15)


def test_measurement_units_and_ra_conversion():
    # astropy units: 150 m/s is 0.15 km/s
    assert make_measurement("rv", 150 * u.m / u.s).precision == pytest.approx(0.15, rel=1e-14)
    assert parse_measure("radial_velocity=0.15 km/s").precision == pytest.approx(0.15, rel=1e-14)
    assert parse_measure("parallax=20 uas").precision == pytest.approx(0.02, rel=1e-14)
    # ra_error is of alpha* = alpha cos(dec): at dec = 60 deg, 0.01 mas of alpha* is 0.02 mas of alpha
    m = make_measurement("ra", 0.01, dec=60.0)
    assert m.precision == pytest.approx(0.02 / 3.6e6, rel=1e-12)
    assert float(to_catalogue("ra", m.precision, dec=60.0)) == pytest.approx(0.01, rel=1e-12)
    assert m.label == "ra to 0.01 mas"


def test_updated_star_shrinks_correlated_parallax():
    star = invented_star()
    new = updated_star(star, [make_measurement("ra", 0.001, dec=star.mean[1])])
    # ra is correlated with parallax (rho = 0.5): parallax variance shrinks by ~rho^2 (Gaussian conditioning)
    assert new.sigma[2] ** 2 / star.sigma[2] ** 2 == pytest.approx(1 - 0.25 * 0.03**2 / (0.03**2 + 0.001**2), rel=1e-6)
    assert new.notes[-1] == "what-if: ra to 0.001 mas"


def test_errors():
    with pytest.raises(InputError, match="expected one of"):
        make_measurement("velocity", 0.1)
    with pytest.raises(InputError, match=">= 0"):
        make_measurement("parallax", -0.1)
    with pytest.raises(InputError, match="quantity such as"):
        make_measurement("parallax", "0.1 km/s")
    with pytest.raises(InputError, match="INPUT=PRECISION"):
        parse_measure("radial_velocity 0.1")
    with pytest.raises(InputError, match="finite standard errors"):
        update_covariance(np.eye(2), 0, -1.0)
    with pytest.raises(InputError, match="celestial pole"):
        make_measurement("ra", 0.1, dec=90.0)
