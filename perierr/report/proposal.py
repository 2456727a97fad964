"""A proposal-ready paragraph and figure for one star: today's answer and what a measurement buys.

Both come from a :class:`~perierr.plan.Plan` with a what-if (``measure``): today's perihelion (median and
16-84 % interval, PDG-rounded by :func:`perierr.report.rounding.round_interval`), the input that dominates the
error of d_ph and its share, the 90 % interval of d_ph before and after the measurement, and, when the plan holds
it, the chance that the new data settle the decisive question (its futures drawn from today's predictive
distribution). The paragraph ends with what the numbers are not (:data:`perierr.cautions.HAZARD`). The figure
shows the distribution of d_ph today and after, on the same draws, with the question's threshold.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..cautions import HAZARD
from ..errors import InputError
from ..units import AU_PER_PC, INPUT_WORDS
from .files import atomic_write_text
from .rounding import round_interval

__all__ = ["proposal_figure", "proposal_paragraph", "write_proposal"]


def _require_what_if(plan) -> None:
    if plan.what_if is None:
        raise InputError("measure", "none", "a plan with a what-if measurement (--measure INPUT=PREC)")


def _median_interval(summary, scale=1.0) -> str:
    """``0.653 +0.013/-0.012`` or ``20,700 ± 600``: the median with its 16-84 % interval, PDG-rounded."""
    med, lo, hi = (summary.quantile(q) * scale for q in (0.5, 0.16, 0.84))
    if not (med - lo > 0 and hi - med > 0):
        return f"{med:.6g}"
    r = round_interval(med, med - lo, hi - med)

    def grouped(text):  # thousands separated, at the rounded place
        return f"{float(text):,.{max(0, -r.place)}f}" if abs(float(text)) >= 1000 else text

    value, plus, minus = grouped(r.value), grouped(r.plus), grouped(r.minus)
    return f"{value} ± {plus}" if r.symmetric else f"{value} (+{plus}/−{minus})"


def _width90(summary) -> float:
    return float(summary.quantile(0.95) - summary.quantile(0.05))


def proposal_paragraph(plan) -> str:
    """One paragraph for a proposal's scientific justification, with numbers and intervals.

    Parameters
    ----------
    plan : Plan
        With a what-if measurement (:func:`perierr.plan.plan` with ``measure``).

    Returns
    -------
    str
    """
    _require_what_if(plan)
    w = plan.what_if
    mc = w.mc_current
    name = plan.star.name or "The star"
    model = {"orbit": "its Galactic orbit", "straight_line": "straight-line motion"}.get(
        plan.model.get("name"), f"the {plan.model.get('name')} model")
    s = mc.summaries
    past = " (negative: in the past)" if s["time_myr"].median < 0 else ""
    parts = [
        f"{name} is predicted to pass the Sun at d_ph = {_median_interval(s['distance_pc'], AU_PER_PC)} au at "
        f"t_ph = {_median_interval(s['time_myr'])} Myr{past}, with v_ph = {_median_interval(s['speed_kms'])} km/s "
        f"(medians with their 16-84 % intervals from {mc.n:,} Monte Carlo draws following {model}).",
    ]
    b = w.budget_current
    if b is not None and b.dominant("distance_pc") is not None:
        dom = b.dominant("distance_pc")
        parts.append(f"The uncertainty of d_ph is dominated by its {INPUT_WORDS.get(dom, dom)} "
                     f"({b.share('distance_pc')[dom]:.0%} of its variance).")
    what = " and ".join(f"its {INPUT_WORDS[m.name]} to {m.value:.3g} {m.unit}" for m in w.measurements)
    a, c = _width90(w.mc_current.summaries["distance_pc"]), _width90(w.mc_improved.summaries["distance_pc"])
    if not a > 0:
        parts.append(f"Measuring {what} cannot narrow d_ph: its 90 % interval has no width today.")
    elif c > a:  # under a distance prior a sharper likelihood can move the posterior where it is wider
        parts.append(f"Measuring {what} widens the 90 % interval of d_ph from {a * AU_PER_PC:,.0f} au to "
                     f"{c * AU_PER_PC:,.0f} au ({c / a - 1:.0%} wider): the new value moves the star where the prior "
                     "spreads it more.")  # fmt: skip
    else:
        parts.append(f"Measuring {what} narrows the 90 % interval of d_ph from {a * AU_PER_PC:,.0f} au to "
                     f"{c * AU_PER_PC:,.0f} au ({1 - c / a:.0%}).")
    for pp in getattr(plan, "settle", ()):
        o = pp.outcomes[0]
        r = round_interval(100 * o.p_settle, 100 * o.p_settle_se) if o.p_settle_se > 0 else None
        chance = f"{r.value} ± {r.plus} %" if r is not None else f"{100 * o.p_settle:.0f} %"
        label = pp.goal.threshold or ""
        today = f"today P(d_ph < {label}) = {pp.today.value:.2f}" if pp.goal.kind == "decide" else "today"
        parts.append(
            f"Whether it passes within {label} — {today} — would be settled (a probability below "
            f"{pp.goal.alpha:g} or above {1 - pp.goal.alpha:g}) in {chance} of the possible outcomes of the new "
            f"measurement ({pp.n_future} outcomes drawn from today's predictive distribution)."
            if pp.goal.kind == "decide" else
            f"The goal '{pp.goal.describe()}' would be met in {chance} of the possible outcomes."
        )  # fmt: skip
    parts.append(HAZARD)
    return " ".join(parts)


def proposal_figure(plan, path=None):
    """The distribution of d_ph today and after the what-if measurement, on the same draws.

    Parameters
    ----------
    plan : Plan
        With a what-if measurement.
    path : str or Path, optional
        Save there (``.png`` or ``.pdf``).

    Returns
    -------
    matplotlib.figure.Figure
    """
    from .figures import PALETTE, _check_path, _pyplot, _save

    _require_what_if(plan)
    _check_path(path)
    w = plan.what_if
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(6.4, 3.8), constrained_layout=True)
    series = []
    for mc in (w.mc_current, w.mc_improved):
        d = np.asarray(mc.perihelion.distance_pc, dtype=float)[mc.valid] * AU_PER_PC
        wt = None if mc.samples.weights is None else np.asarray(mc.samples.weights, dtype=float)[mc.valid]
        series.append((d, wt))
    lo = min(np.quantile(d, 0.001) for d, _ in series)
    hi = max(np.quantile(d, 0.999) for d, _ in series)
    if not hi > lo:
        raise InputError("distance", f"{lo:.6g} au", "draws that spread in d_ph (nothing to narrow)")
    bins = np.linspace(max(0.0, lo - 0.05 * (hi - lo)), hi + 0.05 * (hi - lo), 70)
    what = " and ".join(m.label for m in w.measurements)
    styles = (("today", PALETTE[0], "--", 1.4), (f"after {what}", PALETTE[5], "-", 1.8))
    for (d, wt), (label, colour, ls, lw) in zip(series, styles):
        density = np.histogram(d, bins=bins, weights=wt)[0] / (float(d.size if wt is None else wt.sum())
                                                               * np.diff(bins))  # fmt: skip
        ax.stairs(density, bins, color=colour, linestyle=ls, linewidth=lw, label=label)
    for pp in getattr(plan, "settle", ())[:1]:
        if pp.goal.threshold_pc is not None:
            x = pp.goal.threshold_pc * AU_PER_PC
            if bins[0] <= x <= bins[-1]:
                o = pp.outcomes[0]
                ax.axvline(x, color=PALETTE[6], lw=1.2, ls=":",
                           label=f"{pp.goal.threshold}: settled in {100 * o.p_settle:.0f} % of outcomes")
    ax.set_xlabel("perihelion distance d_ph [au]")
    ax.set_ylabel("probability density [1/au]")
    name = str(plan.star.name or "star").replace("$", r"\$")
    ax.set_title(f"{name}: what the measurement buys ({w.settings.get('n', '?'):,} common draws)",
                 fontsize="medium")  # fmt: skip
    ax.legend(fontsize="small", frameon=False)
    _save(fig, path)
    return fig


def write_proposal(plan, path) -> Path:
    """Write the paragraph to ``path`` (``.txt`` or ``.md``), atomically; returns the path."""
    if Path(path).suffix.lower() not in (".txt", ".md"):
        raise InputError("proposal", str(path), "expected a file name ending in .txt or .md")
    return atomic_write_text(path, proposal_paragraph(plan) + "\n")

