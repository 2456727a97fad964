"""The orbit model's diagnostics in the text report: in words, with what they mean and what to do.

A perihelion outside the search window, a map error above the tolerance and direct integrations are each
explained in the report's model lines (never a bare number), and the JSON keeps the numbers
(``monte_carlo.model_info``). The counts a sentence states are compared with the diagnostics record and,
where it can be, with a count made here: the straight-line times (Matthews 1994, QJRAS 35, 1, with astropy's
constants) of draws that must lie outside a window ending 0.5 Myr before them.
"""

import io
import json
import warnings

import astropy.units as u
import numpy as np
import pytest

from perierr import ObservedStar, analyze
from perierr.cli import main
from perierr.demo import demo_path
from perierr.errors import PerierrWarning
from perierr.models import make_model
from perierr.report import format_analysis

K_KMS = (1.0 * u.au / u.yr).to_value(u.km / u.s)  # astropy: 1 au/yr in km/s
C_MYR = (1.0 * u.pc / (u.km / u.s)).to_value(u.Myr)  # astropy: Myr per pc/(km/s)
DEMO = str(demo_path("kestrel-4.toml"))


def star():
    """Invented: a well-measured star passing 0.1 pc from the Sun in 0.65 Myr (the demo's Kestrel-4)."""
    return ObservedStar.from_values(
        name="invented Kite-5", ra=201.37, dec=-27.62, parallax=48.0, parallax_error=0.03, pmra=0.71,
        pmra_error=0.035, pmdec=-1.2, pmdec_error=0.03, radial_velocity=-31.2, radial_velocity_error=0.6,
    )  # fmt: skip


def run(model, n=600):
    # 600 draws: enough for a leaf map of their own (fewer are integrated directly)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return analyze(star(), model=model, n_samples=n, seed=3)


def model_lines(text):
    """The report's lines from the model line to the Monte Carlo line."""
    lines = text.splitlines()
    first = next(i for i, line in enumerate(lines) if line.startswith("  model: orbit"))
    last = next(i for i, line in enumerate(lines) if line.startswith("  Monte Carlo:"))
    return lines[first:last]


def test_a_clean_orbit_run_says_its_map_held_and_nothing_else():
    a = run(make_model())
    diag = a.monte_carlo.perihelion.diagnostics
    lines = model_lines(format_analysis(a))
    w0, w1 = diag.window_myr
    assert lines[0] == (f"  model: orbit (method leaf_maps, 1 map leaf, search window {w0:+.4g} … "
                        f"{w1:+.4g} Myr)")  # fmt: skip
    assert lines[1] == (f"  map check: against direct integration of {diag.n_checked} draws its largest error was "
                        f"{diag.map_error_au_max:.3g} au, within the tolerance of 0.5 au")  # fmt: skip
    assert len(lines) == 2  # nothing outside the window, no direct integration
    assert "largest map error in the check [au]" not in format_analysis(a)  # the old bare number


def test_perihelia_beyond_the_window_are_explained_with_what_to_do():
    # a window of -0.1 .. +0.1 Myr cannot hold a perihelion 0.65 Myr ahead
    a = run(make_model("orbit", horizon_myr=0.1), n=200)
    x = a.monte_carlo.samples.values
    r = 1000.0 / x[:, 2]
    vt = K_KMS * np.hypot(x[:, 3], x[:, 4]) * r / 1000.0
    t_lin = -C_MYR * r * x[:, 5] / (x[:, 5] ** 2 + vt**2)
    outside = int(np.count_nonzero(t_lin > 0.1 + 0.5))  # far beyond the edge: outside whatever the tide does
    assert outside == 200 == a.monte_carlo.perihelion.diagnostics.n_outside_window
    text = format_analysis(a)
    sentence = (
        "  search window: 200 draws (100.0%) have their perihelion beyond its edge: their separation still "
        "shrinks there (going away from now), so their perihelion was extrapolated along a straight line from the "
        'edge (flagged); pass a longer horizon (--horizon MYR, or make_model("orbit", horizon_myr=...)) to find it'
    )
    assert sentence in model_lines(text)
    caution = ("200 samples were flagged by the model: 200 with their perihelion beyond the edge of the search "
               "window, extrapolated along a straight line from there (pass a longer horizon: --horizon, or "
               "horizon_myr)")  # fmt: skip
    assert caution in a.warnings


def test_a_map_error_above_the_tolerance_and_direct_integrations_are_explained():
    # a tolerance of 1e-11 au (the demo's map error is ~1e-9 au, and its third digit moves with the numpy/scipy
    # build): the check finds the map above it, and the draws predicted above it are integrated
    a = run(make_model("orbit", map_tolerance_au=1e-11))
    diag = a.monte_carlo.perihelion.diagnostics
    n_direct = diag.fallback_samples + diag.sparse_samples
    assert diag.map_error_au_max > 1e-11 and n_direct > 0.1 * 600
    lines = model_lines(format_analysis(a))
    assert lines[1] == (
        f"  map check: against direct integration of {diag.n_checked} draws its largest error was "
        f"{diag.map_error_au_max:.3g} au, above the tolerance of 1e-11 au: the map fits some draws poorly, so every "
        "draw predicted above the tolerance (twice the check's largest error) was integrated directly"
    )
    assert lines[2].startswith(f"  direct integration: {n_direct:,} draws ({n_direct / 600:.1%}) were integrated "
                               "directly instead of through the map (")  # fmt: skip
    assert lines[2].endswith("this only costs time, those answers come from direct integration; for speed use "
                             "fewer draws (--samples) or, for a weak parallax, a distance prior")  # fmt: skip
    assert not [w for w in a.warnings if "map's check" in w]  # "auto" kept no mapped answer above the tolerance


def test_method_map_keeps_mapped_answers_above_the_tolerance_and_says_so():
    a = run(make_model("orbit", method="map", map_tolerance_au=1e-11))
    diag = a.monte_carlo.perihelion.diagnostics
    assert diag.map_error_au_max > 1e-11
    assert (f"its largest error was {diag.map_error_au_max:.3g} au, above the tolerance of 1e-11 au, and method "
            '"map" kept the mapped answers: d_ph may be off by that much; use method "auto" (the default)'
            ) in format_analysis(a)  # fmt: skip
    (caution,) = [c for c in a.cautions if c.code == "map-error"]
    assert caution.message.startswith(
        f"the orbit maps' check against direct integration found errors up to "
        f"{diag.map_error_au_max:.3g} au, above its tolerance of 1e-11 au"
    )


def test_the_command_takes_a_horizon_and_the_json_keeps_the_numbers(tmp_path):
    path = tmp_path / "r.json"
    out = io.StringIO()
    argv = ["run", DEMO, "--samples", "200", "--seed", "1", "--horizon=-0.2,0.3", "--json", str(path), "--quiet"]
    assert main(argv, out=out) == 0
    info = json.loads(path.read_text())["monte_carlo"]["model_info"]
    assert info["window_myr"] == [-0.2, 0.3] and info["n_outside_window"] == 200
    assert "search window: 200 draws (100.0%) have their perihelion beyond its edge" in out.getvalue()
    assert json.loads(path.read_text())["model"]["horizon_myr"] == [-0.2, 0.3]


def test_a_horizon_the_model_cannot_take_is_refused(capsys):
    argv = ["run", DEMO, "--samples", "200", "--horizon", "5", "--model", "straight_line"]
    assert main(argv, out=io.StringIO()) == 2
    assert "--horizon = 5.0: an option of the orbit model, not of --model straight_line" in capsys.readouterr().err
    with pytest.raises(SystemExit) as done:  # a usage error: argparse's exit, status 2
        main(["run", DEMO, "--horizon", "1,2,3"], out=io.StringIO())
    assert done.value.code == 2
    assert "expected H or T_MIN,T_MAX in Myr, got '1,2,3'" in capsys.readouterr().err
