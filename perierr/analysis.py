"""The main job in one call: a star in, perihelion with intervals and budget out.

:func:`analyze` runs the forward model at the nominal inputs, the linearized
propagation, the Monte Carlo propagation and the linearized error budget, and
collects the warnings a reader needs. Its :class:`Analysis` result renders to
the JSON contract with :meth:`Analysis.to_dict`.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from ._version import __version__
from .budget import LinearBudget, star_budget
from .calibration import CalibrationInfo
from .cautions import Caution, emit, from_warnings, messages, reading_cautions, unique
from .errors import InputError, PerierrWarning
from .models import ForwardModel, StraightLine, make_model
from .priors.info import PriorInfo
from .propagate.linear import LinearResult, linearize
from .propagate.montecarlo import MonteCarloResult, evaluate_aligned, monte_carlo, nuisance_rng, propagate_samples
from .sampling.gaussian import resolve_seed
from .star import ObservedStar
from .star.checks import require_motion
from .summary import DEFAULT_LEVELS, weighted_quantiles
from .thresholds import DEFAULT_THRESHOLDS
from .units import AU_PER_PC, OUTPUTS, PARALLAX

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
        the same samples and the difference.
    prior : PriorInfo or None
        The distance prior (name, parameters, method, sampling diagnostics).
    calibration : CalibrationInfo or None
        Parallax zero-point and error inflation factors that were applied
        (``star`` is the star after them), with the catalogue parallax.
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
        out["notes"] = list(self.star.notes)
        return out


def analyze(
    star: ObservedStar,
    *,
    model: ForwardModel | str = "straight_line",
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
) -> Analysis:
    """Perihelion of a star with linear and Monte Carlo intervals and a budget.

    Parameters
    ----------
    star : ObservedStar
    model : ForwardModel or str
        A model or a name accepted by :func:`perierr.models.make_model`.
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

    Returns
    -------
    Analysis

    Examples
    --------
    The invented demo star, 20,000 draws:

    >>> import perierr
    >>> from perierr.demo import demo_path
    >>> star = perierr.read_star_file(demo_path("kestrel-4.toml"))
    >>> result = perierr.analyze(star, n_samples=20_000, seed=7)
    >>> d = result.monte_carlo.summaries["distance_pc"]
    >>> print(f"d_ph = {result.linear.value[1]:.4f} +/- {result.linear.sigma[1]:.4f} pc; MC median {d.median:.4f} pc")
    d_ph = 0.0919 +/- 0.0029 pc; MC median 0.0919 pc
    >>> shares = result.budget.share("distance_pc")
    >>> max(shares, key=shares.get)
    'pmdec'
    >>> result.monte_carlo.samples.seed  # recorded: passing it back gives the same numbers
    7
    """
    if isinstance(model, str):
        model = make_model(model)
    seed = resolve_seed(seed)
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
        star = calibration.apply(star)
        require_motion(star.mean)
        if distance_prior is None:
            linear = linearize(star, model)
            mc = monte_carlo(star, model, n=n_samples, seed=seed, levels=levels, thresholds=thresholds,
                             target_error=target_error, max_samples=max_samples)
            prior_block, with_prior, found = None, False, []
        else:
            linear, mc, prior_block, with_prior, found = _under_prior(
                star, model, distance_prior, prior_method, n_samples, seed, levels, thresholds
            )
        budget = None if linear is None else star_budget(star, linear, calibration=calibration)
    found = found + from_warnings(caught)
    found.extend(reading_cautions(star, linear, mc, with_prior))
    comparison = {}
    if not isinstance(model, StraightLine):
        comparison = _compare_straight_line(star, linear, mc)
    found = unique(found)
    emit(found)
    return Analysis(star, model.describe(), linear, mc, budget, found, comparison, prior_block, calibration_block)


def _under_prior(star, model, distance_prior, prior_method, n_samples, seed, levels, thresholds):
    """Posterior draws under a distance prior, propagated; the linearization where the parallax allows it."""
    from .priors import posterior_samples, resolve_prior

    prior = resolve_prior(distance_prior)
    with_prior = prior.name != "none"
    linear = linearize(star, model) if star.mean[PARALLAX] > 0 else None
    samples = posterior_samples(star, prior, n=n_samples, seed=seed, method=prior_method)
    reference = star.mean if star.mean[PARALLAX] > 0 else _posterior_reference(samples)
    mc = propagate_samples(
        samples, model, reference=reference, rng=nuisance_rng(seed), levels=levels, thresholds=thresholds
    )
    prior_block = PriorInfo.from_samples(prior, samples)
    found = []
    asked, got = samples.info.get("n_requested"), samples.info.get("n_delivered")
    if asked is not None and got is not None and got < asked:
        found.append(Caution(
            "mcmc-shortfall",
            f"MCMC delivered {got:,} of the {asked:,} draws asked for (the chain is thinned to about one "
            f"draw per autocorrelation time; effective size {samples.effective_size:,.0f})",
            subject="prior",
        ))
    return linear, mc, prior_block, with_prior, found


def _posterior_reference(samples) -> np.ndarray:
    """Median of each observable over the (weighted) posterior draws: the point to linearize around."""
    values, w = samples.values, samples.weights
    return np.array([weighted_quantiles(values[:, k], [0.5], w)[0] for k in range(values.shape[1])])


def _with_focusing(model, star):
    """Wrap ``model`` in the focusing correction for the star's mass (its draws take the run's nuisance stream)."""
    from .models.focusing import Focused

    if star.mass is None:
        raise InputError(
            "mass", None, "gravitational focusing needs the star's mass: give mass (and mass_error) in M_sun"
        )
    return Focused(model, mass_msun=star.mass, mass_error_msun=star.mass_error or 0.0)


def _compare_straight_line(star, linear, mc) -> dict:
    """Straight-line answer on the same samples, and the difference."""
    straight = StraightLine()
    ph, _ = evaluate_aligned(straight, mc.samples.values, reference=star.mean)
    out = {}
    for k, q in enumerate(OUTPUTS):
        x, w = mc.valid_values(ph.output(q))
        med = float(weighted_quantiles(x, [0.5], w)[0])  # the definition the summaries use
        entry = {"median": med, "difference_of_medians": mc.summaries[q].median - med}
        if linear is not None:
            nominal = float(straight.evaluate(star.mean[None, :]).as_array()[0, k])
            entry["nominal"] = nominal
            entry["difference_of_nominal"] = float(linear.value[k] - nominal)
        out[q] = entry
    return out
