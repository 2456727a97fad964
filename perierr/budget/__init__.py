"""Error budgets: which input sets the error, by Shapley effects.

One engine for every budget: :mod:`.game` (subsets, exact weights, groups,
conditional Gaussians in correlation coordinates), :mod:`.linear` (closed form
of the linearized model, batched over stars), :mod:`.estimator` (the Monte Carlo
Shapley estimator with bootstrap intervals) and :mod:`.global_mc` (that estimate
from the perihelion model itself).
"""

from .game import group_masks, shapley_values
from .global_mc import DEFAULT_GROUPS, GlobalBudget, ShapleyEstimate, global_budget, shapley_gaussian
from .inputs import budget_inputs, star_budget
from .linear import LinearBudget, extend_inputs, linear_budget, linear_costs, linear_shapley

__all__ = [
    "DEFAULT_GROUPS",
    "GlobalBudget",
    "LinearBudget",
    "budget_inputs",
    "ShapleyEstimate",
    "extend_inputs",
    "global_budget",
    "group_masks",
    "linear_budget",
    "linear_costs",
    "linear_shapley",
    "shapley_gaussian",
    "shapley_values",
    "star_budget",
]
