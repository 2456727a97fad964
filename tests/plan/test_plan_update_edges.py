"""Edge cases of the what-if covariance update (perierr.plan.update), written to kill surviving mutants.

Every expected value is computed here independently of the package: unit conversions from the definitions
(1 deg = 3.6e6 mas; an ra error is quoted on alpha* = alpha cos(dec)), the Gaussian measurement update
Sigma' = Sigma - Sigma e_i e_i^T Sigma / (Sigma_ii + s^2) (Kalman 1960; Bar-Shalom, Li & Kirubarajan 2001,
Sect. 5.2) evaluated with plain numpy, and the inverse-variance combination 1/sigma'^2 = 1/sigma^2 + 1/s^2.
All stars are invented.
"""

import math
import warnings

import numpy as np
import pytest

from perierr.errors import InputError
from perierr.plan.update import make_measurement, parse_measure, to_catalogue, update_covariance, updated_star
from perierr.star import ObservedStar

MAS_PER_DEG = 3600.0 * 1000.0  # definition of the arcsecond and milliarcsecond


def invented_star(**meta):
    """An invented star (not a real object) with a full covariance, internal units (deg for ra/dec)."""
    sig = np.array([0.03 / MAS_PER_DEG, 0.02 / MAS_PER_DEG, 0.04, 0.05, 0.06, 0.8])
    corr = np.eye(6)
    corr[0, 2] = corr[2, 0] = 0.5
    corr[2, 3] = corr[3, 2] = -0.4
    corr[3, 4] = corr[4, 3] = 0.2
    return ObservedStar(np.array([80.0, 35.0, 25.0, 3.0, 1.0, -25.0]), corr * np.outer(sig, sig), **meta)


# --- make_measurement / parse_measure / to_catalogue: unit conversions ---------------------------------------


def test_ra_precision_default_declination_is_the_equator():
    # at dec = 0, cos(dec) = 1: 36 mas of alpha* is 36 / 3.6e6 deg of alpha (definition of the mas)
    assert make_measurement("ra", 36.0).precision == pytest.approx(1e-5, rel=1e-14)
    assert parse_measure("ra=36").precision == pytest.approx(1e-5, rel=1e-14)
    # and back: 1e-5 deg of alpha at the equator is 36 mas of alpha*
    assert float(to_catalogue("ra", 1e-5)) == pytest.approx(36.0, rel=1e-14)


def test_ra_precision_at_a_given_declination():
    # alpha* = alpha cos(dec): at dec = 60 deg, cos = 1/2, so 36 mas of alpha* is 2e-5 deg of alpha
    assert parse_measure("ra=36", dec=60.0).precision == pytest.approx(2e-5, rel=1e-12)
    assert make_measurement("ra", 36.0, dec=60.0).precision == pytest.approx(2e-5, rel=1e-12)
    assert float(to_catalogue("ra", 2e-5, dec=60.0)) == pytest.approx(36.0, rel=1e-12)


def test_dec_precision_is_converted_from_mas_to_degrees_and_back():
    # 1 deg = 3.6e6 mas (definition); dec needs no cos factor
    m = make_measurement("dec", 18.0, dec=45.0)
    assert m.precision == pytest.approx(18.0 / MAS_PER_DEG, rel=1e-14)
    assert m.value == 18.0 and m.unit == "mas"
    assert float(to_catalogue("dec", 5e-6, dec=45.0)) == pytest.approx(18.0, rel=1e-14)
    assert float(to_catalogue("dec", 5e-6)) == pytest.approx(18.0, rel=1e-14)


def test_bare_number_text_is_read_in_the_catalogue_unit():
    # documented: "--measure radial_velocity=0.1" (text without a unit) is in the catalogue unit
    assert make_measurement("radial_velocity", "0.1").precision == pytest.approx(0.1, rel=1e-15)
    assert parse_measure("rv=0.25").precision == pytest.approx(0.25, rel=1e-15)
    assert parse_measure("parallax=0.02").precision == pytest.approx(0.02, rel=1e-15)
    # a unit in the text is converted: 20 uas = 0.02 mas (SI prefixes)
    assert parse_measure("parallax=20 uas").precision == pytest.approx(0.02, rel=1e-12)


def test_zero_precision_means_exact_and_is_accepted():
    # documented: s = 0 makes the input exactly known
    m = make_measurement("parallax", 0.0)
    assert m.precision == 0.0
    new = update_covariance(np.diag([4.0, 9.0]), 1, m.precision)
    # conditioning a Gaussian on an exact value of input 1 leaves zero variance there (closed form)
    np.testing.assert_allclose(new, np.diag([4.0, 0.0]), rtol=0, atol=0)


def test_bad_precision_text_names_the_precision_field():
    with pytest.raises(InputError) as info:
        make_measurement("pmdec", "fast")
    assert info.value.field == "pmdec precision"


def test_second_equals_sign_belongs_to_the_precision():
    # INPUT=PRECISION: the input is what precedes the first "=", so the fault is in the precision text
    with pytest.raises(InputError) as info:
        parse_measure("parallax=0.02=0.03")
    assert info.value.field == "parallax precision"


# --- update_covariance -----------------------------------------------------------------------------------------


@pytest.mark.parametrize("bad", [np.nan, np.inf, [0.1, np.nan]])
def test_non_finite_precision_is_refused(bad):
    with pytest.raises(InputError):
        update_covariance(np.diag([1.0, 2.0]), 0, bad)


def test_exact_input_measured_exactly_leaves_covariance_unchanged_and_warns_nothing():
    # ra held exact (variance 0) with a covariance at rounding level, which the star's validator accepts;
    # re-measuring an exactly known input brings no information: nothing to update (documented convention)
    cov = np.array(invented_star().cov)
    cov[0, :] = cov[:, 0] = 0.0
    cov[0, 2] = cov[2, 0] = 1e-6 * math.sqrt(cov[2, 2])
    star = ObservedStar(invented_star().mean, cov)  # accepted as positive semi-definite within tolerance
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        new = update_covariance(star.cov, 0, 0.0)
        batch = update_covariance(star.cov, 0, [0.0, 0.0])
    np.testing.assert_array_equal(new, star.cov)
    np.testing.assert_array_equal(batch, np.stack([star.cov, star.cov]))


def _kalman(cov, i, s):
    """Textbook measurement update, written out element by element (independent of the package)."""
    k = cov.shape[0]
    out = np.empty_like(cov)
    d = cov[i, i] + s * s
    for a in range(k):
        for b in range(k):
            out[a, b] = cov[a, b] - cov[a, i] * cov[i, b] / d
    return out


@pytest.mark.parametrize("batched", [False, True])
def test_output_is_symmetric_even_for_a_rounding_level_asymmetric_input(batched):
    rng = np.random.default_rng(1607)
    a = rng.normal(size=(4, 4))
    cov = a @ a.T + 4 * np.eye(4)
    noisy = cov.copy()
    noisy[0, 3] *= 1 + 1e-12  # asymmetry at rounding level, as left by a product of matrices
    s = [0.5, 2.0] if batched else 0.5
    out = update_covariance(noisy, 2, s)
    outs = out if batched else out[None]
    for o, si in zip(outs, np.atleast_1d(s)):
        # a covariance matrix is symmetric by definition
        np.testing.assert_array_equal(o, o.T)
        # and it is the Kalman update of the symmetric part, to rounding
        np.testing.assert_allclose(o, _kalman(0.5 * (noisy + noisy.T), 2, si), rtol=1e-12, atol=1e-13)


# --- updated_star -------------------------------------------------------------------------------------------------


def test_updated_star_keeps_identity_and_records_every_measurement():
    star = invented_star(name="Invented-7", source_id="42", ref_epoch=2016.0, mass=0.8, mass_error=0.05,
                         cautions=("parallax zero point applied",))
    ms = [make_measurement("radial_velocity", 0.1), make_measurement("parallax", 0.02)]
    new = updated_star(star, ms)
    assert (new.name, new.source_id, new.ref_epoch, new.mass, new.mass_error) == ("Invented-7", "42", 2016.0,
                                                                                   0.8, 0.05)
    assert new.notes == ("parallax zero point applied",
                         "what-if: radial_velocity to 0.1 km/s, parallax to 0.02 mas")
    np.testing.assert_array_equal(new.mean, star.mean)
    # two independent measurements applied in turn: inverse-variance combination per input (Taylor 1997, 7.2)
    # rv is uncorrelated with the rest, so its variance is 1/(1/0.8^2 + 1/0.1^2)
    assert new.cov[5, 5] == pytest.approx(1 / (1 / 0.8**2 + 1 / 0.1**2), rel=1e-12)
    np.testing.assert_allclose(new.cov, _kalman(_kalman(np.array(star.cov), 5, 0.1), 2, 0.02), rtol=1e-10,
                               atol=1e-30)


def test_a_stack_of_covariances_is_refused_not_sliced_wrongly():
    # the update takes one (k, k) matrix: s[:, i] of a (K, k, k) stack would be a row of matrices, not a column
    import numpy as np
    import pytest

    from perierr.errors import InputError
    from perierr.plan.update import update_covariance

    with pytest.raises(InputError, match="one square covariance"):
        update_covariance(np.stack([np.eye(6)] * 3), 2, 0.1)
    with pytest.raises(InputError, match="one square covariance"):
        update_covariance(np.eye(6)[:5], 2, 0.1)
    # one matrix: the inverse-variance combination 1/s'^2 = 1/1 + 1/0.5^2 (any estimation textbook)
    assert update_covariance(np.eye(6), 2, 0.5)[2, 2] == pytest.approx(1 / (1 + 4), rel=1e-12)


def test_the_updated_star_keeps_its_photometry():
    # the what-if changes the covariance only: the magnitude, its error and band stay the star's (a cost model reads
    # them after the update)
    import numpy as np

    from perierr import ObservedStar
    from perierr.plan.update import make_measurement, updated_star

    star = ObservedStar.from_values(ra=45.0, dec=20.0, parallax=50.0, parallax_error=0.05, pmra=10.0, pmra_error=0.05,
                                    pmdec=5.0, pmdec_error=0.05, radial_velocity=-30.0, radial_velocity_error=0.5,
                                    mag=9.3, mag_error=0.02, mag_band="V", name="bright (invented)")  # fmt: skip
    new = updated_star(star, [make_measurement("radial_velocity", 0.1, dec=20.0)])
    assert (new.magnitude, new.magnitude_error, new.magnitude_band) == (9.3, 0.02, "V")
    assert new.cov[5, 5] < star.cov[5, 5] and np.array_equal(new.mean, star.mean)
