"""Cautions as data: records with codes, shown once, warned once at the Python API boundary.

The messages and thresholds of every caution are checked in test_cautions.py; here the channel: which
record a check produces, that a report lists each message once, and that a Python warning points at the
caller's line (the warnings module's ``stacklevel`` contract, Python docs "warnings.warn").
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pytest

from perierr import ObservedStar, PerierrWarning, analyze
from perierr.cautions import HAZARD, LINEAR_CHECKS, READING_CHECKS, Caution, emit, messages, unique
from perierr.report.text import format_analysis


def invented(**over):
    """An invented star (not a real object); ra_error and dec_error not given: two reading notes."""
    fields = dict(name="invented Plover-2", ra=64.2, dec=12.9, parallax=40.0, parallax_error=0.05, pmra=4.1,
                  pmra_error=0.04, pmdec=-2.2, pmdec_error=0.04, radial_velocity=-38.0, radial_velocity_error=0.4)
    fields.update(over)
    return ObservedStar.from_values(**fields)


def test_record_fields_text_and_dict():
    c = Caution("unit-slip", "parallax looks like arcsec", "caution", "parallax", row=3)
    assert str(c) == "row 3: parallax looks like arcsec"
    assert c.to_dict() == {"code": "unit-slip", "severity": "caution", "subject": "parallax",
                           "message": "parallax looks like arcsec", "row": 3}
    assert json.loads(json.dumps(c.to_dict())) == c.to_dict()
    with pytest.raises(ValueError, match="severity 'loud'"):
        Caution("x", "y", "loud")


def test_unique_and_messages_keep_order_and_drop_repeats():
    a, b = Caution("a", "first"), Caution("b", "second", "note")
    assert unique([a, b, Caution("a2", "first"), b]) == (a, b)
    assert messages([b, a, b]) == ["second", "first"]


def test_reading_notes_are_records_and_not_warnings():
    with warnings.catch_warnings():
        warnings.simplefilter("error", PerierrWarning)  # notes are never warnings
        star = invented()
    assert [(c.code, c.severity, c.subject) for c in star.cautions] == [
        ("held-exact", "note", "ra_error"), ("held-exact", "note", "dec_error")]
    assert star.notes == ("ra_error not given: held exact", "dec_error not given: held exact")


def test_a_unit_slip_warns_once_at_the_callers_line():
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        star = invented(parallax=0.04, parallax_error=0.0001)  # arcsec given as mas
    slips = [w for w in caught if issubclass(w.category, PerierrWarning)]
    assert len(slips) == 1 and "looks like arcsec" in str(slips[0].message)
    assert slips[0].filename == __file__  # the warning points here, not inside perierr
    assert [c.code for c in star.cautions if c.severity == "caution"] == ["unit-slip"]


def test_analyze_warns_each_of_its_cautions_once_and_not_the_stars():
    star = invented(parallax=2.0, parallax_error=1.5)  # a weak parallax: several cautions at once
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        a = analyze(star, model="straight_line", n_samples=3000, seed=4)  # the orbit model is slow at 2 +- 1.5 mas
    said = [str(w.message) for w in caught if issubclass(w.category, PerierrWarning)]
    assert said == a.warnings and len(said) == len(set(said)) >= 3
    assert all(w.filename == __file__ for w in caught if issubclass(w.category, PerierrWarning))
    assert not set(star.notes) & set(said)  # reading notes are shown by the report, not warned again
    codes = [c.code for c in a.cautions]
    assert {"biased-parallax", "nonpositive-parallax"} <= set(codes)
    assert all(c.severity == "caution" for c in a.cautions)


def test_the_report_lists_each_message_once_and_ends_with_the_hazard_sentence_once():
    a = analyze(invented(), n_samples=20_000, seed=1, parallax_offset=(0.0, 0.01))
    text = format_analysis(a)
    block = text.split("Read with care", 1)[1]
    for message in messages(a.all_cautions):
        assert block.count(message) == 1
    assert "ra_error not given: held exact" in block and "zero-point" in block
    assert text.count(HAZARD) == 1 and text.rstrip().endswith(HAZARD)
    assert HAZARD not in format_analysis(a, hazard=False)
    assert "Oort cloud" in HAZARD and "not impact hazards" in HAZARD  # rule of the project: say what it is not


def test_every_check_is_a_small_function_returning_a_record_or_nothing():
    # a clean, well-measured star: no check fires; each check returns None rather than an empty record
    a = analyze(invented(), n_samples=20_000, seed=2)
    from perierr.cautions import Reading

    r = Reading(a.star, a.linear, a.monte_carlo, False)
    assert [check(r) for check in READING_CHECKS] == [None] * len(READING_CHECKS)
    assert [check(a.star, a.linear) for check in LINEAR_CHECKS] == [None] * len(LINEAR_CHECKS)


def test_emit_skips_notes():
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        emit([Caution("n", "a fact", "note"), Caution("c", "a caution"), Caution("c", "a caution")])
    assert [str(w.message) for w in caught] == ["a caution"]
    assert caught[0].filename == __file__
    assert np.all([issubclass(w.category, PerierrWarning) for w in caught])


def test_a_head_on_analysis_says_each_caution_once_at_the_callers_line():
    # a head-on nominal straight-line path (transverse speed 0: d_ph = 0 exactly; the Galactic tide bends an
    # orbit off it): linearization and budget run inside analyze's capture, so whatever they warn is recorded
    # with the analysis and said once, at the caller's line
    star = invented(pmra=0.0, pmdec=0.0)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        a = analyze(star, model="straight_line", n_samples=2000, seed=5)
    said = [w for w in caught if issubclass(w.category, PerierrWarning)]
    assert [str(w.message) for w in said] == a.warnings
    assert all(w.filename == __file__ for w in said)
    assert any(c.code == "head-on" for c in a.cautions)
