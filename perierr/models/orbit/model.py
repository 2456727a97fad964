"""The orbit model: perihelion of a star integrated with the Sun in a Galactic potential.

Many rows (the draws of a Monte Carlo run) go through polynomial maps fitted
on leaves of the draw cloud, checked on random draws against direct
integration, with direct integration wherever the check does not trust the map
(:mod:`perierr.models.orbit.mapping`); few rows, and ``method="direct"``, are
integrated directly with DOP853 (:mod:`perierr.models.orbit.integrate`). The
Jacobian comes from the variational equations of the nominal orbit
(:mod:`perierr.models.orbit.transition`).
"""

from __future__ import annotations

import copy
import math
from dataclasses import replace

import numpy as np

from ...errors import InputError
from ...frames import cartesian_jacobian, observables_to_cartesian
from ...units import MYR_PER_PC_PER_KMS as _C
from ...units import PARALLAX
from ..base import ForwardModel, Perihelion
from ..diagnostics import ModelDiagnostics
from .grid import rownorm, window_and_nodes
from .integrate import (
    global_perihelion,
    grid_minimum_start,
    hermite,
    integrate_relative,
    newton_perihelion,
    valley_starts,
)
from .mapping import map_perihelia, smallest_leaf
from .potentials import Potential
from .presets import PotentialPreset, get_potential
from .sun import SolarParameters, get_solar_parameters
from .transition import features, variational_tables

__all__ = ["OrbitModel", "OrbitOptionError", "ORBIT_OPTIONS"]

#: Keyword options of :class:`OrbitModel` (and ``make_model("orbit", ...)``).
ORBIT_OPTIONS = (
    "potential", "sun", "horizon_myr", "max_horizon_myr", "grid_step_myr", "grid_travel_pc",
    "method",
    "leaf_radius_pc", "min_leaf_samples", "map_order", "map_tolerance_au", "n_check", "rtol", "atol", "chunk_size",
)  # fmt: skip
_METHODS = ("auto", "map", "direct")


#: Rows farther than this from the Sun [pc] lie beyond the Galactic potential's validity (the halo of
#: MWPotential2014 is fitted within a few tens of kpc, Bovy 2015): they get the straight-line answer, flagged.
MAX_DISTANCE_PC = 1e5

#: Rows moving faster than this relative to the Sun [km/s] are unbound from the Galaxy many times over
#: (escape speed about 550 km/s near the Sun): their paths are straight lines, flagged, and they do not
#: shrink the integration grid of the others.
MAX_SPEED_KMS = 1e4


class OrbitOptionError(InputError):
    """An option of the orbit model has an invalid value (an :class:`~perierr.errors.InputError`)."""


def _bad(option, value, expected):
    return OrbitOptionError(option, value, f"expected {expected} (an option of the orbit model)")


def _positive(option, value):
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise _bad(option, value, "a positive number") from None
    if not math.isfinite(v) or v <= 0:
        raise _bad(option, value, "a positive number")
    return v


def replace_method(model, method="direct"):
    """A copy of ``model`` with another ``method``."""
    other = copy.copy(model)
    other.method = method
    return other


class OrbitModel(ForwardModel):
    """Perihelion from orbits of the Sun and the star in a Milky Way potential.

    Parameters
    ----------
    potential : str or Potential, default "MWPotential2014"
        Preset name (see :data:`~perierr.models.orbit.presets.POTENTIAL_PRESETS`)
        or any :class:`~perierr.models.orbit.potentials.Potential`.
    sun : str or SolarParameters, default "bovy2015"
        Solar parameter set name ("bovy2015", "astropy_v4") or an object.
    horizon_myr : None, float or (float, float), default None
        Search window [Myr]: the perihelion is the global minimum of the
        separation inside it. None: (-``max_horizon_myr``, ``max_horizon_myr``);
        a number h: (-h, h); a pair: (t_min, t_max) with t_min <= 0 <= t_max.
        Perihelia outside (the separation still falls at the window edge) are
        flagged and given the straight-line extrapolation from the edge.
    max_horizon_myr : float, default 100
        Half-width of the default window [Myr]. Over such times the Galactic
        tide can bring a slow star back closer than its first approach.
    grid_step_myr : float, default 1.0
        Largest step of the tabulation grid [Myr]; the perihelion is refined
        far below it on quintic Hermite interpolants of the tabulated
        positions, velocities and accelerations.
    grid_travel_pc : float, default 20
        The grid step is also at most this distance divided by the largest
        relative speed of the rows (the interpolation error grows as the sixth
        power of the distance travelled per step).
    method : {"auto", "map", "direct"}, default "auto"
        "auto": polynomial maps fitted on leaves of the draw cloud, checked on
        random draws against direct integration, with automatic fallback to
        direct integration (fixed-step RK4) where the check does not trust the
        map (:mod:`~perierr.models.orbit.mapping`); rows fewer than
        ``min_leaf_samples`` are integrated directly like "direct"; "map": the
        same, checked but never replaced; "direct": every row with scipy's
        adaptive DOP853 at ``rtol``/``atol`` (the reference; slow for many rows).
    leaf_radius_pc : float, default 50
        Largest radius of a leaf of the draw cloud [pc] in the scaled offsets
        (position offset, and velocity offset times the straight-line time
        plus 1 pc/(km/s)) before the check; leaves the check does not trust
        are halved again (up to three rounds).
    min_leaf_samples : int, default 200
        Fewest draws of a leaf (at least twice its training and check draws);
        sparser parts of the cloud are integrated directly.
    map_order : {2, 3, 4}, default 4
        Highest degree of a leaf's polynomial map (the lowest degree the check
        trusts is used).
    map_tolerance_au : float, default 0.5
        Largest allowed map error in d_ph [au] predicted from the check.
    n_check : int, default 8
        Random check draws per leaf (plus its two farthest from the centre),
        integrated directly and compared with the map.
    rtol, atol : float, default 1e-10, 1e-10
        DOP853 tolerances of ``method="direct"`` and of the Jacobian's
        reference orbit (state in pc and km/s). The RK4 integrations of the
        map halve their steps until Richardson's estimate of their error is
        at most a tenth of ``map_tolerance_au``.
    chunk_size : int, default 20000
        Samples per direct-integration call (bounds memory; smaller for long
        windows so that the tabulated states stay below ~250 MB).
    """

    name = "orbit"

    def __init__(
        self, *, potential="MWPotential2014", sun="bovy2015", horizon_myr=None,
        max_horizon_myr=100.0, grid_step_myr=1.0, grid_travel_pc=20.0, method="auto",
        leaf_radius_pc=50.0, min_leaf_samples=200, map_order=4,
        map_tolerance_au=0.5, n_check=8, rtol=1e-10, atol=1e-10, chunk_size=20000,
    ):  # fmt: skip
        if isinstance(potential, str):
            self._preset = get_potential(potential)
            self.potential = self._preset.potential
        elif isinstance(potential, PotentialPreset):
            self._preset, self.potential = potential, potential.potential
        elif isinstance(potential, Potential):
            self._preset, self.potential = None, potential
        else:
            raise _bad("potential", potential, "a preset name or a Potential object")
        if isinstance(sun, str):
            self.sun = get_solar_parameters(sun)
        elif isinstance(sun, SolarParameters):
            self.sun = sun
        else:
            raise _bad("sun", sun, "a solar parameter set name or a SolarParameters object")
        self._rotation, self._sun_state = self.sun.frame()
        if horizon_myr is not None:
            if np.ndim(horizon_myr) == 0:
                h = _positive("horizon_myr", horizon_myr)
                horizon_myr = (-h, h)
            else:
                lo_hi = tuple(float(v) for v in horizon_myr)
                if len(lo_hi) != 2 or not (lo_hi[0] <= 0.0 <= lo_hi[1] and lo_hi[0] < lo_hi[1]):
                    raise _bad("horizon_myr", horizon_myr, "(t_min, t_max) with t_min <= 0 <= t_max")
                horizon_myr = lo_hi
        self.horizon_myr = horizon_myr
        self.max_horizon_myr = _positive("max_horizon_myr", max_horizon_myr)
        self.grid_step_myr = _positive("grid_step_myr", grid_step_myr)
        self.grid_travel_pc = _positive("grid_travel_pc", grid_travel_pc)
        if method not in _METHODS:
            raise _bad("method", method, f"one of {', '.join(_METHODS)}")
        self.method = method
        self.leaf_radius_pc = _positive("leaf_radius_pc", leaf_radius_pc)
        if not isinstance(min_leaf_samples, int | np.integer) or min_leaf_samples < 1:
            raise _bad("min_leaf_samples", min_leaf_samples, "a positive integer")
        self.min_leaf_samples = int(min_leaf_samples)
        if not isinstance(map_order, int | np.integer) or isinstance(map_order, bool) or map_order not in (2, 3, 4):
            raise _bad("map_order", map_order, "2, 3 or 4")
        self.map_order = int(map_order)
        self.map_tolerance_au = _positive("map_tolerance_au", map_tolerance_au)
        if not isinstance(n_check, int | np.integer) or n_check < 1:
            raise _bad("n_check", n_check, "a positive integer")
        self.n_check = int(n_check)
        self.rtol = _positive("rtol", rtol)
        self.atol = _positive("atol", atol)
        if not isinstance(chunk_size, int | np.integer) or chunk_size < 1:
            raise _bad("chunk_size", chunk_size, "a positive integer")
        self.chunk_size = int(chunk_size)

    # ------------------------------------------------------------------ setup
    def describe(self) -> dict:
        """Potential, solar parameters, window and numerical settings."""
        pot = self._preset.describe() if self._preset else {"name": "custom",
                                                             **self.potential.describe()}
        return {
            "name": self.name,
            "potential": pot,
            "sun": self.sun.as_dict(),
            "horizon_myr": "auto" if self.horizon_myr is None else list(self.horizon_myr),
            "max_horizon_myr": self.max_horizon_myr,
            "grid_step_myr": self.grid_step_myr,
            "grid_travel_pc": self.grid_travel_pc,
            "method": self.method,
            "leaf_radius_pc": self.leaf_radius_pc,
            "min_leaf_samples": self.min_leaf_samples,
            "map_order": self.map_order,
            "map_tolerance_au": self.map_tolerance_au,
            "n_check": self.n_check,
            "integrator": {"scheme": "DOP853", "rtol": self.rtol, "atol": self.atol},
        }

    def _relative(self, observables):
        obs = np.asarray(observables, dtype=float)
        if obs.ndim == 1:
            obs = obs[None, :]
        if obs.ndim != 2 or obs.shape[1] != 6:
            raise InputError("observables", f"shape {obs.shape}", "expected shape (n, 6)")
        if not np.all(np.isfinite(obs)):
            bad = obs[~np.isfinite(obs)][0]
            raise InputError("observables", float(bad), "expected finite numbers")
        if np.any(obs[:, PARALLAX] <= 0):
            bad = float(obs[obs[:, PARALLAX] <= 0, PARALLAX][0])
            raise InputError("parallax", bad, "expected a positive parallax in mas (the orbit model inverts it)")
        xv = observables_to_cartesian(obs)
        rel = (xv.reshape(-1, 3) @ self._rotation.T).reshape(-1, 6)
        return obs, rel

    def window(self) -> tuple:
        """The search window (t_min, t_max) [Myr]."""
        if self.horizon_myr is not None:
            return tuple(self.horizon_myr)
        return (-self.max_horizon_myr, self.max_horizon_myr)

    def _grid(self, speed, window=None):
        """Window [Myr] and grid nodes [pc/(km/s)] for the largest relative speed [km/s]."""
        return window_and_nodes(self.window() if window is None else window, speed,
                                grid_step_myr=self.grid_step_myr, grid_travel_pc=self.grid_travel_pc)

    def _direct(self, rel, nodes):
        """Direct integration of every row (chunked); returns t, state, outside, conv.

        The answer for one row is remembered (the last one): a linearization asks for the nominal
        perihelion twice (``evaluate`` and ``jacobian``), and it costs a whole integration each time.
        """
        if rel.shape[0] == 1:
            key = (rel.tobytes(), nodes.tobytes())
            last = getattr(self, "_last_nominal", None)
            if last is not None and last[0] == key:
                return tuple(x.copy() for x in last[1])
            out = self._direct_rows(rel, nodes)
            self._last_nominal = (key, tuple(x.copy() for x in out))
            return out
        return self._direct_rows(rel, nodes)

    def _direct_rows(self, rel, nodes):
        n = rel.shape[0]
        t = np.empty(n)
        state = np.empty((n, 6))
        outside = np.empty(n, dtype=bool)
        conv = np.empty(n, dtype=bool)
        # bound the tabulated states (m x chunk x 6 floats, held ~4 times) to ~250 MB
        chunk = min(self.chunk_size, max(256, 8_000_000 // (6 * len(nodes))))
        for start in range(0, n, chunk):
            sl = slice(start, min(n, start + chunk))
            states, derivs, _ = integrate_relative(
                self.potential, self._sun_state, rel[sl], nodes, rtol=self.rtol, atol=self.atol
            )

            def values(k, rows, states=states, derivs=derivs):
                return states[k, rows], derivs[k, rows], states[k + 1, rows], derivs[k + 1, rows]

            t[sl], state[sl], outside[sl], conv[sl] = global_perihelion(nodes, values, valley_starts(nodes, states))
        return t, state, outside, conv

    def _map(self, rel_all, t_lin_all, progress=None):
        """Rows through the leaf maps (:func:`.mapping.map_perihelia`); t, state, outside, conv, diag."""
        return map_perihelia(self, rel_all, t_lin_all, progress)

    # --------------------------------------------------------------- interface
    def evaluate(self, observables, *, reference=None, progress=None) -> Perihelion:
        """Perihelion of every row; see :meth:`ForwardModel.evaluate`.

        ``diagnostics`` (a :class:`~perierr.models.diagnostics.ModelDiagnostics`;
        ``info`` is its mapping) holds ``method`` ("leaf_maps",
        "direct" or "leaf_maps+direct_fallback"), the window, the
        number of map leaves, the map errors found by the check [au, Myr],
        the number of fallback samples with the reason, the number of perihelia
        outside the window (flagged), and the straight-line answer of the same
        rows (``straight_line``: arrays of time_myr, distance_pc, speed_kms) with
        the median orbit-minus-straight-line difference
        (``model_difference_median``). ``reference`` is accepted for the
        interface and not needed: the maps are built from the rows themselves.
        ``progress(done, total)`` is called as draws are done.
        """
        _, rel = self._relative(observables)
        v = rel[:, 3:]
        vv = np.sum(v * v, axis=1)
        # straight-line times start the search (0 for a star at rest)
        t_lin = -np.sum(rel[:, :3] * v, axis=1) / np.where(vv > 0, vv, 1.0)
        far = (rownorm(rel[:, :3]) > MAX_DISTANCE_PC) | (np.sqrt(vv) > MAX_SPEED_KMS)
        if far.any():
            return self._beyond_potential(observables, rel, t_lin, far, reference, progress)
        found = {"model": self.name}  # ModelDiagnostics fields, in the JSON's order
        if self.method == "direct" or rel.shape[0] < smallest_leaf(self):  # every row with DOP853
            window, nodes = self._grid(np.sqrt(vv.max()))
            found.update(window_myr=list(window), grid_nodes=len(nodes))
            t, state, outside, conv = self._direct(rel, nodes)
            found["method"] = "direct"
            if progress is not None:
                progress(rel.shape[0], rel.shape[0])
        else:
            t, state, outside, conv, diag = self._map(rel, t_lin, progress)
            found.update(diag)
            found["method"] = (
                "leaf_maps+direct_fallback"
                if diag["fallback_samples"] or diag["sparse_samples"]
                else "leaf_maps"
            )  # fmt: skip
        x, w = state[:, :3], state[:, 3:]
        if outside.any():
            # straight-line extrapolation from the window edge, flagged
            dt = np.where(outside, -np.sum(x * w, axis=1) / np.sum(w * w, axis=1), 0.0)
            t = t + dt
            x = x + w * dt[:, None]
        t_ph, d_ph, v_ph = t * _C, rownorm(x), rownorm(w)
        # the straight-line answer of the same rows, so that reports can show the
        # model difference (orbit minus straight line)
        sl_d = rownorm(rel[:, :3] + v * t_lin[:, None])
        sl_v = np.sqrt(vv)
        diagnostics = ModelDiagnostics(
            **found,
            n_outside_window=int(outside.sum()),
            n_not_converged=int((~conv).sum()),
            straight_line={"time_myr": t_lin * _C, "distance_pc": sl_d, "speed_kms": sl_v},
            model_difference_median={
                "time_myr": float(np.median(t_ph - t_lin * _C)),
                "distance_pc": float(np.median(d_ph - sl_d)),
                "speed_kms": float(np.median(v_ph - sl_v)),
            },
            order=tuple(found),  # the keys in the order they were found (the JSON's order)
        )
        return Perihelion(t_ph, d_ph, v_ph, flags=outside | ~conv, diagnostics=diagnostics)

    def _beyond_potential(self, observables, rel, t_lin, far, reference, progress=None) -> Perihelion:
        """Rows beyond MAX_DISTANCE_PC or MAX_SPEED_KMS get the straight-line answer, flagged; the rest as usual."""
        obs = np.asarray(observables, dtype=float).reshape(-1, 6)
        x = rel[:, :3] + rel[:, 3:] * t_lin[:, None]
        t, d, v = t_lin * _C, rownorm(x), rownorm(rel[:, 3:])
        flags = far.copy()
        diagnostics = ModelDiagnostics(model=self.name, method="straight line beyond the potential",
                                       n_outside_window=0, n_not_converged=0)
        if (~far).any():
            inner = self.evaluate(obs[~far])  # the reference is never needed (evaluate's docstring)
            t[~far], d[~far], v[~far] = inner.time_myr, inner.distance_pc, inner.speed_kms
            flags[~far] = inner.flags if inner.flags is not None else False
            # the straight-line block has one entry per row: the far rows' answer is the straight line itself
            straight = {"time_myr": t_lin * _C, "distance_pc": rownorm(x), "speed_kms": rownorm(rel[:, 3:])}
            for key, arr in inner.diagnostics.straight_line.items():
                straight[key][~far] = arr
            diagnostics = replace(inner.diagnostics, straight_line=straight)
        diagnostics = replace(diagnostics, n_beyond_potential=int(far.sum()), max_distance_pc=MAX_DISTANCE_PC)
        if progress is not None:
            progress(obs.shape[0], obs.shape[0])
        return Perihelion(t, d, v, flags=flags, diagnostics=diagnostics)

    def jacobian(self, point) -> np.ndarray:
        """(3, 6) Jacobian from the first-order variational equations (state-transition matrix) at perihelion.

        Uses ``s . w = 0`` at perihelion: ``dt = -(w . ds + s . dw) / (w.w + s.a)``,
        ``d d_ph = u . (ds + w dt)`` and ``d v_ph = (w/|w|) . (dw + a dt)``,
        with ``(ds, dw) = Phi1(t_ph) delta``.
        """
        obs, rel = self._relative(point)
        if np.linalg.norm(rel[0, :3]) > MAX_DISTANCE_PC or np.linalg.norm(rel[0, 3:]) > MAX_SPEED_KMS:
            from ..straight import StraightLine  # beyond the potential: the straight line, as evaluate()

            return StraightLine().jacobian(obs[0])
        # the nominal perihelion over the whole window, then the variational equations around it
        nominal = self._direct(rel, self._grid(np.linalg.norm(rel[0, 3:]))[1])
        t_ph = float(nominal[0][0]) * _C
        if nominal[2][0]:  # outside the window: central differences of the flagged (extrapolated) answer
            return self._jacobian_by_differences(obs[0])
        pad = 0.1 * abs(t_ph) + 2.0 * self.grid_step_myr
        lo, hi = self.window()
        local = (max(lo, min(0.0, t_ph - pad)), min(hi, max(0.0, t_ph + pad)))
        _, nodes = self._grid(np.linalg.norm(rel[0, 3:]), local)
        tables = variational_tables(
            self.potential, self._sun_state, rel, nodes, rtol=self.rtol, atol=self.atol
        )
        vals = tables.node_cubic(np.zeros(1, dtype=int), features(np.zeros((1, 6))))
        grid_states = tables.table[:, :, 0, :6].swapaxes(0, 1)
        t, _, _, _ = newton_perihelion(
            nodes, vals, grid_minimum_start(nodes, grid_states), coefficients=True
        )
        k = int(np.clip(np.searchsorted(nodes, t[0], side="right") - 1, 0, len(nodes) - 2))
        tab = tables.table[0]
        p, dp = hermite(
            t, nodes[k : k + 1], nodes[k + 1 : k + 2],
            tab[k][None, :7, :6], tab[k][None, :7, 6:], tab[k + 1][None, :7, :6],
            tab[k + 1][None, :7, 6:],
        )  # fmt: skip
        y, phi = p[0, 0], p[0, 1:].T  # state (6,), Phi1 (6, 6) [state_i, delta_a]
        acc = dp[0, 0, 3:]
        s, w = y[:3], y[3:]
        dt = -(w @ phi[:3] + s @ phi[3:]) / (w @ w + s @ acc)
        unit = s / np.linalg.norm(s)
        dd = unit @ (phi[:3] + np.outer(w, dt))
        dv = (w / np.linalg.norm(w)) @ (phi[3:] + np.outer(acc, dt))
        jac_gc = np.stack([dt * _C, dd, dv])
        rot6 = np.zeros((6, 6))
        rot6[:3, :3] = rot6[3:, 3:] = self._rotation
        return jac_gc @ rot6 @ cartesian_jacobian(obs[0])

    def _jacobian_by_differences(self, point) -> np.ndarray:
        """(3, 6) central differences of the direct answer (for a perihelion outside the window)."""
        point = np.asarray(point, dtype=float)
        steps = np.maximum(np.abs(point), 1.0) * 1e-6
        rows = np.vstack([point + np.diag(steps), point - np.diag(steps)])
        ph = replace_method(self).evaluate(rows)
        out = np.stack([ph.time_myr, ph.distance_pc, ph.speed_kms])  # (3, 12)
        return (out[:, :6] - out[:, 6:]) / (2.0 * steps)
