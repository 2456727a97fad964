"""What an encounter does and what an observer sees (perierr.encounter), against outside references.

Every check names its source beside it: two-body mechanics (the exact hyperbolic deflection), the impulse
integral done by scipy along the straight line, astropy (constants, distance modulus, units), scipy.stats
(the truncated normal), central finite differences (the log-gradients of the budget), numpy by hand (Monte
Carlo fractions, quantiles and standard deviations). Stars are invented. Straight-line runs with at most
20,000 draws; one orbit-model run of 5,000 draws.
"""

import math
import warnings

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import Distance, SkyCoord
from encounter_runs import run, star_of
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, stats

import perierr
from perierr.cautions import SHOWER
from perierr.encounter import (
    LINEAR_REACH,
    _differential_impulse,
    _geometry,
    _gm_sun,
    _log_gradient,
    comet_impulse,
    encounter_effects,
    parse_radii,
    peak_magnitude,
    peak_proper_motion,
    sun_impulse,
    truncated_normal,
)
from perierr.errors import InputError
from perierr.units import ENCOUNTER_LABELS

LN10 = math.log(10.0)
AU_PC = float((1 * u.au).to_value(u.pc))
#: G M_sun in pc (km/s)^2, from astropy (the outside reference for the module's constant)
GM_SUN = float((const.G * const.M_sun).to_value(u.pc * (u.km / u.s) ** 2))

# ---------------------------------------------------------------------------------------------- invented stars

#: Well measured, passing at about 20,000 au (0.097 pc, P(inside) about 1/2) at 28 km/s (an invented K dwarf).
WELL = dict(
    name="invented well-measured passer", ra=150.3, dec=-12.4, parallax=30.0, parallax_error=0.02,
    pmra=0.42, pmra_error=0.01, pmdec=-0.30, pmdec_error=0.01, radial_velocity=-28.0, radial_velocity_error=0.2,
    ra_error=0.02, dec_error=0.02, parallax_pmra_corr=-0.15, pmra_pmdec_corr=0.2,
    mass=0.7, mass_error=0.05, phot_g_mean_mag=10.2, phot_g_mean_mag_error=0.02,
)  # fmt: skip

#: The same path with (almost) no errors, for checks of the nominal geometry.
TINY = {
    **WELL, "name": "invented exact passer", "parallax_error": 1e-6, "pmra_error": 1e-6, "pmdec_error": 1e-6,
    "radial_velocity_error": 1e-5, "ra_error": 1e-6, "dec_error": 1e-6, "mass_error": 0.0,
    "phot_g_mean_mag_error": 0.0,
}  # fmt: skip

#: A weak parallax (20 %) whose perihelion straddles 100,000 au (for a distance prior).
WEAK = dict(
    name="invented weak-parallax passer", ra=40.0, dec=22.0, parallax=5.0, parallax_error=1.0,
    pmra=0.05, pmra_error=0.02, pmdec=0.03, pmdec_error=0.02, radial_velocity=-40.0, radial_velocity_error=0.5,
    mass=1.1, mass_error=0.1, phot_g_mean_mag=12.0, phot_g_mean_mag_error=0.01,
)  # fmt: skip




@pytest.fixture(scope="module")
def well():
    return run(star_of(WELL))


def astropy_line(obs):
    """Heliocentric position [pc] and velocity [km/s] of observable rows by astropy (ICRS), not perierr.frames."""
    obs = np.atleast_2d(obs)
    c = SkyCoord(
        ra=obs[:, 0] * u.deg, dec=obs[:, 1] * u.deg, distance=Distance(parallax=obs[:, 2] * u.mas),
        pm_ra_cosdec=obs[:, 3] * u.mas / u.yr, pm_dec=obs[:, 4] * u.mas / u.yr,
        radial_velocity=obs[:, 5] * u.km / u.s, frame="icrs",
    )  # fmt: skip
    return c.cartesian.xyz.to_value(u.pc).T, c.velocity.d_xyz.to_value(u.km / u.s).T


def quad_kick(mass, r0, vel, x):
    """|dv_comet - dv_sun| [m/s]: the full 3D pull of a star on a straight line, integrated by scipy.

    ``s(t) = r0 + vel t`` (t in pc / (km/s)); per component the integral of
    ``G M [(s - x) / |s - x|^3 - s / |s|^3]`` over all t, split at the Sun's and the comet's closest approach.
    """
    vv = vel @ vel
    cuts = sorted([-(r0 @ vel) / vv, ((x - r0) @ vel) / vv])
    pieces = [(-np.inf, cuts[0]), (cuts[0], cuts[1]), (cuts[1], np.inf)]
    out = []
    for k in range(3):
        def force(t, k=k):
            s = r0 + vel * t
            y = s - x
            return GM_SUN * mass * (y[k] / np.dot(y, y) ** 1.5 - s[k] / np.dot(s, s) ** 1.5)

        out.append(sum(integrate.quad(force, a, b, epsabs=0, epsrel=1e-11, limit=500)[0] for a, b in pieces))
    return float(np.linalg.norm(out)) * 1000.0


def hazen(x, q):
    """Quantiles by numpy's Hazen definition (Hyndman & Fan 1996, definition 5)."""
    return np.quantile(np.asarray(x), q, method="hazen")


# ---------------------------------------------------------------------------------------------- constants


def test_gravitational_constant_matches_astropy():
    # astropy.constants (CODATA G, IAU nominal M_sun): G M_sun in pc (km/s)^2
    assert _gm_sun() == pytest.approx(GM_SUN, rel=1e-12)
    # handbook value G M_sun = 4.3009e-3 pc (km/s)^2 (from memory)
    assert _gm_sun() == pytest.approx(4.3009e-3, rel=1e-4)
    # 2 G M_sun / (1 pc x 1 km/s) in m/s by astropy units arithmetic
    ref = (2 * const.G * const.M_sun / (1 * u.pc * 1 * u.km / u.s)).to_value(u.m / u.s)
    assert float(sun_impulse(1.0, 1.0, 1.0)) == pytest.approx(ref, rel=1e-12)


# ---------------------------------------------------------------------------------------------- impulse on the Sun


def hyperbolic_sun_kick(b_au, v_kms, mass_msun):
    """Exact two-body velocity change of the Sun [m/s] and the deflection angle of the relative orbit.

    Rutherford scattering of the relative orbit: tan(theta/2) = G (M + M_sun) / (b v^2) (Goldstein, Classical
    Mechanics, Sect. 3.10; Binney & Tremaine 2008, Sect. 3.1; from memory); the relative velocity turns by
    theta at constant speed, |dv_rel| = 2 v sin(theta/2), and the Sun takes the share M / (M + M_sun) of it.
    """
    mu = const.G * (mass_msun + 1.0) * const.M_sun
    b, v = b_au * u.au, v_kms * u.km / u.s
    theta = 2.0 * math.atan(float((mu / (b * v**2)).decompose()))
    dv = mass_msun / (mass_msun + 1.0) * 2.0 * v * math.sin(theta / 2.0)
    return float(dv.to_value(u.m / u.s)), theta


@pytest.mark.parametrize(
    ("b_au", "v_kms", "mass"), [(10_000, 14.0, 0.7), (50_000, 25.0, 1.2), (3_000, 40.0, 0.3), (100_000, 8.0, 2.0)]
)
def test_sun_impulse_is_the_small_angle_limit_of_the_hyperbola(b_au, v_kms, mass):
    exact, theta = hyperbolic_sun_kick(b_au, v_kms, mass)
    approx = float(sun_impulse(mass, b_au * AU_PC, v_kms))
    # the impulse approximation is 2 v M/(M+M_sun) tan(theta/2): relative excess 1/cos(theta/2) - 1 = theta^2/8 + ...
    assert theta < 1e-2
    assert approx / exact - 1.0 == pytest.approx(theta**2 / 8.0, rel=2e-2, abs=1e-13)
    assert abs(approx / exact - 1.0) < 1e-5


def test_sun_impulse_overstates_slow_close_encounters():
    # same exact two-body reference (Rutherford scattering; from memory): the excess grows as b v^2 shrinks
    cases = [(20_000, 20.0), (5_000, 10.0), (2_000, 4.0), (1_000, 2.0), (500, 1.0)]
    excess = []
    for b_au, v in cases:
        exact, theta = hyperbolic_sun_kick(b_au, v, 1.0)
        excess.append(float(sun_impulse(1.0, b_au * AU_PC, v)) / exact - 1.0)
        assert excess[-1] == pytest.approx(1.0 / math.cos(theta / 2.0) - 1.0, rel=1e-9, abs=1e-12)
    assert np.all(np.diff(excess) > 0)
    assert excess[0] < 1e-4 and excess[-1] > 0.5  # 1,000 au at 2 km/s: the approximation is off by > 50 %


@pytest.mark.parametrize(("b_au", "v_kms", "mass"), [(10_000, 14.0, 0.7), (70_000, 30.0, 1.5)])
def test_sun_impulse_is_the_integral_of_the_transverse_force(b_au, v_kms, mass):
    # the impulse approximation (Binney & Tremaine 2008, Sect. 7.2; from memory): the integral along the straight
    # line of G M b / (b^2 + v^2 t^2)^(3/2), here by scipy.integrate.quad (t in pc / (km/s))
    b = b_au * AU_PC

    def transverse(t):
        return GM_SUN * mass * b / (b * b + v_kms * v_kms * t * t) ** 1.5

    half = integrate.quad(transverse, 0.0, np.inf, epsabs=0, epsrel=1e-12)[0]
    assert float(sun_impulse(mass, b, v_kms)) == pytest.approx(2.0 * half * 1000.0, rel=1e-9)


# ---------------------------------------------------------------------------------------------- comets

OBS = np.array([
    [150.3, -12.4, 30.0, 0.35, -0.25, -28.0],
    [10.0, 50.0, 12.0, -3.0, 2.0, 15.0],
    [250.0, 5.0, 80.0, 1.0, 0.2, -60.0],
])  # fmt: skip


def test_geometry_matches_astropy():
    # astropy SkyCoord (ICRS) -> straight line: closest point b = r0 - (r0.v^) v^, direction v^
    r0, vel = astropy_line(OBS)
    v_hat = vel / np.linalg.norm(vel, axis=1)[:, None]
    b = r0 - np.sum(r0 * v_hat, axis=1)[:, None] * v_hat
    b_hat, got_v = _geometry(OBS)
    np.testing.assert_allclose(got_v, v_hat, atol=1e-12)
    np.testing.assert_allclose(b_hat, b / np.linalg.norm(b, axis=1)[:, None], atol=1e-10)


@pytest.mark.parametrize("row", [0, 1, 2])
@pytest.mark.parametrize(
    "where", ["near side 0.3 d", "near side 1.7 d", "far side 0.5 d", "off axis", "beyond the path 2 d"]
)
def test_differential_impulse_against_the_integrated_force(row, where):
    # scipy.integrate.quad of the full 3D pull on the comet minus that on the Sun, geometry by astropy
    r0, vel = (a[0] for a in astropy_line(OBS[row]))
    v = float(np.linalg.norm(vel))
    v_hat = vel / v
    b = r0 - (r0 @ v_hat) * v_hat
    d = float(np.linalg.norm(b))
    x = {
        "near side 0.3 d": 0.3 * b, "near side 1.7 d": 1.7 * b, "far side 0.5 d": -0.5 * b,
        "off axis": np.array([0.02, -0.03, 0.01]), "beyond the path 2 d": 2.0 * b + 0.01 * v_hat,
    }[where]  # fmt: skip
    mass = np.array([0.7])
    b_hat, got_v = _geometry(OBS[row : row + 1])
    got = _differential_impulse(mass, np.array([d]), np.array([v]), b_hat, got_v, x)[0]
    assert got == pytest.approx(quad_kick(0.7, r0, vel, x), rel=1e-8)
    if where.startswith("near"):  # the closed form of the near side, 2 G M r / (v d |d - r|), r < d and r > d
        r = float(np.linalg.norm(x))
        assert float(comet_impulse(0.7, d, v, r)) == pytest.approx(quad_kick(0.7, r0, vel, x), rel=1e-8)


def test_comet_positions_through_the_analysis_match_the_integrated_force():
    # scipy quad on the nominal straight line of astropy; a star with errors of 1e-6 of its values, exact mass
    star = star_of(TINY)
    r0, vel = (a[0] for a in astropy_line(star.mean))
    v_hat = vel / np.linalg.norm(vel)
    b = r0 - (r0 @ v_hat) * v_hat
    x_au = np.array([[30_000.0, -20_000.0, 10_000.0], 0.4 * b / AU_PC])
    enc = run(star, n=2_000, comet_positions=x_au).encounter
    for k, x in enumerate(x_au):
        got = enc.summaries[f"comet_impulse:position{k + 1}"].median
        assert got == pytest.approx(quad_kick(0.7, r0, vel, x * AU_PC), rel=1e-4)
    # the second comet sits on the near side at 0.4 d: the closed form of the module for that radius
    d, v = float(np.linalg.norm(b)), float(np.linalg.norm(vel))
    assert enc.summaries["comet_impulse:position2"].median == pytest.approx(
        float(comet_impulse(0.7, d, v, 0.4 * d)), rel=1e-4
    )


@pytest.mark.parametrize("ratio", [1e-4, 1e-3, 1e-2])
def test_near_side_comet_impulse_tends_to_the_tidal_limit(ratio):
    # tidal (differential) impulse for r << d: 2 G M r / (v d^2) (Rickman 1976; Binney & Tremaine 2008, Sect. 7.2;
    # from memory); the exact near-side factor is d / (d - r), so the excess is r / (d - r)
    d, v, mass = 0.1, 20.0, 0.9
    r = ratio * d
    tidal = (2 * const.G * mass * const.M_sun * r * u.pc / (v * u.km / u.s * (d * u.pc) ** 2)).to_value(u.m / u.s)
    got = float(comet_impulse(mass, d, v, r))
    assert got / tidal - 1.0 == pytest.approx(r / (d - r), rel=1e-6)
    # the same limit through the M/(v d^2) proxy, carried in its own unit label: 2 G r x proxy, by astropy units
    proxy = mass / (v * d * d) * u.Unit(ENCOUNTER_LABELS["strength_m_vd2"])
    assert got == pytest.approx((2 * const.G * r * u.pc * proxy).to_value(u.m / u.s), rel=1.1 * ratio)


def test_tiny_oort_radius_impulse_is_2_G_r_times_the_proxy_over_the_draws(well):
    # the tidal limit over the draws of a run (10 au against d ~ 17,000 au): medians agree to r/d;
    # 2 G r x proxy by astropy units in the proxy's own unit label
    enc = run(star_of(WELL), oort_radii=["10 au"]).encounter
    proxy = enc.summaries["strength_m_vd2"].median * u.Unit(ENCOUNTER_LABELS["strength_m_vd2"])
    tidal = (2 * const.G * 10 * u.au * proxy).to_value(u.m / u.s)
    assert enc.summaries["comet_impulse:10 au"].median == pytest.approx(tidal, rel=2e-3)


# ---------------------------------------------------------------------------------------------- what an observer sees


def test_peak_magnitude_is_the_difference_of_astropy_distance_moduli():
    # astropy Distance.distmod = 5 log10(d / 10 pc) (common practice, no source for the formula itself)
    rng = np.random.default_rng(3)
    m, d_ph, plx = rng.uniform(-1, 18, 50), rng.uniform(0.01, 3.0, 50), rng.uniform(0.5, 300.0, 50)
    ref = m + Distance(d_ph * u.pc).distmod.value - Distance(parallax=plx * u.mas).distmod.value
    np.testing.assert_allclose(peak_magnitude(m, d_ph, plx), ref, rtol=0, atol=1e-9)


def test_peak_proper_motion_rule_of_thumb_and_astropy():
    # the trade's rule of thumb (common practice, no source): about 10,600 au at about 14 km/s crosses the sky
    # at about 1 arcmin/yr at closest approach
    mu = float(peak_proper_motion(10_600 * AU_PC, 14.0))
    assert mu / 60.0 == pytest.approx(1.0, rel=0.05)
    # astropy units arithmetic: v / d as an angle per time (u.dimensionless_angles), in arcsec/yr
    rng = np.random.default_rng(4)
    d, v = rng.uniform(1e-3, 5.0, 40), rng.uniform(1.0, 200.0, 40)
    ref = (v * u.km / u.s / (d * u.pc)).to_value(u.arcsec / u.yr, equivalencies=u.dimensionless_angles())
    np.testing.assert_allclose(peak_proper_motion(d, v), ref, rtol=1e-9)


# ---------------------------------------------------------------------------------------------- mass draws


@pytest.mark.parametrize(("mean", "sigma"), [(0.68, 0.04), (0.2, 0.2), (0.1, 0.3), (1.5, 0.6)])
def test_truncated_normal_matches_scipy_truncnorm(mean, sigma):
    # scipy.stats.truncnorm at a = -mean/sigma, b = inf (the normal truncated at zero mass)
    n = 20_000
    x = truncated_normal(mean, sigma, n, np.random.default_rng(12))
    ref = stats.truncnorm(-mean / sigma, np.inf, loc=mean, scale=sigma)
    assert x.min() > 0
    s = math.sqrt(ref.var())
    assert abs(x.mean() - ref.mean()) < 4 * s / math.sqrt(n)  # 4 Monte Carlo standard errors
    # SE of a variance ~ sqrt((mu4 - s^4) / n); mu4 <= 9 s^4 for these shapes (a generous bound)
    assert abs(x.var() - ref.var()) < 4 * s * s * math.sqrt(8.0 / n)
    assert stats.kstest(x, ref.cdf).pvalue > 0.01  # fixed seed: a deterministic check


def test_truncated_normal_without_error_is_the_mass():
    # definition: no error -> the mass itself (no randomness)
    np.testing.assert_array_equal(truncated_normal(0.9, 0.0, 5, np.random.default_rng(0)), np.full(5, 0.9))


# ---------------------------------------------------------------------------------------------- budget


def closed_form(name, d, v, plx, mass, mag, radius):
    """log10 of each quantity (the peak magnitude itself), by the module's closed forms."""
    kind, _, label = name.partition(":")
    if kind == "peak_proper_motion":
        return math.log10(float(peak_proper_motion(d, v)))
    if kind == "peak_magnitude":
        return float(peak_magnitude(mag, d, plx))
    if kind == "sun_impulse":
        return math.log10(float(sun_impulse(mass, d, v)))
    if kind == "strength_m_vd":
        return math.log10(mass / (v * d))
    if kind == "strength_m_vd2":
        return math.log10(mass / (v * d * d))
    return math.log10(float(comet_impulse(mass, d, v, radius[label])))


@pytest.mark.parametrize("d", [0.05, 0.2])  # inside and outside the 20,000 au (0.097 pc) radius
@pytest.mark.parametrize(
    "name",
    ["peak_proper_motion", "peak_magnitude", "sun_impulse", "strength_m_vd", "strength_m_vd2",
     "comet_impulse:20000 au", "comet_impulse:100000 au"],
)  # fmt: skip
def test_log_gradient_matches_central_differences(name, d):
    # central finite differences (numpy only), step 1e-6 relative: error ~ h^2, far below the tolerance
    v, plx, mass, mag = 23.0, 15.0, 0.8, 9.0
    radius = {"20000 au": 20_000 * AU_PC, "100000 au": 100_000 * AU_PC}
    point = {"d": d, "v": v, "plx": plx, "mass": mass, "mag": mag}

    def f(**change):
        p = {**point, **change}
        return closed_form(name, p["d"], p["v"], p["plx"], p["mass"], p["mag"], radius)

    def diff(key):
        h = 1e-6 * point[key]
        return (f(**{key: point[key] + h}) - f(**{key: point[key] - h})) / (2 * h)

    grad, direct = _log_gradient(name, d, v, plx, mass, radius)
    assert grad[0] == 0.0  # no quantity depends on the time of perihelion
    np.testing.assert_allclose(grad[1:], [diff("d"), diff("v")], rtol=1e-6, atol=1e-9)
    expected = {"parallax": diff("plx"), "mass": diff("mass"), "magnitude": diff("mag")}
    for key, value in expected.items():
        assert direct.get(key, 0.0) == pytest.approx(value, rel=1e-6, abs=1e-9), key


@pytest.mark.parametrize("calibration", [{}, {"parallax_offset": (0.02, 0.3)}], ids=["plain", "zero-point"])
def test_budget_sigma_matches_the_monte_carlo_spread(calibration):
    a = run(star_of(WELL), **calibration)
    enc, mc = a.encounter, a.monte_carlo
    sigma = dict(zip(enc.budget.quantities, enc.budget.sigma))
    d, v = mc.valid_values(mc.perihelion.distance_pc)[0], mc.valid_values(mc.perihelion.speed_kms)[0]
    # by hand: std of log10(d v) over the draws (numpy) plus, independently, the variance of log10 M under the
    # truncated normal by scipy.stats.truncnorm.expect
    tn = stats.truncnorm(-0.7 / 0.05, np.inf, loc=0.7, scale=0.05)
    mean_log = tn.expect(np.log10)
    var_mass = tn.expect(lambda x: (np.log10(x) - mean_log) ** 2)
    mc_sigma = math.sqrt(np.var(np.log10(d * v)) + var_mass)
    assert sigma["sun_impulse"] == pytest.approx(mc_sigma, rel=0.03)  # linear vs MC for a well-measured star
    # and from the module's own summary: (log10 q84 - log10 q16) / 2 of the impulse (Gaussian in log, 5 %)
    s = enc.summaries["sun_impulse"]
    assert sigma["sun_impulse"] == pytest.approx(0.5 * math.log10(s.quantile(0.84) / s.quantile(0.16)), rel=0.05)
    # the peak proper motion, no mass: numpy std of log10(v / d) over the draws
    assert sigma["peak_proper_motion"] == pytest.approx(np.std(np.log10(v / d)), rel=0.03)
    # the peak magnitude: numpy variance of 5 log10(d_ph / d_now) over the (corrected) parallax draws, plus the
    # magnitude's own variance (independent); with a zero-point its error is in the draws' parallaxes
    plx = mc.valid_values(mc.samples.values[:, 2])[0]
    by_hand = math.sqrt(np.var(5 * np.log10(d * plx / 1000.0)) + 0.02**2)
    assert sigma["peak_magnitude"] == pytest.approx(by_hand, rel=0.03)
    if calibration:
        assert enc.budget.share("peak_magnitude")["parallax_zero_point"] > 0.1  # 0.3 mas of 0.02 mas: a large share


def test_budget_mass_and_magnitude_shares(well):
    b = well.encounter.budget
    # independent inputs: a linear share is (gradient x error)^2 / variance; d log10(M) / dM = 1 / (M ln 10)
    sigma = dict(zip(b.quantities, b.sigma))
    for name in ("sun_impulse", "strength_m_vd", "strength_m_vd2", "comet_impulse:100000 au"):
        assert b.share(name)["mass"] == pytest.approx((0.05 / (0.7 * LN10)) ** 2 / sigma[name] ** 2, rel=1e-9)
    # the magnitude enters the peak magnitude with gradient 1
    assert b.share("peak_magnitude")["magnitude"] == pytest.approx(0.02**2 / sigma["peak_magnitude"] ** 2, rel=1e-9)
    assert b.share("peak_proper_motion")["mass"] == 0.0 and b.share("peak_proper_motion")["magnitude"] == 0.0
    # Shapley shares of a variance sum to 1 (definition), where the budget is defined
    np.testing.assert_allclose(defined_rows(b).sum(axis=1), 1.0, atol=1e-9)
    assert set(b.inputs) >= {"parallax", "pmra", "pmdec", "radial_velocity", "mass", "magnitude"}


def defined_rows(budget):
    return budget.shapley[[i for i, q in enumerate(budget.quantities) if q not in budget.undefined]]


def test_near_side_budget_is_undefined_where_the_impulse_diverges(well):
    # 2 G M r / (v d |d - r|) diverges at d = r (closed form above): no linear budget for a radius within
    # LINEAR_REACH linear sigmas of d_ph (the module's rule; common practice, no source)
    b, lin = well.encounter.budget, well.linear
    d, sigma_d = lin.value[1], lin.sigma[1]
    near = {f"comet_impulse:{label}" for label, r in well.encounter.radii if abs(d - r) <= LINEAR_REACH * sigma_d}
    assert near == {"comet_impulse:20000 au"} == set(b.undefined)  # the test star passes at about 20,000 au
    row = b.share("comet_impulse:20000 au")
    assert all(math.isnan(x) for x in row.values()) and b.dominant("comet_impulse:20000 au") is None
    # the Monte Carlo shows why (numpy by hand): the impulse spans more than a decade between 5 % and 95 %
    s = well.encounter.summaries["comet_impulse:20000 au"]
    assert math.log10(s.quantile(0.95) / s.quantile(0.05)) > 1.0


def test_budget_without_mass_error_gives_the_mass_no_share():
    # an exact input carries no variance, so no share (definition of a variance share)
    b = run(star_of(WELL, mass_error=0.0), n=2_000).encounter.budget
    for name in ("sun_impulse", "strength_m_vd2", "comet_impulse:100000 au"):
        assert b.share(name)["mass"] == pytest.approx(0.0, abs=1e-15)
        assert sum(b.share(name).values()) == pytest.approx(1.0, abs=1e-9)


# ---------------------------------------------------------------------------------------------- P(inside)


def test_inside_probability_is_the_fraction_of_draws(well):
    enc, mc = well.encounter, well.monte_carlo
    d = mc.perihelion.distance_pc
    for t in enc.inside:
        # numpy by hand: the fraction of draws with d_ph < r
        assert t.probability == pytest.approx(np.mean(d < t.distance_pc), abs=1e-15)
        assert t.distance_pc == pytest.approx(float(u.Quantity(t.label).to_value(u.pc)), rel=1e-12)
        same = [m for m in mc.thresholds if m.label == t.label]
        assert same and same[0].probability == t.probability  # the Monte Carlo threshold of the same radius
    assert 0.05 < enc.inside[0].probability < 0.95  # the test star straddles 20,000 au


def test_inside_probability_under_a_distance_prior_is_the_weighted_fraction():
    a = run(star_of(WEAK), n=5_000, distance_prior="edsd:L=1000pc", oort_radii=["100000 au", "0.3 pc"])
    mc, enc = a.monte_carlo, a.encounter
    w, d = mc.samples.weights, mc.perihelion.distance_pc
    assert w is not None
    for t in enc.inside:  # numpy by hand: the weighted fraction (NaN distances never pass)
        assert t.probability == pytest.approx(np.sum(w[d < t.distance_pc]) / np.sum(w), rel=1e-12)
    assert 0.02 < enc.inside[0].probability < 0.98


# ---------------------------------------------------------------------------------------------- properties


def encounter_numbers(enc):
    return {name: (s.median, s.quantile(0.05), s.quantile(0.95), s.mean) for name, s in enc.summaries.items()}


_FEW = settings(max_examples=4, deadline=None)


@_FEW
@given(seed=st.integers(0, 2**32 - 1))
def test_same_seed_same_encounter_numbers(seed):
    # reproducibility (seeded numpy Generator): identical numbers, to the bit
    star = star_of(WELL)
    a = run(star, n=1_000, seed=seed, comet_positions=[[20_000.0, 5_000.0, -3_000.0]]).encounter
    b = run(star, n=1_000, seed=seed, comet_positions=[[20_000.0, 5_000.0, -3_000.0]]).encounter
    assert encounter_numbers(a) == encounter_numbers(b)
    assert [t.probability for t in a.inside] == [t.probability for t in b.inside]


@_FEW
@given(mass=st.floats(0.08, 5.0), frac=st.floats(0.0, 0.5))
def test_mass_in_kg_is_the_mass_in_msun(mass, frac):
    # astropy units: a mass Quantity in kg is the same mass in M_sun (round-off of one conversion only)
    in_sun = run(star_of(WELL, mass=mass, mass_error=mass * frac), n=1_000, seed=5).encounter
    kg = (mass * u.Msun).to(u.kg)
    in_kg = run(star_of(WELL, mass=kg, mass_error=kg * frac), n=1_000, seed=5).encounter
    assert in_kg.mass["mass_msun"] == pytest.approx(mass, rel=1e-12)
    a, b = encounter_numbers(in_sun), encounter_numbers(in_kg)
    assert a.keys() == b.keys()
    for name in a:
        np.testing.assert_allclose(b[name], a[name], rtol=1e-9, err_msg=name)


@_FEW
@given(
    positions=st.lists(
        st.tuples(*[st.floats(-2e5, 2e5).filter(lambda x: abs(x) > 100.0)] * 3), min_size=1, max_size=3
    )
)
def test_comet_positions_in_pc_are_the_same_in_au(positions):
    # astropy units: au -> pc (round-off of one conversion only)
    au = np.array(positions)
    a = run(star_of(WELL), n=1_000, seed=6, comet_positions=au).encounter
    b = run(star_of(WELL), n=1_000, seed=6, comet_positions=(au * u.au).to(u.pc)).encounter
    for k in range(len(positions)):
        name = f"comet_impulse:position{k + 1}"
        np.testing.assert_allclose(encounter_numbers(b)[name], encounter_numbers(a)[name], rtol=1e-9)


@_FEW
@given(seed=st.integers(0, 2**32 - 1))
def test_focusing_masses_are_the_ones_used(seed):
    # by hand (numpy): the M/(v d) proxy from the masses focusing drew and the focused d_ph, v_ph, quantiles by
    # numpy's Hazen definition; and 2 G M / (d v) with astropy's G
    a = run(star_of(WELL, mass_error=0.2), n=2_000, seed=seed, focusing=True)
    mc, enc = a.monte_carlo, a.encounter
    m = mc.perihelion.diagnostics.focusing_mass_msun
    assert m is not None and np.std(m) > 0.1  # drawn, not the nominal mass
    d, v = mc.perihelion.distance_pc, mc.perihelion.speed_kms
    for name, x in (("strength_m_vd", m / (v * d)), ("sun_impulse", 2 * GM_SUN * m / (d * v) * 1000.0)):
        s = enc.summaries[name]
        np.testing.assert_allclose(
            [s.quantile(0.05), s.median, s.quantile(0.95)], hazen(x, [0.05, 0.5, 0.95]), rtol=1e-12
        )
    assert enc.mass["draws"] == "the masses focusing drew"


def test_reported_mass_is_the_mass_used_with_a_user_focusing_model():
    from perierr.models.focusing import Focused

    model = Focused(perierr.make_model("straight_line"), mass_msun=2.0, mass_error_msun=0.0)
    a = run(star_of(WELL), n=1_000, model=model)
    used = a.monte_carlo.perihelion.diagnostics.focusing_mass_msun
    d, v = a.monte_carlo.perihelion.distance_pc, a.monte_carlo.perihelion.speed_kms
    # numpy by hand: the proxy is computed with the focusing masses ...
    assert a.encounter.summaries["strength_m_vd"].median == pytest.approx(hazen(used / (v * d), 0.5), rel=1e-12)
    # ... so the reported mass and its error should be those masses (2.0, exact), and the mass gets no share
    assert a.encounter.mass["mass_msun"] == pytest.approx(2.0) and a.encounter.mass["mass_error_msun"] == 0.0
    assert a.encounter.budget.share("sun_impulse")["mass"] == pytest.approx(0.0, abs=1e-12)


def test_head_on_star_gives_infinite_impulses_without_runtime_warnings():
    # the closed forms' limits as d -> 0: 2 G M / (d v) and v / (4.74 d) -> +inf, m + 5 log10(d / d_now) -> -inf
    star = star_of(WELL, pmra=0.0, pmdec=0.0, pmra_error=0.0, pmdec_error=0.0, ra_error=0.0, dec_error=0.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        enc = run(star, n=500).encounter
    assert enc.summaries["sun_impulse"].median == math.inf
    assert enc.summaries["peak_proper_motion"].median == math.inf
    assert enc.summaries["peak_magnitude"].median == -math.inf


# ---------------------------------------------------------------------------------------------- bad input


@pytest.mark.parametrize("radii", [[-1], ["-5 au"], [0], ["0 au"], ["20000"], ["abc"], ["20000 kg"], [], [math.nan]])
def test_bad_oort_radii_are_refused_naming_the_field(radii, well):
    # RULES: bad input raises InputError naming the field (before any work in analyze)
    with pytest.raises(InputError) as exc:
        run(star_of(WELL), n=1_000, oort_radii=radii)
    assert exc.value.field == "oort_radii"
    with pytest.raises(InputError) as exc:
        encounter_effects(well.star, well.monte_carlo, radii=radii)
    assert exc.value.field == "oort_radii"


@pytest.mark.parametrize("radius", [20_000 * u.au, 0.1])
def test_a_single_radius_is_read_or_refused_naming_the_field(radius):
    # RULES: never a stray TypeError (perierr.errors: a caller tells refusals from bugs by PerierrError)
    try:
        parsed = parse_radii(radius)
    except InputError as exc:
        assert exc.field == "oort_radii"
    else:
        assert parsed[0][1] == pytest.approx(float(u.Quantity(radius, u.pc).to_value(u.pc)), rel=1e-12)


def test_budget_dominant_of_an_unknown_quantity_names_the_field(well):
    # RULES: bad input raises InputError naming the field; EncounterBudget.share does
    with pytest.raises(InputError) as exc:
        well.encounter.budget.share("no such quantity")
    assert exc.value.field == "quantity"
    with pytest.raises(InputError):
        well.encounter.budget.dominant("no such quantity")


@pytest.mark.parametrize(
    "positions",
    [[[1.0, 2.0]], [[1.0, 2.0, 3.0, 4.0]], [[math.nan, 0.0, 0.0]], [[0.0, 0.0, 0.0]], [[1e4, 0, 0], [0, 0, 0]],
     [[1.0, 2.0, 3.0]] * u.deg, ["50000 au,10,100"], ["50000,10,20"], [[math.inf, 1.0, 1.0]]],
)  # fmt: skip
def test_bad_comet_positions_are_refused_naming_the_field(positions, well):
    # RULES: bad input raises InputError naming the field
    with pytest.raises(InputError) as exc:
        run(star_of(WELL), n=1_000, comet_positions=positions)
    assert exc.value.field == "comet_positions"
    with pytest.raises(InputError) as exc:
        encounter_effects(well.star, well.monte_carlo, comet_positions=positions)
    assert exc.value.field == "comet_positions"


# ---------------------------------------------------------------------------------------------- missing inputs


def test_star_without_mass_has_no_impulses_and_says_why():
    enc = run(star_of(WELL, mass=None, mass_error=None), n=2_000).encounter
    assert not any(k.startswith(("sun_impulse", "strength", "comet_impulse")) for k in enc.summaries)
    assert {"peak_proper_motion", "peak_magnitude"} <= set(enc.summaries)
    assert any("impulse" in why and "mass" in why for why in enc.missing)
    assert enc.mass == {} and "mass" not in enc.budget.inputs
    assert len(enc.inside) == 2  # P(inside) needs no mass
    # RULES: every output mentioning comets or the Oort cloud carries the caution
    assert enc.to_dict()["caution"] == SHOWER


def test_star_without_magnitude_has_no_peak_magnitude_and_says_why():
    enc = run(star_of(WELL, phot_g_mean_mag=None, phot_g_mean_mag_error=None), n=2_000).encounter
    assert "peak_magnitude" not in enc.summaries and "sun_impulse" in enc.summaries
    assert any("peak magnitude" in why and "magnitude" in why for why in enc.missing)
    assert enc.magnitude == {} and "magnitude" not in enc.budget.inputs


# ---------------------------------------------------------------------------------------------- the orbit model


def test_orbit_model_run_matches_hand_computations():
    # one default-model run (5,000 draws): numpy by hand on its perihelia; astropy units for the proper motion
    star = perierr.read_star_file(perierr_demo_path())
    a = run(star, n=5_000, seed=21, model=perierr.analysis.DEFAULT_MODEL)
    mc, enc = a.monte_carlo, a.encounter
    d, v = mc.valid_values(mc.perihelion.distance_pc)[0], mc.valid_values(mc.perihelion.speed_kms)[0]
    mu = (v * u.km / u.s / (d * u.pc)).to_value(u.arcsec / u.yr, equivalencies=u.dimensionless_angles())
    s = enc.summaries["peak_proper_motion"]
    np.testing.assert_allclose([s.quantile(0.05), s.median, s.quantile(0.95)], hazen(mu, [0.05, 0.5, 0.95]),
                               rtol=1e-9)  # fmt: skip
    for t in enc.inside:
        assert t.probability == pytest.approx(np.mean(mc.perihelion.distance_pc < t.distance_pc), abs=1e-15)
    b = enc.budget
    sigma = dict(zip(b.quantities, b.sigma))
    assert sigma["peak_proper_motion"] == pytest.approx(np.std(np.log10(v / d)), rel=0.05)  # linear vs MC
    np.testing.assert_allclose(defined_rows(b).sum(axis=1), 1.0, atol=1e-9)  # Shapley shares sum to 1
    d0, s0 = a.linear.value[1], a.linear.sigma[1]  # the module's rule for the diverging near-side impulse
    assert set(b.undefined) == {f"comet_impulse:{k}" for k, r in enc.radii if abs(d0 - r) <= LINEAR_REACH * s0}


def perierr_demo_path():
    from perierr.demo import demo_path

    return demo_path("kestrel-4.toml")
