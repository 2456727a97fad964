"""Monte Carlo propagation where some draws have parallax <= 0, the nuisance stream and the seed rule.

Every expected value is computed here from a closed form (the straight-line perihelion, the two-body
hyperbola), numpy/scipy (default_rng, truncnorm, np.quantile) or the rule written in a docstring.
"""

import astropy.constants as const
import astropy.units as u
import numpy as np
from scipy.stats import truncnorm

from perierr import ObservedStar, StraightLine, monte_carlo
from perierr.models.base import ForwardModel
from perierr.models.focusing import Focused
from perierr.propagate.montecarlo import evaluate_aligned, nuisance_rng, propagate_samples
from perierr.sampling.gaussian import Samples, draw_gaussian, resolve_seed

MAS_PER_DEG = 3.6e6  # definition of the milliarcsecond
K_AU_YR = (1 * u.au / u.yr).to_value(u.km / u.s)  # 1 au/yr in km/s (astropy)
G_SUN = (const.G * u.Msun).to_value(u.pc * (u.km / u.s) ** 2)  # G M_sun in pc (km/s)^2 (astropy)


def far_star():
    """An invented star (not a real object) whose parallax is 2 sigma from zero: about 2 % of draws are <= 0."""
    sig = np.array([0.05 / MAS_PER_DEG, 0.04 / MAS_PER_DEG, 0.5, 0.3, 0.2, 1.0])
    mean = np.array([150.0, -20.0, 1.0, 4.0, -2.5, -30.0])
    return ObservedStar(mean, np.diag(sig**2), name="Invented-far")


def straight(x):
    """Straight-line (d_ph [pc], |v| [km/s]): d = r v_t / |v| (Matthews 1994, QJRAS 35, 1), r = 1000 / parallax."""
    r = 1000.0 / x[:, 2]
    vt = K_AU_YR * np.hypot(x[:, 3], x[:, 4]) * r / 1000.0
    v = np.hypot(vt, x[:, 5])
    return r * vt / v, v


def draws(n=4000, seed=4):
    values = draw_gaussian(far_star().mean, far_star().cov, n, np.random.default_rng(seed))
    valid = values[:, 2] > 0
    assert 0 < np.count_nonzero(~valid) < n  # the case under test: some, not all, parallaxes <= 0
    return values, valid


class AtReference(ForwardModel):
    """A zeroth-order map: every row gets the straight-line perihelion of ``reference`` (of itself without one).

    The documented role of ``reference`` (ForwardModel.evaluate): the point a model builds its map around;
    without it every row is evaluated on its own.
    """

    name = "at_reference"

    def evaluate(self, observables, *, reference=None):
        obs = np.asarray(observables, dtype=float)
        pts = obs if reference is None else np.broadcast_to(np.asarray(reference, dtype=float), obs.shape)
        return StraightLine().evaluate(np.ascontiguousarray(pts))


def test_aligned_outputs_have_one_row_per_draw_and_nan_where_the_parallax_is_not_positive():
    values, valid = draws()
    ph, got_valid = evaluate_aligned(StraightLine(), values)
    np.testing.assert_array_equal(got_valid, valid)
    assert ph.distance_pc.shape == ph.time_myr.shape == ph.speed_kms.shape == (values.shape[0],)
    d, v = straight(values[valid])
    np.testing.assert_allclose(ph.distance_pc[valid], d, rtol=1e-12)  # closed form, float rounding only
    np.testing.assert_allclose(ph.speed_kms[valid], v, rtol=1e-12)
    for out in (ph.time_myr, ph.distance_pc, ph.speed_kms):
        assert np.all(np.isnan(out[~valid])) and np.all(np.isfinite(out[valid]))
    assert ph.flags is None or not ph.flags[~valid].any()


def test_the_reference_reaches_the_model_when_some_parallaxes_are_not_positive():
    values, valid = draws()
    ref = far_star().mean
    d_ref = straight(ref[None, :])[0][0]
    ph, _ = evaluate_aligned(AtReference(), values, reference=ref)
    np.testing.assert_allclose(ph.distance_pc[valid], d_ref, rtol=1e-12)  # every kept row sits at the reference
    assert np.all(np.isnan(ph.distance_pc[~valid]))
    res = propagate_samples(Samples(values), AtReference(), reference=ref)
    assert res.n_nonpositive_parallax == np.count_nonzero(~valid)
    assert abs(res.summaries["distance_pc"].median - d_ref) <= 1e-12 * d_ref
    assert res.summaries["distance_pc"].std == 0.0  # a point mass


def focused_expectation(values, valid, seed, mass, mass_error):
    """Two-body focusing of the straight line, one truncated-normal mass per kept draw from default_rng(seed).

    q = b x / (1 + sqrt(1 + x^2)), x = b v^2 / mu, mu = G (M_sun + M), the pericentre of the hyperbola with
    impact parameter b and speed at infinity v (e.g. Binney & Tremaine 2008, Sect. 3.1); masses from
    scipy.stats.truncnorm truncated at 0 (the rule of Focused.evaluate_draws).
    """
    b, v = straight(values[valid])
    masses = truncnorm.rvs(-mass / mass_error, np.inf, loc=mass, scale=mass_error, size=b.size,
                           random_state=np.random.default_rng(seed))  # fmt: skip
    mu = G_SUN * (1.0 + masses)
    x = b * v * v / mu
    q = b * x / (1.0 + np.sqrt(1.0 + x * x))
    return b, q, np.sqrt(v * v + 2.0 * mu / q)


def assert_shift(got, b, q):
    gap = np.abs((got - b) - (q - b))
    assert np.all(gap <= 1e-6 * np.abs(q - b) + 1e-14 * b), float(np.max(gap / np.abs(q - b)))


def test_nuisance_masses_are_drawn_for_the_kept_draws_only():
    values, valid = draws()
    model = Focused(StraightLine(), mass_msun=0.8, mass_error_msun=0.3)
    b, q, vq = focused_expectation(values, valid, 11, 0.8, 0.3)
    ph, _ = evaluate_aligned(model, values, rng=np.random.default_rng(11))
    # the focusing shift q - b is about 1e-6 pc here; with the nominal mass it would be off by ~ 0.3 / 1.8;
    # tolerance: 1e-6 of the shift plus the rounding of b and q (a few ulp of b)
    assert_shift(ph.distance_pc[valid], b, q)
    np.testing.assert_allclose(ph.speed_kms[valid], vq, rtol=1e-12)
    assert np.all(np.isnan(ph.distance_pc[~valid]))
    res = propagate_samples(Samples(values), model, rng=np.random.default_rng(11))
    x, w = res.valid_values(res.perihelion.distance_pc)
    assert w is None
    assert_shift(x, b, q)
    # the summary is Hyndman & Fan definition 5 of the kept draws (numpy method="hazen")
    np.testing.assert_allclose(res.summaries["distance_pc"].quantile(0.84),
                               np.quantile(x, 0.84, method="hazen"), rtol=1e-12)  # fmt: skip


def test_nuisance_stream_is_default_rng_of_seed_and_1():
    # the rule in nuisance_rng's docstring: numpy.random.default_rng([seed, 1]); None -> a fresh stream
    np.testing.assert_array_equal(nuisance_rng(7).random(5), np.random.default_rng([7, 1]).random(5))
    a, b = nuisance_rng(None), nuisance_rng(None)
    assert isinstance(a, np.random.Generator)
    assert not np.array_equal(a.random(4), b.random(4))  # two fresh 128-bit entropy seeds (collision ~ 2**-128)


def test_a_generator_seed_gives_its_next_63_bit_integer_and_the_same_run():
    # the documented rule (resolve_seed): seed.integers(2**63), one draw from the generator
    expected = int(np.random.default_rng(2024).integers(2**63))
    assert resolve_seed(np.random.default_rng(2024)) == expected
    assert 0 <= expected < 2**63
    gen = np.random.default_rng(2024)
    first, second = resolve_seed(gen), resolve_seed(gen)
    assert (first, second) == tuple(int(s) for s in np.random.default_rng(2024).integers(2**63, size=2))
    star = far_star()
    by_gen = monte_carlo(star, StraightLine(), n=500, seed=np.random.default_rng(2024))
    by_int = monte_carlo(star, StraightLine(), n=500, seed=expected)
    assert by_gen.samples.seed == expected
    np.testing.assert_array_equal(by_gen.samples.values, by_int.samples.values)
    np.testing.assert_array_equal(by_gen.perihelion.distance_pc, by_int.perihelion.distance_pc)
