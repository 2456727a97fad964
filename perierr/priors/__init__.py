"""Distance priors for weak and negative parallaxes.

A prior on the distance r = 1000 / parallax (:mod:`.densities`), a text syntax
for it (:mod:`.parse`) and the record an analysis keeps of it (:mod:`.info`).
The samplers of the posterior of the six observables live beside the Gaussian
draws in :mod:`perierr.sampling` (importance reweighting, MCMC with emcee, and
:func:`~perierr.sampling.posterior.posterior_samples`, which chooses); their
public names are also reachable here. Parallax zero-point and error inflation
are an input transform, :mod:`perierr.calibration`.

The names below are loaded on first use (PEP 562), so that a run without a
prior does not pay for the samplers at start-up.
"""

from .._lazy import lazy_names
from ..sampling.reweight import log_weights, reweight  # light: numpy only

#: Public name -> the submodule that defines it.
_WHERE = {
    "ChainTooShortError": "..sampling.mcmc",
    "CustomPrior": ".densities",
    "DistancePrior": ".densities",
    "ExponentialDensity": ".densities",
    "GeneralizedGamma": ".densities",
    "METHODS": "..sampling.posterior",
    "NoPrior": ".densities",
    "PRIOR_SYNTAX": ".parse",
    "TablePrior": ".densities",
    "UniformDensity": ".densities",
    "log_distance_posterior": ".densities",
    "parse_prior": ".parse",
    "posterior_mode": ".densities",
    "posterior_samples": "..sampling.posterior",
    "resolve_prior": ".parse",
    "sample_posterior_mcmc": "..sampling.mcmc",
}

__all__ = [
    "ChainTooShortError",
    "CustomPrior",
    "DistancePrior",
    "ExponentialDensity",
    "GeneralizedGamma",
    "METHODS",
    "NoPrior",
    "PRIOR_SYNTAX",
    "TablePrior",
    "UniformDensity",
    "log_distance_posterior",
    "log_weights",
    "parse_prior",
    "posterior_mode",
    "posterior_samples",
    "resolve_prior",
    "reweight",
    "sample_posterior_mcmc",
]

__getattr__, __dir__ = lazy_names(__name__, globals(), _WHERE)
