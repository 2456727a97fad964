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
from .sampling.gaussian import resolve_seed
from .shapley_mc import (  # noqa: F401 (re-exported)
    ShapleyEstimate,
    _estimate,
    _group_masks,
    conditional_costs,
    linear_costs,
    shapley_from_costs,
    shapley_gaussian,
)
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
        "seed": seed,
        "n_outer": n_outer,
        "n_inner": n_inner,
        "n_boot": n_boot,
        "width_outer": width_outer if width else None,
        "width_inner": width_inner if width else None,
        "model_calls": 63 * (n_outer * n_inner + (width_outer * width_inner if width else 0)),
    }
    return GlobalBudget(variance, width_est, group_est, lin_var, lin_w, settings)
