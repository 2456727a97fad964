"""Magnitudes as star inputs: read from star files and table rows, refused when wrong, carried through rebuilds."""

import math
import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.table import MaskedColumn, Table

from perierr import ObservedStar, analyze
from perierr.errors import InputError, PerierrWarning
from perierr.plan import make_measurement, updated_star, what_if
from perierr.plan.whatif import prepare
from perierr.star import read_catalogue, read_star_file

BASE = dict(
    name="invented magnitude star", source_id="INV-M1", ra=120.5, dec=-10.25, parallax=40.0, parallax_error=0.04,
    pmra=1.5, pmra_error=0.05, pmdec=-2.0, pmdec_error=0.05, radial_velocity=-30.0, radial_velocity_error=0.5,
)


def _toml(path, extra):
    lines = [f"{k} = {v!r}" if isinstance(v, str) else f"{k} = {v}" for k, v in {**BASE, **extra}.items()]
    path.write_text("\n".join(lines).replace("'", '"') + "\n", encoding="utf-8")
    return path


def test_gaia_g_magnitude_from_a_star_file(tmp_path):
    star = read_star_file(_toml(tmp_path / "s.toml", {"phot_g_mean_mag": 9.25, "phot_g_mean_mag_error": 0.003}))
    assert star.magnitude == pytest.approx(9.25, abs=1e-12)
    assert star.magnitude_error == pytest.approx(0.003, abs=1e-12)
    assert star.magnitude_band == "G"  # the catalogue's G band (common practice, no source)


def test_generic_magnitude_with_band_and_units():
    # astropy converts 9500 mmag to 9.5 mag (the reference for the unit handling)
    expected = (9500 * u.mmag).to_value(u.mag)
    star = ObservedStar.from_values(**BASE, mag=9500 * u.mmag, mag_error="0.02 mag", mag_band=" V ")
    assert star.magnitude == pytest.approx(expected, abs=1e-12)
    assert star.magnitude_error == pytest.approx(0.02, abs=1e-12)
    assert star.magnitude_band == "V"
    doc = star.to_dict()
    assert doc["magnitude"] == pytest.approx(9.5, abs=1e-12) and doc["magnitude_band"] == "V"
    assert doc["magnitude_error"] == pytest.approx(0.02, abs=1e-12)


def test_a_star_without_magnitude_keeps_its_inputs_block():
    star = ObservedStar.from_values(**BASE)
    assert star.magnitude is None and star.magnitude_band is None
    assert "magnitude" not in star.to_dict()  # the JSON contract of stars without photometry is unchanged
    assert star.to_dict()["parallax"] == pytest.approx(40.0, abs=1e-12)


@pytest.mark.parametrize(
    "extra, field",
    [
        ({"phot_g_mean_mag": 31.0}, "phot_g_mean_mag"),
        ({"mag": -5.5, "mag_band": "V"}, "mag"),
        ({"mag": math.inf}, "mag"),
        ({"mag": math.nan}, "mag"),
        ({"mag": 9.0, "mag_error": -0.1}, "mag_error"),
        ({"phot_g_mean_mag": 9.0, "phot_g_mean_mag_error": math.inf}, "phot_g_mean_mag_error"),
        ({"mag_error": 0.1}, "mag_error"),
        ({"mag_band": "V"}, "mag_band"),
        ({"mag": "bright"}, "mag"),
    ],
)
def test_bad_magnitudes_are_refused_naming_the_field(extra, field):
    with pytest.raises(InputError) as err:
        ObservedStar.from_values(**BASE, **extra)
    assert err.value.field == field
    assert "expected" in str(err.value) and field in str(err.value)


def test_both_forms_at_once_are_refused():
    with pytest.raises(InputError, match="not both") as err:
        ObservedStar.from_values(**BASE, phot_g_mean_mag=9.0, mag=9.3, mag_band="V")
    assert err.value.field in ("mag", "phot_g_mean_mag")


def test_the_range_ends_are_accepted():
    lo = ObservedStar.from_values(**BASE, mag=-5.0)
    hi = ObservedStar.from_values(**BASE, phot_g_mean_mag=30.0)
    assert (lo.magnitude, hi.magnitude) == (-5.0, 30.0)


def test_table_rows_read_magnitudes_with_units_and_masks():
    t = Table({k: [v, v] for k, v in BASE.items()})
    t["name"] = ["a", "b"]
    t["phot_g_mean_mag"] = MaskedColumn([11.2, 0.0], mask=[False, True], unit="mag")
    a, b = read_catalogue(t)
    assert a.magnitude == pytest.approx(11.2, abs=1e-12) and a.magnitude_band == "G"
    assert b.magnitude is None  # a masked cell is missing, never 0 mag


def test_table_row_with_a_bad_magnitude_keeps_the_star_and_names_the_row():
    t = Table({k: [v] for k, v in BASE.items()})
    t["mag"] = [45.0]
    with pytest.warns(PerierrWarning, match="row 0: mag = 45"):
        (star,) = read_catalogue(t)
    assert star.magnitude is None and star.magnitude_band is None
    assert star.mean[2] == pytest.approx(40.0, abs=1e-12)  # the astrometry is read as given
    (drop,) = [c for c in star.cautions if c.code == "magnitude-dropped"]
    assert drop.severity == "caution" and drop.subject == "mag" and drop.row == 0


def test_read_catalogue_reads_every_row_past_a_sentinel_magnitude():
    # a sentinel 99 mag on one row: propagation never uses magnitudes, so every row is read
    t = Table({k: [v] * 3 for k, v in BASE.items()})
    t["name"] = ["a", "b", "c"]
    t["phot_g_mean_mag"] = [9.5, 99.0, 11.25]
    with pytest.warns(PerierrWarning, match="row 1: phot_g_mean_mag = 99"):
        stars = read_catalogue(t)
    assert [s.name for s in stars] == ["a", "b", "c"]
    assert stars[0].magnitude == pytest.approx(9.5, abs=1e-12) and stars[2].magnitude == pytest.approx(11.25, abs=1e-12)
    assert stars[1].magnitude is None
    assert [c.row for c in stars[1].cautions if c.code == "magnitude-dropped"] == [1]
    assert not any(c.code == "magnitude-dropped" for s in (stars[0], stars[2]) for c in s.cautions)


def test_a_masked_magnitude_beside_its_band_is_dropped_with_a_note():
    t = Table({k: [v, v] for k, v in BASE.items()})
    t["name"] = ["kept", "also kept"]
    t["mag"] = MaskedColumn([10.5, 0.0], mask=[False, True])
    t["mag_band"] = ["V", "V"]
    a, b = read_catalogue(t)
    assert a.magnitude == pytest.approx(10.5, abs=1e-12) and a.magnitude_band == "V"
    assert b.magnitude is None and b.magnitude_band is None
    (drop,) = [c for c in b.cautions if c.code == "magnitude-dropped"]
    assert drop.severity == "note" and drop.row == 1 and "mag_band given without its magnitude" in str(drop)


@pytest.mark.parametrize(
    "extra, field",
    [({"mag_band": "V"}, "mag_band"), ({"mag": 99.0, "mag_band": "V"}, "mag"),
     ({"phot_g_mean_mag": 9.0, "mag": 9.3}, "mag"), ({"phot_g_mean_mag_error": 0.01}, "phot_g_mean_mag_error")],
)
def test_non_strict_mappings_drop_the_magnitude_strict_ones_refuse_it(extra, field):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        star = ObservedStar.from_mapping({**BASE, **extra}, strict=False)
    assert star.magnitude is None and star.sigma[5] == pytest.approx(0.5, abs=1e-12)
    assert [c.subject for c in star.cautions if c.code == "magnitude-dropped"] == [field]
    with pytest.raises(InputError) as err:
        ObservedStar.from_mapping({**BASE, **extra})
    assert err.value.field == field


def _star():
    return ObservedStar.from_values(**BASE, mag=10.4, mag_error=0.05, mag_band="V")


def test_updated_star_carries_the_magnitude():
    star = _star()
    new = updated_star(star, [make_measurement("radial_velocity", 0.1)])
    assert (new.magnitude, new.magnitude_error, new.magnitude_band) == (10.4, 0.05, "V")
    # the Kalman update of the rv variance (inverse-variance combination, Kalman 1960)
    assert new.sigma[5] == pytest.approx(1 / math.sqrt(1 / 0.5**2 + 1 / 0.1**2), rel=1e-12)


def test_calibration_keeps_the_magnitude_in_analyze_and_the_planner():
    star = _star()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = analyze(star, model="straight_line", n_samples=1000, seed=1, parallax_offset="-0.02,0.01",
                         compare=False)
    assert result.star.magnitude == 10.4 and result.star.magnitude_band == "V"
    assert result.star.mean[2] == pytest.approx(40.02, abs=1e-12)  # the zero-point was applied (plx - Z)
    calibrated, _, _ = prepare(star, "straight_line", parallax_offset="-0.02,0.01", error_inflation=1.1)
    assert calibrated.magnitude == 10.4 and calibrated.magnitude_error == 0.05
    assert calibrated.sigma[2] == pytest.approx(math.hypot(0.04 * 1.1, 0.01), rel=1e-12)
    w = what_if(star, "straight_line", [make_measurement("parallax", 0.01)], n=1000, seed=2,
                parallax_offset="-0.02,0.01")
    assert w.current.magnitude == 10.4 and w.improved.magnitude_band == "V"
    assert np.isfinite(w.width90()[1])
