"""Galactic potential components, composable by addition.

Every component is a frozen dataclass evaluated on positions of shape
``(..., 3)`` in pc (Galactocentric Cartesian, z towards the north Galactic
pole). Potentials are in (km/s)^2, accelerations in (km/s)^2 / pc, Hessians in
(km/s)^2 / pc^2 and third derivatives in (km/s)^2 / pc^3. Masses are in solar
masses, with G taken from astropy. The orbit integrator needs the
acceleration; the state-transition map needs the Hessian and the third
derivatives (all analytic here).

References
----------
Binney, J. & Tremaine, S. 2008, Galactic Dynamics, 2nd ed., Sect. 2.2 (Plummer,
Hernquist, NFW spheres) and 2.3 (Miyamoto-Nagai disk).
Miyamoto, M. & Nagai, R. 1975, PASJ 27, 533.
Navarro, J. F., Frenk, C. S. & White, S. D. M. 1997, ApJ 490, 493.
Hernquist, L. 1990, ApJ 356, 359.  Plummer, H. C. 1911, MNRAS 71, 460.
Bovy, J. 2015, ApJS 216, 29, Sect. 3.5 (power-law bulge with Gaussian cut-off).
"""

from __future__ import annotations

import abc
import dataclasses
import math
from dataclasses import dataclass

import astropy.constants as _const
import astropy.units as _u
import numpy as np
from scipy.special import gamma as _gamma
from scipy.special import gammainc, gammaincc

__all__ = [
    "G_PC_KMS2_PER_MSUN",
    "Potential",
    "CompositePotential",
    "MiyamotoNagai",
    "PowerLawCutoff",
    "NFW",
    "Plummer",
    "Hernquist",
    "PotentialParameterError",
]

#: Gravitational constant in pc (km/s)^2 / Msun, from astropy's CODATA G and IAU M_sun.
G_PC_KMS2_PER_MSUN = float((_const.G * _u.Msun).to_value(_u.pc * (_u.km / _u.s) ** 2))

_FOUR_PI_G = 4.0 * math.pi * G_PC_KMS2_PER_MSUN


class PotentialParameterError(ValueError):
    """A potential parameter is outside its allowed range."""


def _positive(name: str, value, owner: str) -> float:
    value = float(value)
    if not np.isfinite(value) or value <= 0.0:
        raise PotentialParameterError(
            f"{owner}: parameter {name}={value!r} must be a finite positive number"
        )
    return value


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
                f"CompositePotential: components={self.components!r} must be a non-empty "
                "tuple of Potential objects"
            )

    def potential(self, x):
        """Potential [(km/s)^2], shape (...)."""
        return sum(c.potential(x) for c in self.components)

    def acceleration(self, x):
        """Acceleration [(km/s)^2/pc], shape (..., 3)."""
        return sum(c.acceleration(x) for c in self.components)

    def hessian(self, x):
        """Hessian of Phi [(km/s)^2/pc^2], shape (..., 3, 3)."""
        return sum(c.hessian(x) for c in self.components)

    def third_derivatives(self, x):
        """Third derivatives of Phi [(km/s)^2/pc^3], shape (..., 3, 3, 3)."""
        return sum(c.third_derivatives(x) for c in self.components)

    def derivatives(self, x):
        """Acceleration, Hessian and third derivatives, summed over components."""
        parts = [c.derivatives(x) for c in self.components]
        return tuple(sum(p[i] for p in parts) for i in range(3))

    def scaled(self, factor):
        """Copy with the amplitude multiplied by ``factor``."""
        return CompositePotential(tuple(c.scaled(factor) for c in self.components))

    def describe(self):
        """Parameters, for outputs."""
        return {"type": "composite", "components": [c.describe() for c in self.components]}


class _Spherical(Potential):
    """Spherical component defined by Phi(r), Phi'(r), rho(r) and rho'(r).

    Phi'' and Phi''' follow from Poisson's equation,
    ``Phi'' = 4 pi G rho - 2 Phi'/r`` (Binney & Tremaine 2008, eq. 2.4 in
    spherical form), and its radial derivative.
    """

    mass_msun: float

    @abc.abstractmethod
    def _phi(self, r): ...

    @abc.abstractmethod
    def _d1(self, r): ...

    @abc.abstractmethod
    def _rho(self, r): ...

    @abc.abstractmethod
    def _drho(self, r): ...

    def _derivs(self, r):
        d1 = self._d1(r)
        d2 = _FOUR_PI_G * self._rho(r) - 2.0 * d1 / r
        d3 = _FOUR_PI_G * self._drho(r) - 2.0 * d2 / r + 2.0 * d1 / (r * r)
        return d1, d2, d3

    def potential(self, x):
        """Potential [(km/s)^2], shape (...)."""
        x = np.asarray(x, dtype=float)
        return self._phi(np.linalg.norm(x, axis=-1))

    def acceleration(self, x):
        """Acceleration [(km/s)^2/pc], shape (..., 3)."""
        x = np.asarray(x, dtype=float)
        r = np.linalg.norm(x, axis=-1)
        return -(self._d1(r) / r)[..., None] * x

    def derivatives(self, x):
        """Acceleration, Hessian and third derivatives sharing r and Phi'(r)."""
        x = np.asarray(x, dtype=float)
        r = np.sqrt(np.einsum("...i,...i->...", x, x))
        d1, d2, d3 = self._derivs(r)
        return -(d1 / r)[..., None] * x, *self._tensors(x, r, d1, d2, d3)

    def _tensors(self, x, r, d1, d2, d3):
        n = x / r[..., None]
        g = (d1 / r)[..., None, None]
        nn = n[..., :, None] * n[..., None, :]
        hes = (d2[..., None, None] - g) * nn + g * np.eye(3)
        gp = d2 / r - d1 / (r * r)  # derivative of Phi'/r
        eye = np.eye(3)
        nnn = nn[..., None] * n[..., None, None, :]
        sym = (
            eye[:, :, None] * n[..., None, None, :]
            + eye[:, None, :] * n[..., None, :, None]
            + eye[None, :, :] * n[..., :, None, None]
        )
        third = (d3 - 3.0 * gp)[..., None, None, None] * nnn + gp[..., None, None, None] * sym
        return hes, third

    def hessian(self, x):
        """Hessian of Phi [(km/s)^2/pc^2], shape (..., 3, 3)."""
        x = np.asarray(x, dtype=float)
        r = np.linalg.norm(x, axis=-1)
        d1, d2, _ = self._derivs(r)
        n = x / r[..., None]
        g = (d1 / r)[..., None, None]
        nn = n[..., :, None] * n[..., None, :]
        return (d2[..., None, None] - g) * nn + g * np.eye(3)

    def third_derivatives(self, x):
        """Third derivatives of Phi [(km/s)^2/pc^3], shape (..., 3, 3, 3)."""
        x = np.asarray(x, dtype=float)
        r = np.linalg.norm(x, axis=-1)
        d1, d2, d3 = self._derivs(r)
        n = x / r[..., None]
        gp = d2 / r - d1 / (r * r)  # derivative of Phi'/r
        c3 = (d3 - 3.0 * gp)[..., None, None, None]
        eye = np.eye(3)
        nnn = n[..., :, None, None] * n[..., None, :, None] * n[..., None, None, :]
        sym = (
            eye[:, :, None] * n[..., None, None, :]
            + eye[:, None, :] * n[..., None, :, None]
            + eye[None, :, :] * n[..., :, None, None]
        )
        return c3 * nnn + gp[..., None, None, None] * sym

    def scaled(self, factor):
        """Copy with the amplitude multiplied by ``factor``."""
        return dataclasses.replace(self, mass_msun=self.mass_msun * float(factor))

    def describe(self):
        """Parameters, for outputs."""
        return {"type": type(self).__name__, **dataclasses.asdict(self)}


@dataclass(frozen=True)
class Plummer(_Spherical):
    """Plummer sphere, ``Phi = -G M / sqrt(r^2 + b^2)`` (Plummer 1911).

    Parameters
    ----------
    mass_msun : float
        Total mass [Msun].
    b_pc : float
        Scale radius [pc].
    """

    mass_msun: float
    b_pc: float

    def __post_init__(self):
        _positive("mass_msun", self.mass_msun, "Plummer")
        _positive("b_pc", self.b_pc, "Plummer")

    def _phi(self, r):
        return -G_PC_KMS2_PER_MSUN * self.mass_msun / np.sqrt(r * r + self.b_pc**2)

    def _d1(self, r):
        return G_PC_KMS2_PER_MSUN * self.mass_msun * r / (r * r + self.b_pc**2) ** 1.5

    def _rho(self, r):
        b2 = self.b_pc**2
        return 3.0 * self.mass_msun * b2 / (4.0 * math.pi * (r * r + b2) ** 2.5)

    def _drho(self, r):
        return -5.0 * r * self._rho(r) / (r * r + self.b_pc**2)


@dataclass(frozen=True)
class Hernquist(_Spherical):
    """Hernquist sphere, ``Phi = -G M / (r + a)`` (Hernquist 1990).

    Parameters
    ----------
    mass_msun : float
        Total mass [Msun].
    a_pc : float
        Scale radius [pc].
    """

    mass_msun: float
    a_pc: float

    def __post_init__(self):
        _positive("mass_msun", self.mass_msun, "Hernquist")
        _positive("a_pc", self.a_pc, "Hernquist")

    def _phi(self, r):
        return -G_PC_KMS2_PER_MSUN * self.mass_msun / (r + self.a_pc)

    def _d1(self, r):
        return G_PC_KMS2_PER_MSUN * self.mass_msun / (r + self.a_pc) ** 2

    def _rho(self, r):
        a = self.a_pc
        return self.mass_msun * a / (2.0 * math.pi * r * (r + a) ** 3)

    def _drho(self, r):
        return -self._rho(r) * (1.0 / r + 3.0 / (r + self.a_pc))


@dataclass(frozen=True)
class NFW(_Spherical):
    """Navarro-Frenk-White halo, ``Phi = -G M_s ln(1 + r/a) / r`` (NFW 1997).

    Parameters
    ----------
    mass_msun : float
        Mass parameter ``M_s = 4 pi rho_0 a^3`` [Msun] (the enclosed mass is
        ``M_s [ln(1+x) - x/(1+x)]`` with ``x = r/a``).
    a_pc : float
        Scale radius [pc].
    """

    mass_msun: float
    a_pc: float

    def __post_init__(self):
        _positive("mass_msun", self.mass_msun, "NFW")
        _positive("a_pc", self.a_pc, "NFW")

    def _phi(self, r):
        return -G_PC_KMS2_PER_MSUN * self.mass_msun * np.log1p(r / self.a_pc) / r

    def _d1(self, r):
        xx = r / self.a_pc
        return G_PC_KMS2_PER_MSUN * self.mass_msun * (np.log1p(xx) - xx / (1 + xx)) / (r * r)

    def _rho(self, r):
        xx = r / self.a_pc
        return self.mass_msun / (4.0 * math.pi * self.a_pc**3 * xx * (1.0 + xx) ** 2)

    def _drho(self, r):
        return -self._rho(r) * (1.0 / r + 2.0 / (r + self.a_pc))


@dataclass(frozen=True)
class PowerLawCutoff(_Spherical):
    """Power-law density with a Gaussian cut-off (Bovy 2015, Sect. 3.5).

    ``rho(r) = rho_0 r^-alpha exp(-(r/r_c)^2)``, normalised by its total mass
    ``M = 2 pi rho_0 r_c^(3-alpha) Gamma((3-alpha)/2)``, so that the enclosed
    mass is ``M P((3-alpha)/2, r^2/r_c^2)`` with P the regularised lower
    incomplete gamma function.

    Parameters
    ----------
    mass_msun : float
        Total mass [Msun].
    alpha : float
        Inner power-law slope, 0 <= alpha < 2 (the closed form of the
        potential needs alpha < 2).
    rc_pc : float
        Cut-off radius [pc].
    """

    mass_msun: float
    alpha: float
    rc_pc: float

    def __post_init__(self):
        _positive("mass_msun", self.mass_msun, "PowerLawCutoff")
        _positive("rc_pc", self.rc_pc, "PowerLawCutoff")
        if not (0.0 <= float(self.alpha) < 2.0):
            raise PotentialParameterError(
                f"PowerLawCutoff: parameter alpha={self.alpha!r} must satisfy 0 <= alpha < 2"
            )

    @property
    def _s(self):
        return 1.5 - 0.5 * self.alpha

    def _phi(self, r):
        u = (r / self.rc_pc) ** 2
        s2 = 1.0 - 0.5 * self.alpha
        outer = _gamma(s2) * gammaincc(s2, u) / (self.rc_pc * _gamma(self._s))
        return -G_PC_KMS2_PER_MSUN * self.mass_msun * (gammainc(self._s, u) / r + outer)

    def _d1(self, r):
        u = (r / self.rc_pc) ** 2
        return G_PC_KMS2_PER_MSUN * self.mass_msun * gammainc(self._s, u) / (r * r)

    def _rho(self, r):
        norm = self.mass_msun / (2.0 * math.pi * self.rc_pc ** (3.0 - self.alpha) * _gamma(self._s))
        return norm * r ** (-self.alpha) * np.exp(-((r / self.rc_pc) ** 2))

    def _drho(self, r):
        return self._rho(r) * (-self.alpha / r - 2.0 * r / self.rc_pc**2)


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
        _, z, zeta, big_b, d2, q = self._parts(x)
        gm = G_PC_KMS2_PER_MSUN * self.mass_msun
        c = self._dq(z, zeta, big_b)
        diag = np.zeros(q.shape + (3,))
        diag[..., 0, 0] = 1.0
        diag[..., 1, 1] = 1.0
        diag[..., 2, 2] = c
        qq = q[..., :, None] * q[..., None, :]
        return (gm * d2**-1.5)[..., None, None] * (diag - 3.0 * qq / d2[..., None, None])

    def third_derivatives(self, x):
        """Third derivatives of Phi [(km/s)^2/pc^3], shape (..., 3, 3, 3)."""
        _, z, zeta, big_b, d2, q = self._parts(x)
        gm = G_PC_KMS2_PER_MSUN * self.mass_msun
        c = self._dq(z, zeta, big_b)
        qmat = np.zeros(q.shape + (3,))
        qmat[..., 0, 0] = 1.0
        qmat[..., 1, 1] = 1.0
        qmat[..., 2, 2] = c
        qqq = q[..., :, None, None] * q[..., None, :, None] * q[..., None, None, :]
        sym = (
            qmat[..., :, :, None] * q[..., None, None, :]
            + qmat[..., :, None, :] * q[..., None, :, None]
            + qmat[..., None, :, :] * q[..., :, None, None]
        )
        out = (15.0 * gm * d2**-3.5)[..., None, None, None] * qqq
        out = out - (3.0 * gm * d2**-2.5)[..., None, None, None] * sym
        dc_dz = -3.0 * self.a_pc * self.b_pc**2 * z / zeta**5
        out[..., 2, 2, 2] += gm * d2**-1.5 * dc_dz
        return out

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
