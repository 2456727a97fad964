"""The observed star: six observables at a reference epoch with their covariance, read and checked.

Input follows the column conventions of the large astrometric catalogues:
``ra``, ``dec`` [deg]; ``parallax`` [mas]; ``pmra`` (mu_alpha* = mu_alpha cos
dec) and ``pmdec`` [mas/yr]; ``radial_velocity`` [km/s]; the errors
``ra_error`` (of alpha*, in mas), ``dec_error`` [mas], ``parallax_error``,
``pmra_error``, ``pmdec_error``, ``radial_velocity_error``; the ten astrometric
correlation coefficients ``ra_dec_corr`` ... ``pmra_pmdec_corr`` (missing = 0).
The radial velocity is independent of the astrometry. Bare numbers are read in
these units; astropy Quantities (or strings such as ``"12.3 mas"``) are
converted.

Internally the covariance is over (ra [deg], dec [deg], parallax [mas],
pmra [mas/yr], pmdec [mas/yr], radial_velocity [km/s]); the ra variance is that
of alpha itself, ``(ra_error / cos dec)^2`` converted to deg^2.

Modules: :mod:`.fields` (the catalogue field names), :mod:`.observed` (the
:class:`ObservedStar` record), :mod:`.reading` (mappings, TOML files, table
rows), :mod:`.checks` (plausibility, unit slips, and the refusals the
propagation methods share).
"""

from .checks import require_motion, require_positive_parallax, require_uncertainty
from .fields import KNOWN_FIELDS
from .observed import ObservedStar
from .reading import MASKED, read_catalogue, read_star_file

__all__ = [
    "KNOWN_FIELDS",
    "MASKED",
    "ObservedStar",
    "read_catalogue",
    "read_star_file",
    "require_motion",
    "require_positive_parallax",
    "require_uncertainty",
]
