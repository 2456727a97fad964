"""Unit constants used on the internal float arrays.

Internal units (documented in DEVELOPERS.md): positions in deg, parallax in mas,
proper motions in mas/yr, radial velocity in km/s, distances in pc, velocities in
km/s, times in Myr. Every constant below is derived from astropy's IAU values at
import time, so it never drifts from the reference library.
"""

import astropy.constants as _const
import astropy.units as _u

#: km/s corresponding to 1 mas/yr of proper motion at a parallax of 1 mas
#: (equivalently 1 arcsec/yr at 1 pc): one au per Julian year in km/s.
#: IAU 2012 au (exact) and the Julian year; the Hipparcos catalogue's
#: 4.740470446 used an older au and differs by 4e-9 relatively.
KMS_PER_MASYR_AT_1MAS = float((1.0 * _const.au / _u.yr).to_value(_u.km / _u.s))

#: Myr taken to travel 1 pc at 1 km/s.
MYR_PER_PC_PER_KMS = float((1.0 * _u.pc / (_u.km / _u.s)).to_value(_u.Myr))

#: pc per kpc, and mas in 1 arcsec. Parallax in mas -> distance in pc is 1000 / plx.
PC_PER_MAS_INVERSE = 1000.0

#: au in one pc.
AU_PER_PC = float(_u.pc.to(_u.au))

#: mas in one degree.
MAS_PER_DEG = 3.6e6

#: Order of the six observables along the last axis of every array.
OBSERVABLES = ("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity")

#: Internal unit of each observable (same order).
OBSERVABLE_UNITS = ("deg", "deg", "mas", "mas/yr", "mas/yr", "km/s")

#: Names of the three perihelion outputs, in the order used by Jacobians.
OUTPUTS = ("time_myr", "distance_pc", "speed_kms")
