"""The orbit model's map machinery: RK4 of many draws, leaves, polynomial fits, quintic search, the map's check.

References: scipy's DOP853 (Hairer, Norsett & Wanner 1993) at tight tolerances for the integrations,
scipy.special.gammainc for the bulge's enclosed mass, numpy polynomials and combinatorics for the fits and
interpolants; invented stars only.
"""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import solve_ivp

from perierr.models.orbit import OrbitModel, get_potential
from perierr.models.orbit.draws import SunOrbit, integrate_draws
from perierr.models.orbit.integrate import integrate_relative, newton_perihelion, quintic_coefficients
from perierr.models.orbit.leaves import fit_leaf, leaf_features, make_leaf, n_features, partition
from perierr.models.orbit.spheres import PowerLawCutoff
from perierr.units import AU_PER_PC, MYR_PER_PC_PER_KMS

MODEL = OrbitModel()
RNG_STATES = np.random.default_rng(2)
# invented relative states [pc, km/s]: up to ~200 pc away, up to ~40 km/s
REL = np.concatenate([RNG_STATES.normal(size=(40, 3)) * 80.0, RNG_STATES.normal(size=(40, 3)) * 20.0], axis=1)


def _grid(window_myr, speed):
    return MODEL._grid(speed, window_myr)[1]


def test_sun_orbit_dense_output_matches_a_direct_dop853_solution():
    # scipy DOP853 at rtol 1e-13 to the same times, solved on its own: the dense output agrees to 1e-7 pc
    nodes = _grid((-30.0, 20.0), 40.0)
    orbit = SunOrbit(MODEL.potential, MODEL._sun_state, nodes[0], nodes[-1])
    times = np.array([-29.3, -7.1, 0.0, 3.3, 19.9]) / MYR_PER_PC_PER_KMS

    def fun(_t, y):
        return np.concatenate([y[3:], MODEL.potential.acceleration(y[:3])])

    for t in times:
        sol = solve_ivp(fun, (0.0, t), MODEL._sun_state, method="DOP853", rtol=1e-13, atol=1e-13) if t else None
        expected = MODEL._sun_state[:3] if sol is None else sol.y[:3, -1]
        assert np.allclose(orbit.position(np.array([t]))[0], expected, rtol=0, atol=1e-7)


def test_rk4_of_many_draws_matches_dop853_and_converges_at_fourth_order():
    # the relative orbits of 40 invented stars over +/- 30 Myr: fixed-step RK4 on the grid against scipy
    # DOP853 at rtol 1e-13 (integrate_relative); halving the step divides the error by ~2^4 = 16 (RK4 is
    # fourth order, Hairer et al. 1993, Sect. II.1), which is what Richardson's estimate relies on
    nodes = _grid((-30.0, 30.0), float(np.linalg.norm(REL[:, 3:], axis=1).max()))
    ref, dref, _ = integrate_relative(MODEL.potential, MODEL._sun_state, REL, nodes, rtol=1e-13, atol=1e-13)
    orbit = SunOrbit(MODEL.potential, MODEL._sun_state, nodes[0], nodes[-1])
    err = {}
    for substeps in (1, 2):
        states, derivs = integrate_draws(orbit.track(nodes, substeps), REL)
        err[substeps] = np.max(np.linalg.norm(states[..., :3] - ref[..., :3], axis=-1)) * AU_PER_PC
        # derivatives are (velocity, relative acceleration) of the same states
        assert np.allclose(derivs[..., :3], states[..., 3:], rtol=0, atol=1e-15)
    assert err[1] < 0.5 and 10.0 < err[1] / err[2] < 25.0


def test_draws_integrated_to_their_own_nodes_only_agree_with_the_full_run():
    # each draw needs only nodes lo..hi; those entries equal the run over the whole grid exactly
    nodes = _grid((-10.0, 10.0), 60.0)
    track = SunOrbit(MODEL.potential, MODEL._sun_state, nodes[0], nodes[-1]).track(nodes)
    rng = np.random.default_rng(4)
    zero = track.zero
    lo, hi = rng.integers(0, zero + 1, REL.shape[0]), rng.integers(zero, len(nodes), REL.shape[0])
    full, _ = integrate_draws(track, REL)
    part, _ = integrate_draws(track, REL, lo, hi)
    for i in range(REL.shape[0]):
        assert np.array_equal(part[lo[i] : hi[i] + 1, i], full[lo[i] : hi[i] + 1, i])


def test_quintic_hermite_reproduces_a_quintic_and_its_derivatives():
    # the interpolant through value, first and second derivative at both ends is exact for any polynomial of
    # degree <= 5 (six conditions; common practice, no source): coefficients in u = (t - t0) / h
    rng = np.random.default_rng(5)
    coef = rng.normal(size=(6, 3))
    poly = [np.polynomial.Polynomial(coef[:, j]) for j in range(3)]
    t0, h = 0.7, 1.9

    def at(t, k=0):
        return np.array([p.deriv(k)(t) if k else p(t) for p in poly])

    parts = quintic_coefficients(np.array(h), at(t0), at(t0, 1), at(t0, 2), at(t0 + h), at(t0 + h, 1),
                                 at(t0 + h, 2))  # fmt: skip
    for u in (0.0, 0.3, 0.77, 1.0):
        got = sum(c * u**i for i, c in enumerate(parts))
        assert np.allclose(got, at(t0 + u * h), rtol=0, atol=1e-11)


def test_newton_on_quintics_finds_the_minimum_of_a_quintic_orbit_exactly():
    # a relative orbit whose positions are quintics: node values from the polynomials are interpolated
    # exactly, so the perihelion is the root of s . s' (numpy polynomial roots) to machine precision
    c = np.array([[3.0, -1.0, 0.5], [-2.0, 0.4, 0.3], [0.1, 0.2, -0.4], [0.05, -0.02, 0.03],
                  [0.002, 0.001, -0.003], [1e-4, -2e-4, 1e-4]])  # fmt: skip
    pos = [np.polynomial.Polynomial(c[:, j]) for j in range(3)]
    f = sum(p * p.deriv() for p in pos)
    roots = [r.real for r in f.roots() if abs(r.imag) < 1e-12 and 0 < r.real < 4 and f.deriv()(r.real) > 0]
    nodes = np.linspace(0.0, 4.0, 9)

    def values(k, rows):
        def state(t):
            return np.array([[p(tt) for p in pos] + [p.deriv()(tt) for p in pos] for tt in np.atleast_1d(t)])

        def deriv(t):
            return np.array([[p.deriv()(tt) for p in pos] + [p.deriv(2)(tt) for p in pos] for tt in np.atleast_1d(t)])

        return state(nodes[k]), deriv(nodes[k]), state(nodes[k + 1]), deriv(nodes[k + 1])

    t, _, outside, conv = newton_perihelion(nodes, values, np.array([roots[0] + 0.4]))
    assert conv[0] and not outside[0] and t[0] == pytest.approx(roots[0], abs=1e-12)


@pytest.mark.parametrize(("k", "order"), [(1, 2), (2, 2), (4, 3), (4, 4), (6, 2), (3, 4)])
def test_number_of_features_is_the_count_of_monomials(k, order):
    # constant, six linear terms, and the monomials of degree 2..order in k variables:
    # C(k + order, order) - 1 - k of them (stars and bars; common practice, no source)
    assert n_features(k, order) == 7 + math.comb(k + order, order) - 1 - k
    x = np.random.default_rng(k).uniform(-1, 1, size=(3, 6))
    assert leaf_features(x, k, order).shape == (3, n_features(k, order))


def test_leaf_fit_recovers_a_polynomial_of_its_degree_exactly():
    # targets that are exactly a degree-4 polynomial of the leaf's principal coordinates are fitted to
    # rounding (least squares is exact when the model holds; Golub & Van Loan 2013, Sect. 5.3)
    rng = np.random.default_rng(6)
    rel = np.concatenate([rng.normal(size=(500, 3)) * [30.0, 5.0, 1.0], rng.normal(size=(500, 3)) * 2.0], 1)
    t_lin = np.full(500, 3.0)
    leaf = make_leaf(rel, np.arange(500), t_lin, order=4, max_k=4)
    x = leaf.coordinates(rel)
    assert np.all(np.abs(x) <= 1.0 + 1e-12)  # scaled to [-1, 1]
    truth = rng.normal(size=(n_features(leaf.k, 4), 5))
    targets = leaf_features(x, leaf.k, 4) @ truth
    coef = fit_leaf(leaf, x[:200], targets[:200])
    assert np.allclose(leaf_features(x[200:], leaf.k, 4) @ coef, targets[200:], rtol=0, atol=1e-9)


@settings(max_examples=30, deadline=None)
@given(st.integers(min_value=1, max_value=400), st.floats(min_value=0.1, max_value=100.0),
       st.integers(min_value=1, max_value=50), st.integers(min_value=0, max_value=2**16))
def test_partition_keeps_every_draw_once_and_each_part_narrow_or_small(n, radius, min_size, seed):
    # invariant: the parts are a partition of the rows (none lost, none twice); a part is within the radius
    # of its mean or too small to halve
    u = np.random.default_rng(seed).normal(size=(n, 6)) * [50.0, 10.0, 5.0, 20.0, 1.0, 1.0]
    rows = np.arange(n)
    parts = partition(u, rows, radius, min_size)
    assert np.array_equal(np.sort(np.concatenate(parts)), rows)
    for p in parts:
        dev = u[p] - u[p].mean(axis=0)
        assert p.size < 2 * min_size or np.sqrt((dev**2).sum(axis=1)).max() <= radius


def test_bulge_radial_table_matches_the_incomplete_gamma_function():
    # Phi'(r) = G M P(s, r^2 / rc^2) / r^2 (Bovy 2015, Sect. 3.5) with scipy's gammainc, against the table the
    # orbit model uses for many radii: 1e-12 relative between 2 and 20 kpc
    bulge = next(c for c in get_potential("MWPotential2014").potential.components if isinstance(c, PowerLawCutoff))
    r = np.random.default_rng(7).uniform(2001.0, 20000.0, 5000)
    from scipy.special import gammainc

    from perierr.models.orbit.potential_base import G_PC_KMS2_PER_MSUN

    exact = G_PC_KMS2_PER_MSUN * bulge.mass_msun * gammainc(1.5 - 0.5 * bulge.alpha, (r / bulge.rc_pc) ** 2) / r**2
    assert np.allclose(bulge._d1(r), exact, rtol=1e-12, atol=0)
    # few radii, or radii near the centre, use the exact function
    assert np.array_equal(bulge._d1(r[:10]), bulge._d1_exact(r[:10]))


# ---------------------------------------------------------------------------------- the map end to end
NEAR = np.array([40.0, 20.0, 40.0, 10.0, -5.0, -25.0])  # invented: 25 pc, ~1 Myr ahead
NEAR_SIGMA = np.array([1e-7, 1e-7, 0.2, 0.2, 0.2, 1.0])


def _cloud(n, seed):
    return NEAR + np.random.default_rng(seed).normal(size=(n, 6)) * NEAR_SIGMA


def test_map_is_deterministic_and_reports_progress_to_the_end():
    # same rows, same answer bit for bit (the draws that train and check a leaf come from a fixed stream);
    # progress(done, total) rises to total
    rows = _cloud(1500, 8)
    calls = []
    a = OrbitModel().evaluate(rows, progress=lambda done, total: calls.append((done, total)))
    b = OrbitModel().evaluate(rows)
    assert np.array_equal(a.distance_pc, b.distance_pc) and np.array_equal(a.time_myr, b.time_myr)
    assert calls and calls[-1] == (1500, 1500) and all(d1 <= d2 for (d1, _), (d2, _) in zip(calls, calls[1:]))


def test_row_order_changes_the_answers_by_less_than_the_tolerance():
    # invariance: shuffling the draws changes which draws train the leaves, not the perihelia beyond the
    # map tolerance (0.5 au, OrbitModel docstring); each answer stays with its row
    rows = _cloud(1500, 9)
    perm = np.random.default_rng(10).permutation(1500)
    a = OrbitModel().evaluate(rows)
    b = OrbitModel().evaluate(rows[perm])
    assert np.max(np.abs(a.distance_pc[perm] - b.distance_pc)) * AU_PER_PC < 0.5
    assert np.max(np.abs(a.time_myr[perm] - b.time_myr)) < 1e-6


def test_check_diagnostics_count_the_leaves_and_their_check_draws():
    # OrbitModel docstring: n_check random check draws per leaf plus its two farthest; the largest check
    # error is reported and below the tolerance when nothing falls back
    model = OrbitModel(leaf_radius_pc=1e3)  # one leaf
    ph = model.evaluate(_cloud(1500, 11))
    info = ph.info
    assert info["n_map_leaves"] == 1 and info["n_checked"] == model.n_check + 2
    assert info["fallback_samples"] == 0 and 0.0 <= info["map_error_au_max"] <= model.map_tolerance_au
    assert info["integration_error_au"] <= 0.1 * model.map_tolerance_au
    assert info["window_myr"] == [-100.0, 100.0]


# ------------------------------------------------------------------------- cases an independent review found
def _reference(rows):
    """scipy DOP853 at rtol 1e-12 over the same window, every valley refined (the converged answer)."""
    return OrbitModel(method="direct", rtol=1e-12, atol=1e-12).evaluate(rows)


def test_two_nearly_equal_valleys_give_the_deeper_one():
    # an invented slow star whose separation has two valleys 1.4e-3 pc apart in depth (24.4 and 55.2 Myr):
    # every method refines both and keeps the deeper, as a 50 times finer grid does
    row = np.array([[60.0, 40.0, 10.0, 0.5, 0.2, -2.0084]])
    fine = OrbitModel(method="direct", grid_step_myr=0.02).evaluate(row)
    assert fine.time_myr[0] == pytest.approx(24.37, abs=0.01)
    for model in (OrbitModel(), OrbitModel(method="direct")):
        ph = model.evaluate(row)
        assert not ph.flags[0] and abs(ph.distance_pc[0] - fine.distance_pc[0]) * AU_PER_PC < 0.01


@pytest.mark.slow  # 1,200 draws integrated by DOP853 as the reference
@pytest.mark.parametrize(
    ("mean", "sigma", "seed"),
    [
        # invented slow stars with wide errors: leaves with several valleys, and a fit whose worst errors lie
        # inside the leaf
        ((166.977, -44.498, 21.158, -0.0700, 1.3504, -1.5862), (1e-7, 1e-7, 4.419, 0.408, 0.809, 1.018), 6),
        ((100.0, 10.0, 5.0, 0.5, 0.5, -2.0), (1e-7, 1e-7, 1.0, 0.5, 0.5, 2.0), 1),
    ],
)
def test_slow_wide_clouds_stay_within_the_tolerance_unflagged(mean, sigma, seed):
    # against converged DOP853 (scipy): no unflagged draw beyond the 0.5 au tolerance, wherever its global
    # minimum lies in the +-100 Myr window
    rows = np.asarray(mean) + np.random.default_rng(seed).normal(size=(1200, 6)) * np.asarray(sigma)
    rows = rows[rows[:, 2] > 0]
    ph, ref = OrbitModel().evaluate(rows), _reference(rows)
    ok = ~(ph.flags | ref.flags)
    assert ok.mean() > 0.95
    assert np.max(np.abs(ph.distance_pc[ok] - ref.distance_pc[ok])) * AU_PER_PC < 0.5


def test_progress_reaches_the_total_with_rows_beyond_the_potential():
    # ForwardModel.evaluate docstring: the last call has done == total, also when some rows (here 5, at
    # 2e4 km/s) get the straight line beyond the potential
    rows = _cloud(400, 12)
    rows[:5, 5] = 2e4
    calls = []
    OrbitModel().evaluate(rows, progress=lambda done, total: calls.append((done, total)))
    assert calls[-1] == (400, 400)
