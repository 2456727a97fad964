"""The observed star: six observables at a reference epoch with their covariance.

Input follows the column conventions of the large astrometric catalogues:
``ra``, ``dec`` [deg]; ``parallax`` [mas]; ``pmra`` (mu_alpha* = mu_alpha cos
dec) and ``pmdec`` [mas/yr]; ``radial_velocity`` [km/s]; the errors
``ra_error`` (of alpha*, in mas), ``dec_error`` [mas], ``parallax_error``,
``pmra_error``, ``pmdec_error``, ``radial_velocity_error``; the ten astrometric
correlation coefficients ``ra_dec_corr`` ... ``pmra_pmdec_corr`` (missing = 0).
The radial velocity is independent of the astrometry. Bare numbers are read in
these units; astropy Quantities (or strings such as ``"12.3 mas"``) are
converted.

Internally the covariance is over (ra [deg], dec [deg], parallax [mas],
pmra [mas/yr], pmdec [mas/yr], radial_velocity [km/s]); the ra variance is that
of alpha itself, ``(ra_error / cos dec)^2`` converted to deg^2.
"""

from __future__ import annotations

import difflib
import math
import os
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

import astropy.units as u
import numpy as np
import tomllib

from ._constants import AU_PER_PC, KMS_PER_MASYR_AT_1MAS, MAS_PER_DEG, OBSERVABLES
from ._quantity import to_number
from .errors import InputError, PerierrWarning

if TYPE_CHECKING:
    from astropy.table import Row, Table

__all__ = ["ObservedStar", "read_star_file", "read_catalogue"]

_ERRORS = tuple(f"{name}_error" for name in OBSERVABLES)
_ASTROMETRIC = OBSERVABLES[:5]
_CORRS = tuple(f"{a}_{b}_corr" for i, a in enumerate(_ASTROMETRIC) for b in _ASTROMETRIC[i + 1 :])
_OPTIONAL_ERRORS = ("ra_error", "dec_error")  # sub-mas; held exact when absent
_META = ("name", "source_id", "ref_epoch", "mass", "mass_error")
KNOWN_FIELDS = OBSERVABLES + _ERRORS + _CORRS + _META

_UNITS = {
    "ra": u.deg,
    "dec": u.deg,
    "parallax": u.mas,
    "pmra": u.mas / u.yr,
    "pmdec": u.mas / u.yr,
    "radial_velocity": u.km / u.s,
    "ra_error": u.mas,
    "dec_error": u.mas,
    "parallax_error": u.mas,
    "pmra_error": u.mas / u.yr,
    "pmdec_error": u.mas / u.yr,
    "radial_velocity_error": u.km / u.s,
    "mass": u.Msun,
    "mass_error": u.Msun,
}


@dataclass(frozen=True)
class ObservedStar:
    """A star's catalogue solution: mean observables and their covariance.

    Build one with :meth:`from_values`, :meth:`from_mapping`,
    :func:`read_star_file` or :func:`read_catalogue`; the plain constructor
    takes internal-unit arrays and validates them.

    Attributes
    ----------
    mean : ndarray, shape (6,)
        (ra [deg], dec [deg], parallax [mas], pmra [mas/yr], pmdec [mas/yr],
        radial_velocity [km/s]).
    cov : ndarray, shape (6, 6)
        Covariance in the same units (deg^2 for the positions).
    name : str
        Label used in reports.
    source_id : str or None
    ref_epoch : float or None
        Reference epoch of the astrometry [Julian year]; perihelion times are
        relative to it.
    mass : float or None
        Star mass [M_sun] (used only by gravitational focusing).
    mass_error : float or None
        Its standard error [M_sun].
    notes : tuple of str
        Facts about the input a report should show (e.g. inputs held exact).
    """

    mean: np.ndarray
    cov: np.ndarray
    name: str = "star"
    source_id: str | None = None
    ref_epoch: float | None = None
    mass: float | None = None
    mass_error: float | None = None
    notes: tuple = field(default=())

    def __post_init__(self):
        mean = np.array(self.mean, dtype=float).reshape(-1)
        cov = np.array(self.cov, dtype=float)
        if mean.shape != (6,):
            raise InputError("mean", mean.shape, "expected 6 observables in the order " + str(OBSERVABLES))
        if cov.shape != (6, 6):
            raise InputError("cov", cov.shape, "expected a (6, 6) covariance matrix")
        for k, name in enumerate(OBSERVABLES):
            if not np.isfinite(mean[k]):
                raise InputError(name, mean[k], "expected a finite number")
        if not np.all(np.isfinite(cov)):
            raise InputError("cov", "non-finite entries", "expected a finite covariance matrix")
        if not np.allclose(cov, cov.T, rtol=1e-10, atol=0.0):
            raise InputError("cov", "asymmetric", "expected a symmetric covariance matrix")
        _check_psd(cov)
        mean.setflags(write=False)
        cov.setflags(write=False)
        object.__setattr__(self, "mean", mean)
        object.__setattr__(self, "cov", cov)

    @property
    def sigma(self) -> np.ndarray:
        """Standard errors in internal units, shape (6,)."""
        return np.sqrt(np.diag(self.cov))

    @property
    def held_exact(self) -> tuple:
        """Names of the observables with zero error (held exact)."""
        return tuple(n for n, s in zip(OBSERVABLES, self.sigma) if s == 0.0)

    @property
    def fractional_parallax_error(self) -> float:
        """parallax_error / parallax (inf for a non-positive parallax)."""
        plx = self.mean[2]
        return float(self.sigma[2] / plx) if plx > 0 else math.inf

    def catalogue_errors(self) -> dict:
        """Errors in catalogue units (ra_error of alpha* in mas), keyed by field."""
        s = self.sigma
        cosd = math.cos(math.radians(self.mean[1]))
        out = dict(zip(_ERRORS, s.tolist()))
        out["ra_error"] = float(s[0] * MAS_PER_DEG * cosd)
        out["dec_error"] = float(s[1] * MAS_PER_DEG)
        return out

    def to_dict(self) -> dict:
        """Inputs in catalogue units, for reports and JSON."""
        out = {"name": self.name, "source_id": self.source_id, "ref_epoch": self.ref_epoch}
        out.update(dict(zip(OBSERVABLES, self.mean.tolist())))
        out.update(self.catalogue_errors())
        s = self.sigma
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = self.cov / np.outer(s, s)
        idx = {n: k for k, n in enumerate(OBSERVABLES)}
        for c in _CORRS:
            a, b = _split_corr(c)
            value = corr[idx[a], idx[b]]
            out[c] = float(value) if np.isfinite(value) else 0.0
        out["mass"] = self.mass
        out["mass_error"] = self.mass_error
        out["held_exact"] = list(self.held_exact)
        return out

    @classmethod
    def from_values(cls, **fields: float | str | u.Quantity | None) -> ObservedStar:
        """Build a star from keyword arguments named as catalogue columns.

        Examples
        --------
        >>> import astropy.units as u
        >>> s = ObservedStar.from_values(ra=10, dec=-5, parallax=50 * u.mas,
        ...     parallax_error=0.05, pmra=1.0, pmra_error=0.05, pmdec=2.0,
        ...     pmdec_error=0.05, radial_velocity=-30, radial_velocity_error=0.5)
        >>> float(s.mean[2]), float(s.sigma[5])
        (50.0, 0.5)
        """
        return cls.from_mapping(fields)

    @classmethod
    def from_mapping(cls, mapping: Mapping | Row, *, row: int | str | None = None, strict: bool = True) -> ObservedStar:
        """Build a star from a mapping or an astropy Table row.

        Parameters
        ----------
        mapping : Mapping or astropy.table.Row
            Catalogue-named fields; values are numbers (catalogue units),
            Quantities or strings with units.
        row : int, optional
            Row number reported in error messages.
        strict : bool
            Reject unknown field names (likely typos). Table rows are read with
            ``strict=False`` since catalogues carry many other columns.
        """
        data = _as_dict(mapping)
        if strict:
            for key in data:
                if key not in KNOWN_FIELDS:
                    close = difflib.get_close_matches(key, KNOWN_FIELDS, n=1)
                    hint = f"; did you mean {close[0]!r}?" if close else ""
                    raise InputError(
                        key, data[key], f"unknown field{hint} Known fields: {', '.join(KNOWN_FIELDS)}", row
                    )
        values = {}
        notes = []
        for name in OBSERVABLES + _ERRORS:
            if name not in data or _is_missing(data[name]):
                if name in _OPTIONAL_ERRORS:
                    values[name] = 0.0
                    notes.append(f"{name} not given: held exact")
                    continue
                raise InputError(name, None, f"missing; expected a value in {_UNITS[name]}", row)
            values[name] = _to_float(name, data[name], row)
        for name in _ERRORS:
            if values[name] < 0:
                raise InputError(name, values[name], "expected an error >= 0 (0 means held exact)", row)
            if values[name] > _LARGEST_ERROR:
                raise InputError(
                    name, values[name], f"expected an error below {_LARGEST_ERROR:g} (its square must be a "
                    "number); check the unit", row
                )
            if values[name] == 0 and name not in _OPTIONAL_ERRORS:
                notes.append(f"{name} = 0: {name[:-6]} held exact")
        dec = values["dec"]
        if not -90.0 <= dec <= 90.0:
            raise InputError("dec", dec, "expected a declination in [-90, 90] deg", row)
        notes.extend(_plausibility(values, row))
        corrs = {}
        for name in _CORRS:
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
        notes.extend(_warn_unit_slips(values, row))
        cosd = math.cos(math.radians(dec))
        if values["ra_error"] > 0 and cosd < 1e-12:
            raise InputError(
                "dec", dec, "ra is undefined at a celestial pole; give ra_error = 0 or move off the pole", row
            )
        sigma = np.array(
            [
                values["ra_error"] / MAS_PER_DEG / (cosd if cosd > 0 else 1.0),
                values["dec_error"] / MAS_PER_DEG,
            ]
            + [values[e] for e in _ERRORS[2:]]
        )
        corr = np.eye(6)
        idx = {n: k for k, n in enumerate(OBSERVABLES)}
        for name, c in corrs.items():
            a, b = _split_corr(name)
            corr[idx[a], idx[b]] = corr[idx[b], idx[a]] = c
        _check_psd(corr, row=row, what="correlation matrix")
        cov = corr * np.outer(sigma, sigma)
        mean = np.array([values[n] for n in OBSERVABLES])
        meta = {}
        for key in ("mass", "mass_error"):
            if key in data and not _is_missing(data[key]):
                meta[key] = _to_float(key, data[key], row)
                if meta[key] < 0 or (key == "mass" and meta[key] == 0):
                    raise InputError(key, meta[key], "expected a positive mass in M_sun", row)
        epoch = data.get("ref_epoch")
        epoch = None if _is_missing(epoch) else _to_float("ref_epoch", epoch, row, unit=None)
        name = data.get("name")
        source_id = data.get("source_id")
        if _is_missing(name):
            name = str(source_id) if not _is_missing(source_id) else (f"row {row}" if row is not None else "star")
        return cls(
            mean,
            cov,
            name=str(name),
            source_id=None if _is_missing(source_id) else str(source_id),
            ref_epoch=epoch,
            notes=tuple(notes),
            **meta,
        )


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

    Each row becomes an :class:`ObservedStar`; an error names the row.
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
    target = _UNITS.get(name) if unit == "default" else unit
    # a table cell read as text (one bad cell turns a CSV column into text) is a number in the column's unit
    return to_number(name, value, target, row=row, text_needs_unit=row is None)


def _split_corr(name: str) -> tuple:
    body = name[: -len("_corr")]
    for a in _ASTROMETRIC:
        if body.startswith(a + "_") and body[len(a) + 1 :] in _ASTROMETRIC:
            return a, body[len(a) + 1 :]
    raise KeyError(name)


def _check_psd(matrix, *, row=None, what="covariance matrix"):
    scale = np.sqrt(np.abs(np.diag(matrix)))
    scale = np.where(scale > 0, scale, 1.0)
    eig = np.linalg.eigvalsh(matrix / np.outer(scale, scale))
    if eig[0] < -1e-10:
        raise InputError(
            "correlations",
            f"smallest eigenvalue {eig[0]:.3g}",
            f"the {what} is not positive semi-definite; the correlation coefficients are "
            "mutually inconsistent (check their signs and the column names)",
            row,
        )


#: Speed of light [km/s] (astropy.constants): no star moves faster.
_C_KMS = 299_792.458

#: Bounds of plausibility, each with its reason. A radial velocity beyond |1,000| km/s exceeds the Galaxy's
#: escape speed near the Sun (about 550 km/s, Piffl et al. 2014, A&A 562, A91; from memory) by far: most
#: likely m/s read as km/s. A parallax above 800 mas puts the star closer than the nearest known star
#: (1.30 pc, from memory); above 1e5 mas, closer than 2,100 au: inside the region perierr's answers are about.
_RV_CAUTION_KMS = 1_000.0
_PARALLAX_CAUTION_MAS = 800.0
_PARALLAX_MAX_MAS = 1e5


#: Errors above this cannot be squared into a variance (the square of 1e150 is near the float limit).
_LARGEST_ERROR = 1e150

#: A parallax this close to zero but not zero is below any measurement by many orders of magnitude
#: (10^15 pc); it would only overflow the arithmetic.
_SMALLEST_PARALLAX_MAS = 1e-12

#: A total speed below this [km/s] would take longer than 10^20 years to cross a parsec.
_SLOWEST_KMS = 1e-12


def _plausibility(values, row) -> list:
    """Refuse the impossible, note the implausible: ra range, speeds above c, absurd distances."""
    ra, plx, rv = values["ra"], values["parallax"], values["radial_velocity"]
    if not 0.0 <= ra < 360.0:
        raise InputError("ra", ra, "expected a right ascension in [0, 360) deg (perierr does not wrap it)", row)
    if 0 < abs(plx) < _SMALLEST_PARALLAX_MAS:
        raise InputError(
            "parallax", plx, f"a parallax of magnitude below {_SMALLEST_PARALLAX_MAS:g} mas (beyond 10^15 pc) is "
            "below any measurement; give 0 with its error and a distance prior", row
        )
    if plx > _PARALLAX_MAX_MAS:
        raise InputError(
            "parallax", plx, f"a star closer than {1e3 / plx * AU_PER_PC:,.0f} au is not a passing star; "
            "expected mas (check the unit)", row
        )
    # transverse speed 4.74047 km/s per (mas/yr) at 1 mas; the total speed must stay below c
    vt = KMS_PER_MASYR_AT_1MAS * math.hypot(values["pmra"], values["pmdec"]) / plx if plx > 0 else 0.0
    speed = math.hypot(vt, rv)
    if values["parallax_error"] > 0 and plx < 5 * values["parallax_error"]:
        return _plausibility_notes(values, row)  # a parallax within noise says nothing about the speed
    if 0 < speed < _SLOWEST_KMS:
        raise InputError(
            "radial_velocity", rv, f"the star moves at {speed:.3g} km/s (below {_SLOWEST_KMS:g}): it has no "
            "perihelion within any meaningful time; give exact zeros for motions that were not measured", row
        )
    if speed >= _C_KMS:
        field, value = ("radial_velocity", rv) if abs(rv) >= _C_KMS else ("pmra", values["pmra"])
        raise InputError(
            field, value, f"the star would move at {speed:.3g} km/s, faster than light ({_C_KMS:,.0f} km/s); "
            "check the units", row
        )
    return _plausibility_notes(values, row)


def _plausibility_notes(values, row) -> list:
    """Cautions about implausible but possible values (the refusals are in :func:`_plausibility`)."""
    plx, rv = values["parallax"], values["radial_velocity"]
    where = f"row {row}: " if row is not None else ""
    notes = []
    if abs(rv) > _RV_CAUTION_KMS:
        notes.append(
            f"{where}radial_velocity = {rv:g} km/s is beyond |{_RV_CAUTION_KMS:,.0f}| km/s, far above the Galaxy's "
            "escape speed: check the unit (m/s?)"
        )
    if plx > _PARALLAX_CAUTION_MAS:
        notes.append(
            f"{where}parallax = {plx:g} mas puts the star at {1e3 / plx:.3g} pc, closer than the nearest known "
            "star (1.30 pc): check the unit"
        )
    return notes


def _warn_unit_slips(values, row) -> list:
    """Warn about likely unit slips; return the messages so reports can show them."""
    where = f"row {row}: " if row is not None else ""
    messages = []
    plx, eplx = values["parallax"], values["parallax_error"]
    if 0 < abs(plx) < 1.0 and 0 < eplx < 1e-3:
        messages.append(
            f"{where}parallax = {plx} with parallax_error = {eplx} looks like arcsec; "
            "perierr reads bare numbers in mas (pass a Quantity to be explicit)"
        )
    # not the radial velocity: values near zero are common and valid (a star crossing the line of sight), and
    # spectroscopic errors of a few km/s are normal, so an error far above the value says nothing about units
    for name in ("parallax", "pmra", "pmdec"):
        value, err = abs(values[name]), values[f"{name}_error"]
        if value > 0 and err > 100 * value and err > 1.0:
            messages.append(
                f"{where}{name}_error = {err} is over 100 times {name} = {values[name]}; check the units of both"
            )
    for message in messages:
        warnings.warn(message, PerierrWarning, stacklevel=4)
    return messages
