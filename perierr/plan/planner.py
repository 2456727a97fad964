"""A full re-observation plan for one star: what-if, goals, gain curves, global budget."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .._version import __version__
from ..budget import GlobalBudget, global_budget
from ..cautions import HAZARD, Reading, linear_cautions, messages, model_difference
from ..comparison import is_straight_line, orbit_nominal_comparison, straight_line_comparison
from ..models import DEFAULT_MODEL, ForwardModel, make_model
from ..propagate.linear import linearize
from ..star import ObservedStar
from ..thresholds import DEFAULT_THRESHOLDS
from ..units import DEC, OBSERVABLES, PARALLAX
from .curves import GainCurves, gain_curves
from .required import required_precision
from .update import make_measurement
from .whatif import WhatIf, common_draws, scenario_monte_carlo, what_if

__all__ = ["Plan", "plan"]


@dataclass(frozen=True)
class Plan:
    """Everything the planner computed for one star.

    Attributes
    ----------
    star : ObservedStar
    model : dict
    what_if : WhatIf or None
        Current and improved answers for the requested measurements.
    required : list of RequiredPrecision
        One per (goal, input) pair.
    curves : GainCurves or None
    budget : GlobalBudget or None
        Global Shapley budget today.
    budget_improved : GlobalBudget or None
        The same after the what-if measurements (what to measure next after those).
    settings : dict
    cautions : tuple of Caution
        The same cautions ``analyze`` gives for the star's linearization (biased parallax, head-on path,
        d_ph within its sigma), and its model-difference caution, judged on today's draws (the what-if's
        when there is one, else the common draws).
    comparison : dict
        Models other than the straight line: the straight line on today's draws
        (:func:`perierr.comparison.straight_line_comparison`).
    orbit_comparison : dict
        The straight line: the orbit model at the nominal inputs
        (:func:`perierr.comparison.orbit_nominal_comparison`).
    """

    star: ObservedStar
    model: dict
    what_if: WhatIf | None
    required: list
    curves: GainCurves | None
    budget: GlobalBudget | None
    budget_improved: GlobalBudget | None = None
    settings: dict = field(default_factory=dict)
    cautions: tuple = ()
    comparison: dict = field(default_factory=dict)
    orbit_comparison: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """The plan JSON: current and improved side by side; required precisions or reasons."""
        out = {
            "perierr_version": __version__,
            "kind": "plan",
            "model": self.model,
            "star": self.star.to_dict(),
            "what_if": None if self.what_if is None else self.what_if.to_dict(),
            "goals": [r.to_dict() for r in self.required],
            "gain_curves": None if self.curves is None else self.curves.to_dict(),
            "global_budget": None if self.budget is None else self.budget.to_dict(),
            "global_budget_improved": None if self.budget_improved is None else self.budget_improved.to_dict(),
            "settings": dict(self.settings),
            "warnings": messages(self.cautions),
            "notes": list(self.star.notes),
            "caution": HAZARD,
        }
        if self.comparison:
            out["straight_line_comparison"] = self.comparison
        if self.orbit_comparison:
            out["orbit_nominal_comparison"] = self.orbit_comparison
        return out


def plan(
    star: ObservedStar,
    *,
    model: ForwardModel | str = DEFAULT_MODEL,
    measure=None,
    goals=(),
    solve_for=None,
    curves: bool = True,
    budget: bool = True,
    n: int = 20_000,
    n_whatif: int = 100_000,
    seed: int | np.random.Generator | None = None,
    thresholds=DEFAULT_THRESHOLDS,
    curve_threshold: str = "20000 au",
    n_points: int = 20,
    budget_options=None,
    progress=None,
) -> Plan:
    """Plan re-observations of one star.

    Parameters
    ----------
    star : ObservedStar
    model : ForwardModel or str
        A model or a name (:func:`perierr.models.make_model`); the default is
        the Galactic orbit model.
    measure : dict or sequence of Measurement, optional
        What-if measurements, e.g. ``{"radial_velocity": 0.1}`` (catalogue units).
    goals : sequence of Goal
        For each goal and each input of ``solve_for``, the required precision.
    solve_for : sequence of str, optional
        Inputs to solve goals for (default: every input with a non-zero error).
    curves, budget : bool
        Compute gain curves (``n_points`` per input) and the global Shapley budget.
    n : int
        Common draws for curves and goals.
    n_whatif : int
        Draws for the side-by-side what-if summaries.
    seed : int, numpy.random.Generator or None
        One seed for everything; the integer is recorded in the settings
        (see :func:`perierr.sampling.gaussian.resolve_seed`).
    thresholds : sequence
        Thresholds of the what-if summaries.
    curve_threshold : str
        Threshold of the probability curve.
    n_points : int
    budget_options : dict, optional
        Passed to :func:`perierr.budget.global_budget`.
    progress : callable, optional
        ``progress(done, total)`` of the Monte Carlo runs of today's and the improved answer (see
        :func:`perierr.propagate.monte_carlo`); it only reports.
    """
    from ..sampling.gaussian import resolve_seed
    from ..star.checks import require_motion, require_positive_parallax, require_uncertainty

    if isinstance(model, str):
        model = make_model(model)
    # the same checks as analyze(): a perihelion must exist, and there must be an error to plan against
    require_positive_parallax(star.mean[PARALLAX], method="the re-observation planner")
    require_motion(star.mean)
    require_uncertainty(star.sigma)
    seed = resolve_seed(seed)
    dec = float(star.mean[DEC])
    wi = None
    if measure:
        items = measure.items() if isinstance(measure, dict) else None
        ms = [make_measurement(k, v, dec=dec) for k, v in items] if items is not None else list(measure)
        wi = what_if(star, model, ms, n=n_whatif, seed=seed, thresholds=thresholds, progress=progress)
    draws = common_draws(n, seed)
    names = solve_for or [o for o, s in zip(OBSERVABLES, star.sigma) if s > 0]
    required = [required_precision(star, model, name, g, draws=draws) for g in goals for name in names]
    gc = gain_curves(star, model, n_points=n_points, threshold=curve_threshold, draws=draws) if curves else None
    gb = global_budget(star, model, seed=seed, **(budget_options or {})) if budget else None
    gb1 = None
    if budget and wi is not None:
        gb1 = global_budget(wi.improved, model, seed=seed, **(budget_options or {}))
    settings = {"seed": seed, "n": n, "n_whatif": n_whatif if wi is not None else None}
    today = wi.mc_current if wi is not None else scenario_monte_carlo(
        star, model, draws, thresholds=thresholds, progress=progress
    )  # fmt: skip
    comparison, orbit_comparison = {}, {}
    if is_straight_line(model):
        orbit_comparison = orbit_nominal_comparison(star.mean, today)
    else:
        comparison = straight_line_comparison(today, model, star.mean)
    cautions = linear_cautions(star, linearize(star, model))
    differs = model_difference(Reading(star, None, today, False, comparison, orbit_comparison))
    cautions += [] if differs is None else [differs]
    return Plan(
        star, model.describe(), wi, required, gc, gb, gb1, settings, tuple(cautions), comparison, orbit_comparison
    )
