"""Prior densities on the distance r [pc] of a star.

Each prior is a small object with a vectorized, normalized (where possible)
``log_density(r)`` and the ``name`` and ``parameters`` written to every output.
The distance posterior of one parallax under a prior (:func:`log_distance_posterior`,
:func:`posterior_mode`) lives in :mod:`.distance_posterior` and is re-exported here.

Inverting a Gaussian parallax is itself a prior: the draws of 1/parallax have
the density the Gaussian implies, which is biased and improper for weak or
negative parallaxes (Bailer-Jones 2015, PASP 127, 994). :class:`NoPrior` keeps
that behaviour; every other prior here is proper.

References
----------
Bailer-Jones, C. A. L. 2015, PASP 127, 994 (EDSD prior and its posterior mode).
Bailer-Jones, C. A. L., Rybizki, J., Fouesneau, M., Demleitner, M., Andrae, R.
2021, AJ 161, 147 (generalized gamma prior).
"""

from __future__ import annotations

import abc
import math

import astropy.units as u
import numpy as np

from ..errors import InputError
from ..units import to_number
from .distance_posterior import log_distance_posterior, posterior_mode

__all__ = [
    "DistancePrior",
    "NoPrior",
    "ExponentialDensity",
    "GeneralizedGamma",
    "UniformDensity",
    "CustomPrior",
    "TablePrior",
    "log_distance_posterior",
    "posterior_mode",
]


def _length_pc(field, value) -> float:
    """A positive length in pc from a number (pc), Quantity or string (``"1.35 kpc"``)."""
    out = to_number(field, value, u.pc, text_needs_unit=False, example="1.35 kpc", noun="a length")
    if not out > 0:
        raise InputError(field, value, "expected a positive, finite length in pc")
    return out


def _number(field, value, *, low=None, low_open=True) -> float:
    """A finite plain number, above ``low`` if given."""
    out = to_number(field, value, None)
    if low is not None and (out <= low if low_open else out < low):
        raise InputError(field, value, f"expected a number {'>' if low_open else '>='} {low}")
    return out


class DistancePrior(abc.ABC):
    """Base class: a prior density on distance r [pc] (r > 0).

    Subclasses set :attr:`name` and implement :meth:`log_density` and
    :attr:`parameters`.
    """

    #: Short identifier written to outputs.
    name: str = "abstract"
    #: False only for the implicit prior of parallax inversion.
    proper: bool = True

    @property
    @abc.abstractmethod
    def parameters(self) -> dict:
        """JSON-able parameters (lengths in pc)."""

    @abc.abstractmethod
    def log_density(self, r) -> np.ndarray:
        """Log prior density at distances ``r`` [pc], shape like ``r``.

        ``-inf`` outside the support. Built-in priors are normalized (1/pc).
        """

    @property
    def support(self) -> tuple:
        """(lowest, highest) distance with non-zero density [pc]."""
        return (0.0, math.inf)

    def log_weight(self, r) -> np.ndarray:
        """``ln P(r) + 2 ln r`` for distances ``r > 0`` [pc]: the log importance weight.

        Subclasses may override it with a form needing one logarithm (speed).
        """
        r = np.asarray(r, dtype=float)
        return self.log_density(r) + 2.0 * np.log(r)

    def density(self, r) -> np.ndarray:
        """Prior density at ``r`` [pc] (``exp`` of :meth:`log_density`)."""
        return np.exp(self.log_density(r))

    def to_dict(self) -> dict:
        """``{"name": ..., "parameters": {...}}``."""
        return {"name": self.name, "parameters": self.parameters}

    def __repr__(self) -> str:
        args = ", ".join(f"{k}={v!r}" for k, v in self.parameters.items())
        return f"{type(self).__name__}({args})"


class NoPrior(DistancePrior):
    """No explicit prior: distances are 1000 / parallax of the Gaussian draws.

    The implied prior depends on the data and is improper for parallaxes
    near or below zero; kept for comparison and as today's default.
    """

    name = "none"
    proper = False

    @property
    def parameters(self) -> dict:
        """JSON-able parameters (lengths in pc)."""
        return {}

    def log_density(self, r) -> np.ndarray:
        """Log prior density at ``r`` [pc]; ``-inf`` outside the support."""
        raise TypeError("NoPrior has no density of its own: it is plain parallax inversion")


class ExponentialDensity(DistancePrior):
    """Exponentially decreasing space density (EDSD) with length scale L.

    ``P(r) = r^2 exp(-r / L) / (2 L^3)`` for r > 0; its mode is at 2L
    (Bailer-Jones 2015, PASP 127, 994, eq. 18).

    Parameters
    ----------
    length_scale : float, Quantity or str
        L [pc].
    """

    name = "edsd"

    def __init__(self, length_scale):
        self.length_scale = _length_pc("L", length_scale)

    @property
    def parameters(self) -> dict:
        """JSON-able parameters (lengths in pc)."""
        return {"L_pc": self.length_scale}

    def log_density(self, r) -> np.ndarray:
        """Log prior density at ``r`` [pc]; ``-inf`` outside the support."""
        r = np.asarray(r, dtype=float)
        big_l = self.length_scale
        with np.errstate(divide="ignore", invalid="ignore"):
            out = 2.0 * np.log(r) - r / big_l - math.log(2.0) - 3.0 * math.log(big_l)
        return np.where((r > 0) & (r < math.inf), out, -np.inf)  # no density at r = +inf (inf - inf is NaN)

    def log_weight(self, r) -> np.ndarray:
        """``ln P(r) + 2 ln r`` for ``r > 0`` (one logarithm)."""
        r = np.asarray(r, dtype=float)
        big_l = self.length_scale
        return 4.0 * np.log(r) - r / big_l - (math.log(2.0) + 3.0 * math.log(big_l))


class GeneralizedGamma(DistancePrior):
    """Generalized gamma distribution of distance.

    ``P(r) = alpha / (Gamma((beta + 1) / alpha) L^(beta + 1)) r^beta exp(-(r / L)^alpha)``
    for r > 0 (Bailer-Jones et al. 2021, AJ 161, 147, eq. 3); alpha = 1,
    beta = 2 is the EDSD prior.

    Parameters
    ----------
    alpha : float
        > 0.
    beta : float
        > -1 (so the density is normalizable).
    length_scale : float, Quantity or str
        L [pc].
    """

    name = "generalized_gamma"

    def __init__(self, alpha, beta, length_scale):
        from scipy.special import gammaln  # here, not at import: scipy.special costs start-up time

        self.alpha = _number("alpha", alpha, low=0.0)
        self.beta = _number("beta", beta, low=-1.0)
        self.length_scale = _length_pc("L", length_scale)
        a, b, big_l = self.alpha, self.beta, self.length_scale
        self._log_norm = math.log(a) - gammaln((b + 1.0) / a) - (b + 1.0) * math.log(big_l)

    @property
    def parameters(self) -> dict:
        """JSON-able parameters (lengths in pc)."""
        return {"alpha": self.alpha, "beta": self.beta, "L_pc": self.length_scale}

    def log_density(self, r) -> np.ndarray:
        """Log prior density at ``r`` [pc]; ``-inf`` outside the support."""
        r = np.asarray(r, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):  # (r/L)^alpha -> inf: density 0
            out = self._log_norm + self.beta * np.log(r) - (r / self.length_scale) ** self.alpha
        return np.where((r > 0) & (r < math.inf), out, -np.inf)  # no density at r = +inf (inf - inf is NaN)

    def log_weight(self, r) -> np.ndarray:
        """``ln P(r) + 2 ln r`` for ``r > 0`` (one logarithm)."""
        r = np.asarray(r, dtype=float)
        x = r / self.length_scale
        if self.alpha != 1.0:
            x = x**self.alpha
        return (self.beta + 2.0) * np.log(r) - x + self._log_norm


class UniformDensity(DistancePrior):
    """Uniform space density out to r_max: ``P(r) = 3 r^2 / r_max^3`` on (0, r_max].

    Parameters
    ----------
    r_max : float, Quantity or str
        Outer distance [pc].
    """

    name = "uniform_density"

    def __init__(self, r_max):
        self.r_max = _length_pc("r_max", r_max)

    @property
    def parameters(self) -> dict:
        """JSON-able parameters (lengths in pc)."""
        return {"r_max_pc": self.r_max}

    @property
    def support(self) -> tuple:
        """(lowest, highest) distance with non-zero density [pc]."""
        return (0.0, self.r_max)

    def log_density(self, r) -> np.ndarray:
        """Log prior density at ``r`` [pc]; ``-inf`` outside the support."""
        r = np.asarray(r, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            out = math.log(3.0) + 2.0 * np.log(r) - 3.0 * math.log(self.r_max)
        return np.where((r > 0) & (r <= self.r_max), out, -np.inf)


class CustomPrior(DistancePrior):
    """A user-supplied density: a vectorized callable ``f(r_pc) -> density >= 0``.

    It need not be normalized. Values must be finite and non-negative; a
    density that does not fall off at large r makes the posterior improper
    for a parallax near or below zero, which :func:`perierr.priors.posterior_samples`
    detects and refuses.

    Parameters
    ----------
    function : callable
        Maps an array of distances [pc] to an array of densities (same shape).
    label : str, optional
        Recorded in outputs (default: the function's name).
    r_max : float, optional
        Upper end of the support [pc] (default unbounded).
    """

    name = "custom"

    def __init__(self, function, *, label=None, r_max=None):
        if not callable(function):
            raise InputError("distance prior", function, "expected a callable f(r_pc) -> density")
        self.function = function
        self.label = str(label or getattr(function, "__name__", "callable"))
        self.r_max = math.inf if r_max is None else _length_pc("r_max", r_max)

    @property
    def parameters(self) -> dict:
        """JSON-able parameters (lengths in pc)."""
        out = {"function": self.label}
        if math.isfinite(self.r_max):
            out["r_max_pc"] = self.r_max
        return out

    @property
    def support(self) -> tuple:
        """(lowest, highest) distance with non-zero density [pc]."""
        return (0.0, self.r_max)

    def log_density(self, r) -> np.ndarray:
        """Log prior density at ``r`` [pc]; ``-inf`` outside the support."""
        r = np.asarray(r, dtype=float)
        inside = (r > 0) & (r <= self.r_max)
        out = np.full(r.shape, -np.inf)
        if not inside.any():
            return out
        vals = np.asarray(self.function(r[inside]), dtype=float)
        if vals.shape != r[inside].shape:
            raise InputError(
                "distance prior", self.label,
                f"the callable returned shape {vals.shape} for input shape {r[inside].shape}; "
                "it must be vectorized (one density per distance)",
            )
        bad = ~np.isfinite(vals) | (vals < 0)
        if bad.any():
            where = r[inside][bad][0]
            raise InputError(
                "distance prior", self.label,
                f"the callable returned {vals[bad][0]!r} at r = {where:.6g} pc; "
                "expected finite densities >= 0",
            )
        with np.errstate(divide="ignore"):
            out[inside] = np.log(vals)
        return out


class TablePrior(DistancePrior):
    """A tabulated density, linearly interpolated, zero outside the table.

    Parameters
    ----------
    distance : array_like, shape (m,)
        Strictly increasing distances [pc], > 0, m >= 2.
    density : array_like, shape (m,)
        Densities >= 0 (not necessarily normalized), not all zero.
    label : str
        Recorded in outputs (e.g. the file name).
    """

    name = "table"

    def __init__(self, distance, density, *, label="table"):
        r = np.asarray(distance, dtype=float).reshape(-1)
        p = np.asarray(density, dtype=float).reshape(-1)
        if r.size < 2 or r.shape != p.shape:
            raise InputError("distance prior table", f"{r.size} distances, {p.size} densities",
                             "expected two columns of equal length >= 2 (distance in pc, density)")
        if not (np.all(np.isfinite(r)) and np.all(np.isfinite(p))):
            raise InputError("distance prior table", "non-finite entries", "expected finite numbers")
        if r[0] <= 0 or np.any(np.diff(r) <= 0):
            raise InputError("distance prior table", "distance column",
                             "expected strictly increasing distances > 0 pc")
        if np.any(p < 0) or not np.any(p > 0):
            raise InputError("distance prior table", "density column",
                             "expected densities >= 0, not all zero")
        self.distance, self.table_density, self.label = r, p, str(label)

    @classmethod
    def from_file(cls, path) -> TablePrior:
        """Read two columns (distance [pc], density) from a text file (``#`` comments)."""
        try:
            data = np.loadtxt(path, comments="#", delimiter=None, ndmin=2)
        except OSError:
            raise InputError("distance prior table", str(path), "file not found or unreadable") from None
        except ValueError:
            try:
                data = np.loadtxt(path, comments="#", delimiter=",", ndmin=2)
            except ValueError as exc:
                raise InputError("distance prior table", str(path),
                                 f"expected two numeric columns: distance [pc], density ({exc})") from None
        if data.shape[1] != 2:
            raise InputError("distance prior table", str(path),
                             f"expected 2 columns (distance [pc], density), found {data.shape[1]}")
        return cls(data[:, 0], data[:, 1], label=str(path))

    @property
    def parameters(self) -> dict:
        """JSON-able parameters (lengths in pc)."""
        return {"table": self.label, "n_rows": int(self.distance.size),
                "r_min_pc": float(self.distance[0]), "r_max_pc": float(self.distance[-1])}

    @property
    def support(self) -> tuple:
        """(lowest, highest) distance with non-zero density [pc]."""
        return (float(self.distance[0]), float(self.distance[-1]))

    def log_density(self, r) -> np.ndarray:
        """Log prior density at ``r`` [pc]; ``-inf`` outside the support."""
        r = np.asarray(r, dtype=float)
        p = np.interp(r, self.distance, self.table_density, left=0.0, right=0.0)
        with np.errstate(divide="ignore"):
            return np.log(p)
