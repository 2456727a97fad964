"""Benchmark: cost of distance priors against plain Monte Carlo, and MCMC speed.

1. Importance reweighting vs a plain Monte Carlo run of the same N (same star,
   same seed, straight-line model, full summaries): target overhead < 20 %.
2. emcee posterior sampling to 1,000 effective samples for one star on one
   core with the straight-line model: target < 10 s.

Timings interleave the two variants and report the median of several
repetitions (the machine is noisy; N = 1e5 gets three times as many as
N = 1e6); the reference is measured in this run.

Run:  /work/venv/bin/python benchmarks/bench_priors.py [--quick]
"""

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")  # one core

import statistics  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402

import numpy as np  # noqa: E402

from perierr import ObservedStar  # noqa: E402
from perierr.errors import PerierrWarning  # noqa: E402
from perierr.models import StraightLine  # noqa: E402
from perierr.priors import ExponentialDensity, posterior_samples, sample_posterior_mcmc  # noqa: E402
from perierr.propagate.montecarlo import monte_carlo, propagate_samples  # noqa: E402
from perierr.sampling.gaussian import draw_gaussian  # noqa: E402
from perierr.sampling.reweight import importance_weights  # noqa: E402
from perierr.units import PARALLAX  # noqa: E402

COMMAND = "/work/venv/bin/python benchmarks/bench_priors.py"


def invented(plx, eplx):
    """An invented star with correlated astrometry."""
    return ObservedStar.from_values(
        name="bench", ra=80.0, dec=10.0, parallax=plx, parallax_error=eplx, pmra=3.0, pmra_error=0.2,
        pmdec=-2.0, pmdec_error=0.2, radial_velocity=-40.0, radial_velocity_error=1.0,
        ra_error=0.05, dec_error=0.05, parallax_pmra_corr=0.2, pmra_pmdec_corr=-0.1,
    )


def timed(fn):
    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


def bench_reweight(n, repeats):
    """Median times: plain MC, reweighted MC, and the weight computation alone."""
    star, model, prior = invented(2.0, 0.4), StraightLine(), ExponentialDensity(1350.0)

    def plain():
        monte_carlo(star, model, n=n, seed=1)

    def weighted():
        s = posterior_samples(star, prior, n=n, seed=1, method="reweight")
        propagate_samples(s, model, reference=star.mean)

    plx = np.ascontiguousarray(draw_gaussian(star.mean, star.cov, n, np.random.default_rng(1))[:, PARALLAX])

    def weights_only():
        importance_weights(plx, prior)

    fns = (plain, weighted, weights_only)
    for fn in fns:
        fn()  # warm up
    times = [[] for _ in fns]
    for _ in range(repeats):
        for t, fn in zip(times, fns):
            t.append(timed(fn))
    tp, tw, tweights = (statistics.median(t) for t in times)
    return tp, tw, tweights


def bench_mcmc(label, star, repeats):
    prior = ExponentialDensity(1350.0)
    out = []
    for k in range(repeats):
        t = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PerierrWarning)
            s = sample_posterior_mcmc(star, prior, n_effective=1000, seed=10 + k)
        dt = time.perf_counter() - t
        out.append((dt, s.info["effective_size"], max(s.info["autocorrelation_time"].values()), s.info["n_steps"]))
    dt = statistics.median(x[0] for x in out)
    ess = statistics.median(x[1] for x in out)
    tau = statistics.median(x[2] for x in out)
    steps = statistics.median(x[3] for x in out)
    return label, dt, ess, tau, steps


def main():
    quick = "--quick" in sys.argv
    repeats = 3 if quick else 7
    print(f"perierr distance-prior benchmark (command: {COMMAND}{' --quick' if quick else ''})")
    print("\n1. reweighting overhead vs plain Monte Carlo of the same N (straight line, full summaries)")
    print(f"   {'N':>9}  {'plain [s]':>10}  {'reweighted [s]':>14}  {'end to end':>10}  {'weights alone':>13}")
    worst_total = worst_weights = 0.0
    for n in ((100_000,) if quick else (100_000, 1_000_000)):
        # more repetitions for the short runs, whose medians the shared machine disturbs most
        tp, tw, tweights = bench_reweight(n, repeats * max(1, 300_000 // n))
        total, weights = tw / tp - 1.0, tweights / tp
        worst_total, worst_weights = max(worst_total, total), max(worst_weights, weights)
        print(f"   {n:>9,}  {tp:>10.4f}  {tw:>14.4f}  {total:>+9.1%}  {weights:>+12.1%}")
    print("   (end to end includes the weighted summaries of perierr.summary: exact weighted quantiles by a"
          "\n    bracketed selection instead of the unweighted partition; 'weights alone' is the reweighting"
          "\n    step itself; target < 20 %)")
    print("\n2. emcee to 1,000 effective samples, one star, one core, 64 walkers (target < 10 s)")
    print(f"   {'star':<28}{'time [s]':>9}{'ESS':>8}{'ESS/s':>9}{'tau':>7}{'steps':>7}  ratio to 10 s")
    slowest = 0.0
    for label, star in (("parallax error 5 %", invented(2.0, 0.1)), ("parallax error 50 %", invented(2.0, 1.0)),
                        ("parallax -0.3 +- 0.5 mas", invented(-0.3, 0.5))):
        label, dt, ess, tau, steps = bench_mcmc(label, star, 1 if quick else 3)
        slowest = max(slowest, dt)
        print(f"   {label:<28}{dt:>9.2f}{ess:>8.0f}{ess / dt:>9.0f}{tau:>7.1f}{steps:>7.0f}  {dt / 10:.2f}")
    print(f"\nsummary: reweighting step adds {worst_weights:+.1%} of a plain run (end to end with weighted "
          f"summaries {worst_total:+.1%}; target < 20 %); slowest MCMC to 1,000 ESS {slowest:.2f} s "
          "(target < 10 s)")


if __name__ == "__main__":
    main()
