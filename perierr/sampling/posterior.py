"""Choose how to sample the posterior under a distance prior, and do it.

``method="auto"`` reweights Gaussian draws (fast, exact in the limit) and
switches to MCMC when reweighting degenerates: a nominal parallax <= 0, or a
Kish effective sample size below ``min_effective_size``. The reason for a
switch is recorded in ``Samples.info["switched_to_mcmc"]``.
"""

from __future__ import annotations

import warnings

import numpy as np

from ..errors import InputError, PerierrWarning
from ..priors.densities import DistancePrior, NoPrior
from ..priors.parse import resolve_prior
from ..star.checks import require_positive_parallax
from ..summary import weighted_quantiles
from ..units import MAS_PC, PARALLAX
from .gaussian import Samples, draw_gaussian, resolve_seed
from .mcmc import sample_posterior_mcmc
from .reweight import reweight

__all__ = ["METHODS", "posterior_samples"]

#: Accepted values of ``method``.
METHODS = ("auto", "reweight", "mcmc")


def posterior_samples(
    star,
    prior: DistancePrior,
    *,
    n: int = 100_000,
    seed: int | np.random.Generator | None = None,
    method: str = "auto",
    min_effective_size: float | None = None,
    mcmc_effective_size: int = 10_000,
    n_walkers: int = 64,
    max_steps: int = 100_000,
) -> Samples:
    """Samples of the six observables from their posterior under ``prior``.

    Parameters
    ----------
    star : ObservedStar
    prior : DistancePrior or spec
        Anything :func:`~perierr.priors.resolve_prior` accepts;
        :class:`NoPrior` gives plain Gaussian draws (parallax inversion).
    n : int
        Gaussian draws for reweighting.
    seed : int, numpy.random.Generator or None
        One seed drives every random number; the integer is recorded
        (see :func:`perierr.sampling.gaussian.resolve_seed`).
    method : {"auto", "reweight", "mcmc"}
    min_effective_size : float, optional
        Reweighting below this Kish effective sample size switches to MCMC
        (auto) or warns (reweight). Default ``min(1000, n / 10)``.
    mcmc_effective_size : int
        Effective sample size the MCMC run must reach (capped at ``n``).
    n_walkers, max_steps : int
        Passed to :func:`~perierr.sampling.mcmc.sample_posterior_mcmc`.

    Returns
    -------
    Samples
        ``method`` is ``"gaussian"`` (no prior), ``"reweight"`` or ``"mcmc"``;
        ``info`` is JSON-able and always has ``effective_size``.
    """
    if method not in METHODS:
        raise InputError("prior_method", method, f"expected one of {', '.join(METHODS)}")
    prior = resolve_prior(prior)
    seed = resolve_seed(seed)
    rng = np.random.default_rng(seed)
    plx, sig = float(star.mean[PARALLAX]), float(star.sigma[PARALLAX])
    if isinstance(prior, NoPrior):
        return _inverted_parallax_samples(star, plx, n, seed, rng)
    if sig == 0:
        return _fixed_distance_samples(star, prior, plx, n, seed, rng)
    _warn_prior_dominated(plx, sig, prior)
    threshold = float(min(1000.0, n / 10)) if min_effective_size is None else float(min_effective_size)
    switched = None
    tried = None
    if method == "reweight" or (method == "auto" and plx > 0):
        samples = _reweight_or_none(star, prior, n, seed, rng, method)
        ess = 0.0 if samples is None else samples.info["effective_size"]
        if ess >= threshold:
            return _check_tension(samples, plx, sig, prior)
        if method == "reweight":
            _warn_small_effective_size(ess, threshold, n)
            return _check_tension(samples, plx, sig, prior)
        tried = ess
        switched = f"reweighting effective sample size {ess:.0f} < {threshold:.0f}"
    elif method == "auto":
        switched = "nominal parallax <= 0"
    out = sample_posterior_mcmc(
        star,
        prior,
        n_effective=min(int(mcmc_effective_size), int(n)),
        seed=seed,
        rng=rng,
        n_walkers=n_walkers,
        max_steps=max_steps,
    )
    return _check_tension(_mcmc_samples(out, n, seed, switched, tried), plx, sig, prior)


def _inverted_parallax_samples(star, plx, n, seed, rng) -> Samples:
    """Plain Gaussian draws (no prior: the parallaxes are inverted), after checking the parallax is > 0."""
    require_positive_parallax(plx, method="The 'none' distance prior (parallax inversion)")
    values = draw_gaussian(star.mean, star.cov, int(n), rng)
    return Samples(
        values,
        method="gaussian",
        seed=seed,
        info={"effective_size": float(n), "note": "no prior: parallaxes inverted"},
    )


def _fixed_distance_samples(star, prior, plx, n, seed, rng) -> Samples:
    """Equal-weight draws when the parallax error is 0: the distance is fixed and the prior has no effect."""
    if not plx > 0 or not np.isfinite(prior.log_density(np.array([MAS_PC / plx])))[0]:
        raise InputError(
            "parallax",
            plx,
            "with parallax_error = 0 the distance is fixed at "
            "1000 / parallax, which must be > 0 and inside the prior's support",
        )
    values = draw_gaussian(star.mean, star.cov, int(n), rng)
    return Samples(
        values,
        method="reweight",
        weights=np.full(int(n), 1.0 / int(n)),
        seed=seed,
        info={
            "effective_size": float(n),
            "note": "parallax_error = 0: the distance is fixed and the prior has no effect",
        },
    )


def _warn_prior_dominated(plx, sig, prior) -> None:
    """Warn (at the caller of ``posterior_samples``) when the parallax is <= 0 or below its error."""
    if not plx > 0 or plx < sig:
        what = "<= 0" if not plx > 0 else f"below its error ({plx:.3g} < {sig:.3g} mas)"
        warnings.warn(
            f"the parallax is {what}: the distance, and with it the perihelion, is dominated by "
            f"the {prior.name} prior {prior.parameters}; the result states the prior's "
            "assumption more than the measurement",
            PerierrWarning,
            stacklevel=3,
        )


def _reweight_or_none(star, prior, n, seed, rng, method):
    """Reweighted draws; None under ``method="auto"`` when no draw falls inside the prior's support."""
    try:
        return reweight(star, prior, n=n, seed=seed, rng=rng)
    except InputError:
        if method == "reweight":
            raise
        return None  # no draw inside the prior's support


def _warn_small_effective_size(ess, threshold, n) -> None:
    """Warn (at the caller of ``posterior_samples``) that forced reweighting kept few effective draws."""
    warnings.warn(
        f"reweighting kept an effective sample size of {ess:.0f} (< {threshold:.0f}) out of "
        f"{n} draws: its quantiles are noisy; use prior_method='mcmc' or 'auto'",
        PerierrWarning,
        stacklevel=3,
    )


def _mcmc_samples(out, n, seed, switched, tried) -> Samples:
    """The MCMC draws with the switch reason, the sizes asked and delivered, and a capped effective size."""
    info = dict(out.info)
    if switched is not None:
        info["switched_to_mcmc"] = switched
    if tried is not None:
        info["reweight_effective_size"] = tried
    info["n_requested"] = int(n)
    info["n_delivered"] = int(out.values.shape[0])
    # the thinned chain keeps about one draw per autocorrelation time: never claim more
    # effective draws than were delivered
    info["effective_size"] = float(min(info.get("effective_size", np.inf), out.values.shape[0]))
    return Samples(out.values, method="mcmc", seed=seed, info=info)


#: Distance (in parallax sigmas) between the posterior median parallax and the measured one above
#: which an informative parallax and the prior are said to conflict.
TENSION_SIGMA = 3.0


def _check_tension(samples, plx, sig, prior):
    """Warn when the prior drags an informative parallax far from its measured value."""
    if not (plx > 0 and sig > 0 and plx / sig > 5):
        return samples  # a weak parallax is meant to be prior-dominated (warned above)
    med = float(weighted_quantiles(samples.values[:, PARALLAX], [0.5], samples.weights)[0])
    z = (med - plx) / sig
    samples.info["prior_tension_sigma"] = float(z)
    if abs(z) > TENSION_SIGMA:
        warnings.warn(
            f"prior-data conflict: the posterior median parallax {med:.4g} mas lies {abs(z):.1f} sigma from the "
            f"measured {plx:.4g} +/- {sig:.2g} mas; the {prior.name} prior {prior.parameters} excludes the "
            "distance the parallax implies, so the result reflects the prior, not the measurement; "
            "check the prior's parameters",
            PerierrWarning,
            stacklevel=3,
        )
    return samples
