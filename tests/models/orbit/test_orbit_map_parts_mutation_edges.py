"""The leaf-map engine's parts (perierr.models.orbit.mapping) one by one, and Leaf.features.

Most checks use an isotropic harmonic potential, Phi = w^2 |x|^2 / 2, with the Sun at rest at its centre: the
relative orbit is then s(t) = s0 cos(wt) + w0 sin(wt) / w exactly (common practice, no source), and fixed-step RK4
on the linear system y' = A y is one matrix per step, R(hA) = I + hA + (hA)^2/2 + (hA)^3/6 + (hA)^4/24 (the
stability function of the classical Runge-Kutta method, Hairer, Norsett & Wanner 1993, Sect. IV.2, from memory).
Richardson's estimate of the error of s sub-steps from s and 2 s sub-steps of a fourth-order method is
|y_s - y_2s| * 16 / 15 (Hairer et al. 1993, Sect. II.4, from memory). Polynomial trajectories of degree <= 5 are
reproduced exactly by quintic Hermite interpolation (six conditions per interval; common practice, no source).
All states are invented.
"""

import re
import types

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from perierr.models.orbit import mapping
from perierr.models.orbit.leaves import Leaf
from perierr.models.orbit.mapping import (
    _Diagnostics,
    _Grid,
    _interval_quintics,
    _minimum_moves,
    _Progress,
    _Results,
    _valid_mask,
    direct_rk4,
)
from perierr.units import AU_PER_PC
from perierr.units import MYR_PER_PC_PER_KMS as C

OMEGA = 0.05  # [km/s / pc]: a period of ~126 pc/(km/s), ~123 Myr
WINDOW = (-30.0, 30.0)  # [Myr]: shorter than half a period of |s|, so at most one minimum inside


class _Harmonic:
    """Phi = w^2 |x|^2 / 2: the only method the Sun's orbit and the draws' RK4 call is ``acceleration``."""

    def __init__(self, omega):
        self.omega = omega

    def acceleration(self, x):
        return -(self.omega**2) * np.asarray(x, dtype=float)


def _model(map_tolerance_au=5.0, grid_step_myr=1.0):
    # what _Grid reads of an OrbitModel; the Sun at rest at the centre (its orbit stays at the origin)
    return types.SimpleNamespace(
        potential=_Harmonic(OMEGA),
        _sun_state=np.zeros(6),
        grid_step_myr=grid_step_myr,
        grid_travel_pc=1e9,
        map_tolerance_au=map_tolerance_au,
    )


def _closed_form(rel, t):
    """Exact relative positions (len(t), n, 3) of the harmonic orbit."""
    c, s = np.cos(OMEGA * t)[:, None, None], np.sin(OMEGA * t)[:, None, None]
    return rel[None, :, :3] * c + rel[None, :, 3:] / OMEGA * s


def _rk4_positions(rel, nodes, substeps):
    """RK4 with ``substeps`` equal steps per grid interval, through its stability matrix: positions (m, n, 3)."""
    a = np.zeros((6, 6))
    a[:3, 3:] = np.eye(3)
    a[3:, :3] = -(OMEGA**2) * np.eye(3)
    out = np.empty((len(nodes), rel.shape[0], 3))
    zero = int(np.flatnonzero(nodes == 0.0)[0])
    out[zero] = rel[:, :3]
    for direction in (1, -1):
        y = rel.T.copy()
        k = zero
        while 0 <= k + direction < len(nodes):
            h = (nodes[k + direction] - nodes[k]) / substeps
            ha = h * a
            r = np.eye(6) + ha + ha @ ha / 2 + ha @ ha @ ha / 6 + ha @ ha @ ha @ ha / 24
            y = np.linalg.matrix_power(r, substeps) @ y
            k += direction
            out[k] = y[:3].T
    return out


def _richardson_au(rel, nodes, s, lo=None, hi=None):
    """|y_s - y_2s| * 16 / 15, largest over the nodes each draw is integrated to [au]."""
    diff = np.linalg.norm(_rk4_positions(rel, nodes, s) - _rk4_positions(rel, nodes, 2 * s), axis=-1)
    if lo is not None:
        zero = int(np.flatnonzero(nodes == 0.0)[0])
        idx = np.arange(len(nodes))[:, None]
        diff = np.where((idx >= np.minimum(lo, zero)) & (idx <= np.maximum(hi, zero)), diff, 0.0)
    return float(diff.max()) * 16.0 / 15.0 * AU_PER_PC


# invented relative states [pc, km/s]; their orbits all pass closest inside the window
REL = np.array([
    [60.0, -20.0, 10.0, -3.0, 1.0, 0.5],
    [-40.0, 30.0, 25.0, 2.5, -2.0, -1.0],
    [15.0, 5.0, -80.0, 0.3, 0.2, 4.0],
])  # fmt: skip


# ---------------------------------------------------------------- _Grid.substeps: Richardson on RK4


@pytest.mark.parametrize(("map_tolerance_au", "expected_s"), [(50.0, 1), (5.0, 2), (0.2, 4), (1e-6, 8)])
def test_substeps_are_the_fewest_whose_richardson_estimate_is_within_the_tolerance(map_tolerance_au, expected_s):
    # the estimate must be within a tenth of the map tolerance (OrbitModel docstring); the expected number of
    # sub-steps is the first of 1, 2, 4, 8 whose estimate, computed here from RK4's stability matrix, is within it
    # (8 at most)
    grid = _Grid(_model(map_tolerance_au), WINDOW, 5.0)
    est = {s: _richardson_au(REL, grid.nodes, s) for s in (1, 2, 4, 8)}
    first = [s for s in (1, 2, 4) if est[s] <= 0.1 * map_tolerance_au]
    assert (first[0] if first else 8) == expected_s
    # every case lies well away from the boundary (a factor >= 3), so the rounding cannot decide it
    assert all(abs(np.log(est[s] / (0.1 * map_tolerance_au))) > np.log(3.0) for s in (1, 2, 4, 8))
    s, err = grid.substeps(REL)
    assert s == expected_s
    # the same numbers up to rounding: differences of ~1e-9 pc between positions of ~100 pc
    assert err == pytest.approx(est[s], rel=1e-3)
    # and the estimate is the real error of s sub-steps against the closed form, to 3 % (the next order of
    # RK4's error is (w h)^2 ~ 3e-3 smaller)
    true = np.max(np.linalg.norm(_rk4_positions(REL, grid.nodes, s) - _closed_form(REL, grid.nodes), axis=-1))
    assert err == pytest.approx(true * AU_PER_PC, rel=0.03)



def test_an_estimate_exactly_at_a_tenth_of_the_tolerance_is_within_it():
    # "at most a tenth of map_tolerance_au" (OrbitModel docstring): a tolerance whose tenth equals the one-step
    # estimate to the last bit keeps one sub-step (the estimate is found first with a loose tolerance)
    _, err1 = _Grid(_model(1e9), WINDOW, 5.0).substeps(REL)
    tol = err1 / 0.1
    exact = [c for c in tol + np.arange(-50, 51) * np.spacing(tol) if 0.1 * c == err1]
    assert exact, "no tolerance whose tenth is the estimate exactly"
    grid = _Grid(_model(float(exact[0])), WINDOW, 5.0)
    assert grid.tolerance_au == err1
    assert grid.substeps(REL) == (1, err1)

def test_substeps_with_ranges_estimate_over_the_nodes_each_probe_reaches():
    # probes integrated only from now to lo and to hi: the estimate covers those nodes (the largest error is at
    # the farthest of them, the error grows with time)
    grid = _Grid(_model(1e-6), WINDOW, 5.0)
    zero = int(np.flatnonzero(grid.nodes == 0.0)[0])
    lo = np.array([3, zero, zero - 5])
    hi = np.array([zero, len(grid.nodes) - 8, zero + 20])
    s, err = grid.substeps(REL, lo, hi)
    assert s == 8
    assert err == pytest.approx(_richardson_au(REL, grid.nodes, 8, lo, hi), rel=1e-3)
    # the whole grid gives a larger estimate: the ranges matter
    assert err < 0.9 * _richardson_au(REL, grid.nodes, 8)


# ---------------------------------------------------------------- _valid_mask


def test_valid_mask_marks_the_nodes_from_now_to_each_draws_first_and_last():
    # common practice, no source: the mask of each draw is the closed range of nodes between its first node lo
    # and its last hi, always including now (node `zero`)
    nodes = np.array([-3.0, -2.0, -1.0, 0.0, 1.5, 3.0])
    lo, hi = np.array([0, 3, 2, 4]), np.array([5, 4, 3, 1])
    mask = _valid_mask(nodes, 4, lo, hi)
    expected = np.zeros((6, 4), dtype=bool)
    for j, (a, b) in enumerate([(0, 5), (3, 4), (2, 3), (3, 3)]):
        expected[a : b + 1, j] = True
    assert mask.dtype == bool and np.array_equal(mask, expected)
    full = _valid_mask(nodes, 4, None, None)
    assert full.dtype == bool and full.shape == (6, 4) and full.all()
    # a mask selects entries (boolean indexing): every entry of the full range, 11 of the ranges'
    values = np.arange(24.0).reshape(6, 4)
    assert values[full].size == 24 and values[mask].size == int(expected.sum()) == 11


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 6), st.integers(0, 6)), min_size=1, max_size=5), st.integers(0, 6))
def test_valid_mask_is_the_closed_range_around_now(ranges, zero):
    # invariant: entry (k, j) is True exactly when min(lo_j, zero) <= k <= max(hi_j, zero), now always included
    nodes = np.arange(7.0) - zero
    lo, hi = np.array([r[0] for r in ranges]), np.array([r[1] for r in ranges])
    mask = _valid_mask(nodes, len(ranges), lo, hi)
    assert mask.dtype == bool and mask.shape == (7, len(ranges))
    for j in range(len(ranges)):
        k = np.flatnonzero(mask[:, j])
        assert k[0] == min(lo[j], zero) and k[-1] == max(hi[j], zero) and k.size == k[-1] - k[0] + 1


# ---------------------------------------------------------------- direct_rk4


def _brute_force_perihelion(rel, nodes):
    """Closest approach of the closed-form orbit on a fine time grid over [nodes[0], nodes[-1]]: t, d [pc]."""
    t = np.linspace(nodes[0], nodes[-1], 200_001)
    d = np.linalg.norm(_closed_form(rel, t), axis=-1)
    i = np.argmin(d, axis=0)
    return t[i], d[i, np.arange(rel.shape[0])]


def test_direct_rk4_finds_the_closed_form_perihelion_and_flags_an_edge():
    grid = _Grid(_model(), WINDOW, 5.0)
    track = grid.track(4)
    # row 3: moving slowly away from the Sun along its position, s = 30 cos(wt) + 0.4 sin(wt) [pc] would reach 0 at
    # t = -atan(75) / w = -31.2 pc/(km/s), beyond the window's -30 Myr = -30.7: still falling at the past edge
    rel = np.vstack([REL, [[30.0, 0.0, 0.0, 0.02, 0.0, 0.0]]])
    t, state, outside, conv = direct_rk4(track, rel)  # no progress report
    t_ref, d_ref = _brute_force_perihelion(rel, grid.nodes)
    # flags are boolean arrays (the documented outside/converged of newton_perihelion)
    assert outside.dtype == bool and conv.dtype == bool
    assert outside.tolist() == [False, False, False, True] and conv.all()
    assert t[outside][0] == grid.nodes[0]
    inside = ~outside
    # brute-force grid of 3e-4 pc/(km/s): the time to 1e-3, the distance to 1e-4 pc; RK4 with 4 sub-steps is
    # within 1e-2 au of the closed form here (Richardson's estimate for them: 6e-3 au)
    assert np.allclose(t[inside], t_ref[inside], rtol=0, atol=1e-3)
    assert np.allclose(np.linalg.norm(state[inside, :3], axis=1), d_ref[inside], rtol=0, atol=1e-4)
    exact = _closed_form(rel, t)[np.arange(4), np.arange(4)]
    assert np.max(np.linalg.norm(state[:, :3] - exact, axis=1)) * AU_PER_PC < 1e-2


def test_direct_rk4_reports_progress_after_each_chunk_within_the_memory_bound(monkeypatch):
    # ~1000 nodes: chunks of at most 8e6 floats of states and derivatives (12 per draw and node, the code's
    # stated bound), and progress(done, total) after each with the draws done so far
    model = _model(grid_step_myr=1.0)
    grid = _Grid(model, (-500.0, 500.0), 5.0)
    m = len(grid.nodes)
    rng = np.random.default_rng(11)
    n = 1400
    rel = np.hstack([rng.normal(size=(n, 3)) * 50.0, rng.normal(size=(n, 3)) * 3.0])
    calls = []
    real = mapping.integrate_draws

    def counting(track, rows, *args):
        calls.append(rows.shape[0])
        return real(track, rows, *args)

    monkeypatch.setattr(mapping, "integrate_draws", counting)
    seen = []
    t, _, _, _ = direct_rk4(grid.coarse, rel, _Progress(lambda done, total: seen.append((done, total)), n))
    assert sum(calls) == n and len(calls) >= 2
    assert max(calls) * 12 * m <= 8_000_000
    assert seen == [(int(c), n) for c in np.cumsum(calls)]
    assert np.all(np.isfinite(t))


# ---------------------------------------------------------------- _Grid.direct


@pytest.mark.parametrize("n", [5, 9])
def test_grid_direct_estimates_its_error_on_four_draws_spread_through_the_rows(n):
    # the code's rule: the probes are every (n // 4)-th row, the first four; the draws' states here grow with
    # their row (row i is (i + 1) times row 0, and RK4's error on this linear system with it), so another
    # choice of probes gives another estimate
    model = _model(map_tolerance_au=0.5)
    grid = _Grid(model, WINDOW, 5.0)
    rel = REL[0] * np.arange(1.0, n + 1.0)[:, None]
    probes = rel[:: max(1, n // 4)][:4]
    est = {s: _richardson_au(probes, grid.nodes, s) for s in (1, 2, 4, 8)}
    s = next((s for s in (1, 2, 4) if est[s] <= 0.05), 8)
    diag = _Diagnostics(WINDOW)
    seen = []
    t, state, outside, conv = grid.direct(rel, _Progress(lambda done, total: seen.append(done), n), diag)
    assert diag.int_err == pytest.approx(est[s], rel=1e-3)
    assert seen == [n]
    t_ref, d_ref = _brute_force_perihelion(rel, grid.nodes)
    assert not outside.any() and conv.all()
    assert np.allclose(t, t_ref, rtol=0, atol=1e-3)
    assert np.allclose(np.linalg.norm(state[:, :3], axis=1), d_ref, rtol=1e-6, atol=1e-4)


# ---------------------------------------------------------------- _minimum_moves


def _poly_state(coeffs, t):
    """States and derivatives (len(t), 6) of the polynomial path x_i(t) = sum_k coeffs[i][k] t^k."""
    pos = np.stack([np.polyval(c[::-1], t) for c in coeffs], axis=-1)
    der = [np.polynomial.polynomial.polyder(c) for c in coeffs]
    vel = np.stack([np.polynomial.polynomial.polyval(t, d) for d in der], axis=-1)
    acc = np.stack([np.polynomial.polynomial.polyval(t, np.polynomial.polynomial.polyder(d)) for d in der], axis=-1)
    return np.hstack([pos, vel]), np.hstack([vel, acc])


def _moves(paths, t_start, nodes, map_paths=None):
    """_minimum_moves for draws on polynomial paths (direct) and mapped paths (the map, default the same).

    The leaf has order 1 and k = 1 (features 1, x_0..x_5); draw j has x_0 = j, and the map's coefficients are
    the mapped paths' node values, so that draw j's mapped path is map_paths[j] exactly.
    """
    map_paths = paths if map_paths is None else map_paths
    n, m = len(paths), len(nodes)
    st, de = np.empty((m, n, 6)), np.empty((m, n, 6))
    for j, p in enumerate(paths):
        st[:, j], de[:, j] = _poly_state(p, nodes)
    values = [np.hstack(_poly_state(p, nodes)) for p in map_paths]  # (m, 12) each: position, velocity, derivs
    coef = np.zeros((7, m, 12))
    coef[0] = values[0]
    if n == 2:
        coef[1] = values[1] - values[0]
    x = np.zeros((n, 6))
    x[:, 0] = np.arange(n)
    leaf = Leaf(rows=np.arange(n), center=np.zeros(6), axes=np.eye(6), k=1, order=1)
    return _minimum_moves(leaf, x, np.asarray(t_start, float), st, de, nodes, _interval_quintics(coef, nodes))


# two minima, at x = 0: t^2 + 0.1 t - 0.5 = 0, t = -0.759 (y = 0.035, the global one) and t = 0.659 (y = 0.063)
PATH_A = [[-0.5, 0.1, 1.0], [0.05, 0.02], [0.0]]
# its mirror image in time: the global minimum at t = +0.759
PATH_B = [[-0.5, -0.1, 1.0], [0.05, -0.02], [0.0]]
NODES3 = np.array([-1.0, 0.0, 1.0])


def test_minimum_moves_is_false_when_newton_from_the_start_finds_the_global_minimum():
    # starts beyond the grid are clamped to its ends (-1 and +1), from where Newton reaches each draw's global
    # minimum; a start clamped to the middle node instead would run to the other, shallower valley
    assert _moves([PATH_A, PATH_B], [-3.0, 3.0], NODES3) is False
    assert _moves([PATH_A, PATH_B], [-1.0, 1.0], NODES3) is False


def test_minimum_moves_is_true_when_newton_from_the_start_ends_in_the_other_valley():
    # from the ends next to the shallower valleys, Newton stops there, 1.42 (more than the grid step 1) away
    assert _moves([PATH_A, PATH_B], [1.0, -1.0], NODES3) is True
    assert _moves([PATH_A], [3.0], NODES3) is True
    assert _moves([PATH_B], [-3.0], NODES3) is True


def test_minimum_moves_on_a_two_node_span_allows_a_shift_below_the_grid_step():
    # a map that moves the minimum by 0.05 (from t = 0.2 to 0.25) on a span of one interval of width 2 did not
    # miss it
    nodes = np.array([-1.0, 1.0])
    direct = [[[-0.2, 1.0], [0.1], [0.0]]]
    mapped = [[[-0.25, 1.0], [0.1], [0.0]]]
    assert _moves(direct, [0.0], nodes, mapped) is False
    assert _moves(direct, [0.0], nodes) is False


def test_minimum_moves_reports_newton_ending_at_the_opposite_edge_of_a_two_node_span():
    # the docstring's contract: True when Newton from the usual start misses the grid's global minimum. A window of
    # one grid step (e.g. horizon_myr=(0, 1) with grid_step_myr=1) has a two-node span; a slow distant draw turned
    # around by the tide, x(t) = 1 + t - 1.1 t^2, has its global minimum at the end t = 1 (0.9 against 1.0 at
    # t = 0). Newton from the start t = 0 stays at t = 0 (the separation rises there): it missed the minimum,
    # by |0 - 1| = h exactly, which counts as a miss (a strict `> h` once left it out)
    nodes = np.array([0.0, 1.0])
    assert _moves([[[1.0, 1.0, -1.1], [0.0], [0.0]]], [0.0], nodes) is True


# ---------------------------------------------------------------- _Diagnostics, _Progress, _Results


def _stats(**fields):
    """A leaf's check statistics as _map_leaf and _map_batch give them (invented values)."""
    return fields


def test_diagnostics_gather_the_leaves_field_by_field():
    window = (-40.0, 25.0)
    diag = _Diagnostics(window)
    diag.nodes = 77
    leaves = [
        _stats(checked=10, multimodal=True, err_au=0.02, err_t=0.003, coef=0.4, int_err=0.01, span=(-12.0, 3.0)),
        _stats(checked=12, multimodal=False, err_au=0.05, err_t=0.001, coef=0.1, int_err=0.03, span=(-5.0, 9.0)),
        _stats(checked=11, multimodal=False, err_au=0.01, err_t=0.002, coef=0.2, int_err=0.02, span=(-7.0, 4.0)),
    ]
    for stats in leaves:
        diag.leaf(stats)
    diag.fallback, diag.small = 4, 6
    model = types.SimpleNamespace(map_order=3, map_tolerance_au=0.5)
    out = diag.to_dict(model, 1000)
    # counts and maxima computed here from the leaves' statistics
    assert out["window_myr"] == [-40.0, 25.0]
    assert out["grid_nodes"] == 77
    assert out["n_map_leaves"] == 3
    assert out["n_checked"] == 33
    assert out["multimodal_leaves"] == 1
    assert out["map_error_au_max"] == 0.05
    assert out["map_error_time_myr_max"] == 0.003
    assert out["map_error_coefficient_max"] == 0.4
    assert out["integration_error_au"] == 0.03
    # the span [pc/(km/s)] in Myr: the earliest start and the latest end of the leaves' spans
    assert out["map_span_myr"] == pytest.approx([-12.0 * C, 9.0 * C], rel=1e-15)
    assert out["fallback_samples"] == 4 and out["sparse_samples"] == 6
    assert out["fallback_reason"].startswith("10 of 1000 samples integrated directly: 6 in parts of the cloud")
    # the error model's text: a degree-`order` polynomial leaves a remainder of degree order + 1 (Taylor's
    # theorem), and it names the check's quantities as _map_leaf computes them (safety factor 2, the check
    # draws, the largest principal coordinate)
    text = out["map_error_model"]
    assert re.findall(r"r\^(\d+)", text) == ["4"]
    assert "max(e, c * r^4) per leaf of the cloud: e twice the largest error (in d_ph, and in position at any " in text
    assert "node) on random check draws and the two farthest from the centre, r a draw's largest principal " in text
    assert text.endswith("coordinate, c = e / r_check^(order + 1) with r_check the farthest check draw's")


def test_diagnostics_of_small_maxima_and_no_leaves():
    # maxima start at zero: leaves with errors and coefficients below 1 report them, not a starting value
    diag = _Diagnostics((-10.0, 10.0))
    diag.leaf(_stats(checked=3, multimodal=False, err_au=1e-4, err_t=2e-5, coef=3e-3, int_err=1e-6, span=(2.0, 5.0)))
    out = diag.to_dict(types.SimpleNamespace(map_order=2, map_tolerance_au=0.5), 10)
    assert out["map_error_time_myr_max"] == 2e-5 and out["map_error_coefficient_max"] == 3e-3
    assert out["integration_error_au"] == 1e-6 and out["map_error_au_max"] == 1e-4
    assert out["map_span_myr"] == pytest.approx([2.0 * C, 5.0 * C], rel=1e-15)
    assert "fallback_reason" not in out
    empty = _Diagnostics((-10.0, 10.0)).to_dict(types.SimpleNamespace(map_order=2, map_tolerance_au=0.5), 10)
    assert empty["map_span_myr"] == [] and empty["n_map_leaves"] == 0 and empty["integration_error_au"] == 0.0


def test_progress_counts_from_zero_and_stops_at_the_total():
    seen = []
    report = _Progress(lambda done, total: seen.append((done, total)), 10)
    report.add(3)
    report.add(np.int64(4))
    report.add(9)
    assert seen == [(3, 10), (7, 10), (10, 10)]


def test_results_are_nan_and_false_until_filled():
    out = _Results(4)
    out.put(np.array([0, 2]), np.array([1.5, -2.0]), np.ones((2, 6)), np.array([True, False]), np.array([True, True]))
    assert out.t.dtype == float and np.isnan(out.t[[1, 3]]).all() and out.t[[0, 2]].tolist() == [1.5, -2.0]
    assert np.isnan(out.state[[1, 3]]).all() and (out.state[[0, 2]] == 1.0).all()
    assert out.outside.tolist() == [True, False, False, False] and out.conv.tolist() == [True, False, True, False]


# ---------------------------------------------------------------- Leaf.features


def test_leaf_features_are_the_monomials_of_the_principal_coordinates():
    # x = (rel - centre) @ axes, then 1, x_0..x_5 and the degree-2 products of the k = 2 first: x0^2, x0 x1,
    # x1^2 (common practice, no source)
    center = np.array([1.0, 2.0, 3.0, 0.5, -0.5, 1.0])
    axes = np.diag([0.5, 2.0, 1.0, 1.0, 4.0, 0.1])
    leaf = Leaf(rows=np.arange(2), center=center, axes=axes, k=2, order=2)
    rel = np.array([[3.0, 1.0, 3.0, 0.5, -0.5, 1.0], [1.0, 2.5, 4.0, 1.5, 0.0, 11.0]])
    x = np.array([[1.0, -2.0, 0.0, 0.0, 0.0, 0.0], [0.0, 1.0, 1.0, 1.0, 2.0, 1.0]])
    expected = np.hstack([np.ones((2, 1)), x, np.column_stack([x[:, 0] ** 2, x[:, 0] * x[:, 1], x[:, 1] ** 2])])
    assert np.allclose(leaf.features(rel), expected, rtol=0, atol=1e-14)
