"""Linear Shapley budget: cost per star, one star at a time and batched, at matched accuracy.

The reference is the definition written plainly: for each of the 2^k subsets a
conditional variance by a pseudo-inverse in correlation coordinates (the
correct route; the raw-covariance pseudo-inverse it replaces was wrong for
correlated positions), then the Shapley sum over subsets with factorial
weights. perierr precomputes the subsets and weights once and batches the
solves over subsets and over stars. Both run in this process; the ratio is what
to read. Star classes: a well-measured catalogue solution with position
correlations (k = 6), the same with the parallax zero-point and the mass as
inputs (k = 8), and hard cases (an input held exact, two perfectly correlated
inputs, variances spanning 1e-16 to 1e4).

Run:  python benchmarks/bench_budget.py [--stars 2000] [--repeat 5]
"""

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"  # one core

import argparse  # noqa: E402
import itertools  # noqa: E402
import math  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

from perierr import StraightLine, linearize, monte_carlo, read_star_file  # noqa: E402
from perierr.budget import linear_budget, linear_shapley  # noqa: E402
from perierr.demo import demo_path  # noqa: E402


def reference_shapley(jac, cov):
    """The definition: subset loop, conditional variance by pinv in correlation coordinates."""
    sigma = np.sqrt(np.diag(cov))
    safe = np.where(sigma > 0, sigma, 1.0)
    corr = cov / np.outer(safe, safe)
    corr[sigma == 0, :] = 0.0
    corr[:, sigma == 0] = 0.0
    np.fill_diagonal(corr, 1.0)
    g = jac * sigma
    k = cov.shape[0]
    cost = {}
    for size in range(k + 1):
        for u in itertools.combinations(range(k), size):
            rest = [i for i in range(k) if i not in u]
            if not u:
                cost[u] = np.zeros(g.shape[0])
                continue
            c = corr[np.ix_(u, u)]
            if rest:
                x = corr[np.ix_(u, rest)]
                c = c - x @ np.linalg.pinv(corr[np.ix_(rest, rest)], rcond=1e-10, hermitian=True) @ x.T
            gu = g[:, list(u)]
            cost[u] = np.einsum("mi,ij,mj->m", gu, c, gu)
    total = cost[tuple(range(k))]
    eff = np.zeros_like(g)
    for i in range(k):
        others = [j for j in range(k) if j != i]
        for size in range(k):
            w = math.factorial(size) * math.factorial(k - size - 1) / math.factorial(k)
            for u in itertools.combinations(others, size):
                eff[:, i] += w * (cost[tuple(sorted(u + (i,)))] - cost[u])
    return eff / np.where(total > 0, total, 1.0)[:, None]


def catalogue_like(rng, n, k=6):
    """Invented stacks of (Jacobian, covariance) with position correlations and realistic scales."""
    scale = np.array([1e-8, 1e-8, 0.03, 0.03, 0.03, 0.6, 0.02, 0.05][:k])
    a = rng.normal(size=(n, k, k))
    corr = a @ np.swapaxes(a, -1, -2) + 2.0 * np.eye(k)
    d = np.sqrt(np.diagonal(corr, axis1=-2, axis2=-1))
    corr /= d[..., :, None] * d[..., None, :]
    cov = corr * np.outer(scale, scale)
    jac = rng.normal(size=(n, 3, k)) / scale
    return jac, cov


def hard_cases(rng, n):
    jac, cov = catalogue_like(rng, n)
    cov[: n // 3, 0, :] = 0.0  # ra held exact
    cov[: n // 3, :, 0] = 0.0
    third = slice(n // 3, 2 * n // 3)  # pmra and pmdec perfectly correlated
    s = np.sqrt(cov[third, 3, 3])
    cov[third, 4, :] = cov[third, 3, :]
    cov[third, :, 4] = cov[third, :, 3]
    cov[third, 4, 4] = s**2
    cov[2 * n // 3 :] *= np.outer(10.0 ** np.array([-8, 8, -4, 4, 0, 2]), 10.0 ** np.array([-8, 8, -4, 4, 0, 2]))
    jac[2 * n // 3 :] /= 10.0 ** np.array([-8, 8, -4, 4, 0, 2])
    return jac, cov


def best_of(fn, repeat):
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--stars", type=int, default=2000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    rng = np.random.default_rng(2026)
    n_ref = min(args.stars, 100)
    print(f"{'class':<34}{'reference':>12}{'one star':>12}{'batched':>12}{'ref/batch':>11}{'max |diff|':>12}")
    classes = {
        "catalogue-like, k = 6": catalogue_like(rng, args.stars),
        "with zero-point and mass, k = 8": catalogue_like(rng, args.stars, k=8),
        "hard (exact, rank-1, 1e-16..1e4)": hard_cases(rng, args.stars),
    }
    for name, (jac, cov) in classes.items():
        inputs = tuple(f"x{i}" for i in range(jac.shape[-1]))
        pairs = list(zip(jac[:n_ref], cov[:n_ref]))
        t_ref, ref = best_of(lambda p=pairs: [reference_shapley(j, c) for j, c in p], 1)
        t_one, _ = best_of(lambda p=pairs, n=inputs: [linear_budget(j, c, inputs=n) for j, c in p], args.repeat)
        t_batch, got = best_of(lambda j=jac, c=cov: linear_shapley(j, c), args.repeat)
        diff = np.max(np.abs(got[:n_ref] - np.array(ref)))
        per = (t_ref / n_ref * 1e3, t_one / n_ref * 1e3, t_batch / args.stars * 1e3)
        print(f"{name:<34}{per[0]:>9.3f} ms{per[1]:>9.3f} ms{per[2]:>9.3f} ms{per[0] / per[2]:>10.0f}x{diff:>12.1e}")
    star = read_star_file(demo_path("kestrel-4.toml"))
    model = StraightLine()
    t_mc, _ = best_of(lambda: monte_carlo(star, model, n=10_000, seed=1), args.repeat)
    jac = linearize(star, model).jacobian
    t_b, _ = best_of(lambda: linear_budget(jac, star.cov), args.repeat)
    print(f"\ndemo star: linear budget {t_b * 1e3:.3f} ms vs straight-line Monte Carlo of 10^4 draws "
          f"{t_mc * 1e3:.2f} ms (ratio {t_b / t_mc:.2f})")
    print("command: python benchmarks/bench_budget.py --stars", args.stars, "--repeat", args.repeat)


if __name__ == "__main__":
    main()
