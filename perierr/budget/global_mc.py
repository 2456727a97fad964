"""Global error budget: Shapley effects estimated from the model itself, by Monte Carlo.

The linear budget (:mod:`.linear`) is exact only when the model is nearly
linear over the error ellipsoid. Here the shares come from the model, with the
subset estimator of Song, Nelson & Staum (2016):

* the **cost** of a subset u of inputs is ``c(u) = E[Var(Y | X_-u)]``, the
  variance left when every input *outside* u is known; it is estimated with
  ``n_outer`` draws of ``X_-u`` from its marginal and ``n_inner`` draws of
  ``X_u`` from the conditional Gaussian ``X_u | X_-u`` (the inner sample
  variance is unbiased, so a small ``n_inner`` such as 3 is efficient);
* the **Shapley effect** of input i is the weighted sum over subsets u not
  containing i of ``c(u + i) - c(u)`` (:mod:`.game`); the effects sum to
  ``c(all) = Var(Y)``.

All subsets share one set of standard-normal draws (common random numbers), so
differences of costs are not Monte Carlo noise; intervals come from a
bootstrap over the outer draws, for all subsets jointly. The conditional
draws are made in correlation coordinates (:func:`.game.conditional_map`), so
the estimate does not depend on the units of the inputs. The estimator itself,
for any vectorized function of Gaussian inputs, is :mod:`.estimator`; this
module applies it to a star's perihelion.

**The 90 % interval width** is budgeted with the same game but the cost
``c_W(u) = E[W90(Y | X_-u)]``: the expected width of the central 90 % interval
left when every input outside u is known. Its shares sum to the width itself;
unlike the variance game it need not be monotone, so a share can be slightly
negative.

**Why an input with no influence can carry a share.** In the straight-line
model ra and dec do not enter the outputs at all, yet a catalogue solution
correlates them with the parallax and proper motion. Knowing ra then narrows
the parallax (through the correlation), so learning ra removes output
variance. The Shapley effect credits ra with that part; with independent
inputs such an input gets exactly zero.

References
----------
Song, E., Nelson, B. L. & Staum, J. 2016, SIAM/ASA JUQ 4, 1060 (Shapley effects; the subset estimator).
Owen, A. B. & Prieur, C. 2017, SIAM/ASA JUQ 5, 986 (Gaussian inputs; linear closed form).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from ..models.base import ForwardModel
from ..sampling.gaussian import resolve_seed
from ..units import OBSERVABLES, OUTPUTS, PARALLAX
from .estimator import ShapleyEstimate, _estimate, conditional_costs, shapley_gaussian
from .game import group_masks, members, shapley_values
from .linear import clip_rounding, extend_inputs, linear_costs

__all__ = [
    "DEFAULT_GROUPS",
    "GlobalBudget",
    "ShapleyEstimate",
    "conditional_costs",
    "global_budget",
    "shapley_gaussian",
]

#: z of the central 90 % interval of a Gaussian: the width is 2 z sigma.
Z90 = 1.6448536269514722

#: Named partitions of the six inputs into groups a user re-observes together
#: (an extra input such as the star's mass is added as a group of its own).
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
    linear_variance, linear_width : ndarray, shape (m, k)
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

    @property
    def inputs(self) -> tuple:
        """Names of the budget's inputs (columns of every share table)."""
        return self.variance.players

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
                "inputs_outside_interval": [self.inputs[i] for i in np.flatnonzero(outside)],
                "agrees_with_linear": not bool(outside.any()),
            }
        return out

    def to_dict(self) -> dict:
        """JSON block of the global budget."""
        return {
            "method": "Shapley effects, Monte Carlo with conditional Gaussian sampling "
            "(Song, Nelson & Staum 2016); bootstrap intervals",
            "inputs": list(self.inputs),
            "variance": self.variance.to_dict(),
            "width90": None if self.width is None else self.width.to_dict(),
            "groups": {name: est.to_dict() for name, est in self.groups.items()},
            "linear": {
                "variance": self._table(self.linear_variance),
                "width90": self._table(self.linear_width),
            },
            "nonlinearity": self.nonlinearity(),
            "settings": dict(self.settings),
        }

    def _table(self, shares) -> dict:
        return {q: dict(zip(self.inputs, row.tolist())) for q, row in zip(self.variance.outputs, shares)}


def _game_inputs(star, model, cols):
    """Inputs of the game: the six observables, then the model's nuisance parameters (e.g. the mass).

    A nuisance parameter enters the game as its standard-normal deviate (mean 0,
    variance 1), which the model maps to the parameter's own distribution
    (:meth:`~perierr.models.base.ForwardModel.evaluate_nuisance`), so the game
    budgets the same distribution the Monte Carlo draws from.

    Returns the player names, mean, covariance, the function of the inputs and
    the linear gradient (rows ``cols``) at the mean.
    """
    mean6 = np.array(star.mean)
    jac = np.asarray(model.jacobian(mean6), dtype=float)[cols]
    extra = tuple(model.nuisance(mean6))
    if not extra:
        def func(x):
            return model.evaluate(x, reference=mean6).as_array()[:, cols]

        return OBSERVABLES, mean6, np.array(star.cov), func, jac
    columns = np.stack([p.gradient[cols] * math.sqrt(p.variance) for p in extra], axis=1)
    grad, cov = extend_inputs(jac, star.cov, columns, np.ones(len(extra)))

    def func(x):
        return model.evaluate_nuisance(x[:, :6], x[:, 6:], reference=mean6).as_array()[:, cols]

    players = OBSERVABLES + tuple(p.name for p in extra)
    return players, np.concatenate([mean6, np.zeros(len(extra))]), cov, func, grad


def global_budget(
    star,
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
    seed: int | np.random.Generator | None = None,
    confidence: float = 0.95,
) -> GlobalBudget:
    """Global (Monte Carlo) Shapley budget of a star's perihelion.

    Parameters
    ----------
    star : ObservedStar
    model : ForwardModel
        Its nuisance parameters (the star's mass under focusing with a mass
        error) are inputs of the budget after the six observables.
    outputs : sequence of str
        Output names from ``OUTPUTS`` (default t_ph and d_ph).
    n_outer, n_inner : int
        Design of the variance game (``n_outer * n_inner * (2**k - 1)`` model calls).
    width : bool
        Also budget the 90 % interval width (``width_outer * width_inner * (2**k - 1)`` calls).
    width_outer, width_inner : int
    n_boot : int
        Bootstrap resamples of the outer draws.
    groups : dict, optional
        Partition name -> {group name: input names}; default :data:`DEFAULT_GROUPS`.
    seed : int, numpy.random.Generator or None
        One seed for every draw; the integer is recorded (see :func:`perierr.sampling.gaussian.resolve_seed`).
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
    _check_budget_inputs(star, outputs)
    seed = resolve_seed(seed)
    rng = np.random.default_rng(seed)
    cols = [OUTPUTS.index(q) for q in outputs]
    players, mean, cov, func, grad = _game_inputs(star, model, cols)
    stats_v = conditional_costs(func, mean, cov, n_outer=n_outer, n_inner=n_inner, rng=rng)
    variance = _estimate(stats_v, players, outputs, rng, n_boot, confidence)
    group_est = _group_estimates(stats_v, players, outputs, groups, rng, n_boot, confidence)
    width_est = None
    if width:
        stats_w = conditional_costs(
            func, mean, cov, n_outer=width_outer, n_inner=width_inner, rng=rng, statistic="width"
        )
        width_est = _estimate(stats_w, players, outputs, rng, n_boot, confidence)
    lin_var, lin_w = _linear_shares(grad, cov)
    n_subsets = members(len(players)).shape[0] - 1
    settings = {
        "seed": seed,
        "n_outer": n_outer,
        "n_inner": n_inner,
        "n_boot": n_boot,
        "width_outer": width_outer if width else None,
        "width_inner": width_inner if width else None,
        "model_calls": n_subsets * (n_outer * n_inner + (width_outer * width_inner if width else 0)),
    }
    return GlobalBudget(variance, width_est, group_est, lin_var, lin_w, settings)


def _check_budget_inputs(star, outputs) -> None:
    """Raise InputError for an unknown output or a parallax too uncertain for conditional draws."""
    for q in outputs:
        if q not in OUTPUTS:
            raise InputError("outputs", q, f"expected names from {OUTPUTS}")
    if not star.mean[PARALLAX] > 0:
        raise InputError("parallax", float(star.mean[PARALLAX]), "the global budget inverts the parallax; expected > 0")
    z = star.mean[PARALLAX] / star.sigma[PARALLAX] if star.sigma[PARALLAX] > 0 else math.inf
    if z < 5.5:
        raise InputError(
            "parallax_error",
            float(star.sigma[PARALLAX]),
            f"parallax / error = {z:.2g} < 5.5: conditional draws would reach parallax <= 0 where "
            "the perihelion is undefined; use the linear budget or a distance prior",
        )


def _group_estimates(stats_v, players, outputs, groups, rng, n_boot, confidence) -> dict:
    """Variance shares of each partition's groups (an extra input such as the mass is a group of its own)."""
    group_est = {}
    for name, partition in (DEFAULT_GROUPS if groups is None else groups).items():
        partition = dict(partition)
        for extra in players[len(OBSERVABLES) :]:
            partition.setdefault(extra, (extra,))
        names, masks = group_masks(players, partition)
        group_est[name] = _estimate(stats_v, names, outputs, rng, n_boot, confidence, masks)
    return group_est


def _linear_shares(grad, cov):
    """Closed-form variance and 90 % width shares of the linearized model, shape (m, k) each."""
    lin = linear_costs(grad, cov)
    wcost = 2 * Z90 * np.sqrt(lin)
    return tuple(clip_rounding((shapley_values(c) / np.where(c[-1] > 0, c[-1], 1.0)).T) for c in (lin, wcost))
