"""Catalogue runs end to end: every row once, the single-star answers, invariances, resumption.

The catalogues are invented (:mod:`perierr.catalogue.invented`, the fictional Kestrel wide-field survey).
The reference for each treated row is the single-star API (:func:`perierr.analyze`) with the star's own
seed, itself checked against outside references elsewhere in the suite.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table
from numpy.testing import assert_array_equal

import perierr
from perierr.catalogue.invented import invented_catalogue
from perierr.catalogue.runner import run_catalogue
from perierr.catalogue.treatment import TreatmentOptions, star_seed
from perierr.cli import main
from perierr.errors import InputError, PerierrWarning
from perierr.star import ObservedStar

SCREEN_OK = ("treated", "not_selected", "failed", "screened")
FAST = TreatmentOptions(model="straight_line", n_samples=2000)


def _catalogue(tmp_path, n=1500, seed=3, fmt="parquet", **kw):
    table, expected = invented_catalogue(n, seed=seed, **kw)
    path = tmp_path / f"kestrel_wide.{fmt}"
    table.write(path, overwrite=True)
    return path, table, expected


def _values(path) -> Table:
    t = Table.read(path)
    t.meta.clear()
    return t


def _assert_same_tables(a: Table, b: Table) -> None:
    assert a.colnames == b.colnames
    for name in a.colnames:
        x, y = np.asarray(a[name]), np.asarray(b[name])
        if x.dtype.kind == "f":
            assert_array_equal(np.isnan(x), np.isnan(y), err_msg=name)
            assert_array_equal(x[~np.isnan(x)], y[~np.isnan(y)], err_msg=name)
        else:
            assert_array_equal(x, y, err_msg=name)


def test_every_row_once_in_input_order_with_its_status_and_the_single_star_answer(tmp_path):
    path, table, expected = _catalogue(tmp_path, n=1500, bad=3, no_rv=0.4)
    run = run_catalogue(path, tmp_path / "out", cut="distance_pc < 4 pc", treatment=FAST, seed=11, chunk_rows=400)
    res = Table.read(run.results[0])
    n = len(table)
    assert_array_equal(res["row"], np.arange(n))
    assert_array_equal(res["source_id"], table["source_id"])
    status = np.asarray(res["status"]).astype(str)
    screen_status = np.where(np.isin(status, SCREEN_OK), "ok", status)
    assert_array_equal(screen_status, expected)  # every bad row with the status of its fault
    assert run.n_rows == n and sum(run.counts.values()) == n
    names, counts = np.unique(status, return_counts=True)
    assert run.counts == dict(zip(names.tolist(), counts.tolist()))
    # the cut: exactly the computed rows with a nominal perihelion within 4 pc went to stage 2
    near = (screen_status == "ok") & (np.asarray(res["screen_distance_pc"]) < 4.0)
    assert_array_equal(np.isin(status, ("treated", "failed")), near)
    assert near.sum() >= 5
    # the reason names the field for bad rows (InputError's form: "field = value: expected ...")
    for i in np.flatnonzero(expected == "nonpositive_parallax")[:3]:
        assert "parallax" in res["reason"][i]
    # each treated row equals the single-star API with the star's own seed (exactly: the same draws)
    for i in np.flatnonzero(status == "treated")[:12]:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PerierrWarning)
            star = ObservedStar.from_mapping(table[i], row=int(i), strict=False)
            one = perierr.analyze(star, model="straight_line", n_samples=2000, compare=False,
                                  seed=star_seed(11, table["source_id"][i]))  # fmt: skip
        d = one.monte_carlo.summaries["distance_pc"]
        assert res["mc_distance_median_pc"][i] == d.median
        assert res["mc_distance_q16_pc"][i] == d.quantile(0.16)
        assert res["mc_time_median_myr"][i] == one.monte_carlo.summaries["time_myr"].median
        assert res["mc_p_within_1pc"][i] == next(t for t in one.monte_carlo.thresholds if t.label == "1 pc").probability
        assert res["dominant_input"][i] == one.budget.dominant("distance_pc")
        assert res["seed"][i] == one.monte_carlo.samples.seed
    # units and provenance ride along (astropy reads them back from the Parquet file)
    assert res["mc_distance_median_pc"].unit == u.pc and res["screen_time_myr"].unit == u.Myr
    meta = res.meta["perierr"]
    assert meta["seed"] == 11 and meta["cut"] and meta["input_checksum"].startswith("sha256:")
    assert meta["treatment"]["n_samples"] == 2000 and meta["perierr_version"] == perierr.__version__
    # the ECSV file holds the same table (empty text cells read back as masked)
    ecsv = Table.read(run.results[1])
    for name in ("row", "source_id", "mc_distance_median_pc", "screen_distance_sigma_pc", "selected"):
        x, y = np.asarray(res[name]), np.asarray(ecsv[name])
        assert_array_equal(
            np.isnan(x) if x.dtype.kind == "f" else x == x, np.isnan(y) if y.dtype.kind == "f" else y == y
        )
        assert_array_equal(x[x == x], y[y == y]) if x.dtype.kind == "f" else assert_array_equal(x, y)
    assert ecsv["mc_distance_median_pc"].unit == u.pc and ecsv.meta["perierr"]["seed"] == 11


def test_chunking_workers_and_row_order_do_not_change_the_answers(tmp_path):
    path, table, _ = _catalogue(tmp_path, n=900, seed=5, bad=1, no_rv=0.2)
    common = dict(cut="distance_pc < 5 pc", treatment=FAST, seed=2)
    one = _values(run_catalogue(path, tmp_path / "a", chunk_rows=10_000, **common).results[0])
    many = _values(run_catalogue(path, tmp_path / "b", chunk_rows=97, workers=2, **common).results[0])
    _assert_same_tables(one, many)
    # rows in another order: each star's numbers follow it (its seed comes from its source_id)
    order = np.random.default_rng(8).permutation(len(table))
    shuffled = tmp_path / "shuffled.parquet"
    table[order].write(shuffled)
    other = _values(run_catalogue(shuffled, tmp_path / "c", chunk_rows=250, **common).results[0])
    back = other[np.argsort(order)]
    for name in ("source_id", "status", "screen_distance_pc", "mc_distance_median_pc", "mc_p_within_1pc", "seed"):
        x, y = np.asarray(one[name]), np.asarray(back[name])
        assert_array_equal(x, y) if x.dtype.kind != "f" else assert_array_equal(
            np.nan_to_num(x, nan=-9), np.nan_to_num(y, nan=-9)
        )


@pytest.mark.slow
def test_a_local_dask_cluster_gives_the_same_results(tmp_path):
    path, _, _ = _catalogue(tmp_path, n=600, seed=6)
    common = dict(cut="distance_pc < 6 pc", treatment=FAST, seed=4)
    local = _values(run_catalogue(path, tmp_path / "a", **common).results[0])
    dask = _values(run_catalogue(path, tmp_path / "b", dask=True, workers=2, **common).results[0])
    _assert_same_tables(local, dask)
    # a running cluster, reached by its scheduler's address (dask.distributed's LocalCluster stands for one)
    from distributed import LocalCluster

    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        remote = _values(run_catalogue(path, tmp_path / "c", scheduler=cluster.scheduler_address, **common).results[0])
    _assert_same_tables(local, remote)
    with pytest.raises(InputError) as err:
        run_catalogue(path, tmp_path / "d", scheduler="tcp://127.0.0.1:9", **common)
    assert err.value.field == "scheduler" and "no Dask scheduler answered" in err.value.expected


def test_units_and_column_names_do_not_change_the_answers(tmp_path):
    table, _ = invented_catalogue(400, seed=9, bad=1)
    common = dict(cut="distance_pc < 6 pc", treatment=FAST, seed=4)
    base = tmp_path / "mas.ecsv"
    table.write(base)
    ref = _values(run_catalogue(base, tmp_path / "a", **common).results[0])
    # parallax in arcsec, radial velocity in m/s (astropy.units: 1 arcsec = 1000 mas, 1 km/s = 1000 m/s)
    other = table.copy()
    other["parallax"] = (table["parallax"] * u.mas).to(u.arcsec)
    other["radial_velocity"] = (table["radial_velocity"] * u.km / u.s).to(u.m / u.s)
    path = tmp_path / "arcsec.ecsv"
    other.write(path)
    got = _values(run_catalogue(path, tmp_path / "b", **common).results[0])
    for name in ("status", "screen_distance_pc", "mc_distance_median_pc"):
        x, y = np.asarray(ref[name]), np.asarray(got[name])
        if x.dtype.kind == "f":
            np.testing.assert_allclose(x, y, rtol=1e-12, equal_nan=True, err_msg=name)  # unit conversion rounding
        else:
            assert_array_equal(x, y)
    # the same catalogue with CDS VizieR column names, read through the preset (mapping detected)
    names = {"source_id": "Source", "ra": "RA_ICRS", "dec": "DE_ICRS", "ra_error": "e_RA_ICRS",
             "dec_error": "e_DE_ICRS", "parallax": "Plx", "parallax_error": "e_Plx", "pmra": "pmRA",
             "pmra_error": "e_pmRA", "pmdec": "pmDE",
             "pmdec_error": "e_pmDE", "radial_velocity": "RV", "radial_velocity_error": "e_RV"}  # fmt: skip
    viz = table.copy()
    for old, new in names.items():
        viz.rename_column(old, new)
    for name in list(viz.colnames):
        if name.endswith("_corr"):
            a, b = perierr.star.fields.split_correlation(name)
            short = {"ra": "RA", "dec": "DE", "parallax": "Plx", "pmra": "pmRA", "pmdec": "pmDE"}
            viz.rename_column(name, f"{short[a]}{short[b]}cor")
    vpath = tmp_path / "vizier.ecsv"
    viz.write(vpath)
    got = _values(run_catalogue(vpath, tmp_path / "c", **common).results[0])
    for name in ("status", "screen_distance_pc", "mc_distance_median_pc", "source_id"):
        x, y = np.asarray(ref[name]), np.asarray(got[name])
        assert_array_equal(np.nan_to_num(x, nan=-9) if x.dtype.kind == "f" else x,
                           np.nan_to_num(y, nan=-9) if y.dtype.kind == "f" else y)  # fmt: skip


def test_a_changed_input_or_setting_is_refused_and_the_same_command_resumes(tmp_path):
    path, table, _ = _catalogue(tmp_path, n=300, seed=12)
    out = tmp_path / "out"
    first = run_catalogue(path, out, cut="distance_pc < 8 pc", treatment=FAST, seed=1)
    again = run_catalogue(path, out, cut="distance_pc < 8 pc", treatment=FAST)  # no seed: the recorded one
    assert again.resumed and again.settings["seed"] == 1
    _assert_same_tables(_values(first.results[0]), _values(again.results[0]))
    with pytest.raises(InputError) as err:
        run_catalogue(path, out, cut="distance_pc < 8 pc", treatment=FAST, seed=2)
    assert err.value.field == "--out" and "seed: 1 -> 2" in err.value.expected
    table["parallax"][0] += 0.001
    table.write(path, overwrite=True)
    with pytest.raises(InputError) as err:
        run_catalogue(path, out, cut="distance_pc < 8 pc", treatment=FAST, seed=1)
    assert "input_checksum" in err.value.expected
    (tmp_path / "other").mkdir()
    (tmp_path / "other" / "notes.txt").write_text("mine")
    with pytest.raises(InputError, match="other files"):
        run_catalogue(path, tmp_path / "other", treatment=None)


def test_most_rows_without_radial_velocity_and_a_screen_only_run(tmp_path):
    path, table, expected = _catalogue(tmp_path, n=2000, seed=21, no_rv=0.9, fmt="fits")
    run = run_catalogue(path, tmp_path / "out", cut="distance_pc < 20 pc", treatment=None, seed=3)
    res = Table.read(run.results[0])
    assert len(res) == 2000
    status = np.asarray(res["status"]).astype(str)
    assert_array_equal(status == "no_radial_velocity", expected == "no_radial_velocity")
    assert run.counts["no_radial_velocity"] == int((expected == "no_radial_velocity").sum()) > 1700
    assert set(status) <= {"no_radial_velocity", "screened", "not_selected"}
    assert not np.any(np.isfinite(np.asarray(res["screen_distance_pc"])[status == "no_radial_velocity"]))
    assert run.n_problems == 0


def test_cli_catalogue_run_counts_statuses_and_says_when_rows_failed(tmp_path, capsys):
    path, _, _ = _catalogue(tmp_path, n=500, seed=14, bad=1)
    code = main(["catalogue", str(path), "--out", str(tmp_path / "out"), "--cut", "distance_pc < 6 pc",
                 "--model", "straight_line", "--samples", "2000", "--seed", "3", "--quiet"])  # fmt: skip
    captured = capsys.readouterr()
    assert code == 5  # rows with bad values: every row is in the results, and the status says so
    assert "rows could not be computed" in captured.err
    assert "Closest encounters" in captured.out and "not impact hazards" in captured.out
    good, _, _ = _catalogue(tmp_path, n=300, seed=15)
    assert main(["catalogue", str(good), "--out", str(tmp_path / "good"), "--screen-only", "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "Rows by status: " in out and "screened" in out


def test_run_takes_one_row_of_a_table(tmp_path, capsys):
    path, table, expected = _catalogue(tmp_path, n=50, seed=16, fmt="ecsv")
    i = int(np.flatnonzero(expected == "ok")[7])
    args = ["--model", "straight_line", "--samples", "2000", "--seed", "5", "--quiet", "--json"]
    assert main(["run", str(path), "--row", str(i), *args, str(tmp_path / "a.json")]) == 0
    sid = str(table["source_id"][i])
    assert main(["run", str(path), "--source-id", sid, *args, str(tmp_path / "b.json")]) == 0
    capsys.readouterr()
    import json

    a = json.loads((tmp_path / "a.json").read_text())
    b = json.loads((tmp_path / "b.json").read_text())
    assert a["monte_carlo"] == b["monte_carlo"]
    assert a["inputs"]["parallax"] == pytest.approx(float(table["parallax"][i]), rel=1e-15)
    assert main(["run", str(path), "--row", "50", "--quiet"]) == 2
    assert "row" in capsys.readouterr().err


@pytest.mark.slow
@pytest.mark.parametrize("how", [signal.SIGINT, signal.SIGKILL])
def test_killed_runs_resume_to_the_uninterrupted_answer(tmp_path, how):
    path, _, _ = _catalogue(tmp_path, n=4000, seed=31)
    cmd = [sys.executable, "-m", "perierr.cli", "catalogue", str(path), "--cut", "distance_pc < 12 pc",
           "--model", "straight_line", "--samples", "60000", "--seed", "9", "--quiet",
           "--chunk-rows", "700"]  # fmt: skip
    ref = tmp_path / "ref"
    assert subprocess.run([*cmd, "--out", str(ref)], capture_output=True).returncode == 0
    out = tmp_path / "killed"
    rng = np.random.default_rng(int(how))
    stopped = 0
    for _ in range(3):  # kill it at random instants, then start it again each time
        proc = subprocess.Popen([*cmd, "--out", str(out)], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
        started = time.monotonic()
        while not (out / "run.json").exists() and proc.poll() is None and time.monotonic() - started < 60:
            time.sleep(0.05)  # past the interpreter's start-up (slow on a loaded machine): the run has begun
        time.sleep(rng.uniform(0.2, 2.5))
        proc.send_signal(how)
        _, err = proc.communicate(timeout=60)
        if proc.returncode == 0:
            break
        # 130: perierr's own Ctrl-C exit; -SIGINT: stopped during the interpreter's start-up, before perierr ran
        assert proc.returncode in (130, -signal.SIGINT, -signal.SIGKILL), err.decode()
        stopped += 1
        if proc.returncode == 130:
            assert b"run the same command to resume" in err
    assert stopped >= 1  # at least one run was really stopped part-way
    assert list((out / "parts").glob("screen-*.parquet"))  # what was finished is kept
    done = subprocess.run([*cmd, "--out", str(out)], capture_output=True)
    assert done.returncode == 0, done.stderr.decode()
    a, b = Table.read(ref / "results.parquet"), Table.read(out / "results.parquet")
    assert a.meta == b.meta
    _assert_same_tables(a, b)
    assert (ref / "results.ecsv").read_bytes() == (out / "results.ecsv").read_bytes()
    assert not list(out.rglob(".*"))  # no temporary file of an interrupted write is left behind
    assert os.path.getsize(out / "results.parquet") == os.path.getsize(ref / "results.parquet")


@pytest.mark.slow
def test_a_hundred_thousand_rows_with_hundreds_of_bad_ones(tmp_path):
    # the check: 10^5 invented rows, 280 bad rows of seven kinds and 30 % without a radial velocity
    path, table, expected = _catalogue(tmp_path, n=100_000, seed=41, bad=40, no_rv=0.3)
    run = run_catalogue(path, tmp_path / "out", cut="distance_pc < 0.5 pc", treatment=FAST, seed=5, workers=2)
    res = Table.read(run.results[0])
    status = np.asarray(res["status"]).astype(str)
    assert_array_equal(res["row"], np.arange(len(table)))
    assert_array_equal(np.where(np.isin(status, SCREEN_OK), "ok", status), expected)
    for kind in set(expected) - {"ok"}:
        assert run.counts[kind] == int((expected == kind).sum())
    treated = np.flatnonzero(status == "treated")
    assert 20 <= treated.size <= 400
    for i in treated[:: max(1, treated.size // 8)]:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PerierrWarning)
            star = ObservedStar.from_mapping(table[i], row=int(i), strict=False)
            one = perierr.analyze(star, model="straight_line", n_samples=2000, compare=False,
                                  seed=star_seed(5, table["source_id"][i]))  # fmt: skip
        assert res["mc_distance_median_pc"][i] == one.monte_carlo.summaries["distance_pc"].median
        assert res["mc_speed_q84_kms"][i] == one.monte_carlo.summaries["speed_kms"].quantile(0.84)
