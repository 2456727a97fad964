"""Stage 2: the full treatment of the rows that pass the screen, each star with its own random stream.

Each candidate gets exactly what :func:`perierr.analyze` gives a single star
(the chosen model, prior, calibration, Monte Carlo and budget), with a seed
derived from the run's seed and the star's identifier by
:class:`numpy.random.SeedSequence`: a star's numbers do not depend on which
other stars share its batch, on the number of workers, or on the order in
which batches finish. The answer is flattened into columns (:data:`COLUMNS`).

A straight-line catalogue run does not carry the per-star orbit comparison that
``perierr run`` adds (one orbit integration per star would cost more than the
star's whole Monte Carlo); run stage 2 with the orbit model (the default) for
the Galactic tide.
"""

from __future__ import annotations

import hashlib
import warnings
from dataclasses import asdict, dataclass

import numpy as np

from ..errors import InputError, PerierrError, PerierrWarning
from ..models import DEFAULT_MODEL
from ..thresholds import DEFAULT_THRESHOLDS
from ..units import AU_PER_PC, OUTPUTS
from .chunk import Chunk

__all__ = ["TreatmentOptions", "star_seed", "treat_rows", "treatment_columns"]

#: The observables whose share of Var(d_ph) gets a column (the budget's other inputs are summed in ``other``).
_SHARED = ("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity")
#: (column word, unit tag in the column name, unit) of the three outputs.
_OUTPUTS = (("time", "myr", "Myr"), ("distance", "pc", "pc"), ("speed", "kms", "km / s"))
#: Quantile levels with a column, and their tags.
_LEVELS = ((0.05, "q05"), (0.16, "q16"), (0.84, "q84"), (0.95, "q95"))


@dataclass(frozen=True)
class TreatmentOptions:
    """How each candidate is analysed (the arguments of :func:`perierr.analyze` a catalogue run fixes).

    Attributes
    ----------
    model : str
        A model name of :func:`perierr.models.make_model` (default: the Galactic orbit).
    n_samples : int
        Monte Carlo draws per star.
    thresholds : tuple of str
        Distances D of P(d_ph < D), e.g. ``("20000 au", "1 pc")``.
    distance_prior : str or None
        A prior specification of :mod:`perierr.priors` (text, so that it can be recorded).
    prior_method : str
    parallax_offset : str or None
        Parallax zero-point ``"VALUE[,ERROR] [unit]"`` (see :func:`perierr.calibration.parse_offset`).
    error_inflation : str or None
    focusing : bool
    """

    model: str = DEFAULT_MODEL
    n_samples: int = 10_000
    thresholds: tuple = tuple(DEFAULT_THRESHOLDS)
    distance_prior: str | None = None
    prior_method: str = "auto"
    parallax_offset: str | None = None
    error_inflation: str | None = None
    focusing: bool = False

    def check(self) -> None:
        """Refuse bad settings before any work (each error names its option), as :func:`perierr.analyze` would.

        Raises
        ------
        InputError
        """
        from ..calibration import Calibration
        from ..models import make_model
        from ..priors import METHODS, resolve_prior
        from ..sampling.gaussian import require_draws
        from ..thresholds import parse_thresholds

        make_model(self.model)
        require_draws(self.n_samples, field="samples")
        parse_thresholds(list(self.thresholds))
        if self.distance_prior is not None:
            resolve_prior(self.distance_prior)
        if self.prior_method not in METHODS:
            raise InputError("prior_method", self.prior_method, f"expected one of {', '.join(METHODS)}")
        Calibration.from_user(self.parallax_offset, self.error_inflation)

    def to_dict(self) -> dict:
        """JSON-able settings (provenance and the run's fingerprint)."""
        out = asdict(self)
        out["thresholds"] = list(self.thresholds)
        return out


def star_seed(run_seed: int, key) -> int:
    """The seed of one star: :class:`numpy.random.SeedSequence` of the run seed and the star's identifier.

    Parameters
    ----------
    run_seed : int
        The run's seed (>= 0).
    key : int or str
        The star's ``source_id`` (an integer, or text such as ``"HIP 1234"``, hashed by SHA-256), or its
        row number when the table has no identifier.

    Returns
    -------
    int
        In ``[0, 2**63)``; the same for the same (run seed, key) wherever and whenever it is computed.

    Examples
    --------
    >>> star_seed(7, 123456789) == star_seed(7, 123456789) != star_seed(8, 123456789)
    True
    """
    text = str(key).strip()
    if text.isdigit():
        entropy = int(text)
    else:  # text identifiers: 64 bits of their SHA-256 (above 2**64, so never equal to a numeric id)
        entropy = 2**64 + int.from_bytes(hashlib.sha256(text.encode("utf-8")).digest()[:8], "little")
    state = np.random.SeedSequence([int(run_seed), entropy]).generate_state(1, dtype=np.uint64)[0]
    return int(state >> np.uint64(1))


def treatment_columns(thresholds) -> dict:
    """Stage-2 column names -> unit ('' for numbers without unit, None for text), in output order."""
    cols = {"seed": ""}
    for out, tag, unit in _OUTPUTS:
        for q in ("median", "q05", "q16", "q84", "q95"):
            cols[f"mc_{out}_{q}_{tag}"] = unit
    cols["mc_distance_median_au"] = "AU"
    cols["mc_distance_median_se_pc"] = "pc"
    for label in _labels(thresholds):
        cols[f"mc_p_within_{label}"] = ""
        cols[f"mc_p_within_{label}_se"] = ""
    cols.update({"mc_n": "", "mc_effective_size": "", "mc_n_nonpositive_parallax": "", "mc_method": None})
    cols.update({f"share_{name}": "" for name in _SHARED})
    cols.update({"share_other": "", "dominant_input": None, "cautions": None})
    return cols


def _labels(thresholds) -> list:
    from .screening import threshold_label

    return [threshold_label(t) for t in thresholds]


def _empty(columns: dict, n: int) -> dict:
    out = {}
    for name, unit in columns.items():
        if unit is None:
            out[name] = np.full(n, "", dtype=object)
        elif name in ("seed", "mc_n", "mc_n_nonpositive_parallax"):
            out[name] = np.full(n, -1, dtype=np.int64)
        else:
            out[name] = np.full(n, np.nan)
    return out


def _mapping(chunk: Chunk, i: int) -> dict:
    """Row ``i`` of a block as catalogue-named fields (missing cells left out)."""
    data = {k: float(v[i]) for k, v in chunk.values.items() if np.isfinite(v[i])}
    if chunk.source_id is not None:
        data["source_id"] = chunk.source_id[i]
    if chunk.name is not None and str(chunk.name[i]).strip():
        data["name"] = str(chunk.name[i])
    return data


def _key(chunk: Chunk, i: int):
    """The star's identifier for its seed: its source_id, or its row number when it has none."""
    from .reader import MISSING_ID

    if chunk.source_id is not None:
        sid = chunk.source_id[i]
        if isinstance(sid, (int, np.integer)) and sid != MISSING_ID and sid >= 0:
            return int(sid)
        if isinstance(sid, str) and sid.strip():
            return sid.strip()
    return f"row {int(chunk.rows[i])}"


def treat_rows(chunk: Chunk, options: TreatmentOptions, run_seed: int) -> tuple:
    """Analyse every row of a block fully.

    Parameters
    ----------
    chunk : Chunk
        The candidates (rows that passed the screen).
    options : TreatmentOptions
    run_seed : int

    Returns
    -------
    columns : dict of str to ndarray
        :func:`treatment_columns` for each row (NaN, -1 or '' where a row failed).
    status : ndarray of str
        ``"treated"`` or ``"failed"``.
    reason : ndarray of str
        Why a row failed ('' where it was treated). A failure never stops the block.
    """
    from ..analysis import analyze
    from ..models import make_model
    from ..star import ObservedStar

    n = len(chunk)
    spec = treatment_columns(options.thresholds)
    cols = _empty(spec, n)
    status = np.full(n, "treated", dtype=object)
    reason = np.full(n, "", dtype=object)
    model = make_model(options.model)
    labels = _labels(options.thresholds)
    for i in range(n):  # one Monte Carlo per candidate: the loop is over stars, each vectorized over draws
        row = int(chunk.rows[i])
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", PerierrWarning)  # the cautions are kept in the result
                star = ObservedStar.from_mapping(_mapping(chunk, i), row=row, strict=False)
                seed = star_seed(run_seed, _key(chunk, i))
                result = analyze(
                    star, model=model, n_samples=options.n_samples, seed=seed, thresholds=options.thresholds,
                    distance_prior=options.distance_prior, prior_method=options.prior_method,
                    parallax_offset=options.parallax_offset, error_inflation=options.error_inflation,
                    focusing=options.focusing, compare=False,
                )  # fmt: skip
        except PerierrError as exc:
            status[i], reason[i] = "failed", str(exc)
            continue
        except Exception as exc:  # noqa: BLE001 - a fault of one star (a bug, a failed integration) stays with it
            status[i], reason[i] = "failed", f"internal error ({type(exc).__name__}: {exc}); please report it"
            continue
        cols["seed"][i] = seed
        _fill(cols, i, result, labels)
    return cols, status, reason


def _fill(cols: dict, i: int, result, labels) -> None:
    mc = result.monte_carlo
    for (out, tag, _), name in zip(_OUTPUTS, OUTPUTS):
        s = mc.summaries[name]
        cols[f"mc_{out}_median_{tag}"][i] = s.median
        for level, q in _LEVELS:
            cols[f"mc_{out}_{q}_{tag}"][i] = s.quantile(level)
    d = mc.summaries["distance_pc"]
    cols["mc_distance_median_au"][i] = d.median * AU_PER_PC
    cols["mc_distance_median_se_pc"][i] = d.quantile_error(0.5)
    for label, p in zip(labels, mc.thresholds):
        cols[f"mc_p_within_{label}"][i] = p.probability
        cols[f"mc_p_within_{label}_se"][i] = p.se
    cols["mc_n"][i] = mc.n
    cols["mc_effective_size"][i] = mc.samples.effective_size
    cols["mc_n_nonpositive_parallax"][i] = mc.n_nonpositive_parallax
    cols["mc_method"][i] = mc.samples.method
    if result.budget is not None:
        shares = result.budget.share("distance_pc")
        for name in _SHARED:
            cols[f"share_{name}"][i] = shares.get(name, 0.0)
        cols["share_other"][i] = sum(v for k, v in shares.items() if k not in _SHARED)
        cols["dominant_input"][i] = result.budget.dominant("distance_pc") or ""
    cols["cautions"][i] = ";".join(dict.fromkeys(c.code for c in result.all_cautions))  # each code once
