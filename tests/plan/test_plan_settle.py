"""The plan's chance that the new data settle the question: the planner, its JSON, its report and its command."""

import contextlib
import io
import json
import warnings

import pytest

from perierr import ObservedStar
from perierr.cli import main
from perierr.demo import demo_path
from perierr.errors import PerierrWarning
from perierr.plan import decide_goal, plan, preposterior
from perierr.report.plan_text import format_plan
from perierr.report.rounding import round_interval
from perierr.star import read_star_file

DEMO = str(demo_path("kestrel-4.toml"))


def _plan(**kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        options = dict(model="straight_line", curves=False, budget=False, n=1000, n_whatif=1000, seed=3, futures=120,
                       future_draws=800)
        return plan(read_star_file(DEMO), **{**options, **kw})


def test_the_plan_carries_the_preposterior_of_its_measurements():
    p = _plan(measure={"radial_velocity": 0.3}, goals=[decide_goal("20000 au")])
    (pp,) = p.settle
    # the reference: the preposterior module called directly with the same star, model, goal, draws and seed
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        direct = preposterior(read_star_file(DEMO), "straight_line", {"radial_velocity": 0.3},
                              goal=decide_goal("20000 au"), n_future=120, n_inner=800, seed=3)  # fmt: skip
    assert pp.p_settle == direct.p_settle and pp.p_settle_se == direct.p_settle_se
    doc = p.to_dict()
    assert doc["settle"][0]["goal"]["threshold"] == "20000 au"
    # the report gives it to the place its binomial error allows (PDG rounding)
    r = round_interval(100 * pp.p_settle, 100 * pp.p_settle_se)
    assert f"settled in {r.value} % ± {r.plus} % of the possible outcomes" in format_plan(p)


def test_without_a_decisive_goal_the_curves_threshold_is_the_question():
    p = _plan(measure={"pmdec": 0.01}, curve_threshold="1 pc")
    assert [pp.goal.threshold for pp in p.settle] == ["1 pc"]
    assert _plan(measure={"pmdec": 0.01}, futures=0).settle == ()
    assert _plan(goals=[decide_goal("1 pc")]).settle == ()  # nothing to measure, nothing to settle


def _cli(argv):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err):
        status = main(argv, out=out)
    return status, out.getvalue(), err.getvalue()


def test_the_plan_command_settles_and_takes_the_runs_prior_options(tmp_path):
    path = tmp_path / "plan.json"
    base = ["plan", DEMO, "--model", "straight_line", "--seed", "3", "--quiet", "--no-budget", "--no-curves",
            "--samples", "1000", "--whatif-samples", "1000", "--futures", "120", "--future-draws", "800"]  # fmt: skip
    status, out, err = _cli(base + ["--measure", "radial_velocity=0.3", "--goal-decide", "20000au", "--json",
                                    str(path)])  # fmt: skip
    assert status == 0, err
    doc = json.loads(path.read_text())
    p = doc["settle"][0]["outcomes"][0]["p_settle"]
    assert "Will the new data settle it?" in out and 0.0 < p < 1.0
    # a weak parallax (invented: 3.0 +- 0.9 mas) under a distance prior, planned end to end from the command line
    weak = tmp_path / "weak.toml"
    weak.write_text('name = "weak (invented)"\nra = 45.0\ndec = 20.0\nparallax = 3.0\nparallax_error = 0.9\n'
                    "pmra = 40.0\npmra_error = 0.1\npmdec = -30.0\npmdec_error = 0.1\nradial_velocity = -60.0\n"
                    "radial_velocity_error = 1.0\n", encoding="utf-8")  # fmt: skip
    status, out, err = _cli(["plan", str(weak), "--model", "straight_line", "--seed", "3", "--quiet", "--no-budget",
                             "--samples", "1000", "--whatif-samples", "1000", "--points", "3", "--futures", "50",
                             "--future-draws", "500", "--distance-prior", "edsd:L=1350pc", "--measure",
                             "parallax=0.1", "--goal-decide", "1pc", "--json", str(path)])  # fmt: skip
    assert status == 0, err
    doc = json.loads(path.read_text())
    assert doc["prior"]["name"] == "edsd"
    assert doc["settle"] and doc["settle"][0]["goal"]["threshold"] == "1pc"


@pytest.mark.parametrize("futures", ["-1", "x"])
def test_bad_futures_are_refused(futures):
    # a usage error: argparse's exit status 2 with the option named, before any work
    err = io.StringIO()
    with contextlib.redirect_stderr(err), pytest.raises(SystemExit) as exc:
        main(["plan", DEMO, "--measure", "rv=0.3", "--futures", futures, "--no-budget", "--no-curves"])
    assert exc.value.code == 2 and "--futures" in err.getvalue()


def test_a_star_built_in_python_plans_too():
    # the API path with an ObservedStar made from values (invented) and a focusing model option
    star = ObservedStar.from_values(ra=45.0, dec=20.0, parallax=50.0, parallax_error=0.05, pmra=10.0, pmra_error=0.05,
                                    pmdec=5.0, pmdec_error=0.05, radial_velocity=-30.0, radial_velocity_error=0.5,
                                    mass=0.5, mass_error=0.05, name="built (invented)")  # fmt: skip
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        p = plan(star, model="straight_line", measure={"radial_velocity": 0.1}, curves=False, budget=False, n=500,
                 n_whatif=500, seed=1, focusing=True, futures=50, future_draws=300)  # fmt: skip
    assert len(p.settle) == 1 and 0.0 <= p.settle[0].p_settle <= 1.0


def test_refusals_come_before_any_work_and_leave_no_old_result(tmp_path):
    # every option that needs no star is refused before the work; an old result at an output path never survives a
    # failed run (README, "Outputs": it would read as today's), and nothing new is written
    old = tmp_path / "old.json"
    cases = [
        (["--measure", "rv=0.3", "--plot", str(tmp_path / "c.jpg")], "--plot"),
        (["--combine", "rv,pmdec"], "--combine"),
        (["--measure", "rv=0.3", "--cost", "photon"], "--cost"),
        (["--measure", "rv=0.3", "--futures", "5"], "--futures"),
        (["--measure", "rv=0.3", "--alpha", "0.7"], "--alpha"),
        (["--goal-width", "d_ph=1500 au", "--combine", "rv,nonsense"], "--combine"),
    ]
    for extra, option in cases:
        old.write_text("yesterday", encoding="utf-8")
        status, out, err = _cli(["plan", DEMO, "--json", str(old), "--no-budget", "--no-curves"] + extra)
        assert status == 2 and option in err and out == "", (extra, err)
        assert not old.exists(), extra
        assert list(tmp_path.iterdir()) == [], extra


def test_the_default_question_takes_alpha():
    p = _plan(measure={"pmdec": 0.01}, settle_alpha=0.01)
    assert p.settle[0].goal.alpha == 0.01


def test_few_effective_draws_under_a_prior_are_said():
    # an invented star with a parallax of 0.2 +- 0.3 mas under a short prior: a few of the Gaussian draws carry the
    # weight, and the settling chance says so instead of resting silently on them
    star = ObservedStar.from_values(ra=45.0, dec=20.0, parallax=0.2, parallax_error=0.3, pmra=5.0, pmra_error=0.05,
                                    pmdec=-3.0, pmdec_error=0.05, radial_velocity=-40.0, radial_velocity_error=1.0,
                                    name="faint (invented)")  # fmt: skip
    with pytest.warns(PerierrWarning, match="few effective draws"):
        preposterior(star, "straight_line", {"parallax": 0.02}, goal=decide_goal("2 pc"), n_future=40, n_inner=500,
                     seed=1, prior="edsd:L=50pc")  # fmt: skip


def test_a_zero_point_in_the_improved_global_budget_is_said_to_be_folded():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        p = plan(read_star_file(DEMO), model="straight_line", measure={"radial_velocity": 0.3}, curves=False,
                 n=500, n_whatif=500, seed=1, futures=0, parallax_offset="-0.02,0.03",
                 budget_options={"n_outer": 100, "width": False, "n_boot": 20})  # fmt: skip
    assert "budget-zero-point-folded" in [c.code for c in p.cautions]
