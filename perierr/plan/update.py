"""What-if covariance: combine today's measurement with a hypothetical new one.

A new, independent measurement of input i with standard error s is the
observation ``y = x_i + e``, ``e ~ N(0, s^2)``. The Gaussian (Kalman) update of
the full covariance is

``Sigma' = Sigma - Sigma e_i e_i^T Sigma / (Sigma_ii + s^2)``,

so ``Sigma'_ii = Sigma_ii s^2 / (Sigma_ii + s^2)`` (the inverse-variance
combination ``1/sigma'^2 = 1/sigma^2 + 1/s^2``) and every input correlated with
i shrinks too. In information form ``Sigma'^-1 = Sigma^-1 + e_i e_i^T / s^2``.
``s = 0`` means the input becomes exactly known (conditioning). The mean is
kept at today's value: the planning convention, since the new value is not
yet known and its expectation is today's mean.

References
----------
Kalman, R. E. 1960, J. Basic Eng. 82, 35; any estimation textbook, e.g.
Bar-Shalom, Li & Kirubarajan 2001, Estimation with Applications to Tracking
and Navigation, Sect. 5.2 (measurement update).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..cautions import note
from ..errors import InputError
from ..star import ObservedStar
from ..units import ERROR_LABELS, ERROR_UNITS, INDEX, OBSERVABLES, errors_to_catalogue, errors_to_internal, to_number

__all__ = [
    "Measurement",
    "input_name",
    "make_measurement",
    "parse_measure",
    "to_catalogue",
    "update_covariance",
    "updated_star",
]

#: Catalogue unit of a new measurement's precision, per input (ra: of alpha* = alpha cos dec).
PRECISION_UNITS = ERROR_UNITS

#: Plain-text unit labels for reports.
UNIT_LABELS = ERROR_LABELS

_ALIASES = {"rv": "radial_velocity", "plx": "parallax", "vr": "radial_velocity"}


@dataclass(frozen=True)
class Measurement:
    """A hypothetical new measurement of one input.

    Attributes
    ----------
    name : str
        Input name from ``OBSERVABLES``.
    index : int
        Its position along the last axis.
    precision : float
        Standard error in internal units (deg for ra/dec).
    value : float
        Standard error in catalogue units (mas for ra/dec).
    unit : str
        Catalogue unit of ``value``.
    """

    name: str
    index: int
    precision: float
    value: float
    unit: str

    @property
    def label(self) -> str:
        """E.g. ``"radial_velocity to 0.1 km/s"``."""
        return f"{self.name} to {self.value:.3g} {self.unit}"

    def to_dict(self) -> dict:
        """Plain dict for JSON."""
        return {"input": self.name, "precision": self.value, "unit": self.unit}


def input_name(name: str) -> str:
    """Canonical input name (accepts ``rv`` and ``plx`` as short forms)."""
    key = str(name).strip()
    key = _ALIASES.get(key, key)
    if key not in OBSERVABLES:
        raise InputError("input", name, f"expected one of {', '.join(OBSERVABLES)} (or rv, plx)")
    return key


def make_measurement(name: str, precision, *, dec: float = 0.0) -> Measurement:
    """Build a :class:`Measurement` from a precision in catalogue units.

    Parameters
    ----------
    name : str
        Input to re-observe.
    precision : float, str or Quantity
        Its new standard error: a bare number is in the catalogue unit of the
        input (mas, mas/yr, km/s; ra in mas of alpha*), or ``"0.1 km/s"``.
    dec : float
        Declination of the star [deg], to turn an ra precision into deg of alpha.
    """
    key = input_name(name)
    unit = PRECISION_UNITS[key]
    # a bare number, also as text (``--measure radial_velocity=0.1``), is in the catalogue unit
    value = to_number(f"{key} precision", precision, unit, text_needs_unit=False, example=f"0.1 {unit}")
    if not (math.isfinite(value) and value >= 0):
        raise InputError(f"{key} precision", value, f"expected a standard error >= 0 in {unit} (0 = exact)")
    internal = float(errors_to_internal([value], dec, names=(key,), ra_field="the ra precision")[0])
    return Measurement(key, INDEX[key], internal, value, UNIT_LABELS[key])


def to_catalogue(name: str, internal, *, dec: float = 0.0):
    """Precision in internal units -> catalogue units (inverse of :func:`make_measurement`)."""
    key = input_name(name)
    return errors_to_catalogue(np.asarray(internal, dtype=float)[..., None], dec, names=(key,))[..., 0]


def parse_measure(text: str, *, dec: float = 0.0) -> Measurement:
    """Parse ``"radial_velocity=0.1"`` or ``"parallax=0.02 mas"`` into a Measurement."""
    if "=" not in str(text):
        raise InputError("measure", text, "expected INPUT=PRECISION, e.g. radial_velocity=0.1")
    name, _, value = str(text).partition("=")
    return make_measurement(name, value, dec=dec)


def update_covariance(cov, index: int, precision) -> np.ndarray:
    """Covariance after a new independent measurement of one input.

    Parameters
    ----------
    cov : array_like, shape (k, k)
    index : int
        The measured input.
    precision : float or array_like, shape (p,)
        Standard error(s) of the new measurement, internal units; 0 = exact.

    Returns
    -------
    ndarray, shape (k, k) or (p, k, k)
    """
    s = np.asarray(cov, dtype=float)
    if s.ndim != 2 or s.shape[0] != s.shape[1]:  # a stack would be sliced along the wrong axis
        raise InputError("cov", f"shape {s.shape}", "one square covariance matrix (k, k); update a stack one by one")
    prec = np.asarray(precision, dtype=float)
    if np.any(~np.isfinite(prec)) or np.any(prec < 0):
        raise InputError("precision", prec.tolist(), "expected finite standard errors >= 0")
    col = s[:, index]
    denom = s[index, index] + prec**2
    safe = np.where(denom > 0, denom, 1.0)
    gain = np.where(denom > 0, 1.0 / safe, 0.0)  # nothing to update for an exact input
    out = s - gain[..., None, None] * np.outer(col, col)
    out = 0.5 * (out + np.swapaxes(out, -1, -2))
    out[..., index, index] = np.maximum(out[..., index, index], 0.0)
    return out


def updated_star(star: ObservedStar, measurements) -> ObservedStar:
    """The star with its covariance updated by one or more new measurements (applied in turn).

    Everything else is the star's own: mean, name, epoch, mass and the photometry (magnitude, its error and band).
    """
    cov = np.array(star.cov)
    for m in measurements:
        cov = update_covariance(cov, m.index, m.precision)
    what_if = note("what-if", "what-if: " + ", ".join(m.label for m in measurements))
    return ObservedStar(
        np.array(star.mean),
        cov,
        name=star.name,
        source_id=star.source_id,
        ref_epoch=star.ref_epoch,
        mass=star.mass,
        mass_error=star.mass_error,
        cautions=tuple(star.cautions) + (what_if,),
        magnitude=star.magnitude,
        magnitude_error=star.magnitude_error,
        magnitude_band=star.magnitude_band,
    )
