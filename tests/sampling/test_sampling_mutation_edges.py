"""Edges of the posterior samplers (perierr/sampling/{posterior,reweight,mcmc}.py) for the priors mutation run.

The branches of ``posterior_samples`` that the quadrature tests do not reach: no prior (plain Gaussian draws),
a parallax error of zero (the distance is fixed), the seed each branch records, and the diagnostics of the
MCMC branch. References: the Gaussian sample mean and covariance (their standard errors, common practice,
no source), the documented seed rule (``perierr.sampling.gaussian.resolve_seed``: the recorded integer
reproduces the result) and the documented ``info`` keys of ``posterior_samples`` / ``PriorInfo``.
"""

import warnings

import numpy as np
import pytest

from perierr import ObservedStar
from perierr.errors import InputError, PerierrWarning
from perierr.priors import ExponentialDensity, NoPrior, UniformDensity, posterior_samples

PLX = 2  # index of the parallax among (ra, dec, parallax, pmra, pmdec, radial_velocity)

#: Monte Carlo checks allow K_SE standard errors (as in tests/sampling/test_priors_sampling.py).
K_SE = 4.0


def invented_star(plx, eplx, *, others=True):
    """An invented star (no real object); with ``others=False`` only the parallax is uncertain."""
    e = 1.0 if others else 0.0
    return ObservedStar.from_values(
        name="invented",
        ra=45.0,
        dec=12.0,
        parallax=plx,
        parallax_error=eplx,
        pmra=20.0,
        pmra_error=0.05 * e,
        pmdec=-8.0,
        pmdec_error=0.05 * e,
        radial_velocity=-40.0,
        radial_velocity_error=0.4 * e,
        ra_error=0.02 * e,
        dec_error=0.02 * e,
        parallax_pmra_corr=0.3 * e,
    )


# ----------------------------------------------------------------------------- no prior: parallax inversion


def test_no_prior_gives_plain_gaussian_draws_with_the_star_mean_and_covariance():
    # posterior_samples docstring: NoPrior gives plain Gaussian draws, method "gaussian", no weights, and an
    # info block with effective_size (= n, independent draws) and the note why the prior had no effect
    star = invented_star(4.0, 0.2)
    n = 4000
    s = posterior_samples(star, NoPrior(), n=n, seed=11)
    assert (s.method, s.weights, s.seed) == ("gaussian", None, 11)
    assert s.values.shape == (n, 6)
    assert s.info == {"effective_size": float(n), "note": "no prior: parallaxes inverted"}
    # sample mean within K_SE standard errors sigma / sqrt(n) of the star's mean (common practice, no source)
    se = star.sigma / np.sqrt(n)
    assert np.all(np.abs(s.values.mean(axis=0) - star.mean) < K_SE * se)
    # sample covariance of parallax and pmra: correlation 0.3 within K_SE (1 - rho^2) / sqrt(n) (Fisher's
    # large-sample standard error of a correlation coefficient, common practice, no source)
    rho = np.corrcoef(s.values[:, PLX], s.values[:, 3])[0, 1]
    assert abs(rho - 0.3) < K_SE * (1 - 0.3**2) / np.sqrt(n)
    # the recorded seed reproduces the draws (resolve_seed rule)
    again = posterior_samples(star, NoPrior(), n=n, seed=s.seed)
    assert np.array_equal(s.values, again.values)


# ----------------------------------------------------------------------------- a parallax error of zero


def test_a_zero_parallax_error_fixes_the_distance_and_weights_draws_equally():
    # posterior_samples: with parallax_error = 0 the distance is fixed at 1000 / parallax and the prior has no
    # effect: equal weights 1/n, effective size n, the parallax of every draw exactly the catalogue one
    star = invented_star(2.0, 0.0)
    n = 500
    s = posterior_samples(star, UniformDensity(1000.0), n=n, seed=5)  # r = 500 pc inside (0, 1000]
    assert (s.method, s.seed, s.n) == ("reweight", 5, n)
    assert s.weights == pytest.approx(np.full(n, 1.0 / n), rel=1e-15)
    assert s.info == {
        "effective_size": float(n),
        "note": "parallax_error = 0: the distance is fixed and the prior has no effect",
    }
    assert np.all(s.values[:, PLX] == 2.0)
    # the other observables keep their Gaussian errors: pmra sample std within K_SE of 0.05 (standard error of
    # a Gaussian standard deviation sigma / sqrt(2 (n - 1)), common practice, no source)
    assert abs(s.values[:, 3].std(ddof=1) - 0.05) < K_SE * 0.05 / np.sqrt(2 * (n - 1))
    again = posterior_samples(star, UniformDensity(1000.0), n=n, seed=5)
    assert np.array_equal(s.values, again.values)


def test_a_zero_parallax_error_below_one_mas_is_accepted():
    # r = 1000 / 0.5 = 2000 pc lies inside a uniform prior out to 3000 pc: nothing to refuse
    s = posterior_samples(invented_star(0.5, 0.0), UniformDensity(3000.0), n=200, seed=2)
    assert s.method == "reweight" and np.all(s.values[:, PLX] == 0.5)


@pytest.mark.parametrize(
    ("plx", "prior"),
    [
        (2.0, UniformDensity(100.0)),  # r = 500 pc beyond r_max = 100 pc
        (0.0, ExponentialDensity(1000.0)),  # no distance at all
        (-1.0, ExponentialDensity(1000.0)),
    ],
)
def test_a_zero_parallax_error_outside_the_prior_is_refused_by_name(plx, prior):
    # project rule: a clear error naming the field and value; the fixed distance 1000 / parallax must be > 0
    # and inside the prior's support (posterior_samples)
    with pytest.raises(InputError) as err:
        posterior_samples(invented_star(plx, 0.0), prior, n=200, seed=1)
    assert err.value.field == "parallax"
    assert err.value.value == plx


# ----------------------------------------------------------------------------- seeds and MCMC diagnostics


def test_reweighting_through_posterior_samples_records_its_seed():
    # resolve_seed rule: the result records the integer that reproduces it
    star = invented_star(4.0, 0.4)
    a = posterior_samples(star, ExponentialDensity(400.0), n=1000, seed=21, method="reweight")
    b = posterior_samples(star, ExponentialDensity(400.0), n=1000, seed=a.seed, method="reweight")
    assert a.seed == 21 and a.method == "reweight"
    assert np.array_equal(a.values, b.values) and np.array_equal(a.weights, b.weights)


def test_mcmc_branch_reports_requested_and_delivered_sizes():
    # posterior_samples (MCMC): info records the number of draws asked for and delivered, and never claims
    # more effective draws than were delivered (the thinned chain keeps about one draw per autocorrelation time)
    star = invented_star(2.0, 0.5, others=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        s = posterior_samples(star, ExponentialDensity(1000.0), n=300, seed=1, method="mcmc", n_walkers=8)
    assert s.method == "mcmc" and s.seed == 1 and s.weights is None
    assert s.info["n_requested"] == 300
    # the options reach the sampler: 8 walkers, and the effective size asked is min(mcmc_effective_size, n) =
    # 300, so the chain stops soon after 50 tau (emcee's rule) and 300 effective draws (mcmc module docstring)
    assert s.info["n_walkers"] == 8
    tau = max(s.info["autocorrelation_time"].values())
    assert s.info["n_steps"] <= 1.3 * (s.info["burn_in"] + max(50 * tau, 300 * tau / 8))
    assert s.info["n_delivered"] == s.n
    assert s.info["effective_size"] <= s.n
    assert "switched_to_mcmc" not in s.info and "reweight_effective_size" not in s.info
    # inputs held exact stay at their catalogue values, column by column (OBSERVABLES order); the parallax
    # varies and stays positive (distances are sampled)
    for k in (0, 1, 3, 4, 5):
        assert np.all(s.values[:, k] == star.mean[k])
    assert np.ptp(s.values[:, PLX]) > 0 and np.all(s.values[:, PLX] > 0)


@pytest.mark.parametrize(("sampler_ess", "expected"), [(25.0, 25.0), (60.0, 40.0), (None, 40.0)])
def test_mcmc_block_caps_the_effective_size_at_the_draws_delivered(sampler_ess, expected):
    # posterior_samples (MCMC branch): the block records the switch reason, the reweighting effective size
    # tried, the sizes asked and delivered, and an effective size never above the draws delivered (a thinned
    # chain keeps about one draw per autocorrelation time; common practice, no source); the sampler's own
    # info is not changed
    from perierr.sampling.gaussian import Samples
    from perierr.sampling.posterior import _mcmc_samples

    info = {"burn_in": 12} if sampler_ess is None else {"burn_in": 12, "effective_size": sampler_ess}
    out = Samples(np.zeros((40, 6)), method="mcmc", seed=None, info=dict(info))
    got = _mcmc_samples(out, 500, 77, "nominal parallax <= 0", 12.5)
    assert (got.method, got.seed, got.weights) == ("mcmc", 77, None)
    assert got.info == {
        "burn_in": 12,
        "effective_size": expected,
        "switched_to_mcmc": "nominal parallax <= 0",
        "reweight_effective_size": 12.5,
        "n_requested": 500,
        "n_delivered": 40,
    }
    assert out.info == info
    plain = _mcmc_samples(out, 500, 77, None, None)
    assert "switched_to_mcmc" not in plain.info and "reweight_effective_size" not in plain.info


def test_mcmc_log_target_matches_the_closed_form_and_is_minus_inf_silently_off_the_support():
    # mcmc module docstring: ln p(x) = -(z_0^2 + sum_j z_j^2) / 2 + ln P(r) + ln r with r = exp(x_0) and
    # z_0 = (1000 / r - parallax) / sigma (Gaussian likelihood, Bailer-Jones 2015, PASP 127, 994, eq. 2, times
    # the prior, and the Jacobian of r -> ln r); checked against scipy.stats.norm and the EDSD closed form
    # P(r) = r^2 exp(-r / L) / (2 L^3) (Bailer-Jones 2015, eq. 18), up to the constant ln(2 pi) terms
    from scipy import stats

    from perierr.sampling.mcmc import _log_target

    plx0, sig, big_l = 2.0, 0.5, 1000.0
    log_prob = _log_target(ExponentialDensity(big_l), plx0, sig)
    x = np.array([[np.log(400.0), 0.3], [np.log(650.0), -1.2], [np.log(90.0), 2.0]])
    r = np.exp(x[:, 0])
    expected = (
        stats.norm.logpdf(1000.0 / r, loc=plx0, scale=sig)
        + np.log(sig)
        + 0.5 * np.log(2 * np.pi)
        + stats.norm.logpdf(x[:, 1])
        + 0.5 * np.log(2 * np.pi)
        + np.log(r**2 * np.exp(-r / big_l) / (2 * big_l**3))
        + np.log(r)
    )
    np.testing.assert_allclose(log_prob(x), expected, rtol=1e-12)
    # project rule: no silent NaN; a walker where the density is zero or the distance is not representable
    # (r overflows to inf, underflows to 0, or is infinite) has ln p = -inf, without a warning
    far = np.array([[800.0, 0.0], [-800.0, 0.0], [np.inf, 0.0], [-np.inf, 0.0], [np.log(400.0), np.inf]])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        for prior in (ExponentialDensity(big_l), UniformDensity(3000.0)):
            got = _log_target(prior, plx0, sig)(far)
            assert np.array_equal(got, np.full(len(far), -np.inf))


def held_star():
    """An invented star (no real object) whose only uncertain observable is the parallax (one sampled parameter)."""
    return invented_star(2.0, 0.5, others=False)


@pytest.mark.parametrize(("n_effective", "n_walkers", "seed"), [(600, 8, 2), (100, 64, 3)])
def test_mcmc_runs_until_its_stopping_rule_holds_and_not_much_longer(n_effective, n_walkers, seed, caplog, capfd):
    # mcmc module docstring: the run is extended until it is at least 50 tau long after a burn-in of 5 tau
    # (emcee's reliability rule) and holds the requested effective size walkers x kept / tau; it then returns
    # without a warning. The first case is bound by the effective size, the second by the 50 tau.
    from perierr.priors import sample_posterior_mcmc

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        s = sample_posterior_mcmc(
            held_star(), ExponentialDensity(1000.0), n_effective=n_effective, seed=seed, n_walkers=n_walkers
        )
    info = s.info
    tau = max(info["autocorrelation_time"].values())
    kept = info["n_steps"] - info["burn_in"]
    assert kept >= 50 * tau
    assert info["effective_size"] == pytest.approx(n_walkers * kept / tau, rel=1e-12)
    assert info["effective_size"] >= n_effective
    assert info["thin"] == int(np.ceil(tau))
    # the draws are the chain after the burn-in, every thin-th step of every walker
    # (emcee.EnsembleSampler.get_chain(discard, thin))
    assert s.n == n_walkers * (kept // info["thin"])
    assert s.seed == seed and info["n_walkers"] == n_walkers and info["sampled_parameters"] == ["ln_distance"]
    assert s.method == "mcmc" and s.weights is None
    assert 0.0 < info["acceptance_fraction"] < 1.0
    # "extended until": each extension is sized to what the rule still needs, so the chain stops soon after
    # the rule holds; 30 % beyond it allows for the re-estimated tau (measured: at most 9 % on ten seeds)
    need = info["burn_in"] + max(50 * tau, n_effective * tau / n_walkers)
    assert info["n_steps"] <= 1.3 * need
    # a library prints and logs nothing while sampling (no progress bar; common practice, no source)
    assert caplog.records == []
    assert capfd.readouterr().err == ""


class _StoredChain:
    """Stands in for an emcee sampler: get_chain() returns a fixed chain of shape (steps, walkers, ndim)."""

    def __init__(self, chain):
        self.chain = chain

    def get_chain(self):
        return self.chain


def ar1_chain(phi, steps, walkers, rng):
    """Gaussian AR(1) chains x_t = phi x_{t-1} + sqrt(1 - phi^2) e_t, one parameter (textbook, no source)."""
    x = np.zeros((steps, walkers))
    e = rng.standard_normal((steps, walkers))
    for t in range(1, steps):
        x[t] = phi * x[t - 1] + np.sqrt(1 - phi * phi) * e[t]
    return x[:, :, None]


def drifting_chain(steps, walkers, rng):
    """Walkers still drifting: a linear trend plus small noise, one parameter (a chain far from converged)."""
    t = np.arange(steps, dtype=float)[:, None]
    return (t + rng.uniform(0, 5, walkers) + 1e-3 * rng.standard_normal((steps, walkers)))[:, :, None]


@pytest.mark.parametrize(("kind", "steps"), [("ar1", 2000), ("drifting", 400)])
def test_burn_in_is_five_autocorrelation_times(kind, steps):
    # _tau_and_burn docstring and DEVELOPERS.md: a burn-in of 5 tau (two passes: tau of the later half of the
    # chain, then tau after the burn-in), never more than half the chain; the estimator is emcee's
    # integrated_time (Sokal 1997), used here as the reference. A drifting chain has a burn-in of more than a
    # third of its length.
    from emcee.autocorr import integrated_time

    from perierr.sampling.mcmc import _tau_and_burn

    rng = np.random.default_rng(4)
    chain = ar1_chain(0.8, steps, 8, rng) if kind == "ar1" else drifting_chain(steps, 8, rng)
    first = integrated_time(chain[steps // 2 :], tol=0, quiet=True)
    burn_expected = min(int(np.ceil(5 * first.max())), steps // 2)
    tau, burn = _tau_and_burn(_StoredChain(chain), steps)
    assert burn == burn_expected and isinstance(burn, int)
    assert burn <= steps // 2
    if kind == "drifting":
        assert burn > steps // 3
    np.testing.assert_allclose(tau, integrated_time(chain[burn_expected:], tol=0, quiet=True), rtol=1e-12)


def test_a_chain_that_never_moved_is_refused_naming_its_length():
    # _finite_tau: a chain that never moved has no finite autocorrelation time (0/0 in the autocorrelation);
    # the error says so with the number of steps
    from perierr.priors import ChainTooShortError
    from perierr.sampling.mcmc import _tau_and_burn

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # emcee's own 0/0 in its autocorrelation
        with pytest.raises(ChainTooShortError, match="did not move in 500 steps"):
            _tau_and_burn(_StoredChain(np.full((500, 8, 1), 3.0)), 500)


def judge_info(ess, n_steps=4000, n_walkers=16):
    return {"effective_size": ess, "n_steps": n_steps, "n_walkers": n_walkers}


def test_judge_refuses_below_twenty_tau_or_a_hundred_effective_draws_and_warns_below_the_request():
    # sample_posterior_mcmc docstring (Raises): ChainTooShortError with fewer than 20 autocorrelation times
    # after burn-in or fewer than 100 effective samples; a warning between 20 and 50 tau or below the
    # requested effective size (emcee's reliability rule is 50 tau). Exactly 20 tau and exactly 100 draws are
    # not "fewer".
    from perierr.priors import ChainTooShortError
    from perierr.sampling.mcmc import _judge

    tau = 10.0
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        _judge(judge_info(4000.0), kept=500, tau_max=tau, n_effective=4000, max_steps=9000)  # 50 tau: silent
    with pytest.warns(PerierrWarning, match="MCMC chain short \\(4000 steps x 16 walkers, autocorrelation time 10.0"):
        _judge(judge_info(4000.0), kept=200, tau_max=tau, n_effective=4000, max_steps=9000)  # exactly 20 tau
    with pytest.warns(PerierrWarning, match="effective sample size 100\\)"):
        _judge(judge_info(100.0), kept=600, tau_max=tau, n_effective=4000, max_steps=9000)  # exactly 100
    with pytest.warns(PerierrWarning, match="effective sample size 100\\)"):
        _judge(judge_info(100.5), kept=600, tau_max=tau, n_effective=4000, max_steps=9000)
    with pytest.raises(ChainTooShortError, match="MCMC chain too short \\(4000 steps x 16 walkers.*now 9000"):
        _judge(judge_info(4000.0), kept=199, tau_max=tau, n_effective=4000, max_steps=9000)
    with pytest.raises(ChainTooShortError, match="effective sample size 100\\)"):
        _judge(judge_info(99.6), kept=600, tau_max=tau, n_effective=4000, max_steps=9000)
    # a request below 100 lowers the refusal threshold to the request
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        _judge(judge_info(60.0), kept=600, tau_max=tau, n_effective=50, max_steps=9000)


# ----------------------------------------------------------------------------- the walkers' starting points


def edsd_density(length):
    """EDSD prior P(r) = r^2 exp(-r / L) / (2 L^3) (Bailer-Jones 2015, PASP 127, 994, eq. 18)."""
    return lambda r: r * r * np.exp(-r / length) / (2.0 * length**3)


def ks_pvalue_against_posterior(starts, w, s, prior_density, lo, hi):
    """KS p-value of start values u = ln r against the 1-D posterior of ln r by quadrature.

    The posterior density of u = ln r is exp(-(w - 1000/r)^2 / (2 s^2)) P(r) r (Bailer-Jones 2015, eq. 2 times
    the prior, and the Jacobian of r -> ln r); scipy.integrate.quad over the gaps between the sorted starts gives
    its CDF there; scipy.stats.kstwo gives the p-value of the KS statistic.
    """
    from scipy import integrate, stats

    def dens(u):
        r = np.exp(u)
        return float(np.exp(-0.5 * ((w - 1000.0 / r) / s) ** 2) * prior_density(r) * r)

    x = np.sort(starts)
    edges = np.concatenate([[np.log(lo)], x, [np.log(hi)]])
    parts = np.array(
        [
            integrate.quad(dens, a, b, epsabs=0, epsrel=1e-10, limit=100)[0] if b > a else 0.0
            for a, b in zip(edges[:-1], edges[1:])
        ]
    )
    cdf = np.cumsum(parts)[:-1] / parts.sum()
    n = x.size
    d = max(np.max(np.arange(1, n + 1) / n - cdf), np.max(cdf - np.arange(n) / n))
    return float(stats.kstwo.sf(d, n))


@pytest.mark.parametrize(
    ("w", "s", "length"),
    [
        (0.5, 0.04, 200.0),  # 8 %: a prior much shorter than the distance tilts the posterior strongly
        (2.0, 0.1, 50.0),  # exactly 5 %: the documented switch is "< 5 %", so the posterior is drawn
        (2.0, 0.6, 300.0),  # 30 %
        (1500.0, 150.0, 1000.0),  # an invented star at 0.67 pc: the posterior lies below 1 pc
    ],
)
def test_walkers_start_from_the_distance_posterior_when_the_parallax_is_not_precise(w, s, length):
    # _initial_log_distance docstring: otherwise (sigma / parallax >= 5 %) the starts are drawn from the 1-D
    # distance posterior (inverse CDF on a log grid from 1e-3 to 1e8 pc); checked by a KS test against
    # quadrature (p > 1e-3 for these fixed seeds)
    from perierr.sampling.mcmc import _initial_log_distance

    starts = _initial_log_distance(ExponentialDensity(length), w, s, 3000, np.random.default_rng(17))
    assert starts.shape == (3000,) and np.all(np.isfinite(starts))
    assert ks_pvalue_against_posterior(starts, w, s, edsd_density(length), 1e-3, 1e8) > 1e-3


@pytest.mark.parametrize(("w", "s"), [(0.5, 0.02), (40.0, 1.0)])
def test_walkers_start_from_gaussian_parallaxes_when_the_parallax_is_precise(w, s):
    # _initial_log_distance docstring: near-Gaussian case (sigma / parallax < 5 %): the starts are ln(1000 / p)
    # with p Gaussian parallaxes N(w, s), whatever the prior (here one that tilts the posterior: EDSD with
    # L = 200 pc); KS test of p against scipy.stats.norm (p-value > 1e-3 for this fixed seed)
    from scipy import stats

    from perierr.sampling.mcmc import _initial_log_distance

    starts = _initial_log_distance(ExponentialDensity(200.0), w, s, 3000, np.random.default_rng(18))
    p = 1000.0 * np.exp(-starts)
    assert stats.kstest(p, stats.norm(w, s).cdf).pvalue > 1e-3


def test_walker_starts_do_not_depend_on_the_prior_normalization():
    # CustomPrior docstring: a density need not be normalized; the same density times 1e200 or 1e-200 gives
    # the same starting points with the same seed (to rounding)
    from perierr.priors import CustomPrior
    from perierr.sampling.mcmc import _initial_log_distance

    base = _initial_log_distance(ExponentialDensity(300.0), 2.0, 0.6, 500, np.random.default_rng(5))
    for scale in (1e200, 1e-200):
        prior = CustomPrior(lambda r, k=scale: k * edsd_density(300.0)(r))
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            got = _initial_log_distance(prior, 2.0, 0.6, 500, np.random.default_rng(5))
        np.testing.assert_allclose(got, base, rtol=1e-9)


def test_walkers_start_at_a_zero_or_negative_parallax():
    # a parallax of 0 or below has no Gaussian shortcut: the starts come from the posterior under a proper
    # prior (uniform density out to 2 kpc: P(r) = 3 r^2 / r_max^3, common practice, no source)
    from perierr.sampling.mcmc import _initial_log_distance

    for w in (0.0, -0.3):
        starts = _initial_log_distance(UniformDensity(2000.0), w, 0.5, 2000, np.random.default_rng(6))
        uniform = lambda r: np.where(r <= 2000.0, 3 * r * r / 2000.0**3, 0.0)  # noqa: E731
        assert np.all(starts <= np.log(2000.0))
        assert ks_pvalue_against_posterior(starts, w, 0.5, uniform, 1e-3, 2000.0) > 1e-3


def test_a_prior_that_ends_at_the_grid_floor_is_refused_by_name():
    # _initial_log_distance: the grid starts at 1e-3 pc (about 200 au); a prior ending there leaves no range
    from perierr.sampling.mcmc import _initial_log_distance

    for r_max in (1e-3, 5e-4):
        with pytest.raises(InputError) as err:
            _initial_log_distance(UniformDensity(r_max), 2.0, 0.5, 100, np.random.default_rng(1))
        assert err.value.field == "distance prior"
        assert "only distances below 0.001 pc" in err.value.expected


def test_walkers_start_inside_a_prior_made_of_narrow_spikes():
    # _initial_log_distance: starts drawn by inverse CDF on the log grid may fall between a grid node that
    # carries density and the zero just beyond it; they are moved onto grid nodes that carry density, so
    # every walker starts where the prior is positive. Three invented spikes 0.4 pc wide (about one grid cell
    # of 0.28 pc) with posterior masses 0.28, 0.35, 0.37 (scipy.integrate.quad of the likelihood times the
    # table times r): each spike must hold a fair share (> 10 %) of the starts.
    from perierr.priors import TablePrior
    from perierr.sampling.mcmc import _initial_log_distance

    centres = (400.0, 450.0, 500.0)
    distance, density = [1.0], [0.0]
    for c in centres:
        distance += [c - 0.2, c, c + 0.2]
        density += [0.0, 1.0, 0.0]
    prior = TablePrior(distance + [1e6], density + [0.0])
    starts = _initial_log_distance(prior, 2.2, 0.6, 4000, np.random.default_rng(3))
    r = np.exp(starts)
    assert np.all(np.isfinite(prior.log_density(r)))
    share = np.bincount(np.argmin(np.abs(r[:, None] - np.array(centres)), axis=1), minlength=3) / r.size
    assert np.all(share > 0.10)


def test_walkers_start_from_the_posterior_under_a_table_prior_cut_at_the_likely_distances():
    # a tabulated prior (linear interpolation, zero outside the table: TablePrior docstring) that starts at
    # 400 pc, where the posterior is still high: the starts follow the posterior on [400, 1e5] pc (KS test
    # against quadrature, p > 1e-3 for this fixed seed)
    from perierr.priors import TablePrior
    from perierr.sampling.mcmc import _initial_log_distance

    distance, density = [400.0, 1e5], [1.0, 1.0]
    starts = _initial_log_distance(TablePrior(distance, density), 2.0, 0.6, 3000, np.random.default_rng(8))
    assert np.all(starts >= np.log(400.0))
    table = lambda r: np.interp(r, distance, density, left=0.0, right=0.0)  # noqa: E731
    assert ks_pvalue_against_posterior(starts, 2.0, 0.6, table, 400.0, 1e5) > 1e-3


def test_mcmc_with_the_same_seed_gives_the_same_chain():
    # resolve_seed rule: the recorded seed reproduces the result
    from perierr.priors import sample_posterior_mcmc

    a = sample_posterior_mcmc(held_star(), ExponentialDensity(1000.0), n_effective=100, seed=3, n_walkers=4)
    b = sample_posterior_mcmc(held_star(), ExponentialDensity(1000.0), n_effective=100, seed=a.seed, n_walkers=4)
    assert a.seed == 3
    assert np.array_equal(a.values, b.values)


def test_the_walker_count_rule_even_and_at_least_twice_the_sampled_parameters():
    # sample_posterior_mcmc docstring: n_walkers is an even number >= 2 x the number of sampled parameters
    # (the stretch move updates one half of the ensemble from the other; Foreman-Mackey et al. 2013, PASP 125,
    # 306); here 1 parameter for the star with only its parallax uncertain, 6 for a fully uncertain one
    from perierr.priors import sample_posterior_mcmc

    for star, bad in ((held_star(), 3), (invented_star(2.0, 0.5), 10), (invented_star(2.0, 0.5), 13)):
        with pytest.raises(InputError) as err:
            sample_posterior_mcmc(star, ExponentialDensity(1000.0), n_effective=100, seed=1, n_walkers=bad)
        assert (err.value.field, err.value.value) == ("n_walkers", bad)
    s = sample_posterior_mcmc(held_star(), ExponentialDensity(1000.0), n_effective=100, seed=3, n_walkers=2)
    assert s.info["n_walkers"] == 2 and s.n > 0


def test_the_mcmc_chain_depends_on_its_seed_only_not_on_numpy_s_global_state():
    # project rule: a seeded numpy.random.Generator everywhere; emcee's legacy RandomState is seeded from it
    # (sample_posterior_mcmc docstring), so numpy's global random state must not matter
    from perierr.priors import sample_posterior_mcmc

    saved = np.random.get_state()  # noqa: NPY002 (the legacy global state is what is tested)
    try:
        np.random.seed(1)  # noqa: NPY002
        a = sample_posterior_mcmc(held_star(), ExponentialDensity(1000.0), n_effective=100, seed=3, n_walkers=4)
        np.random.seed(2)  # noqa: NPY002
        b = sample_posterior_mcmc(held_star(), ExponentialDensity(1000.0), n_effective=100, seed=3, n_walkers=4)
    finally:
        np.random.set_state(saved)  # noqa: NPY002
    assert np.array_equal(a.values, b.values)


def test_mcmc_refuses_a_zero_parallax_error_and_names_max_steps_when_too_short():
    # sample_posterior_mcmc docstring: the star's parallax error must be > 0; ChainTooShortError when the chain
    # reaches max_steps too short, naming the max_steps to raise
    from perierr.priors import ChainTooShortError, sample_posterior_mcmc

    with pytest.raises(InputError) as err:
        sample_posterior_mcmc(invented_star(2.0, 0.0), ExponentialDensity(1000.0), seed=1)
    assert (err.value.field, err.value.value) == ("parallax_error", 0.0)
    with pytest.raises(ChainTooShortError, match="raise max_steps \\(now 100\\)"):
        sample_posterior_mcmc(held_star(), ExponentialDensity(1000.0), n_effective=1000, seed=1, max_steps=100)


# ----------------------------------------------------------------------------- prior-dominated parallaxes


def warnings_of(star, prior):
    """Messages of the PerierrWarnings posterior_samples gives (reweighting, 2000 draws)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        posterior_samples(star, prior, n=2000, seed=4, method="reweight")
    return [str(w.message) for w in caught if issubclass(w.category, PerierrWarning)]


def test_a_prior_dominated_parallax_is_named_in_a_warning():
    # posterior_samples: a parallax <= 0, or below its error, leaves the distance to the prior; the warning
    # says which (a parallax of 0 is "<= 0"; one equal to its error is not below it)
    prior = UniformDensity(3000.0)
    dominated = [m for m in warnings_of(invented_star(0.0, 0.5), prior) if "dominated by" in m]
    assert len(dominated) == 1 and dominated[0].startswith("the parallax is <= 0: ")
    dominated = [m for m in warnings_of(invented_star(0.3, 0.5), prior) if "dominated by" in m]
    assert len(dominated) == 1 and dominated[0].startswith("the parallax is below its error (0.3 < 0.5 mas): ")
    assert "uniform_density prior {'r_max_pc': 3000.0}" in dominated[0]
    for plx, eplx in ((0.5, 0.5), (0.8, 0.1), (4.0, 0.5)):
        assert not any("dominated by" in m for m in warnings_of(invented_star(plx, eplx), prior)), plx


def test_posterior_samples_draws_a_hundred_thousand_by_default():
    # posterior_samples signature: n = 100_000 Gaussian draws by default (here without a prior)
    assert posterior_samples(invented_star(4.0, 0.2), NoPrior(), seed=1).n == 100_000


# ----------------------------------------------------------------------------- choosing the sampler


def reweighted(star, prior, **kwargs):
    """posterior_samples by reweighting (2000 draws, seed 4) and the messages of its PerierrWarnings."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        s = posterior_samples(star, prior, seed=4, **({"n": 2000, "method": "reweight"} | kwargs))
    return s, [str(w.message) for w in caught if issubclass(w.category, PerierrWarning)]


def test_forced_reweighting_below_the_effective_size_threshold_warns_and_still_checks_tension():
    # posterior_samples docstring: method="reweight" below min_effective_size warns (it does not switch); an
    # informative parallax (5 sigma) dragged more than 3 sigma by the prior is a prior-data conflict. An EDSD
    # prior with L = 5 pc pulls a 2.0 +- 0.3 mas parallax (500 pc) hard: Kish effective size 4 of 2000.
    star = invented_star(2.0, 0.3)
    s, messages = reweighted(star, ExponentialDensity(5.0))
    ess = s.info["effective_size"]
    assert s.method == "reweight" and ess < 200
    assert f"reweighting kept an effective sample size of {ess:.0f} (< 200) out of 2000 draws" in messages[0]
    # z = (weighted median parallax - measured) / error; the weighted median interpolates the mid-point weighted
    # CDF (Hyndman & Fan 1996, Am. Stat. 50, 361, definition 5, with weights)
    x = s.values[:, PLX]
    order = np.argsort(x, kind="stable")
    w = s.weights[order]
    med = np.interp(0.5, (np.cumsum(w) - 0.5 * w) / w.sum(), x[order])
    assert s.info["prior_tension_sigma"] == pytest.approx((med - 2.0) / 0.3, abs=1e-9)
    assert s.info["prior_tension_sigma"] > 3.0
    assert any(m.startswith("prior-data conflict") and "the edsd prior {'L_pc': 5.0}" in m for m in messages)
    # the same with a threshold it reaches: no size warning, the conflict is still reported
    s1, messages1 = reweighted(star, ExponentialDensity(5.0), min_effective_size=1)
    assert s1.method == "reweight" and not any("reweighting kept" in m for m in messages1)
    assert any(m.startswith("prior-data conflict") for m in messages1)


def test_the_effective_size_threshold_default_and_given():
    # posterior_samples docstring: min_effective_size defaults to min(1000, n / 10); a given one is used as is
    star = invented_star(2.0, 0.3)
    s, messages = reweighted(star, ExponentialDensity(30.0))  # Kish effective size 562 of 2000 (> 200)
    assert 200 < s.info["effective_size"] < 1000 and not any("reweighting kept" in m for m in messages)
    _, messages = reweighted(star, ExponentialDensity(30.0), min_effective_size=1500)
    assert any("(< 1500) out of 2000 draws" in m for m in messages)
    # 10000 draws: the default is min(1000, 1000) = 1000; a uniform prior out to 2 kpc keeps 936
    s, messages = reweighted(invented_star(2.0, 0.5), UniformDensity(2000.0), n=10_000)
    assert 909 < s.info["effective_size"] < 1000
    assert any("(< 1000) out of 10000 draws" in m for m in messages)


def test_auto_samples_a_zero_parallax_by_mcmc_and_records_why():
    # posterior_samples module docstring: method="auto" switches to MCMC for a nominal parallax <= 0 and
    # records the reason in info["switched_to_mcmc"]
    s, _ = reweighted(held_star_at(0.0), UniformDensity(2000.0), n=300, method="auto", n_walkers=8)
    assert s.method == "mcmc"
    assert s.info["switched_to_mcmc"] == "nominal parallax <= 0"
    assert "reweight_effective_size" not in s.info


def test_auto_switches_to_mcmc_when_no_gaussian_draw_lies_inside_the_prior():
    # posterior_samples: under "auto", reweighting that finds no draw where the prior is non-zero (100 draws of
    # 2.0 +- 0.3 mas; r <= 300 pc needs a parallax 4.4 sigma high) counts as effective size 0 and switches
    s, _ = reweighted(held_star_at(2.0, 0.3), UniformDensity(300.0), n=100, method="auto", n_walkers=8)
    assert s.method == "mcmc"
    assert s.info["reweight_effective_size"] == 0.0
    assert s.info["switched_to_mcmc"] == "reweighting effective sample size 0 < 10"
    assert np.all(s.values[:, PLX] >= 1000.0 / 300.0)


def held_star_at(plx, eplx=0.5):
    """An invented star (no real object) whose only uncertain observable is the parallax."""
    return invented_star(plx, eplx, others=False)


def test_posterior_samples_passes_max_steps_to_the_sampler():
    # posterior_samples docstring: n_walkers and max_steps are passed to sample_posterior_mcmc, whose
    # ChainTooShortError names the max_steps to raise
    from perierr.priors import ChainTooShortError

    with pytest.raises(ChainTooShortError, match="raise max_steps \\(now 100\\)"):
        posterior_samples(held_star(), ExponentialDensity(1000.0), n=1000, seed=1, method="mcmc", max_steps=100)
