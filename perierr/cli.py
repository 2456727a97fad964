"""Command line: ``perierr demo``, ``run STAR_FILE``, ``screen TABLE``, ``plan STAR_FILE``, ``catalogue TABLE``.

The CLI only parses arguments, calls the API and prints or writes results
(stdout), and shows the progress of long runs on stderr when stderr is a
terminal (``--quiet`` turns it off).
"""

from __future__ import annotations

import argparse
import os
import re
import sys
import warnings
from pathlib import Path

from ._version import __version__
from .analysis import analyze
from .demo import demo_path
from .encounter import DEFAULT_OORT_RADII
from .errors import InputError, PerierrError, PerierrWarning
from .models import DEFAULT_MODEL, MODEL_NAMES, make_model
from .report import format_analysis, write_json
from .star import read_star_file
from .thresholds import DEFAULT_THRESHOLDS

__all__ = ["main"]


def _floats(text: str) -> list:
    try:
        return [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected comma-separated numbers, got {text!r}") from None


def _strings(text: str) -> list:
    return [x.strip() for x in text.split(",") if x.strip()]


def _attach_negative_values(argv: list) -> list:
    """``--parallax-offset -0.017,0.005`` read as ``--parallax-offset=-0.017,0.005``.

    argparse takes a word that starts with '-' for an option unless it is a plain negative number; a value
    such as ``-0.017,0.005`` (a number with its error) or ``-20,10`` (a window) would be refused. No option
    name and no file of ours starts with '-' and a digit, so such a word after an option is its value.
    """
    out = []
    for word in argv:
        if (out and out[-1].startswith("--") and "=" not in out[-1] and re.match(r"^-\.?\d", str(word))
                and out[-1] not in _FLAGS):
            out[-1] = f"{out[-1]}={word}"
        else:
            out.append(word)
    return out


#: Options that take no value (a negative number after one of them is not its value).
_FLAGS = frozenset({"--quiet", "--focusing", "--screen-only", "--dask", "--no-ecsv", "--curves", "--no-curves",
                    "--budget", "--no-budget", "--help", "--version"})  # fmt: skip


def _check_distances(args) -> None:
    """Distances of --within and --curve-within are checked when read, used or not (never silently ignored)."""
    from .thresholds import parse_thresholds

    for option in ("within", "curve_within"):
        value = getattr(args, option, None)
        if value is None:
            continue
        items = [value] if isinstance(value, str) else list(value)
        if not items:
            raise InputError(f"--{option.replace('_', '-')}", ",", "expected distances with units, e.g. 1pc,20000au")
        parse_thresholds(items)


def _whole_number(text: str, minimum: int) -> int:
    """A whole number >= ``minimum``, or argparse's usage error saying what was expected."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < minimum:
        raise argparse.ArgumentTypeError(f"expected a whole number >= {minimum}, got {value}")
    return value


def _count(text: str) -> int:
    """A whole number >= 1 (draws, points)."""
    return _whole_number(text, 1)


def _whole(text: str) -> int:
    """A whole number >= 0 (0 turns a part off)."""
    return _whole_number(text, 0)


def _horizon(text: str):
    """``H`` (the window -H .. +H Myr) or ``T_MIN,T_MAX`` [Myr], for the orbit model's ``horizon_myr``."""
    values = _floats(text)
    if len(values) == 1:
        return values[0]
    if len(values) == 2:
        return tuple(values)
    raise argparse.ArgumentTypeError(f"expected H or T_MIN,T_MAX in Myr, got {text!r}")


def _add_common_options(p: argparse.ArgumentParser, *, within_help: str, json_help: str) -> None:
    """Options every analysing command shares: thresholds, seed, JSON output, model, horizon, quiet."""
    p.add_argument("--within", type=_strings, default=list(DEFAULT_THRESHOLDS), metavar="D,D", help=within_help)
    p.add_argument("--seed", type=int, default=None, metavar="S", help="random seed (default: a fresh one, printed)")
    p.add_argument("--json", type=Path, default=None, metavar="PATH", help=json_help)
    p.add_argument(
        "--model",
        default=DEFAULT_MODEL,
        choices=MODEL_NAMES,
        help=f"forward model (default {DEFAULT_MODEL}: orbits of the star and the Sun in a Milky Way potential; "
        "straight_line: the linear motion approximation, fast but blind to the Galactic tide)",
    )
    p.add_argument(
        "--horizon",
        type=_horizon,
        default=None,
        metavar="H|T_MIN,T_MAX",
        help="orbit model: search the perihelion within -H .. +H Myr, or T_MIN .. T_MAX (write --horizon=-5,30 "
        "for a negative start; default: -100 .. +100 Myr)",
    )
    p.add_argument("--quiet", action="store_true", help="no progress line on stderr (shown only on a terminal)")


def _model(args):
    """The forward model the options ask for (``--model``, ``--horizon``)."""
    if args.horizon is None:
        return make_model(args.model)
    if args.model != "orbit":
        raise InputError("--horizon", args.horizon, f"an option of the orbit model, not of --model {args.model}")
    return make_model(args.model, horizon_myr=args.horizon)


def _progress(args):
    """The progress line on stderr, or None (``--quiet``, or stderr is not a terminal)."""
    from .progress import terminal_progress

    return terminal_progress(sys.stderr, quiet=args.quiet)


def _add_analysis_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--samples", type=_count, default=100_000, metavar="N", help="Monte Carlo draws (default 100000)")
    _add_common_options(
        p,
        within_help="distances for P(d_ph < D), with units (default '0.5pc,1pc,2pc,20000au,100000au')",
        json_help="also write the full result as JSON",
    )
    p.add_argument("--levels", type=_floats, default=(), metavar="Q,Q", help="extra quantile levels, e.g. 0.025,0.975")
    p.add_argument("--paper-table", type=Path, default=None, metavar="PATH",
                   help="also write a table row for papers: PATH ending in .ecsv (units, provenance), .csv or .tex "
                        "(LaTeX, rounded by the Particle Data Group rule)")
    p.add_argument("--interval", choices=("68", "90"), default="68",
                   help="central interval of --paper-table: 68 (16-84 %%, the default) or 90 (5-95 %%)")
    p.add_argument("--figures", type=Path, default=None, metavar="PATH",
                   help="also draw the figures: PATH ending in .png or .pdf is the pattern, e.g. figs/k4.png writes "
                        "figs/k4-distance.png, -corner, -separation and -budget")
    p.add_argument("--page", type=Path, default=None, metavar="PATH",
                   help="also write the one-page report: PATH ending in .html (self-contained) or .pdf (printed by "
                        "a headless Chromium, which must be installed)")
    p.add_argument(
        "--target-error",
        type=float,
        default=None,
        metavar="F",
        help="draw until every quantile's MC error is below F x (q84-q16)/2 (e.g. 0.01)",
    )
    p.add_argument("--max-samples", type=_count, default=10_000_000, metavar="N", help="cap for --target-error")
    p.add_argument(
        "--focusing", action="store_true", help="add the gravitational focusing of the star's mass (mass, mass_error)"
    )
    g = p.add_argument_group("what the encounter does (impulses need the star's mass, the peak magnitude its "
                             "magnitude; statistical predictions, not impact hazards)")
    _add_oort_radii(g)
    g.add_argument("--encounter-rows", type=Path, default=None, metavar="PATH",
                   help="also write the encounter's LaTeX rows (.tex: peak magnitude and proper motion, impulses, "
                        "P(inside each Oort radius)), rounded like --paper-table")
    g.add_argument("--comet", action="append", default=[], metavar="R,RA,DEC",
                   help="also the impulse on a comet at this heliocentric position: distance with unit, ICRS right "
                        "ascension and declination in deg, e.g. '50000au,266.4,-28.9' (repeatable)")
    _add_prior_options(p)


def _add_oort_radii(g) -> None:
    g.add_argument("--oort-radii", type=_strings, default=list(DEFAULT_OORT_RADII), metavar="R,R",
                   help="Oort-cloud radii, with units, for P(inside) and the impulse on a comet on the near side "
                        "(default '20000au,100000au')")


def _add_prior_options(p: argparse.ArgumentParser) -> None:
    from .priors import METHODS, PRIOR_SYNTAX

    g = p.add_argument_group("distance prior and parallax calibration")
    g.add_argument(
        "--distance-prior",
        default=None,
        metavar="SPEC",
        help=f"prior on the distance instead of inverting the parallax: {PRIOR_SYNTAX}",
    )
    g.add_argument(
        "--prior-method",
        default="auto",
        choices=METHODS,
        help="reweight Gaussian draws, run MCMC (emcee), or auto: reweight and switch to MCMC "
        "when the effective sample size is too small or the parallax is <= 0",
    )
    g.add_argument(
        "--parallax-offset",
        default=None,
        metavar="Z[,ERR]",
        help="parallax zero-point in mas, subtracted first (e.g. -0.017,0.005); its error gets its own budget share",
    )
    g.add_argument(
        "--inflate",
        default=None,
        metavar="NAME=F,...",
        help="multiply input errors, e.g. parallax=1.1,pmra=1.05 (one number: every input)",
    )


class _Parser(argparse.ArgumentParser):
    """Usage errors in one line (the command, the option, what was wrong, where to look), status 2."""

    def error(self, message):
        self.exit(2, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


def _parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="perierr",
        description="Perihelion of a star passing the Sun, with uncertainties and an error budget.",
    )
    parser.add_argument("--version", action="version", version=f"perierr {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    demo = sub.add_parser("demo", help="run the whole job on the bundled (invented) demo survey")
    _add_analysis_options(demo)
    run = sub.add_parser("run", help="analyse one star from a TOML star file (or one row of a table)")
    run.add_argument("star_file", type=Path, nargs="+", metavar="STAR_FILE",
                     help="a TOML star file; several files give one report each and one --paper-table row each")
    _add_row_options(run)
    _add_analysis_options(run)
    screen = sub.add_parser("screen", help="nominal perihelion and linear errors for every row of a small table, "
                            "with each row's notes (catalogues: perierr catalogue)")  # fmt: skip
    screen.add_argument("table", type=Path, metavar="TABLE", help="ECSV/FITS/VOTable with catalogue columns")
    _add_plan_parser(sub)
    _add_catalogue_parser(sub)
    from .cli_targets import add_targets_parser  # here: it borrows this module's option helpers

    add_targets_parser(sub)
    return parser


def _add_row_options(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("one row of a table as the star (STAR_FILE is then a CSV, ECSV, FITS, VOTable or "
                             "Parquet table)")  # fmt: skip
    pick = g.add_mutually_exclusive_group()
    pick.add_argument("--row", type=int, default=None, metavar="N", help="the row number (0 is the first row)")
    pick.add_argument("--source-id", default=None, metavar="ID", help="the row with this source_id")
    g.add_argument("--columns", default=None, metavar="SPEC",
                   help="column mapping: a preset (archive, vizier), a TOML file, or field=column,...")  # fmt: skip


def _add_catalogue_parser(sub) -> None:
    c = sub.add_parser(
        "catalogue",
        help="screen every row of a catalogue, analyse the candidates fully; resumable, parallel",
        description="Stage 1 screens every row (straight line at the nominal inputs, linear sigmas, P(d_ph < D)); "
        "the rows passing --cut get the full analysis (model, prior, Monte Carlo, budget) with a seed of their "
        "own. Every input row is in the results once, with a status and a reason. Run the same command again "
        "to resume an interrupted run.",
    )
    c.add_argument("table", type=Path, metavar="TABLE", help="CSV, ECSV, FITS, VOTable or Parquet")
    c.add_argument("--out", type=Path, required=True, metavar="DIR", help="the run folder (results, parts)")
    c.add_argument("--columns", default=None, metavar="SPEC",
                   help="column mapping: a preset (archive, vizier), a TOML file ([columns] field = \"column\"), "
                   "or field=column,... (default: detected from the column names)")  # fmt: skip
    c.add_argument("--cut", default=None, metavar="EXPR",
                   help="which screened rows are analysed fully, e.g. 'distance_pc < 5 pc or p_within_1pc > 0.01' "
                   "(default 'distance_pc < 10 pc'; 'none': every row the screen computed)")  # fmt: skip
    c.add_argument("--screen-only", action="store_true", help="stage 1 only")
    c.add_argument("--samples", type=_count, default=10_000, metavar="N", help="Monte Carlo draws per star "
                   "(default 10000)")  # fmt: skip
    _add_common_options(
        c,
        within_help="distances for P(d_ph < D), with units (default '0.5pc,1pc,2pc,20000au,100000au'); the first "
        "ranks the most probable encounters",
        json_help="also write the run's summary (counts, top rows) as JSON",
    )
    c.add_argument("--focusing", action="store_true", help="add the gravitational focusing of the star's mass")
    _add_oort_radii(c.add_argument_group("what the encounter does (enc_* columns; impulses need a mass column; "
                                         "statistical predictions, not impact hazards)"))
    _add_prior_options(c)
    g = c.add_argument_group("how the run is spread")
    g.add_argument("--workers", type=_count, default=1, metavar="N", help="processes for stage 2 (default 1)")
    g.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="a running Dask scheduler for stage 2 (e.g. tcp://10.0.0.5:8786)")  # fmt: skip
    g.add_argument("--dask", action="store_true", help="start a local Dask cluster of --workers processes")
    g.add_argument("--chunk-rows", type=_count, default=100_000, metavar="N", help="rows read at a time")
    c.add_argument("--top", type=int, default=10, metavar="N", help="rows in each ranked list (default 10)")
    c.add_argument("--no-ecsv", action="store_true", help="write results.parquet only")


def _analysis_kwargs(args) -> dict:
    return dict(
        model=_model(args),
        n_samples=args.samples,
        seed=args.seed,
        levels=args.levels,
        thresholds=args.within,
        target_error=args.target_error,
        max_samples=args.max_samples,
        progress=_progress(args),
        oort_radii=args.oort_radii,
        comet_positions=args.comet or None,
        **_star_options(args),
    )


def _star_options(args) -> dict:
    """The options that say how a star is read into the model, shared by run, plan and the page's plan."""
    return dict(distance_prior=args.distance_prior, prior_method=args.prior_method,
                parallax_offset=args.parallax_offset, error_inflation=args.inflate, focusing=args.focusing)


def _read_star(path, args=None):
    """Read a star file, or one row of a table (``--row``, ``--source-id``); notes go to the report."""
    row = getattr(args, "row", None)
    source_id = getattr(args, "source_id", None)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        if row is None and source_id is None:
            if getattr(args, "columns", None) is not None:
                raise InputError("--columns", args.columns, "maps the columns of a table: give --row or --source-id")
            return read_star_file(path)
        from .catalogue.reader import read_row
        from .star import ObservedStar

        mapping = read_row(path, row=row, source_id=source_id, columns=args.columns)
        return ObservedStar.from_mapping(mapping, row=row, strict=False)


def _analyze(star, args):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)  # the report lists them
        return analyze(star, **_analysis_kwargs(args))


def _run_stars(args, out) -> None:
    """Several star files: one report each, one row each in the paper table (every file read before the work)."""
    for option in ("json", "figures", "page", "row", "source_id"):
        if getattr(args, option, None) is not None:
            flag = "--" + option.replace("_", "-")
            raise InputError(flag, str(getattr(args, option)), f"works with one star file; {len(args.star_file)} "
                             "were given (--paper-table takes several)")  # fmt: skip
    def in_file(path, work):
        try:
            return work()
        except InputError as exc:  # name the file among several
            raise InputError(f"{path}: {exc.field}", exc.value, exc.expected, exc.row) from None

    stars = [in_file(path, lambda path=path: _read_star(path, args)) for path in args.star_file]
    results = []
    for k, (path, star) in enumerate(zip(args.star_file, stars)):
        if k:
            print("\n" + "=" * 100 + "\n", file=out)
        print(f"[{k + 1} of {len(stars)}] {path}\n", file=out)
        result = in_file(path, lambda star=star: _analyze(star, args))
        print(format_analysis(result), file=out)
        results.append(result)
    _write_tables(results, args, out, f"\ntable of {len(results)} stars")


def _write_tables(results, args, out, what) -> None:
    """``--paper-table`` and ``--encounter-rows``, when given."""
    from .report.tables import write_table

    if args.paper_table is not None:
        write_table(results, args.paper_table, interval=args.interval)
        print(f"{what} written to {args.paper_table}", file=out)
    if args.encounter_rows is not None:
        write_table(results, args.encounter_rows, interval=args.interval, encounter=True)
        print(f"{what.replace('table', 'encounter rows')} written to {args.encounter_rows}", file=out)


def _run_star(star, args, out) -> None:
    result = _analyze(star, args)
    print(format_analysis(result), file=out)
    if args.json is not None:
        write_json(result.to_dict(), args.json)
        print(f"\nJSON written to {args.json}", file=out)
    _write_tables([result], args, out, "table")
    if args.figures is not None:
        from .report.figures import write_figures

        for path in write_figures(result, args.figures, seed=result.monte_carlo.samples.seed, option="--figures"):
            print(f"figure written to {path}", file=out)
    if args.page is not None:
        from .report.html import write_page

        write_page(result, args.page, plan=_page_plan(result, star, args))
        print(f"one-page report written to {args.page}", file=out)


def _page_plan(result, star, args):
    """The one-page report's plan: the what-if of halving the measured error that dominates d_ph.

    The planner starts from the star as read, with the run's options (model, prior, zero-point, error inflation,
    focusing), as the analysis did. None when there is nothing to plan against: no linear budget to say which
    error dominates, or no spread of d_ph for a measurement to narrow.
    """
    d = result.monte_carlo.summaries["distance_pc"]
    if result.budget is None or not d.quantile(0.95) > d.quantile(0.05):
        return None
    from .plan import plan
    from .plan.update import to_catalogue
    from .units import DEC, INDEX, OBSERVABLES

    shares = result.budget.share("distance_pc")
    measured = {k: v for k, v in shares.items() if k in OBSERVABLES and result.star.sigma[INDEX[k]] > 0}
    if not measured:  # e.g. a budget of the zero-point alone
        return None
    name = max(measured, key=measured.get)
    dec = float(result.star.mean[DEC])
    half = float(to_catalogue(name, result.star.sigma[INDEX[name]], dec=dec)) / 2
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return plan(star, model=_model(args), measure={name: half}, curves=False, budget=False,
                    n_whatif=min(args.samples, 20_000), seed=result.monte_carlo.samples.seed,
                    thresholds=args.within, futures=100, future_draws=1000, **_star_options(args))  # fmt: skip


def _screen(path, out) -> None:
    from .screen import iter_screen

    rows = []
    try:
        for row in iter_screen(path):
            rows.append(row)
    except KeyboardInterrupt:  # show what was screened, then stop as any interrupted command does
        print(f"Interrupted after {len(rows)} rows; these were screened:", file=out)
        _print_screen(rows, path, out)
        raise
    _print_screen(rows, path, out)


def _print_screen(rows, path, out) -> None:
    from .report.screen_text import format_screen

    print(format_screen(rows, Path(path).name), file=out)


def _add_plan_parser(sub) -> None:
    p = sub.add_parser("plan", help="what to re-observe next, and how precisely (what-if, goals, gain curves)")
    p.add_argument("star_file", type=Path, metavar="STAR_FILE")
    _add_row_options(p)
    p.add_argument(
        "--measure",
        action="append",
        default=[],
        metavar="INPUT=PREC",
        help="hypothetical new measurement, catalogue units (e.g. radial_velocity=0.1); repeatable",
    )
    p.add_argument(
        "--goal-width",
        action="append",
        default=[],
        metavar="OUTPUT=VALUE",
        help="goal: 90%% interval width at most VALUE, with its unit (e.g. d_ph='1500 au', t_ph='0.01 Myr')",
    )
    p.add_argument(
        "--goal-sigma",
        action="append",
        default=[],
        metavar="OUTPUT=VALUE",
        help="goal: standard deviation at most VALUE, with its unit (e.g. d_ph='500 au', v_ph='0.2 km/s')",
    )
    p.add_argument(
        "--goal-decide",
        action="append",
        default=[],
        metavar="D",
        help="goal: P(d_ph < D) below --alpha or above 1 - alpha (e.g. '20000 au')",
    )
    p.add_argument("--alpha", type=float, default=0.05, help="decisiveness level of --goal-decide (default 0.05)")
    p.add_argument(
        "--solve-for",
        type=_strings,
        default=None,
        metavar="INPUT,INPUT",
        help="inputs to solve the goals for (default: every input with an error)",
    )
    p.add_argument("--curves", action=argparse.BooleanOptionalAction, default=True, help="gain curves")
    p.add_argument(
        "--budget", action=argparse.BooleanOptionalAction, default=True, help="global (Monte Carlo Shapley) budget"
    )
    p.add_argument("--points", type=_count, default=20, metavar="N", help="precisions per gain curve (default 20)")
    p.add_argument("--curve-within", default=None, metavar="D",
                   help="threshold of the probability curve (default: the first --goal-decide, else 20000 au)")
    p.add_argument(
        "--samples", type=_count, default=20_000, metavar="N", help="common draws for curves and goals (default 20000)"
    )
    p.add_argument(
        "--whatif-samples",
        type=_count,
        default=100_000,
        metavar="N",
        help="draws for the side-by-side summaries (default 100000)",
    )
    _add_common_options(
        p, within_help="distances for P(d_ph < D) in the what-if summaries", json_help="also write the plan as JSON"
    )
    p.add_argument("--plot", type=Path, default=None, metavar="PATH",
                   help="save the gain curves: PATH ending in .png, .pdf or .svg")
    p.add_argument("--proposal", type=Path, default=None, metavar="PATH",
                   help="write a paragraph for a proposal (.txt or .md): today's answer and what --measure buys")
    p.add_argument("--proposal-figure", type=Path, default=None, metavar="PATH",
                   help="the d_ph distribution today and after --measure (.png or .pdf)")
    p.add_argument("--combine", type=_strings, default=None, metavar="INPUT,INPUT",
                   help="measure these inputs together: for each goal, the cheapest combination of new measurements")
    cost = p.add_mutually_exclusive_group()
    cost.add_argument("--cost", default=None, metavar="SPEC",
                      help="the cost of --combine's measurements, photon-limited: as in perierr targets (default: "
                           "effort relative to today's measurement)")
    cost.add_argument("--cost-table", type=Path, default=None, metavar="FILE",
                      help="the cost of --combine's measurements from a table of hours (as in perierr targets)")
    p.add_argument("--futures", type=_whole, default=200, metavar="K",
                   help="chance that the --measure values settle each --goal-decide: K future values drawn from "
                        "today's predictive distribution (default 200; 0 = off)")
    p.add_argument("--future-draws", type=_count, default=2000, metavar="N",
                   help="draws answering each future value (default 2000)")
    p.add_argument("--focusing", action="store_true", help="add the gravitational focusing of the star's mass")
    _add_prior_options(p)


def _close(fig) -> None:
    """Free a figure once written (a long-lived process running many commands would keep every one)."""
    import matplotlib.pyplot as plt

    plt.close(fig)


def _cost(args):
    """The cost model of ``--cost`` or ``--cost-table`` (None: the planner's relative effort)."""
    if getattr(args, "cost", None) is not None:
        from .cli_targets import parse_cost

        return parse_cost(args.cost)
    if getattr(args, "cost_table", None) is not None:
        from .plan.cost import TableCost

        try:
            return TableCost.read(args.cost_table)
        except InputError as exc:  # the option, then what the table said
            raise InputError("--cost-table", exc.value, f"{exc.field}: {exc.expected}", exc.row) from None
    return None


def _plan(args, out) -> None:
    from .plan import parse_goal, parse_measure, plan
    from .report.plan_text import format_plan

    star = _read_star(args.star_file, args)
    measure = [parse_measure(text, dec=float(star.mean[1])) for text in args.measure]
    goals = [parse_goal("width90", t) for t in args.goal_width] + [parse_goal("sigma", t) for t in args.goal_sigma]
    goals += [parse_goal("decide", t, alpha=args.alpha) for t in args.goal_decide]
    if args.solve_for is not None:
        from .plan.update import input_name

        try:  # checked with or without a goal
            args.solve_for = [input_name(name) for name in args.solve_for]
        except InputError as exc:
            raise InputError("--solve-for", exc.value, exc.expected) from None
    if args.curve_within is None:  # the probability curve answers the question asked, if one was
        args.curve_within = args.goal_decide[0] if args.goal_decide else "20000 au"
    result = plan(
        star,
        model=_model(args),
        measure=measure,
        goals=goals,
        solve_for=args.solve_for,
        curves=args.curves,
        budget=args.budget,
        n=args.samples,
        n_whatif=args.whatif_samples,
        seed=args.seed,
        thresholds=args.within,
        curve_threshold=args.curve_within,
        n_points=args.points,
        progress=_progress(args),
        futures=args.futures,
        future_draws=args.future_draws,
        combine=args.combine,
        cost=_cost(args),
        settle_alpha=args.alpha,
        **_star_options(args),
    )
    print(format_plan(result), file=out)
    if args.json is not None:
        write_json(result.to_dict(), args.json)
        print(f"\nJSON written to {args.json}", file=out)
    if args.proposal is not None:
        from .report.proposal import write_proposal

        write_proposal(result, args.proposal)
        print(f"proposal paragraph written to {args.proposal}", file=out)
    if args.proposal_figure is not None:
        from .report.proposal import proposal_figure

        _close(proposal_figure(result, args.proposal_figure))
        print(f"proposal figure written to {args.proposal_figure}", file=out)
    if args.plot is not None and result.curves is not None:
        from .report.plan_plot import plot_gain_curves

        _close(plot_gain_curves(result.curves, args.plot))
        print(f"Gain curves plotted to {args.plot}", file=out)


#: Exit statuses: 0 done; 2 bad input (a file, a field, an option); 3 the system refused (disk, permissions);
#: 4 not enough memory; 70 an internal error (a perierr bug: please report it); 130 interrupted (Ctrl-C),
#: the shell's convention (128 + SIGINT).
EXIT_INPUT, EXIT_SYSTEM, EXIT_MEMORY, EXIT_BUG, EXIT_INTERRUPTED = 2, 3, 4, 70, 130


def _prepare_outputs(args) -> None:
    """Check every output path before any work, and remove old results there (said on stderr)."""
    from .report.files import prepare_output

    star_files = getattr(args, "star_file", None)
    star_files = [star_files] if isinstance(star_files, Path) else list(star_files or [])
    inputs = star_files + ([args.table] if getattr(args, "table", None) is not None else [])
    outputs = [(o, getattr(args, o, None)) for o in ("json", "plot", "paper_table", "encounter_rows", "page",
                                                      "proposal", "proposal_figure")]
    if getattr(args, "figures", None) is not None:
        from .report.figures import figure_paths

        outputs += [("figures", p) for p in figure_paths(args.figures, option="--figures")]
    checked, refused = [], None
    for option, path in outputs:
        flag = "--" + option.replace("_", "-")
        if path is None:
            continue
        try:
            if any(Path(path).exists() and Path(i).exists() and os.path.samefile(path, i) for i in inputs):
                raise InputError(flag, str(path), "is the input file itself; give another file name")
            if option == "paper_table" and Path(path).suffix.lower() not in (".ecsv", ".csv", ".tex"):
                raise InputError(flag, str(path), "expected a file name ending in .ecsv, .csv or .tex")
            if option == "encounter_rows" and Path(path).suffix.lower() != ".tex":
                raise InputError(flag, str(path), "expected a file name ending in .tex (the ECSV and CSV of "
                                 "--paper-table carry the encounter's columns)")  # fmt: skip
            if option == "plot" and Path(path).suffix.lower() not in (".png", ".pdf", ".svg"):
                raise InputError(flag, str(path), "expected a file name ending in .png, .pdf or .svg")
            if option == "plot" and not getattr(args, "curves", True):
                raise InputError(flag, str(path), "draws the gain curves, which --no-curves turns off")
            if option in ("proposal", "proposal_figure") and not getattr(args, "measure", None):
                raise InputError(flag, str(path), "says what a measurement buys: give one with --measure INPUT=PREC")
            if option == "proposal" and Path(path).suffix.lower() not in (".txt", ".md"):
                raise InputError(flag, str(path), "expected a file name ending in .txt or .md")
            if option == "proposal_figure" and Path(path).suffix.lower() not in (".png", ".pdf"):
                raise InputError(flag, str(path), "expected a file name ending in .png or .pdf")
            if option == "page" and Path(path).suffix.lower() not in (".html", ".htm", ".pdf"):
                raise InputError(flag, str(path), "expected a file name ending in .html (.htm) or .pdf")
            if option == "page" and Path(path).suffix.lower() == ".pdf":
                from .report.html import find_browser

                if find_browser() is None:
                    raise InputError(flag, str(path), "a PDF needs Chromium (not found on PATH); give a .html "
                                     "file name for the self-contained page")  # fmt: skip
            prepare_output(path, option=flag, remove=False)
            checked.append((flag, path))
        except InputError as exc:
            refused = refused or exc
    # once the command line is read, an old result at every output path that can be written goes, refused or not:
    # a failed run never leaves yesterday's result looking like today's (README, "Outputs")
    for flag, path in checked:
        note = prepare_output(path, option=flag)
        if note:
            print(f"perierr: {note}", file=sys.stderr)
    if refused is not None:
        raise refused
    if getattr(args, "command", None) == "targets":  # the command's own refusals, before any work
        from . import cli_targets

        cli_targets.check_options(args)
    _check_plan_options(args)


def _check_plan_options(args) -> None:
    """The planner's options that need no star, checked before any work."""
    if getattr(args, "command", None) != "plan":
        return
    from .plan import parse_goal, parse_measure
    from .plan.update import input_name

    for text in args.measure:
        parse_measure(text)
    goals = [parse_goal("width90", t) for t in args.goal_width] + [parse_goal("sigma", t) for t in args.goal_sigma]
    goals += [parse_goal("decide", t, alpha=args.alpha) for t in args.goal_decide]
    for option, names in (("--solve-for", args.solve_for), ("--combine", args.combine)):
        for name in names or ():
            try:
                input_name(name)
            except InputError as exc:
                raise InputError(option, exc.value, exc.expected) from None
    if args.combine and not goals:
        raise InputError("--combine", ",".join(args.combine), "a goal to reach: --goal-width, --goal-sigma or "
                         "--goal-decide")  # fmt: skip
    for option in ("cost", "cost_table"):
        if getattr(args, option) is not None and not args.combine:
            raise InputError("--" + option.replace("_", "-"), str(getattr(args, option)), "prices the measurements "
                             "of --combine, which is not given")  # fmt: skip
    if args.cost is not None:
        from .cli_targets import parse_cost

        parse_cost(args.cost)
    if 0 < args.futures < 20:
        raise InputError("--futures", args.futures, "0 (off) or at least 20 possible outcomes")
    if args.future_draws < 100:
        raise InputError("--future-draws", args.future_draws, "at least 100 draws per outcome")
    if not 0 < args.alpha < 0.5:
        raise InputError("--alpha", args.alpha, "a level between 0 and 0.5 (settled: P below alpha or above 1 - "
                         "alpha)")  # fmt: skip


def _dispatch(args, out) -> int:
    if args.command == "demo":
        survey = demo_path("kestrel_survey.ecsv")
        print("Demo on invented data: the Kestrel survey and its stars are fictional.\n", file=out)
        _screen(survey, out)
        print("\nFull analysis of the closest pass:\n", file=out)
        _run_star(_read_star(demo_path("kestrel-4.toml")), args, out)
    elif args.command == "run":
        if len(args.star_file) == 1:
            _run_star(_read_star(args.star_file[0], args), args, out)
        else:
            _run_stars(args, out)
    elif args.command == "screen":
        _screen(args.table, out)
    elif args.command == "plan":
        _plan(args, out)
    elif args.command == "catalogue":
        return _catalogue(args, out)
    elif args.command == "targets":
        from .cli_targets import run_targets

        return run_targets(args, out)
    return 0


#: Exit status of a catalogue run that finished with rows it could not compute (bad values, stage-2
#: failures; rows without a radial velocity or with a parallax <= 0 do not count): every row is in the results.
EXIT_ROWS = 5


def _catalogue(args, out) -> int:
    from .catalogue.output import format_ranking
    from .catalogue.runner import DEFAULT_CUT, run_catalogue
    from .catalogue.treatment import TreatmentOptions

    if args.horizon is not None:
        raise InputError("--horizon", args.horizon, "is an option of perierr run; catalogue runs use the model's "
                         "default window")  # fmt: skip
    treatment = None
    if not args.screen_only:
        treatment = TreatmentOptions(
            model=args.model, n_samples=args.samples, thresholds=tuple(args.within),
            distance_prior=args.distance_prior, prior_method=args.prior_method,
            parallax_offset=args.parallax_offset, error_inflation=args.inflate, focusing=args.focusing,
            oort_radii=tuple(args.oort_radii),
        )  # fmt: skip
    from .progress import terminal_progress

    def progress(label):
        return terminal_progress(sys.stderr, quiet=args.quiet, label=label)

    run = run_catalogue(
        args.table, args.out, columns=args.columns, cut=DEFAULT_CUT if args.cut is None else args.cut,
        thresholds=args.within, treatment=treatment, seed=args.seed, chunk_rows=args.chunk_rows,
        workers=args.workers, scheduler=args.scheduler, dask=args.dask, ecsv=not args.no_ecsv, top=args.top,
        progress=progress,
    )  # fmt: skip
    print(format_ranking(run, input_name=Path(args.table).name), file=out)
    if args.json is not None:
        write_json({"counts": run.counts, "n_rows": run.n_rows, "settings": run.settings,
                    "closest": run.closest, "most_probable": run.most_probable}, args.json)  # fmt: skip
        print(f"\nJSON written to {args.json}", file=out)
    if run.n_problems:
        return _fail(f"{run.n_problems:,} rows could not be computed; their status and reason are in the results",
                     EXIT_ROWS)  # fmt: skip
    return 0


def _fail(message: str, status: int) -> int:
    print(f"perierr: {message}", file=sys.stderr)
    return status


def main(argv=None, out=None) -> int:
    """Entry point of the ``perierr`` command; returns the exit status.

    The one place where faults become messages: bad input, the file system,
    memory and Ctrl-C each end in one line on stderr and their own exit status
    (:data:`EXIT_INPUT`, :data:`EXIT_SYSTEM`, :data:`EXIT_MEMORY`,
    :data:`EXIT_INTERRUPTED`); results are written atomically, so a failed run
    leaves no partial or stale result behind.
    """
    out = out or sys.stdout
    # a usage error touches no file: until the options are read, no word is known to be an output path
    argv = _attach_negative_values(sys.argv[1:] if argv is None else list(argv))
    args = _parser().parse_args(argv)  # usage errors: argparse prints the usage and exits with status 2
    try:
        _prepare_outputs(args)
        _check_distances(args)
        return _dispatch(args, out)
    except PerierrError as exc:  # perierr's own refusals; a stray ValueError is a bug (the last resort below)
        return _fail(f"error: {exc}", EXIT_INPUT)
    except KeyboardInterrupt:
        if args.command == "catalogue":
            return _fail(f"interrupted (Ctrl-C); the finished parts are kept in {args.out}: run the same command "
                         "to resume", EXIT_INTERRUPTED)  # fmt: skip
        return _fail("interrupted (Ctrl-C); no result was written", EXIT_INTERRUPTED)
    except MemoryError:
        return _fail(
            "not enough memory for this run; use fewer draws (--samples) or close other programs", EXIT_MEMORY
        )
    except BrokenPipeError:  # e.g. `perierr demo | head`: stop quietly (Python docs, "Note on SIGPIPE")
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 1
    except OSError as exc:
        where = f": {exc.filename}" if exc.filename else ""
        return _fail(f"{exc.strerror or exc}{where}; nothing was written there", EXIT_SYSTEM)
    except Exception as exc:  # the last resort: a bug, said as such, never a traceback as the answer
        return _fail(
            f"internal error ({type(exc).__name__}: {exc}); this is a perierr bug: please report it with the "
            "command and the input", EXIT_BUG
        )
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
