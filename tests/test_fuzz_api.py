"""Hypothesis fuzzing of the API (issue 10, item 7): ObservedStar.from_values and analyze.

Over wide ranges of invented inputs (around 0, 1e-300 and 1e300, negative errors, correlations near +-1,
non-finite numbers, booleans, unit strings) the only exception perierr may raise is ``InputError``, no
RuntimeWarning may reach the user, each analysis ends within 20 s, and every number in
``Analysis.to_dict()`` is finite or carries a label that explains it: a ``note`` of the summary it belongs
to, or a warning or note of the result that calls that output undefined or not finite.
:func:`unlabelled_nonfinite` is the walker; the CLI corpus (``test_fuzz_corpus.py``) uses it on the JSON.

Two tiers (see MODERATE and WIDE below): magnitudes within 1e-30 .. 1e30, and 1e-300 .. 1e300; both
must pass. Hypothesis runs derandomized (the same examples every run); analyze runs with a fixed seed.
"""

from __future__ import annotations

import contextlib
import math
import signal
import time
import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, Phase, assume, event, given, settings
from hypothesis import strategies as st

from perierr import InputError, ObservedStar, analyze

# --------------------------------------------------------------------------------------------- the walker

#: Words with which a label says that a number is not a finite number, and why.
LABEL_WORDS = ("undefined", "not finite", "not a finite", "infinite")

#: How the reports name each output (JSON key, symbol, word).
OUTPUT_NAMES = {
    "time_myr": ("time_myr", "t_ph", "time"),
    "distance_pc": ("distance_pc", "d_ph", "distance"),
    "distance_au": ("distance_au", "d_ph", "distance"),
    "speed_kms": ("speed_kms", "v_ph", "speed"),
}

#: Strict JSON (perierr.report.jsonout) writes non-finite floats as these strings.
NONFINITE_TEXT = ("nan", "inf", "-inf", "infinity", "-infinity")


def _is_nonfinite(value) -> bool:
    if isinstance(value, (bool, np.bool_)):
        return False
    if isinstance(value, (float, np.floating)):
        return not math.isfinite(float(value))
    if isinstance(value, str):
        return value.strip().lower() in NONFINITE_TEXT
    return False


def nonfinite_paths(document, path=()):
    """Every (path, value) in a nested dict/list whose value is NaN or infinite (or their JSON strings)."""
    if isinstance(document, dict):
        for key, value in document.items():
            yield from nonfinite_paths(value, path + (str(key),))
    elif isinstance(document, (list, tuple, np.ndarray)):
        for k, value in enumerate(document):
            yield from nonfinite_paths(value, path + (str(k),))
    elif _is_nonfinite(document):
        yield path, document


def _says_not_finite(text) -> bool:
    return isinstance(text, str) and any(word in text.lower() for word in LABEL_WORDS)


def _labels(document) -> list:
    """The document's warnings, notes and cautions that call something undefined or not finite."""
    texts = []
    for key in ("warnings", "notes", "caution", "cautions"):
        value = document.get(key) if isinstance(document, dict) else None
        texts += [value] if isinstance(value, str) else list(value or [])
    return [t for t in texts if _says_not_finite(t)]


def _noted_on_the_way(document, path) -> bool:
    """A dict on the way from the root to the value carries a note that says it is not finite."""
    node = document
    for key in path[:-1]:
        node = node[int(key)] if isinstance(node, (list, tuple)) else node[key]
        if isinstance(node, dict) and any(_says_not_finite(node.get(k)) for k in ("note", "reason", "caution")):
            return True
    return False


def unlabelled_nonfinite(document) -> list:
    """Paths (``"a.b.c = nan"``) of non-finite numbers that nothing in the document explains.

    A non-finite number is labelled when a dict on its path has a ``note`` (or ``reason``) that calls it
    undefined, infinite or not finite, or when a warning/note of the document does so and names the output
    the number belongs to (``distance_pc``, ``d_ph`` or "distance"; see :data:`OUTPUT_NAMES`).
    """
    labels = [t.lower() for t in _labels(document)]
    out = []
    for path, value in nonfinite_paths(document):
        if _noted_on_the_way(document, path):
            continue
        names = [n for key in path for n in OUTPUT_NAMES.get(key, ())]
        if any(n in text for n in names for text in labels):
            continue
        shown = repr(value) if isinstance(value, str) else repr(float(value))
        out.append(f"{'.'.join(path)} = {shown}")
    return out


def test_walker_reports_unlabelled_and_accepts_labelled_nonfinite_numbers():
    # the helper itself: a bare NaN is reported with its path; a note on the way, or a warning naming the
    # output as undefined, labels it; a JSON "inf" string counts as non-finite
    doc = {"monte_carlo": {"distance_pc": {"std": float("nan")}, "time_myr": {"mean": "inf"}}, "warnings": []}
    assert unlabelled_nonfinite(doc) == ["monte_carlo.distance_pc.std = nan", "monte_carlo.time_myr.mean = 'inf'"]
    doc["monte_carlo"]["distance_pc"]["note"] = "3 of 200 draws are infinite or undefined"
    assert unlabelled_nonfinite(doc) == ["monte_carlo.time_myr.mean = 'inf'"]
    doc["warnings"].append("the mean of t_ph is not finite: some draws never reach perihelion")
    assert unlabelled_nonfinite(doc) == []
    # an unrelated warning (no 'undefined' / 'not finite') labels nothing
    other = {"budget": {"speed_kms": {"ra": np.float64("nan")}}, "warnings": ["speed: Monte Carlo errors are large"]}
    assert unlabelled_nonfinite(other) == ["budget.speed_kms.ra = nan"]


# ------------------------------------------------------------------------------------------ time limits


class Overran(BaseException):
    """Raised by :func:`time_limit`; a BaseException so that no ``except Exception`` in perierr hides it."""


@contextlib.contextmanager
def time_limit(seconds: float, what: str):
    """Interrupt the block after ``seconds`` (SIGALRM, main thread, POSIX): a hang fails instead of stalling."""

    def _alarm(signum, frame):
        raise Overran(f"{what} ran over {seconds} s")

    previous = signal.signal(signal.SIGALRM, _alarm)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)


# ------------------------------------------------------------------------------------------ strategies

OBSERVABLES = ("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity")
ERROR_FIELDS = tuple(f"{name}_error" for name in OBSERVABLES)
ASTROMETRIC = OBSERVABLES[:5]
CORR_FIELDS = tuple(f"{a}_{b}_corr" for i, a in enumerate(ASTROMETRIC) for b in ASTROMETRIC[i + 1 :])

#: Numbers where arithmetic breaks: zeros, the smallest subnormal, 1e+-300, non-finite values.
EDGES = (0.0, -0.0, 5e-324, 1e-300, -1e-300, 1e-150, 1e-30, 1e-9, -1e-9, 1.0, -1.0, 1e9, 1e30, 1e150, 1e300,
         -1e300, math.nan, math.inf, -math.inf)


def magnitude(lo_exp: float, hi_exp: float, *, signed: bool):
    """+-10**U(lo_exp, hi_exp), and an exact zero about one time in four."""
    size = st.floats(lo_exp, hi_exp).map(lambda e: 10.0**e)
    if signed:
        size = st.tuples(size, st.sampled_from((-1.0, 1.0))).map(lambda t: t[0] * t[1])
    return st.one_of(size, size, size, st.just(0.0))


def any_number(exponent=300):
    """Edges, floats from 10**-exponent to 10**exponent of either sign, non-finite values and integers."""
    edges = [x for x in EDGES if not math.isfinite(x) or x == 0 or 10.0**-exponent <= abs(x) <= 10.0**exponent]
    return st.one_of(st.sampled_from(edges), magnitude(-exponent, exponent, signed=True),
                     st.sampled_from((math.nan, math.inf, -math.inf)), st.integers(-10**12, 10**12))


def any_value(exponent=300):
    """What a user might pass for a field: numbers, booleans, None, unit strings right and wrong."""
    texts = st.sampled_from(["12 mas", "0.02 arcsec", "-30 km/s", "-30000 m/s", "3 deg", "4 mas/yr", "nan mas",
                             "inf km/s", "", "  ", "abc", "1e400 mas", "0.3", "-0.5 mas", "1 Msun"])
    return st.one_of(any_number(exponent), any_number(exponent), st.booleans(), st.none(), texts)


def correlation():
    """Correlations near and at +-1, a little beyond, and anywhere between."""
    return st.one_of(st.sampled_from((1.0, -1.0, 1 - 1e-12, -(1 - 1e-12), 0.999999, -0.999999, 1.0000001, 0.0)),
                     st.floats(-1.0, 1.0))


FIELDS = OBSERVABLES + ERROR_FIELDS + ("mass", "mass_error") + CORR_FIELDS


@st.composite
def star_fields(draw, exponent=300, error_exponent=None):
    """Fields over wide ranges (10**-exponent to 10**exponent, beyond physics), mostly valid enough to analyse.

    Half the stars lie in the ranges a catalogue holds; the others anywhere in the range, with errors up to
    10**error_exponent (default: exponent).
    """
    plausible = draw(st.booleans())
    e = exponent
    e_err = exponent if error_exponent is None else error_exponent
    kwargs = {
        "ra": draw(st.one_of(st.floats(0.0, 359.999999), st.sampled_from((0.0, 1e-300, 359.99999999)))),
        "dec": draw(st.one_of(st.floats(-90.0, 90.0), st.sampled_from((90.0, -90.0, 89.9999999, 0.0)))),
        "parallax": draw(st.floats(0.05, 800.0) if plausible else st.one_of(
            st.floats(-e, 6).map(lambda x: 10.0**x), magnitude(-e, 6, signed=True))),
        "pmra": draw(magnitude(-3, 4, signed=True) if plausible else magnitude(-e, e, signed=True)),
        "pmdec": draw(magnitude(-3, 4, signed=True) if plausible else magnitude(-e, e, signed=True)),
        "radial_velocity": draw(magnitude(-2, 3, signed=True) if plausible else magnitude(-e, 6, signed=True)),
    }
    for name in ERROR_FIELDS:
        if name in ("ra_error", "dec_error") and draw(st.booleans()):
            continue  # optional: held exact
        kwargs[name] = draw(magnitude(-3, 1, signed=False) if plausible else magnitude(-e, e_err, signed=False))
    for name in draw(st.lists(st.sampled_from(CORR_FIELDS), max_size=3, unique=True)):
        kwargs[name] = draw(correlation())
    return kwargs


@st.composite
def raw_fields(draw, exponent=300):
    """A star of :func:`star_fields`, then up to three fields (or correlations) set to anything at all or left out."""
    kwargs = draw(star_fields(exponent))
    for name in draw(st.lists(st.sampled_from(FIELDS), max_size=3, unique=True)):
        value = draw(st.one_of(any_value(exponent), correlation()) if name in CORR_FIELDS else any_value(exponent))
        if value is None and draw(st.booleans()):
            kwargs.pop(name, None)  # left out rather than None
        else:
            kwargs[name] = value
    return kwargs


# ---------------------------------------------------------------------------------------------- the fuzz


def build(kwargs):
    """ObservedStar.from_values, or None for an InputError; any other exception or RuntimeWarning fails."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            star = ObservedStar.from_values(**kwargs)
        except InputError:
            star = None
    runtime = [str(w.message) for w in caught if issubclass(w.category, RuntimeWarning)]
    assert not runtime, f"RuntimeWarnings while reading {kwargs}: {runtime}"
    return star


def analyze_within(star, model, seconds):
    """analyze(n_samples=200) within a time limit; an InputError is an answer (None), anything else fails."""
    with warnings.catch_warnings(record=True) as caught, time_limit(seconds, f"analyze({model}) of {star}"):
        warnings.simplefilter("always")
        start = time.perf_counter()
        try:
            result = analyze(star, model=model, n_samples=200, seed=11)
        except InputError as exc:
            event(f"refused by analyze: {exc.field}")
            result = None
        elapsed = time.perf_counter() - start
    runtime = [str(w.message) for w in caught if issubclass(w.category, RuntimeWarning)]
    assert not runtime, f"RuntimeWarnings in analyze({model}) of {star.to_dict()}: {runtime}"
    assert elapsed < seconds, f"analyze({model}) took {elapsed:.1f} s (bound {seconds} s)"
    return result


#: The fuzz runs in two tiers. "Moderate": magnitudes 0 or within 1e-30 .. 1e30 (anything a catalogue or
#: a unit slip could hold, and far beyond; the edges 1e-300 of ra and dec stay). "Wide": 1e-300 .. 1e300,
#: where the float arithmetic itself overflows; it found the overflow bugs fixed in issue 10 (reproduced one
#: by one in test_fuzz_corpus.py). Wide tiers stop at the first failing example (no shrinking).
MODERATE = 30
WIDE = 300
NO_SHRINK = (Phase.explicit, Phase.reuse, Phase.generate)


def check_from_values(kwargs):
    star = build(kwargs)
    event("built" if star is not None else "refused")
    if star is not None:
        assert np.all(np.isfinite(star.mean)) and np.all(np.isfinite(star.cov))
        assert np.all(np.linalg.eigvalsh(star.cov) >= -1e-8 * np.abs(star.cov).max(initial=0.0))
        assert unlabelled_nonfinite(star.to_dict()) == []


def check_analysis(kwargs, model):
    star = build(kwargs)
    assume(star is not None)
    result = analyze_within(star, model, 20.0)
    event("analysed" if result is not None else "refused by analyze")
    if result is not None:
        bad = unlabelled_nonfinite(result.to_dict())
        assert not bad, f"unlabelled non-finite numbers for {kwargs}: {bad}"


@pytest.mark.slow
@settings(max_examples=600, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(raw_fields(MODERATE))
def test_from_values_raises_only_input_error(kwargs):
    # anything at all for up to three fields (NaN, inf, booleans, None, unit strings, negative errors,
    # correlations at and beyond +-1): a star with a finite mean, a PSD covariance and a finite to_dict(),
    # or an InputError; no other exception and no RuntimeWarning
    check_from_values(kwargs)


@pytest.mark.slow  # runs every example (hundreds of analyses)
@settings(max_examples=400, deadline=None, derandomize=True, phases=NO_SHRINK,
          suppress_health_check=[HealthCheck.too_slow])
@given(raw_fields(WIDE))
def test_from_values_raises_only_input_error_wide(kwargs):
    # the same from 1e-300 to 1e300
    check_from_values(kwargs)


@pytest.mark.slow
@settings(max_examples=300, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(star_fields(MODERATE))
def test_straight_line_analysis_is_finite_or_labelled(kwargs):
    # 200 straight-line draws: an InputError, or a result whose every non-finite number is labelled
    # (unlabelled_nonfinite), within 20 s, without RuntimeWarnings
    check_analysis(kwargs, "straight_line")


@pytest.mark.slow  # runs every example (hundreds of analyses)
@settings(max_examples=300, deadline=None, derandomize=True, phases=NO_SHRINK,
          suppress_health_check=[HealthCheck.too_slow])
@given(star_fields(WIDE))
def test_straight_line_analysis_is_finite_or_labelled_wide(kwargs):
    # the same from 1e-300 to 1e300
    check_analysis(kwargs, "straight_line")


@pytest.mark.slow
@settings(max_examples=15, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(star_fields(MODERATE, error_exponent=3))
def test_orbit_analysis_is_finite_or_labelled(kwargs):
    # the same for the orbit model (fewer examples: each integrates orbits), each within 20 s; errors up to
    # 1e3 (larger ones make draws faster than light, a perierr bug reproduced in the corpus)
    check_analysis(kwargs, "orbit")
