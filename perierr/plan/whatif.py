"""What-if propagation with common random numbers.

One array of standard-normal draws ``z`` (n, 6) serves every scenario: the
samples of a scenario with covariance ``Sigma_k`` are ``mean + z L_k^T`` with
``L_k`` the deterministic PSD Cholesky factor of ``Sigma_k``. Curves over the
new precision are then smooth, and the difference between two scenarios is
the effect of the measurement, not Monte Carlo noise.

Under a distance prior every scenario is the posterior ``prior x Gaussian
likelihood``: the likelihood is the scenario's (the catalogue covariance,
updated by the new measurements with the Kalman form of
:func:`~perierr.plan.update.update_covariance`), the prior stays. Its draws are
the common draws of the likelihood, weighted by the prior's importance weights
``P(r) r^2`` (:func:`perierr.sampling.reweight.log_weights`, as ``analyze``
reweights); draws with parallax <= 0 or outside the prior's support get zero
weight. The statistics are then weighted (quantiles by
:func:`perierr.summary.weighted_quantiles`) and each scenario reports the Kish
effective sample size of its weights. :func:`what_if` switches a scenario to
MCMC where ``analyze`` would (``prior_method="auto"`` with a nominal parallax
<= 0 or too small an effective size, or ``prior_method="mcmc"``); those draws
are not common to the two scenarios.

Calibration (:func:`prepare`): the zero-point and the error inflation are
applied first, as ``analyze`` applies them, and every scenario starts from the
calibrated star. A new parallax measurement is taken as a measurement of the
true parallax, independent of the catalogue's zero-point: it is combined with
the *corrected* catalogue parallax, so the Kalman update acts on the calibrated
covariance (whose parallax variance holds the zero-point's error). In the linear
budget after the measurement the zero-point stays an input of its own, updated
jointly with the catalogue parallax (:func:`improved_budget`).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from ..budget import LinearBudget, budget_inputs, linear_budget, star_budget
from ..calibration import Calibration, CalibrationInfo
from ..errors import InputError, PerierrWarning
from ..models.base import ForwardModel
from ..propagate.linear import LinearResult, linearize
from ..propagate.montecarlo import MonteCarloResult, nuisance_rng, propagate_samples
from ..sampling.gaussian import Samples, psd_factor, resolve_seed
from ..star import ObservedStar
from ..star.checks import require_positive_parallax
from ..star.observed import carry_photometry
from ..summary import DEFAULT_LEVELS, weighted_quantiles
from ..thresholds import DEFAULT_THRESHOLDS, parse_thresholds
from ..units import AU_PER_PC, OUTPUTS, PARALLAX
from .metrics import PROBABILITY, Metric, MetricTable
from .update import Measurement, updated_star

__all__ = [
    "CommonDraws", "ScenarioMetrics", "WhatIf", "common_draws", "improved_budget", "prepare", "require_plannable",
    "resolve_plan_prior", "scenario_metrics", "scenario_monte_carlo", "what_if",
]  # fmt: skip

#: How the planner's refusals name it (``require_positive_parallax(method=...)``).
PLANNER = "the re-observation planner without a distance prior"

#: Statistics computed per output in every scenario.
STATISTICS = ("width90", "std", "median")

_CHUNK_ROWS = 1_000_000


@dataclass(frozen=True)
class CommonDraws:
    """Standard-normal draws shared by all scenarios.

    Attributes
    ----------
    z : ndarray, shape (n, 6)
    seed : int
    """

    z: np.ndarray
    seed: int

    @property
    def n(self) -> int:
        """Number of draws."""
        return int(self.z.shape[0])

    def samples(self, mean, cov) -> np.ndarray:
        """Observables ``mean + z L^T`` for one covariance, shape (n, 6)."""
        return self.z @ psd_factor(cov).T + np.asarray(mean, dtype=float)


def common_draws(n: int = 20_000, seed: int | np.random.Generator | None = None) -> CommonDraws:
    """Draw the shared standard normals with ``numpy.random.default_rng(seed)``.

    ``seed`` follows :func:`perierr.sampling.gaussian.resolve_seed`; the integer it resolves to is recorded.
    """
    try:
        enough = int(n) >= 100
    except (TypeError, ValueError):
        enough = False
    if not enough:
        raise InputError("n", n, "expected at least 100 samples")
    seed = resolve_seed(seed)
    return CommonDraws(np.random.default_rng(seed).standard_normal((int(n), 6)), seed)


def resolve_plan_prior(distance_prior):
    """The distance prior of a plan: a :class:`~perierr.priors.DistancePrior`, or None (none, or ``"none"``).

    Accepts what :func:`perierr.analyze` accepts (:func:`perierr.priors.resolve_prior`).
    """
    if distance_prior is None:
        return None
    from ..priors import resolve_prior

    prior = resolve_prior(distance_prior)
    return None if prior.name == "none" else prior


def _check_prior_method(prior_method) -> str:
    from ..sampling.posterior import METHODS

    if prior_method not in METHODS:
        raise InputError("prior_method", prior_method, f"expected one of {', '.join(METHODS)}")
    return prior_method


def require_plannable(star: ObservedStar, prior) -> None:
    """Without a distance prior the planner inverts the parallax: refuse a nominal parallax <= 0.

    Under a prior every parallax is accepted (the prior gives the distance), as in :func:`perierr.analyze`.
    """
    if prior is None:
        require_positive_parallax(star.mean[PARALLAX], method=PLANNER)


def prepare(star: ObservedStar, model, *, parallax_offset=None, error_inflation=None, focusing: bool = False):
    """The star and model as :func:`perierr.analyze` would run them: calibrated, and wrapped for focusing.

    The zero-point and error inflation go through
    :class:`perierr.calibration.Calibration` (``from_user``, then ``apply``);
    ``focusing=True`` wraps the model as ``analyze`` does (the star's mass and
    its error).

    Returns
    -------
    star : ObservedStar
        The calibrated star (the same object without calibration), with the catalogue star's magnitude.
    model : ForwardModel
    calibration : Calibration
    """
    if isinstance(model, str):
        from ..models import make_model

        model = make_model(model)
    if focusing:
        from ..analysis import _with_focusing

        model = _with_focusing(model, star)
    calibration = Calibration.from_user(parallax_offset, error_inflation)
    return carry_photometry(calibration.apply(star), star), model, calibration


def _min_effective_size(n: int) -> float:
    """The effective size below which ``analyze``'s automatic choice leaves reweighting (``min(1000, n / 10)``)."""
    return float(min(1000.0, n / 10))


def _normalized_weights(logw) -> tuple:
    """Weights summing to 1 along the last axis (zero where ``logw`` is -inf) and their Kish effective size."""
    top = np.max(logw, axis=-1, keepdims=True)
    ok = np.isfinite(top)
    with np.errstate(invalid="ignore"):
        w = np.where(np.isfinite(logw), np.exp(logw - np.where(ok, top, 0.0)), 0.0)
    total = w.sum(axis=-1, keepdims=True)
    w = w / np.where(total > 0, total, 1.0)
    sq = np.einsum("...i,...i->...", w, w)
    ess = np.where(sq > 0, 1.0 / np.where(sq > 0, sq, 1.0), 0.0)
    return w, ess


def _no_support(prior):
    return InputError(
        "distance_prior", prior.name,
        f"no draw of the parallax lies where the prior is non-zero ({prior.parameters}): importance weights "
        "cannot work for this scenario; widen the prior or use prior_method='mcmc' in the what-if",
    )  # fmt: skip


def _weighted_common_samples(star: ObservedStar, prior, draws: CommonDraws) -> Samples:
    """The common draws of ``star``'s Gaussian likelihood weighted by the prior (zero-weight draws removed)."""
    from ..sampling.reweight import log_weights

    values = draws.samples(star.mean, star.cov)
    logw = log_weights(values[:, PARALLAX], prior)
    keep = np.isfinite(logw)
    if not keep.any():
        raise _no_support(prior)
    w, ess = _normalized_weights(logw[keep])
    info = {
        "effective_size": float(ess),
        "n_drawn": draws.n,
        "n_zero_weight": int(draws.n - keep.sum()),
        "max_weight": float(w.max()),
        "note": "importance weights P(r) r^2 of the planner's common draws",
    }
    return Samples(values[keep], weights=w, method="reweight", seed=draws.seed, info=info)


def _posterior_reference(samples: Samples) -> np.ndarray:
    """Weighted median of each observable: the point to linearize around when the nominal parallax is <= 0."""
    v, w = samples.values, samples.weights
    return np.array([weighted_quantiles(v[:, k], [0.5], w)[0] for k in range(v.shape[1])])


def _reference(star: ObservedStar, samples: Samples) -> np.ndarray:
    """The nominal observables, or (nominal parallax <= 0) the posterior medians, as ``analyze`` chooses."""
    return np.array(star.mean) if star.mean[PARALLAX] > 0 else _posterior_reference(samples)


def _scenario_samples(star, prior, draws, prior_method) -> Samples:
    """One scenario's posterior draws under ``prior``, chosen as ``analyze`` chooses its sampler.

    Reweighting of the common draws (common random numbers across scenarios) unless ``analyze`` would run
    MCMC: ``prior_method="mcmc"``, or ``"auto"`` with a nominal parallax <= 0 or an effective size below
    ``min(1000, n / 10)``; MCMC draws come from :func:`perierr.sampling.posterior.posterior_samples` with
    the draws' seed. Forced reweighting with a small effective size warns.
    """
    from ..sampling.posterior import posterior_samples

    plx = float(star.mean[PARALLAX])
    threshold = _min_effective_size(draws.n)
    if prior_method == "mcmc" or (prior_method == "auto" and not plx > 0):
        return posterior_samples(star, prior, n=draws.n, seed=draws.seed, method="mcmc")
    try:
        samples = _weighted_common_samples(star, prior, draws)
    except InputError:
        if prior_method == "reweight":
            raise
        samples = None
    ess = 0.0 if samples is None else samples.info["effective_size"]
    if ess >= threshold:
        return samples
    if prior_method == "auto":
        out = posterior_samples(star, prior, n=draws.n, seed=draws.seed, method="mcmc")
        out.info["switched_to_mcmc"] = f"reweighting effective sample size {ess:.0f} < {threshold:.0f}"
        return out
    _warn_small_effective_size(ess, threshold, draws.n)
    return samples


def _warn_small_effective_size(ess, threshold, n) -> None:
    warnings.warn(
        f"the planner's reweighted draws keep an effective sample size of {ess:.0f} (< {threshold:.0f}) out of "
        f"{n:,}: its quantiles and probabilities are noisy; use more draws (n, n_whatif) or prior_method='auto'",
        PerierrWarning,
        stacklevel=4,
    )


@dataclass(frozen=True)
class ScenarioMetrics:
    """Statistics of the outputs for K scenarios on common draws.

    Attributes
    ----------
    values : MetricTable
        :class:`~perierr.plan.metrics.Metric` (width90, std, median of each
        output) -> ndarray (K,), output units; keys may be given as strings
        (``"distance_pc.width90"``).
    probabilities : dict
        Threshold label -> P(d_ph < D), ndarray (K,).
    thresholds_pc : dict
        Threshold label -> distance [pc].
    n : int
        Draws per scenario.
    n_nonpositive : ndarray, shape (K,)
        Draws with parallax <= 0 (left out of the statistics, not passing any threshold).
    effective_size : ndarray, shape (K,), or None
        Under a distance prior: the Kish effective sample size ``(sum w)^2 / sum w^2`` of each scenario's
        importance weights; without one: the draws with parallax > 0.
    prior : dict or None
        The distance prior's name and parameters (None without one).
    """

    values: MetricTable
    probabilities: dict
    thresholds_pc: dict
    n: int
    n_nonpositive: np.ndarray
    effective_size: np.ndarray | None = None
    prior: dict | None = None

    def metric(self, metric) -> np.ndarray:
        """A statistic or a probability, shape (K,).

        Parameters
        ----------
        metric : Metric or str
            A record, or its key (``"distance_pc.width90"``, ``"p:1 pc"``).
        """
        metric = Metric.coerce(metric)
        if metric.kind == PROBABILITY:
            return self.probabilities[metric.threshold]
        return self.values[metric]


def scenario_metrics(
    star: ObservedStar,
    model: ForwardModel,
    covs,
    draws: CommonDraws,
    *,
    thresholds=DEFAULT_THRESHOLDS,
    distance_prior=None,
) -> ScenarioMetrics:
    """Output statistics for each covariance in ``covs`` (same mean, common draws).

    Parameters
    ----------
    star : ObservedStar
        Supplies the mean.
    model : ForwardModel
    covs : array_like, shape (K, 6, 6)
    draws : CommonDraws
    thresholds : sequence
        Distances for P(d_ph < D).
    distance_prior : str, DistancePrior or None
        Under a prior, each scenario is the posterior prior x its Gaussian likelihood: the common draws
        weighted by ``P(r) r^2`` (module docstring); quantiles, std and probabilities are weighted. The
        std is then ``sqrt(sum w (y - m)^2 / (1 - sum w^2))`` (normalized weights), which is numpy's
        ``ddof=1`` for equal weights.

    Returns
    -------
    ScenarioMetrics

    Raises
    ------
    InputError
        Under a prior, when no draw of any scenario has a positive weight (scenarios without one among
        others get NaN statistics, an effective size of 0 and a warning naming how many).

    Notes
    -----
    The model's nuisance draws (focusing masses) take one stream for the call,
    :func:`~perierr.propagate.montecarlo.nuisance_rng` of the draws' seed.
    """
    prior = resolve_plan_prior(distance_prior)
    covs = np.asarray(covs, dtype=float).reshape(-1, 6, 6)
    k, n = covs.shape[0], draws.n
    mean = np.array(star.mean)
    factors = np.stack([psd_factor(c) for c in covs])  # (K, 6, 6)
    out = np.empty((k, n, 3))
    valid = np.empty((k, n), dtype=bool)
    plx = np.empty((k, n)) if prior is not None else None
    reference = mean if mean[PARALLAX] > 0 else None  # a model's hint only; none around a parallax <= 0
    per_chunk = max(1, _CHUNK_ROWS // n)
    rng = nuisance_rng(draws.seed)
    for start in range(0, k, per_chunk):
        stop = min(k, start + per_chunk)
        x = np.matmul(draws.z, np.swapaxes(factors[start:stop], 1, 2)) + mean
        ok = x[..., PARALLAX] > 0
        valid[start:stop] = ok
        if plx is not None:
            plx[start:stop] = x[..., PARALLAX]
        flat = x.reshape(-1, 6)
        res = np.full((flat.shape[0], 3), np.nan)
        keep = ok.reshape(-1)
        res[keep] = model.evaluate_draws(flat[keep], rng, reference=reference).as_array()
        out[start:stop] = res.reshape(stop - start, n, 3)
    if prior is not None:
        return _weighted_metrics(out, valid, plx, prior, thresholds)
    any_bad = not valid.all()
    values = {}
    for j, q in enumerate(OUTPUTS):
        y = out[..., j]
        quant = np.nanquantile if any_bad else np.quantile
        lo, med, hi = quant(y, [0.05, 0.5, 0.95], axis=1, method="hazen")  # as perierr.summary
        values[Metric(q, "width90")] = hi - lo
        values[Metric(q, "median")] = med
        values[Metric(q, "std")] = (np.nanstd if any_bad else np.std)(y, axis=1, ddof=1)
    d = np.where(valid, out[..., 1], np.inf)
    probs, pcs = {}, {}
    for label, pc in parse_thresholds(thresholds):
        probs[label] = np.mean(d < pc, axis=1)
        pcs[label] = pc
    return ScenarioMetrics(
        MetricTable(values), probs, pcs, n, (~valid).sum(axis=1), valid.sum(axis=1).astype(float)
    )


def _weighted_metrics(out, valid, plx, prior, thresholds) -> ScenarioMetrics:
    """The statistics of :func:`scenario_metrics` under a distance prior (weighted; module docstring)."""
    from ..sampling.reweight import log_weights

    k, n = valid.shape
    logw = log_weights(plx.reshape(-1), prior).reshape(k, n)
    w, ess = _normalized_weights(logw)
    empty = ess == 0
    if empty.all():
        raise _no_support(prior)
    if empty.any():
        warnings.warn(
            f"{int(empty.sum())} of {k} scenarios have no draw where the {prior.name} prior is non-zero (their "
            "parallax draws are all <= 0 or outside its support): their statistics are NaN; importance weights "
            "of common draws cannot represent them (the what-if of one such measurement can run MCMC)",
            PerierrWarning,
            stacklevel=3,
        )
    values = {Metric(q, stat): np.full(k, np.nan) for q in OUTPUTS for stat in STATISTICS}
    for j, q in enumerate(OUTPUTS):
        y = np.where(w > 0, out[..., j], 0.0)  # zero-weight draws (parallax <= 0) have no say
        m = np.einsum("kn,kn->k", w, y)
        dev = y - m[:, None]
        unbiased = 1.0 - np.einsum("kn,kn->k", w, w)
        var = np.einsum("kn,kn->k", w, dev * dev) / np.where(unbiased > 0, unbiased, 1.0)
        values[Metric(q, "std")] = np.where(empty, np.nan, np.sqrt(np.where(unbiased > 0, var, 0.0)))
        for i in np.flatnonzero(~empty):  # one weighted quantile call per scenario (not per draw)
            keep = w[i] > 0
            lo, med, hi = weighted_quantiles(out[i, keep, j], [0.05, 0.5, 0.95], w[i, keep])
            values[Metric(q, "width90")][i] = hi - lo
            values[Metric(q, "median")][i] = med
    d = np.where(w > 0, out[..., 1], np.inf)
    probs, pcs = {}, {}
    for label, pc in parse_thresholds(thresholds):
        probs[label] = np.where(empty, np.nan, np.einsum("kn,kn->k", w, (d < pc).astype(float)))
        pcs[label] = pc
    return ScenarioMetrics(
        MetricTable(values), probs, pcs, n, (~valid).sum(axis=1), ess, {"name": prior.name, **prior.parameters}
    )


def scenario_monte_carlo(
    star: ObservedStar,
    model: ForwardModel,
    draws: CommonDraws,
    *,
    levels=DEFAULT_LEVELS,
    thresholds=DEFAULT_THRESHOLDS,
    progress=None,
    distance_prior=None,
    prior_method: str = "reweight",
) -> MonteCarloResult:
    """The Monte Carlo of one scenario (``star``'s mean and covariance) on the common draws.

    The model's nuisance draws take :func:`~perierr.propagate.montecarlo.nuisance_rng` of the draws' seed,
    so every scenario shares them too; ``levels``, ``thresholds`` and ``progress`` as in
    :func:`perierr.propagate.monte_carlo`.

    Under ``distance_prior`` the samples are the common draws weighted by the prior (module docstring;
    ``samples.info["effective_size"]`` is their Kish effective size) and the summaries are weighted, as
    :func:`perierr.analyze` summarizes reweighted draws. ``prior_method`` as in ``analyze``: the default
    here, ``"reweight"``, keeps the common draws (with a warning when the effective size is small);
    ``"auto"`` and ``"mcmc"`` run MCMC where ``analyze`` would.
    """
    prior = resolve_plan_prior(distance_prior)
    if prior is None:
        samples = Samples(draws.samples(star.mean, star.cov), seed=draws.seed, method="gaussian (common draws)")
        reference = star.mean
    else:
        samples = _scenario_samples(star, prior, draws, _check_prior_method(prior_method))
        reference = _reference(star, samples)
    return propagate_samples(
        samples, model, reference=reference, rng=nuisance_rng(draws.seed), levels=levels, thresholds=thresholds,
        progress=progress,
    )  # fmt: skip


@dataclass(frozen=True)
class WhatIf:
    """Today's answer and the answer after hypothetical new measurements, side by side.

    Attributes
    ----------
    measurements : tuple of Measurement
    current, improved : ObservedStar
    mc_current, mc_improved : MonteCarloResult
        On the same standard-normal draws (under a distance prior: weighted by it; MCMC draws where
        ``analyze`` would run MCMC, which are not common to the two).
    linear_current, linear_improved : LinearResult or None
        None when the nominal parallax is <= 0 (only the prior gives a distance then).
    budget_current, budget_improved : LinearBudget or None
        The linear budgets (with the parallax zero-point as an input when its error is > 0); None with the
        linearization. Under a prior they budget the Gaussian likelihood, as ``analyze``'s budget does.
    settings : dict
    prior_current, prior_improved : PriorInfo or None
        The distance prior and each scenario's sampling diagnostics (effective sample size ...).
    calibration : CalibrationInfo or None
        The zero-point and error inflation applied before the what-if (``current`` is the calibrated star).
    """

    measurements: tuple
    current: ObservedStar
    improved: ObservedStar
    mc_current: MonteCarloResult
    mc_improved: MonteCarloResult
    linear_current: LinearResult | None
    linear_improved: LinearResult | None
    budget_current: LinearBudget | None
    budget_improved: LinearBudget | None
    settings: dict = field(default_factory=dict)
    prior_current: object = None
    prior_improved: object = None
    calibration: CalibrationInfo | None = None

    @property
    def effective_size(self) -> tuple:
        """(current, improved) effective sample sizes of the two scenarios' draws (Kish for weights)."""
        return self.mc_current.samples.effective_size, self.mc_improved.samples.effective_size

    def width90(self, output: str = "distance_pc") -> tuple:
        """(current, improved) widths of the central 90 % interval, output units."""
        a = self.mc_current.summaries[output]
        b = self.mc_improved.summaries[output]
        return a.quantile(0.95) - a.quantile(0.05), b.quantile(0.95) - b.quantile(0.05)

    def headline(self) -> str:
        """One sentence: what the measurement buys for the d_ph interval."""
        a, b = self.width90("distance_pc")
        what = " and ".join(m.label for m in self.measurements)
        if not a > 0:  # every draw gives the same d_ph today: nothing to narrow
            return f"measure {what}: the 90 % interval of d_ph has no width today, there is nothing to narrow"
        if b > a:  # under a distance prior a sharper likelihood can move the posterior where it is wider
            return (
                f"measure {what} and the 90 % interval of d_ph widens from "
                f"{a * AU_PER_PC:,.0f} to {b * AU_PER_PC:,.0f} au ({b / a - 1:.0%} wider)"
            )
        return (
            f"measure {what} and the 90 % interval of d_ph shrinks from "
            f"{a * AU_PER_PC:,.0f} to {b * AU_PER_PC:,.0f} au ({1 - b / a:.0%} narrower)"
        )

    def to_dict(self) -> dict:
        """JSON block: current and improved summaries side by side, and the change."""
        change = {}
        for q in OUTPUTS:
            a, b = self.width90(q)
            sa, sb = self.mc_current.summaries[q].std, self.mc_improved.summaries[q].std
            change[q] = {
                "width90": {"current": a, "improved": b, "ratio": b / a if a > 0 else None},
                "std": {"current": sa, "improved": sb, "ratio": sb / sa if sa > 0 else None},
            }
        a, b = self.width90("distance_pc")
        change["distance_au_width90"] = {"current": a * AU_PER_PC, "improved": b * AU_PER_PC}
        change["thresholds"] = [
            {"threshold": t0.label, "current": t0.probability, "improved": t1.probability}
            for t0, t1 in zip(self.mc_current.thresholds, self.mc_improved.thresholds)
        ]
        def block(star, mc, lin, budget, prior):
            out = {
                "inputs": star.to_dict(), "monte_carlo": mc.to_dict(),
                "linearized": None if lin is None else lin.to_dict(),
                "budget": None if budget is None else budget.to_dict(),
            }  # fmt: skip
            if prior is not None:
                out["prior"] = prior.to_dict()
            return out

        out = {
            "measure": [m.to_dict() for m in self.measurements],
            "headline": self.headline(),
            "current": block(self.current, self.mc_current, self.linear_current, self.budget_current,
                             self.prior_current),
            "improved": block(self.improved, self.mc_improved, self.linear_improved, self.budget_improved,
                              self.prior_improved),
            "change": change,
            "settings": dict(self.settings),
        }  # fmt: skip
        if self.calibration is not None:
            out["calibration"] = self.calibration.to_dict()
        return out


def what_if(
    star: ObservedStar,
    model: ForwardModel,
    measurements,
    *,
    n: int = 100_000,
    seed: int | np.random.Generator | None = None,
    draws: CommonDraws | None = None,
    levels=DEFAULT_LEVELS,
    thresholds=DEFAULT_THRESHOLDS,
    progress=None,
    distance_prior=None,
    prior_method: str = "auto",
    parallax_offset=None,
    error_inflation=None,
    focusing: bool = False,
) -> WhatIf:
    """Recompute intervals, threshold probabilities and budget after new measurements.

    Parameters
    ----------
    star : ObservedStar
        The catalogue star (calibrated here when ``parallax_offset`` or ``error_inflation`` is given).
    model : ForwardModel or str
    measurements : sequence of Measurement
        From :func:`~perierr.plan.update.make_measurement` or ``parse_measure``.
    n : int
        Monte Carlo draws (ignored when ``draws`` is given).
    seed : int, numpy.random.Generator or None
        Seed of the common draws (see :func:`perierr.sampling.gaussian.resolve_seed`).
    draws : CommonDraws, optional
        Shared draws, to compare with other scenarios.
    levels, thresholds, progress
        As in :func:`perierr.propagate.monte_carlo` (each scenario is a pass of the progress).
    distance_prior, prior_method
        As in :func:`perierr.analyze`. Under a prior the improved answer keeps the prior and sharpens the
        likelihood: the posterior prior x (the Gaussian likelihood updated by the measurements), sampled
        as the module docstring says; a nominal parallax <= 0 is then accepted.
    parallax_offset, error_inflation
        As in :func:`perierr.analyze`, applied first (:func:`prepare`). A new parallax measurement combines
        with the corrected catalogue parallax (the update acts on the calibrated covariance).
    focusing : bool
        Wrap ``model`` in the star's focusing as :func:`perierr.analyze` does (needs ``star.mass``).

    Notes
    -----
    Both scenarios draw the model's nuisance parameters (focusing masses) from
    the same stream, :func:`~perierr.propagate.montecarlo.nuisance_rng` of the
    draws' seed, so they share those draws too.
    """
    catalogue = star
    star, model, calibration = prepare(
        star, model, parallax_offset=parallax_offset, error_inflation=error_inflation, focusing=focusing
    )
    block = calibration.info(catalogue) if calibration.active else None
    return _what_if(
        star, model, measurements, calibration, block, n=n, seed=seed, draws=draws, levels=levels,
        thresholds=thresholds, progress=progress, distance_prior=distance_prior, prior_method=prior_method,
    )  # fmt: skip


def _what_if(
    star, model, measurements, calibration, calibration_block, *, n, seed, draws, levels, thresholds, progress,
    distance_prior, prior_method,
) -> WhatIf:  # fmt: skip
    """:func:`what_if` on a star and model already prepared (calibrated, wrapped for focusing)."""
    prior = resolve_plan_prior(distance_prior)
    require_plannable(star, prior)
    measurements = tuple(measurements)
    for m in measurements:
        if not isinstance(m, Measurement):
            raise InputError("measurements", m, "expected Measurement objects (see perierr.plan.parse_measure)")
    draws = common_draws(n, seed) if draws is None else draws
    improved = updated_star(star, measurements)
    rng_seed = draws.seed
    settings = {"n": draws.n, "seed": draws.seed, "common_random_numbers": True, "model": model.describe()}
    if prior is None:

        def run(s):
            return scenario_monte_carlo(s, model, draws, levels=levels, thresholds=thresholds, progress=progress)

        mc0, mc1, info0, info1 = run(star), run(improved), None, None
    else:
        from ..priors.info import PriorInfo

        method = _check_prior_method(prior_method)
        s0, s1 = (_scenario_samples(s, prior, draws, method) for s in (star, improved))

        def run(s, samples):
            return propagate_samples(
                samples, model, reference=_reference(s, samples), rng=nuisance_rng(rng_seed), levels=levels,
                thresholds=thresholds, progress=progress,
            )  # fmt: skip

        mc0, mc1 = run(star, s0), run(improved, s1)
        info0, info1 = PriorInfo.from_samples(prior, s0), PriorInfo.from_samples(prior, s1)
        settings.update(
            common_random_numbers=s0.method == s1.method == "reweight",
            distance_prior={"name": prior.name, "parameters": prior.parameters},
            prior_method=method,
            samplers={"current": s0.method, "improved": s1.method},
            effective_size={"current": s0.effective_size, "improved": s1.effective_size},
        )
    lin0 = lin1 = b0 = b1 = None
    if star.mean[PARALLAX] > 0:
        lin0, lin1 = linearize(star, model), linearize(improved, model)
        b0 = star_budget(star, lin0, calibration=calibration)
        b1 = improved_budget(star, improved, lin1, measurements, calibration=calibration)
    else:
        settings["linearized"] = "not computed: the nominal parallax is <= 0 (the prior gives the distance)"
    return WhatIf(measurements, star, improved, mc0, mc1, lin0, lin1, b0, b1, settings, info0, info1,
                  calibration_block)  # fmt: skip


def improved_budget(star, improved, linear, measurements, *, calibration=None) -> LinearBudget:
    """The linear budget after new measurements, the zero-point kept as an input of its own.

    Parameters
    ----------
    star : ObservedStar
        Today's (calibrated) star.
    improved : ObservedStar
        The star after the measurements (:func:`~perierr.plan.update.updated_star`).
    linear : LinearResult
        The linearization of ``improved``.
    measurements : sequence of Measurement
    calibration : Calibration, optional

    Returns
    -------
    LinearBudget

    Notes
    -----
    Without an uncertain zero-point this is :func:`perierr.budget.star_budget` of the improved star. With
    one, the calibrated parallax is ``catalogue parallax - Z``: a new parallax measurement observes that
    sum of two inputs, so the Kalman update acts on the joint covariance of the catalogue observables and
    Z (observation vector ``+1`` on the parallax, ``-1`` on Z), which leaves them correlated; the
    calibrated 6 x 6 covariance it implies is the improved star's.
    """
    if calibration is None or not calibration.zero_point_error > 0:
        return star_budget(improved, linear, calibration=calibration)
    from ..calibration import ZERO_POINT

    jac, cov, inputs = budget_inputs(star, linear, calibration=calibration)
    zp = inputs.index(ZERO_POINT)
    for m in measurements:
        h = np.zeros(len(inputs))
        h[m.index] = 1.0
        if m.index == PARALLAX:
            h[zp] = -1.0
        ph = cov @ h
        denom = float(h @ ph) + m.precision**2
        if denom > 0:
            cov = cov - np.outer(ph, ph) / denom
            cov = 0.5 * (cov + cov.T)
    return linear_budget(jac, cov, inputs=inputs)
