"""`perierr plan`: JSON contract, text report, plot (perierr.cli, perierr.report.plan_*)."""

import io
import json

import numpy as np
import pytest

from perierr.cli import main
from perierr.demo import demo_path
from perierr.models import StraightLine, make_model
from perierr.plan import make_measurement, update_covariance, what_if
from perierr.star import read_star_file

DEMO = str(demo_path("kestrel-4.toml"))


def test_plan_command_what_if_json_side_by_side(tmp_path):
    path = tmp_path / "plan.json"
    out = io.StringIO()
    argv = ["plan", DEMO, "--measure", "radial_velocity=0.15", "--no-curves", "--no-budget",
            "--whatif-samples", "20000", "--seed", "3", "--json", str(path)]
    assert main(argv, out=out) == 0
    doc = json.loads(path.read_text())
    assert doc["kind"] == "plan" and doc["goals"] == [] and doc["gain_curves"] is None
    assert doc["model"]["name"] == "orbit"  # the default model of plan (issue 11)
    w = doc["what_if"]
    assert set(w["current"]) == set(w["improved"]) == {"inputs", "monte_carlo", "linearized", "budget"}
    # improved rv error: inverse-variance combination of 0.60 and 0.15 km/s (Taylor 1997, Sect. 7.2)
    combined = (1 / 0.6**2 + 1 / 0.15**2) ** -0.5
    assert w["improved"]["inputs"]["radial_velocity_error"] == pytest.approx(combined, rel=1e-12)
    # the JSON widths are q95 - q05 of the side-by-side summaries, same as the API on the same seed
    star = read_star_file(DEMO)
    api = what_if(star, make_model(), [make_measurement("radial_velocity", 0.15)], n=20000, seed=3)
    a, b = api.width90("distance_pc")
    mc = w["improved"]["monte_carlo"]["distance_pc"]
    assert mc["q95"] - mc["q05"] == pytest.approx(b, rel=1e-12)
    assert w["change"]["distance_au_width90"]["current"] == pytest.approx(a * 206264.80624709636, rel=1e-9)
    text = out.getvalue()
    assert "shrinks from" in text and "not impact hazards" in text


def test_plan_command_goal_form_reports_precision_or_floor(tmp_path):
    path = tmp_path / "goal.json"
    argv = ["plan", DEMO, "--goal-width", "d_ph=1700 au", "--goal-sigma", "d_ph=1e-4 pc",
            "--solve-for", "radial_velocity", "--no-curves", "--no-budget", "--samples", "5000",
            "--seed", "1", "--json", str(path), "--model", "straight_line"]  # fed back below on straight lines
    assert main(argv, out=io.StringIO()) == 0
    goals = json.loads(path.read_text())["goals"]
    reach, floor = goals
    assert reach["status"] == "reachable"
    # feed the required precision back through the same draws: the goal holds (to rounding)
    star = read_star_file(DEMO)
    from perierr.plan import common_draws, scenario_metrics

    draws = common_draws(5000, seed=1)
    cov = update_covariance(star.cov, 5, reach["required_precision"])
    w = scenario_metrics(star, StraightLine(), cov[None], draws).values["distance_pc.width90"][0]
    assert w <= reach["goal"]["target"] * (1 + 1e-9)
    assert floor["status"] == "unreachable" and floor["required_precision"] is None
    assert floor["floor_value"] > 1e-4 and "floor" in floor["message"]


@pytest.mark.slow  # about a second or more: left out of mutation runs (DEVELOPERS.md)
def test_plan_command_full_with_plot(tmp_path):
    png = tmp_path / "curves.png"
    out = io.StringIO()
    path = tmp_path / "full.json"
    argv = ["plan", DEMO, "--points", "4", "--samples", "2000", "--whatif-samples", "2000", "--seed", "2",
            "--measure", "rv=0.1", "--plot", str(png), "--json", str(path)]
    assert main(argv, out=out) == 0
    assert png.stat().st_size > 10_000
    text = out.getvalue()
    assert "Global budget" in text and "groups (by_kind)" in text
    doc = json.loads(path.read_text())
    before = doc["global_budget"]["variance"]["distance_pc"]["radial_velocity"]["share"]
    after = doc["global_budget_improved"]["variance"]["distance_pc"]["radial_velocity"]["share"]
    # rv variance 0.6^2 -> (1/0.6^2 + 1/0.1^2)^-1 is 37x smaller (inverse-variance combination), so its share drops
    assert after < before / 5
    assert len(doc["gain_curves"]["inputs"]["radial_velocity"]["precision"]) == 4
    from PIL import Image

    with Image.open(png) as im:
        # one column of 2.6 inches per input (six here) and 0.8 inch of margin, 5.6 inches tall, at 130 dpi
        # (matplotlib savefig; PIL reads the size back)
        assert im.size == (round((2.6 * 6 + 0.8) * 130), round(5.6 * 130))


def test_plan_command_errors(capsys):
    assert main(["plan", DEMO, "--measure", "radial_velocity:0.1"]) == 2
    assert "INPUT=PRECISION" in capsys.readouterr().err
    assert main(["plan", DEMO, "--goal-decide", "1 pc", "--alpha", "0.9", "--no-curves", "--no-budget"]) == 2
    assert "between 0 and 0.5" in capsys.readouterr().err
    assert main(["plan", DEMO, "--goal-width", "x_ph=3", "--no-curves", "--no-budget"]) == 2
    assert "expected one of" in capsys.readouterr().err


def test_plot_without_matplotlib_says_what_to_install(monkeypatch):
    import builtins

    from perierr.plan import gain_curves
    from perierr.report.plan_plot import plot_gain_curves

    star = read_star_file(DEMO)
    c = gain_curves(star, StraightLine(), n=500, seed=1, n_points=3, inputs=["radial_velocity"])
    real = builtins.__import__

    def fake(name, *args, **kwargs):
        if name.startswith("matplotlib"):
            raise ImportError(name)
        return real(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", fake)
    with pytest.raises(ImportError, match=r"matplotlib, a dependency of perierr: reinstall perierr"):
        plot_gain_curves(c)
    assert np.all(np.diff(c.precision["radial_velocity"]) < 0)
