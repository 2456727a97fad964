"""Observables <-> heliocentric Cartesian phase space, and the derivative.

The Cartesian axes are those of the ICRS (x towards ra = dec = 0, z towards
the north celestial pole), centred on the Sun. Positions are in pc and
velocities in km/s. Observables follow the fixed order of
:data:`perierr.units.OBSERVABLES` in internal units.

References
----------
The formulas are the standard spherical-to-Cartesian transformation of
astrometric data, e.g. ESA 1997, The Hipparcos and Tycho Catalogues, Vol. 1,
Sect. 1.5.6 (normal triad p, q, r).
"""

from __future__ import annotations

import numpy as np

from .units import KMS_PER_MASYR_AT_1MAS as _K
from .units import MAS_PC as _A

__all__ = ["observables_to_cartesian", "cartesian_jacobian", "cartesian_to_observables"]

_DEG = np.pi / 180.0


def _triad(ra_deg, dec_deg):
    """Unit vectors r (radial), p (towards +ra) and q (towards +dec)."""
    a = np.asarray(ra_deg) * _DEG
    d = np.asarray(dec_deg) * _DEG
    ca, sa, cd, sd = np.cos(a), np.sin(a), np.cos(d), np.sin(d)
    zero = np.zeros_like(ca)
    r = np.stack([cd * ca, cd * sa, sd], axis=-1)
    p = np.stack([-sa, ca, zero], axis=-1)
    q = np.stack([-sd * ca, -sd * sa, cd], axis=-1)
    return r, p, q, (ca, sa, cd, sd)


def observables_to_cartesian(observables) -> np.ndarray:
    """Heliocentric position [pc] and velocity [km/s] from observables.

    Parameters
    ----------
    observables : array_like, shape (..., 6)
        (ra [deg], dec [deg], parallax [mas], pmra [mas/yr], pmdec [mas/yr],
        radial_velocity [km/s]); parallax must be positive.

    Returns
    -------
    ndarray, shape (..., 6)
        (x, y, z) [pc] and (vx, vy, vz) [km/s] on ICRS axes.
    """
    obs = np.asarray(observables, dtype=float)
    r, p, q, _ = _triad(obs[..., 0], obs[..., 1])
    plx = obs[..., 2:3]
    dist = _A / plx
    vel = obs[..., 5:6] * r + (_K / plx) * (obs[..., 3:4] * p + obs[..., 4:5] * q)
    return np.concatenate([dist * r, vel], axis=-1)


def cartesian_jacobian(observables) -> np.ndarray:
    """Derivative of :func:`observables_to_cartesian` with respect to the observables.

    Parameters
    ----------
    observables : array_like, shape (..., 6)

    Returns
    -------
    ndarray, shape (..., 6, 6)
        ``J[..., i, j] = d cartesian_i / d observable_j`` in pc or km/s per
        internal unit (deg, mas, mas/yr, km/s).
    """
    obs = np.asarray(observables, dtype=float)
    r, p, q, (ca, sa, cd, sd) = _triad(obs[..., 0], obs[..., 1])
    plx, pmra, pmdec, vr = (obs[..., k : k + 1] for k in (2, 3, 4, 5))
    dist = _A / plx
    zero = np.zeros_like(ca)
    # derivatives of the triad with respect to ra and dec (radians)
    dr_da = cd[..., None] * p
    dr_dd = q
    dp_da = np.stack([-ca, -sa, zero], axis=-1)
    dq_da = np.stack([sd * sa, -sd * ca, zero], axis=-1)
    dq_dd = -r
    k = _K / plx
    jac = np.zeros(obs.shape[:-1] + (6, 6))
    # position
    jac[..., 0:3, 0] = dist * dr_da * _DEG
    jac[..., 0:3, 1] = dist * dr_dd * _DEG
    jac[..., 0:3, 2] = -(dist / plx) * r
    # velocity
    jac[..., 3:6, 0] = (vr * dr_da + k * (pmra * dp_da + pmdec * dq_da)) * _DEG
    jac[..., 3:6, 1] = (vr * dr_dd + k * pmdec * dq_dd) * _DEG
    jac[..., 3:6, 2] = -(k / plx) * (pmra * p + pmdec * q)
    jac[..., 3:6, 3] = k * p
    jac[..., 3:6, 4] = k * q
    jac[..., 3:6, 5] = r
    return jac


def cartesian_to_observables(cartesian) -> np.ndarray:
    """Inverse of :func:`observables_to_cartesian`.

    Parameters
    ----------
    cartesian : array_like, shape (..., 6)
        Position [pc] and velocity [km/s] on ICRS axes; the position must not
        be zero.

    Returns
    -------
    ndarray, shape (..., 6)
        Observables in internal units, ra in [0, 360).
    """
    xv = np.asarray(cartesian, dtype=float)
    x, v = xv[..., :3], xv[..., 3:]
    dist = np.linalg.norm(x, axis=-1)
    ra = np.mod(np.degrees(np.arctan2(x[..., 1], x[..., 0])), 360.0)
    dec = np.degrees(np.arcsin(np.clip(x[..., 2] / dist, -1.0, 1.0)))
    r, p, q, _ = _triad(ra, dec)
    plx = _A / dist
    pmra = np.sum(v * p, axis=-1) * plx / _K
    pmdec = np.sum(v * q, axis=-1) * plx / _K
    vr = np.sum(v * r, axis=-1)
    return np.stack([ra, dec, plx, pmra, pmdec, vr], axis=-1)
