"""Goals a re-observation should reach: a target sigma or 90 % width, or a decisive answer."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..thresholds import parse_thresholds
from ..units import AU_PER_PC, OUTPUT_UNITS, OUTPUTS, to_number
from .metrics import Metric

__all__ = ["Goal", "decide_goal", "output_name", "parse_goal", "spread_goal"]

_OUTPUT_ALIASES = {
    "t_ph": "time_myr",
    "d_ph": "distance_pc",
    "v_ph": "speed_kms",
    "time": "time_myr",
    "distance": "distance_pc",
    "speed": "speed_kms",
}
KINDS = ("width90", "sigma", "decide")


def output_name(name: str) -> str:
    """Canonical output name; accepts ``d_ph``, ``t_ph``, ``v_ph``."""
    key = _OUTPUT_ALIASES.get(str(name).strip(), str(name).strip())
    if key not in OUTPUTS:
        raise InputError("output", name, f"expected one of {', '.join(OUTPUTS)} (or d_ph, t_ph, v_ph)")
    return key


@dataclass(frozen=True)
class Goal:
    """What the new measurement must achieve.

    Attributes
    ----------
    kind : {"width90", "sigma", "decide"}
        Width of the central 90 % interval or standard deviation of ``output``
        at most ``target``; or P(d_ph < threshold) below ``alpha`` or above
        ``1 - alpha`` (a decisive answer to "does it pass within D?").
    output : str or None
    target : float or None
        In output units (pc, Myr, km/s).
    threshold : str or None
        Label of the distance threshold, e.g. ``"1 pc"``.
    threshold_pc : float or None
    alpha : float or None
    """

    kind: str
    output: str | None = None
    target: float | None = None
    threshold: str | None = None
    threshold_pc: float | None = None
    alpha: float | None = None

    @property
    def metric(self) -> Metric:
        """The statistic the goal is about (a probability for "decide", else the width90 or std of the output)."""
        if self.kind == "decide":
            return Metric.probability(self.threshold)
        return Metric(self.output, "std" if self.kind == "sigma" else "width90")

    @property
    def metric_key(self) -> str:
        """Key of the statistic in JSON documents (``metric.key``)."""
        return self.metric.key

    def score(self, metric) -> np.ndarray:
        """The quantity compared with the target (for "decide": min(p, 1 - p))."""
        m = np.asarray(metric, dtype=float)
        return np.minimum(m, 1.0 - m) if self.kind == "decide" else m

    def bound(self) -> float:
        """The score must be below this (``alpha``) or at most this (``target``)."""
        return float(self.alpha if self.kind == "decide" else self.target)

    def met(self, metric) -> np.ndarray:
        """True where the goal is reached."""
        s = self.score(metric)
        return s < self.bound() if self.kind == "decide" else s <= self.bound()

    def format(self, metric) -> str:
        """A value of the goal's statistic with its unit (``"P = 0.47"``, ``"0.0077 pc (1,595 au)"``)."""
        m = float(metric)
        if self.kind == "decide":
            return f"P = {m:.4g}"
        extra = f" ({m * AU_PER_PC:,.0f} au)" if self.output == "distance_pc" else ""
        return f"{m:.4g} {OUTPUT_UNITS[self.output].to_string()}{extra}"

    def describe(self) -> str:
        """Plain words, e.g. ``"90 % width of distance_pc <= 0.005 pc (1031 au)"``."""
        if self.kind == "decide":
            return f"P(d_ph < {self.threshold}) below {self.alpha:g} or above {1 - self.alpha:g}"
        what = "90 % width" if self.kind == "width90" else "sigma"
        unit = OUTPUT_UNITS[self.output].to_string()
        extra = f" ({self.target * AU_PER_PC:,.0f} au)" if self.output == "distance_pc" else ""
        return f"{what} of {self.output} <= {self.target:.4g} {unit}{extra}"

    def to_dict(self) -> dict:
        """Plain dict for JSON."""
        out = {"kind": self.kind, "description": self.describe()}
        if self.kind == "decide":
            out.update(threshold=self.threshold, distance_pc=self.threshold_pc, alpha=self.alpha)
        else:
            out.update(output=self.output, target=self.target, unit=OUTPUT_UNITS[self.output].to_string())
        return out


def _to_output_units(output: str, value) -> float:
    unit = OUTPUT_UNITS[output]
    out = to_number(f"{output} target", value, unit, example="2000 au" if output == "distance_pc" else None)
    if not out > 0:
        raise InputError(f"{output} target", value, "expected a positive target")
    return out


def spread_goal(kind: str, output: str, target) -> Goal:
    """A width90 or sigma goal; ``target`` bare in pc/Myr/km/s or with a unit (``"2000 au"``)."""
    if kind not in ("width90", "sigma"):
        raise InputError("goal kind", kind, "expected 'width90' or 'sigma' (or use decide_goal)")
    key = output_name(output)
    return Goal(kind, output=key, target=_to_output_units(key, target))


def decide_goal(threshold, alpha: float = 0.05) -> Goal:
    """Goal: P(d_ph < threshold) below ``alpha`` or above ``1 - alpha``."""
    if not 0.0 < float(alpha) < 0.5:
        raise InputError("alpha", alpha, "expected a probability between 0 and 0.5, e.g. 0.05")
    ((label, pc),) = parse_thresholds([threshold])
    return Goal("decide", threshold=label, threshold_pc=pc, alpha=float(alpha))


def parse_goal(kind: str, text: str, *, alpha: float = 0.05) -> Goal:
    """Parse a command-line goal: ``("width90", "d_ph=2000 au")``, ``("decide", "1 pc")``."""
    if kind == "decide":
        return decide_goal(text, alpha)
    if "=" not in str(text):
        raise InputError(f"{kind} goal", text, "expected OUTPUT=VALUE, e.g. d_ph='2000 au' or t_ph=0.005")
    name, _, value = str(text).partition("=")
    return spread_goal(kind, name, value)
