"""Measured together from the planner and its command: the cheapest combination for each goal."""

import contextlib
import io
import json
import warnings

import pytest

from perierr.cli import EXIT_INPUT, main
from perierr.demo import demo_path
from perierr.errors import InputError, PerierrWarning
from perierr.models import make_model
from perierr.plan import cheapest_combination, common_draws, parse_goal, plan
from perierr.plan.planner import relative_effort
from perierr.star import read_star_file
from perierr.units import errors_to_catalogue

DEMO = str(demo_path("kestrel-4.toml"))
GOAL = parse_goal("width90", "d_ph=1500 au")


def test_relative_effort_is_the_inverse_square_of_the_precision():
    # photon-limited time grows as 1/precision^2 (common practice, no source): today's precision costs one effort,
    # half of it four, and no precision at all cannot be bought
    star = read_star_file(DEMO)
    cost = relative_effort(star)
    today = dict(zip(("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity"),
                     errors_to_catalogue(star.sigma, star.mean[1])))  # fmt: skip
    assert cost("radial_velocity", today["radial_velocity"]) == pytest.approx(1.0, rel=1e-12)
    assert cost("pmdec", today["pmdec"] / 2) == pytest.approx(4.0, rel=1e-12)
    assert cost("pmdec", 0.0) == float("inf")


def test_the_plans_combination_is_the_joint_modules_on_the_same_draws():
    star = read_star_file(DEMO)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        p = plan(star, model="straight_line", goals=[GOAL], combine=["radial_velocity", "pmdec"], curves=False,
                 budget=False, n=3000, seed=4, futures=0)  # fmt: skip
        direct = cheapest_combination(star, make_model("straight_line"), GOAL, ["radial_velocity", "pmdec"],
                                      relative_effort(star), draws=common_draws(3000, 4))  # fmt: skip
    (j,) = p.joint
    assert j.status == direct.status == "reachable"
    assert [c.precision for c in j.choices] == [c.precision for c in direct.choices]
    assert j.hours == direct.hours
    assert p.to_dict()["joint"][0]["status"] == "reachable"


def test_combine_needs_a_goal_before_any_work():
    with pytest.raises(InputError, match="combine"):
        plan(read_star_file(DEMO), combine=["pmdec"], futures=0)


def _cli(argv):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err):
        status = main(argv, out=out)
    return status, out.getvalue(), err.getvalue()


def test_the_plan_command_combines_with_a_table_of_hours(tmp_path):
    # an invented instrument: a table of hours against precision for the two inputs (log-log interpolation between
    # rows); the star file has no magnitude and the table none either, so the hours are the table's
    table = tmp_path / "hours.csv"
    table.write_text("input,precision,hours\nradial_velocity,1.0,0.5\nradial_velocity,0.1,8.0\n"
                     "pmdec,0.03,2.0\npmdec,0.005,40.0\n", encoding="utf-8")  # fmt: skip
    path = tmp_path / "plan.json"
    base = ["plan", DEMO, "--model", "straight_line", "--seed", "4", "--quiet", "--no-budget", "--no-curves",
            "--samples", "3000", "--futures", "0"]  # fmt: skip
    status, out, err = _cli(base + ["--goal-width", "d_ph=1500 au", "--combine", "radial_velocity,pmdec",
                                    "--cost-table", str(table), "--json", str(path)])  # fmt: skip
    assert status == 0, err
    assert "Measured together" in out
    doc = json.loads(path.read_text())
    (j,) = doc["joint"]
    assert j["status"] == "reachable" and j["hours"] > 0
    status, out, err = _cli(base + ["--combine", "pmdec"])
    assert status == EXIT_INPUT and "--combine" in err and out == ""
