"""Orbit model: perihelion from integrating the Sun and the star in a Galactic potential.

Modules: :mod:`.potentials` (all components: :mod:`.potential_base`,
:mod:`.spheres`, :mod:`.disk`), :mod:`.presets` (named potentials),
:mod:`.sun` (solar parameter sets and the Galactocentric frame),
:mod:`.integrate` (direct integration and perihelion search),
:mod:`.transition` (second-order state-transition map), :mod:`.model`
(:class:`OrbitModel`).
"""

from .model import ORBIT_OPTIONS, OrbitModel, OrbitOptionError
from .potentials import NFW, CompositePotential, Hernquist, MiyamotoNagai, Plummer, Potential, PowerLawCutoff
from .presets import POTENTIAL_PRESETS, get_potential
from .sun import SOLAR_PARAMETER_SETS, SolarParameters, get_solar_parameters

__all__ = [
    "OrbitModel",
    "OrbitOptionError",
    "ORBIT_OPTIONS",
    "Potential",
    "CompositePotential",
    "MiyamotoNagai",
    "PowerLawCutoff",
    "NFW",
    "Plummer",
    "Hernquist",
    "POTENTIAL_PRESETS",
    "get_potential",
    "SOLAR_PARAMETER_SETS",
    "SolarParameters",
    "get_solar_parameters",
]
