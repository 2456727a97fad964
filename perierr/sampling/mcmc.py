"""Posterior sampling of the six observables under a distance prior, with emcee.

Target: the Gaussian likelihood of the catalogue solution (astrometry and
radial velocity, with all correlations) times the prior P(r) on the distance
r = 1000 / parallax, with flat priors on the other parameters.

Parametrization (exact, not an approximation): the covariance is factored
with the parallax first, ``theta = m + L z`` with ``z ~ N(0, I)`` and
``L[0, 0] = sigma_parallax``, so ``z_0 = (parallax - m_parallax) / sigma``
and the other ``z_j`` are the whitened remaining observables given the
parallax. The sampler moves in ``x = (ln r, z_1, ..., z_k)``; the log target is

    ln p(x) = -(z_0^2 + sum_j z_j^2) / 2 + ln P(r) + ln r ,

the last term being the Jacobian of r -> ln r. Inputs with zero error (held
exact) are not sampled. The affine-invariant ensemble sampler (Goodman &
Weare 2010, CAMCoS 5, 65; Foreman-Mackey et al. 2013, PASP 125, 306) is run
with ``vectorize=True``, so the log target sees all walkers at once.

Convergence is checked, not assumed: the integrated autocorrelation time tau
(emcee's estimator, Sokal 1997) is measured after a burn-in of 5 tau, the
chain is thinned by tau so the kept draws are close to independent, and the
run is extended until it is at least 50 tau long after burn-in (emcee's own
reliability rule) and holds the requested effective sample size. A run that
hits ``max_steps`` first warns (20 to 50 tau: short but usable) or raises
:class:`ChainTooShortError`.
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from ..errors import InputError, PerierrError, PerierrWarning
from ..priors.distance_posterior import log_distance_posterior
from ..units import MAS_PC, OBSERVABLES, PARALLAX
from .gaussian import Samples, psd_factor, resolve_seed

__all__ = ["ChainTooShortError", "sample_posterior_mcmc"]

_PERM = (PARALLAX,) + tuple(k for k in range(6) if k != PARALLAX)
_INV = tuple(int(i) for i in np.argsort(_PERM))

#: Chain length after burn-in, in autocorrelation times, for a trusted tau
#: (emcee documentation's rule of thumb, also its ``tol`` default).
RELIABLE_TAUS = 50
#: Below this many autocorrelation times the result is refused.
MINIMUM_TAUS = 20


class ChainTooShortError(PerierrError, RuntimeError):
    """The MCMC chain is too short for its autocorrelation time to be trusted."""


def _initial_log_distance(prior, plx, sig, n, rng) -> np.ndarray:
    """Starting ln r of the walkers, drawn from the 1-D distance posterior.

    Near-Gaussian case (sigma / parallax < 5 %): from Gaussian parallaxes.
    Otherwise by inverse-CDF on a log-spaced grid, which also detects a
    posterior that does not fall off at large distance (improper prior).
    """
    if plx > 0 and sig / plx < 0.05:
        p = plx + sig * rng.standard_normal(n)
        p = p[p > 0]
        if p.size == n:
            u = np.log(MAS_PC / p)
            if np.all(np.isfinite(prior.log_density(np.exp(u)))):
                return u
    lo, hi = prior.support
    open_top = not math.isfinite(hi)
    lo, hi = max(lo, 1e-3), min(hi, 1e8)
    if not hi > lo:
        raise InputError("distance prior", prior.parameters,
                         f"the prior allows only distances below {lo:g} pc (about 200 au), closer than any star: "
                         "bare numbers are pc, give a unit (e.g. r_max=2kpc)")
    r = np.geomspace(lo, hi, 20001)
    if lo == prior.support[0] and lo > 0:
        r = r[1:]  # table priors may be zero at their first node only through interpolation
    lp = log_distance_posterior(r, plx, sig, prior) + np.log(r)
    if not np.any(np.isfinite(lp)):
        raise InputError("distance prior", prior.name,
                         f"the posterior is zero everywhere between {lo:g} and {hi:g} pc: "
                         "the prior and the parallax do not overlap")
    dens = np.exp(lp - np.nanmax(lp[np.isfinite(lp)]))
    dens = np.where(np.isfinite(dens), dens, 0.0)
    u = np.log(r)
    cdf = np.concatenate([[0.0], np.cumsum(0.5 * (dens[1:] + dens[:-1]) * np.diff(u))])
    cdf /= cdf[-1]
    if open_top and 1.0 - np.interp(math.log(1e7), u, cdf) > 1e-3:
        raise InputError(
            "distance prior", prior.parameters,
            "the posterior does not fall off at large distance (more than 0.1 % of it beyond "
            "10 Mpc): the prior is improper for this parallax; use a proper prior or bound it (r_max)",
        )
    q = rng.uniform(0.0, 1.0, n)
    start = np.interp(q, cdf, u)
    good = np.isfinite(prior.log_density(np.exp(start)))
    if not good.all():  # nudge onto grid nodes that carry density
        nodes = u[dens > 0]
        start[~good] = rng.choice(nodes, size=int((~good).sum()))
    return start


def sample_posterior_mcmc(
    star,
    prior,
    *,
    n_effective: int = 4000,
    seed: int | np.random.Generator | None = None,
    rng=None,
    n_walkers: int = 64,
    max_steps: int = 100_000,
) -> Samples:
    """Sample the posterior of all six observables under a distance prior.

    Parameters
    ----------
    star : ObservedStar
        Its parallax error must be > 0.
    prior : DistancePrior
        Proper (or proper for this parallax).
    n_effective : int
        Effective sample size to reach.
    seed : int, numpy.random.Generator or None
        Seed of ``numpy.random.default_rng`` (see :func:`perierr.sampling.gaussian.resolve_seed`); the emcee
        sampler's legacy ``RandomState`` is seeded from it, so the same seed gives the same chain.
    rng : numpy.random.Generator, optional
        Use this generator instead (``seed`` is then only recorded).
    n_walkers : int
        Ensemble size (>= 2 x the number of sampled parameters, even).
    max_steps : int
        Cap on the chain length per walker.

    Returns
    -------
    Samples
        ``method="mcmc"``, unweighted, shape (about ``n_effective``, 6); ``info``
        has ``effective_size``, ``autocorrelation_time`` (per sampled
        parameter, in steps), ``burn_in``, ``thin``, ``n_steps``,
        ``n_walkers``, ``acceptance_fraction``, ``sampled_parameters``.

    Raises
    ------
    ChainTooShortError
        The chain reached ``max_steps`` with fewer than 20 autocorrelation
        times after burn-in or fewer than 100 effective samples.
    """
    sig = _checked_parallax_error(star, n_effective)
    seed = resolve_seed(seed)
    if rng is None:
        rng = np.random.default_rng(seed)
    mean_p, basis, free = _whitening(star)
    ndim = 1 + len(free)
    if n_walkers < 2 * ndim or n_walkers % 2:
        raise InputError("n_walkers", n_walkers, f"expected an even number >= {2 * ndim}")
    plx0 = float(mean_p[0])
    sampler, p0 = _start_sampler(prior, plx0, sig, n_walkers, ndim, rng)
    steps, tau, burn = _run_until_converged(sampler, p0, n_walkers, n_effective, max_steps)
    tau_max = float(np.max(tau))
    kept = steps - burn
    names = ["ln_distance"] + [OBSERVABLES[_PERM[j]] for j in free]
    thin = max(1, math.ceil(tau_max))
    flat = sampler.get_chain(discard=burn, thin=thin, flat=True)
    acc = float(np.mean(sampler.acceptance_fraction))
    info = {
        "effective_size": float(n_walkers * kept / tau_max),
        "autocorrelation_time": dict(zip(names, (float(t) for t in tau))),
        "burn_in": int(burn),
        "thin": int(thin),
        "n_steps": int(steps),
        "n_walkers": int(n_walkers),
        "acceptance_fraction": acc,
        "sampled_parameters": names,
    }
    _judge(info, kept, tau_max, n_effective, max_steps)
    if acc < 0.05:
        warnings.warn(f"MCMC acceptance fraction is {acc:.3f} (< 0.05): the chain barely moves; "
                      "check the prior's support", PerierrWarning, stacklevel=2)
    values = _to_observables(flat, mean_p, basis, plx0, sig)
    return Samples(values, weights=None, method="mcmc", seed=seed, info=info)


def _checked_parallax_error(star, n_effective) -> float:
    """The parallax error, after checking it is > 0 and that ``n_effective`` is at least 100."""
    sig = float(star.sigma[PARALLAX])
    if not sig > 0:
        raise InputError("parallax_error", sig, "posterior sampling needs a parallax error > 0")
    if int(n_effective) < 100:
        raise InputError("n_effective", n_effective, "expected at least 100 effective samples")
    return sig


def _whitening(star):
    """Mean and covariance factor with the parallax first, and the indices of the free (sampled) columns."""
    mean_p = np.asarray(star.mean)[list(_PERM)]
    cov_p = np.asarray(star.cov)[np.ix_(_PERM, _PERM)]
    low = psd_factor(cov_p)
    free = [j for j in range(1, 6) if np.any(low[:, j] != 0.0)]
    return mean_p, low[:, [0] + free], free


def _log_target(prior, plx0, sig):
    """The vectorized log target ln p(x) over the walkers, x = (ln r, z_1, ..., z_k)."""

    def log_prob(x):
        u = x[:, 0]
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            r = np.exp(u)
            z0 = (MAS_PC / r - plx0) / sig
            lp = -0.5 * (z0 * z0 + np.sum(x[:, 1:] ** 2, axis=1)) + prior.log_density(r) + u
        return np.where(np.isfinite(lp), lp, -np.inf)

    return log_prob


def _start_sampler(prior, plx0, sig, n_walkers, ndim, rng):
    """The emcee ensemble sampler, seeded from ``rng``, and the walkers' starting points."""
    import emcee

    p0 = np.empty((n_walkers, ndim))
    p0[:, 0] = _initial_log_distance(prior, plx0, sig, n_walkers, rng)
    p0[:, 1:] = rng.standard_normal((n_walkers, ndim - 1))
    sampler = emcee.EnsembleSampler(n_walkers, ndim, _log_target(prior, plx0, sig), vectorize=True)
    sampler.random_state = np.random.RandomState(int(rng.integers(2**32))).get_state()
    return sampler, p0


def _run_until_converged(sampler, p0, n_walkers, n_effective, max_steps):
    """Extend the chain until it is long enough (or ``max_steps``); steps, tau per parameter and burn-in."""
    state, chunk = p0, min(500, int(max_steps))
    while True:
        state = sampler.run_mcmc(state, chunk, progress=False)
        steps = sampler.iteration
        tau, burn = _tau_and_burn(sampler, steps)
        tau_max = float(np.max(tau))
        kept = steps - burn
        ess = n_walkers * kept / tau_max
        if (ess >= n_effective and kept >= RELIABLE_TAUS * tau_max) or steps >= max_steps:
            return steps, tau, burn
        need = max(RELIABLE_TAUS * tau_max, n_effective * tau_max / n_walkers) + burn - steps
        chunk = int(min(max(1.1 * need, 100), max_steps - steps))


def _tau_and_burn(sampler, steps):
    """Autocorrelation time per parameter and a burn-in of 5 tau (two passes)."""
    from emcee.autocorr import integrated_time

    chain = sampler.get_chain()
    tau = _finite_tau(integrated_time(chain[steps // 2 :], tol=0, quiet=True), steps)
    burn = min(int(math.ceil(5 * np.max(tau))), steps // 2)
    return _finite_tau(integrated_time(chain[burn:], tol=0, quiet=True), steps), burn


def _finite_tau(tau, steps) -> np.ndarray:
    """The autocorrelation times as floats; ChainTooShortError when one is not finite (a chain that never moved)."""
    tau = np.asarray(tau, dtype=float)
    if not np.all(np.isfinite(tau)):
        raise ChainTooShortError(
            f"MCMC chain did not move in {steps} steps (autocorrelation times {tau.tolist()}): the prior leaves "
            "the walkers no room; check the prior's support against the parallax"
        )
    return tau


def _judge(info, kept, tau_max, n_effective, max_steps):
    ess = info["effective_size"]
    where = (f"{info['n_steps']} steps x {info['n_walkers']} walkers, autocorrelation time "
             f"{tau_max:.1f} steps, effective sample size {ess:.0f}")
    if kept < MINIMUM_TAUS * tau_max or ess < min(100, n_effective):
        raise ChainTooShortError(
            f"MCMC chain too short ({where}): fewer than {MINIMUM_TAUS} autocorrelation times "
            f"after burn-in or < 100 effective samples; raise max_steps (now {max_steps})"
        )
    if kept < RELIABLE_TAUS * tau_max or ess < n_effective:
        warnings.warn(
            f"MCMC chain short ({where}): the autocorrelation time is trusted from "
            f"{RELIABLE_TAUS} of them and {n_effective} effective samples were asked; "
            f"raise max_steps (now {max_steps}) for reliable diagnostics",
            PerierrWarning, stacklevel=3,
        )


def _to_observables(flat, mean_p, basis, plx0, sig) -> np.ndarray:
    """Sampler coordinates (n, k) -> observables (n, 6) in the OBSERVABLES order."""
    plx = MAS_PC * np.exp(-flat[:, 0])
    z = np.column_stack([(plx - plx0) / sig, flat[:, 1:]])
    theta_p = mean_p + z @ basis.T
    theta_p[:, 0] = plx  # exact, free of rounding in the round trip
    return theta_p[:, list(_INV)]
