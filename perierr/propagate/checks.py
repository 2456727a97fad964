"""Checks shared by the propagation methods."""

from ..errors import InputError


def require_positive_parallax(parallax: float, *, method: str) -> None:
    """Refuse to invert a non-positive nominal parallax, and say what to do instead."""
    if not parallax > 0:
        raise InputError(
            "parallax",
            float(parallax),
            f"{method} inverts the parallax, which is meaningless for a parallax <= 0 "
            "(the star is not measured to be at any finite distance); "
            "use a distance prior instead (distance_prior=..., CLI --distance-prior)",
        )
