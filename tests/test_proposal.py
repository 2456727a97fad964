"""The proposal's paragraph and figure: today's answer and what a measurement buys, with the plan's own numbers."""

import contextlib
import io
import warnings

import numpy as np
import pytest

from perierr import ObservedStar
from perierr.cautions import HAZARD
from perierr.cli import EXIT_INPUT, main
from perierr.demo import demo_path
from perierr.errors import InputError, PerierrWarning
from perierr.plan import decide_goal, plan
from perierr.report.proposal import proposal_figure, proposal_paragraph, write_proposal
from perierr.report.rounding import round_interval
from perierr.star import read_star_file
from perierr.units import AU_PER_PC

DEMO = str(demo_path("kestrel-4.toml"))


def _plan(star, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        options = dict(model="straight_line", curves=False, budget=False, n=1000, n_whatif=4000, seed=2,
                       futures=100, future_draws=600)  # fmt: skip
        return plan(star, **{**options, **kw})


@pytest.fixture(scope="module")
def planned():
    return _plan(read_star_file(DEMO), measure={"pmdec": 0.01}, goals=[decide_goal("20000 au")])


def test_the_paragraph_quotes_the_plans_numbers(planned):
    text = proposal_paragraph(planned)
    w = planned.what_if
    s = w.mc_current.summaries
    # the medians with their 16-84 % intervals, rounded by the Particle Data Group rule (the module's rounding is
    # checked against the rule's own cases in test_rounding.py)
    v = s["speed_kms"]
    r = round_interval(v.median, v.median - v.quantile(0.16), v.quantile(0.84) - v.median)
    assert f"v_ph = {r.value} ± {r.plus} km/s" in text or f"v_ph = {r.value} (+{r.plus}/−{r.minus}) km/s" in text
    # the 90 % widths before and after, in au (the what-if's own summaries; astropy's au per pc)
    a = (s["distance_pc"].quantile(0.95) - s["distance_pc"].quantile(0.05)) * AU_PER_PC
    b = w.mc_improved.summaries["distance_pc"]
    b = (b.quantile(0.95) - b.quantile(0.05)) * AU_PER_PC
    assert f"from {a:,.0f} au to {b:,.0f} au ({1 - b / a:.0%})" in text
    # the input that dominates, in words, with its share; the chance to settle with its binomial error
    dom = w.budget_current.dominant("distance_pc")
    assert dom == "pmdec" and "dominated by its proper motion in declination" in text
    o = planned.settle[0].outcomes[0]
    r = round_interval(100 * o.p_settle, 100 * o.p_settle_se)
    assert f"in {r.value} ± {r.plus} % of the possible outcomes" in text
    assert text.count(HAZARD) == 1 and text.endswith(HAZARD)


def test_a_receding_star_is_said_to_be_in_the_past():
    star = ObservedStar.from_values(ra=45.0, dec=20.0, parallax=40.0, parallax_error=0.03, pmra=30.0, pmra_error=0.05,
                                    pmdec=-20.0, pmdec_error=0.05, radial_velocity=35.0, radial_velocity_error=0.8,
                                    name="receding (invented)")  # fmt: skip
    p = _plan(star, measure={"radial_velocity": 0.2}, futures=0)
    assert p.what_if.mc_current.summaries["time_myr"].median < 0
    text = proposal_paragraph(p)
    assert "Myr (negative: in the past)" in text and "settled" not in text


def test_the_figure_shows_today_and_after_on_the_same_draws(planned, tmp_path):
    fig = proposal_figure(planned, tmp_path / "p.png")
    assert (tmp_path / "p.png").stat().st_size > 10_000
    ax = fig.axes[0]
    today, after = ax.patches[:2]
    # each is a density of the whole distribution: its area equals the share of the draws inside the plotted range
    # (numpy's histogram of the what-if's own draws is the reference)
    for patch, mc in ((today, planned.what_if.mc_current), (after, planned.what_if.mc_improved)):
        values, edges = patch.get_data().values, patch.get_data().edges
        d = np.asarray(mc.perihelion.distance_pc)[mc.valid] * AU_PER_PC
        inside = np.mean((d >= edges[0]) & (d <= edges[-1]))
        assert np.sum(values * np.diff(edges)) == pytest.approx(inside, rel=1e-9)
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert labels[0] == "today" and labels[1].startswith("after pmdec to 0.01")


def test_a_plan_without_a_measurement_is_refused(tmp_path):
    p = _plan(read_star_file(DEMO), futures=0)
    calls = (lambda: proposal_paragraph(p), lambda: proposal_figure(p), lambda: write_proposal(p, tmp_path / "a.md"))
    for call in calls:
        with pytest.raises(InputError, match="measure"):
            call()
    with pytest.raises(InputError, match=".txt or .md"):
        write_proposal(_plan(read_star_file(DEMO), measure={"pmdec": 0.01}, futures=0), tmp_path / "a.docx")
    assert list(tmp_path.iterdir()) == []


def _cli(argv):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err):
        status = main(argv, out=out)
    return status, out.getvalue(), err.getvalue()


def test_the_plan_command_writes_the_paragraph_and_figure(tmp_path):
    base = ["plan", DEMO, "--model", "straight_line", "--seed", "2", "--quiet", "--no-budget", "--no-curves",
            "--samples", "1000", "--whatif-samples", "2000", "--futures", "60", "--future-draws", "500"]  # fmt: skip
    status, out, err = _cli(base + ["--measure", "pmdec=0.01", "--proposal", str(tmp_path / "k4.md"),
                                    "--proposal-figure", str(tmp_path / "k4.pdf")])  # fmt: skip
    assert status == 0, err
    assert (tmp_path / "k4.md").read_text(encoding="utf-8").startswith("Kestrel-4 (invented) is predicted")
    assert (tmp_path / "k4.pdf").read_bytes()[:5] == b"%PDF-"
    # refused before the work: no measurement, or a wrong suffix
    for extra, why in ((["--proposal", str(tmp_path / "x.md")], "--measure"),
                       (["--measure", "pmdec=0.01", "--proposal-figure", str(tmp_path / "x.svg")], ".png or .pdf")):
        status, out, err = _cli(base + extra)
        assert status == EXIT_INPUT and why in err and out == ""
    assert sorted(p.name for p in tmp_path.iterdir()) == ["k4.md", "k4.pdf"]


def test_a_wider_interval_is_said_to_widen(planned):
    # under a distance prior a sharper likelihood can move the posterior where it is wider: the paragraph must say
    # "widens" then (built here by swapping today and after of a real plan: the widths are the what-if's own)
    import dataclasses

    w = planned.what_if
    swapped = dataclasses.replace(planned, what_if=dataclasses.replace(w, mc_current=w.mc_improved,
                                                                       mc_improved=w.mc_current))
    text = proposal_paragraph(swapped)
    assert "widens the 90 % interval of d_ph" in text and "narrows" not in text
    assert "(-" not in text  # no negative percentage


def test_what_if_of_a_star_without_spread_says_there_is_nothing_to_narrow():
    from perierr.plan import make_measurement, what_if

    star = ObservedStar.from_values(ra=45.0, dec=20.0, ra_error=0.1, dec_error=0.1, parallax=48.0, parallax_error=0.0,
                                    pmra=0.01, pmra_error=0.0, pmdec=0.02, pmdec_error=0.0, radial_velocity=-250.0,
                                    radial_velocity_error=0.0, name="still (invented)")  # fmt: skip
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        w = what_if(star, "straight_line", [make_measurement("ra", 0.01, dec=20.0)], n=500, seed=1)
    assert "nothing to narrow" in w.headline()
