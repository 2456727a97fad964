"""Ways to draw samples of the six observables.

Gaussian draws from the catalogue covariance (:mod:`.gaussian`), and the
posterior under a distance prior (the densities live in :mod:`perierr.priors`):
importance reweighting of Gaussian draws (:mod:`.reweight`), MCMC with emcee
(:mod:`.mcmc`), and :func:`~.posterior.posterior_samples`, which chooses. The
samplers are imported on first use: a run without a prior does not load them.
"""

from .gaussian import Samples, draw_gaussian, psd_factor

__all__ = ["Samples", "draw_gaussian", "psd_factor"]
