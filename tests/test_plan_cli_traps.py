"""Command-line traps of the planner and the run: each refused before the work, naming the option, or read as meant."""

import contextlib
import io
import json

import pytest

from perierr.cli import EXIT_INPUT, _attach_negative_values, main
from perierr.demo import demo_path

STAR = str(demo_path("kestrel-4.toml"))
PLAN = ["plan", STAR, "--model", "straight_line", "--seed", "1", "--quiet", "--no-budget", "--samples", "500",
        "--whatif-samples", "500", "--points", "3"]  # fmt: skip


def _run(argv):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err):
        status = main(argv, out=out)
    return status, out.getvalue(), err.getvalue()


@pytest.mark.parametrize(("extra", "option", "expected"), [
    (["--solve-for", "nonsense"], "--solve-for", "expected one of ra, dec"),
    (["--plot", "{tmp}/c.png", "--no-curves"], "--plot", "--no-curves turns off"),
    (["--plot", "{tmp}/c.jpg", "--json", "{tmp}/p.json"], "--plot", "ending in .png, .pdf or .svg"),
    (["--goal-width", "d_ph=300"], "target", "with its unit"),
])  # fmt: skip
def test_plan_refuses_before_the_work_naming_the_option(tmp_path, extra, option, expected):
    extra = [e.replace("{tmp}", str(tmp_path)) for e in extra]
    status, out, err = _run(PLAN + extra)
    assert status == EXIT_INPUT
    assert option in err and expected in err
    assert out == "" and list(tmp_path.iterdir()) == []  # nothing computed, nothing written (not even the JSON)


def test_the_help_asks_for_goal_units_as_the_command_does():
    # the help of --goal-width/--goal-sigma gives values with units, and the command refuses bare ones
    out = io.StringIO()
    with contextlib.redirect_stdout(out), pytest.raises(SystemExit):
        main(["plan", "--help"])
    text = " ".join(out.getvalue().split())
    for option in ("--goal-width", "--goal-sigma"):
        part = text[text.index(option + " OUTPUT=VALUE goal"):][:160]
        assert "bare numbers" not in part and "with its unit" in part


def test_the_probability_curve_follows_the_decisive_goal(tmp_path):
    # with --goal-decide 1pc and no --curve-within, the gain curves' probability is P(d_ph < 1pc)
    path = tmp_path / "plan.json"
    status, _, _ = _run(PLAN + ["--goal-decide", "1pc", "--json", str(path)])
    assert status == 0
    curves = json.loads(path.read_text())["gain_curves"]
    assert curves["threshold"] == "1pc"


@pytest.mark.parametrize(("argv", "want"), [
    (["run", "s.toml", "--parallax-offset", "-0.017,0.005"], ["run", "s.toml", "--parallax-offset=-0.017,0.005"]),
    (["run", "s.toml", "--horizon", "-20,10", "--seed", "3"], ["run", "s.toml", "--horizon=-20,10", "--seed", "3"]),
    (["run", "s.toml", "--parallax-offset", "-.02"], ["run", "s.toml", "--parallax-offset=-.02"]),
    (["run", "s.toml", "--quiet", "-1"], ["run", "s.toml", "--quiet", "-1"]),  # a flag takes no value
    (["run", "s.toml", "--seed", "3"], ["run", "s.toml", "--seed", "3"]),
    (["run", "s.toml", "--within=-1pc"], ["run", "s.toml", "--within=-1pc"]),
])  # fmt: skip
def test_a_negative_value_after_an_option_is_its_value(argv, want):
    assert _attach_negative_values(argv) == want


def test_a_negative_zero_point_with_its_error_runs_as_with_an_equals_sign():
    # argparse alone refuses "--parallax-offset -0.017,0.005" (the value looks like an option): both spellings give
    # the same report
    base = ["run", STAR, "--model", "straight_line", "--samples", "2000", "--seed", "4", "--quiet"]
    a = _run(base + ["--parallax-offset", "-0.017,0.005"])
    b = _run(base + ["--parallax-offset=-0.017,0.005"])
    assert a[0] == b[0] == 0 and a[1] == b[1]
    assert "zero-point" in a[1]
