"""The Sun's Galactocentric phase-space point, as named frozen parameter sets.

The Galactocentric frame is astropy's (right-handed, Sun near x = -R0, z
towards the north Galactic pole, the Galactic centre at the ICRS position of
Sgr A*, zero roll), with the Sun at cylindrical radius ``r0_pc`` and height
``z_pc`` (so its distance from the centre is ``sqrt(r0^2 + z^2)``) and velocity
``(U, v_circ + V, W)`` on the frame's axes.

References
----------
Astropy Collaboration 2022, ApJ 935, 167 (the Galactocentric frame).
Reid, M. J. & Brunthaler, A. 2004, ApJ 616, 872 (Sgr A* position).
"""

from __future__ import annotations

import dataclasses
import math
import numbers
from dataclasses import dataclass, field

import astropy.coordinates as _coord
import astropy.units as _u
import numpy as np

from ...errors import InputError

__all__ = ["SolarParameters", "SOLAR_PARAMETER_SETS", "get_solar_parameters", "SolarParameterError"]


class SolarParameterError(InputError):
    """A solar parameter or parameter-set name is invalid (an :class:`~perierr.errors.InputError`)."""


@dataclass(frozen=True)
class SolarParameters:
    """The Sun's position and velocity in the Galaxy.

    Attributes
    ----------
    name : str
        Name of the set (recorded in outputs).
    r0_pc : float
        Cylindrical Galactocentric radius of the Sun [pc].
    z_pc : float
        Height of the Sun above the Galactic mid-plane [pc].
    v_circ_kms : float
        Azimuthal speed of the local standard of rest [km/s]; only
        ``v_circ_kms + v_kms`` enters the orbit.
    u_kms, v_kms, w_kms : float
        Solar motion with respect to the LSR [km/s] (U towards the Galactic
        centre, V in the direction of rotation, W towards the north pole).
    references : dict
        Parameter name -> reference.
    """

    name: str
    r0_pc: float
    z_pc: float
    v_circ_kms: float
    u_kms: float
    v_kms: float
    w_kms: float
    references: dict = field(default_factory=dict, compare=False)

    def __post_init__(self):
        for key in ("r0_pc", "z_pc", "v_circ_kms", "u_kms", "v_kms", "w_kms"):
            value = getattr(self, key)
            if isinstance(value, bool | np.bool_) or not isinstance(value, numbers.Real) or not math.isfinite(value):
                raise SolarParameterError(key, value, "expected a finite number (a solar parameter)")
            object.__setattr__(self, key, float(value))
        if self.r0_pc <= 0:
            raise SolarParameterError("r0_pc", self.r0_pc, "expected a positive distance in pc (a solar parameter)")

    def replace(self, **changes) -> SolarParameters:
        """Copy with some values overridden (the name gets a ``+modified`` suffix)."""
        unknown = set(changes) - {f.name for f in dataclasses.fields(self)}
        if unknown:
            raise SolarParameterError(
                "solar parameter", sorted(unknown),
                "unknown; expected some of r0_pc, z_pc, v_circ_kms, u_kms, v_kms, w_kms",
            )
        changes.setdefault("name", self.name + "+modified")
        return dataclasses.replace(self, **changes)

    def as_dict(self) -> dict:
        """Values and references, for outputs."""
        return dataclasses.asdict(self)

    def frame(self):
        """Rotation and solar state of the Galactocentric frame.

        Returns
        -------
        rotation : ndarray, shape (3, 3)
            ``x_gc - x_sun = rotation @ x_icrs`` for heliocentric ICRS-axes
            vectors (positions [pc] or velocities [km/s]).
        sun_state : ndarray, shape (6,)
            The Sun's Galactocentric position [pc] and velocity [km/s].
        """
        frame = _coord.Galactocentric(
            galcen_distance=math.hypot(self.r0_pc, self.z_pc) * _u.pc,
            z_sun=self.z_pc * _u.pc,
            galcen_v_sun=_coord.CartesianDifferential(
                [self.u_kms, self.v_circ_kms + self.v_kms, self.w_kms] * (_u.km / _u.s)
            ),
            roll=0.0 * _u.deg,
            galcen_coord=_coord.ICRS(ra=266.4051 * _u.deg, dec=-28.936175 * _u.deg),
        )
        # the origin and three points 1 kpc along the ICRS axes; the map is affine
        pts = np.array([[0.0, 0.0, 0.0], [1e3, 0, 0], [0, 1e3, 0], [0, 0, 1e3]]).T
        icrs = _coord.ICRS(
            _coord.CartesianRepresentation(pts * _u.pc).with_differentials(
                _coord.CartesianDifferential(np.zeros((3, 4)) * (_u.km / _u.s))
            )
        )
        gc = icrs.transform_to(frame).cartesian
        xyz = gc.xyz.to_value(_u.pc)
        vel = gc.differentials["s"].d_xyz.to_value(_u.km / _u.s)
        rotation = (xyz[:, 1:] - xyz[:, :1]) / 1e3
        return rotation, np.concatenate([xyz[:, 0], vel[:, 0]])


def _bovy2015() -> SolarParameters:
    return SolarParameters(
        name="bovy2015",
        r0_pc=8000.0,  # Bovy 2015, ApJS 216, 29 (MWPotential2014 normalisation)
        z_pc=20.8,  # Bennett & Bovy 2019, MNRAS 482, 1417
        v_circ_kms=220.0,  # Bovy 2015, ApJS 216, 29
        u_kms=11.1,  # Schoenrich, Binney & Dehnen 2010, MNRAS 403, 1829
        v_kms=12.24,  # Schoenrich, Binney & Dehnen 2010
        w_kms=7.25,  # Schoenrich, Binney & Dehnen 2010
        references={
            "r0_pc": "Bovy 2015, ApJS 216, 29",
            "z_pc": "Bennett & Bovy 2019, MNRAS 482, 1417",
            "v_circ_kms": "Bovy 2015, ApJS 216, 29",
            "u_kms, v_kms, w_kms": "Schoenrich, Binney & Dehnen 2010, MNRAS 403, 1829",
        },
    )


def _astropy_v4() -> SolarParameters:
    # astropy's Galactocentric defaults ("v4.0", also "latest" in astropy 8):
    # galcen_distance 8.122 kpc (GRAVITY Collaboration 2018, A&A 615, L15),
    # galcen_v_sun (12.9, 245.6, 7.78) km/s (Drimmel & Poggio 2018, RNAAS 2, 210),
    # z_sun 20.8 pc (Bennett & Bovy 2019). astropy gives the Sun's total velocity,
    # so the azimuthal part is stored as v_circ with zero peculiar V.
    return SolarParameters(
        name="astropy_v4",
        r0_pc=math.sqrt(8122.0**2 - 20.8**2),
        z_pc=20.8,
        v_circ_kms=245.6,
        u_kms=12.9,
        v_kms=0.0,
        w_kms=7.78,
        references={
            "r0_pc": "GRAVITY Collaboration 2018, A&A 615, L15 (distance 8.122 kpc)",
            "z_pc": "Bennett & Bovy 2019, MNRAS 482, 1417",
            "v_circ_kms, u_kms, w_kms": "Drimmel & Poggio 2018, RNAAS 2, 210 (total solar velocity)",
        },
    )


#: Builders of the named solar parameter sets.
SOLAR_PARAMETER_SETS = {"bovy2015": _bovy2015, "astropy_v4": _astropy_v4}


def get_solar_parameters(name: str = "bovy2015") -> SolarParameters:
    """Return the named solar parameter set (one of :data:`SOLAR_PARAMETER_SETS`)."""
    if name not in SOLAR_PARAMETER_SETS:
        raise SolarParameterError(
            "sun", name, f"not a known solar parameter set; expected one of {', '.join(SOLAR_PARAMETER_SETS)} "
            "or a SolarParameters object"
        )
    return SOLAR_PARAMETER_SETS[name]()
