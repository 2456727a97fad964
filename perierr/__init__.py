"""perierr: uncertainty propagation and error budgets for stellar close encounters with the Sun.

perierr turns a star's catalogue solution (position, parallax, proper motion,
their correlations) and radial velocity into the time, distance and speed of
its closest approach to the Sun, with linearized and Monte Carlo intervals and
each measurement's share of the error. It predicts statistical encounters, not
impact hazards.

The names a user needs are here. Those that pull in heavier machinery (the
orbit model, the planner, the global budget) are loaded on first use, as are
the subpackages :mod:`perierr.plan`, :mod:`perierr.priors`,
:mod:`perierr.budget` and :mod:`perierr.models`, so ``import perierr`` stays
quick and ``perierr.plan.rank_measurements`` works after it.
"""

from ._lazy import lazy_names
from ._version import __version__
from .analysis import Analysis, analyze
from .budget import LinearBudget, linear_budget
from .errors import InputError, PerierrError, PerierrWarning
from .models import ForwardModel, Perihelion, StraightLine, make_model
from .propagate import LinearResult, MonteCarloResult, linearize, monte_carlo
from .star import ObservedStar, read_catalogue, read_star_file

#: Names loaded on first use (PEP 562): name -> the module that defines it.
_LAZY = {
    "GlobalBudget": "perierr.budget",
    "OrbitModel": "perierr.models.orbit",
    "PhotonLimitedCost": "perierr.plan",
    "Potential": "perierr.models.orbit",
    "get_solar_parameters": "perierr.models.orbit",
    "global_budget": "perierr.budget",
    "rank_measurements": "perierr.plan",
    "run_catalogue": "perierr.catalogue",
}

#: Subpackages reachable as attributes of ``perierr`` without importing them first.
_SUBPACKAGES = (
    "budget", "calibration", "catalogue", "comparison", "models", "plan", "priors", "progress", "propagate", "report",
    "sampling", "star",
)  # fmt: skip

__all__ = [
    "Analysis",
    "ForwardModel",
    "GlobalBudget",
    "InputError",
    "LinearBudget",
    "LinearResult",
    "MonteCarloResult",
    "ObservedStar",
    "OrbitModel",
    "Perihelion",
    "PerierrError",
    "PerierrWarning",
    "PhotonLimitedCost",
    "Potential",
    "StraightLine",
    "__version__",
    "analyze",
    "get_solar_parameters",
    "global_budget",
    "linear_budget",
    "linearize",
    "make_model",
    "monte_carlo",
    "rank_measurements",
    "read_catalogue",
    "read_star_file",
    "run_catalogue",
]

__getattr__, __dir__ = lazy_names(__name__, globals(), _LAZY, _SUBPACKAGES)
