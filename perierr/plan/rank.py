"""Ranking (star, measurement) pairs for an observing proposal.

Each candidate is a new measurement of one input at a stated precision. Its
gain is the relative shrink of a chosen statistic (default: the 90 % width of
d_ph), ``1 - improved / today``, computed on common random numbers per star.
With a cost model and magnitudes, the ranking is by gain per telescope hour.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from ..models.base import ForwardModel
from ..units import DEC
from .cost import PhotonLimitedCost
from .update import make_measurement, update_covariance
from .whatif import common_draws, scenario_metrics

__all__ = ["Ranking", "rank_measurements"]


@dataclass(frozen=True)
class Ranking:
    """Candidates sorted best first.

    Attributes
    ----------
    rows : list of dict
        ``star``, ``input``, ``precision``, ``unit``, ``current``, ``improved``,
        ``gain`` and, with a cost model, ``hours`` and ``gain_per_hour``.
    metric : str
    by : {"gain", "gain_per_hour"}
    cost : dict or None
    settings : dict
    """

    rows: list
    metric: str
    by: str
    cost: dict | None = None
    settings: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """Plain dict for JSON."""
        return {"metric": self.metric, "ranked_by": self.by, "cost_model": self.cost,
                "candidates": [dict(r) for r in self.rows], "settings": dict(self.settings)}


def rank_measurements(
    stars,
    model: ForwardModel,
    candidates: dict,
    *,
    metric: str = "distance_pc.width90",
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
    metric : str
        Statistic to shrink: ``"<output>.width90"`` or ``"<output>.std"``.
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
    if metric.split(".")[-1] not in ("width90", "std"):
        raise InputError("metric", metric, "expected '<output>.width90' or '<output>.std'")
    if cost is not None and (magnitudes is None or len(magnitudes) != len(stars)):
        raise InputError("magnitudes", magnitudes, "a cost model needs one magnitude per star")
    draws = common_draws(n, seed)
    rows = []
    for k, star in enumerate(stars):
        ms = [make_measurement(name, p, dec=float(star.mean[DEC])) for name, p in candidates.items()]
        covs = np.stack([star.cov] + [update_covariance(star.cov, m.index, m.precision) for m in ms])
        values = scenario_metrics(star, model, covs, draws, thresholds=["1 pc"]).metric(metric)
        for j, m in enumerate(ms):
            now, new = float(values[0]), float(values[j + 1])
            row = {"star": star.name, "input": m.name, "precision": m.value, "unit": m.unit,
                   "current": now, "improved": new, "gain": 1.0 - new / now if now > 0 else 0.0}
            if cost is not None:
                if cost.covers(m.name) and m.value > 0:
                    hours = cost.hours(m.name, m.value, float(magnitudes[k]))
                    row["hours"] = hours
                    row["gain_per_hour"] = row["gain"] / hours if math.isfinite(hours) else 0.0
                else:
                    row["hours"] = None
                    row["gain_per_hour"] = None
            rows.append(row)
    by = "gain" if cost is None else "gain_per_hour"
    if by == "gain":
        rows.sort(key=lambda r: -r["gain"])
    else:
        rows.sort(key=lambda r: (r["gain_per_hour"] is None, -(r["gain_per_hour"] or 0.0), -r["gain"]))
    for i, r in enumerate(rows, 1):
        r["rank"] = i
    return Ranking(rows, metric, by, None if cost is None else cost.to_dict(), {"n": draws.n, "seed": draws.seed})
