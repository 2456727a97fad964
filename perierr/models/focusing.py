"""Gravitational focusing by the star's mass, as a wrapper around any forward model.

The wrapped model gives the encounter without the star's own gravity: its
perihelion distance is the impact parameter ``b`` and its speed the speed at
infinity ``v`` of the Sun-star two-body hyperbola. With
``mu = G (M_sun + M_star)``, ``|a| = mu / v^2`` and
``e = sqrt(1 + b^2 v^4 / mu^2)``, the pericentre is ``q = |a| (e - 1)`` and the
speed there ``sqrt(v^2 + 2 mu / q)``. The time of perihelion is left as the
wrapped model's (the two-body shift is of order ``mu / v^3``, below 1e-4 Myr
for encounters faster than 1 km/s). Focusing matters only for slow, very close
encounters; perierr's results are statistical encounter predictions, not
impact hazards for comets of the Oort cloud.

References
----------
Murray, C. D. & Dermott, S. F. 1999, Solar System Dynamics, Sect. 2.5
(hyperbolic orbits); Roy, A. E. 2005, Orbital Motion, 4th ed., Sect. 4.6.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
from scipy.stats import norm, truncnorm

from ..errors import InputError
from .base import ForwardModel, Nuisance, Perihelion, with_progress
from .diagnostics import FocusingDiagnostics
from .orbit.potentials import G_PC_KMS2_PER_MSUN

__all__ = ["Focused", "hyperbolic_perihelion", "FocusingError"]


class FocusingError(InputError):
    """An invalid focusing parameter (an :class:`~perierr.errors.InputError`)."""


def hyperbolic_perihelion(impact_pc, speed_kms, mass_msun):
    """Pericentre distance and speed of the Sun-star hyperbola.

    Parameters
    ----------
    impact_pc : array_like, shape (n,)
        Impact parameter b [pc] (unperturbed closest approach).
    speed_kms : array_like, shape (n,)
        Relative speed at infinity v [km/s].
    mass_msun : array_like, shape (n,) or scalar
        Mass of the star [Msun]; the Sun's mass is added.

    Returns
    -------
    q : ndarray, shape (n,)
        Pericentre distance [pc], ``|a| (e - 1)`` written as
        ``b x / (1 + sqrt(1 + x^2))`` with ``x = b v^2 / mu`` (no cancellation).
    v_q : ndarray, shape (n,)
        Speed at pericentre [km/s], ``sqrt(v^2 + 2 mu / q)``; infinite for b = 0.
    """
    b = np.asarray(impact_pc, dtype=float)
    v = np.asarray(speed_kms, dtype=float)
    mu = G_PC_KMS2_PER_MSUN * (1.0 + np.asarray(mass_msun, dtype=float))
    x = b * v * v / mu
    q = b * x / (1.0 + np.sqrt(1.0 + x * x))
    with np.errstate(divide="ignore"):
        vq = np.sqrt(v * v + 2.0 * mu / q)
    return q, vq


class Focused(ForwardModel):
    """Any forward model plus the two-body focusing by the star's mass.

    Parameters
    ----------
    base : ForwardModel
        The model without the star's gravity (``StraightLine`` or ``OrbitModel``).
    mass_msun : float
        Nominal mass of the star [Msun], >= 0.
    mass_error_msun : float, default 0
        Standard deviation of the mass [Msun]. When positive,
        :meth:`evaluate_draws` draws one mass per row from a normal
        distribution truncated at zero mass, with the generator it is given;
        :meth:`evaluate` and :meth:`jacobian` use the nominal mass; the budgets
        give the mass a share of its own through :meth:`mass_jacobian`.

    Notes
    -----
    ``diagnostics.focusing`` (a :class:`~perierr.models.diagnostics.FocusingDiagnostics`;
    ``info["focusing"]`` in the JSON-facing mapping) reports the mass used and
    how much focusing changed the answer: median and largest change of d_ph
    [pc] and v_ph [km/s], and the median relative change of d_ph;
    ``diagnostics.focusing_delta_distance_pc`` and
    ``diagnostics.focusing_delta_speed_kms`` hold the per-row changes.
    The wrapper holds no random state: the same generator gives the same masses.
    """

    def __init__(self, base, *, mass_msun, mass_error_msun=0.0):
        if not isinstance(base, ForwardModel):
            raise FocusingError("base", base, "expected a ForwardModel (e.g. perierr.make_model('straight_line'))")
        for key, val in (("mass_msun", mass_msun), ("mass_error_msun", mass_error_msun)):
            try:
                ok = math.isfinite(float(val)) and float(val) >= 0
            except (TypeError, ValueError):
                ok = False
            if not ok:
                raise FocusingError(key, val, "expected a finite mass >= 0 in M_sun (a focusing option)")
        self.base = base
        self.mass_msun = float(mass_msun)
        self.mass_error_msun = float(mass_error_msun)
        self.name = f"{base.name}+focusing"

    def describe(self) -> dict:
        """The wrapped model's description plus the focusing parameters."""
        return {
            "name": self.name,
            "base": self.base.describe(),
            "focusing": {
                "mass_msun": self.mass_msun,
                "mass_error_msun": self.mass_error_msun,
                "mass_draws": "normal truncated at 0" if self.mass_error_msun > 0 else "none",
                "G_pc_kms2_per_msun": G_PC_KMS2_PER_MSUN,
            },
        }

    def _masses(self, n, rng):
        """One mass per row: drawn from the truncated normal with ``rng``, or nominal without one (or no error)."""
        if self.mass_error_msun > 0 and rng is not None:
            lower = -self.mass_msun / self.mass_error_msun
            return truncnorm.rvs(
                lower, np.inf, loc=self.mass_msun, scale=self.mass_error_msun, size=n, random_state=rng,
            )  # fmt: skip
        return np.full(n, self.mass_msun)

    def evaluate(self, observables, *, reference=None, progress=None) -> Perihelion:
        """Focused perihelion of every row at the nominal mass; see :meth:`ForwardModel.evaluate`.

        ``progress`` goes to the wrapped model (the correction itself is a closed form).
        """
        raw = with_progress(self.base.evaluate, observables, reference=reference, progress=progress)
        return self.focus(raw, self._masses(raw.distance_pc.size, None))

    def evaluate_draws(self, observables, rng=None, *, reference=None, progress=None) -> Perihelion:
        """Focused perihelia with one mass per row drawn with ``rng`` (nominal masses when ``rng`` is None).

        The wrapped model's own draws (if it has nuisance parameters) come
        first from the same generator; ``progress`` goes to the wrapped model.
        """
        raw = with_progress(self.base.evaluate_draws, observables, rng, reference=reference, progress=progress)
        return self.focus(raw, self._masses(raw.distance_pc.size, rng))

    def focus(self, raw: Perihelion, masses) -> Perihelion:
        """Apply the two-body focusing of given masses to the wrapped model's answer.

        Parameters
        ----------
        raw : Perihelion
            The wrapped model's perihelia (n rows).
        masses : array_like, shape (n,) or scalar
            Mass of the star for each row [Msun].
        """
        q, vq = hyperbolic_perihelion(raw.distance_pc, raw.speed_kms, masses)
        head_on = q == 0
        flags = raw.flags
        if head_on.any():
            flags = head_on if flags is None else (flags | head_on)
        dd, dv = q - raw.distance_pc, vq - raw.speed_kms
        finite = np.isfinite(dv)
        passing = raw.distance_pc > 0  # a head-on row (d = 0) has no relative change: it counts as 0
        relative = np.where(passing, dd / np.where(passing, raw.distance_pc, 1.0), 0.0)
        summary = FocusingDiagnostics(
            mass_msun=self.mass_msun,
            mass_error_msun=self.mass_error_msun,
            median_delta_distance_pc=float(np.median(dd)),
            max_abs_delta_distance_pc=float(np.max(np.abs(dd))),
            median_relative_delta_distance=float(np.median(relative)),
            median_delta_speed_kms=float(np.median(dv[finite])) if finite.any() else None,
            max_delta_speed_kms=float(np.max(dv[finite])) if finite.any() else None,
            n_head_on=int(head_on.sum()),
        )  # fmt: skip
        diagnostics = replace(
            raw.diagnostics, focusing=summary, focusing_delta_distance_pc=dd, focusing_delta_speed_kms=dv,
            focusing_mass_msun=np.broadcast_to(np.asarray(masses, dtype=float), dd.shape).copy(),
        )  # fmt: skip
        return Perihelion(raw.time_myr, q, vq, flags=flags, diagnostics=diagnostics)

    def nuisance(self, point) -> tuple:
        """The star's mass, when its error is positive."""
        if self.mass_error_msun > 0:
            return (Nuisance("mass", self.mass_jacobian(point), self.mass_error_msun**2),)
        return ()

    def evaluate_nuisance(self, observables, deviates, *, reference=None) -> Perihelion:
        """Focused perihelia with masses from standard-normal deviates, shape (n, 1).

        A deviate z becomes the mass with the same quantile of the normal
        distribution truncated at zero that :meth:`evaluate` draws from.
        """
        raw = self.base.evaluate(observables, reference=reference)
        z = np.asarray(deviates, dtype=float).reshape(raw.distance_pc.size, -1)[:, 0]
        if self.mass_error_msun == 0:
            return self.focus(raw, np.full(z.size, self.mass_msun))
        lower = -self.mass_msun / self.mass_error_msun
        masses = truncnorm.ppf(norm.cdf(z), lower, np.inf, loc=self.mass_msun, scale=self.mass_error_msun)
        return self.focus(raw, masses)

    def mass_jacobian(self, point) -> np.ndarray:
        """Derivative of (t_ph, d_ph, v_ph) with respect to the star's mass at the nominal mass, shape (3,).

        From ``v^2 q^2 + 2 mu q = b^2 v^2`` with ``mu = G (M_sun + M)``:
        ``dq/dmu = -q / (v^2 q + mu)``, ``v_q = b v / q``, and t_ph does not
        depend on the mass (module docstring). Units: Myr, pc, km/s per Msun.
        """
        raw = self.base.evaluate(np.asarray(point, dtype=float)[None, :], reference=point)
        b, v = float(raw.distance_pc[0]), float(raw.speed_kms[0])
        mu = G_PC_KMS2_PER_MSUN * (1.0 + self.mass_msun)
        q = float(hyperbolic_perihelion(b, v, self.mass_msun)[0])
        if q == 0:  # head-on: q = 0 for any mass; v_q is infinite (undefined, shown as zero like the rest)
            return np.zeros(3)
        dq = -q / (v * v * q + mu) * G_PC_KMS2_PER_MSUN
        return np.array([0.0, dq, -b * v / q**2 * dq])

    def jacobian(self, point) -> np.ndarray:
        """Chain rule on the wrapped model's Jacobian at the nominal mass, shape (3, 6).

        From ``v^2 q^2 + 2 mu q = b^2 v^2`` (angular momentum and energy):
        ``dq/db = b v^2 / (v^2 q + mu)``, ``dq/dv = v (b^2 - q^2) / (v^2 q + mu)``,
        and ``v_q = b v / q``.
        """
        jac = np.asarray(self.base.jacobian(point), dtype=float)
        raw = self.base.evaluate(np.asarray(point, dtype=float)[None, :], reference=point)
        b, v = float(raw.distance_pc[0]), float(raw.speed_kms[0])
        mu = G_PC_KMS2_PER_MSUN * (1.0 + self.mass_msun)
        q = float(hyperbolic_perihelion(b, v, self.mass_msun)[0])
        out = jac.copy()
        if q == 0:  # head-on: dq/db = dq/dv = 0 at b = 0 and v_q is infinite (undefined, shown as zero)
            out[1:] = 0.0
            return out
        den = v * v * q + mu
        dq_db, dq_dv = b * v * v / den, v * (b * b - q * q) / den
        dvq_db = v / q - b * v / q**2 * dq_db
        dvq_dv = b / q - b * v / q**2 * dq_dv
        out[1] = dq_db * jac[1] + dq_dv * jac[2]
        out[2] = dvq_db * jac[1] + dvq_dv * jac[2]
        return out
