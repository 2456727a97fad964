"""The other model beside the one that ran: the straight line on the same draws, or one orbit at the nominal inputs.

An analysis with the orbit model (or any model other than the straight line)
carries the straight-line answer on the same draws and the difference
(:func:`straight_line_comparison`): medians, the model's interval half-width,
and every threshold probability. A straight-line analysis carries the orbit
model at the nominal inputs (:func:`orbit_nominal_comparison`): a single orbit,
a few tens of milliseconds, which says what the Galactic tide would change
without running the Monte Carlo twice. :mod:`perierr.cautions` reads both (the
``model-difference`` caution); the JSON has them as
``straight_line_comparison`` and ``orbit_nominal_comparison``.
"""

from __future__ import annotations

import sys

import numpy as np

from .models import ForwardModel, StraightLine, make_model
from .propagate.montecarlo import MonteCarloResult, evaluate_aligned
from .summary import weighted_quantiles
from .thresholds import threshold_probability
from .units import OUTPUTS

__all__ = [
    "half_width",
    "is_straight_line",
    "orbit_nominal_comparison",
    "straight_counterpart",
    "straight_line_comparison",
]


def half_width(summary) -> float:
    """(q84 - q16) / 2 of an :class:`~perierr.summary.OutputSummary`: the scale differences are judged on."""
    return 0.5 * float(summary.quantile(0.84) - summary.quantile(0.16))


def _focusing_module():
    """:mod:`perierr.models.focusing` if it was imported (a focused model exists only then), else None."""
    return sys.modules.get("perierr.models.focusing")


def is_straight_line(model: ForwardModel) -> bool:
    """Whether ``model`` is the straight line, with or without gravitational focusing."""
    focusing = _focusing_module()
    while focusing is not None and isinstance(model, focusing.Focused):
        model = model.base
    return isinstance(model, StraightLine)


def straight_counterpart(model: ForwardModel) -> ForwardModel:
    """The straight line with the same gravitational focusing as ``model`` (none if it has none).

    Comparing like with like: the difference is then the Galactic tide's, not
    the focusing's. The focused straight line is evaluated at the nominal mass.
    """
    focusing = _focusing_module()
    if focusing is not None and isinstance(model, focusing.Focused):
        return focusing.Focused(StraightLine(), mass_msun=model.mass_msun, mass_error_msun=model.mass_error_msun)
    return StraightLine()


def straight_line_comparison(mc: MonteCarloResult, model: ForwardModel, reference, *, linear=None) -> dict:
    """The straight-line answer on the Monte Carlo draws of ``model``, and the difference.

    Parameters
    ----------
    mc : MonteCarloResult
        The run of ``model`` (its draws, weights and summaries).
    model : ForwardModel
        The model that ran (its focusing, if any, is applied to the straight line too).
    reference : array_like, shape (6,)
        The nominal observables (for the nominal difference).
    linear : LinearResult, optional
        The linearization of ``model``; gives the nominal values.

    Returns
    -------
    dict
        For each output: ``median`` (straight line), ``difference_of_medians``
        (model minus straight line), ``half_width`` ((q84 - q16)/2 of the
        model's answer) and, with ``linear``, ``nominal`` and
        ``difference_of_nominal``; ``thresholds``: for each threshold its
        ``label``, ``distance_pc``, the straight-line ``probability``, the
        model's (``model_probability``) and the ``difference`` (model minus
        straight line). Medians and probabilities use the definitions and
        weights of the summaries.
    """
    straight = straight_counterpart(model)
    ph, _ = evaluate_aligned(straight, mc.samples.values, reference=reference)
    out = {}
    for k, q in enumerate(OUTPUTS):
        x, w = mc.valid_values(ph.output(q))
        med = float(weighted_quantiles(x, [0.5], w)[0])
        entry = {
            "median": med,
            "difference_of_medians": float(mc.summaries[q].median - med),
            "half_width": half_width(mc.summaries[q]),
        }
        if linear is not None:
            nominal = float(straight.evaluate(np.asarray(reference, dtype=float)[None, :]).as_array()[0, k])
            entry["nominal"] = nominal
            entry["difference_of_nominal"] = float(linear.value[k] - nominal)
        out[q] = entry
    rows = []
    for t in mc.thresholds:
        # the aligned distances as they are: NaN (parallax <= 0) never passes, as in the Monte Carlo's own count
        p = threshold_probability(ph.distance_pc, t.distance_pc, label=t.label, weights=mc.samples.weights)
        rows.append({"label": t.label, "distance_pc": t.distance_pc, "probability": p.probability,
                     "model_probability": t.probability, "difference": t.probability - p.probability})  # fmt: skip
    out["thresholds"] = rows
    return out


def orbit_nominal_comparison(point, mc: MonteCarloResult) -> dict:
    """The orbit model (default options) at the nominal inputs beside the straight line, for a straight-line run.

    Parameters
    ----------
    point : array_like, shape (6,)
        The nominal observables (parallax > 0).
    mc : MonteCarloResult
        The straight-line run: its half-widths are the scale of the differences.

    Returns
    -------
    dict
        For each output: ``straight_line`` and ``orbit`` (nominal values),
        ``difference`` (orbit minus straight line) and ``half_width``
        ((q84 - q16)/2 of the straight-line Monte Carlo answer); ``flagged``:
        whether the orbit model flagged its answer (e.g. outside its search
        window).
    """
    row = np.asarray(point, dtype=float)[None, :]
    orbit = make_model("orbit").evaluate(row)  # no reference: the one orbit is integrated directly
    straight = StraightLine().evaluate(row)
    out = {}
    for q in OUTPUTS:
        a, b = float(orbit.output(q)[0]), float(straight.output(q)[0])
        out[q] = {"straight_line": b, "orbit": a, "difference": a - b, "half_width": half_width(mc.summaries[q])}
    out["flagged"] = bool(orbit.flags is not None and orbit.flags[0])
    return out
