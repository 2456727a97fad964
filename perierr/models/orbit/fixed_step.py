"""Fixed-step Runge-Kutta integration onto a time grid, with an embedded error estimate.

The reference orbits of the state-transition map (and the samples that check
it) only need to be known on the tabulation grid, whose step is already small
on the orbit's scales (at most ``grid_travel_pc`` of travel and
``grid_step_myr``; see :class:`~perierr.models.orbit.model.OrbitModel`).
The classical fourth-order Runge-Kutta method with one step per grid interval
then costs four derivative evaluations per interval, against about twelve per
DOP853 step; its first stage at each node is the derivative the Hermite
tables need, so those come for free.

The error is estimated with the embedded third-order solution that uses the
derivative at the end of the step (first same as last),
``y3 = y_n + h/6 (k1 + 2 k2 + 2 k3 + f(y_{n+1}))``, so that
``y4 - y3 = h/6 (k4 - f(y_{n+1}))``. This estimates the error of the
third-order solution, a bound of the fourth-order one's for these smooth
orbits; the caller sums it over the steps and halves the steps when it is too
large.

References
----------
Hairer, E., Norsett, S. P. & Wanner, G. 1993, Solving Ordinary Differential
Equations I, 2nd ed., Sect. II.1 (classical Runge-Kutta method) and II.4
(embedded formulas, first same as last).
"""

from __future__ import annotations

import numpy as np

__all__ = ["rk4_on_nodes"]


def rk4_on_nodes(fun, y0, nodes, *, substeps=1):
    """Integrate ``y' = fun(y)`` from t = 0 to every grid node, both directions.

    Parameters
    ----------
    fun : callable
        ``fun(y) -> dy/dt`` for a flat state ``y`` of shape (p,) (autonomous).
    y0 : ndarray, shape (p,)
        State at t = 0.
    nodes : ndarray, shape (m,)
        Increasing grid times containing 0 exactly.
    substeps : int
        Equal Runge-Kutta steps per grid interval.

    Returns
    -------
    states, derivs : ndarray, shape (m, p)
        The state and ``fun(state)`` at every node.
    error : ndarray, shape (p,)
        Sum over all steps of ``|h/6 (k4 - f(y_{n+1}))|`` per component, a
        conservative estimate of the global error.
    """
    m = len(nodes)
    states = np.empty((m, y0.size))
    derivs = np.empty((m, y0.size))
    error = np.zeros(y0.size)
    zero = int(np.flatnonzero(nodes == 0.0)[0])
    f0 = fun(y0)
    states[zero], derivs[zero] = y0, f0
    for sel in (range(zero + 1, m), range(zero - 1, -1, -1)):
        y, k1, t = y0, f0, 0.0
        for i in sel:  # loop over the grid intervals, vectorized over the state
            h = (nodes[i] - t) / substeps
            for _ in range(substeps):
                half = 0.5 * h
                k2 = fun(y + half * k1)
                k3 = fun(y + half * k2)
                k4 = fun(y + h * k3)
                y = y + (h / 6.0) * (k1 + 2.0 * (k2 + k3) + k4)
                k5 = fun(y)
                error += np.abs((h / 6.0) * (k4 - k5))
                k1 = k5
            t = nodes[i]
            states[i], derivs[i] = y, k1
    return states, derivs, error
