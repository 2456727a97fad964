"""Stage 1 of a catalogue run, vectorized over rows: status, straight-line perihelion, linear sigmas, the cut.

:func:`screen_chunk` gives every row of a :class:`~perierr.catalogue.chunk.Chunk` a status
(:data:`STATUSES`) and, for the rows that can be computed, the nominal perihelion of the
straight-line model (:mod:`perierr.models.straight`) with its linear sigmas and P(d_ph < D)
for each threshold. It answers exactly what the single-star path answers for the same row,
``linearize(ObservedStar.from_mapping(row, strict=False), StraightLine())``, but with
numpy arrays over the rows instead of one Python object per row.

Which status a row gets
-----------------------
The checks run in the order the single-star path makes them, and a row takes the status of
the FIRST check it fails (the first error the single-star path would raise):

0. a line in which every cell is unreadable (a malformed CSV line, a repeated header) is
   ``unreadable_value`` with field ``row`` (the single-star path names its first field);
1. each of ``ra, dec, parallax, pmra, pmdec, radial_velocity`` and then each error
   (``ra_error`` ... ``radial_velocity_error``), field by field: text that is not a number
   (``unreadable_value``); empty (``no_radial_velocity`` for the radial velocity and its
   error, ``missing_value`` otherwise; an empty ``ra_error`` or ``dec_error`` is 0, held exact);
   infinite (``out_of_range``);
2. each error, in order: negative, or above :data:`perierr.star.checks.LARGEST_ERROR`;
3. ``dec`` outside [-90, 90] deg;
4. ``ra`` outside [0, 360) deg; a parallax of magnitude below 1e-12 mas (``nonpositive_parallax``
   if negative); a parallax above 1e5 mas; unless the parallax is within 5 sigma of zero, a total
   speed in (0, 1e-12) km/s or at least the speed of light;
5. each correlation column present, in order: unreadable text, an empty cell (``missing_value``:
   an absent column means 0, an empty cell in a present column is refused), infinite, outside [-1, 1];
6. ``ra_error > 0`` at a celestial pole (``out_of_range``, field ``dec``);
7. the correlation matrix not positive semi-definite (``not_positive_semidefinite``);
8. ``ref_epoch`` (unreadable, infinite), where the column exists (a bad ``mass`` or ``mass_error`` never refuses
   a row: the single-star path reads a table row without it, with a caution, as stage 2 does);
9. a covariance entry beyond the float range (``out_of_range``, field ``cov``);
10. ``parallax <= 0`` (``nonpositive_parallax``: a distance prior is needed);
11. no motion at all (``pmra = pmdec = radial_velocity = 0``) and then a perihelion or a sigma
    that is not a finite number (``not_finite``).

The reason of a row reads like perierr's :class:`~perierr.errors.InputError` messages:
``"parallax = -0.31: a parallax <= 0 cannot be inverted into a distance; ..."`` (the field,
the value, what was expected); it is ``""`` for the rows that are ``ok``.

The single-star path also checks the covariance in internal units for positive
semi-definiteness; that matrix is the correlation matrix scaled by the (non-negative)
errors, so its verdict is the one of step 7 up to rounding (about 1e-15 on an eigenvalue
compared with the tolerance 1e-10); this module does not repeat it.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from types import MappingProxyType

import astropy.units as u
import numpy as np

from ..cautions import is_head_on
from ..errors import InputError
from ..frames import cartesian_jacobian, observables_to_cartesian
from ..models.straight import StraightLine, perihelion_cartesian_jacobian
from ..star.checks import _PARALLAX_MAX_MAS, _SLOWEST_KMS, _SMALLEST_PARALLAX_MAS, LARGEST_ERROR
from ..star.fields import ASTROMETRIC, CORRELATIONS, ERRORS, OPTIONAL_ERRORS, split_correlation
from ..thresholds import DEFAULT_THRESHOLDS, parse_thresholds
from ..units import (
    AU_PER_PC,
    DEC,
    FIELD_UNITS,
    INDEX,
    KMS_PER_MASYR_AT_1MAS,
    MAS_PC,
    OBSERVABLES,
    OUTPUT_UNITS,
    PARALLAX,
    PMDEC,
    PMRA,
    POLE_COS,
    RA,
    RADIAL_VELOCITY,
    SPEED_OF_LIGHT_KMS,
    errors_to_internal,
)
from .chunk import Chunk

__all__ = [
    "BLOCK_ROWS",
    "Comparison",
    "Cut",
    "DEFAULT_CUT",
    "PSD_TOLERANCE",
    "STATUSES",
    "parse_cut",
    "passes",
    "p_within",
    "screen_chunk",
    "screen_columns",
    "threshold_columns",
    "threshold_label",
]

#: The status of a row after stage 1 (stable strings) -> what it means.
STATUSES = MappingProxyType(
    {
        "ok": "computed: nominal straight-line perihelion, linear sigmas and P(d_ph < D)",
        "no_radial_velocity": "radial_velocity or radial_velocity_error is empty: no perihelion without one",
        "missing_value": "another required value is empty (or a cell of a present correlation column)",
        "unreadable_value": "a cell holds text that is not a number",
        "out_of_range": "a value outside what it can be (a declination beyond +-90 deg, a negative or "
        "overflowing error, a correlation beyond +-1, an ra error at a pole, faster than light ...)",
        "nonpositive_parallax": "parallax <= 0: 1/parallax is no distance; the row needs a distance prior",
        "not_positive_semidefinite": "the correlation coefficients are mutually inconsistent (matrix not PSD)",
        "not_finite": "the perihelion or its linear sigma is not a finite number (e.g. the star does not move)",
    }
)
# the single-star path's bounds (star.checks), named here so that the two paths never drift apart
PARALLAX_MAX_MAS, SLOWEST_KMS, SMALLEST_PARALLAX_MAS = _PARALLAX_MAX_MAS, _SLOWEST_KMS, _SMALLEST_PARALLAX_MAS

_STATUS_NAMES = np.array(tuple(STATUSES), dtype=object)
OK, NO_RV, MISSING, UNREADABLE, OUT_OF_RANGE, NONPOSITIVE, NOT_PSD, NOT_FINITE = range(len(STATUSES))

#: Rows handled at once inside :func:`screen_chunk`: the (n, 6, 6) temporaries stay near 5 MB each and the
#: (n,) ones in the processor's cache (measured 30 % faster than blocks of 65,536 rows).
BLOCK_ROWS = 16_384

#: A correlation matrix whose smallest eigenvalue is below minus this is refused: the rule of
#: :func:`perierr.star.observed.check_psd` (matrices with unit diagonal).
PSD_TOLERANCE = 1e-10
#: Shift of the diagonal for the fast LDL^T test: its success proves the smallest eigenvalue is above
#: -_LDL_SHIFT (minus rounding, ~1e-15), well inside the tolerance; the rows it refuses get eigvalsh.
_LDL_SHIFT = 0.5 * PSD_TOLERANCE

#: Everything with status ``ok`` passes (see :func:`passes`).
DEFAULT_CUT = None

_MASKED_TEXT = "empty"
_UNREADABLE_TEXT = "unreadable text"
_NUMBER_FORMAT = "%.15g"  # 15 digits: every decimal a user typed with up to 15 digits comes back as typed

#: Numeric output columns (besides the thresholds' ``p_within_*``) -> their unit.
_NUMERIC_UNITS = MappingProxyType(
    {
        "time_myr": OUTPUT_UNITS["time_myr"],
        "time_sigma_myr": OUTPUT_UNITS["time_myr"],
        "distance_pc": OUTPUT_UNITS["distance_pc"],
        "distance_sigma_pc": OUTPUT_UNITS["distance_pc"],
        "distance_au": u.au,
        "distance_sigma_au": u.au,
        "speed_kms": OUTPUT_UNITS["speed_kms"],
        "speed_sigma_kms": OUTPUT_UNITS["speed_kms"],
        "parallax_fraction": u.dimensionless_unscaled,
    }
)

# ------------------------------------------------------------------------------------------- thresholds


def threshold_label(threshold) -> str:
    """The tag of a threshold in column names: ``"20000 au"`` -> ``"20000au"``, ``"0.5 pc"`` -> ``"0p5pc"``.

    The number (up to 12 significant digits, ``.`` written ``p``, exponents as ``e6`` / ``em6``),
    then the unit: ``au`` for the astronomical unit, otherwise the unit's symbol with anything
    that is not a letter or a digit dropped (``pc``, ``kpc``, ``lyr``). A bare number is in pc.

    Parameters
    ----------
    threshold : str, Quantity or float
        As :func:`perierr.thresholds.parse_thresholds` reads it.

    Examples
    --------
    >>> [threshold_label(t) for t in ("20000 au", "1 pc", "0.5pc", 2, "1e6 au")]
    ['20000au', '1pc', '0p5pc', '2pc', '1000000au']
    """
    ((label, _),) = parse_thresholds([threshold])
    q = u.Quantity(label)
    number = f"{q.value:.12g}".replace(".", "p").replace("-", "m")
    number = re.sub(r"e\+?(m?)0*(\d)", r"e\1\2", number)
    unit = "au" if q.unit == u.au else re.sub(r"[^A-Za-z0-9]", "", q.unit.to_string())
    return number + unit


def threshold_columns(thresholds=DEFAULT_THRESHOLDS) -> list:
    """``(column, distance_pc)`` of each threshold: ``("p_within_20000au", 0.0969...)``, in the order given.

    Raises
    ------
    InputError
        A threshold that is not a positive distance, or two thresholds with the same column name.
    """
    out, seen = [], {}
    for item, (_, pc) in zip(thresholds, parse_thresholds(thresholds)):
        column = f"p_within_{threshold_label(item)}"
        if column in seen:
            raise InputError(
                "threshold", item, f"gives the column {column!r} a second time (as {seen[column]!r}); give each once"
            )
        seen[column] = item
        out.append((column, pc))
    return out


def screen_columns(thresholds=DEFAULT_THRESHOLDS) -> dict:
    """Stage-1 column names -> unit (``""`` for numbers without a unit, None for text), in output order.

    Examples
    --------
    >>> cols = screen_columns(["1 pc"])
    >>> cols["distance_au"], cols["speed_sigma_kms"], cols["p_within_1pc"], cols["status"]
    ('AU', 'km / s', '', None)
    """
    cols = {"row": "", "status": None, "reason": None}
    for name, unit in _NUMERIC_UNITS.items():
        cols[name] = unit.to_string()
    for column, _ in threshold_columns(thresholds):
        cols[column] = ""
    cols["head_on"] = ""
    return cols


def p_within(distance_pc, sigma_pc, threshold_pc) -> np.ndarray:
    """Linear-Gaussian P(d_ph < D): the folded normal.

    The perihelion distance is the length of the separation vector at closest approach, so it
    is read as ``|X|`` with ``X ~ N(d, s)`` (``d`` the nominal distance, ``s`` its linear sigma),
    never negative::

        P(|X| < D) = Phi((D - d) / s) - Phi((-D - d) / s)

    (the CDF of the folded normal distribution, Leone, Nelson & Nottingham 1961, Technometrics 3,
    543). A Gaussian in d alone would give probability to d < 0. For ``s = 0`` it is the step
    ``1 if d < D else 0``; NaN in, NaN out.

    Parameters
    ----------
    distance_pc, sigma_pc : array_like
        Nominal perihelion distance and its linear sigma [pc].
    threshold_pc : float
        D [pc], > 0.

    Returns
    -------
    ndarray
        The probability, broadcast over the inputs.

    Examples
    --------
    >>> p_within([0.0, 1.0, 1.0], [1.0, 0.0, 0.0], 1.0).round(6).tolist()
    [0.682689, 0.0, 0.0]
    """
    from scipy.special import ndtr

    d = np.asarray(distance_pc, dtype=float)
    s = np.asarray(sigma_pc, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        p = ndtr((threshold_pc - d) / s) - ndtr((-threshold_pc - d) / s)
    step = np.where(d < threshold_pc, 1.0, 0.0)
    return np.where(np.isnan(d) | np.isnan(s), np.nan, np.where(s > 0, p, step))


# ------------------------------------------------------------------------------------------- the screen


def screen_chunk(chunk: Chunk, *, thresholds=DEFAULT_THRESHOLDS, block_rows: int = BLOCK_ROWS) -> dict:
    """Stage 1 for every row of a block: status, reason, straight-line perihelion, linear sigmas, P(d_ph < D).

    Parameters
    ----------
    chunk : Chunk
        Rows in catalogue units (NaN = empty; ``chunk.unreadable`` marks text that is not a number).
    thresholds : sequence of str, Quantity or float
        Distances D of the ``p_within_<label>`` columns (:func:`threshold_label`).
    block_rows : int
        Rows computed at once (memory: a few hundred bytes per row of temporaries).

    Returns
    -------
    dict of str to ndarray
        :func:`screen_columns`, each of length ``len(chunk)`` in input order: ``row`` (int64),
        ``status`` and ``reason`` (object arrays of str; :data:`STATUSES`), the float columns
        (NaN where the status is not ``ok``) and ``head_on`` (bool: the nominal path passes
        through the Sun, :func:`perierr.cautions.is_head_on`; its linear distance sigma is then 0, as
        the single-star path shows it, so its P(d_ph < D) is the step: 1).
        Numbers equal ``linearize(star, StraightLine())`` of the single-star path to rounding.

    Examples
    --------
    >>> import numpy as np
    >>> from perierr.catalogue.chunk import Chunk
    >>> values = dict(ra=[10.0, 20.0], dec=[-5.0, 30.0], parallax=[50.0, -0.3], parallax_error=[0.05, 0.4],
    ...               pmra=[1.0, 3.0], pmra_error=[0.05, 0.1], pmdec=[2.0, 1.0], pmdec_error=[0.05, 0.1],
    ...               radial_velocity=[-30.0, 12.0], radial_velocity_error=[0.5, 1.0])
    >>> out = screen_chunk(Chunk(np.arange(2), {k: np.array(v) for k, v in values.items()}), thresholds=["1 pc"])
    >>> out["status"].tolist(), round(float(out["distance_pc"][0]), 5), float(out["p_within_1pc"][0])
    (['ok', 'nonpositive_parallax'], 0.14133, 1.0)
    >>> print(out["reason"][1])
    parallax = -0.3: a parallax <= 0 cannot be inverted into a distance; a distance prior is needed (--distance-prior)
    """
    if not (isinstance(block_rows, (int, np.integer)) and block_rows > 0):
        raise InputError("block_rows", block_rows, "expected a positive integer")
    levels = threshold_columns(thresholds)
    n = len(chunk)
    out = {"row": np.array(chunk.rows, dtype=np.int64).reshape(n)}
    out["status"] = np.full(n, "", dtype=object)
    out["reason"] = np.full(n, "", dtype=object)
    for name in _NUMERIC_UNITS:
        out[name] = np.full(n, np.nan)
    for column, _ in levels:
        out[column] = np.full(n, np.nan)
    out["head_on"] = np.zeros(n, dtype=bool)
    for start in range(0, n, int(block_rows)):
        _screen_block(chunk, slice(start, min(n, start + int(block_rows))), levels, out)
    return out


class _Verdict:
    """Status codes and reasons of a block's rows: each row keeps the first fault found."""

    def __init__(self, n):
        self.code = np.full(n, OK, dtype=np.int8)
        self.decided = np.zeros(n, dtype=bool)
        self.reason = np.full(n, "", dtype=object)

    def open(self) -> np.ndarray:
        return ~self.decided

    def fail(self, mask, code, field, shown, expected, *, fmt=_NUMBER_FORMAT) -> None:
        """Rows of ``mask`` not yet decided get ``code`` and the reason ``field = shown: expected``.

        ``field``, ``shown`` and ``expected`` are each a str or an array over the block (floats are
        formatted with ``fmt``); the text is built only for the rows that fail here.
        """
        mask = np.asarray(mask, dtype=bool)
        if not mask.any():  # the common case: nothing fails here
            return
        new = mask & ~self.decided
        if not new.any():
            return
        self.decided |= new
        self.code[new] = code if np.ndim(code) == 0 else np.asarray(code)[new]
        pieces = []
        for piece in (field, " = ", shown, ": ", expected):
            if isinstance(piece, str):
                pieces.append(piece)
                continue
            picked = np.asarray(piece)[new]
            pieces.append(np.char.mod(fmt, picked) if picked.dtype.kind == "f" else picked.astype(str))
        if all(isinstance(p, str) for p in pieces):
            self.reason[new] = "".join(pieces)
            return
        text = pieces[0]
        for piece in pieces[1:]:
            text = np.char.add(text, piece)
        self.reason[new] = np.asarray(text).astype(object)


def _field(chunk: Chunk, name: str, sl: slice, n: int):
    """(values as float64 or None, unreadable flags or None) of one field over the block."""
    value = chunk.values.get(name)
    text = chunk.unreadable.get(name)
    if text is not None:
        text = np.asarray(text[sl], dtype=bool)
    if value is None:
        return (None if text is None else np.full(n, np.nan)), text
    return np.asarray(value[sl], dtype=np.float64), text


def _missing_status(name: str) -> int:
    return NO_RV if name in ("radial_velocity", "radial_velocity_error") else MISSING


def _missing_expected(name: str, absent: bool) -> str:
    where = "the column is absent; " if absent else ""
    if name in ("radial_velocity", "radial_velocity_error"):
        return f"{where}expected a value in {FIELD_UNITS[name]} (no perihelion without a radial velocity and its error)"
    return f"{where}missing; expected a value in {FIELD_UNITS[name]}"


def _read_measurements(chunk, sl, n, verdict):
    """Step 1-3: the six observables and their errors, field by field; (obs, err) with 0 where not usable."""
    obs, err = np.zeros((n, 6)), np.zeros((n, 6))
    for name in OBSERVABLES + ERRORS:
        target, k = (obs, INDEX[name]) if name in INDEX else (err, ERRORS.index(name))
        value, text = _field(chunk, name, sl, n)
        if value is None:
            if name not in OPTIONAL_ERRORS:
                verdict.fail(np.ones(n, bool), _missing_status(name), name, _MASKED_TEXT, _missing_expected(name, True))
            continue
        if text is not None:
            verdict.fail(text, UNREADABLE, name, _UNREADABLE_TEXT, f"expected a number in {FIELD_UNITS[name]}")
        empty = np.isnan(value)
        if name not in OPTIONAL_ERRORS:  # an empty ra_error or dec_error is 0: held exact
            verdict.fail(empty, _missing_status(name), name, _MASKED_TEXT, _missing_expected(name, False))
        verdict.fail(np.isinf(value), OUT_OF_RANGE, name, value, f"expected a finite number in {FIELD_UNITS[name]}")
        target[:, k] = np.where(empty, 0.0, value)
    for k, name in enumerate(ERRORS):
        e = err[:, k]
        verdict.fail(e < 0, OUT_OF_RANGE, name, e, "expected an error >= 0 (0 means held exact)")
        verdict.fail(
            e > LARGEST_ERROR, OUT_OF_RANGE, name, e,
            f"expected an error below {LARGEST_ERROR:g} (its square must be a number); check the unit",
        )  # fmt: skip
    dec = obs[:, DEC]
    verdict.fail(~((dec >= -90.0) & (dec <= 90.0)), OUT_OF_RANGE, "dec", dec, "expected a declination in [-90, 90] deg")
    return obs, err


def _plausibility(obs, err, verdict) -> None:
    """Step 4: the refusals of :func:`perierr.star.checks.plausibility`, in its order."""
    ra, plx, rv = obs[:, RA], obs[:, PARALLAX], obs[:, RADIAL_VELOCITY]
    verdict.fail(
        ~((ra >= 0.0) & (ra < 360.0)), OUT_OF_RANGE, "ra", ra,
        "expected a right ascension in [0, 360) deg (perierr does not wrap it)",
    )  # fmt: skip
    tiny = (np.abs(plx) > 0) & (np.abs(plx) < SMALLEST_PARALLAX_MAS)
    verdict.fail(
        tiny, np.where(plx < 0, NONPOSITIVE, OUT_OF_RANGE), "parallax", plx,
        f"a parallax of magnitude below {SMALLEST_PARALLAX_MAS:g} mas (beyond 10^15 pc) is below any "
        "measurement; give 0 with its error and a distance prior",
    )  # fmt: skip
    verdict.fail(
        plx > PARALLAX_MAX_MAS, OUT_OF_RANGE, "parallax", plx,
        f"expected a parallax below {PARALLAX_MAX_MAS:g} mas (a star closer than "
        f"{MAS_PC / PARALLAX_MAX_MAS * AU_PER_PC:,.0f} au is not a passing star); check the unit",
    )  # fmt: skip
    positive = plx > 0
    vt = np.where(
        positive, KMS_PER_MASYR_AT_1MAS * np.hypot(obs[:, PMRA], obs[:, PMDEC]) / np.where(positive, plx, 1.0), 0
    )
    speed = np.hypot(vt, rv)
    eplx = err[:, PARALLAX]
    judged = ~((eplx > 0) & (plx < 5 * eplx))  # a parallax within noise says nothing about the speed
    verdict.fail(
        judged & (speed > 0) & (speed < SLOWEST_KMS), OUT_OF_RANGE, "radial_velocity", rv,
        f"the star moves at less than {SLOWEST_KMS:g} km/s: it has no perihelion within any meaningful time; "
        "give exact zeros for motions that were not measured",
    )  # fmt: skip
    rv_fast = np.abs(rv) >= SPEED_OF_LIGHT_KMS
    pm_dec = np.abs(obs[:, PMDEC]) > np.abs(obs[:, PMRA])  # the larger proper motion is named
    field = np.where(rv_fast, "radial_velocity", np.where(pm_dec, "pmdec", "pmra"))
    value = np.where(rv_fast, rv, np.where(pm_dec, obs[:, PMDEC], obs[:, PMRA]))
    verdict.fail(
        judged & (speed >= SPEED_OF_LIGHT_KMS), OUT_OF_RANGE, field, value,
        f"the star would move faster than light ({SPEED_OF_LIGHT_KMS:,.0f} km/s); check the units",
    )  # fmt: skip
    # within noise: faster than light even at the largest plausible parallax (parallax + 5 sigma) is impossible
    largest = plx + 5 * eplx
    at_largest = np.hypot(
        KMS_PER_MASYR_AT_1MAS * np.hypot(obs[:, PMRA], obs[:, PMDEC]) / np.where(largest > 0, largest, 1.0), rv
    )
    verdict.fail(
        ~judged & (largest > 0) & (at_largest >= SPEED_OF_LIGHT_KMS), OUT_OF_RANGE, field, value,
        f"the star would move faster than light ({SPEED_OF_LIGHT_KMS:,.0f} km/s) even at parallax + 5 sigma; "
        "check the units",
    )  # fmt: skip


def _read_correlations(chunk, sl, n, verdict) -> dict:
    """Step 5: the correlation columns present -> their values (0 where not usable)."""
    corrs = {}
    for name in CORRELATIONS:
        value, text = _field(chunk, name, sl, n)
        if value is None:
            continue  # an absent column means 0
        if text is not None:
            verdict.fail(text, UNREADABLE, name, _UNREADABLE_TEXT, "expected a number")
        empty = np.isnan(value)
        verdict.fail(
            empty, MISSING, name, _MASKED_TEXT, "the column is present but this value is missing (or NaN); expected "
            "a correlation in [-1, 1] (a catalogue without the column means 0)",
        )  # fmt: skip
        verdict.fail(np.isinf(value), OUT_OF_RANGE, name, value, "expected a finite number")
        verdict.fail(
            (value < -1.0) | (value > 1.0), OUT_OF_RANGE, name, value, "expected a correlation coefficient in [-1, 1]"
        )
        corrs[name] = np.where(np.isfinite(value), value, 0.0)
    return corrs


def _ldl_positive(corrs: dict, rows: np.ndarray, shift: float) -> np.ndarray:
    """True where the 5x5 astrometric correlation matrix + ``shift`` I has an LDL^T factor with pivots > 0.

    Sylvester's criterion: a symmetric matrix is positive definite iff every pivot of its
    LDL^T factorization (no pivoting) is positive. Vectorized over rows, one column at a time.
    """
    k = len(ASTROMETRIC)
    zero = np.zeros(rows.size)
    a = [[zero] * k for _ in range(k)]
    for name, values in corrs.items():
        i, j = (INDEX[f] for f in split_correlation(name))
        a[i][j] = a[j][i] = values[rows]
    low = [[zero] * k for _ in range(k)]
    pivots = []
    good = np.ones(rows.size, dtype=bool)
    for j in range(k):
        d = 1.0 + shift - sum(low[j][m] * low[j][m] * pivots[m] for m in range(j))
        good &= d > 0
        d = np.where(good, d, 1.0)  # the failed rows are decided; keep their arithmetic harmless
        pivots.append(d)
        for i in range(j + 1, k):
            low[i][j] = (a[i][j] - sum(low[i][m] * low[j][m] * pivots[m] for m in range(j))) / d
    return good


def _check_psd(corrs: dict, verdict) -> None:
    """Step 7: the same verdict as :func:`perierr.star.observed.check_psd` on the 6x6 correlation matrix.

    Rows without correlations are the identity; the others get the LDL^T test with a shift of
    half the tolerance, and only the rows it refuses get the eigenvalues (as check_psd does).
    """
    if not corrs:
        return
    nonzero = np.zeros(verdict.code.size, dtype=bool)
    for values in corrs.values():
        nonzero |= values != 0
    rows = np.flatnonzero(nonzero & verdict.open())
    if rows.size == 0:
        return
    doubtful = rows[~_ldl_positive(corrs, rows, _LDL_SHIFT)]
    if doubtful.size == 0:
        return
    matrix = np.broadcast_to(np.eye(6), (doubtful.size, 6, 6)).copy()
    for name, values in corrs.items():
        i, j = (INDEX[f] for f in split_correlation(name))
        matrix[:, i, j] = matrix[:, j, i] = values[doubtful]
    smallest = np.full(verdict.code.size, np.nan)
    smallest[doubtful] = np.linalg.eigvalsh(matrix)[:, 0]
    verdict.fail(
        smallest < -PSD_TOLERANCE, NOT_PSD, "correlations", smallest,
        "the correlation matrix is not positive semi-definite; the correlation coefficients are mutually "
        "inconsistent (check their signs and the column names)", fmt="smallest eigenvalue %.3g",
    )  # fmt: skip


def _read_meta(chunk, sl, n, verdict) -> None:
    """Step 8: ref_epoch where the table has it (a bad mass is left to stage 2, which reads it with a caution)."""
    value, text = _field(chunk, "ref_epoch", sl, n)
    if value is None:
        return
    if text is not None:
        verdict.fail(text, UNREADABLE, "ref_epoch", _UNREADABLE_TEXT, "expected a number")
    verdict.fail(np.isinf(value), OUT_OF_RANGE, "ref_epoch", value, "expected a finite number")


def _screen_block(chunk: Chunk, sl: slice, levels: list, out: dict) -> None:
    """Stage 1 for the rows ``sl`` of the chunk, written into ``out``."""
    n = sl.stop - sl.start
    verdict = _Verdict(n)
    with np.errstate(all="ignore"):  # rows already refused may hold inf; their numbers are never used
        flags = [np.asarray(chunk.unreadable[k])[sl] for k in chunk.values if k in chunk.unreadable]
        if len(chunk.values) > 1 and len(flags) == len(chunk.values):  # a line that is no row of the table
            verdict.fail(
                np.logical_and.reduce(flags), UNREADABLE, "row", "every cell unreadable",
                "the line could not be read as a row of the table (a wrong number of fields, or a repeated "
                "header line)",
            )  # fmt: skip
        obs, err = _read_measurements(chunk, sl, n, verdict)
        _plausibility(obs, err, verdict)
        corrs = _read_correlations(chunk, sl, n, verdict)
        dec = obs[:, DEC]
        verdict.fail(
            (np.cos(np.radians(dec)) < POLE_COS) & (err[:, RA] > 0), OUT_OF_RANGE, "dec", dec,
            "ra is undefined at a celestial pole; give ra_error = 0 or move off the pole",
        )  # fmt: skip
        usable = verdict.open()
        sigma = errors_to_internal(np.where(usable[:, None], err, 0.0), np.where(usable, dec, 0.0))
        _check_psd(corrs, verdict)
        _read_meta(chunk, sl, n, verdict)
        verdict.fail(
            ~np.isfinite(np.max(sigma, axis=1) ** 2), OUT_OF_RANGE, "cov", "non-finite entries",
            "expected a finite covariance matrix: an error is too large for its square (variance) to be a number; "
            "check the units of the errors",
        )  # fmt: skip
        plx = obs[:, PARALLAX]
        verdict.fail(
            plx <= 0, NONPOSITIVE, "parallax", plx,
            "a parallax <= 0 cannot be inverted into a distance; a distance prior is needed (--distance-prior)",
        )  # fmt: skip
        verdict.fail(
            (obs[:, PMRA] == 0) & (obs[:, PMDEC] == 0) & (obs[:, RADIAL_VELOCITY] == 0), NOT_FINITE,
            "radial_velocity", obs[:, RADIAL_VELOCITY],
            "with pmra = pmdec = 0 as well the star does not move relative to the Sun, so it has no perihelion; "
            "check the input (a zero motion is usually a missing value)",
        )  # fmt: skip
        rows = np.flatnonzero(verdict.open())
        values, sig = _linear(obs[rows], sigma[rows], {k: v[rows] for k, v in corrs.items()})
        finite = np.zeros(n, dtype=bool)
        finite[rows] = np.all(np.isfinite(values), axis=1) & np.all(np.isfinite(sig), axis=1)
        verdict.fail(
            ~finite, NOT_FINITE, "perihelion", "not finite",
            "the straight-line perihelion or its linear sigma is not a finite number (inputs beyond the float range)",
        )  # fmt: skip
        good = finite[rows]
        rows, values, sig = rows[good], values[good], sig[good]
        _write(out, sl.start + rows, values, sig, obs[rows, PARALLAX], err[rows, PARALLAX], levels)
    out["status"][sl] = _STATUS_NAMES[verdict.code]
    out["reason"][sl] = verdict.reason


def _linear(obs, sigma, corrs):
    """Nominal (t, d, v) and linear sigmas sqrt(diag(J Sigma J^T)) of rows, Sigma = C * outer(sigma, sigma).

    ``J`` is the straight line's analytic Jacobian (:func:`perihelion_cartesian_jacobian` composed
    with :func:`cartesian_jacobian`, batched over rows) as in ``StraightLine.jacobian``. With
    ``a = J * sigma`` (each column scaled by its input's error) the variance of output k is
    ``sum_i a_ki^2 + 2 sum_(i<j) C_ij a_ki a_kj``, summed over the correlations present.
    """
    ph = StraightLine().evaluate(obs)
    values = np.stack([ph.time_myr, ph.distance_pc, ph.speed_kms], axis=-1)
    jac = perihelion_cartesian_jacobian(observables_to_cartesian(obs)) @ cartesian_jacobian(obs)
    a = np.ascontiguousarray(np.moveaxis(jac, (0, 1, 2), (2, 1, 0))) * sigma.T[:, None, :]  # (6, 3, m): a[i, k]
    var = np.einsum("ikm,ikm->km", a, a)
    for name, c in corrs.items():
        i, j = (INDEX[f] for f in split_correlation(name))
        var += (2.0 * c) * (a[i] * a[j])
    return values, np.sqrt(var.T)


def _write(out, rows, values, sig, plx, eplx, levels) -> None:
    """The numbers of the rows that are ``ok``."""
    t, d, v = values.T
    out["time_myr"][rows] = t
    out["time_sigma_myr"][rows] = sig[:, 0]
    out["distance_pc"][rows] = d
    out["distance_sigma_pc"][rows] = sig[:, 1]
    out["distance_au"][rows] = d * AU_PER_PC
    out["distance_sigma_au"][rows] = sig[:, 1] * AU_PER_PC
    out["speed_kms"][rows] = v
    out["speed_sigma_kms"][rows] = sig[:, 2]
    out["parallax_fraction"][rows] = eplx / plx
    for column, pc in levels:
        out[column][rows] = p_within(d, sig[:, 1], pc)
    out["head_on"][rows] = is_head_on(d, plx)


# ------------------------------------------------------------------------------------------- the cut

_OPS = MappingProxyType({"<": np.less, "<=": np.less_equal, ">": np.greater, ">=": np.greater_equal})
_COMPARISON = re.compile(
    r"^(?P<column>[A-Za-z_][A-Za-z0-9_]*)\s*(?P<op><=|>=|<|>)\s*"
    r"(?P<number>[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(?P<unit>.*)$"
)
_EXPECTED_CUT = (
    "expected comparisons COLUMN OP NUMBER [UNIT] joined by 'and' / 'or' ('and' binds tighter; no brackets), "
    "OP one of < <= > >=, e.g. 'distance_pc < 2 pc and p_within_1pc > 0.1'"
)


@dataclass(frozen=True)
class Comparison:
    """One term of a cut: ``column op value`` with ``value`` in the column's unit.

    Attributes
    ----------
    column : str
    op : str
        ``<``, ``<=``, ``>`` or ``>=``.
    value : float
        The number, converted to the column's unit.
    text : str
        The term as normalized text (``distance_pc < 2 pc``).
    """

    column: str
    op: str
    value: float
    text: str

    def __call__(self, columns) -> np.ndarray:
        """Where the term holds (False for NaN)."""
        with np.errstate(invalid="ignore"):
            return _OPS[self.op](np.asarray(columns[self.column], dtype=float), self.value)


@dataclass(frozen=True)
class Cut:
    """A user cut on the stage-1 columns: terms joined by ``and`` (binding tighter) and ``or``.

    Build one with :func:`parse_cut`. Calling it on the columns of :func:`screen_chunk` gives a bool
    array; rows whose status is not ``ok`` never pass.

    Attributes
    ----------
    text : str
        The cut as normalized text (single spaces, lower-case ``and`` / ``or``, units as astropy writes
        them), for provenance.
    clauses : tuple of tuple of Comparison
        The ``or`` of the ``and`` of each inner tuple.
    """

    text: str
    clauses: tuple

    @property
    def columns(self) -> tuple:
        """The columns the cut reads, in order of first use."""
        return tuple(dict.fromkeys(term.column for clause in self.clauses for term in clause))

    def __call__(self, columns) -> np.ndarray:
        """Bool array over the rows of ``columns`` (a :func:`screen_chunk` result): True where the row passes.

        Raises
        ------
        InputError
            The cut reads a column the result does not have (another set of thresholds).
        """
        for name in self.columns:
            if name not in columns:
                numeric = [c for c in columns if c not in ("row", "status", "reason", "head_on")]
                raise InputError(
                    "cut", self.text, f"reads the column {name!r}, which this screen does not have; "
                    f"its columns: {', '.join(numeric)}",
                )  # fmt: skip
        ok = np.asarray(columns["status"]) == "ok"
        passed = np.zeros(ok.shape, dtype=bool)
        for clause in self.clauses:
            held = ok.copy()
            for term in clause:
                held &= term(columns)
            passed |= held
        return passed


def parse_cut(text: str, *, thresholds=DEFAULT_THRESHOLDS) -> Cut:
    """Read a cut such as ``"distance_pc < 2 pc and p_within_20000au > 0.01 or time_myr > -1 Myr"``.

    A term is ``COLUMN OP NUMBER[ UNIT]``: COLUMN a numeric column of :func:`screen_columns` for
    ``thresholds`` (``time_myr``, ``distance_au``, ``p_within_1pc``, ...), OP one of ``< <= > >=``,
    and a number, with a unit that astropy converts to the column's unit (``distance_pc < 1e5 au``,
    ``speed_kms < 30000 m / s``, ``p_within_1pc > 5 %``); a bare number is in the column's unit.
    Terms are joined by ``and`` and ``or`` (``and`` binds tighter; no brackets). Nothing is evaluated
    as code.

    Parameters
    ----------
    text : str
    thresholds : sequence
        The thresholds of the run (they name the ``p_within_*`` columns).

    Returns
    -------
    Cut

    Raises
    ------
    InputError
        Field ``cut``: a malformed term, an unknown column (the message lists the columns), an
        unknown unit or one that does not convert to the column's unit.

    Examples
    --------
    >>> cut = parse_cut("distance_au<1e5 au  AND time_myr > -2 Myr or p_within_1pc >= 50 %")
    >>> cut.text
    'distance_au < 1e5 AU and time_myr > -2 Myr or p_within_1pc >= 50 %'
    >>> [(t.column, t.op, t.value) for t in cut.clauses[1]]
    [('p_within_1pc', '>=', 0.5)]
    """
    units = dict(_NUMERIC_UNITS)
    units.update({column: u.dimensionless_unscaled for column, _ in threshold_columns(thresholds)})
    listing = f"; columns: {', '.join(units)}"
    if not isinstance(text, str) or not text.strip():
        raise InputError("cut", text, "is empty; " + _EXPECTED_CUT + listing)
    clauses = []
    for part in re.split(r"\s+or\s+", text.strip(), flags=re.IGNORECASE):
        clauses.append(
            tuple(_comparison(term, text, units, listing) for term in re.split(r"\s+and\s+", part, flags=re.I))
        )
    normal = " or ".join(" and ".join(term.text for term in clause) for clause in clauses)
    return Cut(normal, tuple(clauses))


def _comparison(term: str, text: str, units: dict, listing: str) -> Comparison:
    match = _COMPARISON.match(term.strip())
    if match is None:
        raise InputError("cut", text, f"cannot read {term.strip()!r}: " + _EXPECTED_CUT + listing)
    column, op, number, unit_text = match.group("column", "op", "number", "unit")
    if column not in units and column.startswith("screen_") and column[len("screen_") :] in units:
        column = column[len("screen_") :]  # the name the column has in the results table
    if column not in units:
        raise InputError("cut", text, f"unknown column {column!r} in {term.strip()!r}{listing}")
    target = units[column]
    shown = number.lstrip("+")
    if unit_text.strip():
        try:
            unit = u.Unit(unit_text.strip(), parse_strict="raise")
        except (ValueError, TypeError):
            raise InputError(
                "cut", text, f"{unit_text.strip()!r} in {term.strip()!r} is not a unit; expected a unit convertible "
                f"to {target.to_string() or 'a plain number'} (or none: the column's unit)",
            ) from None  # fmt: skip
        try:
            value = float((float(number) * unit).to_value(target))
        except u.UnitsError:
            raise InputError(
                "cut", text, f"{unit_text.strip()!r} in {term.strip()!r} does not convert to the unit of {column} "
                f"({target.to_string() or 'a plain number'})",
            ) from None  # fmt: skip
        shown = f"{shown} {unit.to_string()}"
    else:
        value = float(number)
    return Comparison(column, op, value, f"{column} {op} {shown}")


def passes(columns, cut: Cut | None = DEFAULT_CUT) -> np.ndarray:
    """Rows of a :func:`screen_chunk` result that pass ``cut``; with no cut (the default), every ``ok`` row.

    Examples
    --------
    >>> import numpy as np
    >>> cols = {"status": np.array(["ok", "ok", "not_finite"], dtype=object),
    ...         "distance_pc": np.array([0.5, 3.0, np.nan])}
    >>> passes(cols).tolist(), passes(cols, parse_cut("distance_pc < 1 pc")).tolist()
    ([True, True, False], [True, False, False])
    """
    if cut is None:
        return np.asarray(columns["status"]) == "ok"
    return cut(columns)
