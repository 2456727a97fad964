"""What-if propagation with common random numbers.

One array of standard-normal draws ``z`` (n, 6) serves every scenario: the
samples of a scenario with covariance ``Sigma_k`` are ``mean + z L_k^T`` with
``L_k`` the deterministic PSD Cholesky factor of ``Sigma_k``. Curves over the
new precision are then smooth, and the difference between two scenarios is
the effect of the measurement, not Monte Carlo noise.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..budget import LinearBudget, star_budget
from ..errors import InputError
from ..models.base import ForwardModel
from ..propagate.linear import LinearResult, linearize
from ..propagate.montecarlo import MonteCarloResult, nuisance_rng, propagate_samples
from ..sampling.gaussian import Samples, psd_factor, resolve_seed
from ..star import ObservedStar
from ..star.checks import require_positive_parallax
from ..summary import DEFAULT_LEVELS
from ..thresholds import DEFAULT_THRESHOLDS, parse_thresholds
from ..units import AU_PER_PC, OUTPUTS, PARALLAX
from .metrics import PROBABILITY, Metric, MetricTable
from .update import Measurement, updated_star

__all__ = [
    "CommonDraws", "ScenarioMetrics", "WhatIf", "common_draws", "scenario_metrics", "scenario_monte_carlo", "what_if",
]  # fmt: skip

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
    """

    values: MetricTable
    probabilities: dict
    thresholds_pc: dict
    n: int
    n_nonpositive: np.ndarray

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
    star: ObservedStar, model: ForwardModel, covs, draws: CommonDraws, *, thresholds=DEFAULT_THRESHOLDS
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

    Returns
    -------
    ScenarioMetrics

    Notes
    -----
    The model's nuisance draws (focusing masses) take one stream for the call,
    :func:`~perierr.propagate.montecarlo.nuisance_rng` of the draws' seed.
    """
    covs = np.asarray(covs, dtype=float).reshape(-1, 6, 6)
    k, n = covs.shape[0], draws.n
    mean = np.array(star.mean)
    factors = np.stack([psd_factor(c) for c in covs])  # (K, 6, 6)
    out = np.empty((k, n, 3))
    valid = np.empty((k, n), dtype=bool)
    per_chunk = max(1, _CHUNK_ROWS // n)
    rng = nuisance_rng(draws.seed)
    for start in range(0, k, per_chunk):
        stop = min(k, start + per_chunk)
        x = np.matmul(draws.z, np.swapaxes(factors[start:stop], 1, 2)) + mean
        ok = x[..., PARALLAX] > 0
        valid[start:stop] = ok
        flat = x.reshape(-1, 6)
        res = np.full((flat.shape[0], 3), np.nan)
        keep = ok.reshape(-1)
        res[keep] = model.evaluate_draws(flat[keep], rng, reference=mean).as_array()
        out[start:stop] = res.reshape(stop - start, n, 3)
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
    return ScenarioMetrics(MetricTable(values), probs, pcs, n, (~valid).sum(axis=1))


def scenario_monte_carlo(
    star: ObservedStar,
    model: ForwardModel,
    draws: CommonDraws,
    *,
    levels=DEFAULT_LEVELS,
    thresholds=DEFAULT_THRESHOLDS,
    progress=None,
) -> MonteCarloResult:
    """The Monte Carlo of one scenario (``star``'s mean and covariance) on the common draws.

    The model's nuisance draws take :func:`~perierr.propagate.montecarlo.nuisance_rng` of the draws' seed,
    so every scenario shares them too; ``levels``, ``thresholds`` and ``progress`` as in
    :func:`perierr.propagate.monte_carlo`.
    """
    samples = Samples(draws.samples(star.mean, star.cov), seed=draws.seed, method="gaussian (common draws)")
    return propagate_samples(
        samples, model, reference=star.mean, rng=nuisance_rng(draws.seed), levels=levels, thresholds=thresholds,
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
        On the same standard-normal draws.
    linear_current, linear_improved : LinearResult
    budget_current, budget_improved : LinearBudget
    """

    measurements: tuple
    current: ObservedStar
    improved: ObservedStar
    mc_current: MonteCarloResult
    mc_improved: MonteCarloResult
    linear_current: LinearResult
    linear_improved: LinearResult
    budget_current: LinearBudget
    budget_improved: LinearBudget
    settings: dict = field(default_factory=dict)

    def width90(self, output: str = "distance_pc") -> tuple:
        """(current, improved) widths of the central 90 % interval, output units."""
        a = self.mc_current.summaries[output]
        b = self.mc_improved.summaries[output]
        return a.quantile(0.95) - a.quantile(0.05), b.quantile(0.95) - b.quantile(0.05)

    def headline(self) -> str:
        """One sentence: what the measurement buys for the d_ph interval."""
        a, b = self.width90("distance_pc")
        what = " and ".join(m.label for m in self.measurements)
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
        return {
            "measure": [m.to_dict() for m in self.measurements],
            "headline": self.headline(),
            "current": {
                "inputs": self.current.to_dict(), "monte_carlo": self.mc_current.to_dict(),
                "linearized": self.linear_current.to_dict(), "budget": self.budget_current.to_dict(),
            },
            "improved": {
                "inputs": self.improved.to_dict(), "monte_carlo": self.mc_improved.to_dict(),
                "linearized": self.linear_improved.to_dict(), "budget": self.budget_improved.to_dict(),
            },
            "change": change,
            "settings": dict(self.settings),
        }


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
) -> WhatIf:
    """Recompute intervals, threshold probabilities and budget after new measurements.

    Parameters
    ----------
    star : ObservedStar
    model : ForwardModel
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

    Notes
    -----
    Both scenarios draw the model's nuisance parameters (focusing masses) from
    the same stream, :func:`~perierr.propagate.montecarlo.nuisance_rng` of the
    draws' seed, so they share those draws too.
    """
    require_positive_parallax(star.mean[PARALLAX], method="the re-observation planner")
    measurements = tuple(measurements)
    for m in measurements:
        if not isinstance(m, Measurement):
            raise InputError("measurements", m, "expected Measurement objects (see perierr.plan.parse_measure)")
    draws = common_draws(n, seed) if draws is None else draws
    improved = updated_star(star, measurements)

    def run(s):
        return scenario_monte_carlo(s, model, draws, levels=levels, thresholds=thresholds, progress=progress)

    lin0, lin1 = linearize(star, model), linearize(improved, model)
    return WhatIf(
        measurements, star, improved, run(star), run(improved), lin0, lin1,
        star_budget(star, lin0), star_budget(improved, lin1),
        {"n": draws.n, "seed": draws.seed, "common_random_numbers": True, "model": model.describe()},
    )
