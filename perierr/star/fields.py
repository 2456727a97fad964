"""Names of the catalogue fields a star is read from (the large astrometric catalogues' column names)."""

from __future__ import annotations

from ..units import OBSERVABLES

__all__ = ["ASTROMETRIC", "CORRELATIONS", "ERRORS", "KNOWN_FIELDS", "META", "OPTIONAL_ERRORS", "split_correlation"]

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


def split_correlation(name: str) -> tuple:
    """``"ra_pmdec_corr"`` -> ``("ra", "pmdec")``."""
    body = name[: -len("_corr")]
    for a in ASTROMETRIC:
        if body.startswith(a + "_") and body[len(a) + 1 :] in ASTROMETRIC:
            return a, body[len(a) + 1 :]
    raise KeyError(name)
