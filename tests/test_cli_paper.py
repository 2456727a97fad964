"""The paper faces from the command line: figures and the one-page report, checked before the work."""

import contextlib
import io
import re
import warnings
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest

from perierr import analyze
from perierr.cli import EXIT_INPUT, main
from perierr.demo import demo_path
from perierr.errors import PerierrWarning
from perierr.report.rounding import round_interval
from perierr.star import read_star_file

STAR = str(demo_path("kestrel-4.toml"))
BASE = ["run", STAR, "--model", "straight_line", "--samples", "4000", "--seed", "3", "--quiet"]


def _run(argv):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err):
        status = main(argv, out=out)
    return status, out.getvalue(), err.getvalue()


def test_figures_and_page_are_written_from_one_run(tmp_path):
    status, out, _ = _run(BASE + ["--figures", str(tmp_path / "k4.png"), "--page", str(tmp_path / "k4.html")])
    assert status == 0
    names = ("distance", "corner", "separation", "budget")
    for name in names:
        path = tmp_path / f"k4-{name}.png"
        assert f"figure written to {path}" in out
        image = mpimg.imread(path)  # matplotlib's PNG reader is the reference decoder
        # a figure, not an empty canvas: at least 2 % of the pixels are not white
        assert image.shape[0] > 300 and image.shape[1] > 300
        assert np.mean(image[..., :3].min(axis=2) < 0.9) > 0.02, name
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([f"k4-{n}.png" for n in names] + ["k4.html"])
    page = (tmp_path / "k4.html").read_text(encoding="utf-8")
    assert page.startswith("<!DOCTYPE html>") and "Kestrel-4 (invented)" in page
    # the page quotes the same rounded median as the API with the same star, model, draws and seed
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        a = analyze(read_star_file(STAR), model="straight_line", n_samples=4000, seed=3)
    s = a.monte_carlo.summaries["speed_kms"]
    r = round_interval(s.median, s.median - s.quantile(0.16), s.quantile(0.84) - s.median)
    assert f"{r.value}" in page
    # the page's plan: the what-if of halving the error that dominates d_ph (the demo star on straight lines:
    # its pmdec, 0.029 mas/yr in the star file), on the run's seed
    assert a.budget.dominant("distance_pc") == "pmdec"
    assert 'id="plan"' in page and "Measure pmdec to 0.0145 mas/yr" in page


def test_the_pages_plan_follows_the_runs_options(tmp_path):
    # a parallax zero-point with its error: the page's plan starts from the star as read with the same zero-point
    # (the planner applies it as the analysis does), so its today's d_ph width is the analysis's on those draws
    status, _, _ = _run(BASE + ["--parallax-offset=-0.017,0.005", "--page", str(tmp_path / "k4.html")])
    assert status == 0
    page = (tmp_path / "k4.html").read_text(encoding="utf-8")
    assert 'id="plan"' in page and "Measure pmdec to 0.0145 mas/yr" in page
    # only the position uncertain (invented): d_ph does not spread, there is nothing to plan, the page says what
    # dominates instead
    still = tmp_path / "still.toml"
    text = Path(STAR).read_text(encoding="utf-8")
    for field in ("parallax_error", "pmra_error", "pmdec_error", "radial_velocity_error"):
        text = re.sub(rf"^{field} = .*$", f"{field} = 0.0", text, flags=re.M)
    still.write_text(text, encoding="utf-8")
    status, _, err = _run(["run", str(still), "--model", "straight_line", "--samples", "500", "--seed", "1",
                           "--quiet", "--page", str(tmp_path / "still.html")])  # fmt: skip
    assert status == 0, err
    page = (tmp_path / "still.html").read_text(encoding="utf-8")
    assert 'id="plan"' not in page


def test_pdf_figures_are_pdf(tmp_path):
    status, out, _ = _run(BASE + ["--figures", str(tmp_path / "k4.pdf")])
    assert status == 0
    for name in ("distance", "corner", "separation", "budget"):
        assert (tmp_path / f"k4-{name}.pdf").read_bytes()[:5] == b"%PDF-"  # the PDF header (ISO 32000-1, 7.5.2)


@pytest.mark.parametrize(("option", "value", "expected"), [
    ("--figures", "k4.svg", "ending in .png or .pdf"),
    ("--figures", "missing/k4.png", "does not exist"),
    ("--page", "k4.txt", "ending in .html (.htm) or .pdf"),
    ("--page", "missing/k4.html", "does not exist"),
])  # fmt: skip
def test_bad_output_names_are_refused_before_the_work(tmp_path, option, value, expected):
    status, out, err = _run(BASE + [option, str(tmp_path / value)])
    assert status == EXIT_INPUT
    assert option in err and expected in err
    assert out == ""  # refused before the analysis: no report printed
    assert [p for p in tmp_path.rglob("*") if p.is_file()] == []


def _second_star(tmp_path):
    # an invented second star: the demo star's file with another name and a slower radial velocity
    text = Path(STAR).read_text(encoding="utf-8")
    text = re.sub(r'^name = .*$', 'name = "Kestrel-9 (invented)"', text, flags=re.M)
    text = re.sub(r"^radial_velocity = .*$", "radial_velocity = -24.0", text, flags=re.M)
    path = tmp_path / "k9.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_several_star_files_give_one_row_each_in_order(tmp_path):
    from astropy.table import QTable

    from perierr.report import result_table

    k9 = _second_star(tmp_path)
    table = tmp_path / "stars.ecsv"
    argv = ["run", STAR, str(k9), "--model", "straight_line", "--samples", "2000", "--seed", "5", "--quiet",
            "--paper-table", str(table)]  # fmt: skip
    status, out, _ = _run(argv)
    assert status == 0
    assert f"[1 of 2] {STAR}" in out and f"[2 of 2] {k9}" in out
    back = QTable.read(table, format="ascii.ecsv")
    assert list(back["star"]) == ["Kestrel-4 (invented)", "Kestrel-9 (invented)"]
    # each row is what the API gives for that star alone, with the same model, draws and seed
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        api = [analyze(read_star_file(p), model="straight_line", n_samples=2000, seed=5) for p in (STAR, k9)]
    expect = result_table(api)
    for column in ("t_ph", "d_ph", "d_ph_plus", "v_ph_minus"):
        np.testing.assert_allclose(np.asarray(back[column]), np.asarray(expect[column]), rtol=1e-12)


def test_several_star_files_refuse_one_star_outputs_and_name_a_bad_file(tmp_path):
    k9 = _second_star(tmp_path)
    status, out, err = _run(["run", STAR, str(k9), "--json", str(tmp_path / "r.json"), "--quiet"])
    assert status == EXIT_INPUT and "--json" in err and "one star file" in err and out == ""
    bad = tmp_path / "bad.toml"
    bad.write_text(Path(k9).read_text(encoding="utf-8") + "paralax = 3.0\n", encoding="utf-8")  # a misspelt field
    status, out, err = _run(["run", STAR, str(bad), "--model", "straight_line", "--quiet",
                             "--paper-table", str(tmp_path / "t.tex")])  # fmt: skip
    assert status == EXIT_INPUT and str(bad) in err
    assert out == "" and not (tmp_path / "t.tex").exists()  # every file is read before the work
