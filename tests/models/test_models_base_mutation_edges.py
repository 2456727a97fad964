"""The progress seam of the model layer: accepts_progress, with_progress, the default evaluate_draws, and the
``progress`` argument of StraightLine and Focused.

Written for the mutation run of the frames_models group. The contract checked here is the one documented in
perierr.models.base (ForwardModel class docstring and with_progress): ``progress(done, total)`` is called as
rows finish, ``done == total`` last; it never changes what is computed; a model whose method does not take
``progress`` is called without it and the batch is reported once, ``progress(n, n)``; the other arguments
(``rng``, ``reference``) are passed on. Values are checked against the closed-form straight-line perihelion
and the two-body hyperbola, written here with astropy constants and units. All stars are invented.
"""

import functools

import astropy.constants as const
import astropy.units as u
import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal

from perierr.models import StraightLine
from perierr.models.base import ForwardModel, Perihelion, accepts_progress, with_progress
from perierr.models.focusing import Focused

# astropy: G M_sun in pc (km/s)^2, the gravitational parameter of one solar mass
G_ASTROPY = float((const.G * const.M_sun).to_value(u.pc * u.km**2 / u.s**2))

# invented stars: (ra, dec, parallax [mas], pmra, pmdec [mas/yr], radial velocity [km/s])
STARS = np.array([
    [10.0, -20.0, 5.0, 3.0, -4.0, -30.0],
    [200.0, 45.0, 12.5, -1.0, 0.5, -12.0],
    [300.0, 5.0, 2.0, 0.2, 0.1, 55.0],
    [45.0, -60.0, 40.0, 25.0, 10.0, -80.0],
    [120.0, 80.0, 8.0, -6.0, 2.0, 20.0],
])  # fmt: skip


def _straight_line(obs):
    """Closed-form straight-line perihelion (common practice, no source): with the star at r = (D, 0, 0) and
    v = (v_r, v_t, 0), t = -(r.v)/|v|^2 and d = |r + v t|; D = 1 pc / (parallax / 1 arcsec) and
    v_t = mu D (small angles), both converted with astropy units. Returns t [Myr], d [pc], |v| [km/s]."""
    obs = np.atleast_2d(obs)
    dist = (1.0 / (obs[:, 2] * 1e-3)) * u.pc
    mu = np.hypot(obs[:, 3], obs[:, 4]) * u.mas / u.yr
    vt = (mu * dist).to(u.km / u.s, equivalencies=u.dimensionless_angles())
    vr = obs[:, 5] * u.km / u.s
    r = np.stack([dist.to_value(u.pc), np.zeros(len(obs)), np.zeros(len(obs))], axis=-1) * u.pc
    v = np.stack([vr.to_value(u.km / u.s), vt.to_value(u.km / u.s), np.zeros(len(obs))], axis=-1) * (u.km / u.s)
    vv = np.sum(v * v, axis=-1)
    t = -np.sum(r * v, axis=-1) / vv
    d = np.linalg.norm(r + v * t[:, None], axis=-1)
    return t.to_value(u.Myr), d.to_value(u.pc), np.sqrt(vv).to_value(u.km / u.s)


def _pericentre(b, v, mass):
    """Two-body hyperbola (Murray & Dermott 1999, Sect. 2.5, from memory): |a| = mu/v^2,
    e = sqrt(1 + b^2 v^4/mu^2), q = |a| (e - 1) = sqrt(b^2 + a^2) - a, and v_q = b v / q (angular momentum)."""
    mu = G_ASTROPY * (1.0 + np.asarray(mass, dtype=float))
    a = mu / np.asarray(v, dtype=float) ** 2
    q = np.sqrt(np.asarray(b, dtype=float) ** 2 + a * a) - a
    return q, b * v / q


class _Recorder:
    """A progress callback that records every call with all its arguments."""

    def __init__(self):
        self.calls = []

    def __call__(self, *args, **kwargs):
        self.calls.append((args, kwargs))

    @property
    def args(self):
        return [a for a, _ in self.calls]


def _toy_outputs(obs, jitter):
    """Invented model outputs, a plain function of the rows: t = ra / 100, d = parallax * jitter, v = |v_r|."""
    obs = np.asarray(obs, dtype=float)
    return Perihelion(obs[:, 0] / 100.0, obs[:, 2] * jitter, np.abs(obs[:, 5]))


class _Staged(ForwardModel):
    """An invented model that takes ``progress`` and reports in two stages (half the rows, then all), records
    the ``reference`` it was given and draws one uniform jitter per row from ``rng`` in evaluate_draws."""

    name = "staged"

    def __init__(self):
        self.references = []

    def evaluate(self, observables, *, reference=None, progress=None):
        return self.evaluate_draws(observables, None, reference=reference, progress=progress)

    def evaluate_draws(self, observables, rng=None, *, reference=None, progress=None):
        self.references.append(reference)
        n = np.asarray(observables).shape[0]
        jitter = np.ones(n) if rng is None else 1.0 + rng.uniform(size=n)
        if progress is not None:
            progress(n // 2, n)
            progress(n, n)
        return _toy_outputs(observables, jitter)


class _Legacy(ForwardModel):
    """The same invented model written before ``progress`` existed: its methods do not take it."""

    name = "legacy"

    def __init__(self):
        self.references = []

    def evaluate(self, observables, *, reference=None):
        return self.evaluate_draws(observables, None, reference=reference)

    def evaluate_draws(self, observables, rng=None, *, reference=None):
        self.references.append(reference)
        n = np.asarray(observables).shape[0]
        jitter = np.ones(n) if rng is None else 1.0 + rng.uniform(size=n)
        return _toy_outputs(observables, jitter)


def _expected_toy(obs, seed):
    """The toy outputs for rows ``obs`` with the jitter drawn by a fresh generator of ``seed``."""
    jitter = 1.0 + np.random.default_rng(seed).uniform(size=len(obs))
    return obs[:, 0] / 100.0, obs[:, 2] * jitter, np.abs(obs[:, 5])


def _assert_toy(p, obs, seed):
    t, d, v = _expected_toy(obs, seed)
    # the same arithmetic on the same draws (numpy.random.Generator is reproducible by seed): exact
    assert_array_equal(p.time_myr, t)
    assert_array_equal(p.distance_pc, d)
    assert_array_equal(p.speed_kms, v)


# ----------------------------------------------------------------------------- accepts_progress


def test_accepts_progress_reads_a_parameter_named_progress_and_nothing_else():
    # documented rule (accepts_progress): only a parameter of that name counts, **kwargs does not; a callable
    # without an inspectable signature does not take it (inspect.signature raises TypeError or ValueError,
    # Python docs of inspect.signature)
    assert accepts_progress(StraightLine().evaluate) is True
    assert accepts_progress(_Staged().evaluate_draws) is True
    assert accepts_progress(_Legacy().evaluate) is False
    assert accepts_progress(lambda observables, **kwargs: None) is False
    assert accepts_progress(lambda observables, PROGRESS=None: None) is False  # names are case-sensitive

    class _BadSignature:
        __signature__ = 42  # inspect.signature: TypeError "unexpected object in __signature__ attribute"

        def __call__(self, observables, progress=None):
            return None

    def two(a):
        return a

    assert accepts_progress(_BadSignature()) is False
    assert accepts_progress(functools.partial(two, 1, 2)) is False  # inspect.signature: ValueError
    assert accepts_progress(42) is False  # not callable: TypeError


# ----------------------------------------------------------------------------- with_progress


def test_with_progress_hands_progress_rng_and_reference_to_a_model_that_takes_progress():
    # documented rule (with_progress): a method with a progress keyword gets it, so the caller sees the model's
    # own reports (here two stages); rng and reference are passed on
    model, rec, seed = _Staged(), _Recorder(), 7
    ref = STARS[0].copy()
    p = with_progress(model.evaluate_draws, STARS[:4], np.random.default_rng(seed), reference=ref, progress=rec)
    assert rec.calls == [((2, 4), {}), ((4, 4), {})]
    assert len(model.references) == 1 and model.references[0] is ref
    _assert_toy(p, STARS[:4], seed)


def test_with_progress_reports_the_batch_once_for_a_model_without_progress():
    # documented rule (with_progress): a method without a progress keyword is called without it, rng and
    # reference passed on, and progress(n, n) reports the whole batch when it returns
    model, rec, seed = _Legacy(), _Recorder(), 11
    ref = STARS[1].copy()
    p = with_progress(model.evaluate_draws, STARS, np.random.default_rng(seed), reference=ref, progress=rec)
    assert rec.calls == [((5, 5), {})]
    assert len(model.references) == 1 and model.references[0] is ref
    _assert_toy(p, STARS, seed)


def test_with_progress_without_a_callback_passes_rng_and_reference_on():
    # documented rule (with_progress): without progress the method is simply called with the other arguments
    for model in (_Legacy(), _Staged()):
        seed, ref = 13, STARS[2].copy()
        p = with_progress(model.evaluate_draws, STARS, np.random.default_rng(seed), reference=ref)
        assert len(model.references) == 1 and model.references[0] is ref
        _assert_toy(p, STARS, seed)


@settings(max_examples=25, deadline=None)
@given(st.integers(1, 40), st.booleans())
def test_the_last_report_is_done_equals_total_and_done_never_decreases(n, legacy):
    # documented invariant (ForwardModel docstring): done never decreasing, done == total last, total = rows
    rows = np.tile(STARS, (8, 1))[:n]
    model, rec = (_Legacy() if legacy else _Staged()), _Recorder()
    p = with_progress(model.evaluate, rows, reference=None, progress=rec)
    done = [a[0] for a in rec.args]
    assert rec.args[-1] == (n, n)
    assert all(len(a) == 2 and a[1] == n for a in rec.args)
    assert done == sorted(done)
    assert_array_equal(p.distance_pc, rows[:, 2])  # jitter 1 without rng


# ----------------------------------------------------------------------------- StraightLine and its default draws


def test_straight_line_reports_every_row_done_and_progress_changes_nothing():
    # documented rule (StraightLine.evaluate): progress is called once, progress(n, n), when every row is done;
    # the default evaluate_draws passes it on. Values: closed-form straight-line perihelion (above), astropy
    # units; 1e-12 relative covers the rounding of both double-precision computations
    t, d, v = _straight_line(STARS)
    for method in ("evaluate", "evaluate_draws"):
        rec = _Recorder()
        p = getattr(StraightLine(), method)(STARS, progress=rec)
        assert rec.calls == [((5, 5), {})], method
        assert_allclose(p.time_myr, t, rtol=1e-12)
        assert_allclose(p.distance_pc, d, rtol=1e-12)
        assert_allclose(p.speed_kms, v, rtol=1e-12)
    # one row given as a 1-d array is one row done
    rec = _Recorder()
    StraightLine().evaluate_draws(STARS[3], np.random.default_rng(1), progress=rec)
    assert rec.calls == [((1, 1), {})]


# ----------------------------------------------------------------------------- Focused passes progress on


def test_focused_hands_progress_to_the_wrapped_model():
    # documented rule (Focused.evaluate / evaluate_draws): progress goes to the wrapped model, so the caller
    # sees its own reports; the correction is the two-body hyperbola (above) at the nominal or drawn masses
    from scipy.stats import truncnorm

    n, seed = 4, 20261203
    obs = STARS[:n]
    model = Focused(_Staged(), mass_msun=0.8, mass_error_msun=0.2)

    rec = _Recorder()
    p = model.evaluate(obs, progress=rec)
    assert rec.calls == [((2, 4), {}), ((4, 4), {})]
    q, vq = _pericentre(obs[:, 2], np.abs(obs[:, 5]), 0.8)
    # q ~ 2-40 pc with a/q < 1e-6: the closed form above keeps ~1e-10 relative; the speed likewise
    assert_allclose(p.distance_pc, q, rtol=1e-9)
    assert_allclose(p.speed_kms, vq, rtol=1e-9)

    rec = _Recorder()
    p = model.evaluate_draws(obs, np.random.default_rng(seed), progress=rec)
    assert rec.calls == [((2, 4), {}), ((4, 4), {})]
    replay = np.random.default_rng(seed)
    b = obs[:, 2] * (1.0 + replay.uniform(size=n))  # the wrapped model draws first (Focused.evaluate_draws)
    mass = truncnorm.rvs(-0.8 / 0.2, np.inf, loc=0.8, scale=0.2, size=n, random_state=replay)
    q, vq = _pericentre(b, np.abs(obs[:, 5]), mass)
    assert_allclose(p.distance_pc, q, rtol=1e-9)
    assert_allclose(p.speed_kms, vq, rtol=1e-9)


def test_focused_over_a_model_without_progress_reports_the_batch_once():
    # documented rule (with_progress through Focused): a wrapped model without progress is reported once
    model = Focused(_Legacy(), mass_msun=1.0)
    for method in ("evaluate", "evaluate_draws"):
        rec = _Recorder()
        p = getattr(model, method)(STARS, progress=rec)
        assert rec.calls == [((5, 5), {})], method
        q, _ = _pericentre(STARS[:, 2], np.abs(STARS[:, 5]), 1.0)
        assert_allclose(p.distance_pc, q, rtol=1e-9)
