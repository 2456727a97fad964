"""The declination range of perierr.units.errors_to_internal, just beyond and just inside the poles.

Written for the mutation run of the units group: a declination a little above +90 deg (between 90 and 91)
must be refused like one far above it, and the poles themselves stay accepted.
"""

import math

import astropy.units as u
import numpy as np
import pytest
from numpy.testing import assert_allclose

from perierr import InputError
from perierr.units import errors_to_internal


@pytest.mark.parametrize("dec", [90.5, np.nextafter(90.0, 91.0), -90.5])
def test_a_declination_just_beyond_a_pole_is_refused_by_name(dec):
    # common practice, no source: a declination lies in [-90, 90] deg; the project rule asks for an error
    # naming the field and the value
    with pytest.raises(InputError) as exc:
        errors_to_internal([1.0] * 6, dec)
    assert exc.value.field == "dec"
    assert exc.value.value == pytest.approx(dec, rel=0, abs=0)
    assert "[-90, 90]" in exc.value.expected


@pytest.mark.parametrize("dec", [90.0, -90.0])
def test_the_poles_themselves_are_accepted_with_a_zero_ra_error(dec):
    # astropy.units: 1 mas = 1/3.6e6 deg; a zero ra error stays zero at the pole (documented rule of
    # errors_to_internal: only an ra error above 0 is refused there)
    out = errors_to_internal([0.0, 2.0, 1.0, 4.0, 5.0, 6.0], dec)
    assert_allclose(out, [0.0, (2.0 * u.mas).to_value(u.deg), 1.0, 4.0, 5.0, 6.0], rtol=1e-15, atol=0)
    assert math.isfinite(out.sum())
