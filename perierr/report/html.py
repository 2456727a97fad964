"""One-page report of an analysis: a self-contained HTML5 page, and the same page printed to PDF.

The page holds everything a reader needs to judge one star's closest approach: the inputs with their errors and
correlations, t_ph, d_ph and v_ph (Monte Carlo median with its 16-84 % and 5-95 % intervals, the linear answer
beside it), the threshold probabilities to the resolution their Monte Carlo error allows, the error budget (table
and figure), what the encounter does (:mod:`perierr.encounter`: the peak magnitude and proper motion, the Sun's
impulse, the strength proxies, the near-side comets' impulses, each with its intervals and the input that dominates
its budget; P(d_ph < r) for every Oort radius; why a quantity is not given; the sentence
:data:`perierr.cautions.SHOWER` once), the re-observation plan or what dominates the error, every caution once, the
sentence on what the numbers are not (:data:`perierr.cautions.HAZARD`) and the provenance of the run.

Design:

* self-contained: figures are PNG data URIs, the stylesheet is inline, nothing is fetched (no fonts, scripts or
  images from elsewhere), so the file can be mailed or archived as it is;
* reproducible: nothing depends on the clock or the machine, so the same inputs and seed give the same bytes;
* every number shown with an uncertainty is rounded by the Particle Data Group rule
  (:func:`perierr.report.rounding.round_interval`); shares read as in the text reports
  (:func:`perierr.report.shares.format_share`);
* every text is HTML-escaped (a star's name is data, never markup);
* readable on a screen from 800 px wide (wide tables scroll inside their own box) and in print (an ``@media
  print`` rule: black text, no backgrounds, no scroll boxes); colours from the colour-blind-safe palette of
  Okabe & Ito (2008) and never the only carrier of meaning (cautions and notes are labelled in words).

The figures are listed once, in :data:`FIGURES`, as ``(title, caption, function)`` entries; a function takes the
analysis and returns a ``matplotlib.figure.Figure`` (an :class:`~perierr.errors.InputError` from it, e.g. no
budget to draw, leaves the figure out with the reason).

The PDF is the same page printed by a headless Chromium (:func:`find_browser`); without one,
:func:`pdf_report` says so and points to the HTML page, which needs no browser.
"""

from __future__ import annotations

import base64
import html
import io
import json
import math
import os
import shutil
import signal
import subprocess
import tempfile
from pathlib import Path

import numpy as np

from .._version import __version__
from ..cautions import HAZARD, SHOWER
from ..errors import InputError, PerierrError
from ..star.fields import CORRELATIONS, split_correlation
from ..units import (
    AU_PER_PC,
    ENCOUNTER_LABELS,
    ERROR_LABELS,
    INDEX,
    INTERNAL_LABELS,
    OBSERVABLES,
    OUTPUT_LABELS,
    OUTPUTS,
)
from .figures import PALETTE, budget_figure, corner_figure, distance_figure, separation_figure
from .files import atomic_path
from .rounding import round_interval
from .shares import format_share, input_label
from .tables import input_digest
from .text import SIDE_FRACTION, probability_parts

__all__ = [
    "BROWSERS",
    "FIGURES",
    "FIGURE_DPI",
    "PDF_TIMEOUT_S",
    "find_browser",
    "html_report",
    "pdf_report",
    "write_page",
]

#: The figures of the page, in order: (title, caption, function). A function takes the analysis and the Monte
#: Carlo budget shown on the page (or None) and returns a matplotlib Figure.
FIGURES = (
    (
        "Perihelion distance",
        "Distribution of the perihelion distance d_ph over the Monte Carlo draws: the median (solid line), the "
        "16-84 % (darker band) and 5-95 % (lighter, hatched band) intervals, and the distance thresholds inside "
        "the plotted range (dashed lines, with P(d_ph < D)).",
        lambda a, gb: distance_figure(a),
    ),
    (
        "Time, distance and speed together",
        "Corner plot of t_ph, d_ph and v_ph over the Monte Carlo draws (weighted when the draws are reweighted): "
        "the contours enclose 39 % (solid) and 86 % (dashed) of the draws; the titles give the median with its "
        "16-84 % interval.",
        lambda a, gb: corner_figure(a),
    ),
    (
        "Separation from the Sun",
        "The star's distance from the Sun against time: the median over draws (line) with its 16-84 % and 5-95 % "
        "bands; now is time 0 and the perihelion distance interval is marked at the time of closest approach.",
        lambda a, gb: separation_figure(a, seed=a.monte_carlo.samples.seed),
    ),
    (
        "Error budget",
        "Each input's Shapley share of the variance of d_ph (linearized model, hatched; with the Monte Carlo "
        "shares and their bootstrap intervals beside them when a global budget was computed): the longest bar is "
        "the measurement whose error limits d_ph most.",
        lambda a, gb: budget_figure(a, global_budget=gb),
    ),
)

#: Resolution of the embedded PNG figures [dots per inch]: sharp on a screen, small in the file.
FIGURE_DPI = 110

#: Executables tried, in order, to print the PDF.
BROWSERS = ("chromium", "chromium-browser", "google-chrome")

#: Seconds the browser may take to print the PDF.
PDF_TIMEOUT_S = 120

#: Rows of the results table: key, symbol, summary, scale from the internal unit, unit label.
_RESULTS = (
    ("time_myr", "t_ph", "time_myr", 1.0, OUTPUT_LABELS["time_myr"]),
    ("distance_pc", "d_ph", "distance_pc", 1.0, OUTPUT_LABELS["distance_pc"]),
    ("distance_au", "d_ph", "distance_pc", AU_PER_PC, "au"),
    ("speed_kms", "v_ph", "speed_kms", 1.0, OUTPUT_LABELS["speed_kms"]),
)

_SYMBOLS = {"time_myr": "t_ph", "distance_pc": "d_ph", "speed_kms": "v_ph"}

_STYLE = """
:root{--ink:#1b1b1b;--muted:#4d4d4d;--accent:@BLUE@;--warn:@VERMILLION@;--line:#cfcfcf;--soft:#f2f6f9}
*{box-sizing:border-box}
html{-webkit-text-size-adjust:100%;text-size-adjust:100%}
body{margin:0;background:#fff;color:var(--ink);
font:15px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif}
main{max-width:62rem;margin:0 auto;padding:1.25rem 1rem 2rem}
header{border-bottom:3px solid var(--accent);padding-bottom:.6rem;margin-bottom:.8rem}
h1{font-size:1.45rem;line-height:1.25;margin:0 0 .3rem;overflow-wrap:anywhere}
h2{font-size:1.12rem;color:var(--accent);border-bottom:1px solid var(--line);margin:1.6rem 0 .6rem;
padding-bottom:.2rem;break-after:avoid}
h3{font-size:1rem;margin:1rem 0 .4rem;break-after:avoid}
p{margin:.4rem 0}
.meta{color:var(--muted);margin:0;overflow-wrap:anywhere}
.scroll{max-width:100%;overflow-x:auto;margin:.3rem 0 .8rem}
table{border-collapse:collapse;font-variant-numeric:tabular-nums}
th,td{padding:.28rem .65rem;border-bottom:1px solid var(--line);text-align:left;vertical-align:middle}
thead th{background:var(--soft);border-bottom:2px solid var(--accent);font-weight:600}
th[scope=row]{font-weight:600;white-space:nowrap}
th.wrap[scope=row]{white-space:normal;min-width:9rem}
td.unit{white-space:nowrap}
td.num{text-align:right;white-space:nowrap}
td.text{min-width:16rem}
td.prob{white-space:nowrap}
.iv{white-space:nowrap}
.pm{display:inline-flex;flex-direction:column;vertical-align:middle;font-size:.78em;line-height:1.05;
margin-left:.2em;text-align:left}
.small{font-size:.88rem;color:var(--muted)}
figure{margin:1rem 0;break-inside:avoid}
figure img{display:block;max-width:100%;height:auto;border:1px solid var(--line)}
figcaption{color:var(--muted);font-size:.9rem;margin-top:.35rem}
ul.cautions{padding-left:1.2rem}
ul.cautions li{margin:.35rem 0}
.tag{display:inline-block;font-size:.72rem;font-weight:700;letter-spacing:.04em;text-transform:uppercase;
border:1px solid currentColor;border-radius:3px;padding:0 .3rem;margin-right:.45rem}
.tag.caution{color:var(--warn)}
.tag.note{color:var(--accent)}
.hazard{border-left:4px solid var(--ink);background:var(--soft);padding:.6rem .85rem;margin:.8rem 0}
.missing{margin:.3rem 0}
.lead{font-size:1.03rem}
dl.prov{display:grid;grid-template-columns:max-content minmax(0,1fr);gap:.25rem 1rem;margin:.4rem 0}
dl.prov dt{font-weight:600}
dl.prov dd{margin:0;min-width:0;overflow-wrap:anywhere}
code{font-family:ui-monospace,"SFMono-Regular",Menlo,Consolas,monospace;font-size:.86em;overflow-wrap:anywhere}
@media (max-width:40rem){dl.prov{grid-template-columns:minmax(0,1fr)}dl.prov dd{margin-bottom:.3rem}}
@page{size:A4;margin:14mm}
@media print{
body{font-size:9.5pt;color:#000}
main{max-width:none;padding:0}
h2{color:#000;border-bottom-color:#000}
header{border-bottom-color:#000}
thead th{background:none}
.hazard{background:none}
.scroll{overflow:visible}
figure img{max-width:85%;border:none}
tr,li{break-inside:avoid}
}
""".replace("@BLUE@", PALETTE[5]).replace("@VERMILLION@", PALETTE[6])


# ------------------------------------------------------------------------------------------------ public


def html_report(analysis, path=None, *, plan=None, global_budget=None, title=None) -> str:
    """The one-page report of an analysis as a self-contained HTML5 page.

    Parameters
    ----------
    analysis : Analysis
        A result of :func:`perierr.analyze`.
    path : str or Path, optional
        Also write the page there (atomically); the name must end in ``.html`` or ``.htm``, which is checked
        before any work.
    plan : Plan, optional
        A re-observation plan of the same star (:func:`perierr.plan.plan`): its what-if answer, goals, the
        measurement that narrows d_ph most and its global budget are summarized. Without it the page says
        which input dominates the error.
    global_budget : GlobalBudget, optional
        A Monte Carlo budget (:func:`perierr.budget.global_budget`) to show beside the linear shares; by
        default the plan's, when a plan with one is given.
    title : str, optional
        The page's title (default: the star's name and "closest approach to the Sun").

    Returns
    -------
    str
        The page. Nothing in it depends on the clock: the same analysis (same inputs and seed) gives the same
        string.

    Raises
    ------
    InputError
        For a file name not ending in ``.html``/``.htm`` or in a folder that does not exist.
    """
    if path is not None:
        _check_output(path, (".html", ".htm"), "html")
    page = _page(analysis, plan=plan, global_budget=global_budget, title=title)
    if path is not None:
        with atomic_path(path) as tmp:
            tmp.write_text(page, encoding="utf-8")
    return page


def find_browser() -> str | None:
    """The first of :data:`BROWSERS` found on PATH (its full path), or None."""
    for name in BROWSERS:
        found = shutil.which(name)
        if found:
            return found
    return None


def pdf_report(analysis, path, *, plan=None, global_budget=None, title=None, timeout: float = PDF_TIMEOUT_S) -> Path:
    """The one-page report printed to PDF by a headless Chromium, written atomically to ``path``.

    Parameters
    ----------
    analysis : Analysis
    path : str or Path
        A file name ending in ``.pdf``.
    plan, global_budget, title
        As for :func:`html_report`.
    timeout : float
        Seconds the browser may take.

    Returns
    -------
    Path

    Raises
    ------
    InputError
        For a file name not ending in ``.pdf`` or in a folder that does not exist (before any work).
    PerierrError
        When no browser of :data:`BROWSERS` is on PATH (before any work; the HTML page needs none), or the
        browser failed or took longer than ``timeout``.
    """
    path = Path(path)
    _check_output(path, (".pdf",), "pdf")
    browser = find_browser()
    if browser is None:
        raise PerierrError(
            f"the PDF of the report is printed by a headless Chromium ({', '.join(BROWSERS)} on PATH) and none was "
            f"found, so {path} was not written; install one (e.g. apt-get install chromium), or write the same "
            "page as HTML, which needs no browser: html_report(analysis, 'report.html') or perierr run --page "
            "report.html"
        )
    page = _page(analysis, plan=plan, global_budget=global_budget, title=title)
    with tempfile.TemporaryDirectory(prefix="perierr-pdf-", ignore_cleanup_errors=True) as work:
        work = Path(work)
        source, printed = work / "report.html", work / "report.pdf"
        source.write_text(page, encoding="utf-8")
        _print_pdf(browser, source, printed, work / "profile", timeout)
        with atomic_path(path) as tmp:
            tmp.write_bytes(printed.read_bytes())
    return path


def write_page(analysis, path, **options) -> Path:
    """Write the one-page report, as HTML (``.html``, ``.htm``) or PDF (``.pdf``) by the file name's suffix.

    Parameters
    ----------
    analysis : Analysis
    path : str or Path
    **options
        ``plan``, ``global_budget``, ``title`` (see :func:`html_report`).

    Returns
    -------
    Path
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix == ".pdf":
        return pdf_report(analysis, path, **options)
    if suffix not in (".html", ".htm"):
        raise InputError("page", str(path), "expected a file name ending in .html, .htm or .pdf")
    html_report(analysis, path, **options)
    return path


# ------------------------------------------------------------------------------------------------ files


def _check_output(path, suffixes, field) -> None:
    """Refuse a file name of another format, or in a folder that does not exist (before any work)."""
    path = Path(path)
    if path.suffix.lower() not in suffixes:
        raise InputError(field, str(path), f"expected a file name ending in {' or '.join(suffixes)}")
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise InputError(field, str(path), f"the folder {str(folder)!r} does not exist; create it first")
    if path.is_dir():
        raise InputError(field, str(path), "is a folder; expected a file name")


def _print_pdf(browser, source, printed, profile, timeout) -> None:
    """Print ``source`` to ``printed`` with a headless browser; a PerierrError when it fails or hangs."""
    command = [
        browser, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking",
        "--disable-component-update", "--disable-sync", "--disable-extensions", f"--user-data-dir={profile}",
        "--no-pdf-header-footer", f"--print-to-pdf={printed}", source.as_uri(),
    ]  # fmt: skip
    try:
        proc = subprocess.Popen(
            command, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
            start_new_session=True,  # its own process group: a timeout ends the browser's helpers too
        )  # fmt: skip
    except OSError as exc:
        raise PerierrError(f"could not start the browser {browser} to print the PDF ({exc})") from None
    try:
        _, err = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        _kill_group(proc)
        raise PerierrError(
            f"the browser {browser} did not print the PDF within {timeout:g} s; the HTML page "
            "(html_report) holds the same report"
        ) from None
    if not printed.is_file() or printed.read_bytes()[:5] != b"%PDF-":
        tail = " | ".join(err.decode("utf-8", "replace").strip().splitlines()[-3:])
        raise PerierrError(
            f"the browser {browser} did not print the PDF (exit status {proc.returncode}"
            + (f"; it said: {tail}" if tail else "") + "); the HTML page (html_report) holds the same report"
        )


def _kill_group(proc) -> None:
    """End a process started in its own session, with its children."""
    try:
        if hasattr(os, "killpg"):
            os.killpg(proc.pid, signal.SIGKILL)
        else:  # pragma: no cover - Windows
            proc.kill()
    except ProcessLookupError:
        pass
    proc.communicate()


# ------------------------------------------------------------------------------------------------ the page


def _e(text) -> str:
    """Text escaped for HTML (quotes too: safe in attributes)."""
    return html.escape(str(text), quote=True)


def _page(analysis, *, plan, global_budget, title) -> str:
    """The whole page."""
    a = analysis
    name = a.star.name or "star"
    heading = title if title is not None else f"{name}: closest approach to the Sun"
    gb = global_budget if global_budget is not None else getattr(plan, "budget", None)
    body = [
        _header(a, heading),
        _section("inputs", "Inputs", _inputs(a)),
        _section("results", "Perihelion", _results(a)),
        _section("budget", "Error budget", _budget(a, gb)),
        _section("encounter", "What the encounter does", _encounter(a)),
        _section("figures", "Figures", _figures(a, gb)),
    ]
    if plan is not None:
        body.append(_section("plan", "Re-observation plan", _plan(plan)))
    body.append(_section("cautions", "Read with care", _cautions(a, plan)))
    body.append(_section("provenance", "Provenance", _provenance(a, plan)))
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f'<meta name="generator" content="perierr {_e(__version__)}">\n'
        f"<title>{_e(heading)}</title>\n<style>{_STYLE}</style>\n</head>\n<body>\n<main>\n"
        + "\n".join(body)
        + "\n</main>\n</body>\n</html>\n"
    )


def _section(key, heading, content) -> str:
    return f'<section id="{key}">\n<h2>{_e(heading)}</h2>\n{content}\n</section>'


def _table(head, rows, *, cls="") -> str:
    """A table in its own scroll box; ``head`` cells and row cells are HTML already."""
    thead = "<thead><tr>" + "".join(head) + "</tr></thead>"
    tbody = "<tbody>" + "".join(rows) + "</tbody>"
    klass = f' class="{cls}"' if cls else ""
    return f'<div class="scroll"><table{klass}>{thead}{tbody}</table></div>'


def _header(a, heading) -> str:
    star = a.star
    bits = []
    if star.source_id:
        bits.append(f"source {_e(star.source_id)}")
    bits.append(f"epoch J{star.ref_epoch:g}" if star.ref_epoch is not None else "epoch not given")
    bits.append("model: " + _e(a.model.get("description", a.model.get("name", "?"))))
    bits.append(f"perierr {_e(__version__)}")
    return (
        f'<header>\n<h1 id="title">{_e(heading)}</h1>\n'
        f'<p class="meta">star <span id="star-name">{_e(star.name)}</span> · {" · ".join(bits)}</p>\n</header>'
    )


# ------------------------------------------------------------------------------------------------ numbers


def _plain(x: float) -> str:
    """A number without an uncertainty to round it by (six significant digits; infinities in words)."""
    if math.isnan(x):
        return "undefined"
    if math.isinf(x):
        return "+∞" if x > 0 else "−∞"
    return f"{x:.6g}"


def _interval(value, low, high) -> str:
    """``value`` with its distances to ``low`` and ``high``, PDG-rounded, stacked as +plus / −minus."""
    minus, plus = value - low, high - value
    if not all(math.isfinite(x) for x in (value, minus, plus)) or not (minus > 0 and plus > 0):
        return (f'<span class="iv"><span data-part="value">{_plain(value)}</span> '
                f'<span class="small">({_e(_plain(low))} … {_e(_plain(high))})</span></span>')
    r = round_interval(value, minus, plus)
    return (
        f'<span class="iv"><span data-part="value">{r.value}</span><span class="pm">'
        f'<span>+<span data-part="plus">{r.plus}</span></span>'
        f'<span>−<span data-part="minus">{r.minus}</span></span></span></span>'
    )


def _plus_minus(value, sigma, *, unit="") -> str:
    """``value ± sigma``, PDG-rounded (the value alone, as given, when sigma is 0)."""
    tail = f" {_e(unit)}" if unit else ""
    if not (math.isfinite(value) and math.isfinite(sigma) and sigma > 0):
        return f'<span class="iv"><span data-part="value">{_plain(value)}</span>{tail}</span>'
    r = round_interval(value, sigma)
    return (f'<span class="iv"><span data-part="value">{r.value}</span> ± '
            f'<span data-part="sigma">{r.plus}</span>{tail}</span>')


# ------------------------------------------------------------------------------------------------ inputs


def _inputs(a) -> str:
    star = a.star
    sigma = star.sigma
    cat = star.catalogue_errors()
    rows = []
    for name in OBSERVABLES:
        k = INDEX[name]
        value, err = float(star.mean[k]), float(cat[f"{name}_error"])
        shown = round_interval(value, sigma[k]).value if sigma[k] > 0 else _plain(value)
        err_text = round_interval(err, err).plus if err > 0 else "held exact"
        note = " (of α cos δ)" if name == "ra" else ""
        rows.append(
            f'<tr data-input="{name}"><th scope="row">{_e(name)}</th><td class="num">{shown}</td>'
            f"<td>{_e(INTERNAL_LABELS[name])}</td><td class=\"num\">{err_text}</td>"
            f"<td>{_e(ERROR_LABELS[name])}{_e(note)}</td></tr>"
        )
    head = ['<th scope="col">input</th>', '<th scope="col">value</th>', '<th scope="col">unit</th>',
            '<th scope="col">standard error</th>', '<th scope="col">unit</th>']
    out = [_table(head, rows)]
    if a.calibration is not None and a.calibration.active:
        out.append('<p class="small">After calibration (see below): the parallax corrected for the zero-point, '
                   "its error including the zero-point's, the inflated errors applied.</p>")
    extra = []
    if star.fractional_parallax_error < math.inf:
        extra.append(("fractional parallax error", f"{star.fractional_parallax_error:.2%}"))
    if star.mass is not None:
        extra.append(("mass", _plus_minus(star.mass, star.mass_error or 0.0, unit="M_sun")))
    if star.magnitude is not None:
        band = f" ({star.magnitude_band})" if star.magnitude_band else ""
        extra.append((f"magnitude{band}", _plus_minus(star.magnitude, star.magnitude_error or 0.0, unit="mag")))
    if extra:
        out.append('<dl class="prov">' + "".join(f"<dt>{_e(k)}</dt><dd>{v}</dd>" for k, v in extra) + "</dl>")
    out.append(_correlations(star))
    if a.calibration is not None and a.calibration.active:
        out.append(_calibration(a.calibration))
    if a.prior is not None:
        out.append(_prior(a.prior))
    return "\n".join(x for x in out if x)


def _correlations(star) -> str:
    """The astrometric correlation matrix, when any coefficient is non-zero."""
    values = star.to_dict()
    pairs = {split_correlation(c): values[c] for c in CORRELATIONS}
    if not any(v != 0 for v in pairs.values()):
        return '<p class="small">No correlations between the inputs (all coefficients are 0).</p>'
    names = [n for n in OBSERVABLES if any(n in p for p in pairs)]
    head = ['<th scope="col">correlation</th>'] + [f'<th scope="col">{_e(n)}</th>' for n in names[1:]]
    rows = []
    for i, a in enumerate(names[:-1]):
        cells = []
        for j, b in enumerate(names[1:], start=1):
            v = pairs.get((a, b), pairs.get((b, a)))
            cells.append(f'<td class="num" data-corr="{a}_{b}">{v:.3g}</td>' if j > i and v is not None
                         else "<td></td>")
        rows.append(f'<tr><th scope="row">{_e(a)}</th>{"".join(cells)}</tr>')
    return "<h3>Correlation coefficients</h3>" + _table(head, rows)


def _calibration(cal) -> str:
    items = [
        ("parallax zero-point", _plus_minus(cal.zero_point_mas, cal.zero_point_error_mas, unit="mas")
         + " (corrected parallax = catalogue parallax − zero-point)"),
    ]
    if cal.catalogue_parallax_mas is not None:
        items.append(("catalogue parallax", _plus_minus(cal.catalogue_parallax_mas,
                                                        cal.catalogue_parallax_error_mas or 0.0, unit="mas")))
    if cal.inflated:
        items.append(("errors inflated", _e(", ".join(f"{k} ×{f:g}" for k, f in cal.inflated.items()))))
    return "<h3>Calibration</h3>" + _dl(items)


def _prior(prior) -> str:
    params = ", ".join(f"{k} = {v:g}" if isinstance(v, float) else f"{k} = {v}"
                       for k, v in (prior.parameters or {}).items())
    items = [("distance prior", _e(prior.name + (f" ({params})" if params else ""))),
             ("posterior sampled by", _e(prior.method))]
    if prior.effective_size is not None:
        items.append(("effective sample size", f"{prior.effective_size:,.0f}"))
    if prior.note:
        items.append(("note", _e(prior.note)))
    return "<h3>Distance prior</h3>" + _dl(items)


def _dl(items) -> str:
    """A definition list; keys are text, values HTML already."""
    return '<dl class="prov">' + "".join(f"<dt>{_e(k)}</dt><dd>{v}</dd>" for k, v in items) + "</dl>"


# ------------------------------------------------------------------------------------------------ results


def _results(a) -> str:
    mc, lin = a.monte_carlo, a.linear
    head = ['<th scope="col">output</th>', '<th scope="col">unit</th>',
            '<th scope="col">median, 16-84 %</th>', '<th scope="col">median, 5-95 %</th>',
            '<th scope="col">nominal ± linear 1σ</th>']
    rows = []
    for key, symbol, q, scale, unit in _RESULTS:
        s = mc.summaries[q]
        med = s.median * scale
        c68 = _interval(med, s.quantile(0.16) * scale, s.quantile(0.84) * scale)
        c90 = _interval(med, s.quantile(0.05) * scale, s.quantile(0.95) * scale)
        k = OUTPUTS.index(q)
        linear = "—" if lin is None else _plus_minus(float(lin.value[k]) * scale, float(lin.sigma[k]) * scale)
        rows.append(
            f'<tr data-output="{key}"><th scope="row">{symbol}</th><td>{_e(unit)}</td>'
            f'<td class="num" data-cell="68">{c68}</td><td class="num" data-cell="90">{c90}</td>'
            f'<td class="num" data-cell="linear">{linear}</td></tr>'
        )
    out = [
        '<p class="small">Monte Carlo median of each output with the distances to the ends of its central 68 % '
        "(16-84 %) and 90 % (5-95 %) intervals, rounded by the Particle Data Group rule; t_ph is counted from the "
        "epoch (negative: in the past).</p>",
        _table(head, rows),
    ]
    if lin is None:
        out.append('<p class="small">No linear answer: the nominal parallax is not positive.</p>')
    notes = {}
    for q in OUTPUTS:
        if mc.summaries[q].note:
            notes.setdefault(mc.summaries[q].note, []).append(_SYMBOLS[q])
    out += [f'<p class="small">{_e(", ".join(s))}: {_e(note)}</p>' for note, s in notes.items()]
    side = _side(mc)
    if side:
        out.append(f'<p id="side">{_e(side)}</p>')
    worst = mc.worst_relative_error()
    draws = f"{mc.n:,} draws ({_e(mc.samples.method)}), seed {_e(mc.samples.seed)}"
    if math.isfinite(worst):
        draws += f"; every quantile's Monte Carlo error ≤ {worst:.2%} of its (q84 − q16)/2"
    if mc.samples.weights is not None:
        draws += f"; effective sample size {mc.samples.effective_size:,.0f}"
    if mc.n_nonpositive_parallax:
        draws += (f"; {mc.n_nonpositive_parallax:,} draws with parallax ≤ 0 (counted as never passing within any "
                  "threshold)")
    out.append(f'<p class="small">{draws}</p>')
    out.append("<h3>Chance that the star passes within</h3>" + _thresholds(mc))
    return "\n".join(out)


def _side(mc) -> str:
    """The share of draws with their perihelion on the other side of now, when not negligible (as the text)."""
    t = np.asarray(mc.perihelion.time_myr, dtype=float)[mc.valid]
    if t.size == 0:
        return ""
    w = None if mc.samples.weights is None else np.asarray(mc.samples.weights, dtype=float)[mc.valid]
    past = float(np.average(t < 0, weights=w))
    future = mc.summaries["time_myr"].median >= 0
    other = past if future else 1.0 - past
    if other < SIDE_FRACTION:
        return ""
    side, rest = ("past", "future") if future else ("future", "past")
    return f"{other:.1%} of the draws have their perihelion in the {side} (the rest in the {rest})."


def _thresholds(mc) -> str:
    head = ['<th scope="col">threshold</th>', '<th scope="col">P(d_ph &lt; D)</th>', '<th scope="col">draws</th>']
    return _table(head, _probability_rows(mc.thresholds, mc, "threshold")) + _PROBABILITY_NOTE


#: How the page's probabilities read (below each table of them).
_PROBABILITY_NOTE = (
    '<p class="small">± is the Monte Carlo (binomial) error of the probability; when no draw or every draw '
    "passed, a 95 % bound is given instead.</p>"
)


def _probability_rows(probabilities, mc, attribute) -> list:
    """One table row per :class:`~perierr.thresholds.ThresholdProbability`.

    The probability to the place its Monte Carlo error allows (the text report's rule,
    :func:`perierr.report.text.probability_parts`) and the draws that passed.
    """
    rows = []
    for t in probabilities:
        kind, r, why = probability_parts(t, mc.n)
        if kind == "value":
            p = (f'<span class="iv"><span data-part="value">{r.value}</span>% ± '
                 f'<span data-part="sigma">{r.plus}</span>%</span>')
        else:
            p = f"{'&lt;' if kind == 'upper' else '&gt;'} {r} <span class=\"small\">(95 % bound; {_e(why)})</span>"
        count = f"{t.count:,} of {mc.n:,}" if mc.samples.weights is None else "weighted"
        rows.append(
            f'<tr data-{attribute}="{_e(t.label)}"><th scope="row">{_e(t.label)}</th>'
            f'<td class="prob" data-cell="probability">{p}</td><td class="num">{count}</td></tr>'
        )
    return rows


# ------------------------------------------------------------------------------------------------ budget


def _budget(a, gb) -> str:
    b = a.budget
    out = []
    if b is None:
        out.append("<p>No linear budget: the linearization is not available for this star.</p>")
    else:
        dom = {q: b.dominant(q) for q in OUTPUTS}
        head = ['<th scope="col">input</th>'] + [
            f'<th scope="col">Var({_SYMBOLS[q]})</th>' for q in OUTPUTS
        ]
        shares = {q: b.share(q) for q in OUTPUTS}
        mc_cols = _global_columns(gb)
        head += [h for h, _ in mc_cols]
        rows = []
        for name in b.inputs:
            cells = []
            for q in OUTPUTS:
                text = format_share(shares[q][name], bounded=True)
                text = f"<strong>{text}</strong>" if dom[q] == name else text
                cells.append(f'<td class="num" data-share="{q}">{text}</td>')
            cells += [f'<td class="num">{cell(name)}</td>' for _, cell in mc_cols]
            rows.append(f'<tr data-input="{_e(name)}"><th scope="row">{_e(input_label(name))}</th>'
                        f'{"".join(cells)}</tr>')
        out.append(
            '<p class="small">Share of each output\'s variance due to each input (linearized Shapley effects; '
            "correlated inputs share their joint part fairly). The largest share of each output is in bold.</p>"
        )
        out.append(_table(head, rows))
        if mc_cols:
            conf = int(round(100 * gb.variance.confidence))
            out.append(f'<p class="small">Monte Carlo columns: Shapley shares estimated from the model itself, with '
                       f"their {conf} % bootstrap interval.</p>")
    return "\n".join(out)


# ------------------------------------------------------------------------------------------------ encounter


def _encounter_title(name, band) -> tuple:
    """An encounter quantity in words and its unit (the band beside a magnitude's)."""
    from ..encounter import quantity_words

    kind = name.partition(":")[0]
    unit = ENCOUNTER_LABELS[kind] + (f" ({band})" if kind == "peak_magnitude" and band else "")
    return quantity_words(name), unit


def _encounter(a) -> str:
    """The section on what the encounter does.

    Each quantity with its intervals and the input that dominates its budget, P(d_ph < r) for every Oort radius,
    why a quantity is not given, and :data:`perierr.cautions.SHOWER` once.
    """
    enc = getattr(a, "encounter", None)
    if enc is None:
        return "<p>Not computed for this analysis.</p>"
    mc = a.monte_carlo
    budget = enc.budget
    head = ['<th scope="col">quantity</th>', '<th scope="col">unit</th>', '<th scope="col">median, 16-84 %</th>',
            '<th scope="col">median, 5-95 %</th>', '<th scope="col">largest share</th>']
    rows, notes = [], {}
    for name, s in enc.summaries.items():
        title, unit = _encounter_title(name, enc.magnitude.get("band"))
        med = s.median
        c68 = _interval(med, s.quantile(0.16), s.quantile(0.84))
        c90 = _interval(med, s.quantile(0.05), s.quantile(0.95))
        rows.append(
            f'<tr data-encounter="{_e(name)}"><th scope="row" class="wrap">{_e(title)}</th>'
            f'<td class="unit">{_e(unit)}</td>'
            f'<td class="num" data-cell="68">{c68}</td><td class="num" data-cell="90">{c90}</td>'
            f'<td class="num" data-cell="share">{_encounter_share(budget, name)}</td></tr>'
        )
        if s.note:
            notes.setdefault(s.note, []).append(title)
    out = [
        '<p class="small">Over each draw\'s perihelion: the impulse on the Sun, 2GM/(d_ph v_ph), and on a comet on the '
        "line from the Sun toward the star's closest point (the near side), in the impulse approximation; the "
        "strength proxies M/(v_ph d_ph) and M/(v_ph d_ph²); the peak proper motion v_ph/d_ph and the peak magnitude "
        "by the distance modulus from today's (no extinction). Monte Carlo median with the distances to the ends of "
        "its 68 % and 90 % intervals, rounded by the Particle Data Group rule.</p>",
        _table(head, rows),
    ]
    out += [f'<p class="small">{_e(", ".join(t))}: {_e(note)}</p>' for note, t in notes.items()]
    for name, why in getattr(budget, "undefined", {}).items():
        if name in enc.summaries:
            out.append(f'<p class="small" data-undefined="{_e(name)}">No largest share for the '
                       f"{_e(_encounter_title(name, None)[0])}: {_e(why)}.</p>")
    if budget is not None:
        out.append('<p class="small">Largest share: the input carrying the largest share of the variance of log10 '
                   "of the quantity (of the peak magnitude itself); linearized Shapley effects at the nominal inputs, "
                   "with the star's mass and magnitude among the inputs.</p>")
    used = []
    if enc.mass:
        used.append(f"mass {_plus_minus(enc.mass['mass_msun'], enc.mass['mass_error_msun'], unit='M_sun')} "
                    f"(its draws: {_e(enc.mass.get('draws', '?'))})")
    if enc.magnitude:
        band = enc.magnitude.get("band")
        used.append(f"magnitude{_e(' ' + band if band else '')} "
                    f"{_plus_minus(enc.magnitude['magnitude'], enc.magnitude['magnitude_error'], unit='mag')}")
    if used:
        out.append(f'<p class="small">From the star\'s {"; ".join(used)}.</p>')
    for p in enc.positions:
        out.append(f'<p class="small" data-position="{_e(p["name"])}">Comet at '
                   f'{_e(p["name"].replace("position", "position "))}: {p["distance_au"]:,.0f} au toward RA '
                   f'{p["ra_deg"]:.4f}°, Dec {p["dec_deg"]:+.4f}° (heliocentric ICRS).</p>')
    out += [f'<p class="missing" data-missing="{k}"><span class="tag note">not given</span>{_e(why)}</p>'
            for k, why in enumerate(enc.missing)]
    head = ['<th scope="col">Oort radius r</th>', '<th scope="col">P(d_ph &lt; r)</th>', '<th scope="col">draws</th>']
    out.append("<h3>Chance that the star passes inside the Oort radius</h3>"
               + _table(head, _probability_rows(enc.inside, mc, "oort")) + _PROBABILITY_NOTE)
    passage = enc.passage
    if passage:
        periods = ", ".join(f"{period:,.0f} yr at {label}"
                            for label, period in passage.get("comet_period_yr", {}).items())
        out.append(f'<p class="small">Median passage time d_ph/v_ph: {passage["median_passage_yr"]:,.0f} yr; the '
                   "impulse approximation needs it short against a comet's orbital period"
                   + (f" ({_e(periods)})" if periods else "") + ".</p>")
    out.append(f'<p class="hazard" id="shower">{_e(SHOWER)}</p>')
    return "\n".join(out)


def _encounter_share(budget, name) -> str:
    """``star mass 84.2%``: the input dominating an encounter quantity's budget and its share."""
    if budget is None or name not in budget.quantities:
        return "—"
    who = budget.dominant(name)
    if who is None:
        sigma = float(budget.sigma[budget.quantities.index(name)])
        return "undefined (see below)" if name in getattr(budget, "undefined", {}) else (
            "no spread" if sigma == 0 else "undefined")
    return (f'<span data-part="input">{_e(input_label(who))}</span> '
            f'<span data-part="share">{format_share(budget.share(name)[who], bounded=True)}</span>')


def _global_columns(gb) -> list:
    """(header, cell(input)) of the Monte Carlo budget's columns (Var(t_ph), Var(d_ph)); empty without one."""
    if gb is None:
        return []
    est = gb.variance
    cols = []
    for q in ("time_myr", "distance_pc"):
        if q not in est.outputs:
            continue
        j = est.outputs.index(q)

        def cell(name, j=j):
            if name not in est.players:
                return "—"
            i = est.players.index(name)
            return (f"{format_share(est.shares[j, i])}<br><span class=\"small\">[{format_share(est.low[j, i])}, "
                    f"{format_share(est.high[j, i])}]</span>")

        cols.append((f'<th scope="col">Monte Carlo Var({_SYMBOLS[q]})</th>', cell))
    return cols


def _dominates(a) -> str:
    """One sentence: which input's error dominates d_ph and t_ph (linear budget)."""
    b = a.budget
    if b is None:
        return ""
    parts = []
    for q in ("distance_pc", "time_myr", "speed_kms"):
        name = b.dominant(q)
        if name is not None:
            parts.append(f"{input_label(name)} for {_SYMBOLS[q]} ({format_share(b.share(q)[name], bounded=True)} "
                         "of its variance)")
    if not parts:
        return ""
    return "The error is dominated by " + "; ".join(parts) + "."


def _figures(a, gb) -> str:
    out = []
    for k, (title, caption, function) in enumerate(FIGURES):
        try:
            fig = function(a, gb)
        except InputError as exc:
            out.append(f'<p class="small">{_e(title)}: not drawn ({_e(exc.expected)}).</p>')
            continue
        data, (width, height) = _png(fig)
        out.append(
            f'<figure id="figure-{k + 1}"><img src="data:image/png;base64,{data}" width="{width}" '
            f'height="{height}" alt="{_e(title)}: {_e(caption)}">'
            f"<figcaption><strong>Figure {k + 1}. {_e(title)}.</strong> {_e(caption)}</figcaption></figure>"
        )
    return "\n".join(out)


def _png(fig) -> tuple:
    """A figure as base64 PNG (no software stamp: the same figure gives the same bytes) and its pixel size."""
    import matplotlib.pyplot as plt

    buffer = io.BytesIO()
    try:
        fig.savefig(buffer, format="png", dpi=FIGURE_DPI, metadata={"Software": None})
    finally:
        plt.close(fig)
    data = buffer.getvalue()
    width, height = int.from_bytes(data[16:20], "big"), int.from_bytes(data[20:24], "big")  # the IHDR chunk
    return base64.b64encode(data).decode("ascii"), (width, height)


# ------------------------------------------------------------------------------------------------ plan


def _plan(p) -> str:
    from ..plan.curves import WIDTH90_DISTANCE

    out = []
    if p.what_if is not None:
        out.append(_what_if(p.what_if))
    best = _best_goal_routes(p.required)
    goals = {}
    for r in p.required:
        goals.setdefault(r.goal.describe(), []).append(r)
    if goals:
        out.append("<h3>Goals: the error each input must reach</h3>")
    head = ['<th scope="col">input</th>', '<th scope="col">status</th>', '<th scope="col">required error</th>',
            '<th scope="col">today</th>', '<th scope="col">what it means</th>']
    for goal, rs in goals.items():
        rows = []
        for r in rs:
            need = "—" if r.precision is None else f"{r.precision:.3g} {_e(r.unit)}"
            rows.append(
                f'<tr data-goal-input="{_e(r.input)}"><th scope="row">{_e(r.input)}</th>'
                f'<td>{_e(r.status.replace("_", " "))}</td><td class="num">{need}</td>'
                f'<td class="num">{r.current_sigma:.3g} {_e(r.unit)}</td><td class="text">{_e(r.message)}</td></tr>'
            )
        out.append(f"<p>Goal: {_e(goal)}</p>" + _table(head, rows))
    out += [f'<p class="lead" data-best="goal">{_e(line)}</p>' for line in best]
    if p.curves is not None:
        c = p.curves
        today = float(c.current[WIDTH90_DISTANCE])
        gains = {name: float(c.curves[name][WIDTH90_DISTANCE][-1]) for name in c.inputs}
        if gains and today > 0:
            name = min(gains, key=gains.get)
            s = float(c.precision[name][-1] / c.sigma[name])
            out.append(
                f'<p class="lead" data-best="curve">Best single measurement for d_ph: <strong>{_e(name)}</strong>. '
                f"With its error at {s:.2g} × today's, the 90 % interval of d_ph narrows from "
                f"{today * AU_PER_PC:,.0f} au to {gains[name] * AU_PER_PC:,.0f} au "
                f"({1 - gains[name] / today:.0%} narrower; gain curves on {c.settings.get('n', '?')} common "
                "draws).</p>"
            )
    if p.budget is not None:
        est = p.budget.variance
        if "distance_pc" in est.outputs:
            shares = est.share("distance_pc")
            name = max(shares, key=shares.get)
            out.append(f"<p>Monte Carlo budget: {_e(input_label(name))} carries the largest share of Var(d_ph) "
                       f"({format_share(shares[name])}).</p>")
    out.append(f'<p class="small">Planner seed {_e(p.settings.get("seed"))}, {_e(p.settings.get("n"))} common '
               "draws.</p>")
    return "\n".join(out)


def _best_goal_routes(required) -> list:
    """For each goal, the reachable input asking the least: the largest required error relative to today's."""
    by_goal = {}
    for r in required:
        by_goal.setdefault(r.goal.describe(), []).append(r)
    lines = []
    for goal, rs in by_goal.items():
        met = [r for r in rs if r.status == "already_met"]
        if met:
            lines.append(f"Goal “{goal}”: already met with today's errors.")
            continue
        ok = [r for r in rs if r.status == "reachable" and r.precision is not None and r.current_sigma > 0]
        if not ok:
            lines.append(f"Goal “{goal}”: no single input reaches it; several must improve together.")
            continue
        r = max(ok, key=lambda r: r.precision / r.current_sigma)
        lines.append(f"Goal “{goal}”: the easiest route is {r.input}, measured to {r.precision:.3g} {r.unit} or "
                     f"better (today {r.current_sigma:.3g} {r.unit}).")
    return lines


def _four(x: float) -> str:
    """A Monte Carlo width to four significant digits (its own error is about 1 %), thousands separated."""
    x = float(f"{x:.4g}")
    return f"{x:,.0f}" if abs(x) >= 1000 else f"{x:.4g}"


def _what_if(w) -> str:
    rows = []
    for label, q, scale in (("d_ph [au]", "distance_pc", AU_PER_PC), ("t_ph [Myr]", "time_myr", 1.0),
                            ("v_ph [km/s]", "speed_kms", 1.0)):
        a, b = w.mc_current.summaries[q], w.mc_improved.summaries[q]
        wa = (a.quantile(0.95) - a.quantile(0.05)) * scale
        wb = (b.quantile(0.95) - b.quantile(0.05)) * scale
        rows.append(f'<tr><th scope="row">90 % width of {_e(label)}</th><td class="num">{_four(wa)}</td>'
                    f'<td class="num">{_four(wb)}</td></tr>')
    for t0, t1 in zip(w.mc_current.thresholds, w.mc_improved.thresholds):
        rows.append(f'<tr><th scope="row">P(d_ph &lt; {_e(t0.label)})</th><td class="num">{t0.probability:.4f}</td>'
                    f'<td class="num">{t1.probability:.4f}</td></tr>')
    head = ['<th scope="col"></th>', '<th scope="col">today</th>', '<th scope="col">after</th>']
    headline = w.headline()
    return (f'<p class="lead" data-best="what-if">{_e(headline[0].upper() + headline[1:])}.</p>'
            + _table(head, rows)
            + f'<p class="small">{_e(w.settings.get("n", "?"))} common draws; the new value is assumed to land on '
              "today's mean.</p>")


# ------------------------------------------------------------------------------------------------ cautions


def _cautions(a, plan) -> str:
    found = list(a.all_cautions)
    if plan is not None:
        # the plan's own draws judge the same checks again with other numbers: the analysis's verdict is the
        # page's, so a plan caution of a check the analysis already reported is left out
        kinds = {(getattr(c, "code", ""), getattr(c, "subject", "")) for c in found}
        found += [c for c in list(plan.cautions) + list(plan.star.cautions)
                  if (getattr(c, "code", ""), getattr(c, "subject", "")) not in kinds]
    seen, items = set(), []
    if getattr(a, "encounter", None) is not None:
        seen.add(SHOWER)  # the encounter section says it, once
    for c in found:
        text = str(c)
        if text in seen:
            continue
        seen.add(text)
        severity = getattr(c, "severity", "caution")
        code = getattr(c, "code", "")
        items.append(f'<li data-caution="{_e(code)}"><span class="tag {_e(severity)}">{_e(severity)}</span>'
                     f"{_e(text)}</li>")
    out = []
    if items:
        out.append('<ul class="cautions">' + "".join(items) + "</ul>")
    else:
        out.append("<p>No cautions for this analysis.</p>")
    if plan is None:
        line = _dominates(a)
        if line:
            out.insert(0, f'<p class="lead" id="dominates">{_e(line)}</p>')
    out.append(f'<p class="hazard" id="hazard">{_e(HAZARD)}</p>')
    return "\n".join(out)


# ------------------------------------------------------------------------------------------------ provenance


def _provenance(a, plan) -> str:
    mc = a.monte_carlo
    model = dict(a.model)
    described = _e(model.pop("description", model.get("name", "?")))
    if model:
        described += " <code>" + _e(json.dumps(model, default=str, separators=(", ", ": "))) + "</code>"
    prior = "none (the parallax is inverted)" if a.prior is None else a.prior.name
    items = [
        ("perierr", _e(__version__)),
        ("model", described),
        ("distance prior", _e(prior)),
        ("Monte Carlo", f"{mc.n:,} draws ({_e(mc.samples.method)}), {mc.n_valid:,} with a perihelion"),
        ("seed", f'<span id="seed">{_e(mc.samples.seed)}</span>'),
        ("quantile levels", _e(", ".join(f"{lv:g}" for lv in mc.levels))),
        ("thresholds", _e(", ".join(t.label for t in mc.thresholds))),
    ]
    if getattr(a, "encounter", None) is not None:
        items.append(("Oort radii", _e(", ".join(label for label, _ in a.encounter.radii))))
    items += [
        ("inputs SHA-256", f'<code id="digest">{input_digest(a)}</code>'),
    ]
    if a.calibration is not None and a.calibration.active:
        items.append(("calibration", "applied (see the inputs)"))
    if plan is not None:
        items.append(("plan", _e(f"model {plan.model.get('name')}, seed {plan.settings.get('seed')}")))
    return (_dl(items) + '<p class="small">The same inputs and seed give the same page, byte for byte: nothing in '
            "it depends on the date or the machine.</p>")
