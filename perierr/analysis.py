"""The main job in one call: a star in, perihelion with intervals and budget out.

:func:`analyze` runs the forward model at the nominal inputs, the linearized
propagation, the Monte Carlo propagation and the linearized error budget, and
collects the warnings a reader needs. Its :class:`Analysis` result renders to
the JSON contract with :meth:`Analysis.to_dict`.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from . import __version__
from ._constants import AU_PER_PC, OUTPUTS
from .budget import LinearBudget, star_budget
from .cautions import biased_parallax, distance_within_sigma, head_on
from .errors import InputError, PerierrWarning
from .models import ForwardModel, StraightLine, make_model
from .priors.calibration import CalibrationInfo
from .priors.info import PriorInfo
from .propagate.checks import require_motion
from .propagate.linear import LinearResult, linearize
from .propagate.montecarlo import MonteCarloResult, evaluate_aligned, monte_carlo, nuisance_rng, propagate_samples
from .sampling.gaussian import resolve_seed
from .star import ObservedStar
from .summary import DEFAULT_LEVELS, weighted_quantiles
from .thresholds import DEFAULT_THRESHOLDS

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
    warnings : list of str
        Messages for cases where a reader could be misled.
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
    warnings: list = field(default_factory=list)
    comparison: dict = field(default_factory=dict)
    prior: PriorInfo | None = None
    calibration: CalibrationInfo | None = None

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
    seed=None,
    levels=DEFAULT_LEVELS,
    thresholds=DEFAULT_THRESHOLDS,
    target_error: float | None = None,
    max_samples: int = 10_000_000,
    distance_prior=None,
    prior_method: str = "auto",
    parallax_offset=None,
    error_inflation=None,
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
    seed : int or None
        None picks a seed and records it in the result.
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
        with its own budget share (see :mod:`perierr.priors.calibration`).
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
    """
    if isinstance(model, str):
        model = make_model(model)
    seed = resolve_seed(seed)
    if focusing:
        model = _with_focusing(model, star)
    from .priors.calibration import Calibration

    calibration = Calibration.from_user(parallax_offset, error_inflation)
    calibration_block = calibration.info(star)
    if distance_prior is not None and target_error is not None:
        raise InputError(
            "target_error",
            target_error,
            "the adaptive mode draws plain Gaussian samples; under a distance prior choose n_samples "
            "(CLI --samples) and read the effective sample size reported beside every summary",
        )
    notes = []
    prior_block = None
    with_prior = False
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PerierrWarning)
        star = calibration.apply(star)
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
            )
        else:
            from .priors import posterior_samples, resolve_prior

            prior = resolve_prior(distance_prior)
            with_prior = prior.name != "none"
            linear = linearize(star, model) if star.mean[2] > 0 else None
            samples = posterior_samples(star, prior, n=n_samples, seed=seed, method=prior_method)
            reference = star.mean if star.mean[2] > 0 else _posterior_reference(samples)
            mc = propagate_samples(
                samples, model, reference=reference, rng=nuisance_rng(seed), levels=levels, thresholds=thresholds
            )
            prior_block = PriorInfo.from_samples(prior, samples)
            asked, got = samples.info.get("n_requested"), samples.info.get("n_delivered")
            if asked is not None and got is not None and got < asked:
                notes.append(
                    f"MCMC delivered {got:,} of the {asked:,} draws asked for (the chain is thinned to about one "
                    f"draw per autocorrelation time; effective size {samples.effective_size:,.0f})"
                )
    notes.extend(str(w.message) for w in caught if issubclass(w.category, PerierrWarning))
    budget = None if linear is None else star_budget(star, linear, calibration=calibration)
    notes.extend(_reading_warnings(star, linear, mc, with_prior))
    comparison = {}
    if not isinstance(model, StraightLine):
        comparison = _compare_straight_line(star, linear, mc)
    for message in notes:
        warnings.warn(message, PerierrWarning, stacklevel=2)
    return Analysis(star, model.describe(), linear, mc, budget, notes, comparison, prior_block, calibration_block)


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


def _reading_warnings(star, linear, mc, with_prior) -> list:
    """Cases where the numbers could mislead a reader, in plain words."""
    out = [] if with_prior else [m for m in [biased_parallax(star)] if m]
    d = mc.summaries["distance_pc"]
    if d.std > 1e-12 * abs(d.median):  # a spread below rounding has no shape
        asym = (d.quantiles[0.84] - d.median) / max(d.median - d.quantiles[0.16], 1e-300)
        if abs(d.skewness) > 1.0 or not 0.67 < asym < 1.5:
            out.append(
                f"the Monte Carlo distribution of d_ph is skewed (skewness {d.skewness:.2f}, "
                f"upper/lower half-width ratio {asym:.2f}): quote the quantiles, not +/- sigma"
            )
    if linear is None:
        out.append(
            "no linearized columns or linear budget: the nominal parallax is <= 0 and cannot be "
            "inverted; the Monte Carlo columns are the posterior under the distance prior"
        )
    else:
        out.extend(m for m in (head_on(star, linear), distance_within_sigma(star, linear)) if m)
    if linear is not None:
        if with_prior:
            out.append(
                "under the distance prior the Monte Carlo columns are posterior summaries; the "
                "linearized columns and the linear budget invert the nominal parallax and ignore the prior"
            )
        for k, q in enumerate(OUTPUTS):
            s_lin, s_mc = linear.sigma[k], mc.summaries[q].std
            if with_prior:
                break  # a prior moves the posterior away from the linearization by design
            tiny = 1e-12 * abs(mc.summaries[q].median)  # spreads below rounding are not compared
            if s_lin > tiny and s_mc > tiny and not 0.8 < s_mc / s_lin < 1.25:
                out.append(
                    f"{q}: Monte Carlo std {s_mc:.3g} differs from the linear sigma {s_lin:.3g} by "
                    f"more than 20 %: the model is not linear over the error ellipsoid"
                )
    worst = mc.worst_relative_error()
    if worst > 0.05:
        out.append(
            f"Monte Carlo errors are large: a quantile's MC error reaches {worst:.0%} of (q84 - q16)/2; "
            "draw more samples (--samples, or --target-error without a prior)"
        )
    info = mc.perihelion.info
    n_direct = int(info.get("fallback_samples", 0) or 0) + int(info.get("beyond_span_samples", 0) or 0)
    if n_direct > 0.1 * max(mc.n_valid, 1):
        out.append(
            f"{n_direct:,} draws ({n_direct / mc.n_valid:.0%}) needed direct orbit "
            "integration: the state-transition map could not cover the spread of the draws (slow but exact)"
        )
    n_bad = mc.n_nonpositive_parallax
    if n_bad:
        out.append(
            f"{n_bad} of {mc.n} samples ({n_bad / mc.n:.2%}) have parallax <= 0: they are left "
            "out of the quantiles and count as not passing within any threshold"
        )
    flags = mc.perihelion.flags
    if flags is not None and np.any(flags):
        out.append(f"{int(np.count_nonzero(flags))} samples were flagged by the model (see model info)")
    t = abs(mc.summaries["time_myr"].median)
    if t > 10 and mc.perihelion.info.get("model") == "straight_line":
        out.append(
            f"|t_ph| is about {t:.0f} Myr: over such times the Galactic tide bends both paths "
            "and straight lines are unreliable; use the orbit model"
        )
    if not math.isfinite(mc.summaries["distance_pc"].median):
        out.append("the median perihelion distance is not finite")
    return out
