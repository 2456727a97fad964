"""The :class:`ObservedStar` record: six observables at a reference epoch, their covariance and cautions.

Internally the covariance is over (ra [deg], dec [deg], parallax [mas],
pmra [mas/yr], pmdec [mas/yr], radial_velocity [km/s]); the ra variance is that
of alpha itself, ``(ra_error / cos dec)^2`` converted to deg^2 (see
:mod:`perierr.units`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING

import astropy.units as u
import numpy as np

from ..cautions import Caution, note
from ..errors import InputError
from ..units import DEC, INDEX, OBSERVABLES, PARALLAX, errors_to_catalogue
from .fields import CORRELATIONS, ERRORS, MAGNITUDE_RANGE, split_correlation

if TYPE_CHECKING:
    from astropy.table import Row

__all__ = ["ObservedStar", "carry_photometry", "check_magnitude", "check_psd"]


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
        Star mass [M_sun] (gravitational focusing, and the encounter's impulses and strength).
    mass_error : float or None
        Its standard error [M_sun].
    cautions : tuple of Caution
        Facts about how the input was read (e.g. inputs held exact) and cautions about
        implausible values, for the reports (see :mod:`perierr.cautions`); ``notes`` lists their text.
    magnitude : float or None
        Apparent magnitude [mag] in ``magnitude_band``, for the cost of new measurements and the peak
        magnitude of the encounter (the propagation never reads it). Read from ``phot_g_mean_mag`` (band
        ``"G"``) or ``mag``.
    magnitude_error : float or None
        Its standard error [mag] (``phot_g_mean_mag_error`` or ``mag_error``).
    magnitude_band : str or None
        The photometric band (``"G"``, ``"V"``, ...); None when a generic ``mag`` came without ``mag_band``.
    """

    mean: np.ndarray
    cov: np.ndarray
    name: str = "star"
    source_id: str | None = None
    ref_epoch: float | None = None
    mass: float | None = None
    mass_error: float | None = None
    cautions: tuple = field(default=())
    magnitude: float | None = None
    magnitude_error: float | None = None
    magnitude_band: str | None = None

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
        check_psd(cov)
        mean.setflags(write=False)
        cov.setflags(write=False)
        object.__setattr__(self, "mean", mean)
        object.__setattr__(self, "cov", cov)
        cautions = tuple(c if isinstance(c, Caution) else note("note", str(c)) for c in self.cautions)
        object.__setattr__(self, "cautions", cautions)
        self._check_photometry()

    def _check_photometry(self) -> None:
        """The magnitude fields as the readers check them (for stars built with the plain constructor)."""
        if self.magnitude is not None:
            object.__setattr__(self, "magnitude", check_magnitude("magnitude", self.magnitude))
        if self.magnitude_error is not None:
            if self.magnitude is None:
                raise InputError("magnitude_error", self.magnitude_error,
                                 "an error needs its magnitude: give magnitude")  # fmt: skip
            object.__setattr__(self, "magnitude_error", check_magnitude("magnitude_error", self.magnitude_error,
                                                                        error=True))  # fmt: skip
        if self.magnitude_band is not None:
            band = str(self.magnitude_band).strip()
            if not band or self.magnitude is None:
                raise InputError("magnitude_band", self.magnitude_band,
                                 "a band name such as 'V' beside a magnitude")  # fmt: skip
            object.__setattr__(self, "magnitude_band", band)

    @property
    def sigma(self) -> np.ndarray:
        """Standard errors in internal units, shape (6,)."""
        return np.sqrt(np.diag(self.cov))

    @property
    def notes(self) -> tuple:
        """The text of each reading caution, in order (``row N:`` first for table rows)."""
        return tuple(str(c) for c in self.cautions)

    @property
    def held_exact(self) -> tuple:
        """Names of the observables with zero error (held exact)."""
        return tuple(n for n, s in zip(OBSERVABLES, self.sigma) if s == 0.0)

    @property
    def fractional_parallax_error(self) -> float:
        """parallax_error / parallax (inf for a non-positive parallax)."""
        plx = self.mean[PARALLAX]
        return float(self.sigma[PARALLAX] / plx) if plx > 0 else math.inf

    def catalogue_errors(self) -> dict:
        """Errors in catalogue units (ra_error of alpha* in mas), keyed by field."""
        return dict(zip(ERRORS, errors_to_catalogue(self.sigma, self.mean[DEC]).tolist()))

    def to_dict(self) -> dict:
        """Inputs in catalogue units, for reports and JSON."""
        out = {"name": self.name, "source_id": self.source_id, "ref_epoch": self.ref_epoch}
        out.update(dict(zip(OBSERVABLES, self.mean.tolist())))
        out.update(self.catalogue_errors())
        s = self.sigma
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = self.cov / np.outer(s, s)
        for c in CORRELATIONS:
            a, b = split_correlation(c)
            value = corr[INDEX[a], INDEX[b]]
            out[c] = float(value) if np.isfinite(value) else 0.0
        out["mass"] = self.mass
        out["mass_error"] = self.mass_error
        out["held_exact"] = list(self.held_exact)
        if self.magnitude is not None:  # only when given: the inputs block of a star without one is unchanged
            out["magnitude"] = self.magnitude
            out["magnitude_error"] = self.magnitude_error
            out["magnitude_band"] = self.magnitude_band
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
            Reject unknown field names (likely typos) and refuse a bad or incomplete magnitude
            (:class:`InputError` naming the field). Table rows are read with ``strict=False``, since
            catalogues carry many other columns: a bad or incomplete magnitude is then dropped, with a
            reading caution (code ``"magnitude-dropped"``) saying why, and the star is kept.
        """
        from .reading import star_from_mapping

        return star_from_mapping(cls, mapping, row=row, strict=strict)


def check_magnitude(name: str, value, *, row=None, error: bool = False) -> float:
    """A magnitude in :data:`~perierr.star.fields.MAGNITUDE_RANGE` (or, ``error=True``, an error >= 0), as a float.

    Parameters
    ----------
    name : str
        The field, for the message (``"phot_g_mean_mag"``, ``"mag_error"``, ...).
    value : float
        In mag.
    row : int, optional
        Table row, for the message.
    error : bool
        Check a standard error (finite, >= 0) instead of a magnitude.

    Raises
    ------
    InputError
        Naming the field, the value and what was expected.
    """
    try:
        x = float(value)
    except (TypeError, ValueError):
        x = math.nan
    if error:
        if not (math.isfinite(x) and x >= 0):
            raise InputError(name, value, "expected a finite magnitude error >= 0 in mag", row)
        return x
    lo, hi = MAGNITUDE_RANGE
    if not (math.isfinite(x) and lo <= x <= hi):
        raise InputError(name, value, f"expected a finite magnitude in [{lo:g}, {hi:g}] mag", row)
    return x


def carry_photometry(star: ObservedStar, source: ObservedStar) -> ObservedStar:
    """``star`` with the magnitude fields of ``source`` when it has none (a star rebuilt from another one).

    Calibration and the planner rebuild a star from its mean and covariance; this puts back the photometry
    they do not touch. ``star`` itself is returned when there is nothing to carry.
    """
    if star is source or star.magnitude is not None or source.magnitude is None:
        return star
    return replace(star, magnitude=source.magnitude, magnitude_error=source.magnitude_error,
                   magnitude_band=source.magnitude_band)  # fmt: skip


def check_psd(matrix, *, row=None, what="covariance matrix") -> None:
    """Refuse a matrix that is not positive semi-definite (after scaling to unit diagonal)."""
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
