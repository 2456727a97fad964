"""Figures of an analysis (perierr.report.figures): files of the expected size and kind, drawn where expected.

References: the PNG and PDF signatures (the formats' specifications: PNG's eight-byte signature, PDF's "%PDF-"
header; common practice, no source), pixel positions from matplotlib's own data-to-display transform, the
Okabe & Ito (2008) colour-blind-safe palette ("Color Universal Design"; its hex values from memory), astropy's
au per pc.
Stars are invented.
"""

import warnings

import astropy.units as u
import matplotlib.image as mpimg
import numpy as np
import pytest

from perierr import analyze
from perierr.demo import demo_path
from perierr.errors import InputError, PerierrWarning
from perierr.report.figures import PALETTE, budget_figure, distance_figure
from perierr.star import read_star_file

DPI = 150  # the figures are saved at this resolution
AU_PER_PC = (1 * u.pc).to_value(u.au)  # astropy


@pytest.fixture(scope="module")
def analysis():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return analyze(read_star_file(demo_path("kestrel-4.toml")), model="straight_line", n_samples=20_000,
                       seed=1, compare=False)  # fmt: skip


def _pixel(fig, ax, x, y, image):
    """RGB of the saved image at data point (x, y)."""
    px, py = ax.transData.transform((x, y)) * DPI / fig.dpi
    height = image.shape[0]
    return image[int(round(height - py)), int(round(px)), :3]


def test_the_distance_figure_marks_the_median_where_it_is(analysis, tmp_path):
    path = tmp_path / "d.png"
    fig = distance_figure(analysis, path)
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    image = mpimg.imread(path)
    w, h = fig.get_size_inches() * DPI
    assert image.shape[:2] == (round(h), round(w))
    ax = fig.axes[0]
    median_au = analysis.monte_carlo.summaries["distance_pc"].median * AU_PER_PC
    y_low = ax.get_ylim()[1] * 0.02
    assert np.all(_pixel(fig, ax, median_au, y_low, image) < 0.2)  # the black median line
    # the histogram is drawn in the palette's sky blue where its bars stand, away from the shaded intervals
    q05 = analysis.monte_carlo.summaries["distance_pc"].quantile(0.05) * AU_PER_PC
    left = q05 - 0.3 * (median_au - q05)
    blue = np.array([int(PALETTE[2][i : i + 2], 16) / 255 for i in (1, 3, 5)])
    assert np.allclose(_pixel(fig, ax, left, y_low, image), blue, atol=0.08)
    # the threshold at 20000 au is inside the plotted range and is labelled with its probability
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    p = analysis.monte_carlo.thresholds[3].probability
    assert f"20000 au: P = {p:.3g}" in labels


def test_pdf_and_bad_names(analysis, tmp_path):
    distance_figure(analysis, tmp_path / "d.pdf", unit="pc")
    assert (tmp_path / "d.pdf").read_bytes()[:5] == b"%PDF-"
    with pytest.raises(InputError, match="figure"):
        distance_figure(analysis, tmp_path / "d.jpg")
    with pytest.raises(InputError, match="unit"):
        distance_figure(analysis, unit="ly")
    assert not (tmp_path / "d.jpg").exists()


def test_the_budget_bars_are_the_shares(analysis, tmp_path):
    fig = budget_figure(analysis, tmp_path / "b.png")
    bars = fig.axes[0].patches
    shares = analysis.budget.share("distance_pc")
    assert sorted(b.get_width() for b in bars) == pytest.approx(sorted(100 * v for v in shares.values()), rel=1e-12)
    assert (tmp_path / "b.png").stat().st_size > 10_000


def test_linear_and_global_budgets_side_by_side(analysis, tmp_path):
    # the global budget's own numbers are the reference: its variance shares, their bootstrap interval ends and
    # the closed-form linear shares over the same inputs (perierr.budget.global_mc)
    from perierr.budget.global_mc import global_budget
    from perierr.models import StraightLine

    g = global_budget(analysis.star, StraightLine(), n_outer=500, width=False, n_boot=100, seed=2)
    path = tmp_path / "bg.png"
    fig = budget_figure(analysis, path, output="distance_pc", global_budget=g)
    ax = fig.axes[0]
    names = dict(zip(ax.get_yticks(), (t.get_text() for t in ax.get_yticklabels())))

    def name_of(y):
        return names[min(names, key=lambda tick: abs(tick - y))]

    linear, globl = [c for c in ax.containers if c.__class__.__name__ == "BarContainer"]
    assert "linearized" in linear.get_label() and "global" in globl.get_label()
    j = g.variance.outputs.index("distance_pc")
    for bar in linear:
        i = g.inputs.index(name_of(bar.get_y() + bar.get_height() / 2))
        assert abs(bar.get_width() / 100 - g.linear_variance[j, i]) < 1e-9
        assert bar.get_hatch() == "///"
    for bar in globl:
        i = g.inputs.index(name_of(bar.get_y() + bar.get_height() / 2))
        assert abs(bar.get_width() / 100 - g.variance.shares[j, i]) < 1e-9
        assert not bar.get_hatch()
    assert len(linear) == len(globl) == 6
    # the error bars run from each global share's interval low end to its high end
    (errors,) = [c for c in ax.containers if c.__class__.__name__ == "ErrorbarContainer"]
    segments = errors.lines[2][0].get_segments()
    assert len(segments) == 6
    for seg in segments:
        (x0, y0), (x1, _) = seg
        i = g.inputs.index(name_of(y0))
        assert abs(x0 / 100 - g.variance.low[j, i]) < 1e-9 and abs(x1 / 100 - g.variance.high[j, i]) < 1e-9
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    budget_figure(analysis, tmp_path / "bg.pdf", output="time_myr", global_budget=g)
    assert (tmp_path / "bg.pdf").read_bytes()[:5] == b"%PDF-"
    with pytest.raises(InputError, match="output"):
        budget_figure(analysis, output="speed_kms", global_budget=g)  # the global budget has t_ph and d_ph only
