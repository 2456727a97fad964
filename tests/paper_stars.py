"""An invented star for the paper faces' tests (tables, the page): the demo star's path, rounder numbers."""

from perierr import ObservedStar


def invented(name, **over):
    """The invented star named ``name``, with any field replaced (``over``)."""
    fields = dict(
        name=name, ra=201.37, dec=-27.62, parallax=48.0, parallax_error=0.03, pmra=0.71, pmra_error=0.035,
        pmdec=-1.2, pmdec_error=0.03, radial_velocity=-31.2, radial_velocity_error=0.6,
    )  # fmt: skip
    fields.update(over)
    return ObservedStar.from_values(**fields)
