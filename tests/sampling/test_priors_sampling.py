"""Posterior sampling under distance priors: reweighting and emcee vs quadrature."""

import json
import warnings

import numpy as np
import pytest
from scipy import integrate, optimize

from perierr import ObservedStar, analyze
from perierr.errors import InputError, PerierrWarning
from perierr.models import StraightLine
from perierr.priors import (
    ChainTooShortError,
    ExponentialDensity,
    GeneralizedGamma,
    NoPrior,
    TablePrior,
    UniformDensity,
    posterior_samples,
    sample_posterior_mcmc,
)
from perierr.propagate.montecarlo import monte_carlo, propagate_samples
from perierr.summary import summarize

LEVELS = (0.05, 0.16, 0.5, 0.84, 0.95)

#: Monte Carlo checks allow K_SE standard errors computed in the test (4, as in tests/test_propagation.py:
#: the checks here already stated from the statistics use 4, so one K never loosens them; two-sided
#: false-alarm probability 6e-5 per check; the seeds are fixed).
K_SE = 4.0

#: Accuracy of the quadrature references relative to the distance: scipy.integrate.quad's default relative
#: tolerance 1.5e-8 on the CDF and brentq's xtol 1e-10 pc, so 1e-6 of r is a generous bound.
QUAD_RTOL = 1e-6


def invented_star(plx, eplx, *, only_parallax=False, pm=(1.0, 2.0), rv=-30.0):
    """An invented star (no real object), correlated astrometry unless only_parallax."""
    e = 0.0 if only_parallax else 1.0
    return ObservedStar.from_values(
        name="invented", ra=123.4, dec=-21.0, parallax=plx, parallax_error=eplx,
        pmra=pm[0], pmra_error=0.05 * e, pmdec=pm[1], pmdec_error=0.04 * e,
        radial_velocity=rv, radial_velocity_error=0.5 * e,
        ra_error=0.02 * e, dec_error=0.02 * e,
        parallax_pmra_corr=0.3 * e, parallax_pmdec_corr=-0.2 * e, pmra_pmdec_corr=0.1 * e,
    )


def quadrature_quantiles(prior, w, s, levels=LEVELS):
    """Quantiles of P(r | w) ~ exp(-(w - 1000/r)^2 / 2 s^2) P(r) by scipy.integrate.quad + brentq."""
    lo, hi = prior.support
    hi = min(hi, 1e6)

    def dens(r):
        return float(np.exp(-0.5 * ((w - 1000.0 / r) / s) ** 2 + prior.log_density(np.array([r]))[0]))

    edges = np.unique(np.concatenate([[max(lo, 1e-6)], np.geomspace(10.0, hi, 40), [hi]]))
    parts = np.array([integrate.quad(dens, a, b, limit=200, epsabs=0)[0] for a, b in zip(edges[:-1], edges[1:])])
    cum = np.concatenate([[0.0], np.cumsum(parts)]) / parts.sum()

    def cdf(r):
        k = min(np.searchsorted(edges, r) - 1, len(parts) - 1)
        k = max(k, 0)
        return cum[k] + integrate.quad(dens, edges[k], r, limit=200, epsabs=0)[0] / parts.sum()

    out = []
    for q in levels:
        k = int(np.searchsorted(cum, q)) - 1
        out.append(optimize.brentq(lambda r, q=q: cdf(r) - q, edges[k], edges[k + 1], xtol=1e-10, rtol=1e-12))
    return np.array(out)


def distance_summary(samples):
    return summarize(1000.0 / samples.values[:, 2], levels=LEVELS, weights=samples.weights)


@pytest.mark.slow  # about a second or more: left out of mutation runs (DEVELOPERS.md)
@pytest.mark.parametrize("frac", [0.05, 0.2, 0.5])
@pytest.mark.parametrize("method", ["reweight", "mcmc"])
def test_distance_quantiles_match_quadrature(frac, method):
    # reference: direct quadrature of the 1-D posterior with scipy.integrate (Bailer-Jones 2015, eq. 2 x eq. 18);
    # the other five parameters have flat priors, so the marginal of r is exactly that 1-D posterior
    prior = ExponentialDensity(1350.0)
    w = 1.6
    star = invented_star(w, frac * w)
    samples = posterior_samples(star, prior, n=200_000, seed=11, method=method, mcmc_effective_size=4000)
    assert samples.method == method
    ref = quadrature_quantiles(prior, w, frac * w)
    s = distance_summary(samples)
    for q, r in zip(LEVELS, ref):
        # K_SE Monte Carlo standard errors (the binomial quantile error, Conover 1999, Sect. 3.2, with the
        # Kish size) plus the quadrature's accuracy
        assert abs(s.quantiles[q] - r) < K_SE * s.quantile_se[q] + QUAD_RTOL * r, (q, s.quantiles[q], r)
    assert s.effective_size == pytest.approx(samples.info["effective_size"], rel=0.25)


@pytest.mark.slow  # about a second or more: left out of mutation runs (DEVELOPERS.md)
def test_negative_parallax_uniform_prior_mcmc_matches_quadrature():
    # scipy.integrate reference; uniform space density to r_max (common practice, no source)
    prior = UniformDensity(800.0)
    star = invented_star(-0.4, 0.6)
    with pytest.warns(PerierrWarning, match="dominated by the uniform_density prior"):
        samples = posterior_samples(star, prior, n=4000, seed=5)
    assert samples.method == "mcmc" and samples.info["switched_to_mcmc"] == "nominal parallax <= 0"
    ref = quadrature_quantiles(prior, -0.4, 0.6)
    s = distance_summary(samples)
    for q, r in zip(LEVELS, ref):
        assert abs(s.quantiles[q] - r) < K_SE * s.quantile_se[q] + QUAD_RTOL * r


@pytest.mark.parametrize(
    "prior",
    [ExponentialDensity(1350.0), GeneralizedGamma(1.5, 1.0, 400.0), UniformDensity(5000.0),
     TablePrior([1.0, 1e4], [1.0, 3.0])],
)
def test_tiny_parallax_error_every_prior_gives_plain_monte_carlo(prior):
    # the likelihood dominates any smooth prior as sigma/parallax -> 0 (Bailer-Jones 2015, Sect. 4)
    star = invented_star(10.0, 1e-4)
    model = StraightLine()
    plain = monte_carlo(star, model, n=20_000, seed=3)
    samples = posterior_samples(star, prior, n=20_000, seed=3)
    assert samples.method == "reweight"
    assert samples.info["effective_size"] > 0.999 * 20_000
    post = propagate_samples(samples, model, reference=star.mean)
    for q in ("time_myr", "distance_pc", "speed_kms"):
        a, b = plain.summaries[q], post.summaries[q]
        half = 0.5 * (a.quantiles[0.84] - a.quantiles[0.16])
        for lev in LEVELS:
            assert abs(a.quantiles[lev] - b.quantiles[lev]) < 0.01 * half


@pytest.mark.slow  # about a second or more: left out of mutation runs (DEVELOPERS.md)
def test_tiny_parallax_error_mcmc_gives_plain_monte_carlo():
    # same limit through the sampler (Bailer-Jones 2015, Sect. 4); within K_SE standard errors of the
    # difference of two independent quantile estimates, the root sum of squares of their errors
    star = invented_star(10.0, 1e-4)
    model = StraightLine()
    plain = monte_carlo(star, model, n=50_000, seed=3)
    post = propagate_samples(
        posterior_samples(star, ExponentialDensity(1350.0), n=3000, seed=4, method="mcmc"), model,
        reference=star.mean,
    )
    for q in ("time_myr", "distance_pc", "speed_kms"):
        a, b = plain.summaries[q], post.summaries[q]
        for lev in (0.16, 0.5, 0.84):
            assert abs(a.quantiles[lev] - b.quantiles[lev]) < K_SE * np.hypot(b.quantile_se[lev], a.quantile_se[lev])


@pytest.mark.slow  # about a second or more: left out of mutation runs (DEVELOPERS.md)
@pytest.mark.parametrize("method", ["reweight", "mcmc"])
def test_only_parallax_uncertain_perihelion_quantiles_are_model_of_distance_quantiles(method):
    # with vr < 0 and v_t << |vr| over the posterior, t_ph, d_ph and v_ph all increase with r
    # (Matthews 1994, QJRAS 35, 1: t = -r vr / v^2, d = r v_t / v), so quantiles map through the model;
    # distance quantiles from scipy.integrate quadrature
    plx, s = 2.0, 0.6
    star = invented_star(plx, s, only_parallax=True, pm=(0.05, 0.08), rv=-25.0)
    prior = ExponentialDensity(1000.0)
    samples = posterior_samples(star, prior, n=200_000, seed=8, method=method)
    res = propagate_samples(samples, StraightLine(), reference=star.mean)
    ref_r = quadrature_quantiles(prior, plx, s)
    rows = np.tile(star.mean, (len(LEVELS), 1))
    rows[:, 2] = 1000.0 / ref_r
    ph = StraightLine().evaluate(rows)
    for q in ("time_myr", "distance_pc", "speed_kms"):
        summ = res.summaries[q]
        expected = ph.output(q)
        for k, lev in enumerate(LEVELS):
            assert abs(summ.quantiles[lev] - expected[k]) <= 4 * summ.quantile_se[lev] + 1e-6 * abs(expected[k])


def test_negative_parallax_end_to_end_through_analyze():
    # d_ph of an only-parallax-uncertain star is monotone in r (Matthews 1994), so its median is the model
    # at the posterior median distance from scipy.integrate quadrature
    star = invented_star(-0.3, 0.4, only_parallax=True, pm=(0.05, 0.08), rv=-25.0)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        # the straight line: the reference below is the straight-line d_ph (and the orbit model is slow at ~kpc)
        result = analyze(star, model="straight_line", distance_prior="edsd:L=1kpc", n_samples=4000, seed=21)
    messages = [str(w.message) for w in caught]
    assert any("dominated by the edsd prior" in m for m in messages)
    assert result.linear is None and result.budget is None
    doc = json.loads(json.dumps(result.to_dict()))
    assert doc["prior"]["name"] == "edsd" and doc["prior"]["method"] == "mcmc"
    assert doc["prior"]["parameters"] == {"L_pc": 1000.0}
    assert doc["prior"]["effective_size"] >= 3000
    assert doc["prior"]["autocorrelation_time"]["ln_distance"] > 1.0
    med_r = quadrature_quantiles(ExponentialDensity(1000.0), -0.3, 0.4, levels=(0.5,))[0]
    expected = StraightLine().evaluate(np.r_[star.mean[:2], 1000.0 / med_r, star.mean[3:]][None, :])
    d = result.monte_carlo.summaries["distance_pc"]
    assert abs(d.median - expected.distance_pc[0]) < 4 * d.quantile_se[0.5]


@pytest.mark.slow  # about a second or more: left out of mutation runs (DEVELOPERS.md)
def test_auto_switches_to_mcmc_when_reweighting_degenerates():
    # Kish effective sample size (Kish 1965, Survey Sampling, Sect. 11.7) below the threshold
    star = invented_star(2.0, 1.5)
    samples = posterior_samples(star, UniformDensity(100.0), n=2000, seed=2, min_effective_size=1500)
    assert samples.method == "mcmc"
    assert samples.info["reweight_effective_size"] < 1500
    assert samples.info["switched_to_mcmc"].startswith("reweighting effective sample size")


def test_reweight_weights_are_prior_times_r_squared():
    # importance weight = target / proposal in r: P(r) r^2 (change of variables, common practice, no source)
    star = invented_star(2.0, 0.5)
    prior = ExponentialDensity(700.0)
    s = posterior_samples(star, prior, n=1000, seed=9, method="reweight")
    r = 1000.0 / s.values[:, 2]
    expected = r**4 * np.exp(-r / 700.0)
    np.testing.assert_allclose(s.weights, expected / expected.sum(), rtol=1e-10)
    assert s.info["effective_size"] == pytest.approx(1.0 / np.sum(s.weights**2), rel=1e-12)
    assert s.info["n_zero_weight"] == 1000 - s.n


@pytest.mark.slow  # about a second or more: left out of mutation runs (DEVELOPERS.md)
def test_same_seed_same_chain_and_generalized_gamma_equals_edsd():
    # Bailer-Jones et al. 2021, AJ 161, 147: GG(alpha=1, beta=2) is EDSD; rounding in the normalization
    # can flip single accept/reject steps, so the chains agree in distribution (4 MC errors)
    star = invented_star(0.8, 0.3)
    a = posterior_samples(star, ExponentialDensity(900.0), n=2000, seed=6, method="mcmc")
    again = posterior_samples(star, ExponentialDensity(900.0), n=2000, seed=6, method="mcmc")
    np.testing.assert_array_equal(a.values, again.values)
    b = posterior_samples(star, GeneralizedGamma(1.0, 2.0, 900.0), n=2000, seed=7, method="mcmc")
    sa, sb = distance_summary(a), distance_summary(b)
    for lev in LEVELS:
        assert abs(sa.quantiles[lev] - sb.quantiles[lev]) < 4 * np.hypot(sa.quantile_se[lev], sb.quantile_se[lev])
    ra = posterior_samples(star, ExponentialDensity(900.0), n=5000, seed=6, method="reweight")
    rb = posterior_samples(star, GeneralizedGamma(1.0, 2.0, 900.0), n=5000, seed=6, method="reweight")
    np.testing.assert_allclose(ra.weights, rb.weights, rtol=1e-9)


@pytest.mark.slow  # about a second or more: left out of mutation runs (DEVELOPERS.md)
def test_mcmc_preserves_correlations_of_other_parameters():
    # conditional Gaussian of pmra given parallax: its mean shifts by rho sigma_pm (plx - plx0)/sigma_plx
    # (Gaussian conditioning, common practice, no source); check slope of pmra on parallax
    star = invented_star(5.0, 0.25)
    s = posterior_samples(star, ExponentialDensity(1350.0), n=4000, seed=12, method="mcmc")
    x, y = s.values[:, 2], s.values[:, 3]
    slope, intercept = np.polyfit(x, y, 1)
    expected = star.cov[2, 3] / star.cov[2, 2]
    # K_SE standard errors of the least-squares slope, sqrt(sum(resid^2) / (n - 2) / sum((x - mean)^2))
    # (textbook regression; the thinned chain's draws are close to independent)
    resid = y - (slope * x + intercept)
    se = np.sqrt(resid @ resid / (x.size - 2) / np.sum((x - x.mean()) ** 2))
    assert abs(slope - expected) < K_SE * se
    held = invented_star(5.0, 0.25, only_parallax=True)
    h = posterior_samples(held, ExponentialDensity(1350.0), n=500, seed=12, method="mcmc")
    assert np.ptp(h.values[:, 3]) == 0.0 and h.info["sampled_parameters"] == ["ln_distance"]


def test_chain_too_short_raises_and_short_chain_warns():
    star = invented_star(1.0, 0.5)
    with pytest.raises(ChainTooShortError, match="MCMC chain too short .* raise max_steps"):
        sample_posterior_mcmc(star, ExponentialDensity(1000.0), n_effective=1000, seed=1, max_steps=100)
    with pytest.warns(PerierrWarning, match="MCMC chain short"):
        s = sample_posterior_mcmc(star, ExponentialDensity(1000.0), n_effective=1000, seed=1, max_steps=1600)
    assert s.info["n_steps"] == 1600


def test_sampling_errors():
    star = invented_star(1.0, 0.5)
    with pytest.raises(InputError, match="prior_method = 'grid': expected one of auto, reweight, mcmc"):
        posterior_samples(star, ExponentialDensity(1.0), method="grid")
    with pytest.raises(InputError, match="the prior is improper for this parallax"), \
            pytest.warns(PerierrWarning, match="dominated by the custom prior"):
        posterior_samples(invented_star(-1.0, 0.5), lambda r: r * 0 + 1.0, n=1000, seed=1)
    with pytest.raises(InputError, match="n_walkers = 5: expected an even number >= 12"):
        sample_posterior_mcmc(star, ExponentialDensity(1000.0), n_walkers=5)
    with pytest.raises(InputError, match="parallax = -1.0: The 'none' distance prior"):
        posterior_samples(invented_star(-1.0, 0.5), NoPrior())
    with pytest.raises(InputError, match="no Gaussian draw of the parallax lies where the prior is non-zero"):
        posterior_samples(invented_star(2.0, 0.01), UniformDensity(100.0), n=1000, seed=1, method="reweight")


def test_analyze_with_prior_explains_linear_columns_and_matches_quadrature():
    # reweighted posterior median distance vs scipy.integrate quadrature; d_ph monotone in r for an
    # only-parallax-uncertain star (Matthews 1994, QJRAS 35, 1)
    star = invented_star(1.0, 0.35, only_parallax=True, pm=(0.05, 0.08), rv=-25.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        # the straight line: the reference below is the straight-line d_ph (and the orbit model is slow at ~kpc)
        result = analyze(star, model="straight_line", distance_prior=UniformDensity(3000.0), n_samples=100_000,
                         seed=5)  # fmt: skip
    assert result.prior.method == "reweight"
    assert any("posterior summaries; the linearized columns" in w for w in result.warnings)
    assert not any("not linear over the error ellipsoid" in w for w in result.warnings)
    med_r = quadrature_quantiles(UniformDensity(3000.0), 1.0, 0.35, levels=(0.5,))[0]
    expected = StraightLine().evaluate(np.r_[star.mean[:2], 1000.0 / med_r, star.mean[3:]][None, :])
    d = result.monte_carlo.summaries["distance_pc"]
    assert abs(d.median - expected.distance_pc[0]) < 4 * d.quantile_se[0.5]
    assert d.effective_size == pytest.approx(result.prior.effective_size, rel=1e-9)
