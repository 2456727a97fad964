"""Distance prior densities, their text syntax and the 1-D posterior mode."""

import math

import astropy.units as u
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate

from perierr.errors import InputError
from perierr.priors import (
    PRIOR_SYNTAX,
    CustomPrior,
    ExponentialDensity,
    GeneralizedGamma,
    NoPrior,
    TablePrior,
    UniformDensity,
    parse_prior,
    posterior_mode,
    resolve_prior,
)


def edsd_mode_from_cubic(w, s, length_kpc):
    """Real root of r^3/L - 2 r^2 + (w/s^2) r - 1/s^2 = 0 (r, L in kpc; w, s in mas).

    Bailer-Jones 2015, PASP 127, 994, eq. 19. With three real roots the mode
    is the positive root of highest posterior (the cubic is the stationarity
    condition of the log posterior, eq. 2 x eq. 18).
    """
    roots = np.roots([1.0 / length_kpc, -2.0, w / s**2, -1.0 / s**2])
    real = roots[np.abs(roots.imag) < 1e-9 * np.abs(roots)].real
    real = real[real > 0]

    def logpost(r):
        return 2 * math.log(r) - r / length_kpc - (w - 1.0 / r) ** 2 / (2 * s**2)

    return 1000.0 * max(real, key=logpost)


@pytest.mark.parametrize(
    "w, s, length_pc",
    [
        (2.0, 0.1, 1350.0),   # 5 % error: mode near 1/w
        (2.0, 0.4, 1350.0),   # 20 %
        (1.0, 0.5, 1000.0),   # 50 %
        (0.5, 0.5, 500.0),    # 100 %
        (-0.2, 0.3, 1350.0),  # negative parallax
        (-1.0, 0.5, 300.0),   # strongly negative
        (0.05, 0.02, 2000.0),
    ],
)
def test_edsd_mode_is_root_of_published_cubic(w, s, length_pc):
    # Bailer-Jones 2015, PASP 127, 994, eq. 19
    expected = edsd_mode_from_cubic(w, s, length_pc / 1000.0)
    got = posterior_mode(ExponentialDensity(length_pc), w, s)
    assert got == pytest.approx(expected, rel=1e-6)


def test_edsd_mode_tends_to_2L_without_data():
    # Bailer-Jones 2015, Sect. 3.5: the prior's mode is 2L; a useless parallax leaves it
    got = posterior_mode(ExponentialDensity(800.0), 0.0, 1e4)
    assert got == pytest.approx(1600.0, rel=1e-4)


@pytest.mark.parametrize(
    "prior",
    [ExponentialDensity(1350.0), GeneralizedGamma(1.7, 2.4, 900.0), GeneralizedGamma(0.6, 0.5, 50.0),
     UniformDensity(300.0)],
)
def test_builtin_priors_are_normalized(prior):
    # scipy.integrate.quad of the density over its support
    hi = prior.support[1]
    total = sum(
        integrate.quad(lambda r: float(prior.density(np.array([r]))[0]), a, b, limit=200)[0]
        for a, b in _pieces(hi)
    )
    assert total == pytest.approx(1.0, abs=1e-7)


def _pieces(hi):
    edges = [0.0, 10.0, 100.0, 1e3, 1e4, 1e5, 1e6]
    if math.isfinite(hi):
        edges = [e for e in edges if e < hi] + [hi]
    return list(zip(edges[:-1], edges[1:]))


def test_generalized_gamma_alpha1_beta2_is_edsd():
    # Bailer-Jones et al. 2021, AJ 161, 147, eq. 3 with alpha=1, beta=2 is eq. 18 of Bailer-Jones 2015
    r = np.geomspace(0.1, 1e5, 500)
    a = GeneralizedGamma(1.0, 2.0, 1350.0).log_density(r)
    b = ExponentialDensity(1350.0).log_density(r)
    np.testing.assert_allclose(a, b, rtol=0, atol=1e-12)


@settings(max_examples=25, deadline=None)
@given(alpha=st.floats(0.4, 3.0), beta=st.floats(-0.5, 4.0), length=st.floats(20.0, 5000.0))
def test_generalized_gamma_normalized_property(alpha, beta, length):
    # invariant: a density integrates to 1 (scipy.integrate.quad, substituting x = r / L)
    prior = GeneralizedGamma(alpha, beta, length)
    val, _ = integrate.quad(lambda x: length * float(prior.density(np.array([x * length]))[0]), 0, np.inf,
                            limit=200)
    assert val == pytest.approx(1.0, rel=1e-6)


def test_uniform_density_is_r_squared_inside_zero_outside():
    # uniform space density: P(r) = 3 r^2 / r_max^3 (common practice, no source)
    p = UniformDensity("0.5 kpc")
    assert p.r_max == 500.0
    assert p.density(np.array([250.0]))[0] == pytest.approx(3 * 250.0**2 / 500.0**3, rel=1e-12)
    assert p.log_density(np.array([500.1, -1.0])).tolist() == [-np.inf, -np.inf]


def test_table_prior_interpolates_and_is_zero_outside(tmp_path):
    # linear interpolation between nodes (numpy.interp)
    path = tmp_path / "prior.txt"
    path.write_text("# r_pc density\n10 1\n20 3\n30 0\n")
    p = TablePrior.from_file(path)
    np.testing.assert_allclose(p.density(np.array([15.0, 25.0, 5.0, 31.0])), [2.0, 1.5, 0.0, 0.0], atol=1e-12)
    assert p.parameters["n_rows"] == 3
    comma = tmp_path / "prior.csv"
    comma.write_text("10,1\n20,3\n")
    assert TablePrior.from_file(comma).density(np.array([20.0]))[0] == pytest.approx(3.0, abs=1e-12)


def test_custom_callable_prior_and_its_checks():
    # the callable's own density, unnormalized (no source needed: identity check)
    p = CustomPrior(lambda r: np.exp(-r / 100.0), label="exp100")
    np.testing.assert_allclose(p.log_density(np.array([50.0, 200.0])), [-0.5, -2.0], atol=1e-12)
    with pytest.raises(InputError, match="expected finite densities >= 0"):
        CustomPrior(lambda r: -r).log_density(np.array([1.0]))
    with pytest.raises(InputError, match="must be vectorized"):
        CustomPrior(lambda r: 1.0).log_density(np.array([1.0, 2.0]))
    with pytest.raises(InputError, match="expected a callable"):
        CustomPrior(3.0)


@pytest.mark.parametrize(
    "spec, cls, params",
    [
        ("edsd:L=1350pc", ExponentialDensity, {"L_pc": 1350.0}),
        ("EDSD:L=1.35kpc", ExponentialDensity, {"L_pc": 1350.0}),
        ("edsd:L=800", ExponentialDensity, {"L_pc": 800.0}),
        ("ggd:alpha=1.5,beta=2.5,L=1kpc", GeneralizedGamma, {"alpha": 1.5, "beta": 2.5, "L_pc": 1000.0}),
        ("uniform:r_max=2 kpc", UniformDensity, {"r_max_pc": 2000.0}),
        ("none", NoPrior, {}),
    ],
)
def test_parse_prior(spec, cls, params):
    # astropy.units conversion of kpc to pc
    prior = parse_prior(spec)
    assert isinstance(prior, cls)
    for key, value in params.items():
        assert prior.parameters[key] == pytest.approx(value, rel=1e-12)


@pytest.mark.parametrize(
    "spec, match",
    [
        ("lognormal:mu=3", "unknown prior 'lognormal'; accepted: none \\| edsd"),
        ("edsd", "missing parameter\\(s\\) L for edsd"),
        ("edsd:length=3", "unknown parameter 'length' for edsd; it takes L"),
        ("edsd:L", "expected key=value pairs"),
        ("edsd:L=-3pc", "expected a positive, finite length"),
        ("edsd:L=3 km/s", "expected a length in pc"),
        ("edsd:L=1,L=2", "given twice"),
        ("ggd:alpha=0,beta=2,L=1", "alpha = .0.: expected a number > 0"),
        ("ggd:alpha=1,beta=-1,L=1", "beta = .-1.: expected a number > -1"),
        ("ggd:alpha=x,beta=2,L=1", "alpha = 'x': expected a number"),
        ("table:file=/nonexistent/prior.txt", "file not found"),
    ],
)
def test_parse_prior_errors(spec, match):
    with pytest.raises(InputError, match=match):
        parse_prior(spec)


def test_resolve_prior_accepts_objects_mappings_callables_tables():
    edsd = ExponentialDensity(100.0)
    assert resolve_prior(edsd) is edsd
    assert resolve_prior({"name": "edsd", "L": 1.2 * u.kpc}).parameters == {"L_pc": pytest.approx(1200.0)}
    assert isinstance(resolve_prior(lambda r: r * 0 + 1), CustomPrior)
    assert resolve_prior(([1.0, 2.0], [1.0, 1.0])).support == (1.0, 2.0)
    assert isinstance(resolve_prior(None), NoPrior)
    with pytest.raises(InputError, match="expected a prior object"):
        resolve_prior(3)
    with pytest.raises(InputError, match="needs a 'name'"):
        resolve_prior({"L": 3})
    assert "edsd:L=" in PRIOR_SYNTAX


@pytest.mark.parametrize(
    "r, p, match",
    [
        ([1.0], [1.0], "equal length >= 2"),
        ([2.0, 1.0], [1.0, 1.0], "strictly increasing"),
        ([0.0, 1.0], [1.0, 1.0], "strictly increasing distances > 0"),
        ([1.0, 2.0], [0.0, 0.0], "not all zero"),
        ([1.0, 2.0], [1.0, np.nan], "expected finite numbers"),
    ],
)
def test_table_prior_errors(r, p, match):
    with pytest.raises(InputError, match=match):
        TablePrior(r, p)


@pytest.mark.parametrize(
    "prior",
    [ExponentialDensity(700.0), GeneralizedGamma(1.0, 3.0, 200.0), GeneralizedGamma(2.2, 0.3, 90.0),
     UniformDensity(400.0), TablePrior([1.0, 1e3], [2.0, 1.0])],
)
def test_log_weight_is_log_prior_plus_two_log_r(prior):
    # importance weight P(r) r^2 (change of variables parallax -> r, common practice, no source)
    r = np.geomspace(0.5, 2e4, 301)
    np.testing.assert_allclose(prior.log_weight(r), prior.log_density(r) + 2 * np.log(r), rtol=1e-13, atol=1e-11)


@settings(max_examples=40, deadline=None)
@given(w=st.floats(-2.0, 5.0), frac=st.floats(0.02, 3.0), length=st.floats(100.0, 3000.0))
def test_edsd_mode_property(w, frac, length):
    # Bailer-Jones 2015, PASP 127, 994, eq. 19, over random (w, s, L) including negative parallaxes
    s = max(abs(w), 0.1) * frac
    expected = edsd_mode_from_cubic(w, s, length / 1000.0)
    assert posterior_mode(ExponentialDensity(length), w, s) == pytest.approx(expected, rel=1e-5)


@settings(max_examples=20, deadline=None)
@given(scale=st.floats(1e-6, 1e6), seed=st.integers(0, 2**31))
def test_reweighting_ignores_prior_normalization(scale, seed):
    # importance weights are self-normalized, so a constant factor in the prior cancels
    # (Owen 2013, Monte Carlo theory, methods and examples, Sect. 9.2)
    from perierr.priors import log_weights

    plx = np.random.default_rng(seed).normal(1.0, 0.4, 500)
    a = log_weights(plx, CustomPrior(lambda r: np.exp(-r / 900.0)))
    b = log_weights(plx, CustomPrior(lambda r: scale * np.exp(-r / 900.0)))
    fin = np.isfinite(a)
    np.testing.assert_array_equal(fin, np.isfinite(b))
    # compare where the user's density is a normal float: a subnormal exp(-r/900) (tiny parallax,
    # huge r) has lost its relative precision before perierr sees it
    with np.errstate(divide="ignore", invalid="ignore"):
        normal = fin & (np.exp(-1000.0 / np.where(plx > 0, plx, 1.0) / 900.0) > np.finfo(float).tiny * 1e3)
    np.testing.assert_allclose(b[normal] - a[normal], np.log(scale), rtol=1e-9, atol=1e-9)
