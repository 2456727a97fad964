"""Rounding of a value and its uncertainty for print, and LaTeX intervals.

The rule is the Particle Data Group's (Review of Particle Physics, Phys. Rev. D 98, 030001 (2018),
Introduction, section 5.3): if the three highest-order digits of the uncertainty lie between 100 and 354, keep
two significant digits; between 355 and 949, one; between 950 and 999, round the uncertainty up to 1000 and keep
two. The value is given to the same decimal place as its uncertainty.

For an asymmetric interval (``value +plus -minus``) the narrower side decides the decimal place of all three
numbers, so that neither side loses a digit it has (common practice, no source). Numbers are rounded half away
from zero on their shortest decimal representation (``repr``), so that 0.125 rounds to 0.13 as written, not as
its binary approximation.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from decimal import ROUND_HALF_UP, Decimal, localcontext

from ..errors import InputError

__all__ = ["Rounded", "latex_interval", "pdg_place", "round_interval"]


def pdg_place(uncertainty: float) -> int:
    """Decimal exponent of the last digit kept for an uncertainty, by the Particle Data Group's rule.

    Parameters
    ----------
    uncertainty : float
        A finite uncertainty > 0.

    Returns
    -------
    int
        ``k`` such that the uncertainty (and its value) are rounded to a multiple of ``10**k``.

    Examples
    --------
    >>> pdg_place(0.119), pdg_place(0.367), pdg_place(0.0967)
    (-2, -1, -2)
    """
    u = _positive("uncertainty", uncertainty)
    exponent = math.floor(math.log10(u))
    leading = int(Decimal(repr(u)).scaleb(2 - exponent).to_integral_value(rounding="ROUND_FLOOR"))
    if leading >= 1000:  # log10 rounded down a power of ten (u = 10**k exactly, or just below)
        exponent, leading = exponent + 1, leading // 10
    elif leading < 100:
        exponent, leading = exponent - 1, leading * 10
    if leading <= 354:
        return exponent - 1  # two significant digits
    # 355-949: one significant digit; 950-999: the same place, where rounding gives 10**(exponent + 1), i.e.
    # "1000" with two significant digits (0.0967 -> 0.10)
    return exponent


@dataclass(frozen=True)
class Rounded:
    """A value with its interval, rounded for print; the strings keep trailing zeros.

    Attributes
    ----------
    value, minus, plus : str
        The value and the distances to the interval's ends (both >= 0), as printed.
    place : int
        Decimal exponent of the last digit kept.
    """

    value: str
    minus: str
    plus: str
    place: int

    @property
    def symmetric(self) -> bool:
        """Whether both sides print the same."""
        return self.minus == self.plus


def round_interval(value: float, minus: float, plus: float | None = None) -> Rounded:
    """Round ``value -minus +plus`` by the Particle Data Group's rule (see the module docstring).

    Parameters
    ----------
    value : float
        The central value (e.g. a median).
    minus, plus : float
        Distances from the value to the lower and upper ends of the interval, > 0; ``plus`` defaults to
        ``minus`` (a symmetric uncertainty).

    Returns
    -------
    Rounded

    Examples
    --------
    >>> r = round_interval(0.827, 0.119)
    >>> r.value, r.plus
    ('0.83', '0.12')
    """
    v = _number("value", value)
    if not math.isfinite(v):
        raise InputError("value", value, "expected a finite number")
    lo = _positive("minus", minus)
    hi = lo if plus is None else _positive("plus", plus)
    place = pdg_place(min(lo, hi))
    return Rounded(_fixed(v, place), _fixed(lo, place), _fixed(hi, place), place)


def latex_interval(value: float, minus: float, plus: float | None = None) -> str:
    r"""LaTeX of a rounded interval: ``$1.29^{+0.04}_{-0.05}$``, or ``$12.21 \pm 0.07$`` when both sides agree.

    Examples
    --------
    >>> print(latex_interval(1.2912, 0.0463, 0.0391))
    $1.29^{+0.04}_{-0.05}$
    >>> print(latex_interval(12.2135, 0.06515))
    $12.21 \pm 0.07$
    """
    r = round_interval(value, minus, plus)
    if r.symmetric:
        return f"${r.value} \\pm {r.plus}$"
    return f"${r.value}^{{+{r.plus}}}_{{-{r.minus}}}$"


def _fixed(x: float, place: int) -> str:
    """``x`` rounded half away from zero to a multiple of ``10**place``, as a plain decimal string."""
    exact = Decimal(repr(float(x)))
    # enough digits for the quantized result whatever the ratio of value to error (the default context's 28 digits
    # overflow past ~1e28, e.g. a value of 1 with an error of 1e-300)
    digits = max(28, exact.adjusted() - place + 3)
    with localcontext() as ctx:
        ctx.prec = digits
        d = exact.quantize(Decimal(1).scaleb(place), rounding=ROUND_HALF_UP)
    text = f"{d:f}"
    return text.lstrip("-") if d == 0 else text  # no "-0.00"


def _number(name: str, x) -> float:
    try:
        return float(x)
    except (TypeError, ValueError):
        raise InputError(name, x, "expected a number") from None


def _positive(name: str, x) -> float:
    u = _number(name, x)
    if not (math.isfinite(u) and u > 0):
        raise InputError(name, x, "expected a finite uncertainty > 0")
    return u
