"""Figures at their edges: names that look like markup, outputs without spread, weighted draws."""

import warnings

import numpy as np
import pytest

from perierr import ObservedStar, analyze
from perierr.errors import InputError, PerierrWarning
from perierr.report import corner_figure, distance_figure, html_report, latex_rows, write_figures
from perierr.summary import weighted_quantiles
from perierr.units import AU_PER_PC

# invented stars
BASE = dict(ra=45.0, dec=20.0, parallax=48.0, pmra=0.01, pmdec=0.02, radial_velocity=-250.0)


def _quiet(star, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return analyze(star, model="straight_line", compare=False, **kw)


def test_a_name_with_dollar_signs_is_drawn_as_written(tmp_path):
    # matplotlib reads text between $ signs as math (and fails on "$x^$"): the figures escape them
    name = "Kestrel $\\alpha$ Cen-like $x^$ (invented)"
    star = ObservedStar.from_values(**BASE, parallax_error=0.1, pmra_error=0.05, pmdec_error=0.05,
                                    radial_velocity_error=1.0, name=name)  # fmt: skip
    a = _quiet(star, n_samples=2000, seed=1)
    written = write_figures(a, tmp_path / "s.png", seed=1)
    assert len(written) == 4 and all(p.stat().st_size > 10_000 for p in written)
    fig = distance_figure(a)
    assert fig.axes[0].get_title().startswith(name.replace("$", r"\$"))
    assert name in html_report(a).replace("&#x27;", "'")  # the page shows it as text too


def test_no_spread_is_refused_before_any_file_is_written(tmp_path):
    # only the position is uncertain: under straight lines d_ph, t_ph and v_ph do not vary at all
    star = ObservedStar.from_values(**BASE, ra_error=0.1, dec_error=0.1, parallax_error=0.0, pmra_error=0.0,
                                    pmdec_error=0.0, radial_velocity_error=0.0, name="still (invented)")  # fmt: skip
    a = _quiet(star, n_samples=500, seed=1)
    with pytest.raises(InputError, match="spread in d_ph"):
        distance_figure(a)
    with pytest.raises(InputError):
        write_figures(a, tmp_path / "s.png")
    assert list(tmp_path.iterdir()) == []
    # the LaTeX row gives the values alone (no interval to round)
    row = latex_rows([a]).splitlines()[1]
    d = a.monte_carlo.summaries["distance_pc"].median
    assert f"${d:.6g}$" in row and "pm" not in row


@pytest.fixture(scope="module")
def weighted():
    # a weak parallax (5 sigma) under a short distance prior: importance weights that matter
    star = ObservedStar.from_values(**{**BASE, "parallax": 1.5, "radial_velocity": -60.0}, parallax_error=0.3,
                                    pmra_error=0.05, pmdec_error=0.05, radial_velocity_error=1.0,
                                    name="weak (invented)")  # fmt: skip
    return _quiet(star, n_samples=4000, seed=3, distance_prior="edsd:L=200pc", prior_method="reweight")


def test_the_weighted_histogram_is_a_density_of_the_whole_distribution(weighted):
    mc = weighted.monte_carlo
    assert mc.samples.weights is not None
    fig = distance_figure(weighted)
    fill = fig.axes[0].patches[0]  # the filled stairs
    heights, edges = fill.get_data().values, fill.get_data().edges
    # numpy is the reference: the weighted fraction of the distribution inside the plotted range, which the bars'
    # area must equal (a density renormalized to the plotted bins would integrate to 1 instead)
    d = np.asarray(mc.perihelion.distance_pc)[mc.valid] * AU_PER_PC
    w = np.asarray(mc.samples.weights)[mc.valid]
    inside = w[(d >= edges[0]) & (d <= edges[-1])].sum() / w.sum()
    assert np.sum(heights * np.diff(edges)) == pytest.approx(inside, rel=1e-9)
    # the plotted range holds the weighted 0.1 %-99.9 % range of the draws
    lo, hi = weighted_quantiles(d, [0.001, 0.999], w)
    assert edges[0] <= lo and edges[-1] >= hi
    assert "weighted" in fig.axes[0].get_title()


def test_the_weighted_corner_plot_draws_no_unweighted_points(weighted):
    fig = corner_figure(weighted)
    k = 3
    axes = np.array(fig.axes[: k * k]).reshape(k, k)
    # corner draws single points as one Line2D of all draws (marker, no line); none for weighted draws
    n = weighted.monte_carlo.n_valid
    for i in range(1, k):
        for j in range(i):
            assert not [ln for ln in axes[i, j].get_lines() if len(ln.get_xdata()) >= n]
