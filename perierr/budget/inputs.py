"""The inputs of a star's linear budget: the six observables, the parallax zero-point, model nuisances."""

from __future__ import annotations

import numpy as np

from ..units import OBSERVABLES
from .linear import LinearBudget, extend_inputs, linear_budget

__all__ = ["budget_inputs", "star_budget"]


def budget_inputs(star, linear, *, calibration=None) -> tuple:
    """Jacobian, covariance and names of every input of a star's linear budget.

    Parameters
    ----------
    star : ObservedStar
        The star as analysed (after any calibration).
    linear : LinearResult
        Its linearization (Jacobian and the model's nuisance parameters).
    calibration : Calibration, optional
        With an uncertain parallax zero-point, the zero-point is an input of its own.

    Returns
    -------
    jacobian : ndarray, shape (3, k)
    cov : ndarray, shape (k, k)
    inputs : tuple of str
        The six observables, then ``parallax_zero_point`` (if its error is > 0),
        then the model's nuisance parameters (e.g. ``mass`` under focusing).
    """
    jac, cov, inputs = np.asarray(linear.jacobian, dtype=float), np.asarray(star.cov, dtype=float), OBSERVABLES
    if calibration is not None and calibration.zero_point_error > 0:
        jac, cov, inputs = calibration.budget_inputs(jac, star)
    for p in linear.nuisance:
        jac, cov = extend_inputs(jac, cov, p.gradient, [p.variance])
        inputs = inputs + (p.name,)
    return jac, cov, inputs


def star_budget(star, linear, *, calibration=None) -> LinearBudget:
    """Linear budget of a star over all its inputs (see :func:`budget_inputs`)."""
    jac, cov, inputs = budget_inputs(star, linear, calibration=calibration)
    return linear_budget(jac, cov, inputs=inputs)
