"""Forward models from the six observables to perihelion time, distance and speed."""

from .base import ForwardModel, Perihelion
from .straight import StraightLine

__all__ = ["ForwardModel", "Perihelion", "StraightLine", "MODEL_NAMES", "make_model"]

#: Names accepted by :func:`make_model` (and the CLI's ``--model``).
MODEL_NAMES = ("straight_line",)


def make_model(name: str = "straight_line", **options) -> ForwardModel:
    """Build a forward model by name.

    Parameters
    ----------
    name : str
        One of :data:`MODEL_NAMES`.
    **options
        Passed to the model's constructor.
    """
    if name == "straight_line":
        return StraightLine(**options)
    raise ValueError(f"unknown model {name!r}; expected one of {', '.join(MODEL_NAMES)}")
