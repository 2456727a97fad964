"""The separation figure and its bands (perierr.report.figures.separation_figure, separation_bands).

References: the distance now is 1000 / parallax (the parsec's definition); quantiles with numpy.quantile
(method="hazen", Hyndman & Fan 1996, definition 5) and a weighted mid-point CDF interpolated with numpy.interp
for reweighted draws; the straight-line perihelion formulas of Matthews (1994, QJRAS 35, 1) as a lower bound of
every track (a straight track never comes closer than its d_ph); near the closest point a track is
sqrt(d^2 + v^2 (t - t_ph)^2), so the median over tracks dips to the median d_ph when the spread of t_ph times
v_ph is far below d_ph (common practice, no source); pixel positions from matplotlib's data-to-display
transform; the PNG signature and PDF header (the formats' specifications). Stars are invented.
"""

import dataclasses
import warnings

import matplotlib.image as mpimg
import numpy as np
import pytest

from perierr import ObservedStar, analyze
from perierr.demo import demo_path
from perierr.errors import InputError, PerierrWarning
from perierr.models import StraightLine
from perierr.models.orbit import OrbitModel, Plummer
from perierr.report.figures import separation_bands, separation_figure
from perierr.star import read_star_file

DPI = 150  # the figures are saved at this resolution


def _run(star, **kw):
    kw.setdefault("model", "straight_line")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return analyze(star, compare=False, **kw)


def _star(name, parallax, pmra, pmdec, rv, **errors):
    fields = dict(parallax_error=0.05, pmra_error=0.05, pmdec_error=0.05, radial_velocity_error=0.5,
                  ra_error=0.02, dec_error=0.02) | errors  # fmt: skip
    return ObservedStar.from_values(name=name, ra=15.0, dec=40.0, parallax=parallax, pmra=pmra, pmdec=pmdec,
                                    radial_velocity=rv, **fields)  # fmt: skip


@pytest.fixture(scope="module")
def demo():
    return _run(read_star_file(demo_path("kestrel-4.toml")), n_samples=4000, seed=1)


def _pixel(fig, ax, x, y, image):
    px, py = ax.transData.transform((x, y)) * DPI / fig.dpi
    return image[int(round(image.shape[0] - py)), int(round(px)), :3]


def _ordered(q):
    return bool(np.all(np.diff(q, axis=0) >= -1e-12 * np.abs(q[1:])))


def test_bands_are_ordered_start_at_the_distance_now_and_stay_above_the_perihelia(demo):
    b = separation_bands(demo, n_tracks=300, seed=5)
    assert b.quantiles.shape == (5, b.times_myr.size) and b.tracks.shape == (300, b.times_myr.size)
    assert _ordered(b.quantiles)  # 5 <= 16 <= 50 <= 84 <= 95 % at every time
    now = np.flatnonzero(b.times_myr == 0.0)[0]
    distance = 1000.0 / demo.star.mean[2]  # pc, the parsec's definition
    q = b.quantiles[:, now]
    assert q[1] <= distance <= q[3] and abs(q[2] - distance) < 0.5 * (q[3] - q[1])
    # every track stays above its straight-line d_ph, so each quantile of the curve stays above that of d_ph
    d_ph = StraightLine().evaluate(demo.monte_carlo.samples.values[b.rows]).distance_pc
    floor = np.quantile(d_ph, b.levels, method="hazen")
    assert np.all(b.quantiles >= floor[:, None] * (1 - 1e-9))
    # the window holds now and the t_ph 5-95 % interval with room on both sides
    t = demo.monte_carlo.summaries["time_myr"]
    assert b.times_myr[0] < 0.0 and b.times_myr[-1] > t.quantile(0.95)
    # the same seed gives the same tracks
    again = separation_bands(demo, n_tracks=300, seed=5)
    assert np.array_equal(again.rows, b.rows) and again.seed == 5


def test_a_sharp_timing_gives_a_median_curve_that_dips_to_the_median_perihelion():
    # 40 pc away, d_ph about 11 pc, t_ph known to about 0.01 Myr: v_ph sigma(t_ph) ~ 0.4 pc << d_ph
    a = _run(_star("invented wide pass", 25.0, 60.0, -35.0, -45.0), n_samples=3000, seed=3)
    b = separation_bands(a, seed=1)
    assert _ordered(b.quantiles)
    d = a.monte_carlo.summaries["distance_pc"]
    assert b.quantiles[2].min() == pytest.approx(d.median, rel=0.02)
    t_min = b.times_myr[np.argmin(b.quantiles[2])]
    assert t_min == pytest.approx(a.monte_carlo.summaries["time_myr"].median, abs=0.02)
    au = separation_bands(a, seed=1, unit="au")
    assert au.quantiles == pytest.approx(b.quantiles * 206264.80624709636, rel=1e-12)  # au per pc (IAU 2012)


def test_the_figure_draws_the_band_where_the_draws_pass(demo, tmp_path):
    path = tmp_path / "s.png"
    fig = separation_figure(demo, path, n_tracks=300, seed=5)
    b = separation_bands(demo, n_tracks=300, seed=5)
    ax = fig.axes[0]
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    image = mpimg.imread(path)
    # the median curve drawn is the bands' median
    (median,) = [ln for ln in ax.get_lines() if ln.get_label().startswith("median at each time")]
    assert np.array_equal(median.get_xdata(), b.times_myr) and np.array_equal(median.get_ydata(), b.quantiles[2])
    # at the median t_ph, between the 16 % curve and the median: the band's blue
    t_ph = demo.monte_carlo.summaries["time_myr"].median
    k = int(np.argmin(np.abs(b.times_myr - t_ph)))
    y = np.sqrt(b.quantiles[1, k] * b.quantiles[2, k])  # the middle on the log axis
    rgb = _pixel(fig, ax, b.times_myr[k], y, image)
    assert rgb[2] > rgb[0] + 0.2 and np.all(rgb < 0.9)
    # early on, well below the band (the draws are all about 21 pc away then): white
    k0 = int(0.02 * b.times_myr.size)
    assert np.all(_pixel(fig, ax, b.times_myr[k0], b.quantiles[2, k0] / 3, image) > 0.97)
    # now and the perihelion are marked and named
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert "now (epoch J2016)" in labels and any(s.startswith("perihelion") for s in labels)
    assert ax.get_yscale() == "log" and ax.get_xlim() == (b.times_myr[0], b.times_myr[-1])


def test_a_receding_star_and_pdf(tmp_path):
    # moving away (v_r > 0): the closest point was in the past
    a = _run(_star("invented receding star", 80.0, -150.0, 20.0, 12.0), n_samples=3000, seed=2)
    t = a.monte_carlo.summaries["time_myr"]
    assert t.quantile(0.95) < 0
    b = separation_bands(a, seed=2)
    assert _ordered(b.quantiles)
    assert b.times_myr[0] < t.quantile(0.05) and b.times_myr[-1] > 0
    now = np.flatnonzero(b.times_myr == 0.0)[0]
    assert b.quantiles[2, now] == pytest.approx(12.5, rel=2e-3)  # 1000 / 80 mas
    assert np.argmin(b.quantiles[2]) < now  # the dip lies in the past
    separation_figure(a, tmp_path / "r.pdf", seed=2, log=False)
    assert (tmp_path / "r.pdf").read_bytes()[:5] == b"%PDF-"


def test_weighted_draws_weight_the_bands():
    star = _star("invented faint star", 8.0, 25.0, -14.0, -60.0, parallax_error=1.6, pmra_error=0.3,
                 pmdec_error=0.3, radial_velocity_error=1.5)  # fmt: skip
    a = _run(star, n_samples=3000, seed=4, distance_prior="edsd:L=200pc", prior_method="reweight")
    b = separation_bands(a, n_tracks=500, seed=3)
    assert b.weights is not None and _ordered(b.quantiles)
    now = np.flatnonzero(b.times_myr == 0.0)[0]
    # reference: the weighted mid-point CDF of the tracks' distances now, interpolated at 1/2
    x = 1000.0 / a.monte_carlo.samples.values[b.rows, 2]
    order = np.argsort(x, kind="stable")
    w = b.weights[order]
    cdf = (np.cumsum(w) - 0.5 * w) / w.sum()
    assert b.quantiles[2, now] == pytest.approx(np.interp(0.5, cdf, x[order]), rel=1e-9)
    assert abs(b.quantiles[2, now] - np.median(x)) > 1e-3 * np.median(x)  # the weights matter here


def test_an_orbit_run_shows_the_straight_lines_beside_it(tmp_path):
    a = _run(read_star_file(demo_path("kestrel-4.toml")), model="orbit", n_samples=2000, seed=1)
    fig = separation_figure(a, tmp_path / "o.png", n_tracks=200, seed=4)
    b = separation_bands(a, n_tracks=200, seed=4)
    assert b.model == "orbit" and b.straight_median is not None and _ordered(b.quantiles)
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert "median, straight lines" in labels and "median at each time (orbit)" in labels
    now = np.flatnonzero(b.times_myr == 0.0)[0]
    assert b.quantiles[2, now] == pytest.approx(b.straight_median[now], rel=1e-12)  # the same draws, now
    # the Galactic tide over 0.65 Myr shifts the curve by far less than its width (and not by nothing)
    assert 0 < np.max(np.abs(b.quantiles[2] - b.straight_median)) < 0.05 * np.max(b.quantiles[2])
    assert (tmp_path / "o.png").stat().st_size > 20_000


def test_a_model_that_cannot_be_rebuilt_is_asked_for(demo):
    custom = OrbitModel(potential=Plummer(mass_msun=1.0, b_pc=100.0))
    a = dataclasses.replace(demo, model=custom.describe())
    with pytest.raises(InputError, match="model="):
        separation_bands(a)
    b = separation_bands(a, model=custom, n_tracks=50, seed=1)
    straight = separation_bands(demo, n_tracks=50, seed=1)
    # a 1 Msun Plummer sphere at the Galactic centre: no tide to speak of, the straight lines
    assert b.quantiles == pytest.approx(straight.quantiles, rel=1e-6)
    with pytest.raises(InputError, match="model"):
        separation_bands(demo, model=custom)  # not the model that ran
    with pytest.raises(InputError, match="n_tracks"):
        separation_bands(demo, n_tracks=1)
    with pytest.raises(InputError, match="unit"):
        separation_figure(demo, unit="ly")
