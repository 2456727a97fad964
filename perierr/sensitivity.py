"""Global error budget: Shapley effects from Monte Carlo, valid for correlated inputs.

The linear budget (:mod:`perierr.budget`) is exact only when the model is
nearly linear over the error ellipsoid. Here the shares are computed from the
model itself, with the subset estimator of Song, Nelson & Staum (2016):

* the **cost** of a subset u of inputs is ``c(u) = E[Var(Y | X_-u)]``, the
  variance left when every input *outside* u is known; it is estimated with
  ``n_outer`` draws of ``X_-u`` from its marginal and ``n_inner`` draws of
  ``X_u`` from the conditional Gaussian ``X_u | X_-u`` (the inner sample
  variance is unbiased, so a small ``n_inner`` such as 3 is efficient);
* the **Shapley effect** of input i is the weighted sum over subsets u not
  containing i of ``c(u + i) - c(u)``, weights ``|u|! (k - |u| - 1)! / k!``;
  the effects sum to ``c(all) = Var(Y)`` and are >= 0 for the variance cost.

All 64 subsets of the six inputs share one set of standard-normal draws
(common random numbers), so differences of costs are not Monte Carlo noise;
confidence intervals come from a bootstrap over the outer draws, done for all
subsets jointly.

**The 90 % interval width** is budgeted with the same game but the cost
``c_W(u) = E[W90(Y | X_-u)]``: the expected width of the central 90 % interval
left when every input outside u is known (conditional quantiles from
``width_inner`` inner draws). Its Shapley shares sum to the width itself;
unlike the variance game it need not be monotone, so a share can be slightly
negative.

**Why an input with no influence can carry a share.** In the straight-line
model ra and dec do not enter the outputs at all, yet a catalogue solution
correlates them with the parallax and proper motion. Knowing ra then narrows
the parallax (through the correlation), so learning ra removes output
variance: ``c(u + ra) - c(u) > 0`` for some u. The Shapley effect credits ra
with that part. Re-observing ra alone does shrink the interval, which is what
the planner (:mod:`perierr.plan`) shows. With independent inputs such an
input gets exactly zero.

References
----------
Song, E., Nelson, B. L. & Staum, J. 2016, SIAM/ASA J. Uncertainty
Quantification 4, 1060 (Shapley effects; the subset estimator).
Owen, A. B. & Prieur, C. 2017, SIAM/ASA JUQ 5, 986 (Shapley effects of
correlated Gaussian inputs; linear closed form).
Iooss, B. & Prieur, C. 2019, Int. J. Uncertainty Quantification 9, 493
(two-input Gaussian linear formula).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ._constants import OBSERVABLES, OUTPUTS
from .errors import InputError
from .models.base import ForwardModel
from .sampling.gaussian import psd_factor, resolve_seed
from .star import ObservedStar

__all__ = [
    "DEFAULT_GROUPS",
    "GlobalBudget",
    "ShapleyEstimate",
    "conditional_costs",
    "global_budget",
    "linear_costs",
    "shapley_from_costs",
    "shapley_gaussian",
]

#: z of the central 90 % interval of a Gaussian: the width is 2 z sigma.
Z90 = 1.6448536269514722

#: Named partitions of the six inputs into groups a user re-observes together.
DEFAULT_GROUPS = {
    "astrometry_vs_rv": {
        "astrometry": ("ra", "dec", "parallax", "pmra", "pmdec"),
        "radial_velocity": ("radial_velocity",),
    },
    "by_kind": {
        "position": ("ra", "dec"),
        "parallax": ("parallax",),
        "proper_motion": ("pmra", "pmdec"),
        "radial_velocity": ("radial_velocity",),
    },
}

_BUDGET_OUTPUTS = ("time_myr", "distance_pc")


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
        tuple(players), tuple(outputs), shares, low.T, high.T, shares_b.std(axis=-1, ddof=1).T,
        total, confidence,
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
    func, mean, cov, *, players, outputs, n_outer=2000, n_inner=3, n_boot=200, seed=None,
    statistic="variance", confidence=0.95,
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


@dataclass(frozen=True)
class GlobalBudget:
    """Monte Carlo Shapley budget of t_ph and d_ph, with groups and the linear comparison.

    Attributes
    ----------
    variance : ShapleyEstimate
        Shares of Var(t_ph), Var(d_ph) per input.
    width : ShapleyEstimate or None
        Shares of the 90 % interval widths per input.
    groups : dict
        Partition name -> ShapleyEstimate of the variance over its groups.
    linear_variance, linear_width : ndarray, shape (2, 6)
        Closed-form shares of the linearized Gaussian model.
    settings : dict
        Sample sizes and seed.
    """

    variance: ShapleyEstimate
    width: ShapleyEstimate | None
    groups: dict
    linear_variance: np.ndarray
    linear_width: np.ndarray
    settings: dict = field(default_factory=dict)

    def nonlinearity(self) -> dict:
        """Per output: largest |global - linear| variance share, and where they disagree.

        An input whose linear share lies outside the bootstrap interval marks
        where the model is not linear over the error ellipsoid.
        """
        out = {}
        for j, q in enumerate(self.variance.outputs):
            diff = self.variance.shares[j] - self.linear_variance[j]
            outside = (self.linear_variance[j] < self.variance.low[j] - 1e-12) | (
                self.linear_variance[j] > self.variance.high[j] + 1e-12
            )
            out[q] = {
                "max_abs_difference": float(np.max(np.abs(diff))),
                "inputs_outside_interval": [OBSERVABLES[i] for i in np.flatnonzero(outside)],
                "agrees_with_linear": not bool(outside.any()),
            }
        return out

    def to_dict(self) -> dict:
        """JSON block of the global budget."""
        out = {
            "method": "Shapley effects, Monte Carlo with conditional Gaussian sampling "
            "(Song, Nelson & Staum 2016); bootstrap intervals",
            "variance": self.variance.to_dict(),
            "width90": None if self.width is None else self.width.to_dict(),
            "groups": {name: est.to_dict() for name, est in self.groups.items()},
            "linear": {
                "variance": _table(self.variance.outputs, self.linear_variance),
                "width90": _table(self.variance.outputs, self.linear_width),
            },
            "nonlinearity": self.nonlinearity(),
            "settings": dict(self.settings),
        }
        return out


def _table(outputs, shares) -> dict:
    return {q: dict(zip(OBSERVABLES, row.tolist())) for q, row in zip(outputs, shares)}


def global_budget(
    star: ObservedStar,
    model: ForwardModel,
    *,
    outputs=_BUDGET_OUTPUTS,
    n_outer: int = 2000,
    n_inner: int = 3,
    width: bool = True,
    width_outer: int = 128,
    width_inner: int = 256,
    n_boot: int = 200,
    groups=None,
    seed=None,
    confidence: float = 0.95,
) -> GlobalBudget:
    """Global (Monte Carlo) Shapley budget of a star's perihelion.

    Parameters
    ----------
    star : ObservedStar
    model : ForwardModel
    outputs : sequence of str
        Output names from ``OUTPUTS`` (default t_ph and d_ph).
    n_outer, n_inner : int
        Design of the variance game (``n_outer * n_inner * 63`` model calls).
    width : bool
        Also budget the 90 % interval width (``width_outer * width_inner * 63`` calls).
    width_outer, width_inner : int
    n_boot : int
        Bootstrap resamples of the outer draws.
    groups : dict, optional
        Partition name -> {group name: input names}; default :data:`DEFAULT_GROUPS`.
    seed : int or None
    confidence : float

    Returns
    -------
    GlobalBudget

    Raises
    ------
    InputError
        If the nominal parallax is <= 0, or so uncertain that draws reach
        parallax <= 0 (the outputs are then undefined for those draws).
    """
    for q in outputs:
        if q not in OUTPUTS:
            raise InputError("outputs", q, f"expected names from {OUTPUTS}")
    if not star.mean[2] > 0:
        raise InputError("parallax", float(star.mean[2]), "the global budget inverts the parallax; expected > 0")
    z = star.mean[2] / star.sigma[2] if star.sigma[2] > 0 else math.inf
    if z < 5.5:
        raise InputError(
            "parallax_error",
            float(star.sigma[2]),
            f"parallax / error = {z:.2g} < 5.5: conditional draws would reach parallax <= 0 where "
            "the perihelion is undefined; use the linear budget or a distance prior",
        )
    seed = resolve_seed(seed)
    rng = np.random.default_rng(seed)
    cols = [OUTPUTS.index(q) for q in outputs]
    mean = np.array(star.mean)

    def func(x):
        return model.evaluate(x, reference=mean).as_array()[:, cols]

    stats_v = conditional_costs(func, mean, star.cov, n_outer=n_outer, n_inner=n_inner, rng=rng)
    variance = _estimate(stats_v, OBSERVABLES, outputs, rng, n_boot, confidence)
    group_est = {}
    for name, partition in (DEFAULT_GROUPS if groups is None else groups).items():
        names, masks = _group_masks(partition)
        group_est[name] = _estimate(stats_v, names, outputs, rng, n_boot, confidence, masks)
    width_est = None
    if width:
        stats_w = conditional_costs(
            func, mean, star.cov, n_outer=width_outer, n_inner=width_inner, rng=rng, statistic="width"
        )
        width_est = _estimate(stats_w, OBSERVABLES, outputs, rng, n_boot, confidence)
    jac = np.asarray(model.jacobian(mean), dtype=float)[cols]
    lin = linear_costs(jac, star.cov)
    lin_total = np.where(lin[-1] > 0, lin[-1], 1.0)
    lin_var = (shapley_from_costs(lin) / lin_total).T
    wcost = 2 * Z90 * np.sqrt(np.maximum(lin, 0.0))
    lin_w = (shapley_from_costs(wcost) / np.where(wcost[-1] > 0, wcost[-1], 1.0)).T
    settings = {
        "seed": seed, "n_outer": n_outer, "n_inner": n_inner, "n_boot": n_boot,
        "width_outer": width_outer if width else None, "width_inner": width_inner if width else None,
        "model_calls": 63 * (n_outer * n_inner + (width_outer * width_inner if width else 0)),
    }
    return GlobalBudget(variance, width_est, group_est, lin_var, lin_w, settings)
