"""Distance thresholds for 'does it pass within D?' probabilities."""

from __future__ import annotations

import astropy.units as u

from .errors import InputError
from .units import OUTPUT_UNITS, to_number

__all__ = ["DEFAULT_THRESHOLDS", "parse_thresholds"]

#: Default thresholds: 0.5, 1 and 2 pc; 20,000 and 100,000 au.
DEFAULT_THRESHOLDS = ("0.5 pc", "1 pc", "2 pc", "20000 au", "100000 au")


def parse_thresholds(values) -> list:
    """Turn thresholds into ``(label, distance_pc)`` pairs.

    Parameters
    ----------
    values : sequence of str, Quantity or float
        ``"20000 au"``, ``"0.5pc"``, ``2 * u.pc``; a bare number is in pc.
    """
    out = []
    for item in values:
        if isinstance(item, str):
            item = item.strip()
        pc = to_number("threshold", item, OUTPUT_UNITS["distance_pc"], example="0.5 pc")
        if not pc > 0:
            raise InputError("threshold", item, "expected a positive distance")
        if isinstance(item, str):
            label = item
        elif isinstance(item, u.Quantity):
            label = f"{item.value:g} {item.unit}"
        else:
            label = f"{float(item):g} pc"
        out.append((label, pc))
    return out
