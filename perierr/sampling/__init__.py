"""Ways to draw samples of the six observables: Gaussian draws (and, later, priors)."""

from .gaussian import Samples, draw_gaussian, psd_factor

__all__ = ["Samples", "draw_gaussian", "psd_factor"]
