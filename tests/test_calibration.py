"""Parallax zero-point and error inflation: applied first, recorded, own budget share."""

import json
import warnings

import astropy.units as u
import numpy as np
import pytest

from perierr import ObservedStar, analyze
from perierr.calibration import Calibration, parse_inflation, parse_offset
from perierr.errors import InputError, PerierrWarning
from perierr.models import StraightLine
from perierr.priors import ExponentialDensity, posterior_samples
from tests.sampling.test_priors_sampling import LEVELS, quadrature_quantiles


def invented(plx=4.0, eplx=0.05, **extra):
    """An invented star with independent errors."""
    fields = dict(name="invented", ra=45.0, dec=12.0, parallax=plx, parallax_error=eplx, pmra=20.0,
                  pmra_error=0.05, pmdec=-8.0, pmdec_error=0.05, radial_velocity=-40.0,
                  radial_velocity_error=0.4, ra_error=0.02, dec_error=0.02)
    fields.update(extra)
    return ObservedStar.from_values(**fields)


@pytest.mark.parametrize(
    "value, expected",
    [
        (-0.017, (-0.017, 0.0)),
        ((-0.017, 0.005), (-0.017, 0.005)),
        (-17 * u.uas, (-0.017, 0.0)),
        ("-0.017,0.005", (-0.017, 0.005)),
        ("-0.017+-0.005 mas", (-0.017, 0.005)),
        ("-17±5 uas", (-0.017, 0.005)),
        (None, (0.0, 0.0)),
    ],
)
def test_parse_offset(value, expected):
    # astropy.units: 1 uas = 1e-3 mas
    got = parse_offset(value)
    assert got == pytest.approx(expected, abs=1e-15)


@pytest.mark.parametrize(
    "value, match",
    [
        ("a,b", "expected numbers in mas"),
        ("1,2,3", "expected VALUE or VALUE,ERROR"),
        ((0.1, -0.01), "parallax_offset_error = -0.01: expected an error >= 0"),
        ("1 km", "expected a parallax in mas"),
        ((1, 2, 3), "expected \\(value, error\\)"),
    ],
)
def test_parse_offset_errors(value, match):
    with pytest.raises(InputError, match=match):
        parse_offset(value)


def test_parse_inflation_forms_and_errors():
    # identity checks of the accepted forms (no outside source needed)
    assert parse_inflation("parallax=1.1,pmra_error=1.05") == {"parallax": 1.1, "pmra": 1.05}
    assert parse_inflation(1.2) == dict.fromkeys(("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity"), 1.2)
    assert parse_inflation("1.3")["radial_velocity"] == 1.3
    with pytest.raises(InputError, match="unknown input; expected one of ra, dec, parallax"):
        parse_inflation({"plx": 1.1})
    with pytest.raises(InputError, match="expected a positive, finite factor"):
        parse_inflation({"parallax": -1})
    with pytest.raises(InputError, match="expected name=factor pairs"):
        parse_inflation("parallax=1.1,pmra")
    with pytest.raises(InputError, match="expected a positive number"):
        parse_inflation({"parallax": "big"})


def test_zero_point_is_subtracted_and_its_error_added_in_quadrature():
    # Lindegren et al. 2021, A&A 649, A4: corrected parallax = parallax - Z
    star = invented(plx=1.0, eplx=0.03)
    cal = Calibration.from_user((-0.02, 0.01), {"parallax": 1.5, "pmra": 2.0})
    out = cal.apply(star)
    assert out.mean[2] == pytest.approx(1.02, abs=1e-14)
    assert out.sigma[2] == pytest.approx(np.hypot(1.5 * 0.03, 0.01), rel=1e-12)
    assert out.sigma[3] == pytest.approx(0.10, rel=1e-12)
    assert out.sigma[4] == pytest.approx(0.05, rel=1e-12)
    assert any("zero-point of -0.02" in n for n in out.notes)
    assert any("pmra error inflated by a factor 2" in n for n in out.notes)
    assert Calibration().apply(star) is star


def test_inflation_keeps_correlations():
    # D Sigma D leaves correlation coefficients unchanged (common practice, no source)
    star = invented(parallax_pmra_corr=0.4)
    out = Calibration.from_user(None, {"parallax": 2.0}).apply(star)
    corr = out.cov[2, 3] / (out.sigma[2] * out.sigma[3])
    assert corr == pytest.approx(0.4, abs=1e-12)


def test_zero_point_budget_share_is_its_variance_fraction():
    # independent inputs: Shapley share = J_i^2 sigma_i^2 / Var (Song, Nelson & Staum 2016, SIAM/ASA JUQ 4, 1060),
    # and d/dZ = -d/dparallax, so share(Z) / share(parallax) = sigma_Z^2 / sigma_parallax^2
    star = invented(plx=4.0, eplx=0.05)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        a = analyze(star, n_samples=20_000, seed=2, parallax_offset=(0.0, 0.03), error_inflation={"parallax": 1.2})
    b = a.budget
    assert b.inputs[-1] == "parallax_zero_point"
    for q in ("time_myr", "distance_pc", "speed_kms"):
        share = b.share(q)
        assert sum(share.values()) == pytest.approx(1.0, abs=1e-12)
        assert share["parallax_zero_point"] / share["parallax"] == pytest.approx(0.03**2 / (1.2 * 0.05) ** 2, rel=1e-9)
    # linear variance with the zero-point as its own input equals J Sigma' J^T of the calibrated star
    assert b.variance == pytest.approx(np.diag(a.linear.cov), rel=1e-12)
    doc = json.loads(json.dumps(a.to_dict()))
    assert doc["calibration"]["parallax_zero_point"] == {
        "value_mas": 0.0, "error_mas": 0.03,
        "convention": "corrected parallax = catalogue parallax - zero point",
    }
    assert doc["calibration"]["error_inflation"]["parallax"] == 1.2
    assert "parallax_zero_point" in doc["budget"]["distance_pc"]


def test_calibration_recorded_in_every_output_even_when_unused():
    # the JSON contract: factors of 1 and a zero-point of 0 are still written
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        doc = analyze(invented(), n_samples=1000, seed=1).to_dict()
    assert doc["calibration"]["parallax_zero_point"]["value_mas"] == 0.0
    assert set(doc["calibration"]["error_inflation"].values()) == {1.0}
    assert "parallax_zero_point" not in doc["budget"]["distance_pc"]


def test_zero_point_applied_before_the_prior():
    # posterior under EDSD for the corrected parallax and the combined error; reference by scipy.integrate
    # quadrature (Bailer-Jones 2015, PASP 127, 994, eq. 2 x eq. 18)
    star = invented(plx=-0.01, eplx=0.02)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        a = analyze(star, model=StraightLine(), n_samples=100_000, seed=4, distance_prior=ExponentialDensity(5000.0),
                    parallax_offset=(-0.06, 0.01))
    assert a.star.mean[2] == pytest.approx(0.05, abs=1e-14)
    ref = quadrature_quantiles(ExponentialDensity(5000.0), 0.05, np.hypot(0.02, 0.01))
    s = posterior_samples(a.star, ExponentialDensity(5000.0), n=100_000, seed=4)
    assert s.method == a.prior.method
    from perierr.summary import summarize

    d = summarize(1000.0 / s.values[:, 2], levels=LEVELS, weights=s.weights)
    for lev, r in zip(LEVELS, ref):
        assert abs(d.quantiles[lev] - r) < 4 * d.quantile_se[lev] + 1e-3 * r


def test_deflation_warns():
    with pytest.warns(PerierrWarning, match="shrink the errors of parallax"):
        Calibration.from_user(None, {"parallax": 0.5}).apply(invented())
