"""Distance priors for weak and negative parallaxes.

A prior on the distance r = 1000 / parallax (:mod:`.densities`), a text syntax
for it (:mod:`.parse`), and two ways to sample the posterior of the six
observables: importance reweighting of Gaussian draws (:mod:`.reweight`) and
MCMC with emcee (:mod:`.mcmc`); :func:`posterior_samples` chooses.
Parallax zero-point and error inflation live in :mod:`.calibration`.
"""

from .densities import (
    CustomPrior,
    DistancePrior,
    ExponentialDensity,
    GeneralizedGamma,
    NoPrior,
    TablePrior,
    UniformDensity,
    log_distance_posterior,
    posterior_mode,
)
from .mcmc import ChainTooShortError, sample_posterior_mcmc
from .parse import PRIOR_SYNTAX, parse_prior, resolve_prior
from .posterior import METHODS, posterior_samples
from .reweight import log_weights, reweight

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
