"""Which table column holds which perierr field: presets, a TOML mapping file, option text, auto-detection.

perierr's field names (:mod:`perierr.star.fields`) are those of the large astrometric catalogue archive
(``parallax``, ``pmra_error``, ``ra_dec_corr``, ...). A table named otherwise is read through a
:class:`ColumnMap` (perierr field -> table column), chosen in one of four ways (its ``source``):

``"auto"``
    the preset of :data:`PRESETS` whose names match the most required fields among the table's columns
    (exact names first, then ignoring surrounding spaces, then ignoring case too);
``"preset"``
    a preset named by the user (``--columns vizier``);
``"file"``
    a TOML file with a ``[columns]`` table (``parallax = "Plx"``) and optionally ``preset = "vizier"``
    at the top level;
``"option"``
    ``field=column`` pairs (``--columns parallax=Plx,pmra=pmRA``; ``preset=vizier`` may be one of them).

Named fields override or extend the preset (the one named, or else the one auto-detected). The map keeps
only the fields the table has: required are the six observables and their errors except ``ra_error`` and
``dec_error`` (held exact when absent). The radial velocity and its error must be columns, but their
cells may be empty (those rows are reported, never dropped).

Optional encounter columns: the G magnitude, its error and its flux-over-error ratio
(:data:`PHOTOMETRY_FIELDS`) are read when the table has them, for the peak magnitude of the encounter; they
are kept apart from the astrometry (:attr:`ColumnMap.photometry`, never required, never a reason to refuse a
row). Each is found under the chosen preset's name (:data:`PHOTOMETRY_PRESETS`), else under its own name, or
named like any other field (``--columns phot_g_mean_mag=Gmag_2``). The mass (``mass``, ``mass_error``) is a
field like the others; a catalogue run also reads it only for the encounter (:data:`ENCOUNTER_FIELDS`).

Whatever the preset (named or auto-detected), a column named ``source_id`` or ``name`` (found as any
other column: exactly, else ignoring surrounding spaces, else ignoring case) holds that field when
neither the preset nor the user maps the field to another column and no other field reads that column:
the ``vizier`` preset has no ``name`` entry, and a ``name`` column of a table read with it is kept
rather than dropped (:data:`SAME_NAME_FIELDS`).

A column name is matched with surrounding spaces ignored (``" Plx "`` is ``Plx``); the reader also
trims the names of a CSV header, as astropy's CSV reader does.

Examples
--------
>>> cmap = column_map(["Source", "RA_ICRS", "DE_ICRS", "Plx", "e_Plx", "pmRA", "e_pmRA", "pmDE", "e_pmDE",
...                    "RV", "e_RV"])
>>> cmap.preset, cmap.source, cmap.fields["parallax"], cmap.fields["source_id"]
('vizier', 'auto', 'Plx', 'Source')
>>> parse_columns_option("parallax=Plx,pmra=pmRA")
(None, {'parallax': 'Plx', 'pmra': 'pmRA'})
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType

import tomllib

from ..errors import InputError
from ..star.fields import ERRORS, KNOWN_FIELDS, OPTIONAL_ERRORS
from ..units import OBSERVABLES

__all__ = [
    "ENCOUNTER_FIELDS",
    "G_ERROR_PER_INVERSE_SNR",
    "PHOTOMETRY_FIELDS",
    "PHOTOMETRY_PRESETS",
    "PRESETS",
    "REQUIRED",
    "SAME_NAME_FIELDS",
    "SOURCES",
    "ColumnMap",
    "column_map",
    "g_error_from_flux",
    "option_source",
    "parse_columns_option",
]

#: Fields a catalogue must have columns for (the radial velocity's cells may be empty).
REQUIRED = OBSERVABLES + tuple(e for e in ERRORS if e not in OPTIONAL_ERRORS)

#: How a column map was chosen.
SOURCES = ("preset", "auto", "file", "option")

#: Fields read from a column of their own name whatever the preset, when nothing else maps them.
SAME_NAME_FIELDS = ("source_id", "name")

# The archive's own lower-case column names are perierr's field names.
_ARCHIVE = {name: name for name in KNOWN_FIELDS}

# The CDS VizieR names of the same catalogues' columns (from memory).
_VIZIER = {
    "source_id": "Source",
    "ref_epoch": "Epoch",
    "ra": "RA_ICRS",
    "dec": "DE_ICRS",
    "parallax": "Plx",
    "pmra": "pmRA",
    "pmdec": "pmDE",
    "radial_velocity": "RV",
    "ra_error": "e_RA_ICRS",
    "dec_error": "e_DE_ICRS",
    "parallax_error": "e_Plx",
    "pmra_error": "e_pmRA",
    "pmdec_error": "e_pmDE",
    "radial_velocity_error": "e_RV",
    "ra_dec_corr": "RADEcor",
    "ra_parallax_corr": "RAPlxcor",
    "ra_pmra_corr": "RApmRAcor",
    "ra_pmdec_corr": "RApmDEcor",
    "dec_parallax_corr": "DEPlxcor",
    "dec_pmra_corr": "DEpmRAcor",
    "dec_pmdec_corr": "DEpmDEcor",
    "parallax_pmra_corr": "PlxpmRAcor",
    "parallax_pmdec_corr": "PlxpmDEcor",
    "pmra_pmdec_corr": "pmRApmDEcor",
}

#: Optional photometry of a catalogue run (for the peak magnitude): the G magnitude [mag], its standard error
#: [mag] and the G flux divided by its error (the error's usual form in the large catalogue's archive).
PHOTOMETRY_FIELDS = ("phot_g_mean_mag", "phot_g_mean_mag_error", "phot_g_mean_flux_over_error")

#: Fields a catalogue run reads only for the encounter's effects (impulses, peak magnitude): a missing or bad
#: cell leaves that row's astrometric results untouched (the row's cautions and ``enc_missing`` say why).
ENCOUNTER_FIELDS = ("mass", "mass_error") + PHOTOMETRY_FIELDS

#: sigma_G = this / (flux / flux error): the magnitude error of a flux measured with that signal-to-noise ratio,
#: 2.5 / ln(10) = 1.0857 mag per unit of relative flux error (first-order propagation of m = -2.5 log10(F);
#: common practice, no source; it leaves out any calibration floor of the survey).
G_ERROR_PER_INVERSE_SNR = 2.5 / math.log(10.0)

# The photometry's names in each preset: the archive's own, and CDS VizieR's (from memory).
_PHOTOMETRY_VIZIER = {"phot_g_mean_mag": "Gmag", "phot_g_mean_mag_error": "e_Gmag",
                      "phot_g_mean_flux_over_error": "RFG"}  # fmt: skip

#: Preset name -> {photometry field: table column} (same preset names as :data:`PRESETS`).
PHOTOMETRY_PRESETS = MappingProxyType(
    {
        "archive": MappingProxyType({name: name for name in PHOTOMETRY_FIELDS}),
        "vizier": MappingProxyType(_PHOTOMETRY_VIZIER),
    }
)

#: Preset name -> {perierr field: table column}; ``archive`` first (it wins ties in auto-detection).
PRESETS = MappingProxyType(
    {
        "archive": MappingProxyType(_ARCHIVE),
        "vizier": MappingProxyType(_VIZIER),
    }
)

_PRESET_HELP = "archive (perierr's names: parallax, pmra_error, ...), vizier (CDS names: Plx, e_pmRA, ...)"
_OPTION_FORMS = (
    f'a preset name ({", ".join(PRESETS)}), a TOML file with a [columns] table (parallax = "Plx"), '
    "or field=column pairs such as parallax=Plx,pmra=pmRA"
)
_SHOWN_COLUMNS = 30


@dataclass(frozen=True)
class ColumnMap:
    """The table columns perierr reads, by field.

    Attributes
    ----------
    fields : Mapping of str to str
        perierr field -> table column, for the fields the table has (read-only).
    preset : str or None
        The preset the map starts from (None when every field was named by hand).
    source : str
        How the map was chosen: ``"preset"``, ``"auto"``, ``"file"`` or ``"option"``.
    photometry : Mapping of str to str
        Optional photometry field (:data:`PHOTOMETRY_FIELDS`) -> table column, for the fields the table has
        (read-only; empty when it has none).
    """

    fields: Mapping
    preset: str | None
    source: str
    photometry: Mapping = field(default_factory=dict)

    def __post_init__(self) -> None:
        object.__setattr__(self, "fields", MappingProxyType(dict(self.fields)))
        object.__setattr__(self, "photometry", MappingProxyType(dict(self.photometry)))

    @property
    def columns(self) -> tuple:
        """The table columns of the astrometric and meta fields (each once, in the order of the fields)."""
        return tuple(dict.fromkeys(self.fields.values()))

    @property
    def all_fields(self) -> dict:
        """Every field read, the photometry included: {perierr field: table column}."""
        return {**self.fields, **self.photometry}

    @property
    def read_columns(self) -> tuple:
        """Every table column a catalogue run reads (:attr:`columns`, then the photometry's), each once."""
        return tuple(dict.fromkeys(self.all_fields.values()))

    def to_dict(self) -> dict:
        """The map as plain JSON-able data, for the provenance of a run (``photometry`` only when found)."""
        out = {"preset": self.preset, "source": self.source, "fields": dict(self.fields)}
        if self.photometry:
            out["photometry"] = dict(self.photometry)
        return out


def column_map(
    colnames: Iterable[str],
    *,
    preset: str | None = None,
    mapping: Mapping | None = None,
    source: str | None = None,
) -> ColumnMap:
    """Choose the column of each perierr field among a table's columns.

    Parameters
    ----------
    colnames : iterable of str
        The table's column names.
    preset : str, optional
        A name of :data:`PRESETS`; None picks the preset that matches the most required fields
        (exact names first, then ignoring surrounding spaces, then case; ties go to the first preset).
        Under any preset, ``source_id`` and ``name`` are also looked for under their own names
        (:data:`SAME_NAME_FIELDS`) when the preset finds no column for them.
    mapping : Mapping of str to str, optional
        perierr field -> column; overrides or extends the preset. Each column must be in the table. The
        photometry fields (:data:`PHOTOMETRY_FIELDS`) may be named too.
    source : str, optional
        How the choice was made (one of :data:`SOURCES`), for the record: by default ``"option"`` when
        ``mapping`` is given, else ``"preset"`` or ``"auto"``.

    Returns
    -------
    ColumnMap

    Raises
    ------
    InputError
        (field ``columns``) for an unknown preset or field name, a named column the table does not have,
        a column named for two measurements, and a table without the required fields (the message lists
        the missing fields, the table's columns and what would help).
    """
    colnames = [str(c) for c in colnames]
    mapping = _checked_mapping(mapping)
    named_photometry = {k: v for k, v in mapping.items() if k in PHOTOMETRY_FIELDS}
    mapping = {k: v for k, v in mapping.items() if k not in PHOTOMETRY_FIELDS}
    if preset is not None:
        _check_preset(preset)
    if source is None:
        source = "option" if mapping or named_photometry else ("preset" if preset is not None else "auto")
    elif source not in SOURCES:
        raise InputError("source", source, f"expected one of {', '.join(SOURCES)}")
    lookup = _Lookup(colnames)
    chosen = preset if preset is not None else _best_preset(lookup, exclude=mapping)
    fields = {}
    for name, column in PRESETS[chosen].items():
        if name in mapping:
            continue
        found = lookup.find(column, field=name)
        if found is not None:
            fields[name] = found
    if preset is None and not fields:
        chosen_record = None  # every field named by hand
    else:
        chosen_record = chosen
    for name, column in mapping.items():
        found = lookup.find(column, field=name)
        if found is None:
            raise InputError(
                "columns",
                f"{name}={column}",
                f"the table has no column {column!r}{_close(column, colnames)}; its columns: {_shown(colnames)}",
            )
        fields[name] = found
    _same_name_fields(fields, lookup)
    fields = {name: fields[name] for name in KNOWN_FIELDS if name in fields}
    photometry = _photometry_fields(named_photometry, chosen, lookup, colnames, used=set(fields.values()))
    _refuse_shared({**fields, **photometry})
    missing = [name for name in REQUIRED if name not in fields]
    if missing:
        raise InputError("columns", ", ".join(missing), _missing_help(missing, chosen, lookup, colnames))
    return ColumnMap(fields, chosen_record, source, photometry)


def parse_columns_option(text: str) -> tuple:
    """Read the value of the ``--columns`` option.

    Parameters
    ----------
    text : str
        One of: a preset name (``vizier``); a path to a TOML file with a ``[columns]`` table of
        ``field = "column"`` and optionally ``preset = "name"`` at the top level; or comma-separated
        ``field=column`` pairs, one of which may be ``preset=name``.

    Returns
    -------
    preset : str or None
        The preset named, if any.
    mapping : dict of str to str
        perierr field -> column (empty for a bare preset).

    Raises
    ------
    InputError
        (field ``columns``) naming the malformed part and the accepted forms.
    """
    preset, mapping, _ = option_source(text)
    return preset, mapping


def option_source(text: str) -> tuple:
    """:func:`parse_columns_option` and how the option chose (``"preset"``, ``"file"`` or ``"option"``)."""
    if not isinstance(text, str) or not text.strip():
        raise InputError("columns", text, f"expected {_OPTION_FORMS}")
    text = text.strip()
    if text in PRESETS:
        return text, {}, "preset"
    path = Path(text)
    if text.lower().endswith(".toml") or path.is_file():
        preset, mapping = _read_mapping_file(path)
        return preset, mapping, "file"
    if "=" in text:
        preset, mapping = _read_pairs(text)
        return preset, mapping, "option"
    close = difflib.get_close_matches(text, list(PRESETS), n=1)
    hint = f"did you mean {close[0]!r}? " if close else ""
    raise InputError("columns", text, f"not a preset, a file or field=column pairs; {hint}expected {_OPTION_FORMS}")


# ---------------------------------------------------------------------------------------------- option text


def _read_pairs(text: str) -> tuple:
    preset, mapping = None, {}
    for piece in text.split(","):
        piece = piece.strip()
        key, sep, value = piece.partition("=")
        key, value = key.strip(), value.strip()
        if not sep or not key or not value or "=" in value:
            raise InputError(
                "columns", piece, f"expected field=column (one '=' between two names), e.g. parallax=Plx, in {text!r}"
            )
        if key == "preset":
            if preset is not None:
                raise InputError("columns", text, "names a preset twice; expected at most one preset=name")
            _check_preset(value)
            preset = value
            continue
        if key in mapping:
            raise InputError("columns", key, f"named twice in {text!r}; expected each field at most once")
        mapping[key] = value
    _checked_mapping(mapping)
    return preset, mapping


def _read_mapping_file(path: Path) -> tuple:
    where = str(path)
    if path.is_dir():
        raise InputError("columns", where, "is a folder; expected a TOML mapping file with a [columns] table")
    try:
        with path.open("rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise InputError(
            "columns", where, "mapping file not found; expected a TOML file with a [columns] table"
        ) from None
    except PermissionError:
        raise InputError("columns", where, "cannot be read (permission denied)") from None
    except UnicodeDecodeError:
        raise InputError("columns", where, "is not UTF-8 text; expected a TOML mapping file") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError("columns", where, f"not valid TOML ({exc})") from None
    unknown = [key for key in data if key not in ("preset", "columns")]
    if unknown:
        raise InputError(
            "columns",
            f"{where}: {unknown[0]}",
            'unknown top-level key; expected only preset = "name" and a [columns] table of field = "column"',
        )
    preset = data.get("preset")
    if preset is not None:
        if not isinstance(preset, str):
            raise InputError("columns", f"{where}: preset = {preset!r}", f"expected a preset name: {_PRESET_HELP}")
        _check_preset(preset)
    table = data.get("columns", {})
    if not isinstance(table, Mapping):
        raise InputError("columns", f"{where}: columns = {table!r}", 'expected a [columns] table of field = "column"')
    if preset is None and not table:
        raise InputError(
            "columns", where, 'names no columns; expected a [columns] table (parallax = "Plx") or preset = "name"'
        )
    for key, value in table.items():
        if not isinstance(value, str) or not value.strip():
            raise InputError("columns", f"{where}: {key} = {value!r}", "expected a column name in quotes")
    return preset, _checked_mapping({key: value.strip() for key, value in table.items()})


# ---------------------------------------------------------------------------------------------- the choice


class _Lookup:
    """Find a column by name: exactly, else ignoring surrounding spaces, else ignoring case as well.

    Two columns that match only once spaces or case are ignored are refused (naming both).
    """

    def __init__(self, colnames: list) -> None:
        self.colnames = colnames
        self.exact = set(colnames)
        self.trimmed: dict = {}
        self.folded: dict = {}
        for name in colnames:
            self.trimmed.setdefault(name.strip(), []).append(name)
            self.folded.setdefault(_folded(name), []).append(name)

    def find(self, column: str, *, field: str | None = None) -> str | None:
        if column in self.exact:
            return column
        for matches, how in (
            (self.trimmed.get(column.strip(), ()), "surrounding spaces are"),
            (self.folded.get(_folded(column), ()), "surrounding spaces and case are"),
        ):
            matches = list(dict.fromkeys(matches))
            if len(matches) > 1:
                if matches[0].strip() == matches[1].strip():  # a name given as text is trimmed: no way to pick
                    way = "rename one of them (names are compared without their surrounding spaces)"
                else:
                    way = f"name one with --columns {field or 'field'}={matches[0].strip()}"
                raise InputError(
                    "columns",
                    f"{field}={column}" if field else column,
                    f"columns {matches[0]!r} and {matches[1]!r} both match when {how} ignored; {way}",
                )
            if matches:
                return matches[0]
        return None

    def quiet_find(self, column: str) -> str | None:
        try:
            return self.find(column)
        except InputError:
            return column  # ambiguous still counts as found; the real lookup names the ambiguity


def _best_preset(lookup: _Lookup, exclude: Mapping) -> str:
    """The preset whose names match the most required fields, then the most fields (the first on ties)."""

    def score(name: str) -> tuple:
        preset = PRESETS[name]
        required = sum(lookup.quiet_find(preset[f]) is not None for f in REQUIRED if f not in exclude and f in preset)
        anything = sum(lookup.quiet_find(c) is not None for f, c in preset.items() if f not in exclude)
        return required, anything

    scores = {name: score(name) for name in PRESETS}
    return max(PRESETS, key=lambda name: scores[name])  # max keeps the first of equal scores


def _same_name_fields(fields: dict, lookup: _Lookup) -> None:
    """Add ``source_id`` and ``name`` from columns of those names when nothing maps them yet."""
    for name in SAME_NAME_FIELDS:
        if name in fields:
            continue
        found = lookup.find(name, field=name)
        if found is not None and found not in fields.values():
            fields[name] = found


def _photometry_fields(named: dict, chosen: str, lookup: _Lookup, colnames: list, used: set) -> dict:
    """The optional photometry columns: named ones (each must exist), else the preset's name, else the field's own."""
    out = {}
    for name in PHOTOMETRY_FIELDS:
        if name in named:
            found = lookup.find(named[name], field=name)
            if found is None:
                raise InputError(
                    "columns", f"{name}={named[name]}",
                    f"the table has no column {named[name]!r}{_close(named[name], colnames)}; its columns: "
                    f"{_shown(colnames)}",
                )  # fmt: skip
            out[name] = found
            continue
        for column in dict.fromkeys((PHOTOMETRY_PRESETS[chosen].get(name, name), name)):
            found = lookup.find(column, field=name)
            if found is not None and found not in used:
                out[name] = found
                break
    return out


def g_error_from_flux(flux_over_error):
    """sigma_G [mag] from the G flux over its error: ``2.5 / ln(10) / (flux / error)`` (NaN where not > 0, finite).

    Examples
    --------
    >>> round(float(g_error_from_flux(1000.0)), 7)
    0.0010857
    """
    import numpy as np

    ratio = np.asarray(flux_over_error, dtype=float)
    good = np.isfinite(ratio) & (ratio > 0)
    return np.where(good, G_ERROR_PER_INVERSE_SNR / np.where(good, ratio, 1.0), np.nan)


def _folded(name: str) -> str:
    """A column name without surrounding spaces, in case-folded form (for matching)."""
    return name.strip().casefold()


def _refuse_shared(fields: dict) -> None:
    """One column read as two measurements is a slip (only the name may repeat another column)."""
    seen: dict = {}
    for name, column in fields.items():
        if name == "name":
            continue
        if column in seen:
            raise InputError(
                "columns", column, f"column is mapped to both {seen[column]} and {name}; expected one column per field"
            )
        seen[column] = name


def _missing_help(missing: list, chosen: str, lookup: _Lookup, colnames: list) -> str:
    """Why a table cannot be read, and what would help."""
    hints = []
    for name in missing:
        close = difflib.get_close_matches(name.casefold(), [_folded(c) for c in colnames], n=1, cutoff=0.7)
        if close:
            hints.append(f"{name}={lookup.folded[close[0]][0]}")
    others = [
        name
        for name in PRESETS
        if name != chosen and any(lookup.quiet_find(PRESETS[name].get(f, "\0")) for f in missing)
    ]
    text = f"the table has no column for {', '.join(missing)} (preset {chosen!r} looks for "
    text += ", ".join(PRESETS[chosen].get(f, f) for f in missing) + f"); its columns: {_shown(colnames)}. "
    if others:
        text += f"Try the preset {others[0]!r} (--columns {others[0]}), or name"
    else:
        text += "Name"
    example = ",".join(hints) if hints else f"{missing[0]}=COLUMN"
    text += f" the columns with --columns field=column (e.g. --columns {example}); presets: {_PRESET_HELP}"
    if "radial_velocity" in missing or "radial_velocity_error" in missing:
        text += ". The radial velocity columns must exist, but their cells may be empty"
    return text


# ---------------------------------------------------------------------------------------------- checks


def _check_preset(name) -> None:
    if not isinstance(name, str) or name not in PRESETS:
        close = difflib.get_close_matches(str(name), list(PRESETS), n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        raise InputError("columns", name, f"unknown preset; {hint}expected one of: {_PRESET_HELP}")


def _checked_mapping(mapping) -> dict:
    """A copy of ``mapping`` with known field names and non-empty column names (else InputError)."""
    if mapping is None:
        return {}
    if not isinstance(mapping, Mapping):
        raise InputError("columns", mapping, "expected a mapping of perierr field -> table column")
    known = KNOWN_FIELDS + PHOTOMETRY_FIELDS
    for key, value in mapping.items():
        if key in ("mag", "mag_error", "mag_band"):
            raise InputError("columns", key, "catalogue runs read the G magnitude: name its column "
                             "phot_g_mean_mag (with phot_g_mean_mag_error or phot_g_mean_flux_over_error)")  # fmt: skip
        if key not in known:
            close = difflib.get_close_matches(str(key), known, n=1)
            hint = f"did you mean {close[0]!r}? " if close else ""
            raise InputError("columns", key, f"unknown perierr field; {hint}known fields: {', '.join(known)}")
        if not isinstance(value, str) or not value.strip():
            raise InputError("columns", f"{key}={value!r}", "expected a table column name")
    return {key: value.strip() for key, value in mapping.items()}


def _close(column: str, colnames: list) -> str:
    close = difflib.get_close_matches(column, colnames, n=1)
    return f" (did you mean {close[0]!r}?)" if close else ""


def _shown(colnames: list) -> str:
    if not colnames:
        return "(none)"
    more = len(colnames) - _SHOWN_COLUMNS
    return ", ".join(colnames[:_SHOWN_COLUMNS]) + (f", ... ({len(colnames)} in all)" if more > 0 else "")
