"""Parallax zero-point and per-input error inflation, applied before anything else.

Convention (Lindegren et al. 2021, A&A 649, A4, Sect. 1): the catalogue
parallax is biased by a zero-point Z, and the corrected parallax is
``parallax - Z``; for the large astrometric catalogues Z is slightly negative
(a few hundredths of a mas), so the correction *raises* the parallax. An
uncertain zero-point (value Z, error sigma_Z) is its own input: it adds
``sigma_Z^2`` to the parallax variance and gets its own share in the budget,
with ``d output / d Z = - d output / d parallax``.

Error inflation multiplies the standard error of chosen observables by a
factor (correlation coefficients kept), ``Sigma' = D Sigma D`` with D the
diagonal of factors; it is applied to the catalogue covariance only, not to
the zero-point's error.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import astropy.units as u
import numpy as np

from .cautions import note
from .errors import InputError, PerierrWarning
from .star import ObservedStar
from .units import INTERNAL_UNITS, OBSERVABLES, PARALLAX, to_number

__all__ = ["ZERO_POINT", "Calibration", "CalibrationInfo", "parse_inflation", "parse_offset"]

#: Name of the zero-point input in budgets.
ZERO_POINT = "parallax_zero_point"


def parse_offset(value) -> tuple:
    """Zero-point (value, error) [mas] from a number, Quantity, pair or text.

    Accepts ``-0.017``, ``-0.017 * u.mas``, ``(-0.017, 0.005)``,
    ``"-0.017"``, ``"-0.017,0.005"``, ``"-0.017+-0.005 mas"``, ``"-17 uas"``.
    """
    if value is None:
        return 0.0, 0.0
    if isinstance(value, str):
        text = value.replace("±", ",").replace("+/-", ",").replace("+-", ",")
        parts = [p.strip() for p in text.split(",")]
        if len(parts) not in (1, 2) or not all(parts):
            raise InputError("parallax_offset", value, "expected VALUE or VALUE,ERROR in mas, e.g. '-0.017,0.005'")
        unit = None
        last = parts[-1]
        try:
            q = u.Quantity(last)
            unit = q.unit if q.unit != u.dimensionless_unscaled else None
        except (TypeError, ValueError):
            raise InputError("parallax_offset", value, "expected numbers in mas, e.g. '-0.017,0.005'") from None
        for part in parts:  # each part a number or a quantity, so that an error quotes what the user wrote
            if not _has_unit(part):
                try:
                    float(part)
                except ValueError:
                    raise InputError(
                        "parallax_offset", value, f"expected numbers in mas, e.g. '-0.017,0.005' (not {part!r})"
                    ) from None
        items = [p if (unit is None or _has_unit(p)) else f"{p} {unit}" for p in parts]
        pair = [_mas("parallax_offset", p) for p in items]
    elif isinstance(value, (tuple, list)):
        if len(value) != 2:
            raise InputError("parallax_offset", value, "expected (value, error) in mas")
        pair = [_mas("parallax_offset", v) for v in value]
    else:
        pair = [_mas("parallax_offset", value)]
    zero, err = pair[0], (pair[1] if len(pair) == 2 else 0.0)
    if err < 0:
        raise InputError("parallax_offset_error", err, "expected an error >= 0 mas")
    return zero, err


def _has_unit(text) -> bool:
    try:
        return u.Quantity(text).unit != u.dimensionless_unscaled
    except (TypeError, ValueError):
        return False


def _mas(field, value) -> float:
    """A parallax offset in mas from a number (mas), Quantity or string (``"-17 uas"``)."""
    unit = INTERNAL_UNITS["parallax"]
    return to_number(field, value, unit, text_needs_unit=False, example="-17 uas", noun="a parallax")


def parse_inflation(value) -> dict:
    """Error inflation factors ``{observable: factor}``.

    Accepts None, one number (every observable), a mapping or the text
    ``"parallax=1.1,pmra=1.05"`` / ``"1.2"``; ``parallax_error`` works as a key too.
    """
    if value is None:
        return {}
    if isinstance(value, str):
        text = value.strip()
        if "=" not in text:
            value = _factor("error_inflation", text)
        else:
            items = {}
            for item in text.split(","):
                key, eq, num = item.partition("=")
                if not eq:
                    raise InputError("error_inflation", value,
                                     "expected name=factor pairs, e.g. 'parallax=1.1,pmra=1.05'")
                items[key.strip()] = num.strip()
            value = items
    if isinstance(value, (int, float, np.floating)):
        f = _factor("error_inflation", value)
        return {name: f for name in OBSERVABLES}
    if not isinstance(value, dict):
        raise InputError("error_inflation", value, "expected a factor, a mapping or 'name=factor,...'")
    out = {}
    for key, factor in value.items():
        name = str(key).removesuffix("_error")
        if name not in OBSERVABLES:
            raise InputError("error_inflation", key, f"unknown input; expected one of {', '.join(OBSERVABLES)}")
        out[name] = _factor(f"error_inflation[{name}]", factor)
    return out


def _factor(field, value) -> float:
    try:
        f = float(value)
    except (TypeError, ValueError):
        raise InputError(field, value, "expected a positive number, e.g. 1.1") from None
    if not (math.isfinite(f) and f > 0):
        raise InputError(field, value, "expected a positive, finite factor, e.g. 1.1")
    return f


#: How the zero-point is applied, as written in the JSON document.
CONVENTION = "corrected parallax = catalogue parallax - zero point"


@dataclass(frozen=True)
class CalibrationInfo:
    """The calibration an analysis applied, for reports and the ``calibration`` block of the JSON document.

    Attributes
    ----------
    zero_point_mas, zero_point_error_mas : float
        Parallax zero-point Z and its error [mas] (corrected parallax = catalogue parallax - Z).
    error_inflation : dict
        Factor multiplying the standard error of every observable (1 where none was given).
    catalogue_parallax_mas, catalogue_parallax_error_mas : float or None
        The catalogue parallax and its error before calibration (None when no star was given).
    """

    zero_point_mas: float
    zero_point_error_mas: float
    error_inflation: dict
    catalogue_parallax_mas: float | None = None
    catalogue_parallax_error_mas: float | None = None

    @property
    def active(self) -> bool:
        """True when the calibration changed the star (a zero-point, its error, or a factor other than 1)."""
        return bool(self.zero_point_mas or self.zero_point_error_mas or self.inflated)

    @property
    def inflated(self) -> dict:
        """The factors other than 1, by observable."""
        return {name: f for name, f in self.error_inflation.items() if f != 1}

    def to_dict(self) -> dict:
        """JSON block: zero-point (value, error, convention), inflation factors, the catalogue parallax."""
        out = {
            "parallax_zero_point": {
                "value_mas": self.zero_point_mas,
                "error_mas": self.zero_point_error_mas,
                "convention": CONVENTION,
            },
            "error_inflation": dict(self.error_inflation),
        }
        if self.catalogue_parallax_mas is not None:
            out["catalogue_parallax_mas"] = self.catalogue_parallax_mas
            out["catalogue_parallax_error_mas"] = self.catalogue_parallax_error_mas
        return out


@dataclass(frozen=True)
class Calibration:
    """Zero-point and inflation settings; :meth:`apply` gives the star to analyse.

    Attributes
    ----------
    zero_point : float
        Z [mas]; the corrected parallax is ``parallax - Z``.
    zero_point_error : float
        sigma_Z [mas].
    inflation : dict
        ``{observable: factor}`` multiplying standard errors.
    """

    zero_point: float = 0.0
    zero_point_error: float = 0.0
    inflation: dict = field(default_factory=dict)

    @classmethod
    def from_user(cls, parallax_offset=None, error_inflation=None) -> Calibration:
        """Build from the loose forms accepted by :func:`perierr.analyze`."""
        zero, err = parse_offset(parallax_offset)
        return cls(zero, err, parse_inflation(error_inflation))

    @property
    def active(self) -> bool:
        """True when anything changes the star."""
        return bool(self.zero_point or self.zero_point_error or any(f != 1 for f in self.inflation.values()))

    def factors(self) -> np.ndarray:
        """Inflation factor per observable, shape (6,)."""
        return np.array([self.inflation.get(n, 1.0) for n in OBSERVABLES])

    def apply(self, star: ObservedStar) -> ObservedStar:
        """The star with the zero-point removed and its errors inflated."""
        if not self.active:
            return star
        f = self.factors()
        if np.any(f < 1):
            low = [n for n, x in zip(OBSERVABLES, f) if x < 1]
            warnings.warn(f"error inflation factors below 1 shrink the errors of {', '.join(low)}",
                          PerierrWarning, stacklevel=2)
        mean = np.array(star.mean, dtype=float)
        mean[PARALLAX] -= self.zero_point
        cov = np.asarray(star.cov) * np.outer(f, f)
        cov[PARALLAX, PARALLAX] += self.zero_point_error**2
        notes = list(star.cautions)
        if self.zero_point or self.zero_point_error:
            notes.append(note(
                "zero-point-applied",
                f"parallax corrected for a zero-point of {self.zero_point:+.4g} ± {self.zero_point_error:.2g} mas: "
                f"{star.mean[PARALLAX]:.6g} -> {mean[PARALLAX]:.6g} mas, "
                f"error {star.sigma[PARALLAX] * f[PARALLAX]:.4g} -> "
                f"{math.sqrt(cov[PARALLAX, PARALLAX]):.4g} mas",
                "parallax",
            ))
        for name, x in zip(OBSERVABLES, f):
            if x != 1:
                notes.append(note("error-inflated", f"{name} error inflated by a factor {x:g}", f"{name}_error"))
        return ObservedStar(mean, cov, name=star.name, source_id=star.source_id, ref_epoch=star.ref_epoch,
                            mass=star.mass, mass_error=star.mass_error, cautions=tuple(notes))

    def info(self, star: ObservedStar | None = None) -> CalibrationInfo:
        """What was applied, as a record; with ``star`` (the catalogue star) also its parallax and error."""
        return CalibrationInfo(
            zero_point_mas=self.zero_point,
            zero_point_error_mas=self.zero_point_error,
            error_inflation={n: self.inflation.get(n, 1.0) for n in OBSERVABLES},
            catalogue_parallax_mas=None if star is None else float(star.mean[PARALLAX]),
            catalogue_parallax_error_mas=None if star is None else float(star.sigma[PARALLAX]),
        )

    def to_dict(self, star: ObservedStar | None = None) -> dict:
        """JSON block: zero-point (value, error, convention) and inflation factors (``info(star).to_dict()``)."""
        return self.info(star).to_dict()

    def budget_inputs(self, jacobian, calibrated_star: ObservedStar) -> tuple:
        """Jacobian, covariance and names of the budget inputs: the six observables and the zero-point.

        Parameters
        ----------
        jacobian : array_like, shape (3, 6)
            d output / d observable at the calibrated nominal point.
        calibrated_star : ObservedStar
            The output of :meth:`apply` (its parallax variance includes sigma_Z^2).

        Returns
        -------
        jacobian : ndarray, shape (3, 7)
            With ``d output / d Z = - d output / d parallax`` as the last column.
        cov : ndarray, shape (7, 7)
            The catalogue covariance (sigma_Z^2 taken back out of the parallax) and sigma_Z^2.
        inputs : tuple of str
        """
        from .budget import extend_inputs

        j = np.asarray(jacobian, dtype=float)
        cov6 = np.array(calibrated_star.cov, dtype=float)
        cov6[PARALLAX, PARALLAX] -= self.zero_point_error**2
        grad, cov = extend_inputs(j, cov6, -j[:, PARALLAX], [self.zero_point_error**2])
        return grad, cov, OBSERVABLES + (ZERO_POINT,)
