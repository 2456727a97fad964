"""Result tables for papers: one row per star, as ECSV, CSV or LaTeX rows.

Each row gives the Monte Carlo median of t_ph, d_ph (pc and au) and v_ph with the distances to the ends of the
chosen central interval (16-84 % or 5-95 %), P(d_ph < D) for every threshold with its Monte Carlo error, and the
provenance of the row (model, prior, draws, seed, SHA-256 of the inputs). The table's metadata carries the
perierr version, the interval and the rounding rule. LaTeX rows round by the Particle Data Group's rule
(:mod:`perierr.report.rounding`); ECSV and CSV keep full precision.

What the encounter does (:mod:`perierr.encounter`) follows the provenance columns, appended so that the columns
before them keep their names and order: the peak magnitude (and its band), the peak proper motion, the Sun's
impulse, the strength proxies M/(v d) and M/(v d²) (optionally the near-side comets' impulses), each as a median
with the same interval as the perihelion, then P(d_ph < r) for every Oort radius with its Monte Carlo error. A
quantity the star cannot give (no mass, no magnitude, no encounter computed) is a masked cell, never a silent
blank: the column ``encounter_missing`` says why on the row, and the metadata lists the reasons by row. The
metadata also carries :data:`perierr.cautions.SHOWER` (these are statistical encounter predictions, not impact
hazards).

LaTeX gives the encounter as a second set of rows (``latex_rows(..., encounter=True)``), not as more cells of the
perihelion's row: the two are two tables of a paper (a row of thirteen intervals does not fit a page), and the
encounter's rows carry their own header, the reason after a row with a blank cell and the caution.
"""

from __future__ import annotations

import hashlib
import json
import re
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Column, MaskedColumn, QTable

from .._version import __version__
from ..cautions import HAZARD, SHOWER
from ..errors import InputError
from ..units import AU_PER_PC, ENCOUNTER_LABELS, ENCOUNTER_TITLES
from .files import atomic_path, atomic_write_text
from .rounding import latex_interval, round_interval

__all__ = ["ENCOUNTER_COLUMNS", "INTERVALS", "NOT_COMPUTED", "latex_rows", "result_table", "write_table"]

#: Central intervals a table can give: name -> (lower, upper) quantile levels.
INTERVALS = {"68": (0.16, 0.84), "90": (0.05, 0.95)}

_QUANTITIES = (  # column stem, summary, unit, scale from the internal unit
    ("t_ph", "time_myr", u.Myr, 1.0),
    ("d_ph", "distance_pc", u.pc, 1.0),
    ("d_ph_au", "distance_pc", u.au, AU_PER_PC),
    ("v_ph", "speed_kms", u.km / u.s, 1.0),
)

#: Encounter quantities of the table, in column order: column stem = the summary's name in
#: :attr:`perierr.encounter.EncounterEffects.summaries`; the comets' impulses (one per Oort radius) follow on request.
ENCOUNTER_COLUMNS = ("peak_magnitude", "peak_proper_motion", "sun_impulse", "strength_m_vd", "strength_m_vd2")

#: LaTeX symbols of the encounter quantities (the header comment of the encounter rows).
_LATEX_SYMBOLS = {"peak_magnitude": "m_peak", "peak_proper_motion": "mu_peak", "sun_impulse": "dv_sun",
                  "strength_m_vd": "M/(v d)", "strength_m_vd2": "M/(v d^2)", "comet_impulse": "dv_comet"}

#: The reason on a row whose analysis carries no encounter effects at all.
NOT_COMPUTED = "encounter effects not computed for this star"


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


def result_table(analyses, *, interval: str = "68", comet_impulses: bool = False) -> QTable:
    """One row per analysis, with units and provenance.

    Parameters
    ----------
    analyses : Analysis or sequence of Analysis
        Results of :func:`perierr.analyze`, with the same thresholds (and the same Oort radii).
    interval : {"68", "90"}
        The central interval: 16-84 % or 5-95 % of the draws.
    comet_impulses : bool
        Also give the impulse on a comet at each Oort radius, on the near side (``comet_impulse_<radius>``).

    Returns
    -------
    astropy.table.QTable
        Columns ``star``; for t_ph, d_ph, d_ph_au, v_ph: the median and ``_minus``/``_plus`` (distances to the
        interval's ends); ``p_within_<threshold>`` and ``_se``; ``model``, ``prior``, ``n_draws``, ``seed``,
        ``input_sha256``. Then, when any star carries encounter effects, the same three columns for each of
        :data:`ENCOUNTER_COLUMNS` (``peak_magnitude_band`` after the peak magnitude), ``p_inside_oort_<radius>``
        and ``_se``, and ``encounter_missing`` (why a cell of the row is masked; empty when none is). ``meta``
        holds the perierr version, the interval, the caution and, under ``encounter``, the encounter columns
        described with their units, the reasons for masked cells by row and :data:`perierr.cautions.SHOWER`.

    Examples
    --------
    >>> import warnings
    >>> from perierr import analyze, read_star_file
    >>> from perierr.demo import demo_path
    >>> with warnings.catch_warnings():
    ...     warnings.simplefilter("ignore")
    ...     a = analyze(read_star_file(demo_path("kestrel-4.toml")), model="straight_line", n_samples=2000,
    ...                 seed=1, compare=False)
    >>> table = result_table(a)
    >>> str(table["sun_impulse"].unit), str(table["peak_proper_motion"].unit)
    ('m / s', 'arcsec / yr')
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
        "encounter": _add_encounter(table, rows, lo, hi, comet_impulses),
    }
    return table


# ------------------------------------------------------------------------------------------------ encounter


def _oort_labels(rows) -> list | None:
    """The Oort radii (labels) of the analyses that carry encounter effects, the same for all; None when none do."""
    labels, first = None, None
    for k, a in enumerate(rows):
        enc = getattr(a, "encounter", None)
        if enc is None:
            continue
        mine = [label for label, _ in enc.radii]
        if labels is None:
            labels, first = mine, k
        elif mine != labels:
            raise InputError("oort_radii", f"{mine} (analysis {k})",
                             f"the same Oort radii for every star of a table, as analysis {first}: {labels}")
    return labels


def _stem(name: str) -> str:
    """Column stem of an encounter quantity: ``comet_impulse:20000 au`` -> ``comet_impulse_20000_au``."""
    return name.replace(":", "_").replace(" ", "_")


def _encounter_names(labels, comet_impulses) -> list:
    """The encounter quantities of the table, in column order."""
    return list(ENCOUNTER_COLUMNS) + ([f"comet_impulse:{label}" for label in labels] if comet_impulses else [])


def _column(values, mask, unit=None):
    """A column masked where ``mask`` is True (a plain one when nothing is masked), with its unit."""
    values = np.asarray(values)
    if mask.any():
        return MaskedColumn(values, mask=mask, unit=unit)
    return Column(values, unit=unit)


def _distance(upper, lower):
    """``upper - lower``, 0 where both sit at the same infinity (a head-on path: every draw at infinity)."""
    same = np.isinf(upper) & (upper == lower)
    return np.where(same, 0.0, upper - lower)


def _add_encounter(table, rows, lo, hi, comet_impulses) -> dict:
    """Append the encounter columns to ``table``; the metadata block that describes them."""
    labels = _oort_labels(rows)
    if labels is None:
        return {"computed": "no star of the table carries encounter effects (perierr.analyze computes them)"}
    encs = [getattr(a, "encounter", None) for a in rows]
    described = {}
    for name in _encounter_names(labels, comet_impulses):
        kind = name.partition(":")[0]
        got = [None if e is None else e.summaries.get(name) for e in encs]
        mask = np.array([s is None for s in got])
        med = np.array([np.nan if s is None else s.median for s in got])
        low = np.array([np.nan if s is None else s.quantile(lo) for s in got])
        high = np.array([np.nan if s is None else s.quantile(hi) for s in got])
        stem, unit = _stem(name), u.Unit(ENCOUNTER_LABELS[kind])
        with np.errstate(invalid="ignore"):  # inf - inf: a median and an interval end at the same infinity
            table[stem] = _column(med, mask, unit)
            table[f"{stem}_minus"] = _column(_distance(med, low), mask, unit)
            table[f"{stem}_plus"] = _column(_distance(high, med), mask, unit)
        title = ENCOUNTER_TITLES[kind] + (f" at {name.partition(':')[2]}, near side" if kind == "comet_impulse"
                                          else "")
        described[stem] = f"{title} [{unit}]: median over the draws; _minus, _plus: distances to the interval's ends"
        if kind == "peak_magnitude":
            bands = ["" if m else (e.magnitude.get("band") or "not named") for e, m in zip(encs, mask)]
            table["peak_magnitude_band"] = _column(bands, mask)
            described["peak_magnitude_band"] = "the band of the peak magnitude (the band of the star's magnitude)"
    for j, label in enumerate(labels):
        stem = "p_inside_oort_" + label.replace(" ", "_")
        mask = np.array([e is None for e in encs])
        table[stem] = _column([np.nan if e is None else e.inside[j].probability for e in encs], mask)
        table[f"{stem}_se"] = _column([np.nan if e is None else e.inside[j].se for e in encs], mask)
        described[stem] = f"P(d_ph < {label}) over the draws; _se: its binomial Monte Carlo error"
    reasons = [NOT_COMPUTED if e is None else "; ".join(e.missing) for e in encs]
    table["encounter_missing"] = reasons
    described["encounter_missing"] = "why a cell of the row is masked (empty when none is)"
    return {
        "caution": SHOWER,
        "oort_radii": list(labels),
        "columns": described,
        "missing": [{"row": k, "star": a.star.name or "", "reasons": why}
                    for k, (a, why) in enumerate(zip(rows, reasons)) if why],
        "method": "Monte Carlo medians and intervals of each draw's value (perierr.encounter: impulse "
                  "approximation; peak magnitude by the distance modulus, without extinction)",
    }


def _prior_text(prior) -> str:
    """The prior with its parameters, e.g. ``edsd(length_scale_pc=1350)``; ``none`` without one."""
    if prior is None:
        return "none"
    params = ", ".join(f"{k}={v:g}" if isinstance(v, (int, float)) else f"{k}={v}"
                       for k, v in (prior.parameters or {}).items())  # fmt: skip
    return f"{prior.name}({params})" if params else prior.name


def latex_rows(analyses, *, interval: str = "68", encounter: bool = False, comet_impulses: bool = False) -> str:
    r"""LaTeX table rows ``star & t_ph & d_ph [pc] & d_ph [au] & v_ph \\``, rounded by the PDG rule.

    A comment line before the rows names the columns, units, interval and rounding rule.

    With ``encounter=True``, the encounter's rows instead (a second table of the paper): ``star & m_peak &
    mu_peak & dv_sun & M/(v d) & M/(v d^2) [& dv_comet at each Oort radius] & P(d_ph < r) for each Oort radius
    \\``; medians with the same interval and rounding, probabilities in per cent with their Monte Carlo error
    (a 95 % bound where no or every draw passed, as in the text report), ``--`` for a quantity the star cannot
    give with the reason in a comment after its row, and :data:`perierr.cautions.SHOWER` in the header.

    Raises
    ------
    InputError
        With ``encounter=True`` when no analysis carries encounter effects.
    """
    lo, hi = _levels(interval)
    table = result_table(analyses, interval=interval, comet_impulses=comet_impulses)
    if encounter:
        return _latex_encounter(table, _analyses(analyses), lo, hi, comet_impulses)
    head = (f"% perierr {__version__}: star & t_ph [Myr] & d_ph [pc] & d_ph [au] & v_ph [km/s]; median with the "
            f"{round(100 * lo)}-{round(100 * hi)} % interval, rounded by the Particle Data Group rule")
    lines = [head]
    for row in table:
        cells = [_latex_text(row["star"])]
        for stem, _, unit, _ in _QUANTITIES:
            value, minus, plus = (row[c].to_value(unit) for c in (stem, f"{stem}_minus", f"{stem}_plus"))
            cells.append(_latex_value(value, minus, plus))
        lines.append(" & ".join(cells) + r" \\")
    return "\n".join(lines) + "\n"


def _latex_value(value, minus, plus) -> str:
    """A median with its interval, PDG-rounded; the value alone where the interval has no width or no end."""
    if minus > 0 and plus > 0 and all(np.isfinite((value, minus, plus))):
        return latex_interval(value, minus, plus)
    if np.isfinite(value) and minus > 0 and plus > 0 and np.isfinite(min(minus, plus)):  # one end at infinity
        r = round_interval(value, min(minus, plus))
        up, down = (r"\infty", r.minus) if np.isinf(plus) else (r.plus, r"\infty")
        return f"${r.value}^{{+{up}}}_{{-{down}}}$"
    if np.isfinite(value):  # no spread (every draw gives the same value): the value alone, to its float precision
        return f"${float(value):.6g}$"
    if np.isinf(value):  # a head-on path: every draw at infinity (an impulse) or at minus infinity (a magnitude)
        return r"$\infty$" if value > 0 else r"$-\infty$"
    return "--"


def _latex_encounter(table, rows, lo, hi, comet_impulses) -> str:
    """The encounter's LaTeX rows (see :func:`latex_rows`)."""
    from .text import probability_parts

    labels = _oort_labels(rows)
    if labels is None:
        raise InputError("encounter", "none of the analyses",
                         "analyses with encounter effects (perierr.analyze computes them) for the encounter's rows")
    names = _encounter_names(labels, comet_impulses)
    bands = sorted({b for b in table["peak_magnitude_band"] if isinstance(b, str) and b})
    heads = []
    for name in names:
        kind, _, label = name.partition(":")
        unit = ENCOUNTER_LABELS[kind] + (f", band {', '.join(bands)}" if kind == "peak_magnitude" and bands else "")
        heads.append(f"{_LATEX_SYMBOLS[kind]}{' at ' + label if label else ''} [{unit}]")
    heads += [f"P(d_ph < {label}) [%]" for label in labels]
    lines = [
        f"% perierr {__version__}: encounter effects; star & {' & '.join(heads)}; median with the "
        f"{round(100 * lo)}-{round(100 * hi)} % interval, rounded by the Particle Data Group rule; probabilities "
        "in per cent with their Monte Carlo error (a 95 % bound where no or every draw passed); -- where the star "
        "cannot give a quantity (why: the comment after its row)",
        f"% {SHOWER}",
    ]
    for k, (row, a) in enumerate(zip(table, rows)):
        cells = [_latex_text(row["star"])]
        for name in names:
            stem = _stem(name)
            if _masked(table[stem], k):
                cells.append("--")
                continue
            unit = table[stem].unit
            cells.append(_latex_value(*(float(row[c].to_value(unit)) for c in (stem, f"{stem}_minus",
                                                                                f"{stem}_plus"))))
        enc = a.encounter
        for j in range(len(labels)):
            if enc is None:
                cells.append("--")
                continue
            kind, r, _ = probability_parts(enc.inside[j], a.monte_carlo.n)
            if kind == "value":
                cells.append(f"${r.value} \\pm {r.plus}$")
            else:
                cells.append(f"${'<' if kind == 'upper' else '>'}{r.rstrip('%')}$")
        why = row["encounter_missing"]
        lines.append(" & ".join(cells) + r" \\" + (f" % not given: {why}" if why else ""))
    return "\n".join(lines) + "\n"


def _masked(column, k) -> bool:
    """Whether cell ``k`` of a column is masked."""
    mask = getattr(column, "mask", None)
    return bool(mask[k]) if mask is not None else False


def write_table(analyses, path, *, interval: str = "68", encounter: bool = False,
                comet_impulses: bool = False) -> Path:
    """Write the table to ``path``, atomically; returns the path.

    The format follows the suffix: ``.ecsv`` (units and metadata), ``.csv`` (units in a comment line) or
    ``.tex`` (LaTeX rows: the perihelion's, or with ``encounter=True`` the encounter's; see :func:`latex_rows`).
    ECSV and CSV carry the encounter columns whenever a star has encounter effects; ``comet_impulses`` adds the
    near-side comets' impulses to every format.
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".ecsv", ".csv", ".tex"):
        raise InputError("table", str(path), "expected a file name ending in .ecsv, .csv or .tex")
    if suffix == ".tex":
        return atomic_write_text(path, latex_rows(analyses, interval=interval, encounter=encounter,
                                                  comet_impulses=comet_impulses))
    table = result_table(analyses, interval=interval, comet_impulses=comet_impulses)
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
            if "caution" in table.meta["perierr"]["encounter"]:
                text += f"# {SHOWER} Blank cells: why in encounter_missing.\n"
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
