"""Figure of the target list: what each candidate buys against the hours it costs.

Two panels sharing a logarithmic hours axis: the gain in the 90 % width of d_ph (left) and P(settle), the
chance that the new data settle the decisive question (right, with its Monte Carlo error bar; a dotted
line joins it to the star's settled-today value 0 or 1, so the uplift reads as the line's length; only
points with an uplift carry their rank there).
Colours name the input (Okabe-Ito palette of :mod:`perierr.report.figures`), marker shapes the star, so the
figure reads in black and white too; each point is labelled with its rank. Rows without finite hours are
left out and counted in the title.
"""

from __future__ import annotations

import math
from pathlib import Path

from ..errors import InputError
from ..units import OBSERVABLES

__all__ = ["plot_targets", "target_points"]

_FORMATS = (".png", ".pdf")
_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "<", ">", "h")


def target_points(result) -> list:
    """The plotted points: one dict per row with finite hours (rank, star, input, hours, gain, P(settle), se)."""
    out = []
    for row in result.table:
        hours = float(row["hours"].value)
        if not (math.isfinite(hours) and hours > 0):
            continue
        out.append({
            "rank": int(row["rank"]), "star": str(row["star"]), "star_index": int(row["star_index"]),
            "input": str(row["input"]), "hours": hours, "gain": float(row["gain"]),
            "p_settle": float(row["p_settle"]), "p_settle_se": float(row["p_settle_se"]),
            "today_settled": bool(row["today_settled"]),
        })  # fmt: skip
    return out


def plot_targets(result, path=None):
    """Gain and P(settle) against hours for every priced candidate.

    Parameters
    ----------
    result : TargetList
    path : str or Path, optional
        Save there (``.png`` or ``.pdf``), atomically.

    Returns
    -------
    matplotlib.figure.Figure
    """
    if path is not None and Path(path).suffix.lower() not in _FORMATS:
        raise InputError("--plot", str(path), "expected a file name ending in .png or .pdf")
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt
    from matplotlib.lines import Line2D

    from .figures import PALETTE

    points = target_points(result)
    colours = {name: PALETTE[(k % 7) + 1] for k, name in enumerate(OBSERVABLES)}  # black kept for lines
    stars = {}
    for row in result.table:
        stars.setdefault(int(row["star_index"]), str(row["star"]))
    marker = {k: _MARKERS[i % len(_MARKERS)] for i, k in enumerate(sorted(stars))}
    fig, (left, right) = plt.subplots(1, 2, figsize=(10.5, 4.6), sharex=True, constrained_layout=True)
    for p in points:
        style = dict(color=colours[p["input"]], marker=marker[p["star_index"]], ms=7, mec="black", mew=0.6, ls="none")
        left.plot(p["hours"], p["gain"], **style)
        right.errorbar(p["hours"], p["p_settle"], yerr=p["p_settle_se"], ecolor="0.4", elinewidth=0.8, capsize=2,
                       **style)  # fmt: skip
        right.plot([p["hours"]] * 2, [float(p["today_settled"]), p["p_settle"]], color="0.5", lw=0.8, ls=":")
        labelled = [(left, p["gain"])]
        if p["p_settle"] != float(p["today_settled"]):  # points with no uplift crowd at 0 and 1: not labelled
            labelled.append((right, p["p_settle"]))
        for ax, y in labelled:
            ax.annotate(str(p["rank"]), (p["hours"], y), xytext=(4, 4), textcoords="offset points", fontsize=7)
    for ax in (left, right):
        if points:
            ax.set_xscale("log")
        ax.set_xlabel("telescope time [h]")
        ax.grid(True, which="major", color="0.9", lw=0.6)
    left.set_ylabel("gain: 1 - width after / today (90 % of d_ph)")
    right.set_ylabel(f"P(settle): {result.goal.describe()}", fontsize="small")
    right.set_ylim(-0.05, 1.05)
    used_inputs = list(dict.fromkeys(p["input"] for p in points))
    handles = [Line2D([], [], color=colours[n], marker="o", ls="none", mec="black", label=n) for n in used_inputs]
    shown = sorted({p["star_index"] for p in points})
    handles += [Line2D([], [], color="white", marker=marker[k], mec="black", ls="none", label=_short(stars[k]))
                for k in shown]  # fmt: skip
    if handles:
        left.legend(handles=handles, fontsize="small", frameon=False, loc="best")
    left_out = len(result.table) - len(points)
    extra = f"; {left_out} candidates without finite hours not shown" if left_out else ""
    fig.suptitle(f"What each candidate buys per telescope hour (numbers: rank){extra}", fontsize="medium")
    if not points:
        left.text(0.5, 0.5, "no candidate has finite hours", transform=left.transAxes, ha="center")
    if path is not None:
        from .files import atomic_path

        with atomic_path(path) as tmp:
            fig.savefig(tmp, dpi=150, format=Path(path).suffix.lower().lstrip("."))
    return fig


def _short(name: str, width: int = 28) -> str:
    return name if len(name) <= width else name[: width - 1] + "~"
