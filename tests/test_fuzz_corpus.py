"""Fuzz corpus (issue 10, item 7): bad star files, odd stars and odd tables through the command line.

Every case is written into ``tmp_path`` by the test and run through ``perierr.cli.main`` as ``run``
(``--model straight_line`` and ``--model orbit``, 200 draws), ``plan`` (straight line, 500 draws, 3 points per
curve) and, for
tables, ``screen``. For every run the same checks hold (see :func:`check_outcome`):

* the exit status is one documented in ``perierr/cli.py`` (0 done, 2 bad input, 3 system, 4 memory,
  130 Ctrl-C) and the one the case expects; no traceback and no raw Python warning reaches the user;
* status 2 comes with a short message on stderr naming the field (or file, or option) and the value;
* status 0 prints a report with no ``nan``/``inf`` outside a line that calls it undefined or not finite,
  and a JSON file whose non-finite numbers are all labelled (``test_fuzz_api.unlabelled_nonfinite``);
* an old file at the ``--json`` path never survives a failed run (no stale result), except after a usage
  error, which touches no file;
* each run finishes within its stated time bound (measured with ``time.perf_counter``; a SIGALRM guard
  turns a hang into a failure).

Tables (ECSV, CSV and FITS written with astropy.table) go through ``screen``: every row is shown once,
a bad row names its field and value, a caution stays with its row. Injected faults (Ctrl-C, memory, a
full disk) end in their documented status with one message and no stale or partial result.

All stars are invented. Every case passes: the perierr bugs this corpus found (overflows at 1e+-300, old
results left after an option error, plan without run's cautions, draws faster than light in the orbit
model, a folder as a table) were fixed with issue 10. A case that fails because of a new bug is marked
``xfail(strict=True)`` with the reason, per mode, until it is fixed.
"""

from __future__ import annotations

import io
import json
import re
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table

from perierr.cli import main

from .test_fuzz_api import time_limit, unlabelled_nonfinite

SEED = "20610"

#: Exit statuses documented in perierr/cli.py.
DOCUMENTED = {0, 2, 3, 4, 130}

#: A benign invented star every case starts from (catalogue units: deg, mas, mas/yr, km/s).
BASE = {
    "name": "fuzz base (invented)",
    "ra": 120.5,
    "dec": -12.25,
    "parallax": 25.0,
    "pmra": 3.1,
    "pmdec": -4.2,
    "radial_velocity": -22.0,
    "ra_error": 0.03,
    "dec_error": 0.03,
    "parallax_error": 0.05,
    "pmra_error": 0.06,
    "pmdec_error": 0.05,
    "radial_velocity_error": 0.8,
    "pmra_pmdec_corr": -0.2,
}
ERRORS = ("ra_error", "dec_error", "parallax_error", "pmra_error", "pmdec_error", "radial_velocity_error")
ALL_ZERO_ERRORS = dict.fromkeys(ERRORS, 0.0)
ASTROMETRIC = ("ra", "dec", "parallax", "pmra", "pmdec")
CORRS = tuple(f"{a}_{b}_corr" for i, a in enumerate(ASTROMETRIC) for b in ASTROMETRIC[i + 1 :])


class Raw(str):
    """A TOML value written verbatim (``nan``, ``inf``, arrays, inline tables, ``true``)."""


class Drop:
    """Leave the field out of the file."""


def toml_value(value) -> str:
    if isinstance(value, Raw):
        return str(value)
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)  # a TOML basic string
    return repr(value)


def toml_text(fields: dict) -> str:
    return "".join(f"{k} = {toml_value(v)}\n" for k, v in fields.items() if v is not Drop)


def star_fields(**changes) -> dict:
    return {**BASE, **changes}


# ------------------------------------------------------------------------------------------------ cases


@dataclass(frozen=True)
class Expect:
    """What one mode of a case must do.

    codes: the allowed exit statuses; names: text stderr must contain when the status is 2 (the field,
    file or option, and the value); report: text the report must contain when the status is 0; absent:
    text it must not contain.
    """

    codes: frozenset
    names: tuple = ()
    report: tuple = ()
    absent: tuple = ()


def ok(*report, absent=()) -> Expect:
    return Expect(frozenset({0}), (), report, absent)


def refused(*names) -> Expect:
    return Expect(frozenset({2}), names)


def answer_or_refusal(*names) -> Expect:
    """Either a (labelled) answer or a clear refusal naming ``names``: the issue leaves the choice open."""
    return Expect(frozenset({0, 2}), names)


@dataclass(frozen=True)
class Case:
    """One corpus entry.

    star: the TOML fields (a dict), text or bytes of the star file, or a callable ``tmp_path -> path``;
    expect: mode -> Expect ("*" for every mode); extra: more CLI arguments ("{tmp}" is tmp_path);
    xfail: mode -> reason (a perierr bug); slow: modes that take a second or more.
    """

    id: str
    star: object
    expect: dict
    modes: tuple = ("run", "orbit", "plan")
    extra: tuple = ()
    seconds: float = 20.0
    xfail: dict = field(default_factory=dict)
    slow: tuple = ()

    def expectation(self, mode: str) -> Expect:
        return self.expect.get(mode, self.expect.get("*"))


def folder(tmp_path: Path) -> Path:
    (tmp_path / "a-folder.toml").mkdir()
    return tmp_path / "a-folder.toml"


def missing(tmp_path: Path) -> Path:
    return tmp_path / "no-such-star.toml"


TINY_RV_STAR = {
    "name": "tiny rv (invented)", "ra": 10.0, "dec": 5.0, "parallax": 1.0, "pmra": 0.0, "pmdec": 0.0,
    "radial_velocity": 4.6e-88, **ALL_ZERO_ERRORS,
}

CASES = [
    # ---------------------------------------------------------------- the cases of the issue's "Why"
    Case("all-errors-zero", star_fields(**ALL_ZERO_ERRORS),  # no spurious "skewed" caution either
         {"*": ok("held exact", absent=("skewed",)), "plan": refused("errors", "all zero")}),
    Case("only-position-errors", star_fields(**{**ALL_ZERO_ERRORS, "ra_error": 0.03, "dec_error": 0.02}),
         {"*": ok("held exact"), "plan": answer_or_refusal("error")}),
    Case("star-path-is-a-folder", folder, {"*": refused("star file", "a-folder.toml", "folder")}),
    Case("json-into-missing-folder", star_fields(), {"*": refused("--json", "no-such-folder")},
         extra=("--json", "{tmp}/no-such-folder/result.json")),
    Case("plot-into-missing-folder", star_fields(), {"*": refused("--plot", "no-such-folder")},
         modes=("plan",), extra=("--plot", "{tmp}/no-such-folder/curves.png")),
    Case("samples-absurd", star_fields(), {"*": Expect(frozenset({2, 4}), ("samples", "100000000000000"))},
         extra=("--samples", "100000000000000")),
    Case("tiny-rv-zero-errors", TINY_RV_STAR,  # a speed of 4.6e-88 km/s has no perihelion in any meaningful time
         {"*": refused("radial_velocity", "4.6e-88")},
         slow=("orbit",)),
    Case("not-utf8", b'name = "\xe9toile (invented)"\nra = 120.5\n\x80\x81\n',
         {"*": refused("star file", "not-utf8", "UTF-8")}),
    Case("unit-on-unitless-field", star_fields(pmra_pmdec_corr="0.3 mas"),
         {"*": refused("pmra_pmdec_corr", "0.3 mas", "no unit")}),
    Case("samples-negative", star_fields(), {"*": refused("--samples", "-5")}, extra=("--samples", "-5")),
    Case("no-motion", star_fields(pmra=0.0, pmdec=0.0, radial_velocity=0.0),
         {"*": refused("radial_velocity", "0.0", "does not move")}),
    Case("rv-faster-than-light", star_fields(radial_velocity=-400000.0),
         {"*": refused("radial_velocity", "-400000", "faster than light")}),
    Case("rv-m-per-s-slip", star_fields(radial_velocity=-31200.0), {"*": ok("-31200", "m/s")}),
    Case("parallax-1e6-mas", star_fields(parallax=1e6), {"*": refused("parallax", "1000000")}),
    Case("ra-400", star_fields(ra=400.0), {"*": refused("ra = 400")}),
    Case("ra-1e20", star_fields(ra=1e20), {"*": refused("ra = 1e+20")}),
    Case("parallax-1e-300", star_fields(parallax=1e-300),
         {"*": refused("parallax", "1e-300", "below any measurement")}),
    Case("parallax-1e-300-radial-only", star_fields(parallax=1e-300, pmra=0.0, pmdec=0.0),
         {"*": answer_or_refusal("parallax")}),
    Case("near-zero-motion", star_fields(pmra=1e-9, pmdec=-1e-9, radial_velocity=1e-9),
         {"*": answer_or_refusal("radial_velocity")}, slow=("orbit",)),
    Case("weak-parallax-small-n", star_fields(parallax=0.9, parallax_error=4.9),
         {"*": ok("biased distance"), "plan": answer_or_refusal("parallax", "4.9")}),
    # ---------------------------------------------------------------- non-finite numbers
    Case("parallax-nan-literal", star_fields(parallax=Raw("nan")), {"*": refused("parallax", "nan", "finite")}),
    Case("parallax-inf-literal", star_fields(parallax=Raw("inf")), {"*": refused("parallax", "inf", "finite")}),
    Case("rv-minus-inf-literal", star_fields(radial_velocity=Raw("-inf")), {"*": refused("radial_velocity", "-inf")}),
    Case("error-nan-literal", star_fields(pmdec_error=Raw("nan")), {"*": refused("pmdec_error", "nan")}),
    Case("parallax-nan-string", star_fields(parallax="nan mas"), {"*": refused("parallax", "nan")}),
    Case("rv-inf-string", star_fields(radial_velocity="inf km/s"), {"*": refused("radial_velocity", "inf")}),
    Case("corr-nan-literal", star_fields(pmra_pmdec_corr=Raw("nan")), {"*": refused("pmra_pmdec_corr", "nan")}),
    # ---------------------------------------------------------------- wrong types, empty values
    Case("parallax-boolean", star_fields(parallax=Raw("true")), {"*": refused("parallax", "True", "boolean")}),
    Case("corr-boolean", star_fields(pmra_pmdec_corr=Raw("false")), {"*": refused("pmra_pmdec_corr", "False")}),
    Case("parallax-empty-string", star_fields(parallax=""), {"*": refused("parallax", "missing")}),
    Case("rv-error-empty-string", star_fields(radial_velocity_error=""),
         {"*": refused("radial_velocity_error", "missing")}),
    Case("parallax-array", star_fields(parallax=Raw("[25.0, 26.0]")), {"*": refused("parallax", "25.0")}),
    Case("parallax-inline-table", star_fields(parallax=Raw('{ value = 25.0, unit = "mas" }')),
         {"*": refused("parallax", "value")}),
    Case("parallax-date", star_fields(parallax=Raw("2016-01-01")), {"*": refused("parallax", "2016")}),
    Case("parallax-missing", star_fields(parallax=Drop), {"*": refused("parallax", "missing")}),
    Case("integer-values", star_fields(ra=120, dec=-12, parallax=25, pmra=3, pmdec=-4, radial_velocity=-22),
         {"*": ok()}),
    # ---------------------------------------------------------------- errors and correlations
    Case("negative-error", star_fields(pmra_error=-0.1), {"*": refused("pmra_error", "-0.1")}),
    Case("negative-zero-error", star_fields(pmra_error=-0.0), {"*": ok("held exact")}),
    Case("corr-above-one", star_fields(pmra_pmdec_corr=1.5), {"*": refused("pmra_pmdec_corr", "1.5")}),
    Case("corr-just-below-minus-one", star_fields(parallax_pmra_corr=-1.0000001),
         {"*": refused("parallax_pmra_corr", "-1.0000001")}),
    Case("corr-exactly-one", star_fields(pmra_pmdec_corr=1.0), {"*": ok()}),
    Case("corr-not-psd", star_fields(parallax_pmra_corr=0.9, parallax_pmdec_corr=0.9, pmra_pmdec_corr=-0.9),
         {"*": refused("correlations", "eigenvalue")}),
    Case("corr-all-0.999", star_fields(**dict.fromkeys(CORRS, 0.999)), {"*": ok()}),
    Case("corr-near-minus-one", star_fields(pmra_pmdec_corr=-(1 - 1e-12)), {"*": ok()}),
    # ---------------------------------------------------------------- huge and tiny magnitudes
    Case("pm-1e300", star_fields(pmra=1e300), {"*": refused("pmra", "faster than light")}),
    Case("errors-1e-300", star_fields(**dict.fromkeys(ERRORS, 1e-300)),  # variances underflow to 0
         {"*": ok(), "plan": answer_or_refusal("error")}),
    Case("rv-error-1e300", star_fields(radial_velocity_error=1e300),
         {"*": answer_or_refusal("radial_velocity_error", "1e+300")}),
    Case("parallax-error-1e300", star_fields(parallax_error=1e300),
         {"*": answer_or_refusal("parallax_error", "1e+300")}),
    Case("pm-error-1e30", star_fields(pmra_error=1e30), {"*": answer_or_refusal("pmra_error", "1e+30")}),
    Case("pm-error-1e13", star_fields(pmdec_error=1.2e13), {"*": answer_or_refusal("pmdec_error", "1.2e+13")}),
    Case("overflowing-spread",
         {"name": "overflowing spread (invented)", "ra": 158.2, "dec": 0.0, "parallax": 6e-140, "pmra": 0.0,
          "pmdec": 0.0, "radial_velocity": -4.2e-71, "parallax_error": 0.0, "pmra_error": 0.3, "pmdec_error": 2e-180,
          "radial_velocity_error": 0.0},
         {"*": answer_or_refusal("parallax")}),
    Case("parallax-1e-3-mas", star_fields(parallax=1e-3, parallax_error=1e-5, pmra=1e-3, pmdec=1e-3),
         {"*": ok()}),
    Case("parallax-1e-300-error-1e-300", star_fields(parallax=1e-300, parallax_error=1e-300, pmra=0.0, pmdec=0.0),
         {"*": answer_or_refusal("parallax")}),
    Case("rv-900", star_fields(radial_velocity=900.0), {"*": ok()}),
    Case("rv-exactly-zero", star_fields(radial_velocity=0.0), {"*": ok()}),
    Case("rv-near-zero-with-error", star_fields(radial_velocity=0.01, radial_velocity_error=1.5),
         {"*": ok(absent=("100 times",))}),  # a valid measurement, not a unit slip
    Case("head-on", star_fields(pmra=0.0, pmdec=0.0),
         {"*": ok("passes through the Sun"), "orbit": ok()}),  # the Galaxy bends the orbit off the Sun
    # ---------------------------------------------------------------- quantity strings
    Case("parallax-in-arcsec", star_fields(parallax="0.025 arcsec", parallax_error="0.05 mas"), {"*": ok()}),
    Case("rv-in-m-per-s", star_fields(radial_velocity="-22000 m/s"), {"*": ok()}),
    Case("parallax-in-km-per-s", star_fields(parallax="25 km/s"), {"*": refused("parallax", "25 km/s", "mas")}),
    Case("rv-in-mas", star_fields(radial_velocity="-22 mas"), {"*": refused("radial_velocity", "-22 mas")}),
    Case("pm-in-deg", star_fields(pmra="3.1 deg"), {"*": refused("pmra", "3.1 deg")}),
    Case("parallax-unparsable", star_fields(parallax="twenty-five mas"),
         {"*": refused("parallax", "twenty-five mas")}),
    Case("mass-error-without-unit", star_fields(mass=0.7, mass_error="0.1"), {"*": refused("mass_error", "0.1")}),
    Case("mass-negative", star_fields(mass=-0.7), {"*": refused("mass", "-0.7")}),
    Case("ref-epoch-text", star_fields(ref_epoch="J2016"), {"*": refused("ref_epoch", "J2016")}),
    # ---------------------------------------------------------------- the file itself
    Case("duplicate-key", toml_text(star_fields()) + "parallax = 26.0\n", {"*": refused("star file", "TOML")}),
    Case("star-table", "[star]\n" + toml_text(star_fields()), {"*": ok()}),
    Case("unknown-key", star_fields(paralax_error=0.05), {"*": refused("paralax_error", "did you mean")}),
    Case("empty-file", "", {"*": refused("missing")}),
    Case("not-toml", "this is not a star file: {[}\n", {"*": refused("star file", "not-toml", "TOML")}),
    Case("missing-file", missing, {"*": refused("star file", "no-such-star.toml", "not found")}),
    Case("utf8-bom", "\ufeff" + toml_text(star_fields()), {"*": answer_or_refusal("star file", "utf8-bom")}),
    Case("non-ascii-name", star_fields(name="étoile ✶ 星 (invented)"), {"*": ok("étoile ✶ 星")}),
    # ---------------------------------------------------------------- positions
    Case("dec-91", star_fields(dec=91.0), {"*": refused("dec", "91")}),
    Case("pole-with-ra-error", star_fields(dec=90.0), {"*": refused("dec", "90", "pole")}),
    Case("near-pole", star_fields(dec=89.9999999), {"*": ok()}),
    Case("ra-360", star_fields(ra=360.0), {"*": refused("ra = 360")}),
    Case("ra-negative", star_fields(ra=-0.5), {"*": refused("ra = -0.5")}),
    Case("parallax-negative", star_fields(parallax=-0.5), {"*": refused("parallax", "-0.5")}),
    Case("parallax-zero", star_fields(parallax=0.0), {"*": refused("parallax", "0.0")}),
    # ---------------------------------------------------------------- options
    Case("samples-text", star_fields(), {"*": refused("--samples", "abc")}, extra=("--samples", "abc")),
    Case("within-garbage", star_fields(), {"*": refused("threshold", "garbage")}, extra=("--within", "garbage")),
    Case("within-empty", star_fields(), {"*": refused("--within", "','")}, extra=("--within", ",")),
    Case("seed-negative", star_fields(), {"*": refused("seed", "-1")}, extra=("--seed", "-1")),
    Case("levels-outside", star_fields(), {"*": refused("1.5")}, modes=("run",), extra=("--levels", "1.5")),
    Case("target-error-negative", star_fields(), {"*": refused("target_error", "-1")}, modes=("run",),
         extra=("--target-error", "-1")),
    Case("inflate-negative", star_fields(), {"*": refused("parallax", "-1")}, modes=("run",),
         extra=("--inflate", "parallax=-1")),
    Case("parallax-offset-nan", star_fields(), {"*": refused("parallax_offset", "nan")}, modes=("run",),
         extra=("--parallax-offset", "nan")),
    Case("distance-prior-garbage", star_fields(), {"*": refused("prior", "nonsense")}, modes=("run",),
         extra=("--distance-prior", "nonsense:L=-3")),
    Case("distance-prior-below-any-star", star_fields(), {"*": refused("distance prior", "0.0005", "below 0.001 pc")},
         modes=("run",), extra=("--distance-prior", "uniform:r_max=0.0005pc")),  # was a NaN-to-integer crash
    Case("measure-garbage", star_fields(), {"*": refused("measure", "garbage")}, modes=("plan",),
         extra=("--measure", "garbage")),
    Case("measure-negative", star_fields(), {"*": refused("radial_velocity", "-0.1")}, modes=("plan",),
         extra=("--measure", "radial_velocity=-0.1")),
    Case("measure-on-held-exact-input", star_fields(radial_velocity_error=0.0), {"*": answer_or_refusal("radial")},
         modes=("plan",), extra=("--measure", "radial_velocity=0.1")),
    Case("goal-garbage", star_fields(), {"*": refused("goal", "d_ph")}, modes=("plan",),
         extra=("--goal-width", "d_ph")),
    Case("points-zero", star_fields(), {"*": refused("--points", "0")}, modes=("plan",), extra=("--points", "0")),
    # found by the wide fuzz tier: a speed of 4e-208 km/s (its square underflows) with a parallax within its
    # noise skipped the slowest-speed check and gave NaN derivatives
    Case("speed-square-underflows", star_fields(pmra=0.0, pmdec=-8.757082497908126e-209,
                                                radial_velocity=-8.757082497908126e-209, parallax=1.0,
                                                parallax_error=1.0),
         {"*": refused("radial_velocity", "4.24e-208", "meaningful time")}),
]  # END OF CASES


def _params(cases):
    out = []
    for case in cases:
        for mode in case.modes:
            marks = []
            if mode in case.slow:
                marks.append(pytest.mark.slow)
            if mode in case.xfail:
                marks.append(pytest.mark.xfail(strict=True, reason=case.xfail[mode]))
            out.append(pytest.param(case, mode, id=f"{case.id}-{mode}", marks=marks))
    return out


# ------------------------------------------------------------------------------------------- the runner


@dataclass
class Outcome:
    code: int
    report: str
    err: str
    seconds: float
    warnings: list


#: Warning categories Python shows a user by default (DeprecationWarning and friends are hidden).
HIDDEN_WARNINGS = (DeprecationWarning, PendingDeprecationWarning, ImportWarning, ResourceWarning)


def run_cli(argv, capsys, seconds) -> Outcome:
    """Run ``perierr`` in-process with a time limit; argparse's exit (status 2) counts as a status."""
    capsys.readouterr()
    out = io.StringIO()
    start = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught, time_limit(seconds, " ".join(argv)):
        warnings.simplefilter("always")
        try:
            code = main(argv, out=out)
        except SystemExit as exc:  # argparse: usage and the message on stderr
            code = exc.code
        except Exception as exc:  # a traceback for the user: say what escaped
            pytest.fail(f"perierr {' '.join(argv)}: {type(exc).__name__} escaped main(): {exc}")
    elapsed = time.perf_counter() - start
    captured = capsys.readouterr()
    shown = [w for w in caught if not issubclass(w.category, HIDDEN_WARNINGS)]
    return Outcome(code, out.getvalue(), captured.err, elapsed, shown)


_NONFINITE_TOKEN = re.compile(r"(?<![\w.])[-+]?(nan|inf|infinity)(?![\w])", re.IGNORECASE)
#: A line may show nan/inf when it says so: undefined, not finite, or a refused input echoed in its reason.
_LABEL = re.compile(r"undefined|not (a )?finite|infinite|expected a finite|not computed", re.IGNORECASE)


def unlabelled_report_lines(report: str) -> list:
    """Lines of a text report that show nan/inf without calling it undefined or not finite."""
    return [line for line in report.splitlines() if _NONFINITE_TOKEN.search(line) and not _LABEL.search(line)]


def check_outcome(outcome: Outcome, expect: Expect, *, label: str, seconds: float) -> None:
    """The checks every corpus run must pass (module docstring)."""
    err = outcome.err
    assert outcome.code in DOCUMENTED, f"{label}: exit status {outcome.code!r} is not documented in perierr/cli.py"
    assert "Traceback" not in err, f"{label}: a traceback reached the user:\n{err}"
    assert not outcome.warnings, f"{label}: raw Python warnings reached the user: " + "; ".join(
        f"{w.category.__name__}: {w.message}" for w in outcome.warnings
    )
    assert outcome.seconds < seconds, f"{label}: took {outcome.seconds:.1f} s (bound {seconds} s)"
    assert outcome.code in expect.codes, (
        f"{label}: exit status {outcome.code}, expected one of {sorted(expect.codes)}; stderr: {err.strip()!r}"
    )
    if outcome.code == 2:
        message = err.strip()
        assert message, f"{label}: status 2 without a message"
        if message.startswith("perierr:"):  # perierr's own message: one short line (after a note at most)
            assert len(message.splitlines()) <= 2, f"{label}: a long message for one error:\n{message}"
        last = message.splitlines()[-1]  # the error itself (argparse puts its usage above it)
        for name in expect.names:
            assert name.lower() in last.lower(), f"{label}: the message does not name {name!r}: {last!r}"
    elif outcome.code == 0:
        assert outcome.report.strip(), f"{label}: status 0 but nothing printed"
        bad = unlabelled_report_lines(outcome.report)
        assert not bad, f"{label}: nan/inf printed without a label:\n" + "\n".join(bad)
        for text in expect.report:
            assert text in outcome.report, f"{label}: the report does not say {text!r}"
        for text in expect.absent:
            assert text not in outcome.report, f"{label}: the report says {text!r}"
        stray = [line for line in err.splitlines() if line.strip() and not line.startswith("perierr:")]
        assert not stray, f"{label}: status 0 but stderr has more than perierr's notes: {stray}"


def write_star(case: Case, tmp_path: Path) -> Path:
    if callable(case.star):
        return case.star(tmp_path)
    path = tmp_path / f"{case.id}.toml"
    if isinstance(case.star, bytes):
        path.write_bytes(case.star)
    elif isinstance(case.star, str):
        path.write_text(case.star, encoding="utf-8")
    else:
        path.write_text(toml_text(case.star), encoding="utf-8")
    return path


def argv_for(mode: str, star: Path, json_path: Path | None, extra) -> list:
    # the model is always named: "run" and "plan" are the straight line (plan with the orbit model takes
    # minutes for the odd stars here until issue 11's faster engine), "orbit" the orbit model (the default)
    if mode == "plan":
        argv = ["plan", str(star), "--samples", "500", "--whatif-samples", "500", "--points", "3", "--seed", SEED]
        argv += ["--model", "straight_line"]
    else:
        argv = ["run", str(star), "--samples", "200", "--seed", SEED]
        argv += ["--model", "orbit" if mode == "orbit" else "straight_line"]
    if json_path is not None:
        argv += ["--json", str(json_path)]
    return argv + list(extra)


STALE = '{"stale": "an old result that a failed run must not leave behind"}\n'


@pytest.mark.parametrize(("case", "mode"), _params(CASES))
def test_star_corpus(case, mode, tmp_path, capsys):
    # one bad file or odd star through one command: the checks of check_outcome, and no stale --json
    star = write_star(case, tmp_path)
    extra = [a.replace("{tmp}", str(tmp_path)) for a in case.extra]
    own_json = "--json" not in extra
    json_path = tmp_path / "result.json" if own_json else None
    if own_json:
        json_path.write_text(STALE)
    label = f"{case.id} ({mode})"
    outcome = run_cli(argv_for(mode, star, json_path, extra), capsys, case.seconds)
    check_outcome(outcome, case.expectation(mode), label=label, seconds=case.seconds)
    if not own_json:
        return
    if outcome.code == 0:
        document = json.loads(json_path.read_text(encoding="utf-8"))
        assert "stale" not in document, f"{label}: the old --json file was not replaced"
        bad = unlabelled_nonfinite(document)
        assert not bad, f"{label}: unlabelled non-finite numbers in the JSON: {bad}"
    elif "--help)" in outcome.err:
        # a usage error touches no file: until the options are read, no word is known to be an output path
        # (a forgotten path would make the next word, perhaps the star file itself, the target)
        assert json_path.read_text(encoding="utf-8") == STALE, f"{label}: a usage error touched the --json file"
    else:
        assert not json_path.exists(), f"{label}: a failed run (status {outcome.code}) left the old --json file"
    assert not list(tmp_path.glob(".result.json.*")), f"{label}: a temporary file was left behind"


# ----------------------------------------------------------------------------------------------- tables


def table_rows(*changes) -> list:
    """Invented rows: BASE with each row's changes, named 'row-K (invented)'."""
    return [{**BASE, **change, "name": f"row-{k} (invented)"} for k, change in enumerate(changes)]


def write_table(rows, path: Path, fmt: str, *, masked=()) -> Path:
    """Write rows with astropy.table; a field missing from a row is NaN; ``masked``: (column, row) pairs."""
    keys = list(dict.fromkeys(k for r in rows for k in r))
    table = Table(rows=[[r.get(k, np.nan) for k in keys] for r in rows], names=keys, masked=bool(masked))
    for column, k in masked:
        table[column].mask[k] = True
    table.write(path, format=fmt, overwrite=True)
    return path


OK_ROW = "ok"
QUIET_ROW = "ok, without a caution"


@dataclass(frozen=True)
class TableCase:
    """A table for ``perierr screen``: rows are written by the test; ``rows`` maps a row's name to "ok" or
    to the text its line must show (a bad row names the field and the value; a caution stays with its row).
    """

    id: str
    make: object
    expect: Expect
    rows: dict = field(default_factory=dict)
    seconds: float = 20.0
    xfail: str = ""


ODD_ROWS = table_rows(
    {},
    {"pmra_pmdec_corr": np.nan},
    {"parallax_error": np.nan},
    {"pmra": 0.0, "pmdec": 0.0},
    {"radial_velocity": -31200.0},
    {"ra": 400.0},
    {"radial_velocity": np.inf},
    dict(ALL_ZERO_ERRORS),
    {"radial_velocity": -400000.0},
    {"parallax": -0.5},
    {"radial_velocity": 1e-9, "pmra": 1e-9, "pmdec": 0.0},
    {"radial_velocity": 0.01, "radial_velocity_error": 1.5},
)
ODD_ROW_EXPECT = {
    "row-0 (invented)": QUIET_ROW,
    "row-1 (invented)": ("not computed", "pmra_pmdec_corr"),
    "row-2 (invented)": ("not computed", "parallax_error"),
    "row-3 (invented)": ("passes through the Sun",),
    "row-4 (invented)": ("-31200", "m/s"),
    "row-5 (invented)": ("not computed", "ra = 400"),
    "row-6 (invented)": ("not computed", "radial_velocity = inf"),
    "row-7 (invented)": OK_ROW,
    "row-8 (invented)": ("not computed", "radial_velocity", "faster than light"),
    "row-9 (invented)": ("not computed", "parallax = -0.5"),
    "row-10 (invented)": OK_ROW,
    "row-11 (invented)": QUIET_ROW,  # a valid near-zero radial velocity: no unit-slip caution
}


def _text_cell_csv(tmp_path: Path) -> Path:
    rows = table_rows({}, {}, {})
    table = Table(rows=[[r[k] for k in BASE] for r in rows], names=list(BASE))
    table["parallax"] = ["25.0", "twelve", "30.0"]  # one text cell in a numeric column
    table.write(tmp_path / "text-cell.csv", format="ascii.csv")
    return tmp_path / "text-cell.csv"


def _folder_table(tmp_path: Path) -> Path:
    (tmp_path / "a-folder.ecsv").mkdir()
    return tmp_path / "a-folder.ecsv"


def _garbage_table(tmp_path: Path) -> Path:
    (tmp_path / "garbage.ecsv").write_bytes(b"\x00\x01 not a table \xff\n")
    return tmp_path / "garbage.ecsv"


def _wrong_unit_table(tmp_path: Path) -> Path:
    table = Table(rows=[[r[k] for k in BASE] for r in table_rows({}, {})], names=list(BASE))
    table["parallax"].unit = "km/s"  # a unit of the wrong kind on a column
    table.write(tmp_path / "wrong-unit.ecsv", format="ascii.ecsv")
    return tmp_path / "wrong-unit.ecsv"


def _no_parallax_column(tmp_path: Path) -> Path:
    rows = [{k: v for k, v in r.items() if k != "parallax"} for r in table_rows({}, {})]
    return write_table(rows, tmp_path / "no-parallax.ecsv", "ascii.ecsv")


def _empty_table(tmp_path: Path) -> Path:
    table = Table(names=list(BASE), dtype=[str] + [float] * (len(BASE) - 1))
    table.write(tmp_path / "empty.ecsv", format="ascii.ecsv")
    return tmp_path / "empty.ecsv"


TABLE_CASES = [
    TableCase("odd-rows-ecsv", lambda p: write_table(ODD_ROWS, p / "odd.ecsv", "ascii.ecsv"), ok(), ODD_ROW_EXPECT),
    TableCase("odd-rows-csv", lambda p: write_table(ODD_ROWS, p / "odd.csv", "ascii.csv"), ok(), ODD_ROW_EXPECT),
    TableCase("odd-rows-fits", lambda p: write_table(ODD_ROWS, p / "odd.fits", "fits"), ok(), ODD_ROW_EXPECT),
    TableCase(
        "masked-corr-in-present-column",
        lambda p: write_table(table_rows({}, {}), p / "masked.ecsv", "ascii.ecsv", masked=[("pmra_pmdec_corr", 1)]),
        ok(),
        {"row-0 (invented)": OK_ROW, "row-1 (invented)": ("not computed", "pmra_pmdec_corr")},
    ),
    TableCase("text-cell-csv", _text_cell_csv, ok(),
              {"row-0 (invented)": OK_ROW, "row-1 (invented)": ("not computed", "parallax", "twelve"),
               "row-2 (invented)": OK_ROW}),
    TableCase("wrong-unit-column", _wrong_unit_table, ok(),
              {"row-0 (invented)": ("not computed", "parallax"), "row-1 (invented)": ("not computed", "parallax")}),
    TableCase("no-parallax-column", _no_parallax_column, ok(),
              {"row-0 (invented)": ("not computed", "parallax", "missing"),
               "row-1 (invented)": ("not computed", "parallax", "missing")}),
    TableCase("empty-table", _empty_table, answer_or_refusal("table", "empty.ecsv")),
    TableCase("table-is-a-folder", _folder_table, refused("table", "a-folder.ecsv")),
    TableCase("table-is-garbage", _garbage_table, refused("table", "garbage.ecsv")),
    TableCase("table-missing", lambda p: p / "no-such-table.ecsv", refused("table", "no-such-table.ecsv", "not found")),
]


def row_blocks(report: str, names) -> dict:
    """Each row's line of the screen report and the note lines that follow it, by row name."""
    lines = report.splitlines()
    blocks = {}
    for name in names:
        found = [k for k, line in enumerate(lines) if re.search(rf"(^|\s){re.escape(name)}(\s|$)", line)]
        assert len(found) == 1, f"row {name!r} is shown {len(found)} times, expected once"
        k = found[0]
        block = [lines[k]]
        for line in lines[k + 1 :]:
            if not line.strip().startswith("note"):
                break
            block.append(line)
        blocks[name] = "\n".join(block)
    return blocks


def _table_params():
    out = []
    for case in TABLE_CASES:
        marks = [pytest.mark.xfail(strict=True, reason=case.xfail)] if case.xfail else []
        out.append(pytest.param(case, id=case.id, marks=marks))
    return out


@pytest.mark.parametrize("case", _table_params())
def test_table_corpus(case, tmp_path, capsys):
    # one odd table through `perierr screen`: the checks of check_outcome, every row shown once, bad rows
    # name their field and value, cautions stay with their row (not on stderr)
    path = case.make(tmp_path)
    outcome = run_cli(["screen", str(path)], capsys, case.seconds)
    check_outcome(outcome, case.expect, label=f"{case.id} (screen)", seconds=case.seconds)
    if outcome.code != 0 or not case.rows:
        return
    blocks = row_blocks(outcome.report, case.rows)
    for name, want in case.rows.items():
        block = blocks[name]
        if want in (OK_ROW, QUIET_ROW):
            assert "not computed" not in block, f"{case.id}: row {name!r} should be computed:\n{block}"
            if want == QUIET_ROW:
                assert len(block.splitlines()) == 1, f"{case.id}: row {name!r} has a caution it should not:\n{block}"
        else:
            for text in want:
                assert text in block, f"{case.id}: row {name!r} does not show {text!r}:\n{block}"


# ------------------------------------------------------------------------------------------ faults


def _raise(exc):
    def fail(*args, **kwargs):
        raise exc

    return fail


FAULTS = [
    # (id, command, what to break, the exception, exit status, words of the message)
    ("ctrl-c-run", "run", "perierr.cli.analyze", KeyboardInterrupt(), 130, ("interrupted",)),
    ("ctrl-c-plan", "plan", "perierr.plan.plan", KeyboardInterrupt(), 130, ("interrupted",)),
    ("memory-run", "run", "perierr.cli.analyze", MemoryError(), 4, ("memory", "--samples")),
    ("memory-plan", "plan", "perierr.plan.plan", MemoryError(), 4, ("memory",)),
    ("disk-full-json", "run", "perierr.report.files.os.replace",
     OSError(28, "No space left on device", "result.json"), 3, ("No space left on device", "result.json")),
]


@pytest.mark.parametrize(("fault", "command", "target", "exc", "code", "words"), FAULTS, ids=[f[0] for f in FAULTS])
def test_faults_end_in_one_message_and_no_stale_result(fault, command, target, exc, code, words, tmp_path, capsys,
                                                        monkeypatch):
    # Ctrl-C, memory and disk faults: their documented status, one short message, no traceback, and neither
    # the old --json file nor a partial or temporary one left behind
    star = write_star(Case(fault, star_fields(), {}), tmp_path)
    json_path = tmp_path / "result.json"
    json_path.write_text(STALE)
    monkeypatch.setattr(target, _raise(exc))
    outcome = run_cli(argv_for(command, star, json_path, ()), capsys, 20.0)
    assert outcome.code == code, f"{fault}: status {outcome.code}, expected {code}; stderr {outcome.err!r}"
    assert "Traceback" not in outcome.err
    last = outcome.err.strip().splitlines()[-1]
    assert last.startswith("perierr:"), f"{fault}: the last line of stderr is not perierr's message: {last!r}"
    for word in words:
        assert word in last, f"{fault}: the message does not say {word!r}: {last!r}"
    assert not json_path.exists(), f"{fault}: the old --json file survived the fault"
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == [], f"{fault}: a temporary file was left"


def test_interrupted_screen_shows_the_rows_it_had(tmp_path, capsys, monkeypatch):
    # issue 10: an interrupted screen printed nothing of what it had; Ctrl-C at the fourth of six rows
    # must end with status 130 and show the three rows already screened
    import perierr.screen

    path = write_table(table_rows({}, {}, {}, {}, {}, {}), tmp_path / "six.ecsv", "ascii.ecsv")
    real, calls = perierr.screen.linearize, []

    def linearize_until_the_fourth_row(*args, **kwargs):
        calls.append(1)
        if len(calls) == 4:
            raise KeyboardInterrupt
        return real(*args, **kwargs)

    monkeypatch.setattr(perierr.screen, "linearize", linearize_until_the_fourth_row)
    outcome = run_cli(["screen", str(path)], capsys, 20.0)
    assert outcome.code == 130 and "Traceback" not in outcome.err
    for k in range(3):
        assert f"row-{k} (invented)" in outcome.report, f"row {k} was screened but is not shown"
