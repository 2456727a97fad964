"""Result tables for papers: one row per star, as ECSV, CSV or LaTeX rows.

Each row gives the Monte Carlo median of t_ph, d_ph (pc and au) and v_ph with the distances to the ends of the
chosen central interval (16-84 % or 5-95 %), P(d_ph < D) for every threshold with its Monte Carlo error, and the
provenance of the row (model, prior, draws, seed, SHA-256 of the inputs). The table's metadata carries the
perierr version, the interval and the rounding rule. LaTeX rows round by the Particle Data Group's rule
(:mod:`perierr.report.rounding`); ECSV and CSV keep full precision.
"""

from __future__ import annotations

import hashlib
import json
import re
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import QTable

from .._version import __version__
from ..cautions import HAZARD
from ..errors import InputError
from ..units import AU_PER_PC
from .files import atomic_path, atomic_write_text
from .rounding import latex_interval

__all__ = ["INTERVALS", "latex_rows", "result_table", "write_table"]

#: Central intervals a table can give: name -> (lower, upper) quantile levels.
INTERVALS = {"68": (0.16, 0.84), "90": (0.05, 0.95)}

_QUANTITIES = (  # column stem, summary, unit, scale from the internal unit
    ("t_ph", "time_myr", u.Myr, 1.0),
    ("d_ph", "distance_pc", u.pc, 1.0),
    ("d_ph_au", "distance_pc", u.au, AU_PER_PC),
    ("v_ph", "speed_kms", u.km / u.s, 1.0),
)


def _levels(interval: str) -> tuple:
    if interval not in INTERVALS:
        raise InputError("interval", interval, f"expected one of {', '.join(INTERVALS)} (per cent of the draws)")
    return INTERVALS[interval]


def _analyses(analyses) -> list:
    out = [analyses] if hasattr(analyses, "monte_carlo") else list(analyses)
    if not out:
        raise InputError("analyses", "none", "expected at least one analysis")
    labels = [t.label for t in out[0].monte_carlo.thresholds]
    for k, a in enumerate(out[1:], start=1):
        other = [t.label for t in a.monte_carlo.thresholds]
        if other != labels:
            raise InputError("thresholds", f"{other} (analysis {k})",
                             f"the same thresholds for every star of a table, as the first: {labels}")
    for a in out:
        missing = [lv for lv in (0.05, 0.16, 0.84, 0.95) if lv not in a.monte_carlo.levels]
        if missing:
            raise InputError("levels", a.monte_carlo.levels, f"levels including {missing} for the table's intervals")
    return out


def input_digest(analysis) -> str:
    """SHA-256 of the star's inputs as the JSON document gives them (what the row was computed from)."""
    text = json.dumps(analysis.star.to_dict(), sort_keys=True, default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def result_table(analyses, *, interval: str = "68") -> QTable:
    """One row per analysis, with units and provenance.

    Parameters
    ----------
    analyses : Analysis or sequence of Analysis
        Results of :func:`perierr.analyze`, with the same thresholds.
    interval : {"68", "90"}
        The central interval: 16-84 % or 5-95 % of the draws.

    Returns
    -------
    astropy.table.QTable
        Columns ``star``; for t_ph, d_ph, d_ph_au, v_ph: the median and ``_minus``/``_plus`` (distances to the
        interval's ends); ``p_within_<threshold>`` and ``_se``; ``model``, ``prior``, ``n_draws``, ``seed``,
        ``input_sha256``. ``meta`` holds the perierr version, the interval and the caution.
    """
    lo, hi = _levels(interval)
    rows = _analyses(analyses)
    table = QTable()
    table["star"] = [a.star.name or "" for a in rows]
    for stem, key, unit, scale in _QUANTITIES:
        med = np.array([a.monte_carlo.summaries[key].median for a in rows]) * scale
        low = np.array([a.monte_carlo.summaries[key].quantile(lo) for a in rows]) * scale
        high = np.array([a.monte_carlo.summaries[key].quantile(hi) for a in rows]) * scale
        table[stem] = med * unit
        table[f"{stem}_minus"] = (med - low) * unit
        table[f"{stem}_plus"] = (high - med) * unit
    for j, t in enumerate(rows[0].monte_carlo.thresholds):
        name = "p_within_" + t.label.replace(" ", "_")
        table[name] = [a.monte_carlo.thresholds[j].probability for a in rows]
        table[f"{name}_se"] = [a.monte_carlo.thresholds[j].se for a in rows]
    table["model"] = [str(a.model.get("name", "")) for a in rows]
    table["prior"] = [_prior_text(a.prior) for a in rows]
    table["prior_method"] = [a.prior.method if a.prior is not None else "gaussian" for a in rows]
    table["n_draws"] = [a.monte_carlo.n for a in rows]
    # the draws' Kish effective size (reweighting) or the chain's (MCMC); n_draws for plain Gaussian draws
    table["effective_size"] = [float(a.monte_carlo.samples.effective_size) for a in rows]
    table["seed"] = [int(a.monte_carlo.samples.seed) for a in rows]
    table["input_sha256"] = [input_digest(a) for a in rows]
    table.meta["perierr"] = {
        "version": __version__,
        "interval": f"{round(100 * lo)}-{round(100 * hi)} % of the draws around the median",
        "models": {str(a.model.get("name", "")): a.model for a in rows},
        "caution": HAZARD,
    }
    return table


def _prior_text(prior) -> str:
    """The prior with its parameters, e.g. ``edsd(length_scale_pc=1350)``; ``none`` without one."""
    if prior is None:
        return "none"
    params = ", ".join(f"{k}={v:g}" if isinstance(v, (int, float)) else f"{k}={v}"
                       for k, v in (prior.parameters or {}).items())  # fmt: skip
    return f"{prior.name}({params})" if params else prior.name


def latex_rows(analyses, *, interval: str = "68") -> str:
    r"""LaTeX table rows ``star & t_ph & d_ph [pc] & d_ph [au] & v_ph \\``, rounded by the PDG rule.

    A comment line before the rows names the columns, units, interval and rounding rule.
    """
    lo, hi = _levels(interval)
    table = result_table(analyses, interval=interval)
    head = (f"% perierr {__version__}: star & t_ph [Myr] & d_ph [pc] & d_ph [au] & v_ph [km/s]; median with the "
            f"{round(100 * lo)}-{round(100 * hi)} % interval, rounded by the Particle Data Group rule")
    lines = [head]
    for row in table:
        cells = [_latex_text(row["star"])]
        for stem, _, unit, _ in _QUANTITIES:
            value, minus, plus = (row[c].to_value(unit) for c in (stem, f"{stem}_minus", f"{stem}_plus"))
            if minus > 0 and plus > 0:
                cells.append(latex_interval(value, minus, plus))
            else:  # no spread (every draw gives the same value): the value alone, to its float precision
                cells.append(f"${float(value):.6g}$")
        lines.append(" & ".join(cells) + r" \\")
    return "\n".join(lines) + "\n"


def write_table(analyses, path, *, interval: str = "68") -> Path:
    """Write the table to ``path``, atomically; returns the path.

    The format follows the suffix: ``.ecsv`` (units and metadata), ``.csv`` (units in a comment line) or
    ``.tex`` (LaTeX rows).
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".ecsv", ".csv", ".tex"):
        raise InputError("table", str(path), "expected a file name ending in .ecsv, .csv or .tex")
    if suffix == ".tex":
        return atomic_write_text(path, latex_rows(analyses, interval=interval))
    table = result_table(analyses, interval=interval)
    with atomic_path(path) as tmp:
        if suffix == ".ecsv":
            table.write(tmp, format="ascii.ecsv", overwrite=True)
        else:
            units = ", ".join(f"{c} [{table[c].unit}]" for c in table.colnames if getattr(table[c], "unit", None))
            plain = table.copy()
            plain.meta = {}
            for c in plain.colnames:
                if getattr(plain[c], "unit", None) is not None:
                    plain[c] = plain[c].value
            text = f"# perierr {__version__}; units: {units}; {table.meta['perierr']['interval']}\n"
            plain.write(tmp, format="ascii.csv", overwrite=True, comment=False)
            tmp.write_text(text + tmp.read_text(encoding="utf-8"), encoding="utf-8")
    return path


_LATEX_SPECIAL = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
                  "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
                  "<": r"\textless{}", ">": r"\textgreater{}", "|": r"\textbar{}"}  # the last three print as
# other glyphs in LaTeX's default OT1 text encoding


def _latex_text(text: str) -> str:
    """A star name safe in LaTeX (its special characters escaped, in one pass)."""
    return re.sub(r"[\\&%$#_{}~^<>|]", lambda m: _LATEX_SPECIAL[m.group()], str(text))
