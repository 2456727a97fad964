"""The gain-curve figure: each input against its new precision in its own unit, today marked."""

import numpy as np
import pytest

from perierr.demo import demo_path
from perierr.errors import InputError
from perierr.models import StraightLine
from perierr.plan import gain_curves
from perierr.report.plan_plot import gain_curve_panels, plot_gain_curves
from perierr.star import read_star_file
from perierr.units import AU_PER_PC


@pytest.fixture(scope="module")
def curves():
    star = read_star_file(demo_path("kestrel-4.toml"))
    return gain_curves(star, StraightLine(), n=1000, seed=2, n_points=5, inputs=["parallax", "radial_velocity"],
                       threshold="1 pc")  # fmt: skip


def test_each_panel_is_in_its_inputs_own_unit(curves):
    panels = gain_curve_panels(curves)
    assert len(panels) == 2 * len(curves.inputs)
    for p in panels:
        # the x values are the new errors as the user gives them (mas, km/s), not ratios to today's error
        np.testing.assert_array_equal(p["x"], curves.precision[p["input"]])
        assert p["unit"] == {"parallax": "mas", "radial_velocity": "km/s"}[p["input"]]
        assert p["today_x"] == curves.sigma[p["input"]]
    rv_width = next(p for p in panels if p["row"] == 0 and p["input"] == "radial_velocity")
    np.testing.assert_allclose(rv_width["y"], curves.curves["radial_velocity"]["distance_pc.width90"] * AU_PER_PC,
                               rtol=1e-12)  # fmt: skip


def test_the_figure_draws_the_curves_where_the_data_are(curves, tmp_path):
    import matplotlib.image as mpimg

    path = tmp_path / "gain.png"
    fig = plot_gain_curves(curves, path)
    axes = np.array(fig.axes).reshape(2, len(curves.inputs))
    assert axes[1, 0].get_ylabel() == "P(d_ph < 1 pc)"
    assert axes[1, 1].get_xlabel() == "new error of radial_velocity [km/s]"
    ax = axes[0, 1]
    line = ax.get_lines()[0]
    np.testing.assert_array_equal(line.get_xdata(), curves.precision["radial_velocity"])
    assert ax.xaxis_inverted() and ax.get_xscale() == "log"
    # pixel check: the curve's middle point is drawn in the saved image (matplotlib's transData to pixels, with the
    # image's row 0 at the top)
    image = mpimg.imread(path)
    x, y = line.get_xdata()[2], line.get_ydata()[2]
    px, py = ax.transData.transform((x, y)) * 130 / fig.dpi
    row, col = int(round(image.shape[0] - py)), int(round(px))
    patch = image[row - 3:row + 4, col - 3:col + 4, :3]
    assert patch.min() < 0.6  # the blue marker (Okabe-Ito blue #0072B2) is there, not white paper


def test_a_format_the_figure_cannot_be_saved_in_is_refused(curves, tmp_path):
    with pytest.raises(InputError, match="png, .pdf or .svg"):
        plot_gain_curves(curves, tmp_path / "gain.jpg")
    assert list(tmp_path.iterdir()) == []
