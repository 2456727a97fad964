"""Plain-text report of a re-observation :class:`~perierr.plan.Plan`."""

from __future__ import annotations

import numpy as np

from ..cautions import HAZARD, messages
from ..plan.curves import WIDTH90_DISTANCE
from ..units import AU_PER_PC
from .shares import format_share, input_label

__all__ = ["format_plan"]


def _interval(summary, scale=1.0, fmt=".4g"):
    lo, hi = summary.quantile(0.05) * scale, summary.quantile(0.95) * scale
    return f"{lo:{fmt}} .. {hi:{fmt}} (width {hi - lo:{fmt}})"


def _what_if_lines(w) -> list:
    out = ["What-if: measure " + " and ".join(m.label for m in w.measurements), ""]
    rows = [
        ("d_ph 90 % [au]", "distance_pc", AU_PER_PC, ",.0f"),
        ("t_ph 90 % [Myr]", "time_myr", 1.0, ".5g"),
        ("v_ph 90 % [km/s]", "speed_kms", 1.0, ".4g"),
    ]
    out.append(f"  {'':<21}{'today':<40}{'after'}")
    for label, q, scale, fmt in rows:
        a = _interval(w.mc_current.summaries[q], scale, fmt)
        b = _interval(w.mc_improved.summaries[q], scale, fmt)
        out.append(f"  {label:<21}{a:<40}{b}")
    for t0, t1 in zip(w.mc_current.thresholds, w.mc_improved.thresholds):
        out.append(f"  {'P(d_ph < ' + t0.label + ')':<21}{t0.probability:<40.4f}{t1.probability:.4f}")
    out += ["", "  " + w.headline()[0].upper() + w.headline()[1:] + ".",
            f"  ({w.settings['n']} common draws, seed {w.settings['seed']}; the new value is assumed "
            "to land on today's mean)"]
    return out


def _settle_lines(settle) -> list:
    """Will the new data settle the question? Each decisive goal, with the futures drawn from today's predictive."""
    out = ["Will the new data settle it? (the new value drawn from today's predictive distribution)", ""]
    for pp in settle:
        o = pp.outcomes[0]
        what = " and ".join(m.label for m in o.measurements)
        r = _percent(o.p_settle, o.p_settle_se)
        today = f"{'settled' if pp.today.settled else 'not settled'} today ({pp.goal.format(pp.today.value)})"
        mean = f"{'settled' if o.on_mean.settled else 'not settled'} ({pp.goal.format(o.on_mean.value)})"
        w = o.width_summary("distance_pc")
        out += [
            f"  {pp.goal.describe()}: {today}",
            f"    after {what}: settled in {r} of the possible outcomes",
            f"    if the new value landed on today's mean: {mean}",
            f"    90 % width of d_ph afterwards: median {w['median'] * AU_PER_PC:,.0f} au (5-95 % of outcomes "
            f"{w['q05'] * AU_PER_PC:,.0f} .. {w['q95'] * AU_PER_PC:,.0f} au; today "
            f"{pp.today.width90['distance_pc'] * AU_PER_PC:,.0f} au on these draws), expected gain "
            f"{pp.expected_gain():.0%}",
        ]
    first = settle[0]
    out.append(f"  ({first.n_future} possible outcomes, each answered with the same {first.n_inner:,} draws, on "
               f"which today's answer is computed too; seed {first.seed})")
    return out


def _joint_lines(joint, unit: str) -> list:
    """The cheapest combination of new measurements for each goal, beside each input alone."""
    out = [f"Measured together: the cheapest combination for each goal (cost in {unit})", ""]
    for j in joint:
        out.append(f"  {j.goal.describe()}: [{j.status}] {j.message}")
        for c in j.choices:
            if c.measured:
                out.append(f"    {c.input:<17} to {c.precision:.3g} {c.unit} (today {c.current_sigma:.3g}), cost "
                           f"{c.hours:.3g}")  # fmt: skip
        for a in j.singles:
            alone = f"cost {a.hours:.3g} ({a.precision:.3g} {a.unit})" if a.status == "reachable" else a.status
            out.append(f"    {a.input} alone: {alone}")
    return out


def _percent(p, se) -> str:
    """A probability in percent with its Monte Carlo error, PDG-rounded (a bound at 0 or 1)."""
    from .rounding import round_interval

    if se > 0:
        r = round_interval(100 * p, 100 * se)
        return f"{r.value} % ± {r.plus} %"
    return f"{100 * p:.0f} % (every outcome alike)"


def _curve_lines(c) -> list:
    key = WIDTH90_DISTANCE
    out = [f"Gain curves: 90 % width of d_ph [au] vs new precision (today {c.current[key] * AU_PER_PC:,.0f} au on "
           f"these {c.settings['n']:,} draws)", ""]
    out.append(f"  {'input':<17}{'today sigma':>16}{'s = 1x':>11}{'s = 1/3x':>11}{'s = 1/10x':>11}{'smallest s':>11}")
    for name in c.inputs:
        prec = c.precision[name]
        ratio = prec / c.sigma[name]
        vals = c.curves[name][key] * AU_PER_PC

        def at(r, vals=vals, ratio=ratio):
            return float(np.interp(np.log(r), np.log(ratio[::-1]), vals[::-1]))

        sigma = c.sigma[name]
        out.append(
            f"  {name:<17}{sigma:>9.3g} {c.units[name]:<6}{at(1.0):>11,.0f}{at(1 / 3):>11,.0f}"
            f"{at(0.1):>11,.0f}{vals[-1]:>11,.0f}"
        )
    first = c.inputs[0]
    smallest = c.precision[first][-1] / c.sigma[first]
    out.append(f"  (s: the new measurement's error as a multiple of today's; smallest s = {smallest:.2g}x)")
    return out


def _budget_lines(b) -> list:
    v, w = b.variance, b.width
    out = [f"Global budget: Shapley shares (Monte Carlo, {int(100 * v.confidence)} % bootstrap interval)", ""]
    head = f"  {'input':<17}{'Var(t_ph)':>24}{'Var(d_ph)':>24}"
    head += f"{'90 % width d_ph':>24}" if w is not None else ""
    out.append(head + f"{'linear Var(d_ph)':>24}")
    jd = v.outputs.index("distance_pc") if "distance_pc" in v.outputs else 0
    jt = v.outputs.index("time_myr") if "time_myr" in v.outputs else 0
    for i, name in enumerate(b.inputs):
        def cell(est, j, i=i):
            lo, hi = format_share(est.low[j, i], decimals=3, percent=False), format_share(
                est.high[j, i], decimals=3, percent=False
            )
            return f"{format_share(est.shares[j, i], decimals=3, percent=False)} [{lo}, {hi}]"

        line = f"  {input_label(name):<17}{cell(v, jt):>24}{cell(v, jd):>24}"
        line += f"{cell(w, jd):>24}" if w is not None else ""
        lin = format_share(b.linear_variance[jd, i], decimals=3, percent=False, bounded=True)
        out.append(line + f"{lin:>18}")
    for pname, est in b.groups.items():
        parts = ", ".join(
            f"{input_label(g)} {format_share(est.shares[jd, k], decimals=3, percent=False)}"
            for k, g in enumerate(est.players)
        )
        out.append(f"  groups ({pname}), Var(d_ph): {parts}")
    for q, info in b.nonlinearity().items():
        verdict = "agrees with the linear budget" if info["agrees_with_linear"] else (
            "differs from the linear budget for " + ", ".join(info["inputs_outside_interval"])
        )
        out.append(f"  {q}: {verdict} (largest difference {info['max_abs_difference']:.3f})")
    out.append("  A share for an input with no direct influence (ra, dec in the straight-line model) comes")
    out.append("  from its correlation with inputs that do matter: measuring it narrows them.")
    return out


def format_plan(plan) -> str:
    """Readable report of a :class:`~perierr.plan.Plan`."""
    title = f"Re-observation plan for {plan.star.name} (model {plan.model.get('name')}, seed {plan.settings['seed']})"
    lines = [title, ""]
    if plan.what_if is not None:
        lines += _what_if_lines(plan.what_if) + [""]
    if getattr(plan, "settle", ()):
        lines += _settle_lines(plan.settle) + [""]
    if getattr(plan, "joint", ()):
        unit = plan.settings.get("cost_unit", "hours")
        lines += _joint_lines(plan.joint, unit) + [""]
    if plan.required:
        lines.append("Goals:")
        for r in plan.required:
            lines.append(f"  [{r.status}] {r.goal.describe()} via {r.input}: {r.message}")
        lines.append("")
    if plan.curves is not None:
        lines += _curve_lines(plan.curves) + [""]
    if plan.budget is not None:
        lines += _budget_lines(plan.budget)
        if plan.budget_improved is not None:
            est = plan.budget_improved.variance
            j = est.outputs.index("distance_pc")
            parts = ", ".join(
                f"{input_label(name)} {format_share(est.shares[j, i], decimals=3, percent=False)}"
                for i, name in enumerate(est.players)
            )
            lines.append(f"  after the what-if measurement, shares of Var(d_ph): {parts}")
        lines.append("")
    shown = messages(tuple(plan.cautions) + tuple(plan.star.cautions))
    if shown:
        lines.append("Read with care")
        lines += [f"  - {message}" for message in shown]
        lines.append("")
    lines.append(HAZARD)
    return "\n".join(lines)
