"""Chunked catalogue reading: five formats, units, missing and unreadable cells, one row, memory.

Every catalogue here is invented (random stars made up by the tests, named "invented ..."). The references
are astropy's table writers and astropy.units, pyarrow's Parquet writer, hashlib and Python's float parser.
"""

import csv
import gzip
import hashlib
import io
import math
import string
import tracemalloc

import astropy.units as u
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from astropy.io import fits
from astropy.table import MaskedColumn, Table
from hypothesis import given, settings
from hypothesis import strategies as st

from perierr.catalogue import reader
from perierr.catalogue.columns import PRESETS, REQUIRED, column_map
from perierr.catalogue.reader import (
    DEFAULT_CHUNK_ROWS,
    EXTENSIONS,
    MISSING_ID,
    MISSING_TEXT,
    open_catalogue,
    read_row,
)
from perierr.catalogue.screening import screen_chunk
from perierr.catalogue.treatment import star_seed
from perierr.errors import InputError
from perierr.star import ObservedStar
from perierr.star.fields import CORRELATIONS, ERRORS
from perierr.units import FIELD_UNITS, OBSERVABLES

NUMERIC = OBSERVABLES + ERRORS + CORRELATIONS
FORMATS = {"csv": "ascii.csv", "ecsv": "ascii.ecsv", "fits": "fits", "vot": "votable", "parquet": "parquet"}


def invented_table(n, seed=0, *, rv_missing=0.3):
    """Invented stars with archive column names in catalogue units (plausible values, PSD correlations)."""
    rng = np.random.default_rng(seed)
    t = Table()
    t["source_id"] = rng.choice(10**15, n, replace=False).astype(np.int64) + 10**17
    t["name"] = [f"invented star {i}" for i in range(n)]
    t["ra"] = rng.uniform(0, 360, n) * u.deg
    t["dec"] = rng.uniform(-80, 80, n) * u.deg
    t["parallax"] = rng.uniform(1, 100, n) * u.mas
    t["pmra"] = rng.normal(0, 50, n) * u.mas / u.yr
    t["pmdec"] = rng.normal(0, 50, n) * u.mas / u.yr
    rv = rng.normal(0, 30, n)
    t["radial_velocity"] = MaskedColumn(rv, mask=rng.random(n) < rv_missing, unit=u.km / u.s)
    for name in ERRORS:
        unit = FIELD_UNITS[name]
        t[name] = rng.uniform(0.01, 0.5, n) * unit
    t["radial_velocity_error"] = MaskedColumn(t["radial_velocity_error"], mask=t["radial_velocity"].mask)
    # |off-diagonal| <= 0.2 with 4 per row: diagonally dominant, so positive definite (Gershgorin)
    for name in CORRELATIONS:
        t[name] = rng.uniform(-0.2, 0.2, n)
    t["ref_epoch"] = np.full(n, 2016.0) * u.yr
    return t


def write(table, path):
    """Write with astropy's own writer for the file's extension (the reference)."""
    table.write(path, format=FORMATS[path.suffix[1:]], overwrite=True)
    return path


def read_all(path, **kwargs):
    """Concatenation of every chunk: rows, values, unreadable masks, identifiers, names."""
    chunks = list(open_catalogue(path, **kwargs).chunks())
    if not chunks:
        return {"rows": np.zeros(0, dtype=np.int64)}
    out = {"rows": np.concatenate([c.rows for c in chunks])}
    for name in chunks[0].values:
        out[name] = np.concatenate([c.values[name] for c in chunks])
    names = {k for c in chunks for k in c.unreadable}
    for name in names:
        out[f"bad:{name}"] = np.concatenate([c.unreadable.get(name, np.zeros(len(c), bool)) for c in chunks])
    if chunks[0].source_id is not None:
        out["source_id"] = np.concatenate([c.source_id for c in chunks])
    if chunks[0].name is not None:
        out["name"] = np.concatenate([c.name for c in chunks])
    return out


def written_ids(table):
    """The identifiers as astropy's CSV writer writes them: the integers' decimal text ('' where masked)."""
    col = table["source_id"]
    return np.array(["" if m else str(v) for v, m in zip(np.ma.getdata(col), np.ma.getmaskarray(col))], dtype=str)


def expected_ids(table, ext):
    """A CSV's identifiers are read as the text written (reader docstring); elsewhere int64."""
    return written_ids(table) if ext == "csv" else np.ma.getdata(table["source_id"])


def expected_values(table, name):
    col = table[name]
    return np.where(np.ma.getmaskarray(col), np.nan, np.ma.getdata(col)).astype(float)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """The same invented 57-row catalogue in the five formats (Parquet in row groups of 7 rows)."""
    folder = tmp_path_factory.mktemp("formats")
    table = invented_table(57, seed=3)
    out = {ext: write(table, folder / f"stars.{ext}") for ext in FORMATS}
    groups = pq.read_table(out["parquet"]).replace_schema_metadata(pq.read_schema(out["parquet"]).metadata)
    pq.write_table(groups, folder / "groups.parquet", row_group_size=7)
    out["groups.parquet"] = folder / "groups.parquet"
    return table, out


# ---------------------------------------------------------------------------------------------- round trips


@pytest.mark.parametrize("ext", list(FORMATS) + ["groups.parquet"])
def test_round_trip_is_exact_in_every_format(files, ext):
    table, paths = files
    got = read_all(paths[ext], chunk_rows=10)
    # astropy wrote the values; reading them back changes no bit (0 ulp), masked cells are NaN
    for name in NUMERIC + ("ref_epoch",):
        np.testing.assert_array_equal(got[name], expected_values(table, name), err_msg=name, strict=True)
    assert np.isnan(got["radial_velocity"]).sum() == np.ma.count_masked(table["radial_velocity"]) > 0
    assert got["source_id"].dtype.kind == ("U" if ext == "csv" else "i")
    np.testing.assert_array_equal(got["source_id"], expected_ids(table, ext), strict=True)
    assert got["name"].dtype.kind == "U" and list(got["name"]) == list(table["name"])
    np.testing.assert_array_equal(got["rows"], np.arange(57))
    assert not any(k.startswith("bad:") for k in got)


def test_the_five_formats_give_identical_arrays(files):
    _, paths = files
    reference = read_all(paths["parquet"], chunk_rows=13)
    for ext in ("csv", "ecsv", "fits", "vot", "groups.parquet"):
        got = read_all(paths[ext], chunk_rows=13)
        assert got.keys() == reference.keys()
        if ext == "csv":  # identifiers as text: the same numbers written out (reader docstring)
            got["source_id"] = got["source_id"].astype(np.int64)
        for key in reference:
            np.testing.assert_array_equal(got[key], reference[key], err_msg=f"{ext}: {key}")


@settings(max_examples=25, deadline=None)
@given(chunk_rows=st.integers(1, 70), ext=st.sampled_from(["csv", "ecsv", "fits", "vot", "groups.parquet"]))
def test_chunk_size_does_not_change_the_rows(files, chunk_rows, ext):
    table, paths = files
    # CSV blocks of 2 kB hold a few rows each: chunks are cut across pyarrow's batches too
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(reader, "_CSV_BLOCK_BYTES", 2048)
        cat = open_catalogue(paths[ext], chunk_rows=chunk_rows)
        chunks = list(cat.chunks())
    # every row exactly once, in order; chunk k holds rows k*c ... (k+1)*c - 1
    assert [len(c) for c in chunks] == [min(chunk_rows, 57 - s) for s in range(0, 57, chunk_rows)]
    for k, c in enumerate(chunks):
        np.testing.assert_array_equal(c.rows, np.arange(k * chunk_rows, k * chunk_rows + len(c)))
    whole = read_all(paths[ext], chunk_rows=1000)
    for name in NUMERIC:
        np.testing.assert_array_equal(np.concatenate([c.values[name] for c in chunks]), whole[name])
    np.testing.assert_array_equal(np.concatenate([c.source_id for c in chunks]), expected_ids(table, ext))


def test_start_chunk_skips_whole_chunks(files):
    _, paths = files
    cat = open_catalogue(paths["groups.parquet"], chunk_rows=10)
    tail = list(cat.chunks(start_chunk=4))
    assert [c.rows[0] for c in tail] == [40, 50] and len(tail[-1]) == 7
    assert list(cat.chunks(start_chunk=6)) == []
    with pytest.raises(InputError) as err:
        cat.chunks(start_chunk=-1)
    assert err.value.field == "start_chunk" and err.value.value == -1


def test_row_counts_and_record(files):
    table, paths = files
    for ext in ("csv", "ecsv", "fits", "vot", "parquet"):
        cat = open_catalogue(paths[ext])
        assert cat.n_rows == len(table) == 57, ext
    cat = open_catalogue(paths["fits"])
    record = cat.to_dict()
    assert record["format"] == "fits" and record["columns"]["preset"] == "archive"
    assert record["units"]["parallax"] == "mas" and record["units"]["ra_dec_corr"] == ""


def test_checksum_is_sha256_of_the_bytes(files, tmp_path):
    _, paths = files
    data = paths["csv"].read_bytes()
    assert open_catalogue(paths["csv"]).checksum() == "sha256:" + hashlib.sha256(data).hexdigest()
    changed = tmp_path / "changed.csv"
    changed.write_bytes(data.replace(b"invented star 5,", b"invented star 6,"))
    assert open_catalogue(changed).checksum() != open_catalogue(paths["csv"]).checksum()


def test_vizier_names_read_through_the_preset_equal_the_archive_names(files, tmp_path):
    table, paths = files
    vizier = table.copy()
    for field, column in PRESETS["vizier"].items():
        vizier.rename_column(field, column)
    assert "name" in vizier.colnames and "name" not in PRESETS["vizier"]  # the preset has no name entry
    archive = read_all(paths["parquet"], chunk_rows=20)
    for ext in ("fits", "csv"):
        path = write(vizier, tmp_path / f"vizier.{ext}")
        for columns in (None, "vizier"):  # auto-detected, then named
            cat = open_catalogue(path, columns=columns, chunk_rows=20)
            assert cat.column_map.preset == "vizier" and cat.column_map.fields["name"] == "name"
            got = read_all(path, columns=columns, chunk_rows=20)
            assert got.keys() == archive.keys()  # the column named "name" is read, not dropped
            assert list(got["name"]) == [f"invented star {i}" for i in range(57)]
            if ext == "csv":
                got["source_id"] = got["source_id"].astype(np.int64)
            for key in got:
                np.testing.assert_array_equal(got[key], archive[key], err_msg=key)


def test_column_choices_from_option_file_mapping_and_map(files, tmp_path):
    table, _ = files
    renamed = table.copy()
    renamed.rename_column("parallax", "plx_invented")
    renamed.rename_column("name", "label")
    path = write(renamed, tmp_path / "renamed.parquet")
    toml = tmp_path / "cols.toml"
    toml.write_text('preset = "archive"\n[columns]\nparallax = "plx_invented"\nname = "label"\n', encoding="utf-8")
    expected = expected_values(table, "parallax")
    for columns, source in [
        ("parallax=plx_invented,name=label", "option"),
        (str(toml), "file"),
        ({"parallax": "plx_invented", "name": "label"}, "option"),
        (column_map(renamed.colnames, mapping={"parallax": "plx_invented", "name": "label"}, source="file"), "file"),
    ]:
        cat = open_catalogue(path, columns=columns)
        assert cat.column_map.source == source and cat.column_map.fields["name"] == "label"
        got = read_all(path, columns=columns)
        np.testing.assert_array_equal(got["parallax"], expected)
        assert got["name"][3] == "invented star 3"
    wrong = column_map(table.colnames, source="file")  # names "parallax", which this table lacks
    with pytest.raises(InputError) as err:
        open_catalogue(path, columns=wrong)
    assert (err.value.field, err.value.value) == ("columns", "parallax")
    with pytest.raises(InputError) as err:
        open_catalogue(path)  # no parallax column under any preset
    assert err.value.field == "columns" and err.value.value == "parallax" and "plx_invented" in err.value.expected


# ---------------------------------------------------------------------------------------------- units


def unit_table(n=12, seed=5):
    """Invented values in other units than perierr's catalogue units."""
    rng = np.random.default_rng(seed)
    t = Table()
    t["ra"] = rng.uniform(0, 2 * np.pi, n) * u.rad
    t["dec"] = rng.uniform(-1.2, 1.2, n) * u.rad
    t["parallax"] = rng.uniform(0.001, 0.1, n) * u.arcsec
    t["parallax_error"] = rng.uniform(10, 500, n) * u.uas
    t["pmra"] = rng.normal(0, 0.05, n) * u.arcsec / u.yr
    t["pmra_error"] = rng.uniform(0.01, 0.5, n) * u.mas / u.yr
    t["pmdec"] = rng.normal(0, 50, n) * u.mas / u.yr
    t["pmdec_error"] = rng.uniform(1e-5, 5e-4, n) * u.arcsec / u.yr
    t["radial_velocity"] = rng.normal(0, 30_000, n) * u.m / u.s
    t["radial_velocity_error"] = rng.uniform(100, 5000, n) * u.m / u.s
    t["ra_error"] = rng.uniform(1e-6, 1e-4, n) * u.arcsec
    t["dec_error"] = rng.uniform(1e-10, 1e-8, n) * u.deg
    t["ra_dec_corr"] = rng.uniform(-0.2, 0.2, n) * u.dimensionless_unscaled
    t["mass"] = rng.uniform(1e29, 4e30, n) * u.kg
    return t


@pytest.mark.parametrize("ext", ["ecsv", "fits", "vot", "parquet"])
def test_units_are_converted_as_astropy_converts_them(tmp_path, ext):
    table = unit_table()
    got = read_all(write(table, tmp_path / f"units.{ext}"))
    for name in table.colnames:
        col = table[name]
        # the reference: astropy.units' own conversion to the catalogue unit
        target = u.dimensionless_unscaled if name == "ra_dec_corr" else FIELD_UNITS[name]
        np.testing.assert_array_equal(got[name], col.quantity.to_value(target), err_msg=name)
    # and the definitions: 1 arcsec = 1000 mas, 1 uas = 1e-3 mas, 1 km/s = 1000 m/s, pi rad = 180 deg (astropy)
    np.testing.assert_allclose(got["parallax"], table["parallax"].value * 1000, rtol=1e-15)
    np.testing.assert_allclose(got["parallax_error"], table["parallax_error"].value / 1000, rtol=1e-15)
    np.testing.assert_allclose(got["radial_velocity"], table["radial_velocity"].value / 1000, rtol=1e-15)
    np.testing.assert_allclose(got["ra"], np.degrees(table["ra"].value), rtol=1e-15)
    np.testing.assert_allclose(got["mass"], table["mass"].value / 1.988409870698051e30, rtol=1e-15)  # IAU 2015 Msun


def test_fits_units_in_other_notations(tmp_path):
    table = invented_table(6, seed=9)
    path = write(table, tmp_path / "notations.fits")
    with fits.open(path, mode="update") as hdul:
        names = hdul[1].columns.names
        for column, unit in [("ra_dec_corr", "---"), ("pmra", "mas.yr**-1"), ("source_id", "invented")]:
            hdul[1].header[f"TUNIT{names.index(column) + 1}"] = unit
    got = read_all(path)
    # "---" is dimensionless in the CDS notation and mas.yr**-1 is mas/yr in VOUnit (astropy.units parses both)
    np.testing.assert_array_equal(got["ra_dec_corr"], table["ra_dec_corr"])
    np.testing.assert_array_equal(got["pmra"], table["pmra"])
    np.testing.assert_array_equal(got["source_id"], table["source_id"])  # an identifier's unit is not read


def test_parquet_field_metadata_unit_is_read(tmp_path):
    table = invented_table(9, seed=8)
    arrow = pa.table({c: np.ma.getdata(table[c]) for c in table.colnames if c != "name"})
    schema = arrow.schema
    i = schema.get_field_index("parallax")
    schema = schema.set(i, schema.field(i).with_metadata({"unit": "arcsec"}))
    pq.write_table(arrow.cast(schema), tmp_path / "meta.parquet")
    got = read_all(tmp_path / "meta.parquet")
    # 1 arcsec = 1000 mas (astropy.units)
    np.testing.assert_array_equal(got["parallax"], (table["parallax"].value * u.arcsec).to_value(u.mas))


@pytest.mark.parametrize(
    ("column", "unit", "words"),
    [
        ("parallax", u.km, "expected a unit convertible to mas"),
        ("radial_velocity", u.mag, "expected a unit convertible to km / s"),
        ("ra_dec_corr", u.deg, "expected a dimensionless correlation coefficient"),
        ("ref_epoch", u.day, "expected an epoch in Julian years"),
    ],
)
def test_a_unit_that_does_not_convert_is_refused(tmp_path, column, unit, words):
    table = invented_table(5)
    table[column].unit = unit
    path = write(table, tmp_path / "bad.ecsv")
    with pytest.raises(InputError) as err:
        open_catalogue(path)
    assert err.value.field == column and err.value.value == str(unit)
    assert f"column {column!r}" in err.value.expected and words in err.value.expected


def test_an_unreadable_fits_unit_is_refused(tmp_path):
    path = write(invented_table(5), tmp_path / "unit.fits")
    with fits.open(path, mode="update") as hdul:
        k = hdul[1].columns.names.index("pmra") + 1
        hdul[1].header[f"TUNIT{k}"] = "invented_furlongs"
    with pytest.raises(InputError) as err:
        open_catalogue(path)
    assert err.value.field == "pmra" and err.value.value == "invented_furlongs"
    assert "cannot read" in err.value.expected


# ---------------------------------------------------------------------------------------------- missing cells


def test_a_text_cell_spoils_only_itself(tmp_path):
    table = invented_table(30, seed=11, rv_missing=0.0)
    path = write(table, tmp_path / "text.csv")
    lines = path.read_text(encoding="utf-8").splitlines()
    header = lines[0].split(",")
    k = header.index("parallax")
    cells = lines[23].split(",")  # row 22, in the third chunk of 10
    cells[k] = "twelve"
    lines[23] = ",".join(cells)
    cells = lines[5].split(",")  # row 4: spaces around a number, and a missing marker in pmra
    cells[k], cells[header.index("pmra")] = f"  {cells[k]} ", "NA"
    lines[5] = ",".join(cells)
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    cat = open_catalogue(path, chunk_rows=10)
    chunks = list(cat.chunks())
    assert [list(c.unreadable) for c in chunks] == [[], [], ["parallax"]]
    np.testing.assert_array_equal(np.flatnonzero(chunks[2].unreadable["parallax"]), [2])
    got = read_all(path, chunk_rows=10)
    want = expected_values(table, "parallax")
    want[22] = np.nan
    np.testing.assert_array_equal(got["parallax"], want)  # every other cell exact, row 4 despite the spaces
    assert np.isnan(got["pmra"][4]) and np.count_nonzero(np.isnan(got["pmra"])) == 1
    # the single-row reader hands the text on, and the star reader names it with its row
    row = read_row(path, row=22)
    assert row["parallax"] == "twelve"
    with pytest.raises(InputError) as err:
        ObservedStar.from_mapping(row, row=22, strict=False)
    assert err.value.field == "parallax" and err.value.value == "twelve" and err.value.row == 22


def test_most_rows_without_radial_velocity_are_kept(tmp_path):
    table = invented_table(1000, seed=12, rv_missing=0.95)
    missing = np.ma.getmaskarray(table["radial_velocity"])
    for ext in ("csv", "parquet", "fits"):
        got = read_all(write(table, tmp_path / f"rv.{ext}"), chunk_rows=128)
        assert len(got["rows"]) == 1000
        np.testing.assert_array_equal(np.isnan(got["radial_velocity"]), missing)
        np.testing.assert_array_equal(np.isnan(got["radial_velocity_error"]), missing)
        assert not any(k.startswith("bad:") for k in got)
        assert 900 < missing.sum() < 1000


def test_missing_integer_identifiers(tmp_path):
    table = invented_table(8, seed=13)
    table["source_id"] = MaskedColumn(table["source_id"], mask=[False, True] + [False] * 6)
    want = np.where(np.arange(8) == 1, MISSING_ID, np.ma.getdata(table["source_id"]))
    assert MISSING_ID == -1  # the documented marker of an empty integer identifier
    for ext in FORMATS:
        got = read_all(write(table, tmp_path / f"ids.{ext}"))
        if ext == "csv":  # astropy writes a masked cell as an empty field; a CSV's ids are text: ''
            np.testing.assert_array_equal(got["source_id"], written_ids(table), strict=True)
            assert got["source_id"][1] == ""
            continue
        assert got["source_id"].dtype == np.int64, ext
        np.testing.assert_array_equal(got["source_id"], want, err_msg=ext)
    with pytest.raises(InputError, match="not found"):
        read_row(tmp_path / "ids.parquet", source_id=MISSING_ID)  # the marker of an empty cell is no identifier
    assert "source_id" not in read_row(tmp_path / "ids.fits", row=1)


def test_text_identifiers_and_no_name_column(tmp_path):
    table = invented_table(6, seed=14)
    table["source_id"] = [f"INV-{i:03d}" for i in range(6)]
    del table["name"]
    for ext in ("csv", "parquet", "fits"):
        path = write(table, tmp_path / f"text_ids.{ext}")
        chunk = next(open_catalogue(path).chunks())
        assert chunk.name is None and chunk.source_id.dtype.kind == "U"
        assert list(chunk.source_id) == [f"INV-{i:03d}" for i in range(6)]
        assert read_row(path, source_id="INV-004")["source_id"] == "INV-004"


def test_one_text_identifier_among_integers_in_a_csv_changes_nothing_and_stops_nothing(tmp_path):
    # row 30's source_id is text among integers; a CSV's identifiers are the text as written (reader
    # docstring), so every chunk size reads the same ids and values and nothing is refused
    table = invented_table(45, seed=15)
    path = write(table, tmp_path / "ids.csv")
    lines = path.read_text(encoding="utf-8").splitlines()
    sid = str(table["source_id"][30])
    assert lines[31].startswith(sid + ",")  # line 0 is the header
    lines[31] = "KW-X" + lines[31][len(sid) :]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    want = written_ids(table)
    want[30] = "KW-X"
    for chunk_rows in (1, 7, 10, 30, 31, 44, DEFAULT_CHUNK_ROWS):
        got = read_all(path, chunk_rows=chunk_rows)
        np.testing.assert_array_equal(got["source_id"], want, strict=True, err_msg=str(chunk_rows))
        for name in NUMERIC:
            np.testing.assert_array_equal(got[name], expected_values(table, name), err_msg=name)
    assert read_row(path, source_id="KW-X") == read_row(path, row=30)
    assert read_row(path, source_id=int(table["source_id"][3]))["source_id"] == str(table["source_id"][3])
    # downstream the seed reads digit-only text as its integer (perierr.catalogue.treatment.star_seed's
    # documented rule): a star read from this CSV keeps the seed it has when read from FITS or Parquet
    assert star_seed(7, want[3]) == star_seed(7, int(table["source_id"][3]))


# identifiers as a survey may write them: integers of any size, and text without commas or quotes
MIXED_ID = st.one_of(
    st.integers(0, 2**63 - 1).map(str),
    st.integers(-5, 5).map(str),
    st.text(alphabet=string.ascii_letters + string.digits + "-_+. /", max_size=10),
)


@settings(max_examples=40, deadline=None)
@given(
    ids=st.lists(MIXED_ID, min_size=1, max_size=40),
    chunk_rows=st.integers(1, 45),
    seed=st.integers(0, 2**16),
)
def test_chunk_size_never_changes_what_a_csv_with_mixed_ids_reads(tmp_path_factory, ids, chunk_rows, seed):
    n = len(ids)
    rng = np.random.default_rng(seed)
    values = {name: rng.uniform(0.1, 90.0, n) for name in REQUIRED}
    lines = [",".join(("source_id",) + REQUIRED)]
    lines += [",".join([ids[i]] + [repr(float(values[name][i])) for name in REQUIRED]) for i in range(n)]
    path = tmp_path_factory.mktemp("mixed") / "mixed_ids.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(reader, "_CSV_BLOCK_BYTES", 2048)  # blocks of a few rows: chunks cut across them
        got = read_all(path, chunk_rows=chunk_rows)
    whole = read_all(path, chunk_rows=DEFAULT_CHUNK_ROWS)
    # the reference: the text written, trimmed of surrounding spaces (as astropy's CSV reader trims cells),
    # and Python's float parser for the numbers (repr round-trips exactly)
    assert got["source_id"].dtype.kind == whole["source_id"].dtype.kind == "U"
    np.testing.assert_array_equal(got["source_id"], [i.strip() for i in ids])
    np.testing.assert_array_equal(got["source_id"], whole["source_id"])
    np.testing.assert_array_equal(got["rows"], np.arange(n))
    for name in REQUIRED:
        np.testing.assert_array_equal(got[name], values[name], err_msg=name)
        np.testing.assert_array_equal(got[name], whole[name], err_msg=name)
    assert not any(key.startswith("bad:") for key in got)


@settings(max_examples=300, deadline=None)
@given(
    st.one_of(
        st.text(alphabet="0123456789.eE+- nafity", max_size=12),
        st.from_regex(r"\A ?[+-]?[0-9]{0,4}\.?[0-9]{0,4}([eE][+-]?[0-9]{1,3})? ?\Z"),
        st.sampled_from(list(MISSING_TEXT) + ["inf", "-Infinity", "+nan", "1e", ".", "e5", "--1", "N/A", "nONe"]),
    )
)
def test_text_cells_are_numbers_exactly_when_python_reads_them(text):
    values, bad = reader._parse_text(pa.array([text, "1.5", None]))
    assert values[1] == 1.5 and (bad is None or not bad[1])  # a neighbour is never spoiled
    assert math.isnan(values[2]) and (bad is None or not bad[2])  # an empty (null) cell is missing, never unreadable
    unreadable = bad is not None and bool(bad[0])
    if text.strip().lower() in MISSING_TEXT:  # the markers in any case (reader docstring)
        assert math.isnan(values[0]) and not unreadable
        return
    try:
        number = float(text)  # the reference: Python's correctly rounded float parser
    except ValueError:
        assert math.isnan(values[0]) and unreadable
        return
    assert not unreadable
    assert values[0] == number or (math.isnan(number) and math.isnan(values[0]))


def test_a_csv_header_and_cells_with_spaces_after_the_commas(tmp_path, files):
    table, paths = files
    reference = read_all(paths["csv"])
    lines = paths["csv"].read_text(encoding="utf-8").splitlines()
    spaced = tmp_path / "spaced.csv"
    spaced.write_text("\n".join(", ".join(line.split(",")) for line in lines) + "\n", encoding="utf-8")
    assert spaced.read_text(encoding="utf-8").startswith("source_id, name, ra, dec")
    # astropy's CSV reader trims names and cells of spaces (the reference): both read alike
    ref_table = Table.read(spaced, format="ascii.csv")
    assert ref_table.colnames == table.colnames and list(ref_table["name"][:2]) == [
        "invented star 0",
        "invented star 1",
    ]
    cat = open_catalogue(spaced)
    assert cat.column_map.fields["dec"] == "dec" and cat.column_map.preset == "archive"
    got = read_all(spaced, chunk_rows=9)
    for key in reference:
        np.testing.assert_array_equal(got[key], reference[key], err_msg=key)
    np.testing.assert_array_equal(got["source_id"], np.asarray(ref_table["source_id"]).astype(str))
    # a map made from the untrimmed names finds the trimmed columns
    raw = column_map(lines[0].replace(",", ", ").split(","), source="file")
    assert raw.fields["dec"] == " dec"
    np.testing.assert_array_equal(read_all(spaced, columns=raw)["dec"], reference["dec"])


def test_column_names_with_surrounding_spaces_in_parquet(tmp_path):
    table = invented_table(6, seed=19)
    arrow = pa.table({(f" {c} " if c == "parallax" else c): np.ma.getdata(table[c]) for c in table.colnames})
    pq.write_table(arrow, tmp_path / "spaces.parquet")
    cat = open_catalogue(tmp_path / "spaces.parquet")
    assert cat.column_map.fields["parallax"] == " parallax "
    np.testing.assert_array_equal(read_all(tmp_path / "spaces.parquet")["parallax"], table["parallax"])


def test_missing_markers_are_read_in_any_case(tmp_path):
    # the markers of pandas' default na_values, which lists 'n/a', 'N/A', 'NA', 'null', 'NULL', 'nan',
    # 'NaN', 'None' case by case (from memory): here every case of each is missing, not unreadable
    markers = ["n/a", "N/A", "N/a", "none", "None", "NONE", "na", "NA", "Na", "null", "NULL", "Null", "nan", "NaN",
               "NAN", "--", " none ", ""]  # fmt: skip
    lines = [",".join(("source_id",) + REQUIRED)]
    for i, marker in enumerate(markers + ["nul", "n.a."]):
        cells = [f"{i + 1}.5"] * len(REQUIRED)
        cells[REQUIRED.index("pmra")] = marker
        lines.append(",".join([str(i)] + cells))
    path = tmp_path / "markers.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    got = read_all(path)
    assert np.isnan(got["pmra"]).all()
    # other text is unreadable; the empty cell beside it stays missing (it was once flagged unreadable too)
    np.testing.assert_array_equal(got["bad:pmra"], [False] * len(markers) + [True, True])
    np.testing.assert_array_equal(got["parallax"], np.arange(len(markers) + 2) + 1.5)
    assert set(MISSING_TEXT) == {"", "nan", "null", "none", "na", "n/a", "--"}  # the documented list


@pytest.mark.parametrize("ext", ["parquet", "parquet-no-stats", "fits", "ecsv"])
def test_unsigned_identifiers_are_int64_when_they_fit_and_text_when_they_do_not(tmp_path, ext):
    ids = np.array([0, 7, 2**62, 2**63 - 1, 123_456_789], dtype=np.uint64)
    huge = ids.copy()
    huge[2] = 2**64 - 1  # beyond int64: the whole column is text, every value exact
    base = invented_table(5, seed=20)
    for name, column, want in [
        ("fits", ids, ids.astype(np.int64)),
        ("huge", huge, np.array(["0", "7", "18446744073709551615", "9223372036854775807", "123456789"])),
    ]:
        table = base.copy()
        table["source_id"] = column
        path = tmp_path / f"{name}.{ext.split('-')[0]}"
        if ext == "parquet-no-stats":  # no row-group statistics: the reader scans the column once
            pq.write_table(pa.table({c: np.ma.getdata(table[c]) for c in table.colnames}), path, write_statistics=False)
            assert pq.read_metadata(path).row_group(0).column(0).statistics is None
        else:
            table.write(path, overwrite=True)
        got = read_all(path, chunk_rows=2)["source_id"]
        # the reference: Python's own integers (2**63 - 1 is int64's largest, numpy.iinfo)
        assert np.iinfo(np.int64).max == 2**63 - 1
        np.testing.assert_array_equal(got, want, strict=True, err_msg=f"{ext}: {name}")


def test_a_null_unsigned_identifier_is_missing_id(tmp_path):
    arrow = pa.table({c: np.ma.getdata(invented_table(3, seed=22)[c]) for c in ("source_id",) + NUMERIC})
    ids = pa.array([5, None, 2**63 - 1], type=pa.uint64())
    pq.write_table(arrow.set_column(0, "source_id", ids), tmp_path / "null_id.parquet")
    got = read_all(tmp_path / "null_id.parquet")["source_id"]
    np.testing.assert_array_equal(got, np.array([5, MISSING_ID, 2**63 - 1], dtype=np.int64), strict=True)


# ---------------------------------------------------------------------------------------------- one row


@pytest.mark.parametrize("ext", ["csv", "fits", "parquet"])
def test_read_row_gives_the_star_of_that_table_row(files, ext):
    table, paths = files
    plain = table.copy()
    plain["ref_epoch"].unit = None  # perierr.star reads a table row's epoch as a plain number only
    for i in (0, 31, 56):
        if np.ma.is_masked(table["radial_velocity"][i]):
            continue
        # the reference: perierr's reading of the same astropy Table row
        want = ObservedStar.from_mapping(plain[i], row=i, strict=False)
        by_row = read_row(paths[ext], row=i)
        by_id = read_row(paths[ext], source_id=int(table["source_id"][i]))
        sid = int(table["source_id"][i])
        assert by_row == by_id and by_row["source_id"] == (str(sid) if ext == "csv" else sid)
        for got in (ObservedStar.from_mapping(by_row, row=i, strict=False),):
            np.testing.assert_array_equal(got.mean, want.mean)
            np.testing.assert_array_equal(got.cov, want.cov)
            assert (got.name, got.source_id, got.ref_epoch) == (want.name, want.source_id, want.ref_epoch)
    assert read_row(paths[ext], source_id=str(table["source_id"][5])) == read_row(paths[ext], row=5)


def test_read_row_leaves_out_empty_cells_but_marks_empty_correlations(tmp_path, files):
    table, _ = files
    t = table.copy()
    t["ra_dec_corr"] = MaskedColumn(t["ra_dec_corr"], mask=np.arange(len(t)) == 2)
    path = write(t, tmp_path / "corr.parquet")
    i = int(np.flatnonzero(np.ma.getmaskarray(t["radial_velocity"]))[0])
    assert "radial_velocity" not in read_row(path, row=i)
    row = read_row(path, row=2)
    assert repr(row["ra_dec_corr"]) == "masked"  # perierr.star.MASKED: refused, never read as 0
    with pytest.raises(InputError) as err:
        ObservedStar.from_mapping(row, row=2, strict=False)
    assert err.value.field == "ra_dec_corr" and err.value.row == 2


@pytest.mark.parametrize(
    ("kwargs", "field", "value", "words"),
    [
        ({"row": 57}, "row", 57, "out of range; the table has 57 rows (0 to 56)"),
        ({"row": -1}, "row", -1, "expected a row number >= 0"),
        ({"row": 1.5}, "row", 1.5, "expected a row number >= 0"),
        ({"source_id": 12345}, "source_id", 12345, "not found in the 57 rows"),
        ({"source_id": "INV-1"}, "source_id", "INV-1", "not found in the 57 rows"),
        ({}, "row", None, "give exactly one of row and source_id"),
        ({"row": 1, "source_id": 2}, "row", 1, "give exactly one of row and source_id"),
    ],
)
def test_read_row_refusals(files, kwargs, field, value, words):
    _, paths = files
    for ext in ("parquet", "csv"):
        with pytest.raises(InputError) as err:
            read_row(paths[ext], **kwargs)
        assert (err.value.field, err.value.value) == (field, value) and words in err.value.expected, ext


def test_read_row_by_id_without_an_id_column(tmp_path):
    table = invented_table(4)
    del table["source_id"]
    path = write(table, tmp_path / "no_ids.ecsv")
    with pytest.raises(InputError) as err:
        read_row(path, source_id=3)
    assert err.value.field == "source_id" and "--columns source_id=COLUMN" in err.value.expected


# ---------------------------------------------------------------------------------------------- files


def test_csv_variants(tmp_path, files):
    table, paths = files
    reference = read_all(paths["csv"])
    text = paths["csv"].read_text(encoding="utf-8")
    commented = tmp_path / "commented.csv"
    commented.write_text("# invented catalogue\n# two comment lines\n" + text, encoding="utf-8")
    packed = tmp_path / "packed.csv.gz"
    packed.write_bytes(gzip.compress(text.encode("utf-8")))
    ecsv_in_csv = tmp_path / "ecsv_inside.csv"
    ecsv_in_csv.write_bytes(paths["ecsv"].read_bytes())
    ecsv_packed = tmp_path / "ecsv_inside.csv.gz"
    ecsv_packed.write_bytes(gzip.compress(paths["ecsv"].read_bytes()))
    other = tmp_path / "stars.txt"
    other.write_text(text, encoding="utf-8")
    for path, kwargs in [
        (commented, {}),
        (packed, {}),
        (ecsv_in_csv, {}),
        (ecsv_packed, {}),
        (other, {"format": "csv"}),
    ]:
        got = read_all(path, **kwargs)
        got["source_id"] = got["source_id"].astype(str)  # ECSV's are int64, a CSV's the same digits as text
        for key in reference:
            np.testing.assert_array_equal(got[key], reference[key], err_msg=f"{path.name}: {key}")
    assert open_catalogue(commented).n_rows == 57
    assert open_catalogue(ecsv_in_csv).format == open_catalogue(ecsv_packed).format == "ecsv"
    cat = open_catalogue(packed)
    assert cat.n_rows is None  # unknown until read
    assert sum(len(c) for c in cat.chunks()) == 57 and cat.n_rows == 57


def test_memory_stays_flat_for_a_large_parquet(tmp_path):
    n = 200_000
    rng = np.random.default_rng(21)
    names = ("source_id",) + NUMERIC
    data = {name: rng.uniform(0.1, 1.0, n) for name in NUMERIC}
    data["source_id"] = np.arange(n, dtype=np.int64)
    pq.write_table(pa.table(data), tmp_path / "large.parquet", row_group_size=5_000)
    whole = n * len(names) * 8  # bytes of the mapped columns as float64: 36.8 MB
    del data
    cat = open_catalogue(tmp_path / "large.parquet", chunk_rows=10_000)
    total, checksum, arrow_peak, arrow_base = 0, 0.0, 0, pa.total_allocated_bytes()
    tracemalloc.start()
    try:
        for chunk in cat.chunks():
            total += len(chunk)
            checksum += float(chunk.values["parallax"].sum())
            arrow_peak = max(arrow_peak, pa.total_allocated_bytes() - arrow_base)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert total == n and checksum > 0
    # bounds: numpy's peak below 1/6 of the whole table (6.1 MB; one chunk of 10,000 rows is 1.8 MB and two are
    # alive while the next is built: measured 3.7 MB), and what pyarrow holds at a chunk below 1/3 (12.3 MB;
    # measured 9.3 MB, the same for 400,000 rows: it depends on the chunk and row-group sizes only)
    assert peak < whole / 6, (peak, whole)
    assert arrow_peak < whole / 3, (arrow_peak, whole)


DUPLICATE = (",".join(REQUIRED + ("ra",)) + "\n" + ",".join(["1"] * 11) + "\n").encode()


@pytest.mark.parametrize(
    ("name", "content", "kwargs", "field", "words"),
    [
        ("none.csv", None, {}, "table", "file not found"),
        ("empty.csv", b"", {}, "table", "is empty"),
        ("stars.dat", b"a,b\n1,2\n", {}, "table", "unknown file type '.dat'; expected a file name ending in .csv,"),
        ("stars", b"a,b\n1,2\n", {}, "table", "unknown file type '(no extension)'"),
        ("stars.csv", b"a,b\n1,2\n", {"format": "excel"}, "format", "expected one of csv, ecsv"),
        ("fake.parquet", b"ra,dec\n1,2\n", {}, "table", "is not a Parquet file"),
        ("fake.fits", b"ra,dec\n1,2\n", {}, "table", "is not a FITS file"),
        ("broken.parquet", b"PAR1 invented garbage", {}, "table", "cannot be read as Parquet"),
        ("broken.vot", b"<?xml version='1.0'?><VOTABLE><RESOURCE>", {}, "table", "cannot be read as VOTable"),
        ("broken.ecsv", b"# %ECSV 1.0\n# ---\n# datatype: [\n", {}, "table", "cannot be read as ECSV"),
        ("comments.csv", b"# only a comment\n", {}, "table", "has no header line"),
        ("dup.csv", DUPLICATE, {}, "table", "column 'ra' appears 2 times"),
    ],
)
def test_files_that_cannot_be_read(tmp_path, name, content, kwargs, field, words):
    path = tmp_path / name
    if content is not None:
        path.write_bytes(content)
    with pytest.raises(InputError) as err:
        open_catalogue(path, **kwargs)
    assert err.value.field == field and words in err.value.expected
    if field == "table":
        assert err.value.value == str(path)


def test_an_unknown_file_type_names_the_extensions_read_and_no_command_line_option(tmp_path):
    path = tmp_path / "stars.tsv"
    path.write_bytes(b"a\tb\n1\t2\n")
    with pytest.raises(InputError) as err:
        open_catalogue(path)
    text = err.value.expected
    assert all(ext in text for ext in EXTENSIONS) and "format=" in text
    assert "--" not in text and "say the format" not in text  # the command line has no --format option
    assert (err.value.field, err.value.value) == ("table", str(path))


def test_a_folder_a_table_less_fits_and_a_bad_chunk_size(tmp_path):
    with pytest.raises(InputError, match="is a folder") as err:
        open_catalogue(tmp_path)
    assert err.value.field == "table" and err.value.value == str(tmp_path)
    fits.PrimaryHDU(np.zeros(3)).writeto(tmp_path / "image.fits")
    with pytest.raises(InputError, match="has no table extension") as err:
        open_catalogue(tmp_path / "image.fits")
    for bad in (0, -5, 2.5, True):
        with pytest.raises(InputError) as err:
            open_catalogue(tmp_path / "image.fits", chunk_rows=bad)
        assert err.value.field == "chunk_rows" and err.value.value is bad


def test_a_truncated_fits_or_parquet_file_is_named_not_a_traceback(tmp_path, files):
    _, paths = files
    for ext, keep in (("fits", 2880 + 2880), ("parquet", -200)):
        data = paths[ext].read_bytes()
        path = tmp_path / f"cut.{ext}"
        path.write_bytes(data[:keep])
        with pytest.raises(InputError) as err:
            list(open_catalogue(path).chunks())
        assert err.value.field == "table" and err.value.value == str(path), ext
        assert "cannot be read as" in err.value.expected, ext


def csv_records(text):
    """The reference for a CSV's rows: Python's csv module, blank lines and leading # lines skipped.

    Returns (header, records): each record is its list of fields (a malformed line has another count).
    """
    lines = text.splitlines()
    while lines[0].startswith("#"):
        lines.pop(0)
    rows = [r for r in csv.reader(io.StringIO("\n".join(lines) + "\n")) if r]
    return [c.strip() for c in rows[0]], rows[1:]


def malformed_csv(tmp_path, table):
    """The invented table as CSV with malformed lines at rows 3 (too few fields), 17 and 18 (one too many),
    and the last row (a lone value); blank lines before rows 10 and 25 and a comment line on top."""
    path = write(table, tmp_path / "malformed.csv")
    lines = path.read_text(encoding="utf-8").splitlines()
    n = len(table)
    lines[1 + 3] = ",".join(lines[1 + 3].split(",")[:7])
    lines[1 + 17] += ",extra"
    lines[1 + 18] += ",extra"
    lines[n] = "12.5"
    lines.insert(1 + 25, "")
    lines.insert(1 + 10, "")
    path.write_text("# invented catalogue with broken lines\n" + "\n".join(lines) + "\n", encoding="utf-8")
    return path, n - 1


@pytest.mark.parametrize("block_bytes", [2048, 1 << 20])
def test_a_malformed_csv_line_stays_a_row_in_its_place(tmp_path, block_bytes):
    table = invented_table(40, seed=17, rv_missing=0.0)
    path, last = malformed_csv(tmp_path, table)
    header, records = csv_records(path.read_text(encoding="utf-8"))
    broken = np.array([len(r) != len(header) for r in records])
    assert len(records) == 40 and np.flatnonzero(broken).tolist() == [3, 17, 18, last]  # the reference agrees
    whole = None
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(reader, "_CSV_BLOCK_BYTES", block_bytes)
        for chunk_rows in (1, 3, 4, 10, 17, 18, 19, 39, 40, 1000):
            got = read_all(path, chunk_rows=chunk_rows)
            # every row kept and numbered as the k-th data line; a malformed one: NaN and unreadable everywhere
            np.testing.assert_array_equal(got["rows"], np.arange(40))
            for name in NUMERIC + ("ref_epoch",):
                want = expected_values(table, name)
                want[broken] = np.nan
                np.testing.assert_array_equal(got[name], want, err_msg=f"{chunk_rows}: {name}")
                np.testing.assert_array_equal(got[f"bad:{name}"], broken, err_msg=f"{chunk_rows}: {name}")
            want_ids = written_ids(table)
            want_ids[broken] = ""
            np.testing.assert_array_equal(got["source_id"], want_ids, strict=True)
            assert (
                got["name"][16] == "invented star 16"
                and got["name"][17] == ""
                and got["name"][19] == "invented star 19"
            )
            if whole is not None:
                for key in whole:
                    np.testing.assert_array_equal(got[key], whole[key], err_msg=f"{chunk_rows}: {key}")
            whole = got
        # a resumed run (chunks from the third on) reads the same rows as the whole run
        tail = list(open_catalogue(path, chunk_rows=10).chunks(start_chunk=1))
    assert [c.rows[0] for c in tail] == [10, 20, 30]
    np.testing.assert_array_equal(np.concatenate([c.values["parallax"] for c in tail]), whole["parallax"][10:])
    # the screen gives each malformed row the status of an unreadable cell, and no other row
    chunk = next(open_catalogue(path, chunk_rows=1000).chunks())
    status = screen_chunk(chunk)["status"].astype(str)
    np.testing.assert_array_equal(status == "unreadable_value", broken)


def test_read_row_names_a_malformed_line_and_counts_past_it(tmp_path):
    table = invented_table(40, seed=17, rv_missing=0.0)
    path, _ = malformed_csv(tmp_path, table)
    n_fields = len(table.colnames)
    with pytest.raises(InputError) as err:
        read_row(path, row=17)
    # the fields of the line, counted by Python's csv module (the reference): one more than the header
    assert (err.value.field, err.value.value, err.value.row) == ("row", 17, 17)
    assert f"has {n_fields + 1} fields where the header has {n_fields}" in err.value.expected
    with pytest.raises(InputError, match="has 7 fields"):
        read_row(path, row=3)
    plain = table.copy()
    plain["ref_epoch"].unit = None  # perierr.star reads a table row's epoch as a plain number only
    for i in (4, 19, 26):  # after a malformed line, after two, after a blank line
        want = ObservedStar.from_mapping(plain[i], row=i, strict=False)
        got = ObservedStar.from_mapping(read_row(path, row=i), row=i, strict=False)
        np.testing.assert_array_equal(got.mean, want.mean)
        assert got.source_id == str(table["source_id"][i])


def test_a_quoted_value_over_two_lines_is_one_row_before_a_malformed_line(tmp_path):
    table = invented_table(12, seed=23, rv_missing=0.0)
    table["name"][5] = "invented\nstar 5"  # astropy's CSV writer quotes it; the value spans two lines
    path = write(table, tmp_path / "quoted.csv")
    text = path.read_text(encoding="utf-8").replace(f"\n{table['source_id'][8]},", "\n8,8,8\n0,", 1)
    path.write_text(text, encoding="utf-8")  # a malformed line "8,8,8" before the row of star 8 (now id 0)
    header, records = csv_records(text)  # the reference: Python's csv module, one record per quoted value
    broken = [len(r) != len(header) for r in records]
    assert len(records) == 13 and np.flatnonzero(broken).tolist() == [8]
    for chunk_rows in (1, 5, 8, 9, 100):
        got = read_all(path, chunk_rows=chunk_rows)
        np.testing.assert_array_equal(got["rows"], np.arange(13))
        np.testing.assert_array_equal(got["bad:parallax"], broken)
        assert got["name"][5] == records[5][1] == "invented\nstar 5"
        for i in (7, 9, 12):  # rows after the malformed one hold the values written for them
            assert got["parallax"][i] == float(records[i][header.index("parallax")])
        assert got["parallax"][9] == table["parallax"][8] and got["source_id"][9] == "0"


@settings(max_examples=30, deadline=None)
@given(
    kinds=st.lists(st.sampled_from(["ok", "ok", "ok", "short", "long", "blank", "spaces"]), min_size=1, max_size=60),
    chunk_rows=st.integers(1, 30),
    block_bytes=st.sampled_from([400, 2048, 1 << 20]),
)
def test_malformed_lines_never_move_a_row_whatever_the_chunk(tmp_path_factory, kinds, chunk_rows, block_bytes):
    header = ("source_id",) + REQUIRED
    lines, want = [",".join(header)], []
    for i, kind in enumerate(kinds):
        if kind == "ok":
            lines.append(",".join([str(i)] + [f"{i}.25"] * len(REQUIRED)))
        elif kind == "short":
            lines.append(",".join([str(i)] * 4))
        elif kind == "long":
            lines.append(",".join([str(i)] * (len(header) + 2)))
        elif kind == "blank":
            lines.append("")
        else:
            lines.append("   ")  # one field of spaces: a malformed line, not a blank one
    text = "\n".join(lines) + "\n"
    path = tmp_path_factory.mktemp("fuzz") / "lines.csv"
    path.write_text(text, encoding="utf-8")
    _, records = csv_records(text)  # the reference
    want = np.array([float(r[1]) if len(r) == len(header) else np.nan for r in records])
    broken = np.array([len(r) != len(header) for r in records], dtype=bool)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(reader, "_CSV_BLOCK_BYTES", block_bytes)
        chunks = list(open_catalogue(path, chunk_rows=chunk_rows).chunks())
    n = len(records)
    assert [len(c) for c in chunks] == [min(chunk_rows, n - s) for s in range(0, n, chunk_rows)]
    got = np.concatenate([c.values["parallax"] for c in chunks]) if chunks else np.zeros(0)
    bad = np.concatenate([c.unreadable.get("parallax", np.zeros(len(c), bool)) for c in chunks]) if chunks else got
    np.testing.assert_array_equal(np.concatenate([c.rows for c in chunks]) if chunks else [], np.arange(n))
    np.testing.assert_array_equal(got, want)
    np.testing.assert_array_equal(np.asarray(bad, dtype=bool), broken)


def test_a_column_of_booleans_or_lists_is_refused(tmp_path):
    table = invented_table(4)
    arrow = pa.table({c: np.ma.getdata(table[c]) for c in table.colnames if c != "name"})
    flags = arrow.set_column(arrow.schema.get_field_index("parallax"), "parallax", pa.array([True, False] * 2))
    pq.write_table(flags, tmp_path / "flags.parquet")
    with pytest.raises(InputError) as err:
        open_catalogue(tmp_path / "flags.parquet")
    assert err.value.field == "parallax" and "true/false values" in err.value.expected
    lists = arrow.set_column(arrow.schema.get_field_index("pmra"), "pmra", pa.array([[1.0, 2.0]] * 4))
    pq.write_table(lists, tmp_path / "lists.parquet")
    with pytest.raises(InputError) as err:
        open_catalogue(tmp_path / "lists.parquet")
    assert err.value.field == "pmra" and "several values per row" in err.value.expected
