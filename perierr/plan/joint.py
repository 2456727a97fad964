"""The cheapest combination of new measurements of several inputs that reaches a goal.

:func:`~perierr.plan.required.required_precision` answers "how precise must this
one input be?". Often no single input can reach a goal cheaply (or at all)
while two modest measurements can: :func:`cheapest_combination` searches the
new precisions of two or three inputs together and returns the combination
with the fewest telescope hours that reaches the goal.

Method
------
Every candidate is a scenario on common random numbers
(:func:`~perierr.plan.whatif.scenario_metrics`): today's covariance, updated
in turn (inputs in the fixed order of ``OBSERVABLES``) by
:func:`~perierr.plan.update.update_covariance` for each measured input. The
goal's statistic is then a deterministic, nearly smooth function of the new
precisions, and differences between candidates are the measurements' effect,
not Monte Carlo noise. A precision ``s`` of an input whose error today is
``sigma`` is written ``v = ln(sigma^2 / s^2)`` (the log of the information it
adds relative to today's): ``v = 0`` is a measurement as good as today's, a
larger ``v`` a finer one.

1. *Today, the floor*: the statistic today (met already? ``"already_met"``) and
   with every allowed input exact (not met there? ``"unreachable"``: the inputs
   left as they are, or the model's nuisances and the prior, set a floor).
2. *Grid*: per input ``grid_points`` precisions log-spaced from today's error
   down to ``finest_fraction`` of it, plus "not measured" (0 hours, today's
   error kept); all ``(grid_points + 1)^m`` combinations in one pass of
   :func:`scenario_metrics` (chunked so that scenarios x draws stay below
   :data:`ROWS_PER_CALL`). Each combination costs the sum of its measurements'
   hours. The cheapest combination that meets the goal wins; ties go to fewer
   measurements, then to the first in the grid's order (inputs in
   ``OBSERVABLES`` order, looser precisions first).
3. *Refinement* of the winner, its set of measured inputs fixed: a pattern
   search in ``v`` (every move of each measured input by ``-delta, 0,
   +delta``; a move is taken when it is cheaper and still meets the goal;
   ``delta`` starts at half a grid step and halves ``refine_rounds`` times),
   then a bisection along the ray that loosens every measured precision by a
   common factor, down to the goal's boundary (relative precision ``rtol``).
4. *Single inputs*: for each input alone, the loosest precision that meets the
   goal (bisection in ``v`` between grid points of its row, as
   :func:`required_precision` does on its own grid) and its hours. These are
   reported for comparison and are candidates too: the answer is the cheapest
   of the refined combination and the single-input answers (same tie rules).
5. *Monte Carlo resolution*: the answer's scenario is run once more as a
   Monte Carlo (:func:`~perierr.plan.whatif.scenario_monte_carlo`, same draws)
   for the statistic's Monte Carlo standard error: the binomial error of the
   probability for a "decide" goal, the quantile errors of q05 and q95 added
   in quadrature for a 90 % width (distribution-free quantile errors of
   :func:`perierr.summary.summarize`), the standard error of the standard
   deviation for a sigma goal. A refined answer lies on the goal's boundary
   by construction; its record says how much finer (a common factor on the
   measured precisions, from the local slope) leaves a margin of two Monte
   Carlo errors. Today's statistic (already met) or the floor (unreachable)
   within two Monte Carlo errors of the goal gives a caution.

The cost of a measurement is a model's ``hours(input, precision, magnitude)``
(:class:`~perierr.plan.cost.PhotonLimitedCost` or any object with that
method) or a plain callable ``cost(input, precision) -> hours``, precisions in
catalogue units (mas, mas/yr, km/s; ra in mas of alpha*). Infinite hours mark
a precision that cannot be bought (an instrument floor); such combinations
never win.

As everywhere in the planner the mean stays at today's value (the new
measurement's value is not yet known). Under a distance prior every scenario
is the posterior prior x its updated Gaussian likelihood, from the common
draws weighted by the prior (as :func:`required_precision`).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numpy as np

from ..cautions import Caution, emit
from ..errors import InputError
from ..star import ObservedStar
from ..units import DEC, INDEX, OBSERVABLES
from .goals import Goal
from .update import UNIT_LABELS, Measurement, input_name, to_catalogue, update_covariance, updated_star
from .whatif import (
    CommonDraws,
    common_draws,
    prepare,
    require_plannable,
    resolve_plan_prior,
    scenario_metrics,
    scenario_monte_carlo,
)

__all__ = ["JointRequirement", "MeasurementChoice", "ROWS_PER_CALL", "SingleInputAnswer", "cheapest_combination"]

#: The statuses of an answer.
STATUSES = ("reachable", "already_met", "unreachable")

#: Most grid combinations one search evaluates (``(grid_points + 1)^m``).
MAX_COMBINATIONS = 20_000

#: Scenarios x draws per call of :func:`scenario_metrics` (its outputs take 24 bytes per row).
ROWS_PER_CALL = 2_000_000

#: ``v = ln(sigma^2 / s^2)`` standing in for "not measured" (``s = sigma e^20``) and for "exact" (``-``/``+``).
_FAR = 40.0

#: Loosest precision the refinement may move to: ten times today's error (``v = -ln 100``).
_V_LOOSEST = -2.0 * math.log(10.0)

#: Moves at one step size of the pattern search before the step halves.
_MAX_MOVES = 8

#: Relative change of the measured precisions used for the local slope at the answer.
_SLOPE_STEP = 0.05


@dataclass(frozen=True)
class MeasurementChoice:
    """What the answer asks of one input.

    Attributes
    ----------
    input : str
    measured : bool
        False: no new measurement (0 hours, today's error kept).
    precision : float or None
        Standard error of the new measurement, catalogue units; None when not measured.
    unit : str
    current_sigma : float
        Today's standard error, catalogue units.
    combined_sigma : float
        The input's standard error after the measurement (inverse-variance combination with today's).
    hours : float
    """

    input: str
    measured: bool
    precision: float | None
    unit: str
    current_sigma: float
    combined_sigma: float
    hours: float

    def to_dict(self) -> dict:
        """Plain dict for JSON."""
        return {
            "input": self.input, "measured": self.measured, "precision": self.precision, "unit": self.unit,
            "current_sigma": self.current_sigma, "combined_sigma": self.combined_sigma, "hours": self.hours,
        }  # fmt: skip


@dataclass(frozen=True)
class SingleInputAnswer:
    """The goal reached by measuring one input alone (for comparison with the combination).

    Attributes
    ----------
    input : str
    status : {"reachable", "already_met", "unreachable"}
    precision : float or None
        Loosest precision meeting the goal, catalogue units (None unless reachable).
    unit : str
    hours : float or None
        Its cost (None unless reachable; ``inf`` when the cost model cannot buy it: then unreachable).
    achieved : float or None
        The goal's statistic at ``precision``.
    floor : float
        The statistic with this input exact and the others as today.
    message : str
    """

    input: str
    status: str
    precision: float | None
    unit: str
    hours: float | None
    achieved: float | None
    floor: float
    message: str

    def to_dict(self) -> dict:
        """Plain dict for JSON."""
        return {
            "input": self.input, "status": self.status, "precision": self.precision, "unit": self.unit,
            "hours": _finite_or_none(self.hours), "achieved_value": self.achieved, "floor_value": self.floor,
            "message": self.message,
        }  # fmt: skip


@dataclass(frozen=True)
class JointRequirement:
    """The cheapest combination of new measurements that reaches a goal.

    Attributes
    ----------
    inputs : tuple of str
        The inputs that may be measured, in the order of ``OBSERVABLES`` (whatever order they were given in).
    goal : Goal
    status : {"reachable", "already_met", "unreachable"}
    choices : tuple of MeasurementChoice
        One per input, same order; none measured unless reachable.
    hours : float or None
        Total cost of the answer (0 when already met; None when unreachable).
    current : float
        The goal's statistic today (output units; for "decide" the probability).
    floor : float
        The statistic with every input of ``inputs`` exact: the limit the other inputs set.
    achieved : float or None
        The statistic at the answer (same draws); None when unreachable.
    mc_error : float
        Monte Carlo standard error of the statistic at the answer (today's when already met, the floor's when
        unreachable; module docstring).
    near_boundary : bool
        The statistic lies within two Monte Carlo errors of the goal's bound (always so for a refined answer,
        which sits on the boundary by construction).
    margin_scale : float or None
        Reachable answers: the common factor (< 1) on the measured precisions that moves the statistic two
        Monte Carlo errors inside the goal (linear in log precision from the local slope); None otherwise.
    singles : tuple of SingleInputAnswer
        Each input alone, same order as ``inputs``.
    message : str
    cautions : tuple of Caution
    settings : dict
        Draws, seed, grid, cost model, number of scenarios evaluated.
    """

    inputs: tuple
    goal: Goal
    status: str
    choices: tuple
    hours: float | None
    current: float
    floor: float
    achieved: float | None
    mc_error: float
    near_boundary: bool
    margin_scale: float | None
    singles: tuple
    message: str
    cautions: tuple = ()
    settings: dict = field(default_factory=dict)

    @property
    def reachable(self) -> bool:
        """True when the goal is met today or by a combination at finite cost."""
        return self.status != "unreachable"

    @property
    def measured(self) -> tuple:
        """The choices with a new measurement."""
        return tuple(c for c in self.choices if c.measured)

    @property
    def measurements(self) -> tuple:
        """The answer as :class:`~perierr.plan.update.Measurement` records (for :func:`what_if`)."""
        dec = float(self.settings["dec"])
        out = []
        for c in self.measured:
            internal = float(_to_internal(c.input, c.precision, dec))
            out.append(Measurement(c.input, INDEX[c.input], internal, c.precision, c.unit))
        return tuple(out)

    @property
    def best_single(self) -> SingleInputAnswer | None:
        """The cheapest reachable single-input answer (None when no input alone reaches the goal)."""
        ok = [s for s in self.singles if s.status == "reachable"]
        return min(ok, key=lambda s: s.hours) if ok else None

    def to_dict(self) -> dict:
        """Plain dict for JSON."""
        best = self.best_single
        return {
            "inputs": list(self.inputs),
            "goal": self.goal.to_dict(),
            "status": self.status,
            "measurements": [c.to_dict() for c in self.choices],
            "hours": _finite_or_none(self.hours),
            "current_value": self.current,
            "floor_value": self.floor,
            "achieved_value": self.achieved,
            "mc_error": self.mc_error,
            "near_boundary": self.near_boundary,
            "margin_scale": self.margin_scale,
            "single_inputs": [s.to_dict() for s in self.singles],
            "best_single_input": None if best is None else best.input,
            "message": self.message,
            "cautions": [c.to_dict() for c in self.cautions],
            "settings": dict(self.settings),
        }


def cheapest_combination(
    star: ObservedStar,
    model,
    goal: Goal,
    inputs,
    cost,
    *,
    magnitude: float | None = None,
    cost_unit: str = "h",
    grid_points: int = 12,
    finest_fraction: float = 1e-3,
    refine_rounds: int = 5,
    rtol: float = 1e-6,
    draws: CommonDraws | None = None,
    n: int = 20_000,
    seed: int | np.random.Generator | None = None,
    distance_prior=None,
    parallax_offset=None,
    error_inflation=None,
    focusing: bool = False,
) -> JointRequirement:
    """Cheapest combination of new measurements of ``inputs`` that reaches ``goal``.

    Parameters
    ----------
    star : ObservedStar
    model : ForwardModel or str
    goal : Goal
        From :func:`~perierr.plan.goals.spread_goal`, ``decide_goal`` or ``parse_goal``.
    inputs : sequence of str, or str
        The inputs that may be measured anew (``"radial_velocity,pmdec"`` also works; ``rv``, ``plx``
        accepted); their order does not matter.
    cost : object with ``hours(input, precision, magnitude)``, or callable ``cost(input, precision)``
        Hours of one new measurement, precision in catalogue units; ``inf`` for a precision that cannot be
        bought. A measurement not taken costs 0.
    magnitude : float, optional
        The star's magnitude for a cost model with ``hours`` (default: ``star.magnitude`` where the star has
        one; a :class:`~perierr.plan.cost.PhotonLimitedCost` needs one, a plain callable never uses it).
    cost_unit : str
        The unit of the costs in messages ("h" for telescope hours).
    grid_points : int
        Candidate precisions per input (>= 3), log-spaced from today's error down to
        ``finest_fraction`` of it; "not measured" comes on top.
    finest_fraction : float
        The grid's finest precision as a fraction of today's error, in (0, 1).
    refine_rounds : int
        Halvings of the pattern search's step (module docstring); 0 skips the pattern search.
    rtol : float
        Relative resolution of the bisections in precision.
    draws : CommonDraws, optional
        Shared draws (then ``n`` and ``seed`` are ignored).
    n : int
    seed : int, numpy.random.Generator or None
        Seed of the common draws (:func:`perierr.sampling.gaussian.resolve_seed`).
    distance_prior : str, DistancePrior or None
        As in :func:`perierr.plan.required_precision` (reweighted common draws).
    parallax_offset, error_inflation, focusing
        As in :func:`perierr.analyze`, applied first (:func:`perierr.plan.whatif.prepare`).

    Returns
    -------
    JointRequirement

    Raises
    ------
    InputError
        Naming the field: ``goal``, ``inputs``, ``cost``, ``magnitude``, ``grid_points``,
        ``finest_fraction``, ``refine_rounds``, ``rtol`` (or ``n``, ``seed`` from the draws).

    Examples
    --------
    >>> import perierr
    >>> from perierr.demo import demo_path
    >>> from perierr.plan import spread_goal
    >>> from perierr.plan.joint import cheapest_combination
    >>> star = perierr.read_star_file(demo_path("kestrel-4.toml"))
    >>> hours = {"radial_velocity": 0.36, "pmdec": 1e-3}      # invented: k / precision^2 hours
    >>> answer = cheapest_combination(star, "straight_line", spread_goal("width90", "d_ph", "1500 au"),
    ...                               ["radial_velocity", "pmdec"], lambda name, s: hours[name] / s**2,
    ...                               grid_points=6, n=4000, seed=1)
    >>> answer.status
    'reachable'
    """
    if not isinstance(goal, Goal):
        raise InputError("goal", goal, "expected a Goal (perierr.plan.spread_goal, decide_goal or parse_goal)")
    names = _checked_inputs(inputs)
    grid_points = _checked_int("grid_points", grid_points, 3, "an integer >= 3 (candidate precisions per input)")
    refine_rounds = _checked_int("refine_rounds", refine_rounds, 0, "an integer >= 0")
    if not (isinstance(finest_fraction, (int, float)) and 0.0 < finest_fraction < 1.0):
        raise InputError("finest_fraction", finest_fraction, "expected a fraction of today's error in (0, 1)")
    if not (isinstance(rtol, (int, float)) and 0.0 < rtol < 0.1):
        raise InputError("rtol", rtol, "expected a relative resolution in (0, 0.1), e.g. 1e-6")
    combinations = (grid_points + 1) ** len(names)
    if combinations > MAX_COMBINATIONS:
        raise InputError(
            "grid_points", grid_points,
            f"({grid_points} + 1)^{len(names)} = {combinations:,} combinations exceed {MAX_COMBINATIONS:,}: "
            "use fewer grid points or fewer inputs",
        )  # fmt: skip
    if magnitude is None:  # the star's own, where it has one
        magnitude = getattr(star, "magnitude", None)
    price, cost_description = _cost_function(cost, magnitude)
    star, model, _ = prepare(
        star, model, parallax_offset=parallax_offset, error_inflation=error_inflation, focusing=focusing
    )
    prior = resolve_plan_prior(distance_prior)
    require_plannable(star, prior)
    draws = common_draws(n, seed) if draws is None else draws
    search = _Search(star, model, goal, names, price, draws, prior, str(cost_unit))
    settings = {
        "n": draws.n, "seed": draws.seed, "grid_points": grid_points, "finest_fraction": float(finest_fraction),
        "refine_rounds": refine_rounds, "rtol": float(rtol), "combinations": combinations, "cost": cost_description,
        "magnitude": None if magnitude is None else float(magnitude), "dec": search.dec,
        "method": "common random numbers: grid of precisions, pattern search, bisection to the boundary",
    }  # fmt: skip
    if hasattr(model, "describe"):
        settings["model"] = model.describe()
    if prior is not None:
        settings["distance_prior"] = {"name": prior.name, "parameters": prior.parameters}
    answer = search.run(grid_points, float(finest_fraction), refine_rounds, float(rtol))
    settings["scenarios_evaluated"] = search.scenarios
    result = JointRequirement(settings=settings, **answer)
    emit(result.cautions)
    return result


# ------------------------------------------------------------------------------------------------ checks


def _checked_inputs(inputs) -> tuple:
    """Canonical input names in ``OBSERVABLES`` order; InputError naming ``inputs``."""
    if isinstance(inputs, str):
        inputs = [part for part in inputs.split(",") if part.strip()]
    try:
        given = list(inputs)
    except TypeError:
        raise InputError(
            "inputs", inputs, "expected a sequence of input names, e.g. ['radial_velocity', 'pmdec']"
        ) from None
    if not given:
        raise InputError("inputs", inputs, "expected at least one input to measure")
    names = []
    for name in given:
        try:
            names.append(input_name(name))
        except InputError:
            raise InputError(
                "inputs", name, f"expected input names from {', '.join(OBSERVABLES)} (or rv, plx)"
            ) from None
    if len(set(names)) != len(names):
        raise InputError("inputs", given, "expected each input once")
    return tuple(sorted(names, key=OBSERVABLES.index))


def _checked_int(name, value, least, expected) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < least:
        raise InputError(name, value, f"expected {expected}")
    return int(value)


def _cost_function(cost, magnitude):
    """``price(input, precision) -> hours`` (checked) and a description of the cost for the settings."""
    if cost is None:
        raise InputError("cost", cost, "expected a cost model with hours(input, precision, magnitude) or a "
                                       "callable cost(input, precision) -> hours")  # fmt: skip
    if hasattr(cost, "hours"):
        from .cost import PhotonLimitedCost

        if magnitude is not None and not (isinstance(magnitude, (int, float)) and math.isfinite(magnitude)):
            raise InputError("magnitude", magnitude, "expected the star's magnitude as a finite number")
        if magnitude is None and isinstance(cost, PhotonLimitedCost):
            raise InputError("magnitude", magnitude, "the star's magnitude for the photon-limited cost model (in "
                             "the star file: phot_g_mean_mag, or mag with mag_band; Python: magnitude=)")  # fmt: skip
        magnitude = None if magnitude is None else float(magnitude)

        def raw(name, precision):
            return cost.hours(name, precision, magnitude)

        described = cost.to_dict() if hasattr(cost, "to_dict") else {"model": type(cost).__name__}
    elif callable(cost):
        raw = cost
        described = {"model": getattr(cost, "__name__", type(cost).__name__)}
    else:
        raise InputError("cost", cost, "expected a cost model with hours(input, precision, magnitude) or a "
                                       "callable cost(input, precision) -> hours")  # fmt: skip

    def price(name, precision):
        value = raw(name, float(precision))
        try:
            hours = float(value)
        except (TypeError, ValueError):
            raise InputError("cost", value, f"expected a number of hours for {name} at {precision:.4g} "
                                            f"{UNIT_LABELS[name]}") from None  # fmt: skip
        if math.isnan(hours) or hours < 0:
            raise InputError(
                "cost", f"{value!r} h for {name} at {precision:.4g} {UNIT_LABELS[name]}",
                "expected hours >= 0 (inf for a precision that cannot be bought)",
            )  # fmt: skip
        return hours

    return price, described


def _finite_or_none(x):
    return None if x is None or not math.isfinite(x) else float(x)


def _to_internal(name, value, dec):
    from ..units import errors_to_internal

    return errors_to_internal([value], dec, names=(name,))[0]


# ------------------------------------------------------------------------------------------------ search


def _grid_covariances(cov, indices, axes) -> np.ndarray:
    """Covariances of every combination (``itertools.product`` order), shape (prod(len(axes)), 6, 6).

    ``axes[j]`` holds input ``indices[j]``'s precisions (internal units; ``inf`` = not measured). The
    updates go through :func:`update_covariance` in turn, one call per combination of the earlier inputs
    (vectorized over the later input's precisions), never per draw.
    """
    covs = np.asarray(cov, dtype=float)[None]
    for idx, values in zip(indices, axes):
        values = np.asarray(values, dtype=float)
        finite = np.isfinite(values)
        new = np.empty((covs.shape[0], values.size, 6, 6))
        new[:, ~finite] = covs[:, None]
        if finite.any():
            for a, c in enumerate(covs):
                new[a, finite] = update_covariance(c, idx, values[finite])
        covs = new.reshape(-1, 6, 6)
    return covs


class _Search:
    """The state of one search: the star, the draws, the prices, and a count of the scenarios evaluated."""

    def __init__(self, star, model, goal, names, price, draws, prior, unit="h"):
        self.unit = unit
        self.star, self.model, self.goal, self.names = star, model, goal, names
        self.price, self.draws, self.prior = price, draws, prior
        self.m = len(names)
        self.indices = [INDEX[name] for name in names]
        self.dec = float(star.mean[DEC])
        self.sigma = np.array([float(star.sigma[i]) for i in self.indices])
        for name, s in zip(names, self.sigma):
            if not s > 0:
                raise InputError("inputs", name, "is held exact today (error 0): a new measurement cannot improve "
                                                 "it; leave it out")  # fmt: skip
        self.sigma_cat = np.array([float(to_catalogue(n, s, dec=self.dec)) for n, s in zip(names, self.sigma)])
        self.units = [UNIT_LABELS[name] for name in names]
        self.thresholds = [goal.threshold] if goal.kind == "decide" else ["1 pc"]
        self.scenarios = 0

    # -- evaluation ------------------------------------------------------------------------------------

    def metric(self, covs) -> np.ndarray:
        """The goal's statistic for each covariance, in calls of at most :data:`ROWS_PER_CALL` rows."""
        covs = np.asarray(covs, dtype=float).reshape(-1, 6, 6)
        per_call = max(1, ROWS_PER_CALL // self.draws.n)
        out = np.empty(covs.shape[0])
        for start in range(0, covs.shape[0], per_call):
            part = covs[start : start + per_call]
            m = scenario_metrics(self.star, self.model, part, self.draws, thresholds=self.thresholds,
                                 distance_prior=self.prior)  # fmt: skip
            out[start : start + part.shape[0]] = m.metric(self.goal.metric)
        self.scenarios += covs.shape[0]
        return out

    def covariance(self, v) -> np.ndarray:
        """The covariance after measuring input j at ``v[j]`` (NaN: not measured), inputs in turn."""
        cov = np.array(self.star.cov)
        for j, idx in enumerate(self.indices):
            if not np.isnan(v[j]):
                cov = update_covariance(cov, idx, self.internal(j, v[j]))
        return cov

    def internal(self, j, v) -> float:
        """Precision (internal units) of input j at ``v`` (``+inf`` -> 0, exact)."""
        return 0.0 if v == np.inf else float(self.sigma[j] * math.exp(-0.5 * v))

    def catalogue(self, j, v) -> float:
        """Precision (catalogue units) of input j at ``v``."""
        return float(self.sigma_cat[j] * math.exp(-0.5 * v))

    def hours(self, v) -> float:
        """Total hours of the measurements in ``v`` (NaN entries: not measured, 0 h)."""
        return float(sum(self.price(self.names[j], self.catalogue(j, v[j])) for j in range(self.m)
                         if np.isfinite(v[j])))  # fmt: skip

    def met(self, values) -> np.ndarray:
        return np.asarray(self.goal.met(values), dtype=bool)

    # -- the steps -----------------------------------------------------------------------------------------

    def run(self, grid_points, finest_fraction, refine_rounds, rtol) -> dict:
        """Steps 1-5 of the module docstring; the fields of :class:`JointRequirement` (but the settings)."""
        goal, m = self.goal, self.m
        exact = np.full((m + 1, m), np.nan)
        exact[0] = np.inf  # every input exact
        exact[1:][np.diag_indices(m)] = np.inf  # one input exact, the others as today
        first = self.metric(np.stack([self.star.cov] + [self.covariance(v) for v in exact]))
        now, floor, floors = float(first[0]), float(first[1]), first[2:]
        if self.met(now):
            singles = tuple(
                SingleInputAnswer(name, "already_met", None, unit, 0.0, now, float(f), "already met today")
                for name, unit, f in zip(self.names, self.units, floors)
            )  # fmt: skip
            return self._finish("already_met", np.full(m, np.nan), 0.0, now, floor, now, singles,
                                f"already met today ({goal.format(now)}): no new measurement is needed")
        if not self.met(floor):
            singles = tuple(self._single_unreachable(j, float(floors[j])) for j in range(m))
            return self._finish("unreachable", None, None, now, floor, floor, singles, self._floor_message(floor))

        # the grid: v = ln(sigma^2 / s^2) from 0 (today's error) to the finest precision
        v_grid = np.linspace(0.0, 2.0 * math.log(1.0 / finest_fraction), grid_points)
        step = float(v_grid[1] - v_grid[0])
        axes_v = [np.concatenate([[np.nan], v_grid]) for _ in range(m)]  # NaN: not measured
        axes_prec = [np.concatenate([[np.inf], self.sigma[j] * np.exp(-0.5 * v_grid)]) for j in range(m)]
        axes_hours = [np.array([0.0] + [self.price(self.names[j], self.catalogue(j, v)) for v in v_grid])
                      for j in range(m)]  # fmt: skip
        values = self.metric(_grid_covariances(self.star.cov, self.indices, axes_prec))
        index = np.stack([a.ravel() for a in np.meshgrid(*[np.arange(grid_points + 1)] * m, indexing="ij")], -1)
        total = sum(axes_hours[j][index[:, j]] for j in range(m))
        count = (index > 0).sum(axis=1)
        ok = self.met(values) & np.isfinite(total)

        candidates = []  # (hours, measured count, order, v, achieved)
        if ok.any():
            rows = np.flatnonzero(ok)
            keys = [index[rows, j] for j in reversed(range(m))] + [count[rows], total[rows]]
            best = int(rows[np.lexsort(keys)[0]])
            v0 = np.array([axes_v[j][index[best, j]] for j in range(m)])
            v, hours, achieved = self._refine(
                v0, float(total[best]), float(values[best]), step, float(v_grid[-1]) + step, refine_rounds, rtol
            )
            candidates.append((hours, int(np.isfinite(v).sum()), -1, v, achieved))
        singles, single_v = self._singles(values, index, v_grid, floors, rtol)
        for j, s in enumerate(singles):
            if s.status == "reachable":
                candidates.append((s.hours, 1, j, single_v[j], s.achieved))
        if not candidates:
            met_anywhere = self.met(values).any()
            why = (
                "the cost model cannot buy the precisions that would (they lie below its floor)"
                if met_anywhere
                else f"they need precisions finer than the grid's finest ({finest_fraction:g} of today's errors): "
                "lower finest_fraction"
            )
            message = (f"exact measurements of {_names(self.names)} would reach {goal.describe()} (there "
                       f"{goal.format(floor)}), but no combination does at a finite cost: {why}")  # fmt: skip
            return self._finish("unreachable", None, None, now, floor, floor, singles, message)
        hours, _, _, v, achieved = min(candidates, key=lambda c: c[:3])
        message = self._reachable_message(v, hours, now, achieved, singles)
        return self._finish("reachable", v, hours, now, floor, achieved, singles, message)

    def _refine(self, v0, hours0, achieved0, step, v_top, rounds, rtol):
        """Pattern search on the winner's measured inputs, then bisection along the loosening ray."""
        measured = np.flatnonzero(np.isfinite(v0))
        v, hours, achieved = v0.copy(), hours0, achieved0
        offsets = np.array([o for o in itertools.product((-1.0, 0.0, 1.0), repeat=measured.size) if any(o)])
        delta = 0.5 * step
        for _ in range(rounds):
            for _ in range(_MAX_MOVES):
                cand = np.repeat(v[None], len(offsets), axis=0)
                cand[:, measured] = np.clip(v[measured] + delta * offsets, _V_LOOSEST, v_top)
                price = np.array([self.hours(c) for c in cand])
                cheaper = np.flatnonzero(np.isfinite(price) & (price < hours))
                if not cheaper.size:
                    break
                got = self.metric(np.stack([self.covariance(c) for c in cand[cheaper]]))
                good = cheaper[self.met(got)]
                if not good.size:
                    break
                pick = good[np.argmin(price[good])]
                v, hours, achieved = cand[pick], float(price[pick]), float(got[np.flatnonzero(cheaper == pick)[0]])
            delta *= 0.5
        # bisection along v - c (every measured precision loosened by the factor e^(c/2)), c in [lo, hi]
        lo, achieved_lo, hi = 0.0, achieved, max(4.0 * delta, 4.0 * rtol)
        while True:
            got = float(self.metric(self.covariance(v - hi)[None])[0])
            if not self.met(got):
                break
            lo, achieved_lo = hi, got
            if hi >= 2.0 * _FAR:
                hi = lo
                break
            hi *= 2.0
        while hi - lo > 2.0 * rtol:
            mid = 0.5 * (lo + hi)
            got = float(self.metric(self.covariance(v - mid)[None])[0])
            if self.met(got):
                lo, achieved_lo = mid, got
            else:
                hi = mid
        if lo > 0:
            price = self.hours(v - lo)
            if price <= hours:  # a cost that grows as the precision loosens keeps the searched point
                v, hours, achieved = v - lo, price, achieved_lo
        return v, hours, achieved

    def _singles(self, values, index, v_grid, floors, rtol):
        """Each input alone: bracket from its grid row, then one vectorized bisection for all inputs."""
        m = self.m
        grid_met = self.met(values)
        lo = np.full(m, -_FAR)  # misses the goal (almost not measured)
        hi = np.full(m, _FAR)  # meets it (almost exact)
        achieved = np.full(m, np.nan)
        alone = [j for j in range(m) if self.met(floors[j])]
        for j in alone:
            row = np.flatnonzero((index[:, j] > 0) & ((index > 0).sum(axis=1) == 1))  # loosest first
            met_row = grid_met[row]
            if met_row.any():
                first = int(np.argmax(met_row))
                hi[j], achieved[j] = v_grid[first], values[row[first]]
                if first > 0:
                    lo[j] = v_grid[first - 1]
            else:
                lo[j] = v_grid[-1]
        active = np.array(alone, dtype=int)
        while active.size and np.any(hi[active] - lo[active] > 2.0 * rtol):
            mid = 0.5 * (lo[active] + hi[active])
            covs = []
            for j, v in zip(active, mid):
                point = np.full(m, np.nan)
                point[j] = v
                covs.append(self.covariance(point))
            got = self.metric(np.stack(covs))
            ok = self.met(got)
            hi[active[ok]], achieved[active[ok]] = mid[ok], got[ok]
            lo[active[~ok]] = mid[~ok]
            active = active[hi[active] - lo[active] > 2.0 * rtol]
        singles, points = [], []
        for j, name in enumerate(self.names):
            point = np.full(m, np.nan)
            if j not in alone:
                singles.append(self._single_unreachable(j, float(floors[j])))
                points.append(point)
                continue
            if np.isnan(achieved[j]):  # the bracket's upper end (almost exact) was never evaluated
                point[j] = hi[j]
                achieved[j] = float(self.metric(self.covariance(point)[None])[0])
            point[j] = hi[j]
            precision = self.catalogue(j, hi[j])
            hours = self.price(name, precision)
            unit = self.units[j]
            if not math.isfinite(hours):
                singles.append(SingleInputAnswer(
                    name, "unreachable", None, unit, None, None, float(floors[j]),
                    f"{name} alone needs {precision:.3g} {unit} or better, which the cost model cannot buy",
                ))  # fmt: skip
            else:
                singles.append(SingleInputAnswer(
                    name, "reachable", precision, unit, hours, float(achieved[j]), float(floors[j]),
                    f"{name} alone: {precision:.3g} {unit} (today {self.sigma_cat[j]:.3g} {unit}), "
                    f"{hours:.3g} {self.unit}",
                ))  # fmt: skip
            points.append(point)
        return tuple(singles), points

    def _single_unreachable(self, j, floor) -> SingleInputAnswer:
        name = self.names[j]
        return SingleInputAnswer(
            name, "unreachable", None, self.units[j], None, None, floor,
            f"{name} alone cannot reach it: even an exact {name} leaves {self.goal.format(floor)}",
        )  # fmt: skip

    # -- the answer ----------------------------------------------------------------------------------------

    def _finish(self, status, v, hours, now, floor, achieved, singles, message) -> dict:
        """The fields of the answer: choices, Monte Carlo resolution, cautions."""
        m = self.m
        v_answer = np.full(m, np.nan) if v is None else np.asarray(v, dtype=float)
        if status == "unreachable":
            reference = np.full(m, np.inf)
        else:
            reference = v_answer
        after = np.sqrt(np.diag(self.covariance(v_answer)))  # every update counts (correlated inputs)
        choices = []
        for j, name in enumerate(self.names):
            measured = bool(np.isfinite(v_answer[j]))
            precision = self.catalogue(j, v_answer[j]) if measured else None
            combined = float(to_catalogue(name, after[self.indices[j]], dec=self.dec))
            hours_j = self.price(name, precision) if measured else 0.0
            choices.append(MeasurementChoice(name, measured, precision, self.units[j], float(self.sigma_cat[j]),
                                             combined, hours_j))  # fmt: skip
        error = self._mc_error(reference)
        value = achieved
        score = float(self.goal.score(value))
        near = bool(abs(score - self.goal.bound()) < 2.0 * error)
        cautions, margin = [], None
        if status == "reachable":
            margin = self._margin(v_answer, achieved, error)
            how = (f"; precisions {1.0 - margin:.0%} finer leave a margin of two Monte Carlo errors"
                   if margin is not None else "")  # fmt: skip
            cautions.append(Caution(
                "joint-mc-resolution",
                f"the answer sits on the goal's boundary ({self.goal.format(value)}); the statistic's Monte Carlo "
                f"error there is {error:.3g}: on other draws the same precisions may miss the goal by up to two of "
                f"them{how}, or rerun with more draws than {self.draws.n:,}",
                "note", "monte_carlo",
            ))  # fmt: skip
        elif near:
            which = "today's value" if status == "already_met" else "the floor (every allowed input exact)"
            cautions.append(Caution(
                "joint-mc-boundary",
                f"{which}, {self.goal.format(value)}, is within two Monte Carlo errors ({error:.3g}) of the goal's "
                f"bound: the status '{status}' may change on other draws; rerun with more draws than {self.draws.n:,}",
                "caution", "monte_carlo",
            ))  # fmt: skip
        return {
            "inputs": self.names, "goal": self.goal, "status": status, "choices": tuple(choices),
            "hours": hours, "current": float(now), "floor": float(floor),
            "achieved": None if status == "unreachable" else float(achieved), "mc_error": error,
            "near_boundary": near, "margin_scale": margin, "singles": tuple(singles), "message": message,
            "cautions": tuple(cautions),
        }  # fmt: skip

    def _mc_error(self, v) -> float:
        """Monte Carlo standard error of the goal's statistic in the scenario ``v`` (module docstring, step 5)."""
        measurements = []
        for j, name in enumerate(self.names):
            if np.isfinite(v[j]) or v[j] == np.inf:
                internal = self.internal(j, v[j])
                value = 0.0 if v[j] == np.inf else self.catalogue(j, v[j])
                measurements.append(Measurement(name, self.indices[j], internal, value, self.units[j]))
        scenario = updated_star(self.star, measurements) if measurements else self.star
        mc = scenario_monte_carlo(scenario, self.model, self.draws, levels=(0.05, 0.5, 0.95),
                                  thresholds=self.thresholds, distance_prior=self.prior,
                                  prior_method="reweight")  # fmt: skip
        self.scenarios += 1
        if self.goal.kind == "decide":
            return float(mc.thresholds[0].se)
        summary = mc.summaries[self.goal.output]
        if self.goal.kind == "sigma":
            return float(summary.std_se)
        return float(math.hypot(summary.quantile_error(0.05), summary.quantile_error(0.95)))

    def _margin(self, v, achieved, error):
        """The factor on the measured precisions that moves the statistic 2 MC errors inside the goal."""
        c = -2.0 * math.log(1.0 - _SLOPE_STEP)  # v + c: every measured precision 5 % finer
        tighter = float(self.metric(self.covariance(v + c)[None])[0])
        slope = (float(self.goal.score(achieved)) - float(self.goal.score(tighter))) / c  # per unit of v
        if not (np.isfinite(slope) and slope > 0):
            return None
        need = 2.0 * error / slope  # in v
        return float(math.exp(-0.5 * need))

    def _floor_message(self, floor) -> str:
        others = [n for n in OBSERVABLES if n not in self.names and self.star.sigma[INDEX[n]] > 0]
        who = (f"the inputs left as they are ({', '.join(others)}) set that floor: allow one of them too"
               if others else "the model's nuisance parameters or the distance prior set that floor")  # fmt: skip
        return (f"cannot be reached by measuring {_names(self.names)}: even exact measurements of all of them "
                f"leave {self.goal.format(floor)} against the goal {self.goal.describe()}; {who}")  # fmt: skip

    def _reachable_message(self, v, hours, now, achieved, singles) -> str:
        parts = [f"{self.names[j]} to {self.catalogue(j, v[j]):.3g} {self.units[j]}"
                 for j in range(self.m) if np.isfinite(v[j])]  # fmt: skip
        text = (f"measure {' and '.join(parts)}: {hours:.3g} {self.unit} in all; {self.goal.describe()} is then met "
                f"({self.goal.format(achieved)}; today {self.goal.format(now)})")  # fmt: skip
        ok = [s for s in singles if s.status == "reachable"]
        if len(parts) == 1:
            text += "; one measurement is the cheapest way (no combination costs less)"
        elif ok:
            best = min(ok, key=lambda s: s.hours)
            ratio = f", {best.hours / hours:.2g} x the combination" if hours > 0 else ""
            text += f"; cheapest single input: {best.input} alone, {best.hours:.3g} {self.unit}{ratio}"
        else:
            text += "; no input alone reaches the goal"
        return text


def _names(names) -> str:
    return ", ".join(names[:-1]) + " and " + names[-1] if len(names) > 1 else names[0]
