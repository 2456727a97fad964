"""Stage 2: the full treatment of the rows that pass the screen, each star with its own random stream.

Each candidate gets exactly what :func:`perierr.analyze` gives a single star
(the chosen model, prior, calibration, Monte Carlo and budget), with a seed
derived from the run's seed and the star's identifier by
:class:`numpy.random.SeedSequence`: a star's numbers do not depend on which
other stars share its batch, on the number of workers, or on the order in
which batches finish. The answer is flattened into columns (:data:`COLUMNS`).

Each treated row also carries the encounter's effects (:mod:`perierr.encounter`, columns ``enc_*``): the
peak proper motion always; with a mass the impulse on the Sun, the strength proxies and the impulse on a
near-side comet at each Oort radius; with a G magnitude the peak magnitude; each as its median and central
90 % interval (q05, q95), in the unit :func:`treatment_columns` gives; P(d_ph < each Oort radius) with its
standard error; the largest share of the budgets of the Sun's impulse and of the peak magnitude. The mass
(``mass``, ``mass_error``) and the photometry (``phot_g_mean_mag``; its error ``phot_g_mean_mag_error``, else
``2.5 / ln(10) / phot_g_mean_flux_over_error``, :func:`.columns.g_error_from_flux`) are read row by row: an
empty, unreadable or impossible cell (a sentinel such as 99) leaves the row's perihelion untouched, the
quantity blank, a reading caution in ``cautions`` and the reason in ``enc_missing``. A blank ``enc_*`` number
of a row always has its reason there (or, for a row that was not analysed, its status). These are
statistical encounter predictions, not impact hazards (:data:`perierr.cautions.SHOWER`).

A straight-line catalogue run does not carry the per-star orbit comparison that
``perierr run`` adds (one orbit integration per star would cost more than the
star's whole Monte Carlo); run stage 2 with the orbit model (the default) for
the Galactic tide.
"""

from __future__ import annotations

import hashlib
import warnings
from dataclasses import asdict, dataclass, replace

import numpy as np

from ..cautions import Caution, note
from ..encounter import DEFAULT_OORT_RADII, parse_radii
from ..errors import InputError, PerierrError, PerierrWarning
from ..models import DEFAULT_MODEL
from ..thresholds import DEFAULT_THRESHOLDS
from ..units import AU_PER_PC, ENCOUNTER_LABELS, OUTPUTS
from .chunk import Chunk
from .columns import ENCOUNTER_FIELDS, g_error_from_flux

__all__ = [
    "EncounterInputs", "TreatmentOptions", "encounter_inputs", "radius_labels", "star_seed", "treat_rows",
    "treatment_columns",
]  # fmt: skip

#: The observables whose share of Var(d_ph) gets a column (the budget's other inputs are summed in ``other``).
_SHARED = ("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity")
#: (column word, unit tag in the column name, unit) of the three outputs.
_OUTPUTS = (("time", "myr", "Myr"), ("distance", "pc", "pc"), ("speed", "kms", "km / s"))
#: Quantile levels with a column, and their tags.
_LEVELS = ((0.05, "q05"), (0.16, "q16"), (0.84, "q84"), (0.95, "q95"))
#: (encounter quantity, column word, unit tag in the column name); a comet impulse per Oort radius follows.
_ENCOUNTER = (
    ("peak_proper_motion", "peak_proper_motion", "arcsecyr"),
    ("peak_magnitude", "peak_magnitude", "mag"),
    ("sun_impulse", "sun_impulse", "ms"),
    ("strength_m_vd", "strength_m_vd", "msun_per_kms_pc"),
    ("strength_m_vd2", "strength_m_vd2", "msun_per_kms_pc2"),
)
#: The encounter columns' interval: the central 90 %, the reports' interval of the encounter (and mc_*'s widest).
_ENCOUNTER_LEVELS = ((0.05, "q05"), (0.95, "q95"))
#: The encounter budgets whose largest share gets a column.
_DOMINANT = ("sun_impulse", "peak_magnitude")
#: What stands for a cell of an encounter input that held text, when it is handed to the star reader.
_UNREADABLE_TEXT = "unreadable text"


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
    oort_radii : tuple
        Oort-cloud radii (distances with units, e.g. ``("20000 au", "100000 au")``; bare numbers in pc) of
        P(d_ph < r) and of the near-side comets' impulses (:mod:`perierr.encounter`).
    """

    model: str = DEFAULT_MODEL
    n_samples: int = 10_000
    thresholds: tuple = tuple(DEFAULT_THRESHOLDS)
    distance_prior: str | None = None
    prior_method: str = "auto"
    parallax_offset: str | None = None
    error_inflation: str | None = None
    focusing: bool = False
    oort_radii: tuple = tuple(DEFAULT_OORT_RADII)

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
        _radius_tags(self.oort_radii)

    def to_dict(self) -> dict:
        """JSON-able settings (provenance and the run's fingerprint)."""
        out = asdict(self)
        out["thresholds"] = list(self.thresholds)
        out["oort_radii"] = list(radius_labels(self.oort_radii))
        return out


def radius_labels(radii) -> tuple:
    """Oort radii as text with their unit (``20000 * u.au`` -> ``"20000 au"``, ``2`` -> ``"2 pc"``), checked.

    Raises
    ------
    InputError
        (field ``oort_radii``) for text instead of a sequence, no radius, or a radius that is not a positive
        distance.

    Examples
    --------
    >>> radius_labels(["20000 au", 2])
    ('20000 au', '2 pc')
    """
    if isinstance(radii, (str, bytes)) or not hasattr(radii, "__iter__"):
        raise InputError("oort_radii", radii, "expected a sequence of radii, e.g. ('20000 au', '100000 au')")
    try:
        parsed = parse_radii(list(radii))
    except InputError as exc:  # the thresholds' parser names its own field
        raise InputError("oort_radii", exc.value, exc.expected) from None
    return tuple(label for label, _ in parsed)


def _radius_tags(radii) -> list:
    """The tag of each Oort radius in column names (``"20000au"``); two radii with one tag are refused."""
    from .screening import threshold_label

    tags = []
    for label in radius_labels(radii):
        tag = threshold_label(label)
        if tag in tags:
            raise InputError("oort_radii", label, f"gives the columns of {tag!r} a second time; give each radius once")
        tags.append(tag)
    return tags


def _encounter_quantities(radii) -> list:
    """``(summary name, column word, unit tag, unit)`` of each encounter quantity with columns."""
    import astropy.units as u

    out = [(name, word, tag, u.Unit(ENCOUNTER_LABELS[name]).to_string()) for name, word, tag in _ENCOUNTER]
    unit = u.Unit(ENCOUNTER_LABELS["comet_impulse"]).to_string()
    for label, tag in zip(radius_labels(radii), _radius_tags(radii)):
        out.append((f"comet_impulse:{label}", f"comet_impulse_{tag}", "ms", unit))
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


def treatment_columns(thresholds, oort_radii=DEFAULT_OORT_RADII) -> dict:
    """Stage-2 column names -> unit ('' for numbers without unit, None for text), in output order.

    The one list of the stage-2 columns and their units (astropy unit strings). The encounter's columns come
    last: ``enc_p_inside_<radius>`` (and ``_se``), ``enc_<quantity>_{median,q05,q95}_<unit tag>``, the largest
    budget share of the Sun's impulse and of the peak magnitude, and ``enc_missing``.

    Examples
    --------
    >>> cols = treatment_columns(["1 pc"], ["20000 au"])
    >>> cols["enc_sun_impulse_median_ms"], cols["enc_strength_m_vd_q05_msun_per_kms_pc"], cols["enc_missing"]
    ('m / s', 's solMass / (km pc)', None)
    >>> cols["enc_peak_magnitude_q95_mag"], cols["enc_comet_impulse_20000au_median_ms"], cols["enc_p_inside_20000au"]
    ('mag', 'm / s', '')
    """
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
    for tag in _radius_tags(oort_radii):
        cols[f"enc_p_inside_{tag}"] = ""
        cols[f"enc_p_inside_{tag}_se"] = ""
    for _, word, tag, unit in _encounter_quantities(oort_radii):
        for q in ("median",) + tuple(q for _, q in _ENCOUNTER_LEVELS):
            cols[f"enc_{word}_{q}_{tag}"] = unit
    for name in _DOMINANT:
        cols[f"enc_{name}_dominant_input"] = None
    cols["enc_missing"] = None
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
    """Row ``i`` of a block as catalogue-named fields (missing cells left out; the encounter inputs apart)."""
    data = {k: float(v[i]) for k, v in chunk.values.items() if k not in ENCOUNTER_FIELDS and np.isfinite(v[i])}
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
    spec = treatment_columns(options.thresholds, options.oort_radii)
    cols = _empty(spec, n)
    status = np.full(n, "treated", dtype=object)
    reason = np.full(n, "", dtype=object)
    model = make_model(options.model)
    labels = _labels(options.thresholds)
    quantities = _encounter_quantities(options.oort_radii)
    tags = _radius_tags(options.oort_radii)
    inputs = encounter_inputs(chunk, focusing=options.focusing)
    for i in range(n):  # one Monte Carlo per candidate: the loop is over stars, each vectorized over draws
        row = int(chunk.rows[i])
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", PerierrWarning)  # the cautions are kept in the result
                star = ObservedStar.from_mapping({**_mapping(chunk, i), **inputs.fields[i]}, row=row, strict=False)
                star, why = inputs.finish(star, i, row)
                seed = star_seed(run_seed, _key(chunk, i))
                result = analyze(
                    star, model=model, n_samples=options.n_samples, seed=seed, thresholds=options.thresholds,
                    distance_prior=options.distance_prior, prior_method=options.prior_method,
                    parallax_offset=options.parallax_offset, error_inflation=options.error_inflation,
                    focusing=options.focusing, compare=False, oort_radii=options.oort_radii,
                )  # fmt: skip
        except PerierrError as exc:
            status[i], reason[i] = "failed", str(exc)
            continue
        except Exception as exc:  # noqa: BLE001 - a fault of one star (a bug, a failed integration) stays with it
            status[i], reason[i] = "failed", f"internal error ({type(exc).__name__}: {exc}); please report it"
            continue
        cols["seed"][i] = seed
        _fill(cols, i, result, labels)
        _fill_encounter(cols, i, result.encounter, quantities, tags, why)
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


def _fill_encounter(cols: dict, i: int, effects, quantities: list, tags: list, why: dict) -> None:
    """The ``enc_*`` columns of row ``i``; ``enc_missing`` names every blank and why (``why``: the inputs' own)."""
    if effects is None:  # analyze always gives one; a blank row must still say why
        cols["enc_missing"][i] = "no encounter values: the analysis gave none"
        return
    for t, tag in zip(effects.inside, tags):
        cols[f"enc_p_inside_{tag}"][i] = t.probability
        cols[f"enc_p_inside_{tag}_se"][i] = t.se
    missing = []
    for name, word, tag, _ in quantities:
        s = effects.summaries.get(name)
        if s is None:
            continue
        cols[f"enc_{word}_median_{tag}"][i] = s.median
        for level, q in _ENCOUNTER_LEVELS:
            cols[f"enc_{word}_{q}_{tag}"][i] = s.quantile(level)
    generic = dict(m.split(": ", 1) for m in effects.missing if ": " in m)
    if "sun_impulse" not in effects.summaries:
        text = why.get("mass") or generic.get("impulses and strength proxies", "no mass")
        missing.append(f"impulses and strength proxies: {text}")
    if "peak_magnitude" not in effects.summaries:
        text = why.get("magnitude") or generic.get("peak magnitude", "no magnitude")
        missing.append(f"peak magnitude: {text}")
    budget = effects.budget
    for name in _DOMINANT:
        if name not in effects.summaries:
            continue  # said above
        dominant = None if budget is None or name not in budget.quantities else budget.dominant(name)
        if dominant is not None:
            cols[f"enc_{name}_dominant_input"][i] = dominant
        elif budget is None:
            missing.append(f"enc_{name}_dominant_input: no budget (no linearization at the nominal inputs)")
        else:
            why = budget.undefined.get(name, "no spread to share among the inputs")
            missing.append(f"enc_{name}_dominant_input: {why}")
    for name, word, tag, _ in quantities:  # never a silent blank
        if name in effects.summaries:
            blank = [q for q in ("median", "q05", "q95") if np.isnan(cols[f"enc_{word}_{q}_{tag}"][i])]
            if blank:
                missing.append(f"enc_{word}_{{{','.join(blank)}}}_{tag}: no finite value over the valid draws")
    cols["enc_missing"][i] = "; ".join(missing)


@dataclass(frozen=True)
class EncounterInputs:
    """The mass and G magnitude of each row of a block, ready for the star reader, and why any is left out.

    Made by :func:`encounter_inputs`. Attributes are per row (lists or arrays over the block's rows).

    Attributes
    ----------
    fields : list of dict
        Catalogue-named entries to add to each row's mapping (``mass``, ``mass_error``, ``phot_g_mean_mag``,
        ``phot_g_mean_mag_error``): the usable ones, and under ``focusing`` the mass as it is (a bad one is then
        the row's failure, as in the single-star path). A magnitude is handed on as read (a sentinel too): the
        star reader (non-strict) drops a bad one with the caution ``magnitude-dropped``.
    cautions : list of tuple of Caution
        Cautions of the inputs the reader never sees (an empty, unreadable or impossible mass; an empty
        magnitude; an unusable flux-over-error ratio).
    why_mass, why_magnitude : ndarray of object
        Why the row has no mass / magnitude ('' where one is handed on).
    error_note : ndarray of object
        What to say when the magnitude is read without an error ('' for the default note).
    """

    fields: list
    cautions: list
    why_mass: np.ndarray
    why_magnitude: np.ndarray
    error_note: np.ndarray

    def finish(self, star, i: int, row: int) -> tuple:
        """The star with row ``i``'s encounter cautions, and ``{"mass": why, "magnitude": why}`` ('' when used)."""
        extra = list(self.cautions[i])
        why = {"mass": "" if star.mass is not None else str(self.why_mass[i]),
               "magnitude": str(self.why_magnitude[i])}  # fmt: skip
        if star.magnitude is None and not why["magnitude"]:  # handed on, and dropped by the reader: its reason
            dropped = [c.message for c in star.cautions if c.code == "magnitude-dropped"]
            why["magnitude"] = dropped[0] if dropped else "phot_g_mean_mag not read"
        if star.magnitude is not None and star.magnitude_error is None:
            text = self.error_note[i] or ("phot_g_mean_mag has no error (no phot_g_mean_mag_error or "
                                          "phot_g_mean_flux_over_error): the magnitude is held exact")  # fmt: skip
            extra.append(note("held-exact", text, "phot_g_mean_mag_error", row))
        if star.mass is not None and star.mass_error is None:
            extra.append(note("held-exact", "mass_error not given: the mass is held exact", "mass_error", row))
        if extra:
            star = replace(star, cautions=tuple(star.cautions) + tuple(extra))
        return star, why


def encounter_inputs(chunk: Chunk, *, focusing: bool = False) -> EncounterInputs:
    """Read the encounter inputs of a block's rows (arrays over the rows; text only for the rows that need it).

    Parameters
    ----------
    chunk : Chunk
        The rows (``mass``, ``mass_error`` and the photometry of :data:`.columns.PHOTOMETRY_FIELDS` where the
        table has them; ``chunk.unreadable`` marks cells that held text).
    focusing : bool
        The model needs the mass: hand it on as it is, so that a bad one fails the row with its reason.

    Returns
    -------
    EncounterInputs
    """
    n = len(chunk)
    fields = [{} for _ in range(n)]
    cautions = [[] for _ in range(n)]
    why_mass = np.full(n, "", dtype=object)
    why_magnitude = np.full(n, "", dtype=object)
    error_note = np.full(n, "", dtype=object)
    rows = np.asarray(chunk.rows)

    mass, mass_text = _cells(chunk, "mass")
    error, error_text = _cells(chunk, "mass_error")
    if mass is None:
        why_mass[:] = "the table has no mass column (name one with --columns mass=COLUMN)"
    elif focusing:  # part of the model: the reader drops a bad one and the analysis refuses the row, naming it
        _hand_on(fields, "mass", mass, mass_text)
        if error is not None:
            _hand_on(fields, "mass_error", error, error_text)
    else:
        empty = np.isnan(mass) & ~mass_text
        bad = _first_fault(n, [
            (mass_text, lambda k: f"mass = {_UNREADABLE_TEXT} not used (expected a number in M_sun)"),
            (np.isinf(mass), lambda k: f"mass = {mass[k]:g} not used (expected a finite mass in M_sun)"),
            (mass <= 0, lambda k: f"mass = {mass[k]:g} not used (expected a positive mass in M_sun)"),
        ])  # fmt: skip
        if error is not None:
            usable = ~empty & (bad == "")
            bad = _first_fault(n, [
                (usable & error_text, lambda k: f"mass_error = {_UNREADABLE_TEXT} not used (expected an error >= 0 "
                 "in M_sun), nor the mass without it"),
                (usable & np.isinf(error), lambda k: f"mass_error = {error[k]:g} not used (expected a finite error "
                 "in M_sun), nor the mass without it"),
                (usable & (error < 0), lambda k: f"mass_error = {error[k]:g} not used (expected an error >= 0 in "
                 "M_sun), nor the mass without it"),
            ], bad)  # fmt: skip
        for k in np.flatnonzero(bad != ""):
            why_mass[k] = bad[k]
            cautions[k].append(Caution("mass-dropped", f"{bad[k]}: no impulses or strength proxies for this star",
                                       "caution", "mass", int(rows[k])))  # fmt: skip
        for k in np.flatnonzero(empty):
            why_mass[k] = "mass empty in this row"
            cautions[k].append(note("mass-dropped", "mass empty: no impulses or strength proxies for this star",
                                    "mass", int(rows[k])))  # fmt: skip
        good = ~empty & (bad == "")
        _hand_on(fields, "mass", np.where(good, mass, np.nan), None)
        if error is not None:
            _hand_on(fields, "mass_error", np.where(good, error, np.nan), None)

    magnitude, magnitude_text = _cells(chunk, "phot_g_mean_mag")
    if magnitude is None:
        why_magnitude[:] = "the table has no phot_g_mean_mag column (name one with --columns phot_g_mean_mag=COLUMN)"
    else:
        empty = np.isnan(magnitude) & ~magnitude_text
        for k in np.flatnonzero(empty):
            why_magnitude[k] = "phot_g_mean_mag empty in this row"
            cautions[k].append(note("magnitude-dropped", "phot_g_mean_mag empty: the star is read without a "
                                    "magnitude (no peak magnitude)", "phot_g_mean_mag", int(rows[k])))  # fmt: skip
        _hand_on(fields, "phot_g_mean_mag", magnitude, magnitude_text)
        given, given_text = _cells(chunk, "phot_g_mean_mag_error")
        ratio, ratio_text = _cells(chunk, "phot_g_mean_flux_over_error")
        has_error = np.zeros(n, dtype=bool)
        if given is not None:  # a cell that holds anything is the error (the reader checks it)
            has_error = ~empty & (~np.isnan(given) | given_text)
            _hand_on(fields, "phot_g_mean_mag_error", np.where(has_error, given, np.nan), given_text & has_error)
        if ratio is not None:
            derived = g_error_from_flux(ratio)
            use = ~empty & ~has_error & np.isfinite(derived)
            _hand_on(fields, "phot_g_mean_mag_error", np.where(use, derived, np.nan), None)
            unusable = ~empty & ~has_error & ~use & (~np.isnan(ratio) | ratio_text)
            for k in np.flatnonzero(unusable):
                shown = _UNREADABLE_TEXT if ratio_text[k] else f"{ratio[k]:g}"
                error_note[k] = (f"phot_g_mean_flux_over_error = {shown} not used (expected a ratio > 0): "
                                 "the magnitude is held exact")  # fmt: skip
    return EncounterInputs(fields, [tuple(c) for c in cautions], why_mass, why_magnitude, error_note)


def _cells(chunk: Chunk, name: str) -> tuple:
    """(float values or None when the table has no such column, bool flags of cells that held text)."""
    if name not in chunk.values:
        return None, None
    values = np.asarray(chunk.values[name], dtype=float)
    text = chunk.unreadable.get(name)
    return values, (np.zeros(values.shape, dtype=bool) if text is None else np.asarray(text, dtype=bool))


def _hand_on(fields: list, name: str, values: np.ndarray, text) -> None:
    """Put each row's value (not NaN: infinite ones too, for the reader to refuse) or text marker into ``fields``."""
    present = ~np.isnan(values)
    for k in np.flatnonzero(present):
        fields[k][name] = float(values[k])
    if text is not None:
        for k in np.flatnonzero(text):
            fields[k][name] = _UNREADABLE_TEXT


def _first_fault(n: int, checks: list, found=None) -> np.ndarray:
    """Per row, the text of the first check it fails ('' for none), after the faults already ``found``."""
    out = np.full(n, "", dtype=object) if found is None else found.copy()
    with np.errstate(invalid="ignore"):
        for mask, text in checks:
            for k in np.flatnonzero(np.asarray(mask) & (out == "")):
                out[k] = text(k)
    return out
