"""A full re-observation plan for one star with the straight-line model, on one core.

The plan: global Shapley budget for t_ph and d_ph (variance and 90 % width games,
all 63 subsets, bootstrap intervals), gain curves for all six inputs at 20
precisions each, a what-if of the radial velocity and one goal solved for every
input. Target: under 30 s.

References measured in the same run (this machine's absolute timings are noisy,
read the ratios):

* ``naive curves``: the same 120 gain-curve points done the straightforward way,
  one fresh ``monte_carlo`` per point (no common draws, so also noisier);
* ``mc 1e6``: one plain Monte Carlo of the star with 10^6 draws, as a unit of cost.

Run:  python benchmarks/bench_plan.py [--repeat 3]
"""

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"  # one core

import argparse  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

from perierr import StraightLine, monte_carlo, read_star_file  # noqa: E402
from perierr.budget import global_budget  # noqa: E402
from perierr.demo import demo_path  # noqa: E402
from perierr.plan import gain_curves, plan, spread_goal, update_covariance  # noqa: E402
from perierr.star import ObservedStar  # noqa: E402


def timed(fn, repeat):
    best, out = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def naive_curves(star, model, n):
    widths = []
    for idx in range(6):
        for s in star.sigma[idx] * np.geomspace(3.0, 0.01, 20):
            new = ObservedStar(star.mean, update_covariance(star.cov, idx, s))
            r = monte_carlo(new, model, n=n, seed=int(1000 * idx + s * 1e6) % 2**31, thresholds=["20000 au"])
            widths.append(r.summaries["distance_pc"].quantiles[0.95] - r.summaries["distance_pc"].quantiles[0.05])
    return np.array(widths)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    star = read_star_file(demo_path("kestrel-4.toml"))
    model = StraightLine()
    goal = spread_goal("width90", "d_ph", "1700 au")

    def full():
        return plan(star, model=model, measure={"radial_velocity": 0.15}, goals=[goal], seed=1)

    monte_carlo(star, model, n=10_000, seed=0)  # warm-up
    t_plan, p = timed(full, args.repeat)
    t_budget, _ = timed(lambda: global_budget(star, model, seed=1), args.repeat)
    t_curves, c = timed(lambda: gain_curves(star, model, n=20_000, seed=1), args.repeat)
    t_naive, naive = timed(lambda: naive_curves(star, model, 20_000), 1)
    t_mc, _ = timed(lambda: monte_carlo(star, model, n=1_000_000, seed=1), args.repeat)
    crn = np.concatenate([c.curves[k]["distance_pc.width90"] for k in c.inputs])
    rough = lambda w: float(np.median(np.abs(np.diff(w, 2)) / w[1:-1]))  # noqa: E731
    print(f"star: {star.name}; straight-line model; one core; best of {args.repeat}")
    print(f"  full plan (budget t+d with width game, 6x20 gain curves, what-if, 6 goals): {t_plan:7.2f} s"
          f"  [target < 30 s: {'PASS' if t_plan < 30 else 'FAIL'}]")
    print(f"  global budget alone ({p.budget.settings['model_calls']:,} model calls):          {t_budget:7.2f} s")
    print(f"  gain curves alone (120 points x 20000 common draws):                  {t_curves:7.2f} s")
    print(f"  naive gain curves (120 fresh monte_carlo runs x 20000):               {t_naive:7.2f} s"
          f"  ratio naive / common draws = {t_naive / t_curves:.1f}")
    print(f"  reference: monte_carlo, 10^6 draws:                                   {t_mc:7.2f} s"
          f"  ratio plan / mc = {t_plan / t_mc:.1f}")
    print(f"  curve roughness (median |2nd difference| / value): common draws {rough(crn):.2e}, "
          f"naive {rough(naive):.2e}")
    print("Command: python benchmarks/bench_plan.py --repeat 3")


if __name__ == "__main__":
    main()
