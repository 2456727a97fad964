"""The leaf-map engine's inner steps (perierr.models.orbit.mapping) against closed forms and their documented rules.

Each step is fed invented inputs whose answer is known outside the code:

- ``scaled_offsets``: the formula of the leaves docstring, ``u = (ds, dw (|t_lin| + 1))``;
- ``_span``: invented separations of a leaf's probes with one or two valleys, and straight-line probes
  ``s(t) = x + v t`` (Newton's first law, common practice, no source), against the rules of the mapping
  docstring (valleys, starts, pads of 3 nodes and 5 % of the time);
- ``_apply``, ``_map_leaf``: draws on polynomial paths in time (reproduced exactly by quintic Hermite
  interpolation, six conditions per interval, common practice, no source) and in their principal coordinates,
  against a brute-force minimum and numpy's least squares;
- ``_map_batch``: an isotropic harmonic potential, Phi = w^2 |x|^2 / 2, with the Sun at rest at its centre, whose
  relative orbit is ``s(t) = s0 cos(wt) + w0 sin(wt) / w`` exactly (common practice, no source);
- ``_pick``, ``_map_round``: their docstrings' contracts (distinct check draws; batches within the memory bound).
"""

import types

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from perierr.models.orbit import OrbitModel, mapping
from perierr.models.orbit.leaves import Leaf, make_leaf, scaled_offsets
from perierr.models.orbit.mapping import (
    _apply,
    _Grid,
    _interval_quintics,
    _map_batch,
    _map_leaf,
    _pick,
    _span,
    smallest_leaf,
)
from perierr.units import AU_PER_PC


# ---------------------------------------------------------------- scaled_offsets
def test_scaled_offsets_follow_the_documented_formula():
    # leaves docstring: u = (delta_s, delta_w * (|t_lin| + 1)) [pc], delta the offset FROM the centre
    rel = np.array([[10.0, -2.0, 3.0, -20.0, 1.0, 0.5], [4.0, 6.0, -1.0, 5.0, -3.0, 2.0]])
    center = np.array([1.0, 2.0, 3.0, -10.0, 2.0, -0.5])
    t_lin = np.array([-2.5, 4.0])
    expected = np.array([[9.0, -4.0, 0.0, -10.0 * 3.5, -1.0 * 3.5, 1.0 * 3.5],
                         [3.0, 4.0, -4.0, 15.0 * 5.0, -5.0 * 5.0, 2.5 * 5.0]])  # fmt: skip
    assert np.allclose(scaled_offsets(rel.copy(), center, t_lin), expected, rtol=0, atol=1e-12)


# ---------------------------------------------------------------- _span
def _along_x(*profiles):
    """States (m, P, 6) of probes whose separations are the given profiles, all along +x."""
    d = np.stack(profiles, axis=1)
    states = np.zeros(d.shape + (6,))
    states[..., 0] = d
    return states


def _leaf(center):
    return Leaf(rows=np.arange(3), center=np.asarray(center, float), axes=np.eye(6), k=1, order=1)


def _profile(points, m=41):
    """A piecewise-linear separation through (node index, value) points [pc]."""
    idx, val = zip(*points, strict=True)
    return np.interp(np.arange(m), idx, val)


NODES41 = np.arange(-20.0, 21.0) * 0.5
# centre at 1 pc moving towards the Sun at 1 km/s: straight-line time 1 (only the shift depends on it)
CENTER = [1.0, 0.0, 0.0, -1.0, 0.0, 0.0]


@pytest.mark.parametrize(
    ("points", "valleys"),
    [
        # still falling towards the past edge (node 0) and a second valley at node 8
        ([(0, 1.1), (4, 1.5), (8, 1.1), (40, 2.7)], (0, 8)),
        # a valley at node 33 and still falling towards the future edge (node 40), 7 nodes on; the past edge high
        ([(0, 3.0), (33, 1.35), (36, 1.65), (40, 1.25)], (33, 40)),
    ],
    ids=["past-edge-and-8", "33-and-future-edge"],
)
def test_two_valleys_farther_apart_than_two_pads_make_the_leaf_multimodal(points, valleys):
    # mapping docstring: a valley is a node below both neighbours, or a window edge the separation still falls
    # towards; a probe with more than one valley gives the leaf regions (None: one valley each). Two valleys more
    # than 2 x 3 pad nodes apart (_SPAN_PAD_NODES) are separate minima. Three probes 0.2 pc apart along the same
    # line: the largest of their closest approaches (reach) is 1.5 or 1.65 pc, and at both valleys the lowest
    # projection minus half the probes' range (0.4 pc) is below it: both valleys matter
    d0 = _profile(points)
    states = _along_x(d0, d0 + 0.2, d0 + 0.4)
    (a, b), regions, shift = _span(NODES41, states, _leaf(CENTER), np.array([0.5, 1.0, 1.5]))
    assert regions is not None
    # the span holds both valleys, widened by 3 nodes (clipped to the grid)
    assert a <= max(0, valleys[0] - 3) and b >= min(40, valleys[1] + 3)
    # shift: the centre's grid minimum (node 0 or 40: the first of the lowest nodes) minus its straight-line
    # time -x.v/|v|^2 = 1
    lowest = int(np.argmin(d0))
    assert shift == pytest.approx(NODES41[lowest] - 1.0, abs=1e-12)


@pytest.mark.parametrize(("second", "several"), [(1.4, True), (1.8, False)])
def test_a_valley_no_draw_can_reach_is_ignored(second, several):
    # mapping._span's documented rule: a valley matters when a draw could come closer there than the probes'
    # largest closest approach (reach); a draw's distance is at least its projection on the centre's direction,
    # which lies above the probes' lowest projection minus half their range. Probes 0, 0.2 and 0.4 pc above
    # one profile: reach = 1.0 + 0.4, bound = d0 - 0.2 at each node; the valley at node 30 (20 nodes from the
    # first, at node 10) matters when d0 - 0.2 <= 1.4, i.e. d0 <= 1.6
    d0 = _profile([(0, 2.5), (10, 1.0), (20, 2.5), (30, second), (40, 2.5)])
    states = _along_x(d0, d0 + 0.2, d0 + 0.4)
    _, regions, _ = _span(NODES41, states, _leaf(CENTER), np.array([0.5, 1.0, 1.5]))
    assert (regions is not None) == several


def _straight_probes(t_min, nodes):
    """Straight-line states (m, P, 6) of probes passing 1 pc from the Sun at times t_min, moving at 1 km/s in x."""
    t_min = np.asarray(t_min, float)
    x = np.zeros((t_min.size, 6))
    x[:, 0], x[:, 1], x[:, 3] = -t_min, 1.0, 1.0
    states = np.empty((nodes.size, t_min.size, 6))
    states[..., :3] = x[None, :, :3] + x[None, :, 3:] * nodes[:, None, None]
    states[..., 3:] = x[None, :, 3:]
    return x, states


def test_span_of_a_leaf_in_the_middle_of_the_window():
    # straight lines (Newton's first law): probes (the centre, then the draws) pass 1 pc from the Sun at the
    # straight-line times 0 (centre) and -5, -2, 0, 1, 6 (draws, the nodes 15, 18, 20, 21, 26 of a 1-step grid).
    # Documented rule: the span holds the valleys and the draws' straight-line times shifted by the centre's
    # orbit-minus-straight-line time (here 0), each widened by 5 % of |t| and 3 nodes: the first node at or after
    # -5 - 0.25 is node 15, minus 3: 12; the first at or after 6 + 0.3 is node 27, plus 3: 30
    nodes = np.arange(-20.0, 21.0)
    times = np.array([0.0, -5.0, -2.0, 0.0, 1.0, 6.0])
    x, states = _straight_probes(times, nodes)
    span, regions, shift = _span(nodes, states, _leaf(x[1:].mean(axis=0)), times[1:])
    assert span == (12, 30) and regions is None and shift == 0.0


def test_span_of_a_leaf_whose_draws_pass_after_the_window():
    # the same straight lines passing the Sun at 11.7, 12.0 and 12.3 (centre 12.0), after the window's end at 10:
    # every probe still falls at the future edge (node 20), the shift is 10 - 12 = -2, and the starts 9.7..10.3
    # are clipped to the window: the last node (20) is the only mark, widened by 5 % of 10 (0.5: node 20) and 3
    # nodes: span (17, 20)
    nodes = np.arange(-10.0, 11.0)
    times = np.array([12.0, 11.7, 12.0, 12.3])
    x, states = _straight_probes(times, nodes)
    span, regions, shift = _span(nodes, states, _leaf(x[1:].mean(axis=0)), times[1:])
    assert span == (17, 20) and regions is None
    assert shift == pytest.approx(-2.0, abs=1e-12)


# ---------------------------------------------------------------- polynomial paths for _apply and _map_leaf
def _poly(coeffs, t):
    """Position, velocity and acceleration (len(t), 3) of x_i(t) = sum_k coeffs[i][k] t^k."""
    P = np.polynomial.polynomial
    pos = np.stack([P.polyval(t, c) for c in coeffs], axis=-1)
    vel = np.stack([P.polyval(t, P.polyder(c)) for c in coeffs], axis=-1)
    acc = np.stack([P.polyval(t, P.polyder(c, 2)) for c in coeffs], axis=-1)
    return pos, vel, acc


def _brute_minimum(coeffs, t0, t1):
    t = np.linspace(t0, t1, 400_001)
    d = np.linalg.norm(_poly(coeffs, t)[0], axis=1)
    i = int(np.argmin(d))
    return t[i], d[i]


# two minima: x = t^2 - 0.1 t - 0.5 vanishes at t = -0.659 (y = 0.063) and t = +0.759 (y = 0.035, the global one)
PATH_B = [[-0.5, -0.1, 1.0], [0.05, -0.02], [0.0]]


def test_apply_starts_beyond_the_span_at_its_last_node():
    # _apply without regions: Newton from t_start, clamped to the span (newton_perihelion docstring). From the
    # span's end (t = 1) the separation rises (x.v = 0.4 x 1.9 > 0), so Newton descends into the valley at +0.759,
    # the global minimum (brute force on a fine grid); from the middle node t = 0 it would run to -0.659
    nodes = np.array([-1.0, 0.0, 1.0])
    pos, vel, acc = _poly(PATH_B, nodes)
    coef = np.zeros((7, nodes.size, 12))
    coef[0] = np.hstack([pos, vel, vel, acc])  # a map that gives every draw this path
    leaf = Leaf(rows=np.arange(3), center=np.zeros(6), axes=np.eye(6), k=1, order=1)
    t_start = np.array([5.0, 1.0, 0.6])
    t, state, outside, conv = _apply(leaf, np.zeros((3, 6)), t_start, _interval_quintics(coef, nodes), nodes,
                                     None, coef)  # fmt: skip
    t_ref, d_ref = _brute_minimum(PATH_B, -1.0, 1.0)
    assert t_ref == pytest.approx(0.759, abs=1e-3)
    # brute-force grid of 5e-6: the time to 1e-5; the distance to 1e-9 pc (quadratic near the minimum)
    assert np.allclose(t, t_ref, rtol=0, atol=1e-5)
    assert np.allclose(np.linalg.norm(state[:, :3], axis=1), d_ref, rtol=0, atol=1e-9)
    # outside and converged are flags (newton_perihelion docstring: ndarray of bool), usable as masks
    assert outside.dtype == bool and conv.dtype == bool
    assert not outside.any() and conv.all() and t[~outside].size == 3


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), n_check=st.integers(1, 12))
def test_pick_check_draws_are_distinct_and_unseen(seed, n_check):
    # _pick docstring: the extremes (largest and smallest of each principal coordinate) and random draws train the
    # fit; the check draws are n_check random draws the fit does not see, and the two farthest of the rest. With
    # exactly n_check + 2 draws left, the check draws are all of them, each once
    rng = np.random.default_rng(seed)
    n_train = 20
    x = rng.uniform(-1.0, 1.0, size=(n_train + n_check + 2, 6))
    x[:12] = np.vstack([np.eye(6), -np.eye(6)]) * 1.5  # 12 distinct extremes
    ex, tr, ch = _pick(x, n_train, n_check, np.random.default_rng(seed + 1))
    assert sorted(ex.tolist()) == list(range(12)) and tr.size == n_train - 12
    assert ch.size == n_check + 2 and np.unique(ch).size == ch.size
    assert sorted(np.concatenate([ex, tr, ch]).tolist()) == list(range(x.shape[0]))
    rest = np.setdiff1d(np.arange(x.shape[0]), np.concatenate([ex, tr]))
    score = np.max(np.abs(x), axis=1)
    assert sorted(ch[-2:].tolist()) == sorted(rest[np.argsort(-score[rest])[:2]].tolist())


# ---------------------------------------------------------------- _map_leaf on polynomial paths
def _leaf_paths(x, eps2, eps3):
    """Path coefficients of draws with principal coordinates x: they pass (0, b) at t = tau along +x at 1 km/s.

    tau = 0.2 x0 + 0.1 x1, b = 1 + 0.01 x2 + eps2 x0^2 + eps3 x0^3 [pc]: linear in x but for the x0^2, x0^3 terms.
    """
    tau = 0.2 * x[:, 0] + 0.1 * x[:, 1]
    b = 1.0 + 0.01 * x[:, 2] + eps2 * x[:, 0] ** 2 + eps3 * x[:, 0] ** 3
    return tau, b


def _line_states(x, nodes, eps2, eps3):
    tau, b = _leaf_paths(x, eps2, eps3)
    st_ = np.zeros((nodes.size, x.shape[0], 6))
    st_[..., 0] = nodes[:, None] - tau[None, :]
    st_[..., 1] = b[None, :]
    st_[..., 3] = 1.0
    de = np.zeros_like(st_)
    de[..., 0] = 1.0  # velocity (1, 0, 0), acceleration 0
    return st_, de


def _leaf_case(eps2=1e-6, eps3=1e-7, n_other=30, seed=4):
    """Principal coordinates, pick and integrated states of an invented leaf (train, check, centre)."""
    rng = np.random.default_rng(seed)
    n_train, n_check = 24, 6
    x_train = rng.uniform(-1.0, 1.0, size=(n_train, 6))
    x_train[:12] = np.vstack([np.eye(6), -np.eye(6)])
    x_check = rng.uniform(-0.5, 0.5, size=(n_check, 6))
    x_other = rng.uniform(-1.0, 1.0, size=(n_other, 6))
    x = np.vstack([x_train, x_check, x_other])
    pick = (np.arange(12), np.arange(12, n_train), np.arange(n_train, n_train + n_check))
    nodes = np.linspace(-2.0, 2.0, 9)
    rows = np.concatenate([pick[0], pick[1], pick[2]])
    st_, de = _line_states(np.vstack([x[rows], np.zeros((1, 6))]), nodes, eps2, eps3)
    return x, pick, nodes, st_, de


def _run_leaf(x, pick, nodes, st_, de, t_start, map_order, tol):
    model = types.SimpleNamespace(map_order=map_order, map_tolerance_au=tol)
    leaf = Leaf(rows=np.arange(x.shape[0]), center=np.zeros(6), axes=np.eye(6), k=1, order=map_order)
    found, bad, stats = _map_leaf(model, nodes, st_, de, t_start, leaf, x, pick, None)
    return leaf, found, bad, stats


def _lstsq_error_au(x, pick, degree, eps2, eps3):
    """Largest check error [au] of a least-squares fit of b in 1, x_0..x_5, x_0^2..x_0^degree (numpy lstsq)."""
    ex, tr, ch = pick
    train = np.concatenate([ex, tr])

    def feats(xx):
        return np.hstack([np.ones((xx.shape[0], 1)), xx] + [xx[:, :1] ** p for p in range(2, degree + 1)])

    b = _leaf_paths(x, eps2, eps3)[1]
    coef, *_ = np.linalg.lstsq(feats(x[train]), b[train], rcond=None)
    return float(np.max(np.abs(feats(x[ch]) @ coef - b[ch]))) * AU_PER_PC


def test_map_leaf_error_model_grows_as_the_remainder_beyond_the_farthest_check_draw():
    # OrbitModel diagnostics text: error_au <= max(e, c r^(order+1)), e twice the largest check error, r a draw's
    # largest principal coordinate, c = e / r_check^(order + 1). The check error here is computed outside the
    # code: the draws' closest distance is b (x and t enter only through tau), and the degree-2 map's b is numpy's
    # least-squares fit, off by the x0^3 term
    x, pick, nodes, st_, de = _leaf_case()
    tau = _leaf_paths(x, 1e-6, 1e-7)[0]
    e1, e2 = _lstsq_error_au(x, pick, 1, 1e-6, 1e-7), _lstsq_error_au(x, pick, 2, 1e-6, 1e-7)
    # a tolerance that rejects degree 1 (its error above 0.2 of it) and keeps the degree-2 floor below it
    tol = 3.0 * e2 * (1.0 / 0.5) ** 3 / 2.0
    assert e1 > 0.2 * tol and 2.0 * e2 < tol
    leaf, (t, state, outside, conv), bad, stats = _run_leaf(x, pick, nodes, st_, de, tau + 0.3, 2, tol)
    assert leaf.order == 2
    assert stats["err_au"] == pytest.approx(e2, rel=1e-6)
    reach = float(np.max(np.abs(x[pick[2]])))
    assert stats["coef"] == pytest.approx(2.0 * e2 / reach**3, rel=1e-6)
    score = np.max(np.abs(x), axis=1)
    expected_bad = np.maximum(2.0 * e2, 2.0 * e2 * (score / reach) ** 3) > tol
    expected_bad[pick[2]] = False
    assert 0 < expected_bad.sum() < x.shape[0] - pick[2].size
    assert np.array_equal(bad, expected_bad)
    # every draw's perihelion: at tau, distance b (its map's, within the error of the fit)
    b = _leaf_paths(x, 1e-6, 1e-7)[1]
    assert np.allclose(t, tau, rtol=0, atol=1e-9) and conv.all() and not outside.any()
    # the map's promise: the trusted draws' distances within the tolerance
    assert np.max(np.abs(np.linalg.norm(state[~bad, :3], axis=1) - b[~bad])) * AU_PER_PC <= tol


def test_map_leaf_takes_the_lowest_degree_whose_check_error_is_at_most_the_margin():
    # OrbitModel docstring: the lowest degree the check trusts is used; mapping._ORDER_MARGIN: within 0.2 of the
    # tolerance. At a tolerance whose fifth is exactly the degree-1 check error, degree 1 is trusted (as the draws'
    # error model trusts a predicted error equal to the tolerance: a draw is untrusted above it)
    x, pick, nodes, st_, de = _leaf_case()
    tau = _leaf_paths(x, 1e-6, 1e-7)[0]
    _, _, _, stats1 = _run_leaf(x, pick, nodes, st_, de, tau + 0.3, 1, 1.0)
    e1 = stats1["err_au"]
    assert e1 == pytest.approx(_lstsq_error_au(x, pick, 1, 1e-6, 1e-7), rel=1e-6)
    tol = e1 / 0.2
    for _ in range(64):  # the float whose product with 0.2 is exactly e1
        if 0.2 * tol == e1:
            break
        tol = np.nextafter(tol, np.inf if 0.2 * tol < e1 else -np.inf)
    assert 0.2 * tol == e1
    leaf, _, _, stats = _run_leaf(x, pick, nodes, st_, de, tau + 0.3, 2, tol)
    assert leaf.order == 1 and stats["err_au"] == e1


def test_map_leaf_scans_every_valley_when_newton_from_the_start_misses_the_minimum():
    # mapping docstring: leaves whose draws may have several minima search from each of the lowest valleys over
    # the whole span (the smallest refined minimum wins). Draws on PATH_B shifted by 0.005 x0 pc in y and 0.01 x1
    # in z: the global minimum near t = +0.759 (brute force), the other near -0.659. Newton from t_start = -0.5
    # alone would stop in the wrong valley; the check of the training draws (_minimum_moves) must see it
    x, pick, _, _, _ = _leaf_case()
    nodes = np.linspace(-1.0, 1.0, 9)
    rows = np.concatenate(pick)
    xx = np.vstack([x[rows], np.zeros((1, 6))])

    def path(xi):
        return [PATH_B[0], [0.05 + 0.005 * xi[0], -0.02], [0.01 * xi[1]]]

    st_, de = np.empty((nodes.size, xx.shape[0], 6)), np.empty((nodes.size, xx.shape[0], 6))
    for j, xi in enumerate(xx):
        pos, vel, acc = _poly(path(xi), nodes)
        st_[:, j], de[:, j] = np.hstack([pos, vel]), np.hstack([vel, acc])
    _, (t, state, outside, conv), bad, stats = _run_leaf(x, pick, nodes, st_, de, np.full(x.shape[0], -0.5), 2, 5.0)
    assert stats["multimodal"] is True
    ref = np.array([_brute_minimum(path(xi), -1.0, 1.0) for xi in x[::6]])
    assert np.allclose(t[::6], ref[:, 0], rtol=0, atol=1e-4)
    assert np.allclose(np.linalg.norm(state[::6, :3], axis=1), ref[:, 1], rtol=0, atol=1e-8)
    assert conv.all() and not outside.any() and not bad.any()


# ---------------------------------------------------------------- _map_batch in a harmonic potential
OMEGA = 0.05  # [km/s / pc]


class _Harmonic:
    def __init__(self, omega):
        self.omega = omega

    def acceleration(self, x):
        return -(self.omega**2) * np.asarray(x, dtype=float)


def _harmonic_model(n_check=4):
    # what _Grid, _map_batch and _map_leaf read of an OrbitModel; the Sun at rest at the centre
    return types.SimpleNamespace(potential=_Harmonic(OMEGA), _sun_state=np.zeros(6), grid_step_myr=1.0,
                                 grid_travel_pc=1e9, map_tolerance_au=1.0, n_check=n_check, map_order=2)  # fmt: skip


def _harmonic_distance(rel, t):
    """|s(t)| (len(t), n) of the closed-form harmonic orbits; t (len(t), n) or (len(t), 1)."""
    c, s = np.cos(OMEGA * t)[..., None], np.sin(OMEGA * t)[..., None]
    return np.linalg.norm(rel[None, :, :3] * c + rel[None, :, 3:] / OMEGA * s, axis=-1)


def _closed_form_minimum(rel, t0, t1):
    """Brute-force closest approach of the harmonic orbits over [t0, t1]: t, d [pc].

    A grid of 2001 times, then 2001 times over the two steps around each draw's lowest: resolution 3e-5.
    """
    t = np.linspace(t0, t1, 2001)[:, None]
    i = np.argmin(_harmonic_distance(rel, t), axis=0)
    step = t[1, 0] - t[0, 0]
    fine = np.clip(t[i, 0][None, :] + np.linspace(-step, step, 2001)[:, None], t0, t1)
    d = _harmonic_distance(rel, fine)
    k = np.argmin(d, axis=0)
    cols = np.arange(rel.shape[0])
    return fine[k, cols], d[k, cols]


# invented leaf centres [pc, km/s]: closest at t = -13.1, +13.6 pc/(km/s) (3.0 and 2.2 pc), and the third still
# approaching at the window's end (+30 Myr = 30.7 pc/(km/s), 0.70 pc)
CENTRES = np.array([
    [-30.0, 8.0, 3.0, -2.0, 0.3, 0.1],
    [40.0, -6.0, 2.0, -2.5, 0.2, -0.1],
    [30.0, 0.5, 0.0, -0.02, 0.0, 0.0],
])  # fmt: skip


def test_map_batch_leaves_get_their_own_spans_and_trust_an_end_of_window_perihelion():
    # three leaves of 112 invented draws (the least leaf of degree 2 with 4 check draws) in one batch. The mapping
    # docstring: each leaf's span holds every draw's global minimum (here the closed form's, by brute force), and
    # only draws whose search ends at a span edge INSIDE the window are not trusted: the third leaf's draws still
    # fall at the window's end (outside) and keep the map's answer. In a harmonic potential the orbit is linear in
    # the initial state, so the map is exact and the check trusts every draw
    model = _harmonic_model()
    n_leaf = 112
    rng = np.random.default_rng(7)
    spread = np.array([0.3, 0.3, 0.3, 0.003, 0.003, 0.003])
    rel = np.vstack([c + rng.uniform(-1.0, 1.0, size=(n_leaf, 6)) * spread for c in CENTRES])
    t_lin = -np.sum(rel[:, :3] * rel[:, 3:], axis=1) / np.sum(rel[:, 3:] ** 2, axis=1)
    grid = _Grid(model, (-30.0, 30.0), 5.0)
    leaves = [make_leaf(rel, np.arange(j * n_leaf, (j + 1) * n_leaf), t_lin, order=2, max_k=6) for j in range(3)]
    n_train = smallest_leaf(OrbitModel(map_order=2, n_check=4, min_leaf_samples=1)) // 2 - 4 - 2
    results = _map_batch(model, grid, rel, t_lin, leaves, n_train, np.random.default_rng(0))
    t_ref, d_ref = _closed_form_minimum(rel, grid.nodes[0], grid.nodes[-1])
    for j, (leaf, ((t, state, outside, conv), bad, stats)) in enumerate(zip(leaves, results, strict=True)):
        assert not bad.any() and conv.all()
        lo, hi = stats["span"]
        assert lo <= t_ref[leaf.rows].min() and t_ref[leaf.rows].max() <= hi
        # brute force to 3e-5 pc/(km/s); RK4 within a tenth of the 1 au tolerance
        assert np.allclose(t, t_ref[leaf.rows], rtol=0, atol=1e-3)
        assert np.allclose(np.linalg.norm(state[:, :3], axis=1), d_ref[leaf.rows], rtol=0, atol=5e-6)
        assert outside.all() if j == 2 else not outside.any()
    assert hi == grid.nodes[-1]


# ---------------------------------------------------------------- _map_round: batches within the memory bound
@pytest.mark.parametrize("n_check", [1, 53])
def test_map_round_batches_hold_at_most_the_batch_floats(monkeypatch, n_check):
    # mapping._BATCH_FLOATS: floats of tabulated states (states and derivatives: 12 per node) a batch of leaves may
    # hold; a leaf integrates its training draws, its n_check + 2 check draws and its centre. Degree 2: n_train 50
    # (smallest_leaf = 2 (n_train + n_check + 2)); n_check 53 is n_train + 3. 4001 nodes (2000 a side, the most)
    orbit_model = OrbitModel(map_order=2, n_check=n_check, min_leaf_samples=1)
    n_train = smallest_leaf(orbit_model) // 2 - n_check - 2
    assert n_train == 50
    batches = []

    def stand_in(model, grid, rel_all, t_lin_all, leaves, n_train, rng):
        batches.append(list(leaves))
        return [leaf * 10 for leaf in leaves]

    monkeypatch.setattr(mapping, "_map_batch", stand_in)
    grid = types.SimpleNamespace(nodes=np.zeros(4001))
    out = mapping._map_round(orbit_model, grid, None, None, list(range(9)), n_train, None)
    assert out == [10 * k for k in range(9)]
    per_leaf = 12 * 4001 * (n_train + n_check + 3)
    assert all(len(b) == 1 or len(b) * per_leaf <= mapping._BATCH_FLOATS for b in batches)
    # and as few batches as the bound allows
    assert len(batches) == -(-9 // max(1, mapping._BATCH_FLOATS // per_leaf))
