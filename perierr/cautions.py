"""Cautions that depend only on the star and its linearization, shared by every command.

Each check is a small function returning its message, or None. ``analyze``
and the planner call the same ones, so ``perierr plan`` warns exactly where
``perierr run`` does.
"""

from __future__ import annotations

from .models.straight import HEAD_ON_RELATIVE
from .units import MAS_PC, PARALLAX

__all__ = ["BIASED_PARALLAX_FRACTION", "biased_parallax", "distance_within_sigma", "head_on", "linear_cautions"]

#: Fractional parallax error above which 1/parallax is a biased distance
#: (Bailer-Jones 2015, PASP 127, 994, Sect. 4).
BIASED_PARALLAX_FRACTION = 0.2


def biased_parallax(star) -> str | None:
    """A fractional parallax error above :data:`BIASED_PARALLAX_FRACTION` (without a distance prior)."""
    frac = star.fractional_parallax_error
    if frac > BIASED_PARALLAX_FRACTION:
        return (
            f"the fractional parallax error is {frac:.0%} (> {BIASED_PARALLAX_FRACTION:.0%}): "
            "1/parallax is a biased distance and the intervals assume an implicit prior; "
            "use a distance prior (--distance-prior)"
        )
    return None


def head_on(star, linear) -> str | None:
    """The nominal path passes through the Sun, where d_ph has no derivative."""
    if linear.value[1] <= HEAD_ON_RELATIVE * MAS_PC / star.mean[PARALLAX]:
        return (
            "the nominal path passes through the Sun (d_ph = 0), where d_ph is not differentiable: "
            "its linearized sigma and linear budget are undefined (shown as zero); use the Monte Carlo quantiles"
        )
    return None


def distance_within_sigma(star, linear) -> str | None:
    """d_ph below twice its linear sigma: a linearized distance error means nothing there."""
    d_nom, d_sig = linear.value[1], linear.sigma[1]
    if d_sig > 0 and d_nom < 2.0 * d_sig:
        why = (
            "the distance is poorly known"
            if star.fractional_parallax_error > BIASED_PARALLAX_FRACTION
            else "the star heads almost straight at the Sun"
        )
        return (
            f"d_ph ({d_nom:.3g} pc) is comparable to its linear sigma ({d_sig:.3g} pc): {why} and a "
            "linearized distance error is meaningless; use the Monte Carlo quantiles"
        )
    return None


def linear_cautions(star, linear) -> list:
    """Every caution above that applies (no distance prior), in the order reports print them."""
    found = [biased_parallax(star), head_on(star, linear), distance_within_sigma(star, linear)]
    return [message for message in found if message is not None]
