"""Quick screening of a catalogue: nominal perihelion and linear errors per row.

Every row of the input comes back, in input order, with a status: rows that
cannot be computed say why instead of disappearing.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from .cautions import is_head_on
from .errors import InputError, PerierrWarning
from .models import ForwardModel, StraightLine
from .propagate.linear import linearize
from .star import ObservedStar
from .units import AU_PER_PC, PARALLAX

__all__ = ["ScreenRow", "iter_screen", "screen_catalogue"]


@dataclass(frozen=True)
class ScreenRow:
    """One catalogue row after screening.

    Attributes
    ----------
    row : int
    name : str
    status : str
        ``"ok"`` or the reason the row could not be computed.
    time_myr, time_sigma, distance_pc, distance_sigma, speed_kms : float or None
    parallax_fraction : float or None
        parallax_error / parallax (above about 0.2, 1/parallax is a biased distance).
    notes : tuple of str
        Cautions about this row (unit slips, implausible values, a head-on path).
    """

    row: int
    name: str
    status: str
    time_myr: float | None = None
    time_sigma: float | None = None
    distance_pc: float | None = None
    distance_sigma: float | None = None
    speed_kms: float | None = None
    parallax_fraction: float | None = None
    notes: tuple = ()

    @property
    def distance_au(self) -> float | None:
        """Nominal perihelion distance in au."""
        return None if self.distance_pc is None else self.distance_pc * AU_PER_PC


def screen_catalogue(table, *, model: ForwardModel | None = None) -> list:
    """Nominal perihelion with linear errors for every row of a table (see :func:`iter_screen`)."""
    return list(iter_screen(table, model=model))


def iter_screen(table, *, model: ForwardModel | None = None):
    """Nominal perihelion with linear errors for every row of a table, one row at a time.

    Parameters
    ----------
    table : astropy.table.Table or str or Path
        Catalogue-named columns (see :mod:`perierr.star`).
    model : ForwardModel, optional
        Defaults to the straight-line model.

    Yields
    ------
    ScreenRow
        One per input row, in input order (so an interrupted screen can still show what it had).
    """
    from astropy.table import Table

    if not isinstance(table, Table):
        from pathlib import Path

        if Path(table).is_dir():
            raise InputError("table", str(table), "is a folder; expected an ECSV, CSV, FITS or VOTable file")
        try:
            table = Table.read(table)
        except FileNotFoundError:
            raise InputError("table", str(table), "file not found") from None
        except Exception as exc:  # astropy raises many types for unreadable files
            raise InputError(
                "table",
                str(table),
                f"could not be read as a table ({type(exc).__name__}: {str(exc).splitlines()[0][:200]}); "
                "expected ECSV, FITS or VOTable with catalogue column names",
            ) from None
    model = model or StraightLine()
    for i, row in enumerate(table):
        yield _screen_row(i, row, table.colnames, model)


def _screen_row(i, row, colnames, model) -> ScreenRow:
    """One row: its numbers, or the reason it has none; its cautions stay with it (not on stderr)."""
    name = str(row["name"]) if "name" in colnames else f"row {i}"
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PerierrWarning)  # the messages are in star.notes
            star = ObservedStar.from_mapping(row, row=i, strict=False)
        lin = linearize(star, model)
    except InputError as exc:
        reason = exc.expected.split(";")[0].split(" (")[0]
        if exc.field == "parallax" and isinstance(exc.value, float) and exc.value <= 0:
            reason = "a parallax <= 0 cannot be inverted; analyse it with a distance prior (--distance-prior)"
        return ScreenRow(i, name, f"not computed: {exc.field} = {exc.value!r}: {reason}")
    if not (np.all(np.isfinite(lin.value)) and np.all(np.isfinite(lin.sigma))):
        return ScreenRow(i, star.name, "not computed: the linearized perihelion is not a finite number")
    t, d, v = (float(x) for x in lin.value)
    st, sd = float(lin.sigma[0]), float(lin.sigma[1])
    notes = tuple(c.message for c in star.cautions if c.severity == "caution")
    if is_head_on(d, star.mean[PARALLAX]):
        notes += ("the nominal path passes through the Sun: the linear sigma of d_ph is undefined (shown as 0)",)
    return ScreenRow(i, star.name, "ok", t, st, d, sd, v, star.fractional_parallax_error, notes)


def nearest_first(rows) -> list:
    """Rows ordered by nominal perihelion distance (uncomputed rows last)."""
    return sorted(rows, key=lambda r: (r.distance_pc is None, r.distance_pc or np.inf, r.row))
