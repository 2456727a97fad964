"""Edges of catalogue runs: empty tables, settings refused before any work, a failing star, odd cuts.

Every catalogue is invented (:mod:`perierr.catalogue.invented`).
"""

from __future__ import annotations

import numpy as np
import pytest
from astropy.table import Table
from numpy.testing import assert_array_equal

import perierr.analysis
from perierr.catalogue.invented import invented_catalogue
from perierr.catalogue.runner import run_catalogue
from perierr.catalogue.treatment import TreatmentOptions, treatment_columns
from perierr.cli import main
from perierr.errors import InputError

FAST = TreatmentOptions(model="straight_line", n_samples=500)


def _write(tmp_path, n, seed=1, fmt="parquet", **kw):
    table, expected = invented_catalogue(n, seed=seed, **kw)
    path = tmp_path / f"kw.{fmt}"
    table.write(path, overwrite=True)
    return path, table, expected


@pytest.mark.parametrize("fmt", ["parquet", "ecsv", "fits", "csv"])
def test_an_empty_table_gives_readable_empty_results_with_every_column(tmp_path, fmt):
    table, _ = invented_catalogue(3, seed=2)
    path = tmp_path / f"empty.{fmt}"
    table[:0].write(path)
    run = run_catalogue(path, tmp_path / "out", cut="none", treatment=FAST, seed=1)
    assert run.n_rows == 0 and run.counts == {}
    for result in run.results:
        res = Table.read(result)
        assert len(res) == 0
        for name in ("row", "status", "reason", "screen_distance_pc", *treatment_columns(FAST.thresholds)):
            assert name in res.colnames, (result.name, name)
        assert res.meta["perierr"]["seed"] == 1


def test_every_setting_is_checked_before_any_work_and_nothing_is_recorded(tmp_path):
    path, _, _ = _write(tmp_path, 20)
    bad = [
        (dict(treatment=TreatmentOptions(model="straight_line", distance_prior="garbage")), "distance_prior"),
        (dict(treatment=TreatmentOptions(model="straight_line", parallax_offset="abc")), "parallax_offset"),
        (dict(treatment=TreatmentOptions(model="straight_line", n_samples=1)), "samples"),
        (dict(treatment=TreatmentOptions(model="no_such_model")), "model"),
        (dict(treatment=FAST, thresholds=["1pc", "1 pc"]), "threshold"),
        (dict(treatment=FAST, scheduler="http://localhost"), "scheduler"),
        (dict(treatment=FAST, workers=0), "workers"),
    ]
    for kwargs, field in bad:
        out = tmp_path / f"out-{field}"
        with pytest.raises(InputError) as err:
            run_catalogue(path, out, cut="none", seed=1, **kwargs)
        assert field.replace("_", " ") in err.value.field.replace("_", " "), (field, err.value.field)
        assert not out.exists(), f"{field}: the run folder was made before the settings were checked"
    # and the CLI says so with exit status 2 (bad input), before the screen
    code = main(["catalogue", str(path), "--out", str(tmp_path / "cli"), "--distance-prior", "garbage", "--quiet"])
    assert code == 2 and not (tmp_path / "cli").exists()


def test_one_star_failing_unexpectedly_keeps_its_row_and_the_run_goes_on(tmp_path, monkeypatch):
    path, table, _ = _write(tmp_path, 60, seed=3)
    real = perierr.analysis.analyze
    victim = str(table["source_id"][0])

    def analyze(star, **kw):  # an integration that fails for one star (e.g. a RuntimeError of the integrator)
        if star.source_id == victim:
            raise RuntimeError("orbit integration failed (invented for this test)")
        return real(star, **kw)

    monkeypatch.setattr(perierr.analysis, "analyze", analyze)
    run = run_catalogue(path, tmp_path / "out", cut="none", treatment=FAST, seed=2)
    res = Table.read(run.results[0])
    status = np.asarray(res["status"]).astype(str)
    assert status[0] == "failed" and "RuntimeError" in res["reason"][0]
    assert np.isnan(res["mc_distance_median_pc"][0]) and res["seed"][0] == -1
    ok = np.flatnonzero(status == "treated")
    assert ok.size >= 40 and np.all(np.isfinite(np.asarray(res["mc_distance_median_pc"])[ok]))
    assert run.n_problems == 1


def test_the_same_columns_whether_or_not_any_row_was_treated(tmp_path):
    path, _, _ = _write(tmp_path, 80, seed=4)
    some = Table.read(run_catalogue(path, tmp_path / "a", cut="distance_pc < 50 pc", treatment=FAST, seed=1)
                      .results[0])  # fmt: skip
    none = Table.read(run_catalogue(path, tmp_path / "b", cut="distance_pc < 1e-9 pc", treatment=FAST, seed=1)
                      .results[0])  # fmt: skip
    assert some.colnames == none.colnames
    assert np.any(np.asarray(some["status"]) == "treated") and not np.any(np.asarray(none["status"]) == "treated")
    assert_array_equal(none["seed"], -1)
    assert np.all(np.isnan(np.asarray(none["mc_distance_median_pc"])))


def test_the_run_thresholds_name_the_treatment_columns_too(tmp_path):
    path, _, _ = _write(tmp_path, 40, seed=5)
    run = run_catalogue(path, tmp_path / "out", cut="none", thresholds=["3 pc"], seed=1,
                        treatment=TreatmentOptions(model="straight_line", n_samples=500))  # fmt: skip
    res = Table.read(run.results[0])
    assert "mc_p_within_3pc" in res.colnames and "screen_p_within_3pc" in res.colnames
    assert "mc_p_within_1pc" not in res.colnames
    assert run.settings["treatment"]["thresholds"] == ["3 pc"] == res.meta["perierr"]["thresholds"]


def test_a_refusal_names_the_setting_that_changed(tmp_path):
    path, _, _ = _write(tmp_path, 30, seed=6)
    run_catalogue(path, tmp_path / "out", cut="none", treatment=FAST, seed=1)
    with pytest.raises(InputError) as err:
        run_catalogue(path, tmp_path / "out", cut="none", seed=1,
                      treatment=TreatmentOptions(model="straight_line", n_samples=600))  # fmt: skip
    assert "treatment.n_samples: 500 -> 600" in err.value.expected


def test_a_cut_may_name_the_columns_as_the_results_do(tmp_path):
    from perierr.catalogue.screening import parse_cut

    assert parse_cut("screen_distance_pc < 2 pc").text == parse_cut("distance_pc < 2 pc").text


def test_a_prior_run_says_how_to_analyse_rows_with_a_nonpositive_parallax(tmp_path):
    path, _, expected = _write(tmp_path, 200, seed=7, bad=2)
    run = run_catalogue(path, tmp_path / "out", cut="distance_pc < 1e-9 pc", seed=1,
                        treatment=TreatmentOptions(model="straight_line", n_samples=500,
                                                   distance_prior="edsd:L=1350pc"))  # fmt: skip
    res = Table.read(run.results[0])
    rows = np.flatnonzero(expected == "nonpositive_parallax")
    assert rows.size == 2
    for i in rows:
        assert res["status"][i] == "nonpositive_parallax"
        assert f"perierr run TABLE --row {i} --distance-prior edsd:L=1350pc" in res["reason"][i]


def test_most_probable_leaves_out_rows_no_draw_brings_close_and_top_zero_lists_nothing(tmp_path, capsys):
    path, _, _ = _write(tmp_path, 300, seed=8)
    args = ["catalogue", str(path), "--cut", "distance_pc < 30 pc", "--model", "straight_line", "--samples", "500",
            "--seed", "1", "--quiet", "--within", "1 au"]  # fmt: skip
    assert main([*args, "--out", str(tmp_path / "a")]) == 0
    out = capsys.readouterr().out
    assert "Most probable passes within 1 au" not in out  # no row has a draw within 1 au
    assert "Closest encounters" in out
    assert main([*args, "--out", str(tmp_path / "b"), "--top", "0"]) == 0
    out = capsys.readouterr().out
    assert "Closest encounters" not in out and "No row passed the cut" not in out


def test_a_malformed_csv_line_is_a_row_that_says_so(tmp_path):
    table, _ = invented_catalogue(30, seed=9)
    path = tmp_path / "kw.csv"
    table.write(path)
    lines = path.read_text().splitlines()
    lines[6] = "1,2,3"  # the sixth data row (row 5): three fields where the header has many (invented damage)
    path.write_text("\n".join(lines) + "\n")
    run = run_catalogue(path, tmp_path / "out", cut="none", treatment=None, seed=1)
    res = Table.read(run.results[0])
    assert len(res) == 30 and res["row"][5] == 5
    assert res["status"][5] == "unreadable_value"
    assert res["reason"][5].startswith("row = every cell unreadable: the line could not be read")
    assert res["status"][4] != "unreadable_value" and res["status"][6] != "unreadable_value"
