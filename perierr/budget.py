"""Linearized error budget: each input's share of an output's variance.

Two shares per input are reported:

* **Shapley effects** of the linearized Gaussian model: the average, over all
  orders of learning the inputs, of the variance explained when input i is
  learnt. Non-negative and summing to 1 also for correlated inputs (Song,
  Nelson & Staum 2016, SIAM/ASA JUQ 4, 1060; Owen & Prieur 2017, SIAM/ASA JUQ
  5, 986). With independent inputs they reduce to ``J_i^2 sigma_i^2 / Var``.
* **Covariance contributions** ``J_i (Sigma J^T)_i / Var``: they sum to 1 but
  can be negative when correlations cancel, which makes them hard to read as
  "what to re-observe"; they are shown for comparison.

For a linear model Y = J.X with Gaussian X the cost of a subset u is the
closed form ``c(u) = E[Var(Y | X_-u)] = J_u^T (S_uu - S_u,-u S_-u,-u^+ S_-u,u) J_u``,
evaluated over the 64 subsets of the six inputs.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from ._constants import OBSERVABLES, OUTPUTS

__all__ = ["LinearBudget", "linear_budget", "gaussian_linear_shapley"]


@dataclass(frozen=True)
class LinearBudget:
    """Shares of Var(t_ph), Var(d_ph), Var(v_ph) per input (linearized).

    Attributes
    ----------
    shapley : ndarray, shape (3, 6)
        Shapley shares (rows: outputs in ``OUTPUTS`` order; columns: inputs in
        ``OBSERVABLES`` order); each row sums to 1.
    covariance : ndarray, shape (3, 6)
        Covariance contributions; rows sum to 1, entries may be negative.
    variance : ndarray, shape (3,)
        Linear variance of each output.
    """

    shapley: np.ndarray
    covariance: np.ndarray
    variance: np.ndarray

    def share(self, output: str, kind: str = "shapley") -> dict:
        """Shares of one output as ``{input: share}``."""
        table = {"shapley": self.shapley, "covariance": self.covariance}[kind]
        return dict(zip(OBSERVABLES, table[OUTPUTS.index(output)].tolist()))

    def dominant(self, output: str = "distance_pc") -> str:
        """The input with the largest Shapley share of an output."""
        row = self.shapley[OUTPUTS.index(output)]
        return OBSERVABLES[int(np.argmax(row))]

    def to_dict(self) -> dict:
        """``{output: {input: share}}`` plus the covariance contributions."""
        out = {q: self.share(q) for q in OUTPUTS}
        out["covariance_contributions"] = {q: self.share(q, "covariance") for q in OUTPUTS}
        out["method"] = "linearized Shapley effects (closed form, Gaussian inputs)"
        return out


def gaussian_linear_shapley(gradient, cov) -> np.ndarray:
    """Shapley effects of ``Y = gradient . X`` with ``X ~ N(mu, cov)``.

    Parameters
    ----------
    gradient : array_like, shape (m, k)
        One row per output.
    cov : array_like, shape (k, k)

    Returns
    -------
    ndarray, shape (m, k)
        Shares of each output's variance (rows sum to 1; a zero-variance
        output gets zeros).
    """
    g = np.atleast_2d(np.asarray(gradient, dtype=float))
    s = np.asarray(cov, dtype=float)
    k = s.shape[0]
    full = np.arange(k)
    cost = {}
    for size in range(k + 1):
        for subset in itertools.combinations(range(k), size):
            u = np.array(subset, dtype=int)
            rest = np.setdiff1d(full, u)
            if u.size == 0:
                cost[subset] = np.zeros(g.shape[0])
                continue
            cond = s[np.ix_(u, u)]
            if rest.size:
                cross = s[np.ix_(u, rest)]
                cond = cond - cross @ np.linalg.pinv(s[np.ix_(rest, rest)], hermitian=True) @ cross.T
            gu = g[:, u]
            cost[subset] = np.einsum("mi,ij,mj->m", gu, cond, gu)
    total = cost[tuple(range(k))]
    effects = np.zeros_like(g)
    for i in range(k):
        others = [j for j in range(k) if j != i]
        for size in range(k):
            weight = math.factorial(size) * math.factorial(k - size - 1) / math.factorial(k)
            for subset in itertools.combinations(others, size):
                with_i = tuple(sorted(subset + (i,)))
                effects[:, i] += weight * (cost[with_i] - cost[subset])
    safe = np.where(total > 0, total, 1.0)
    shares = np.where(total[:, None] > 0, effects / safe[:, None], 0.0)
    # the game is monotone, so effects are >= 0 up to rounding
    return np.where(np.abs(shares) < 1e-12, 0.0, shares)


def linear_budget(jacobian, cov) -> LinearBudget:
    """Linearized budget of the three outputs.

    Parameters
    ----------
    jacobian : array_like, shape (3, 6)
    cov : array_like, shape (6, 6)
    """
    j = np.asarray(jacobian, dtype=float)
    s = np.asarray(cov, dtype=float)
    var = np.einsum("mi,ij,mj->m", j, s, j)
    safe = np.where(var > 0, var, 1.0)
    contrib = j * (j @ s) / safe[:, None]
    contrib = np.where(var[:, None] > 0, contrib, 0.0)
    return LinearBudget(gaussian_linear_shapley(j, s), contrib, var)
