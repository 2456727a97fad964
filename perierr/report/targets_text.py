"""The target list in words: an aligned terminal table, and the ECSV file (units and provenance)."""

from __future__ import annotations

import math
from pathlib import Path

from ..cautions import HAZARD
from ..errors import InputError
from .files import atomic_path

__all__ = ["format_targets", "write_target_table"]

#: Terminal columns: (header, width, alignment, cell formatter of a row).
_COLUMNS = (
    ("rank", 4, ">", lambda r: f"{int(r['rank'])}"),
    ("star", 24, "<", lambda r: _clip(str(r["star"]), 24)),
    ("measure", 27, "<", lambda r: f"{r['input']} to {r['precision']:.3g} {r['precision_unit']}"),
    ("mag", 7, ">", lambda r: _mag(r)),
    ("hours", 9, ">", lambda r: _hours(r["hours"])),
    ("d_ph 90% today", 14, ">", lambda r: _au(r["today_width90"])),
    ("after", 11, ">", lambda r: _au(r["after_width90"])),
    ("gain", 6, ">", lambda r: _fraction(r["gain"])),
    ("gain/h", 8, ">", lambda r: _per_hour(r["gain_per_hour"])),
    ("P(<D) today", 11, ">", lambda r: _number(r["today_p_within"], ".3f")),
    ("P(settle)", 12, ">", lambda r: _settle(r)),
    ("status", 12, "<", lambda r: str(r["status"]) + ("!" if _caution(r) else "")),
)


def _caution(r) -> str:
    """The row's caution (few effective draws), empty when none (or in a table without the column)."""
    return str(r["caution"]) if "caution" in r.colnames else ""


def _value(x) -> float:
    return float(getattr(x, "value", x))


def _clip(text: str, width: int) -> str:
    return text if len(text) <= width else text[: width - 1] + "~"


def _number(x, fmt) -> str:
    x = _value(x)
    return "-" if not math.isfinite(x) else format(x, fmt)


def _mag(r) -> str:
    m = _value(r["magnitude"])
    return "-" if not math.isfinite(m) else f"{m:.2f}{str(r['magnitude_band'])[:2]}"


def _hours(x) -> str:
    x = _value(x)
    if math.isinf(x):
        return "never"
    return "-" if math.isnan(x) else f"{x:.3g}"


def _au(x) -> str:
    x = _value(x)
    return "-" if not math.isfinite(x) else f"{x:,.0f}"


def _fraction(x) -> str:
    x = _value(x)
    if not math.isfinite(x):
        return "-"
    return f"{x:.0%}" if abs(x) >= 0.005 or x == 0 else f"{x:.1%}"


def _per_hour(x) -> str:
    x = _value(x)
    return "-" if not math.isfinite(x) else f"{x:.3g}"


def _settle(r) -> str:
    p, se = _value(r["p_settle"]), _value(r["p_settle_se"])
    if not math.isfinite(p):
        return "-"
    return f"{p:.2f}+-{se:.2f}"


def format_targets(result, *, top: int | None = None) -> str:
    """The ranked list as an aligned table, the reasons of rows that are not ``ok``, the settings and the caution.

    Parameters
    ----------
    result : TargetList
    top : int, optional
        Show only the first ``top`` rows (every row when None).
    """
    from ..plan.targets import few_draws_limit

    table = result.table
    s = result.settings
    model = s.get("model", {}).get("name", "?")
    by = "gain per hour" if result.rank_by == "gain" else "P(settle) uplift per hour"
    lines = [
        f"Target list: {len(table)} candidates ({len(set(table['star_index'].tolist()))} stars), ranked by {by} "
        f"(model {model}, seed {s.get('seed')})",
        f"Decisive question: {result.goal.describe()}",
        "",
    ]
    head = "  ".join(f"{h:{a}{w}}" for h, w, a, _ in _COLUMNS)
    lines += [head, "-" * len(head)]
    shown = table if top is None else table[: max(0, int(top))]
    for row in shown:
        lines.append("  ".join(f"{fmt(row):{a}{w}}" for _, w, a, fmt in _COLUMNS).rstrip())
    if top is not None and len(table) > len(shown):
        lines.append(f"... {len(table) - len(shown)} more rows in the table file")
    reasons = []
    for row in table:
        if str(row["status"]) != "ok" and str(row["reason"]):
            text = f"{row['star']}: {row['reason']}"
            if text not in reasons:
                reasons.append(text)
    lines.append("")
    lines.append("after: the 90 % width of d_ph [au] if the new value lands on today's mean; gain = 1 - after/today;")
    lines.append(f"P(settle): chance that the new data settle the question ({s.get('n_future')} futures from today's "
                 f"predictive distribution, {s.get('n_inner'):,} draws each; +- its Monte Carlo error);")
    lines.append("P(<D) today: today's P(d_ph < D); hours 'never': the precision is beyond the cost model's reach.")
    few = []
    for row in table:
        text = _caution(row)
        if text and f"{row['star']}: {text}" not in few:
            few.append(f"{row['star']}: {text}")
    if few:
        lines.append(f"status '!': today's answer rests on few effective draws (below min(1000, n/10) = "
                     f"{few_draws_limit(s.get('n_inner', 0)):g}; column effective_size): read its numbers with care.")
    if reasons:
        lines += ["", "Rows without a price or a result"] + [f"  - {t}" for t in reasons]
    if few:
        lines += ["", "Rows resting on few draws"] + [f"  - {t}" for t in few]
    lines += ["", HAZARD]
    return "\n".join(lines)


def write_target_table(result, path) -> Path:
    """Write the table as ECSV (units, provenance in the metadata), atomically; returns the path."""
    path = Path(path)
    if path.suffix.lower() != ".ecsv":
        raise InputError("--out", str(path), "expected a file name ending in .ecsv")
    with atomic_path(path) as tmp:
        result.table.write(tmp, format="ascii.ecsv", overwrite=True)
    return path
