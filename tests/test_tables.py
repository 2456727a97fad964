"""Paper tables (perierr.report.tables): ECSV round trip through astropy, values from the draws, LaTeX rows.

References: astropy.table (ECSV reader: units and metadata), numpy's quantile(method="hazen") recomputed from the
draws each result carries (Hyndman & Fan 1996, definition 5), the Particle Data Group's rounding rule (tested in
tests/test_rounding.py), hashlib's SHA-256. Stars are invented.
"""

import csv
import hashlib
import json
import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable, Table
from paper_stars import invented

from perierr import ObservedStar, analyze
from perierr.errors import InputError, PerierrWarning
from perierr.report.rounding import latex_interval
from perierr.report.tables import latex_rows, result_table, write_table


@pytest.fixture(scope="module")
def results():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return [
            analyze(invented("invented Tern_1 & co"), model="straight_line", n_samples=20_000, seed=3, compare=False),
            analyze(invented("invented Tern-2", parallax=20.0, radial_velocity=-12.0), model="straight_line",
                    n_samples=20_000, seed=4, compare=False),
        ]  # fmt: skip


@pytest.mark.parametrize(("interval", "levels"), [("68", (0.16, 0.84)), ("90", (0.05, 0.95))])
def test_columns_are_the_draws_medians_and_interval_ends(results, interval, levels):
    table = result_table(results, interval=interval)
    for row, a in zip(table, results):
        d = np.asarray(a.monte_carlo.perihelion.distance_pc)
        med = np.quantile(d, 0.5, method="hazen")
        lo, hi = np.quantile(d, levels, method="hazen")
        assert row["d_ph"].to_value(u.pc) == pytest.approx(med, rel=1e-12)
        assert row["d_ph_minus"].to_value(u.pc) == pytest.approx(med - lo, rel=1e-9)
        assert row["d_ph_plus"].to_value(u.pc) == pytest.approx(hi - med, rel=1e-9)
        assert row["d_ph_au"].to_value(u.au) == pytest.approx((med * u.pc).to_value(u.au), rel=1e-12)
        t = np.asarray(a.monte_carlo.perihelion.time_myr)
        assert row["t_ph"].to_value(u.Myr) == pytest.approx(np.quantile(t, 0.5, method="hazen"), rel=1e-12)
        # P(d_ph < 20000 au) recounted from the draws
        assert row["p_within_20000_au"] == pytest.approx(np.mean(d < (20000 * u.au).to_value(u.pc)), abs=1e-12)
        digest = hashlib.sha256(json.dumps(a.star.to_dict(), sort_keys=True, default=str).encode()).hexdigest()
        assert row["input_sha256"] == digest
        assert row["n_draws"] == 20_000 and row["model"] == "straight_line" and row["prior"] == "none"
    assert [r["seed"] for r in table] == [3, 4]


def test_ecsv_round_trips_through_astropy_with_units_and_provenance(results, tmp_path):
    path = write_table(results, tmp_path / "stars.ecsv")
    back = QTable.read(path, format="ascii.ecsv")
    first = result_table(results)
    assert back.colnames == first.colnames
    assert back["d_ph"].unit == u.pc and back["d_ph_au"].unit == u.au and back["v_ph"].unit == u.km / u.s
    assert back["t_ph"].unit == u.Myr
    np.testing.assert_array_equal(back["d_ph"].value, first["d_ph"].value)
    assert list(back["star"]) == ["invented Tern_1 & co", "invented Tern-2"]
    meta = back.meta["perierr"]
    assert meta["interval"] == "16-84 % of the draws around the median"
    assert meta["version"] and "not" in meta["caution"].lower()  # the hazard caution travels with the table


def test_csv_names_the_units_and_keeps_every_row(results, tmp_path):
    path = write_table(results, tmp_path / "stars.csv", interval="90")
    text = path.read_text()
    assert text.startswith("# perierr ") and "d_ph [pc]" in text and "5-95 %" in text
    rows = list(csv.DictReader(line for line in text.splitlines() if not line.startswith("#")))
    assert len(rows) == 2
    assert float(rows[1]["d_ph"]) == pytest.approx(result_table(results)["d_ph"][1].value, rel=1e-12)


def test_latex_rows_round_by_the_rule_and_escape_names(results, tmp_path):
    text = latex_rows(results)
    lines = text.splitlines()
    assert lines[0].startswith("% perierr") and "Particle Data Group" in lines[0]
    table = result_table(results)
    row = table[0]
    expect = latex_interval(row["d_ph"].value, row["d_ph_minus"].value, row["d_ph_plus"].value)
    assert lines[1].startswith(r"invented Tern\_1 \& co & ")
    assert lines[1].split(" & ")[2] == expect  # star, t_ph, d_ph: the third cell
    assert lines[1].endswith(r" \\")
    assert write_table(results, tmp_path / "rows.tex").read_text() == text


def test_bad_requests_are_refused_naming_the_field(results, tmp_path):
    with pytest.raises(InputError, match="interval"):
        result_table(results, interval="95")
    with pytest.raises(InputError, match="table"):
        write_table(results, tmp_path / "stars.xlsx")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        other = analyze(invented("invented Tern-3"), model="straight_line", n_samples=2000, seed=5, compare=False,
                        thresholds=["1 pc"])
    with pytest.raises(InputError, match="thresholds"):
        result_table([results[0], other])
    assert not (tmp_path / "stars.xlsx").exists()
    assert isinstance(Table.read(write_table(results[0], tmp_path / "one.ecsv")), Table)  # one star alone


def test_the_cli_writes_the_same_row_as_the_api(tmp_path):
    # the API is the reference: the same star file, model, draws and seed give the same table row
    import io

    from perierr.cli import main
    from perierr.demo import demo_path
    from perierr.star import read_star_file

    path = tmp_path / "k4.ecsv"
    out = io.StringIO()
    argv = ["run", str(demo_path("kestrel-4.toml")), "--model", "straight_line", "--samples", "5000", "--seed", "2",
            "--paper-table", str(path), "--interval", "90", "--quiet"]  # fmt: skip
    assert main(argv, out=out) == 0
    assert f"table written to {path}" in out.getvalue()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        a = analyze(read_star_file(demo_path("kestrel-4.toml")), model="straight_line", n_samples=5000, seed=2)
    expect, back = result_table(a, interval="90"), QTable.read(path, format="ascii.ecsv")
    for column in ("d_ph", "d_ph_minus", "d_ph_plus", "t_ph", "v_ph", "p_within_20000_au"):
        np.testing.assert_allclose(np.asarray(back[column]), np.asarray(expect[column]), rtol=1e-12)
    assert back.meta["perierr"]["interval"] == "5-95 % of the draws around the median"
    # a file name the writer cannot serve is refused before the work, naming the option
    err = io.StringIO()
    bad = argv[:-5] + ["--paper-table", str(tmp_path / "k4.xlsx"), "--quiet"]
    import contextlib

    with contextlib.redirect_stderr(err):
        assert main(bad, out=io.StringIO()) == 2
    assert "--paper-table" in err.getvalue() and ".ecsv, .csv or .tex" in err.getvalue()


def test_two_priors_give_two_provenances():
    # the prior's parameters, its sampling method and the effective size are part of a row's provenance: two length
    # scales of the same prior must not read alike (their d_ph differ several-fold for a weak parallax)
    star = ObservedStar.from_values(ra=45.0, dec=20.0, parallax=1.5, parallax_error=0.3, pmra=0.01, pmra_error=0.05,
                                    pmdec=0.02, pmdec_error=0.05, radial_velocity=-60.0, radial_velocity_error=1.0,
                                    name="weak (invented)")  # fmt: skip
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        rows = [analyze(star, model="straight_line", n_samples=3000, seed=2, distance_prior=f"edsd:L={L}pc",
                        prior_method="reweight", compare=False) for L in (300, 1350)]  # fmt: skip
    t = result_table(rows)
    assert t["prior"][0] != t["prior"][1]
    assert "300" in t["prior"][0] and "1350" in t["prior"][1]
    assert list(t["prior_method"]) == ["reweight", "reweight"]
    # the Kish effective size of each row's weights (Kish 1965, Survey Sampling): (sum w)^2 / sum w^2
    for a, ess in zip(rows, t["effective_size"]):
        w = np.asarray(a.monte_carlo.samples.weights, dtype=float)
        assert ess == pytest.approx(w.sum() ** 2 / np.dot(w, w), rel=1e-9)
        assert ess < t["n_draws"][0]
