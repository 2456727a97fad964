"""Linear motion approximation (LMA): the star and the Sun move on straight lines.

With heliocentric position x and velocity v (constant), the separation
|x + v t| is smallest at ``t_ph = -x.v / |v|^2``; there
``d_ph = |x + v t_ph| = d v_t / |v|`` and ``v_ph = |v|``. In terms of the
observables only the parallax, the total proper motion and the radial velocity
enter: ``t_ph = -d v_r / |v|^2``, with ``d = 1000 / parallax`` and
``v_t = 4.74047 mu / parallax``.

References
----------
Matthews, R. A. J. 1994, QJRAS 35, 1 (the LMA perihelion formulas);
Bailer-Jones, C. A. L. 2015, A&A 575, A35, Sect. 3.
"""

from __future__ import annotations

import numpy as np

from ..frames import cartesian_jacobian, observables_to_cartesian
from ..units import KMS_PER_MASYR_AT_1MAS as _K
from ..units import MAS_PC as _A
from ..units import MYR_PER_PC_PER_KMS as _C
from ..units import PARALLAX, PMDEC, PMRA, RADIAL_VELOCITY
from .base import ForwardModel, Perihelion
from .diagnostics import ModelDiagnostics

__all__ = ["StraightLine", "perihelion_from_cartesian", "perihelion_cartesian_jacobian"]

#: A nominal path with d_ph below this fraction of the star's distance counts as head-on: d_ph has a
#: kink there, its Jacobian row is zero and the analysis says its linear sigma is undefined.
HEAD_ON_RELATIVE = 1e-9


class StraightLine(ForwardModel):
    """Straight-line (linear motion) perihelion model, with an analytic Jacobian.

    Examples
    --------
    >>> import numpy as np
    >>> from perierr.models import StraightLine
    >>> ph = StraightLine().evaluate(np.array([[0.0, 0.0, 100.0, 0.0, 0.0, -10.0]]))
    >>> round(float(ph.time_myr[0]), 4), float(ph.distance_pc[0])
    (0.9778, 0.0)
    """

    name = "straight_line"

    def evaluate(self, observables, *, reference=None, progress=None) -> Perihelion:
        """Perihelion of every row of ``observables`` (shape (n, 6)); see :class:`ForwardModel`.

        ``progress`` is called once, when every row is done (the formulas take milliseconds).
        """
        obs = np.asarray(observables, dtype=float)
        if obs.ndim == 1:
            obs = obs[None, :]
        plx, pmra, pmdec, vr = obs[:, PARALLAX], obs[:, PMRA], obs[:, PMDEC], obs[:, RADIAL_VELOCITY]
        inv = _A / plx  # distance [pc]
        # sqrt of the sum of squares: np.hypot is ~8x slower and proper motions cannot overflow
        vt = (_K * 1e-3) * np.sqrt(pmra * pmra + pmdec * pmdec) * inv  # km/s
        v2 = vr * vr + vt * vt
        at_rest = v2 == 0.0
        if at_rest.any():
            v2 = np.where(at_rest, 1.0, v2)
        speed = np.sqrt(v2)
        t = (-_C) * inv * vr / v2
        d = inv * vt / speed
        flags = None
        if at_rest.any():
            # no relative motion: the separation never changes; report now
            t = np.where(at_rest, 0.0, t)
            d = np.where(at_rest, inv, d)
            speed = np.where(at_rest, 0.0, speed)
            flags = at_rest
        if progress is not None:
            progress(t.size, t.size)
        return Perihelion(t, d, speed, flags=flags, diagnostics=ModelDiagnostics(model=self.name))

    def jacobian(self, point) -> np.ndarray:
        """Analytic (3, 6) Jacobian: d(t_ph, d_ph, v_ph) / d(observables)."""
        point = np.asarray(point, dtype=float)
        xv = observables_to_cartesian(point)
        return perihelion_cartesian_jacobian(xv) @ cartesian_jacobian(point)

    def describe(self) -> dict:
        """Name of the model, for outputs."""
        return {"name": self.name, "description": "linear motion approximation"}


def perihelion_from_cartesian(cartesian) -> np.ndarray:
    """Straight-line perihelion from heliocentric phase space.

    Parameters
    ----------
    cartesian : array_like, shape (..., 6)
        Position [pc] and velocity [km/s].

    Returns
    -------
    ndarray, shape (..., 3)
        t_ph [Myr], d_ph [pc], v_ph [km/s].
    """
    xv = np.asarray(cartesian, dtype=float)
    x, v = xv[..., :3], xv[..., 3:]
    vv = np.sum(v * v, axis=-1)
    ts = -np.sum(x * v, axis=-1) / vv  # pc / (km/s)
    closest = x + v * ts[..., None]
    return np.stack([ts * _C, np.linalg.norm(closest, axis=-1), np.sqrt(vv)], axis=-1)


def perihelion_cartesian_jacobian(cartesian) -> np.ndarray:
    """Derivative of :func:`perihelion_from_cartesian`, shape (..., 3, 6).

    Uses that the separation vector at perihelion is perpendicular to v, so
    ``d d_ph / dx = u`` and ``d d_ph / dv = t_ph u`` with ``u`` the unit
    separation vector. For an exactly head-on encounter d_ph has no
    derivative; its row is then zero.
    """
    xv = np.asarray(cartesian, dtype=float)
    x, v = xv[..., :3], xv[..., 3:]
    vv = np.sum(v * v, axis=-1)[..., None]
    xdv = np.sum(x * v, axis=-1)[..., None]
    ts = -xdv / vv
    closest = x + v * ts
    dist = np.linalg.norm(closest, axis=-1)[..., None]
    with np.errstate(invalid="ignore", divide="ignore"):
        unit = closest / dist
    # exactly head-on, |closest| is rounding noise and d_ph = |closest| has a kink, not a
    # derivative: give the d_ph row zeros (callers warn that its linear sigma is undefined)
    unit = np.where(dist > HEAD_ON_RELATIVE * np.linalg.norm(x, axis=-1)[..., None], unit, 0.0)
    jac = np.zeros(xv.shape[:-1] + (3, 6))
    jac[..., 0, :3] = -v / vv * _C
    jac[..., 0, 3:] = (-x / vv - 2.0 * ts * (v / vv)) * _C  # -x/|v|^2 + 2 (x.v) v/|v|^4, without |v|^4
    jac[..., 1, :3] = unit
    jac[..., 1, 3:] = ts * unit
    jac[..., 2, 3:] = v / np.sqrt(vv)
    return jac
