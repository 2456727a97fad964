"""The main job in one call: a star in, perihelion with intervals and budget out.

:func:`analyze` runs the forward model at the nominal inputs, the linearized
propagation, the Monte Carlo propagation and the linearized error budget, sets
the other model beside the one that ran (:mod:`perierr.comparison`) and
collects the warnings a reader needs. The default model is the Galactic orbit;
the straight line is one option away (``model="straight_line"``). Its
:class:`Analysis` result renders to the JSON contract with
:meth:`Analysis.to_dict`.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from ._version import __version__
from .budget import LinearBudget, linear_budget
from .budget.inputs import budget_inputs
from .calibration import CalibrationInfo
from .cautions import Caution, emit, from_warnings, messages, reading_cautions, unique
from .comparison import is_straight_line, orbit_nominal_comparison, straight_line_comparison
from .encounter import DEFAULT_OORT_RADII, EncounterEffects, encounter_effects, parse_positions, parse_radii
from .errors import InputError, PerierrWarning
from .models import DEFAULT_MODEL, ForwardModel, make_model
from .priors.info import PriorInfo
from .propagate.linear import LinearResult, linearize
from .propagate.montecarlo import MonteCarloResult, monte_carlo, nuisance_rng, propagate_samples
from .sampling.gaussian import resolve_seed
from .star import ObservedStar
from .star.checks import require_motion
from .star.observed import carry_photometry
from .summary import DEFAULT_LEVELS, weighted_quantiles
from .thresholds import DEFAULT_THRESHOLDS
from .units import AU_PER_PC, PARALLAX

if TYPE_CHECKING:  # names for the annotations only; importing them here would slow every start
    from astropy.units import Quantity

    from .priors import DistancePrior

__all__ = ["Analysis", "analyze"]


@dataclass(frozen=True)
class Analysis:
    """Everything perierr computed for one star.

    Attributes
    ----------
    star : ObservedStar
    model : dict
        ``describe()`` of the forward model used.
    linear : LinearResult or None
        None when the nominal parallax is <= 0 (only a prior can help then).
    monte_carlo : MonteCarloResult
    budget : LinearBudget or None
    cautions : tuple of Caution
        What a reader should know about this analysis (see :mod:`perierr.cautions`); the star's own
        reading notes are in ``star.cautions``. ``warnings`` lists their messages.
    comparison : dict
        For models other than the straight line: the straight-line answer on
        the same samples and the difference, threshold probabilities
        included (:func:`perierr.comparison.straight_line_comparison`).
    prior : PriorInfo or None
        The distance prior (name, parameters, method, sampling diagnostics).
    calibration : CalibrationInfo or None
        Parallax zero-point and error inflation factors that were applied
        (``star`` is the star after them), with the catalogue parallax.
    orbit_comparison : dict
        For the straight line: the orbit model at the nominal inputs beside it
        (:func:`perierr.comparison.orbit_nominal_comparison`), so a
        straight-line run still says what the Galactic tide would change.
    encounter : EncounterEffects or None
        What the encounter does (impulses, strength proxies, P(inside each Oort radius)) and what an observer
        sees (peak magnitude and proper motion), with intervals and a budget (:mod:`perierr.encounter`).
    """

    star: ObservedStar
    model: dict
    linear: LinearResult | None
    monte_carlo: MonteCarloResult
    budget: LinearBudget | None
    cautions: tuple = ()
    comparison: dict = field(default_factory=dict)
    prior: PriorInfo | None = None
    calibration: CalibrationInfo | None = None
    orbit_comparison: dict = field(default_factory=dict)
    encounter: EncounterEffects | None = None

    @property
    def warnings(self) -> list:
        """The message of each caution of this analysis (not the star's reading notes), in report order."""
        return messages(self.cautions)

    @property
    def all_cautions(self) -> tuple:
        """The analysis's cautions, then the star's reading notes, each once: what the reports show."""
        return unique(tuple(self.cautions) + tuple(self.star.cautions))

    def to_dict(self) -> dict:
        """The JSON document (see the README for the contract)."""
        out = {
            "perierr_version": __version__,
            "model": self.model,
            "inputs": self.star.to_dict(),
            "linearized": None if self.linear is None else self.linear.to_dict(),
            "monte_carlo": self.monte_carlo.to_dict(),
            "budget": None if self.budget is None else self.budget.to_dict(),
            "warnings": list(self.warnings),
        }
        if self.linear is not None:
            out["linearized"]["distance_au"] = {
                "value": float(self.linear.value[1] * AU_PER_PC),
                "sigma": float(self.linear.sigma[1] * AU_PER_PC),
            }
        if self.prior is not None:
            out["prior"] = self.prior.to_dict()
        if self.calibration is not None:
            out["calibration"] = self.calibration.to_dict()
        if self.comparison:
            out["straight_line_comparison"] = self.comparison
        if self.orbit_comparison:
            out["orbit_nominal_comparison"] = self.orbit_comparison
        if self.encounter is not None:
            out["encounter"] = self.encounter.to_dict()
        out["notes"] = list(self.star.notes)
        return out


def analyze(
    star: ObservedStar,
    *,
    model: ForwardModel | str = DEFAULT_MODEL,
    n_samples: int = 100_000,
    seed: int | np.random.Generator | None = None,
    levels: Sequence[float] = DEFAULT_LEVELS,
    thresholds: Sequence[str | float | Quantity] = DEFAULT_THRESHOLDS,
    target_error: float | None = None,
    max_samples: int = 10_000_000,
    distance_prior: str | DistancePrior | Callable | tuple | None = None,
    prior_method: str = "auto",
    parallax_offset: float | str | Quantity | tuple[float, float] | None = None,
    error_inflation: float | str | Mapping[str, float] | None = None,
    focusing: bool = False,
    progress: Callable[[int, int], None] | None = None,
    compare: bool = True,
    oort_radii: Sequence[str | float | Quantity] = DEFAULT_OORT_RADII,
    comet_positions=None,
) -> Analysis:
    """Perihelion of a star with linear and Monte Carlo intervals and a budget.

    Parameters
    ----------
    star : ObservedStar
    model : ForwardModel or str
        A model or a name accepted by :func:`perierr.models.make_model`. The
        default is the Galactic orbit model; ``"straight_line"`` is the linear
        motion approximation (fast, for screening: the result then carries
        the orbit model at the nominal inputs beside it, and a caution when
        they differ).
    n_samples : int
        Monte Carlo draws (first round in the adaptive mode).
    seed : int, numpy.random.Generator or None
        None picks a seed; a Generator gives one (one draw of ``seed.integers(2**63)``); the
        integer is recorded in the result, so passing it back reproduces the result
        (:func:`perierr.sampling.gaussian.resolve_seed`).
    levels : sequence of float
        Extra quantile levels to report.
    thresholds : sequence
        Distances for P(d_ph < D), e.g. ``("1 pc", "20000 au")``.
    target_error : float, optional
        Adaptive Monte Carlo: draw until quantile errors are below this
        fraction of each output's (q84 - q16) / 2.
    max_samples : int
        Cap of the adaptive mode.
    distance_prior : str or prior object, optional
        A distance prior (see :mod:`perierr.priors`); None inverts the parallax.
    prior_method : {"auto", "reweight", "mcmc"}
        How to sample the posterior under ``distance_prior``.
    parallax_offset : float, Quantity, (value, error) or str, optional
        Parallax zero-point Z [mas] and its error, applied before anything
        else: corrected parallax = parallax - Z. Its error is a separate input
        with its own budget share (see :mod:`perierr.calibration`).
    error_inflation : float, mapping or str, optional
        Factors multiplying standard errors, e.g. ``{"parallax": 1.1}``
        (one number inflates every input).
    focusing : bool
        Apply the two-body gravitational focusing of the star's mass
        (``star.mass``, ``star.mass_error``) on top of ``model``; the mass
        draws come from the analysis seed (``nuisance_rng(seed)`` of
        :mod:`perierr.propagate.montecarlo`), so the same seed gives the same
        numbers.
    progress : callable, optional
        ``progress(done, total)``, called as the Monte Carlo draws go through
        the model (e.g. :func:`perierr.progress.terminal_progress`); it only
        reports.
    compare : bool
        Put the other model beside the answer (``comparison`` or ``orbit_comparison``, and the
        model-difference caution). Catalogue runs turn it off: for the straight line it costs an orbit
        integration per star, more than the star's own Monte Carlo.
    oort_radii : sequence
        Radii of the Oort cloud (distances with units, bare numbers in pc) for P(d_ph < r) and the
        near-side comets' impulses (:mod:`perierr.encounter`).
    comet_positions : array_like or Quantity, shape (k, 3), optional
        Heliocentric ICRS positions of comets (bare numbers in au) whose differential impulses to report.

    Returns
    -------
    Analysis

    Examples
    --------
    The invented demo star, 20,000 draws:

    >>> import perierr
    >>> from perierr.demo import demo_path
    >>> star = perierr.read_star_file(demo_path("kestrel-4.toml"))
    >>> import warnings
    >>> with warnings.catch_warnings(record=True):  # the straight line would mislead here: a caution
    ...     result = perierr.analyze(star, n_samples=20_000, seed=7)
    >>> d = result.monte_carlo.summaries["distance_pc"]
    >>> print(f"d_ph = {result.linear.value[1]:.4f} +/- {result.linear.sigma[1]:.4f} pc; MC median {d.median:.4f} pc")
    d_ph = 0.1001 +/- 0.0031 pc; MC median 0.1002 pc
    >>> print(f"straight lines: {result.comparison['distance_pc']['median']:.4f} pc")  # the same draws
    straight lines: 0.0919 pc
    >>> [c.code for c in result.cautions]
    ['model-difference']
    >>> shares = result.budget.share("distance_pc")
    >>> max(shares, key=shares.get)
    'radial_velocity'
    >>> result.monte_carlo.samples.seed  # recorded: passing it back gives the same numbers
    7
    """
    if isinstance(model, str):
        model = make_model(model)
    seed = resolve_seed(seed)
    parse_radii(oort_radii), parse_positions(comet_positions)  # refused before any work
    if focusing:
        model = _with_focusing(model, star)
    from .calibration import Calibration

    calibration = Calibration.from_user(parallax_offset, error_inflation)
    calibration_block = calibration.info(star)
    if distance_prior is not None and target_error is not None:
        raise InputError(
            "target_error",
            target_error,
            "the adaptive mode draws plain Gaussian samples; under a distance prior choose n_samples "
            "(CLI --samples) and read the effective sample size reported beside every summary",
        )
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PerierrWarning)
        star = carry_photometry(calibration.apply(star), star)  # the calibrated star keeps its magnitude
        require_motion(star.mean)
        if distance_prior is None:
            linear = linearize(star, model)
            mc = monte_carlo(
                star,
                model,
                n=n_samples,
                seed=seed,
                levels=levels,
                thresholds=thresholds,
                target_error=target_error,
                max_samples=max_samples,
                progress=progress,
            )
            prior_block, with_prior, found, reference = None, False, [], star.mean
        else:
            linear, mc, prior_block, with_prior, found, reference = _under_prior(
                star, model, distance_prior, prior_method, n_samples, seed, levels, thresholds, progress
            )
        parts = None if linear is None else budget_inputs(star, linear, calibration=calibration)
        budget = None if parts is None else linear_budget(parts[0], parts[1], inputs=parts[2])
        encounter = encounter_effects(
            star, mc, linear=linear, budget_inputs=parts, radii=oort_radii, comet_positions=comet_positions
        )
    found = found + from_warnings(caught) + list(encounter.cautions)
    comparison, orbit_comparison, described = {}, {}, model.describe()
    if not compare:
        pass
    elif not is_straight_line(model):
        comparison = straight_line_comparison(mc, model, reference, linear=linear)
    elif reference[PARALLAX] > 0:
        orbit_comparison = orbit_nominal_comparison(reference, mc)
    more = {"comparison": comparison, "orbit_comparison": orbit_comparison, "model": described}
    found.extend(reading_cautions(star, linear, mc, with_prior, **more))
    found = unique(found)
    emit(found)
    return Analysis(
        star, described, linear, mc, budget, found, comparison, prior_block, calibration_block, orbit_comparison,
        encounter,
    )


def _under_prior(star, model, distance_prior, prior_method, n_samples, seed, levels, thresholds, progress):
    """Posterior draws under a distance prior, propagated; the linearization where the parallax allows it.

    Returns the linearization, the Monte Carlo result, the prior block, whether a prior was used, the
    cautions found and the reference point (the point the model linearized around).
    """
    from .priors import posterior_samples, resolve_prior

    prior = resolve_prior(distance_prior)
    with_prior = prior.name != "none"
    linear = linearize(star, model) if star.mean[PARALLAX] > 0 else None
    samples = posterior_samples(star, prior, n=n_samples, seed=seed, method=prior_method)
    reference = star.mean if star.mean[PARALLAX] > 0 else _posterior_reference(samples)
    rng = nuisance_rng(seed)
    mc = propagate_samples(
        samples, model, reference=reference, rng=rng, levels=levels, thresholds=thresholds, progress=progress
    )
    prior_block = PriorInfo.from_samples(prior, samples)
    found = []
    asked, got = samples.info.get("n_requested"), samples.info.get("n_delivered")
    if asked is not None and got is not None and got < asked:
        found.append(
            Caution(
                "mcmc-shortfall",
                f"MCMC delivered {got:,} of the {asked:,} draws asked for (the chain is thinned to about one "
                f"draw per autocorrelation time; effective size {samples.effective_size:,.0f})",
                subject="prior",
            )
        )
    return linear, mc, prior_block, with_prior, found, reference


def _posterior_reference(samples) -> np.ndarray:
    """Median of each observable over the (weighted) posterior draws: the point to linearize around."""
    values, w = samples.values, samples.weights
    return np.array([weighted_quantiles(values[:, k], [0.5], w)[0] for k in range(values.shape[1])])


def _with_focusing(model, star):
    """Wrap ``model`` in the focusing correction for the star's mass (its draws take the run's nuisance stream)."""
    from .models.focusing import Focused

    if star.mass is None:
        dropped = [c for c in star.cautions if c.code == "mass-dropped"]
        if dropped:  # read from a table row without its bad mass: name what was given
            field, _, rest = dropped[0].message.partition(" = ")
            raise InputError(field, rest.partition(": ")[0], "gravitational focusing needs a valid mass; "
                             + rest.partition(": ")[2])
        raise InputError(
            "mass", None, "gravitational focusing needs the star's mass: give mass (and mass_error) in M_sun"
        )
    return Focused(model, mass_msun=star.mass, mass_error_msun=star.mass_error or 0.0)
