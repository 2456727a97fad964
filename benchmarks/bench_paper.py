"""Cost of the paper faces against the analysis they show: table rows, figures, the one-page report.

For each star class the analysis itself (``analyze``, the default orbit model unless said) is the reference,
measured in the same run; every face is reported as its wall time and its ratio to that analysis, the median
of ``--repeat`` interleaved runs (this machine's timings are noisy: read the ratios). Classes (invented stars):

* ``demo``: the demo star (Kestrel-4, invented), 100,000 draws, a well-measured approaching star;
* ``weak parallax``: 3.0 +- 0.9 mas under an EDSD prior (reweighted draws: weighted figures);
* ``long horizon``: a distant, slow star whose perihelion is 15 Myr away (the separation figure follows its
  orbits over the whole span: the worst class for that figure);
* ``receding``: a star whose perihelion lies in the past.

Faces: ``write_table`` (.ecsv and .tex), ``write_figures`` (four PNGs: distance, corner, separation, budget),
``html_report`` (self-contained page, four embedded figures).

Run:  python benchmarks/bench_paper.py [--repeat 3] [--samples 100000]
"""

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"  # one core
os.environ.setdefault("MPLBACKEND", "Agg")

import argparse  # noqa: E402
import statistics  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import perierr  # noqa: E402
from perierr.demo import demo_path  # noqa: E402
from perierr.report import html_report, write_figures, write_table  # noqa: E402


def stars() -> dict:
    """The star classes (all invented) and their analysis options."""
    base = dict(ra=201.37, dec=-27.62, pmra_error=0.05, pmdec_error=0.05, radial_velocity_error=0.8)
    return {
        "demo": (perierr.read_star_file(demo_path("kestrel-4.toml")), {}),
        "weak parallax": (perierr.ObservedStar.from_values(
            **base, parallax=3.0, parallax_error=0.9, pmra=0.5, pmdec=-0.4, radial_velocity=-60.0,
            name="weak (invented)"), {"distance_prior": "edsd:L=1350pc", "prior_method": "reweight"}),
        "long horizon": (perierr.ObservedStar.from_values(
            **base, parallax=4.0, parallax_error=0.02, pmra=0.02, pmdec=-0.01, radial_velocity=-16.0,
            name="far (invented)"), {}),
        "receding": (perierr.ObservedStar.from_values(
            **base, parallax=40.0, parallax_error=0.03, pmra=30.0, pmdec=-20.0, radial_velocity=35.0,
            name="receding (invented)"), {}),
    }  # fmt: skip


def timed(work) -> float:
    start = time.perf_counter()
    work()
    return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--samples", type=int, default=100_000)
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="perierr-bench-paper-"))
    print(f"{'class':<15}{'face':<28}{'median [s]':>11}{'/ analysis':>12}")
    for label, (star, options) in stars().items():
        times = {k: [] for k in ("analysis", "table (.ecsv + .tex)", "figures (4 PNG)", "one-page report")}
        for r in range(args.repeat):
            result = {}

            def analysis(r=r, star=star, options=options, result=result):
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    result["a"] = perierr.analyze(star, n_samples=args.samples, seed=r + 1, **options)

            times["analysis"].append(timed(analysis))
            a = result["a"]
            times["table (.ecsv + .tex)"].append(timed(lambda a=a: (write_table(a, folder / "t.ecsv"),
                                                                     write_table(a, folder / "t.tex"))))
            times["figures (4 PNG)"].append(timed(lambda a=a: write_figures(a, folder / "f.png", seed=1)))
            times["one-page report"].append(timed(lambda a=a: html_report(a, folder / "p.html")))
        ref = statistics.median(times["analysis"])
        for face, ts in times.items():
            med = statistics.median(ts)
            print(f"{label:<15}{face:<28}{med:>11.2f}{med / ref:>12.2f}")
    print(f"\n{args.repeat} interleaved runs each, {args.samples:,} draws, one core; ratios to the analysis of the "
          "same star in the same run")


if __name__ == "__main__":
    main()
