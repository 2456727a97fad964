"""Miyamoto-Nagai disk potential component.

Units as in :mod:`.potential_base`.

References
----------
Miyamoto, M. & Nagai, R. 1975, PASJ 27, 533; Binney, J. & Tremaine, S. 2008,
Galactic Dynamics, 2nd ed., Sect. 2.3.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from .potential_base import G_PC_KMS2_PER_MSUN, Potential, _positive

__all__ = ["MiyamotoNagai"]


@dataclass(frozen=True)
class MiyamotoNagai(Potential):
    """Miyamoto-Nagai disk, ``Phi = -G M / sqrt(R^2 + (a + sqrt(z^2 + b^2))^2)``.

    Parameters
    ----------
    mass_msun : float
        Total mass [Msun].
    a_pc, b_pc : float
        Scale length and scale height [pc] (Miyamoto & Nagai 1975).
    """

    mass_msun: float
    a_pc: float
    b_pc: float

    def __post_init__(self):
        _positive("mass_msun", self.mass_msun, "MiyamotoNagai")
        _positive("a_pc", self.a_pc, "MiyamotoNagai")
        _positive("b_pc", self.b_pc, "MiyamotoNagai")

    def _parts(self, x):
        x = np.asarray(x, dtype=float)
        z = x[..., 2]
        zeta = np.sqrt(z * z + self.b_pc**2)
        big_b = self.a_pc + zeta
        d2 = x[..., 0] ** 2 + x[..., 1] ** 2 + big_b**2
        # q = grad(D^2) / 2
        q = np.stack([x[..., 0], x[..., 1], big_b * z / zeta], axis=-1)
        return x, z, zeta, big_b, d2, q

    def potential(self, x):
        """Potential [(km/s)^2], shape (...)."""
        _, _, _, _, d2, _ = self._parts(x)
        return -G_PC_KMS2_PER_MSUN * self.mass_msun / np.sqrt(d2)

    def acceleration(self, x):
        """Acceleration [(km/s)^2/pc], shape (..., 3)."""
        _, _, _, _, d2, q = self._parts(x)
        return -(G_PC_KMS2_PER_MSUN * self.mass_msun * d2**-1.5)[..., None] * q

    def _dq(self, z, zeta, big_b):
        """Diagonal of dq_i/dx_j = diag(1, 1, c)."""
        c = (z / zeta) ** 2 + big_b * self.b_pc**2 / zeta**3
        return c

    def hessian(self, x):
        """Hessian of Phi [(km/s)^2/pc^2], shape (..., 3, 3)."""
        return self.derivatives(x)[1]

    def third_derivatives(self, x):
        """Third derivatives of Phi [(km/s)^2/pc^3], shape (..., 3, 3, 3)."""
        return self.derivatives(x)[2]

    def derivatives(self, x):
        """Acceleration, Hessian and third derivatives sharing intermediate terms."""
        _, z, zeta, big_b, d2, q = self._parts(x)
        gm = G_PC_KMS2_PER_MSUN * self.mass_msun
        c = self._dq(z, zeta, big_b)
        qmat = np.zeros(q.shape + (3,))
        qmat[..., 0, 0] = 1.0
        qmat[..., 1, 1] = 1.0
        qmat[..., 2, 2] = c
        d15 = gm * d2**-1.5
        acc = -d15[..., None] * q
        qq = q[..., :, None] * q[..., None, :]
        hes = d15[..., None, None] * (qmat - 3.0 * qq / d2[..., None, None])
        qqq = qq[..., None] * q[..., None, None, :]
        sym = (
            qmat[..., :, :, None] * q[..., None, None, :]
            + qmat[..., :, None, :] * q[..., None, :, None]
            + qmat[..., None, :, :] * q[..., :, None, None]
        )
        third = (15.0 * d15 / (d2 * d2))[..., None, None, None] * qqq
        third -= (3.0 * d15 / d2)[..., None, None, None] * sym
        third[..., 2, 2, 2] += d15 * (-3.0 * self.a_pc * self.b_pc**2 * z / zeta**5)
        return acc, hes, third

    def scaled(self, factor):
        """Copy with the amplitude multiplied by ``factor``."""
        return dataclasses.replace(self, mass_msun=self.mass_msun * float(factor))

    def describe(self):
        """Parameters, for outputs."""
        return {"type": "MiyamotoNagai", **dataclasses.asdict(self)}
