"""Numerical building blocks of the orbit model against outside references.

Hermite cubics against scipy's CubicHermiteSpline; the grid start of the perihelion search against a brute-force
Euclidean norm; the power-law bulge's Phi'' against central differences of its closed-form Phi' and its radial
table against the closed form; the second-order transition map of a non-linear (Plummer) potential against
orbits integrated here with scipy's DOP853; the blocked matrix product of the map tables against einsum.
"""

import numpy as np
import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy.integrate import solve_ivp
from scipy.interpolate import CubicHermiteSpline
from scipy.special import gammainc

from perierr.models.orbit import spheres
from perierr.models.orbit.integrate import _cubic, grid_minimum_start
from perierr.models.orbit.potentials import G_PC_KMS2_PER_MSUN, Plummer, PowerLawCutoff
from perierr.models.orbit.transition import MapTables, features, variational_tables

# ---------------------------------------------------------------- integrate._cubic and grid_minimum_start


def test_cubic_power_basis_matches_scipy_cubic_hermite_spline():
    # the cubic through values p and derivatives m at both ends (Hairer et al. 1993, Sect. II.6), here scipy's
    # CubicHermiteSpline, evaluated at u = (t - t0) / h from the power-basis coefficients c0 + c1 u + c2 u^2 + c3 u^3
    rng = np.random.default_rng(101)
    n, k = 5, 4
    t0 = rng.uniform(-3.0, 3.0, n)  # non-zero starts: the width is t1 - t0, not t1 + t0
    t1 = t0 + rng.uniform(0.2, 2.0, n)
    p0, m0, p1, m1 = (rng.normal(size=(n, k)) for _ in range(4))
    c0, c1, c2, c3, h = _cubic(t0, t1, p0, m0, p1, m1)
    assert np.allclose(h, (t1 - t0)[:, None], rtol=1e-15, atol=0)
    u = np.linspace(0.0, 1.0, 9)
    got = c0[:, None] + u[None, :, None] * (
        c1[:, None] + u[None, :, None] * (c2[:, None] + u[None, :, None] * c3[:, None])
    )
    for i in range(n):
        spline = CubicHermiteSpline([t0[i], t1[i]], np.stack([p0[i], p1[i]]), np.stack([m0[i], m1[i]]))
        assert np.allclose(got[i], spline(t0[i] + u * (t1[i] - t0[i])), rtol=1e-12, atol=1e-12)


@settings(max_examples=60, deadline=None, derandomize=True, database=None)
@given(arrays(np.float64, st.tuples(st.integers(1, 7), st.integers(1, 4), st.just(6)),
              elements=st.floats(-100.0, 100.0, allow_nan=False)))  # fmt: skip
@example(np.array([[[-5.0, 0.0, 0.0, 9.0, 9.0, 9.0]], [[1.0, 1.0, 0.0, 0.0, 0.0, 0.0]], [[0.0, 0.0, -3.0, 0, 0, 0]]]))
def test_grid_minimum_start_is_the_node_of_smallest_euclidean_separation(states):
    # brute force: the separation of each star at each node is the Euclidean norm of the position part (the first
    # three components; common practice, no source); negative coordinates count as much as positive ones
    m = states.shape[0]
    nodes = np.linspace(-2.0, 1.0, m)
    start = grid_minimum_start(nodes, states)
    dist = np.linalg.norm(states[..., :3], axis=-1)  # (m, n)
    picked = np.searchsorted(nodes, start)
    assert np.array_equal(nodes[picked], start)
    chosen = dist[picked, np.arange(states.shape[1])]
    assert np.all(chosen <= dist.min(axis=0) * (1.0 + 1e-12) + 1e-300)


# ---------------------------------------------------------------- spheres: power-law bulge Phi'' and its table

BULGE = PowerLawCutoff(mass_msun=2.7e9, alpha=1.3, rc_pc=2600.0)  # invented bulge, not a preset's


def _bulge_d1(r):
    # Phi'(r) = G M(<r) / r^2 with M(<r) = M P((3 - alpha)/2, r^2 / rc^2) (Bovy 2015, Sect. 3.5), scipy's gammainc
    s = 1.5 - 0.5 * BULGE.alpha
    return G_PC_KMS2_PER_MSUN * BULGE.mass_msun * gammainc(s, (r / BULGE.rc_pc) ** 2) / r**2


def test_power_law_second_radial_derivative_matches_central_differences():
    # Phi''(r) by central differences of the closed-form Phi' (truncation ~ h^2 Phi'''' / 6, relative ~1e-10 with
    # h = 1e-5 r; rounding ~1e-11)
    r = np.array([150.0, 800.0, 2100.0, 2600.0, 4000.0, 9000.0])
    h = 1e-5 * r
    fd = (_bulge_d1(r + h) - _bulge_d1(r - h)) / (2.0 * h)
    assert np.allclose(BULGE._d2_exact(r), fd, rtol=1e-8, atol=0)


def test_bulge_table_built_here_matches_the_closed_form_and_is_reused(monkeypatch):
    # an empty table cache, so this test builds the table itself; the docstring promises 1e-13 of Phi' between
    # knots (cubic Hermite error ~ step^4 / 384 Phi'''''), checked at 1e-12 against the closed form; radii inside a
    # table reuse it ("rebuilt when asked for radii outside it")
    monkeypatch.setattr(spheres, "_TABLES", {})
    r = np.random.default_rng(5).uniform(2100.0, 9000.0, 600)  # >= 256 radii beyond 2 kpc: the table path
    assert np.allclose(BULGE._d1(r), _bulge_d1(r), rtol=1e-12, atol=0)
    table = spheres._TABLES[BULGE]
    inside = np.random.default_rng(6).uniform(2500.0, 8000.0, 300)
    assert np.allclose(BULGE._d1(inside), _bulge_d1(inside), rtol=1e-12, atol=0)
    assert spheres._TABLES[BULGE] is table


@pytest.mark.parametrize(("r_lo", "r_hi"), [(2000.0, 3000.0), (2345.6, 2987.1)])
def test_radial_table_covers_the_radii_asked_for_up_to_both_ends(r_lo, r_hi):
    # documented contract of _RadialTable: it covers the radii it was built for, with Phi' accurate to 1e-12
    # of the closed form everywhere in [r_lo, r_hi], the ends included
    table = spheres._RadialTable(BULGE, r_lo, r_hi)
    assert table.covers(r_lo, r_hi)
    r = np.linspace(r_lo, r_hi, 1001)
    assert np.allclose(table.evaluate(r), _bulge_d1(r), rtol=1e-12, atol=0)


# ---------------------------------------------------------------- transition: the second-order map

CLUSTER = Plummer(mass_msun=1e6, b_pc=5.0)  # invented: a dense cluster, strongly non-linear over a few pc
SUN_C = np.array([1.0, -0.5, 0.2, 3.0, 8.0, -2.0])
REF = np.array([3.0, -2.0, 1.0, 5.0, 2.0, -4.0])
NODES = np.array([-0.5, -0.2, 0.0, 0.3, 0.6])


def _direct_relative(rel0):
    """Relative states (m, E, 6) of stars started at SUN_C + rel0: Sun and stars integrated in absolute coordinates
    with scipy's DOP853 (Hairer et al. 1993, Sect. II.5), one call per side of t = 0."""
    e = rel0.shape[0]
    y0 = np.concatenate([SUN_C, (SUN_C + rel0).ravel()])

    def fun(_t, y):
        x = y.reshape(e + 1, 6)
        return np.hstack([x[:, 3:], CLUSTER.acceleration(x[:, :3])]).ravel()

    out = np.empty((NODES.size, e + 1, 6))
    zero = int(np.flatnonzero(NODES == 0.0)[0])
    out[zero] = y0.reshape(e + 1, 6)
    for sel in (np.arange(zero + 1, NODES.size), np.arange(zero - 1, -1, -1)):
        sol = solve_ivp(fun, (0.0, NODES[sel[-1]]), y0, method="DOP853", t_eval=NODES[sel], rtol=1e-13, atol=1e-13)
        out[sel] = sol.y.T.reshape(sel.size, e + 1, 6)
    return out[:, 1:] - out[:, :1]


def test_second_order_map_of_a_plummer_cluster_matches_symmetric_differences_of_direct_orbits():
    # y(d) = y + Phi1 d + 1/2 Phi2[d, d] + O(d^3) (Park & Scheeres 2006): the symmetric difference
    # (y(d) + y(-d)) / 2 - y(0) is the quadratic part 1/2 Phi2[d, d] to O(d^4), here ~1e-4 of it; the map's
    # quadratic features are the monomials d_a d_b, a <= b (diagonal and cross terms both present in the offsets)
    rng = np.random.default_rng(77)
    eps = 2e-3
    d = eps * np.vstack([rng.normal(size=(4, 6)), np.eye(6)[[0, 4]]])  # random, and along single axes
    tab = variational_tables(CLUSTER, SUN_C, REF, NODES, rtol=1e-12, atol=1e-12)
    direct = _direct_relative(np.vstack([REF, REF + d, REF - d]))  # (m, 1 + 2E, 6)
    n = d.shape[0]
    half_sum = 0.5 * (direct[:, 1 : 1 + n] + direct[:, 1 + n :]) - direct[:, :1]  # (m, E, 6)
    quad = np.einsum("mfc,ef->mec", tab.table[0, :, 7:, :6], features(d)[:, 7:])
    scale = np.abs(half_sum).max(axis=(1, 2))
    assert scale[NODES != 0.0].min() > 1e-6  # the quadratic part is far above the integration noise (~1e-12)
    assert np.all(np.abs(quad - half_sum).max(axis=(1, 2)) <= 1e-4 * scale + 1e-12)
    # the linear part against the antisymmetric difference: (y(d) - y(-d)) / 2 = Phi1 d + O(d^3)
    lin = np.einsum("mfc,ef->mec", tab.table[0, :, 1:7, :6], d)
    half_diff = 0.5 * (direct[:, 1 : 1 + n] - direct[:, 1 + n :])
    assert np.all(np.abs(lin - half_diff) <= 1e-4 * np.abs(half_diff).max() + 1e-11)


# ---------------------------------------------------------------- transition: the blocked product of node_cubic


def test_node_cubic_of_one_large_group_matches_the_per_sample_hermite_coefficients():
    # more samples in one (reference, interval) group than one column block of the product (384): every column
    # must be the brute-force coefficients (einsum of the table with the features, then the Hermite power basis
    # of Hairer et al. 1993, Sect. II.6)
    rng = np.random.default_rng(31)
    nodes = np.array([-2.0, -0.7, 0.0, 1.1])
    table = rng.normal(size=(1, 4, 28, 12))
    tab = MapTables(nodes, np.zeros((1, 6)), table)
    n = 1000
    feats = features(rng.normal(size=(n, 6)))
    kk = np.full(n, 1)
    got = tab.node_cubic(np.zeros(n, dtype=int), feats)(kk, np.arange(n))
    st0 = np.einsum("fc,nf->nc", table[0, 1], feats)
    st1 = np.einsum("fc,nf->nc", table[0, 2], feats)
    h = nodes[2] - nodes[1]
    p0, m0, p1, m1 = st0[:, :6], st0[:, 6:], st1[:, :6], st1[:, 6:]
    expected = np.hstack([p0, h * m0, 3 * (p1 - p0) - h * (2 * m0 + m1), 2 * (p0 - p1) + h * (m0 + m1)]).T
    assert got.shape == (24, n)
    assert np.allclose(got, expected, rtol=1e-12, atol=1e-12)
