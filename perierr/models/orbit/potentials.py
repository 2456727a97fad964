"""Galactic potential components, composable by addition (one import for all).

The base class and the sum live in :mod:`.potential_base`, the spheres in
:mod:`.spheres` and the disk in :mod:`.disk`.

Every component is a frozen dataclass evaluated on positions of shape
``(..., 3)`` in pc (Galactocentric Cartesian, z towards the north Galactic
pole). Potentials are in (km/s)^2, accelerations in (km/s)^2 / pc, Hessians in
(km/s)^2 / pc^2 and third derivatives in (km/s)^2 / pc^3. Masses are in solar
masses, with G taken from astropy. The orbit integrator needs the
acceleration; the Jacobian's variational equations need the Hessian and the
third derivatives (all analytic here).

References
----------
Binney, J. & Tremaine, S. 2008, Galactic Dynamics, 2nd ed., Sect. 2.2 (Plummer,
Hernquist, NFW spheres) and 2.3 (Miyamoto-Nagai disk).
Miyamoto, M. & Nagai, R. 1975, PASJ 27, 533.
Navarro, J. F., Frenk, C. S. & White, S. D. M. 1997, ApJ 490, 493.
Hernquist, L. 1990, ApJ 356, 359.  Plummer, H. C. 1911, MNRAS 71, 460.
Bovy, J. 2015, ApJS 216, 29, Sect. 3.5 (power-law bulge with Gaussian cut-off).
"""


from .disk import MiyamotoNagai
from .potential_base import (
    G_PC_KMS2_PER_MSUN,
    CompositePotential,
    Potential,
    PotentialParameterError,
)
from .spheres import NFW, Hernquist, Plummer, PowerLawCutoff

__all__ = [
    "G_PC_KMS2_PER_MSUN",
    "Potential",
    "CompositePotential",
    "MiyamotoNagai",
    "PowerLawCutoff",
    "NFW",
    "Plummer",
    "Hernquist",
    "PotentialParameterError",
]
