"""Spherical potential components: Plummer, Hernquist, NFW and a power law with cut-off.

Units as in :mod:`.potential_base`.

References
----------
Binney, J. & Tremaine, S. 2008, Galactic Dynamics, 2nd ed., Sect. 2.2.
Plummer, H. C. 1911, MNRAS 71, 460.  Hernquist, L. 1990, ApJ 356, 359.
Navarro, J. F., Frenk, C. S. & White, S. D. M. 1997, ApJ 490, 493.
Bovy, J. 2015, ApJS 216, 29, Sect. 3.5 (power-law bulge with Gaussian cut-off).
"""

from __future__ import annotations

import abc
import dataclasses
import math
from dataclasses import dataclass

import numpy as np
from scipy.special import gamma as _gamma
from scipy.special import gammainc, gammaincc

from .potential_base import _FOUR_PI_G, G_PC_KMS2_PER_MSUN, Potential, PotentialParameterError, _positive

__all__ = ["Plummer", "Hernquist", "NFW", "PowerLawCutoff"]

_EYE = np.eye(3)
_EYE.flags.writeable = False


class _Spherical(Potential):
    """Spherical component defined by Phi(r), Phi'(r), rho(r) and rho'(r).

    Phi'' and Phi''' follow from Poisson's equation,
    ``Phi'' = 4 pi G rho - 2 Phi'/r`` (Binney & Tremaine 2008, eq. 2.4 in
    spherical form), and its radial derivative.
    """

    mass_msun: float
    #: Spherical about the origin: a sum shares the tensors (see CompositePotential.derivatives).
    _radial = True

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
        r = np.sqrt(np.einsum("...i,...i->...", x, x))
        return -(self._d1(r) / r)[..., None] * x

    def derivatives(self, x):
        """Acceleration, Hessian and third derivatives sharing r and Phi'(r)."""
        x = np.asarray(x, dtype=float)
        r = np.sqrt(np.einsum("...i,...i->...", x, x))
        d1, d2, d3 = self._derivs(r)
        return -(d1 / r)[..., None] * x, *self._tensors(x, r, d1, d2, d3)

    def _tensors(self, x, r, d1, d2, d3):
        """Hessian and third derivatives from the radial derivatives of Phi."""
        n = x / r[..., None]
        g = (d1 / r)[..., None, None]
        nn = n[..., :, None] * n[..., None, :]
        hes = (d2[..., None, None] - g) * nn + g * _EYE
        gp = d2 / r - d1 / (r * r)  # derivative of Phi'/r
        nnn = nn[..., None] * n[..., None, None, :]
        sym = (
            _EYE[:, :, None] * n[..., None, None, :]
            + _EYE[:, None, :] * n[..., None, :, None]
            + _EYE[None, :, :] * n[..., :, None, None]
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
            raise PotentialParameterError("alpha", self.alpha, "expected 0 <= alpha < 2 (PowerLawCutoff)")

    @property
    def _s(self):
        return 1.5 - 0.5 * self.alpha

    def _phi(self, r):
        u = (r / self.rc_pc) ** 2
        s2 = 1.0 - 0.5 * self.alpha
        outer = _gamma(s2) * gammaincc(s2, u) / (self.rc_pc * _gamma(self._s))
        return -G_PC_KMS2_PER_MSUN * self.mass_msun * (gammainc(self._s, u) / r + outer)

    def _d1(self, r):
        r = np.asarray(r, dtype=float)
        if r.size < _TABLE_MIN_POINTS or not float(np.min(r)) > _TABLE_MIN_RADIUS_PC:
            return self._d1_exact(r)
        return _radial_table(self, r).evaluate(r)

    def _d1_exact(self, r):
        u = (r / self.rc_pc) ** 2
        return G_PC_KMS2_PER_MSUN * self.mass_msun * gammainc(self._s, u) / (r * r)

    def _d2_exact(self, r):
        return _FOUR_PI_G * self._rho(r) - 2.0 * self._d1_exact(r) / r

    def _rho(self, r):
        norm = self.mass_msun / (2.0 * math.pi * self.rc_pc ** (3.0 - self.alpha) * _gamma(self._s))
        return norm * r ** (-self.alpha) * np.exp(-((r / self.rc_pc) ** 2))

    def _drho(self, r):
        return self._rho(r) * (-self.alpha / r - 2.0 * r / self.rc_pc**2)


#: Arrays of at least this many radii, all beyond the radius below [pc], get Phi'(r) of the power-law bulge
#: from a table (see :class:`_RadialTable`); near the centre, where the bulge is steep, the exact function.
_TABLE_MIN_POINTS, _TABLE_MIN_RADIUS_PC = 256, 2000.0
_TABLES: dict = {}


class _RadialTable:
    """Phi'(r) of a spherical component by cubic Hermite interpolation on a uniform grid of radii.

    The incomplete gamma function of :class:`PowerLawCutoff` costs as much as the rest of the Galactic
    potential; the orbit model calls it for millions of radii within a few kpc of the Sun. Knots every
    ``_TABLE_STEP_PC`` with the exact Phi' and Phi'' make the interpolation error of order
    step^4 / 384 times the fourth derivative, below 1e-13 of Phi' for the bulge at the Sun's radius (the tests
    compare it with the exact function). The table covers the radii asked for, widened, and is rebuilt
    when asked for radii outside it.
    """

    def __init__(self, comp, r_lo, r_hi):
        step = _TABLE_STEP_PC
        self.lo = max(step, math.floor(r_lo / step) * step)
        n = int(math.ceil((r_hi - self.lo) / step)) + 2
        knots = self.lo + step * np.arange(n)
        self.step, self.hi = step, float(knots[-1])
        self.f, self.df = comp._d1_exact(knots), comp._d2_exact(knots)

    def covers(self, r_min, r_max) -> bool:
        return self.lo <= r_min and r_max < self.hi

    def evaluate(self, r):
        pos = (r - self.lo) / self.step
        k = pos.astype(np.int64)
        u = pos - k
        f0, f1 = self.f[k], self.f[k + 1]
        d0, d1 = self.df[k] * self.step, self.df[k + 1] * self.step
        # cubic Hermite in u through values and derivatives at both knots (Horner)
        c2 = 3.0 * (f1 - f0) - 2.0 * d0 - d1
        c3 = 2.0 * (f0 - f1) + d0 + d1
        return f0 + u * (d0 + u * (c2 + u * c3))


#: Knot spacing of the radial tables [pc].
_TABLE_STEP_PC = 1.0


def _radial_table(comp, r) -> _RadialTable:
    """The component's table covering radii ``r`` (built or widened on demand)."""
    r_min, r_max = float(np.min(r)), float(np.max(r))
    table = _TABLES.get(comp)
    if table is None or not table.covers(r_min, r_max):
        lo, hi = (r_min, r_max) if table is None else (min(r_min, table.lo), max(r_max, table.hi))
        table = _TABLES[comp] = _RadialTable(comp, lo - 1000.0, hi + 1000.0)
    return table
