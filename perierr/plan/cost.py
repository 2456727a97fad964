"""A simple telescope-time cost model for new measurements.

Photon-limited scaling (common practice, no source): the precision of a
measurement limited by photon noise scales as the inverse square root of the
collected photons, so with magnitude m and exposure time t

``sigma(m, t) = sigma_ref * 10^(0.2 (m - m_ref)) * sqrt(t_ref / t)``

and the time to reach a precision s is

``t(s, m) = t_ref * (sigma_ref / s)^2 * 10^(0.4 (m - m_ref)) + overhead``.

A precision below the instrument floor (systematics) cannot be bought with
time: its cost is infinite. The reference numbers below are illustrative
placeholders, not properties of any instrument: set your own.

:class:`TableCost` reads the hours from a table instead (an exposure-time
calculator's output, or an observatory's published numbers): rows of
(input, precision, hours[, magnitude]), a precision x magnitude grid when
several magnitudes are given per precision, interpolated linearly in log hours
in magnitude and log-log in precision.

:class:`CallableCost` wraps a plain function ``cost(input, precision) -> hours``
(:func:`as_cost_model` turns what a caller passes into a cost model).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..star.fields import MAGNITUDE_RANGE
from .update import PRECISION_UNITS, input_name

__all__ = [
    "DEFAULT_RV_REFERENCE", "CallableCost", "PhotonLimitedCost", "Reference", "TableCost", "as_cost_model",
]  # fmt: skip


@dataclass(frozen=True)
class Reference:
    """Precision ``sigma`` (catalogue units) reached on a star of magnitude ``magnitude`` in ``hours``.

    ``floor`` is the best precision the instrument can reach at all.
    """

    sigma: float
    magnitude: float
    hours: float
    floor: float = 0.0

    def __post_init__(self):
        if not (self.sigma > 0 and self.hours > 0 and self.floor >= 0):
            raise InputError("cost reference", self, "expected sigma > 0, hours > 0 and floor >= 0")


#: Illustrative radial-velocity reference: 1 km/s on a 12 mag star in 1 h, floor 0.01 km/s
#: (common practice, no source; replace with your instrument's exposure-time calculator).
DEFAULT_RV_REFERENCE = Reference(sigma=1.0, magnitude=12.0, hours=1.0, floor=0.01)


@dataclass(frozen=True)
class PhotonLimitedCost:
    """Telescope hours for a new measurement, photon-limited (common practice, no source).

    Attributes
    ----------
    references : dict
        Input name -> :class:`Reference`. Inputs without one have no cost model.
    overhead_hours : float
        Added to every measurement (acquisition, calibration).
    """

    references: dict = field(default_factory=lambda: {"radial_velocity": DEFAULT_RV_REFERENCE})
    overhead_hours: float = 0.0

    def covers(self, input: str) -> bool:
        """True when the model can price a measurement of this input."""
        return input_name(input) in self.references

    def needs_magnitude(self, input: str) -> bool:
        """True: photon-limited hours always depend on the star's magnitude."""
        return True

    def hours(self, input: str, precision: float, magnitude: float) -> float:
        """Exposure time [h] to measure ``input`` to ``precision`` (catalogue units) at ``magnitude``.

        Returns ``inf`` for a precision below the reference floor.
        """
        name = input_name(input)
        if name not in self.references:
            raise InputError("cost model", name, f"no reference for {name}; give one in references=")
        if not (precision > 0 and math.isfinite(magnitude)):
            raise InputError("cost", (precision, magnitude), "expected a precision > 0 and a finite magnitude")
        ref = self.references[name]
        if precision < ref.floor:
            return math.inf
        scale = (ref.sigma / precision) ** 2 * 10 ** (0.4 * (magnitude - ref.magnitude))
        return ref.hours * scale + self.overhead_hours

    def to_dict(self) -> dict:
        """Plain dict for JSON."""
        return {
            "model": "photon-limited: sigma ~ 10^(0.2 m) / sqrt(t) (common practice, no source)",
            "overhead_hours": self.overhead_hours,
            "references": {k: vars(v) for k, v in self.references.items()},
        }


#: Column names of a cost table.
TABLE_COLUMNS = ("input", "precision", "hours", "magnitude")

_LN_FLUX = 0.4 * math.log(10.0)  # d ln(hours) / d magnitude, photon-limited


@dataclass(frozen=True)
class _Rows:
    """One input's rows: distinct precisions ascending (catalogue units) and, per precision, ln hours.

    Without magnitudes ``log_hours[i]`` is one value per precision and ``magnitude`` is None; with them,
    ``magnitude[i]`` holds the precision's magnitudes ascending and ``log_hours[i]`` the ln hours at each.
    ``rows`` keeps (precision, magnitude or None, hours, table row) as read, sorted.
    """

    precision: np.ndarray
    log_hours: tuple
    magnitude: tuple | None
    rows: tuple


def _log_hours_at(mags: np.ndarray, log_hours: np.ndarray, m: float) -> float:
    """The ln hours at magnitude ``m`` from one precision's magnitudes.

    Linear in ln hours between them; beyond the grid, photon-limited from the nearest magnitude
    (ln hours + 0.4 ln 10 (m - m_end)).
    """
    if m <= mags[0]:
        return float(log_hours[0] + _LN_FLUX * (m - mags[0]))
    if m >= mags[-1]:
        return float(log_hours[-1] + _LN_FLUX * (m - mags[-1]))
    return float(np.interp(m, mags, log_hours))


@dataclass(frozen=True)
class TableCost:
    """Telescope hours read from a table: rows of (input, precision, hours[, magnitude]).

    Between precisions of an input the hours are interpolated linearly in (log precision, log hours) (a power
    law between neighbouring rows, as photon-limited costs are); a precision better than the input's best row
    is not reachable (``inf`` hours); a looser precision than its loosest row costs that row's hours (the
    table's shortest exposure taken as the least one can spend).

    With a ``magnitude`` column the rows of an input form a precision x magnitude grid (an exposure-time
    calculator's output; one row per precision is the simplest grid). The hours at a star's magnitude m are
    found first at each precision of the table: linear in log hours between that precision's magnitudes, and
    beyond its brightest or faintest magnitude scaled photon-limited from the nearest one (common practice, no
    source): ``hours x 10^(0.4 (m - m_row))``. Those hours are then interpolated log-log in precision.

    Build one with :meth:`read` (a CSV or ECSV file) or :meth:`from_table` (an astropy Table).

    Attributes
    ----------
    inputs : dict
        Input name -> its rows (internal record).
    source : str
        Where the table came from (a path, or ``"table"``).

    Examples
    --------
    >>> from astropy.table import Table
    >>> t = Table({"input": ["radial_velocity", "radial_velocity"], "precision": [1.0, 0.1], "hours": [1.0, 100.0]})
    >>> cost = TableCost.from_table(t)
    >>> round(cost.hours("radial_velocity", 0.3162278), 3)  # halfway in log: sqrt(1 x 100) hours
    10.0
    >>> cost.hours("radial_velocity", 0.05)
    inf
    """

    inputs: dict
    source: str = "table"

    def covers(self, input: str) -> bool:
        """True when the table has rows for this input."""
        return input_name(input) in self.inputs

    def needs_magnitude(self, input: str) -> bool:
        """True when the input's rows are given at a magnitude (the hours then depend on the star's)."""
        return self._rows(input).magnitude is not None

    def _rows(self, input: str) -> _Rows:
        name = input_name(input)
        if name not in self.inputs:
            raise InputError("cost model", name, f"the cost table has no rows for {name}; it prices "
                             f"{', '.join(self.inputs) or 'nothing'}")  # fmt: skip
        return self.inputs[name]

    def hours(self, input: str, precision: float, magnitude: float | None = None) -> float:
        """Hours [h] to measure ``input`` to ``precision`` (catalogue units) on a star of ``magnitude``.

        ``magnitude`` is needed only when the table gives magnitudes (:meth:`needs_magnitude`); ``inf`` for a
        precision better than the table's best for the input.
        """
        r = self._rows(input)
        if not (np.isfinite(precision) and precision > 0):
            raise InputError("cost", precision, "expected a precision > 0")
        if r.magnitude is not None and (magnitude is None or not math.isfinite(magnitude)):
            raise InputError("magnitude", magnitude, f"the cost table gives {input_name(input)} hours at a "
                             "magnitude: expected the star's finite magnitude")  # fmt: skip
        if precision < r.precision[0] * (1.0 - 1e-12):
            return math.inf
        if r.magnitude is None:
            log_h = np.asarray(r.log_hours, dtype=float)
        else:  # one value per distinct precision of the table (a handful), not per draw or star
            m = float(magnitude)
            log_h = np.array([_log_hours_at(mags, lh, m) for mags, lh in zip(r.magnitude, r.log_hours)])
        return math.exp(float(np.interp(math.log(precision), np.log(r.precision), log_h)))

    def to_dict(self) -> dict:
        """Plain dict for JSON: the rows as read, per input (sorted by precision, then magnitude)."""
        out = {}
        for name, r in self.inputs.items():
            rows = []
            for prec, mag, hours, _ in r.rows:
                row = {"precision": float(prec), "unit": str(PRECISION_UNITS[name])}
                if mag is not None:
                    row["magnitude"] = float(mag)
                row["hours"] = float(hours)
                rows.append(row)
            out[name] = rows
        return {
            "model": "table: at each precision, linear in log hours between the magnitudes given and beyond them "
            "photon-limited from the nearest, hours x 10^(0.4 (m - m_row)) (common practice, no source); then "
            "log-log interpolation in precision; better than the best row: not reachable",
            "source": self.source,
            "inputs": out,
        }

    @classmethod
    def read(cls, path: str | os.PathLike) -> TableCost:
        """Read a cost table from a CSV or ECSV file: columns ``input``, ``precision``, ``hours``[, ``magnitude``]."""
        from astropy.table import Table

        path = Path(path)
        suffix = path.suffix.lower()
        if suffix not in (".csv", ".ecsv"):
            raise InputError("cost table", str(path), "expected a file name ending in .csv or .ecsv")
        if not path.is_file():
            raise InputError("cost table", str(path), "file not found (or not a file)")
        try:
            head = path.read_text(encoding="utf-8")[:7]
            fmt = "ascii.ecsv" if suffix == ".ecsv" or head.startswith("# %ECSV") else "ascii.csv"
            table = Table.read(path, format=fmt)
        except (OSError, UnicodeDecodeError, ValueError, TypeError) as exc:
            text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise InputError("cost table", str(path), f"cannot be read as {fmt[6:].upper()} ({text[:200]})") from None
        return cls.from_table(table, source=str(path))

    @classmethod
    def from_table(cls, table, *, source: str = "table") -> TableCost:
        """Build from an astropy Table; a column with a unit is converted (precision per row to its input's unit).

        Raises
        ------
        InputError
            Naming the column, the row (0 is the first data row) and what was expected.
        """
        import astropy.units as u

        names = list(getattr(table, "colnames", []))
        missing = [c for c in TABLE_COLUMNS[:3] if c not in names]
        if missing:
            raise InputError(
                "cost table", source, f"has no column {', '.join(missing)}; expected columns input, precision, "
                f"hours and optionally magnitude (its columns: {', '.join(names)})"
            )  # fmt: skip
        if len(table) == 0:
            raise InputError("cost table", source, "has no rows; expected at least one row per input it prices")
        has_mag = "magnitude" in names
        grouped: dict = {}
        for k, row in enumerate(table):
            name = _cell_input(row["input"], k)
            prec = _cell_number(table, row, "precision", k, PRECISION_UNITS[name])
            hours = _cell_number(table, row, "hours", k, u.h)
            if not prec > 0:
                raise InputError("precision", prec, f"expected a precision > 0 in {PRECISION_UNITS[name]}", k)
            if not hours > 0:
                raise InputError("hours", hours, "expected hours > 0", k)
            mag = None
            if has_mag and not _masked(row["magnitude"]):
                mag = _cell_number(table, row, "magnitude", k, u.mag)
                lo, hi = MAGNITUDE_RANGE
                if not lo <= mag <= hi:
                    raise InputError("magnitude", mag, f"expected a magnitude in [{lo:g}, {hi:g}] mag", k)
            grouped.setdefault(name, []).append((prec, mag, hours, k))
        return cls({name: _group(name, rows) for name, rows in grouped.items()}, source)


def _group(name, rows) -> _Rows:
    """One input's rows -> :class:`_Rows`; refuses a magnitude on some rows only and a repeated grid point."""
    with_mag = [r[1] is not None for r in rows]
    if any(with_mag) and not all(with_mag):
        k = rows[with_mag.index(False)][3]
        raise InputError("magnitude", "empty", f"give a magnitude on every row of {name} or on none", k)
    has_mag = all(with_mag)
    rows = sorted(rows, key=lambda r: (r[0], r[1] if has_mag else 0.0, r[3]))
    for a, b in zip(rows, rows[1:]):
        if b[0] == a[0] and (not has_mag or b[1] == a[1]):
            where = f"this precision and magnitude ({b[1]:g} mag)" if has_mag else "this precision"
            expected = "one row per (precision, magnitude)" if has_mag else ("one row per precision (or a "
                                                                              "magnitude column for a grid)")
            raise InputError("precision", b[0], f"a second row of {name} at {where} (row {a[3]}); expected "
                             f"{expected}", b[3])  # fmt: skip
    precs = np.array(sorted({r[0] for r in rows}))
    if not has_mag:
        return _Rows(precs, tuple(math.log(r[2]) for r in rows), None, tuple(rows))
    mags, log_h = [], []
    for p in precs:  # one group per distinct precision of the table
        at = [r for r in rows if r[0] == p]
        mags.append(np.array([r[1] for r in at]))
        log_h.append(np.log([r[2] for r in at]))
    return _Rows(precs, tuple(log_h), tuple(mags), tuple(rows))


@dataclass(frozen=True)
class CallableCost:
    """A plain function ``cost(input, precision) -> hours`` as a cost model.

    It prices every input, and needs no magnitude. ``input`` is the canonical input name
    (``"radial_velocity"``), ``precision`` in the input's catalogue unit; the function returns hours >= 0
    (``inf`` for a precision that cannot be bought).
    """

    function: object

    def covers(self, input: str) -> bool:
        """True: the function is asked about every input."""
        return True

    def needs_magnitude(self, input: str) -> bool:
        """False: the function takes no magnitude."""
        return False

    def hours(self, input: str, precision: float, magnitude: float | None = None) -> float:
        """``function(input, precision)`` as a float, checked (hours >= 0 or inf); the magnitude is not used."""
        name = input_name(input)
        value = self.function(name, float(precision))
        try:
            hours = float(value)
        except (TypeError, ValueError):
            raise InputError("cost", value, f"expected a number of hours for {name} at {precision:g}") from None
        if math.isnan(hours) or hours < 0:
            raise InputError("cost", f"{value!r} h for {name} at {precision:g}",
                             "expected hours >= 0 (inf for a precision that cannot be bought)")  # fmt: skip
        return hours

    def to_dict(self) -> dict:
        """Plain dict for JSON."""
        f = self.function
        return {"model": "callable cost(input, precision) -> hours",
                "name": getattr(f, "__qualname__", getattr(f, "__name__", type(f).__name__))}  # fmt: skip


def as_cost_model(cost):
    """What a caller passes as ``cost`` -> a cost model (``covers``, ``hours``, ``needs_magnitude``, ``to_dict``).

    None stays None; an object with ``hours`` and ``covers`` (:class:`PhotonLimitedCost`, :class:`TableCost`)
    is used as it is; a plain callable ``cost(input, precision) -> hours`` is wrapped in :class:`CallableCost`.

    Raises
    ------
    InputError
        (field ``cost``) for anything else.
    """
    if cost is None or (hasattr(cost, "hours") and hasattr(cost, "covers")):
        return cost
    if callable(cost):
        return CallableCost(cost)
    raise InputError("cost", type(cost).__name__, "expected a cost model (PhotonLimitedCost, TableCost) or a "
                     "callable cost(input, precision) -> hours")  # fmt: skip


def _masked(value) -> bool:
    return value is None or np.ma.is_masked(value) or (isinstance(value, str) and not value.strip())


def _cell_input(value, k) -> str:
    if _masked(value):
        raise InputError("input", "empty", "expected an input name (parallax, radial_velocity, ...)", k)
    try:
        return input_name(str(value))
    except InputError as exc:
        raise InputError("input", exc.value, exc.expected, k) from None


def _cell_number(table, row, column, k, unit) -> float:
    """A finite number of ``column`` in ``unit`` (converted when the column has a unit)."""
    from ..units import to_number

    value = row[column]
    if _masked(value):
        raise InputError(column, "empty", f"expected a number in {unit}", k)
    col_unit = getattr(table[column], "unit", None)
    if col_unit is not None and not isinstance(value, str):
        import astropy.units as u

        value = u.Quantity(value, col_unit)
    return to_number(column, value, unit, row=k, text_needs_unit=False)
