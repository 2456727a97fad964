"""Edges of perierr.units and of the planner's precision conversion built on it (perierr.plan.update).

Written for the mutation run of the units and plan_update groups: integer input to the error conversions,
the parser's error messages (field, value as given, unit, row, example) and the planner's what-if record.
Each check names its reference: astropy units, a definition written in the test, or a documented rule.
"""

import math

import astropy.units as u
import numpy as np
import pytest
from numpy.testing import assert_allclose

from perierr import InputError, ObservedStar
from perierr import units as pu
from perierr.plan.update import make_measurement, updated_star

# ---------------------------------------------------------------------------------------------- conversions


def test_integer_errors_convert_like_floats():
    # astropy.units: 1 mas = 1/3.6e6 deg; ra_error is of alpha* = alpha cos dec (Hipparcos Vol. 1, Sect. 1.2.5)
    dec = 60.0
    ints = [2, 3, 1, 4, 5, 6]
    out = pu.errors_to_internal(ints, dec)
    assert out.dtype == np.float64
    expected = [(2 * u.mas).to_value(u.deg) / math.cos(math.radians(dec)), (3 * u.mas).to_value(u.deg), 1, 4, 5, 6]
    assert_allclose(out, expected, rtol=1e-15, atol=0)
    back = pu.errors_to_catalogue([1, 2, 3, 4, 5, 6], dec)
    assert back.dtype == np.float64
    assert_allclose(back, [(1 * u.deg).to_value(u.mas) * 0.5, (2 * u.deg).to_value(u.mas), 3, 4, 5, 6], rtol=1e-15)
    # errors without positions keep their values, as floats
    other = pu.errors_to_catalogue([7, 8], dec, names=("parallax", "radial_velocity"))
    assert other.dtype == np.float64
    assert_allclose(other, [7.0, 8.0], rtol=0, atol=0)


# ---------------------------------------------------------------------------------------------- parser messages


def test_text_without_a_unit_names_the_row_and_the_example():
    # documented rule (to_number): a string without a unit is refused, naming the field, the row and an example
    with pytest.raises(InputError) as exc:
        pu.to_number("parallax", "12", u.mas, row=4, example="12 mas")
    assert exc.value.row == 4
    assert exc.value.field == "parallax"
    assert "'12 mas'" in exc.value.expected
    assert str(exc.value).startswith("row 4: parallax = '12': ")


def test_a_quantity_of_the_wrong_dimension_is_shown_as_text():
    # astropy.units: seconds are not convertible to mas; the message shows the value as astropy prints it
    q = 12 * u.s
    with pytest.raises(InputError) as exc:
        pu.to_number("parallax", q, u.mas)
    assert isinstance(exc.value.value, str) and exc.value.value == str(q) == "12.0 s"
    assert "convertible to mas" in exc.value.expected


def test_a_value_that_is_not_a_number_is_kept_as_given():
    # documented rule (InputError.value): the offending value, as given
    given = [1.0, 2.0]
    with pytest.raises(InputError) as exc:
        pu.to_number("radial_velocity", given, u.km / u.s)
    assert exc.value.value is given
    assert exc.value.expected == "expected a number in km / s"


def test_dimensionless_fields_say_so_without_a_unit():
    # documented rule (to_number): unit None is a dimensionless field; messages name no unit then
    with pytest.raises(InputError) as exc:
        pu.to_number("weight", True, None)
    assert exc.value.expected == "expected a number, not a boolean"
    with pytest.raises(InputError) as exc:
        pu.to_number("weight", [1.0], None)
    assert exc.value.expected == "expected a number"
    with pytest.raises(InputError) as exc:
        pu.to_number("weight", float("nan"), None)
    assert exc.value.expected == "expected a finite number"
    # a dimensionless value converts (astropy: 5 percent = 0.05)
    assert pu.to_number("weight", 5 * u.percent, None) == pytest.approx(0.05, rel=1e-15)


# ---------------------------------------------------------------------------------------------- the planner


def test_an_ra_precision_at_the_pole_is_refused_naming_the_precision():
    # documented rule (errors_to_internal): an ra error above 0 at a pole is refused; the planner names its
    # own field, the ra precision
    with pytest.raises(InputError) as exc:
        make_measurement("ra", 0.5, dec=90.0)
    assert exc.value.field == "dec"
    assert exc.value.value == 90.0
    assert "give the ra precision = 0 or move off the pole" in exc.value.expected


def test_a_what_if_star_records_the_measurements_as_a_note():
    # documented rule (Caution.code: a stable identifier): the what-if star carries a "what-if" note
    mean = np.array([120.0, -30.0, 8.0, 40.0, -25.0, -60.0])
    cov = np.diag([1e-9, 1e-9, 0.04, 0.01, 0.01, 4.0])
    star = ObservedStar(mean, cov, name="demo")
    m = make_measurement("radial_velocity", 0.5)
    new = updated_star(star, [m])
    last = new.cautions[-1]
    assert (last.code, last.severity) == ("what-if", "note")
    assert last.to_dict()["code"] == "what-if"
    # independent Gaussian measurements combine by inverse variances (common practice, no source)
    assert_allclose(new.cov[5, 5], 1.0 / (1.0 / 4.0 + 1.0 / 0.25), rtol=1e-12)


@pytest.mark.parametrize("dec", [float("nan"), 120.0, -90.5, float("inf")])
def test_a_declination_outside_the_sphere_is_refused_by_name(dec):
    # project rule: no silent number from a bad input; a declination lies in [-90, 90] deg (common practice)
    from perierr.units import errors_to_internal

    with pytest.raises(InputError, match="dec = .*: expected a declination in \\[-90, 90\\] deg"):
        errors_to_internal([1.0] * 6, dec)
    with pytest.raises(InputError, match="dec = "):
        errors_to_internal([[1.0] * 6, [1.0] * 6], [10.0, dec])
