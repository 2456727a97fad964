"""perierr.units: constants, unit tables, the catalogue <-> internal error conversion and the one number parser.

Every check is against astropy (units, constants, SkyCoord) or a definition written in the test.
"""

import math
import warnings

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import SkyCoord
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

import perierr
from perierr import InputError, ObservedStar
from perierr import units as pu
from perierr.calibration import parse_offset
from perierr.priors import ExponentialDensity

# ---------------------------------------------------------------------------------------------- constants


def test_constants_agree_with_astropy_conversions():
    # astropy.units: 1 mas/yr at 1 kpc (parallax 1 mas) is 1 au/yr; dimensionless_angles turns mas into rad
    v = (1.0 * u.mas / u.yr * (1.0 * u.kpc)).to_value(u.km / u.s, equivalencies=u.dimensionless_angles())
    assert_allclose(pu.KMS_PER_MASYR_AT_1MAS, v, rtol=1e-15, atol=0)
    # astropy.units: the time to travel 1 pc at 1 km/s
    assert_allclose(pu.MYR_PER_PC_PER_KMS, (1.0 * u.pc / (u.km / u.s)).to_value(u.Myr), rtol=1e-15, atol=0)
    # astropy.units and the IAU 2015 B2 parsec, 648000 / pi au (from memory)
    assert_allclose(pu.AU_PER_PC, (1.0 * u.pc).to_value(u.au), rtol=1e-15, atol=0)
    assert_allclose(pu.AU_PER_PC, 648000.0 / math.pi, rtol=1e-15, atol=0)
    # astropy.units: 1 deg = 3600 arcsec = 3.6e6 mas
    assert_allclose(pu.MAS_PER_DEG, (1.0 * u.deg).to_value(u.mas), rtol=1e-15, atol=0)
    # astropy's parallax equivalency: 1 pc <-> 1000 mas, 1 mas <-> 1000 pc
    assert_allclose(pu.MAS_PC, (1.0 * u.pc).to_value(u.mas, equivalencies=u.parallax()), rtol=1e-15, atol=0)
    assert_allclose(pu.MAS_PC, (1.0 * u.mas).to_value(u.pc, equivalencies=u.parallax()), rtol=1e-15, atol=0)
    # astropy.constants: c = 299,792.458 km/s exactly (SI definition of the metre)
    assert pu.SPEED_OF_LIGHT_KMS == const.c.to_value(u.km / u.s) == 299_792.458


def test_parallax_distance_constant_inverts_a_parallax_like_astropy():
    # astropy.coordinates.Distance(parallax=...) is the reference distance of a parallax
    plx = np.array([0.37, 1.0, 48.0, 768.5])
    d = perierr.units.MAS_PC / plx
    from astropy.coordinates import Distance

    assert_allclose(d, Distance(parallax=plx * u.mas).to_value(u.pc), rtol=1e-15, atol=0)


# ---------------------------------------------------------------------------------------------- tables


def test_observable_order_and_named_indices():
    # the order of the observables along the last axis (DEVELOPERS.md, "Conventions")
    assert pu.OBSERVABLES == ("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity")
    named = (pu.RA, pu.DEC, pu.PARALLAX, pu.PMRA, pu.PMDEC, pu.RADIAL_VELOCITY)
    assert named == (0, 1, 2, 3, 4, 5)
    assert [pu.OBSERVABLES[k] for k in named] == list(pu.OBSERVABLES)
    assert dict(pu.INDEX) == {name: k for k, name in enumerate(pu.OBSERVABLES)}
    assert pu.OUTPUTS == ("time_myr", "distance_pc", "speed_kms")


def test_unit_tables_are_the_documented_units():
    # internal units (module docstring): deg, deg, mas, mas/yr, mas/yr, km/s; errors in catalogue units (mas
    # for the positions); outputs Myr, pc, km/s. Equality of astropy units is equality of their scale.
    internal = (u.deg, u.deg, u.mas, u.mas / u.yr, u.mas / u.yr, u.km / u.s)
    errors = (u.mas, u.mas, u.mas, u.mas / u.yr, u.mas / u.yr, u.km / u.s)
    for name, want, want_error in zip(pu.OBSERVABLES, internal, errors):
        assert pu.INTERNAL_UNITS[name] == want and pu.FIELD_UNITS[name] == want
        assert pu.ERROR_UNITS[name] == want_error and pu.FIELD_UNITS[f"{name}_error"] == want_error
        assert u.Unit(pu.INTERNAL_LABELS[name]) == want and u.Unit(pu.ERROR_LABELS[name]) == want_error
    assert pu.FIELD_UNITS["mass"] == u.Msun and pu.FIELD_UNITS["mass_error"] == u.Msun
    assert [pu.OUTPUT_UNITS[q] for q in pu.OUTPUTS] == [u.Myr, u.pc, u.km / u.s]
    assert [pu.OUTPUT_LABELS[q] for q in pu.OUTPUTS] == ["Myr", "pc", "km/s"]  # JSON "unit" values
    assert [pu.OUTPUT_TITLES[q] for q in pu.OUTPUTS] == ["time [Myr]", "distance [pc]", "speed [km/s]"]
    with pytest.raises(TypeError):
        pu.INTERNAL_UNITS["parallax"] = u.arcsec  # the tables are read-only


# ---------------------------------------------------------------------------------------------- ra_error


@pytest.mark.parametrize("dec", [-75.0, -30.0, 0.0, 12.5, 60.0, 89.0])
def test_ra_error_is_the_sky_offset_along_the_parallel_like_skycoord(dec):
    # astropy: an offset of d_alpha in ra at declination dec spans d_alpha cos(dec) on the sky (alpha* =
    # alpha cos dec, the convention of pm_ra_cosdec and of the catalogues' ra_error). The small-circle vs
    # great-circle difference is ~d_alpha^2 / 24 relative (3e-13 here); the coordinates' own rounding
    # (~2e-14 deg on 1e-4 deg) sets the tolerance.
    ra, d_alpha = 201.37, 1e-4
    c0, c1 = SkyCoord(ra * u.deg, dec * u.deg), SkyCoord((ra + d_alpha) * u.deg, dec * u.deg)
    dlon, dlat = c0.spherical_offsets_to(c1)
    got = pu.errors_to_catalogue([d_alpha], dec, names=("ra",))[0]
    assert_allclose(got, dlon.to_value(u.mas), rtol=1e-9, atol=0)
    assert abs(dlat.to_value(u.mas)) < 1e-6 * got
    # and the formula itself (ESA 1997, Hipparcos and Tycho Catalogues, Vol. 1, Sect. 1.2.5; from memory)
    assert_allclose(got, d_alpha * 3.6e6 * math.cos(math.radians(dec)), rtol=1e-15, atol=0)


def test_errors_to_internal_divides_ra_by_cos_dec_and_converts_mas_to_deg():
    # closed form: sigma_alpha = ra_error / cos(dec) / 3.6e6 deg; dec_error / 3.6e6; the rest unchanged
    cat = np.array([[0.3, 0.2, 0.05, 0.04, 0.03, 0.6], [0.01, 0.02, 1.2, 0.5, 0.7, 3.0]])
    dec = np.array([60.0, -20.0])
    got = pu.errors_to_internal(cat, dec)
    want = cat.copy()
    want[:, 0] = cat[:, 0] / 3.6e6 / np.cos(np.radians(dec))
    want[:, 1] = cat[:, 1] / 3.6e6
    assert_allclose(got, want, rtol=1e-15, atol=0)
    # vectorized over stars: each row as computed alone
    for k in range(2):
        assert_allclose(got[k], pu.errors_to_internal(cat[k], dec[k]), rtol=0, atol=0)


def test_catalogue_internal_catalogue_round_trip():
    # inverse functions: back to the input within a few roundings (common practice, no source)
    rng = np.random.default_rng(7)
    cat = rng.uniform(0.0, 2.0, (500, 6))
    dec = np.degrees(np.arcsin(rng.uniform(-0.999, 0.999, 500)))
    back = pu.errors_to_catalogue(pu.errors_to_internal(cat, dec), dec)
    assert_allclose(back, cat, rtol=1e-15, atol=0)
    sub = pu.errors_to_internal(cat[:, :1], dec, names=("ra",))
    assert_allclose(sub[:, 0], pu.errors_to_internal(cat, dec)[:, 0], rtol=0, atol=0)


def test_star_and_planner_use_the_same_conversion():
    # the star's ra sigma, its catalogue ra_error and a planner precision agree with the formula
    s = ObservedStar.from_values(
        ra=45.0, dec=60.0, parallax=20.0, parallax_error=0.05, pmra=3.0, pmra_error=0.04, pmdec=-2.0,
        pmdec_error=0.03, radial_velocity=-25.0, radial_velocity_error=0.4, ra_error=0.1, dec_error=0.2,
    )
    # cos 60 deg = 1/2: 0.1 mas of alpha* is 0.2 mas of alpha
    assert_allclose(s.sigma[pu.RA], 0.2 / 3.6e6, rtol=1e-15, atol=0)
    assert_allclose(s.catalogue_errors()["ra_error"], 0.1, rtol=1e-15, atol=0)
    from perierr.plan.update import make_measurement, to_catalogue

    assert_allclose(make_measurement("ra", 0.1, dec=60.0).precision, s.sigma[pu.RA], rtol=1e-15, atol=0)
    assert_allclose(float(to_catalogue("ra", s.sigma[pu.RA], dec=60.0)), 0.1, rtol=1e-15, atol=0)


def test_an_ra_error_at_a_pole_is_refused_and_zero_is_kept():
    with pytest.raises(InputError, match=r"^row 3: dec = 90.0: ra is undefined at a celestial pole; give ra_error"):
        pu.errors_to_internal([0.1, 0.1, 0.1, 0.1, 0.1, 0.1], 90.0, row=3)
    # several stars: the message names the declination of the star at the pole
    with pytest.raises(InputError, match=r"dec = -90.0: ra is undefined"):
        pu.errors_to_internal([[0.1] * 6, [0.1] * 6], [10.0, -90.0])
    got = pu.errors_to_internal([0.0, 0.36, 0.1, 0.1, 0.1, 0.1], 90.0)
    assert got[0] == 0.0 and got[1] == pytest.approx(1e-7, rel=1e-15)  # 0.36 mas = 1e-7 deg (definition)


# ---------------------------------------------------------------------------------------------- the parser


@pytest.mark.parametrize(
    "field, bare, quantity, text, unit",
    [
        ("parallax", 12.5, 0.0125 * u.arcsec, "12500 uas", u.mas),
        ("pmra", -3.25, -3.25e-3 * u.arcsec / u.yr, "-3.25 mas / yr", u.mas / u.yr),
        ("radial_velocity", -31.2, -31200.0 * u.m / u.s, "-31200 m/s", u.km / u.s),
        ("threshold", 0.5, 0.5 * u.pc, "0.0005 kpc", u.pc),
    ],
)
def test_bare_numbers_quantities_and_strings_give_the_same_number(field, bare, quantity, text, unit):
    # astropy.units conversions: each form is the same physical value
    assert pu.to_number(field, bare, unit) == bare
    assert_allclose(pu.to_number(field, quantity, unit), bare, rtol=1e-15, atol=0)
    assert_allclose(pu.to_number(field, text, unit), bare, rtol=1e-15, atol=0)
    assert_allclose(pu.to_number(field, np.str_(text), unit), bare, rtol=1e-15, atol=0)


@pytest.mark.parametrize(
    "call, message",
    [
        (dict(field="parallax", value="3 km", unit=u.mas, row=4),
         "row 4: parallax = '3 km': expected a quantity convertible to mas (a number in mas)"),
        (dict(field="parallax", value=float("inf"), unit=u.mas), "parallax = inf: expected a finite number in mas"),
        (dict(field="parallax", value=True, unit=u.mas), "parallax = True: expected a number in mas, not a boolean"),
        (dict(field="radial_velocity", value="12", unit=u.km / u.s),
         "radial_velocity = '12': expected a value with its unit, e.g. '1 km / s'"),
        (dict(field="pmra", value=np.str_("fast"), unit=u.mas / u.yr, example="3 mas/yr"),
         "pmra = 'fast': expected a number in mas / yr or a quantity such as '3 mas/yr'"),
        (dict(field="L", value="abc", unit=u.pc, noun="a length", example="1.35 kpc"),
         "L = 'abc': expected a length in pc (a number in pc or a quantity such as '1.35 kpc')"),
        (dict(field="alpha", value="2 pc", unit=None),
         "alpha = '2 pc': expected a plain number (this field has no unit)"),
    ],
)
def test_parser_errors_name_the_field_the_value_and_the_unit(call, message):
    with pytest.raises(InputError) as info:
        pu.to_number(**call)
    assert str(info.value) == message


def test_the_parser_builds_no_message_for_good_input(monkeypatch):
    # the screen calls the parser about a dozen times per row: message text only on the way to a raise
    calls = []
    monkeypatch.setattr(pu, "_expected", lambda *a, **k: calls.append(a) or "expected")
    monkeypatch.setattr(pu, "_in", lambda *a: calls.append(a) or "")
    for value in (12.5, 12.5 * u.mas, "12.5 mas", np.float32(12.5), 12.5e3 * u.uas):
        assert pu.to_number("parallax", value, u.mas) == pytest.approx(12.5, rel=1e-15)
    assert calls == []
    with pytest.raises(InputError):
        pu.to_number("parallax", "3 km", u.mas)
    assert len(calls) == 1


def test_the_prior_and_zero_point_readers_are_the_same_parser():
    # astropy.units: 1.35 kpc = 1350 pc; -17 uas = -0.017 mas
    assert ExponentialDensity("1.35 kpc").length_scale == pu.to_number("L", "1.35 kpc", u.pc) == pytest.approx(1350.0)
    assert ExponentialDensity(1.35 * u.kpc).length_scale == pytest.approx(1350.0, rel=1e-15)
    assert parse_offset("-17 uas") == (pu.to_number("z", "-17 uas", u.mas), 0.0)
    assert parse_offset("-17 uas")[0] == pytest.approx(-0.017, rel=1e-15)
    with pytest.raises(InputError, match=r"L = '3 km/s': expected a length in pc"):
        ExponentialDensity("3 km/s")
    with pytest.raises(InputError, match=r"parallax_offset = '1 km': expected a parallax in mas"):
        parse_offset("1 km")


# ---------------------------------------------------------------------------------------------- invariance

#: Units each field may be given in (astropy converts them); the internal unit comes first.
UNIT_CHOICES = {
    "ra": (u.deg, u.rad, u.hourangle),
    "dec": (u.deg, u.rad, u.arcmin),
    "parallax": (u.mas, u.arcsec, u.uas),
    "pmra": (u.mas / u.yr, u.arcsec / u.yr, u.uas / u.yr, u.mas / u.d),
    "pmdec": (u.mas / u.yr, u.arcsec / u.yr, u.uas / u.yr),
    "radial_velocity": (u.km / u.s, u.m / u.s, u.au / u.yr),
    "ra_error": (u.mas, u.uas, u.arcsec),
    "dec_error": (u.mas, u.uas, u.deg),
    "parallax_error": (u.mas, u.arcsec, u.uas),
    "pmra_error": (u.mas / u.yr, u.uas / u.yr),
    "pmdec_error": (u.mas / u.yr, u.arcsec / u.yr),
    "radial_velocity_error": (u.km / u.s, u.m / u.s),
}

def _floats(low, high):
    return st.floats(low, high, allow_subnormal=False)


# a moving star (|v_r| >= 1 km/s: perierr refuses a star at rest) with a measured parallax
star_values = st.fixed_dictionaries(
    {
        "ra": _floats(0.0, 359.9),
        "dec": _floats(-89.0, 89.0),
        "parallax": _floats(1.0, 500.0),
        "pmra": _floats(-500.0, 500.0),
        "pmdec": _floats(-500.0, 500.0),
        "radial_velocity": st.one_of(_floats(-150.0, -1.0), _floats(1.0, 150.0)),
        "ra_error": _floats(0.0, 1.0),
        "dec_error": _floats(0.0, 1.0),
        "parallax_error": _floats(0.01, 0.15),
        "pmra_error": _floats(0.01, 1.0),
        "pmdec_error": _floats(0.01, 1.0),
        "radial_velocity_error": _floats(0.1, 5.0),
        "parallax_pmra_corr": _floats(-0.5, 0.5),
    }
)


def _given_in(values, choice, as_text):
    """The same star with each field given in the chosen unit, as a Quantity or as text."""
    out = dict(values)
    for name, k in choice.items():
        q = (values[name] * pu.FIELD_UNITS[name]).to(UNIT_CHOICES[name][k])
        out[name] = f"{float(q.value)!r} {q.unit.to_string()}" if as_text else q
    return out


def _star(fields):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", perierr.PerierrWarning)
        return ObservedStar.from_mapping(fields)


@settings(max_examples=60, deadline=None)
@given(
    values=star_values,
    choice=st.fixed_dictionaries({name: st.integers(0, len(c) - 1) for name, c in UNIT_CHOICES.items()}),
    as_text=st.booleans(),
)
def test_the_star_does_not_depend_on_the_units_of_its_input(values, choice, as_text):
    # astropy.units converts each field; the star (internal units) must be the same within a few roundings
    reference = _star(values)
    other = _star(_given_in(values, choice, as_text))
    assert_allclose(other.mean, reference.mean, rtol=1e-12, atol=0)
    assert_allclose(other.cov, reference.cov, rtol=1e-12, atol=0)


@pytest.mark.parametrize("choice", [dict(parallax=1, pmra=1, radial_velocity=1), dict(parallax=2, pmdec=2, ra_error=2)])
def test_the_analysis_does_not_depend_on_the_units_of_its_input(choice):
    # same seed, same star in other units (astropy conversions): the same linear and Monte Carlo results.
    # The inputs agree to ~1e-16; d_ph = 0.09 pc of a star at 21 pc is a difference of nearly equal
    # vectors, which amplifies that by |x| / d_ph ~ 230 (and its sigma more), hence 1e-10 for the linear
    # results. The Monte Carlo goes through the orbit model's leaf maps, whose cuts and training draws may
    # differ with the last bit of the draws: the quantiles then agree to the maps' accuracy (well within the
    # 0.5 au tolerance of the OrbitModel docstring), 1e-6 relative here.
    values = dict(
        ra=201.37, dec=-27.62, parallax=48.0, parallax_error=0.03, pmra=0.71, pmra_error=0.035, pmdec=-1.2,
        pmdec_error=0.03, radial_velocity=-31.2, radial_velocity_error=0.6, ra_error=0.02, dec_error=0.02,
    )
    a = perierr.analyze(_star(values), n_samples=4000, seed=5)
    b = perierr.analyze(_star(_given_in(values, choice, as_text=False)), n_samples=4000, seed=5)
    assert_allclose(b.linear.value, a.linear.value, rtol=1e-10, atol=0)
    assert_allclose(b.linear.sigma, a.linear.sigma, rtol=1e-10, atol=0)
    for q in pu.OUTPUTS:
        sa, sb = a.monte_carlo.summaries[q], b.monte_carlo.summaries[q]
        assert_allclose([sb.quantiles[lv] for lv in (0.05, 0.5, 0.95)], [sa.quantiles[lv] for lv in (0.05, 0.5, 0.95)],
                        rtol=1e-6, atol=0)
