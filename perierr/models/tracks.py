"""The star's distance from the Sun over time, for many draws at once: separation tracks.

A forward model answers with the closest approach only; a figure of the encounter needs the whole path,
``|s(t)|`` with ``s`` the star's position relative to the Sun, at chosen times around it.

* Straight line (:class:`~perierr.models.straight.StraightLine`): ``s(t) = x + v t`` with the heliocentric
  position ``x`` [pc] and velocity ``v`` [km/s] of :func:`perierr.frames.observables_to_cartesian`. It is
  written about the closest point, ``s(t) = c + v (t - t_ph)`` with ``c = x + v t_ph`` perpendicular to ``v``,
  so that the separation is exact to rounding even for a nearly head-on pass (no cancellation of ``|x|^2``).
* Galactic orbit (:class:`~perierr.models.orbit.OrbitModel`): the model's own potential, solar parameters,
  ICRS -> Galactocentric rotation and DOP853 tolerances; every row is integrated relative to the Sun by
  :func:`perierr.models.orbit.integrate.integrate_relative` (all rows as one system, no loop per row).
  Rows beyond the potential (``MAX_DISTANCE_PC``, ``MAX_SPEED_KMS`` of the orbit model) follow straight
  lines, as the model treats them.

Times are in Myr from the epoch of the observables (negative: the past).
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..frames import observables_to_cartesian
from ..units import MYR_PER_PC_PER_KMS, PARALLAX
from .straight import StraightLine

__all__ = ["separation_tracks"]


def separation_tracks(model, observables, times_myr) -> np.ndarray:
    """Distance of the star from the Sun [pc] at given times, for every row of observables.

    Parameters
    ----------
    model : ForwardModel
        :class:`~perierr.models.straight.StraightLine` or :class:`~perierr.models.orbit.OrbitModel`. A model
        wrapped for gravitational focusing (:class:`~perierr.models.focusing.Focused`) is followed through to
        the model it wraps: focusing bends only the hyperbolic part of the path near perihelion (it changes
        ``d_ph`` and ``v_ph``, not the path over the times a figure shows), so the tracks are those of the
        unfocused model.
    observables : array_like, shape (n, 6) or (6,)
        Rows of observables in internal units (deg, mas, mas/yr, km/s); every parallax > 0.
    times_myr : array_like, shape (m,)
        Times [Myr] from the epoch of the observables, in any order (t = 0 need not be among them).

    Returns
    -------
    ndarray, shape (n, m)
        Separation [pc] of row i at time j.

    Raises
    ------
    InputError
        For observables of the wrong shape, non-finite numbers or a parallax <= 0, non-finite times, or a
        model other than these two.

    Examples
    --------
    A star 100 pc away coming straight at the Sun at 10 km/s is 100 pc away now, half as far 4.889 Myr
    later (50 pc at 10 km/s) and 150 pc away as long before:

    >>> import numpy as np
    >>> from perierr.models import StraightLine
    >>> row = np.array([[0.0, 0.0, 10.0, 0.0, 0.0, -10.0]])
    >>> np.round(separation_tracks(StraightLine(), row, [0.0, 4.889, -4.889]), 2)
    array([[100.,  50., 150.]])
    """
    obs = _rows(observables)
    times = np.asarray(times_myr, dtype=float).reshape(-1)
    if not np.all(np.isfinite(times)):
        raise InputError("times_myr", float(times[~np.isfinite(times)][0]), "expected finite times in Myr")
    base = _unwrapped(model)
    if isinstance(base, StraightLine):
        return _straight_tracks(observables_to_cartesian(obs), times)
    from .orbit import OrbitModel

    if isinstance(base, OrbitModel):
        return _orbit_tracks(base, obs, times)
    raise InputError(
        "model", getattr(model, "name", type(model).__name__),
        "a straight-line or orbit model (perierr.models.make_model), possibly with focusing",
    )  # fmt: skip


def _unwrapped(model):
    """The model under any focusing wrappers."""
    import sys

    focusing = sys.modules.get("perierr.models.focusing")  # a Focused model exists only once it is imported
    while focusing is not None and isinstance(model, focusing.Focused):
        model = model.base
    return model


def _rows(observables) -> np.ndarray:
    """Observables as a finite (n, 6) array with parallaxes > 0, or an InputError naming what is wrong."""
    obs = np.asarray(observables, dtype=float)
    if obs.ndim == 1:
        obs = obs[None, :]
    if obs.ndim != 2 or obs.shape[1] != 6:
        raise InputError("observables", f"shape {obs.shape}", "expected shape (n, 6) or (6,)")
    if not np.all(np.isfinite(obs)):
        raise InputError("observables", float(obs[~np.isfinite(obs)][0]), "expected finite numbers")
    if np.any(obs[:, PARALLAX] <= 0):
        bad = float(obs[obs[:, PARALLAX] <= 0, PARALLAX][0])
        raise InputError("parallax", bad, "expected a positive parallax in mas (a track needs a distance)")
    return obs


def _straight_tracks(xv, times) -> np.ndarray:
    """``|x + v t|`` (n, m) about the closest point: ``|c + v tau|`` with ``tau = t - t_ph`` and ``c . v ~ 0``."""
    x, v = xv[:, :3], xv[:, 3:]
    vv = np.einsum("ij,ij->i", v, v)
    t_ph = -np.einsum("ij,ij->i", x, v) / np.where(vv > 0, vv, 1.0)  # pc/(km/s); 0 for a star at rest
    c = x + v * t_ph[:, None]
    cc = np.einsum("ij,ij->i", c, c)[:, None]
    cv = np.einsum("ij,ij->i", c, v)[:, None]  # rounding noise of c . v = 0, kept for exactness
    tau = times[None, :] / MYR_PER_PC_PER_KMS - t_ph[:, None]
    return np.sqrt(np.maximum(cc + tau * (2.0 * cv + tau * vv[:, None]), 0.0))


def _orbit_tracks(model, obs, times) -> np.ndarray:
    """Sun-relative orbits of every row in the model's potential, integrated together (DOP853)."""
    from .orbit.grid import rownorm
    from .orbit.integrate import integrate_relative
    from .orbit.model import MAX_DISTANCE_PC, MAX_SPEED_KMS

    xv = observables_to_cartesian(obs)
    out = np.empty((obs.shape[0], times.size))
    if times.size == 0:
        return out
    far = (rownorm(xv[:, :3]) > MAX_DISTANCE_PC) | (rownorm(xv[:, 3:]) > MAX_SPEED_KMS)
    if far.any():  # beyond the potential's validity: straight lines, as the orbit model answers there
        out[far] = _straight_tracks(xv[far], times)
    if (~far).any():
        rotation, sun_state = model.sun.frame()
        rel = (xv[~far].reshape(-1, 3) @ rotation.T).reshape(-1, 6)
        # the integrator tabulates at increasing nodes containing t = 0 exactly [pc/(km/s)]
        nodes, where = np.unique(np.append(times / MYR_PER_PC_PER_KMS, 0.0), return_inverse=True)
        states, _, _ = integrate_relative(model.potential, sun_state, rel, nodes, rtol=model.rtol, atol=model.atol)
        out[~far] = rownorm(states[..., :3].reshape(-1, 3)).reshape(len(nodes), -1).T[:, where[:-1]]
    return out
