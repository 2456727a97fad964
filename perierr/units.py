"""Units: the one place where perierr says what its numbers mean.

Internal units
--------------
Everything inside perierr computes on plain float arrays in these units:

* observables, the last axis of every array, in the order of :data:`OBSERVABLES`:
  ``ra``, ``dec`` [deg]; ``parallax`` [mas]; ``pmra`` (mu_alpha* = mu_alpha cos dec) and ``pmdec``
  [mas/yr]; ``radial_velocity`` [km/s]. Covariances are in the same units (deg^2 for the positions;
  the ra variance is that of alpha itself, not of alpha*);
* heliocentric phase space: positions [pc], velocities [km/s];
* perihelion outputs, in the order of :data:`OUTPUTS`: time [Myr], distance [pc], speed [km/s];
* star mass [M_sun].

Catalogue units
---------------
Bare numbers at the API edge are read in the units of the large astrometric catalogues
(:data:`FIELD_UNITS`): the internal units, except for the position errors, which are in mas:
``ra_error`` is the error of alpha* = alpha cos dec and ``dec_error`` that of dec.
:func:`errors_to_internal` and :func:`errors_to_catalogue` convert between the two.

Bare numbers, astropy Quantities and strings with units (``"12.3 mas"``) are read by :func:`to_number`,
the one parser of user numbers with or without units. Constants are derived from astropy's IAU values at import time
(the mas and the parsec are definitions and are written out; tests check them against astropy).
"""

from __future__ import annotations

import math
from types import MappingProxyType

import astropy.constants as _const
import astropy.units as u
import numpy as np

from .errors import InputError

__all__ = [
    "AU_PER_PC",
    "DEC",
    "ENCOUNTER_LABELS",
    "ENCOUNTER_TITLES",
    "ERROR_LABELS",
    "ERROR_UNITS",
    "FIELD_UNITS",
    "INDEX",
    "INPUT_WORDS",
    "INTERNAL_LABELS",
    "INTERNAL_UNITS",
    "KMS_PER_MASYR_AT_1MAS",
    "MAS_PC",
    "MAS_PER_DEG",
    "MS_PER_KMS",
    "MYR_PER_PC_PER_KMS",
    "OBSERVABLES",
    "OUTPUTS",
    "OUTPUT_LABELS",
    "OUTPUT_TITLES",
    "OUTPUT_UNITS",
    "PARALLAX",
    "PMDEC",
    "PMRA",
    "POLE_COS",
    "RA",
    "RADIAL_VELOCITY",
    "SPEED_OF_LIGHT_KMS",
    "YR_PER_MYR",
    "errors_to_catalogue",
    "errors_to_internal",
    "to_number",
]

# ---------------------------------------------------------------------------------------------- observables

#: Order of the six observables along the last axis of every array.
OBSERVABLES = ("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity")

#: Positions of the observables along the last axis (use these, never a literal index).
RA, DEC, PARALLAX, PMRA, PMDEC, RADIAL_VELOCITY = range(6)

#: Observable name -> its position along the last axis.
INDEX = MappingProxyType({name: k for k, name in enumerate(OBSERVABLES)})

#: Internal unit of each observable, as printed in reports.
INTERNAL_LABELS = MappingProxyType(
    {"ra": "deg", "dec": "deg", "parallax": "mas", "pmra": "mas/yr", "pmdec": "mas/yr", "radial_velocity": "km/s"}
)

#: Internal unit of each observable (an astropy unit; bare numbers of the observables are read in it).
INTERNAL_UNITS = MappingProxyType({name: u.Unit(label) for name, label in INTERNAL_LABELS.items()})

#: Catalogue unit of each observable's standard error, as printed in reports (ra: of alpha* = alpha cos dec).
ERROR_LABELS = MappingProxyType(
    {"ra": "mas", "dec": "mas", "parallax": "mas", "pmra": "mas/yr", "pmdec": "mas/yr", "radial_velocity": "km/s"}
)

#: Catalogue unit of each observable's standard error (an astropy unit).
ERROR_UNITS = MappingProxyType({name: u.Unit(label) for name, label in ERROR_LABELS.items()})

#: Unit in which a bare number of each input field (catalogue column name) is read.
FIELD_UNITS = MappingProxyType(
    {
        **INTERNAL_UNITS,
        **{f"{name}_error": unit for name, unit in ERROR_UNITS.items()},
        "mass": u.Msun,
        "mass_error": u.Msun,
    }
)

# ---------------------------------------------------------------------------------------------- outputs

#: Names of the three perihelion outputs, in the order used by Jacobians.
OUTPUTS = ("time_myr", "distance_pc", "speed_kms")

#: Unit of each output, as written to JSON results and summaries.
OUTPUT_LABELS = MappingProxyType({"time_myr": "Myr", "distance_pc": "pc", "speed_kms": "km/s"})

#: Unit of each output (an astropy unit; bare targets and thresholds are read in it).
OUTPUT_UNITS = MappingProxyType({name: u.Unit(label) for name, label in OUTPUT_LABELS.items()})

#: Row titles of the outputs in text reports.
#: Each observable in words, for sentences (a proposal's paragraph).
INPUT_WORDS = MappingProxyType({
    "ra": "right ascension", "dec": "declination", "parallax": "parallax",
    "pmra": "proper motion in right ascension", "pmdec": "proper motion in declination",
    "radial_velocity": "radial velocity",
})  # fmt: skip

OUTPUT_TITLES = MappingProxyType(
    {"time_myr": "time [Myr]", "distance_pc": "distance [pc]", "speed_kms": "speed [km/s]"}
)

#: Unit of each encounter quantity (:mod:`perierr.encounter`; a comet impulse's name carries its radius after
#: a colon): impulses in m/s, the strength proxies in M_sun per (km/s pc) and per (km/s pc^2), the peak
#: magnitude in mag (the star's own band), the peak proper motion in arcsec/yr.
ENCOUNTER_LABELS = MappingProxyType({
    "sun_impulse": "m/s", "comet_impulse": "m/s", "strength_m_vd": "solMass s / (km pc)",
    "strength_m_vd2": "solMass s / (km pc2)", "peak_magnitude": "mag", "peak_proper_motion": "arcsec/yr",
})  # fmt: skip

#: Each encounter quantity in words, for reports (a comet impulse adds its radius).
ENCOUNTER_TITLES = MappingProxyType({
    "sun_impulse": "impulse on the Sun", "comet_impulse": "impulse on a comet", "strength_m_vd": "M/(v d)",
    "strength_m_vd2": "M/(v d²)", "peak_magnitude": "peak magnitude", "peak_proper_motion": "peak proper motion",
})  # fmt: skip

# ---------------------------------------------------------------------------------------------- constants

#: km/s corresponding to 1 mas/yr of proper motion at a parallax of 1 mas
#: (equivalently 1 arcsec/yr at 1 pc): one au per Julian year in km/s.
#: IAU 2012 au (exact) and the Julian year; the Hipparcos catalogue's
#: 4.740470446 used an older au and differs by 4e-9 relatively.
KMS_PER_MASYR_AT_1MAS = float((1.0 * _const.au / u.yr).to_value(u.km / u.s))

#: Myr taken to travel 1 pc at 1 km/s.
MYR_PER_PC_PER_KMS = float((1.0 * u.pc / (u.km / u.s)).to_value(u.Myr))

#: m/s in one km/s, and years in one Myr (definitions).
MS_PER_KMS = 1000.0
YR_PER_MYR = 1.0e6

#: au in one pc.
AU_PER_PC = float(u.pc.to(u.au))

#: Parallax [mas] times distance [pc]: distance_pc = MAS_PC / parallax_mas. A parallax of 1 arcsec is a
#: distance of 1 pc by the definition of the parsec; astropy's parallax equivalency agrees to 1 ulp.
MAS_PC = 1000.0

#: mas in one degree (3600 arcsec of 1000 mas, by definition).
MAS_PER_DEG = 3.6e6

#: Speed of light [km/s] (exact, SI definition via astropy.constants): no star moves faster.
SPEED_OF_LIGHT_KMS = float(_const.c.to_value(u.km / u.s))

#: cos(dec) below this is a celestial pole, where ra and an ra error have no meaning.
POLE_COS = 1e-12

# ---------------------------------------------------------------------------------------------- errors


def errors_to_internal(errors, dec, *, names=OBSERVABLES, row=None, ra_field: str = "ra_error") -> np.ndarray:
    """Standard errors in catalogue units -> internal units, for one star or many.

    ``ra_error`` is the error of alpha* = alpha cos dec in mas: the error of alpha is
    ``ra_error / cos dec`` (ESA 1997, The Hipparcos and Tycho Catalogues, Vol. 1, Sect. 1.2.5),
    converted to deg. ``dec_error`` is converted from mas to deg; the other errors are unchanged.

    Parameters
    ----------
    errors : array_like, shape (..., len(names))
        Errors in catalogue units (mas for ra and dec).
    dec : float or array_like, shape (...)
        Declination of each star [deg].
    names : sequence of str
        The observables along the last axis (default: all six, in order).
    row : int, optional
        Row for the error message.
    ra_field : str
        Name of the ra error in the error message.

    Returns
    -------
    ndarray, shape (..., len(names))
        Errors in internal units (deg for ra and dec).

    Raises
    ------
    InputError
        A declination that is not a number in [-90, 90] deg, or an ra error above 0 at a celestial
        pole (``cos dec <`` :data:`POLE_COS`).
    """
    out = np.array(errors, dtype=float)
    decs = np.asarray(dec, dtype=float)
    outside = ~((decs >= -90.0) & (decs <= 90.0))  # NaN is outside too
    if np.any(outside):
        raise InputError("dec", float(decs[outside].flat[0]), "expected a declination in [-90, 90] deg", row)
    cosd = np.cos(np.radians(decs))
    for k, name in enumerate(names):
        if name == "ra":
            pole = (cosd < POLE_COS) & (out[..., k] > 0)
            if np.any(pole):
                bad = float(np.broadcast_to(np.asarray(dec, dtype=float), pole.shape)[pole][0])
                raise InputError(
                    "dec", bad, f"ra is undefined at a celestial pole; give {ra_field} = 0 or move off the pole", row
                )
            out[..., k] /= MAS_PER_DEG
            out[..., k] /= np.where(cosd > 0, cosd, 1.0)
        elif name == "dec":
            out[..., k] /= MAS_PER_DEG
    return out


def errors_to_catalogue(sigma, dec, *, names=OBSERVABLES) -> np.ndarray:
    """Standard errors in internal units -> catalogue units (inverse of :func:`errors_to_internal`).

    Parameters
    ----------
    sigma : array_like, shape (..., len(names))
        Errors in internal units (deg for ra and dec).
    dec : float or array_like, shape (...)
        Declination of each star [deg].
    names : sequence of str
        The observables along the last axis (default: all six, in order).

    Returns
    -------
    ndarray, shape (..., len(names))
        Errors in catalogue units: ra_error of alpha* = alpha cos dec in mas, dec_error in mas.
    """
    out = np.array(sigma, dtype=float)
    for k, name in enumerate(names):
        if name in ("ra", "dec"):
            out[..., k] *= MAS_PER_DEG
        if name == "ra":
            out[..., k] *= np.cos(np.radians(dec))
    return out


# ---------------------------------------------------------------------------------------------- the parser


def to_number(
    field: str,
    value,
    unit,
    *,
    row=None,
    text_needs_unit: bool = True,
    example: str | None = None,
    noun: str | None = None,
) -> float:
    """Convert ``value`` to a finite float in ``unit``: the one number parser of perierr.

    Parameters
    ----------
    field : str
        Name used in error messages.
    value : float, int, Quantity or str
        A bare number is taken to be in ``unit`` (the documented unit of the
        field); a Quantity or a string such as ``"12 mas"`` is converted.
    unit : astropy unit or None
        Target unit; None for dimensionless values.
    row : int, optional
        Table row, for error messages.
    text_needs_unit : bool
        Refuse a string without a unit (never guess a bare number's unit from
        text); when False such a string is read in ``unit``.
    example : str, optional
        An example of an accepted value for the error message.
    noun : str, optional
        What the field is (``"a length"``), for the error message.

    Raises
    ------
    InputError
        For booleans, unparsable text, wrong dimensions and non-finite values;
        the message names the field, the value and the expected unit.

    Examples
    --------
    >>> import astropy.units as u
    >>> to_number("radial_velocity", -1500 * u.m / u.s, u.km / u.s), to_number("parallax", "20 uas", u.mas)
    (-1.5, 0.02)
    """
    # messages are built only when raising: the screen calls this about a dozen times per row
    if isinstance(value, (bool, np.bool_)):
        raise InputError(field, value, f"expected a number{_in(unit)}, not a boolean", row)
    given = value
    try:
        if isinstance(value, str):
            value = _from_text(field, value, unit, row, text_needs_unit, example)
        if isinstance(value, u.Quantity):
            value = value.to_value(u.dimensionless_unscaled if unit is None else unit)
        out = float(value)
    except u.UnitsError:
        shown = given if isinstance(given, str) else str(given)
        raise InputError(field, _plain(shown), _expected(unit, example, noun, convertible=True), row) from None
    except (TypeError, ValueError) as exc:
        if isinstance(exc, InputError):
            raise
        raise InputError(field, _plain(given), _expected(unit, example, noun, convertible=False), row) from None
    if not math.isfinite(out):
        raise InputError(field, out, f"expected a finite number{_in(unit)}", row)
    return out


def _from_text(field, text, unit, row, text_needs_unit, example):
    """A Quantity from text with a unit, or a float from text without one (if allowed)."""
    q = u.Quantity(text.strip())
    if q.unit != u.dimensionless_unscaled:
        return q
    if text_needs_unit and unit is not None:
        raise InputError(field, _plain(text), f"expected a value with its unit, e.g. {example or f'1 {unit}'!r}", row)
    return float(q.value)


def _plain(value):
    """Numpy strings shown as plain ones in messages."""
    return str(value) if isinstance(value, np.str_) else value


def _in(unit) -> str:
    return f" in {unit}" if unit is not None else ""


def _expected(unit, example, noun, *, convertible) -> str:
    """What a field accepts, for an error message."""
    hint = f" or a quantity such as {example!r}" if example else ""
    if unit is None:
        return "expected a plain number (this field has no unit)" if convertible else f"expected a number{hint}"
    if noun:
        return f"expected {noun} in {unit} (a number in {unit}{hint})"
    if convertible:
        return f"expected a quantity convertible to {unit} (a number in {unit}{hint})"
    return f"expected a number in {unit}{hint}"
