"""Star input: catalogue fields, units, and clear errors for bad input."""

import math

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table
from numpy.testing import assert_allclose

from perierr import InputError, ObservedStar, PerierrWarning, read_catalogue, read_star_file
from perierr.demo import demo_path

GOOD = dict(
    ra=45.0, dec=60.0, parallax=20.0, parallax_error=0.05, pmra=3.0, pmra_error=0.04,
    pmdec=-2.0, pmdec_error=0.03, radial_velocity=-25.0, radial_velocity_error=0.4,
    ra_error=0.1, dec_error=0.2, parallax_pmra_corr=0.3, pmra_pmdec_corr=-0.5,
)


def with_(**changes):
    d = dict(GOOD)
    d.update(changes)
    return {k: v for k, v in d.items() if v is not None}


def test_covariance_built_from_catalogue_fields():
    s = ObservedStar.from_mapping(GOOD)
    # ra_error is the error of alpha* = alpha cos(dec): sigma_alpha = ra_error / cos(dec)
    assert_allclose(s.sigma[0], 0.1 / 3.6e6 / math.cos(math.radians(60.0)), rtol=1e-12)
    assert_allclose(s.sigma[1], 0.2 / 3.6e6, rtol=1e-12)
    assert_allclose(s.cov[2, 3], 0.3 * 0.05 * 0.04, rtol=1e-12)
    assert_allclose(s.cov[3, 4], -0.5 * 0.04 * 0.03, rtol=1e-12)
    assert s.cov[5, 2] == 0.0  # the radial velocity is independent of the astrometry
    back = s.to_dict()
    assert_allclose([back["ra_error"], back["pmra_pmdec_corr"]], [0.1, -0.5], rtol=1e-12)


def test_quantities_and_unit_strings_are_converted():
    s = ObservedStar.from_mapping(
        with_(parallax=0.02 * u.arcsec, radial_velocity="-25000 m/s", pmra=3e-3 * u.arcsec / u.yr)
    )
    assert_allclose(s.mean[[2, 3, 5]], [20.0, 3.0, -25.0], rtol=1e-12)


def test_wrong_unit_names_the_field():
    with pytest.raises(InputError, match=r"radial_velocity = .*convertible to km / s"):
        ObservedStar.from_mapping(with_(radial_velocity=3 * u.mas))


@pytest.mark.parametrize(
    "changes, pattern",
    [
        (dict(parallax=None), r"parallax = None: missing"),
        (dict(pmdec=float("nan")), r"pmdec = nan: expected a finite number"),
        (dict(radial_velocity_error=-1.0), r"radial_velocity_error = -1.0: expected an error >= 0"),
        (dict(parallax_pmra_corr=1.2), r"parallax_pmra_corr = 1.2: expected a correlation coefficient in \[-1, 1\]"),
        (dict(dec=91.0), r"dec = 91.0: expected a declination in \[-90, 90\]"),
        (dict(pmra="fast"), r"pmra = 'fast'"),
        (dict(paralax=3.0), r"unknown field; did you mean 'parallax'"),
    ],
)
def test_bad_input_names_field_value_and_expectation(changes, pattern):
    with pytest.raises(InputError, match=pattern):
        ObservedStar.from_mapping(with_(**changes))


def test_inconsistent_correlations_show_the_smallest_eigenvalue():
    bad = with_(parallax_pmra_corr=0.9, pmra_pmdec_corr=0.9, parallax_pmdec_corr=-0.9)
    with pytest.raises(InputError, match=r"smallest eigenvalue -0\.\d+.*not positive semi-definite"):
        ObservedStar.from_mapping(bad)


def test_zero_error_is_held_exact_and_noted():
    s = ObservedStar.from_mapping(with_(radial_velocity_error=0.0))
    assert "radial_velocity" in s.held_exact
    assert any("radial_velocity held exact" in n for n in s.notes)


def test_unit_slip_warnings():
    with pytest.warns(PerierrWarning, match="looks like arcsec"):
        ObservedStar.from_mapping(with_(parallax=0.02, parallax_error=0.00005))
    with pytest.warns(PerierrWarning, match="over 100 times"):
        ObservedStar.from_mapping(with_(pmra=0.01, pmra_error=40.0))


def test_toml_star_file_and_errors(tmp_path):
    s = read_star_file(demo_path("kestrel-4.toml"))
    assert s.name.startswith("Kestrel-4") and s.ref_epoch == 2016.0 and s.mass == 0.68
    bad = tmp_path / "bad.toml"
    bad.write_text("ra = [\n")
    with pytest.raises(InputError, match="not valid TOML"):
        read_star_file(bad)
    with pytest.raises(InputError, match="file not found"):
        read_star_file(tmp_path / "missing.toml")


def test_table_rows_with_units_and_row_numbers_in_errors():
    stars = read_catalogue(demo_path("kestrel_survey.ecsv"))
    assert len(stars) == 6 and stars[3].name.startswith("Kestrel-4")
    t = Table(rows=[dict(GOOD), with_(parallax_error=-2.0)])
    t["parallax"].unit = u.mas
    with pytest.raises(InputError, match=r"row 1: parallax_error = -2.0"):
        read_catalogue(t)


def test_raw_constructor_validates():
    with pytest.raises(InputError, match="expected a \\(6, 6\\) covariance"):
        ObservedStar(np.zeros(6), np.eye(5))
    with pytest.raises(InputError, match="not positive semi-definite"):
        ObservedStar(np.ones(6), -np.eye(6))
