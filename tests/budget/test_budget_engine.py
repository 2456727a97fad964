"""The rewritten budget engine (perierr.budget) against references computed inside this file.

Nothing in perierr.budget.game is used to build an expected value. The references are:

* Shapley values by brute force: the average of the marginal contributions over all k!
  orderings of the players (Shapley 1953 definition, from memory);
* the value of a coalition S is the variance of Y explained by learning X_S,
  ``Var(Y) - Var(Y | X_S)``, whose Shapley values are the Shapley effects (Song, Nelson &
  Staum 2016, SIAM/ASA JUQ 4, 1060, Theorem 1: the explained-variance game and the
  E[Var(Y | X_-u)] game have the same Shapley values; from memory);
* ``Var(Y | X_S)`` of a linear Gaussian model, computed two ways, neither of which is the
  package's route (the package uses ``b_S^T R_SS^+ b_S``, a pseudo-inverse of the marginal
  correlation block):

  - ``g_T^T (P_TT)^{-1} g_T`` with T the complement of S and ``P = R^{-1}`` the precision
    matrix in standardized coordinates: the conditional covariance of a Gaussian vector is
    the inverse of the corresponding block of the precision matrix (Schur complement of the
    precision matrix; e.g. Rue & Held 2005, Gaussian Markov Random Fields, Thm 2.5; from
    memory);
  - exact rational arithmetic (fractions.Fraction) on the RAW covariance in internal units
    (deg^2 for ra/dec), ``Var(Y) - c_S^T Sigma_SS^{-1} c_S`` with ``c = Sigma J^T`` (the
    Gaussian conditioning formula, from memory): no standardization, no rounding, so it also
    checks that working in correlation coordinates loses nothing.
"""

import itertools
import math
from fractions import Fraction
from functools import cache

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from perierr import ObservedStar, StraightLine, linearize
from perierr.budget import global_budget, linear_budget, linear_shapley, shapley_gaussian

OBS = ("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity")
OUTS = ("time_myr", "distance_pc", "speed_kms")

# --------------------------------------------------------------------------------------------
# Invented stars (no real objects) with catalogue-like correlations that include the position.
# --------------------------------------------------------------------------------------------

STARS = {
    "strong position-parallax": dict(
        ra=123.4, dec=45.6, parallax=25.0, parallax_error=0.5, pmra=15.2, pmra_error=0.45,
        pmdec=-8.3, pmdec_error=0.4, radial_velocity=-45.0, radial_velocity_error=0.2,
        ra_error=0.4, dec_error=0.35, ra_dec_corr=-0.1, ra_parallax_corr=0.7, dec_parallax_corr=-0.4,
        ra_pmra_corr=-0.5, dec_pmdec_corr=0.6, parallax_pmra_corr=-0.3, pmra_pmdec_corr=0.2,
    ),
    "southern, slow tangential": dict(
        ra=287.9, dec=-62.1, parallax=71.3, parallax_error=0.06, pmra=-3.1, pmra_error=0.07,
        pmdec=2.4, pmdec_error=0.06, radial_velocity=-18.5, radial_velocity_error=0.05,
        ra_error=0.05, dec_error=0.04, ra_dec_corr=-0.3, ra_parallax_corr=-0.65, dec_parallax_corr=0.4,
        ra_pmra_corr=0.4, ra_pmdec_corr=-0.2, dec_pmra_corr=-0.3, dec_pmdec_corr=-0.5,
        parallax_pmra_corr=-0.35, parallax_pmdec_corr=-0.1, pmra_pmdec_corr=-0.3,
    ),
    "faint, large proper motion": dict(
        ra=14.2, dec=8.9, parallax=9.7, parallax_error=0.3, pmra=210.0, pmra_error=0.35,
        pmdec=-95.0, pmdec_error=0.28, radial_velocity=-72.0, radial_velocity_error=4.0,
        ra_error=0.25, dec_error=0.2, ra_dec_corr=0.1, ra_parallax_corr=0.55, dec_parallax_corr=0.6,
        ra_pmra_corr=0.7, dec_pmra_corr=0.2, ra_pmdec_corr=0.15, dec_pmdec_corr=0.5,
        parallax_pmra_corr=0.4, parallax_pmdec_corr=0.45, pmra_pmdec_corr=0.3,
    ),
    "near pole, parallax-dominated": dict(
        ra=301.0, dec=81.3, parallax=14.0, parallax_error=0.25, pmra=40.0, pmra_error=0.3,
        pmdec=-55.0, pmdec_error=0.35, radial_velocity=-9.0, radial_velocity_error=0.05,
        ra_error=0.2, dec_error=0.22, ra_dec_corr=0.2, ra_parallax_corr=-0.7, dec_parallax_corr=0.1,
        dec_pmdec_corr=-0.65, ra_pmdec_corr=0.05, parallax_pmdec_corr=-0.05, pmra_pmdec_corr=-0.1,
    ),
}


def make_star(**fields):
    return ObservedStar.from_values(**fields)


@cache
def star_case(name):
    """(jacobian (3, 6), cov (6, 6)) of an invented star: real straight-line Jacobian, star.cov."""
    star = make_star(**STARS[name])
    jac = np.array(linearize(star, StraightLine()).jacobian)
    return jac, np.array(star.cov)


def random_correlation(rng, k, *, max_abs=1.0, min_eig=0.05):
    """A random correlation matrix (rejection on the largest |corr| and smallest eigenvalue)."""
    while True:
        a = rng.normal(size=(k, k + 1))
        c = a @ a.T
        d = np.sqrt(np.diag(c))
        r = c / np.outer(d, d)
        np.fill_diagonal(r, 1.0)
        off = np.abs(r - np.eye(k)).max() if k > 1 else 0.0
        if off <= max_abs and np.linalg.eigvalsh(r)[0] > min_eig:
            return r


def random_star_values(rng):
    """Invented observables (internal units) and catalogue-like errors and correlations."""
    ra, dec = rng.uniform(0, 360), np.degrees(np.arcsin(rng.uniform(-0.95, 0.95)))
    plx = 1000.0 / rng.uniform(5.0, 150.0)
    mean = np.array([ra, dec, plx, rng.normal(0, 80), rng.normal(0, 80), rng.normal(0, 40)])
    err_mas = rng.uniform(0.01, 0.4, 5)
    sigma = np.concatenate([err_mas[:2] / 3.6e6, err_mas[2:], [rng.uniform(0.1, 5.0)]])
    sigma[0] /= math.cos(math.radians(dec))
    corr = np.eye(6)
    corr[:5, :5] = random_correlation(rng, 5, max_abs=0.7, min_eig=0.05)
    return mean, corr * np.outer(sigma, sigma)


# --------------------------------------------------------------------------------------------
# Brute-force references
# --------------------------------------------------------------------------------------------


def shapley_by_orderings(k, cond_var):
    """Shares by the Shapley 1953 definition: average over all k! orderings of the marginal
    contribution ``Var(Y | X_S) - Var(Y | X_{S+i})`` of each player i (from memory).

    ``cond_var(frozenset S) -> (m,)`` is Var(Y | X_S); returns (m, k) shares of Var(Y).
    """
    cache = {}

    def v(s):
        if s not in cache:
            cache[s] = np.asarray(cond_var(s), dtype=float)
        return cache[s]

    total = v(frozenset())
    effects = np.zeros((total.size, k))
    n = 0
    for order in itertools.permutations(range(k)):
        known = frozenset()
        before = total
        for i in order:
            known = known | {i}
            after = v(known)
            effects[:, i] += before - after
            before = after
        n += 1
    assert n == math.factorial(k)
    return effects / n / total[:, None]


def precision_cond_var(jacobian, cov):
    """Var(Y | X_S) from the Schur complement of the precision matrix, standardized coordinates.

    ``Cov(Z_T | Z_S) = (P_TT)^{-1}`` with ``P = R^{-1}`` and T the complement of S, so
    ``Var(Y | Z_S) = g_T^T (P_TT)^{-1} g_T`` with ``g = J * sigma`` (from memory; needs R of full rank).
    """
    j = np.asarray(jacobian, dtype=float)
    s = np.asarray(cov, dtype=float)
    sigma = np.sqrt(np.diag(s))
    assert np.all(sigma > 0), "the precision route needs every input to have an error"
    r = s / np.outer(sigma, sigma)
    g = j * sigma
    p = np.linalg.inv(r)
    k = s.shape[0]

    def cond_var(known):
        rest = [i for i in range(k) if i not in known]
        if not rest:
            return np.zeros(g.shape[0])
        gt = g[:, rest]
        return np.einsum("mi,im->m", gt, np.linalg.solve(p[np.ix_(rest, rest)], gt.T))

    return cond_var


def brute_force_shares(jacobian, cov):
    """Linear Shapley shares: precision-matrix conditional variances + all k! orderings."""
    return shapley_by_orderings(np.shape(cov)[0], precision_cond_var(jacobian, cov))


def _exact_solve(a, b):
    """Solve a x = b exactly (Gauss-Jordan over Fractions); a is n x n, b is n x m."""
    n = len(a)
    aug = [list(a[i]) + list(b[i]) for i in range(n)]
    for col in range(n):
        piv = next(r for r in range(col, n) if aug[r][col] != 0)
        aug[col], aug[piv] = aug[piv], aug[col]
        inv = 1 / aug[col][col]
        aug[col] = [x * inv for x in aug[col]]
        for r in range(n):
            if r != col and aug[r][col] != 0:
                f = aug[r][col]
                aug[r] = [x - f * y for x, y in zip(aug[r], aug[col])]
    return [row[n:] for row in aug]


def exact_raw_shares(jacobian, cov):
    """Shares from exact rational conditioning on the raw covariance (no standardization).

    ``Var(Y | X_S) = J Sigma J^T - c_S^T Sigma_SS^{-1} c_S``, ``c = Sigma J^T`` (Gaussian
    conditioning formula, from memory), evaluated in Fractions, then all k! orderings.
    """
    jf = [[Fraction(float(x)) for x in row] for row in np.asarray(jacobian)]
    sf = [[Fraction(float(x)) for x in row] for row in np.asarray(cov)]
    k, m = len(sf), len(jf)
    c = [[sum(sf[i][a] * jf[q][a] for a in range(k)) for q in range(m)] for i in range(k)]  # k x m
    var = [sum(jf[q][i] * c[i][q] for i in range(k)) for q in range(m)]

    def cond_var(known):
        idx = sorted(known)
        if not idx:
            return [float(v) for v in var]
        x = _exact_solve([[sf[i][j] for j in idx] for i in idx], [c[i] for i in idx])
        return [float(var[q] - sum(c[i][q] * x[a][q] for a, i in enumerate(idx))) for q in range(m)]

    return shapley_by_orderings(k, cond_var)


# --------------------------------------------------------------------------------------------
# 1. Brute force vs linear_shapley / linear_budget
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", sorted(STARS))
def test_linear_budget_matches_brute_force_on_invented_stars(name):
    jac, cov = star_case(name)
    want = brute_force_shares(jac, cov)
    budget = linear_budget(jac, cov, inputs=OBS)
    # Tolerance 1e-8 absolute on shares (the brief's requirement).
    assert_allclose(budget.shapley, want, rtol=0, atol=1e-8)
    assert_allclose(linear_shapley(jac, cov), want, rtol=0, atol=1e-8)
    # The exact rational route on the raw deg^2 covariance gives the same shares (1e-8).
    assert_allclose(exact_raw_shares(jac, cov), want, rtol=0, atol=1e-8)
    # Efficiency (Shapley 1953): each row sums to 1 (1e-12).
    assert_allclose(budget.shapley.sum(axis=1), 1.0, rtol=0, atol=1e-12)
    # The position correlations matter for these stars: conditioning on ra/dec carries a share
    # (> 1 % of Var(d_ph)); a budget that cannot condition on ra/dec fails the 1e-8 check above.
    assert want[1, :2].sum() > 0.01
    # Other fields of the LinearBudget, from their definitions (1e-12 relative):
    # variance = diag(J Sigma J^T); covariance contributions J_i (Sigma J^T)_i / Var.
    var = np.einsum("mi,ij,mj->m", jac, cov, jac)
    assert_allclose(budget.variance, var, rtol=1e-12)
    assert_allclose(budget.covariance, jac * (cov @ jac.T).T / var[:, None], rtol=0, atol=1e-10)
    assert budget.inputs == OBS
    for q, out in enumerate(OUTS):
        assert budget.share(out) == pytest.approx(dict(zip(OBS, want[q])), abs=1e-8)
        assert budget.to_dict()[out] == pytest.approx(dict(zip(OBS, want[q])), abs=1e-8)


def test_brute_force_reference_is_sensitive_to_position_conditioning():
    # Self-check of the test data: zeroing the position-astrometry correlations changes the
    # reference shares by far more than the 1e-8 tolerance (so test 1a can see the old bug,
    # where conditioning on ra/dec did nothing).
    jac, cov = star_case("strong position-parallax")
    cut = cov.copy()
    cut[:2, 2:] = cut[2:, :2] = 0.0
    assert np.abs(brute_force_shares(jac, cov) - brute_force_shares(jac, cut)).max() > 0.05


@pytest.mark.parametrize("seed", range(8))
def test_linear_shapley_matches_brute_force_random_scales(seed):
    # Random PD covariances whose variances span 1e-16 .. 1e4; gradients scaled so that every
    # input matters. Reference: precision-matrix route + all k! orderings. Tolerance 1e-8.
    rng = np.random.default_rng(1000 + seed)
    k = 3 + seed % 5  # 3..7 inputs
    m = 1 + seed % 3
    var = 10.0 ** rng.uniform(-16, 4, k)
    var[rng.permutation(k)[:2]] = [1e-16, 1e4]  # both ends of the range in every case
    sigma = np.sqrt(var)
    cov = random_correlation(rng, k, min_eig=0.02) * np.outer(sigma, sigma)
    jac = rng.normal(size=(m, k)) * 10.0 ** rng.uniform(-1, 1, (m, k)) / sigma
    want = brute_force_shares(jac, cov)
    assert_allclose(linear_shapley(jac, cov), want, rtol=0, atol=1e-8)
    if seed < 2:  # exact rational arithmetic in raw units (no standardization): same shares
        assert_allclose(exact_raw_shares(jac, cov), want, rtol=0, atol=1e-8)


# --------------------------------------------------------------------------------------------
# 2. Unit invariance (property test)
# --------------------------------------------------------------------------------------------


@settings(max_examples=60, deadline=None)
@given(name=st.sampled_from(sorted(STARS)), i=st.integers(0, 5), e=st.floats(-8, 8))
def test_shares_do_not_depend_on_units(name, i, e):
    # Shapley effects are invariant under a change of units of any input (X_i -> c X_i):
    # cov -> D cov D and the Jacobian column -> J / c leave Y and every conditioning unchanged
    # (Owen & Prieur 2017, SIAM/ASA JUQ 5, 986; from memory). Tolerance 1e-9 absolute.
    jac, cov = star_case(name)
    c = 10.0**e
    d = np.ones(6)
    d[i] = c
    jac2 = jac / d
    cov2 = cov * np.outer(d, d)
    assert_allclose(linear_shapley(jac2, cov2), linear_shapley(jac, cov), rtol=0, atol=1e-9)


# --------------------------------------------------------------------------------------------
# 3. An independent input gets J^2 sigma^2 / Var
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", sorted(STARS))
def test_independent_radial_velocity_share_is_its_own_variance(name):
    # With X_6 independent of the others and Y = sum J_i X_i, the contribution of X_6 to any
    # coalition's explained variance is J_6^2 sigma_6^2 whatever the coalition (variance of an
    # independent sum; from memory), hence Sh_6 = J_6^2 sigma_6^2 / Var(Y). Tolerance 1e-10.
    jac, cov = star_case(name)
    assert np.all(cov[5, :5] == 0) and np.abs(cov[:2, 2:5]).max() > 0  # rv independent; position correlated
    var = np.einsum("mi,ij,mj->m", jac, cov, jac)
    want = jac[:, 5] ** 2 * cov[5, 5] / var
    assert_allclose(linear_budget(jac, cov).shapley[:, 5], want, rtol=0, atol=1e-10)
    assert_allclose(linear_shapley(jac, cov)[:, 5], want, rtol=0, atol=1e-10)


# --------------------------------------------------------------------------------------------
# 4. Edge cases
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("exact", [0, 3, 5])
def test_input_held_exact(exact):
    # An input with zero variance (held exact) is a null player: its share is 0 and the game of
    # the other inputs is the game without it (Shapley 1953 null-player property; from memory).
    # Reference: brute force on the remaining five inputs. Tolerances 1e-12 and 1e-8.
    jac, cov = star_case("southern, slow tangential")
    cov = cov.copy()
    cov[exact, :] = cov[:, exact] = 0.0
    got = linear_shapley(jac, cov)
    keep = [i for i in range(6) if i != exact]
    want = brute_force_shares(jac[:, keep], cov[np.ix_(keep, keep)])
    assert_allclose(got[:, exact], 0.0, rtol=0, atol=1e-12)
    assert_allclose(got[:, keep], want, rtol=0, atol=1e-8)


def test_ra_error_not_given_is_held_exact_and_gets_no_share():
    # Same property through the catalogue interface: ra_error absent -> ra held exact, with
    # dec still correlated with the parallax. Reference: brute force without ra (1e-8).
    fields = dict(STARS["strong position-parallax"])
    del fields["ra_error"]
    star = make_star(**fields)
    assert star.held_exact == ("ra",)
    jac = np.array(linearize(star, StraightLine()).jacobian)
    b = linear_budget(jac, star.cov)
    keep = [1, 2, 3, 4, 5]
    want = brute_force_shares(jac[:, keep], np.array(star.cov)[np.ix_(keep, keep)])
    assert_allclose(b.shapley[:, 0], 0.0, rtol=0, atol=1e-12)
    assert_allclose(b.shapley[:, keep], want, rtol=0, atol=1e-8)


def merged_pair_cond_var(jac, sigma, corr_merged, a, b, sign):
    """Var(Y | X_S) when Z_b = sign * Z_a exactly, on the merged full-rank representation.

    In standardized coordinates ``Y = ... + g_a Z_a + g_b Z_b = ... + (g_a + sign g_b) Z_a``;
    learning a or b (or both) is learning Z_a. The merged inputs are all but b; their
    correlation ``corr_merged`` is of full rank, so the precision-matrix route applies. The
    pair is merged analytically in the cost; the Shapley average still runs over all k!
    orderings of the original k players (derived here, not a pseudo-inverse).
    """
    k = sigma.size
    keep = [i for i in range(k) if i != b]
    g = jac * sigma
    gm = g[:, keep].copy()
    gm[:, keep.index(a)] += sign * g[:, b]
    inner = precision_cond_var(gm, corr_merged)  # unit variances: cov = corr

    def cond_var(known):
        mapped = {keep.index(a) if i == b else keep.index(i) for i in known}
        return inner(frozenset(mapped))

    return cond_var


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_two_perfectly_correlated_inputs(sign):
    # corr(X_a, X_b) = +-1 with different raw scales (1e-8 and 3): a singular covariance.
    # Reference: the pair merged analytically in the coalition value (see merged_pair_cond_var)
    # + all k! orderings. Players a and b are then substitutes (v(S+a) = v(S+b)), so by the
    # Shapley symmetry axiom (Shapley 1953; from memory) they get equal shares. Tolerance 1e-8.
    rng = np.random.default_rng(7)
    k, a, b = 5, 1, 3
    keep = [i for i in range(k) if i != b]
    rm = random_correlation(rng, k - 1, max_abs=0.7)
    embed = np.array([keep.index(a) if i == b else keep.index(i) for i in range(k)])
    flip = np.where(np.arange(k) == b, sign, 1.0)
    corr = rm[np.ix_(embed, embed)] * np.outer(flip, flip)
    assert corr[a, b] == sign and np.linalg.eigvalsh(corr)[0] < 1e-12
    sigma = np.array([0.5, 1e-8, 2.0, 3.0, 1e2])
    cov = corr * np.outer(sigma, sigma)
    jac = rng.normal(size=(3, k)) / sigma
    want = shapley_by_orderings(k, merged_pair_cond_var(jac, sigma, rm, a, b, sign))
    got = linear_shapley(jac, cov)
    assert_allclose(want[:, a], want[:, b], rtol=0, atol=1e-12)  # symmetry of the reference itself
    assert_allclose(got, want, rtol=0, atol=1e-8)
    assert_allclose(got.sum(axis=1), 1.0, rtol=0, atol=1e-12)


def test_perfectly_correlated_proper_motions_on_a_star():
    # Catalogue interface: pmra_pmdec_corr = 1 (so pmra and pmdec carry equal correlations with
    # the rest), with position correlations. Reference: merged pair + all 6! orderings (1e-8).
    fields = dict(
        ra=55.5, dec=-12.0, parallax=33.0, parallax_error=0.05, pmra=12.0, pmra_error=0.06,
        pmdec=-20.0, pmdec_error=0.04, radial_velocity=-25.0, radial_velocity_error=0.5,
        ra_error=0.04, dec_error=0.03, ra_dec_corr=-0.1, ra_parallax_corr=0.6, dec_parallax_corr=-0.3,
        ra_pmra_corr=0.3, ra_pmdec_corr=0.3, dec_pmra_corr=-0.1, dec_pmdec_corr=-0.1,
        parallax_pmra_corr=-0.25, parallax_pmdec_corr=-0.25, pmra_pmdec_corr=1.0,
    )
    star = make_star(**fields)
    jac = np.array(linearize(star, StraightLine()).jacobian)
    cov = np.array(star.cov)
    sigma = np.sqrt(np.diag(cov))
    corr = cov / np.outer(sigma, sigma)
    keep = [0, 1, 2, 3, 5]
    want = shapley_by_orderings(6, merged_pair_cond_var(jac, sigma, corr[np.ix_(keep, keep)], 3, 4, 1.0))
    got = linear_budget(jac, cov).shapley
    assert_allclose(got, want, rtol=0, atol=1e-8)
    assert_allclose(got[:, 3], got[:, 4], rtol=0, atol=1e-8)


@pytest.mark.parametrize("only", ["parallax_error", "pmdec_error", "radial_velocity_error"])
def test_single_input_with_an_error_takes_everything(only):
    # Only one input uncertain: it explains all of Var(Y) (efficiency) and the exact inputs are
    # null players (Shapley 1953; from memory). Shares 1 and 0, tolerance 1e-12.
    fields = dict(STARS["faint, large proper motion"])
    for name in list(fields):
        if name.endswith("_corr"):
            del fields[name]
    for err in ("ra_error", "dec_error", "parallax_error", "pmra_error", "pmdec_error", "radial_velocity_error"):
        if err != only:
            fields[err] = 0.0
    star = make_star(**fields)
    jac = np.array(linearize(star, StraightLine()).jacobian)
    want = np.zeros((3, 6))
    want[:, OBS.index(only[: -len("_error")])] = 1.0
    assert np.all(np.abs(jac[:, OBS.index(only[: -len("_error")])]) > 0)
    assert_allclose(linear_budget(jac, star.cov).shapley, want, rtol=0, atol=1e-12)


# --------------------------------------------------------------------------------------------
# 5. Batching
# --------------------------------------------------------------------------------------------


def test_batched_linear_shapley_equals_one_at_a_time():
    # A stack of 50 invented stars (position correlations included) gives the same shares as
    # 50 separate calls (1e-12), also reshaped to (5, 10); three stars are checked against the
    # brute force as well (1e-8).
    rng = np.random.default_rng(2024)
    model = StraightLine()
    jacs, covs = [], []
    for _ in range(50):
        mean, cov = random_star_values(rng)
        jacs.append(np.asarray(model.jacobian(mean)))
        covs.append(cov)
    jac, cov = np.array(jacs), np.array(covs)
    stacked = linear_shapley(jac, cov)
    assert stacked.shape == (50, 3, 6)
    single = np.array([linear_shapley(j, c) for j, c in zip(jacs, covs)])
    assert_allclose(stacked, single, rtol=0, atol=1e-12)
    grid = linear_shapley(jac.reshape(5, 10, 3, 6), cov.reshape(5, 10, 6, 6))
    assert_allclose(grid.reshape(50, 3, 6), single, rtol=0, atol=1e-12)
    for n in (0, 17, 49):
        assert_allclose(stacked[n], brute_force_shares(jacs[n], covs[n]), rtol=0, atol=1e-8)


# --------------------------------------------------------------------------------------------
# 6. Global Monte Carlo budget on a nearly linear star
# --------------------------------------------------------------------------------------------

NEARLY_LINEAR = dict(
    ra=77.7, dec=33.3, parallax=40.0, parallax_error=0.3, pmra=30.0, pmra_error=0.2,
    pmdec=-20.0, pmdec_error=0.2, radial_velocity=-40.0, radial_velocity_error=0.05,
    ra_error=0.25, dec_error=0.3, ra_dec_corr=-0.1, ra_parallax_corr=0.7, dec_parallax_corr=-0.45,
    ra_pmra_corr=-0.4, dec_pmdec_corr=0.55, parallax_pmra_corr=-0.3, pmra_pmdec_corr=0.2,
)


def test_global_budget_agrees_with_linear_brute_force():
    # Song, Nelson & Staum 2016 subset estimator with bootstrap intervals. For a nearly linear
    # model (parallax / error = 133, errors below 1 %) its shares estimate the linear Shapley
    # shares. Criterion per share: the brute-force linear value lies in the bootstrap 95 %
    # interval widened by 0.01, or within 4 bootstrap standard errors; no share < -0.01.
    star = make_star(**NEARLY_LINEAR)
    assert star.mean[2] / star.sigma[2] > 100
    model = StraightLine()
    jac = np.array(linearize(star, model).jacobian)
    ref = brute_force_shares(jac, np.array(star.cov))
    gb = global_budget(star, model, seed=12345, n_outer=3000, width=False)
    assert gb.inputs == OBS
    est = gb.variance
    rows = [OUTS.index(q) for q in est.outputs]
    assert rows == [0, 1]  # t_ph and d_ph by default
    want = ref[rows]
    inside = (want >= est.low - 0.01) & (want <= est.high + 0.01)
    close = np.abs(est.shares - want) <= 4 * est.se
    assert np.all(inside | close), (est.shares, est.low, est.high, est.se, want)
    assert est.shares.min() >= -0.01
    assert_allclose(est.shares.sum(axis=1), 1.0, rtol=0, atol=1e-9)
    # the closed-form comparison inside the GlobalBudget (linear_costs route) vs brute force: 1e-8
    assert_allclose(gb.linear_variance, want, rtol=0, atol=1e-8)
    # the position matters here, and the Monte Carlo sees it (share of d_ph > 0.01 for ra + dec)
    assert want[1, :2].sum() > 0.02 and est.shares[1, :2].sum() > 0.01


# --------------------------------------------------------------------------------------------
# 7. Monte Carlo conditional draws, wildly different scales
# --------------------------------------------------------------------------------------------


def test_shapley_gaussian_conditional_draws_on_mixed_scales():
    # Generic linear func of correlated inputs with variances 1e-16 .. 1e2 (the position-like
    # input has 1e-16). For a linear Gaussian model Var(Y | X_-u) is the same for every outer
    # draw, so the estimator is unbiased for the linear Shapley shares (Song, Nelson & Staum
    # 2016); any error in the conditional draws shows up as a bias. Reference: brute force
    # (precision-matrix route, all 4! orderings); tolerance 4 bootstrap standard errors.
    rng = np.random.default_rng(99)
    var = np.array([1e-16, 1e2, 1.0, 1e-6])
    sigma = np.sqrt(var)
    corr = np.array(
        [
            [1.0, 0.7, -0.4, 0.3],
            [0.7, 1.0, -0.2, 0.5],
            [-0.4, -0.2, 1.0, -0.1],
            [0.3, 0.5, -0.1, 1.0],
        ]
    )
    assert np.linalg.eigvalsh(corr)[0] > 0.1
    cov = corr * np.outer(sigma, sigma)
    a = np.array([[1.0, 0.4, -0.8, 0.6], [-0.3, 1.0, 0.5, 0.9]]) / sigma
    mean = np.array([10.0, -3.0, 0.5, 2e-3])
    want = brute_force_shares(a, cov)
    # the 1e-16 input carries a real share only through conditioning: a sign the test can see it
    assert want[:, 0].min() > 0.05

    def func(x):
        return x @ a.T

    est = shapley_gaussian(
        func, mean, cov, players=("p", "q", "r", "s"), outputs=("y1", "y2"), n_outer=3000, seed=rng
    )
    assert est.shares.shape == (2, 4)
    assert np.all(est.se > 0)
    assert np.all(np.abs(est.shares - want) <= 4 * est.se), (est.shares, want, est.se)
    assert_allclose(est.shares.sum(axis=1), 1.0, rtol=0, atol=1e-9)


def test_shapley_gaussian_conditional_mean_on_a_quadratic_output():
    # A linear output cannot see the conditional MEAN of the draws (Var(Y | X_-u) of a linear Y
    # depends only on the conditional covariance), so a quadratic output is added. With
    # W = b . Z (standardized Z), Y2 = W^2 and s^2 = Var(W | Z_S), v = Var(W): given Z_S,
    # W ~ N(mu_S, s^2) with mu_S ~ N(0, v - s^2), and Var(W^2) = 4 mu^2 s^2 + 2 s^4 for
    # W ~ N(mu, s^2) (Gaussian moments E W^4 = mu^4 + 6 mu^2 s^2 + 3 s^4; derived here), so
    # E[Var(Y2 | Z_S)] = 2 s^4 + 4 s^2 (v - s^2). Shapley values of Var(Y) - E[Var(Y | X_S)]
    # by all 4! orderings (Song, Nelson & Staum 2016: the same values as the E[Var(Y | X_-u)]
    # cost game; from memory). Variances 1e-16 .. 1e2; tolerance 4 bootstrap standard errors.
    var = np.array([1e-16, 1e2, 1.0, 1e-6])
    sigma = np.sqrt(var)
    corr = np.array(
        [
            [1.0, 0.6, -0.5, 0.3],
            [0.6, 1.0, -0.2, 0.4],
            [-0.5, -0.2, 1.0, -0.1],
            [0.3, 0.4, -0.1, 1.0],
        ]
    )
    cov = corr * np.outer(sigma, sigma)
    mean = np.array([-4.0, 7.0, 0.25, 1e-3])
    a = np.array([[0.9, -0.5, 0.7, 0.4], [1.0, 0.3, -0.6, 0.5]]) / sigma
    g = a * sigma  # gradients in standardized coordinates

    lin_var = precision_cond_var(g[:1], corr)
    w_var = precision_cond_var(g[1:], corr)
    v = w_var(frozenset())[0]

    def cond_var(known):
        s2 = w_var(known)[0]
        return np.array([lin_var(known)[0], 2 * s2**2 + 4 * s2 * (v - s2)])

    want = shapley_by_orderings(4, cond_var)
    assert want[1, 0] > 0.05  # the 1e-16 input carries a real share of the quadratic output

    def func(x):
        d = x - mean
        return np.stack([d @ a[0], (d @ a[1]) ** 2], axis=-1)

    est = shapley_gaussian(
        func, mean, cov, players=("p", "q", "r", "s"), outputs=("lin", "quad"), n_outer=4000, seed=31
    )
    assert np.all(est.se > 0)
    assert np.all(np.abs(est.shares - want) <= 4 * est.se), (est.shares, want, est.se)


# --------------------------------------------------------------------------------------------
# 8. Nearly exact relations between inputs: one cut-off for every subset, undefined said aloud
# --------------------------------------------------------------------------------------------


def test_nearly_perfect_correlation_kept_consistently_across_subsets():
    # corr(x0, x1) = 1 - 2e-10, just above the cut-off, and an output that depends on their difference:
    # exact rational brute force (raw covariance, all k! orderings). A cut-off relative to each subset's
    # own largest eigenvalue kept the relation in some subsets and not in others (rows summed to 2).
    r = np.eye(6)
    r[0, 1] = r[1, 0] = 1 - 2e-10
    r[2:, 2:] = 0.95
    np.fill_diagonal(r, 1.0)
    jac = np.array([[1.0, -1.0, 1e-6, 0.0, 0.0, 0.0]] * 3)
    got = linear_shapley(jac, r)
    want = np.array(exact_raw_shares(jac[:1], r))[0]
    # the difference direction has eigenvalue 2e-10: rounding of 1e-16 leaves about 1e-6 relative precision
    np.testing.assert_allclose(got[0], want, atol=1e-5)
    np.testing.assert_allclose(got.sum(axis=-1), 1.0, atol=1e-9)


def test_output_along_a_dropped_relation_is_undefined_and_says_so():
    # corr = 1 - 1e-12 is below the cut-off (treated as exact); an output equal to x0 - x1 then has all its
    # variance along the dropped direction: its budget is undefined (NaN, with a warning), never a row of
    # zeros or shares summing to 2. An output that does not cancel keeps a finite budget.
    from perierr.errors import PerierrWarning

    cov = np.eye(6)
    cov[0, 1] = cov[1, 0] = 1 - 1e-12
    jac = np.array([[1.0, -1.0, 0, 0, 0, 0], [1.0, 0.5, 0.2, 0, 0, 0], [0, 0, 0, 1.0, 0, 0]])
    with pytest.warns(PerierrWarning, match="undefined"):
        b = linear_budget(jac, cov, inputs=tuple("abcdef"))
    assert np.isnan(b.shapley[0]).all()
    assert b.dominant("time_myr") is None
    # the finite rows: exact brute force (the pair treated as one input, 1e-12 away from exact)
    want = np.array(exact_raw_shares(jac[1:], cov))
    np.testing.assert_allclose(b.shapley[1:], want, atol=1e-6)
