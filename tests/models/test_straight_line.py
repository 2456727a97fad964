"""The straight-line (LMA) model: formulas, derivatives, worked examples, trade facts."""

import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose

from perierr import ObservedStar, StraightLine, analyze
from perierr.frames import cartesian_to_observables, observables_to_cartesian
from perierr.models.base import ForwardModel
from perierr.models.straight import perihelion_cartesian_jacobian, perihelion_from_cartesian
from perierr.units import AU_PER_PC, KMS_PER_MASYR_AT_1MAS, MYR_PER_PC_PER_KMS
from tests.conftest import random_observables


def test_closed_form_equals_cartesian_minimum():
    # Matthews 1994, QJRAS 35, 1: t_min = -x.v/|v|^2, d_min = |x + v t_min| (vector form)
    rng = np.random.default_rng(5)
    obs = random_observables(rng, 1000)
    ph = StraightLine().evaluate(obs).as_array()
    ref = perihelion_from_cartesian(observables_to_cartesian(obs))
    assert_allclose(ph, ref, rtol=1e-10, atol=1e-12)


def test_minimum_is_a_minimum_by_brute_force():
    # The separation at t_ph is below that at any nearby time (direct evaluation, no formula).
    rng = np.random.default_rng(8)
    obs = random_observables(rng, 50)
    xv = observables_to_cartesian(obs)
    ph = StraightLine().evaluate(obs)
    ts = ph.time_myr / MYR_PER_PC_PER_KMS
    for dt in (-1e-3, 1e-3):
        t = ts * (1 + dt) + dt
        sep = np.linalg.norm(xv[:, :3] + xv[:, 3:] * t[:, None], axis=1)
        assert np.all(sep >= ph.distance_pc * (1 - 1e-12))


def test_analytic_jacobian_matches_finite_differences():
    # Analytic vs numerical derivative (as in the `uncertainties` package's own tests).
    rng = np.random.default_rng(9)
    model = StraightLine()
    for obs in random_observables(rng, 25):
        analytic = model.jacobian(obs)
        numeric = ForwardModel.jacobian(model, obs)
        scale = np.abs(analytic).max(axis=1, keepdims=True)
        assert np.all(np.abs(analytic - numeric) <= 1e-5 * scale + 1e-12)


def test_cartesian_jacobian_of_perihelion():
    rng = np.random.default_rng(10)
    xv = observables_to_cartesian(random_observables(rng, 20))
    jac = perihelion_cartesian_jacobian(xv)
    h = 1e-6 * np.abs(xv).max(axis=1)
    for j in range(6):
        e = np.zeros(6)
        e[j] = 1
        num = (perihelion_from_cartesian(xv + h[:, None] * e) - perihelion_from_cartesian(xv - h[:, None] * e)) / (
            2 * h[:, None]
        )
        assert_allclose(jac[:, :, j], num, rtol=1e-5, atol=1e-9 * np.abs(num).max())


def test_sky_motion_at_closest_approach_is_about_an_arcminute_per_year():
    # Rule of thumb (common practice, no source): a star passing at ~10,600 au with ~14 km/s
    # relative speed crosses the sky at about one arcminute per year at closest approach.
    d_pc = 10_600 / AU_PER_PC
    star_xv = np.array([d_pc, 0.0, 0.0, 0.0, 14.0, 0.0])  # at perihelion: velocity perpendicular
    obs = cartesian_to_observables(star_xv)
    mu_arcmin_per_yr = np.hypot(obs[3], obs[4]) / 1000 / 60
    assert abs(mu_arcmin_per_yr - 1.0) < 0.05
    ph = StraightLine().evaluate(obs[None, :])
    assert_allclose(ph.distance_pc[0] * AU_PER_PC, 10_600, rtol=1e-9)
    assert abs(ph.time_myr[0]) < 1e-12


def test_head_on_arrival_time_from_astropy_units():
    # A star 20 pc away approaching head-on at 20 km/s arrives after 1 pc/(km/s), which astropy's units
    # convert to 0.97779 Myr (astropy.units, IAU pc and Julian year); it passes through the Sun (d_ph = 0).
    import astropy.units as u

    want = (20 * u.pc / (20 * u.km / u.s)).to_value(u.Myr)
    obs = np.array([[30.0, 10.0, 1000 / 20.0, 0.0, 0.0, -20.0]])
    ph = StraightLine().evaluate(obs)
    assert ph.time_myr[0] == pytest.approx(want, rel=1e-12)
    assert ph.distance_pc[0] == 0.0


def test_published_worked_example_past_encounter():
    # Mamajek et al. 2015, ApJL 800, L17, arXiv:1502.04655 ("The closest known flyby of a star to the Solar
    # System"). Outputs read from the paper's abstract: perihelion 52 (+23, -14) kau, 70 (+15, -10) kyr ago
    # (1 sigma). Inputs: position 07h20m03.254s -08d46m49.90s (J2000) and radial velocity 82.4 +/- 0.3 km/s,
    # proper motion (-40.3 +/- 0.2, -114.8 +/- 0.4) mas/yr read in an encyclopedia summary that cites the paper;
    # the paper's trigonometric parallax 166 +/- 28 mas is from memory. The paper integrates Galactic orbits;
    # over 70 kyr straight lines agree to well within the quoted precision (1 kau, 1.5 kyr).
    star = ObservedStar.from_values(
        ra=(7 + 20 / 60 + 3.254 / 3600) * 15, dec=-(8 + 46 / 60 + 49.90 / 3600), parallax=166.0, parallax_error=28.0,
        pmra=-40.3, pmra_error=0.2, pmdec=-114.8, pmdec_error=0.4, radial_velocity=82.4, radial_velocity_error=0.3,
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = analyze(star, n_samples=400_000, seed=2015)
    d = result.monte_carlo.summaries["distance_pc"]
    t = result.monte_carlo.summaries["time_myr"]
    kau = AU_PER_PC / 1000
    assert abs(d.median * kau - 52) < 1.0
    assert abs((d.quantiles[0.84] - d.median) * kau - 23) < 1.5
    assert abs((d.median - d.quantiles[0.16]) * kau - 14) < 1.0
    assert abs(t.median * 1000 + 70) < 1.5
    assert abs((t.quantiles[0.84] - t.median) * 1000 - 10) < 1.5  # later = less negative
    assert abs((t.median - t.quantiles[0.16]) * 1000 - 15) < 1.5


def test_transverse_velocity_constant():
    # 4.74047 km/s per (mas/yr) / mas, the standard astrometric constant (IAU au, Julian year).
    obs = np.array([[0.0, 0.0, 100.0, 1000.0, 0.0, 0.0]])  # 10 pc, 1 arcsec/yr
    xv = observables_to_cartesian(obs)
    assert_allclose(np.linalg.norm(xv[0, 3:]), 10 * KMS_PER_MASYR_AT_1MAS, rtol=1e-14)


from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


def _motion(limit):
    # zero or at least 1e-6 in size: squares of values near 1e-160 underflow, which no star has
    return st.one_of(st.just(0.0), st.floats(1e-6, limit), st.floats(-limit, -1e-6))


@settings(max_examples=300, deadline=None)
@given(
    ra=st.floats(0, 360), dec=st.floats(-89, 89), plx=st.floats(0.5, 500),
    pmra=_motion(2000), pmdec=_motion(2000), rv=_motion(200),
)
def test_lma_invariants(ra, dec, plx, pmra, pmdec, rv):
    # Geometry of a straight line (common practice, no source): the closest approach is no farther
    # than today's distance, comes in the future exactly when the star approaches (rv < 0), the
    # speed is the space velocity, and the sky position does not matter.
    if pmra == pmdec == rv == 0.0:
        return  # no motion, no perihelion (refused by the propagation layer)
    obs = np.array([[ra, dec, plx, pmra, pmdec, rv], [0.0, 0.0, plx, pmra, pmdec, rv]])
    ph = StraightLine().evaluate(obs)
    dist = 1000 / plx
    assert np.all(ph.distance_pc <= dist * (1 + 1e-12))
    if abs(rv) > 1e-6:
        assert np.sign(ph.time_myr[0]) == -np.sign(rv)
    v = np.linalg.norm(observables_to_cartesian(obs[0])[3:])
    assert_allclose(ph.speed_kms[0], v, rtol=1e-9, atol=1e-12)
    assert_allclose(ph.as_array()[0], ph.as_array()[1], rtol=1e-9, atol=1e-12)
