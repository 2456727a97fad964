"""An invented catalogue for the demo, the tests and the benchmarks: the fictional Kestrel wide-field survey.

Every star here is invented: positions uniform on the sky, parallaxes of a
thin-disc-like population, Gaussian space velocities, catalogue-like errors and
astrometric correlations, and a few stars sent close to the Sun so that a screen
finds something. Bad rows of each kind a real catalogue has can be mixed in
(:data:`BAD_KINDS`), each on rows chosen by the seed; their expected status is
returned with the table.

Most rows also carry an invented mass and G magnitude (with the flux-over-error ratio the large catalogue's
archive gives instead of a magnitude error), for the encounter's effects; a few rows have none (masked
cells) or the sentinel G = 99 of a failed photometric solution, and ``bad_mass`` plants impossible masses.
None of these change a row's screen status: catalogue runs read them for the encounter only. They come
from a random stream of their own (``[seed, 7]``), so the astrometry is the same with or without them.
"""

from __future__ import annotations

import numpy as np

from ..star.fields import ASTROMETRIC, CORRELATIONS, split_correlation
from ..units import KMS_PER_MASYR_AT_1MAS, MAS_PC

__all__ = ["BAD_KINDS", "SENTINEL_MAGNITUDE", "invented_catalogue", "invented_correlations", "invented_encounter"]

#: The G magnitude a catalogue writes where its photometry failed (an impossible value, not a missing cell).
SENTINEL_MAGNITUDE = 99.0
#: Fractions of invented rows without a mass (masked), without a G magnitude (masked), with the sentinel G.
NO_MASS, NO_MAGNITUDE, SENTINEL_FRACTION = 0.1, 0.03, 0.01

#: Kind of bad row -> the status the screen gives it (see :mod:`perierr.catalogue.screening`).
BAD_KINDS = {
    "no_radial_velocity": "no_radial_velocity",
    "missing_parallax": "missing_value",
    "negative_parallax": "nonpositive_parallax",
    "declination_out_of_range": "out_of_range",
    "negative_error": "out_of_range",
    "correlation_above_one": "out_of_range",
    "inconsistent_correlations": "not_positive_semidefinite",
    "no_motion": "not_finite",
}


def invented_catalogue(n: int, *, seed: int = 0, bad: int = 0, no_rv: float = 0.0, close: float = 0.002,
                       bad_mass: int = 0):  # fmt: skip
    """A table of invented stars with archive-style column names (catalogue units).

    Parameters
    ----------
    n : int
        Rows.
    seed : int
        Seed of the numpy Generator: the same seed gives the same table.
    bad : int
        Rows of each kind of :data:`BAD_KINDS` except ``no_radial_velocity`` (on distinct rows).
    no_rv : float
        Fraction of rows without a radial velocity (empty cells, as in the large catalogues).
    close : float
        Fraction of stars sent towards the Sun (perihelion within a few pc).
    bad_mass : int
        Rows with an impossible mass (0 or the sentinel -1), chosen by the seed among the rows with a mass.
        Catalogue runs keep such rows without impulses; the single-star readers refuse such a mass.

    Returns
    -------
    table : astropy.table.Table
        Columns ``source_id``, ``name``, the six observables and their errors, the ten correlations, and
        (:func:`invented_encounter`) ``mass``, ``mass_error``, ``phot_g_mean_mag``,
        ``phot_g_mean_flux_over_error`` (masked where missing).
    expected : ndarray of str
        The screen status each row should get (``"ok"`` for good rows).
    """
    from astropy.table import Table

    rng = np.random.default_rng(seed)
    ra = rng.uniform(0.0, 360.0, n)
    dec = np.degrees(np.arcsin(rng.uniform(-1.0, 1.0, n)))
    dist = 1000.0 / rng.uniform(2.0, 40.0, n) * rng.uniform(0.3, 1.0, n) ** (1 / 3)  # pc, 25 .. 500
    plx = 1000.0 / dist
    v = rng.normal(0.0, 35.0, (n, 3)) + np.array([-11.0, -12.0, -7.0])  # km/s, in the frame of the sky below
    vr, vt_a, vt_d = v[:, 0], v[:, 1], v[:, 2]
    near = rng.uniform(size=n) < close  # straight at the Sun: tiny transverse motion, approaching
    vr = np.where(near, -np.abs(rng.normal(30.0, 10.0, n)), vr)
    vt_a = np.where(near, rng.normal(0.0, 0.3, n), vt_a)
    vt_d = np.where(near, rng.normal(0.0, 0.3, n), vt_d)
    pmra = vt_a * plx / KMS_PER_MASYR_AT_1MAS
    pmdec = vt_d * plx / KMS_PER_MASYR_AT_1MAS
    cols = {
        "source_id": 4_100_000_000_000 + 37 * np.arange(n, dtype=np.int64),
        "name": np.array([f"KW-{i:07d} (invented)" for i in range(n)]),
        "ra": ra,
        "ra_error": rng.uniform(0.01, 0.2, n),
        "dec": dec,
        "dec_error": rng.uniform(0.01, 0.2, n),
        "parallax": plx + rng.normal(0.0, 0.05, n),
        "parallax_error": rng.uniform(0.02, 0.3, n),
        "pmra": pmra,
        "pmra_error": rng.uniform(0.02, 0.3, n),
        "pmdec": pmdec,
        "pmdec_error": rng.uniform(0.02, 0.3, n),
        "radial_velocity": vr,
        "radial_velocity_error": rng.uniform(0.3, 5.0, n),
    }
    cols.update(invented_correlations(rng, n))
    expected = np.full(n, "ok", dtype=object)
    missing_rv = rng.uniform(size=n) < no_rv
    cols["radial_velocity"] = np.where(missing_rv, np.nan, cols["radial_velocity"])
    cols["radial_velocity_error"] = np.where(missing_rv, np.nan, cols["radial_velocity_error"])
    expected[missing_rv] = "no_radial_velocity"
    kinds = [k for k in BAD_KINDS if k != "no_radial_velocity"]
    if bad:
        free = np.flatnonzero(~missing_rv)
        picks = rng.choice(free, size=min(bad * len(kinds), free.size), replace=False)
        for kind, rows in zip(kinds, np.array_split(picks, len(kinds))):
            _spoil(cols, kind, rows)
            expected[rows] = BAD_KINDS[kind]
    cols.update(invented_encounter(np.random.default_rng([seed, 7]), plx, bad_mass=bad_mass))
    return Table(cols, masked=False), expected.astype(str)


def invented_encounter(rng, parallax_mas, *, bad_mass: int = 0) -> dict:
    """Invented masses and G magnitudes of stars at the given true parallaxes (masked arrays, catalogue units).

    Masses are log-uniform in 0.1-2 M_sun with 5-20 % errors; the absolute G magnitude follows an invented
    main-sequence-like trend ``4.7 - 8.5 log10(M)`` with 0.3 mag of scatter, made apparent by the distance
    modulus; the flux-over-error ratio falls with G as photon noise does (``5000`` at G = 12, times
    ``10**(-0.2 (G - 12))``, within 5 .. 2e5). Invented numbers, not a calibration of any survey.

    Parameters
    ----------
    rng : numpy.random.Generator
    parallax_mas : ndarray
        True parallaxes [mas] (> 0).
    bad_mass : int
        Rows given an impossible mass (0, or the sentinel -1).

    Returns
    -------
    dict
        ``mass``, ``mass_error`` [M_sun], ``phot_g_mean_mag`` [mag], ``phot_g_mean_flux_over_error``.
    """
    plx = np.asarray(parallax_mas, dtype=float)
    n = plx.size
    mass = 10 ** rng.uniform(-1.0, np.log10(2.0), n)
    mass_error = mass * rng.uniform(0.05, 0.2, n)
    g = 4.7 - 8.5 * np.log10(mass) + 5.0 * np.log10(MAS_PC / plx / 10.0) + rng.normal(0.0, 0.3, n)
    ratio = np.clip(5000.0 * 10 ** (-0.2 * (g - 12.0)), 5.0, 2e5)
    no_mass = rng.uniform(size=n) < NO_MASS
    no_g = rng.uniform(size=n) < NO_MAGNITUDE
    sentinel = ~no_g & (rng.uniform(size=n) < SENTINEL_FRACTION)
    g = np.where(sentinel, SENTINEL_MAGNITUDE, g)
    if bad_mass:
        free = np.flatnonzero(~no_mass)
        picks = rng.choice(free, size=min(int(bad_mass), free.size), replace=False)
        mass[picks] = np.where(np.arange(picks.size) % 2 == 0, -1.0, 0.0)
    return {
        "mass": np.ma.MaskedArray(mass, mask=no_mass),
        "mass_error": np.ma.MaskedArray(mass_error, mask=no_mass),
        "phot_g_mean_mag": np.ma.MaskedArray(g, mask=no_g),
        "phot_g_mean_flux_over_error": np.ma.MaskedArray(ratio, mask=no_g | sentinel),
    }


def invented_correlations(rng, n: int) -> dict:
    """The ten astrometric correlations of ``n`` invented rows, each row's 5x5 matrix positive definite.

    Each row's matrix is the normalized ``I + B B^T / 5`` with ``B ~ N(0, 0.5)`` (5x5): coefficients of a few
    tenths, as catalogue solutions have.
    """
    b = rng.normal(0.0, 0.5, (n, 5, 5))
    m = np.eye(5) + b @ np.swapaxes(b, 1, 2) / 5.0
    s = np.sqrt(np.diagonal(m, axis1=1, axis2=2))
    corr = m / (s[:, :, None] * s[:, None, :])
    out = {}
    for name in CORRELATIONS:
        a, c = split_correlation(name)
        out[name] = corr[:, ASTROMETRIC.index(a), ASTROMETRIC.index(c)]
    return out


def _spoil(cols: dict, kind: str, rows) -> None:
    """Make ``rows`` bad in the way ``kind`` says (one fault per row)."""
    if kind == "missing_parallax":
        cols["parallax"][rows] = np.nan
    elif kind == "negative_parallax":
        cols["parallax"][rows] = -np.abs(cols["parallax"][rows]) - 0.1
    elif kind == "declination_out_of_range":
        cols["dec"][rows] = 95.0
    elif kind == "negative_error":
        cols["pmra_error"][rows] = -0.1
    elif kind == "correlation_above_one":
        cols["parallax_pmra_corr"][rows] = 1.5
    elif kind == "inconsistent_correlations":
        cols["parallax_pmra_corr"][rows] = 0.95
        cols["parallax_pmdec_corr"][rows] = 0.95
        cols["pmra_pmdec_corr"][rows] = -0.95
    elif kind == "no_motion":
        for key in ("pmra", "pmdec", "radial_velocity"):
            cols[key][rows] = 0.0
