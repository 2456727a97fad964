"""Figure of the planner's gain curves (matplotlib, installed with perierr).

One column per input, because each input's new precision is read in its own unit (mas, mas/yr, km/s); two
rows: the 90 % width of d_ph and the probability of the curves' threshold. The precision axis is
logarithmic and runs from today's error (left, marked by a dotted line) to the best precision considered
(right), so "better" is to the right in every panel; today's value is the dashed horizontal line. Colours
from the palette of :mod:`perierr.report.figures`; markers and line styles carry the meaning in print.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import InputError
from ..plan.metrics import Metric
from ..units import AU_PER_PC

__all__ = ["gain_curve_panels", "plot_gain_curves"]

#: Rows of the figure: (metric or None for the curves' probability, axis label, scale from output units).
ROWS = (
    (Metric("distance_pc", "width90"), "90 % width of d_ph [au]", AU_PER_PC),
    (None, "P(d_ph < {threshold})", 1.0),
)

_FORMATS = (".png", ".pdf", ".svg")


def gain_curve_panels(curves) -> list:
    """The data each panel shows: one dict per (row, input), in the figure's order.

    Parameters
    ----------
    curves : GainCurves

    Returns
    -------
    list of dict
        ``row``, ``input``, ``unit``, ``x`` (new precisions, the input's catalogue unit), ``y`` (the row's
        statistic, scaled), ``today_x`` (today's error) and ``today_y`` (today's value).
    """
    panels = []
    for r, (metric, _, scale) in enumerate(ROWS):
        key = metric or curves.probability
        for name in curves.inputs:
            panels.append({
                "row": r, "input": name, "unit": curves.units[name],
                "x": np.asarray(curves.precision[name], dtype=float),
                "y": np.asarray(curves.curves[name][key], dtype=float) * scale,
                "today_x": float(curves.sigma[name]), "today_y": float(curves.current[key]) * scale,
            })  # fmt: skip
    return panels


def plot_gain_curves(curves, path=None):
    """Gain curves against the new precision of each input, in that input's unit.

    Parameters
    ----------
    curves : GainCurves
    path : str or Path, optional
        Save the figure there (``.png``, ``.pdf`` or ``.svg``).

    Returns
    -------
    matplotlib.figure.Figure
    """
    if path is not None and Path(path).suffix.lower() not in _FORMATS:
        raise InputError("plot", str(path), "expected a file name ending in .png, .pdf or .svg")
    try:
        import matplotlib

        matplotlib.use("Agg", force=False)
        import matplotlib.pyplot as plt
    except ImportError:
        raise ImportError("plotting needs matplotlib, a dependency of perierr: reinstall perierr") from None
    from .figures import PALETTE

    k = len(curves.inputs)
    fig, axes = plt.subplots(len(ROWS), k, figsize=(2.6 * k + 0.8, 5.6), squeeze=False, sharey="row",
                             constrained_layout=True)  # fmt: skip
    for panel in gain_curve_panels(curves):
        ax = axes[panel["row"], curves.inputs.index(panel["input"])]
        x = panel["x"]
        positive = x > 0  # an exact new measurement (0) has no place on a log axis
        ax.plot(x[positive], panel["y"][positive], color=PALETTE[5], marker="o", ms=3, lw=1.4)
        ax.axhline(panel["today_y"], color=PALETTE[0], lw=0.9, ls="--")
        ax.axvline(panel["today_x"], color=PALETTE[6], lw=0.9, ls=":")
        ax.set_xscale("log")
        ax.invert_xaxis()  # better precision to the right
        if panel["row"] == len(ROWS) - 1:
            ax.set_xlabel(f"new error of {panel['input']} [{panel['unit']}]", fontsize="small")
        if panel["row"] == 0:
            ax.set_title(panel["input"], fontsize="medium")
    for r, (_, label, _) in enumerate(ROWS):
        axes[r, 0].set_ylabel(label.format(threshold=curves.threshold))
    fig.suptitle(f"What a new measurement buys ({curves.settings['n']:,} common draws; dashed: today's value, "
                 "dotted: today's error)", fontsize="medium")  # fmt: skip
    if path is not None:
        from .files import atomic_path

        with atomic_path(path) as tmp:
            fig.savefig(tmp, dpi=130, format=Path(path).suffix.lower().lstrip("."))
    return fig
