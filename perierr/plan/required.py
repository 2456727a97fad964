"""Required precision: the largest new standard error of one input that reaches a goal.

The goal's statistic is evaluated on common random numbers (so it is a
deterministic, nearly smooth function of the precision s): first at today's
covariance (already met?), then at s = 0 (the input known exactly: the
*floor* set by the other inputs; not met there means unreachable by this
input alone), then on a log grid from 100 sigma down to 1e-4 sigma; the
largest grid point that meets the goal is refined by bisection in log s
against the next larger grid point. The answer is re-checked by feeding it
back through the same draws.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..models.base import ForwardModel
from ..star import ObservedStar
from ..units import DEC, INDEX, errors_to_internal
from .goals import Goal
from .update import UNIT_LABELS, input_name, to_catalogue, update_covariance
from .whatif import (
    CommonDraws,
    _check_prior_method,
    common_draws,
    prepare,
    require_plannable,
    resolve_plan_prior,
    scenario_metrics,
)

__all__ = ["RequiredPrecision", "required_precision"]

_GRID = np.geomspace(100.0, 1e-4, 25)


@dataclass(frozen=True)
class RequiredPrecision:
    """Answer to "how precise must this input be to reach the goal?".

    Attributes
    ----------
    input : str
    goal : Goal
    status : {"reachable", "already_met", "unreachable"}
    precision : float or None
        Largest new standard error reaching the goal, catalogue units (mas,
        mas/yr, km/s); None unless reachable.
    unit : str
    current_sigma : float
        Today's standard error of the input, catalogue units.
    current : float
        The goal's statistic today (output units; for "decide" the probability).
    floor : float
        The statistic with the input known exactly: the limit set by the others.
    achieved : float or None
        The statistic at ``precision`` (re-checked).
    message : str
    settings : dict
    """

    input: str
    goal: Goal
    status: str
    precision: float | None
    unit: str
    current_sigma: float
    current: float
    floor: float
    achieved: float | None
    message: str
    settings: dict = field(default_factory=dict)

    @property
    def reachable(self) -> bool:
        """True when a finite precision reaches the goal (or it is already met)."""
        return self.status != "unreachable"

    def mc_error(self, value: float) -> float | None:
        """Binomial Monte Carlo error ``sqrt(p (1 - p) / n)`` of a probability goal's value (else None)."""
        if self.goal.kind != "decide":
            return None
        return float(np.sqrt(value * (1.0 - value) / self.settings["n"]))

    def to_dict(self) -> dict:
        """Plain dict for JSON (``required_precision`` or the reason it cannot be reached)."""
        return {
            "input": self.input,
            "goal": self.goal.to_dict(),
            "status": self.status,
            "required_precision": self.precision,
            "unit": self.unit,
            "current_sigma": self.current_sigma,
            "current_value": self.current,
            "floor_value": self.floor,
            "achieved_value": self.achieved,
            "message": self.message,
            "mc_error_today": self.mc_error(self.current),
            "settings": dict(self.settings),
        }


def required_precision(
    star: ObservedStar,
    model: ForwardModel,
    input: str,
    goal: Goal,
    *,
    n: int = 20_000,
    seed: int | np.random.Generator | None = None,
    draws: CommonDraws | None = None,
    iterations: int = 40,
    distance_prior=None,
    prior_method: str = "auto",
    parallax_offset=None,
    error_inflation=None,
    focusing: bool = False,
) -> RequiredPrecision:
    """Largest standard error of a new measurement of ``input`` that reaches ``goal``.

    Parameters
    ----------
    star : ObservedStar
    model : ForwardModel
    input : str
        The input to re-observe.
    goal : Goal
        From :func:`~perierr.plan.goals.spread_goal` or ``decide_goal``.
    n : int
        Common draws (ignored when ``draws`` is given).
    seed : int, numpy.random.Generator or None
        Seed of the common draws (see :func:`perierr.sampling.gaussian.resolve_seed`).
    draws : CommonDraws, optional
    iterations : int
        Bisection steps in log precision (40 give a relative precision ~1e-6
        of one grid step).
    distance_prior, prior_method
        As in :func:`perierr.analyze`: the goal's statistic is that of the posterior prior x the updated
        Gaussian likelihood, from the common draws weighted by the prior (always reweighting, as the gain
        curves; ``settings`` reports the effective sample sizes today and at the answer).
    parallax_offset, error_inflation, focusing
        As in :func:`perierr.analyze`, applied first (:func:`perierr.plan.whatif.prepare`); ``current_sigma``
        is then the calibrated error.
    """
    star, model, _ = prepare(
        star, model, parallax_offset=parallax_offset, error_inflation=error_inflation, focusing=focusing
    )
    prior = resolve_plan_prior(distance_prior)
    _check_prior_method(prior_method)
    require_plannable(star, prior)
    name = input_name(input)
    idx = INDEX[name]
    draws = common_draws(n, seed) if draws is None else draws
    thresholds = [goal.threshold] if goal.kind == "decide" else ["1 pc"]
    dec = float(star.mean[DEC])
    sigma = float(star.sigma[idx])

    sizes = {}

    def metric(covs):
        m = scenario_metrics(star, model, covs, draws, thresholds=thresholds, distance_prior=prior)
        sizes["last"] = m.effective_size
        return m.metric(goal.metric)

    def evaluate(precisions):
        return metric(update_covariance(star.cov, idx, np.asarray(precisions, dtype=float)))

    now, floor = (float(v) for v in metric(np.stack([star.cov, update_covariance(star.cov, idx, 0.0)])))
    unit = UNIT_LABELS[name]
    sig_cat = float(to_catalogue(name, sigma, dec=dec))
    settings = {"n": draws.n, "seed": draws.seed, "method": "common random numbers, log-grid + bisection"}
    if prior is not None:
        settings.update(
            distance_prior={"name": prior.name, "parameters": prior.parameters},
            prior_method="reweight (common draws)",
            effective_size_today=float(sizes["last"][0]),
            effective_size_floor=float(sizes["last"][1]),
        )

    def result(status, precision, achieved, message):
        return RequiredPrecision(name, goal, status, precision, unit, sig_cat, now, floor, achieved, message, settings)

    close = _boundary_note(goal, now, draws.n)
    if goal.met(now):
        return result("already_met", None, now, f"already met today ({goal.format(now)}){close}")
    if prior is not None and not np.isfinite(floor):
        return result("unreachable", None, None, (
            f"cannot be evaluated with an exact {name}: no common draw of that scenario lies where the "
            f"{prior.name} prior is non-zero (importance weights cannot represent it); ask a what-if of one "
            "precision instead, which can run MCMC"
        ))  # fmt: skip
    if not goal.met(floor):
        return result("unreachable", None, None, _unreachable_message(name, sigma, goal, floor))
    lo = _largest_precision(evaluate, goal, sigma * _GRID, iterations)
    precision, back = _checked_precision(evaluate, goal, name, lo, dec)
    if prior is not None:
        settings["effective_size_at_precision"] = float(sizes["last"][0])
    return result(
        "reachable",
        precision,
        back,
        f"measure {name} to {precision:.3g} {unit} or better (today {sig_cat:.3g} {unit}); "
        f"there {goal.format(back)} (floor with an exact {name}: {goal.format(floor)})",
    )


def _boundary_note(goal, now, n) -> str:
    """A warning clause when a probability goal is met or missed by less than 2 Monte Carlo errors."""
    close = ""
    if goal.kind == "decide":
        err = float(np.sqrt(now * (1.0 - now) / n))
        if min(abs(now - goal.alpha), abs(now - (1.0 - goal.alpha))) < 2.0 * err:
            close = f" — within 2 Monte Carlo errors ({err:.2g}) of the goal's boundary: rerun with more samples"
    return close


def _unreachable_message(name, sigma, goal, floor) -> str:
    """Why an exact ``name`` still misses the goal."""
    why = "it is held exact already" if sigma == 0 else "the other inputs set a floor"
    return (
        f"cannot be reached by measuring {name} alone: even an exact {name} leaves "
        f"{goal.format(floor)} against the goal {goal.describe()} ({why}); "
        "improve another input as well"
    )


def _largest_precision(evaluate, goal, grid, iterations) -> float:
    """Largest precision (internal units) meeting the goal: the log grid, then bisection in log precision."""
    values = evaluate(grid)
    ok = goal.met(values)
    if ok.all():
        lo, hi = grid[0], None
    else:
        good = np.flatnonzero(ok)
        # largest grid precision that meets the goal; bracket with the next larger one
        j = int(good[0]) if good.size else len(grid)
        lo = grid[j] if j < len(grid) else 0.0
        hi = grid[j - 1] if j > 0 else None
    if hi is not None:
        lo = _bisect(evaluate, goal, lo, hi, grid, iterations)
    return lo


def _bisect(evaluate, goal, lo, hi, grid, iterations) -> float:
    """Refine the bracket [lo, hi] in log precision; lo meets the goal (0 stands for 10 e-folds below the grid)."""
    log_lo = np.log(lo) if lo > 0 else np.log(grid[-1]) - 10.0
    log_hi = np.log(hi)
    for _ in range(iterations):
        mid = 0.5 * (log_lo + log_hi)
        if goal.met(evaluate([np.exp(mid)]))[0]:
            log_lo = mid
        else:
            log_hi = mid
    return float(np.exp(log_lo))


def _checked_precision(evaluate, goal, name, lo, dec):
    """The precision in catalogue units and the statistic there, fed back through the same draws."""
    precision = float(to_catalogue(name, lo, dec=dec))
    # feed back the reported (catalogue-unit) value through the same draws
    back = float(evaluate([_to_internal(name, precision, dec)])[0])
    if not goal.met(back):
        precision *= 1.0 - 1e-9
        back = float(evaluate([_to_internal(name, precision, dec)])[0])
    return precision, back


def _to_internal(name, value, dec):
    return float(errors_to_internal([value], dec, names=(name,))[0])
