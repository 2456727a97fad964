"""perierr: uncertainty propagation and error budgets for stellar close encounters with the Sun.

perierr turns a star's catalogue solution (position, parallax, proper motion,
their correlations) and radial velocity into the time, distance and speed of
its closest approach to the Sun, with linearized and Monte Carlo intervals and
each measurement's share of the error. It predicts statistical encounters, not
impact hazards.
"""

__version__ = "0.1.0"

from .analysis import Analysis, analyze  # noqa: E402
from .budget import LinearBudget, linear_budget  # noqa: E402
from .errors import InputError, PerierrWarning  # noqa: E402
from .models import ForwardModel, Perihelion, StraightLine, make_model  # noqa: E402
from .propagate import LinearResult, MonteCarloResult, linearize, monte_carlo  # noqa: E402
from .star import ObservedStar, read_catalogue, read_star_file  # noqa: E402

__all__ = [
    "Analysis",
    "ForwardModel",
    "InputError",
    "LinearBudget",
    "LinearResult",
    "MonteCarloResult",
    "ObservedStar",
    "Perihelion",
    "PerierrWarning",
    "StraightLine",
    "__version__",
    "analyze",
    "linear_budget",
    "linearize",
    "make_model",
    "monte_carlo",
    "read_catalogue",
    "read_star_file",
]
