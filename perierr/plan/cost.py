"""A simple telescope-time cost model for new measurements.

Photon-limited scaling (common practice, no source): the precision of a
measurement limited by photon noise scales as the inverse square root of the
collected photons, so with magnitude m and exposure time t

``sigma(m, t) = sigma_ref * 10^(0.2 (m - m_ref)) * sqrt(t_ref / t)``

and the time to reach a precision s is

``t(s, m) = t_ref * (sigma_ref / s)^2 * 10^(0.4 (m - m_ref)) + overhead``.

A precision below the instrument floor (systematics) cannot be bought with
time: its cost is infinite. The reference numbers below are illustrative
placeholders, not properties of any instrument: set your own.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from ..errors import InputError
from .update import input_name

__all__ = ["DEFAULT_RV_REFERENCE", "PhotonLimitedCost", "Reference"]


@dataclass(frozen=True)
class Reference:
    """Precision ``sigma`` (catalogue units) reached on a star of magnitude ``magnitude`` in ``hours``.

    ``floor`` is the best precision the instrument can reach at all.
    """

    sigma: float
    magnitude: float
    hours: float
    floor: float = 0.0

    def __post_init__(self):
        if not (self.sigma > 0 and self.hours > 0 and self.floor >= 0):
            raise InputError("cost reference", self, "expected sigma > 0, hours > 0 and floor >= 0")


#: Illustrative radial-velocity reference: 1 km/s on a 12 mag star in 1 h, floor 0.01 km/s
#: (common practice, no source; replace with your instrument's exposure-time calculator).
DEFAULT_RV_REFERENCE = Reference(sigma=1.0, magnitude=12.0, hours=1.0, floor=0.01)


@dataclass(frozen=True)
class PhotonLimitedCost:
    """Telescope hours for a new measurement, photon-limited (common practice, no source).

    Attributes
    ----------
    references : dict
        Input name -> :class:`Reference`. Inputs without one have no cost model.
    overhead_hours : float
        Added to every measurement (acquisition, calibration).
    """

    references: dict = field(default_factory=lambda: {"radial_velocity": DEFAULT_RV_REFERENCE})
    overhead_hours: float = 0.0

    def covers(self, input: str) -> bool:
        """True when the model can price a measurement of this input."""
        return input_name(input) in self.references

    def hours(self, input: str, precision: float, magnitude: float) -> float:
        """Exposure time [h] to measure ``input`` to ``precision`` (catalogue units) at ``magnitude``.

        Returns ``inf`` for a precision below the reference floor.
        """
        name = input_name(input)
        if name not in self.references:
            raise InputError("cost model", name, f"no reference for {name}; give one in references=")
        if not (precision > 0 and math.isfinite(magnitude)):
            raise InputError("cost", (precision, magnitude), "expected a precision > 0 and a finite magnitude")
        ref = self.references[name]
        if precision < ref.floor:
            return math.inf
        scale = (ref.sigma / precision) ** 2 * 10 ** (0.4 * (magnitude - ref.magnitude))
        return ref.hours * scale + self.overhead_hours

    def to_dict(self) -> dict:
        """Plain dict for JSON."""
        return {
            "model": "photon-limited: sigma ~ 10^(0.2 m) / sqrt(t) (common practice, no source)",
            "overhead_hours": self.overhead_hours,
            "references": {k: vars(v) for k, v in self.references.items()},
        }
