"""Checks of a star's values: refusals of the impossible, cautions about the implausible and unit slips.

Also the refusals the propagation methods share (a parallax to invert, a
motion to follow, an error to reduce).
"""

from __future__ import annotations

import math

from ..cautions import Caution
from ..errors import InputError
from ..units import (
    AU_PER_PC,
    KMS_PER_MASYR_AT_1MAS,
    MAS_PC,
    PARALLAX,
    PMDEC,
    PMRA,
    RADIAL_VELOCITY,
    SPEED_OF_LIGHT_KMS,
)

__all__ = ["plausibility", "require_motion", "require_positive_parallax", "require_uncertainty", "unit_slips"]

#: Bounds of plausibility, each with its reason. A radial velocity beyond |1,000| km/s exceeds the Galaxy's
#: escape speed near the Sun (about 550 km/s, Piffl et al. 2014, A&A 562, A91; from memory) by far: most
#: likely m/s read as km/s. A parallax above 800 mas puts the star closer than the nearest known star
#: (1.30 pc, from memory); above 1e5 mas, closer than 2,100 au: inside the region perierr's answers are about.
_RV_CAUTION_KMS = 1_000.0
_PARALLAX_CAUTION_MAS = 800.0
_PARALLAX_MAX_MAS = 1e5


#: Errors above this cannot be squared into a variance (the square of 1e150 is near the float limit).
LARGEST_ERROR = 1e150

#: A parallax this close to zero but not zero is below any measurement by many orders of magnitude
#: (10^15 pc); it would only overflow the arithmetic.
_SMALLEST_PARALLAX_MAS = 1e-12

#: A total speed below this [km/s] would take longer than 10^20 years to cross a parsec.
_SLOWEST_KMS = 1e-12


def plausibility(values, row) -> list:
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
            "parallax", plx, f"a star closer than {MAS_PC / plx * AU_PER_PC:,.0f} au is not a passing star; "
            "expected mas (check the unit)", row
        )
    # transverse speed 4.74047 km/s per (mas/yr) at 1 mas; the total speed must stay below c
    vt = KMS_PER_MASYR_AT_1MAS * math.hypot(values["pmra"], values["pmdec"]) / plx if plx > 0 else 0.0
    speed = math.hypot(vt, rv)
    pm_field = "pmdec" if abs(values["pmdec"]) > abs(values["pmra"]) else "pmra"
    if values["parallax_error"] > 0 and plx < 5 * values["parallax_error"]:
        # a parallax within noise says little about the speed, but a star faster than light even at the
        # largest plausible parallax (parallax + 5 sigma) is impossible at any distance it may have
        largest = plx + 5 * values["parallax_error"]
        slowest = math.hypot(KMS_PER_MASYR_AT_1MAS * math.hypot(values["pmra"], values["pmdec"]) / largest, rv)
        if largest > 0 and slowest >= SPEED_OF_LIGHT_KMS:
            field, value = ("radial_velocity", rv) if abs(rv) >= SPEED_OF_LIGHT_KMS else (pm_field, values[pm_field])
            raise InputError(
                field, value, f"the star would move at {slowest:.3g} km/s or more (at parallax + 5 sigma = "
                f"{largest:.3g} mas), faster than light ({SPEED_OF_LIGHT_KMS:,.0f} km/s); check the units", row
            )
        return _plausibility_notes(values, row)
    if 0 < speed < _SLOWEST_KMS:
        _refuse_slow(rv, speed, row)
    if speed >= SPEED_OF_LIGHT_KMS:
        field, value = ("radial_velocity", rv) if abs(rv) >= SPEED_OF_LIGHT_KMS else (pm_field, values[pm_field])
        raise InputError(
            field, value, f"the star would move at {speed:.3g} km/s, faster than light "
            f"({SPEED_OF_LIGHT_KMS:,.0f} km/s); check the units", row
        )
    return _plausibility_notes(values, row)


def _plausibility_notes(values, row) -> list:
    """Cautions about implausible but possible values (the refusals are in :func:`_plausibility`)."""
    plx, rv = values["parallax"], values["radial_velocity"]
    out = []
    if abs(rv) > _RV_CAUTION_KMS:
        out.append(Caution(
            "implausible-value",
            f"radial_velocity = {rv:g} km/s is beyond |{_RV_CAUTION_KMS:,.0f}| km/s, far above the Galaxy's "
            "escape speed: check the unit (m/s?)", "caution", "radial_velocity", row,
        ))
    if plx > _PARALLAX_CAUTION_MAS:
        out.append(Caution(
            "implausible-value",
            f"parallax = {plx:g} mas puts the star at {MAS_PC / plx:.3g} pc, closer than the nearest known "
            "star (1.30 pc): check the unit", "caution", "parallax", row,
        ))
    return out


def unit_slips(values, row) -> list:
    """Cautions about likely unit slips (emitted as warnings by the reader, shown by the reports)."""
    out = []
    plx, eplx = values["parallax"], values["parallax_error"]
    if 0 < abs(plx) < 1.0 and 0 < eplx < 1e-3:
        out.append(Caution(
            "unit-slip",
            f"parallax = {plx} with parallax_error = {eplx} looks like arcsec; "
            "perierr reads bare numbers in mas (pass a Quantity to be explicit)", "caution", "parallax", row,
        ))
    # not the radial velocity: values near zero are common and valid (a star crossing the line of sight), and
    # spectroscopic errors of a few km/s are normal, so an error far above the value says nothing about units
    for name in ("parallax", "pmra", "pmdec"):
        value, err = abs(values[name]), values[f"{name}_error"]
        if value > 0 and err > 100 * value and err > 1.0:
            out.append(Caution(
                "unit-slip", f"{name}_error = {err} is over 100 times {name} = {values[name]}; check the units of both",
                "caution", f"{name}_error", row,
            ))
    return out


def require_positive_parallax(parallax: float, *, method: str) -> None:
    """Refuse to invert a non-positive nominal parallax, and say what to do instead."""
    if not parallax > 0:
        raise InputError(
            "parallax",
            float(parallax),
            f"{method} inverts the parallax, which is meaningless for a parallax <= 0 "
            "(the star is not measured to be at any finite distance); "
            "use a distance prior instead (distance_prior=..., CLI --distance-prior)",
        )


def require_motion(mean) -> None:
    """Refuse a star with no measured motion relative to the Sun (no perihelion exists).

    A speed below ``_SLOWEST_KMS`` at the nominal parallax counts as none (the rule the reading checks apply;
    below about 1e-154 km/s the perihelion time -(r.v)/|v|^2 is not even defined in floating point).
    """
    if mean[PMRA] == 0 and mean[PMDEC] == 0 and mean[RADIAL_VELOCITY] == 0:
        raise InputError(
            "radial_velocity",
            float(mean[RADIAL_VELOCITY]),
            "with pmra = pmdec = 0 as well the star does not move relative to the Sun, so it has no "
            "perihelion; check the input (a zero proper motion or radial velocity is usually a missing value)",
        )
    parallax = float(mean[PARALLAX])
    tangential = KMS_PER_MASYR_AT_1MAS * math.hypot(mean[PMRA], mean[PMDEC]) / parallax if parallax > 0 else 0.0
    speed = math.hypot(tangential, mean[RADIAL_VELOCITY])
    if 0 < speed < _SLOWEST_KMS:  # also when the parallax is within its noise (the reading checks skip it then)
        _refuse_slow(float(mean[RADIAL_VELOCITY]), speed)


def _refuse_slow(rv: float, speed: float, row=None) -> None:
    """The one refusal of a star slower than ``_SLOWEST_KMS`` (no perihelion within any meaningful time)."""
    raise InputError(
        "radial_velocity", rv, f"the star moves at {speed:.3g} km/s (below {_SLOWEST_KMS:g}): it has no "
        "perihelion within any meaningful time; give exact zeros for motions that were not measured", row
    )


def require_uncertainty(sigma) -> None:
    """Refuse to plan for a star whose every input is held exact (there is nothing to re-observe)."""
    if not any(s > 0 for s in sigma):
        raise InputError(
            "errors",
            "all zero",
            "every input is held exact, so there is no error to budget or reduce; give the catalogue errors",
        )
