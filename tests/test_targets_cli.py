"""``perierr targets``: the command from star files and a table to a ranked list, its files and its refusals.

Written against ``perierr.cli.main(["targets", ...])`` (the command is added by ``perierr.cli_targets``).
"""

import math

import astropy.units as u
import matplotlib.image
import pytest
from astropy.table import QTable, Table

from perierr.cautions import HAZARD
from perierr.cli import main
from perierr.demo import demo_path

K4 = str(demo_path("kestrel-4.toml"))
FAST = ["--model", "straight_line", "--samples", "200", "--futures", "20", "--seed", "4", "--quiet"]
COST = "photon:radial_velocity=1@1@12@0.01,parallax=2@0.05@12@0.005"


@pytest.fixture
def table_file(tmp_path):
    t = Table.read(demo_path("kestrel_survey.ecsv"))
    t["phot_g_mean_mag"] = [8.1, 9.4, 7.2, 6.9, 12.5, 13.0][: len(t)] * u.mag
    path = tmp_path / "targets.ecsv"
    t.write(path)
    return path, len(t)


def _run(args, capsys):
    status = main(["targets", *args])
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def test_writes_an_ecsv_that_round_trips_with_units(tmp_path, table_file, capsys):
    table, n_rows = table_file
    out = tmp_path / "list.ecsv"
    status, text, err = _run([K4, "--table", str(table), "--measure", "radial_velocity=0.3,0.1", "--measure",
                              "parallax=0.02", "--cost", COST, "--out", str(out), *FAST], capsys)
    assert status == 0, err
    back = QTable.read(out)  # astropy reads it back (the reference for the format)
    assert len(back) == (1 + n_rows) * 3  # every star x candidate, the bad-parallax row included
    assert back["hours"].unit == u.h and back["today_width90"].unit == u.au
    assert back["gain_per_hour"].unit == u.h**-1 and back["magnitude"].unit == u.mag
    assert back["rank"].tolist() == list(range(1, len(back) + 1))
    assert back.meta["perierr"]["caution"] == HAZARD and back.meta["perierr"]["seed"] == 4
    ok = back[back["status"] == "ok"][0]
    # photon-limited hours by hand (common practice, no source)
    expected = (1.0 / ok["precision"]) ** 2 * 10 ** (0.4 * (ok["magnitude"].to_value(u.mag) - 12.0))
    if ok["input"] == "parallax":
        expected = 2.0 * (0.05 / ok["precision"]) ** 2 * 10 ** (0.4 * (ok["magnitude"].to_value(u.mag) - 12.0))
    assert ok["hours"].to_value(u.h) == pytest.approx(expected, rel=1e-9)
    failed = back[back["status"] == "failed"]
    assert len(failed) == 3 and "parallax" in str(failed["reason"][0])
    report, _, files = text.partition("\n\ntarget list written to")
    assert report.rstrip().endswith(HAZARD) and files.strip().endswith("list.ecsv")


def test_terminal_table_is_aligned(table_file, capsys):
    table, _ = table_file
    status, text, err = _run(["--table", str(table), "--measure", "rv=0.3", "--cost", COST, *FAST], capsys)
    assert status == 0, err
    lines = text.splitlines()
    head = next(i for i, line in enumerate(lines) if line.startswith("rank"))
    start = lines[head].index("status")
    body = lines[head + 2 : head + 2 + 6]
    assert all(line[start - 2 : start] == "  " and line[start:start + 2] in ("ok", "fa", "no") for line in body)


def test_plot_is_written(tmp_path, table_file, capsys):
    table, _ = table_file
    plot = tmp_path / "list.png"
    status, _, err = _run(["--table", str(table), "--measure", "rv=0.3", "--cost", COST, "--plot", str(plot), *FAST],
                          capsys)
    assert status == 0, err
    image = matplotlib.image.imread(plot)  # matplotlib reads it back as an RGBA image
    assert image.ndim == 3 and image.shape[0] > 300 and image.shape[2] == 4


def test_cost_table_option(tmp_path, capsys):
    hours = tmp_path / "hours.csv"
    hours.write_text("input,precision,hours\nradial_velocity,1.0,0.5\nradial_velocity,0.1,50\n")
    status, text, err = _run([K4, "--measure", "rv=0.3162277660168379", "--cost-table", str(hours),
                              "--out", str(tmp_path / "o.ecsv"), *FAST], capsys)
    assert status == 0, err
    row = QTable.read(tmp_path / "o.ecsv")[0]
    # log-log midpoint of (1, 0.5 h) and (0.1, 50 h): the geometric mean, 5 h
    assert row["hours"].to_value(u.h) == pytest.approx(math.sqrt(0.5 * 50), rel=1e-9)


@pytest.mark.parametrize(
    "args, words",
    [
        (["--measure", "radial_velocity"], "--measure"),
        (["--measure", "speed=0.1"], "--measure"),
        (["--measure", "rv=0.1", "--cost", "photon:rv=1@1"], "--cost"),
        (["--measure", "rv=0.1", "--cost", "linear:rv=1@1@12"], "--cost"),
        (["--measure", "rv=0.1", "--goal-decide", "far"], "far"),
        (["--measure", "rv=0.1", "--plot", "x.svg"], "--plot"),
        (["--measure", "rv=0.1", "--out", "x.csv"], "--out"),
        (["--measure", "rv=0.1", "--out", "no/such/folder/x.ecsv"], "--out"),
        (["--measure", "rv=0.1", "--futures", "5"], "--futures"),
        (["--measure", "rv=0.1", "--columns", "vizier"], "--columns"),
        (["--measure", "rv=0.1", "--prior-method", "mcmc"], "--prior-method"),
    ],
)
def test_bad_input_is_one_line_with_status_2(tmp_path, monkeypatch, capsys, args, words):
    monkeypatch.chdir(tmp_path)
    status, text, err = _run([K4, *FAST, *args], capsys)
    assert status == 2
    assert err.count("\n") == 1 and words in err
    assert text == ""


def test_bad_star_file_and_bad_cost_row_are_named(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    kept = [line for line in open(K4).read().splitlines() if not line.startswith("phot_g_mean_mag")]
    bad.write_text("\n".join(kept) + "\nmag = 50\n")
    status, _, err = _run([str(bad), "--measure", "rv=0.1", *FAST], capsys)
    assert status == 2 and "bad.toml: mag" in err and "[-5, 30]" in err
    hours = tmp_path / "hours.csv"
    hours.write_text("input,precision,hours\nradial_velocity,1.0,0.5\nradial_velocity,0.1,-3\n")
    status, _, err = _run([K4, "--measure", "rv=0.1", "--cost-table", str(hours), *FAST], capsys)
    assert status == 2 and "row 1" in err and "--cost-table hours" in err
    status, _, err = _run(["--table", str(demo_path("kestrel_survey.ecsv")), "--columns", "Plx=parallax",
                           "--measure", "rv=0.1", *FAST], capsys)
    assert status == 2 and "--columns" in err and "Plx" in err


def test_output_paths_are_checked_before_the_work(tmp_path, capsys):
    # an unreadable table would stop the work; the bad --out path is reported first
    status, _, err = _run(["--table", str(tmp_path / "missing.ecsv"), "--measure", "rv=0.1", "--out",
                           str(tmp_path / "none" / "o.ecsv"), *FAST], capsys)
    assert status == 2 and "--out" in err and "missing.ecsv" not in err


def test_table_magnitudes_by_column_pairs(tmp_path, capsys):
    t = Table.read(demo_path("kestrel_survey.ecsv"))[:2]
    t["Vmag"] = [9.0, 10.0]
    t["band"] = ["V", "V"]
    path = tmp_path / "v.ecsv"
    t.write(path)
    out = tmp_path / "o.ecsv"
    status, _, err = _run(["--table", str(path), "--columns", "mag=Vmag,mag_band=band", "--measure", "rv=0.3",
                           "--cost", COST, "--out", str(out), *FAST], capsys)
    assert status == 0, err
    back = QTable.read(out)
    assert sorted(back["magnitude"].to_value(u.mag).tolist()) == [9.0, 10.0]
    assert set(back["magnitude_band"]) == {"V"}


def _targets_args(argv):
    from perierr.cli import _parser

    return _parser().parse_args(["targets", *argv])


@pytest.mark.parametrize(
    "extra, field, words",
    [
        (["--seed", "-1"], "--seed", ">= 0"),
        (["--alpha", "0.7"], "--alpha", "0.5"),
        (["--alpha", "0"], "--alpha", "0.5"),
        (["--goal-decide", "far"], "--goal-decide", "far"),
        (["--cost-table", "missing.csv"], "--cost-table", "not found"),
        (["--cost", "photon:rv=1@1@12,rv=2@1@12"], "--cost", "twice"),
        (["--cost", "photon:rv=1@1@12,overhead=1,overhead=2"], "--cost", "twice"),
        (["--prior-method", "mcmc"], "--prior-method", "reweights"),
        (["--json", "x.txt"], "--json", ".json"),
        (["--plot", "x.svg"], "--plot", ".png or .pdf"),
        (["--out", "x.csv"], "--out", ".ecsv"),
        (["--out", "none/x.ecsv"], "--out", "does not exist"),
        (["--distance-prior", "flat"], "--distance-prior", ""),
        (["--parallax-offset", "abc"], "--parallax-offset", ""),
        (["--inflate", "parallax=x"], "--inflate", ""),
        (["--table", "stars.txt"], "--table", "unknown file type"),
        (["--columns", "mag=Vmag"], "--columns", "--table"),
    ],
)
def test_check_options_names_the_command_line_option(tmp_path, monkeypatch, extra, field, words):
    from perierr.cli_targets import check_options
    from perierr.errors import InputError

    monkeypatch.chdir(tmp_path)
    old = tmp_path / "old.ecsv"
    old.write_text("an old result\n")
    args = _targets_args([K4, "--measure", "rv=0.1", "--out", str(old), *extra])  # a second --out replaces it
    with pytest.raises(InputError) as err:
        check_options(args)
    assert err.value.field == field and words in str(err.value)
    assert old.read_text() == "an old result\n"  # nothing removed or written


def test_check_options_refuses_a_missing_measure_and_a_zero_precision(tmp_path):
    from perierr.cli_targets import check_options
    from perierr.errors import InputError

    for argv in ([K4], [K4, "--measure", "rv=0"]):
        with pytest.raises(InputError) as err:
            check_options(_targets_args(argv))
        assert err.value.field == "--measure"
    ok = check_options(_targets_args([K4, "--measure", "rv=0.3,0.1", "--alpha", "0.1", "--cost", COST]))
    assert ok["candidates"] == {"radial_velocity": [0.3, 0.1]} and ok["goal"].alpha == pytest.approx(0.1)
    # the parsed photon cost prices 0.1 km/s at 12 mag: 1 h x (1 / 0.1)^2 (common practice, no source)
    assert ok["cost"].hours("radial_velocity", 0.1, 12.0) == pytest.approx(100.0, rel=1e-12)


def test_a_refusal_from_the_star_data_removes_no_old_output(tmp_path, capsys):
    old = tmp_path / "old.ecsv"
    old.write_text("an old result\n")
    bad = tmp_path / "bad.toml"
    bad.write_text("parallax = 12\n")
    status, _, err = _run([str(bad), "--measure", "rv=0.1", "--out", str(old), *FAST], capsys)
    assert status == 2 and "bad.toml" in err
    assert old.read_text() == "an old result\n"


def test_help_has_one_percent_sign_and_its_own_prior_wording(capsys):
    with pytest.raises(SystemExit) as done:
        main(["targets", "--help"])
    assert done.value.code == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "90 % width" in text and "%%" not in text
    assert "reweights" in text and "switch to MCMC" not in text and "budget share" not in text


def test_explicit_magnitude_pairs_override_the_automatic_pick(tmp_path, capsys):
    t = Table.read(demo_path("kestrel_survey.ecsv"))[:2]
    t["phot_g_mean_mag"] = [8.0, 8.5] * u.mag
    t["Vmag"] = [9.0, 10.0]
    path = tmp_path / "gv.ecsv"
    t.write(path)
    out = tmp_path / "o.ecsv"
    status, _, err = _run(["--table", str(path), "--columns", "mag=Vmag", "--measure", "rv=0.3", "--cost", COST,
                           "--out", str(out), *FAST], capsys)
    assert status == 0, err
    back = QTable.read(out)
    assert sorted(back["magnitude"].to_value(u.mag).tolist()) == [9.0, 10.0]
    assert set(back["status"]) == {"ok"}
    # hours at the V magnitude (photon-limited, common practice, no source): 1 h (1 / 0.3)^2 10^(0.4 (m - 12))
    for row in back:
        m = row["magnitude"].to_value(u.mag)
        assert row["hours"].to_value(u.h) == pytest.approx((1 / 0.3) ** 2 * 10 ** (0.4 * (m - 12.0)), rel=1e-9)


def test_a_masked_magnitude_beside_its_band_keeps_the_star(tmp_path, capsys):
    from astropy.table import MaskedColumn

    t = Table.read(demo_path("kestrel_survey.ecsv"))[:2]
    t.remove_columns(["phot_g_mean_mag", "phot_g_mean_mag_error"])  # the survey's own G; this row gives a V
    t["mag"] = MaskedColumn([9.0, 0.0], mask=[False, True])
    t["mag_band"] = ["V", "V"]
    path = tmp_path / "masked.ecsv"
    t.write(path)
    out = tmp_path / "o.ecsv"
    status, _, err = _run(["--table", str(path), "--measure", "rv=0.3", "--cost", COST, "--out", str(out), *FAST],
                          capsys)
    assert status == 0, err
    back = QTable.read(out)
    assert len(back) == 2
    by_status = {str(r["status"]): r for r in back}
    assert by_status["ok"]["magnitude"].to_value(u.mag) == pytest.approx(9.0, abs=1e-12)
    missing = by_status["no-magnitude"]
    assert "mag_band given without its magnitude" in str(missing["reason"])
    assert math.isfinite(missing["today_width90"].to_value(u.au))
