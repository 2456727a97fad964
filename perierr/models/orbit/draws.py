"""Many Sun-relative orbits at once: fixed-step RK4 on the grid, each draw only as far as it needs.

The Sun's orbit is the same for every draw, so it is integrated once (DOP853,
tight tolerances, dense output) and tabulated at the grid nodes and the
midpoints of the grid intervals, the times at which the classical Runge-Kutta
method evaluates the forces. A draw's relative state ``y = (s, w)`` then obeys

    ds/dt = w,   dw/dt = a(x_sun(t) + s) - a(x_sun(t)),

one acceleration of the potential per draw and stage. Each draw is integrated
from now to its own last node in each direction (the draws still running
form a prefix of the draws sorted by how far they go, so nothing is computed
past a draw's end). One RK4 step per grid interval: the grid step is already
at most ``grid_travel_pc`` of travel and ``grid_step_myr``, on which the
relative orbit is smooth; the tests measure the error against DOP853.

Times are in pc/(km/s), positions in pc and velocities in km/s.

References
----------
Hairer, E., Norsett, S. P. & Wanner, G. 1993, Solving Ordinary Differential
Equations I, 2nd ed., Sect. II.1 (the classical Runge-Kutta method) and
II.5 (DOP853).
"""

from __future__ import annotations

import numpy as np
from scipy.integrate import solve_ivp

__all__ = ["SunOrbit", "SunTrack", "integrate_draws"]


class SunOrbit:
    """The Sun's orbit over a time range, from one DOP853 integration with dense output.

    Parameters
    ----------
    potential : Potential
    sun_state : ndarray, shape (6,)
        The Sun's Galactocentric state at t = 0 [pc, km/s].
    t_min, t_max : float
        Time range [pc/(km/s)], t_min <= 0 <= t_max.
    """

    def __init__(self, potential, sun_state, t_min, t_max):
        self.potential = potential
        y0 = np.asarray(sun_state, dtype=float)

        def fun(_t, y):
            return np.concatenate([y[3:], potential.acceleration(y[:3])])

        self._parts = []
        for end in (t_min, t_max):  # the two directions from now
            if end != 0.0:
                sol = solve_ivp(fun, (0.0, end), y0, method="DOP853", rtol=1e-13, atol=1e-13, dense_output=True)
                if not sol.success:
                    raise RuntimeError(f"orbit integration of the Sun failed: {sol.message}")
                self._parts.append((min(0.0, end), max(0.0, end), sol.sol))
        self._y0 = y0

    def position(self, times) -> np.ndarray:
        """Positions (len(times), 3) [pc] at times inside the range."""
        times = np.asarray(times, dtype=float)
        out = np.empty((times.size, 3))
        out[times == 0.0] = self._y0[:3]
        for lo, hi, sol in self._parts:
            sel = (times >= lo) & (times <= hi) & (times != 0.0)
            if sel.any():
                out[sel] = sol(times[sel]).T[:, :3]
        return out

    def track(self, nodes, substeps: int = 1) -> SunTrack:
        """The :class:`SunTrack` of a grid inside the range."""
        return SunTrack(self, nodes, substeps)


class SunTrack:
    """The Sun's Galactocentric position and acceleration at every time RK4 evaluates on a grid.

    Parameters
    ----------
    orbit : SunOrbit
    nodes : ndarray, shape (m,)
        Increasing grid times containing 0 exactly [pc/(km/s)].
    substeps : int
        Equal RK4 steps per grid interval.

    Attributes
    ----------
    nodes : ndarray, shape (m,)
    substeps : int
    position, acceleration : ndarray, shape (2 s (m - 1) + 1, 3)
        At the ends and midpoints of every RK4 step, in time order: entry ``2 s k`` is node ``k``, and
        sub-step ``j`` of interval ``k`` starts at entry ``2 s k + 2 j``, with its midpoint one entry on.
    """

    def __init__(self, orbit, nodes, substeps: int = 1):
        nodes = np.asarray(nodes, dtype=float)
        s = int(substeps)
        frac = np.arange(2 * s) / (2 * s)
        times = np.append((nodes[:-1, None] + np.diff(nodes)[:, None] * frac).ravel(), nodes[-1])
        self.nodes, self.substeps = nodes, s
        self.position = orbit.position(times)
        self.potential = orbit.potential
        self.acceleration = self.potential.acceleration(self.position)
        self.zero = int(np.flatnonzero(nodes == 0.0)[0])

    def relative_acceleration(self, stage: int, s) -> np.ndarray:
        """``a(x_sun + s) - a(x_sun)`` at stage time ``stage`` for relative positions ``s`` (n, 3)."""
        return self.potential.acceleration(self.position[stage] + s) - self.acceleration[stage]


def integrate_draws(track: SunTrack, rel, last_lo=None, last_hi=None):
    """Relative states and their time derivatives of many draws at the grid nodes.

    Parameters
    ----------
    track : SunTrack
    rel : ndarray, shape (n, 6)
        Relative states at t = 0 [pc, km/s].
    last_lo, last_hi : ndarray of int, shape (n,), optional
        First and last node index each draw needs (default: the whole grid); a draw is integrated from
        node ``track.zero`` to these only.

    Returns
    -------
    states, derivs : ndarray, shape (m, n, 6)
        At the nodes ``last_lo[i]..last_hi[i]`` of each draw (other entries are left undefined).
    """
    rel = np.asarray(rel, dtype=float)
    n, m, zero, sub = rel.shape[0], len(track.nodes), track.zero, track.substeps
    lo = np.zeros(n, dtype=np.int64) if last_lo is None else np.minimum(np.asarray(last_lo), zero)
    hi = np.full(n, m - 1, dtype=np.int64) if last_hi is None else np.maximum(np.asarray(last_hi), zero)
    states = np.empty((m, n, 6))
    derivs = np.empty((m, n, 6))
    d0 = _rhs(track, 2 * sub * zero, rel)
    states[zero], derivs[zero] = rel, d0
    for direction, reach in ((1, hi - zero), (-1, zero - lo)):
        order = np.argsort(-reach, kind="stable")  # the draws going farthest first
        reach_sorted = reach[order]
        y, k1 = rel[order], d0[order]
        k = zero
        for step in range(1, int(reach_sorted[0]) + 1 if n else 1):  # loop over grid intervals, vectorized over draws
            count = int(np.searchsorted(-reach_sorted, -step, side="right"))  # draws still running
            y, k1 = y[:count], k1[:count]
            k_next = k + direction
            h = (track.nodes[k_next] - track.nodes[k]) / sub
            base = 2 * sub * k
            for j in range(sub):  # the sub-steps of the interval
                start = base + direction * 2 * j
                mid, end = start + direction, start + 2 * direction
                half = 0.5 * h
                k2 = _rhs(track, mid, y + half * k1)
                k3 = _rhs(track, mid, y + half * k2)
                k4 = _rhs(track, end, y + h * k3)
                y = y + (h / 6.0) * (k1 + 2.0 * (k2 + k3) + k4)
                k1 = _rhs(track, end, y)
            rows = order[:count]
            states[k_next, rows], derivs[k_next, rows] = y, k1
            k = k_next
    return states, derivs


def _rhs(track, stage, y):
    """Time derivative of relative states ``y`` (n, 6) at stage time ``stage``."""
    out = np.empty_like(y)
    out[:, :3] = y[:, 3:]
    out[:, 3:] = track.relative_acceleration(stage, y[:, :3])
    return out
