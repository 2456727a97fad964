"""Catalogue runs carry each star's encounter effects (``enc_*`` columns); a bad mass or magnitude loses no row.

Every catalogue here is invented (:mod:`perierr.catalogue.invented`, the fictional Kestrel wide-field survey),
with planted faults in the mass and photometry columns. References outside the catalogue code: the single-star
API (:func:`perierr.analyze`, itself checked against outside references in ``tests/test_encounter*.py``),
astropy's distance modulus and unit algebra, and the ``uncertainties`` package for the magnitude error.
"""

from __future__ import annotations

import math
import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import Distance
from astropy.table import MaskedColumn, Table
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_array_equal

import perierr
from perierr.catalogue.columns import column_map
from perierr.catalogue.invented import invented_catalogue
from perierr.catalogue.reader import open_catalogue, read_row
from perierr.catalogue.runner import run_catalogue
from perierr.catalogue.treatment import TreatmentOptions, star_seed, treat_rows, treatment_columns
from perierr.cautions import SHOWER
from perierr.errors import InputError, PerierrWarning
from perierr.star import ObservedStar
from perierr.units import ENCOUNTER_LABELS

N_ROWS = 24
DRAWS = 1000
RUN_SEED = 5
FAST = TreatmentOptions(model="straight_line", n_samples=DRAWS)
ENCOUNTER_INPUTS = ("mass", "mass_error", "phot_g_mean_mag", "phot_g_mean_flux_over_error")
#: rows given faults in the encounter inputs (the planted table below)
SENTINEL, MASKED_G, TEXT_G, NO_MASS, TEXT_MASS, BAD_RATIO, EXACT = 2, 3, 4, 5, 6, 7, 8


def planted_table() -> Table:
    """An invented table with every encounter-input fault on a known row; every row comes near the Sun."""
    table, expected = invented_catalogue(N_ROWS, seed=17, close=1.0, bad_mass=0)
    assert (expected == "ok").all()
    for name in ENCOUNTER_INPUTS:  # every row gets a mass and a magnitude first, then the planted faults
        table[name] = MaskedColumn(np.ma.getdata(table[name]), mask=np.zeros(N_ROWS, dtype=bool))
    table["mass"][0] = -1.0  # a sentinel mass
    table["mass_error"][1] = -0.2  # a mass with an impossible error
    table["phot_g_mean_mag"][SENTINEL] = 99.0  # a failed photometric solution
    table["phot_g_mean_mag"].mask[MASKED_G] = True
    table["mass"].mask[NO_MASS] = True
    table["mass_error"].mask[NO_MASS] = True
    table["phot_g_mean_flux_over_error"][BAD_RATIO] = -4.0
    # row EXACT: parallax and magnitude held exact (no error of either), small motion errors: the distance-modulus
    # check (the draws of d_ph close together, so that quantiles of a function of d_ph are that function of them)
    table["parallax_error"][EXACT] = 0.0
    for name in ("pmra_error", "pmdec_error", "radial_velocity_error"):
        table[name][EXACT] = 1e-3
    table["phot_g_mean_flux_over_error"].mask[EXACT] = True
    return table


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """The planted catalogue as CSV (with text in two cells) and without its encounter columns, both run."""
    tmp = tmp_path_factory.mktemp("encounter")
    table = planted_table()
    path = tmp / "kestrel_planted.csv"
    table.write(path, format="ascii.csv")
    lines = path.read_text().splitlines()
    header = lines[0].split(",")
    for row, name in ((TEXT_G, "phot_g_mean_mag"), (TEXT_MASS, "mass")):  # invented damage: text in a number cell
        cells = lines[row + 1].split(",")
        cells[header.index(name)] = "n/a?"
        lines[row + 1] = ",".join(cells)
    path.write_text("\n".join(lines) + "\n")
    bare = tmp / "kestrel_astrometry.parquet"
    table.copy()[[c for c in table.colnames if c not in ENCOUNTER_INPUTS]].write(bare)
    full = run_catalogue(path, tmp / "full", cut="none", treatment=FAST, seed=RUN_SEED)
    astro = run_catalogue(bare, tmp / "bare", cut="none", treatment=FAST, seed=RUN_SEED)
    return table, full, astro


def _text(column) -> np.ndarray:
    """A text column as str ('' for an empty cell, which an ECSV file reads back as masked)."""
    return np.asarray(column.filled("") if hasattr(column, "filled") else column).astype(str)


def _enc_numbers(res) -> list:
    return [c for c in res.colnames if c.startswith("enc_") and res[c].dtype.kind == "f"]


def test_each_row_equals_the_single_star_api_with_its_own_seed(runs):
    table, full, _ = runs
    res = Table.read(full.results[0])
    assert (np.asarray(res["status"]) == "treated").all()
    checked = 0
    for i in range(N_ROWS):
        if i in (0, 1, SENTINEL, MASKED_G, TEXT_G, NO_MASS, TEXT_MASS, BAD_RATIO):
            continue
        data = {k: table[k][i] for k in table.colnames if k != "phot_g_mean_flux_over_error"}
        ratio = table["phot_g_mean_flux_over_error"][i]
        if not np.ma.is_masked(ratio):  # sigma_G = 2.5 / ln(10) / (flux / error): first-order m = -2.5 log10 F
            data["phot_g_mean_mag_error"] = 2.5 / math.log(10.0) / float(ratio)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PerierrWarning)
            star = ObservedStar.from_mapping(data, row=i, strict=False)
            one = perierr.analyze(star, model="straight_line", n_samples=DRAWS, compare=False,
                                  seed=star_seed(RUN_SEED, table["source_id"][i]))  # fmt: skip
        enc = one.encounter
        assert star.mass is not None and star.magnitude is not None
        for name, word, tag in (("sun_impulse", "sun_impulse", "ms"), ("peak_magnitude", "peak_magnitude", "mag"),
                                ("strength_m_vd2", "strength_m_vd2", "msun_per_kms_pc2"),
                                ("peak_proper_motion", "peak_proper_motion", "arcsecyr"),
                                ("comet_impulse:20000 au", "comet_impulse_20000au", "ms")):  # fmt: skip
            s = enc.summaries[name]
            for q, value in (("median", s.median), ("q05", s.quantile(0.05)), ("q95", s.quantile(0.95))):
                got = res[f"enc_{word}_{q}_{tag}"][i]
                assert got == pytest.approx(value, rel=1e-12, abs=0), (i, name, q)  # same seed, same draws
        for t, tag in zip(enc.inside, ("20000au", "100000au")):
            assert res[f"enc_p_inside_{tag}"][i] == pytest.approx(t.probability, rel=1e-12, abs=1e-15)
            assert res[f"enc_p_inside_{tag}_se"][i] == pytest.approx(t.se, rel=1e-12, abs=1e-15)
        assert res["enc_sun_impulse_dominant_input"][i] == enc.budget.dominant("sun_impulse")
        assert res["enc_peak_magnitude_dominant_input"][i] == enc.budget.dominant("peak_magnitude")
        assert _text(res["enc_missing"])[i] == ""
        checked += 1
    assert checked >= 10


def test_peak_magnitude_is_the_distance_modulus_of_the_perihelion(runs):
    table, full, _ = runs
    res = Table.read(full.results[0])
    i = EXACT  # parallax and magnitude held exact: the peak magnitude is a monotone function of d_ph alone
    g, plx = float(table["phot_g_mean_mag"][i]), float(table["parallax"][i])
    for q in ("median", "q05", "q95"):
        d_ph = res[f"mc_distance_{q}_pc"][i]
        # astropy's distance modulus: m_peak = m_now + mu(d_ph) - mu(1/parallax)
        want = g + (Distance(d_ph * u.pc).distmod - Distance(parallax=plx * u.mas).distmod).to_value(u.mag)
        # 1e-6 mag: Hazen quantiles interpolate between adjacent draws, and 5 log10 bends between them (about
        # 1e-9 mag here); a slip of a factor 1000 in a distance would be 15 mag
        assert res[f"enc_peak_magnitude_{q}_mag"][i] == pytest.approx(want, abs=1e-6), q
    assert res["enc_peak_magnitude_q05_mag"][i] < res["enc_peak_magnitude_q95_mag"][i]
    assert "held-exact" in res["cautions"][i]  # the magnitude without an error is said to be held exact


def test_rows_without_a_mass_or_magnitude_keep_their_perihelion_and_say_why(runs):
    _, full, astro = runs
    res, bare = Table.read(full.results[0]), Table.read(astro.results[0])
    assert_array_equal(res["status"], bare["status"])  # no encounter input changes a row's status
    for name in bare.colnames:  # the astrometric results: exactly those of the run without the inputs
        if name.startswith(("mc_", "share_", "screen_")) or name in ("seed", "dominant_input"):
            x, y = np.asarray(res[name]), np.asarray(bare[name])
            assert_array_equal(np.nan_to_num(x, nan=-9.0) if x.dtype.kind == "f" else x,
                               np.nan_to_num(y, nan=-9.0) if y.dtype.kind == "f" else y, err_msg=name)  # fmt: skip
    missing = _text(res["enc_missing"])
    why = {
        0: "mass = -1 not used (expected a positive mass in M_sun)",
        1: "mass_error = -0.2 not used (expected an error >= 0 in M_sun)",
        NO_MASS: "mass empty in this row",
        TEXT_MASS: "mass = unreadable text not used",
        SENTINEL: "phot_g_mean_mag = 99.0 not used (expected a finite magnitude in [-5, 30] mag)",
        MASKED_G: "phot_g_mean_mag empty in this row",
        TEXT_G: "phot_g_mean_mag = unreadable text not used",
    }
    for i, text in why.items():
        assert text in missing[i], (i, missing[i])
    for i in (0, 1, NO_MASS, TEXT_MASS):
        assert np.isnan(res["enc_sun_impulse_median_ms"][i]) and "mass-dropped" in res["cautions"][i]
        assert np.isfinite(res["enc_peak_magnitude_median_mag"][i])
    for i in (SENTINEL, MASKED_G, TEXT_G):
        assert np.isnan(res["enc_peak_magnitude_median_mag"][i]) and "magnitude-dropped" in res["cautions"][i]
        assert np.isfinite(res["enc_sun_impulse_median_ms"][i])
    # an unusable flux-over-error ratio: the magnitude is kept, held exact, and the row's cautions say so
    assert np.isfinite(res["enc_peak_magnitude_median_mag"][BAD_RATIO]) and not missing[BAD_RATIO]
    assert "held-exact" in res["cautions"][BAD_RATIO]
    # never a silent blank: a NaN enc_* number exactly where enc_missing names a reason
    numbers = _enc_numbers(res)
    blank = np.array([any(np.isnan(res[c][i]) for c in numbers) for i in range(N_ROWS)])
    assert_array_equal(blank, missing != "")
    # the table without the columns: every row says the table has none, the peak proper motion is there
    bare_missing = _text(bare["enc_missing"])
    assert all("the table has no mass column" in m and "no phot_g_mean_mag column" in m for m in bare_missing)
    assert np.all(np.isfinite(np.asarray(bare["enc_peak_proper_motion_median_arcsecyr"])))


def test_a_bad_magnitude_never_drops_a_row_and_read_row_reads_it_as_the_run_does(runs):
    table, full, _ = runs
    res = Table.read(full.results[0])
    assert _rows(res) == list(range(N_ROWS))
    for i in (SENTINEL, MASKED_G, TEXT_G, BAD_RATIO):  # analysed, with their perihelion, despite the magnitude
        assert res["status"][i] == "treated" and np.isfinite(res["mc_distance_median_pc"][i])
    # the single-row reader gives the magnitude error the run uses; the uncertainties package's first-order
    # propagation of m = -2.5 log10(F), F = 1 +- 1/(flux_over_error), gives the same number
    from uncertainties import ufloat, umath

    csv = full.folder.parent / "kestrel_planted.csv"
    row = read_row(csv, row=0)
    m = -2.5 * umath.log10(ufloat(1.0, 1.0 / float(table["phot_g_mean_flux_over_error"][0])))
    assert row["phot_g_mean_mag_error"] == pytest.approx(m.std_dev, rel=1e-12)
    assert "phot_g_mean_flux_over_error" not in row
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        star = ObservedStar.from_mapping(read_row(csv, row=SENTINEL), row=SENTINEL, strict=False)
    assert star.magnitude is None and any(c.code == "magnitude-dropped" for c in star.cautions)
    ecsv = Table.read(full.results[1])  # the ECSV file says the same of every row
    assert_array_equal(_text(ecsv["enc_missing"]), _text(res["enc_missing"]))


def test_rows_not_analysed_say_so_in_enc_missing(tmp_path):
    table, expected = invented_catalogue(12, seed=4, bad=1)
    path = tmp_path / "kw.parquet"
    table.write(path)
    run = run_catalogue(path, tmp_path / "out", cut="distance_pc < 1e-9 pc", treatment=FAST, seed=1)
    res = Table.read(run.results[0])
    status = np.asarray(res["status"]).astype(str)
    assert "treated" not in status and len(set(status)) >= 4  # not selected, and the screen's refusals
    assert_array_equal(_text(res["enc_missing"]), [f"row not analysed (status {s})" for s in status])
    assert all(np.isnan(np.asarray(res[c])).all() for c in _enc_numbers(res))


def _rows(res) -> list:
    return np.asarray(res["row"]).tolist()


def test_units_survive_parquet_and_ecsv_and_the_metadata_carries_the_shower_caution(runs):
    _, full, _ = runs
    # each unit label of the encounter quantities, as astropy's unit algebra writes it (outside reference)
    want = {
        "sun_impulse": u.m / u.s, "comet_impulse": u.m / u.s, "strength_m_vd": u.solMass / (u.km / u.s * u.pc),
        "strength_m_vd2": u.solMass / (u.km / u.s * u.pc**2), "peak_magnitude": u.mag,
        "peak_proper_motion": u.arcsec / u.yr,
    }  # fmt: skip
    for name, unit in want.items():
        assert u.Unit(ENCOUNTER_LABELS[name]) == unit, name  # exact: the same irreducible powers
    by_tag = {"_ms": u.m / u.s, "_msun_per_kms_pc": want["strength_m_vd"], "_msun_per_kms_pc2": want["strength_m_vd2"],
              "_mag": u.mag, "_arcsecyr": u.arcsec / u.yr}  # fmt: skip
    parquet, ecsv = (Table.read(p) for p in full.results)
    assert parquet.colnames == ecsv.colnames
    spec = treatment_columns(FAST.thresholds)
    for name in _enc_numbers(parquet):
        tag = next((t for t in sorted(by_tag, key=len, reverse=True) if name.endswith(t)), None)
        expected = None if tag is None else by_tag[tag]
        for t in (parquet, ecsv):
            assert t[name].unit == expected, name
        assert (spec[name] or None) == (None if expected is None else expected.to_string()), name
        x, y = np.asarray(parquet[name]), np.asarray(ecsv[name])
        assert_array_equal(np.isnan(x), np.isnan(y), err_msg=name)
        np.testing.assert_allclose(x[~np.isnan(x)], y[~np.isnan(y)], rtol=1e-15, atol=0, err_msg=name)  # text
    for t in (parquet, ecsv):
        meta = t.meta["perierr"]
        assert meta["encounter_caution"] == SHOWER and "not impact hazards" in SHOWER
        assert meta["treatment"]["oort_radii"] == ["20000 au", "100000 au"]


@settings(max_examples=4, deadline=None)
@given(order=st.permutations(list(range(16))))
def test_row_order_does_not_change_a_rows_encounter_values(runs, order):
    _, full, _ = runs
    chunk = next(iter(open_catalogue(full.folder.parent / "kestrel_planted.csv", chunk_rows=16).chunks()))
    options = TreatmentOptions(model="straight_line", n_samples=300)
    ref, ref_status, _ = treat_rows(chunk, options, RUN_SEED)
    got, status, _ = treat_rows(chunk.take(np.asarray(order)), options, RUN_SEED)
    back = np.argsort(order)
    assert_array_equal(status[back], ref_status)
    for name in ref:
        if name.startswith("enc_"):  # each star's stream comes from its identifier, not its place
            x, y = np.asarray(got[name])[back], np.asarray(ref[name])
            if x.dtype.kind == "f":
                assert_array_equal(np.isnan(x), np.isnan(y), err_msg=name)
                assert_array_equal(x[~np.isnan(x)], y[~np.isnan(y)], err_msg=name)
            else:
                assert_array_equal(x, y, err_msg=name)


def test_photometry_columns_are_found_by_preset_and_named_by_option():
    astrometry = ["Source", "RA_ICRS", "DE_ICRS", "Plx", "e_Plx", "pmRA", "e_pmRA", "pmDE", "e_pmDE", "RV", "e_RV"]
    cmap = column_map(astrometry + ["Gmag", "RFG"])  # CDS VizieR's names (from memory)
    assert dict(cmap.photometry) == {"phot_g_mean_mag": "Gmag", "phot_g_mean_flux_over_error": "RFG"}
    assert "Gmag" not in cmap.columns and "Gmag" in cmap.read_columns
    cmap = column_map(astrometry + ["G_2"], mapping={"phot_g_mean_mag": "G_2"})
    assert cmap.photometry["phot_g_mean_mag"] == "G_2" and cmap.source == "option"
    with pytest.raises(InputError) as err:
        column_map(astrometry, mapping={"phot_g_mean_mag": "G_3"})
    assert err.value.field == "columns" and "no column 'G_3'" in err.value.expected
    with pytest.raises(InputError) as err:
        column_map(astrometry + ["Vmag"], mapping={"mag": "Vmag"})
    assert err.value.field == "columns" and "phot_g_mean_mag" in err.value.expected


def test_magnitude_units_are_read_in_mag(tmp_path):
    table, _ = invented_catalogue(6, seed=2)
    error = np.array([1.5, 2.0, 0.7, 3.0, 1.1, 0.9])
    table["phot_g_mean_mag"] = table["phot_g_mean_mag"].filled(np.nan) * u.mag
    table["phot_g_mean_mag_error"] = error * u.mmag
    path = tmp_path / "kw.ecsv"
    table.write(path)
    chunk = next(iter(open_catalogue(path).chunks()))
    # astropy.units: 1 mmag = 1e-3 mag (a definition)
    np.testing.assert_allclose(chunk.values["phot_g_mean_mag_error"], (error * u.mmag).to_value(u.mag), rtol=1e-15)
    table["phot_g_mean_mag"] = table["phot_g_mean_mag"].value * u.dex  # dex would be x(-2.5) in astropy: refused
    table.write(path, overwrite=True)
    with pytest.raises(InputError) as err:
        open_catalogue(path)
    assert err.value.field == "phot_g_mean_mag" and "magnitude unit" in err.value.expected


def test_oort_radii_are_checked_before_any_work(tmp_path):
    table, _ = invented_catalogue(10, seed=3)
    path = tmp_path / "kw.parquet"
    table.write(path)
    for radii, words in ((("20000 au", "-1 pc"), "positive"), ((), "at least one"), ("20000 au", "sequence"),
                         (("20000 au", "20000au"), "repeated")):  # fmt: skip
        with pytest.raises(InputError) as err:
            options = TreatmentOptions(model="straight_line", n_samples=300, oort_radii=radii)
            run_catalogue(path, tmp_path / "out", cut="none", seed=1, treatment=options)
        assert err.value.field == "oort_radii" and words in err.value.expected, (radii, str(err.value))
        assert not (tmp_path / "out").exists()
    # a radius as a Quantity names its columns as text would (astropy: 1 pc = 206264.8 au)
    cols = treatment_columns(["1 pc"], [0.5 * u.pc])
    assert "enc_p_inside_0p5pc" in cols and "enc_comet_impulse_0p5pc_median_ms" in cols
