"""Edges of the orbit model's driver (perierr.models.orbit.model) against outside references (invented stars only).

Direct integration of a few rows against orbits integrated here with scipy's DOP853 in a Plummer sphere written
here; the chunking of the direct integrations and the remembered nominal answer against the documented contracts;
rows beyond the potential against the straight line from astropy's coordinates; the Jacobian of a perihelion
outside the window, and of a very close one, against the straight-line Jacobian (Matthews 1994) in a negligible
potential.
"""

import astropy.units as u
import numpy as np
import pytest
from astropy import constants
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

import perierr.models.orbit.model as orbit_model
from perierr.frames import cartesian_to_observables, observables_to_cartesian
from perierr.models import StraightLine
from perierr.models.orbit import OrbitModel, Plummer
from tests.models.orbit.test_orbit_edges import straight_line_reference

# G [pc (km/s)^2 / Msun] and the time unit pc/(km/s) [Myr], both from astropy (no constant of the package)
G_REF = float((constants.G * u.Msun).to_value(u.pc * (u.km / u.s) ** 2))
TIME_UNIT_MYR = float((1.0 * u.pc / (u.km / u.s)).to_value(u.Myr))

# An invented toy galaxy: one Plummer sphere (Plummer 1911) whose circular speed at 8 kpc is ~210 km/s, so that the
# tide over a few Myr bends the relative orbits measurably.
TOY_MASS, TOY_B = 1.0e11, 3000.0
WINDOW = (-4.0, 6.0)


def invented_cartesian(seed, t_myr, d_pc, speed_kms):
    """Invented heliocentric ICRS states (pc, km/s) whose straight-line perihelion is d_pc at t_myr (Matthews 1994)."""
    rng = np.random.default_rng(seed)
    n = len(t_myr)
    v = rng.normal(size=(n, 3))
    v *= (np.asarray(speed_kms) / np.linalg.norm(v, axis=1))[:, None]
    a = rng.normal(size=(n, 3))
    a -= np.sum(a * v, axis=1)[:, None] * v / np.sum(v * v, axis=1)[:, None]  # perpendicular to v
    x_ph = a * (np.asarray(d_pc) / np.linalg.norm(a, axis=1))[:, None]
    x0 = x_ph - v * (np.asarray(t_myr) / TIME_UNIT_MYR)[:, None]
    return np.concatenate([x0, v], axis=1)


def plummer_acceleration(x, mass, b):
    """-G M x / (r^2 + b^2)^(3/2) (Binney & Tremaine 2008, Sect. 2.2), positions (..., 3) [pc]."""
    r2 = np.sum(x * x, axis=-1, keepdims=True)
    return -G_REF * mass * x / (r2 + b * b) ** 1.5


def reference_perihelia(obs, sun, mass, b, window_myr):
    """Perihelion time [Myr], distance [pc], speed [km/s] of each row, computed here without the package's orbits.

    The Sun and the stars are test particles in the Plummer sphere, integrated in Galactocentric coordinates with
    scipy's DOP853 (Hairer, Norsett & Wanner 1993) at rtol = atol = 1e-12 with dense output, from the solar state and
    rotation of ``sun.frame()`` (the frame is tested elsewhere). The minimum of the separation on a fine grid of the
    window is refined by Brent's method on s . w = 0 (the minimum of |s|).
    """
    rot, sun_state = sun.frame()
    xv = observables_to_cartesian(obs)
    rel0 = np.concatenate([xv[:, :3] @ rot.T, xv[:, 3:] @ rot.T], axis=1)
    y0 = np.concatenate([sun_state[None, :], sun_state[None, :] + rel0])
    k = y0.shape[0]

    def fun(_t, y):
        yy = y.reshape(k, 6)
        return np.concatenate([yy[:, 3:], plummer_acceleration(yy[:, :3], mass, b)], axis=1).ravel()

    lo, hi = (w / TIME_UNIT_MYR for w in window_myr)
    sols = [
        solve_ivp(fun, (0.0, end), y0.ravel(), method="DOP853", rtol=1e-12, atol=1e-12, dense_output=True)
        for end in (lo, hi)
    ]

    def rel(t):  # (len(t), k - 1, 6)
        t = np.atleast_1d(t)
        out = np.empty((t.size, k, 6))
        for sol, side in zip(sols, (t < 0, t >= 0), strict=True):
            if side.any():
                out[side] = sol.sol(t[side]).T.reshape(-1, k, 6)
        return out[:, 1:] - out[:, :1]

    grid = np.linspace(lo, hi, 4001)
    states = rel(grid)
    res = []
    for i in range(k - 1):
        j = int(np.argmin(np.sum(states[:, i, :3] ** 2, axis=1)))
        assert 0 < j < grid.size - 1  # the perihelion lies inside the window

        def rate(t, i=i):
            s = rel(t)[0, i]
            return s[:3] @ s[3:]

        t_ph = brentq(rate, grid[j - 1], grid[j + 1], xtol=1e-13, rtol=1e-15)
        s = rel(t_ph)[0, i]
        res.append((t_ph * TIME_UNIT_MYR, np.linalg.norm(s[:3]), np.linalg.norm(s[3:])))
    return np.array(res)


# three invented stars passing within a few pc in the next few Myr or the last few
STATES = invented_cartesian(20260311, t_myr=[-2.5, 1.8, 4.2], d_pc=[3.0, 1.5, 4.0], speed_kms=[25.0, 32.0, 18.0])
OBS = cartesian_to_observables(STATES)


@pytest.fixture(scope="module")
def toy():
    return Plummer(mass_msun=TOY_MASS, b_pc=TOY_B)


@pytest.fixture(scope="module")
def reference(toy):
    model = OrbitModel(potential=toy, horizon_myr=WINDOW, method="direct")
    return reference_perihelia(OBS, model.sun, TOY_MASS, TOY_B, WINDOW)


def _check_against_reference(ph, ref):
    # Tolerances: the package's DOP853 at rtol = atol = 1e-10 and Newton on quintic Hermite interpolants (error ~h^6)
    # against the reference at 1e-12; observed differences ~1e-10 relative. A wrong interval end in the interpolant
    # or a skipped row is off by far more.
    assert ph.time_myr == pytest.approx(ref[:, 0], rel=1e-7, abs=1e-7)
    assert ph.distance_pc == pytest.approx(ref[:, 1], rel=1e-7)
    assert ph.speed_kms == pytest.approx(ref[:, 2], rel=1e-9)
    assert not ph.flags.any()
    assert ph.flags.dtype == bool


def test_direct_rows_in_chunks_match_scipy_orbits(toy, reference, monkeypatch):
    # Coarse grid (1 Myr steps: 11 nodes) and chunk_size 2: the OrbitModel docstring promises chunk_size "samples
    # per direct-integration call", i.e. every row integrated once, in calls of at most chunk_size rows.
    calls = []
    real = orbit_model.integrate_relative

    def spy(potential, sun_state, rel_states, nodes, **kw):
        calls.append(rel_states.shape[0])
        return real(potential, sun_state, rel_states, nodes, **kw)

    monkeypatch.setattr(orbit_model, "integrate_relative", spy)
    model = OrbitModel(
        potential=toy, horizon_myr=WINDOW, grid_step_myr=1.0, grid_travel_pc=1000.0, method="direct", chunk_size=2
    )
    ph = model.evaluate(OBS)
    assert calls == [2, 1]
    assert ph.info["grid_nodes"] == 11
    _check_against_reference(ph, reference)


def test_direct_rows_on_a_finer_grid_match_scipy_orbits(toy, reference):
    # 101 nodes and the default chunk_size (20000): the memory bound of the docstring (tabulated states below
    # ~250 MB) caps a chunk at 8e6 / (6 m) = 13201.3 rows, which must still be a whole number of rows
    model = OrbitModel(potential=toy, horizon_myr=WINDOW, grid_step_myr=0.1, grid_travel_pc=1000.0, method="direct")
    ph = model.evaluate(OBS)
    assert ph.info["grid_nodes"] == 101
    _check_against_reference(ph, reference)


def test_one_row_is_integrated_once_for_evaluate_and_jacobian(toy, monkeypatch):
    # OrbitModel._direct's docstring: the answer for one row is remembered, so that a linearization (evaluate,
    # then jacobian, of the nominal point) integrates the nominal orbit once; the remembered answer is the same.
    model = OrbitModel(potential=toy, horizon_myr=WINDOW)
    real = model._direct_rows
    calls = []

    def spy(rel, nodes):
        calls.append(rel.shape[0])
        return real(rel, nodes)

    monkeypatch.setattr(model, "_direct_rows", spy)
    first = model.evaluate(OBS[1])
    second = model.evaluate(OBS[1])
    assert calls == [1]
    assert second.as_array() == pytest.approx(first.as_array(), rel=0, abs=0)
    # and a batch of rows is integrated every time (only one row is remembered)
    model.evaluate(OBS)
    model.evaluate(OBS)
    assert calls == [1, 3, 3]
    # the remembered answer belongs to its row: another single row is integrated, and its answer is the one a
    # fresh model gives (the references of the direct path are checked above)
    other = model.evaluate(OBS[2])
    assert calls == [1, 3, 3, 1]
    fresh = OrbitModel(potential=toy, horizon_myr=WINDOW).evaluate(OBS[2])
    assert other.as_array() == pytest.approx(fresh.as_array(), rel=0, abs=0)
    assert abs(other.as_array()[0, 1] - first.as_array()[0, 1]) > 1e-3


# ---------------------------------------------------------------- rows beyond the potential

# an invented star 200 kpc away (parallax 0.005 mas), beyond the model's 1e5 pc
FAR_ROW = np.array([35.0, -12.0, 0.005, 1.0e-4, -2.0e-4, 40.0])


astropy_straight_line = straight_line_reference  # astropy SkyCoord + Matthews 1994, shared with test_orbit_edges


def test_rows_beyond_the_potential_get_the_straight_line_and_the_rest_the_orbit(toy, reference):
    # OrbitModel: rows beyond MAX_DISTANCE_PC get the straight-line answer, flagged; the other rows are integrated as
    # usual; the straight_line diagnostics hold one entry per row (for the far row, its answer itself)
    rows = np.stack([OBS[0], FAR_ROW, OBS[2]])
    ph = OrbitModel(potential=toy, horizon_myr=WINDOW).evaluate(rows)
    t_sl, d_sl, v_sl = astropy_straight_line(rows)
    assert ph.flags.tolist() == [False, True, False]
    # the far row: astropy's conversion against the package's frames agree to ~1e-12 relative (tested elsewhere)
    assert ph.time_myr[1] == pytest.approx(t_sl[1], rel=1e-9)
    assert ph.distance_pc[1] == pytest.approx(d_sl[1], rel=1e-9)
    assert ph.speed_kms[1] == pytest.approx(v_sl[1], rel=1e-9)
    near = ph.as_array()[[0, 2]]
    assert near[:, 1] == pytest.approx(reference[[0, 2], 1], rel=1e-7)
    assert near[:, 0] == pytest.approx(reference[[0, 2], 0], rel=1e-7)
    info = ph.info
    assert info["n_beyond_potential"] == 1 and info["max_distance_pc"] == 1e5
    straight = info["straight_line"]
    assert np.asarray(straight["time_myr"]) == pytest.approx(t_sl, rel=1e-9)
    assert np.asarray(straight["distance_pc"]) == pytest.approx(d_sl, rel=1e-9)
    assert np.asarray(straight["speed_kms"]) == pytest.approx(v_sl, rel=1e-9)


def test_reference_with_nonpositive_parallax_changes_nothing_beside_far_rows(toy):
    # ForwardModel.evaluate: "reference ... a hint a model may build an approximation around (the models here do not
    # need it); it never changes what is computed". Without a far row the same reference is ignored.
    rows = np.stack([FAR_ROW, OBS[2]])
    model = OrbitModel(potential=toy, horizon_myr=WINDOW)
    bad_reference = OBS[2].copy()
    bad_reference[2] = -0.05  # a measured parallax may be negative; only the rows are inverted
    plain = model.evaluate(rows).as_array()
    assert model.evaluate(OBS[2:], reference=bad_reference).as_array()[0] == pytest.approx(plain[1], rel=0, abs=0)
    assert model.evaluate(rows, reference=bad_reference).as_array() == pytest.approx(plain, rel=0, abs=0)


# ---------------------------------------------------------------- the Jacobian in a negligible potential

# A 1 Msun Plummer sphere at the Galactic centre: its tide is ~1e-11 of the Milky Way's, so the orbits are straight
# lines and the Jacobian is the straight line's (Matthews 1994, perierr.models.StraightLine, checked against astropy
# in its own tests).
NEGLIGIBLE = Plummer(mass_msun=1.0, b_pc=100.0)


def _rows_close(jac, ref, rel):
    scale = np.abs(ref).max(axis=1, keepdims=True)
    return np.abs(jac - ref).max(axis=1) / scale[:, 0] <= rel


def test_jacobian_of_a_perihelion_outside_the_window_is_the_straight_line():
    # perihelion 4 Myr ahead, window +/- 1 Myr: the answer is flagged and extrapolated along the straight line from
    # the window edge (OrbitModel docstring), which here is the straight line itself; its Jacobian comes from
    # central differences with relative steps 1e-6 (truncation error ~1e-12, round-off ~1e-9 relative)
    obs = cartesian_to_observables(invented_cartesian(7, t_myr=[4.0], d_pc=[2.0], speed_kms=[30.0]))[0]
    model = OrbitModel(potential=NEGLIGIBLE, horizon_myr=1.0)
    assert model.evaluate(obs).flags[0]
    jac = model.jacobian(obs)
    ref = StraightLine().jacobian(obs)
    assert _rows_close(jac, ref, 1e-6).all()


def test_jacobian_of_a_very_close_perihelion_is_the_straight_line():
    # a perihelion of 0.2 au (1e-6 pc) inside the window: the variational equations give the derivative of |s| at
    # s . w = 0 without a step; central differences with relative steps 1e-6 of the observables move the miss by
    # ~2e-8 pc, and |s| curves on the scale of d_ph, so they would be off by ~(2e-8 / 1e-6)^2 ~ 1e-4 in d_ph's row
    # (observed 9e-5, against 1e-8 for the variational answer)
    obs = cartesian_to_observables(invented_cartesian(11, t_myr=[0.4], d_pc=[1e-6], speed_kms=[30.0]))[0]
    jac = OrbitModel(potential=NEGLIGIBLE, horizon_myr=1.0).jacobian(obs)
    ref = StraightLine().jacobian(obs)
    assert _rows_close(jac, ref, 1e-6).all()


def test_jacobian_of_a_fast_star_matches_differences_of_scipy_orbits(toy):
    # An invented star 2 kpc away crossing at 1000 km/s almost along Galactocentric x, 3.2 pc from the Sun in 2 Myr,
    # in the toy galaxy. The local grid of the variational equations must follow the full speed (OrbitModel
    # docstring: step at most grid_travel_pc / speed). Reference: central differences (relative steps 1e-5,
    # truncation ~1e-10) of the perihelia of orbits integrated here (reference_perihelia, DOP853 at 1e-12; noise
    # ~1e-12 / 1e-5 = 1e-7 at most); observed agreement ~2e-9 of each row's largest entry.
    model = OrbitModel(potential=toy, horizon_myr=WINDOW, grid_step_myr=0.5)
    rot, _ = model.sun.frame()
    w = np.array([1000.0, 0.5, 0.5])  # Galactocentric axes [km/s]
    s0 = np.array([0.0, 3.0, 1.0]) - w * (2.0 / TIME_UNIT_MYR)
    obs = cartesian_to_observables(np.concatenate([rot.T @ s0, rot.T @ w]))
    steps = np.maximum(np.abs(obs), 1.0) * 1e-5
    ref = reference_perihelia(np.vstack([obs + np.diag(steps), obs - np.diag(steps)]), model.sun, TOY_MASS, TOY_B,
                              (0.0, 4.0))  # fmt: skip
    fd = ((ref[:6] - ref[6:]) / (2.0 * steps)[:, None]).T
    assert _rows_close(model.jacobian(obs), fd, 1e-7).all()
