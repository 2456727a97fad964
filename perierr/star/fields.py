"""Names of the catalogue fields a star is read from (the large astrometric catalogues' column names)."""

from __future__ import annotations

from ..units import OBSERVABLES

__all__ = [
    "ASTROMETRIC", "CORRELATIONS", "ERRORS", "GAIA_MAGNITUDE", "GENERIC_MAGNITUDE", "INPUT_FIELDS", "KNOWN_FIELDS",
    "MAGNITUDE_RANGE", "META", "OPTIONAL_ERRORS", "PHOTOMETRY", "split_correlation",
]  # fmt: skip

#: The error column of each observable, in the order of OBSERVABLES.
ERRORS = tuple(f"{name}_error" for name in OBSERVABLES)
#: The five astrometric observables (the radial velocity is measured independently).
ASTROMETRIC = OBSERVABLES[:5]
#: The ten astrometric correlation coefficients, ``ra_dec_corr`` ... ``pmra_pmdec_corr``.
CORRELATIONS = tuple(f"{a}_{b}_corr" for i, a in enumerate(ASTROMETRIC) for b in ASTROMETRIC[i + 1 :])
#: Sub-mas position errors: held exact when absent.
OPTIONAL_ERRORS = ("ra_error", "dec_error")
#: Fields that are not measurements.
META = ("name", "source_id", "ref_epoch", "mass", "mass_error")
KNOWN_FIELDS = OBSERVABLES + ERRORS + CORRELATIONS + META

#: The large catalogue's G-band magnitude [mag] (band "G") and an optional error of it.
GAIA_MAGNITUDE = ("phot_g_mean_mag", "phot_g_mean_mag_error")
#: A magnitude in any band: value and error [mag], and the band's name (e.g. "V").
GENERIC_MAGNITUDE = ("mag", "mag_error", "mag_band")
#: Photometry a star may carry for the cost of new measurements (one form or the other, not both).
#: Kept out of KNOWN_FIELDS, which the catalogue reader maps and converts with :data:`perierr.units.FIELD_UNITS`
#: (magnitudes have no entry there): star files and table rows read them, catalogue runs do not.
PHOTOMETRY = GAIA_MAGNITUDE + GENERIC_MAGNITUDE
#: Every field a star file or table row may hold.
INPUT_FIELDS = KNOWN_FIELDS + PHOTOMETRY
#: Accepted magnitudes [mag]: from brighter than any star but the Sun to fainter than deep surveys reach.
MAGNITUDE_RANGE = (-5.0, 30.0)


def split_correlation(name: str) -> tuple:
    """``"ra_pmdec_corr"`` -> ``("ra", "pmdec")``."""
    body = name[: -len("_corr")]
    for a in ASTROMETRIC:
        if body.startswith(a + "_") and body[len(a) + 1 :] in ASTROMETRIC:
            return a, body[len(a) + 1 :]
    raise KeyError(name)
