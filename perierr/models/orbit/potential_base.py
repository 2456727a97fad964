"""Base class of Galactic potentials, and their sum.

Units: positions in pc (Galactocentric Cartesian), potentials in (km/s)^2,
accelerations in (km/s)^2 / pc, masses in Msun with G from astropy. The
components are in :mod:`.spheres` and :mod:`.disk`; import them all from
:mod:`perierr.models.orbit.potentials`.
"""

from __future__ import annotations

import abc
import math
from dataclasses import dataclass

import astropy.constants as _const
import astropy.units as _u
import numpy as np

from ...errors import InputError

__all__ = ["G_PC_KMS2_PER_MSUN", "Potential", "CompositePotential", "PotentialParameterError"]

#: Gravitational constant in pc (km/s)^2 / Msun, from astropy's CODATA G and IAU M_sun.
G_PC_KMS2_PER_MSUN = float((_const.G * _u.Msun).to_value(_u.pc * (_u.km / _u.s) ** 2))

_FOUR_PI_G = 4.0 * math.pi * G_PC_KMS2_PER_MSUN


class PotentialParameterError(InputError):
    """A potential parameter is outside its allowed range (an :class:`~perierr.errors.InputError`)."""


def _positive(name: str, value, owner: str) -> float:
    expected = f"expected a finite positive number (a parameter of {owner})"
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise PotentialParameterError(name, value, expected) from None
    if not np.isfinite(number) or number <= 0.0:
        raise PotentialParameterError(name, number, expected)
    return number


class Potential(abc.ABC):
    """A gravitational potential that can be summed with others.

    Subclasses implement :meth:`potential`, :meth:`acceleration`,
    :meth:`hessian`, :meth:`third_derivatives` and :meth:`scaled`.
    """

    @abc.abstractmethod
    def potential(self, x) -> np.ndarray:
        """Potential Phi [(km/s)^2] at positions ``x`` of shape (..., 3) [pc]; shape (...)."""

    @abc.abstractmethod
    def acceleration(self, x) -> np.ndarray:
        """Acceleration -grad Phi [(km/s)^2/pc], shape (..., 3)."""

    @abc.abstractmethod
    def hessian(self, x) -> np.ndarray:
        """Second derivatives d^2 Phi / dx_i dx_j [(km/s)^2/pc^2], shape (..., 3, 3)."""

    @abc.abstractmethod
    def third_derivatives(self, x) -> np.ndarray:
        """Third derivatives d^3 Phi / dx_i dx_j dx_k [(km/s)^2/pc^3], shape (..., 3, 3, 3)."""

    @abc.abstractmethod
    def scaled(self, factor: float) -> Potential:
        """The same potential with its amplitude multiplied by ``factor``."""

    @abc.abstractmethod
    def describe(self) -> dict:
        """Parameters of the potential, for outputs."""

    def derivatives(self, x):
        """Acceleration, Hessian and third derivatives in one pass.

        Returns
        -------
        tuple of ndarray
            Shapes (..., 3), (..., 3, 3) and (..., 3, 3, 3); subclasses share
            intermediate results (used by the variational equations).
        """
        return self.acceleration(x), self.hessian(x), self.third_derivatives(x)

    def __add__(self, other):
        if not isinstance(other, Potential):
            return NotImplemented
        return CompositePotential(_parts(self) + _parts(other))

    def circular_speed(self, radius_pc) -> np.ndarray:
        """Circular speed [km/s] in the plane z = 0 at cylindrical radius ``radius_pc``."""
        r = np.asarray(radius_pc, dtype=float)
        x = np.stack([r, np.zeros_like(r), np.zeros_like(r)], axis=-1)
        return np.sqrt(-r * self.acceleration(x)[..., 0])


def _parts(pot: Potential) -> tuple:
    return pot.components if isinstance(pot, CompositePotential) else (pot,)


@dataclass(frozen=True)
class CompositePotential(Potential):
    """Sum of potentials (build it with ``+``)."""

    components: tuple

    def __post_init__(self):
        if not self.components or not all(isinstance(c, Potential) for c in self.components):
            raise PotentialParameterError(
                "components", self.components, "expected a non-empty tuple of Potential objects (CompositePotential)"
            )

    def potential(self, x):
        """Potential [(km/s)^2], shape (...)."""
        return sum(c.potential(x) for c in self.components)

    def acceleration(self, x):
        """Acceleration [(km/s)^2/pc], shape (..., 3).

        Spherical components share one radius and one product with the position.
        """
        radial = [c for c in self.components if getattr(c, "_radial", False)]
        if len(radial) < 2:
            return sum(c.acceleration(x) for c in self.components)
        x = np.asarray(x, dtype=float)
        r = np.sqrt(np.einsum("...i,...i->...", x, x))
        acc = -(sum(c._d1(r) for c in radial) / r)[..., None] * x
        for c in self.components:
            if not getattr(c, "_radial", False):
                acc += c.acceleration(x)
        return acc

    def hessian(self, x):
        """Hessian of Phi [(km/s)^2/pc^2], shape (..., 3, 3)."""
        return sum(c.hessian(x) for c in self.components)

    def third_derivatives(self, x):
        """Third derivatives of Phi [(km/s)^2/pc^3], shape (..., 3, 3, 3)."""
        return sum(c.third_derivatives(x) for c in self.components)

    def derivatives(self, x):
        """Acceleration, Hessian and third derivatives, summed over components.

        Spherical components (those with ``_radial = True``) share one
        construction of the tensors from their summed radial derivatives.
        """
        radial = [c for c in self.components if getattr(c, "_radial", False)]
        if len(radial) < 2:
            parts = [c.derivatives(x) for c in self.components]
        else:
            x = np.asarray(x, dtype=float)
            r = np.sqrt(np.einsum("...i,...i->...", x, x))
            d1, d2, d3 = (sum(v) for v in zip(*(c._derivs(r) for c in radial), strict=True))
            parts = [(-(d1 / r)[..., None] * x, *radial[0]._tensors(x, r, d1, d2, d3))]
            parts += [c.derivatives(x) for c in self.components if not getattr(c, "_radial", False)]
        return tuple(sum(p[i] for p in parts) for i in range(3))

    def scaled(self, factor):
        """Copy with the amplitude multiplied by ``factor``."""
        return CompositePotential(tuple(c.scaled(factor) for c in self.components))

    def describe(self):
        """Parameters, for outputs."""
        return {"type": "composite", "components": [c.describe() for c in self.components]}


