"""Edge cases a user meets: masked rows, booleans, no motion, head-on paths, focusing seeds."""

import io
import json
import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.table import MaskedColumn, Table
from numpy.testing import assert_allclose

from perierr import InputError, ObservedStar, StraightLine, analyze, linearize, monte_carlo
from perierr.cli import main
from perierr.demo import demo_path
from perierr.screen import screen_catalogue

BASE = dict(
    ra=10.0,
    dec=20.0,
    parallax=30.0,
    parallax_error=0.05,
    pmra=5.0,
    pmra_error=0.04,
    pmdec=-3.0,
    pmdec_error=0.04,
    radial_velocity=-20.0,
    radial_velocity_error=0.5,
)


def star(**changes):
    d = dict(BASE)
    d.update(changes)
    return ObservedStar.from_mapping(d)


def test_masked_table_values_are_missing_not_zero():
    t = Table(rows=[BASE, BASE])
    t["radial_velocity"] = MaskedColumn([-20.0, -20.0], mask=[False, True], unit=u.km / u.s)
    t["ra_error"] = MaskedColumn([0.1, 0.1], mask=[True, False], unit=u.mas)
    rows = screen_catalogue(t)
    assert len(rows) == 2  # a batch never loses a row
    assert rows[0].status == "ok"
    assert rows[1].status.startswith("not computed: radial_velocity = None: missing")
    s0 = ObservedStar.from_mapping(t[0], row=0, strict=False)
    assert "ra_error not given: held exact" in s0.notes  # masked optional error is noted


def test_booleans_are_not_numbers():
    with pytest.raises(InputError, match="parallax = True: expected a number in mas, not a boolean"):
        star(parallax=True)


def test_a_star_without_motion_is_refused_with_the_reason():
    s = star(pmra=0.0, pmdec=0.0, radial_velocity=0.0)
    for call in (lambda: linearize(s, StraightLine()), lambda: monte_carlo(s, StraightLine(), n=1000, seed=1)):
        with pytest.raises(InputError, match="does not move relative to the Sun"):
            call()


def test_head_on_nominal_path_has_no_distance_derivative_and_says_so():
    # Exactly head-on (pmra = pmdec = 0): d_ph = |perpendicular offset| has a kink at 0.
    s = star(pmra=0.0, pmdec=0.0, pmra_error=0.0, pmdec_error=0.0)
    lin = linearize(s, StraightLine())
    assert lin.value[1] == 0.0
    assert np.all(lin.jacobian[1] == 0.0)
    # time is still differentiable: t = -d / rv (head-on), dt/drv = d / rv^2 (in Myr)
    d_pc = 1000 / 30.0
    assert_allclose(lin.jacobian[0, 5], 0.9777922216807891 * d_pc / 20.0**2, rtol=1e-9)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = analyze(s, model="straight_line", n_samples=2000, seed=1)  # head-on is a straight-line kink
    assert any("not differentiable" in w for w in result.warnings)


def test_focusing_is_reproducible_from_the_seed_and_small_for_a_fast_star():
    s = ObservedStar.from_mapping({**BASE, "mass": 0.8, "mass_error": 0.1})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        a = analyze(s, n_samples=5000, seed=3, focusing=True)
        b = analyze(s, n_samples=5000, seed=3, focusing=True)
        plain = analyze(s, n_samples=5000, seed=3)
    assert a.monte_carlo.summaries["distance_pc"].median == b.monte_carlo.summaries["distance_pc"].median
    # Kepler hyperbola (any celestial-mechanics textbook): q = |a|(e - 1) < b, by about mu/v^2
    # for b v^2 >> mu; mu/v^2 here ~ G 1.8 M_sun / (20.4 km/s)^2 ~ 3.8 au.
    shift_au = (
        a.monte_carlo.summaries["distance_pc"].median - plain.monte_carlo.summaries["distance_pc"].median
    ) * 206264.8
    assert -6.0 < shift_au < -2.0
    with pytest.raises(InputError, match="needs the star's mass"):
        analyze(star(), n_samples=1000, seed=1, focusing=True)


def test_cap_below_first_round_is_refused():
    with pytest.raises(ValueError, match="max_samples = 10: expected at least n = 1000"):
        monte_carlo(star(), StraightLine(), n=1000, seed=1, target_error=0.01, max_samples=10)


def test_cli_missing_table_and_unit_slip_reach_the_report(tmp_path, capsys):
    assert main(["screen", str(tmp_path / "nope.ecsv")]) == 2
    assert "table = " in capsys.readouterr().err
    f = tmp_path / "arcsec.toml"
    f.write_text("\n".join(f"{k} = {v}" for k, v in {**BASE, "parallax": 0.03, "parallax_error": 0.00005}.items()))
    out = io.StringIO()
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # nothing may leak as a raw Python warning
        assert main(["run", str(f), "--samples", "1000", "--seed", "1"], out=out) == 0
    assert "looks like arcsec" in out.getvalue()


def test_extra_levels_and_model_info_are_reported(tmp_path):
    out = io.StringIO()
    path = tmp_path / "r.json"
    argv = [
        "run",
        str(demo_path("kestrel-4.toml")),
        "--samples",
        "4000",
        "--seed",
        "2",
        "--levels",
        "0.025,0.975",
        "--json",
        str(path),
    ]
    assert main(argv, out=out) == 0
    assert "2.5 %:" in out.getvalue() and "97.5 %:" in out.getvalue()
    doc = json.loads(path.read_text())
    info = doc["monte_carlo"]["model_info"]
    assert info["model"] == "orbit"  # the default model (issue 11)
    # the diagnostics the report explains in words stay in the JSON, as numbers (ModelDiagnostics fields)
    for key in ("window_myr", "map_error_au_max", "fallback_samples", "sparse_samples", "n_outside_window"):
        assert key in info, key
    assert info["n_outside_window"] == 0 and len(info["window_myr"]) == 2


@pytest.mark.slow  # about a second or more: left out of mutation runs (DEVELOPERS.md)
def test_prior_that_excludes_the_measured_distance_is_called_a_conflict():
    # A 0.06 % parallax at 20.8 pc under a uniform prior cut at 10 pc: the posterior sits at the
    # prior's edge, hundreds of sigma from the measurement (common practice, no source: a
    # prior-data conflict check).
    from perierr import PerierrWarning
    from perierr.priors import posterior_samples

    s = star(parallax=48.0, parallax_error=0.03)
    with pytest.warns(PerierrWarning, match="prior-data conflict"):
        out = posterior_samples(s, "uniform:r_max=10pc", n=5000, seed=1)
    assert out.info["prior_tension_sigma"] > 100
    assert out.info["effective_size"] <= out.info["n_delivered"] == out.n
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # an agreeing prior raises no conflict
        fine = posterior_samples(s, "edsd:L=1350pc", n=5000, seed=1)
    assert abs(fine.info["prior_tension_sigma"]) < 3


@pytest.mark.slow  # about a second or more: left out of mutation runs (DEVELOPERS.md)
def test_orbit_model_under_a_prior_with_a_negative_parallax():
    # the model linearizes around the posterior median when the nominal parallax cannot be inverted
    s = star(parallax=-0.3, parallax_error=0.5, radial_velocity=-40.0, radial_velocity_error=2.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = analyze(s, model="orbit", distance_prior="edsd:L=1350pc", n_samples=1000, seed=1)
    assert r.linear is None and r.prior.method == "mcmc"
    d = r.monte_carlo.summaries["distance_pc"]
    assert np.isfinite(d.median) and d.quantiles[0.16] < d.median < d.quantiles[0.84]
    assert r.monte_carlo.n == r.prior.n_delivered


def test_focused_nominal_value_does_not_depend_on_the_seed():
    s = ObservedStar.from_mapping({**BASE, "mass": 0.8, "mass_error": 0.4})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        a = analyze(s, n_samples=2000, seed=1, focusing=True)
        b = analyze(s, n_samples=2000, seed=2, focusing=True)
    assert a.linear.value[1] == b.linear.value[1]


def test_adaptive_mode_and_a_prior_do_not_combine_silently():
    with pytest.raises(InputError, match="target_error = 0.01: the adaptive mode draws plain Gaussian samples"):
        analyze(star(), distance_prior="edsd:L=1350pc", target_error=0.01, seed=1)


def test_calibration_warnings_reach_the_result():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = analyze(star(), error_inflation={"parallax": 0.5}, n_samples=2000, seed=1)
    assert any("inflation factors below 1 shrink the errors of parallax" in w for w in r.warnings)
