"""The encounter effects on the paper faces: the paper table (ECSV, CSV, LaTeX rows) and the one-page report.

Outside references: the straight-line perihelion written out from its formulas (Matthews 1994, QJRAS 35, 1;
tests/straight_line_reference.py) on the run's own draws; the impulse approximation dv = 2 G M / (d v) (Binney &
Tremaine 2008, Galactic Dynamics, 2nd ed., Sect. 7.2; from memory) with astropy's G and solar mass; the proper
motion v / d and the distance modulus (astropy's ``Distance.distmod``); numpy's quantile(method="hazen") (Hyndman &
Fan 1996, definition 5); astropy's ECSV reader for units and masks; the Particle Data Group's rounding rule
(tested against the Review of Particle Physics in tests/test_rounding.py, recomputed here with
perierr.report.rounding); Shapley effects of a linear model with an independent input equal its variance fraction
(Iooss & Prieur 2019, Reliab. Eng. Syst. Saf. 187; from memory); Python's html.parser and Chromium (playwright)
for what a reader sees. The stars are invented (the demo's Kestrel-4 and invented neighbours).
"""

import csv
import dataclasses
import html
import warnings
from html.parser import HTMLParser

import astropy.units as u
import numpy as np
import pytest
from astropy.constants import G, M_sun
from astropy.coordinates import Distance
from astropy.table import QTable
from browser import launched
from hypothesis import given, settings
from hypothesis import strategies as st
from paper_stars import invented
from straight_line_reference import lma

from perierr import analyze, read_star_file
from perierr.cautions import HAZARD, SHOWER
from perierr.demo import demo_path
from perierr.errors import InputError, PerierrWarning
from perierr.report import html as page_module
from perierr.report.html import html_report
from perierr.report.rounding import latex_interval, round_interval
from perierr.report.tables import NOT_COMPUTED, latex_rows, result_table, write_table

N = 4000
XSS = "<script>alert(1)</script> & \"Kestrel\" 'x'"
QUANTITIES = ("peak_magnitude", "peak_proper_motion", "sun_impulse", "strength_m_vd", "strength_m_vd2")
UNITS = {  # astropy's units of each column (the unit the column must carry through an ECSV file)
    "peak_magnitude": u.mag, "peak_proper_motion": u.arcsec / u.yr, "sun_impulse": u.m / u.s,
    "strength_m_vd": u.solMass * u.s / (u.km * u.pc), "strength_m_vd2": u.solMass * u.s / (u.km * u.pc**2),
}  # fmt: skip
INTERVALS = {"68": (0.16, 0.84), "90": (0.05, 0.95)}




def value(table, column, k):
    """Cell ``k`` of a column as a float in the column's unit (a masked column's data under the mask)."""
    x = table[column][k].to_value(table[column].unit)
    return float(getattr(x, "unmasked", x))


def run(star, seed, **options):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return analyze(star, model="straight_line", n_samples=N, seed=seed, compare=False, **options)


@pytest.fixture(scope="module")
def stars():
    """Kestrel-4 (mass with its error, G magnitude), an exact mass and magnitude, no mass, a mass only."""
    return [
        run(read_star_file(demo_path("kestrel-4.toml")), 1),
        run(invented("invented Plover-1 & co", mass=0.55, mag=9.3, mag_band="V"), 2),
        run(invented("invented Plover-2 (no mass)", parallax=30.0, radial_velocity=-25.0), 3),
        run(invented("invented Plover-3", mass=1.1, mass_error=0.05), 4),
    ]


# ------------------------------------------------------------------------------------------------ the table


@pytest.mark.parametrize("interval", ["68", "90"])
def test_columns_are_the_encounter_summaries(stars, interval):
    lo, hi = INTERVALS[interval]
    table = result_table(stars, interval=interval, comet_impulses=True)
    for k, a in enumerate(stars):
        for name, s in a.encounter.summaries.items():
            stem = name.replace(":", "_").replace(" ", "_")
            # the summary itself, to the last bit (the table only moves it into a column with its unit)
            assert value(table, stem, k) == s.median
            assert value(table, f"{stem}_minus", k) == pytest.approx(s.median - s.quantile(lo), rel=1e-12)
            assert value(table, f"{stem}_plus", k) == pytest.approx(s.quantile(hi) - s.median, rel=1e-12)
        for t in a.encounter.inside:
            column = "p_inside_oort_" + t.label.replace(" ", "_")
            assert table[column][k] == t.probability and table[f"{column}_se"][k] == t.se


def test_an_exact_mass_and_magnitude_give_the_closed_forms_of_the_draws(stars):
    # Plover-1: mass and magnitude without errors, so every draw's value is a closed form of its observables:
    # recomputed with the straight-line reference, astropy's constants and distance modulus, numpy's quantiles
    a = stars[1]
    table = result_table(stars, interval="90")
    values = a.monte_carlo.samples.values
    _, d, v = lma(values).T
    d, v = d * u.pc, v * u.km / u.s
    draws = {
        "sun_impulse": (2 * G * 0.55 * M_sun / (d * v)).to(u.m / u.s),  # Binney & Tremaine 2008, 7.2 (from memory)
        "peak_proper_motion": (v / d).to(u.arcsec / u.yr, u.dimensionless_angles()),
        "strength_m_vd": (0.55 * u.solMass / (v * d)).to(UNITS["strength_m_vd"]),
        "strength_m_vd2": (0.55 * u.solMass / (v * d * d)).to(UNITS["strength_m_vd2"]),
        "peak_magnitude": (9.3 + (Distance(d).distmod - Distance(parallax=values[:, 2] * u.mas).distmod).value)
        * u.mag,
    }
    for name, x in draws.items():
        unit = table[name].unit
        x = x.to_value(unit)
        q05, q50, q95 = np.quantile(x, [0.05, 0.5, 0.95], method="hazen")
        spread = q95 - q05
        # the same draws through two sets of formulas: equal to float rounding of the spread
        assert value(table, name, 1) == pytest.approx(q50, abs=1e-9 * spread), name
        assert value(table, f"{name}_minus", 1) == pytest.approx(q50 - q05, abs=1e-9 * spread), name
        assert value(table, f"{name}_plus", 1) == pytest.approx(q95 - q50, abs=1e-9 * spread), name
    assert table["peak_magnitude_band"][1] == "V"
    # P(d_ph < 20000 au) recounted from the draws (astropy's au)
    assert table["p_inside_oort_20000_au"][1] == pytest.approx(np.mean(d < 20000 * u.au), abs=1e-12)


def test_ecsv_round_trip_keeps_units_masks_reasons_and_the_caution(stars, tmp_path):
    path = write_table(stars, tmp_path / "encounters.ecsv", comet_impulses=True)
    back = QTable.read(path, format="ascii.ecsv")
    first = result_table(stars, comet_impulses=True)
    assert back.colnames == first.colnames
    for name, unit in UNITS.items():
        for column in (name, f"{name}_minus", f"{name}_plus"):
            assert back[column].unit == unit, column  # astropy's units, equal as units (not only as text)
            np.testing.assert_array_equal(np.ma.getmaskarray(back[column]), np.ma.getmaskarray(first[column]))
            kept = ~np.ma.getmaskarray(first[column])
            np.testing.assert_array_equal(np.asarray(back[column].value)[kept], np.asarray(first[column].value)[kept])
    assert back["comet_impulse_20000_au"].unit == u.m / u.s
    meta = back.meta["perierr"]
    assert meta["encounter"]["caution"] == SHOWER and meta["caution"] == HAZARD
    assert meta["encounter"]["oort_radii"] == ["20000 au", "100000 au"]
    assert [m["row"] for m in meta["encounter"]["missing"]] == [2, 3]  # Plover-2 and Plover-3
    assert all(m["reasons"] == back["encounter_missing"][m["row"]] for m in meta["encounter"]["missing"])


def test_a_star_without_a_mass_gives_masked_cells_with_the_reason(stars, tmp_path):
    table = result_table(stars)
    masked = {c: list(np.ma.getmaskarray(table[c])) for c in QUANTITIES}
    # Kestrel-4: everything; Plover-1: everything; Plover-2: no mass, no magnitude; Plover-3: a mass, no magnitude
    assert masked["peak_proper_motion"] == [False, False, False, False]  # needs neither
    assert masked["sun_impulse"] == masked["strength_m_vd"] == masked["strength_m_vd2"] == [False, False, True, False]
    assert masked["peak_magnitude"] == [False, False, True, True]
    reasons = list(table["encounter_missing"])
    assert reasons[0] == ""
    assert "mass" in reasons[2] and "magnitude" in reasons[2]
    assert reasons[2] == "; ".join(stars[2].encounter.missing) and len(stars[2].encounter.missing) == 2
    assert reasons[3] == stars[3].encounter.missing[0] and reasons[3].startswith("peak magnitude")
    # CSV: the masked cells are blank and the row says why; the caution heads the file
    text = write_table(stars, tmp_path / "e.csv").read_text(encoding="utf-8")
    assert text.splitlines()[1] == f"# {SHOWER} Blank cells: why in encounter_missing."
    rows = list(csv.DictReader(line for line in text.splitlines() if not line.startswith("#")))
    assert rows[2]["sun_impulse"] == "" and rows[2]["encounter_missing"] == reasons[2]
    assert float(rows[2]["peak_proper_motion"]) == pytest.approx(table["peak_proper_motion"][2].value, rel=1e-15)
    # LaTeX: "--" in the cell, the reason in a comment after the row
    lines = latex_rows(stars, encounter=True).splitlines()
    cells = lines[2 + 2].split(r" \\")[0].split(" & ")
    assert cells[1] == "--" and cells[3] == "--" and cells[2] != "--"
    assert lines[2 + 2].endswith(r"\\ % not given: " + reasons[2])


def test_without_encounter_effects_the_cells_are_masked_or_absent(stars):
    bare = dataclasses.replace(stars[0], encounter=None)
    table = result_table([bare, stars[1]])
    assert table["encounter_missing"][0] == NOT_COMPUTED
    assert all(np.ma.getmaskarray(table[c])[0] for c in QUANTITIES + ("p_inside_oort_20000_au",))
    alone = result_table(bare)
    assert "sun_impulse" not in alone.colnames and "encounter_missing" not in alone.colnames
    assert alone.meta["perierr"]["encounter"]["computed"].startswith("no star of the table")
    assert alone.colnames == result_table(stars[0]).colnames[: len(alone.colnames)]  # appended, never reordered
    with pytest.raises(InputError, match="encounter"):
        latex_rows(bare, encounter=True)
    other = run(invented("invented Plover-4"), 5, oort_radii=["0.2 pc"])
    with pytest.raises(InputError, match="oort_radii"):
        result_table([stars[0], other])


@settings(max_examples=40, deadline=None, derandomize=True)
@given(picks=st.lists(st.tuples(st.integers(0, 3), st.booleans()), min_size=1, max_size=6))
def test_a_cell_is_masked_exactly_where_its_row_says_why(stars, picks):
    # invariant (common practice, no source: never a silent blank): in any table of these stars, in any order, with
    # some analyses stripped of their encounter effects, a cell is masked exactly where the analysis has no such
    # quantity, and a row names a reason exactly where one of its cells is masked
    rows = [stars[k] if keep else dataclasses.replace(stars[k], encounter=None) for k, keep in picks]
    if all(a.encounter is None for a in rows):
        return  # no encounter columns at all (tested above)
    table = result_table(rows, comet_impulses=True)
    names = list(QUANTITIES) + ["comet_impulse:20000 au", "comet_impulse:100000 au"]
    for k, a in enumerate(rows):
        absent = [a.encounter is None or name not in a.encounter.summaries for name in names]
        shown = [bool(np.ma.getmaskarray(table[n.replace(":", "_").replace(" ", "_")])[k]) for n in names]
        assert shown == absent
        assert bool(table["encounter_missing"][k]) == any(absent)
        assert table["star"][k] == a.star.name


def test_latex_encounter_rows_round_by_the_rule(stars, tmp_path):
    text = latex_rows(stars, encounter=True, interval="90", comet_impulses=True)
    lines = text.splitlines()
    assert lines[0].startswith("% perierr") and "Particle Data Group" in lines[0] and "5-95 %" in lines[0]
    assert lines[1] == f"% {SHOWER}" and text.count(SHOWER) == 1
    assert "band G, V" in lines[0]  # the bands of the peak magnitudes
    assert lines[3].startswith(r"invented Plover-1 \& co & ")
    for k, a in enumerate(stars):
        cells = lines[2 + k].split(r" \\")[0].split(" & ")
        names = list(QUANTITIES) + ["comet_impulse:20000 au", "comet_impulse:100000 au"]
        for j, name in enumerate(names, start=1):
            s = a.encounter.summaries.get(name)
            if s is None:
                assert cells[j] == "--"
                continue
            med = s.median
            assert cells[j] == latex_interval(med, med - s.quantile(0.05), s.quantile(0.95) - med), (k, name)
        for j, t in enumerate(a.encounter.inside, start=len(names) + 1):
            n = a.monte_carlo.n
            if t.count == n:  # a 95 % bound where every or no draw passed: 0.05^(1/n) (the text report's rule)
                assert cells[j] == f"$>{100 * 0.05 ** (1 / n):.4f}$"
            elif t.count == 0:
                assert cells[j] == f"$<{100 * (1 - 0.05 ** (1 / n)):.4f}$"
            else:
                r = round_interval(100 * t.probability, 100 * t.se)
                assert cells[j] == f"${r.value} \\pm {r.plus}$"
    written = write_table(stars, tmp_path / "e.tex", encounter=True, interval="90", comet_impulses=True)
    assert written.read_text() == text
    assert write_table(stars, tmp_path / "p.tex").read_text() == latex_rows(stars)  # the perihelion's rows


# ------------------------------------------------------------------------------------------------ the page


class _Text(HTMLParser):
    """The text a browser shows for each element id and each data-encounter cell part (html.parser decodes)."""

    VOID = {"meta", "br", "img", "hr", "input", "link"}  # elements without an end tag (HTML5, 13.1.2)

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.by_id, self.parts, self.scripts, self._stack = {}, {}, 0, []

    def handle_starttag(self, tag, attrs):
        self.scripts += tag == "script"
        if tag in self.VOID:
            return
        attrs = dict(attrs)
        top = self._stack[-1] if self._stack else {}
        here = dict(top)
        if "data-encounter" in attrs or "data-oort" in attrs:
            here["row"] = attrs.get("data-encounter") or attrs.get("data-oort")
        if "data-cell" in attrs:
            here["cell"] = attrs["data-cell"]
        key = None
        if "data-part" in attrs and "row" in here:
            key = (here["row"], here.get("cell"), attrs["data-part"])
        elif attrs.get("data-cell") == "probability" and "row" in here:
            key = (here["row"], "probability", None)
        here["keys"] = top.get("keys", ()) + ((key,) if key else ()) + ((attrs["id"],) if "id" in attrs else ())
        for k in here["keys"][len(top.get("keys", ())):]:
            (self.parts if isinstance(k, tuple) else self.by_id)[k] = ""
        self._stack.append(here)

    def handle_endtag(self, tag):
        self._stack.pop()

    def handle_data(self, data):
        for key in self._stack[-1].get("keys", ()) if self._stack else ():
            (self.parts if isinstance(key, tuple) else self.by_id)[key] += data


def _page(a, **options):
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(page_module, "FIGURES", ())  # the figures are tested elsewhere; the page's text is the point here
        return html_report(a, **options)


def test_the_page_shows_the_rounded_summaries_and_the_caution_once(stars):
    a = stars[0]
    text = _page(a)
    parsed = _Text()
    parsed.feed(text)
    assert parsed.scripts == 0
    section = parsed.by_id["encounter"]
    assert section.strip().startswith("What the encounter does")
    for name, s in a.encounter.summaries.items():
        med = s.median
        for cell, (lo, hi) in INTERVALS.items():
            r = round_interval(med, med - s.quantile(lo), s.quantile(hi) - med)
            assert parsed.parts[(name, cell, "value")] == r.value, (name, cell)
            assert parsed.parts[(name, cell, "plus")] == r.plus and parsed.parts[(name, cell, "minus")] == r.minus
    for t in a.encounter.inside:
        shown = parsed.parts[(t.label, "probability", None)]
        if t.count == a.monte_carlo.n:
            assert shown.startswith(f"> {100 * 0.05 ** (1 / a.monte_carlo.n):.4f}%") and "every draw passed" in shown
        else:
            r = round_interval(100 * t.probability, 100 * t.se)
            assert shown == f"{r.value}% ± {r.plus}%"
    # the caution once on the whole page, inside the section, beside the hazard sentence (also once)
    assert text.count(html.escape(SHOWER, quote=True)) == 1 and SHOWER in section
    assert text.count(html.escape(HAZARD, quote=True)) == 1
    assert text.index('id="encounter"') < text.index('id="cautions"')


def test_the_dominant_input_is_the_variance_fraction_of_the_mass(stars):
    # Kestrel-4's impulse on the Sun: log10 dv = log10(2G) + log10 M - log10 d - log10 v, with M independent of
    # the astrometry, so the mass's Shapley share is its variance fraction (Iooss & Prieur 2019, from memory):
    # (sigma_M / (M ln 10))^2 over that plus Var(log10(d v)), the latter from the draws (straight-line reference)
    a = stars[0]
    parsed = _Text()
    parsed.feed(_page(a))
    assert parsed.parts[("sun_impulse", "share", "input")] == "star mass"
    shown = float(parsed.parts[("sun_impulse", "share", "share")].rstrip("%")) / 100
    _, d, v = lma(a.monte_carlo.samples.values).T
    mass_part = (0.04 / (0.68 * np.log(10))) ** 2  # the star file's mass 0.68 +- 0.04 M_sun
    expect = mass_part / (mass_part + np.var(np.log10(d * v)))
    # tolerance: the linear budget against Monte Carlo variances of 4,000 draws (relative error sqrt(2/n) = 2 %
    # of the astrometric part, about 0.4 point of the share) and the last digit shown (common practice, no source)
    assert shown == pytest.approx(expect, abs=0.012)
    assert shown > 0.5  # "mass 84 %": the mass dominates the Sun's impulse of this star


def test_the_page_says_why_a_quantity_is_missing(stars):
    a = stars[2]  # no mass, no magnitude
    parsed = _Text()
    parsed.feed(_page(a))
    section = parsed.by_id["encounter"]
    for why in a.encounter.missing:
        assert why in section
    assert ("sun_impulse", "68", "value") not in parsed.parts and ("peak_proper_motion", "68", "value") in parsed.parts
    assert section.count(SHOWER) == 1
    bare = _page(dataclasses.replace(a, encounter=None))
    assert "Not computed for this analysis." in bare and SHOWER not in html.unescape(bare)


def test_the_same_seed_gives_the_same_section(stars):
    # reproducibility (common practice, no source): a fresh analysis of the same star and seed, the same bytes
    again = run(read_star_file(demo_path("kestrel-4.toml")), 1)
    assert _page(again) == _page(stars[0])


def test_in_a_browser_the_section_fits_and_a_script_in_the_name_is_text(stars, tmp_path):
    a = dataclasses.replace(stars[0], star=dataclasses.replace(stars[0].star, name=XSS))
    path = tmp_path / "xss.html"
    path.write_text(_page(a), encoding="utf-8")
    with launched() as browser:
        tab = browser.new_page(viewport={"width": 800, "height": 900})
        dialogs, errors = [], []
        tab.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
        tab.on("pageerror", lambda e: errors.append(str(e)))
        tab.goto(path.as_uri(), wait_until="load")
        tab.wait_for_timeout(100)  # room for a script to run, were there one
        assert tab.inner_text("#star-name") == XSS
        assert tab.evaluate("document.scripts.length") == 0 and dialogs == [] and errors == []
        body = tab.inner_text("body")
        assert body.count(SHOWER) == 1 and body.count(HAZARD) == 1
        s = a.encounter.summaries["sun_impulse"]
        r = round_interval(s.median, s.median - s.quantile(0.16), s.quantile(0.84) - s.median)
        cell = 'tr[data-encounter="sun_impulse"] td[data-cell="68"]'
        assert tab.inner_text(f'{cell} [data-part="value"]') == r.value
        assert tab.inner_text(f'{cell} [data-part="plus"]') == r.plus
        for width in (800, 1280):  # no horizontal scroll of the page; the section's table fits its box
            tab.set_viewport_size({"width": width, "height": 900})
            scroll, inner = tab.evaluate("[document.documentElement.scrollWidth, window.innerWidth]")
            assert scroll <= inner == width
            box = tab.evaluate("(e => [e.scrollWidth, e.clientWidth])"
                               "(document.querySelector('#encounter .scroll'))")
            assert box[0] <= box[1], width
