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


def require_motion(mean) -> None:
    """Refuse a star with no measured motion relative to the Sun (no perihelion exists)."""
    if mean[3] == 0 and mean[4] == 0 and mean[5] == 0:
        raise InputError(
            "radial_velocity",
            float(mean[5]),
            "with pmra = pmdec = 0 as well the star does not move relative to the Sun, so it has no "
            "perihelion; check the input (a zero proper motion or radial velocity is usually a missing value)",
        )


def require_uncertainty(sigma) -> None:
    """Refuse to plan for a star whose every input is held exact (there is nothing to re-observe)."""
    if not any(s > 0 for s in sigma):
        raise InputError(
            "errors",
            "all zero",
            "every input is held exact, so there is no error to budget or reduce; give the catalogue errors",
        )
