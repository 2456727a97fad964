"""Monte Carlo Shapley effects: the subset estimator with conditional Gaussian draws.

The machinery behind :func:`perierr.sensitivity.global_budget` (see its module
docstring for the method): Shapley weights, the cost of every subset of inputs
estimated from one set of common draws, bootstrap intervals, group shares, and
the linear closed-form costs used as the check.

References
----------
Song, E., Nelson, B. L. & Staum, J. 2016, SIAM/ASA J. Uncertainty
Quantification 4, 1060 (Shapley effects; the subset estimator).
Owen, A. B. & Prieur, C. 2017, SIAM/ASA JUQ 5, 986 (linear closed form).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ._constants import OBSERVABLES
from .errors import InputError
from .sampling.gaussian import psd_factor, resolve_seed

__all__ = ["ShapleyEstimate", "conditional_costs", "linear_costs", "shapley_from_costs", "shapley_gaussian"]


def _shapley_matrix(k: int) -> np.ndarray:
    """Matrix M (2^k, k) with Shapley_i = sum_mask M[mask, i] c[mask] (bit j = player j)."""
    m = np.zeros((2**k, k))
    weight = [math.factorial(s) * math.factorial(k - s - 1) / math.factorial(k) for s in range(k)]
    sizes = np.array([bin(mask).count("1") for mask in range(2**k)])
    for i in range(k):
        bit = 1 << i
        for mask in range(2**k):
            if mask & bit:
                continue
            w = weight[sizes[mask]]
            m[mask | bit, i] += w
            m[mask, i] -= w
    return m


def shapley_from_costs(costs) -> np.ndarray:
    """Shapley values from the costs of all subsets.

    Parameters
    ----------
    costs : array_like, shape (2^k, ...)
        Cost of each subset, indexed by bitmask (bit i set = player i in u);
        ``costs[0]`` (empty set) should be 0.

    Returns
    -------
    ndarray, shape (k, ...)
        Shapley values; they sum to ``costs[-1] - costs[0]``.
    """
    c = np.asarray(costs, dtype=float)
    k = int(round(math.log2(c.shape[0])))
    if 2**k != c.shape[0]:
        raise InputError("costs", c.shape, "expected 2^k rows, one per subset bitmask")
    return np.tensordot(_shapley_matrix(k).T, c, axes=(1, 0))


def _conditional_maps(cov: np.ndarray, mask: int):
    """For subset u (mask): indices u, -u, gain A = S_u,-u S_-u,-u^+ and factor of S_u|-u."""
    k = cov.shape[0]
    u = np.array([i for i in range(k) if mask >> i & 1], dtype=int)
    rest = np.array([i for i in range(k) if not mask >> i & 1], dtype=int)
    if rest.size == 0:
        return u, rest, np.zeros((u.size, 0)), psd_factor(cov)
    cross = cov[np.ix_(u, rest)]
    gain = cross @ np.linalg.pinv(cov[np.ix_(rest, rest)], hermitian=True)
    cond = cov[np.ix_(u, u)] - gain @ cross.T
    cond = 0.5 * (cond + cond.T)
    return u, rest, gain, psd_factor(cond)


def conditional_costs(func, mean, cov, *, n_outer, n_inner, rng, statistic="variance", level=0.9):
    """Per-outer-draw conditional statistics for every subset of inputs.

    Parameters
    ----------
    func : callable
        ``func(x)`` with ``x`` of shape (n, k) returns shape (n, m).
    mean : array_like, shape (k,)
    cov : array_like, shape (k, k)
    n_outer, n_inner : int
        Outer draws of ``X_-u`` and inner draws of ``X_u | X_-u`` per outer draw.
    rng : numpy.random.Generator
    statistic : {"variance", "width"}
        Inner sample variance, or the width of the central ``level`` interval.
    level : float

    Returns
    -------
    ndarray, shape (2^k, m, n_outer)
        Conditional statistic of each output for each subset and outer draw
        (row 0, the empty subset, is 0).
    """
    mu = np.asarray(mean, dtype=float)
    s = np.asarray(cov, dtype=float)
    k = mu.size
    outer = rng.standard_normal((n_outer, k)) @ psd_factor(s).T + mu
    z_inner = rng.standard_normal((n_outer, n_inner, k))
    stats = None
    for mask in range(1, 2**k):
        u, rest, gain, low = _conditional_maps(s, mask)
        x = np.broadcast_to(outer[:, None, :], (n_outer, n_inner, k)).copy()
        centre = mu[u] + (outer[:, rest] - mu[rest]) @ gain.T  # (n_outer, |u|)
        x[:, :, u] = centre[:, None, :] + z_inner[:, :, u] @ low.T
        y = np.asarray(func(x.reshape(-1, k)), dtype=float).reshape(n_outer, n_inner, -1)
        if stats is None:
            stats = np.zeros((2**k, y.shape[-1], n_outer))
        if statistic == "variance":
            stats[mask] = y.var(axis=1, ddof=1).T
        else:
            lo, hi = np.quantile(y, [0.5 - level / 2, 0.5 + level / 2], axis=1)
            stats[mask] = (hi - lo).T
    return stats


@dataclass(frozen=True)
class ShapleyEstimate:
    """Shapley shares of one game (inputs or groups) for several outputs.

    Attributes
    ----------
    players : tuple of str
    outputs : tuple of str
    shares : ndarray, shape (m, k)
        Shares of each output's total (rows sum to 1).
    low, high : ndarray, shape (m, k)
        Bootstrap percentile interval of each share (``confidence`` level).
    se : ndarray, shape (m, k)
        Bootstrap standard error.
    total : ndarray, shape (m,)
        The quantity shared out (Var(Y) or the 90 % width), in output units
        (squared for the variance).
    confidence : float
    """

    players: tuple
    outputs: tuple
    shares: np.ndarray
    low: np.ndarray
    high: np.ndarray
    se: np.ndarray
    total: np.ndarray
    confidence: float = 0.95

    def share(self, output: str) -> dict:
        """``{player: share}`` for one output."""
        return dict(zip(self.players, self.shares[self.outputs.index(output)].tolist()))

    def to_dict(self) -> dict:
        """``{output: {player: {"share", "low", "high", "se"}, "total": ...}}``."""
        out = {}
        for j, q in enumerate(self.outputs):
            row = {
                p: {
                    "share": float(self.shares[j, i]),
                    "low": float(self.low[j, i]),
                    "high": float(self.high[j, i]),
                    "se": float(self.se[j, i]),
                }
                for i, p in enumerate(self.players)
            }
            row["total"] = float(self.total[j])
            out[q] = row
        out["confidence"] = self.confidence
        return out


def _estimate(stats, players, outputs, rng, n_boot, confidence, groups_masks=None):
    """Shares and bootstrap intervals from per-outer statistics (2^k, m, n_outer)."""
    n_outer = stats.shape[-1]
    costs = stats.mean(axis=-1)  # (2^k, m)
    counts = rng.multinomial(n_outer, np.full(n_outer, 1.0 / n_outer), size=n_boot)  # (B, n)
    boot = stats @ counts.T / n_outer  # (2^k, m, B)
    if groups_masks is not None:
        costs, boot = costs[groups_masks], boot[groups_masks]
    eff = shapley_from_costs(costs)  # (k, m)
    eff_b = shapley_from_costs(boot)  # (k, m, B)
    total, total_b = costs[-1], boot[-1]
    shares = (eff / np.where(total > 0, total, 1.0)).T
    shares_b = eff_b / np.where(total_b > 0, total_b, 1.0)
    a = 100 * (1 - confidence) / 2
    low, high = np.percentile(shares_b, [a, 100 - a], axis=-1)
    return ShapleyEstimate(
        tuple(players),
        tuple(outputs),
        shares,
        low.T,
        high.T,
        shares_b.std(axis=-1, ddof=1).T,
        total,
        confidence,
    )


def _group_masks(groups: dict) -> tuple:
    """Input-level bitmask of every union of groups, and the group names."""
    names = tuple(groups)
    seen = []
    group_bits = []
    for name in names:
        bits = 0
        for member in groups[name]:
            if member not in OBSERVABLES:
                raise InputError("groups", member, f"expected input names from {OBSERVABLES}")
            if member in seen:
                raise InputError("groups", member, "each input must belong to exactly one group")
            seen.append(member)
            bits |= 1 << OBSERVABLES.index(member)
        group_bits.append(bits)
    if len(seen) != len(OBSERVABLES):
        missing = [o for o in OBSERVABLES if o not in seen]
        raise InputError("groups", missing, "the groups must cover all six inputs (a partition)")
    masks = np.zeros(2 ** len(names), dtype=int)
    for gmask in range(2 ** len(names)):
        masks[gmask] = sum(b for g, b in enumerate(group_bits) if gmask >> g & 1)
    return names, masks


def shapley_gaussian(
    func,
    mean,
    cov,
    *,
    players,
    outputs,
    n_outer=2000,
    n_inner=3,
    n_boot=200,
    seed=None,
    statistic="variance",
    confidence=0.95,
) -> ShapleyEstimate:
    """Shapley shares of any vectorized function of Gaussian inputs.

    Parameters
    ----------
    func : callable
        ``(n, k) -> (n, m)``.
    mean : array_like, shape (k,)
    cov : array_like, shape (k, k)
    players : sequence of str, length k
    outputs : sequence of str, length m
    n_outer, n_inner, n_boot : int
    seed : int or None
    statistic : {"variance", "width"}
    confidence : float
        Level of the bootstrap percentile intervals.
    """
    rng = np.random.default_rng(resolve_seed(seed))
    stats = conditional_costs(func, mean, cov, n_outer=n_outer, n_inner=n_inner, rng=rng, statistic=statistic)
    return _estimate(stats, players, outputs, rng, n_boot, confidence)


def linear_costs(jacobian, cov) -> np.ndarray:
    """Closed-form costs ``E[Var(Y | X_-u)]`` of the linear Gaussian model, shape (2^k, m).

    ``J_u (S_uu - S_u,-u S_-u,-u^+ S_-u,u) J_u^T`` (Owen & Prieur 2017).
    """
    j = np.atleast_2d(np.asarray(jacobian, dtype=float))
    s = np.asarray(cov, dtype=float)
    k = s.shape[0]
    out = np.zeros((2**k, j.shape[0]))
    for mask in range(1, 2**k):
        u, _, _, low = _conditional_maps(s, mask)
        ju = j[:, u] @ low
        out[mask] = np.einsum("mi,mi->m", ju, ju)
    return out
