"""The one-page report (perierr.report.html): a self-contained page that loads cleanly in a real browser.

References: Chromium driven by playwright's Python API (the browser is the judge of loading, layout, images and
script execution: its console, failed requests, dialog events, DOM measurements and screenshots); the Particle
Data Group rounding rule (Review of Particle Physics, Phys. Rev. D 98, 030001 (2018), Introduction, section 5.3)
as implemented by perierr.report.rounding.round_interval, and numpy's quantiles with astropy's au per pc for the
values themselves; Python's html.parser for how a browser decodes escaped text (the HTML5 specification's
character references); the PDF signature "%PDF-" (the PDF specification, ISO 32000-1, 7.5.2; from memory).
Stars are invented (the demo's Kestrel-4).
"""

import dataclasses
import html
import io
import warnings
from html.parser import HTMLParser

import astropy.units as u
import matplotlib.image as mpimg
import numpy as np
import pytest
from browser import launched
from hypothesis import given, settings
from hypothesis import strategies as st

from perierr import analyze
from perierr.cautions import HAZARD, messages
from perierr.demo import demo_path
from perierr.errors import InputError, PerierrError, PerierrWarning
from perierr.plan import plan
from perierr.plan.curves import WIDTH90_DISTANCE
from perierr.plan.goals import decide_goal
from perierr.report import html as page_module
from perierr.report.figures import budget_figure
from perierr.report.html import FIGURES, html_report, pdf_report, write_page
from perierr.report.rounding import round_interval
from perierr.star import read_star_file

AU_PER_PC = (1 * u.pc).to_value(u.au)  # astropy
XSS = "<script>alert(1)</script> & \"Kestrel\" 'x'"


def _analysis(seed=1, n=4000):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return analyze(read_star_file(demo_path("kestrel-4.toml")), model="straight_line", n_samples=n, seed=seed,
                       compare=False)  # fmt: skip


@pytest.fixture(scope="module")
def analysis():
    return _analysis()


@pytest.fixture(scope="module")
def page(analysis, tmp_path_factory):
    """The page as a string and as a file."""
    path = tmp_path_factory.mktemp("page") / "kestrel-4.html"
    text = html_report(analysis, path)
    return text, path


@pytest.fixture(scope="module")
def planned(analysis, tmp_path_factory):
    """A small plan of the same star (what-if, one goal, gain curves, a Monte Carlo budget) and its page."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        p = plan(analysis.star, model="straight_line", measure={"radial_velocity": 0.1},
                 goals=[decide_goal("20000 au")], n=2000, n_whatif=2000, seed=1, n_points=5,
                 budget_options={"n_outer": 200, "width": False, "n_boot": 50})  # fmt: skip
    path = tmp_path_factory.mktemp("plan") / "plan.html"
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(page_module, "FIGURES", ())  # the plan's sections only
        text = html_report(analysis, path, plan=p)
    return p, text, path


@pytest.fixture(scope="module")
def browser():
    with launched() as b:
        yield b


def _open(browser, path, width=1280):
    """A page at ``path`` (file://) with its console errors, page errors, failed requests and dialogs recorded."""
    tab = browser.new_page(viewport={"width": width, "height": 900})
    seen = {"console": [], "pageerror": [], "requestfailed": [], "dialog": []}
    tab.on("console", lambda m: seen["console"].append(m.text) if m.type == "error" else None)
    tab.on("pageerror", lambda e: seen["pageerror"].append(str(e)))
    tab.on("requestfailed", lambda r: seen["requestfailed"].append(r.url))

    def dialog(d):
        seen["dialog"].append(d.message)
        d.dismiss()

    tab.on("dialog", dialog)
    tab.goto(path.as_uri(), wait_until="load")
    return tab, seen


# ------------------------------------------------------------------------------------------------ no browser


def test_the_file_is_the_string_and_nothing_else_is_left(page):
    text, path = page
    assert path.read_text(encoding="utf-8") == text
    assert [p.name for p in path.parent.iterdir()] == [path.name]  # the temporary file was renamed, not left
    assert text.startswith("<!DOCTYPE html>")  # HTML5 doctype (HTML Living Standard, 13.1.1)
    # self-contained: nothing fetched from elsewhere (no http(s) URL, no external stylesheet or script)
    assert "http://" not in text and "https://" not in text
    assert "<link" not in text and "<script" not in text
    assert text.count("data:image/png;base64,") == len(FIGURES)


def test_a_wrong_name_is_refused_before_any_work(analysis, tmp_path, monkeypatch):
    def no_work(*args, **kwargs):
        raise AssertionError("the page was built before the file name was checked")

    monkeypatch.setattr(page_module, "_page", no_work)
    with pytest.raises(InputError, match="html"):
        html_report(analysis, tmp_path / "report.txt")
    with pytest.raises(InputError, match="pdf"):
        pdf_report(analysis, tmp_path / "report.html")
    with pytest.raises(InputError, match="does not exist"):
        html_report(analysis, tmp_path / "missing" / "report.html")
    with pytest.raises(InputError, match="page"):
        write_page(analysis, tmp_path / "report.png")
    assert list(tmp_path.iterdir()) == []


def test_without_a_browser_the_pdf_is_refused_and_points_to_the_html(analysis, tmp_path, monkeypatch):
    monkeypatch.setattr(page_module.shutil, "which", lambda name: None)
    monkeypatch.setattr(page_module, "_page", lambda *a, **k: pytest.fail("built a page it could not print"))
    with pytest.raises(PerierrError, match="Chromium") as err:
        pdf_report(analysis, tmp_path / "report.pdf")
    assert "HTML" in str(err.value)
    assert list(tmp_path.iterdir()) == []


def test_the_same_seed_gives_the_same_bytes(page):
    # reproducibility (common practice, no source): nothing on the page depends on the clock or the machine
    again = html_report(_analysis(seed=1))
    assert again == page[0]
    assert html_report(_analysis(seed=2)) != page[0]  # and the page does depend on the draws


#: The rendered text of the page's marked numbers, keyed by the selectors the test looks them up with.
_TEXTS = """() => {
  const out = {};
  const put = (sel, el) => { out[sel] = el.innerText.trim(); };
  for (const row of document.querySelectorAll('tr[data-output]')) {
    for (const cell of row.querySelectorAll('td[data-cell]')) {
      const base = `tr[data-output="${row.dataset.output}"] td[data-cell="${cell.dataset.cell}"]`;
      for (const p of cell.querySelectorAll('[data-part]')) put(`${base} [data-part="${p.dataset.part}"]`, p);
    }
  }
  for (const row of document.querySelectorAll('tr[data-threshold]')) {
    put(`tr[data-threshold="${row.dataset.threshold}"] td[data-cell="probability"]`,
        row.querySelector('td[data-cell="probability"]'));
  }
  put('#seed', document.querySelector('#seed'));
  return out;
}"""


def test_the_plan_summary_names_the_best_measurement(planned, analysis):
    p, text, _ = planned
    # what-if: the planner's own sentence
    assert text.count(html.escape(p.what_if.headline()[1:], quote=True)) == 1
    # one row per (goal, input) of the plan
    assert text.count("data-goal-input=") == len(p.required)
    # the easiest route to the goal: the reachable input whose required error is the largest multiple of
    # today's (common practice, no source: the smallest improvement that settles the question)
    ok = [r for r in p.required if r.status == "reachable"]
    easiest = max(ok, key=lambda r: r.precision / r.current_sigma)
    assert f"the easiest route is {easiest.input}, measured to {easiest.precision:.3g} {easiest.unit}" in text
    # the best single measurement along the gain curves: the narrowest 90 % width of d_ph at the finest precision
    c = p.curves
    best = min(c.inputs, key=lambda name: c.curves[name][WIDTH90_DISTANCE][-1])
    assert f"Best single measurement for d_ph: <strong>{best}</strong>" in text
    # the plan's Monte Carlo budget sits beside the linear shares; the budget line gives way to the plan
    assert "Monte Carlo Var(d_ph)" in text and 'id="dominates"' not in text
    # every caution once; a plan caution of a check the analysis already reported (the same code and subject,
    # judged again on the plan's draws) gives way to the analysis's
    kinds = {(c.code, c.subject) for c in analysis.all_cautions}
    shown = tuple(analysis.all_cautions) + tuple(c for c in p.cautions if (c.code, c.subject) not in kinds)
    for message in messages(shown):
        assert text.count(html.escape(message, quote=True)) == 1
    assert text.count(html.escape(HAZARD, quote=True)) == 1


def test_without_a_linearization_the_page_says_so(analysis):
    # as for a non-positive nominal parallax under a distance prior: no linear answer and no linear budget
    bare = dataclasses.replace(analysis, linear=None, budget=None)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(page_module, "FIGURES", (("Error budget", "bars", budget_figure),))
        text = html_report(bare)
    assert text.count('data-cell="linear">—</td>') == 4  # t_ph, d_ph [pc], d_ph [au], v_ph
    assert "No linear budget" in text and "Error budget: not drawn (" in text
    assert 'id="dominates"' not in text and "<img" not in text
    assert text.count(html.escape(HAZARD, quote=True)) == 1


class _Text(HTMLParser):
    """The text a browser shows for each element id (character references decoded, as the HTML5 spec says)."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.by_id, self._stack, self.scripts = {}, [], 0

    VOID = {"meta", "br", "img", "hr", "input", "link"}  # elements without an end tag (HTML5, 13.1.2)

    def handle_starttag(self, tag, attrs):
        self.scripts += tag == "script"
        if tag in self.VOID:
            return
        self._stack.append(dict(attrs).get("id"))
        if self._stack[-1]:
            self.by_id[self._stack[-1]] = ""

    def handle_endtag(self, tag):
        self._stack.pop()

    def handle_data(self, data):
        for key in filter(None, self._stack):
            self.by_id[key] += data


@settings(max_examples=60, deadline=None, derandomize=True)
@given(name=st.text(alphabet=st.characters(blacklist_categories=("Cs", "Cc")), min_size=1, max_size=40))
def test_any_name_reads_back_as_text(analysis, name):
    # the page without its figures (they only draw the name into pixels): fast enough for many names
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(page_module, "FIGURES", ())
        text = html_report(dataclasses.replace(analysis, star=dataclasses.replace(analysis.star, name=name)))
    parsed = _Text()
    parsed.feed(text)
    assert parsed.scripts == 0
    assert parsed.by_id["star-name"] == name
    assert parsed.by_id["title"] == f"{name}: closest approach to the Sun"


# ------------------------------------------------------------------------------------------------ in a browser


def test_the_page_loads_cleanly_and_fits_800_and_1280_pixels(browser, page, planned):
    tab, seen = _open(browser, page[1], width=800)
    try:
        images = tab.evaluate("Array.from(document.images).map(i => [i.complete, i.naturalWidth, i.naturalHeight])")
        assert len(images) == len(FIGURES)
        assert all(done and w > 0 and h > 0 for done, w, h in images)
        for width in (800, 1280):
            tab.set_viewport_size({"width": width, "height": 900})
            scroll, inner = tab.evaluate("[document.documentElement.scrollWidth, window.innerWidth]")
            assert inner == width and scroll <= inner
        # the screenshot shows something: many colours, and a good part of the pixels not white (the figures,
        # the text and the table rules); thresholds are generous (common practice, no source)
        tab.set_viewport_size({"width": 800, "height": 900})
        tab.evaluate("document.querySelector('#budget').scrollIntoView()")  # the budget table and a figure
        shot = mpimg.imread(io.BytesIO(tab.screenshot()), format="png")[..., :3]
        assert shot.shape[:2] == (900, 800)
        not_white = np.mean(np.any(shot < 0.95, axis=-1))
        rgb = (shot * 255).round().astype(np.int64)
        colours = np.unique(rgb[..., 0] * 65536 + rgb[..., 1] * 256 + rgb[..., 2]).size
        assert not_white > 0.03 and colours > 50
        # print: black headings and no scroll boxes (everything on paper)
        tab.emulate_media(media="print")
        assert tab.evaluate("getComputedStyle(document.querySelector('h2')).color") == "rgb(0, 0, 0)"
        assert tab.evaluate("getComputedStyle(document.querySelector('.scroll')).overflowX") == "visible"
    finally:
        tab.close()
    assert seen == {"console": [], "pageerror": [], "requestfailed": [], "dialog": []}
    # the plan's page (wide goal tables) fits too
    tab, seen = _open(browser, planned[2], width=800)
    try:
        assert tab.evaluate("document.documentElement.scrollWidth <= window.innerWidth")
    finally:
        tab.close()
    assert seen == {"console": [], "pageerror": [], "requestfailed": [], "dialog": []}


def test_the_numbers_on_the_page_are_the_rounded_summaries(browser, page, analysis):
    tab, _ = _open(browser, page[1])
    mc = analysis.monte_carlo
    try:
        texts = tab.evaluate(_TEXTS)  # every marked text of the page, in one trip

        def part(selector):
            return texts[selector]

        rows = (("time_myr", "time_myr", 1.0), ("distance_pc", "distance_pc", 1.0),
                ("distance_au", "distance_pc", AU_PER_PC), ("speed_kms", "speed_kms", 1.0))
        for key, q, scale in rows:
            s = mc.summaries[q]
            med = s.median * scale
            for level, (lo, hi) in (("68", (0.16, 0.84)), ("90", (0.05, 0.95))):
                r = round_interval(med, med - s.quantile(lo) * scale, s.quantile(hi) * scale - med)
                cell = f'tr[data-output="{key}"] td[data-cell="{level}"]'
                assert part(f'{cell} [data-part="value"]') == r.value
                assert part(f'{cell} [data-part="plus"]') == r.plus
                assert part(f'{cell} [data-part="minus"]') == r.minus
            k = ("time_myr", "distance_pc", "speed_kms").index(q)
            r = round_interval(analysis.linear.value[k] * scale, analysis.linear.sigma[k] * scale)
            assert part(f'tr[data-output="{key}"] td[data-cell="linear"] [data-part="value"]') == r.value
            assert part(f'tr[data-output="{key}"] td[data-cell="linear"] [data-part="sigma"]') == r.plus
        # the value itself against numpy: the median of the draws' d_ph in au (astropy's au per pc), within
        # half the last digit shown
        s = mc.summaries["distance_pc"]
        shown = float(part('tr[data-output="distance_au"] td[data-cell="68"] [data-part="value"]'))
        place = round_interval(s.median * AU_PER_PC, (s.median - s.quantile(0.16)) * AU_PER_PC,
                               (s.quantile(0.84) - s.median) * AU_PER_PC).place
        d_au = np.median(np.asarray(mc.perihelion.distance_pc)[mc.valid]) * AU_PER_PC
        assert shown == pytest.approx(d_au, abs=0.5 * 10.0**place * (1 + 1e-9))
        # thresholds: the text report's forms (a 95 % bound when no or every draw passed)
        for t in mc.thresholds:
            cell = part(f'tr[data-threshold="{t.label}"] td[data-cell="probability"]')
            if t.count == mc.n:
                assert cell.startswith(f"> {t.lower95:.4%}") and "every draw passed" in cell
            elif t.count == 0:
                assert cell.startswith(f"< {t.upper95:.4%}") and "no draw passed" in cell
            else:
                r = round_interval(100 * t.probability, 100 * t.se)
                assert cell == f"{r.value}% ± {r.plus}%"
        assert any(0 < t.count < mc.n for t in mc.thresholds)  # the demo star: at least one open question
        assert part("#seed") == str(mc.samples.seed)
    finally:
        tab.close()


def test_the_hazard_and_every_caution_show_once(browser, page, analysis):
    assert analysis.all_cautions  # 4,000 draws: at least the Monte Carlo error caution
    tab, _ = _open(browser, page[1])
    try:
        body = tab.inner_text("body")
        assert body.count(HAZARD) == 1
        for message in messages(analysis.all_cautions):
            assert body.count(message) == 1
        assert tab.locator("ul.cautions li").count() == len(messages(analysis.all_cautions))
        # without a plan, the line on what dominates the error names the linear budget's largest share
        assert analysis.budget.dominant("distance_pc") in tab.inner_text("#dominates")
    finally:
        tab.close()


def test_a_script_in_the_name_shows_as_text_and_never_runs(browser, analysis, tmp_path):
    star = dataclasses.replace(analysis.star, name=XSS)
    path = tmp_path / "xss.html"
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(page_module, "FIGURES", FIGURES[:1])
        html_report(dataclasses.replace(analysis, star=star), path)
    tab, seen = _open(browser, path)
    try:
        tab.wait_for_timeout(100)  # room for a script to run, were there one
        assert tab.inner_text("#star-name") == XSS
        assert tab.title() == f"{XSS}: closest approach to the Sun"
        assert tab.evaluate("document.scripts.length") == 0
    finally:
        tab.close()
    assert seen["dialog"] == [] and seen["pageerror"] == []


@pytest.mark.slow
def test_the_pdf_is_printed(browser, analysis, tmp_path):
    path = pdf_report(analysis, tmp_path / "kestrel-4.pdf")
    data = path.read_bytes()
    assert data[:5] == b"%PDF-"  # ISO 32000-1, 7.5.2 (from memory)
    assert len(data) > 5_000
    assert [p.name for p in tmp_path.iterdir()] == ["kestrel-4.pdf"]


def test_a_check_judged_twice_shows_once():
    # the analysis and the plan both compare the straight line with the orbit model (the demo star: the tide
    # matters), each on its own draws, so their two model-difference messages differ in their numbers: the page
    # shows the analysis's alone
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        a = analyze(read_star_file(demo_path("kestrel-4.toml")), model="straight_line", n_samples=3000, seed=4)
        p = plan(a.star, model="straight_line", measure={"radial_velocity": 0.3}, curves=False, budget=False,
                 n_whatif=3000, seed=5)  # fmt: skip
    codes = [c.code for c in a.all_cautions]
    twice = [c for c in p.cautions if c.code in codes and c.message not in messages(a.all_cautions)]
    assert twice  # the premise: the same check, other numbers
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(page_module, "FIGURES", ())
        text = html_report(a, plan=p)
    for c in twice:
        assert text.count(f'data-caution="{c.code}"') == codes.count(c.code)
        assert html.escape(c.message, quote=True) not in text
