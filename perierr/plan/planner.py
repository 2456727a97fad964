"""A full re-observation plan for one star: what-if, goals, gain curves, global budget.

:func:`plan` takes every star :func:`perierr.analyze` takes, with the same options: the parallax
zero-point and error inflation are applied first (:class:`perierr.calibration.Calibration`, as in
``analyze``), focusing wraps the model as in ``analyze``, and under a distance prior every answer is a
posterior (prior x Gaussian likelihood, the likelihood sharpened by the hypothetical measurements; see
:mod:`perierr.plan.whatif`). The linearized parts (the linear and global budgets) need a positive nominal
parallax; where they cannot be computed they are None and a caution says why.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from .._version import __version__
from ..budget import GlobalBudget, global_budget
from ..calibration import ZERO_POINT, CalibrationInfo
from ..cautions import (
    HAZARD,
    Caution,
    Reading,
    emit,
    from_warnings,
    linear_cautions,
    messages,
    model_difference,
    reading_cautions,
    unique,
)
from ..comparison import is_straight_line, orbit_nominal_comparison, straight_line_comparison
from ..errors import InputError, PerierrWarning
from ..models import DEFAULT_MODEL, ForwardModel
from ..models.base import Nuisance
from ..propagate.linear import linearize
from ..star import ObservedStar
from ..summary import DEFAULT_LEVELS
from ..thresholds import DEFAULT_THRESHOLDS
from ..units import DEC, OBSERVABLES, PARALLAX
from .curves import GainCurves, gain_curves
from .required import required_precision
from .update import make_measurement
from .whatif import (
    WhatIf,
    _check_prior_method,
    _reference,
    _scenario_samples,
    _what_if,
    common_draws,
    prepare,
    require_plannable,
    resolve_plan_prior,
    scenario_monte_carlo,
)

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
    today : MonteCarloResult or None
        Today's answer (the what-if's current one when there is a what-if, else on the common draws);
        under a distance prior the posterior, with its effective sample size.
    prior : dict or None
        The distance prior (name, parameters, the samplers used and today's effective sample size).
    calibration : CalibrationInfo or None
        The zero-point and error inflation applied first (``star`` is the calibrated star).
    settle : tuple of Preposterior
        For the what-if measurements: the chance that they settle each decisive goal (or "does it pass within
        the curves' threshold?"), their value drawn from today's predictive distribution
        (:func:`perierr.plan.preposterior.preposterior`).
    joint : tuple of JointRequirement
        With ``combine``: for each goal, the cheapest combination of new measurements of those inputs that
        reaches it (:func:`perierr.plan.joint.cheapest_combination`).
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
    today: object = None
    prior: dict | None = None
    calibration: CalibrationInfo | None = None
    settle: tuple = ()
    joint: tuple = ()

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
        if self.prior is not None:
            out["prior"] = dict(self.prior)
        if self.calibration is not None:
            out["calibration"] = self.calibration.to_dict()
        if self.settle:
            out["settle"] = [p.to_dict() for p in self.settle]
        if self.joint:
            out["joint"] = [j.to_dict() for j in self.joint]
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
    distance_prior=None,
    prior_method: str = "auto",
    parallax_offset=None,
    error_inflation=None,
    focusing: bool = False,
    futures: int = 200,
    future_draws: int = 2000,
    combine=None,
    cost=None,
    settle_alpha: float = 0.05,
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
    distance_prior : str or prior object, optional
        A distance prior, as in :func:`perierr.analyze`. Every answer is then the posterior, with the
        what-if measurements sharpening the likelihood and the prior kept (:mod:`perierr.plan.whatif`);
        a weak or non-positive parallax is accepted. Without a prior a nominal parallax <= 0 is refused.
    prior_method : {"auto", "reweight", "mcmc"}
        How today's and the what-if's answers are sampled, as in ``analyze``; curves and goals always
        reweight the common draws (with a caution when the effective sample size is small).
    parallax_offset, error_inflation
        Zero-point (value, error) and error inflation, applied first with ``analyze``'s function; the
        zero-point's error is an input of the budgets of its own. A what-if parallax measurement combines
        with the corrected catalogue parallax (the update acts on the calibrated covariance).
    focusing : bool
        Wrap the model in the two-body focusing of the star's mass, as ``analyze`` does.

    futures, future_draws : int
        The chance that the what-if measurements settle each decisive goal (or, with none, "does it pass within
        ``curve_threshold``?"): that many future values drawn from today's predictive distribution, each answered
        with ``future_draws`` draws (:func:`perierr.plan.preposterior.preposterior`); ``futures=0`` leaves it out.
    settle_alpha : float
        The decisiveness level of that default question (a decisive goal keeps its own).
    combine : sequence of str, optional
        Inputs to measure together: for each goal, the cheapest combination of new measurements of them that
        reaches it (:func:`perierr.plan.joint.cheapest_combination`, on the plan's common draws).
    cost : object or callable, optional
        The cost of a measurement for ``combine``: a cost model with ``hours(input, precision, magnitude)``
        (:class:`~perierr.plan.cost.PhotonLimitedCost`, a table of hours) or ``cost(input, precision)``; the
        default counts effort relative to today's measurement, ``(today's error / precision)^2``.

    Returns
    -------
    Plan
    """
    from ..sampling.gaussian import resolve_seed
    from ..star.checks import require_motion, require_uncertainty

    if futures and not (isinstance(futures, (int, np.integer)) and futures >= 20):  # before any work
        raise InputError("futures", futures, "0 (off) or a whole number of at least 20 possible outcomes")
    if futures and not (isinstance(future_draws, (int, np.integer)) and future_draws >= 100):
        raise InputError("future_draws", future_draws, "a whole number of at least 100 draws per outcome")
    if combine and not goals:
        raise InputError("combine", ",".join(combine), "a goal to reach (a width, sigma or decisive goal)")
    catalogue = star
    star, model, calibration = prepare(
        star, model, parallax_offset=parallax_offset, error_inflation=error_inflation, focusing=focusing
    )
    prior = resolve_plan_prior(distance_prior)
    prior_method = _check_prior_method(prior_method)
    # the same checks as analyze(): a perihelion must exist, and there must be an error to plan against
    require_plannable(star, prior)
    require_motion(star.mean)
    require_uncertainty(star.sigma)
    seed = resolve_seed(seed)
    calibration_block = calibration.info(catalogue) if calibration.active else None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PerierrWarning)
        found, parts = _plan_parts(
            star, model, calibration, calibration_block, prior, prior_method, measure=measure, goals=goals,
            solve_for=solve_for, curves=curves, budget=budget, n=n, n_whatif=n_whatif, seed=seed,
            thresholds=thresholds, curve_threshold=curve_threshold, n_points=n_points,
            budget_options=budget_options, progress=progress, futures=futures, future_draws=future_draws,
            combine=combine, cost=cost, settle_alpha=settle_alpha,
        )  # fmt: skip
    lower = from_warnings(caught)
    emit(lower)  # the lower layers' warnings reach the caller as before, and stay with the plan
    parts["cautions"] = tuple(unique(lower + found))
    return Plan(**parts)


def _plan_parts(
    star, model, calibration, calibration_block, prior, prior_method, *, measure, goals, solve_for, curves, budget,
    n, n_whatif, seed, thresholds, curve_threshold, n_points, budget_options, progress, futures, future_draws,
    combine, cost, settle_alpha,
) -> tuple:  # fmt: skip
    """The plan's pieces on the prepared star and model: (cautions found, the fields of :class:`Plan`)."""
    dec = float(star.mean[DEC])
    positive = star.mean[PARALLAX] > 0
    wi = None
    if measure:
        items = measure.items() if isinstance(measure, dict) else None
        ms = [make_measurement(k, v, dec=dec) for k, v in items] if items is not None else list(measure)
        wi = _what_if(
            star, model, ms, calibration, calibration_block, n=n_whatif, seed=seed, draws=None, levels=DEFAULT_LEVELS,
            thresholds=thresholds, progress=progress, distance_prior=prior, prior_method=prior_method,
        )  # fmt: skip
    found = []
    settle = ()
    if measure and futures:
        settle, why = _settle(star, model, ms, goals, curve_threshold, prior, seed, thresholds, futures, future_draws,
                              settle_alpha)
        found += why
    draws = common_draws(n, seed)
    names = solve_for or [o for o, s in zip(OBSERVABLES, star.sigma) if s > 0]
    required = [
        required_precision(star, model, name, g, draws=draws, distance_prior=prior) for g in goals for name in names
    ]
    joint = ()
    if combine:
        joint = _joint(star, model, goals, combine, cost, draws, prior)
    gc = None
    if curves:
        gc = gain_curves(star, model, n_points=n_points, threshold=curve_threshold, draws=draws, distance_prior=prior)
    gb = gb1 = None
    if budget:
        gb, why = _global_budget(star, model, calibration, seed, budget_options)
        if why is not None:
            found.append(Caution("budget-not-computed", f"the global budget was not computed: {why}", "caution",
                                 "budget"))  # fmt: skip
        if gb is not None and wi is not None:
            gb1, _ = _global_budget(wi.improved, model, None, seed, budget_options)
            if calibration is not None and calibration.zero_point_error > 0 and gb1 is not None:
                # the update acts on the calibrated parallax: its error then holds the zero-point's
                found.append(Caution(
                    "budget-zero-point-folded", "after the what-if measurement the global budget counts the "
                    "parallax zero-point's error within the parallax (the linear budgets keep it apart)", "note",
                    "budget"))  # fmt: skip
    settings = {"seed": seed, "n": n, "n_whatif": n_whatif if wi is not None else None}
    if joint:
        settings["cost_unit"] = "today's efforts: (today's error / precision)^2" if cost is None else "hours"
    if wi is not None:
        today = wi.mc_current
    elif prior is None:
        today = scenario_monte_carlo(star, model, draws, thresholds=thresholds, progress=progress)
    else:
        today = _prior_today(star, model, draws, prior, prior_method, thresholds, progress)
    reference = star.mean if positive else _reference(star, today.samples)
    comparison, orbit_comparison = {}, {}
    if is_straight_line(model):
        if reference[PARALLAX] > 0:
            orbit_comparison = orbit_nominal_comparison(reference, today)
    else:
        comparison = straight_line_comparison(today, model, reference)
    linear = linearize(star, model) if positive else None
    prior_block = None
    if prior is None:
        found += linear_cautions(star, linear)
        differs = model_difference(Reading(star, None, today, False, comparison, orbit_comparison))
        found += [] if differs is None else [differs]
    else:
        found += reading_cautions(star, linear, today, True, comparison=comparison, orbit_comparison=orbit_comparison)
        prior_block = {
            "name": prior.name,
            "parameters": prior.parameters,
            "prior_method": prior_method,
            "today_method": today.samples.method,
            "today_effective_size": today.samples.effective_size,
            "curves_and_goals": "the common draws weighted by the prior (importance reweighting)",
        }
        settings["distance_prior"] = {"name": prior.name, "parameters": prior.parameters}
        found += _prior_cautions(star, budget, gb, positive)
    return found, {
        "star": star, "model": model.describe(), "what_if": wi, "required": required, "curves": gc, "budget": gb,
        "budget_improved": gb1, "settings": settings, "comparison": comparison, "orbit_comparison": orbit_comparison,
        "today": today, "prior": prior_block, "calibration": calibration_block, "settle": settle,
        "joint": joint,
    }  # fmt: skip


def relative_effort(star):
    """The default cost of ``combine``: effort relative to today's measurement, ``(today's error / precision)^2``.

    A photon-limited measurement's time grows as the inverse square of its precision (common practice, no source),
    so this is the number of today's observing efforts a precision takes; 0 for "not measured".
    """
    from ..units import errors_to_catalogue

    today = dict(zip(OBSERVABLES, errors_to_catalogue(star.sigma, star.mean[DEC]).tolist()))

    def cost(name, precision):
        return (today[name] / precision) ** 2 if precision > 0 else float("inf")

    return cost


def _joint(star, model, goals, combine, cost, draws, prior) -> tuple:
    """The cheapest combination of the ``combine`` inputs for each goal (on the plan's common draws)."""
    from .joint import cheapest_combination

    unit = "h" if cost is not None else "x today's effort"
    cost = relative_effort(star) if cost is None else cost
    return tuple(cheapest_combination(star, model, g, list(combine), cost, draws=draws, distance_prior=prior,
                                      cost_unit=unit) for g in goals)  # fmt: skip


def _settle(star, model, ms, goals, curve_threshold, prior, seed, thresholds, futures, future_draws,
            alpha=0.05) -> tuple:
    """The chance that the measurements settle each decisive goal: (Preposterior per goal, cautions)."""
    from ..errors import InputError
    from .goals import decide_goal
    from .preposterior import preposterior

    decisive = [g for g in goals if g.kind == "decide"] or [decide_goal(curve_threshold, alpha)]
    out, found = [], []
    if star.mean[PARALLAX] <= 0:  # the models take the nominal star as their reference point
        why = ("the nominal parallax is <= 0, and the possible outcomes are answered around the nominal star even "
               "under a distance prior (not built yet: measure first, or plan from the prior's answer)")
        return (), [Caution("settle-not-computed", f"the chance that the new data settle '{g.describe()}' was not "
                            f"computed: {why}", "caution", "plan") for g in decisive]  # fmt: skip
    for g in decisive:
        try:
            out.append(preposterior(star, model, ms, goal=g, n_future=futures, n_inner=future_draws, seed=seed,
                                    prior=prior, thresholds=thresholds))  # fmt: skip
        except InputError as exc:
            found.append(Caution("settle-not-computed", f"the chance that the new data settle '{g.describe()}' was "
                                 f"not computed: {exc}", "caution", "plan"))  # fmt: skip
    return tuple(out), found


def _prior_today(star, model, draws, prior, prior_method, thresholds, progress):
    """Today's posterior under the prior on the plan's common draws (or MCMC where ``analyze`` would run it)."""
    from ..propagate.montecarlo import nuisance_rng, propagate_samples

    samples = _scenario_samples(star, prior, draws, prior_method)
    return propagate_samples(
        samples, model, reference=_reference(star, samples), rng=nuisance_rng(draws.seed), thresholds=thresholds,
        progress=progress,
    )  # fmt: skip


def _prior_cautions(star, budget, gb, positive) -> list:
    """What a reader of a plan under a distance prior should know about its budgets."""
    if not (budget and gb is not None and positive):
        return []
    return [Caution(
        "budget-likelihood",
        "the budgets (global and linear) share out the Gaussian catalogue errors: the distance prior is not in "
        "them, while the intervals, probabilities, curves and goals are those of the posterior",
        "note", "budget",
    )]  # fmt: skip


def _global_budget(star, model, calibration, seed, budget_options):
    """The global budget, with the zero-point as an input of its own; (None, reason) where it cannot be computed."""
    zero_error = 0.0 if calibration is None else float(calibration.zero_point_error)
    game_star, game_model = star, model
    if zero_error > 0:
        cov = np.array(star.cov)
        cov[PARALLAX, PARALLAX] -= zero_error**2
        game_star = ObservedStar(np.array(star.mean), cov, name=star.name, source_id=star.source_id,
                                 ref_epoch=star.ref_epoch, mass=star.mass, mass_error=star.mass_error)  # fmt: skip
        game_model = _ZeroPoint(model, zero_error)
    try:
        return global_budget(game_star, game_model, seed=seed, **(budget_options or {})), None
    except InputError as err:
        if err.field not in ("parallax", "parallax_error"):
            raise
        return None, err.expected


class _ZeroPoint(ForwardModel):
    """A model whose first nuisance parameter is the parallax zero-point (for the global budget only).

    The star given with it carries the catalogue parallax variance (the zero-point's taken out); a deviate
    u of the zero-point lowers the corrected parallax by ``sigma_Z u`` (corrected = catalogue - Z), so its
    gradient is ``- d output / d parallax`` as in :meth:`perierr.calibration.Calibration.budget_inputs`.
    """

    def __init__(self, base, zero_point_error):
        self.base = base
        self.sigma = float(zero_point_error)
        self.name = base.name

    def describe(self) -> dict:
        return self.base.describe()

    def evaluate(self, observables, *, reference=None, progress=None):
        return self.base.evaluate(observables, reference=reference)

    def jacobian(self, point):
        return self.base.jacobian(point)

    def nuisance(self, point) -> tuple:
        grad = -np.asarray(self.base.jacobian(point), dtype=float)[:, PARALLAX]
        return (Nuisance(ZERO_POINT, grad, self.sigma**2),) + tuple(self.base.nuisance(point))

    def evaluate_nuisance(self, observables, deviates, *, reference=None):
        x = np.array(observables, dtype=float)
        u = np.asarray(deviates, dtype=float).reshape(x.shape[0], -1)
        x[:, PARALLAX] -= self.sigma * u[:, 0]
        if u.shape[1] > 1:
            return self.base.evaluate_nuisance(x, u[:, 1:], reference=reference)
        return self.base.evaluate(x, reference=reference)
