"""Edge behaviour of the orbit model (OrbitModel) against outside references (invented stars only).

References used here, none of them package code:

* straight-line motion (Newton's first law; Matthews 1994 formulas), with the heliocentric
  Cartesian state from astropy's own ICRS transformation (``straight_line_reference``);
* independent orbits of the Sun and the stars in galpy's MWPotential2014 integrated with scipy's
  DOP853 at rtol 1e-12 (``reference_relative_orbits`` of test_orbit_model.py), searched for the
  global minimum of the separation by ``brute_force_search`` of test_orbit_search.py;
* the rules written in the OrbitModel docstrings (options and their validation, describe(),
  window flags, the straight-line answer beyond MAX_DISTANCE_PC / MAX_SPEED_KMS, the info of the
  Monte Carlo path).
"""

import functools
import json
import math

import astropy.coordinates as coord
import astropy.units as u
import numpy as np
import pytest

from perierr.models.orbit import (
    OrbitModel,
    OrbitOptionError,
    Plummer,
    get_potential,
    get_solar_parameters,
)
from perierr.models.orbit import model as model_mod

from .test_orbit_model import REF_MYR_PER_TIME_UNIT, invented_stars
from .test_orbit_search import assert_global_minimum_or_flagged, brute_force_search

AU = float((1.0 * u.pc).to_value(u.au))  # au per pc, from astropy
# Newton's first law with a 1 Msun Plummer sphere at the Galactic centre: its tidal field is
# ~1e-11 of MWPotential2014's (as in test_orbit_model.test_negligible_potential_gives_the_straight_line)
NEGLIGIBLE = Plummer(mass_msun=1.0, b_pc=100.0)

# Tolerances against the scipy/galpy reference (as in test_orbit_search.py, common practice, no
# source): direct integration 1e-7 relative in distance and 1e-4 Myr in time; the Monte Carlo map
# adds twice its documented map_tolerance_au (0.5 au).
TOL_D_REL = 1e-7
TOL_T_MYR = 1e-4
TOL_MAP_PC = 2 * 0.5 / AU


# ------------------------------------------------------------------------------------ references
def straight_line_reference(obs):
    """Straight-line perihelion (time [Myr], distance [pc], speed [km/s]) of every row.

    The heliocentric ICRS position and velocity come from astropy (SkyCoord with distance =
    1/parallax); the closed form t = -x.v/|v|^2, d = |x + v t|, v = |v| is Newton's first law
    (Matthews 1994). Rotations do not change these dot products, so the frame does not matter.
    """
    obs = np.atleast_2d(np.asarray(obs, dtype=float))
    c = coord.SkyCoord(
        ra=obs[:, 0] * u.deg, dec=obs[:, 1] * u.deg, distance=(1000.0 / obs[:, 2]) * u.pc,
        pm_ra_cosdec=obs[:, 3] * u.mas / u.yr, pm_dec=obs[:, 4] * u.mas / u.yr,
        radial_velocity=obs[:, 5] * u.km / u.s, frame="icrs",
    )  # fmt: skip
    x = c.cartesian.xyz.to_value(u.pc).T
    v = c.velocity.d_xyz.to_value(u.km / u.s).T
    vv = np.sum(v * v, axis=1)
    t = -np.sum(x * v, axis=1) / np.where(vv > 0, vv, 1.0)
    d = np.linalg.norm(x + v * t[:, None], axis=1)
    return t * REF_MYR_PER_TIME_UNIT, d, np.sqrt(vv)


def observables_from_galactic(xyz_pc, uvw_kms):
    """Observables (ra, dec, parallax, pmra, pmdec, rv) of heliocentric Galactic Cartesian states (astropy)."""
    xyz, uvw = np.atleast_2d(xyz_pc), np.atleast_2d(uvw_kms)
    g = coord.SkyCoord(
        u=xyz[:, 0] * u.pc, v=xyz[:, 1] * u.pc, w=xyz[:, 2] * u.pc,
        U=uvw[:, 0] * u.km / u.s, V=uvw[:, 1] * u.km / u.s, W=uvw[:, 2] * u.km / u.s,
        frame="galactic", representation_type="cartesian", differential_type="cartesian",
    )  # fmt: skip
    c = g.icrs
    c.representation_type, c.differential_type = "spherical", "sphericalcoslat"
    return np.stack([
        c.ra.to_value(u.deg), c.dec.to_value(u.deg), 1000.0 / c.distance.to_value(u.pc),
        c.pm_ra_cosdec.to_value(u.mas / u.yr), c.pm_dec.to_value(u.mas / u.yr),
        c.radial_velocity.to_value(u.km / u.s),
    ], axis=1)  # fmt: skip


@functools.cache
def _reference_cached(key, shape, window):
    obs = np.frombuffer(key).reshape(shape)
    return brute_force_search(obs, window)


def orbit_reference(obs, window):
    """Global minimum of the separation in the window (scipy DOP853 in galpy's MWPotential2014), cached."""
    obs = np.ascontiguousarray(np.atleast_2d(obs), dtype=float)
    return _reference_cached(obs.tobytes(), obs.shape, tuple(float(w) for w in window))


def assert_matches_reference(ph, ref, *, rows=None, map_path=False):
    """Interior perihelia agree with the reference: 1e-7 relative (+ 1 au on the map path), 1e-4 Myr."""
    rows = np.arange(len(ph.distance_pc)) if rows is None else np.asarray(rows)
    tol_d = TOL_D_REL * ref["distance_pc"] + (TOL_MAP_PC if map_path else 0.0)
    assert np.all(ref["edge"] == 0)
    assert np.all(np.abs(ph.distance_pc[rows] - ref["distance_pc"]) <= tol_d)
    assert np.all(np.abs(ph.time_myr[rows] - ref["time_myr"]) <= TOL_T_MYR)


# ------------------------------------------------------------------------------- options, describe
FLOAT_OPTIONS = ("horizon_myr", "max_horizon_myr", "grid_step_myr", "grid_travel_pc", "leaf_radius_pc",
                 "map_tolerance_au", "rtol", "atol")  # fmt: skip
INT_OPTIONS = ("min_leaf_samples", "n_check", "chunk_size")


@pytest.mark.parametrize("option", FLOAT_OPTIONS)
@pytest.mark.parametrize("value", [0, 0.0, -1.5, math.inf, -math.inf, math.nan, "abc", None])
def test_float_options_must_be_positive_numbers(option, value):
    # OrbitModel docstring: these options are positive numbers (horizon_myr=None is the automatic
    # window); project rule: the error names the option, the value and what was expected
    if option == "horizon_myr" and value is None:
        assert OrbitModel(horizon_myr=None).horizon_myr is None
        return
    with pytest.raises(OrbitOptionError) as err:
        OrbitModel(**{option: value})
    assert str(err.value) == f"{option} = {value!r}: expected a positive number (an option of the orbit model)"


@pytest.mark.parametrize("option", INT_OPTIONS)
@pytest.mark.parametrize("value", [0, -3, 2.0, 1.5, "4", None])
def test_integer_options_must_be_positive_integers(option, value):
    with pytest.raises(OrbitOptionError) as err:
        OrbitModel(**{option: value})
    assert str(err.value) == f"{option} = {value!r}: expected a positive integer (an option of the orbit model)"


def test_smallest_valid_options_are_accepted():
    # the smallest values the docstring allows: any positive number, any positive integer (also numpy
    # integers), windows (t_min, t_max) with t_min <= 0 <= t_max that touch now on one side
    tiny = dict(max_horizon_myr=1e-300, grid_step_myr=1e-300, grid_travel_pc=1e-300, leaf_radius_pc=1e-300,
                map_tolerance_au=1e-300, rtol=1e-300, atol=1e-300)  # fmt: skip
    model = OrbitModel(horizon_myr=1e-300, min_leaf_samples=1, n_check=np.int64(1), chunk_size=1, **tiny)
    assert model.horizon_myr == (-1e-300, 1e-300)
    assert (model.min_leaf_samples, model.n_check, model.chunk_size) == (1, 1, 1)
    for bad in (1, 5, 3.0, True, "4"):
        with pytest.raises(OrbitOptionError, match=r"map_order = .*: expected 2, 3 or 4"):
            OrbitModel(map_order=bad)
    assert all(getattr(model, k) == 1e-300 for k in tiny)
    assert OrbitModel(horizon_myr=(0, 5)).describe()["horizon_myr"] == [0.0, 5.0]
    assert OrbitModel(horizon_myr=[-5, 0]).describe()["horizon_myr"] == [-5.0, 0.0]
    for bad in [(0, 0), (1.0, 2.0), (-2.0, -1.0), (2.0, -2.0), (-1.0, 0.0, 1.0), (-1.0,)]:
        expected = r"horizon_myr = .*: expected \(t_min, t_max\) with t_min <= 0 <= t_max"
        with pytest.raises(OrbitOptionError, match=expected):
            OrbitModel(horizon_myr=bad)
    with pytest.raises(OrbitOptionError, match="method = 'fast': expected one of auto, map, direct"):
        OrbitModel(method="fast")
    with pytest.raises(OrbitOptionError, match="potential = 42: expected a preset name or a Potential"):
        OrbitModel(potential=42)
    with pytest.raises(OrbitOptionError, match="sun = 3: expected a solar parameter set name"):
        OrbitModel(sun=3)


def test_describe_records_the_documented_defaults():
    # the defaults written in the OrbitModel docstring, and the preset / solar set records of
    # presets.py and sun.py; describe() goes into JSON output, so it must serialize
    expected = {
        "name": "orbit",
        "potential": get_potential("MWPotential2014").describe(),
        "sun": get_solar_parameters("bovy2015").as_dict(),
        "horizon_myr": "auto", "max_horizon_myr": 100.0, "grid_step_myr": 1.0, "grid_travel_pc": 20.0,
        "method": "auto", "leaf_radius_pc": 50.0, "min_leaf_samples": 200, "map_order": 4,
        "map_tolerance_au": 0.5, "n_check": 8, "integrator": {"scheme": "DOP853", "rtol": 1e-10, "atol": 1e-10},
    }  # fmt: skip
    desc = OrbitModel().describe()
    assert desc == expected
    assert json.loads(json.dumps(desc)) == expected
    assert OrbitModel().chunk_size == 20000  # documented default, not part of describe()
    # objects instead of names give the same record
    same = OrbitModel(potential=get_potential("MWPotential2014"), sun=get_solar_parameters("bovy2015"))
    assert same.describe() == expected
    # a custom potential is recorded as "custom" with its own parameters; a window as a list
    custom = OrbitModel(potential=NEGLIGIBLE, sun="astropy_v4", horizon_myr=(-2.0, 5.0), method="direct")
    desc = custom.describe()
    assert desc["potential"] == {"name": "custom", **NEGLIGIBLE.describe()}
    assert desc["potential"]["name"] == "custom"
    assert desc["sun"] == get_solar_parameters("astropy_v4").as_dict()
    assert desc["horizon_myr"] == [-2.0, 5.0] and desc["method"] == "direct"


def test_observables_are_checked_and_the_bad_parallax_is_named():
    # project rule: bad input gives a clear error naming the value; parallax must be > 0
    model = OrbitModel()
    with pytest.raises(ValueError, match=r"observables = 'shape \(2, 5\)': expected shape \(n, 6\)"):
        model.evaluate(np.ones((2, 5)))
    with pytest.raises(ValueError, match="observables = nan: expected finite numbers"):
        model.evaluate(np.array([[1.0, 2.0, 10.0, np.nan, 0.0, 5.0]]))
    good = [10.0, 20.0, 10.0, -3.0, 1.0, 5.0]  # pmra <= 0, parallax fine
    for rows, named in [
        ([good, [10.0, 20.0, -2.0, 5.0, 1.0, 5.0]], "-2.0"),  # the row with the bad parallax is named
        ([[10.0, 20.0, 0.0, 5.0, 1.0, 5.0], [10.0, 20.0, -2.0, 5.0, 1.0, 5.0]], "0.0"),  # first bad row
        ([[10.0, 20.0, 0.5, 5.0, 1.0, 5.0], [10.0, 20.0, -2.0, 5.0, 1.0, 5.0]], "-2.0"),  # 0.5 mas is fine
        ([[10.0, 20.0, 0.0, 5.0, 1.0, 5.0]], "0.0"),  # zero is not positive
    ]:
        with pytest.raises(ValueError, match=rf"parallax = {named}: expected a positive parallax in mas"):
            model.evaluate(np.array(rows))


# ------------------------------------------------------------------------- evaluate: direct path
def test_negligible_potential_gives_the_straight_line_for_slow_and_distant_stars():
    # Newton's first law (negligible potential): the perihelion is the straight-line one, for a
    # star 2 kpc away (parallax 0.5 mas) and a star moving at 0.37 km/s (|v|^2 < 1), both with
    # the automatic window, which must then hold the straight-line time
    obs = np.vstack([
        observables_from_galactic([5.0, 3.0, 1.0], [-0.3, -0.2, 0.1]),  # t = 14 Myr, d = 2.5 pc
        [[150.0, 10.0, 0.5, 2.0, -1.0, -60.0]],  # 2 kpc
    ])  # fmt: skip
    t, d, v = straight_line_reference(obs)
    ph = OrbitModel(potential=NEGLIGIBLE).evaluate(obs)
    assert not ph.flags.any()
    # tolerances as in test_negligible_potential_gives_the_straight_line (tidal field ~1e-11)
    assert ph.time_myr == pytest.approx(t, rel=1e-7)
    assert ph.distance_pc == pytest.approx(d, rel=1e-7)
    assert ph.speed_kms == pytest.approx(v, rel=1e-9)
    sl = ph.info["straight_line"]
    assert sl["time_myr"] == pytest.approx(t, rel=1e-9)
    assert sl["distance_pc"] == pytest.approx(d, rel=1e-9)
    assert sl["speed_kms"] == pytest.approx(v, rel=1e-9)
    lo, hi = ph.info["window_myr"]
    assert lo <= 0.0 <= hi and hi > t.max()


def test_star_at_rest_relative_to_the_sun_has_its_perihelion_now():
    # An invented star 10 pc from the Sun towards the Galactic centre, at rest relative to the Sun
    # (astropy builds its observables). Its separation has zero rate now, and the Galactic tide
    # stretches the Sun-centre direction (Oort constants: 4 A (A - B) > 0, Binney & Tremaine 2008,
    # Sect. 3.2.3, from memory), so now is the perihelion: t = 0, d = 10 pc, v = 0. The straight-line
    # time of a star at rest is 0 (OrbitModel.evaluate comment), not 0/0.
    obs = observables_from_galactic([10.0, 0.0, 0.0], [0.0, 0.0, 0.0])
    ph = OrbitModel().evaluate(obs)
    assert not ph.flags[0]
    assert abs(ph.time_myr[0]) < 1e-9
    assert ph.distance_pc[0] == pytest.approx(10.0, rel=1e-12)
    assert ph.speed_kms[0] < 1e-9
    assert ph.info["straight_line"]["time_myr"][0] == 0.0
    assert ph.info["window_myr"] == [-100.0, 100.0]  # docstring: +/- max_horizon_myr


def test_direct_info_reports_window_straight_line_and_model_difference():
    # evaluate() docstring: info holds the model, the window, the grid, the straight-line answer of
    # the same rows and the median orbit-minus-straight-line difference; the orbit itself agrees
    # with the independent scipy/galpy integration
    obs = invented_stars(5, seed=11, dmax=30.0, tmax=4.0)
    window = (-3.0, 3.0)
    ph = OrbitModel(horizon_myr=3.0, grid_step_myr=0.25).evaluate(obs)
    assert_matches_reference(ph, orbit_reference(obs, window))
    assert not ph.flags.any()
    info = ph.info
    assert info["model"] == "orbit" and info["method"] == "direct"
    assert info["window_myr"] == [-3.0, 3.0]
    assert info["grid_nodes"] >= 6.0 / 0.25 + 1  # largest grid step 0.25 Myr over the window
    assert info["n_outside_window"] == 0 and info["n_not_converged"] == 0
    t, d, v = straight_line_reference(obs)
    sl = info["straight_line"]
    assert sl["time_myr"] == pytest.approx(t, rel=1e-9)
    assert sl["distance_pc"] == pytest.approx(d, rel=1e-9)
    assert sl["speed_kms"] == pytest.approx(v, rel=1e-9)
    diff = info["model_difference_median"]
    assert diff["time_myr"] == pytest.approx(np.median(ph.time_myr - t), rel=1e-6, abs=1e-12)
    assert diff["distance_pc"] == pytest.approx(np.median(ph.distance_pc - d), rel=1e-6, abs=1e-12)
    assert diff["speed_kms"] == pytest.approx(np.median(ph.speed_kms - v), rel=1e-6, abs=1e-12)
    # the orbit differs from the straight line by far more than the tolerances (not trivially passed)
    assert abs(diff["distance_pc"]) > 100 * TOL_D_REL * d.max()


# ------------------------------------------------------------------- rows beyond the potential
# invented rows beyond the potential's validity (OrbitModel: MAX_DISTANCE_PC = 1e5 pc, MAX_SPEED_KMS =
# 1e4 km/s): 150 kpc away, and 20,000 km/s relative to the Sun (heliocentric Galactic x, y, z [pc], U, V, W)
FAR_ROW = observables_from_galactic([1.5e5, 2e4, 1e3], [30.0, -20.0, 10.0])
FAST_ROW = observables_from_galactic([10.0, -5.0, 3.0], [-2e4, 1e3, -5e2])
NEAR_ROWS = invented_stars(2, seed=7, dmax=30.0, tmax=3.0)  # straight-line |t| < 2 Myr
LATE_ROW = np.array([[120.0, -30.0, 50.0, 3.0, 1.0, -4.0]])  # perihelion ~4.8 Myr ahead (test_orbit_model)


def assert_straight_line_rows(ph, rows, obs):
    """Rows beyond the potential: the straight-line answer (astropy closed form), flagged."""
    t, d, v = straight_line_reference(obs)
    assert np.all(ph.flags[rows])
    assert ph.time_myr[rows] == pytest.approx(t, rel=1e-9)
    assert ph.distance_pc[rows] == pytest.approx(d, rel=1e-9)
    assert ph.speed_kms[rows] == pytest.approx(v, rel=1e-9)


def test_rows_beyond_the_potential_get_the_flagged_straight_line():
    # OrbitModel docstring (MAX_DISTANCE_PC, MAX_SPEED_KMS): those rows get the straight-line answer,
    # flagged; the other rows are evaluated as usual (here direct integration in a 3 Myr window,
    # checked against scipy/galpy, with the window flag of the late row kept)
    obs = np.vstack([FAR_ROW, NEAR_ROWS[:1], FAST_ROW, NEAR_ROWS[1:], LATE_ROW])
    ph = OrbitModel(horizon_myr=3.0).evaluate(obs)
    assert_straight_line_rows(ph, [0, 2], obs[[0, 2]])
    near = [1, 3]
    assert not ph.flags[near].any()
    assert_matches_reference(ph, orbit_reference(obs[near], (-3.0, 3.0)), rows=near)
    assert ph.flags[4] and ph.time_myr[4] > 3.0  # perihelion beyond the window: flagged, not clipped
    info = ph.info
    assert info["n_beyond_potential"] == 2 and info["max_distance_pc"] == 1e5
    assert info["method"] == "direct" and info["n_outside_window"] == 1 and info["n_not_converged"] == 0
    assert info["window_myr"] == [-3.0, 3.0]


def test_only_rows_beyond_the_potential():
    # every row beyond: nothing is integrated, the info says so
    obs = np.vstack([FAR_ROW, FAST_ROW])
    expected_info = {"model": "orbit", "method": "straight line beyond the potential", "n_outside_window": 0,
                     "n_not_converged": 0, "n_beyond_potential": 2, "max_distance_pc": 1e5}  # fmt: skip
    for reference in (None, FAR_ROW[0], NEAR_ROWS[0]):
        ph = OrbitModel().evaluate(obs, reference=reference)
        assert_straight_line_rows(ph, [0, 1], obs)
        assert ph.info == expected_info
    one = OrbitModel().evaluate(FAST_ROW, reference=FAST_ROW[0])
    assert_straight_line_rows(one, [0], FAST_ROW)
    assert one.info["n_beyond_potential"] == 1


# a reference state beyond the potential: 150 kpc; 20,000 km/s along the Sun-centre line (Galactic x)
FAST_X_REF = observables_from_galactic([10.0, 0.0, 0.0], [2e4, 0.0, 0.0])[0]
# within the potential although the position plus the x velocity would exceed 1e5: 99,999.9 pc along
# Galactic y, 1000 km/s along x
EDGE_REF = observables_from_galactic([0.0, 99999.9, 0.0], [1000.0, 0.0, 0.0])[0]


@pytest.mark.parametrize(
    ("reference", "method"),
    [
        (NEAR_ROWS[0], "direct"),  # the Monte Carlo path for the rows within: too few rows for a map
        (FAR_ROW[0], "direct"),  # a reference beyond the potential is not used
        (FAST_X_REF, "direct"),
        (EDGE_REF, "direct"),
    ],
    ids=["near", "far", "fast", "edge"],
)
def test_rows_beyond_the_potential_with_a_reference(reference, method):
    # what propagate_samples runs (evaluate(draws, reference=nominal)) with a draw beyond the potential
    # first: the rows within use the reference unless it lies beyond the potential itself
    obs = np.vstack([FAR_ROW, NEAR_ROWS[:1]])
    ph = OrbitModel(horizon_myr=3.0).evaluate(obs, reference=reference)
    assert_straight_line_rows(ph, [0], obs[:1])
    assert not ph.flags[1]
    assert_matches_reference(ph, orbit_reference(obs[1:], (-3.0, 3.0)), rows=[1], map_path=True)
    assert ph.info["method"] == method
    assert ph.info["n_beyond_potential"] == 1
    if method == "leaf_maps":
        assert ph.info["n_map_leaves"] == 1 and ph.info["fallback_samples"] == 0


def test_the_limits_themselves_are_within_the_potential():
    # the docstring rule is strict ("farther than", "faster than"): a row exactly at 1e5 pc
    # (parallax 0.01 mas) or exactly at 1e4 km/s (radial velocity only) is integrated, also as a
    # reference; the direction is one where the rotated state keeps the norm exactly
    at_distance = np.array([[0.0, 30.0, 0.01, 0.0, 0.0, 0.0]])
    at_speed = np.array([[0.0, -80.0, 100.0, 0.0, 0.0, 1e4]])
    assert straight_line_reference(at_distance)[1][0] == pytest.approx(1e5, rel=1e-12)
    assert straight_line_reference(at_speed)[2][0] == pytest.approx(1e4, rel=1e-12)
    for row in (at_distance, at_speed):
        ph = OrbitModel(horizon_myr=0.01).evaluate(row)  # a short window: the limit rule is what is checked
        assert "n_beyond_potential" not in ph.info and ph.info["method"] == "direct"
        mixed = OrbitModel(horizon_myr=3.0).evaluate(np.vstack([FAR_ROW, NEAR_ROWS[:1], row]))
        assert mixed.info["n_beyond_potential"] == 1 and not mixed.flags[1:].any()


# ---------------------------------------------------------------------------------------- jacobian
def _fd_steps(point):
    # central-difference steps: 1e-5 deg, 1e-5 relative parallax, 1e-4 mas/yr and km/s (common practice;
    # the reference orbits are good to ~1e-12, so steps much smaller would amplify their noise)
    return np.array([1e-5, 1e-5, 1e-5 * point[2], 1e-4, 1e-4, 1e-4])


def straight_line_jacobian(point):
    """Central differences of the astropy straight-line closed form (Matthews 1994), steps 1e-6 relative."""
    steps = np.array([1e-6, 1e-6, *(1e-6 * np.maximum(np.abs(point[2:]), 1e-2))])
    rows = np.vstack([point + np.diag(steps), point - np.diag(steps)])
    out = np.stack(straight_line_reference(rows), axis=1)
    return ((out[:6] - out[6:]) / (2 * steps[:, None])).T


@functools.cache
def _orbit_jacobian_reference(point_key):
    """Central differences of the scipy/galpy reference perihelion (the root of s.w near the straight-line time)."""
    from scipy.optimize import brentq

    from .test_orbit_model import reference_relative_orbits

    point = np.array(point_key)
    steps = _fd_steps(point)
    rows = np.vstack([point + np.diag(steps), point - np.diag(steps)])
    t_lin = straight_line_reference(point)[0][0]
    rel = reference_relative_orbits(rows, 2.0 * t_lin)
    grid = np.linspace(0.1 * t_lin, 1.9 * t_lin, 200)
    out = []
    for i in range(rows.shape[0]):

        def sw(t, i=i):
            s = rel(t)[0, i]
            return float(s[:3] @ s[3:])

        vals = np.array([sw(t) for t in grid])
        j = int(np.flatnonzero(np.sign(vals[1:]) != np.sign(vals[:-1]))[0])
        t = brentq(sw, grid[j], grid[j + 1], xtol=1e-13, rtol=1e-15)
        s = rel(t)[0, i]
        out.append([t, np.linalg.norm(s[:3]), np.linalg.norm(s[3:])])
    out = np.array(out)
    return ((out[:6] - out[6:]) / (2 * steps[:, None])).T


# invented slow stars 49 pc away, straight-line perihelion 4.1 Myr ahead / behind, 2 pc
FUTURE_POINT = observables_from_galactic([20.0, 10.0, 5.0], [-5.0, -2.0, -1.0])[0]
PAST_POINT = observables_from_galactic([20.0, 10.0, 5.0], [5.0, 2.0, 1.0])[0]


@pytest.mark.parametrize(
    ("point", "options", "tol"),
    [
        (FUTURE_POINT, {}, 1e-6),
        (FUTURE_POINT, {"grid_step_myr": 2.0, "grid_travel_pc": 1e3}, 2e-5),
        (FUTURE_POINT, {"grid_step_myr": 2.0, "grid_travel_pc": 1e3, "horizon_myr": (-1.0, 4.5)}, 2e-5),
        (PAST_POINT, {"grid_step_myr": 2.0, "grid_travel_pc": 1e3, "horizon_myr": (-4.5, 1.0)}, 2e-5),
    ],
    ids=["default", "coarse", "coarse-last-interval", "coarse-first-interval"],
)
def test_jacobian_matches_differences_of_the_independent_orbits(point, options, tol):
    # uncertainties-style check (STYLE.md): the analytic Jacobian (state-transition matrix at the
    # perihelion) against central differences of the scipy/galpy reference perihelion. The differences
    # are good to ~1e-8 of each row's largest entry; tol per row: 10x the Hermite grid error seen
    # (1e-7 at the default grid, 2e-6 with a 2 Myr grid). The coarse cases put the perihelion in
    # the last / first grid interval of the window.
    jac = OrbitModel(**options).jacobian(point)
    fd = _orbit_jacobian_reference(tuple(point))
    scale = np.abs(fd).max(axis=1, keepdims=True)
    assert np.all(np.abs(jac - fd) <= tol * scale)
    # the bending is far above the tolerance: the straight line fails the same check
    assert np.abs(straight_line_jacobian(point) - fd).max() > 100 * tol * scale.max()


# 50 kpc from the Sun (Galactic x), 20,000 km/s along x: beyond the potential by speed, where the Galactic
# acceleration of the Sun (~7 (km/s)^2/pc) would bend an orbit by tens of pc over the 2.4 Myr to perihelion
FAST_FAR_X = observables_from_galactic([-5e4, 10.0, 0.0], [2e4, 0.0, 0.0])[0]


@pytest.mark.parametrize("point", [FAR_ROW[0], FAST_ROW[0], FAST_FAR_X], ids=["far", "fast", "fast-far"])
def test_jacobian_beyond_the_potential_is_the_straight_line(point):
    # as evaluate(): beyond MAX_DISTANCE_PC / MAX_SPEED_KMS the straight line (astropy closed form;
    # its transformations are good to ~1e-12, over 1e-6 relative steps: up to ~1e-4 of a row's largest entry)
    jac = OrbitModel().jacobian(point)
    fd = straight_line_jacobian(point)
    assert np.all(np.abs(jac - fd) <= 3e-4 * np.abs(fd).max(axis=1, keepdims=True))


def test_jacobian_of_a_slow_star_in_a_negligible_potential():
    # Newton's first law: the straight-line Jacobian (astropy closed form), for a star at 0.37 km/s
    # whose automatic window must reach its perihelion 14 Myr ahead
    point = observables_from_galactic([5.0, 3.0, 1.0], [-0.3, -0.2, 0.1])[0]
    jac = OrbitModel(potential=NEGLIGIBLE).jacobian(point)
    fd = straight_line_jacobian(point)
    assert np.all(np.abs(jac - fd) <= 1e-6 * np.abs(fd).max(axis=1, keepdims=True))


# Rows just within the potential's limits (docstring: "farther than", "faster than"), where the Sun's own
# Galactic acceleration bends the relative orbit far from the straight line: exactly 1e5 pc away with a
# tangential 95 km/s; 99,999.9 pc along Galactic y moving 1000 km/s along x; exactly 1e4 km/s radially
# from 50 kpc (directions where the rotated states keep these norms exactly).
WITHIN_LIMITS = {
    "at-distance": (np.array([0.0, 30.0, 0.01, 0.2, 0.0, 0.0]), {"horizon_myr": 0.3}),
    "edge": (EDGE_REF, {"horizon_myr": 1.0}),
    "at-speed": (np.array([0.0, -80.0, 0.02, 0.0, 0.0, -1e4]), {"grid_travel_pc": 1e4}),
}


@pytest.mark.parametrize("name", list(WITHIN_LIMITS))
def test_rows_just_within_the_limits_are_integrated(name):
    point, options = WITHIN_LIMITS[name]
    model = OrbitModel(**options)
    ph = model.evaluate(point)
    assert "n_beyond_potential" not in ph.info and ph.info["method"] == "direct"
    assert not ph.flags[0]  # the rows beyond the potential are the flagged ones
    # the orbit's Jacobian, not the straight line's: the time or speed row differs by over 1 % of its
    # largest entry (the distance row is left out: the radial "at-speed" row passes the Sun on the
    # straight line, where the distance has a kink and its differences mean nothing)
    jac, fd = model.jacobian(point)[[0, 2]], straight_line_jacobian(point)[[0, 2]]
    assert np.max(np.abs(jac - fd) / np.abs(fd).max(axis=1, keepdims=True)) > 0.01


# ------------------------------------------------------------------------ direct integration chunks
def test_direct_integration_calls_are_chunked_within_the_memory_bound(monkeypatch):
    # chunk_size docstring: samples per direct-integration call, smaller for long windows so that the
    # tabulated states (nodes x rows x 6 floats, held ~4 times) stay below ~250 MB, i.e. at most
    # 8e6 floats per call (at least 256 rows, so that calls stay vectorized). The integrator is
    # replaced by exact straight-line motion (Newton's first law, written here), so every row's
    # perihelion must be the astropy straight-line one, whatever the chunks.
    calls = []

    def straight_motion(potential, sun_state, rel_states, nodes, *, rtol, atol):
        calls.append((rel_states.shape[0], len(nodes)))
        x, v = rel_states[:, :3], rel_states[:, 3:]
        vel = np.broadcast_to(v, (len(nodes), *v.shape))
        states = np.concatenate([x + v * nodes[:, None, None], vel], axis=-1)
        derivs = np.concatenate([vel, np.zeros_like(vel)], axis=-1)
        return states, derivs, np.zeros((len(nodes), 6))

    monkeypatch.setattr(model_mod, "integrate_relative", straight_motion)
    for n, options in [
        (20, {"chunk_size": 7}),  # the option itself: 7 + 7 + 6
        (1200, {"horizon_myr": 50.0, "grid_step_myr": 0.05}),  # ~2000 nodes: ~660 rows per call
        (300, {"horizon_myr": 100.0, "grid_step_myr": 0.03}),  # ~6700 nodes: the 256-row floor
    ]:
        # invented stars; perihelia beyond the window get the straight-line extrapolation from the
        # edge (docstring), which is exact for straight motion
        rng = np.random.default_rng(n)
        obs = np.column_stack([rng.uniform(0, 360, n), rng.uniform(-80, 80, n), rng.uniform(5, 100, n),
                               rng.normal(0, 100, (n, 2)), rng.normal(0, 30, n)])  # fmt: skip
        calls.clear()
        ph = OrbitModel(method="direct", **options).evaluate(obs, reference=obs[0])
        t, d, v = straight_line_reference(obs)
        assert ph.time_myr == pytest.approx(t, rel=1e-9, abs=1e-12)
        assert ph.distance_pc == pytest.approx(d, rel=1e-9)
        assert ph.speed_kms == pytest.approx(v, rel=1e-12)
        rows = np.array([c[0] for c in calls])
        m = calls[0][1]
        allowed = min(options.get("chunk_size", 20000), max(256, 8_000_000 // (6 * m)))
        assert rows.sum() == n  # every row integrated once
        assert np.all(rows <= allowed)
        assert len(rows) == -(-n // allowed)  # as few calls as the bound allows


# ------------------------------------------------------------------ the Monte Carlo path (_map)
def _galactic(p, v):
    return observables_from_galactic(np.asarray(p, dtype=float), np.asarray(v, dtype=float))


# invented nominal star 20 pc away, 36 km/s, straight-line perihelion 0.52 Myr ahead (Galactic x, y, z, U, V, W)
P0 = np.array([12.0, 14.0, 6.0]) * 20.0 / np.linalg.norm([12.0, 14.0, 6.0])
V0 = np.array([-30.0, -20.0, -5.0])
NOMINAL = _galactic(P0, V0)[0]


def check_draws():
    """Six draws close to the nominal, two copies of a velocity outlier (10 km/s along Galactic x) and
    one position outlier (10 pc farther, same velocity)."""
    rng = np.random.default_rng(5)
    small = _galactic(P0 + rng.normal(0.0, 0.05, (6, 3)), V0 + rng.normal(0.0, 0.02, (6, 3)))
    outlier = _galactic(P0, V0 + [10.0, 0.0, 0.0])
    return np.vstack([small, outlier, outlier, _galactic(P0 * 30.0 / 20.0, V0)])


def offset_scores(draws, reference):
    """Distance of each draw from the reference orbit as the map's error model measures it (model.py:
    position offset plus velocity offset times (|straight-line time| + 1) [pc/(km/s)]), from astropy
    states (norms and dot products do not depend on the frame's orientation)."""

    def states(obs):
        c = coord.SkyCoord(
            ra=obs[:, 0] * u.deg, dec=obs[:, 1] * u.deg, distance=(1000.0 / obs[:, 2]) * u.pc,
            pm_ra_cosdec=obs[:, 3] * u.mas / u.yr, pm_dec=obs[:, 4] * u.mas / u.yr,
            radial_velocity=obs[:, 5] * u.km / u.s,
        )  # fmt: skip
        return c.cartesian.xyz.to_value(u.pc).T, c.velocity.d_xyz.to_value(u.km / u.s).T

    x, v = states(np.atleast_2d(draws))
    x0, v0 = states(np.atleast_2d(reference))
    t_lin = -np.sum(x * v, axis=1) / np.sum(v * v, axis=1)
    return np.linalg.norm(x - x0, axis=1) + np.linalg.norm(v - v0, axis=1) * (np.abs(t_lin) + 1.0)


@pytest.mark.parametrize("side", ["past", "future"])
def test_perihelia_beyond_the_window_are_flagged_not_refitted(side):
    # the perihelia lie beyond the window (~4.8 Myr, window +/- 3 Myr): through the leaf maps, the draws are
    # flagged with the straight-line extrapolation from the edge (OrbitModel docstring; checked as in
    # test_orbit_search on the first six draws)
    sign = -1.0 if side == "past" else 1.0
    rng = np.random.default_rng(17)
    nominal = LATE_ROW[0] * [1, 1, 1, sign, sign, sign]
    draws = nominal + rng.normal(size=(300, 6)) * [0.0, 0.0, 0.5, 0.05, 0.05, 0.1]
    ph = OrbitModel(horizon_myr=3.0, method="map").evaluate(draws)
    ref = orbit_reference(draws[:6], (-3.0, 3.0))
    assert np.all(ref["edge"] == sign)
    assert_global_minimum_or_flagged(_rows(ph, 6), ref, (-3.0, 3.0), map_path=True)
    assert ph.flags.all() and ph.info["n_outside_window"] == draws.shape[0]
    assert ph.info["fallback_samples"] == 0 and ph.info["method"] == "leaf_maps"


def _rows(ph, n):
    """The first ``n`` rows of a Perihelion (for comparison with a reference of those rows)."""
    from perierr.models.base import Perihelion

    return Perihelion(ph.time_myr[:n], ph.distance_pc[:n], ph.speed_kms[:n], flags=ph.flags[:n],
                      diagnostics=ph.diagnostics)
