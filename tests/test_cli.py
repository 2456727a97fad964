"""The command line and its JSON contract."""

import io
import json

import numpy as np
import pytest

from perierr import analyze, read_star_file
from perierr.cli import main
from perierr.demo import demo_path

QUANTITIES = ("time_myr", "distance_pc", "speed_kms")
INPUTS = ("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity")


def test_demo_prints_report_and_writes_contract_json(tmp_path):
    out = io.StringIO()
    path = tmp_path / "demo.json"
    assert main(["demo", "--seed", "5", "--samples", "20000", "--json", str(path)], out=out) == 0
    text = out.getvalue()
    assert "invented" in text and "Kestrel-6" in text  # the negative-parallax row is kept
    assert "Chance that the star passes within" in text and "not an impact-hazard" in text
    doc = json.loads(path.read_text())
    for key in ("perierr_version", "model", "inputs", "linearized", "monte_carlo", "budget"):
        assert key in doc
    assert doc["monte_carlo"]["n"] == 20000 and doc["monte_carlo"]["seed"] == 5
    for q in QUANTITIES:
        assert set(doc["linearized"][q]) >= {"value", "sigma"}
        assert set(doc["monte_carlo"][q]) >= {"median", "mean", "std", "q05", "q16", "q84", "q95"}
    for q in ("distance_pc", "time_myr"):
        shares = doc["budget"][q]
        assert set(shares) == set(INPUTS)
        assert abs(sum(shares.values()) - 1) < 1e-9 and min(shares.values()) >= 0
    # the JSON numbers are the API's numbers (same seed)
    api = analyze(read_star_file(demo_path("kestrel-4.toml")), n_samples=20000, seed=5)
    assert doc["monte_carlo"]["distance_pc"]["median"] == api.monte_carlo.summaries["distance_pc"].median
    assert np.isclose(doc["linearized"]["distance_pc"]["value"], api.linear.value[1], rtol=1e-15)


def test_run_with_options(tmp_path):
    out = io.StringIO()
    path = tmp_path / "r.json"
    rc = main(
        ["run", str(demo_path("kestrel-4.toml")), "--samples", "5000", "--seed", "1",
         "--levels", "0.025,0.975", "--within", "19000au,0.1pc", "--json", str(path)],
        out=out,
    )
    assert rc == 0
    doc = json.loads(path.read_text())
    assert "q02.5" in doc["monte_carlo"]["distance_pc"]
    labels = [t["threshold"] for t in doc["monte_carlo"]["thresholds"]]
    assert labels == ["19000au", "0.1pc"]
    p = doc["monte_carlo"]["thresholds"][0]["probability"]
    # normal approximation from the linearized result: d_ph ~ N(18,956, 606) au, so
    # P(d_ph < 19,000 au) = Phi(44 / 606) = 0.529 (scipy.stats.norm); MC error ~0.007 at n = 5000
    from scipy.stats import norm

    lin = doc["linearized"]["distance_au"]
    assert abs(p - norm.cdf((19_000 - lin["value"]) / lin["sigma"])) < 0.03


def test_bad_star_file_gives_a_clear_error_not_a_traceback(tmp_path, capsys):
    bad = tmp_path / "s.toml"
    bad.write_text('ra = 1\ndec = 2\nparallax = "12 km"\n')
    assert main(["run", str(bad)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("perierr: error: parallax = '12 km'") and "Traceback" not in err


def test_bad_threshold_names_the_value(capsys):
    assert main(["run", str(demo_path("kestrel-4.toml")), "--samples", "1000", "--within", "12"]) == 2
    assert "threshold = '12'" in capsys.readouterr().err


def test_screen_keeps_every_row(capsys):
    assert main(["screen", str(demo_path("kestrel_survey.ecsv"))]) == 0
    text = capsys.readouterr().out
    for k in range(1, 7):
        assert f"Kestrel-{k}" in text
    assert "not computed: parallax = -0.4" in text
    # screening keeps the straight line when runs default to orbits (issue 11), and says so: Kestrel-4 at the
    # straight-line d_ph of its nominal inputs, 18,956 au (the linear-motion formulas, checked against galpy
    # orbits and the formulas in test_model_difference.py), not the orbit's 20,652 au
    assert "(straight-line model, nominal ± linear 1σ)" in text and "18,956" in text and "20,652" not in text
    assert "perierr run follows Galactic orbits" in text


@pytest.mark.parametrize("argv", [["run"], ["nonsense"]])
def test_usage_errors_exit_nonzero(argv):
    with pytest.raises(SystemExit) as exc:
        main(argv)
    assert exc.value.code == 2


def test_output_piped_into_a_closed_reader_stops_quietly():
    # `perierr demo | head -1`: no traceback on stderr (Python docs, "Note on SIGPIPE")
    import subprocess
    import sys

    code = "import sys; from perierr.cli import main; sys.exit(main(['demo', '--seed', '1', '--samples', '2000']))"
    proc = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.readline()
    proc.stdout.close()  # the reader goes away after one line
    err = proc.stderr.read().decode()
    proc.wait(timeout=60)
    assert "Traceback" not in err
