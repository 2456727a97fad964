"""How budget shares read in the text reports: one formatter, one set of input labels."""

from __future__ import annotations

import math

__all__ = ["INPUT_LABELS", "format_share", "input_label"]

#: Short labels of budget inputs whose names are long.
INPUT_LABELS = {"parallax_zero_point": "parallax zero-pt", "mass": "star mass"}


def input_label(name: str) -> str:
    """Label of a budget input in a table."""
    return INPUT_LABELS.get(name, name)


def format_share(value: float, *, decimals: int = 1, percent: bool = True, bounded: bool = False) -> str:
    """A share as text, never as ``-0.0 %`` (nor above 100 % when ``bounded``).

    Parameters
    ----------
    value : float
        The share as a fraction.
    decimals : int
        Decimals shown (of the percentage, or of the fraction when ``percent`` is False).
    percent : bool
        Show as a percentage (``"36.2%"``) or as a fraction (``"0.362"``).
    bounded : bool
        The exact share lies in [0, 1] (a Shapley effect of the variance): clip
        rounding excursions outside it. Covariance contributions and Monte Carlo
        estimates are not bounded and keep their sign.
    """
    if not math.isfinite(value):
        return "undefined"
    x = min(max(value, 0.0), 1.0) if bounded else value
    scaled = round(x * (100 if percent else 1), decimals)
    scaled = scaled + 0.0 if scaled != 0 else 0.0  # no negative zero
    return f"{scaled:.{decimals}f}%" if percent else f"{scaled:.{decimals}f}"
