"""Ranking (star, measurement) pairs for an observing proposal.

Each candidate is a new measurement of one input at a stated precision. Its
gain is the relative shrink of a chosen statistic (default: the 90 % width of
d_ph), ``1 - improved / today``, computed on common random numbers per star.
With a cost model and magnitudes, the ranking is by gain per telescope hour.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from ..errors import InputError
from ..models.base import ForwardModel
from ..units import DEC
from .cost import PhotonLimitedCost
from .curves import WIDTH90_DISTANCE
from .metrics import Metric
from .update import make_measurement, update_covariance
from .whatif import common_draws, scenario_metrics

__all__ = ["RankedCandidate", "Ranking", "rank_measurements"]


@dataclass(frozen=True)
class RankedCandidate:
    """One (star, measurement) pair and what it buys.

    Attributes
    ----------
    star : str
        The star's name.
    input : str
        The input to measure.
    precision : float
        The new measurement's standard error, catalogue units.
    unit : str
    current, improved : float
        The ranking's statistic today and after the measurement (output units).
    gain : float
        ``1 - improved / current`` (0 when today's value is 0).
    rank : int
        1 for the best candidate.
    priced : bool
        True when the ranking used a cost model (``hours`` and ``gain_per_hour`` are then reported).
    hours : float or None
        Telescope time of the measurement; None where the cost model cannot price it.
    gain_per_hour : float or None
    """

    star: str
    input: str
    precision: float
    unit: str
    current: float
    improved: float
    gain: float
    rank: int = 0
    priced: bool = False
    hours: float | None = None
    gain_per_hour: float | None = None

    def to_dict(self) -> dict:
        """Plain dict for JSON (``hours`` and ``gain_per_hour`` only with a cost model)."""
        out = {"star": self.star, "input": self.input, "precision": self.precision, "unit": self.unit,
               "current": self.current, "improved": self.improved, "gain": self.gain}
        if self.priced:
            out["hours"] = self.hours
            out["gain_per_hour"] = self.gain_per_hour
        out["rank"] = self.rank
        return out


@dataclass(frozen=True)
class Ranking:
    """Candidates sorted best first.

    Attributes
    ----------
    rows : tuple of RankedCandidate
    metric : Metric
        The statistic whose shrink is the gain.
    by : {"gain", "gain_per_hour"}
    cost : dict or None
    settings : dict
    """

    rows: tuple
    metric: Metric
    by: str
    cost: dict | None = None
    settings: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """Plain dict for JSON."""
        return {"metric": self.metric.key, "ranked_by": self.by, "cost_model": self.cost,
                "candidates": [r.to_dict() for r in self.rows], "settings": dict(self.settings)}


def rank_measurements(
    stars,
    model: ForwardModel,
    candidates: dict,
    *,
    metric=WIDTH90_DISTANCE,
    cost: PhotonLimitedCost | None = None,
    magnitudes=None,
    n: int = 20_000,
    seed: int | np.random.Generator | None = None,
) -> Ranking:
    """Rank every (star, measurement) pair by the gain it buys.

    Parameters
    ----------
    stars : sequence of ObservedStar
    model : ForwardModel
    candidates : dict
        Input -> new precision in catalogue units, applied to every star
        (e.g. ``{"radial_velocity": 0.1, "parallax": 0.01}``).
    metric : Metric or str
        Statistic to shrink: the width90 or std of an output, as a
        :class:`~perierr.plan.metrics.Metric` or its key (``"<output>.width90"``,
        ``"<output>.std"``).
    cost : PhotonLimitedCost, optional
        With ``magnitudes``, rank by gain per hour; inputs the model cannot
        price are ranked after the priced ones, by gain.
    magnitudes : sequence of float, optional
        One magnitude per star (the band the cost reference uses).
    n : int
        Common draws, the same for every star.
    seed : int, numpy.random.Generator or None
        Seed of the common draws (see :func:`perierr.sampling.gaussian.resolve_seed`).
    """
    stars = list(stars)
    if not stars:
        raise InputError("stars", stars, "expected at least one star")
    given = metric
    try:
        metric = Metric.coerce(metric)
    except InputError:
        metric = None
    if metric is None or metric.kind not in ("width90", "std"):
        raise InputError("metric", given, "expected '<output>.width90' or '<output>.std'")
    if cost is not None and (magnitudes is None or len(magnitudes) != len(stars)):
        raise InputError("magnitudes", magnitudes, "a cost model needs one magnitude per star")
    draws = common_draws(n, seed)
    rows = []
    for k, star in enumerate(stars):
        ms = [make_measurement(name, p, dec=float(star.mean[DEC])) for name, p in candidates.items()]
        covs = np.stack([star.cov] + [update_covariance(star.cov, m.index, m.precision) for m in ms])
        values = scenario_metrics(star, model, covs, draws, thresholds=["1 pc"]).metric(metric)
        magnitude = None if cost is None else float(magnitudes[k])
        rows += [_candidate(star.name, m, float(values[0]), float(values[j + 1]), cost, magnitude)
                 for j, m in enumerate(ms)]
    by = "gain" if cost is None else "gain_per_hour"
    if by == "gain":
        rows.sort(key=lambda r: -r.gain)
    else:
        rows.sort(key=lambda r: (r.gain_per_hour is None, -(r.gain_per_hour or 0.0), -r.gain))
    ranked = tuple(replace(r, rank=i) for i, r in enumerate(rows, 1))
    return Ranking(ranked, metric, by, None if cost is None else cost.to_dict(), {"n": draws.n, "seed": draws.seed})


def _candidate(star_name, m, now, new, cost, magnitude) -> RankedCandidate:
    """A candidate before ranking: its gain and, with a cost model, its hours and gain per hour."""
    gain = 1.0 - new / now if now > 0 else 0.0
    hours = per_hour = None
    if cost is not None and cost.covers(m.name) and m.value > 0:
        hours = cost.hours(m.name, m.value, magnitude)
        per_hour = gain / hours if math.isfinite(hours) else 0.0
    return RankedCandidate(star_name, m.name, m.value, m.unit, now, new, gain, priced=cost is not None,
                           hours=hours, gain_per_hour=per_hour)
