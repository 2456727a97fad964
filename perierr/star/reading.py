"""Reading a star from a mapping, a TOML file or a table row: names, units, missing values, correlations.

Bare numbers are read in the catalogue units (:data:`perierr.units.FIELD_UNITS`);
Quantities and strings with units are converted by the one parser,
:func:`perierr.units.to_number`. Every error names the field, the value, what
was expected and, for tables, the row.
"""

from __future__ import annotations

import difflib
import os
from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING

import astropy.units as u
import numpy as np
import tomllib

from ..cautions import Caution, emit, note
from ..errors import InputError
from ..units import FIELD_UNITS, INDEX, OBSERVABLES, errors_to_internal, to_number
from .checks import LARGEST_ERROR, plausibility, unit_slips
from .fields import (
    CORRELATIONS,
    ERRORS,
    GAIA_MAGNITUDE,
    GENERIC_MAGNITUDE,
    INPUT_FIELDS,
    OPTIONAL_ERRORS,
    split_correlation,
)  # fmt: skip
from .observed import ObservedStar, check_magnitude, check_psd

if TYPE_CHECKING:
    from astropy.table import Table

__all__ = ["MASKED", "read_catalogue", "read_star_file", "star_from_mapping"]


def star_from_mapping(cls, mapping, *, row=None, strict=True):
    """Build ``cls`` (an :class:`ObservedStar`) from catalogue-named fields; see ``ObservedStar.from_mapping``."""
    data = _as_dict(mapping)
    if strict:
        _refuse_unknown(data, row)
    values, cautions = _read_measurements(data, row)
    cautions.extend(plausibility(values, row))
    corrs = _read_correlations(data, row)
    cautions.extend(unit_slips(values, row))
    cov = _covariance(values, corrs, row)
    mean = np.array([values[n] for n in OBSERVABLES])
    photometry, dropped = _read_photometry(data, row, strict)
    cautions.extend(dropped)
    meta, dropped = _read_meta(data, row, strict)
    cautions.extend(dropped)
    star = cls(mean, cov, cautions=tuple(cautions), **meta, **photometry)
    emit(star.cautions)
    return star


def _refuse_unknown(data, row) -> None:
    """Unknown field names are likely typos: refuse them, suggesting the closest known name."""
    for key in data:
        if key not in INPUT_FIELDS:
            close = difflib.get_close_matches(key, INPUT_FIELDS, n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise InputError(key, data[key], f"unknown field{hint} Known fields: {', '.join(INPUT_FIELDS)}", row)


def _read_measurements(data, row) -> tuple:
    """The six observables and their errors in catalogue units, and notes on the inputs held exact."""
    values, cautions = {}, []
    for name in OBSERVABLES + ERRORS:
        if name not in data or _is_missing(data[name]):
            if name in OPTIONAL_ERRORS:
                values[name] = 0.0
                cautions.append(note("held-exact", f"{name} not given: held exact", name))
                continue
            raise InputError(name, None, f"missing; expected a value in {FIELD_UNITS[name]}", row)
        values[name] = _to_float(name, data[name], row)
    for name in ERRORS:
        if values[name] < 0:
            raise InputError(name, values[name], "expected an error >= 0 (0 means held exact)", row)
        if values[name] > LARGEST_ERROR:
            raise InputError(
                name, values[name], f"expected an error below {LARGEST_ERROR:g} (its square must be a "
                "number); check the unit", row
            )
        if values[name] == 0 and name not in OPTIONAL_ERRORS:
            cautions.append(note("held-exact", f"{name} = 0: {name[:-6]} held exact", name))
    if not -90.0 <= values["dec"] <= 90.0:
        raise InputError("dec", values["dec"], "expected a declination in [-90, 90] deg", row)
    return values, cautions


def _read_correlations(data, row) -> dict:
    """The correlation coefficients given (a column that is absent means 0; a masked cell is refused)."""
    corrs = {}
    for name in CORRELATIONS:
        if data.get(name) is MASKED:
            raise InputError(
                name, "masked", "the column is present but this value is missing (or NaN); expected a "
                "correlation in [-1, 1] (a catalogue without the column means 0)", row
            )
        if name in data and not _is_missing(data[name]):
            c = _to_float(name, data[name], row, unit=None)
            if not -1.0 <= c <= 1.0:
                raise InputError(name, c, "expected a correlation coefficient in [-1, 1]", row)
            corrs[name] = c
    return corrs


def _covariance(values, corrs, row) -> np.ndarray:
    """The internal covariance from catalogue errors and correlations (checked positive semi-definite)."""
    sigma = errors_to_internal([values[e] for e in ERRORS], values["dec"], row=row)
    corr = np.eye(6)
    for name, c in corrs.items():
        a, b = split_correlation(name)
        corr[INDEX[a], INDEX[b]] = corr[INDEX[b], INDEX[a]] = c
    check_psd(corr, row=row, what="correlation matrix")
    return corr * np.outer(sigma, sigma)


def _read_meta(data, row, strict=True) -> tuple:
    """Name, source_id, epoch, mass and its error (optional), and the cautions of reading them.

    Strict reading refuses a bad mass or mass error naming the field; otherwise (table rows) the star is read
    without a mass, which only the encounter's impulses and focusing use, and a caution says why, as for a bad
    magnitude (:func:`_read_photometry`).
    """
    meta, cautions = {}, []
    try:
        meta.update(_read_mass(data, row))
    except InputError as exc:
        if strict:
            raise
        message = (f"{exc.field} = {exc.value!r}: {exc.expected}; the star is read without a mass (only the "
                   "encounter's impulses and focusing use one)")
        cautions.append(Caution("mass-dropped", message, "caution", exc.field, row))
    epoch = data.get("ref_epoch")
    # a Julian year (2016.0); the archives' tables give it the unit yr
    meta["ref_epoch"] = None if _is_missing(epoch) else _to_float("ref_epoch", epoch, row, unit=u.yr)
    name, source_id = data.get("name"), data.get("source_id")
    if _is_missing(name):
        name = str(source_id) if not _is_missing(source_id) else (f"row {row}" if row is not None else "star")
    meta["name"] = str(name)
    meta["source_id"] = None if _is_missing(source_id) else str(source_id)
    return meta, cautions


def _read_mass(data, row) -> dict:
    """The mass and its error [M_sun], each when given; a bad value is an :class:`InputError` naming its field."""
    out = {}
    for key in ("mass", "mass_error"):
        if key in data and not _is_missing(data[key]):
            out[key] = _to_float(key, data[key], row)
            if key == "mass" and not out[key] > 0:
                raise InputError(key, out[key], "expected a positive mass in M_sun", row)
            if key == "mass_error" and out[key] < 0:
                raise InputError(key, out[key], "expected an error >= 0 in M_sun", row)
    return out


def _read_photometry(data, row, strict=True) -> tuple:
    """The magnitude fields and the cautions of reading them: ``({field: value}, [Caution, ...])``.

    Strict reading (star files, ``from_mapping`` by default) refuses a bad or incomplete magnitude with an
    :class:`InputError` naming the field. Otherwise (table rows, :func:`read_catalogue`) the star is read
    without a magnitude, which only the cost of new measurements and the peak magnitude use, and a reading caution
    says why: a note
    for a magnitude that is missing beside its error or band (a masked cell), a caution for a bad value
    (e.g. a sentinel such as 99).
    """
    try:
        return _photometry(data, row), []
    except InputError as exc:
        if strict:
            raise
        missing = exc.expected.startswith("given without its magnitude")
        what = (f"{exc.field} given without its magnitude" if missing
                else f"{exc.field} = {exc.value} not used ({exc.expected})")  # fmt: skip
        message = (f"{what}: the star is read without a magnitude (only the cost of new measurements and the "
                   "peak magnitude use one)")
        return {}, [Caution("magnitude-dropped", message, "note" if missing else "caution", exc.field, row)]


def _photometry(data, row) -> dict:
    """The magnitude, its error and band: ``phot_g_mean_mag`` (band G) or ``mag`` with ``mag_band``, not both.

    Numbers are in mag (a Quantity or a string with a unit is converted to mag); each error needs its magnitude.
    """
    given = {k for k in GAIA_MAGNITUDE + GENERIC_MAGNITUDE if k in data and not _is_missing(data[k])}
    if given & set(GAIA_MAGNITUDE) and given & set(GENERIC_MAGNITUDE):
        both = sorted(given)
        raise InputError(
            both[0], ", ".join(both), "give either phot_g_mean_mag (band G, with phot_g_mean_mag_error) or mag "
            "(with mag_error and mag_band), not both", row
        )  # fmt: skip
    if not given:
        return {}
    value_key, error_key = GAIA_MAGNITUDE if given & set(GAIA_MAGNITUDE) else GENERIC_MAGNITUDE[:2]
    if value_key not in given:
        other = sorted(given)[0]
        raise InputError(other, data[other], f"given without its magnitude; expected {value_key} beside it", row)
    out = {"magnitude": check_magnitude(value_key, _magnitude(value_key, data[value_key], row), row=row)}
    if error_key in given:
        out["magnitude_error"] = check_magnitude(error_key, _magnitude(error_key, data[error_key], row), row=row,
                                                 error=True)  # fmt: skip
    if value_key == "phot_g_mean_mag":
        out["magnitude_band"] = "G"
    elif "mag_band" in given:
        band = str(data["mag_band"]).strip()
        if not band or len(band) > 20:
            raise InputError("mag_band", data["mag_band"], "expected the band's name, e.g. 'V' or 'Ks'", row)
        out["magnitude_band"] = band
    return out


def _magnitude(name, value, row) -> float:
    """A magnitude (or its error) in mag: bare numbers, Quantities in mag, or text such as ``"12.3 mag"``."""
    return to_number(name, value, u.mag, row=row, text_needs_unit=False, example="12.3 mag", noun="a magnitude")


def read_star_file(path: str | os.PathLike) -> ObservedStar:
    """Read one star from a TOML file of catalogue-named fields.

    Parameters
    ----------
    path : str or Path
        A TOML file with flat keys (``parallax = 12.3`` or
        ``parallax = "12.3 mas"``).
    """
    path = Path(path)
    if path.is_dir():
        raise InputError("star file", str(path), "is a folder; expected a TOML star file")
    try:
        with path.open("rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise InputError("star file", str(path), "file not found") from None
    except PermissionError:
        raise InputError("star file", str(path), "cannot be read (permission denied)") from None
    except UnicodeDecodeError as exc:
        raise InputError(
            "star file", str(path), f"is not UTF-8 text (byte {exc.object[exc.start:exc.start + 1]!r} at offset "
            f"{exc.start}); save it as UTF-8 TOML"
        ) from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError("star file", str(path), f"not valid TOML ({exc})") from None
    if "star" in data and isinstance(data["star"], Mapping):
        data = dict(data["star"])
    return ObservedStar.from_mapping(data)


def read_catalogue(source: str | os.PathLike | Table) -> list[ObservedStar]:
    """Read every row of a table (ECSV/FITS/VOTable path or astropy Table).

    Each row becomes an :class:`ObservedStar`; an error names the row. A bad or incomplete magnitude (a
    sentinel such as 99, a band without its magnitude) does not stop the reading: that row's star is read
    without a magnitude and a reading caution says why (the propagation never uses magnitudes).
    """
    from astropy.table import Table

    table = source if isinstance(source, Table) else Table.read(source)
    return [ObservedStar.from_mapping(row, row=i, strict=False) for i, row in enumerate(table)]


def _as_dict(mapping) -> dict:
    if isinstance(mapping, Mapping):
        return dict(mapping)
    colnames = getattr(mapping, "colnames", None)
    if colnames is None:
        raise InputError("star", type(mapping).__name__, "expected a mapping or an astropy Table row")
    out = {}
    for name in colnames:
        col = mapping.table[name] if hasattr(mapping, "table") else None
        value = mapping[name]
        if _is_missing(value):  # masked (or NaN read back as masked): missing, never 0
            out[name] = MASKED
            continue
        if col is not None and getattr(col, "unit", None) is not None and np.ndim(value) == 0:
            try:
                value = u.Quantity(value, col.unit)
            except (TypeError, ValueError):
                value = str(value)  # a bad cell: the field's reader names it with its row

        out[name] = value
    return out


class _Masked:
    """A masked table cell: the column is there but the value is not (never read as 0)."""

    def __repr__(self) -> str:
        return "masked"


#: Stands for a masked cell of a present column.
MASKED = _Masked()


def _is_missing(value) -> bool:
    if value is None or value is MASKED:
        return True
    if np.ma.is_masked(value):
        return True
    return isinstance(value, str) and value.strip() == ""


def _to_float(name, value, row, unit="default") -> float:
    target = FIELD_UNITS.get(name) if unit == "default" else unit
    # a table cell read as text (one bad cell turns a CSV column into text) is a number in the column's unit
    return to_number(name, value, target, row=row, text_needs_unit=row is None)
