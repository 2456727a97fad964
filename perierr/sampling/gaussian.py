"""Gaussian draws of the observables from a star's mean and covariance."""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError

__all__ = ["SEED_TYPES", "Samples", "draw_gaussian", "psd_factor", "require_draws", "resolve_seed"]

#: Peak memory per Monte Carlo draw, bytes: measured about 110 for the straight line and 900 for the
#: orbit model (benchmarks/), rounded up.
BYTES_PER_DRAW = 1000


@dataclass(frozen=True)
class Samples:
    """Draws of the six observables, optionally weighted.

    Attributes
    ----------
    values : ndarray, shape (n, 6)
        Observables in internal units.
    weights : ndarray, shape (n,), or None
        Importance weights (None means equal weights).
    method : str
        How the samples were made (``"gaussian"``, ``"reweight"``, ``"mcmc"``).
    seed : int or None
        The seed that reproduces them.
    info : dict
        Sampler diagnostics (effective sample size, autocorrelation time ...).
    """

    values: np.ndarray
    weights: np.ndarray | None = None
    method: str = "gaussian"
    seed: int | None = None
    info: dict = field(default_factory=dict)

    @property
    def n(self) -> int:
        """Number of samples."""
        return int(self.values.shape[0])

    @property
    def effective_size(self) -> float:
        """Kish effective sample size ``(sum w)^2 / sum w^2`` (n when unweighted)."""
        if self.weights is None:
            return float(self.n)
        w = self.weights
        return float(w.sum() ** 2 / np.dot(w, w))


def psd_factor(cov) -> np.ndarray:
    """Lower-triangular factor L with ``L @ L.T == cov`` for a PSD matrix.

    A Cholesky decomposition that tolerates zero pivots (inputs held exact or
    perfectly correlated): a pivot below rounding level zeroes its column. It
    has no sign ambiguity, so the same seed gives the same draws on any
    machine, unlike an eigen-decomposition.

    Parameters
    ----------
    cov : array_like, shape (k, k)
        Symmetric positive semi-definite matrix.

    Returns
    -------
    ndarray, shape (k, k)
    """
    a = np.array(cov, dtype=float)
    k = a.shape[0]
    scale = np.sqrt(np.diag(a))
    safe = np.where(scale > 0, scale, 1.0)
    r = a / np.outer(safe, safe)  # correlation-scaled, so one tolerance fits all
    low = np.zeros_like(r)
    for j in range(k):
        pivot = r[j, j] - np.dot(low[j, :j], low[j, :j])
        if scale[j] == 0 or pivot <= 1e-12:
            continue
        low[j, j] = np.sqrt(pivot)
        low[j + 1 :, j] = (r[j + 1 :, j] - low[j + 1 :, :j] @ low[j, :j]) / low[j, j]
    return low * safe[:, None]


def require_draws(n, *, field: str = "samples", minimum: int = 100) -> int:
    """A number of draws that is a whole number >= ``minimum`` and fits in this machine's memory.

    Raises
    ------
    InputError
        Naming ``field``, the value and what would be accepted.
    """
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < minimum:
        raise InputError(field, n, f"expected a whole number of draws >= {minimum}")
    try:
        total = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):  # not POSIX: let numpy's MemoryError speak
        return int(n)
    if n * BYTES_PER_DRAW > 0.8 * total:
        most = int(0.8 * total / BYTES_PER_DRAW)
        raise InputError(
            field,
            int(n),
            f"needs about {n * BYTES_PER_DRAW / 2**30:,.0f} GiB of memory and this machine has "
            f"{total / 2**30:.0f} GiB; use at most about {most:,} draws",
        )
    return int(n)


#: What ``seed`` accepts, in words (error messages and docstrings).
SEED_TYPES = "a non-negative integer, a numpy.random.Generator or None"


def resolve_seed(seed: int | np.random.Generator | None) -> int:
    """The integer seed a computation runs with and records, so that its result can be re-run.

    The rule, the same for every function of perierr that takes ``seed``:

    * an integer >= 0 is used as it is;
    * ``None`` picks a fresh 63-bit seed from the operating system's entropy;
    * a :class:`numpy.random.Generator` gives one 63-bit integer
      (``seed.integers(2**63)``, which advances the generator by one draw), and
      the computation then proceeds exactly as with that integer.

    The result records the integer, so passing it back reproduces the result;
    a generator in the same state gives the same integer, hence the same result.

    Parameters
    ----------
    seed : int, numpy.random.Generator or None

    Returns
    -------
    int
        In ``[0, 2**63)`` for ``None`` and generators.

    Raises
    ------
    InputError
        For anything else (a negative number, a bool, a float, a legacy ``RandomState``).

    Examples
    --------
    >>> import numpy as np
    >>> resolve_seed(7)
    7
    >>> resolve_seed(np.random.default_rng(7)) == resolve_seed(np.random.default_rng(7))
    True
    """
    if seed is None:
        return int(np.random.SeedSequence().entropy % (2**63))
    if isinstance(seed, np.random.Generator):
        return int(seed.integers(2**63))
    if isinstance(seed, (int, np.integer)) and not isinstance(seed, bool) and seed >= 0:
        return int(seed)
    raise InputError("seed", seed, f"expected {SEED_TYPES}")


def draw_gaussian(mean, cov, n, rng) -> np.ndarray:
    """Draw ``n`` rows from the 6-D Gaussian N(mean, cov).

    Parameters
    ----------
    mean : array_like, shape (6,)
    cov : array_like, shape (6, 6)
    n : int
    rng : numpy.random.Generator

    Returns
    -------
    ndarray, shape (n, 6)
    """
    low = psd_factor(cov)
    # draw (k, n) so that each observable is contiguous in memory: the (n, k) result
    # is a Fortran-ordered view, which makes column-wise model evaluation faster
    z = rng.standard_normal((low.shape[0], int(n)))
    out = low @ z
    out += np.asarray(mean, dtype=float)[:, None]
    return out.T
