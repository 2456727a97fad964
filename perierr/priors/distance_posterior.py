"""The 1-D posterior of distance given one Gaussian parallax and a distance prior.

Its log density (for starting MCMC walkers and for checks) and its mode.

References
----------
Bailer-Jones, C. A. L. 2015, PASP 127, 994 (the distance posterior, eq. 2, and its mode).
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError
from ..units import MAS_PC

__all__ = ["log_distance_posterior", "posterior_mode"]


def log_distance_posterior(r, parallax, parallax_error, prior) -> np.ndarray:
    """Unnormalized log posterior of distance given one Gaussian parallax.

    ``ln P(r | w) = -(w - 1000 / r)^2 / (2 s^2) + ln P(r)`` (Bailer-Jones 2015,
    PASP 127, 994, eq. 2 times the prior).

    Parameters
    ----------
    r : array_like
        Distances [pc].
    parallax, parallax_error : float
        w and s [mas].
    prior : DistancePrior

    Raises
    ------
    InputError
        For a parallax or error that is not finite, or an error that is not positive (the
        likelihood is then no density of r).
    """
    if not (math.isfinite(parallax) and math.isfinite(parallax_error) and parallax_error > 0):
        field, value = ("parallax", parallax) if not math.isfinite(parallax) else ("parallax_error", parallax_error)
        raise InputError(field, value, "expected a finite parallax and a positive, finite parallax_error in mas")
    r = np.asarray(r, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        chi = (parallax - MAS_PC / r) / parallax_error
    return np.where(r > 0, -0.5 * chi * chi + prior.log_density(r), -np.inf)


def posterior_mode(prior, parallax, parallax_error, *, r_min=1e-3, r_max=1e8) -> float:
    """Mode of the 1-D distance posterior [pc], found numerically.

    A log-spaced grid locates the highest point, then a bounded scalar
    minimization refines it (scipy.optimize.minimize_scalar).
    """
    from scipy.optimize import minimize_scalar

    lo, hi = prior.support
    lo, hi = max(lo, r_min), min(hi, r_max)
    grid = np.geomspace(lo, hi, 20001)
    lp = log_distance_posterior(grid, parallax, parallax_error, prior)
    k = int(np.argmax(lp))
    a, b = grid[max(k - 1, 0)], grid[min(k + 1, grid.size - 1)]
    if b <= a:
        return float(grid[k])
    res = minimize_scalar(
        lambda x: -float(log_distance_posterior(np.exp(x), parallax, parallax_error, prior)),
        bounds=(math.log(a), math.log(b)),
        method="bounded",
        options={"xatol": 1e-12},
    )
    return float(math.exp(res.x))
