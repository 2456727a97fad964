"""The bookkeeping of ``map_perihelia`` (mapping.py) against its documented rules (invented draws only).

The leaf fits themselves (``mapping._map_round``) are replaced by a stand-in that records the leaves of each round
and answers with the straight-line perihelion: Newton's first law, ``t = -x.v/|v|^2``, ``d = |x + v t|`` (common
practice, no source). What is left is what ``map_perihelia`` decides on its own, checked against the rules written
in its docstrings and those of OrbitModel and the leaves module: how the cloud is cut into leaves and cut finer
(``_REDO_FRACTION``: "more than this fraction" of a leaf's draws not trusted; up to ``_ROUNDS`` rounds, the radius
halved each round; velocity offsets scaled by the leaf's span), which draws are integrated directly (sparse parts,
draws not trusted, draws faster than twice the 99.5 % speed quantile), the grid the draws are integrated on, the
diagnostics and the progress calls. The potential is a 1 Msun Plummer sphere at the Galactic centre, whose tidal
field is ~1e-11 of the Galaxy's (as in test_orbit_edges.py), so that the direct integrations give the straight
line too: every answer, mapped or integrated, is checked against the closed form.
"""

import math

import astropy.units as u
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from perierr.models.orbit import OrbitModel, Plummer, mapping
from perierr.models.orbit.mapping import smallest_leaf

NEGLIGIBLE = Plummer(mass_msun=1.0, b_pc=100.0)
#: Myr per pc/(km/s), from astropy's units.
MYR = float((1.0 * u.pc / (u.km / u.s)).to_value(u.Myr))
#: RK4 steps are halved until their error is below a tenth of map_tolerance_au (OrbitModel docstring): 0.05 au,
#: 2.4e-7 pc; the straight line is matched to 1e-6 pc and 1e-6 pc/(km/s) (common practice, no source).
TOL_PC, TOL_T = 1e-6, 1e-6


# ------------------------------------------------------------------------------------------------- helpers
def straight_line(rel):
    """Straight-line perihelion time [pc/(km/s)] and relative state there (Newton's first law)."""
    x, v = rel[:, :3], rel[:, 3:]
    t = -np.sum(x * v, axis=1) / np.sum(v * v, axis=1)
    return t, np.hstack([x + v * t[:, None], v])


def expected_nodes(half_window_myr, speed, *, step_myr=1.0, travel_pc=20.0):
    """Grid nodes of a window (-h, h) (OrbitModel docstring: grid_step_myr, grid_travel_pc / largest speed).

    Equally spaced on each side of now (window_and_nodes docstring), now included.
    """
    step = min(step_myr, travel_pc / speed * MYR)
    return 2 * math.ceil(half_window_myr / step) + 1


def model(**options):
    """An orbit model with the negligible potential, a +-5 Myr window and degree-2 maps with one check draw."""
    kw = dict(potential=NEGLIGIBLE, horizon_myr=5.0, map_order=2, n_check=1, min_leaf_samples=1)
    kw.update(options)
    return OrbitModel(**kw)


def line_cloud(n, *, half_length=10.0, velocity=(-30.0, 0.0, 0.0), seed=1):
    """n invented draws on a line along x (20 +- half_length pc, 3 pc off), one velocity, in shuffled order."""
    rel = np.zeros((n, 6))
    rel[:, 0] = 20.0 + np.random.default_rng(seed).permutation(np.linspace(-half_length, half_length, n))
    rel[:, 1] = 3.0
    rel[:, 3:] = velocity
    return rel


def never(round_, rows):
    return np.zeros(rows.size, dtype=bool)


def always(round_, rows):
    return np.ones(rows.size, dtype=bool)


class FitStandIn:
    """Stands in for ``_map_round``: records each round's leaves and answers with the straight line.

    ``bad(round_, rows)`` gives the draws the check does not trust; ``span`` is every leaf's span.
    """

    def __init__(self, bad=never, span=(-1.0, 1.0)):
        self.bad, self.span = bad, span
        self.rounds, self.n_train, self.k = [], [], []

    def __call__(self, model, grid, rel_all, t_lin_all, leaves, n_train, rng):
        round_ = len(self.rounds)
        self.rounds.append([np.sort(leaf.rows) for leaf in leaves])
        self.n_train.append(n_train)
        results = []
        for leaf in leaves:
            m = leaf.rows.size
            t, state = straight_line(rel_all[leaf.rows])
            stats = {"err_au": 0.0, "err_t": 0.0, "coef": 0.0, "int_err": 0.0, "checked": 0, "multimodal": False,
                     "span": self.span}  # fmt: skip
            found = (t, state, np.zeros(m, dtype=bool), np.ones(m, dtype=bool))
            results.append((found, np.asarray(self.bad(round_, leaf.rows), dtype=bool), stats))
        return results

    def sizes(self):
        return [sorted(rows.size for rows in leaves) for leaves in self.rounds]


def run(orbit_model, rel, stand_in):
    """map_perihelia with the stand-in; (t, state, outside, conv, diag, progress calls)."""
    t_lin = straight_line(rel)[0]
    calls = []
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(mapping, "_map_round", stand_in)
        out = mapping.map_perihelia(orbit_model, rel, t_lin, lambda done, total: calls.append((done, total)))
    return (*out, calls)


def assert_straight_line(rel, t, state, outside, conv):
    """Every answer is the straight-line perihelion, inside the window and converged."""
    t_ref, s_ref = straight_line(rel)
    assert np.all(np.isfinite(t)) and not outside.any() and conv.all()
    assert np.max(np.abs(t - t_ref)) < TOL_T
    assert np.max(np.abs(np.linalg.norm(state[:, :3], axis=1) - np.linalg.norm(s_ref[:, :3], axis=1))) < TOL_PC


# ---------------------------------------------------------------------------- a leaf of exactly the least size
@pytest.fixture(scope="module", params=[2, 3, 4])
def least_leaf(request):
    """A cloud of exactly smallest_leaf draws, all trusted, for each map degree."""
    orbit_model = model(map_order=request.param, leaf_radius_pc=1e3)
    n = smallest_leaf(orbit_model)
    rel = line_cloud(n)
    stand_in = FitStandIn()
    return orbit_model, rel, stand_in, run(orbit_model, rel, stand_in)


def test_a_cloud_of_exactly_the_least_leaf_size_is_one_map_leaf(least_leaf):
    # OrbitModel docstring, min_leaf_samples: "fewest draws of a leaf": a cloud of exactly that many draws is one
    # leaf through the map, no draw sparse, every answer returned (here the stand-in's straight line)
    orbit_model, rel, stand_in, (t, state, outside, conv, diag, calls) = least_leaf
    n = rel.shape[0]
    assert stand_in.sizes() == [[n]]
    assert diag["n_map_leaves"] == 1 and diag["sparse_samples"] == 0 and diag["fallback_samples"] == 0
    assert "fallback_reason" not in diag
    assert_straight_line(rel, t, state, outside, conv)
    # progress (map_perihelia docstring): once after the round of leaves, none for direct integrations
    assert calls == [(n, n)]


def test_training_and_check_draws_are_half_the_least_leaf(least_leaf):
    # OrbitModel docstring, min_leaf_samples: a leaf has at least twice its training and check draws (n_check
    # random ones plus its two farthest); with min_leaf_samples = 1 the least leaf is exactly twice them
    orbit_model, rel, stand_in, _ = least_leaf
    (n_train,) = stand_in.n_train
    assert 2 * (n_train + orbit_model.n_check + 2) == rel.shape[0]


def test_grid_step_follows_the_largest_speed(least_leaf):
    # OrbitModel docstring: step at most grid_step_myr (1 Myr) and grid_travel_pc / the largest speed (20 pc at
    # 30 km/s: 0.652 Myr), +-5 Myr: 17 nodes
    _, rel, _, (*_, diag, _) = least_leaf
    assert diag["grid_nodes"] == expected_nodes(5.0, 30.0) == 17
    assert diag["window_myr"] == [-5.0, 5.0]


def test_many_draws_go_through_the_map():
    # more draws than the 20,000 of the speed-quantile and centre subsample: one leaf, every answer returned
    orbit_model = model(leaf_radius_pc=1e3)
    rel = line_cloud(20_001)
    stand_in = FitStandIn()
    t, state, outside, conv, diag, calls = run(orbit_model, rel, stand_in)
    assert stand_in.sizes() == [[20_001]] and diag["n_map_leaves"] == 1 and diag["sparse_samples"] == 0
    assert_straight_line(rel, t, state, outside, conv)
    assert calls == [(20_001, 20_001)]


# ------------------------------------------------------------------------------------------ cutting finer
# A line of 4 x 106 draws (106 = smallest_leaf of degree 2 with one check draw), 20 pc long, leaf radius 13 pc:
# one leaf (radius 10 pc); cut at 6.5 pc into halves (radius 5 pc, 2 x 106 draws: cut no further); those cut at
# 3.25 pc into quarters of 106 draws (fewer than 2 x 106: never cut again). With 8 x 106 draws the same cuts give
# quarters of 2 x 106 draws: they could be halved again, but the third round is the last.
@pytest.fixture(scope="module", params=[("all", 4), ("none", 4), ("all", 8)], ids=["all-424", "none-424", "all-848"])
def line_rounds(request):
    bad, k = request.param
    orbit_model = model(leaf_radius_pc=13.0)
    assert smallest_leaf(orbit_model) == 106
    rel = line_cloud(k * 106)
    stand_in = FitStandIn(bad=always if bad == "all" else never)
    return bad, rel, stand_in, run(orbit_model, rel, stand_in)


def test_untrusted_leaves_are_halved_for_up_to_three_rounds(line_rounds):
    # OrbitModel docstring, leaf_radius_pc: leaves the check does not trust are halved again, up to three rounds
    # (mapping docstring: up to _ROUNDS = 3), the radius halved each round; the last round's leaves are final and
    # their untrusted draws are integrated directly
    bad, rel, stand_in, (t, state, outside, conv, diag, calls) = line_rounds
    n = rel.shape[0]
    if bad == "none":  # trusted at once: one leaf, never cut
        assert stand_in.sizes() == [[n]]
        assert diag["n_map_leaves"] == 1 and diag["fallback_samples"] == 0
        assert calls == [(n, n)]
    else:
        assert stand_in.sizes() == [[n], [n // 2] * 2, [n // 4] * 4]
        assert diag["n_map_leaves"] == 4 and diag["fallback_samples"] == n and diag["sparse_samples"] == 0
        assert f"{n} of {n} samples integrated directly" in diag["fallback_reason"]
        # progress: the final leaves hand over none of their draws, the direct integration all of them
        assert calls == [(0, n)] * 4 + [(n, n)]
    assert_straight_line(rel, t, state, outside, conv)


def test_leaves_are_cut_along_the_cloud_not_in_row_order(line_rounds):
    # leaves docstring: halving along the widest direction of the scaled offsets at the median: the halves and
    # quarters are the stretches of the line (the rows are shuffled)
    bad, rel, stand_in, _ = line_rounds
    if bad == "none":  # one leaf of every row
        assert [rows.tolist() for rows in stand_in.rounds[0]] == [list(range(rel.shape[0]))]
        return
    x = rel[:, 0]
    order = np.argsort(x)
    for leaves, parts in zip(stand_in.rounds[1:], (2, 4)):
        expected = sorted(np.sort(p).tolist() for p in np.split(order, parts))
        assert sorted(rows.tolist() for rows in leaves) == expected


@pytest.mark.parametrize(("n_bad", "cut"), [(24, False), (25, True)])
def test_a_leaf_is_cut_finer_only_with_more_than_five_percent_untrusted(n_bad, cut):
    # mapping._REDO_FRACTION: a leaf is cut finer when MORE than 5 % of its draws are not trusted. 480 draws
    # (least leaf 120): 24 untrusted (exactly 5 %) keep the leaf, their draws integrated directly; 25 cut it
    orbit_model = model(leaf_radius_pc=13.0, min_leaf_samples=120)
    rel = line_cloud(480)
    bad_rows = np.arange(n_bad)

    def bad(round_, rows):
        return np.isin(rows, bad_rows)

    stand_in = FitStandIn(bad=bad)
    t, state, outside, conv, diag, calls = run(orbit_model, rel, stand_in)
    assert_straight_line(rel, t, state, outside, conv)
    assert diag["fallback_samples"] == n_bad
    assert f"{n_bad} of 480 samples integrated directly" in diag["fallback_reason"]
    if cut:
        assert stand_in.sizes()[1] == [240, 240]
    else:
        assert stand_in.sizes() == [[480]] and diag["n_map_leaves"] == 1
        # progress: the leaf's 456 trusted draws, then the direct integration of the rest
        assert calls == [(456, 480), (480, 480)]


def test_a_leaf_too_small_to_halve_is_fitted_once():
    # leaves.partition docstring: a part whose halves would hold fewer than the least leaf is not cut: a leaf of
    # 106 draws (least leaf 106) that the check does not trust is final at once, its draws integrated directly
    orbit_model = model(leaf_radius_pc=13.0)
    rel = line_cloud(106)
    stand_in = FitStandIn(bad=always)
    t, state, outside, conv, diag, calls = run(orbit_model, rel, stand_in)
    assert stand_in.sizes() == [[106]]
    assert diag["n_map_leaves"] == 1 and diag["fallback_samples"] == 106
    assert_straight_line(rel, t, state, outside, conv)
    assert calls == [(0, 106), (106, 106)]


@settings(max_examples=15, deadline=None)
@given(
    n=st.integers(106, 600),
    radius=st.floats(2.0, 30.0),
    bad_fraction=st.floats(0.0, 0.3),
    seed=st.integers(0, 2**16),
)
def test_every_draw_is_answered_once_whatever_the_cuts(n, radius, bad_fraction, seed):
    # invariants of the bookkeeping (map_perihelia docstring): each round's leaves split the draws still to map
    # (no draw in two leaves, none lost); every draw gets its answer, from the map or from direct integration;
    # the draws the check does not trust in the final leaves are counted as fallback; progress ends at the total
    orbit_model = model(leaf_radius_pc=radius)
    rel = line_cloud(n, seed=seed)
    bad_rows = np.flatnonzero(np.random.default_rng(seed).random(n) < bad_fraction)
    stand_in = FitStandIn(bad=lambda round_, rows: np.isin(rows, bad_rows))
    t, state, outside, conv, diag, calls = run(orbit_model, rel, stand_in)
    assert np.array_equal(np.sort(np.concatenate(stand_in.rounds[0])), np.arange(n))
    for leaves in stand_in.rounds[1:]:
        rows = np.concatenate(leaves)
        assert np.unique(rows).size == rows.size
    # without untrusted draws no leaf is cut again; with them, at most the three rounds the docstring allows
    assert len(stand_in.rounds) == 1 if bad_rows.size == 0 else len(stand_in.rounds) in (1, 2, 3)
    assert diag["n_map_leaves"] >= len(stand_in.rounds[-1]) > 0
    assert diag["fallback_samples"] == bad_rows.size and diag["sparse_samples"] == 0
    assert_straight_line(rel, t, state, outside, conv)
    assert calls[-1] == (n, n) and all(a[0] <= b[0] for a, b in zip(calls, calls[1:]))


@pytest.mark.parametrize("half_radius", [3.5, 4.5])
def test_cutting_finer_scales_velocity_offsets_by_the_span(half_radius):
    # mapping: a leaf cut finer measures its velocity offsets by what they move the star over the leaf's whole
    # span, dw * (max(|span|) + 1) as u = (ds, dw (|t| + 1)) of the leaves docstring. 212 invented draws at one
    # position, v_y spread over +-1 km/s, span (-3, 0.5): radius 4 pc after the first round, cut in two at a
    # halved radius of 3.5 pc, not at 4.5 pc (the first round's radius, 2.67 pc with |t| ~ 0.33, is one leaf)
    orbit_model = model(leaf_radius_pc=2 * half_radius)
    rel = np.zeros((212, 6))
    rel[:, :3] = (10.0, 3.0, 0.0)
    rel[:, 3] = -30.0
    rel[:, 4] = np.random.default_rng(2).permutation(np.linspace(-1.0, 1.0, 212))
    stand_in = FitStandIn(bad=lambda round_, rows: np.full(rows.size, round_ == 0), span=(-3.0, 0.5))
    t, state, outside, conv, diag, calls = run(orbit_model, rel, stand_in)
    assert_straight_line(rel, t, state, outside, conv)
    if half_radius < 4.0:
        assert stand_in.sizes() == [[212], [106, 106]]
        assert sorted(np.sort(rel[rows, 4])[0] for rows in stand_in.rounds[1]) == [-1.0, pytest.approx(0.0, abs=0.01)]
    else:
        assert stand_in.sizes() == [[212], [212]]


def test_scaled_offsets_are_measured_from_the_mean_of_all_draws():
    # leaves docstring: u = (ds, dw (|t_lin| + 1)) [pc] from the cloud's mean state; a part within
    # leaf_radius_pc of its mean in u is not cut. 212 invented slow draws (|t| 7-9 pc/(km/s)) whose v_y alternates
    # +-0.5 km/s; the radius computed here from that rule, with a leaf radius 2 % above it: one leaf
    n = 212
    rel = np.zeros((n, 6))
    rel[:, 0] = 10.0 + np.linspace(-1.0, 1.0, n)
    rel[:, 3] = -1.0
    rel[:, 4] = np.where(np.arange(n) % 2 == 0, 0.5, -0.5)
    t_lin = straight_line(rel)[0]
    uu = rel - rel.mean(axis=0)
    uu[:, 3:] *= (np.abs(t_lin) + 1.0)[:, None]
    radius = float(np.sqrt(np.max(np.sum((uu - uu.mean(axis=0)) ** 2, axis=1))))
    assert radius == pytest.approx(5.0, rel=1e-3)  # 1 pc along x, 0.5 x (8.8 + 1) km/s x pc/(km/s) in v_y
    stand_in = FitStandIn()
    orbit_model = model(horizon_myr=10.0, leaf_radius_pc=1.02 * radius)
    t, state, outside, conv, diag, _ = run(orbit_model, rel, stand_in)
    assert stand_in.sizes() == [[n]] and diag["n_map_leaves"] == 1
    assert_straight_line(rel, t, state, outside, conv)


# --------------------------------------------------------------------------------------- fast draws set aside
def fast_cloud(fast_rows, fast_speed, *, slow_speed=30.0, n=201):
    """n invented draws on the line of ``line_cloud``; ``fast_rows`` move at ``fast_speed``, the rest slower."""
    rel = line_cloud(n, velocity=(-slow_speed, 0.0, 0.0))
    rel[fast_rows, 3] = -fast_speed
    return rel


@pytest.fixture(scope="module", params=[1, 300])
def one_fast(request):
    # 200 draws at 30 km/s and one at 150 km/s: np.quantile of the 201 speeds at 0.995 is 30 km/s (numpy's
    # linear interpolation, position 199 of 0..200), and 150 > 2 x 30: the fast draw is set aside. With
    # min_leaf_samples 300 the other 200 are too few for a map
    orbit_model = model(leaf_radius_pc=1e3, min_leaf_samples=request.param)
    rel = fast_cloud([57], 150.0)
    speeds = np.linalg.norm(rel[:, 3:], axis=1)
    assert np.quantile(speeds, 0.995) == 30.0
    stand_in = FitStandIn()
    return request.param, rel, stand_in, run(orbit_model, rel, stand_in)


def test_fast_draws_are_integrated_directly_on_a_grid_of_their_own(one_fast):
    # mapping docstring: a few draws much faster than the rest are set aside and integrated directly on a grid of
    # their own; the diagnostics count them with the sparse draws, and report the finer of the two grids
    # (150 km/s: step 20 pc / 150 km/s = 0.130 Myr, 79 nodes over +-5 Myr)
    least, rel, stand_in, (t, state, outside, conv, diag, calls) = one_fast
    assert_straight_line(rel, t, state, outside, conv)
    assert diag["grid_nodes"] == expected_nodes(5.0, 150.0) == 79
    if least == 1:  # the 200 slow draws are one map leaf
        assert stand_in.sizes() == [[200]] and 57 not in stand_in.rounds[0][0]
        assert diag["n_map_leaves"] == 1 and diag["sparse_samples"] == 1
    else:  # too few for a map: all integrated directly
        assert stand_in.sizes() == [] and diag["n_map_leaves"] == 0 and diag["sparse_samples"] == 201
    sparse = diag["sparse_samples"]
    assert diag["fallback_reason"].startswith(f"{sparse} of 201 samples integrated directly: {sparse} in parts")
    # progress: the slow draws, then the fast one (ForwardModel.evaluate: the last call has done == total)
    assert calls == [(200, 201), (201, 201)]


@pytest.mark.parametrize(
    ("fast_rows", "fast_speed", "slow_speed", "grid_speed"),
    [
        # one draw at exactly twice the quantile (10 km/s): "faster than" is strict, it stays with the others
        ([57], 20.0, 10.0, 20.0),
        # two draws at 100 km/s in rows 1 and 3: 1 % of the draws, the 99.5 % quantile of all 201 speeds is
        # theirs (numpy.quantile), so they are not outliers
        ([1, 3], 100.0, 10.0, 100.0),
    ],
)
def test_draws_not_faster_than_twice_the_quantile_stay_in_the_map(fast_rows, fast_speed, slow_speed, grid_speed):
    # mapping._FAST_FACTOR, _SPEED_QUANTILE: draws FASTER than 2 x the 0.995 quantile of the speeds (of all of
    # them below 20,000 draws) are set aside; the others share one grid, set by the largest speed
    orbit_model = model(leaf_radius_pc=1e3)
    rel = fast_cloud(fast_rows, fast_speed, slow_speed=slow_speed)
    speeds = np.linalg.norm(rel[:, 3:], axis=1)
    assert not np.any(speeds > 2.0 * np.quantile(speeds, 0.995))
    stand_in = FitStandIn()
    t, state, outside, conv, diag, calls = run(orbit_model, rel, stand_in)
    assert stand_in.sizes() == [[201]]
    assert diag["sparse_samples"] == 0 and diag["n_map_leaves"] == 1
    assert diag["grid_nodes"] == expected_nodes(5.0, grid_speed)
    assert_straight_line(rel, t, state, outside, conv)
    assert calls == [(201, 201)]
