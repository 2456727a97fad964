"""Edges of frames and the straight-line and focusing models, each against an outside value.

Written for the mutation run of the frames_models group (issue 16): every test here kills
mutants that the other tests let live; the reference of each check is named next to it.
All stars are invented.
"""

import math
import warnings

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import ICRS, SkyCoord
from scipy.optimize import minimize_scalar

from perierr.errors import InputError
from perierr.frames import cartesian_to_observables, observables_to_cartesian
from perierr.models import StraightLine, make_model
from perierr.models.base import ForwardModel, Perihelion
from perierr.models.focusing import Focused, FocusingError, hyperbolic_perihelion
from perierr.models.straight import perihelion_cartesian_jacobian, perihelion_from_cartesian

# outside constants (astropy, IAU values)
MYR_PER_PC_PER_KMS = float((1.0 * u.pc / (u.km / u.s)).to_value(u.Myr))
KMS_PER_MASYR_AT_1MAS = float((1.0 * u.au / u.yr).to_value(u.km / u.s))
G_ASTROPY = float((const.G * const.M_sun).to_value(u.pc * u.km**2 / u.s**2))


# ----------------------------------------------------------------------------- helpers written in the test


def _hyperbola(b, v, mass):
    """Textbook pericentre of the Sun-star hyperbola (Murray & Dermott 1999, Sect. 2.5), astropy's G.

    |a| = mu / v^2, e = sqrt(1 + b^2 v^4 / mu^2), q = |a| (e - 1), v_q = sqrt(v^2 + 2 mu / q).
    """
    b, v, mass = (np.asarray(x, dtype=float) for x in (b, v, mass))
    mu = G_ASTROPY * (1.0 + mass)
    a = mu / v**2
    e = np.sqrt(1.0 + b * b * v**4 / mu**2)
    q = a * (e - 1.0)
    with np.errstate(divide="ignore"):
        return q, np.sqrt(v * v + 2.0 * mu / q)


def _lma(obs):
    """Straight-line perihelion from observables (Matthews 1994; Bailer-Jones 2015 Sect. 3), works on complex.

    t = -d v_r / v^2 [Myr], d_ph = d v_t / v, v_ph = v; d = 1000 / parallax, v_t = 4.74 mu d / 1000.
    """
    plx, pmra, pmdec, vr = obs[2], obs[3], obs[4], obs[5]
    d = 1000.0 / plx
    vt = KMS_PER_MASYR_AT_1MAS * np.sqrt(pmra * pmra + pmdec * pmdec) * d / 1000.0
    v = np.sqrt(vr * vr + vt * vt)
    return np.array([-d * vr / v**2 * MYR_PER_PC_PER_KMS, d * vt / v, v])


def _complex_step_jacobian(func, point, h=1e-30):
    """d func / d point by complex-step differentiation (Squire & Trapp 1998): exact to rounding."""
    cols = []
    for j in range(point.size):
        z = point.astype(complex)
        z[j] += 1j * h
        cols.append(np.imag(func(z)) / h)
    return np.stack(cols, axis=-1)


class _Probe(ForwardModel):
    """Straight-line answers, a record of every reference it is given, and flags from a rule of the rows."""

    name = "probe"

    def __init__(self, flag_rule=None):
        self.references = []
        self._line = StraightLine()
        self._flag_rule = flag_rule

    def evaluate(self, observables, *, reference=None):
        self.references.append(reference)
        obs = np.atleast_2d(np.asarray(observables, dtype=float))
        ph = self._line.evaluate(obs)
        flags = None if self._flag_rule is None else self._flag_rule(obs)
        return Perihelion(ph.time_myr, ph.distance_pc, ph.speed_kms, flags=flags, info={"model": self.name})


class _Linear(ForwardModel):
    """A toy model with t = ra, d_ph = pmra, v_ph = rv, whose analytic Jacobian is given as integers."""

    name = "linear"

    def evaluate(self, observables, *, reference=None):
        obs = np.atleast_2d(np.asarray(observables, dtype=float))
        return Perihelion(obs[:, 0], obs[:, 3], obs[:, 5])

    def jacobian(self, point):
        jac = np.zeros((3, 6), dtype=np.int64)
        jac[0, 0] = jac[1, 3] = jac[2, 5] = 1
        return jac


class _Sky(ForwardModel):
    """A toy model whose outputs are the Cartesian position (x, y, z) [pc]; Jacobian by the default differences."""

    name = "sky"

    def evaluate(self, observables, *, reference=None):
        obs = np.atleast_2d(np.asarray(observables, dtype=float))
        a, d, dist = np.radians(obs[:, 0]), np.radians(obs[:, 1]), 1000.0 / obs[:, 2]
        return Perihelion(dist * np.cos(d) * np.cos(a), dist * np.cos(d) * np.sin(a), dist * np.sin(d))


class _FDLine(StraightLine):
    """The straight line with the base class's finite-difference Jacobian instead of its analytic one."""

    jacobian = ForwardModel.jacobian


# ----------------------------------------------------------------------------- frames


def _invented_batch(rng, n):
    ra = rng.uniform(0.0, 360.0, n)
    dec = np.degrees(np.arcsin(rng.uniform(-0.99, 0.99, n)))
    plx = rng.uniform(5.0, 200.0, n)
    return np.stack([ra, dec, plx, rng.normal(0, 150, n), rng.normal(0, 150, n), rng.normal(0, 40, n)], axis=-1)


def test_cartesian_to_observables_on_batches_matches_astropy():
    # astropy SkyCoord (ICRS, with distance, proper motion and radial velocity) gives the Cartesian
    # phase space of each invented star; the inverse must give back every row of a batch, for 2-D and 3-D
    # batches alike (each row on its own, not mixed with the others). Tolerances: rounding (common practice).
    rng = np.random.default_rng(1601)
    obs = _invented_batch(rng, 6)
    c = SkyCoord(ra=obs[:, 0] * u.deg, dec=obs[:, 1] * u.deg, distance=(1000.0 / obs[:, 2]) * u.pc,
                 pm_ra_cosdec=obs[:, 3] * u.mas / u.yr, pm_dec=obs[:, 4] * u.mas / u.yr,
                 radial_velocity=obs[:, 5] * u.km / u.s, frame=ICRS)
    xyz = c.cartesian.xyz.to_value(u.pc).T
    vel = c.velocity.d_xyz.to_value(u.km / u.s).T
    cart = np.concatenate([xyz, vel], axis=-1)
    for batch, ref in ((cart, obs), (cart.reshape(2, 3, 6), obs.reshape(2, 3, 6))):
        back = cartesian_to_observables(batch)
        assert back.shape == ref.shape
        np.testing.assert_allclose(back[..., :2], ref[..., :2], rtol=0, atol=1e-9)  # deg
        np.testing.assert_allclose(back[..., 2:], ref[..., 2:], rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(observables_to_cartesian(obs), cart, rtol=1e-9, atol=1e-9)


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_pole_direction_survives_underflow_of_the_distance(sign):
    # geometry (no source needed): a position on the +z (-z) axis points at dec = +90 (-90). At 1e-200 pc the
    # squares underflow, |x| rounds to 0 and z / |x| is +-inf: the clip to [-1, 1] must still give the pole.
    with np.errstate(divide="ignore", invalid="ignore"):
        out = cartesian_to_observables(np.array([0.0, 0.0, sign * 1e-200, 1.0, 2.0, 3.0]))
    assert out[1] == sign * 90.0


# ----------------------------------------------------------------------------- straight line


def test_straight_line_rest_and_unit_speed_rows():
    # closed form (Matthews 1994): a star at rest relative to the Sun keeps its distance for ever; perierr
    # reports it "now" (t = 0, d_ph = 1000 / parallax, v_ph = 0) and flags it. A star with v^2 = 1 exactly
    # (rv = 1 km/s, no proper motion) is an ordinary head-on row: t = -d / 1 km/s, d_ph = 0, v_ph = 1.
    obs = np.array([
        [30.0, 10.0, 50.0, 0.0, 0.0, 0.0],     # at rest, 20 pc
        [40.0, -5.0, 100.0, 0.0, 0.0, 1.0],    # receding at exactly 1 km/s, 10 pc
        [50.0, 20.0, 25.0, 12.0, -7.0, -20.0],  # ordinary
    ])
    ph = StraightLine().evaluate(obs)
    ref = np.array([_lma(row) for row in obs[1:]])
    np.testing.assert_allclose(ph.time_myr, [0.0, -10.0 * MYR_PER_PC_PER_KMS, ref[1, 0]], rtol=1e-12, atol=0)
    np.testing.assert_allclose(ph.distance_pc, [20.0, 0.0, ref[1, 1]], rtol=1e-12, atol=0)
    np.testing.assert_allclose(ph.speed_kms, [0.0, 1.0, ref[1, 2]], rtol=1e-12, atol=0)
    assert ph.flags.dtype == bool and ph.flags.tolist() == [True, False, False]
    assert ph.info["model"] == "straight_line"


def test_straight_line_single_row_and_unflagged_batch():
    # closed form (Matthews 1994) for one 1-D row; a batch of moving stars has no flagged row
    # (flags is None or an all-False bool array, as the Perihelion docstring allows).
    row = np.array([123.0, -40.0, 80.0, 300.0, -150.0, -25.0])
    ph = StraightLine().evaluate(row)
    assert ph.time_myr.shape == (1,)
    np.testing.assert_allclose(ph.as_array()[0], _lma(row), rtol=1e-12)
    flags = StraightLine().evaluate(np.stack([row, row + 1.0])).flags
    assert flags is None or (isinstance(flags, np.ndarray) and flags.dtype == bool and not flags.any())


def test_perihelion_from_cartesian_any_batch_shape_matches_a_numerical_minimum():
    # scipy's bounded scalar minimisation of |x + v t| for each invented phase-space point, for a single
    # 1-D point and a (2, 2, 6) batch. Tolerance: the minimiser's xatol on t (1e-10 pc/(km/s)).
    rng = np.random.default_rng(1602)
    cart = np.concatenate([rng.normal(0, 30, (4, 3)), rng.normal(0, 25, (4, 3))], axis=-1)
    ref = []
    for x, v in zip(cart[:, :3], cart[:, 3:]):
        bound = 4 * np.linalg.norm(x) / np.linalg.norm(v)
        res = minimize_scalar(lambda s, x=x, v=v: np.sum((x + v * s) ** 2), bounds=(-bound, bound),
                              method="bounded", options={"xatol": 1e-10})
        ref.append([res.x * MYR_PER_PC_PER_KMS, np.sqrt(res.fun), np.linalg.norm(v)])
    ref = np.array(ref)
    np.testing.assert_allclose(perihelion_from_cartesian(cart[0]), ref[0], rtol=1e-7)
    out = perihelion_from_cartesian(cart.reshape(2, 2, 6))
    assert out.shape == (2, 2, 3)
    np.testing.assert_allclose(out.reshape(4, 3), ref, rtol=1e-7)


def test_head_on_cartesian_jacobian_has_zero_distance_row():
    # documented convention (perihelion_cartesian_jacobian docstring): exactly head-on, d_ph = |x + v t| has a
    # kink and its row is zero; the time and speed rows stay smooth: complex-step derivatives of the closed
    # form t = -x.v / |v|^2, |v| (Squire & Trapp 1998).
    xv = np.array([3.0, -4.0, 12.0, -1.5, 2.0, -6.0])  # v parallel to -x: straight at the Sun
    jac = perihelion_cartesian_jacobian(xv)
    np.testing.assert_array_equal(jac[1], np.zeros(6))

    def t_and_speed(z):
        x, v = z[:3], z[3:]
        vv = np.sum(v * v)
        return np.array([-np.sum(x * v) / vv * MYR_PER_PC_PER_KMS, np.sqrt(vv)])

    ref = _complex_step_jacobian(t_and_speed, xv)
    np.testing.assert_allclose(jac[[0, 2]], ref, rtol=1e-12, atol=1e-15)


def test_straight_line_describe():
    # the model block of the JSON output names the model and says what it is (README "forward model")
    assert StraightLine().describe() == {"name": "straight_line", "description": "linear motion approximation"}


# ----------------------------------------------------------------------------- base class defaults


def test_default_jacobian_against_complex_step_on_sky_angles():
    # complex-step derivatives (Squire & Trapp 1998) of the toy model x, y, z = d (cos dec cos ra, ...):
    # central differences with steps of ~1e-7 deg agree to ~1e-8 relative (truncation ~ step^2).
    point = np.array([37.0, -52.0, 40.0, 10.0, -3.0, 5.0])

    def sky(z):
        a, d, dist = z[0] * np.pi / 180.0, z[1] * np.pi / 180.0, 1000.0 / z[2]
        return np.array([dist * np.cos(d) * np.cos(a), dist * np.cos(d) * np.sin(a), dist * np.sin(d)])

    ref = _complex_step_jacobian(sky, point)
    np.testing.assert_allclose(_Sky().jacobian(point), ref, rtol=1e-7, atol=1e-9)


def test_default_jacobian_on_a_nearly_resting_star():
    # complex-step derivatives of the LMA closed form (Matthews 1994) for an invented star moving at a few
    # m/s: its outputs curve on scales of 1e-3 mas/yr and km/s, so the finite-difference steps must shrink
    # with the values (common practice, no source). Error measured relative to the largest entry of each
    # output's row: steps ~1e-8 give ~3e-11 here, steps ~1e-6 would give ~1e-7; bound 1e-9.
    point = np.array([210.0, 15.0, 200.0, 0.002, -0.001, 0.003])
    ref = _complex_step_jacobian(_lma, point)
    err = np.abs(_FDLine().jacobian(point) - ref) / np.max(np.abs(ref), axis=1, keepdims=True)
    assert np.max(err) < 1e-9


def test_default_describe_and_evaluate_nuisance():
    # ForwardModel's documented defaults: describe() gives the name only; evaluate_nuisance ignores the
    # deviates and evaluates the rows with the reference it was given.
    probe = _Probe()
    assert probe.describe() == {"name": "probe"}
    rows = np.array([[10.0, 20.0, 50.0, 5.0, -5.0, -10.0], [11.0, 21.0, 40.0, 6.0, -4.0, -12.0]])
    ref = rows[0].copy()
    ph = probe.evaluate_nuisance(rows, np.zeros((2, 1)), reference=ref)
    np.testing.assert_allclose(ph.as_array(), [_lma(r) for r in rows], rtol=1e-12)
    assert probe.references[-1] is ref


# ----------------------------------------------------------------------------- focusing


def test_hyperbolic_perihelion_computes_in_double_precision_and_quietly():
    # textbook hyperbola (helper above, astropy's G): a float32 mass (e.g. a FITS column) still gives
    # double-precision answers; b = 0 gives q = 0 and v_q = inf without a divide-by-zero warning.
    b, v = np.array([0.002, 0.05]), np.array([0.7, 3.0])
    mass32 = np.float32(0.1)
    q, vq = hyperbolic_perihelion(b, v, mass32)
    q_ref, vq_ref = _hyperbola(b, v, float(mass32))
    np.testing.assert_allclose(q, q_ref, rtol=1e-10)
    np.testing.assert_allclose(vq, vq_ref, rtol=1e-10)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        q0, vq0 = hyperbolic_perihelion(np.array([0.0]), np.array([2.0]), 1.0)
    assert q0[0] == 0.0 and vq0[0] == np.inf


def test_focused_rejects_a_bad_mass_error_by_name():
    # the error names the offending option (Focused docstring: mass_error_msun >= 0)
    with pytest.raises(FocusingError, match=r"mass_error_msun = -0\.1: .*focusing option"):
        Focused(StraightLine(), mass_msun=1.0, mass_error_msun=-0.1)


def test_focused_describe_block():
    # documented fields of the focusing block (Focused docstring); G from astropy (IAU nominal values)
    for err, draws in ((0.5, "normal truncated at 0"), (0.0, "none")):
        desc = Focused(StraightLine(), mass_msun=0.8, mass_error_msun=err).describe()
        assert desc["name"] == "straight_line+focusing"
        assert desc["base"] == {"name": "straight_line", "description": "linear motion approximation"}
        foc = desc["focusing"]
        assert set(foc) == {"mass_msun", "mass_error_msun", "mass_draws", "G_pc_kms2_per_msun"}
        assert (foc["mass_msun"], foc["mass_error_msun"], foc["mass_draws"]) == (0.8, err, draws)
        assert foc["G_pc_kms2_per_msun"] == pytest.approx(G_ASTROPY, rel=1e-6)
        assert set(desc) == {"name", "base", "focusing"}


def _slow_close_rows():
    # invented slow, close encounters at 5 pc: impact parameters 0.01 ... 0.5 pc, 1-3 km/s
    d = 5.0
    out = []
    for b, vr in ((0.01, -1.0), (0.05, -2.0), (0.2, -1.5), (0.5, -3.0), (0.02, -2.5)):
        # d_ph = d v_t / v  =>  v_t = b v / d; choose v_t from b and v_r: v_t = b |v_r| / sqrt(d^2 - b^2)
        vt = b * abs(vr) / math.sqrt(d * d - b * b)
        pm = vt / (KMS_PER_MASYR_AT_1MAS * d / 1000.0)
        out.append([100.0, 30.0, 1000.0 / d, pm * 0.6, pm * 0.8, vr])
    return np.array(out)


def test_focused_info_against_the_textbook_hyperbola():
    # textbook hyperbola applied to the straight-line (b, v) of each row (closed form, Matthews 1994):
    # per-row changes and their summaries as the Focused docstring describes them.
    rows = _slow_close_rows()
    mass = 0.7
    ph = Focused(StraightLine(), mass_msun=mass).evaluate(rows)
    lma = np.array([_lma(r) for r in rows])
    b, v = lma[:, 1], lma[:, 2]
    np.testing.assert_allclose(b, [0.01, 0.05, 0.2, 0.5, 0.02], rtol=1e-9)  # the rows are what they claim
    q, vq = _hyperbola(b, v, mass)
    dd, dv = q - b, vq - v
    np.testing.assert_allclose(ph.distance_pc, q, rtol=1e-8)
    np.testing.assert_allclose(ph.speed_kms, vq, rtol=1e-8)
    np.testing.assert_allclose(ph.time_myr, lma[:, 0], rtol=1e-12)
    np.testing.assert_allclose(ph.info["focusing_delta_distance_pc"], dd, rtol=1e-7)
    np.testing.assert_allclose(ph.info["focusing_delta_speed_kms"], dv, rtol=1e-7)
    foc = ph.info["focusing"]
    assert foc["mass_msun"] == mass and foc["mass_error_msun"] == 0.0
    assert foc["median_delta_distance_pc"] == pytest.approx(np.median(dd), rel=1e-7)
    assert foc["max_abs_delta_distance_pc"] == pytest.approx(np.max(np.abs(dd)), rel=1e-7)
    assert foc["median_relative_delta_distance"] == pytest.approx(np.median(dd / b), rel=1e-7)
    assert foc["median_delta_speed_kms"] == pytest.approx(np.median(dv), rel=1e-7)
    assert foc["max_delta_speed_kms"] == pytest.approx(np.max(dv), rel=1e-7)
    assert foc["n_head_on"] == 0
    assert ph.flags is None or not np.any(ph.flags)


def test_focused_info_when_every_row_is_head_on():
    # closed form: b = 0 gives q = 0 and an infinite v_q (Murray & Dermott 1999, Sect. 2.5). No finite
    # speed change exists (reported as None), a zero impact parameter counts as no relative change, and
    # every row is flagged.
    rows = np.array([[10.0 * k, 5.0, 20.0 + k, 0.0, 0.0, -5.0 - k] for k in range(5)])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ph = Focused(StraightLine(), mass_msun=1.0).evaluate(rows)
    foc = ph.info["focusing"]
    assert foc["n_head_on"] == 5
    assert foc["median_delta_speed_kms"] is None and foc["max_delta_speed_kms"] is None
    assert foc["median_relative_delta_distance"] == 0.0
    assert foc["median_delta_distance_pc"] == 0.0 and foc["max_abs_delta_distance_pc"] == 0.0
    np.testing.assert_array_equal(ph.distance_pc, np.zeros(5))
    assert np.all(np.isinf(ph.speed_kms))
    assert ph.flags.tolist() == [True] * 5


def test_focused_info_with_some_rows_head_on():
    # three of five rows head-on (relative change 0 by convention), two with a textbook-hyperbola change:
    # the median relative change is then 0 (the middle of [r1, r2, 0, 0, 0] with r1, r2 < 0).
    rows = _slow_close_rows()[:2]
    head = np.array([[200.0, -10.0, 150.0, 0.0, 0.0, -4.0]] * 3)
    ph = Focused(StraightLine(), mass_msun=0.5).evaluate(np.concatenate([head[:1], rows, head[1:]]))
    foc = ph.info["focusing"]
    assert foc["median_relative_delta_distance"] == 0.0
    assert foc["n_head_on"] == 3
    assert ph.flags.tolist() == [True, False, False, True, True]


def test_focused_flags_combine_the_base_flags_and_head_on_rows():
    # Perihelion docstring: flags mark rows whose perihelion the model could not locate; focusing adds the
    # head-on rows (b = 0, q = 0) and keeps the wrapped model's own flags (logical or).
    probe = _Probe(flag_rule=lambda obs: obs[:, 0] > 180.0)
    rows = np.array([
        [10.0, 5.0, 50.0, 20.0, -10.0, -15.0],   # ordinary
        [200.0, 5.0, 50.0, 20.0, -10.0, -15.0],  # flagged by the base model
        [20.0, 5.0, 50.0, 0.0, 0.0, -15.0],      # head-on
        [30.0, 5.0, 50.0, 15.0, 10.0, -10.0],    # ordinary
    ])
    ph = Focused(probe, mass_msun=1.0).evaluate(rows)
    assert ph.flags.tolist() == [False, True, True, False]
    ph = Focused(StraightLine(), mass_msun=1.0).evaluate(rows)  # a base without flags
    assert ph.flags.tolist() == [False, False, True, False]
    ph = Focused(StraightLine(), mass_msun=1.0).evaluate(rows[[0, 3]])
    assert ph.flags is None or not np.any(ph.flags)


def test_focused_passes_the_reference_to_the_wrapped_model():
    # ForwardModel.evaluate contract: models that linearize around a nominal orbit need the reference, so a
    # wrapper must hand it on (and the base class's finite-difference Jacobian evaluates around the point).
    point = np.array([10.0, 20.0, 50.0, 5.0, -5.0, -10.0])
    rows = np.stack([point, point * 1.001])
    probe = _Probe()
    model = Focused(probe, mass_msun=1.0, mass_error_msun=0.2)
    model.evaluate(rows, reference=point)
    model.evaluate_draws(rows, np.random.default_rng(3), reference=point)
    model.evaluate_nuisance(rows, np.zeros((2, 1)), reference=point)
    model.jacobian(point)
    model.mass_jacobian(point)
    assert len(probe.references) >= 4
    for ref in probe.references:
        assert ref is not None
        np.testing.assert_array_equal(ref, point)


def test_focused_jacobian_with_an_integer_base_jacobian():
    # chain rule checked against central differences of the textbook hyperbola (helper above) in b and v;
    # the base's analytic Jacobian comes as integers (a valid array) and must not truncate the result.
    mass, b, v = 1.0, 0.003, 0.8
    point = np.array([15.0, 0.0, 100.0, b, 0.0, v])  # _Linear: t = ra, d_ph = pmra, v_ph = rv
    jac = Focused(_Linear(), mass_msun=mass).jacobian(point)
    h = 1e-7
    dq_db = (_hyperbola(b + h * b, v, mass)[0] - _hyperbola(b - h * b, v, mass)[0]) / (2 * h * b)
    dq_dv = (_hyperbola(b, v + h * v, mass)[0] - _hyperbola(b, v - h * v, mass)[0]) / (2 * h * v)
    dvq_db = (_hyperbola(b + h * b, v, mass)[1] - _hyperbola(b - h * b, v, mass)[1]) / (2 * h * b)
    dvq_dv = (_hyperbola(b, v + h * v, mass)[1] - _hyperbola(b, v - h * v, mass)[1]) / (2 * h * v)
    ref = np.zeros((3, 6))
    ref[0, 0] = 1.0
    ref[1, 3], ref[1, 5] = dq_db, dq_dv
    ref[2, 3], ref[2, 5] = dvq_db, dvq_dv
    np.testing.assert_allclose(jac, ref, rtol=1e-6, atol=1e-12)


def test_focused_jacobians_at_a_head_on_point():
    # closed form: near b = 0, q = b^2 v^2 / (2 mu) + O(b^4), so dq/db = dq/dv = 0 there and v_q is infinite
    # (documented as zero rows); the time row is the wrapped model's (complex-step derivative of the LMA,
    # Matthews 1994), and the mass derivative is zero too (q = 0 for any mass).
    point = np.array([15.0, 0.0, 100.0, 0.0, 0.0, 0.8])
    jac = Focused(_Linear(), mass_msun=1.0).jacobian(point)
    np.testing.assert_array_equal(jac[0], [1, 0, 0, 0, 0, 0])
    np.testing.assert_array_equal(jac[1:], np.zeros((2, 6)))
    star = np.array([80.0, -30.0, 40.0, 0.0, 0.0, -12.0])
    model = Focused(StraightLine(), mass_msun=0.9, mass_error_msun=0.1)
    jac = model.jacobian(star)
    assert np.all(np.isfinite(jac))
    np.testing.assert_array_equal(jac[1:], np.zeros((2, 6)))
    np.testing.assert_allclose(jac[0], _complex_step_jacobian(_lma, star)[0], rtol=1e-9, atol=1e-15)
    mj = model.mass_jacobian(star)
    assert mj.shape == (3,)
    np.testing.assert_array_equal(mj, np.zeros(3))


def test_focused_evaluate_nuisance_maps_deviates_to_masses():
    # mass error 0: every deviate means the nominal mass (textbook hyperbola); mass error 1 Msun: the deviate
    # z is the truncated normal's quantile norm.cdf(z) (scipy.stats.truncnorm.ppf, computed here).
    from scipy.stats import norm, truncnorm

    rows = _slow_close_rows()[:3]
    b, v = np.array([_lma(r)[1] for r in rows]), np.array([_lma(r)[2] for r in rows])
    z = np.array([[-1.0], [0.3], [1.5]])
    ph = Focused(StraightLine(), mass_msun=0.6).evaluate_nuisance(rows, z)
    np.testing.assert_allclose(ph.distance_pc, _hyperbola(b, v, 0.6)[0], rtol=1e-8)
    masses = truncnorm.ppf(norm.cdf(z[:, 0]), -2.0, np.inf, loc=2.0, scale=1.0)
    ph = Focused(StraightLine(), mass_msun=2.0, mass_error_msun=1.0).evaluate_nuisance(rows, z)
    np.testing.assert_allclose(ph.distance_pc, _hyperbola(b, v, masses)[0], rtol=1e-8)


# ----------------------------------------------------------------------------- make_model


def test_make_model_defaults_and_focusing_options():
    # make_model docstring: the default is the orbit model (issue 11: the answer users quote must not be the
    # approximation); the two focusing options are taken out of the options and given to Focused (mass error
    # default 0); the same generator seed gives the same mass draws.
    from perierr.models.orbit import OrbitModel

    default = make_model()
    assert isinstance(default, OrbitModel) and not isinstance(default, Focused)
    assert default.describe() == OrbitModel().describe()  # the default options too
    plain = make_model("straight_line", star_mass_msun=0.6)
    assert isinstance(plain, Focused) and plain.mass_error_msun == 0.0 and plain.mass_msun == 0.6
    rows = _slow_close_rows()
    ref = rows[0]
    draws = []
    for _ in range(2):
        model = make_model("straight_line", star_mass_msun=0.6, star_mass_error_msun=0.3)
        assert model.mass_error_msun == 0.3
        draws.append(model.evaluate_draws(rows, np.random.default_rng(11), reference=ref).distance_pc)
    np.testing.assert_array_equal(draws[0], draws[1])
    other = model.evaluate_draws(rows, np.random.default_rng(12), reference=ref).distance_pc
    assert not np.array_equal(other, draws[0])
    # models hold no random state: the generator is an argument of evaluate_draws, not an option
    with pytest.raises(InputError, match=r"rng = 11: model 'straight_line' has no option 'rng'"):
        make_model("straight_line", star_mass_msun=0.6, rng=11)


def test_make_model_orbit_rejects_unknown_options_by_name():
    # make_model docstring: unknown options are an error naming the option (before any orbit is built)
    with pytest.raises(ValueError, match=r"model 'orbit' has no option 'no_such_option'"):
        make_model("orbit", no_such_option=3)
