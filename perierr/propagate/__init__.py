"""Propagation of the input uncertainty to perihelion: linearized and Monte Carlo."""

from .linear import LinearResult, linearize
from .montecarlo import DEFAULT_THRESHOLDS, MonteCarloResult, monte_carlo, propagate_samples

__all__ = [
    "DEFAULT_THRESHOLDS",
    "LinearResult",
    "MonteCarloResult",
    "linearize",
    "monte_carlo",
    "propagate_samples",
]
