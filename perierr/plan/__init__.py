"""Re-observation planner: which measurement to take next, and how good it must be.

* :func:`what_if` - today's answer and the answer after a hypothetical new
  measurement, on common random numbers;
* :func:`gain_curves` - width, sigma and a threshold probability vs precision;
* :func:`required_precision` - the largest precision reaching a goal, or the
  floor that makes it unreachable;
* :func:`cheapest_combination` - the cheapest set of new measurements of several inputs that reaches a goal,
  given a cost per measurement;
* :func:`rank_measurements` - (star, measurement) pairs for a proposal,
  optionally per telescope hour (:class:`PhotonLimitedCost`);
* :func:`rank_targets` - a ranked, costed target list of star x measurement x precision (``perierr
  targets``);
* :func:`preposterior` - the chance that a measurement settles a question, its value drawn from today's
  predictive distribution (beside the "lands on today's mean" convention of the rest);
* :func:`plan` - all of it for one star.

perierr predicts statistical encounters, not impact hazards.
"""

from .cost import PhotonLimitedCost, Reference, TableCost
from .curves import GainCurves, gain_curves
from .goals import Goal, decide_goal, parse_goal, spread_goal
from .joint import JointRequirement, cheapest_combination
from .planner import Plan, plan
from .preposterior import FutureOutcomes, PosteriorAnswer, Preposterior, preposterior
from .rank import Ranking, rank_measurements
from .required import RequiredPrecision, required_precision
from .targets import TargetList, UnreadStar, rank_targets
from .update import Measurement, make_measurement, parse_measure, update_covariance, updated_star
from .whatif import CommonDraws, WhatIf, common_draws, scenario_metrics, what_if

__all__ = [
    "CommonDraws",
    "FutureOutcomes",
    "GainCurves",
    "Goal",
    "JointRequirement",
    "Measurement",
    "PhotonLimitedCost",
    "Plan",
    "PosteriorAnswer",
    "Preposterior",
    "Ranking",
    "Reference",
    "RequiredPrecision",
    "TableCost",
    "TargetList",
    "UnreadStar",
    "WhatIf",
    "cheapest_combination",
    "common_draws",
    "decide_goal",
    "gain_curves",
    "make_measurement",
    "parse_goal",
    "parse_measure",
    "plan",
    "preposterior",
    "rank_measurements",
    "rank_targets",
    "required_precision",
    "scenario_metrics",
    "spread_goal",
    "update_covariance",
    "updated_star",
    "what_if",
]
