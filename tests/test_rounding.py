"""Rounding of values and intervals for print (perierr.report.rounding) against the published rule.

The rule: Particle Data Group, Review of Particle Physics, Phys. Rev. D 98, 030001 (2018), Introduction, section
5.3 — three highest-order digits of the uncertainty in 100-354: two significant digits; 355-949: one; 950-999:
rounded up to 1000, two significant digits; the value to the same place. Its own worked examples
(0.827 +- 0.119 -> 0.83 +- 0.12, 0.827 +- 0.367 -> 0.8 +- 0.4) are quoted from memory; the rule's text was read
as quoted on STAR's HepData guidance page, whose example (0.279008 +- 0.0123261 -> 0.279 +- 0.012) is read there,
and the pdground package's documentation (12.2135 +- 0.03215 -> 12.214 +- 0.032, 12.2135 +- 0.06515 ->
12.21 +- 0.07), read there.
"""

import math
from decimal import Decimal

import pytest
from hypothesis import given
from hypothesis import strategies as st

from perierr.errors import InputError
from perierr.report.rounding import latex_interval, pdg_place, round_interval


@pytest.mark.parametrize(
    ("value", "error", "shown"),
    [
        (0.827, 0.119, ("0.83", "0.12")),  # PDG 2018, Introduction 5.3 (from memory)
        (0.827, 0.367, ("0.8", "0.4")),  # PDG 2018, Introduction 5.3 (from memory)
        (0.279008, 0.0123261, ("0.279", "0.012")),  # STAR HepData guidance page (read)
        (12.2135, 0.03215, ("12.214", "0.032")),  # pdground documentation (read)
        (12.2135, 0.06515, ("12.21", "0.07")),  # pdground documentation (read)
    ],
)
def test_worked_examples_of_the_rule(value, error, shown):
    r = round_interval(value, error)
    assert (r.value, r.plus) == shown
    assert r.minus == r.plus


@pytest.mark.parametrize(
    ("error", "shown"),
    [
        (0.354, "0.35"),  # 354: still two digits
        (0.3549, "0.35"),  # the three highest-order digits are 354 (not rounded up first)
        (0.355, "0.4"),  # 355: one digit
        (0.949, "0.9"),
        (0.950, "1.0"),  # 950-999: up to 1000, two digits
        (0.0967, "0.10"),
        (100.0, "100"),  # 100: two digits of 1.0e2
        (3.0, "3.0"),
        (999.0, "1000"),
    ],
)
def test_the_boundaries_of_the_rule(error, shown):
    # the rule's text (PDG 2018, Introduction 5.3) at its digit boundaries
    assert round_interval(0.0, error).plus == shown


def test_an_asymmetric_interval_takes_the_place_of_its_narrower_side():
    # narrower side 0.0391 (391: one digit, place 0.01) decides all three (common practice, no source)
    r = round_interval(1.2912, 0.0463, 0.0391)
    assert (r.value, r.minus, r.plus) == ("1.29", "0.05", "0.04")
    assert latex_interval(1.2912, 0.0463, 0.0391) == "$1.29^{+0.04}_{-0.05}$"
    assert latex_interval(1.2912, 0.0391, 0.0463) == "$1.29^{+0.05}_{-0.04}$"
    # sides that round alike print as one
    assert latex_interval(12.2135, 0.06515, 0.0651) == "$12.21 \\pm 0.07$"


@given(
    value=st.floats(min_value=-1e6, max_value=1e6, allow_nan=False),
    error=st.floats(min_value=1e-6, max_value=1e6, allow_nan=False),
)
def test_rounded_numbers_obey_the_rule(value, error):
    r = round_interval(value, error)
    shown = Decimal(r.plus)
    # the number of significant digits the rule asks for, from the three highest-order digits of the error
    # written out here: 100-354 -> 2, 355-949 -> 1, 950-999 -> 2 (of the rounded-up 1000)
    leading = int(f"{error:.15e}".replace(".", "")[:3])
    expected = 1 if 355 <= leading <= 949 else 2
    assert shown.adjusted() - r.place + 1 == expected  # digits from the first one to the place kept
    # the printed uncertainty is the rule's: within half a unit of the last place, or rounded up to 10^(k+1)
    unit = 10.0**r.place
    assert abs(float(shown) - error) <= 0.5 * unit * (1 + 1e-9) or float(shown) == pytest.approx(10 * unit)
    # the value is given to the same place, within half a unit of it
    assert abs(float(r.value) - value) <= 0.5 * unit * (1 + 1e-9)
    assert -Decimal(r.value).as_tuple().exponent == max(-r.place, 0)


@given(
    mantissa=st.floats(min_value=1.0, max_value=9.99, allow_nan=False),
    power=st.integers(min_value=-6, max_value=6),
    shift=st.integers(min_value=-3, max_value=3),
)
def test_a_change_of_unit_by_a_power_of_ten_moves_the_place_only(mantissa, power, shift):
    # invariance: the same uncertainty in pc and in kpc keeps its digits (common practice, no source)
    error = float(Decimal(repr(mantissa)) * Decimal(10) ** power)
    scaled = float(Decimal(repr(mantissa)) * Decimal(10) ** (power + shift))
    assert pdg_place(scaled) == pdg_place(error) + shift


@pytest.mark.parametrize(
    ("field", "args"),
    [("minus", (1.0, 0.0)), ("minus", (1.0, -0.1)), ("plus", (1.0, 0.1, math.nan)), ("value", (math.inf, 0.1)),
     ("minus", (1.0, "abc")), ("value", ("x", 0.1))],
)
def test_bad_numbers_are_refused_naming_the_field(field, args):
    with pytest.raises(InputError, match=field):
        round_interval(*args)
