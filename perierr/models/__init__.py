"""Forward models from the six observables to perihelion time, distance and speed.

:mod:`.orbit` (Galactic orbits) and :mod:`.focusing` are loaded on first use
(``perierr.models.orbit`` works without importing it first).
"""

from .._lazy import lazy_names
from ..errors import InputError
from .base import ForwardModel, Perihelion
from .diagnostics import FocusingDiagnostics, ModelDiagnostics
from .straight import StraightLine

__all__ = [
    "DEFAULT_MODEL", "FocusingDiagnostics", "ForwardModel", "ModelDiagnostics", "Perihelion", "StraightLine",
    "MODEL_NAMES", "make_model",
]  # fmt: skip

#: Names accepted by :func:`make_model` (and the CLI's ``--model``).
MODEL_NAMES = ("straight_line", "orbit")

#: The model every face uses unless told otherwise (``analyze``, ``plan``, the CLI's ``--model``): the
#: Galactic orbit. The straight line is one option away; catalogue screening uses it.
DEFAULT_MODEL = "orbit"


def make_model(name: str = DEFAULT_MODEL, **options) -> ForwardModel:
    """Build a forward model by name.

    Parameters
    ----------
    name : str
        One of :data:`MODEL_NAMES`: "orbit" (the default; options of
        :class:`perierr.models.orbit.OrbitModel`, e.g.
        ``potential="MWPotential2014"``, ``sun="bovy2015"``, ``horizon_myr=20``)
        or "straight_line" (no options).
    **options
        Passed to the model's constructor, except ``star_mass_msun`` and
        ``star_mass_error_msun``: if ``star_mass_msun`` is given the model is
        wrapped in :class:`perierr.models.focusing.Focused` (gravitational
        focusing by the star's mass, with either model). Mass draws take the
        generator given to ``evaluate_draws`` (models hold no random state).
    """
    focus = {k: options.pop(k) for k in ("star_mass_msun", "star_mass_error_msun")
             if k in options}
    if name == "straight_line":
        if options:
            key = sorted(options)[0]
            raise InputError(
                key, options[key], f"model 'straight_line' has no option {key!r}; accepted: star_mass_msun, "
                "star_mass_error_msun"
            )
        model = StraightLine()
    elif name == "orbit":
        from .orbit import ORBIT_OPTIONS, OrbitModel

        unknown = sorted(set(options) - set(ORBIT_OPTIONS))
        if unknown:
            raise InputError(
                unknown[0], options[unknown[0]], f"model 'orbit' has no option {unknown[0]!r}; "
                f"accepted: {', '.join(ORBIT_OPTIONS)}, star_mass_msun, star_mass_error_msun"
            )
        model = OrbitModel(**options)
    else:
        raise InputError("model", name, f"unknown model; expected one of {', '.join(MODEL_NAMES)}")
    if "star_mass_msun" in focus:
        from .focusing import Focused

        model = Focused(
            model,
            mass_msun=focus["star_mass_msun"],
            mass_error_msun=focus.get("star_mass_error_msun", 0.0),
        )
    elif focus:
        key = sorted(focus)[0]
        raise InputError(key, focus[key], "needs star_mass_msun (the star's mass in M_sun), which was not given")
    return model


# submodules with heavier imports (scipy), loaded when asked for
__getattr__, __dir__ = lazy_names(__name__, globals(), {}, ("orbit", "focusing"))
