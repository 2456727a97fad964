"""Distance priors for weak and negative parallaxes.

A prior on the distance r = 1000 / parallax (:mod:`.densities`), a text syntax
for it (:mod:`.parse`), and two ways to sample the posterior of the six
observables: importance reweighting of Gaussian draws (:mod:`.reweight`) and
MCMC with emcee (:mod:`.mcmc`); :func:`posterior_samples` chooses.
Parallax zero-point and error inflation live in :mod:`.calibration`.

The names below are loaded on first use (PEP 562), so that a run without a
prior does not pay for the samplers at start-up.
"""

import importlib

# imported now (it is light): the function ``reweight`` shares its name with its module, and a later first
# import of the module would otherwise rebind ``perierr.priors.reweight`` to the module
from .reweight import log_weights, reweight

#: Public name -> the submodule that defines it.
_WHERE = {
    "ChainTooShortError": "mcmc",
    "CustomPrior": "densities",
    "DistancePrior": "densities",
    "ExponentialDensity": "densities",
    "GeneralizedGamma": "densities",
    "METHODS": "posterior",
    "NoPrior": "densities",
    "PRIOR_SYNTAX": "parse",
    "TablePrior": "densities",
    "UniformDensity": "densities",
    "log_distance_posterior": "densities",
    "parse_prior": "parse",
    "posterior_mode": "densities",
    "posterior_samples": "posterior",
    "resolve_prior": "parse",
    "sample_posterior_mcmc": "mcmc",
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


def __getattr__(name):
    if name not in _WHERE:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(f"{__name__}.{_WHERE[name]}"), name)
    globals()[name] = value  # found once, then an ordinary attribute
    return value


def __dir__():
    return sorted(set(globals()) | set(_WHERE))
