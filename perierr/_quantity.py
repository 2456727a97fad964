"""One way to read a number from the user: a float, an astropy Quantity or a string with a unit."""

from __future__ import annotations

import math

import astropy.units as u
import numpy as np

from .errors import InputError

__all__ = ["to_number"]


def to_number(field: str, value, unit, *, row=None, text_needs_unit: bool = True, example: str | None = None) -> float:
    """Convert ``value`` to a finite float in ``unit``.

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

    Raises
    ------
    InputError
        For booleans, unparsable text, wrong dimensions and non-finite values.
    """
    where = f" in {unit}" if unit is not None else ""
    hint = f" or a quantity such as {example!r}" if example else ""
    if isinstance(value, (bool, np.bool_)):
        raise InputError(field, value, f"expected a number{where}, not a boolean", row)
    given = str(value) if isinstance(value, np.str_) else value
    try:
        if isinstance(value, str):
            q = u.Quantity(value.strip())
            if q.unit == u.dimensionless_unscaled:
                if text_needs_unit and unit is not None:
                    raise InputError(
                        field, given, f"expected a value with its unit, e.g. {example or f'1 {unit}'!r}", row
                    )
                value = float(q.value)
            else:
                value = q
        if isinstance(value, u.Quantity):
            value = value.to_value(u.dimensionless_unscaled if unit is None else unit)
        out = float(value)
    except u.UnitsError:
        expected = (
            "expected a plain number (this field has no unit)"
            if unit is None
            else f"expected a quantity convertible to {unit} (a number in {unit}{hint})"
        )
        raise InputError(field, given if isinstance(given, str) else str(given), expected, row) from None
    except (TypeError, ValueError) as exc:
        if isinstance(exc, InputError):
            raise
        raise InputError(field, given, f"expected a number{where}{hint}", row) from None
    if not math.isfinite(out):
        raise InputError(field, out, "expected a finite number", row)
    return out
