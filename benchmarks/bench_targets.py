"""A ranked target list and its settling chance: cost per star against one analysis of the same star.

For each star class (invented stars) the reference is one ``analyze`` of the star with the same model and
draws, measured in the same run; ``rank_targets`` with three candidates (radial velocity at two precisions,
parallax at one) is reported as wall time per star and as the ratio to that analysis, the median of ``--repeat``
interleaved runs. Beside the time, the accuracy the list is computed to: the largest binomial error of its
settling chances (sqrt(p (1 - p) / K) over K futures), so that two settings are compared at matched accuracy.

Classes: ``demo`` (the demo star, well measured); ``weak parallax`` (3.0 +- 0.9 mas under an EDSD prior: the
worst class, reweighted draws); ``long horizon`` (perihelion about 15 Myr away); ``receding`` (perihelion in
the past).

Run:  python benchmarks/bench_targets.py [--repeat 3] [--model orbit] [--futures 200] [--samples 2000]
"""

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"  # one core

import argparse  # noqa: E402
import statistics  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402

import numpy as np  # noqa: E402

import perierr  # noqa: E402
from perierr.demo import demo_path  # noqa: E402
from perierr.plan import rank_targets  # noqa: E402
from perierr.plan.cost import PhotonLimitedCost, Reference  # noqa: E402


def stars() -> dict:
    """The star classes (all invented), each with its magnitude, and the prior it is analysed under."""
    base = dict(ra=201.37, dec=-27.62, pmra_error=0.05, pmdec_error=0.05, radial_velocity_error=0.8, mag=10.5,
                mag_band="V")  # fmt: skip
    demo = perierr.read_star_file(demo_path("kestrel-4.toml"))
    return {
        "demo": ([demo], None),
        "weak parallax": ([perierr.ObservedStar.from_values(
            **base, parallax=3.0, parallax_error=0.9, pmra=0.5, pmdec=-0.4, radial_velocity=-60.0,
            name="weak (invented)")], "edsd:L=1350pc"),
        "long horizon": ([perierr.ObservedStar.from_values(
            **base, parallax=4.0, parallax_error=0.02, pmra=0.02, pmdec=-0.01, radial_velocity=-16.0,
            name="far (invented)")], None),
        "receding": ([perierr.ObservedStar.from_values(
            **base, parallax=40.0, parallax_error=0.03, pmra=30.0, pmdec=-20.0, radial_velocity=35.0,
            name="receding (invented)")], None),
    }  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--model", default="orbit")
    parser.add_argument("--futures", type=int, default=200)
    parser.add_argument("--samples", type=int, default=2000)
    args = parser.parse_args()
    cost = PhotonLimitedCost({"radial_velocity": Reference(sigma=1.0, magnitude=12.0, hours=1.0, floor=0.01),
                              "parallax": Reference(sigma=0.05, magnitude=12.0, hours=2.0, floor=0.005)})
    candidates = {"radial_velocity": [0.3, 0.1], "parallax": [0.02]}
    print(f"{'class':<15}{'analysis [s]':>13}{'list [s]':>10}{'/ analysis':>12}{'max P(settle) error':>21}")
    for label, (group, prior) in stars().items():
        t_ref, t_list, err = [], [], 0.0
        for r in range(args.repeat):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                t0 = time.perf_counter()
                perierr.analyze(group[0], model=args.model, n_samples=args.samples, seed=r + 1, distance_prior=prior,
                                compare=False)  # fmt: skip
                t_ref.append(time.perf_counter() - t0)
                t0 = time.perf_counter()
                result = rank_targets(group, candidates, cost, model=args.model, n=args.samples,
                                      futures=args.futures, seed=r + 1, distance_prior=prior)  # fmt: skip
                t_list.append(time.perf_counter() - t0)
            se = np.asarray(result.table["p_settle_se"], dtype=float) if "p_settle_se" in result.table.colnames \
                else np.array([np.nan])  # fmt: skip
            err = max(err, float(np.nanmax(se)) if np.isfinite(se).any() else float("nan"))
        ref, lst = statistics.median(t_ref), statistics.median(t_list) / len(group)
        print(f"{label:<15}{ref:>13.2f}{lst:>10.2f}{lst / ref:>12.1f}{err:>21.3f}")
    print(f"\nmodel {args.model}, {args.samples:,} draws, {args.futures} futures, 3 candidates per star, one core; "
          f"median of {args.repeat} interleaved runs")


if __name__ == "__main__":
    main()
