"""What an encounter does and what an observer sees, over the Monte Carlo draws of one star.

From each draw's perihelion (time, distance ``d``, speed ``v``), the star's mass ``M`` and its apparent
magnitude today, :func:`encounter_effects` gives, with intervals, Monte Carlo errors and a linear budget
whose inputs include the mass and the magnitude:

* **the impulse on the Sun** in the classical impulse approximation, ``dv_sun = 2 G M / (d v)``: the
  velocity change of a body at rest that a mass passing on a straight line at impact parameter ``d`` and
  speed ``v`` gives (the integral of the transverse force along the line);
* **the differential impulse on a comet**, the part that changes a comet's heliocentric orbit:
  ``dv_comet - dv_sun`` with each body's own impact parameter vector (``2 G M / v * b / |b|^2``). For a
  comet at heliocentric radius ``r`` on the line from the Sun toward the star's closest point (the near
  side; every Oort radius gets one) this is ``2 G M r / (v d |d - r|)``; for comets at given heliocentric
  positions the directions come from each draw's straight-line geometry (the closest point and the
  direction of motion), the sizes ``d`` and ``v`` from the model that ran;
* **strength proxies** of the comet-dynamics literature: ``M / (v d)`` (the Sun's impulse) and
  ``M / (v d^2)`` (the tidal, differential impulse on comets much closer to the Sun than ``d``);
* **the probability of passing inside each Oort radius** (default 20,000 and 100,000 au);
* **the peak apparent magnitude**, by the distance modulus from today's magnitude and distance
  (``m_peak = m_now + 5 log10(d / d_now)``; no extinction at perihelion, and today's magnitude taken as
  unextincted: the stars that come close are near);
* **the peak proper motion**, the whole relative speed over the distance at closest approach (the
  velocity is transverse there): ``mu = v / (4.74 d)`` arcsec/yr for ``v`` in km/s and ``d`` in pc.

The impulse approximation holds when the passage (duration about ``d / v``) is short against a comet's
orbital period; :data:`SLOW_PASSAGE_FRACTION` sets when a caution says otherwise. These are statistical
encounter predictions, not impact hazards; estimates of comet showers need dedicated comet-dynamics
studies (:data:`perierr.cautions.SHOWER`).

The budget is linear, at the nominal inputs, of the base-10 logarithm of every positive quantity (the
impulses and proxies are products of powers of ``M``, ``d`` and ``v``, so their logarithms are nearly linear)
and of the magnitude itself: shares of the variance of each, over the observables, the parallax zero-point
(when uncertain), the mass and the magnitude.

Randomness: masses and magnitudes are drawn from :func:`encounter_rng` of the run's seed (a stream of its
own); under focusing the masses are the ones focusing drew for each draw.

References
----------
Binney, J. & Tremaine, S. 2008, Galactic Dynamics, 2nd ed., Sect. 7.2 (the impulse approximation; from memory).
Rickman, H. 1976, Bull. Astron. Inst. Czech. 27, 92 (stellar perturbations of the Oort cloud; from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from types import MappingProxyType

import numpy as np

from .budget.linear import linear_shapley
from .cautions import SHOWER, Caution
from .errors import InputError
from .frames import observables_to_cartesian
from .summary import summarize, weighted_quantiles
from .thresholds import parse_thresholds, threshold_probability
from .units import (
    AU_PER_PC,
    ENCOUNTER_LABELS,
    ENCOUNTER_TITLES,
    KMS_PER_MASYR_AT_1MAS,
    MAS_PC,
    MS_PER_KMS,
    MYR_PER_PC_PER_KMS,
    OUTPUT_UNITS,
    PARALLAX,
    YR_PER_MYR,
    to_number,
)

__all__ = [
    "DEFAULT_OORT_RADII", "EncounterBudget", "EncounterEffects", "LINEAR_REACH", "SLOW_PASSAGE_FRACTION",
    "comet_impulse", "encounter_effects", "encounter_rng", "peak_magnitude", "peak_proper_motion", "quantity_title",
    "quantity_unit", "quantity_words", "sun_impulse", "three_digits",
]  # fmt: skip

#: Oort-cloud radii for P(d_ph < r) and the near-side comets (the inner edge of the outer cloud, and its
#: outer reach; common practice, no source).
DEFAULT_OORT_RADII = ("20000 au", "100000 au")

#: Passage time d/v above this fraction of a comet's orbital period at a radius: the impulse approximation
#: is doubtful there (common practice, no source).
SLOW_PASSAGE_FRACTION = 0.1

#: A near-side comet's impulse gets no linear budget when its radius lies within this many linear sigmas of
#: d_ph (the impulse diverges at d_ph = r; common practice, no source).
LINEAR_REACH = 3.0

_LN10 = math.log(10.0)
_PC = OUTPUT_UNITS["distance_pc"]


def _gm_sun() -> float:
    """G M_sun [pc (km/s)^2], from astropy through the orbit model's constants (loaded on first use)."""
    from .models.orbit.potentials import G_PC_KMS2_PER_MSUN

    return G_PC_KMS2_PER_MSUN


def quantity_unit(name: str) -> str:
    """Unit of an encounter quantity by its name (``"comet_impulse:20000 au"`` -> ``"m/s"``)."""
    return ENCOUNTER_LABELS[name.partition(":")[0]]


def quantity_words(name: str) -> str:
    """An encounter quantity in words: ``"impulse on a comet at 20000 au, near side"``."""
    kind, _, label = name.partition(":")
    title = ENCOUNTER_TITLES[kind]
    if kind == "comet_impulse":
        title += f" {label.replace('position', 'at position ')}" if label.startswith("position") else (
            f" at {label}, near side")
    return title


def quantity_title(name: str, band: str | None = None) -> str:
    """An encounter quantity in words with its unit: ``"impulse on a comet at 20000 au, near side [m/s]"``.

    ``band`` names the magnitude's band (``"peak magnitude [G]"``).
    """
    kind = name.partition(":")[0]
    unit = band if kind == "peak_magnitude" and band else ENCOUNTER_LABELS[kind]
    return f"{quantity_words(name)} [{unit}]"


#: The encounter's randomness streams, ``default_rng([seed, key])``: beside the observables' (``default_rng(seed)``),
#: the model nuisances' (``[seed, 1]``, :func:`perierr.propagate.montecarlo.nuisance_rng`) and the figures' subset
#: of draws (``[seed, 2]``); the magnitudes have their own, so adding a mass changes no magnitude.
STREAMS = MappingProxyType({"mass": 3, "magnitude": 4})


def encounter_rng(seed, kind: str) -> np.random.Generator:
    """The generator of a run's mass (``kind="mass"``) or magnitude draws: ``default_rng([seed, STREAMS[kind]])``.

    None (no seed) gives a fresh stream.
    """
    return np.random.default_rng(None if seed is None else [seed, STREAMS[kind]])


# ---------------------------------------------------------------------------------------------- closed forms


def sun_impulse(mass_msun, distance_pc, speed_kms):
    """Velocity change of the Sun [m/s], ``2 G M / (d v)`` (classical impulse approximation; inf head-on)."""
    with np.errstate(divide="ignore"):
        return 2.0 * _gm_sun() * np.asarray(mass_msun) / (np.asarray(distance_pc) * speed_kms) * MS_PER_KMS


def comet_impulse(mass_msun, distance_pc, speed_kms, radius_pc):
    """Differential impulse [m/s] on a comet at ``radius_pc`` on the near side: ``2 G M r / (v d |d - r|)``.

    The comet sits on the line from the Sun toward the star's closest point; its own impulse minus the Sun's.
    A comet on the star's path (``r = d``) gets an infinite impulse in this approximation.
    """
    d = np.asarray(distance_pc, dtype=float)
    with np.errstate(divide="ignore"):
        return 2.0 * _gm_sun() * np.asarray(mass_msun) * radius_pc / (
            speed_kms * d * np.abs(d - radius_pc)
        ) * MS_PER_KMS


def peak_magnitude(magnitude, distance_pc, parallax_mas):
    """Apparent magnitude at perihelion: ``m + 5 log10(d_ph / d_now)``, ``d_now = 1000 / parallax`` (-inf head-on)."""
    with np.errstate(divide="ignore"):
        return np.asarray(magnitude) + 5.0 * np.log10(np.asarray(distance_pc) * np.asarray(parallax_mas) / MAS_PC)


def peak_proper_motion(distance_pc, speed_kms):
    """Proper motion at perihelion [arcsec/yr]: ``v / (4.74047 d)`` (the velocity is transverse there; inf head-on)."""
    with np.errstate(divide="ignore"):
        return np.asarray(speed_kms) / (KMS_PER_MASYR_AT_1MAS * np.asarray(distance_pc))


def _differential_impulse(mass, d, v, b_hat, v_hat, position_pc):
    """Differential impulse [m/s] on a comet at a heliocentric position (ICRS, pc), per draw.

    ``b_hat``, ``v_hat`` (n, 3): the direction of the star's closest point and of its motion. A path through
    the Sun (``d = 0``) or through the comet gives one of the two bodies an infinite kick: the difference is
    infinite there (for a mass > 0).
    """
    x = np.asarray(position_pc, dtype=float)
    x_perp = x[None, :] - (v_hat @ x)[:, None] * v_hat
    sep = d[:, None] * b_hat - x_perp  # from the comet's projection to the star's closest point
    sep2 = np.sum(sep * sep, axis=1)
    k = 2.0 * _gm_sun() * np.asarray(mass, dtype=float) / v * MS_PER_KMS
    through = (d == 0) | (sep2 == 0)
    safe_d = np.where(through, 1.0, d)[:, None]
    kick = sep / np.where(through, 1.0, sep2)[:, None] - b_hat / safe_d
    return np.where(through, np.where(k > 0, np.inf, 0.0), k * np.linalg.norm(kick, axis=1))


def _geometry(values):
    """Unit vectors of the closest point and of the motion of each draw's straight line (ICRS), (n, 3) each."""
    cart = observables_to_cartesian(values)
    r0, vel = cart[:, :3], cart[:, 3:]
    v_hat = vel / np.linalg.norm(vel, axis=1)[:, None]
    b = r0 - np.sum(r0 * v_hat, axis=1)[:, None] * v_hat
    norm = np.linalg.norm(b, axis=1)[:, None]
    return b / np.where(norm > 0, norm, 1.0), v_hat


# ---------------------------------------------------------------------------------------------- results


@dataclass(frozen=True)
class EncounterBudget:
    """Linear shares of the variance of each encounter quantity (its log10; the magnitude as it is).

    Attributes
    ----------
    quantities : tuple of str
        Row names (the keys of :attr:`EncounterEffects.summaries` that have a budget).
    inputs : tuple of str
        Column names: the observables, ``parallax_zero_point`` when uncertain, ``mass``, ``magnitude``.
    shapley : ndarray, shape (len(quantities), len(inputs))
        Shapley shares; each row sums to 1 (zeros for a quantity without spread).
    sigma : ndarray, shape (len(quantities),)
        Linear standard deviation of each budgeted variable (dex for the logarithms, mag for the magnitude).
    undefined : dict
        Quantity -> why its row is NaN (a near-side comet whose radius lies within :data:`LINEAR_REACH`
        linear sigmas of d_ph: its impulse diverges there, and no linear budget describes it).
    """

    quantities: tuple
    inputs: tuple
    shapley: np.ndarray
    sigma: np.ndarray
    undefined: dict = field(default_factory=dict)

    def share(self, quantity: str) -> dict:
        """``{input: share}`` of one quantity."""
        if quantity not in self.quantities:
            raise InputError("quantity", quantity, f"expected one of {self.quantities}")
        return dict(zip(self.inputs, self.shapley[self.quantities.index(quantity)].tolist()))

    def dominant(self, quantity: str) -> str | None:
        """The input with the largest share (None without spread or where the budget is undefined)."""
        row = np.asarray(list(self.share(quantity).values()))
        if np.isnan(row).any() or not row.any():
            return None
        return self.inputs[int(np.argmax(row))]

    def to_dict(self) -> dict:
        """The JSON form: ``{quantity: {input: share}}``, the inputs, the sigmas and how the budget was made.

        An undefined row is ``{"reason": ...}`` and its sigma None.
        """
        out = {q: {"reason": self.undefined[q]} if q in self.undefined else self.share(q) for q in self.quantities}
        out["inputs"] = list(self.inputs)
        out["sigma"] = {q: None if q in self.undefined else float(s) for q, s in zip(self.quantities, self.sigma)}
        out["method"] = (
            "linearized Shapley effects at the nominal inputs, of log10 of each quantity (peak magnitude: "
            "the magnitude itself); the mass and the magnitude are inputs independent of the astrometry"
        )
        return out


@dataclass(frozen=True)
class EncounterEffects:
    """What the encounter does and what an observer sees, with intervals (see the module docstring).

    Attributes
    ----------
    summaries : dict
        Quantity name -> :class:`~perierr.summary.OutputSummary` over the draws: ``peak_proper_motion``
        always; ``sun_impulse``, ``strength_m_vd``, ``strength_m_vd2`` and ``comet_impulse:<label>`` (one per
        Oort radius, the near-side comet; then ``comet_impulse:position<k>`` for given positions) with a
        mass; ``peak_magnitude`` with a magnitude. Units: :data:`perierr.units.ENCOUNTER_LABELS`.
    inside : tuple of ThresholdProbability
        P(d_ph < r) for every Oort radius.
    radii : tuple of (str, float)
        The Oort radii: label and pc.
    budget : EncounterBudget or None
        None when the star has no linearization (nominal parallax <= 0 under a prior).
    mass : dict
        The mass used (``mass_msun``, ``mass_error_msun``, ``draws``), or empty without one.
    magnitude : dict
        Magnitude, error and band, or empty without one.
    passage : dict
        Median passage time ``d / v`` [yr] and, per Oort radius, a comet's orbital period there [yr].
    missing : tuple of str
        Why a quantity is not given (no mass, no magnitude).
    cautions : tuple of Caution
        The slow-passage caution and the notes of a mass or magnitude held exact; the analysis collects them.
    positions : tuple of dict
        The comets at given positions, in the order of ``comet_impulse:position<k>``: ``name``, heliocentric ICRS
        ``xyz_au``, ``distance_au``, ``ra_deg``, ``dec_deg``.
    """

    summaries: dict
    inside: tuple
    radii: tuple
    budget: EncounterBudget | None
    mass: dict = field(default_factory=dict)
    magnitude: dict = field(default_factory=dict)
    passage: dict = field(default_factory=dict)
    missing: tuple = ()
    cautions: tuple = ()
    positions: tuple = ()

    def to_dict(self) -> dict:
        """The JSON ``encounter`` block."""
        return {
            "quantities": {name: s.to_dict() for name, s in self.summaries.items()},
            "comet_positions": [dict(p) for p in self.positions],
            "inside_oort_radius": [t.to_dict() for t in self.inside],
            "budget": None if self.budget is None else self.budget.to_dict(),
            "mass": dict(self.mass),
            "magnitude": dict(self.magnitude),
            "passage": dict(self.passage),
            "missing": list(self.missing),
            "caution": SHOWER,
        }


# ---------------------------------------------------------------------------------------------- the job


def parse_radii(radii) -> tuple:
    """Oort radii as ``((label, pc), ...)``: distances with units (bare numbers in pc), each > 0."""
    if radii is None:
        raise InputError("oort_radii", None, "expected one or more radii with units, e.g. '20000 au'")
    single = isinstance(radii, (str, float, int, np.number)) or (hasattr(radii, "unit") and np.ndim(radii) == 0)
    items = [radii] if single else list(radii)
    try:
        parsed = tuple(parse_thresholds(items))
    except InputError as exc:
        raise InputError("oort_radii", exc.value, exc.expected) from None
    except TypeError:
        raise InputError("oort_radii", radii, "expected one or more radii with units, e.g. '20000 au'") from None
    # a Quantity's label: its value in full and its unit, the astronomical unit spelt "au" ("20000 au", as typed)
    parsed = tuple(
        (_quantity_label(item) if hasattr(item, "unit") and not isinstance(item, str) else label, pc)
        for item, (label, pc) in zip(items, parsed)
    )
    distances, labels = [pc for _, pc in parsed], [label for label, _ in parsed]
    if len(set(distances)) < len(distances) or len(set(labels)) < len(labels):
        raise InputError("oort_radii", labels, "expected different radii (one is repeated)")
    if not parsed:
        raise InputError("oort_radii", radii, "expected at least one radius, e.g. '20000 au'")
    for label, pc in parsed:
        if not pc > 0:
            raise InputError("oort_radii", label, "expected a radius > 0, e.g. '20000 au'")
    return parsed


def _quantity_label(item) -> str:
    """``20000 au`` for ``20000 * u.au``: the shortest text that reads back as the same value, and its unit."""
    value = float(item.value)
    text = f"{value:g}" if float(f"{value:g}") == value else repr(value)
    unit = item.unit.to_string()
    return f"{text} {'au' if unit == 'AU' else unit}"


def parse_positions(positions) -> np.ndarray:
    """Comet positions as an (k, 3) array [pc], heliocentric ICRS x, y, z.

    Accepted: an (k, 3) Quantity of lengths; bare numbers (k, 3) in au; or texts ``"R,RA,DEC"`` (a distance
    with its unit, e.g. ``"50000 au"``, and the direction's ICRS right ascension and declination in deg).
    """
    if positions is None:
        return np.zeros((0, 3))
    if isinstance(positions, str) or (
        isinstance(positions, (list, tuple)) and positions and all(isinstance(p, str) for p in positions)
    ):
        texts = [positions] if isinstance(positions, str) else list(positions)
        return np.array([_position_text(t) for t in texts])
    if getattr(positions, "unit", None) is not None:
        import astropy.units as u

        try:
            values = np.asarray(positions.to_value(u.pc), dtype=float)
        except u.UnitsError:
            raise InputError(
                "comet_positions", str(positions), "expected positions in units of length (au, pc, ...)"
            ) from None
    else:
        try:
            values = np.asarray(positions, dtype=float) / AU_PER_PC
        except (TypeError, ValueError):
            values = np.full(1, np.nan)
    values = np.atleast_2d(values)
    if values.ndim != 2 or values.shape[1] != 3 or not np.isfinite(values).all():
        raise InputError(
            "comet_positions", _shown(positions),
            "expected finite heliocentric ICRS positions, shape (k, 3), in au or as a Quantity of lengths, or texts "
            "'R,RA,DEC' such as '50000 au,266.4,-28.9'",
        )  # fmt: skip
    if (np.linalg.norm(values, axis=1) == 0).any():
        raise InputError("comet_positions", _shown(positions), "expected positions away from the Sun (|x| > 0)")
    return values


def _shown(value):
    try:
        return np.asarray(value).tolist()
    except Exception:  # noqa: BLE001 - only for the message
        return repr(value)


def _position_text(text: str) -> np.ndarray:
    """``"R,RA,DEC"`` -> heliocentric ICRS position [pc]."""
    parts = [p.strip() for p in str(text).split(",")]
    expected = (
        "expected 'R,RA,DEC': a distance with its unit and the ICRS direction in deg, e.g. '50000 au,266.4,-28.9'"
    )
    if len(parts) != 3:
        raise InputError("comet_positions", text, expected)
    r = to_number("comet_positions", parts[0], _PC, example="50000 au", noun="a distance")
    try:
        ra, dec = math.radians(float(parts[1])), math.radians(float(parts[2]))
    except ValueError:
        raise InputError("comet_positions", text, expected) from None
    if not (math.isfinite(r) and r > 0 and math.isfinite(ra) and abs(dec) <= math.pi / 2):
        raise InputError(
            "comet_positions", text, "expected a distance > 0, a finite right ascension and |dec| <= 90 deg"
        )
    return r * np.array([math.cos(dec) * math.cos(ra), math.cos(dec) * math.sin(ra), math.sin(dec)])


def encounter_effects(
    star,
    mc,
    *,
    linear=None,
    budget_inputs=None,
    radii=DEFAULT_OORT_RADII,
    comet_positions=None,
) -> EncounterEffects:
    """Encounter strength and what an observer sees, over the draws of a Monte Carlo result.

    Parameters
    ----------
    star : ObservedStar
        The star as analysed (mass, magnitude and their errors are read from it).
    mc : MonteCarloResult
        The draws and their perihelia (weights, invalid draws and focusing masses are taken from it).
    linear : LinearResult, optional
        The linearization at the nominal inputs (for the budget).
    budget_inputs : tuple, optional
        ``(jacobian (3, k), cov (k, k), inputs)`` of the star's budget
        (:func:`perierr.budget.inputs.budget_inputs`); the mass and magnitude are appended when missing.
    radii : sequence
        Oort radii (distances with units; bare numbers in pc).
    comet_positions : array_like or Quantity, shape (k, 3), optional
        Heliocentric ICRS positions of comets (bare numbers in au) for their differential impulses.

    The quantiles are those of ``mc`` (``mc.levels``).

    Returns
    -------
    EncounterEffects
    """
    radii = parse_radii(radii)
    positions = parse_positions(comet_positions)
    ph = mc.perihelion
    d_all, v_all = ph.distance_pc, ph.speed_kms
    values_all = mc.samples.values
    n = mc.n
    mass_block, mass_all, missing = {}, None, []
    mass, mass_error = star.mass, float(star.mass_error or 0.0)
    focusing = ph.diagnostics.focusing
    if focusing is not None and ph.diagnostics.focusing_mass_msun is not None:
        # the model's own masses, draw by draw (they may differ from the star's if a Focused model was passed)
        mass, mass_error = focusing.mass_msun, focusing.mass_error_msun
        mass_all, how = np.asarray(ph.diagnostics.focusing_mass_msun, dtype=float), "the masses focusing drew"
    elif mass is not None:
        mass_all = truncated_normal(mass, mass_error, n, encounter_rng(mc.samples.seed, "mass"))
        how = _mass_draws_text(mass_error)
    if mass_all is not None:
        mass_block = {"mass_msun": float(mass), "mass_error_msun": mass_error, "draws": how}
    else:
        dropped = [c.message.partition("; ")[0] for c in star.cautions if c.code == "mass-dropped"]
        missing.append(f"impulses and strength proxies: the mass was not read ({dropped[0]})" if dropped else
                       "impulses and strength proxies: give the star's mass (mass, mass_error in M_sun)")
    mag_block, mag_all = {}, None
    if star.magnitude is not None:
        merr = float(star.magnitude_error or 0.0)
        rng = encounter_rng(mc.samples.seed, "magnitude")
        mag_all = star.magnitude + merr * rng.standard_normal(n) if merr > 0 else np.full(n, star.magnitude)
        mag_block = {"magnitude": float(star.magnitude), "magnitude_error": merr, "band": star.magnitude_band}
    else:
        missing.append("peak magnitude: give the star's apparent magnitude (phot_g_mean_mag, or mag and mag_band)")

    d, w = mc.valid_values(d_all)
    v = mc.valid_values(v_all)[0]
    series = {"peak_proper_motion": peak_proper_motion(d, v)}
    if mass_all is not None:
        m = mc.valid_values(mass_all)[0]
        series["sun_impulse"] = sun_impulse(m, d, v)
        with np.errstate(divide="ignore"):
            series["strength_m_vd"] = m / (v * d)
            series["strength_m_vd2"] = m / (v * d * d)
        for label, r_pc in radii:
            series[f"comet_impulse:{label}"] = comet_impulse(m, d, v, r_pc)
        if positions.shape[0]:
            b_hat, v_hat = _geometry(mc.valid_values(values_all)[0])
            for k, x in enumerate(positions):
                series[f"comet_impulse:position{k + 1}"] = _differential_impulse(m, d, v, b_hat, v_hat, x)
    if mag_all is not None:
        plx = mc.valid_values(values_all[:, PARALLAX])[0]
        series["peak_magnitude"] = peak_magnitude(mc.valid_values(mag_all)[0], d, plx)
    summaries = {
        name: summarize(x, name=name, unit=quantity_unit(name), levels=mc.levels, weights=w)
        for name, x in series.items()
    }
    inside = tuple(threshold_probability(d_all, pc, label=label, weights=mc.samples.weights) for label, pc in radii)
    passage, cautions = _passage(d, v, w, radii, with_impulses=mass_all is not None)
    for what, block, key in (("mass", mass_block, "mass_error_msun"), ("magnitude", mag_block, "magnitude_error")):
        if block and block[key] == 0:
            cautions.append(Caution(
                f"{what}-exact", f"the star's {what} is held exact (no error given): the encounter's intervals and "
                f"budget leave out its uncertainty", "note", what,
            ))  # fmt: skip
    budget = None
    if linear is not None and budget_inputs is not None:
        budget = _budget(star, linear, budget_inputs, tuple(summaries), radii, None if mass_all is None else
                         (float(mass), mass_error))
    return EncounterEffects(
        summaries, inside, radii, budget, mass_block, mag_block, passage, tuple(missing), tuple(cautions),
        _described(positions),
    )


def _described(positions) -> tuple:
    """Each given comet position: name, ICRS x, y, z [au], distance [au] and direction [deg]."""
    out = []
    for k, x in enumerate(positions):
        au = x * AU_PER_PC
        r = float(np.linalg.norm(au))
        ra = math.degrees(math.atan2(au[1], au[0])) % 360.0
        dec = math.degrees(math.asin(max(-1.0, min(1.0, au[2] / r))))
        out.append({"name": f"position{k + 1}", "xyz_au": [float(c) for c in au], "distance_au": r,
                    "ra_deg": ra, "dec_deg": dec})  # fmt: skip
    return tuple(out)


def truncated_normal(mean, sigma, size, rng) -> np.ndarray:
    """Draws of the normal ``N(mean, sigma)`` truncated at 0 (inverse CDF; ``sigma = 0``: the mean)."""
    if sigma <= 0:
        return np.full(size, float(mean))
    from scipy.special import ndtr, ndtri

    low = ndtr(-mean / sigma)
    u = rng.random(size)
    return mean + sigma * ndtri(low + u * (1.0 - low))


def _mass_draws_text(err) -> str:
    return "normal truncated at 0" if err > 0 else "none (the mass is held exact)"


def three_digits(x) -> str:
    """``x`` to three significant digits, with thousands separators (a median of draws: ``872,674`` -> ``873,000``)."""
    return f"{float(f'{x:.3g}'):,.0f}" if x >= 100 else f"{x:.3g}"


def _passage(d, v, w, radii, *, with_impulses=True) -> tuple:
    """Median passage time d/v [yr] against a comet's orbital period at each radius, and the caution.

    The caution concerns the impulses: without them (no mass) it is not raised.
    """
    finite = np.isfinite(d) & (v > 0)
    if not finite.any():
        return {}, []
    t_yr = d[finite] / v[finite] * MYR_PER_PC_PER_KMS * YR_PER_MYR
    wf = None if w is None else w[finite]
    median = float(weighted_quantiles(t_yr, [0.5], wf)[0])
    periods = {label: float((pc * AU_PER_PC) ** 1.5) for label, pc in radii}  # Kepler's third law, au and yr
    out = {"median_passage_yr": median, "comet_period_yr": periods}
    slow = [label for label, period in periods.items() if median > SLOW_PASSAGE_FRACTION * period and with_impulses]
    cautions = []
    if slow:
        cautions.append(
            Caution(
                "slow-passage",
                f"the passage (d_ph/v_ph, median {three_digits(median)} yr) is not short against the orbital period "
                f"of a comet at {', '.join(slow)}: the impulse approximation overstates the kick there",
                subject="encounter",
            )
        )
    return out, cautions


# ---------------------------------------------------------------------------------------------- the budget


def _budget(star, linear, budget_inputs, names, radii, mass_and_error) -> EncounterBudget | None:
    """Linear shares of log10 of each positive quantity (the peak magnitude as it is) at the nominal inputs.

    ``mass_and_error``: the mass the draws used and its error [M_sun], or None without a mass.
    """
    jac, cov, inputs = budget_inputs
    jac, cov, inputs = np.asarray(jac, dtype=float), np.asarray(cov, dtype=float), tuple(inputs)
    _, d, v = (float(x) for x in linear.value)
    plx = float(star.mean[PARALLAX])
    mass = None if mass_and_error is None else mass_and_error[0]
    if mass is not None and "mass" not in inputs:
        jac, cov, inputs = _append(jac, cov, inputs, "mass", mass_and_error[1])
    if star.magnitude is not None:
        jac, cov, inputs = _append(jac, cov, inputs, "magnitude", float(star.magnitude_error or 0.0))
    rows, kept, undefined = [], [], {}
    radius = dict(radii)
    sigma_d = float(linear.sigma[1])
    for name in names:
        kind, _, label = name.partition(":")
        kept.append(name)
        if kind == "comet_impulse" and label not in radius:
            undefined[name] = (
                "undefined for a comet at a given position: its offset from the star's path moves with every input "
                "(read its interval)"
            )
            rows.append(np.full(len(inputs), np.nan))
            continue
        if not (d > 0 and v > 0):
            undefined[name] = "undefined, as the nominal path goes through the Sun (d_ph = 0): no logarithm to take"
            rows.append(np.full(len(inputs), np.nan))
            continue
        if kind not in ("peak_proper_motion", "peak_magnitude") and not mass > 0:
            undefined[name] = "undefined, as the star's mass is 0: no logarithm of a zero impulse"
            rows.append(np.full(len(inputs), np.nan))
            continue
        if kind == "comet_impulse" and abs(d - radius[label]) <= LINEAR_REACH * sigma_d:
            undefined[name] = (
                f"undefined, as the radius lies within {LINEAR_REACH:g} linear sigmas of d_ph, where this impulse "
                "diverges: read its interval, not a linear budget"
            )
            rows.append(np.full(len(inputs), np.nan))
            continue
        grad_out, direct = _log_gradient(name, d, v, plx, mass, radius)
        row = grad_out @ jac
        for key, value in direct.items():
            if key in inputs:
                row[inputs.index(key)] += value
            if key == "parallax" and "parallax_zero_point" in inputs:
                row[inputs.index("parallax_zero_point")] -= value  # corrected parallax = parallax - Z
        rows.append(row)
    if not rows:
        return None
    g = np.array(rows)
    defined = np.isfinite(g).all(axis=1)
    shares = np.full(g.shape, np.nan)
    sigma = np.full(g.shape[0], np.nan)
    if defined.any():
        shares[defined] = linear_shapley(g[defined], cov)
        sigma[defined] = np.sqrt(np.maximum(np.einsum("mi,ij,mj->m", g[defined], cov, g[defined]), 0.0))
    return EncounterBudget(tuple(kept), inputs, shares, sigma, undefined)


def _append(jac, cov, inputs, name, error):
    k = cov.shape[0]
    out = np.zeros((k + 1, k + 1))
    out[:k, :k] = cov
    out[k, k] = error * error
    return np.concatenate([jac, np.zeros((jac.shape[0], 1))], axis=1), out, inputs + (name,)


def _log_gradient(name, d, v, plx, mass, radius) -> tuple:
    """D f / d (t, d, v) and the direct derivatives (parallax, mass, magnitude) of one budgeted variable.

    ``f`` is log10 of the quantity, except the peak magnitude (itself). Checked against finite differences of
    the closed forms in the tests.
    """
    kind, _, label = name.partition(":")
    inv = 1.0 / _LN10
    if kind == "peak_proper_motion":
        return np.array([0.0, -inv / d, inv / v]), {}
    if kind == "peak_magnitude":
        return np.array([0.0, 5 * inv / d, 0.0]), {"parallax": 5 * inv / plx, "magnitude": 1.0}
    per_mass = {"mass": inv / mass}
    if kind in ("sun_impulse", "strength_m_vd"):
        return np.array([0.0, -inv / d, -inv / v]), per_mass
    if kind == "strength_m_vd2":
        return np.array([0.0, -2 * inv / d, -inv / v]), per_mass
    r = radius[label]  # a near-side comet
    return np.array([0.0, -inv * (1.0 / d + 1.0 / (d - r)), -inv / v]), per_mass
