"""Reading a catalogue in chunks: CSV, ECSV, FITS, VOTable and Parquet rows as :class:`~.chunk.Chunk` blocks.

:func:`open_catalogue` checks the file, chooses the columns (:mod:`.columns`), reads the units of the
mapped columns and returns a :class:`Catalogue`; :meth:`Catalogue.chunks` then hands out the rows in
input order, ``chunk_rows`` at a time: chunk ``k`` holds rows ``k * chunk_rows`` to
``(k + 1) * chunk_rows - 1`` whatever the format, so a chunk is the same rows in every run.

Memory per format:

* Parquet: only the mapped columns, one batch at a time (``pyarrow.parquet.ParquetFile.iter_batches``);
* CSV (``.csv``, ``.csv.gz``): streamed by ``pyarrow.csv.open_csv``, the mapped columns read as text and
  converted per chunk, so one cell that is not a number is NaN and flagged unreadable without touching
  the rest of its column (see "CSV files" below);
* FITS: the first table extension, memory-mapped, sliced row by row range (a ``.fits.gz`` file is
  decompressed into memory by astropy);
* ECSV and VOTable: read whole with astropy (``astropy.table.Table``, the first table of a VOTable, column
  names rather than IDs), then only the mapped columns are kept.

Values come out in catalogue units (:data:`perierr.units.FIELD_UNITS`): a column with a unit (ECSV, FITS
``TUNIT``, VOTable, Parquet written by astropy or with a ``unit`` field metadata) is converted by
astropy.units; a column without a unit is taken to be in catalogue units already. Correlations must be
dimensionless, ``ref_epoch`` in Julian years. The optional photometry (:data:`.columns.PHOTOMETRY_FIELDS`,
read when the table has it) comes out in mag (``mag`` or ``mmag``, or a magnitude system such as
``mag(AB)``, whose numbers are kept as they are), the flux-over-error ratio dimensionless.

Empty, masked and null cells, and the text markers of
:data:`MISSING_TEXT` in any case (``N/A``, ``n/a``, ``None``, ``none``, ...), are NaN (missing); a cell
holding other text is NaN and True in ``Chunk.unreadable``.

Identifiers (``source_id``), by the column's type:

* a signed integer column: int64; an empty (masked, null, ``TNULL``) cell is :data:`MISSING_ID` (-1).
  Catalogue identifiers are non-negative, so -1 is free for this; a cell that really holds -1 reads
  the same as an empty one (downstream, both rows are keyed by their row number);
* an unsigned integer column: int64 as well when every value fits in int64 (below 2**63; decided from
  the Parquet row-group statistics, else from one pass over that column before the first chunk), else
  the decimal text of each value (a uint64 identifier beyond 2**63 - 1 is kept exactly, never refused);
* a text column, and always a CSV's identifier column: the text as written, surrounding spaces
  trimmed ('' where empty). A CSV has no column types, and deciding them from the first rows would
  make the result depend on the chunk size; text keeps every identifier exactly (one that is not a
  number never stops a run), and perierr's per-star seed reads digit-only text as the integer it spells
  (:func:`perierr.catalogue.treatment.star_seed`), so a star keeps its seed whichever format it came in.

CSV files
---------
The header's names are trimmed of surrounding spaces (the header ``source_id, ra, dec`` names the
columns ``ra`` and ``dec``, not `` ra`` and `` dec``), as astropy's CSV reader trims them; so are text
cells. Lines starting with ``#`` before the header are skipped; blank
lines are ignored. Row ``k`` is the ``k``-th data line of the file (0-based, blank lines not counted; a
quoted value spanning lines makes one row of its lines, as in Python's csv module), whatever the chunk
size. A malformed line (more or fewer fields than the header) never stops a run: it
stays a row in its place, every field NaN and marked unreadable (``Chunk.unreadable[field]`` True for
each mapped number field, ``source_id`` and ``name`` empty), so the screen reports it as
``unreadable_value``; :func:`read_row` names it. pyarrow hands such a line to the
``ParseOptions(invalid_row_handler=...)`` callback with its row number in the file (blank lines not
counted) and skips it; the reader puts it back among the good rows from that number.
"""

from __future__ import annotations

import gzip
import hashlib
import math
import os
from collections.abc import Iterator, Mapping
from pathlib import Path

import astropy.units as u
import numpy as np

from ..errors import InputError
from ..star.fields import CORRELATIONS
from ..star.reading import MASKED
from ..units import FIELD_UNITS
from .chunk import Chunk
from .columns import PHOTOMETRY_FIELDS, ColumnMap, column_map, g_error_from_flux, option_source

__all__ = [
    "DEFAULT_CHUNK_ROWS",
    "EXTENSIONS",
    "FORMATS",
    "MISSING_ID",
    "MISSING_TEXT",
    "Catalogue",
    "open_catalogue",
    "read_row",
]

#: Rows per chunk unless told otherwise.
DEFAULT_CHUNK_ROWS = 100_000
#: The formats read, and the file name endings that select them.
FORMATS = ("csv", "ecsv", "fits", "votable", "parquet")
#: File name endings (lower case) -> format.
EXTENSIONS = {
    ".csv": "csv",
    ".csv.gz": "csv",
    ".ecsv": "ecsv",
    ".ecsv.gz": "ecsv",
    ".fits": "fits",
    ".fit": "fits",
    ".fts": "fits",
    ".fits.gz": "fits",
    ".fit.gz": "fits",
    ".vot": "votable",
    ".xml": "votable",
    ".votable": "votable",
    ".parquet": "parquet",
    ".pq": "parquet",
}
#: The int64 identifier of a row whose integer ``source_id`` cell is empty (masked, null or ``TNULL``).
#: Identifiers are non-negative, so -1 names no star; downstream, such a row is keyed by its row number.
MISSING_ID = -1
#: Text cells read as missing (NaN), not as unreadable, compared ignoring case and surrounding spaces
#: (``NaN``, ``N/A``, ``None``, ``NULL``, ``na`` ... are all missing).
MISSING_TEXT = ("", "nan", "null", "none", "na", "n/a", "--")
# a number as pyarrow parses it (RE2 syntax): decimal, exponent, nan, inf
_NUMBER = r"^[+-]?(?:(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?|nan|inf|infinity)$"
_TEXT_FIELDS = ("name", "source_id")
# the extra column of a CSV block: fields found on a malformed line (-1 on a good line)
_MALFORMED = "\x00malformed"
_INT64_MAX = 2**63 - 1
_SCAN_ROWS = 1 << 20
_CSV_BLOCK_BYTES = 1 << 20
_HASH_BLOCK_BYTES = 1 << 20


# ---------------------------------------------------------------------------------------------- public


class Catalogue:
    """An opened catalogue: its format, columns and units, read chunk by chunk (made by :func:`open_catalogue`).

    Attributes
    ----------
    path : Path
        The file.
    format : str
        One of :data:`FORMATS`.
    column_map : ColumnMap
        Which column holds which field.
    chunk_rows : int
        Rows per chunk (the last chunk may hold fewer).
    """

    def __init__(self, path: Path, fmt: str, cmap: ColumnMap, chunk_rows: int, source, scales: dict) -> None:
        self.path = path
        self.format = fmt
        self.column_map = cmap
        self.chunk_rows = chunk_rows
        self._source = source
        self._scales = scales
        self._checksum: str | None = None

    def __repr__(self) -> str:
        return f"Catalogue({str(self.path)!r}, format={self.format!r}, n_rows={self.n_rows})"

    @property
    def n_rows(self) -> int | None:
        """Number of rows: from the metadata (Parquet), the header (FITS), the table (ECSV, VOTable).

        A CSV's is the number of lines after the header (counted once, fast, on first use: exact unless
        the file has blank lines or quoted values spanning lines; a malformed line counts, as it stays a
        row); None for a compressed CSV until every chunk has been read.
        """
        return self._source.n_rows

    @property
    def units(self) -> dict:
        """Field -> the unit of its column as found in the file ('' when none), for the record."""
        return {name: ("" if unit is None else str(unit)) for name, unit in self._source.field_units.items()}

    def to_dict(self) -> dict:
        """What was read, as plain JSON-able data (the checksum is separate: it reads the whole file)."""
        return {
            "path": str(self.path),
            "format": self.format,
            "n_rows": self.n_rows,
            "chunk_rows": self.chunk_rows,
            "columns": self.column_map.to_dict(),
            "units": self.units,
        }

    def checksum(self) -> str:
        """``"sha256:<hex>"`` of the file's bytes (read in blocks; computed once)."""
        if self._checksum is None:
            digest = hashlib.sha256()
            with self.path.open("rb") as fh:
                while block := fh.read(_HASH_BLOCK_BYTES):
                    digest.update(block)
            self._checksum = f"sha256:{digest.hexdigest()}"
        return self._checksum

    def chunks(self, *, start_chunk: int = 0) -> Iterator[Chunk]:
        """Every row once, in input order, as :class:`Chunk` blocks of at most ``chunk_rows`` rows.

        Parameters
        ----------
        start_chunk : int
            Index of the first chunk to hand out; the rows before it are read past, not converted
            (a resumed run).
        """
        if not _is_whole(start_chunk, 0):
            raise InputError("start_chunk", start_chunk, "expected a chunk index >= 0")
        return self._chunks(int(start_chunk) * self.chunk_rows)

    # ------------------------------------------------------------------------------------------ internals

    def _chunks(self, first_row: int) -> Iterator[Chunk]:
        for start, block in self._blocks():
            if start >= first_row:
                yield self._convert(start, block)

    def _blocks(self) -> Iterator:
        """(first row, {column: raw array}) of exactly ``chunk_rows`` rows (the last: the rest)."""
        total = 0
        for start, block in self._source.blocks(self.column_map.read_columns, self.chunk_rows):
            total = start + _length(next(iter(block.values())))
            yield start, block
        self._source.counted(total)

    def _convert(self, start: int, block: dict) -> Chunk:
        fields = self.column_map.all_fields
        n = _length(block[next(iter(block))])
        values, unreadable = {}, {}
        for name, column in fields.items():
            if name in _TEXT_FIELDS:
                continue
            numbers, bad = _numbers(block[column])
            scale = self._scales.get(name, 1.0)
            values[name] = numbers * scale if scale != 1.0 else numbers
            if bad is not None and bad.any():
                unreadable[name] = bad
        broken = _malformed(block)
        if broken is not None:  # a malformed CSV line: every field unreadable (its cells are already null)
            for key in values:
                unreadable[key] = unreadable[key] | broken if key in unreadable else broken.copy()
        source_id = name = None
        if "source_id" in fields:
            source_id = self._source.identifiers(block[fields["source_id"]])
        if "name" in fields:
            name = self._source.text(block[fields["name"]])
        rows = np.arange(start, start + n, dtype=np.int64)
        return Chunk(rows, values, unreadable, source_id, name)


def open_catalogue(
    path: str | os.PathLike,
    *,
    columns=None,
    chunk_rows: int = DEFAULT_CHUNK_ROWS,
    format: str | None = None,
) -> Catalogue:
    """Open a catalogue file for chunked reading.

    Parameters
    ----------
    path : str or Path
        A ``.csv`` (or ``.csv.gz``), ``.ecsv``, ``.fits`` / ``.fit`` / ``.fits.gz``, ``.vot`` / ``.xml`` /
        ``.votable`` or ``.parquet`` / ``.pq`` file. A ``.csv`` file that starts with an ECSV header is read
        as ECSV.
    columns : None, ColumnMap, str or Mapping, optional
        None: auto-detection (:func:`.columns.column_map`); a :class:`ColumnMap`; the text of the
        ``--columns`` option (a preset name, a TOML mapping file or ``field=column`` pairs); or a mapping
        {field: column} over the auto-detected preset.
    chunk_rows : int
        Rows per chunk (>= 1).
    format : str, optional
        One of :data:`FORMATS`, for a file whose name does not end in one of :data:`EXTENSIONS`
        (a Python keyword only: the command line reads files by their extension).

    Returns
    -------
    Catalogue

    Raises
    ------
    InputError
        Field ``table`` for a missing, unreadable or unknown file; ``columns`` for the column choice;
        the field itself for a unit that cannot be converted to its catalogue unit.
    """
    if not _is_whole(chunk_rows, 1):
        raise InputError("chunk_rows", chunk_rows, "expected a whole number of rows >= 1")
    path = Path(path)
    head = _check_file(path)
    fmt = _format(path, head, format)
    source = _SOURCES[fmt](path, head)
    cmap = _choose_columns(columns, source.colnames)
    source.prepare(cmap)
    scales = {name: _scale(name, column, source.units.get(column)) for name, column in cmap.all_fields.items()}
    return Catalogue(path, fmt, cmap, int(chunk_rows), source, scales)


def read_row(path: str | os.PathLike, *, row: int | None = None, source_id=None, columns=None) -> dict:
    """One row of a catalogue as {perierr field: value}, for :meth:`perierr.star.ObservedStar.from_mapping`.

    Parameters
    ----------
    path : str or Path
        The catalogue (as for :func:`open_catalogue`).
    row : int, optional
        0-based row number.
    source_id : int or str, optional
        The identifier to look for (the first row holding it); give exactly one of ``row`` and
        ``source_id``.
    columns : optional
        The column choice, as for :func:`open_catalogue`.

    Returns
    -------
    dict
        Numbers as floats in catalogue units, a cell that is not a number as its text (``from_mapping``
        then names it), ``source_id`` as int or str, ``name`` as str. Empty cells are left out, except
        those of a correlation column: they are :data:`perierr.star.MASKED`, which ``from_mapping``
        refuses (a missing correlation is not 0 when its column exists). The G magnitude's error is
        ``phot_g_mean_mag_error`` when the row gives one, else ``2.5 / ln(10) / phot_g_mean_flux_over_error``
        (:func:`.columns.g_error_from_flux`, as catalogue runs read it); the ratio itself is not returned.

    Raises
    ------
    InputError
        When neither or both of ``row`` and ``source_id`` are given, the row is out of range or the
        identifier is not in the table (the message gives the table's row count), or the row is a
        malformed CSV line (the message gives its number of fields and the header's).
    """
    if (row is None) == (source_id is None):
        raise InputError("row", row, "give exactly one of row and source_id")
    cat = open_catalogue(path, columns=columns)
    if row is not None:
        return _row_by_number(cat, row)
    return _row_by_id(cat, source_id)


# ---------------------------------------------------------------------------------------------- one row


def _row_by_number(cat: Catalogue, row) -> dict:
    if not _is_whole(row, 0):
        raise InputError("row", row, "expected a row number >= 0 (0 is the first row)")
    if cat.format != "csv" and row >= cat.n_rows:  # counted exactly: no need to read
        raise InputError("row", row, f"out of range; the table has {_rows_text(cat)}")
    first = (int(row) // cat.chunk_rows) * cat.chunk_rows
    for start, block in cat._blocks():
        if start == first:
            n = _length(block[next(iter(block))])
            if row - start < n:
                return _row_dict(cat, start, block, int(row) - start)
    raise InputError("row", row, f"out of range; the table has {_rows_text(cat)}")


def _row_by_id(cat: Catalogue, source_id) -> dict:
    fields = cat.column_map.fields
    if "source_id" not in fields:
        raise InputError(
            "source_id",
            source_id,
            "the table has no source_id column; name it with --columns source_id=COLUMN, or give a row number",
        )
    key = str(source_id).strip()
    for start, block in cat._blocks():
        ids = cat._source.identifiers(block[fields["source_id"]])
        if ids.dtype.kind == "i":
            if not _is_integer_text(key) or int(key) == MISSING_ID:
                continue
            found = np.flatnonzero(ids == int(key))
        else:
            found = np.flatnonzero(np.char.strip(ids) == key)
        if found.size:
            return _row_dict(cat, start, block, int(found[0]))
    raise InputError("source_id", source_id, f"not found in the {_rows_text(cat)}")


def _row_dict(cat: Catalogue, start: int, block: dict, i: int) -> dict:
    broken = block.get(_MALFORMED)
    if broken is not None and broken[i].as_py() >= 0:
        found, header = broken[i].as_py(), len(cat._source.colnames)
        raise InputError(
            "row",
            start + i,
            f"the line of this row in {cat.path.name} has {found} fields where the header has {header} "
            f"(a malformed CSV line); expected {header} comma-separated fields",
            start + i,
        )
    chunk = cat._convert(start, block).take(slice(i, i + 1))
    fields = cat.column_map.all_fields
    out = {}
    for name, values in chunk.values.items():
        value = float(values[0])
        if name in chunk.unreadable and chunk.unreadable[name][0]:
            out[name] = _cell_text(block[fields[name]], i)
        elif not math.isnan(value):
            out[name] = value
        elif name in CORRELATIONS:
            out[name] = MASKED
    if chunk.source_id is not None:
        sid = chunk.source_id[0]
        if chunk.source_id.dtype.kind == "i" and sid != MISSING_ID:
            out["source_id"] = int(sid)
        elif chunk.source_id.dtype.kind != "i" and str(sid).strip():
            out["source_id"] = str(sid)
    if chunk.name is not None and str(chunk.name[0]).strip():
        out["name"] = str(chunk.name[0])
    ratio = out.pop("phot_g_mean_flux_over_error", None)
    if "phot_g_mean_mag" in out and "phot_g_mean_mag_error" not in out and isinstance(ratio, float):
        error = float(g_error_from_flux(ratio))
        if not math.isnan(error):
            out["phot_g_mean_mag_error"] = error
    return out


def _rows_text(cat: Catalogue) -> str:
    n = cat.n_rows
    if n is None:
        return "rows of the table"
    return f"{n} rows (0 to {n - 1})" if n else "0 rows"


def _cell_text(array, i: int) -> str:
    cell = array[i]
    cell = cell.as_py() if hasattr(cell, "as_py") else cell
    return cell.decode("utf-8", "replace") if isinstance(cell, bytes) else str(cell)


# ---------------------------------------------------------------------------------------------- the file


def _check_file(path: Path) -> bytes:
    """The file's first bytes, or an InputError saying why it cannot be read."""
    expected = "expected a catalogue file (" + ", ".join(sorted(set(EXTENSIONS))) + ")"
    if path.is_dir():
        raise InputError("table", str(path), f"is a folder; {expected}")
    try:
        with path.open("rb") as fh:
            head = fh.read(4096)
    except FileNotFoundError:
        raise InputError("table", str(path), f"file not found; {expected}") from None
    except PermissionError:
        raise InputError("table", str(path), "cannot be read (permission denied)") from None
    except OSError as exc:
        raise InputError("table", str(path), f"cannot be read ({exc.strerror or exc})") from None
    if not head:
        raise InputError("table", str(path), f"is empty; {expected}")
    return head


def _format(path: Path, head: bytes, given) -> str:
    if given is not None:
        aliases = {"vot": "votable", "xml": "votable", "fit": "fits", "pq": "parquet"}
        fmt = aliases.get(str(given).lower(), str(given).lower())
        if fmt not in FORMATS:
            raise InputError("format", given, f"unknown format; expected one of {', '.join(FORMATS)}")
    else:
        name = path.name.lower()
        ext = next((e for e in sorted(EXTENSIONS, key=len, reverse=True) if name.endswith(e)), None)
        if ext is None:
            raise InputError(
                "table",
                str(path),
                f"unknown file type {''.join(path.suffixes) or '(no extension)'!r}; expected a file name "
                f"ending in {', '.join(EXTENSIONS)} (rename the file; from Python, "
                f"open_catalogue(path, format=...) also takes one of {', '.join(FORMATS)})",
            )
        fmt = EXTENSIONS[ext]
    if fmt == "csv" and _text_head(path, head).startswith("# %ECSV"):
        return "ecsv"
    return fmt


def _text_head(path: Path, head: bytes) -> str:
    if head[:2] == b"\x1f\x8b":  # gzip
        try:
            with gzip.open(path, "rb") as fh:
                head = fh.read(4096)
        except (OSError, EOFError) as exc:
            raise InputError("table", str(path), f"is not a readable gzip file ({exc})") from None
    return head.decode("utf-8", "replace").lstrip("\ufeff")


def _failed(path: Path, fmt: str, exc: BaseException) -> InputError:
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    return InputError("table", str(path), f"cannot be read as {fmt} ({text[:300]})")


def _choose_columns(columns, colnames: list) -> ColumnMap:
    if columns is None:
        return column_map(colnames)
    if isinstance(columns, ColumnMap):
        trimmed = {}
        for name in colnames:
            trimmed.setdefault(name.strip(), []).append(name)
        fields = {}
        for name, column in columns.all_fields.items():
            found = [column] if column in colnames else trimmed.get(column.strip(), [])
            if len(found) != 1:
                shown = ", ".join(colnames[:30])
                raise InputError("columns", column, f"not a column of the table; its columns: {shown}")
            fields[name] = found[0]
        if fields == columns.all_fields:
            return columns
        photometry = {k: v for k, v in fields.items() if k in PHOTOMETRY_FIELDS}
        astrometry = {k: v for k, v in fields.items() if k not in PHOTOMETRY_FIELDS}
        return ColumnMap(astrometry, columns.preset, columns.source, photometry)
    if isinstance(columns, str):
        preset, mapping, how = option_source(columns)
        return column_map(colnames, preset=preset, mapping=mapping, source=how)
    if isinstance(columns, Mapping):
        return column_map(colnames, mapping=columns)
    raise InputError("columns", columns, "expected None, a ColumnMap, a preset name, option text or a mapping")


# ---------------------------------------------------------------------------------------------- units


def _parse_unit(text, column: str, field: str):
    """An astropy unit from a file's unit text (None when there is none)."""
    if isinstance(text, u.UnrecognizedUnit):  # astropy's reader did not know it: try the other unit formats
        text = text.name
    if text is None or isinstance(text, u.UnitBase):
        return text
    text = str(text).strip()
    if not text:
        return None
    for fmt in (None, "fits", "vounit", "cds"):
        try:
            return u.Unit(text, format=fmt)
        except (ValueError, TypeError):
            continue
    raise InputError(field, text, f"column {column!r} has a unit astropy cannot read; {_unit_expected(field)}")


def _target(field: str):
    if field in CORRELATIONS or field == "phot_g_mean_flux_over_error":
        return u.dimensionless_unscaled
    if field == "ref_epoch":
        return u.yr
    return FIELD_UNITS.get(field)


def _unit_expected(field: str) -> str:
    if field in CORRELATIONS:
        return "expected a dimensionless correlation coefficient"
    if field == "ref_epoch":
        return "expected an epoch in Julian years (yr) or no unit"
    if field == "phot_g_mean_flux_over_error":
        return "expected a dimensionless ratio (flux / flux error) or no unit"
    if field in PHOTOMETRY_FIELDS:
        return "expected a magnitude unit (mag, mmag, or a system such as mag(AB)) or no unit"
    return f"expected a unit convertible to {FIELD_UNITS[field]}"


# magnitudes: FIELD_UNITS has no entry for them (perierr.units); the star reader reads them in astropy's mag
# too (perierr.star.reading). Only mag and mmag scale: astropy would also turn dex into mag (x -2.5), which a
# magnitude column never means.
_MAGNITUDE_SCALES = {u.mag: 1.0, u.mmag: 1e-3}


def _magnitude_scale(field: str, column: str, unit) -> float:
    """The factor from a magnitude column's unit to mag: mag, mmag, or a magnitude system (its numbers as read)."""
    if isinstance(unit, u.MagUnit) and unit.function_unit == u.mag:
        return 1.0  # mag(AB), mag(ST), ...: the zero point names the system; the numbers are magnitudes
    for known, factor in _MAGNITUDE_SCALES.items():
        if unit == known:
            return factor
    raise InputError(field, str(unit), f"column {column!r} has this unit; {_unit_expected(field)}")


def _scale(field: str, column: str, unit) -> float:
    """The factor from the column's unit to the field's catalogue unit (1 when the column has no unit)."""
    if field in _TEXT_FIELDS or unit is None or unit == u.dimensionless_unscaled:
        return 1.0
    if field in PHOTOMETRY_FIELDS and field != "phot_g_mean_flux_over_error":
        return _magnitude_scale(field, column, unit)
    try:
        factor = float(unit.to(_target(field)))
    except (u.UnitsError, ValueError, TypeError):
        raise InputError(field, str(unit), f"column {column!r} has this unit; {_unit_expected(field)}") from None
    if field == "ref_epoch" and factor != 1.0:
        raise InputError(field, str(unit), f"column {column!r} has this unit; {_unit_expected(field)}")
    return factor


# ---------------------------------------------------------------------------------------------- cells


def _length(array) -> int:
    return len(array)


def _numbers(array) -> tuple:
    """(float64 values with NaN for missing cells, bool mask of unreadable cells or None)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if isinstance(array, (pa.Array, pa.ChunkedArray)):
        if isinstance(array, pa.ChunkedArray):
            array = array.combine_chunks()
        kind = array.type
        if pa.types.is_dictionary(kind):
            array = array.dictionary_decode()
            kind = array.type
        if pa.types.is_null(kind):
            return np.full(len(array), np.nan), None
        if pa.types.is_string(kind) or pa.types.is_large_string(kind):
            return _parse_text(array)
        values = pc.cast(array, pa.float64()).to_numpy(zero_copy_only=False)
        return np.array(values, dtype=np.float64), None
    data = np.ma.getdata(array)
    mask = np.ma.getmaskarray(array)
    if data.dtype.kind in "USO":
        text = np.where(mask, "", data.astype(str))
        return _parse_text(pa.array(text.tolist() if data.dtype.kind == "O" else text, type=pa.string()))
    values = data.astype(np.float64)
    if mask.any():
        values[mask] = np.nan
    return values, None


def _parse_text(array) -> tuple:
    """Numbers from text cells: missing markers are NaN, other text NaN and unreadable (pyarrow kernels)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    text = pc.utf8_trim_whitespace(array.cast(pa.string()))
    # is_in answers False (not null) for a null cell: an empty cell is missing by is_null
    missing = pc.or_(
        pc.is_null(text), pc.fill_null(pc.is_in(pc.utf8_lower(text), value_set=pa.array(MISSING_TEXT)), True)
    )
    text = pc.if_else(missing, pa.scalar(None, pa.string()), text)
    try:
        numbers = pc.cast(text, pa.float64())
        bad = None
    except pa.ArrowInvalid:
        good = pc.fill_null(pc.match_substring_regex(text, _NUMBER, ignore_case=True), False)
        numbers = pc.cast(pc.if_else(good, text, pa.scalar(None, pa.string())), pa.float64())
        bad = ~(np.asarray(good.to_numpy(zero_copy_only=False), dtype=bool) | missing.to_numpy(zero_copy_only=False))
    return np.array(numbers.to_numpy(zero_copy_only=False), dtype=np.float64), bad


def _text(array, *, trim: bool = False) -> np.ndarray:
    """Text cells as a str array ('' where missing); ``trim``: without surrounding spaces (pyarrow arrays)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if isinstance(array, (pa.Array, pa.ChunkedArray)):
        text = pc.cast(array, pa.string())
        if trim:
            text = pc.utf8_trim_whitespace(text)
        text = pc.fill_null(text, "")
        return np.asarray(text.to_numpy(zero_copy_only=False), dtype=str)
    data = np.ma.getdata(array)
    mask = np.ma.getmaskarray(array)
    if data.dtype.kind == "S":
        data = np.char.decode(data, "utf-8", "replace")
    return np.where(mask, "", np.char.rstrip(data.astype(str)))


def _is_whole(value, least: int) -> bool:
    """An integer (not a boolean) >= ``least``."""
    return not isinstance(value, (bool, np.bool_)) and isinstance(value, (int, np.integer)) and value >= least


def _malformed(block: dict):
    """Bool array of the rows of a CSV block that are malformed lines, or None when there are none."""
    found = block.get(_MALFORMED)
    if found is None:
        return None
    broken = np.asarray(found.to_numpy(zero_copy_only=False)) >= 0
    return broken if broken.any() else None


def _is_integer_text(text: str) -> bool:
    body = text[1:] if text[:1] in "+-" else text
    return body.isdigit() and body.isascii()


# ---------------------------------------------------------------------------------------------- sources


class _Source:
    """What a format reader knows: column names, units, row count, raw blocks of rows."""

    colnames: list
    units: dict
    fmt = ""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.field_units: dict = {}
        self.id_integer = False
        self._n_rows: int | None = None

    @property
    def n_rows(self) -> int | None:
        return self._n_rows

    def counted(self, total: int) -> None:
        """Every block was read: the row count is known."""
        self._n_rows = total

    def kind(self, column: str) -> str:
        """``"int"``, ``"uint64"``, ``"float"``, ``"text"``, ``"bool"``, ``"shaped"`` or ``"unknown"`` (CSV)."""
        raise NotImplementedError

    def prepare(self, cmap: ColumnMap) -> None:
        """Check the mapped columns' types, read their units and decide how identifiers are read."""
        for name, column in cmap.all_fields.items():
            kind = self.kind(column)
            if kind == "shaped":
                raise InputError(name, column, "the column holds several values per row; expected one per row")
            if name == "source_id":
                self.id_integer = kind == "int" or (kind == "uint64" and self.largest(column) <= _INT64_MAX)
            elif name != "name" and kind not in ("int", "uint64", "float", "text", "unknown"):
                what = "true/false values" if kind == "bool" else "values that are not numbers"
                raise InputError(name, column, f"the column holds {what}; expected numbers")
            if name not in _TEXT_FIELDS:
                self.field_units[name] = _parse_unit(self.units.get(column), column, name)
        fields = cmap.all_fields
        self.units = {fields[name]: unit for name, unit in self.field_units.items()}
        self.keep(cmap.read_columns)

    def largest(self, column: str) -> int:
        """The largest value of an unsigned integer column (0 when every cell is empty): one pass over it."""
        import pyarrow as pa
        import pyarrow.compute as pc

        top = 0
        for _, block in self.blocks((column,), _SCAN_ROWS):
            array = block[column]
            if isinstance(array, (pa.Array, pa.ChunkedArray)):
                peak = pc.max(array).as_py()
            else:
                data = np.ma.getdata(array)[~np.ma.getmaskarray(array)]
                peak = int(data.max()) if data.size else None
            top = max(top, peak or 0)
        return top

    def keep(self, columns: tuple) -> None:
        """Drop what is held of the other columns (whole-table formats)."""

    def text(self, array) -> np.ndarray:
        """Text cells as str ('' where empty)."""
        return _text(array)

    def identifiers(self, array) -> np.ndarray:
        """int64 identifiers (:data:`MISSING_ID` where empty) for an integer column, else str (module docstring)."""
        import pyarrow as pa
        import pyarrow.compute as pc

        if not self.id_integer:
            return self.text(array)
        if isinstance(array, (pa.Array, pa.ChunkedArray)):
            return np.asarray(pc.fill_null(pc.cast(array, pa.int64()), MISSING_ID).to_numpy(zero_copy_only=False))
        data = np.ma.getdata(array).astype(np.int64)  # unsigned values below 2**63: exact
        return np.where(np.ma.getmaskarray(array), MISSING_ID, data)

    def blocks(self, columns: tuple, chunk_rows: int) -> Iterator:
        raise NotImplementedError


def _arrow_kind(kind) -> str:
    import pyarrow as pa

    if pa.types.is_dictionary(kind):
        kind = kind.value_type
    if pa.types.is_integer(kind):
        return "uint64" if kind == pa.uint64() else "int"
    if pa.types.is_floating(kind) or pa.types.is_decimal(kind) or pa.types.is_null(kind):
        return "float"
    if pa.types.is_string(kind) or pa.types.is_large_string(kind):
        return "text"
    if pa.types.is_boolean(kind):
        return "bool"
    if pa.types.is_list(kind) or pa.types.is_fixed_size_list(kind) or pa.types.is_large_list(kind):
        return "shaped"
    return "other"


def _numpy_kind(dtype) -> str:
    if dtype.shape:
        return "shaped"
    if dtype.kind == "u" and dtype.itemsize == 8:
        return "uint64"
    return {"i": "int", "u": "int", "f": "float", "U": "text", "S": "text", "O": "text", "b": "bool"}.get(
        dtype.kind, "other"
    )


def _fits_kind(col) -> str:
    """A FITS column's kind: 64-bit integers offset by ``TZERO = 2**63`` are unsigned (FITS standard 4.0, 7.3.2)."""
    dtype = np.dtype(col.dtype)
    if dtype.kind == "i" and dtype.itemsize == 8 and col.bzero == 2**63:
        return "uint64"
    return _numpy_kind(dtype)


def _rechunk(batches, chunk_rows: int) -> Iterator:
    """Batches (pyarrow) of any sizes -> (first row, {column: array}) of exactly ``chunk_rows`` rows."""
    import pyarrow as pa

    pending, count, start, schema = [], 0, 0, None
    for batch in batches:
        schema = batch.schema
        pending.append(batch)
        count += batch.num_rows
        while count >= chunk_rows:
            table = pa.Table.from_batches(pending, schema)
            yield start, {name: table.column(name).slice(0, chunk_rows).combine_chunks() for name in schema.names}
            rest = table.slice(chunk_rows)
            pending, count, start = rest.to_batches(), rest.num_rows, start + chunk_rows
    if count:
        table = pa.Table.from_batches(pending, schema)
        yield start, {name: table.column(name).combine_chunks() for name in schema.names}


class _ParquetSource(_Source):
    fmt = "Parquet"

    def __init__(self, path: Path, head: bytes) -> None:
        super().__init__(path)
        import pyarrow as pa
        import pyarrow.parquet as pq

        if head[:4] != b"PAR1":
            raise InputError("table", str(path), f"is not a Parquet file (it starts with {head[:8]!r})")
        try:
            meta = pq.read_metadata(path)
            schema = meta.schema.to_arrow_schema()
        except (pa.ArrowException, OSError) as exc:
            raise _failed(path, self.fmt, exc) from None
        self._n_rows = meta.num_rows
        self.colnames = list(schema.names)
        self._types = {name: schema.field(name).type for name in self.colnames}
        self.units, self._masks = _parquet_units(schema)
        for name in self.colnames:
            unit = (schema.field(name).metadata or {}).get(b"unit")
            if unit is not None:
                self.units[name] = unit.decode("utf-8", "replace")

    def kind(self, column: str) -> str:
        return _arrow_kind(self._types[column])

    def largest(self, column: str) -> int:
        """From the row groups' statistics when every one has them (no data read), else one pass."""
        import pyarrow.parquet as pq

        if column not in self._masks:  # a mask column hides cells that the statistics still count
            meta = pq.read_metadata(self.path)
            leaves = [meta.schema.column(j).path for j in range(len(meta.schema))]
            if column in leaves:
                j = leaves.index(column)
                stats = [meta.row_group(r).column(j).statistics for r in range(meta.num_row_groups)]
                if all(st is not None and st.has_min_max for st in stats):
                    return max((int(st.max) for st in stats), default=0)
        return super().largest(column)

    def blocks(self, columns: tuple, chunk_rows: int) -> Iterator:
        import pyarrow as pa
        import pyarrow.compute as pc
        import pyarrow.parquet as pq

        masks = {c: self._masks[c] for c in columns if c in self._masks}
        wanted = list(dict.fromkeys(list(columns) + list(masks.values())))
        try:
            # without pre-buffering (pyarrow's default reads ahead without bound): one row group at a time
            with pq.ParquetFile(self.path, pre_buffer=False) as fh:
                batches = fh.iter_batches(batch_size=chunk_rows, columns=wanted, use_threads=False)
                for start, block in _rechunk(batches, chunk_rows):
                    for column, mask in masks.items():  # astropy writes a masked column's mask beside it
                        hidden = pc.fill_null(block[mask], False)
                        block[column] = pc.if_else(hidden, pa.scalar(None, block[column].type), block[column])
                    yield start, {c: block[c] for c in columns}
        except (pa.ArrowException, OSError) as exc:
            raise _failed(self.path, self.fmt, exc) from None


def _parquet_units(schema) -> tuple:
    """Units and mask columns that astropy's Parquet writer keeps in the schema metadata."""
    units, masks = {}, {}
    raw = (schema.metadata or {}).get(b"table_meta_yaml")
    if raw is None:
        return units, masks
    from astropy.table import meta

    try:
        header = meta.get_header_from_yaml(raw.decode("utf-8").split("\n"))
    except Exception:  # foreign metadata we cannot read: no units
        return units, masks
    for entry in header.get("datatype", ()):
        if entry.get("unit"):
            units[entry["name"]] = entry["unit"]
    serialized = header.get("meta", {}).get("__serialized_columns__", {})
    for name, spec in serialized.items():
        mask = spec.get("mask") if isinstance(spec, Mapping) else None
        if isinstance(mask, Mapping) and mask.get("name") in schema.names and name in schema.names:
            masks[name] = mask["name"]
    return units, masks


class _CsvSource(_Source):
    fmt = "CSV"

    def __init__(self, path: Path, head: bytes) -> None:
        super().__init__(path)
        import csv
        import io

        self._gzip = head[:2] == b"\x1f\x8b"
        opener = gzip.open if self._gzip else open
        self._skip = 0
        try:
            with opener(path, "rt", encoding="utf-8-sig", newline="") as fh:
                line = fh.readline()
                while line.startswith("#"):
                    self._skip += 1
                    line = fh.readline()
        except (OSError, EOFError, UnicodeDecodeError) as exc:
            raise _failed(path, self.fmt, exc) from None
        if not line.strip():
            raise InputError("table", str(path), "has no header line; expected column names on the first line")
        # names trimmed of surrounding spaces, as astropy's CSV reader trims them ("ra, dec" names "dec")
        self.colnames = [name.strip() for name in next(csv.reader(io.StringIO(line)))]
        self.units = {}
        self._counted = False

    @property
    def n_rows(self) -> int | None:
        if self._n_rows is None and not self._gzip and not self._counted:
            self._counted = True
            newlines, last = 0, b"\n"
            with self.path.open("rb") as fh:
                while block := fh.read(_HASH_BLOCK_BYTES):
                    newlines += block.count(b"\n")
                    last = block[-1:]
            self._n_rows = newlines + (last != b"\n") - self._skip - 1
        return self._n_rows

    def kind(self, column: str) -> str:
        return "unknown"

    def text(self, array) -> np.ndarray:
        """Text cells trimmed of surrounding spaces (astropy's CSV reader trims every value)."""
        return _text(array, trim=True)

    def prepare(self, cmap: ColumnMap) -> None:
        for column in cmap.read_columns:
            if self.colnames.count(column) > 1:
                raise InputError(
                    "table",
                    str(self.path),
                    f"column {column!r} appears {self.colnames.count(column)} times in the "
                    "header; expected unique column names",
                )
        super().prepare(cmap)  # kind "unknown": identifiers stay text (module docstring)

    def blocks(self, columns: tuple, chunk_rows: int) -> Iterator:
        import pyarrow as pa
        import pyarrow.csv as pacsv

        # pyarrow numbers a row by its place in the file, from 1, counting records (blank lines not counted,
        # a quoted value spanning lines one record) and the lines skipped below: the header is record
        # skip + 1, data row 0 is record skip + 2
        first = self._skip + 2
        malformed: list = []  # (data row, fields found) of each malformed line, in file order

        def handler(row) -> str:
            if row.number is None:  # not known when parsing in parallel; this reader parses serially
                return "error"
            malformed.append((row.number - first, row.actual_columns))
            return "skip"

        read = pacsv.ReadOptions(
            skip_rows=self._skip + 1,
            column_names=self.colnames,
            block_size=_CSV_BLOCK_BYTES,
            use_threads=False,
        )
        convert = pacsv.ConvertOptions(
            include_columns=list(columns),
            column_types={c: pa.string() for c in columns},
            strings_can_be_null=True,
            quoted_strings_can_be_null=True,
            null_values=[""],
        )
        parse = pacsv.ParseOptions(invalid_row_handler=handler)
        try:
            reader = pacsv.open_csv(str(self.path), read_options=read, parse_options=parse, convert_options=convert)
            yield from _rechunk(_put_back(reader, malformed, list(columns)), chunk_rows)
        except (pa.ArrowException, OSError, EOFError) as exc:
            raise _failed(self.path, self.fmt, exc) from None


def _put_back(batches, malformed: list, columns: list) -> Iterator:
    """The good CSV rows of pyarrow's batches with the malformed lines back in their places, as null rows.

    ``malformed`` fills while pyarrow parses (it may parse ahead of the batch handed out, never behind):
    when a batch of ``m`` good rows arrives, every malformed line among them is known. A malformed line
    with fewer than ``m`` good rows between it and the rows already handed out goes into this batch;
    the others wait. Each batch gets the column ``_MALFORMED``: fields found, -1 on a good line.
    """
    import pyarrow as pa

    done = 0  # rows handed out, good and malformed
    for batch in batches:
        m = batch.num_rows
        places = np.array([row for row, _ in malformed], dtype=np.int64)
        between = places - done - np.arange(places.size)  # good rows between the rows handed out and each
        k = int(np.count_nonzero(between < m))  # non-decreasing: the first k go into this batch
        if k == 0:
            yield batch.append_column(_MALFORMED, pa.array(np.full(m, -1, dtype=np.int32)))
        else:
            yield _with_null_rows(batch, places[:k] - done, [found for _, found in malformed[:k]])
            del malformed[:k]
        done += m + k
    if malformed:  # malformed lines after the last good row
        n = len(malformed)
        found = pa.array(np.array([f for _, f in malformed], dtype=np.int32))
        yield pa.RecordBatch.from_arrays([pa.nulls(n, pa.string()) for _ in columns] + [found], columns + [_MALFORMED])


def _with_null_rows(batch, places: np.ndarray, found: list):
    """``batch`` with rows of nulls inserted so that they sit at ``places`` (sorted, within the result)."""
    import pyarrow as pa

    n = batch.num_rows + places.size
    good = np.ones(n, dtype=bool)
    good[places] = False
    index = np.zeros(n, dtype=np.int64)
    index[good] = np.arange(batch.num_rows)
    take = pa.array(index, mask=~good)  # a null index takes a null (pyarrow.compute.take)
    fields = np.full(n, -1, dtype=np.int32)
    fields[places] = found
    arrays = [column.take(take) for column in batch.columns] + [pa.array(fields)]
    return pa.RecordBatch.from_arrays(arrays, batch.schema.names + [_MALFORMED])


class _FitsSource(_Source):
    fmt = "FITS"

    def __init__(self, path: Path, head: bytes) -> None:
        super().__init__(path)
        from astropy.io import fits

        if head[:2] != b"\x1f\x8b" and not head.startswith(b"SIMPLE  ="):
            raise InputError("table", str(path), f"is not a FITS file (it starts with {head[:10]!r})")
        try:
            with fits.open(path, memmap=True) as hdul:
                index = next((i for i, h in enumerate(hdul) if isinstance(h, (fits.BinTableHDU, fits.TableHDU))), None)
                if index is None:
                    raise InputError("table", str(path), "has no table extension; expected a FITS binary table")
                hdu = hdul[index]
                self._index = index
                self._n_rows = int(hdu.header.get("NAXIS2", 0))
                cols = hdu.columns
                self.colnames = list(cols.names)
                self.units = {c.name: c.unit for c in cols}
                self._nulls = {c.name: c.null for c in cols}
                self._kinds = {c.name: _fits_kind(c) for c in cols}
        except InputError:
            raise
        except MemoryError:
            raise
        except Exception as exc:  # astropy raises many kinds for a damaged file
            raise _failed(path, self.fmt, exc) from None

    def kind(self, column: str) -> str:
        return self._kinds[column]

    def blocks(self, columns: tuple, chunk_rows: int) -> Iterator:
        from astropy.io import fits

        with fits.open(self.path, memmap=True) as hdul:
            data = self._read(lambda: hdul[self._index].data)
            n = 0 if data is None else len(data)
            for start in range(0, n, chunk_rows):
                part = data[start : start + chunk_rows]
                yield start, self._read(lambda part=part: {c: self._column(part, c) for c in columns})

    def _column(self, part, column: str):
        values = np.array(part.field(column))  # a copy: nothing keeps the memory map
        null = self._nulls.get(column)
        if null is not None and values.dtype.kind in "iu":
            values = np.ma.masked_array(values, mask=values == null)
        return values

    def _read(self, action):
        """``action()``, with a damaged file's error as an InputError."""
        try:
            return action()
        except MemoryError:
            raise
        except Exception as exc:  # astropy and numpy raise many kinds for a truncated file
            raise _failed(self.path, self.fmt, exc) from None


class _TableSource(_Source):
    """ECSV and VOTable: read whole by astropy."""

    def __init__(self, path: Path, head: bytes) -> None:
        super().__init__(path)
        import warnings

        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # the file's own style issues; the columns used are checked
                self.table = self._read(path)
        except InputError:
            raise
        except MemoryError:
            raise
        except Exception as exc:  # the parsers raise many kinds for a damaged file
            raise _failed(path, self.fmt, exc) from None
        self._n_rows = len(self.table)
        self.colnames = list(self.table.colnames)
        self.units = {name: self.table[name].unit for name in self.colnames}

    def _read(self, path: Path):
        raise NotImplementedError

    def kind(self, column: str) -> str:
        return _numpy_kind(self.table[column].dtype)

    def keep(self, columns: tuple) -> None:
        self.table = self.table[list(columns)]

    def blocks(self, columns: tuple, chunk_rows: int) -> Iterator:
        for start in range(0, len(self.table), chunk_rows):
            yield start, {c: self.table[c][start : start + chunk_rows] for c in columns}


class _EcsvSource(_TableSource):
    fmt = "ECSV"

    def _read(self, path: Path):
        from astropy.table import Table

        return Table.read(path, format="ascii.ecsv")


class _VotableSource(_TableSource):
    fmt = "VOTable"

    def _read(self, path: Path):
        from astropy.io.votable import parse_single_table

        return parse_single_table(path, verify="ignore").to_table(use_names_over_ids=True)


_SOURCES = {
    "csv": _CsvSource,
    "ecsv": _EcsvSource,
    "fits": _FitsSource,
    "votable": _VotableSource,
    "parquet": _ParquetSource,
}
