"""The corner figure (perierr.report.figures.corner_figure): panels, titles, histograms, contours, weights, files.

References: numpy.histogram (with weights) for the heights of the 1-D histograms; numpy.quantile with
method="hazen" (Hyndman & Fan 1996, definition 5) for the intervals of the inputs; the probability inside the
k-sigma ellipse of a 2-D Gaussian, 1 - exp(-k^2/2) (e.g. Press et al. 2007, Numerical Recipes, Sect. 15.6; from
memory: 39.3 % and 86.5 %); the Particle Data Group rounding rule as perierr.report.rounding implements it (its
own tests check it against the Review of Particle Physics); matplotlib's own data-to-display transform for pixel
positions and its Path.contains_points for what a contour encloses; the PNG signature and PDF header (the formats'
specifications; common practice, no source); astropy's au per pc. Stars are invented.
"""

import warnings

import astropy.units as u
import matplotlib.image as mpimg
import numpy as np
import pytest
from matplotlib.contour import ContourSet
from matplotlib.patches import Polygon

from perierr import ObservedStar, analyze
from perierr.demo import demo_path
from perierr.errors import InputError, PerierrWarning
from perierr.report.figures import corner_figure
from perierr.report.rounding import round_interval
from perierr.star import read_star_file

DPI = 150  # the figures are saved at this resolution
AU_PER_PC = (1 * u.pc).to_value(u.au)  # astropy


def _quiet(star, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return analyze(star, model="straight_line", compare=False, **kw)


@pytest.fixture(scope="module")
def analysis():
    return _quiet(read_star_file(demo_path("kestrel-4.toml")), n_samples=4000, seed=1)


@pytest.fixture(scope="module")
def figure(analysis, tmp_path_factory):
    path = tmp_path_factory.mktemp("corner") / "c.png"
    return corner_figure(analysis, path), path


def _expected_title(symbol, unit, q16, q50, q84):
    """The PDG-rounded interval as the title should print it, from round_interval's strings."""
    r = round_interval(q50, q50 - q16, q84 - q50)
    text = f"${r.value} \\pm {r.plus}$" if r.minus == r.plus else f"${r.value}^{{+{r.plus}}}_{{-{r.minus}}}$"
    return f"{symbol} = {text} {unit}"


def _histogram(ax):
    """Bin edges and heights of corner's step histogram (the vertices of its one Polygon)."""
    (step,) = [p for p in ax.patches if isinstance(p, Polygon)]
    xy = step.get_xy()
    return xy[0::2, 0], xy[1:-1:2, 1]


def _pixel(fig, ax, x, y, image):
    px, py = ax.transData.transform((x, y)) * DPI / fig.dpi
    return image[int(round(image.shape[0] - py)), int(round(px)), :3]


def test_three_by_three_panels_titled_with_perierrs_rounded_intervals(analysis, figure):
    fig, path = figure
    assert len(fig.axes) == 9
    axes = np.array(fig.axes).reshape(3, 3)
    s = analysis.monte_carlo.summaries
    for i, (q, symbol, unit, scale) in enumerate([
        ("time_myr", r"$t_\mathrm{ph}$", "Myr", 1.0),
        ("distance_pc", r"$d_\mathrm{ph}$", "au", AU_PER_PC),
        ("speed_kms", r"$v_\mathrm{ph}$", "km/s", 1.0),
    ]):  # fmt: skip
        q16, q50, q84 = (s[q].quantile(lv) * scale for lv in (0.16, 0.5, 0.84))
        assert axes[i, i].get_title() == _expected_title(symbol, unit, q16, q50, q84)
    assert axes[1, 1].get_title() == r"$d_\mathrm{ph}$ = $19000 \pm 600$ au"  # the demo star, rounded by hand
    assert not any(axes[0, k].has_data() or axes[0, k].get_frame_on() for k in (1, 2))  # the upper triangle: empty
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and path.stat().st_size > 30_000


def test_the_histograms_centre_on_the_median(analysis, figure):
    fig, _ = figure
    axes = np.array(fig.axes).reshape(3, 3)
    s = analysis.monte_carlo.summaries
    for i, (q, scale) in enumerate([("time_myr", 1.0), ("distance_pc", AU_PER_PC), ("speed_kms", 1.0)]):
        edges, heights = _histogram(axes[i, i])
        centres = 0.5 * (edges[1:] + edges[:-1])
        mean = np.sum(centres * heights) / np.sum(heights)
        half = 0.5 * (s[q].quantile(0.84) - s[q].quantile(0.16)) * scale
        # near-Gaussian outputs (4,000 draws): the histogram's mean within 5 % of the half-width of the median
        assert mean == pytest.approx(s[q].median * scale, abs=0.05 * half)
        # and its tallest bin within two bins of it
        assert abs(centres[np.argmax(heights)] - s[q].median * scale) <= 2 * (edges[1] - edges[0])
        # heights are the counts of the draws in each bin (numpy.histogram), the draws outside the range left out
        x = analysis.monte_carlo.perihelion.output(q)[analysis.monte_carlo.valid] * scale
        assert heights == pytest.approx(np.histogram(x, bins=edges)[0], abs=1e-9)


def test_the_densest_draws_are_drawn_and_the_contours_enclose_their_probabilities(analysis, figure):
    fig, path = figure
    image = mpimg.imread(path)
    axes = np.array(fig.axes).reshape(3, 3)
    ax = axes[1, 0]  # t_ph (x) against d_ph (y)
    mc = analysis.monte_carlo
    t = mc.perihelion.time_myr[mc.valid]
    d = mc.perihelion.distance_pc[mc.valid] * AU_PER_PC
    h, xe, ye = np.histogram2d(t, d, bins=12, range=[ax.get_xlim(), ax.get_ylim()])
    i, j = np.unravel_index(np.argmax(h), h.shape)
    rgb = _pixel(fig, ax, 0.5 * (xe[i] + xe[i + 1]), 0.5 * (ye[j] + ye[j + 1]), image)
    assert np.all(rgb < 0.85) and rgb[2] > rgb[0] + 0.2  # the inner fill: the palette's blue, not white
    # an empty corner of the panel (t and d are positively correlated) stays white
    (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
    assert np.all(_pixel(fig, ax, x0 + 0.03 * (x1 - x0), y1 - 0.03 * (y1 - y0), image) > 0.97)
    # the line contours: the 39 % one solid, the 86 % one dashed; each encloses about that share of the draws
    (lines,) = [c for c in ax.collections if isinstance(c, ContourSet) and not c.filled]
    paths = lines.get_paths()
    points = ax.transData.transform(np.column_stack([t, d]))
    inside = [np.mean(lines.get_transform().transform_path(p).contains_points(points)) for p in paths]
    assert inside == pytest.approx([1 - np.exp(-2.0), 1 - np.exp(-0.5)], abs=0.05)  # levels in increasing density
    dashes = [ls[1] for ls in lines.get_linestyle()]
    assert dashes[0] is not None and dashes[1] is None  # 86 %: dashed; 39 %: solid
    legend = {t.get_text(): h for t, h in zip(fig.legends[0].get_texts(), fig.legends[0].legend_handles)}
    assert legend["39 % of draws inside"].get_linestyle() == "-"
    assert legend["86 % of draws inside"].get_linestyle() == "--"


def test_nine_by_nine_with_the_inputs(analysis):
    fig = corner_figure(analysis, inputs=True, unit="pc")  # not saved: 81 panels take seconds to write
    assert len(fig.axes) == 81
    axes = np.array(fig.axes).reshape(9, 9)
    plx = analysis.monte_carlo.samples.values[analysis.monte_carlo.valid, 2]
    q16, q50, q84 = np.quantile(plx, [0.16, 0.5, 0.84], method="hazen")
    assert axes[5, 5].get_title() == _expected_title(r"$\varpi$", "mas", q16, q50, q84)
    assert axes[8, 8].get_xlabel() == r"$v_r$ [km/s]"
    assert axes[8, 3].get_xlabel() == r"$\Delta\alpha^*$ [mas]"  # corner labels the bottom row
    assert axes[1, 1].get_title().endswith(" pc")


def test_pdf_by_its_suffix(analysis, tmp_path):
    corner_figure(analysis, tmp_path / "c.pdf")
    data = (tmp_path / "c.pdf").read_bytes()
    assert data[:5] == b"%PDF-" and len(data) > 20_000


def test_weighted_draws_weight_the_histograms(tmp_path):
    # a parallax at 5 sigma under a distance prior: importance weights that matter
    star = ObservedStar.from_values(
        name="invented faint star", ra=40.0, dec=12.0, parallax=8.0, parallax_error=1.6,
        pmra=25.0, pmra_error=0.3, pmdec=-14.0, pmdec_error=0.3, radial_velocity=-60.0, radial_velocity_error=1.5,
    )  # fmt: skip
    a = _quiet(star, n_samples=3000, seed=4, distance_prior="edsd:L=200pc", prior_method="reweight")
    mc = a.monte_carlo
    assert mc.samples.weights is not None
    fig = corner_figure(a, tmp_path / "w.png", unit="pc")
    axes = np.array(fig.axes).reshape(3, 3)
    w = mc.samples.weights[mc.valid]
    for i, q in enumerate(("time_myr", "distance_pc", "speed_kms")):
        edges, heights = _histogram(axes[i, i])
        x = mc.perihelion.output(q)[mc.valid]
        reference = np.histogram(x, bins=edges, weights=w)[0]
        assert heights == pytest.approx(reference, rel=1e-9, abs=1e-12 * reference.max())
        plain = np.histogram(x, bins=edges)[0] * (w.sum() / w.size)
        assert np.max(np.abs(reference - plain)) > 0.05 * reference.max()  # the weights change the picture
    s = mc.summaries["distance_pc"]
    assert axes[1, 1].get_title() == _expected_title(
        r"$d_\mathrm{ph}$", "pc", s.quantile(0.16), s.median, s.quantile(0.84)
    )
    assert "weighted" in fig.legends[0].get_title().get_text()
    assert (tmp_path / "w.png").stat().st_size > 30_000


def test_a_column_without_spread_is_left_out_and_named():
    # ra and dec held exact: their draws are all equal (corner cannot bin them); the figure says so
    star = ObservedStar.from_values(
        name="invented exact-position star", ra=150.0, dec=-40.0, parallax=30.0, parallax_error=0.05,
        pmra=120.0, pmra_error=0.05, pmdec=-80.0, pmdec_error=0.05, radial_velocity=-25.0, radial_velocity_error=0.4,
    )  # fmt: skip
    a = _quiet(star, n_samples=2000, seed=2)
    fig = corner_figure(a, inputs=True)
    assert len(fig.axes) == 49  # 7 x 7: three outputs, parallax, two proper motions, radial velocity
    about = fig.legends[0].get_title().get_text()
    assert "no spread, not shown" in about and r"$\Delta\alpha^*$ = 0 mas" in about


def test_bad_unit_and_file_name_are_refused_before_drawing(analysis, tmp_path):
    with pytest.raises(InputError, match="unit"):
        corner_figure(analysis, unit="ly")
    with pytest.raises(InputError, match="figure"):
        corner_figure(analysis, tmp_path / "c.svg")
    assert not (tmp_path / "c.svg").exists()


def test_every_figure_from_one_pattern(analysis, tmp_path):
    from perierr.report.figures import FIGURE_NAMES, figure_paths, write_figures

    paths = figure_paths(tmp_path / "k4.png")
    assert [p.name for p in paths] == [f"k4-{n}.png" for n in FIGURE_NAMES]
    with pytest.raises(InputError, match="--figures"):
        figure_paths(tmp_path / "k4.svg", option="--figures")
    written = write_figures(analysis, tmp_path / "k4.png", seed=1)
    assert written == paths
    for p in paths:
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # the PNG signature
