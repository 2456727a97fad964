"""``perierr targets``: from a list of stars to a ranked, costed target list.

::

    perierr targets a.toml b.toml [--table stars.ecsv [--columns SPEC]] --measure radial_velocity=0.3,0.1
        [--measure parallax=0.02] [--cost photon:radial_velocity=1@1@12@0.01 | --cost-table hours.csv]
        [--goal-decide '20000 au'] [--alpha 0.05] [--rank-by gain|settle] [--model orbit] [--samples 2000]
        [--futures 200] [--seed S] [--distance-prior SPEC ...] [--out list.ecsv] [--plot list.png] [--json F]

Star files are read as ``perierr run`` reads them (a bad file stops the command, naming it); every row of
``--table`` becomes a star, and a row that cannot be read keeps its rows in the list with status ``failed``.
Magnitudes come from ``phot_g_mean_mag`` (band G) or ``mag``/``mag_band``; in a table they are found by those
column names, or named in ``--columns`` pairs (``mag=Vmag,mag_band=band``); pairs naming one form choose it
(the other form's columns are then not picked by name). A row's bad or incomplete magnitude (a sentinel such as
99, a band beside a masked magnitude) is dropped with a reading caution: the star keeps its rows, priced where the
cost model needs no magnitude.

The parser is built by :func:`add_targets_parser` and the command run by :func:`run_targets`, which
:mod:`perierr.cli` calls; faults are :class:`~perierr.errors.InputError` (cli.main prints one line, status 2).
:func:`check_options` makes every refusal that needs no star data, naming the command-line option; cli.main
calls it before any old output file is removed, and :func:`run_targets` calls it again first, then reads the
stars, and only then removes old files at the output paths.
"""

from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

from .errors import InputError, PerierrWarning

__all__ = ["add_targets_parser", "check_options", "parse_cost", "read_table_stars", "run_targets"]

#: Table formats read by ``--table``: file name ending -> astropy format.
_TABLE_FORMATS = {
    ".ecsv": "ascii.ecsv", ".csv": "ascii.csv", ".fits": "fits", ".fit": "fits", ".fits.gz": "fits",
    ".vot": "votable", ".xml": "votable", ".votable": "votable", ".parquet": "parquet", ".pq": "parquet",
}  # fmt: skip

_COST_HELP = (
    "photon-limited cost: 'photon' (an illustrative radial-velocity reference) or "
    "'photon:INPUT=HOURS@PREC@MAG[@FLOOR],...[,overhead=H]': HOURS reach PREC (the input's catalogue unit) on a "
    "star of magnitude MAG, FLOOR the best precision at all; e.g. photon:radial_velocity=1@1@12@0.01"
)


def add_targets_parser(sub) -> argparse.ArgumentParser:
    """Add the ``targets`` command to the sub-parsers ``sub`` of the ``perierr`` parser; returns its parser."""
    from .cli import _count
    from .models import DEFAULT_MODEL, MODEL_NAMES

    p = sub.add_parser(
        "targets",
        help="a ranked, costed target list: which star to re-observe, in what, how precisely",
        description="For every star x --measure precision: the hours (cost model, star's magnitude), today's and "
        "the improved 90 % width of d_ph, the gain and gain per hour, and P(settle), the chance that the new "
        "data settle the decisive question. Every star keeps its rows (status and reason).",
    )
    p.add_argument("star_file", type=Path, nargs="*", metavar="STAR_FILE", help="TOML star files")
    p.add_argument("--table", type=Path, default=None, metavar="CATALOGUE",
                   help="a table of stars (ECSV, CSV, FITS, VOTable, Parquet): every row is a star")
    p.add_argument("--columns", default=None, metavar="SPEC",
                   help="--table's column mapping: a preset (archive, vizier), a TOML file, or field=column,... "
                        "(magnitudes: phot_g_mean_mag=COL or mag=COL,mag_error=COL,mag_band=COL as pairs)")
    p.add_argument("--measure", action="append", default=[], metavar="INPUT=PREC[,PREC...]",
                   help="candidate new measurements, catalogue units (e.g. radial_velocity=0.3,0.1); repeatable")
    p.add_argument("--goal-decide", default="20000 au", metavar="D",
                   help="the decisive question: does the star pass within D? (default '20000 au')")
    p.add_argument("--alpha", type=float, default=0.05, help="settled: P(d_ph < D) below alpha or above 1 - alpha "
                   "(default 0.05)")  # fmt: skip
    cost = p.add_mutually_exclusive_group()
    cost.add_argument("--cost", default=None, metavar="SPEC", help=_COST_HELP)
    cost.add_argument("--cost-table", type=Path, default=None, metavar="FILE",
                      help="hours from a CSV/ECSV table: columns input, precision, hours[, magnitude]; log-log "
                           "interpolation, nothing beyond its best precision")
    p.add_argument("--rank-by", choices=("gain", "settle"), default="gain",
                   help="gain: gain in the d_ph width per hour (default); settle: P(settle) uplift per hour")
    p.add_argument("--model", default=DEFAULT_MODEL, choices=MODEL_NAMES,
                   help=f"forward model (default {DEFAULT_MODEL})")
    p.add_argument("--samples", type=_count, default=2000, metavar="N",
                   help="draws answering each future value and today's answer (default 2000)")
    p.add_argument("--futures", type=_count, default=200, metavar="K",
                   help="future values of each measurement from today's predictive distribution (default 200)")
    p.add_argument("--seed", type=int, default=None, metavar="S", help="run seed (default: a fresh one, printed)")
    p.add_argument("--focusing", action="store_true", help="add the gravitational focusing of each star's mass")
    p.add_argument("--out", type=Path, default=None, metavar="PATH.ecsv", help="write the list as ECSV (units, "
                   "provenance)")  # fmt: skip
    p.add_argument("--plot", type=Path, default=None, metavar="PATH", help="draw gain and P(settle) against hours: "
                   "PATH ending in .png or .pdf")  # fmt: skip
    p.add_argument("--json", type=Path, default=None, metavar="PATH.json", help="also write the list as JSON")
    p.add_argument("--top", type=_count, default=None, metavar="N", help="rows shown on the terminal (default all)")
    p.add_argument("--quiet", action="store_true", help="no progress line on stderr (shown only on a terminal)")
    _add_prior_options(p)
    return p


def _add_prior_options(p) -> None:
    """The distance prior and calibration options, worded for what the target list does with them.

    The names and accepted values are those of ``perierr run``; the list only reweights Gaussian draws (its
    futures are conditioned on them), so ``--prior-method mcmc`` is accepted by the parser and refused by
    :func:`check_options` with that reason.
    """
    from .priors import METHODS, PRIOR_SYNTAX

    g = p.add_argument_group("distance prior and parallax calibration")
    g.add_argument("--distance-prior", default=None, metavar="SPEC",
                   help=f"prior on the distance instead of inverting the parallax: {PRIOR_SYNTAX}")
    g.add_argument("--prior-method", default="auto", choices=METHODS,
                   help="the target list reweights Gaussian draws by the prior (auto and reweight both do; the "
                        "column effective_size says how many draws count); mcmc is refused: run perierr plan "
                        "for an MCMC what-if of one star")
    g.add_argument("--parallax-offset", default=None, metavar="Z[,ERR]",
                   help="parallax zero-point in mas, subtracted from every star first (e.g. -0.017,0.005); its "
                        "error is added in quadrature to the parallax error")
    g.add_argument("--inflate", default=None, metavar="NAME=F,...",
                   help="multiply input errors, e.g. parallax=1.1,pmra=1.05 (one number: every input)")


#: Output options: (attribute, option, accepted endings).
_OUTPUTS = (("out", "--out", (".ecsv",)), ("plot", "--plot", (".png", ".pdf")), ("json", "--json", (".json",)))


def _rename(exc: InputError, option: str) -> InputError:
    """``exc`` naming the command-line option instead of an internal name."""
    return InputError(option, exc.value, exc.expected, exc.row)


def check_options(args) -> dict:
    """Make every refusal of ``perierr targets`` that needs no star data; touch no file.

    Checks the inputs given (star files or ``--table``, ``--columns`` only with ``--table`` and its text), the
    output paths (``--out`` .ecsv, ``--plot`` .png or .pdf, ``--json`` .json; their folder exists and can be
    written; not an input file), ``--measure`` (required, parsed, precisions > 0), ``--alpha`` (0 < alpha <
    0.5), ``--goal-decide``, ``--cost`` or ``--cost-table`` (parsed, the table read), ``--seed`` (>= 0),
    ``--samples`` (>= 100), ``--futures`` (>= 20), ``--distance-prior``, ``--prior-method`` (mcmc refused),
    ``--parallax-offset`` and ``--inflate``.

    Parameters
    ----------
    args : argparse.Namespace
        The parsed ``perierr targets`` options.

    Returns
    -------
    dict
        ``candidates`` ({input: [precision, ...]}), ``goal`` (the decisive Goal) and ``cost`` (a cost model or
        None), as :func:`perierr.plan.targets.rank_targets` takes them.

    Raises
    ------
    InputError
        Naming the command-line option (``--seed``, ``--alpha``, ``--cost-table``, ...), the value and what was
        expected.
    """
    import math
    import os

    from .plan.goals import decide_goal
    from .plan.targets import _candidates, parse_candidates
    from .report.files import prepare_output

    if not args.star_file and args.table is None:
        raise InputError("STAR_FILE", "none", "give star files, or a table with --table")
    if args.columns is not None and args.table is None:
        raise InputError("--columns", args.columns, "maps the columns of --table; give --table")
    inputs = list(args.star_file) + ([args.table] if args.table is not None else [])
    for attr, option, suffixes in _OUTPUTS:
        path = getattr(args, attr, None)
        if path is None:
            continue
        if Path(path).suffix.lower() not in suffixes:
            raise InputError(option, str(path), f"expected a file name ending in {' or '.join(suffixes)}")
        if any(Path(path).exists() and Path(i).exists() and os.path.samefile(path, i) for i in inputs):
            raise InputError(option, str(path), "is an input file; give another file name")
        prepare_output(path, option=option, remove=False)
    if args.table is not None:
        _table_format(args.table)
        _check_columns(args.columns)
    if not args.measure:
        raise InputError("--measure", "none", "give the candidate measurements, e.g. --measure radial_velocity=0.3,0.1")
    try:
        candidates = dict(_candidates(parse_candidates(args.measure)))
    except InputError as exc:
        raise (exc if exc.field == "--measure" else InputError("--measure", exc.value, exc.expected)) from None
    alpha = args.alpha
    if not (isinstance(alpha, (int, float)) and math.isfinite(alpha) and 0 < alpha < 0.5):
        raise InputError("--alpha", alpha, "expected a probability between 0 and 0.5 (exclusive), e.g. 0.05")
    try:
        goal = decide_goal(args.goal_decide, alpha)
    except InputError as exc:
        raise _rename(exc, "--goal-decide") from None
    cost = None
    if args.cost is not None:
        cost = parse_cost(args.cost)
    elif args.cost_table is not None:
        from .plan.cost import TableCost

        try:
            cost = TableCost.read(args.cost_table)
        except InputError as exc:  # name the option
            field = "--cost-table" if exc.field == "cost table" else f"--cost-table {exc.field}"
            raise InputError(field, exc.value, exc.expected, exc.row) from None
    if args.seed is not None and not args.seed >= 0:
        raise InputError("--seed", args.seed, "expected a whole number >= 0 (or no --seed for a fresh one)")
    if args.samples < 100:
        raise InputError("--samples", args.samples, "expected at least 100 draws")
    if args.futures < 20:
        raise InputError("--futures", args.futures, "expected at least 20 future values")
    _check_prior_options(args)
    return {"candidates": candidates, "goal": goal, "cost": cost}


def _check_prior_options(args) -> None:
    """--prior-method (mcmc refused), --distance-prior, --parallax-offset and --inflate, parsed."""
    from .calibration import parse_inflation, parse_offset
    from .plan.whatif import resolve_plan_prior

    if args.prior_method == "mcmc":
        raise InputError("--prior-method", "mcmc", "the target list reweights Gaussian draws by the prior (auto or "
                         "reweight); run perierr plan for an MCMC what-if of one star")  # fmt: skip
    for option, value, parse in (("--distance-prior", args.distance_prior, resolve_plan_prior),
                                 ("--parallax-offset", args.parallax_offset, parse_offset),
                                 ("--inflate", args.inflate, parse_inflation)):  # fmt: skip
        if value is None:
            continue
        try:
            parse(value)
        except InputError as exc:
            raise _rename(exc, option) from None


def _table_format(path) -> str:
    """The astropy format of --table from its name; refuses an unknown ending or a missing file."""
    path = Path(path)
    name = path.name.lower()
    ext = next((e for e in sorted(_TABLE_FORMATS, key=len, reverse=True) if name.endswith(e)), None)
    if ext is None:
        raise InputError("--table", str(path), f"unknown file type; expected a name ending in "
                         f"{', '.join(_TABLE_FORMATS)}")  # fmt: skip
    if not path.is_file():
        raise InputError("--table", str(path), "file not found (or not a file)")
    return _TABLE_FORMATS[ext]


def _check_columns(columns):
    """The --columns text parsed (without the table): (preset, mapping, how) or None, and the photometry pairs."""
    from .catalogue.columns import option_source
    from .star.fields import GAIA_MAGNITUDE, GENERIC_MAGNITUDE

    rest, phot = _split_photometry(columns)
    if set(phot) & set(GAIA_MAGNITUDE) and set(phot) & set(GENERIC_MAGNITUDE):
        raise InputError("--columns", ",".join(f"{k}={v}" for k, v in phot.items()), "name either "
                         "phot_g_mean_mag (and its error) or mag (with mag_error, mag_band), not both")  # fmt: skip
    for name, column in phot.items():
        if not column:
            raise InputError("--columns", f"{name}=", "expected field=column, e.g. mag=Vmag")
    source = None
    if rest is not None:
        try:
            source = option_source(rest)
        except InputError as exc:  # name the option
            field = "--columns" if exc.field == "columns" else f"--columns {exc.field}"
            raise InputError(field, exc.value, exc.expected, exc.row) from None
    return source, phot


def _remove_old_outputs(args) -> None:
    """Remove old files at the output paths (said on stderr); called once nothing more can be refused."""
    from .report.files import prepare_output

    for attr, option, _ in _OUTPUTS:
        path = getattr(args, attr, None)
        if path is not None:
            note = prepare_output(path, option=option)
            if note:
                print(f"perierr: {note}", file=sys.stderr)


def parse_cost(spec: str):
    """``photon`` or ``photon:INPUT=HOURS@PREC@MAG[@FLOOR],...[,overhead=H]`` -> PhotonLimitedCost."""
    from .plan.cost import PhotonLimitedCost, Reference
    from .plan.update import input_name

    text = str(spec).strip()
    kind, _, body = text.partition(":")
    if kind.strip().lower() != "photon":
        raise InputError("--cost", spec, "expected 'photon' or 'photon:INPUT=HOURS@PREC@MAG[@FLOOR],...' (a table "
                         "of hours: --cost-table)")  # fmt: skip
    if not body.strip():
        return PhotonLimitedCost()
    refs, overhead, seen_overhead = {}, 0.0, False
    for entry in (e.strip() for e in body.split(",")):
        name, sep, value = entry.partition("=")
        if not sep:
            raise InputError("--cost", entry, "expected INPUT=HOURS@PREC@MAG[@FLOOR] or overhead=H")
        if name.strip() == "overhead":
            if seen_overhead:
                raise InputError("--cost", entry, "overhead given twice; expected it once")
            seen_overhead = True
            overhead = _number("--cost overhead", value)
            if not overhead >= 0:
                raise InputError("--cost overhead", value, "expected hours >= 0")
            continue
        try:
            key = input_name(name)
        except InputError as exc:
            raise InputError("--cost", entry, exc.expected) from None
        if key in refs:
            raise InputError("--cost", entry, f"{key} given twice; expected one INPUT=HOURS@PREC@MAG[@FLOOR] entry "
                             "per input")  # fmt: skip
        parts = value.split("@")
        if len(parts) not in (3, 4):
            raise InputError("--cost", entry, "expected INPUT=HOURS@PREC@MAG[@FLOOR], e.g. radial_velocity=1@1@12@0.01")
        hours, sigma, mag = (_number(f"--cost {key}", x) for x in parts[:3])
        floor = _number(f"--cost {key}", parts[3]) if len(parts) == 4 else 0.0
        try:
            refs[key] = Reference(sigma=sigma, magnitude=mag, hours=hours, floor=floor)
        except InputError:
            raise InputError("--cost", entry, "expected HOURS > 0, PREC > 0, a finite MAG and FLOOR >= 0") from None
    if not refs:
        raise InputError("--cost", spec, "expected at least one INPUT=HOURS@PREC@MAG entry")
    return PhotonLimitedCost(refs, overhead)


def _number(field, text) -> float:
    import math

    try:
        x = float(str(text).strip())
    except ValueError:
        raise InputError(field, text, "expected a number") from None
    if not math.isfinite(x):
        raise InputError(field, text, "expected a finite number")
    return x


def _split_photometry(columns):
    """--columns text -> (the rest for the catalogue column map or None, {photometry field: column})."""
    from .star.fields import PHOTOMETRY

    if columns is None or "=" not in str(columns):
        return columns, {}
    rest, phot = [], {}
    for pair in (x.strip() for x in str(columns).split(",")):
        name, _, column = pair.partition("=")
        if name.strip() in PHOTOMETRY:
            phot[name.strip()] = column.strip()
        elif pair:
            rest.append(pair)
    return (",".join(rest) or None), phot


def read_table_stars(path, columns=None) -> list:
    """Every row of a table as an ObservedStar, or an UnreadStar holding the reason it could not be read.

    Parameters
    ----------
    path : str or Path
        ECSV, CSV, FITS, VOTable or Parquet (read whole by astropy: a target list is small).
    columns : str, optional
        As ``--columns`` (:func:`perierr.catalogue.columns.option_source`); photometry fields may be named as
        ``field=column`` pairs, and are otherwise found under their own names (any case).

    Raises
    ------
    InputError
        For a file that cannot be read or a column choice that does not fit the table (field ``--table`` or
        ``columns``); a bad row does not raise.
    """
    import numpy as np
    from astropy.table import Table

    from .catalogue.columns import column_map
    from .plan.targets import UnreadStar
    from .star import MASKED, ObservedStar
    from .star.fields import CORRELATIONS, GAIA_MAGNITUDE, GENERIC_MAGNITUDE, PHOTOMETRY

    path = Path(path)
    fmt = _table_format(path)
    source, phot = _check_columns(columns)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            if fmt == "ascii.csv" and path.read_bytes()[:7] == b"# %ECSV":
                fmt = "ascii.ecsv"
            table = Table.read(path, format=fmt)
    except Exception as exc:  # astropy's readers raise many kinds for a damaged file
        if isinstance(exc, MemoryError):
            raise
        text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InputError("--table", str(path), f"cannot be read as {fmt} ({text[:200]})") from None
    try:
        if source is None:
            cmap = column_map(table.colnames)
        else:
            preset, mapping, how = source
            cmap = column_map(table.colnames, preset=preset, mapping=mapping, source=how)
    except InputError as exc:  # name the option
        field = "--columns" if exc.field == "columns" else f"--columns {exc.field}"
        raise InputError(field, exc.value, exc.expected, exc.row) from None
    lower = {c.lower(): c for c in table.colnames}
    # pairs naming one form of magnitude (mag=Vmag) choose it: the other form's columns are not picked by name
    named = [form for form in (GAIA_MAGNITUDE, GENERIC_MAGNITUDE) if set(phot) & set(form)]
    for f in PHOTOMETRY:
        if f in phot:
            if phot[f] not in table.colnames:
                raise InputError("--columns", f"{f}={phot[f]}", f"the table has no column {phot[f]!r}")
        elif f.lower() in lower and (not named or any(f in form for form in named)):
            phot[f] = lower[f.lower()]
    fields = {**dict(cmap.fields), **phot}
    out = []
    for i, row in enumerate(table):
        data = {}
        for f, col in fields.items():
            value = row[col]
            if np.ma.is_masked(value) or (isinstance(value, float) and np.isnan(value)):
                if f in CORRELATIONS:
                    data[f] = MASKED
                continue
            if isinstance(value, bytes):
                value = value.decode("utf-8", "replace")
            unit = getattr(table[col], "unit", None)
            if unit is not None and np.ndim(value) == 0 and not isinstance(value, str) and f not in ("name",
                                                                                                      "source_id"):
                import astropy.units as u

                value = u.Quantity(value, unit)
            elif isinstance(value, np.generic):
                value = value.item()
            data[f] = value
        label = str(data.get("name", data.get("source_id", f"row {i}")))
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", PerierrWarning)
                out.append(ObservedStar.from_mapping(data, row=i, strict=False))
        except InputError as exc:
            sid = data.get("source_id")
            out.append(UnreadStar(label, f"not read ({exc})", None if sid is None else str(sid)))
    if not out:
        raise InputError("--table", str(path), "has no rows; expected one row per star")
    return out


def _read_files(paths) -> list:
    from .star import read_star_file

    stars = []
    for path in paths:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", PerierrWarning)
                stars.append(read_star_file(path))
        except InputError as exc:  # name the file among several
            raise InputError(f"{path}: {exc.field}", exc.value, exc.expected, exc.row) from None
    return stars


def run_targets(args, out=None) -> int:
    """Run ``perierr targets`` with parsed ``args``, printing to ``out``; returns the exit status (0)."""
    from .plan.targets import rank_targets
    from .progress import terminal_progress
    from .report.targets_text import format_targets, write_target_table

    out = out or sys.stdout
    checked = check_options(args)  # every refusal without the star data; no file touched
    candidates, goal, cost = checked["candidates"], checked["goal"], checked["cost"]
    stars = _read_files(args.star_file)  # the refusals that need the data (a bad star file, table or column)
    if args.table is not None:
        stars += read_table_stars(args.table, args.columns)
    _remove_old_outputs(args)  # nothing more can be refused: old results go before the work
    progress = terminal_progress(sys.stderr, quiet=args.quiet, label="stars")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        result = rank_targets(
            stars, candidates, cost, goal=goal, model=args.model, n=args.samples, futures=args.futures,
            seed=args.seed, distance_prior=args.distance_prior, parallax_offset=args.parallax_offset,
            error_inflation=args.inflate, focusing=args.focusing, rank_by=args.rank_by, progress=progress,
        )  # fmt: skip
    print(format_targets(result, top=args.top), file=out)
    if args.out is not None:
        write_target_table(result, args.out)
        print(f"\ntarget list written to {args.out}", file=out)
    if args.json is not None:
        from .report.jsonout import write_json

        write_json(result.to_dict(), args.json)
        print(f"JSON written to {args.json}", file=out)
    if args.plot is not None:
        import matplotlib.pyplot as plt

        from .report.targets_plot import plot_targets

        plt.close(plot_targets(result, args.plot))  # written: free it
        print(f"figure written to {args.plot}", file=out)
    return 0
