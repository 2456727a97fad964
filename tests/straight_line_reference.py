"""The straight-line perihelion written out from its formulas, and a test model built on it.

Linear motion approximation, Matthews 1994 (QJRAS 35, 1): t = -r v_r / v^2, d = r v_t / v, v = |v|, with
r = 1000 / parallax and v_t = k mu r / 1000 (k from astropy). Tests compare perierr's outputs with these.
"""

import astropy.units as u
import numpy as np

from perierr.models import StraightLine
from perierr.models.base import ForwardModel, Perihelion

K_KMS = (1.0 * u.au / u.yr).to_value(u.km / u.s)  # astropy: 1 au/yr in km/s
C_MYR = (1.0 * u.pc / (u.km / u.s)).to_value(u.Myr)  # astropy: Myr per pc/(km/s)


def lma(values):
    """Straight-line perihelion (t [Myr], d [pc], v [km/s]) of observables (n, 6)."""
    x = np.atleast_2d(np.asarray(values, dtype=float))
    r = 1000.0 / x[:, 2]
    vt = K_KMS * np.hypot(x[:, 3], x[:, 4]) * r / 1000.0
    v = np.hypot(x[:, 5], vt)
    return np.stack([-C_MYR * r * x[:, 5] / v**2, r * vt / v, v], axis=-1)


class InfiniteDistance(ForwardModel):
    """Test model: the straight line, but the first ``fraction`` of the Monte Carlo draws never come close (inf)."""

    name = "infinite_distance_test"

    def __init__(self, fraction):
        self.fraction = fraction

    def evaluate(self, observables, *, reference=None):
        out = lma(observables)
        d = out[:, 1].copy()
        if reference is not None:
            d[: int(self.fraction * d.size)] = np.inf
        return Perihelion(out[:, 0], d, out[:, 2], info={"model": self.name})

    def jacobian(self, point):
        return StraightLine().jacobian(point)
