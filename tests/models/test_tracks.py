"""Separation tracks (perierr.models.tracks) against astropy, scipy's DOP853 and the models' own perihelia.

References: heliocentric Cartesian states from astropy's SkyCoord (ICRS, distance from the parallax, proper
motions and radial velocity) moved on straight lines with astropy units; the Galactic orbits of the Sun and one
star integrated separately in Galactocentric coordinates with scipy's solve_ivp (DOP853, Hairer, Norsett &
Wanner 1993, Sect. II.5) in the orbit model's potential; the minimum of a sampled separation lies above the
true minimum by about v^2 (dt/2)^2 / (2 d) (a Taylor expansion of sqrt(d^2 + v^2 t^2); common practice, no
source). Stars are invented.
"""

import astropy.coordinates as coord
import astropy.units as u
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import solve_ivp

from perierr.errors import InputError
from perierr.models import StraightLine, make_model
from perierr.models.tracks import separation_tracks
from perierr.units import AU_PER_PC, MYR_PER_PC_PER_KMS
from tests.conftest import random_observables

#: Invented stars: (ra, dec, parallax, pmra, pmdec, radial_velocity) in deg, mas, mas/yr, km/s.
STARS = np.array([
    [201.37, -27.62, 48.0, 0.71, -1.2, -31.2],   # a close pass in about 0.65 Myr (the demo's Kestrel-4, rounded)
    [15.0, 40.0, 25.0, 60.0, -35.0, -45.0],      # 40 pc away, d_ph about 4.4 pc
    [300.0, -60.0, 80.0, -150.0, 20.0, 12.0],    # receding: perihelion in the past
])  # fmt: skip


def astropy_separation(obs, times_myr):
    """|x + v t| [pc] from astropy's Cartesian position and velocity of each row, moved with astropy units."""
    c = coord.SkyCoord(
        ra=obs[:, 0] * u.deg, dec=obs[:, 1] * u.deg, distance=(obs[:, 2] * u.mas).to(u.pc, u.parallax()),
        pm_ra_cosdec=obs[:, 3] * u.mas / u.yr, pm_dec=obs[:, 4] * u.mas / u.yr,
        radial_velocity=obs[:, 5] * u.km / u.s, frame="icrs",
    )  # fmt: skip
    x = c.cartesian.xyz.T[:, None, :]  # (n, 1, 3) pc
    v = c.velocity.d_xyz.T[:, None, :]  # (n, 1, 3) km/s
    t = np.asarray(times_myr)[None, :, None] * u.Myr
    return np.linalg.norm((x + v * t).to_value(u.pc), axis=-1)


def grid_minimum(model, row, t_lo, t_hi):
    """Smallest separation on a coarse grid of [t_lo, t_hi], refined on a fine grid around its node."""
    coarse = np.linspace(t_lo, t_hi, 4001)
    k = int(np.argmin(separation_tracks(model, row, coarse)[0]))
    step = coarse[1] - coarse[0]
    fine = np.linspace(coarse[k] - 2 * step, coarse[k] + 2 * step, 4001)
    d = separation_tracks(model, row, fine)[0]
    j = int(np.argmin(d))
    return fine[j], d[j]


def test_straight_tracks_agree_with_astropy():
    rng = np.random.default_rng(5)
    obs = np.vstack([STARS, random_observables(rng, 40)])
    times = np.array([-30.0, -1.3, 0.0, 0.25, 0.65, 7.0, 100.0])
    got = separation_tracks(StraightLine(), obs, times)
    assert got.shape == (obs.shape[0], times.size)
    assert got == pytest.approx(astropy_separation(obs, times), rel=1e-10)
    # now: the distance 1000 / parallax (the parsec's definition)
    assert got[:, 2] == pytest.approx(1000.0 / obs[:, 2], rel=1e-12)


@pytest.mark.parametrize("row", range(len(STARS)))
def test_straight_track_minimum_is_the_models_perihelion(row):
    obs = STARS[row : row + 1]
    ph = StraightLine().evaluate(obs)
    t_min, d_min = grid_minimum(StraightLine(), obs, -20.0, 20.0)
    assert d_min == pytest.approx(ph.distance_pc[0], rel=1e-6)
    assert t_min == pytest.approx(ph.time_myr[0], abs=1e-5)
    # at the model's own t_ph the track is d_ph (to rounding)
    at = separation_tracks(StraightLine(), obs, ph.time_myr)[0, 0]
    assert at == pytest.approx(ph.distance_pc[0], rel=1e-9)


@settings(max_examples=60, deadline=None, derandomize=True, database=None)
@given(
    st.floats(0.0, 360.0), st.floats(-89.0, 89.0), st.floats(0.5, 500.0),
    st.floats(-2000.0, 2000.0), st.floats(-2000.0, 2000.0), st.floats(-200.0, 200.0),
    st.lists(st.floats(-1e3, 1e3), min_size=1, max_size=8),
)
def test_straight_tracks_never_dip_below_the_perihelion(ra, dec, plx, pmra, pmdec, vr, times):
    # the straight-line perihelion is the global minimum of |x + v t| (Matthews 1994), and the separation
    # changes no faster than the relative speed (triangle inequality)
    obs = np.array([[ra, dec, plx, pmra, pmdec, vr]])
    ph = StraightLine().evaluate(obs)
    t = np.array(times)
    d = separation_tracks(StraightLine(), obs, t)[0]
    assert np.all(d >= ph.distance_pc[0] * (1 - 1e-12) - 1e-12)
    now = separation_tracks(StraightLine(), obs, [0.0])[0, 0]
    assert now == pytest.approx(1000.0 / plx, rel=1e-12)
    assert np.all(np.abs(d - now) <= ph.speed_kms[0] * np.abs(t) / MYR_PER_PC_PER_KMS * (1 + 1e-9) + 1e-9)


def reference_orbit_separation(model, row, times_myr):
    """|x_star - x_sun| [pc] with the Sun and the star integrated apart in Galactocentric coordinates (DOP853)."""
    from perierr.frames import observables_to_cartesian

    rotation, sun = model.sun.frame()
    xv = observables_to_cartesian(row)[0]
    star = np.concatenate([sun[:3] + rotation @ xv[:3], sun[3:] + rotation @ xv[3:]])
    y0 = np.concatenate([sun, star])

    def fun(_t, y):
        yy = y.reshape(2, 6)
        return np.concatenate([yy[:, 3:], model.potential.acceleration(yy[:, :3])], axis=1).ravel()

    t = np.asarray(times_myr) / MYR_PER_PC_PER_KMS  # pc/(km/s), the unit of time of pc and km/s
    out = np.empty(t.size)
    for sel in (t >= 0, t < 0):  # forwards and backwards from now
        if sel.any():
            end = t[sel].max() if t[sel][0] >= 0 else t[sel].min()
            sol = solve_ivp(fun, (0.0, end), y0, method="DOP853", rtol=1e-12, atol=1e-10, dense_output=True)
            assert sol.success
            y = sol.sol(t[sel]).T.reshape(-1, 2, 6)
            out[sel] = np.linalg.norm(y[:, 1, :3] - y[:, 0, :3], axis=1)
    return out


@pytest.fixture(scope="module")
def orbit():
    return make_model("orbit")


@pytest.mark.parametrize("row", [0, 2])
def test_orbit_track_agrees_with_separate_orbits(orbit, row):
    obs = STARS[row : row + 1]
    times = np.array([-3.0, -0.4, 0.0, 0.3, 0.65, 1.0, 4.0])
    got = separation_tracks(orbit, obs, times)[0]
    assert got == pytest.approx(reference_orbit_separation(orbit, obs, times), rel=1e-9)
    assert got[2] == pytest.approx(1000.0 / obs[0, 2], rel=1e-12)  # now: no integration at all


def test_orbit_track_minimum_is_the_models_perihelion(orbit):
    obs = STARS[:2]
    ph = orbit.evaluate(obs)  # two rows: integrated directly (DOP853)
    for i in range(2):
        t_min, d_min = grid_minimum(orbit, obs[i : i + 1], -5.0, 5.0)
        # the model's stated map tolerance (map_tolerance_au, 0.5 au); a direct answer is far better
        assert abs(d_min - ph.distance_pc[i]) * AU_PER_PC < orbit.map_tolerance_au
        assert t_min == pytest.approx(ph.time_myr[i], abs=1e-4)
    # the Galactic tide bends the paths: 5 Myr from now the orbit tracks are tenths of a pc off the straight lines
    t = np.array([-5.0, 5.0])
    assert np.all(np.abs(separation_tracks(orbit, obs, t) - separation_tracks(StraightLine(), obs, t)) > 0.1)


def test_many_rows_at_once_equal_rows_one_by_one(orbit):
    rng = np.random.default_rng(11)
    obs = random_observables(rng, 6, max_dist_pc=60.0)
    times = np.array([-2.0, -0.5, 0.0, 0.5, 2.0])
    together = separation_tracks(orbit, obs, times)
    alone = np.vstack([separation_tracks(orbit, obs[i], times) for i in range(len(obs))])
    assert together == pytest.approx(alone, rel=1e-8)


def test_rows_beyond_the_potential_and_focusing_follow_their_model(orbit):
    # 200 kpc away (beyond MAX_DISTANCE_PC of the orbit model): the orbit model answers with the straight line
    far = np.array([[10.0, 10.0, 0.005, 0.1, 0.1, -100.0]])
    times = np.array([-1.0, 0.0, 1.0])
    assert separation_tracks(orbit, far, times) == pytest.approx(separation_tracks(StraightLine(), far, times))
    focused = make_model("straight_line", star_mass_msun=0.7)
    assert separation_tracks(focused, STARS, times) == pytest.approx(astropy_separation(STARS, times), rel=1e-10)


def test_bad_input_names_the_field():
    with pytest.raises(InputError, match="parallax"):
        separation_tracks(StraightLine(), [1.0, 2.0, -1.0, 0.0, 0.0, 5.0], [0.0])
    with pytest.raises(InputError, match="observables"):
        separation_tracks(StraightLine(), np.zeros((2, 5)), [0.0])
    with pytest.raises(InputError, match="times_myr"):
        separation_tracks(StraightLine(), STARS, [0.0, np.nan])
    with pytest.raises(InputError, match="model"):
        separation_tracks(object(), STARS, [0.0])
