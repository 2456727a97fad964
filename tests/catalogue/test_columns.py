"""Column mapping: presets, auto-detection, mapping files and option text, and every refusal.

The tables here are lists of invented column names (no data); the catalogue names are standard ones.
"""

import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from perierr.catalogue.columns import PRESETS, REQUIRED, ColumnMap, column_map, parse_columns_option
from perierr.errors import InputError
from perierr.star.fields import CORRELATIONS, ERRORS, KNOWN_FIELDS, OPTIONAL_ERRORS, split_correlation
from perierr.units import OBSERVABLES

ARCHIVE_COLUMNS = ["source_id", *OBSERVABLES, *ERRORS, *CORRELATIONS, "ref_epoch"]
# The VizieR names of the astrometric catalogue columns (from memory), written out independently of the preset.
VIZIER_COLUMNS = [
    "Source", "RA_ICRS", "e_RA_ICRS", "DE_ICRS", "e_DE_ICRS", "Plx", "e_Plx", "pmRA", "e_pmRA", "pmDE", "e_pmDE",
    "RADEcor", "RAPlxcor", "RApmRAcor", "RApmDEcor", "DEPlxcor", "DEpmRAcor", "DEpmDEcor", "PlxpmRAcor",
    "PlxpmDEcor", "pmRApmDEcor", "RV", "e_RV", "Epoch",
]  # fmt: skip
# VizieR's short name of each astrometric parameter (from memory): a correlation is <A><B>cor.
VIZIER_SHORT = {"ra": "RA", "dec": "DE", "parallax": "Plx", "pmra": "pmRA", "pmdec": "pmDE"}


def test_vizier_correlations_name_the_right_pair():
    # each correlation column <A><B>cor belongs to the pair (A, B) in the catalogue's order (from memory)
    vizier = PRESETS["vizier"]
    for name in CORRELATIONS:
        a, b = split_correlation(name)
        assert vizier[name] == f"{VIZIER_SHORT[a]}{VIZIER_SHORT[b]}cor"
    assert sorted(vizier[c] for c in CORRELATIONS) == sorted(c for c in VIZIER_COLUMNS if c.endswith("cor"))
    assert set(vizier.values()) == set(VIZIER_COLUMNS)
    # the errors are e_<value column> (VizieR convention, from memory)
    for name in OBSERVABLES:
        assert vizier[f"{name}_error"] == f"e_{vizier[name]}"


def test_archive_preset_is_perierrs_own_names():
    # the archive's lower-case names are perierr's field names (common practice, no source)
    assert dict(PRESETS["archive"]) == {name: name for name in KNOWN_FIELDS}
    assert len(REQUIRED) == 10 and not set(OPTIONAL_ERRORS) & set(REQUIRED)


@pytest.mark.parametrize(("columns", "preset"), [(ARCHIVE_COLUMNS, "archive"), (VIZIER_COLUMNS, "vizier")])
def test_auto_detection_picks_the_matching_preset(columns, preset):
    cmap = column_map(columns + ["phot_g_mean_mag", "invented_flag"])
    assert (cmap.preset, cmap.source) == (preset, "auto")
    assert set(cmap.fields) == set(ARCHIVE_COLUMNS)  # every field the table has, nothing else
    assert cmap.fields["radial_velocity_error"] == PRESETS[preset]["radial_velocity_error"]
    assert set(cmap.columns) == set(columns)


def test_case_is_ignored_only_when_no_exact_name_matches():
    upper = [c.upper() for c in VIZIER_COLUMNS]
    cmap = column_map(upper)
    assert cmap.preset == "vizier" and cmap.fields["parallax"] == "PLX" and cmap.fields["pmra_error"] == "E_PMRA"
    # the exact name wins over one that differs only by case
    cmap = column_map(VIZIER_COLUMNS + ["PLX"])
    assert cmap.fields["parallax"] == "Plx"
    # two columns that match only when case is ignored: refused, naming both
    cols = [c for c in VIZIER_COLUMNS if c != "Plx"] + ["PLX", "plx"]
    with pytest.raises(InputError) as err:
        column_map(cols)
    assert err.value.field == "columns" and "'PLX'" in err.value.expected and "'plx'" in err.value.expected


@settings(max_examples=40, deadline=None)
@given(st.permutations(VIZIER_COLUMNS + ["ra", "dec", "parallax", "extra_1", "extra_2"]))
def test_auto_detection_does_not_depend_on_column_order(columns):
    # three archive names among vizier ones: vizier still matches more required fields (10 against 3)
    cmap = column_map(columns)
    assert cmap.preset == "vizier" and cmap.fields["ra"] == "RA_ICRS" and cmap.fields["parallax"] == "Plx"


def test_missing_required_fields_are_named_with_the_table_columns_and_a_way_out():
    cols = [c for c in VIZIER_COLUMNS if c not in ("RV", "e_RV")]
    with pytest.raises(InputError) as err:
        column_map(cols)
    e = err.value
    assert e.field == "columns" and e.value == "radial_velocity, radial_velocity_error"
    assert "RA_ICRS, e_RA_ICRS" in e.expected and "--columns" in e.expected and "cells may be empty" in e.expected
    assert "looks for RV, e_RV" in e.expected


def test_missing_field_message_suggests_close_columns_and_lists_at_most_30():
    cols = [c for c in ARCHIVE_COLUMNS if c != "parallax"] + ["parallax_mas"] + [f"x{i}" for i in range(20)]
    with pytest.raises(InputError) as err:
        column_map(cols)
    assert err.value.value == "parallax"
    assert "--columns parallax=parallax_mas" in err.value.expected
    assert f"({len(cols)} in all)" in err.value.expected and "x19" not in err.value.expected


def test_a_named_preset_that_does_not_fit_points_to_the_one_that_does():
    with pytest.raises(InputError) as err:
        column_map(ARCHIVE_COLUMNS, preset="vizier")
    assert err.value.field == "columns" and "Try the preset 'archive'" in err.value.expected
    assert err.value.value.startswith("ra, dec, parallax")


def test_mapping_overrides_and_extends_the_preset():
    cols = [c if c != "Plx" else "Plx_2" for c in VIZIER_COLUMNS] + ["Name", "M"]
    cmap = column_map(cols, mapping={"parallax": "Plx_2", "name": "Name", "mass": "M"})
    assert (cmap.preset, cmap.source) == ("vizier", "option")
    assert cmap.fields["parallax"] == "Plx_2" and cmap.fields["name"] == "Name" and cmap.fields["mass"] == "M"
    assert cmap.fields["pmra"] == "pmRA"
    # preset named explicitly, mapping recorded as coming from a file
    cmap = column_map(cols, preset="vizier", mapping={"parallax": "Plx_2"}, source="file")
    assert (cmap.preset, cmap.source) == ("vizier", "file")


def test_every_field_named_by_hand_has_no_preset():
    cols = [f"c{i}" for i in range(len(REQUIRED))]
    cmap = column_map(cols, mapping=dict(zip(REQUIRED, cols)))
    assert cmap.preset is None and cmap.source == "option" and dict(cmap.fields) == dict(zip(REQUIRED, cols))


@pytest.mark.parametrize(
    ("kwargs", "value", "words"),
    [
        ({"mapping": {"paralax": "Plx"}}, "paralax", "did you mean 'parallax'"),
        ({"mapping": {"parallax": "Parallax_x"}}, "parallax=Parallax_x", "no column 'Parallax_x'"),
        ({"mapping": {"parallax": ""}}, "parallax=''", "expected a table column name"),
        ({"mapping": {"pmra": "Plx"}}, "Plx", "mapped to both parallax and pmra"),
        ({"preset": "vizer"}, "vizer", "did you mean 'vizier'"),
        ({"mapping": ["parallax"]}, ["parallax"], "expected a mapping"),
        ({"source": "guess"}, "guess", "expected one of preset, auto, file, option"),
    ],
)
def test_bad_mappings_are_refused_with_field_value_and_reason(kwargs, value, words):
    with pytest.raises(InputError) as err:
        column_map(VIZIER_COLUMNS, **kwargs)
    assert err.value.field in ("columns", "source") and err.value.value == value and words in err.value.expected


def test_column_map_is_read_only_and_json_able():
    cmap = column_map(VIZIER_COLUMNS)
    with pytest.raises(TypeError):
        cmap.fields["parallax"] = "x"
    back = json.loads(json.dumps(cmap.to_dict()))
    assert back == {"preset": "vizier", "source": "auto", "fields": dict(cmap.fields)}
    assert ColumnMap({"name": "Source", "source_id": "Source"}, None, "option").columns == ("Source",)


# ---------------------------------------------------------------------------------------------- option text


def test_option_forms():
    assert parse_columns_option("vizier") == ("vizier", {})
    assert parse_columns_option(" parallax = Plx , pmra=pmRA ") == (None, {"parallax": "Plx", "pmra": "pmRA"})
    assert parse_columns_option("preset=vizier,parallax=Plx_2") == ("vizier", {"parallax": "Plx_2"})


def test_mapping_file(tmp_path):
    path = tmp_path / "columns.toml"
    path.write_text('preset = "vizier"\n[columns]\nparallax = "Plx_2"\nname = "Name"\n', encoding="utf-8")
    assert parse_columns_option(str(path)) == ("vizier", {"parallax": "Plx_2", "name": "Name"})
    bare = tmp_path / "bare.toml"
    bare.write_text('[columns]\nradial_velocity = "VR"\n', encoding="utf-8")
    assert parse_columns_option(str(bare)) == (None, {"radial_velocity": "VR"})


@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("", "expected a preset name"),
        ("parallax", "not a preset, a file or field=column pairs"),
        ("vizeir", "did you mean 'vizier'"),
        ("parallax=", "expected field=column"),
        ("=Plx", "expected field=column"),
        ("parallax=Plx,,pmra=pmRA", "expected field=column"),
        ("parallax=Plx=2", "expected field=column"),
        ("parallax=Plx,parallax=Plx2", "named twice"),
        ("paralax=Plx", "did you mean 'parallax'"),
        ("preset=vizier,preset=archive", "names a preset twice"),
        ("preset=gaia", "unknown preset"),
    ],
)
def test_malformed_option_text(text, words):
    with pytest.raises(InputError) as err:
        parse_columns_option(text)
    assert err.value.field == "columns" and words in err.value.expected


@pytest.mark.parametrize(
    ("content", "words"),
    [
        ("[columns\nparallax = 1", "not valid TOML"),
        ("[columns]\nparallax = 3\n", "expected a column name in quotes"),
        ('[columns]\nparalax = "Plx"\n', "did you mean 'parallax'"),
        ('presets = "vizier"\n', "unknown top-level key"),
        ('preset = "gaia"\n', "unknown preset"),
        ("preset = 3\n", "expected a preset name"),
        ('columns = "Plx"\n', "expected a [columns] table"),
        ("", "names no columns"),
    ],
)
def test_malformed_mapping_file(tmp_path, content, words):
    path = tmp_path / "columns.toml"
    path.write_text(content, encoding="utf-8")
    with pytest.raises(InputError) as err:
        parse_columns_option(str(path))
    assert err.value.field == "columns" and words in err.value.expected


def test_mapping_file_missing_folder_or_not_text(tmp_path):
    with pytest.raises(InputError, match="mapping file not found") as err:
        parse_columns_option(str(tmp_path / "none.toml"))
    assert err.value.value == str(tmp_path / "none.toml")
    folder = tmp_path / "cols.toml"
    folder.mkdir()
    with pytest.raises(InputError, match="is a folder"):
        parse_columns_option(str(folder))
    binary = tmp_path / "b.toml"
    binary.write_bytes(b"\xff\xfe[columns]")
    with pytest.raises(InputError, match="UTF-8|not valid TOML"):
        parse_columns_option(str(binary))


# ---------------------------------------------------------------------------------------------- same-name fields


@pytest.mark.parametrize("preset", [None, "vizier", "archive"])
def test_a_name_column_is_kept_under_every_preset(preset):
    # the vizier preset has no name entry: a column literally named "name" is read as the name
    # (columns docstring), whether the preset is named or auto-detected
    assert "name" not in PRESETS["vizier"]
    columns = (ARCHIVE_COLUMNS if preset == "archive" else VIZIER_COLUMNS) + ["name", "invented_flag"]
    cmap = column_map(columns, preset=preset)
    assert cmap.fields["name"] == "name"
    assert cmap.fields["source_id"] == ("source_id" if preset == "archive" else "Source")  # the preset's own first


def test_a_source_id_column_is_read_when_the_preset_finds_none():
    columns = [c for c in VIZIER_COLUMNS if c != "Source"] + ["SOURCE_ID", "Name"]
    cmap = column_map(columns)
    # found as any column is found: ignoring case when no exact name matches
    assert (cmap.preset, cmap.fields["source_id"], cmap.fields["name"]) == ("vizier", "SOURCE_ID", "Name")
    # a column the user maps to another field is not taken again, and a field the user maps is left alone
    cmap = column_map(columns + ["KW_id"], mapping={"mass": "Name", "source_id": "KW_id"}, preset="vizier")
    assert "name" not in cmap.fields and cmap.fields["mass"] == "Name"
    assert cmap.fields["source_id"] == "KW_id" and "SOURCE_ID" not in cmap.columns
    # and a table without such columns gets neither field
    assert not {"name", "source_id"} & set(column_map([c for c in VIZIER_COLUMNS if c != "Source"]).fields)


# ---------------------------------------------------------------------------------------------- spaces in names


def test_column_names_match_with_surrounding_spaces_ignored():
    spaced = [f" {c} " if c in ("Plx", "e_RV") else c for c in VIZIER_COLUMNS]
    cmap = column_map(spaced)
    # the map keeps the table's own names (what the reader must ask for), found with spaces ignored
    assert (
        cmap.preset == "vizier"
        and cmap.fields["parallax"] == " Plx "
        and cmap.fields["radial_velocity_error"] == " e_RV "
    )
    assert column_map(spaced, mapping={"parallax": "Plx"}).fields["parallax"] == " Plx "
    assert column_map([c.lower() + " " for c in VIZIER_COLUMNS]).fields["pmra"] == "pmra "  # case and spaces
    # the exact name wins over one with spaces; two names equal once trimmed are refused, naming both
    assert column_map(VIZIER_COLUMNS + [" Plx"]).fields["parallax"] == "Plx"
    cols = [c for c in VIZIER_COLUMNS if c != "Plx"] + [" Plx", "Plx "]
    with pytest.raises(InputError) as err:
        column_map(cols)
    assert err.value.field == "columns" and "' Plx'" in err.value.expected and "'Plx '" in err.value.expected
    assert "surrounding spaces" in err.value.expected and "rename one of them" in err.value.expected
