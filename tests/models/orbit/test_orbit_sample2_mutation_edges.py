"""Edges of the orbit model's helpers against references written here (second random sample of survivors).

- ``valley_starts``: a brute-force scan of the separations with the docstring's definition of a valley;
- ``make_leaf``: the number of nonlinear coordinates from the principal spreads of draws built on the columns of a
  Hadamard matrix (orthogonal, zero-sum columns: the covariance is exactly diagonal, so the principal standard
  deviations are the column scales; common practice, no source);
- ``partition`` and ``scaled_offsets``: their docstrings' contracts and formula;
- ``smallest_leaf``: the model's documented "at least twice its training and check draws", the training and check
  draws counted from what the map actually picks;
- the bulge's radial table: built, widened and reused on demand, checked against the closed-form Phi' of the
  power-law bulge with a Gaussian cut-off (Bovy 2015, Sect. 3.5).

All stars, paths and potentials are invented.
"""

import types

import numpy as np
import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy.linalg import hadamard
from scipy.special import gammainc

from perierr.models.orbit import mapping, spheres
from perierr.models.orbit.integrate import newton_perihelion, valley_starts
from perierr.models.orbit.leaves import make_leaf, partition, scaled_offsets
from perierr.models.orbit.mapping import smallest_leaf
from perierr.models.orbit.potentials import G_PC_KMS2_PER_MSUN, PowerLawCutoff

# ---------------------------------------------------------------- valley_starts


def _brute_valleys(d2, count):
    """Node indices (k,) for one star by the docstring: global minimum first, then the other valleys by depth."""
    m = len(d2)
    if m < 3:
        valleys = list(range(m))
    else:
        valleys = [i for i in range(1, m - 1) if d2[i] < d2[i - 1] and d2[i] <= d2[i + 1]]
        valleys += [0] if d2[0] < d2[1] else []
        valleys += [m - 1] if d2[-1] < d2[-2] else []
    lowest = int(np.argmin(d2))  # the first of equal minima (numpy's argmin)
    rest = sorted((i for i in valleys if i != lowest), key=lambda i: (d2[i], i))  # deeper first, then earlier
    picked = ([lowest] + rest)[: min(count, m)]
    return picked + [lowest] * (min(count, m) - len(picked))  # "rows with fewer valleys repeat their lowest"


@settings(max_examples=150, deadline=None, derandomize=True, database=None)
@given(arrays(np.float64, st.tuples(st.integers(1, 8), st.integers(1, 3), st.just(6)),
              elements=st.integers(-3, 3).map(float)),
       st.integers(1, 4))  # fmt: skip
@example(np.array([9.0, 4.0, 1.0, 0.0, 1.0, 4.0, 9.0])[:, None, None] * np.eye(6)[0], 3)  # one valley: repeats
@example(np.array([3.0, 2.0, 3.0, 0.0, 3.0, 1.0, 3.0, 2.0])[:, None, None] * np.eye(6)[0], 3)  # three valleys
@example(np.array([2.0, 1.0, 3.0, 0.0, 2.0, 3.0])[:, None, None] * np.eye(6)[0], 3)  # rising end: no valley
@example(np.array([0.0, 2.0, 3.0, 1.0, 2.0])[:, None, None] * np.eye(6)[0], 3)  # falling end
def test_valley_starts_match_a_brute_force_scan(states, count):
    # small integer coordinates give exact squared separations and many ties; velocities must not matter
    m, n = states.shape[:2]
    nodes = np.linspace(-3.0, 2.0, m)
    got = valley_starts(nodes, states, count)
    d2 = np.sum(states[..., :3] ** 2, axis=-1)
    expected = np.array([_brute_valleys(d2[:, j], count) for j in range(n)]).T
    assert got.shape == (min(count, m), n)
    assert np.array_equal(got, nodes[expected])


# ---------------------------------------------------------------- make_leaf: how many nonlinear coordinates

# principal standard deviations (powers of two: exact), one per coordinate, in a shuffled order
_SCALES = np.array([1 / 128, 4.0, 0.25, 2.0, 1 / 2048, 1.0])
_CENTER = np.array([3.0, -1.5, 0.25, 12.0, -7.0, 0.5])  # invented mean relative state [pc, km/s]


@pytest.mark.parametrize(
    ("floor", "max_k", "expected"),
    [
        # spreads relative to the widest: 1, 1/2, 1/4, 1/16, 1/512, 1/8192
        (1e-3, 6, 5),  # the default floor: 1/512 ~ 0.00195 kept, 1/8192 not
        (0.3, 6, 2),  # 1 and 1/2
        (0.25, 6, 3),  # "below spread_floor times the widest" is strict: exactly 1/4 keeps its terms
        (0.25, 2, 2),  # never more than max_k
        (2.0, 6, 1),  # at least one (the widest)
    ],
)
def test_make_leaf_counts_coordinates_spread_at_least_the_floor(floor, max_k, expected):
    # documented contract of make_leaf: "Coordinates whose spread is below spread_floor times the widest one keep
    # only their linear term"; with |t_lin| = 0 velocity offsets are not rescaled, so the spreads are _SCALES
    d = hadamard(8).astype(float)[:, 1:7] * _SCALES  # zero-sum orthogonal columns: covariance diag(_SCALES^2)
    rel = _CENTER + d
    leaf = make_leaf(rel, np.arange(8), np.zeros(8), order=3, max_k=max_k, spread_floor=floor)
    assert leaf.k == expected
    assert np.allclose(leaf.center, _CENTER, rtol=0, atol=1e-15)


# ---------------------------------------------------------------- partition and scaled_offsets


def test_partition_keeps_a_part_lying_exactly_within_the_radius():
    # docstring: "A part whose draws all lie within this distance [pc] of their mean in u is not cut"; within
    # includes the boundary (common practice, no source): draws at -1 and +1 pc, mean 0, radius 1 pc
    u = np.zeros((2, 6))
    u[:, 0] = [-1.0, 1.0]
    parts = partition(u, np.arange(2), 1.0, 1)
    assert [p.tolist() for p in parts] == [[0, 1]]
    # just outside: cut into its two draws
    assert sorted(p.tolist() for p in partition(u, np.arange(2), 0.999, 1)) == [[0], [1]]


def test_scaled_offsets_follow_the_docstring_formula():
    # u = (delta_s, delta_w * (|t_lin| + 1)) (docstring of scaled_offsets), written out here element by element
    rng = np.random.default_rng(2027)
    rel = rng.normal(size=(5, 6)) * [100.0, 100.0, 100.0, 20.0, 20.0, 20.0]
    center = rng.normal(size=6)
    t_lin = np.array([-3.0, 0.0, 2.5, -0.5, 10.0])
    expected = np.empty((5, 6))
    for i in range(5):
        expected[i, :3] = rel[i, :3] - center[:3]
        expected[i, 3:] = (rel[i, 3:] - center[3:]) * (abs(t_lin[i]) + 1.0)
    assert np.allclose(scaled_offsets(rel.copy(), center, t_lin), expected, rtol=1e-14, atol=1e-12)


# ---------------------------------------------------------------- smallest_leaf


class _Stop(Exception):
    pass


def test_smallest_leaf_is_twice_the_training_and_check_draws(monkeypatch):
    # OrbitModel docstring: min_leaf_samples is the "Fewest draws of a leaf (at least twice its training and check
    # draws)": with min_leaf_samples = 1 the fewest is exactly twice what the map picks for a leaf. The map's own
    # choice is read from map_perihelia (its n_train) and from _pick (training and check draws of a leaf).
    seen = {}

    def spy_round(model, grid, rel_all, t_lin_all, leaves, n_train, rng):
        x = leaves[0].coordinates(rel_all[leaves[0].rows])
        extremes, train, check = mapping._pick(x, n_train, model.n_check, np.random.default_rng(1))
        seen["train"], seen["check"] = extremes.size + train.size, check.size
        raise _Stop

    class _NoGrid:  # no Sun orbit is needed before the first round of leaves
        def __init__(self, model, window, speed):
            self.nodes = np.linspace(-1.0, 1.0, 5)

        def direct(self, *args):
            raise AssertionError("no draw should be integrated directly here")

    monkeypatch.setattr(mapping, "_map_round", spy_round)
    monkeypatch.setattr(mapping, "_Grid", _NoGrid)
    for order, n_check in [(2, 1), (3, 4), (4, 8)]:
        model = types.SimpleNamespace(map_order=order, min_leaf_samples=1, n_check=n_check, leaf_radius_pc=1e9,
                                      method="auto", window=lambda: (-10.0, 10.0))  # fmt: skip
        rel = np.random.default_rng(order).normal(size=(600, 6)) * [5.0, 5.0, 5.0, 1.0, 1.0, 1.0] + [0, 0, 0, 20, 0, 0]
        seen.clear()
        with pytest.raises(_Stop):
            mapping.map_perihelia(model, rel, np.zeros(600))
        assert seen["check"] == n_check + 2  # "plus its two farthest from the centre" (n_check docstring)
        assert smallest_leaf(model) == 2 * (seen["train"] + seen["check"])


# ---------------------------------------------------------------- the bulge's radial table

BULGE = PowerLawCutoff(mass_msun=4.5e9, alpha=1.8, rc_pc=1900.0)  # invented bulge-like component


def _bulge_d1(r):
    # Phi'(r) = G M(<r) / r^2 with M(<r) = M P((3 - alpha)/2, r^2/rc^2) (Bovy 2015, Sect. 3.5; Newton's theorem)
    return G_PC_KMS2_PER_MSUN * BULGE.mass_msun * gammainc(0.6, (r / BULGE.rc_pc) ** 2) / r**2


def test_radial_table_is_built_widened_and_reused(monkeypatch):
    # spheres caches the tables in a module-level dict: start from an empty one so this test builds them.
    # Docstrings: Phi' within 1e-13 of the exact function (checked at 1e-12), the table "covers the radii asked
    # for, widened, and is rebuilt when asked for radii outside it" ("built or widened on demand")
    monkeypatch.setattr(spheres, "_TABLES", {})
    rng = np.random.default_rng(77)
    r1 = rng.uniform(5000.0, 7000.0, 300)  # >= 256 radii beyond 2 kpc: the table path
    assert np.allclose(BULGE._d1(r1), _bulge_d1(r1), rtol=1e-12, atol=0)
    assert spheres._TABLES[BULGE].covers(float(r1.min()), float(r1.max()))
    r2 = rng.uniform(9000.0, 14000.0, 300)  # beyond the first table: widened to cover both
    assert np.allclose(BULGE._d1(r2), _bulge_d1(r2), rtol=1e-12, atol=0)
    table = spheres._TABLES[BULGE]
    assert table.covers(float(r1.min()), float(r2.max()))
    r3 = np.concatenate([r1, r2])  # radii of both calls: the widened table serves them without a rebuild
    assert np.allclose(BULGE._d1(r3), _bulge_d1(r3), rtol=1e-12, atol=0)
    assert spheres._TABLES[BULGE] is table
    # below the table (it starts ~1 kpc below r1): widened downwards, keeping the upper end
    r4 = rng.uniform(2100.0, 2500.0, 300)
    assert np.allclose(BULGE._d1(r4), _bulge_d1(r4), rtol=1e-12, atol=0)
    assert spheres._TABLES[BULGE].covers(float(r4.min()), float(r2.max()))


# ---------------------------------------------------------------- newton_perihelion from a node on a valley's slope

# An invented relative path of polynomials of degree <= 3, reproduced exactly by the quintic Hermite interpolant of
# positions, velocities and accelerations (six conditions per interval; common practice, no source). Its squared
# separation has minima near t = -2.47, 0.042 (the deepest) and 1.72, maxima near -1.59 and 1.46. The grid is
# uneven: the node t = -1.51 lies just past the first maximum, where the separation is concave and falls towards
# the deepest valley. There Newton's step falls back to half the width of the grid interval that starts at the node
# (0.99 wide), and the search descends into that valley; half the 1.49-wide interval before it overshoots past the
# second maximum. (Newton's method is local: this is a check of this invented case, not a promise for any start.)
_PATH = [np.array([-0.3, 0.1]), np.array([-0.1, 1.0, -0.1, -0.2]), np.array([-0.2, -0.4])]
_NODES = np.array([-3.45, -3.0, -1.51, -0.52, 0.8, 1.05, 1.69, 2.36])


def _path_values(nodes):
    poly = np.polynomial.polynomial

    def at(t, der):
        return np.stack([poly.polyval(t, poly.polyder(c, der)) for c in _PATH], axis=1)

    def node_values(k, rows):
        out = []
        for kk in (k, k + 1):
            t = nodes[kk]
            out += [np.hstack([at(t, 0), at(t, 1)]), np.hstack([at(t, 1), at(t, 2)])]
        return out

    return at, node_values


def test_newton_from_a_node_on_a_slope_descends_into_that_valley():
    # reference: the roots of d(|s|^2)/dt / 2 = s . s' (numpy polynomial roots; common practice, no source), the
    # minimum being the one downhill from the start with no maximum in between
    poly = np.polynomial.polynomial
    at, node_values = _path_values(_NODES)
    d2 = poly.polyadd(poly.polyadd(poly.polymul(_PATH[0], _PATH[0]), poly.polymul(_PATH[1], _PATH[1])),
                      poly.polymul(_PATH[2], _PATH[2]))  # fmt: skip
    rate = poly.polyder(d2) / 2.0
    roots = poly.polyroots(rate)
    roots = np.sort(roots[np.abs(roots.imag) < 1e-12].real)
    t_min = roots[np.argmin(np.abs(roots - 0.04))]
    assert poly.polyval(t_min, poly.polyder(rate)) > 0  # a minimum
    assert np.all((roots <= -1.51) | (roots >= t_min))  # nothing between the start and it: the start's valley
    t, state, outside, conv = newton_perihelion(_NODES, node_values, np.array([-1.51, 0.3]))
    assert conv.all() and not outside.any()
    # 0.3, between nodes, lies in that valley where the separation is convex; Newton's last step is below 1e-7
    # and its error of order step^2 (docstring), checked at 1e-9
    assert np.allclose(t, t_min, rtol=0, atol=1e-9)
    assert np.allclose(state, np.hstack([at(t, 0), at(t, 1)]), rtol=0, atol=1e-9)
