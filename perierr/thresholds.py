"""Distance thresholds for 'does it pass within D?' probabilities."""

from __future__ import annotations

import astropy.units as u

from .errors import InputError

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
        try:
            if isinstance(item, str):
                q = u.Quantity(item.strip())
                if q.unit == u.dimensionless_unscaled:
                    raise InputError("threshold", item, "expected a length with its unit, e.g. '0.5 pc' or '20000 au'")
            elif isinstance(item, u.Quantity):
                q = item
            else:
                q = float(item) * u.pc
            pc = float(q.to_value(u.pc))
        except (u.UnitsError, TypeError, ValueError) as exc:
            if isinstance(exc, InputError):
                raise
            raise InputError("threshold", item, "expected a length such as '0.5 pc' or '20000 au'") from None
        if not pc > 0:
            raise InputError("threshold", item, "expected a positive distance")
        label = item.strip() if isinstance(item, str) else f"{q.value:g} {q.unit}"
        out.append((label, pc))
    return out
