"""Monte Carlo with the straight-line model, N = 10^6, end to end, on one core.

Compares perierr's path (draw, model, every summary) with the straightforward way
of doing the same job by hand: numpy's multivariate_normal draw, astropy SkyCoord
to Cartesian on the same samples, the LMA formulas, numpy percentiles. Both run
in this process after a warm-up; the ratio is what to read, since this machine's
absolute timings are noisy.

Run:  python benchmarks/bench_montecarlo.py [--n 1000000] [--repeat 5]
"""

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"  # one core

import argparse  # noqa: E402
import time  # noqa: E402
import tracemalloc  # noqa: E402
import warnings  # noqa: E402

import astropy.coordinates as coord  # noqa: E402
import astropy.units as u  # noqa: E402
import numpy as np  # noqa: E402

from perierr import StraightLine, monte_carlo, read_star_file  # noqa: E402
from perierr.demo import demo_path  # noqa: E402


def by_hand(star, n, seed):
    """The straightforward route: SkyCoord -> Cartesian -> LMA formulas -> percentiles."""
    rng = np.random.default_rng(seed)
    x = rng.multivariate_normal(star.mean, star.cov, size=n)
    sc = coord.SkyCoord(
        ra=x[:, 0] * u.deg, dec=x[:, 1] * u.deg, distance=(1000 / x[:, 2]) * u.pc,
        pm_ra_cosdec=x[:, 3] * u.mas / u.yr, pm_dec=x[:, 4] * u.mas / u.yr,
        radial_velocity=x[:, 5] * u.km / u.s, frame="icrs",
    )
    pos = sc.cartesian.xyz.to_value(u.pc)
    vel = sc.velocity.d_xyz.to_value(u.km / u.s)
    vv = np.sum(vel * vel, axis=0)
    t = -np.sum(pos * vel, axis=0) / vv
    d = np.linalg.norm(pos + vel * t, axis=0)
    t_myr = (t * u.pc / (u.km / u.s)).to_value(u.Myr)
    out = {}
    for name, arr in (("t", t_myr), ("d", d), ("v", np.sqrt(vv))):
        out[name] = np.percentile(arr, [5, 16, 50, 84, 95])
    return out


def timed(fn, repeat):
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--n", type=int, default=1_000_000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    star = read_star_file(demo_path("kestrel-4.toml"))
    model = StraightLine()
    warnings.simplefilter("ignore")

    def ours():
        return monte_carlo(star, model, n=args.n, seed=1)

    ours()
    by_hand(star, 10_000, 1)  # warm-up
    t_ours = timed(ours, args.repeat)
    t_ref = timed(lambda: by_hand(star, args.n, 1), max(2, args.repeat // 2))
    tracemalloc.start()
    ours()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    print(f"N = {args.n:,} straight-line Monte Carlo, best of {args.repeat}, one thread")
    print(f"  perierr (draw + model + all summaries): {t_ours:.3f} s = {args.n / t_ours / 1e6:.2f} M samples/s")
    print(f"  by hand (SkyCoord + LMA + percentiles): {t_ref:.3f} s = {args.n / t_ref / 1e6:.2f} M samples/s")
    print(f"  speed-up: {t_ref / t_ours:.1f}x; perierr peak traced memory {peak / 2**20:.0f} MiB")
    print("  reproduce: python benchmarks/bench_montecarlo.py --n 1000000 --repeat 5")


if __name__ == "__main__":
    main()
