"""Distance thresholds for 'does it pass within D?' probabilities, and those probabilities.

:func:`parse_thresholds` reads the thresholds a user gives; :func:`threshold_probability`
is the (weighted) fraction of draws passing within one, with its binomial Monte Carlo error.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import astropy.units as u
import numpy as np

from .errors import InputError
from .units import OUTPUT_UNITS, to_number

__all__ = ["DEFAULT_THRESHOLDS", "ThresholdProbability", "parse_thresholds", "threshold_probability"]

#: Default thresholds: 0.5, 1 and 2 pc; 20,000 and 100,000 au.
DEFAULT_THRESHOLDS = ("0.5 pc", "1 pc", "2 pc", "20000 au", "100000 au")


def parse_thresholds(values) -> list:
    """Turn thresholds into ``(label, distance_pc)`` pairs.

    Parameters
    ----------
    values : sequence of str, Quantity or float
        ``"20000 au"``, ``"0.5pc"``, ``2 * u.pc``; a bare number is in pc.
    """
    out = []
    for item in values:
        if isinstance(item, str):
            item = item.strip()
        pc = to_number("threshold", item, OUTPUT_UNITS["distance_pc"], example="0.5 pc")
        if not pc > 0:
            raise InputError("threshold", item, "expected a positive distance")
        if isinstance(item, str):
            label = item
        elif isinstance(item, u.Quantity):
            label = f"{item.value:g} {item.unit}"
        else:
            label = f"{float(item):g} pc"
        out.append((label, pc))
    return out


@dataclass(frozen=True)
class ThresholdProbability:
    """Probability that the perihelion distance is below a threshold.

    Attributes
    ----------
    label : str
        The threshold as the user gave it (e.g. ``"20000 au"``).
    distance_pc : float
    probability : float
    se : float
        Binomial Monte Carlo standard error ``sqrt(p (1 - p) / n_eff)``.
    upper95 : float
        95 % upper bound on the probability when no sample passed (P = 0; samples of zero weight do not count)
        (``1 - 0.05^(1/n_eff)``), else ``min(1, probability + 2 se)``.
    count : int
        Samples below the threshold.
    lower95 : float
        95 % lower bound when every sample passed (P = 1; samples of zero weight do not count)
        (``0.05^(1/n_eff)``), else ``max(0, probability - 2 se)``.
    """

    label: str
    distance_pc: float
    probability: float
    se: float
    upper95: float
    count: int
    lower95: float = 0.0

    def to_dict(self) -> dict:
        """Plain dict for JSON."""
        return {
            "threshold": self.label,
            "distance_pc": self.distance_pc,
            "probability": self.probability,
            "mc_error": self.se,
            "upper95": self.upper95,
            "lower95": self.lower95,
            "count": self.count,
        }


def threshold_probability(distance_pc, threshold_pc, *, label, weights=None) -> ThresholdProbability:
    """P(d_ph < threshold) over all samples.

    Parameters
    ----------
    distance_pc : array_like, shape (n,)
        Perihelion distance of every sample; samples whose distance is
        unbounded or undefined (parallax <= 0) carry ``inf`` or NaN and so
        count as not passing.
    threshold_pc : float
    label : str
    weights : array_like, shape (n,), optional
    """
    d = np.asarray(distance_pc)
    below = d < threshold_pc
    count = int(np.count_nonzero(below))
    if weights is None:
        n_eff = float(d.size)
        p = count / n_eff
    else:
        w = np.asarray(weights, dtype=float)
        wsum = w.sum()
        # dot vs sum rounding can exceed 1 by 1 ulp, or fall short of it when all the weight passed
        p = 1.0 if float(np.dot(~below, w)) == 0.0 else min(1.0, float(np.dot(below, w) / wsum))
        n_eff = float(wsum**2 / np.dot(w, w))
    se = math.sqrt(p * (1 - p) / n_eff)
    # no (or every) sample passed, counted by weight: samples of zero weight (outside a prior's support) do not
    # count, so a weighted P can be exactly 0 or 1 while some of them passed (or failed)
    upper = 1.0 - 0.05 ** (1.0 / n_eff) if p == 0.0 else min(1.0, p + 2 * se)
    lower = 0.05 ** (1.0 / n_eff) if p == 1.0 else max(0.0, p - 2 * se)
    return ThresholdProbability(label, float(threshold_pc), p, se, upper, count, lower)
