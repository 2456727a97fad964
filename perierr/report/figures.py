"""Figures of one analysis for papers and talks (matplotlib).

Design: one idea per figure, readable in print (solid lines and hatching do not rely on colour alone), the
colour-blind-safe palette of Okabe & Ito (2008, "Color Universal Design"), labels with units, PNG or PDF chosen
by the file's suffix, written atomically. Figures are returned as ``matplotlib.figure.Figure`` for further
editing; nothing is shown on screen.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import InputError
from ..units import AU_PER_PC, OUTPUT_TITLES
from .files import atomic_path
from .shares import input_label

__all__ = ["PALETTE", "budget_figure", "distance_figure"]

#: Okabe & Ito (2008) colours: black, orange, sky blue, bluish green, yellow, blue, vermillion, reddish purple.
PALETTE = ("#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7")

_FORMATS = (".png", ".pdf")


def _pyplot():
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    return plt


def _check_path(path) -> None:
    """Refuse a file name whose format the figures cannot be written in (before any drawing)."""
    if path is not None and Path(path).suffix.lower() not in _FORMATS:
        raise InputError("figure", str(path), "expected a file name ending in .png or .pdf")


def _save(fig, path):
    if path is not None:
        with atomic_path(path) as tmp:
            fig.savefig(tmp, dpi=150, format=Path(path).suffix.lower().lstrip("."))


def distance_figure(analysis, path=None, *, unit: str = "au"):
    """The perihelion distance's distribution, with the median, the 16-84 % and 5-95 % intervals and thresholds.

    Parameters
    ----------
    analysis : Analysis
    path : str or Path, optional
        Save there (``.png`` or ``.pdf``).
    unit : {"au", "pc"}

    Returns
    -------
    matplotlib.figure.Figure
    """
    if unit not in ("au", "pc"):
        raise InputError("unit", unit, "expected 'au' or 'pc'")
    _check_path(path)
    plt = _pyplot()
    mc = analysis.monte_carlo
    scale = AU_PER_PC if unit == "au" else 1.0
    d = np.asarray(mc.perihelion.distance_pc, dtype=float)[mc.valid] * scale
    w = None if mc.samples.weights is None else np.asarray(mc.samples.weights, dtype=float)[mc.valid]
    s = mc.summaries["distance_pc"]
    q = {lv: s.quantile(lv) * scale for lv in (0.05, 0.16, 0.5, 0.84, 0.95)}
    fig, ax = plt.subplots(figsize=(6.4, 4.0), constrained_layout=True)
    lo, hi = np.quantile(d, [0.001, 0.999]) if w is None else (q[0.05], q[0.95])
    span = hi - lo
    bins = np.linspace(max(lo - 0.1 * span, 0.0), hi + 0.1 * span, 60)
    ax.hist(d, bins=bins, weights=w, density=True, color=PALETTE[2], edgecolor=PALETTE[5], linewidth=0.5)
    ax.axvspan(q[0.05], q[0.95], color=PALETTE[1], alpha=0.15, hatch="//", label="5-95 %")
    ax.axvspan(q[0.16], q[0.84], color=PALETTE[1], alpha=0.30, label="16-84 %")
    ax.axvline(q[0.5], color=PALETTE[0], lw=1.5, label=f"median {q[0.5]:,.5g} {unit}")
    for k, t in enumerate(mc.thresholds):
        x = t.distance_pc * scale
        if bins[0] <= x <= bins[-1]:
            ax.axvline(x, color=PALETTE[6], lw=1.2, ls=(0, (4, 2 + k)), label=f"{t.label}: P = {t.probability:.3g}")
    ax.set_xlabel(f"perihelion distance d_ph [{unit}]")
    ax.set_ylabel(f"probability density [1/{unit}]")
    name = analysis.star.name or "star"
    ax.set_title(f"{name}: {OUTPUT_TITLES['distance_pc'].split(' [')[0]} at perihelion ({mc.n:,} draws)",
                 fontsize="medium")
    ax.legend(fontsize="small", frameon=False)
    _save(fig, path)
    return fig


def budget_figure(analysis, path=None, *, output: str = "distance_pc"):
    """The linear error budget of one output as horizontal bars: each input's Shapley share of the variance.

    Parameters
    ----------
    analysis : Analysis
    path : str or Path, optional
        Save there (``.png`` or ``.pdf``).
    output : {"distance_pc", "time_myr", "speed_kms"}

    Returns
    -------
    matplotlib.figure.Figure
    """
    if analysis.budget is None:
        raise InputError("budget", "none", "an analysis with a linear budget (the linearization failed or was off)")
    _check_path(path)
    shares = analysis.budget.share(output)
    plt = _pyplot()
    names = list(shares)
    values = np.array([shares[n] for n in names]) * 100
    order = np.argsort(values)
    fig, ax = plt.subplots(figsize=(6.4, 0.45 * len(names) + 1.2), constrained_layout=True)
    ax.barh(np.arange(len(names)), values[order], color=PALETTE[5], edgecolor=PALETTE[0], linewidth=0.5)
    ax.set_yticks(np.arange(len(names)), [input_label(names[i]) for i in order])
    for y, v in enumerate(values[order]):
        ax.text(v, y, f" {v:.1f} %", va="center", fontsize="small")
    ax.set_xlim(0, max(100.0, values.max() * 1.15))
    ax.set_xlabel(f"share of the variance of the {OUTPUT_TITLES[output].split(' [')[0]} [%] (linearized Shapley)")
    ax.set_title(f"{analysis.star.name or 'star'}: who sets the error", fontsize="medium")
    _save(fig, path)
    return fig
