"""Where the orbit model evaluates: the search window and its tabulation grid.

Times are in pc/(km/s) unless the name says Myr (see
:data:`perierr.units.MYR_PER_PC_PER_KMS`); positions in pc.
"""

from __future__ import annotations

import math

import numpy as np

from ...units import MYR_PER_PC_PER_KMS as _C

__all__ = ["rownorm", "window_and_nodes", "MAX_NODES_PER_SIDE"]

#: Most grid intervals on each side of now.
MAX_NODES_PER_SIDE = 2000


def rownorm(a):
    """Euclidean norm of each row of a 2-d array (faster than numpy.linalg.norm)."""
    return np.sqrt(np.einsum("ij,ij->i", a, a))


def window_and_nodes(window, speed, *, grid_step_myr, grid_travel_pc):
    """The search window [Myr] and its grid nodes for the largest relative speed.

    Parameters
    ----------
    window : (float, float)
        The window (t_min, t_max) [Myr], t_min <= 0 <= t_max.
    speed : float
        Largest relative speed [km/s].
    grid_step_myr, grid_travel_pc : float
        See :class:`~perierr.models.orbit.model.OrbitModel`.

    Returns
    -------
    (lo, hi) : tuple of float
        The window [Myr].
    nodes : ndarray, shape (m,)
        Increasing grid times containing 0 [pc/(km/s)], equally spaced on each side of now, the step at
        most ``grid_step_myr`` and ``grid_travel_pc / speed``, but at most ``MAX_NODES_PER_SIDE`` intervals
        on each side (for extremely fast stars, whose paths are nearly straight: the RK4 sub-steps still
        follow the error estimate).
    """
    lo, hi = window
    step = min(grid_step_myr, grid_travel_pc / max(float(speed), 1e-3) * _C)
    parts = [np.zeros(1)]
    if lo < 0:
        n = min(math.ceil(-lo / step), MAX_NODES_PER_SIDE)
        parts.insert(0, np.linspace(lo, 0.0, n + 1)[:-1])
    if hi > 0:
        n = min(math.ceil(hi / step), MAX_NODES_PER_SIDE)
        parts.append(np.linspace(0.0, hi, n + 1)[1:])
    return (lo, hi), np.concatenate(parts) / _C
