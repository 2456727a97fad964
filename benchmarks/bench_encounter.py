"""Cost of the encounter effects (perierr.encounter) against the star's whole analysis, in the same run.

For each class of star, ``perierr.analyze`` runs end to end (draws, model, summaries, budgets, encounter
effects; no model comparison, as in catalogue runs, so the encounter's share is the largest it gets), then
``encounter_effects`` alone on that analysis's draws (its mass and magnitude draws, impulses, proxies,
peak magnitude and proper motion, their summaries, P(inside each Oort radius), the budget). The ratio
encounter / analysis is what to read; this machine's absolute timings are noisy. Times are the best of
``--repeat``, the two timed in turn.

Star classes (all invented): the demo star; the demo star with five comet positions; a weak parallax
(20 % error) under an exponentially decreasing space density prior (``edsd:L=1000pc``); a slow star on a
long horizon (about 20 Myr to perihelion at about 5 km/s); a distant star (parallax 2 mas).

Run:  python benchmarks/bench_encounter.py [--n 100000] [--repeat 5] [--model orbit]
"""

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"  # one core

import argparse  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402

import numpy as np  # noqa: E402

import perierr  # noqa: E402
from perierr import ObservedStar  # noqa: E402
from perierr.budget.inputs import budget_inputs  # noqa: E402
from perierr.cautions import SHOWER  # noqa: E402
from perierr.demo import demo_path  # noqa: E402
from perierr.encounter import DEFAULT_OORT_RADII, encounter_effects  # noqa: E402
from perierr.errors import PerierrWarning  # noqa: E402

#: Five comets (heliocentric ICRS, au) around the cloud: near 20,000 au and out to 100,000 au.
COMETS = np.array([
    [20_000.0, 0.0, 0.0], [0.0, -30_000.0, 10_000.0], [-50_000.0, 20_000.0, -5_000.0],
    [10_000.0, 10_000.0, 60_000.0], [-70_000.0, -60_000.0, 30_000.0],
])  # fmt: skip


def invented(name, plx, eplx, pmra, pmdec, rv, *, epm=0.03, erv=0.5, mass=0.8, mag=11.0):
    """An invented star with a mass and a magnitude (catalogue units)."""
    return ObservedStar.from_values(
        name=name, ra=75.0, dec=-20.0, parallax=plx, parallax_error=eplx, pmra=pmra, pmra_error=epm,
        pmdec=pmdec, pmdec_error=epm, radial_velocity=rv, radial_velocity_error=erv, ra_error=0.03,
        dec_error=0.03, parallax_pmra_corr=0.1, pmra_pmdec_corr=-0.2, mass=mass, mass_error=0.1 * mass,
        phot_g_mean_mag=mag, phot_g_mean_mag_error=0.003,
    )  # fmt: skip


def classes():
    """(label, star, analyze keywords, encounter keywords) of each class."""
    demo = perierr.read_star_file(demo_path("kestrel-4.toml"))
    return [
        ("demo star", demo, {}, {}),
        ("demo star, 5 comet positions", demo, {"comet_positions": COMETS}, {"comet_positions": COMETS}),
        ("weak parallax 20 %, edsd prior", invented("weak", 4.0, 0.8, 0.04, -0.03, -45.0, mag=13.5),
         {"distance_prior": "edsd:L=1000pc"}, {}),
        ("slow, long horizon (~20 Myr)", invented("slow", 10.0, 0.02, 0.05, 0.04, -4.8, erv=0.2), {}, {}),
        ("distant, parallax 2 mas", invented("far", 2.0, 0.02, 0.01, -0.01, -80.0, epm=0.01, mass=1.4, mag=9.0),
         {}, {}),
    ]  # fmt: skip


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=100_000, help="Monte Carlo draws per analysis")
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--model", choices=("straight_line", "orbit"), default="straight_line")
    args = parser.parse_args()
    model = perierr.make_model(args.model)
    warnings.simplefilter("ignore", PerierrWarning)
    print(f"encounter effects vs the whole analysis: {args.model} model, N = {args.n:,} draws, best of "
          f"{args.repeat}, one thread")  # fmt: skip
    head = f"{'class':<34}{'d_ph med':>10}{'analyze':>11}{'encounter':>11}{'ratio':>8}{'per draw':>10}"
    print(head)
    rows = []
    for label, star, kw_analysis, kw_encounter in classes():
        def analysis(star=star, kw=kw_analysis):
            return perierr.analyze(star, model=model, n_samples=args.n, seed=2026, compare=False, **kw)

        result = analysis()  # warm-up, and the draws the encounter is timed on
        parts = None if result.linear is None else budget_inputs(result.star, result.linear)

        def encounter(a=result, p=parts, kw=kw_encounter):
            return encounter_effects(a.star, a.monte_carlo, linear=a.linear, budget_inputs=p,
                                     radii=DEFAULT_OORT_RADII, **kw)  # fmt: skip

        encounter()
        t_all = t_enc = np.inf
        for _ in range(args.repeat):  # in turn, so a slow spell of the machine hits both
            t0 = time.perf_counter()
            analysis()
            t_all = min(t_all, time.perf_counter() - t0)
            t0 = time.perf_counter()
            encounter()
            t_enc = min(t_enc, time.perf_counter() - t0)
        d_med = result.monte_carlo.summaries["distance_pc"].median
        ratio = t_enc / t_all
        rows.append((label, ratio, t_enc, t_all))
        print(f"{label:<34}{d_med:>8.3g}pc{t_all * 1e3:>8.1f} ms{t_enc * 1e3:>8.1f} ms{ratio:>7.1%}"
              f"{t_enc / args.n * 1e9:>7.0f} ns")  # fmt: skip
    worst = max(rows, key=lambda r: r[1])
    print(f"\nworst class: {worst[0]}: encounter_effects {worst[2] * 1e3:.1f} ms = {worst[1]:.1%} of its whole "
          f"analysis ({worst[3] * 1e3:.1f} ms; the analysis includes the encounter effects)")  # fmt: skip
    print(f"command: python benchmarks/bench_encounter.py --n {args.n} --repeat {args.repeat} --model {args.model}")
    print(SHOWER)


if __name__ == "__main__":
    main()
