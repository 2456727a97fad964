"""Orbit model: perihelion from integrating the Sun and the star in a Galactic potential.

Modules: :mod:`.potentials` (all components: :mod:`.potential_base`,
:mod:`.spheres`, :mod:`.disk`), :mod:`.presets` (named potentials),
:mod:`.sun` (solar parameter sets and the Galactocentric frame),
:mod:`.grid` (window and grid), :mod:`.integrate` (DOP853 integration and
the perihelion search on quintic Hermite interpolants), :mod:`.draws`
(fixed-step RK4 of many draws, the Sun's orbit shared), :mod:`.leaves`
(leaves of the draw cloud and their polynomial maps), :mod:`.mapping` (the
map's steps, check and fallback), :mod:`.transition` (variational equations,
for the Jacobian), :mod:`.model` (:class:`OrbitModel`).
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
