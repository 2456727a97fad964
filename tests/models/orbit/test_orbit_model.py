"""The orbit model against galpy, astropy and textbook invariants (invented stars only)."""

import math

import astropy.coordinates as coord
import astropy.units as u
import numpy as np
import pytest
from galpy.orbit import Orbit
from galpy.potential import MWPotential2014 as GALPY_MW2014
from galpy.potential import evaluateRforces, evaluatezforces
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import solve_ivp

from perierr.frames import cartesian_to_observables, observables_to_cartesian
from perierr.models import StraightLine, make_model
from perierr.models.base import ForwardModel
from perierr.models.orbit import OrbitModel, OrbitOptionError, Plummer, get_solar_parameters
from perierr.models.orbit.integrate import integrate_relative
from perierr.units import AU_PER_PC, MYR_PER_PC_PER_KMS

GALPY_KW = dict(ro=8.0, vo=220.0, zo=0.0208, solarmotion="schoenrich")


def invented_stars(n, seed, dmax=50.0, tmax=10.0):
    """Random invented stars within dmax pc with straight-line |t_ph| in (0.2, tmax) Myr."""
    rng = np.random.default_rng(seed)
    out = []
    while len(out) < n:
        x = rng.normal(size=3)
        x *= rng.uniform(5.0, dmax) / np.linalg.norm(x)
        v = rng.normal(0.0, 30.0, size=3)
        t = -np.dot(x, v) / np.dot(v, v) * MYR_PER_PC_PER_KMS
        if 0.2 < abs(t) < tmax - 1.0:
            out.append(cartesian_to_observables(np.concatenate([x, v])))
    return np.array(out)


def galpy_perihelion(obs, t_guess_myr):
    """Perihelion from galpy 1.12 orbits of the star and the Sun (test-only reference).

    Both are integrated with galpy's dop853_c (default tolerance 1e-12) on a
    fine grid of 3001 points +/- 0.3 Myr around the straight-line time; the
    minimum of the squared separation is refined with a parabola.
    """
    sign = 1.0 if t_guess_myr > 0 else -1.0
    near = sign * max(abs(t_guess_myr) - 0.3, 1e-3)
    grid = np.concatenate([[0.0], np.linspace(near, t_guess_myr + 0.3 * sign, 3001)])
    ts = grid * u.Myr
    star = Orbit(
        [obs[0], obs[1], 1.0 / obs[2], obs[3], obs[4], obs[5]], radec=True, **GALPY_KW
    )
    sun = Orbit(**GALPY_KW)
    star.integrate(ts, GALPY_MW2014, method="dop853_c")
    sun.integrate(ts, GALPY_MW2014, method="dop853_c")

    def rect(o):
        a = o.getOrbit()  # natural units: R, vR, vT, z, vz, phi (read once)
        r, vr, vt, z, vz, phi = a.T
        c, s = np.cos(phi), np.sin(phi)
        pos = np.stack([r * c, r * s, z], axis=1) * 8000.0
        vel = np.stack([vr * c - vt * s, vr * s + vt * c, vz], axis=1) * 220.0
        return pos, vel

    ps, vs = rect(star)
    pu, vu = rect(sun)
    d2 = np.sum((ps - pu) ** 2, axis=1)[1:]
    tt = grid[1:]
    i = int(np.argmin(d2))
    assert 0 < i < len(tt) - 1
    y0, y1, y2 = d2[i - 1 : i + 2]
    h = tt[i + 1] - tt[i]
    off = 0.5 * (y0 - y2) / (y0 - 2 * y1 + y2)
    tmin = tt[i] + off * h
    d2min = y1 - 0.25 * (y0 - y2) * off
    speed = np.linalg.norm((vs - vu)[1:][i])
    return tmin, math.sqrt(d2min), speed


# Myr per pc/(km/s) from astropy's units directly (the independent integration
# below uses no constant, frame or force of the package).
REF_MYR_PER_TIME_UNIT = float((1.0 * u.pc / (u.km / u.s)).to_value(u.Myr))


def galpy_initial_states(obs):
    """The Sun (row 0) and the stars in galpy's Galactocentric frame: x, y, z [pc], vx, vy, vz [km/s].

    galpy 1.12 ``Orbit(radec=True)`` does the ICRS -> Galactocentric transformation
    with the solar parameters of ``GALPY_KW``.
    """
    obs = np.atleast_2d(obs)
    stars = Orbit([[o[0], o[1], 1.0 / o[2], o[3], o[4], o[5]] for o in obs], radec=True, **GALPY_KW)
    sun = Orbit(**GALPY_KW)

    def xv(o):  # kpc -> pc; km/s
        cols = [np.atleast_1d(f()) for f in (o.x, o.y, o.z, o.vx, o.vy, o.vz)]
        return np.stack(cols, axis=-1) * np.array([1000.0, 1000.0, 1000.0, 1.0, 1.0, 1.0])

    return np.concatenate([xv(sun), xv(stars)])


def galpy_acceleration(pos):
    """MWPotential2014 acceleration [(km/s)^2/pc] at Galactocentric positions (k, 3) [pc], from galpy."""
    big_r = np.hypot(pos[:, 0], pos[:, 1])
    unit_f = 220.0**2 / 8000.0  # galpy natural force unit vo^2 / ro
    fr = evaluateRforces(GALPY_MW2014, big_r / 8000.0, pos[:, 2] / 8000.0) * unit_f
    fz = evaluatezforces(GALPY_MW2014, big_r / 8000.0, pos[:, 2] / 8000.0) * unit_f
    return np.stack([fr * pos[:, 0] / big_r, fr * pos[:, 1] / big_r, fz], axis=-1)


def reference_relative_orbits(obs, t_end_myr, *, rtol=1e-12):
    """Independent orbits of the stars relative to the Sun from t = 0 to t_end_myr.

    The Sun and every star are test particles in galpy's MWPotential2014
    (``galpy_acceleration``), integrated in Galactocentric coordinates with
    scipy's DOP853 (Hairer, Norsett & Wanner 1993) at ``rtol`` and atol 1e-9
    (pc, km/s), with dense output. Returns ``rel(t_myr) -> (len(t), n, 6)``,
    the star-minus-Sun states (pc, km/s) from the dense-output interpolant.
    """
    y0 = galpy_initial_states(obs)
    k = y0.shape[0]

    def fun(_t, y):
        yy = y.reshape(k, 6)
        return np.concatenate([yy[:, 3:], galpy_acceleration(yy[:, :3])], axis=1).ravel()

    sol = solve_ivp(
        fun, (0.0, t_end_myr / REF_MYR_PER_TIME_UNIT), y0.ravel(), method="DOP853",
        rtol=rtol, atol=1e-9, dense_output=True,
    )  # fmt: skip
    assert sol.success, sol.message

    def rel(t_myr):
        y = sol.sol(np.atleast_1d(np.asarray(t_myr, dtype=float)) / REF_MYR_PER_TIME_UNIT)
        y = y.T.reshape(-1, k, 6)
        return y[:, 1:] - y[:, :1]

    return rel


STARS = invented_stars(22, seed=20261202)


@pytest.fixture(scope="module")
def galpy_results():
    t_lin = StraightLine().evaluate(STARS).time_myr
    return np.array([galpy_perihelion(o, t) for o, t in zip(STARS, t_lin, strict=True)])


def test_direct_integration_agrees_with_galpy(galpy_results):
    # galpy 1.12 with the same potential (MWPotential2014, Bovy 2015) and the same
    # solar parameters (ro = 8 kpc, vo = 220 km/s, zo = 20.8 pc, Schoenrich 2010
    # solar motion). Issue 3 tolerance: 1 au or 1e-5 relative in d_ph, 1e-5 in t_ph.
    ph = OrbitModel(horizon_myr=10.0).evaluate(STARS)
    tg, dg, vg = galpy_results.T
    assert not ph.flags.any()
    tol_d = np.maximum(1.0 / AU_PER_PC, 1e-5 * dg)
    assert np.all(np.abs(ph.distance_pc - dg) < tol_d)
    assert np.all(np.abs(ph.time_myr - tg) < 1e-5 * np.abs(tg))
    assert np.all(np.abs(ph.speed_kms - vg) < 1e-6 * vg)
    # stricter than the issue: both are converged integrations, found to agree to
    # ~0.001 au here; 0.01 au leaves room for the parabola refinement of galpy's grid
    assert np.all(np.abs(ph.distance_pc - dg) * AU_PER_PC < 0.01)
    # the orbit differs measurably from the straight line for these stars (the
    # comparison is not trivially passed by an unbent path)
    sl = StraightLine().evaluate(STARS)
    assert np.max(np.abs(sl.distance_pc - dg)) > 100 * np.max(tol_d)
    # the straight-line answer reported alongside equals the StraightLine model
    # (Matthews 1994 formulas, computed there from the observables directly)
    rep = ph.info["straight_line"]
    assert np.allclose(rep["distance_pc"], sl.distance_pc, rtol=1e-10)
    assert np.allclose(rep["time_myr"], sl.time_myr, rtol=1e-10)


def test_map_nominal_agrees_with_galpy(galpy_results):
    # the leaf maps (a cloud of 400 draws around the star, the star itself as row 0) against galpy (as above);
    # issue 3 tolerance: 1 au or 1e-5 relative in d_ph, 1e-5 in t_ph
    model = OrbitModel(horizon_myr=10.0)
    tg, dg, _ = galpy_results.T
    rng = np.random.default_rng(4)
    for i in range(0, len(STARS), 7):
        cloud = STARS[i] + rng.normal(size=(400, 6)) * [1e-6, 1e-6, 0.02, 0.02, 0.02, 0.2]
        cloud[0] = STARS[i]
        ph = model.evaluate(cloud)
        assert ph.info["method"].startswith("leaf_maps")
        assert abs(ph.distance_pc[0] - dg[i]) < max(1.0 / AU_PER_PC, 1e-5 * dg[i])
        assert abs(ph.time_myr[0] - tg[i]) < 1e-5 * abs(tg[i])


def test_sun_orbit_conserves_energy_and_angular_momentum():
    # a static axisymmetric potential conserves E and L_z (Binney & Tremaine 2008,
    # Sect. 3.2); issue 3 asks for 1e-10 over the horizon.
    model = OrbitModel()
    nodes = np.linspace(-20.0, 20.0, 81) / MYR_PER_PC_PER_KMS
    rel = observables_to_cartesian(STARS[:1])
    _, _, sun = integrate_relative(
        model.potential, model._sun_state, rel, nodes, rtol=1e-12, atol=1e-11
    )
    energy = 0.5 * np.sum(sun[:, 3:] ** 2, axis=1) + model.potential.potential(sun[:, :3])
    lz = sun[:, 0] * sun[:, 4] - sun[:, 1] * sun[:, 3]
    assert np.max(np.abs(energy / energy[40] - 1)) < 1e-10
    assert np.max(np.abs(lz / lz[40] - 1)) < 1e-10


def test_solar_sets_match_astropy_and_the_issue():
    # astropy 8 Galactocentric defaults (galactocentric_frame_defaults "latest")
    reg = coord.galactocentric_frame_defaults.get_from_registry("latest")["parameters"]
    sun = get_solar_parameters("astropy_v4")
    assert math.hypot(sun.r0_pc, sun.z_pc) == pytest.approx(
        reg["galcen_distance"].to_value(u.pc), rel=1e-14
    )
    assert sun.z_pc == pytest.approx(reg["z_sun"].to_value(u.pc), rel=1e-14)
    vsun = reg["galcen_v_sun"].xyz.to_value(u.km / u.s)
    assert [sun.u_kms, sun.v_circ_kms + sun.v_kms, sun.w_kms] == pytest.approx(vsun, rel=1e-14)
    # issue 3 / galpy note: with the default set galpy has R = 8 kpc,
    # vR = -11.1, vT = 232.24, vz = 7.25 km/s for the Sun
    rot, state = get_solar_parameters("bovy2015").frame()
    g = Orbit(**GALPY_KW)
    assert math.hypot(state[0], state[1]) == pytest.approx(g.R() * 1000.0, rel=1e-12)
    assert state[2] == pytest.approx(g.z() * 1000.0, rel=1e-9)
    assert -state[3] == pytest.approx(g.vR(), rel=1e-12)
    assert state[4] == pytest.approx(g.vT(), rel=1e-12)
    # a star's Galactocentric position against astropy's own transformation
    obs = STARS[0]
    xv = observables_to_cartesian(obs)
    frame = coord.Galactocentric(
        galcen_distance=math.hypot(8000.0, 20.8) * u.pc, z_sun=20.8 * u.pc,
        galcen_v_sun=coord.CartesianDifferential([11.1, 232.24, 7.25] * u.km / u.s),
    )  # fmt: skip
    icrs = coord.SkyCoord(ra=obs[0] * u.deg, dec=obs[1] * u.deg, distance=1000 / obs[2] * u.pc)
    gc = icrs.transform_to(frame).cartesian.xyz.to_value(u.pc)
    assert np.allclose(state[:3] + rot @ xv[:3], gc, rtol=0, atol=1e-9)


def test_perihelion_outside_window_is_flagged_not_clipped():
    # An invented slow star 20 pc away whose perihelion is ~4.8 Myr ahead, searched
    # in a 1 Myr window. The documented rule (OrbitModel docstring): flagged, and
    # given the straight-line extrapolation from the relative state at the window
    # edge, t = t_e - s.w / |w|^2, d = |s + w (t - t_e)|, v = |w| (Matthews 1994
    # for the straight line).
    obs = np.array([[120.0, -30.0, 50.0, 3.0, 1.0, -4.0]])
    edge = 1.0
    ph = OrbitModel(horizon_myr=edge).evaluate(obs)
    assert ph.flags[0] and ph.info["n_outside_window"] == 1
    # independent state at the window edge: scipy DOP853 at rtol 1e-12 of the Sun
    # and the star in galpy's MWPotential2014, initial conditions from galpy's
    # frame transformation (reference_relative_orbits; no package code involved)
    rel = reference_relative_orbits(obs, edge)(edge)[0, 0]
    s, w = rel[:3], rel[3:]
    assert s @ w < 0  # the separation still falls at the edge: the flag is deserved
    dt = -(s @ w) / (w @ w)
    t_ref = edge + dt * REF_MYR_PER_TIME_UNIT
    d_ref = float(np.linalg.norm(s + w * dt))
    v_ref = float(np.linalg.norm(w))
    # Tolerance 1e-6 relative: the package's state at the edge is its DOP853
    # solution (rtol 1e-10) at a grid node, with no interpolation, in a potential
    # that matches galpy's forces to 1e-9 (test_potentials); the extrapolation
    # amplifies relative errors by about dt |w| / d ~ 10. Observed: ~1e-11.
    tol = 1e-6
    assert ph.time_myr[0] == pytest.approx(t_ref, rel=tol)
    assert ph.distance_pc[0] == pytest.approx(d_ref, rel=tol)
    assert ph.speed_kms[0] == pytest.approx(v_ref, rel=tol)
    # the check can fail: the straight line from today (Matthews 1994), and the
    # clipped answer (time and separation at the edge itself), differ from the
    # reference by far more than the tolerance
    sl = StraightLine().evaluate(obs)
    assert abs(sl.time_myr[0] / t_ref - 1) > 100 * tol
    assert abs(sl.distance_pc[0] / d_ref - 1) > 100 * tol
    assert abs(np.linalg.norm(s) / d_ref - 1) > 100 * tol and t_ref > edge + 1.0
    # with a window that holds the perihelion the same star is not flagged, and
    # its perihelion lies beyond the short window's edge
    full = OrbitModel(horizon_myr=10.0).evaluate(obs)
    assert not full.flags[0] and full.info["n_outside_window"] == 0
    assert full.time_myr[0] > edge


def test_jacobian_from_transition_matrix_matches_finite_differences():
    # central finite differences of direct integrations (textbook numerics; the
    # finite-difference noise sets the per-row absolute tolerance)
    model = OrbitModel(horizon_myr=10.0)
    point = STARS[3]
    jac = model.jacobian(point)
    fd = ForwardModel.jacobian(OrbitModel(horizon_myr=10.0, method="direct"), point)
    atol = 1e-6 * np.abs(fd).max(axis=1, keepdims=True)
    assert np.all(np.abs(jac - fd) <= 1e-5 * np.abs(fd) + atol)
    # and it differs from the straight-line Jacobian (Matthews 1994) by the bending
    assert np.abs(jac - StraightLine().jacobian(point)).max() > 100 * atol.max()


def test_options_raise_clear_errors():
    # bad input names the option, value and what is accepted (project rule)
    with pytest.raises(OrbitOptionError, match="method = 'fast': expected one of"):
        OrbitModel(method="fast")
    with pytest.raises(OrbitOptionError, match=r"horizon_myr = \(1.0, 2.0\): expected \(t_min, t_max\)"):
        OrbitModel(horizon_myr=(1.0, 2.0))
    with pytest.raises(ValueError, match="sun = 'nowhere': not a known solar parameter set"):
        OrbitModel(sun="nowhere")
    with pytest.raises(ValueError, match="no option 'horizon'.*accepted"):
        make_model("orbit", horizon=3)
    with pytest.raises(ValueError, match="parallax = -1.0: expected a positive parallax"):
        OrbitModel().evaluate(np.array([[1.0, 2.0, -1.0, 0.0, 0.0, 5.0]]))
    desc = make_model("orbit", sun="astropy_v4").describe()
    assert desc["potential"]["name"] == "MWPotential2014"
    assert desc["sun"]["name"] == "astropy_v4" and desc["sun"]["z_pc"] == 20.8


@settings(max_examples=15, deadline=None)
@given(
    st.floats(0.0, 360.0), st.floats(-89.0, 89.0), st.floats(20.0, 200.0),
    st.floats(-300.0, 300.0), st.floats(-300.0, 300.0), st.floats(5.0, 60.0),
)
def test_negligible_potential_gives_the_straight_line(ra, dec, plx, pmra, pmdec, vr):
    # Newton's first law: with a 1 Msun Plummer sphere at the Galactic centre the
    # tidal field is ~1e-11 of MWPotential2014's, so orbits are straight lines
    # (Matthews 1994 formulas in StraightLine).
    obs = np.array([[ra, dec, plx, pmra, pmdec, vr]])
    sl = StraightLine().evaluate(obs)
    if abs(sl.time_myr[0]) > 9.0:
        return
    ph = OrbitModel(potential=Plummer(mass_msun=1.0, b_pc=100.0), horizon_myr=10.0).evaluate(obs)
    assert ph.distance_pc[0] == pytest.approx(sl.distance_pc[0], rel=1e-7, abs=1e-7)
    assert ph.time_myr[0] == pytest.approx(sl.time_myr[0], rel=1e-7, abs=1e-9)
    assert ph.speed_kms[0] == pytest.approx(sl.speed_kms[0], rel=1e-9)


def test_solar_parameters_take_numpy_numbers_and_refuse_booleans():
    # a numpy integer is a number (numbers.Real, PEP 3141); a boolean is not a velocity
    from perierr.models.orbit.sun import SolarParameterError, get_solar_parameters

    sun = get_solar_parameters().replace(r0_pc=np.int64(8100))
    assert sun.r0_pc == 8100.0 and isinstance(sun.r0_pc, float)
    with pytest.raises(SolarParameterError, match="u_kms = True: expected a finite number"):
        get_solar_parameters().replace(u_kms=True)
