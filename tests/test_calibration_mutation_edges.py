"""Edges of perierr.calibration written for the mutation run of the priors group.

The notes a calibrated star carries (their stable codes and the input field they are about) and the hint in
the error for an unreadable zero-point. References: the Caution record's documented meaning (``code``: a
stable identifier; ``subject``: the input field), the zero-point convention (corrected parallax = catalogue
parallax - zero-point; Lindegren et al. 2021, A&A 649, A4, Sect. 1) and astropy.units (1 uas = 1e-3 mas).
"""

import numpy as np
import pytest

from perierr import ObservedStar
from perierr.calibration import Calibration, parse_offset
from perierr.errors import InputError

PLX = 2  # index of the parallax among (ra, dec, parallax, pmra, pmdec, radial_velocity)


def invented_star():
    """An invented star (no real object) with independent errors."""
    mean = [45.0, 12.0, 4.0, 20.0, -8.0, -40.0]
    cov = np.diag([0.02, 0.02, 0.1, 0.05, 0.05, 0.4]) ** 2
    return ObservedStar(mean, cov, name="invented")


def test_calibration_notes_carry_stable_codes_and_name_the_input_they_are_about():
    # Caution docstring: code is a stable identifier, severity "note" is a fact about how the input was read,
    # subject names the input field
    out = Calibration(zero_point=-0.02, zero_point_error=0.01, inflation={"pmra": 1.5, "radial_velocity": 2.0}).apply(
        invented_star()
    )
    got = [(c.code, c.severity, c.subject) for c in out.cautions]
    assert got == [
        ("zero-point-applied", "note", "parallax"),
        ("error-inflated", "note", "pmra_error"),
        ("error-inflated", "note", "radial_velocity_error"),
    ]
    # corrected = catalogue - Z (Lindegren et al. 2021): 4 - (-0.02); error sqrt(0.1^2 + 0.01^2)
    assert out.mean[PLX] == pytest.approx(4.02, rel=1e-15)
    assert out.sigma[PLX] == pytest.approx(np.hypot(0.1, 0.01), rel=1e-12)
    # inflation multiplies the standard error (Sigma' = D Sigma D): 0.05 * 1.5 and 0.4 * 2
    assert out.sigma[3] == pytest.approx(0.075, rel=1e-12)
    assert out.sigma[5] == pytest.approx(0.8, rel=1e-12)


def test_an_inflation_alone_notes_only_the_inflated_inputs():
    # no zero-point and no zero-point error: no zero-point note (common practice, no source: a note states a
    # change that was made)
    out = Calibration(inflation={"dec": 1.2}).apply(invented_star())
    assert [(c.code, c.subject) for c in out.cautions] == [("error-inflated", "dec_error")]
    assert out.sigma[1] == pytest.approx(0.024, rel=1e-12)


@pytest.mark.parametrize("value", [("x", 0.005), "1 km"])
def test_an_unreadable_zero_point_error_shows_an_example_in_micro_arcseconds(value):
    # project rule: an error names the field, the value and what was expected; the example '-17 uas' is
    # -0.017 mas (astropy.units), the typical size of the catalogue zero-point (Lindegren et al. 2021)
    with pytest.raises(InputError) as err:
        parse_offset(value)
    assert err.value.field == "parallax_offset"
    assert "expected a parallax in mas" in err.value.expected
    assert "'-17 uas'" in err.value.expected
    assert parse_offset("-17 uas") == pytest.approx((-0.017, 0.0), abs=1e-15)


def test_a_unit_written_once_applies_to_both_numbers_also_in_the_error():
    # parse_offset docstring: "-0.017+-0.005 mas" - a unit after the last number applies to the whole pair
    # (astropy.units: 1 uas = 1e-3 mas); a number that cannot be read is reported in the user's own words
    # (the whole value, and the part that is not a number)
    assert parse_offset("-17,5 uas") == pytest.approx((-0.017, 0.005), abs=1e-15)
    assert parse_offset("-0.017 mas,5 uas") == pytest.approx((-0.017, 0.005), abs=1e-15)
    with pytest.raises(InputError) as err:
        parse_offset("abc,5 uas")
    assert err.value.field == "parallax_offset"
    assert err.value.value == "abc,5 uas"
    assert "'abc'" in err.value.expected
