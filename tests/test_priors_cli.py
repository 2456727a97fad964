"""CLI options for distance priors and parallax calibration."""

import io
import json

import pytest

from perierr.cli import main

STAR = """name = "invented faint star"
ra = 120.0
dec = -30.0
parallax = {plx}
parallax_error = 0.3
pmra = 0.4
pmra_error = 0.3
pmdec = -0.3
pmdec_error = 0.3
radial_velocity = -60.0
radial_velocity_error = 2.0
"""


@pytest.fixture
def star_file(tmp_path):
    def make(plx):
        path = tmp_path / f"star_{plx}.toml"
        path.write_text(STAR.format(plx=plx))
        return path

    return make


def test_run_negative_parallax_with_prior_and_calibration(star_file, tmp_path):
    # JSON contract of issue 4: prior block with name, parameters, method, ESS, autocorrelation time
    out = io.StringIO()
    js = tmp_path / "out.json"
    # the straight line: the test is about the prior and calibration blocks (the orbit model is slow for the
    # ~kpc posterior distances of a negative parallax)
    rc = main(["run", str(star_file(-0.2)), "--seed", "3", "--samples", "3000", "--distance-prior",
               "edsd:L=1.35kpc", "--parallax-offset=-0.02,0.01", "--inflate", "parallax=1.1", "--json", str(js),
               "--model", "straight_line"], out=out)  # fmt: skip
    assert rc == 0
    text = out.getvalue()
    assert "Distance prior: edsd (L_pc = 1350); posterior by mcmc" in text
    assert "switched to MCMC: nominal parallax <= 0" in text
    assert "parallax zero-point -0.02 ± 0.01 mas" in text
    doc = json.loads(js.read_text())
    assert doc["prior"]["method"] == "mcmc" and doc["prior"]["parameters"] == {"L_pc": 1350.0}
    assert doc["prior"]["effective_size"] >= 2000
    assert min(doc["prior"]["autocorrelation_time"].values()) > 1.0
    assert doc["monte_carlo"]["method"] == "mcmc"
    assert doc["calibration"]["error_inflation"]["parallax"] == 1.1
    # corrected parallax -0.2 - (-0.02) = -0.18 mas (Lindegren et al. 2021, A&A 649, A4 convention)
    assert doc["inputs"]["parallax"] == pytest.approx(-0.18, abs=1e-12)


def test_run_reweight_reports_effective_size_and_zero_point_share(star_file, tmp_path):
    out = io.StringIO()
    js = tmp_path / "out.json"
    rc = main(["run", str(star_file(2.5)), "--seed", "1", "--samples", "20000", "--distance-prior",
               "ggd:alpha=1,beta=2,L=1350pc", "--prior-method", "reweight", "--parallax-offset", "0,0.1",
               "--json", str(js)], out=out)
    assert rc == 0
    doc = json.loads(js.read_text())
    assert doc["prior"]["method"] == "reweight"
    assert doc["prior"]["effective_size"] == pytest.approx(doc["monte_carlo"]["effective_size"], rel=1e-12)
    assert "parallax_zero_point" in doc["budget"]["distance_pc"]
    assert "importance weights: effective sample size" in out.getvalue()
    assert "parallax zero-pt" in out.getvalue()


@pytest.mark.parametrize(
    "args, match",
    [
        (["--distance-prior", "lognorm:L=3"], "unknown prior 'lognorm'; accepted: none | edsd:L=<length>"),
        (["--distance-prior", "edsd:scale=3"], "unknown parameter 'scale' for edsd; it takes L"),
        (["--parallax-offset", "x"], "expected numbers in mas"),
        (["--inflate", "plx=2"], "unknown input; expected one of ra, dec, parallax"),
    ],
)
def test_run_bad_prior_options_exit_2(star_file, capsys, args, match):
    rc = main(["run", str(star_file(1.0)), "--samples", "500", "--seed", "1", *args], out=io.StringIO())
    assert rc == 2
    assert match in capsys.readouterr().err


def test_none_prior_with_negative_parallax_says_use_a_prior(star_file, capsys):
    rc = main(["run", str(star_file(-0.2)), "--samples", "500", "--distance-prior", "none"], out=io.StringIO())
    assert rc == 2
    assert "use a distance prior instead" in capsys.readouterr().err
