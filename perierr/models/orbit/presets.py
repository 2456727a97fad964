"""Named, frozen Milky Way potential presets with their references.

A preset is built once from its published shape parameters; the amplitude of
each component is fixed by the fraction of the radial force it contributes at
the normalisation radius, where the total circular speed is ``v_c``.

References
----------
Bovy, J. 2015, ApJS 216, 29, Sect. 3.5 and Table 1 (MWPotential2014).
"""

from __future__ import annotations

from dataclasses import dataclass

from .potentials import NFW, MiyamotoNagai, Potential, PotentialParameterError, PowerLawCutoff

__all__ = ["PotentialPreset", "POTENTIAL_PRESETS", "get_potential", "normalize_by_force_fraction"]


def normalize_by_force_fraction(components, fractions, radius_pc, v_circ_kms) -> Potential:
    """Scale components so they give ``fractions`` of the radial force at ``radius_pc``.

    Parameters
    ----------
    components : sequence of Potential
        Shapes; their amplitudes are overwritten.
    fractions : sequence of float
        Fraction of ``v_circ_kms^2 / radius_pc`` each component supplies at
        (R, z) = (radius_pc, 0); they should sum to 1.
    radius_pc : float
        Normalisation radius [pc].
    v_circ_kms : float
        Circular speed there [km/s].

    Returns
    -------
    Potential
        The sum of the scaled components.
    """
    if len(components) != len(fractions) or not components:
        raise PotentialParameterError(
            "fractions", fractions, f"expected as many fractions as components ({len(components)}), at least one "
            "(normalize_by_force_fraction)"
        )
    total = None
    for comp, frac in zip(components, fractions, strict=True):
        vc2 = float(comp.circular_speed(radius_pc)) ** 2
        part = comp.scaled(frac * v_circ_kms**2 / vc2)
        total = part if total is None else total + part
    return total


@dataclass(frozen=True)
class PotentialPreset:
    """A named potential with the references of its parameters.

    Attributes
    ----------
    name : str
    potential : Potential
    normalization : dict
        Radius [pc] and circular speed [km/s] of the normalisation.
    references : dict
        Parameter name -> reference.
    """

    name: str
    potential: Potential
    normalization: dict
    references: dict

    def describe(self) -> dict:
        """Name, normalisation, references and component parameters."""
        return {
            "name": self.name,
            "normalization": dict(self.normalization),
            "references": dict(self.references),
            "components": self.potential.describe()["components"],
        }


def _mwpotential2014() -> PotentialPreset:
    # Bovy 2015, ApJS 216, 29, Table 1: R0 = 8 kpc, v_c(R0) = 220 km/s;
    # bulge alpha = 1.8, r_c = 1.9 kpc; disk a = 3 kpc, b = 0.28 kpc; NFW a = 16 kpc;
    # radial-force fractions at R0: bulge 0.05, disk 0.60, halo 0.35.
    r0_pc, vc_kms = 8000.0, 220.0
    shapes = (
        PowerLawCutoff(mass_msun=1.0, alpha=1.8, rc_pc=1900.0),
        MiyamotoNagai(mass_msun=1.0, a_pc=3000.0, b_pc=280.0),
        NFW(mass_msun=1.0, a_pc=16000.0),
    )
    pot = normalize_by_force_fraction(shapes, (0.05, 0.60, 0.35), r0_pc, vc_kms)
    ref = "Bovy 2015, ApJS 216, 29, Table 1"
    return PotentialPreset(
        name="MWPotential2014",
        potential=pot,
        normalization={"radius_pc": r0_pc, "v_circ_kms": vc_kms},
        references={
            "R0, v_c": ref,
            "bulge alpha, r_c, force fraction 0.05": ref,
            "disk a, b, force fraction 0.60": ref,
            "halo scale radius, force fraction 0.35": ref,
        },
    )


#: Builders of the named presets (built on request, so nothing is global state).
POTENTIAL_PRESETS = {"MWPotential2014": _mwpotential2014}


def get_potential(name: str = "MWPotential2014") -> PotentialPreset:
    """Return the named preset (one of :data:`POTENTIAL_PRESETS`)."""
    if name not in POTENTIAL_PRESETS:
        raise PotentialParameterError(
            "potential", name,
            f"not a known preset; expected one of {', '.join(POTENTIAL_PRESETS)} or a Potential object",
        )
    return POTENTIAL_PRESETS[name]()
