"""Edges of the distance priors, the distance posterior's mode, reweighting and the calibration.

Written against outside references: closed forms of the densities (Bailer-Jones 2015, PASP 127, 994;
Bailer-Jones et al. 2021, AJ 161, 147), the stationarity condition of the log posterior, scipy
(optimize.minimize_scalar, integrate.quad), the Kish effective sample size and the zero-point convention
(corrected parallax = catalogue parallax - zero-point; Lindegren et al. 2021, A&A 649, A4, Sect. 1).
"""

import fractions
import functools
import math
import warnings

import numpy as np
import pytest
from scipy import integrate, optimize

from perierr import ObservedStar
from perierr.calibration import Calibration, parse_inflation, parse_offset
from perierr.errors import InputError, PerierrWarning
from perierr.priors import (
    CustomPrior,
    ExponentialDensity,
    GeneralizedGamma,
    TablePrior,
    UniformDensity,
    log_distance_posterior,
    log_weights,
    parse_prior,
    posterior_mode,
    posterior_samples,
    reweight,
)
from perierr.sampling.reweight import importance_weights

PLX = 2  # index of the parallax among (ra, dec, parallax, pmra, pmdec, radial_velocity)


def star_with(plx, eplx, **extra):
    """An invented star with independent errors."""
    fields = dict(name="invented", ra=45.0, dec=12.0, parallax=plx, parallax_error=eplx, pmra=20.0,
                  pmra_error=0.05, pmdec=-8.0, pmdec_error=0.05, radial_velocity=-40.0,
                  radial_velocity_error=0.4, ra_error=0.02, dec_error=0.02)
    fields.update(extra)
    return ObservedStar.from_values(**fields)


def no_warning(fn, *args, **kwargs):
    """Call fn with every warning turned into an error (numpy's log(0), 1/0, invalid ...)."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        return fn(*args, **kwargs)


def mode_from_stationarity(r_star, s):
    """Parallax w [mas] whose posterior under P(r) ∝ r^2 has its mode at r_star [pc], error s [mas].

    d/dr [2 ln r - (w - 1000/r)^2 / (2 s^2)] = 0  <=>  w = 1000/r + 2 s^2 r / 1000 (closed form, derived here
    from Bailer-Jones 2015, PASP 127, 994, eq. 2 times a uniform space density).
    """
    return 1000.0 / r_star + 2.0 * s * s * r_star / 1000.0


# ----------------------------------------------------------------------------- densities


def test_to_dict_and_repr_name_every_parameter():
    # the documented output block {"name": ..., "parameters": {...}} (densities module docstring)
    assert ExponentialDensity(1350).to_dict() == {"name": "edsd", "parameters": {"L_pc": 1350.0}}
    gg = GeneralizedGamma(1.5, 2, "1 kpc")
    assert gg.to_dict() == {"name": "generalized_gamma",
                            "parameters": {"alpha": 1.5, "beta": 2.0, "L_pc": 1000.0}}
    # repr: ClassName(key=value, ...), common practice, no source
    assert repr(gg) == "GeneralizedGamma(alpha=1.5, beta=2.0, L_pc=1000.0)"
    assert repr(UniformDensity(500)) == "UniformDensity(r_max_pc=500.0)"


@pytest.mark.parametrize(
    "build, field",
    [
        (lambda: ExponentialDensity("abc"), "L"),
        (lambda: GeneralizedGamma(1.0, 2.0, -5), "L"),
        (lambda: UniformDensity("3 km/s"), "r_max"),
        (lambda: CustomPrior(np.ones_like, r_max=0), "r_max"),
    ],
)
def test_bad_lengths_name_their_field(build, field):
    # project rule: bad input raises an error naming the field
    with pytest.raises(InputError) as err:
        build()
    assert err.value.field == field


def test_log_densities_at_zero_and_negative_distances_are_minus_inf_silently():
    # P(r) = 0 for r <= 0 (every prior here is a density on r > 0), so ln P = -inf, with no numpy warning
    r = np.array([-1.0, 0.0])
    for prior in (ExponentialDensity(1000), GeneralizedGamma(2.0, 2.0, 1000), UniformDensity(500),
                  GeneralizedGamma(1.0, -0.5, 1000), GeneralizedGamma(1.0, 0.0, 1000)):
        got = no_warning(prior.log_density, r)
        assert np.array_equal(got, [-np.inf, -np.inf]), prior


def test_uniform_density_support_ends_are_exact():
    # P(r) = 3 r^2 / r_max^3 on (0, r_max] (closed form; the class docstring)
    prior = UniformDensity(10.0)
    r = np.array([0.5, 10.0, 10.0 * (1 + 1e-12)])
    got = no_warning(prior.log_density, r)
    assert got[:2] == pytest.approx(np.log(3 * r[:2] ** 2 / 1000.0), rel=1e-12)
    assert got[2] == -np.inf


def test_generalized_gamma_log_weight_with_alpha_two():
    # ln P(r) + 2 ln r with P of Bailer-Jones et al. 2021, AJ 161, 147, eq. 3 written out here:
    # P(r) = alpha / (Gamma((beta+1)/alpha) L^(beta+1)) r^beta exp(-(r/L)^alpha)
    a, b, big_l = 2.0, 1.0, 800.0
    r = np.array([100.0, 800.0, 2500.0])
    expected = (math.log(a) - math.lgamma((b + 1) / a) - (b + 1) * math.log(big_l)
                + b * np.log(r) - (r / big_l) ** a + 2 * np.log(r))
    assert GeneralizedGamma(a, b, big_l).log_weight(r) == pytest.approx(expected, rel=1e-12)


def test_custom_prior_label_and_r_max():
    def halo(r):
        return np.exp(-r / 300.0)

    assert CustomPrior(halo).label == "halo"  # the function's name (class docstring)
    assert CustomPrior(halo, label="my halo").label == "my halo"
    # no __name__ (a functools.partial): the documented fallback
    assert CustomPrior(functools.partial(np.multiply, 2.0)).label == "callable"
    prior = CustomPrior(halo, r_max="2 kpc")  # astropy.units: 1 kpc = 1000 pc
    assert prior.r_max == 2000.0
    assert prior.parameters == {"function": "halo", "r_max_pc": 2000.0}
    assert CustomPrior(halo).r_max == math.inf


def test_custom_prior_log_density_support_and_zeros():
    # ln f(r) inside (0, r_max], -inf outside; a zero density is allowed (ln 0 = -inf), silently
    prior = CustomPrior(lambda r: np.where(r < 50.0, 0.0, 2.0), r_max=100.0)
    r = np.array([-1.0, 0.0, 10.0, 60.0, 100.0, 150.0])
    got = no_warning(prior.log_density, r)
    assert np.array_equal(got[[0, 1, 2, 5]], [-np.inf] * 4)
    assert got[3:5] == pytest.approx([math.log(2.0)] * 2, rel=1e-15)
    # r = 0 is outside the support even where the callable is positive (the callable is not asked there)
    def flat(r):
        assert np.all(r > 0), "called at r <= 0"
        return np.ones_like(r)

    assert np.array_equal(CustomPrior(flat).log_density(np.array([0.0, 1.0])), [-np.inf, 0.0])


def test_custom_prior_accepts_any_real_numbers():
    # the callable may return plain Python numbers (fractions.Fraction is a numbers.Real)
    prior = CustomPrior(lambda r: [fractions.Fraction(1, 4)] * len(r))
    assert prior.log_density(np.array([5.0, 7.0])) == pytest.approx([math.log(0.25)] * 2, rel=1e-15)


def test_table_prior_flattens_columns_and_keeps_label():
    r = np.array([100.0, 200.0, 400.0])
    p = np.array([1.0, 3.0, 1.0])
    # linear interpolation (numpy.interp) of the table; zero outside
    expected = np.log([2.0, 2.0])
    for dist, dens in ((r.reshape(1, -1), p), (r, p.reshape(-1, 1))):
        prior = TablePrior(dist, dens)
        assert prior.log_density(np.array([150.0, 300.0])) == pytest.approx(expected, rel=1e-14)
        assert prior.parameters["table"] == "table"
    assert TablePrior(r, p, label="halo.txt").parameters == {
        "table": "halo.txt", "n_rows": 3, "r_min_pc": 100.0, "r_max_pc": 400.0}
    # numbers given as exact decimals (fractions.Fraction) are read as floats
    frac = [fractions.Fraction(1), fractions.Fraction(3), fractions.Fraction(1)]
    assert TablePrior(r, frac).log_density(np.array([150.0]))[0] == pytest.approx(math.log(2.0), rel=1e-14)
    dist = [fractions.Fraction(100), fractions.Fraction(200), fractions.Fraction(400)]
    assert TablePrior(dist, p).support == (100.0, 400.0)


def test_table_prior_is_zero_beyond_its_last_row():
    prior = TablePrior([100.0, 200.0], [1.0, 5.0])
    got = no_warning(prior.log_density, np.array([50.0, 200.0, 200.5, 1e6]))
    assert got[1] == pytest.approx(math.log(5.0), rel=1e-15)
    assert np.array_equal(got[[0, 2, 3]], [-np.inf] * 3)


@pytest.mark.parametrize(
    "distance, density",
    [
        ([100.0, 100.0, 200.0], [1.0, 1.0, 1.0]),  # repeated distance: not strictly increasing
        ([100.0, 150.0, 200.0], [1.0, -0.5, 1.0]),  # negative density
    ],
)
def test_table_prior_refuses_bad_columns(distance, density):
    with pytest.raises(InputError) as err:
        TablePrior(distance, density)
    assert err.value.field == "distance prior table"


def test_table_prior_from_file_reads_comments_commas_and_equals(tmp_path):
    spaced = tmp_path / "halo=1.txt"
    spaced.write_text("# distance density\n100 1\n200 3\n400 1\n")
    comma = tmp_path / "halo.csv"
    comma.write_text("# distance,density\n100,1\n200,3  # peak\n400,1\n")
    for path in (spaced, comma):
        prior = TablePrior.from_file(path)
        assert prior.label == str(path)
        assert prior.log_density(np.array([300.0]))[0] == pytest.approx(math.log(2.0), rel=1e-14)
    # the text syntax splits only at the first '=' of each item: the path keeps its own '='
    assert parse_prior(f"table:file={spaced}").label == str(spaced)


@pytest.mark.parametrize("text", ["100 1\n", "100,1\n"])
def test_table_prior_from_one_row_file_is_an_input_error(tmp_path, text):
    path = tmp_path / "one.txt"
    path.write_text(text)
    with pytest.raises(InputError) as err:
        TablePrior.from_file(path)
    assert err.value.field == "distance prior table"


# ----------------------------------------------------------------------------- text syntax


def test_parse_prior_aliases_and_dashes():
    # parse module docstring: aliases exp, gg ...; '-' and '_' alike in names
    assert isinstance(parse_prior("exp:L=1.35kpc"), ExponentialDensity)
    assert parse_prior("exp:L=1.35kpc").length_scale == pytest.approx(1350.0, rel=1e-12)
    uni = parse_prior("Uniform-Density:r_max=500pc")
    assert isinstance(uni, UniformDensity) and uni.r_max == 500.0
    gg = parse_prior("generalized-gamma:alpha=1,beta=2,L=1kpc")
    assert isinstance(gg, GeneralizedGamma) and gg.length_scale == 1000.0


@pytest.mark.parametrize("spec", ["edsd:=1350", "edsd:L=", "edsd:L"])
def test_parse_prior_malformed_pairs_say_key_value(spec):
    with pytest.raises(InputError) as err:
        parse_prior(spec)
    assert "expected key=value pairs" in str(err.value)


# ----------------------------------------------------------------------------- distance posterior


def test_log_distance_posterior_edges():
    # ln P(r | w) = -(w - 1000/r)^2 / (2 s^2) + ln P(r) (Bailer-Jones 2015, eq. 2); -inf for r <= 0
    prior = UniformDensity(10.0)
    r = np.array([-1.0, 0.0, 0.5, 4.0])
    got = no_warning(log_distance_posterior, r, 300.0, 100.0, prior)
    assert np.array_equal(got[:2], [-np.inf, -np.inf])
    expected = -((300.0 - 1000.0 / r[2:]) ** 2) / (2 * 100.0**2) + np.log(3 * r[2:] ** 2 / 1000.0)
    assert got[2:] == pytest.approx(expected, rel=1e-12)


def test_posterior_mode_below_one_parsec():
    # mode of r^2 exp(-(w - 1000/r)^2 / (2 s^2)) at r* = 0.5 pc (closed form above)
    s = 10.0
    w = mode_from_stationarity(0.5, s)
    assert posterior_mode(UniformDensity(10.0), w, s) == pytest.approx(0.5, rel=1e-6)


def test_posterior_mode_in_the_last_and_first_grid_cells():
    # the mode r* = 100 pc lies 1e-4 (relative) inside the searched range: within its end cell of the grid
    s = 0.5
    w = mode_from_stationarity(100.0, s)
    assert posterior_mode(UniformDensity(100.0 * (1 + 1e-4)), w, s) == pytest.approx(100.0, rel=1e-6)
    assert posterior_mode(UniformDensity(1e4), w, s, r_min=100.0 * (1 - 1e-4)) == pytest.approx(100.0, rel=1e-6)


def test_posterior_mode_of_a_single_point_range():
    assert posterior_mode(UniformDensity(1e4), 10.0, 0.5, r_min=100.0, r_max=100.0) == 100.0


def test_posterior_mode_at_a_kink_to_the_optimizer_tolerance():
    # a triangular table prior peaking at 1000 pc and a parallax of 1 mas: both factors peak at 1000 pc,
    # so the mode is exactly 1000 pc. Tolerance: scipy's bounded Brent stops within about
    # 2 (sqrt(eps) |ln r| + xatol / 3) = 2e-7 in ln r with xatol = 1e-12 (scipy.optimize._optimize).
    prior = TablePrior([500.0, 1000.0, 2000.0], [0.0, 1.0, 0.0])
    for s in (0.1, 0.5, 2.0):
        assert posterior_mode(prior, 1.0, s) == pytest.approx(1000.0, rel=2e-7)


def test_posterior_mode_finds_a_narrow_spike():
    # a broad prior plus a narrow, taller spike at 150 pc; the likelihood (w = 1 +- 2 mas) is broad.
    # Reference: scipy.optimize.minimize_scalar on the spike, and a brute-force check that it is the global max.
    def spiky(r):
        return np.exp(-r / 500.0) + 20.0 * np.exp(-0.5 * ((r - 150.0) / 0.3) ** 2)

    prior = CustomPrior(spiky)

    def neg(r):
        return -float(log_distance_posterior(np.array([r]), 1.0, 2.0, prior)[0])

    ref = optimize.minimize_scalar(neg, bounds=(148.0, 152.0), method="bounded", options={"xatol": 1e-9}).x
    brute = np.linspace(1.0, 5000.0, 200001)
    assert -neg(ref) >= log_distance_posterior(brute, 1.0, 2.0, prior).max()
    assert posterior_mode(prior, 1.0, 2.0) == pytest.approx(ref, rel=1e-7)


# ----------------------------------------------------------------------------- reweighting


def test_log_weights_of_non_positive_parallaxes():
    # w = P(r) r^2 with r = 1000 / parallax (reweight module docstring); parallax <= 0: weight 0 (-inf)
    prior = ExponentialDensity(1000.0)
    got = no_warning(log_weights, np.array([0.0, -1.0, 2.0, 4.0]), prior)
    r = np.array([500.0, 250.0])
    expected = np.log(r**2 * np.exp(-r / 1000.0) / (2 * 1000.0**3) * r**2)  # EDSD: eq. 18 of Bailer-Jones 2015
    assert np.array_equal(got[:2], [-np.inf, -np.inf])
    assert got[2:] == pytest.approx(expected, rel=1e-12)
    assert no_warning(log_weights, np.array([0.0, 2.0]), prior)[0] == -np.inf


def test_importance_weights_keep_mask_and_normalization():
    prior = UniformDensity(1000.0)
    plx = np.array([2.0, -1.0, 4.0, 0.5])  # 500, -, 250, 2000 pc (outside r_max)
    w, keep = importance_weights(plx, prior)
    # P(r) r^2 ∝ r^4 inside (0, r_max]: weights 500^4 : 250^4, normalized
    assert np.array_equal(keep, [True, False, True, False])
    assert w == pytest.approx(np.array([16.0, 1.0]) / 17.0, rel=1e-12)
    w_all, keep_all = importance_weights(np.array([2.0, 4.0]), prior)
    assert keep_all is None
    assert w_all == pytest.approx(np.array([16.0, 1.0]) / 17.0, rel=1e-12)


def test_importance_weights_of_an_unnormalized_huge_density():
    # "It need not be normalized" (CustomPrior docstring): a constant 1e200 must give the same weights as 1
    plx = np.array([1.0, 2.0, 4.0])
    w, _ = no_warning(importance_weights, plx, CustomPrior(lambda r: np.full_like(r, 1e200)))
    r = 1000.0 / plx
    assert w == pytest.approx(r**2 / np.sum(r**2), rel=1e-12)


def test_reweight_records_seed_and_info():
    star = star_with(4.0, 0.8)
    prior = ExponentialDensity(300.0)
    a = reweight(star, prior, n=2000, seed=7)
    b = reweight(star, prior, n=2000, seed=7)
    assert a.seed == 7 and a.method == "reweight"
    assert np.array_equal(a.values, b.values) and np.array_equal(a.weights, b.weights)
    # the same stream as numpy.random.default_rng(7) passed as rng; seed then only recorded
    c = reweight(star, prior, n=2000, seed=99, rng=np.random.default_rng(7))
    assert np.array_equal(a.values, c.values) and c.seed == 99
    info = a.info
    assert info["n_drawn"] == 2000
    assert info["max_weight"] == pytest.approx(float(a.weights.max()), rel=1e-15)
    # Kish effective size (sum w)^2 / sum w^2 with sum w = 1 (Kish 1965, Survey Sampling, Sect. 11.7)
    assert info["effective_size"] == pytest.approx(1.0 / np.sum(a.weights**2), rel=1e-12)
    assert info["n_zero_weight"] == 2000 - a.values.shape[0]


def test_reweight_minimum_and_default_number_of_draws():
    star = star_with(4.0, 0.1)
    prior = ExponentialDensity(1000.0)
    assert reweight(star, prior, n=100, seed=1).info["n_drawn"] == 100
    with pytest.raises(InputError):
        reweight(star, prior, n=99, seed=1)
    assert reweight(star, prior, seed=1).info["n_drawn"] == 100_000  # documented default


# ----------------------------------------------------------------------------- prior-data tension


@pytest.mark.parametrize(
    "plx, eplx, recorded",
    [
        (0.5, 0.05, True),  # parallax/error = 10, parallax below 1 mas, error below 1 mas
        (20.0, 2.0, True),  # error above 1 mas
        (0.55, 0.1, True),  # 5.5 > 5
        (0.5, 0.1, False),  # exactly 5: not above 5
        (0.2, 0.1, False),  # weak parallax: meant to be prior-dominated
    ],
)
def test_tension_is_measured_only_for_informative_parallaxes(plx, eplx, recorded):
    prior = ExponentialDensity(1000.0 / plx)  # a prior that agrees with the parallax
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        out = posterior_samples(star_with(plx, eplx), prior, n=2000, seed=3, method="reweight")
    assert ("prior_tension_sigma" in out.info) is recorded


def test_tension_uses_the_weighted_median():
    # prior pulling an SNR-6 parallax: z = (weighted median parallax - measured) / error
    plx, eplx = 0.6, 0.1
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        out = posterior_samples(star_with(plx, eplx), ExponentialDensity(200.0), n=20000, seed=5,
                                method="reweight")
    x = out.values[:, PLX]
    order = np.argsort(x)
    cum = np.cumsum(out.weights[order])
    med = x[order][np.searchsorted(cum, 0.5)]  # weighted median (common practice, no source)
    unweighted = (np.median(x) - plx) / eplx
    assert abs((med - plx) / eplx - unweighted) > 0.5  # the weights matter here
    assert out.info["prior_tension_sigma"] == pytest.approx((med - plx) / eplx, abs=0.02)


# ----------------------------------------------------------------------------- calibration


def test_parse_offset_plus_minus_forms_and_field_names():
    # "+/-" like "+-" and "±" (parse_offset docstring)
    assert parse_offset("-0.017+/-0.005") == pytest.approx((-0.017, 0.005), rel=1e-12)
    assert parse_offset("-17+/-5 uas") == pytest.approx((-0.017, 0.005), rel=1e-12)  # 1 uas = 1e-3 mas
    for bad in ("0.01 km/s", ("x", 0.005), "nope!", object()):
        with pytest.raises(InputError) as err:
            parse_offset(bad)
        assert err.value.field == "parallax_offset", bad
    # the error names the user's text as given
    with pytest.raises(InputError) as err:
        parse_offset("abc,0.005")
    assert err.value.value == "abc,0.005" and "'abc'" in err.value.expected


def test_parse_inflation_fields_and_zero_factor():
    cases = [("abc", "error_inflation"), (float("nan"), "error_inflation"), (0, "error_inflation"),
             ("parallax=1=2", "error_inflation[parallax]"), ({"pmra": -1}, "error_inflation[pmra]")]
    for value, field in cases:
        with pytest.raises(InputError) as err:
            parse_inflation(value)
        assert err.value.field == field, value
    assert parse_inflation("parallax = 1.5") == {"parallax": 1.5}


def test_apply_keeps_the_star_and_writes_notes():
    mean = [45.0, 12.0, 4.0, 20.0, -8.0, -40.0]
    cov = np.diag([0.02, 0.02, 0.1, 0.05, 0.05, 0.4]) ** 2
    star = ObservedStar(mean, cov, name="invented", source_id="42", ref_epoch=2016.0, mass=0.8, mass_error=0.1)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # factors >= 1 shrink nothing: no warning
        out = Calibration(zero_point=-0.02, inflation={"parallax": 2.0, "pmra": 1.5}).apply(star)
    assert (out.name, out.source_id, out.ref_epoch, out.mass, out.mass_error) == ("invented", "42", 2016.0, 0.8, 0.1)
    # corrected = catalogue - zero point; error 0.1 * 2 (no zero-point error)
    assert out.mean[PLX] == pytest.approx(4.02, rel=1e-15)
    assert out.sigma[PLX] == pytest.approx(0.2, rel=1e-12)
    text = " | ".join(out.notes)
    assert "4 -> 4.02 mas, error 0.2 -> 0.2 mas" in text
    assert "pmra error inflated by a factor 1.5" in text
    # a zero-point without an error is still noted
    assert any("zero-point of -0.02" in n for n in Calibration(zero_point=-0.02).apply(star).notes)
    with pytest.warns(PerierrWarning, match="shrink the errors of pmra"):
        Calibration(inflation={"pmra": 0.5}).apply(star)


def test_to_dict_with_the_catalogue_star():
    star = star_with(4.0, 0.1)
    block = Calibration(zero_point=-0.02, zero_point_error=0.01).to_dict(star)
    assert block["catalogue_parallax_mas"] == 4.0
    assert block["catalogue_parallax_error_mas"] == pytest.approx(0.1, rel=1e-12)
    assert "catalogue_parallax_mas" not in Calibration().to_dict()


def test_budget_inputs_zero_point_column():
    # d output / d Z = - d output / d parallax (corrected = catalogue - Z)
    cal = Calibration(zero_point=-0.02, zero_point_error=0.03)
    calibrated = cal.apply(star_with(4.0, 0.1))
    jac = np.arange(18.0).reshape(3, 6) - 7.0
    grad, cov, names = cal.budget_inputs(jac, calibrated)
    assert names[-1] == "parallax_zero_point"
    assert np.array_equal(grad[:, :6], jac)
    assert np.array_equal(grad[:, 6], -jac[:, PLX])
    assert cov[6, 6] == pytest.approx(0.03**2, rel=1e-12)
    assert cov[PLX, PLX] == pytest.approx(0.1**2, rel=1e-9)


def test_integrated_edsd_is_normalized():
    # quick cross-check of the EDSD normalization used by the weights (scipy.integrate.quad)
    val, _ = integrate.quad(lambda r: float(ExponentialDensity(700.0).density(np.array([r]))[0]), 0, np.inf)
    assert val == pytest.approx(1.0, rel=1e-8)


NO_DENSITY = [(2.0, 0.0, "parallax_error"), (2.0, -1.0, "parallax_error"), (float("nan"), 0.5, "parallax"),
              (2.0, float("inf"), "parallax_error")]


@pytest.mark.parametrize(("plx", "err", "field"), NO_DENSITY)
def test_log_distance_posterior_refuses_a_likelihood_that_is_no_density(plx, err, field):
    # project rule: no silent NaN; a Gaussian likelihood needs a finite mean and a positive finite sigma
    with pytest.raises(InputError, match=f"{field} = "):
        log_distance_posterior(np.array([400.0, 500.0]), plx, err, ExponentialDensity(1000.0))
