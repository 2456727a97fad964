"""The :class:`ObservedStar` record: six observables at a reference epoch, their covariance and cautions.

Internally the covariance is over (ra [deg], dec [deg], parallax [mas],
pmra [mas/yr], pmdec [mas/yr], radial_velocity [km/s]); the ra variance is that
of alpha itself, ``(ra_error / cos dec)^2`` converted to deg^2 (see
:mod:`perierr.units`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import astropy.units as u
import numpy as np

from ..cautions import Caution, note
from ..errors import InputError
from ..units import DEC, INDEX, OBSERVABLES, PARALLAX, errors_to_catalogue
from .fields import CORRELATIONS, ERRORS, split_correlation

if TYPE_CHECKING:
    from astropy.table import Row

__all__ = ["ObservedStar", "check_psd"]


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
    cautions : tuple of Caution
        Facts about how the input was read (e.g. inputs held exact) and cautions about
        implausible values, for the reports (see :mod:`perierr.cautions`); ``notes`` lists their text.
    """

    mean: np.ndarray
    cov: np.ndarray
    name: str = "star"
    source_id: str | None = None
    ref_epoch: float | None = None
    mass: float | None = None
    mass_error: float | None = None
    cautions: tuple = field(default=())

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
        from .reading import star_from_mapping

        return star_from_mapping(cls, mapping, row=row, strict=strict)


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
