"""Gain curves: interval width, sigma and a threshold probability vs the new precision."""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError, PerierrWarning
from ..models.base import ForwardModel
from ..star import ObservedStar
from ..units import DEC, INDEX, OBSERVABLES, OUTPUTS, PARALLAX
from .metrics import Metric, MetricTable
from .update import UNIT_LABELS, input_name, to_catalogue, update_covariance
from .whatif import (
    STATISTICS,
    CommonDraws,
    _check_prior_method,
    _min_effective_size,
    common_draws,
    prepare,
    require_plannable,
    resolve_plan_prior,
    scenario_metrics,
)  # fmt: skip

#: The statistic :meth:`GainCurves.gain` shrinks by default: the 90 % width of d_ph.
WIDTH90_DISTANCE = Metric("distance_pc", "width90")

__all__ = ["GainCurves", "gain_curves"]


@dataclass(frozen=True)
class GainCurves:
    """Output statistics as a function of a new measurement's precision, per input.

    All scenarios share one set of draws (common random numbers), so the
    curves are smooth and differences between inputs are real.

    Attributes
    ----------
    inputs : tuple of str
        Inputs with a curve (held-exact inputs are skipped).
    precision : dict
        Input -> ndarray (p,) of new standard errors, catalogue units, decreasing.
    units : dict
        Input -> catalogue unit.
    curves : dict
        Input -> :class:`~perierr.plan.metrics.MetricTable` {Metric -> ndarray (p,)}:
        width90, std and median of each output (output units), the probability
        of ``threshold``, and each output's linear_sigma (closed form, no Monte
        Carlo noise; of the Gaussian likelihood, and absent when the nominal
        parallax is <= 0). Keys may also be given as strings (``"distance_pc.width90"``,
        ``"p:<threshold>"``). Under a distance prior the Monte Carlo statistics
        are of the posterior (weighted common draws).
    sigma : dict
        Input -> today's standard error, catalogue units.
    current : MetricTable
        Metric -> today's value.
    threshold : str
    settings : dict
    effective_size : dict
        Input -> ndarray (p,): the Kish effective sample size of each scenario's weights under a distance
        prior (the draws with parallax > 0 without one); ``"today"`` -> today's.
    """

    inputs: tuple
    precision: dict
    units: dict
    sigma: dict
    curves: dict
    current: MetricTable
    threshold: str
    settings: dict = field(default_factory=dict)
    effective_size: dict = field(default_factory=dict)

    @property
    def probability(self) -> Metric:
        """The metric of the probability curve, P(d_ph < threshold)."""
        return Metric.probability(self.threshold)

    def gain(self, input: str, metric=WIDTH90_DISTANCE) -> np.ndarray:
        """Relative shrink ``1 - value / today`` of a statistic (a Metric or its key) along one curve."""
        now = self.current[metric]
        return 1.0 - self.curves[input][metric] / now if now > 0 else np.zeros_like(self.precision[input])

    def to_dict(self) -> dict:
        """Plain dict for JSON (lists)."""
        return {
            "threshold": self.threshold,
            "current": self.current.by_key(),
            "inputs": {
                name: {
                    "precision": self.precision[name].tolist(),
                    "unit": self.units[name],
                    "today_sigma": self.sigma[name],
                    **self.curves[name].by_key(lambda v: v.tolist()),
                }
                for name in self.inputs
            },
            "settings": dict(self.settings),
            "effective_size": {k: (v.tolist() if isinstance(v, np.ndarray) else v)
                               for k, v in self.effective_size.items()},
        }  # fmt: skip


def gain_curves(
    star: ObservedStar,
    model: ForwardModel,
    *,
    inputs=None,
    n_points: int = 20,
    span=(3.0, 0.01),
    precisions=None,
    threshold: str = "20000 au",
    n: int = 20_000,
    seed: int | np.random.Generator | None = None,
    draws: CommonDraws | None = None,
    distance_prior=None,
    prior_method: str = "auto",
    parallax_offset=None,
    error_inflation=None,
    focusing: bool = False,
) -> GainCurves:
    """Gain curves for each input.

    Parameters
    ----------
    star : ObservedStar
    model : ForwardModel
    inputs : sequence of str, optional
        Default: every input with a non-zero error.
    n_points : int
        Precisions per input.
    span : (float, float)
        First and last precision as multiples of today's error (log spaced).
    precisions : dict, optional
        Input -> explicit precisions in catalogue units (overrides ``span``).
    threshold : str
        Distance for the P(d_ph < D) curve.
    n : int
        Common draws (ignored when ``draws`` is given).
    seed : int, numpy.random.Generator or None
        Seed of the common draws (see :func:`perierr.sampling.gaussian.resolve_seed`).
    draws : CommonDraws, optional
    distance_prior, prior_method
        As in :func:`perierr.analyze`: every point of a curve is the posterior prior x the updated Gaussian
        likelihood, from the common draws weighted by the prior (:mod:`perierr.plan.whatif`). The curves
        always reweight (MCMC per point would lose the common random numbers); a warning says when a
        scenario's effective sample size is below ``min(1000, n / 10)``.
    parallax_offset, error_inflation, focusing
        As in :func:`perierr.analyze`, applied first (:func:`perierr.plan.whatif.prepare`).
    """
    star, model, _ = prepare(
        star, model, parallax_offset=parallax_offset, error_inflation=error_inflation, focusing=focusing
    )
    prior = resolve_plan_prior(distance_prior)
    _check_prior_method(prior_method)
    require_plannable(star, prior)
    if int(n_points) < 2:
        raise InputError("n_points", n_points, "expected at least 2 precisions per curve")
    if not (span[0] > 0 and span[1] > 0):
        raise InputError("span", span, "expected two positive multiples of today's error, e.g. (3, 0.01)")
    names = [o for o, s in zip(OBSERVABLES, star.sigma) if s > 0] if inputs is None else [input_name(i) for i in inputs]
    draws = common_draws(n, seed) if draws is None else draws
    dec = float(star.mean[DEC])
    jac = np.asarray(model.jacobian(star.mean), dtype=float) if star.mean[PARALLAX] > 0 else None
    covs, grids = [star.cov[None]], {}
    for name in names:
        idx = INDEX[name]
        if star.sigma[idx] == 0:
            raise InputError("inputs", name, "this input is held exact (zero error); leave it out")
        if precisions is not None and name in precisions:
            from .update import make_measurement

            cat = np.sort(np.asarray([float(p) for p in precisions[name]]))[::-1]
            grid = np.array([make_measurement(name, p, dec=dec).precision for p in cat])
        else:
            grid = star.sigma[idx] * np.geomspace(span[0], span[1], int(n_points))
        grids[name] = grid
        covs.append(update_covariance(star.cov, idx, grid))
    allcov = np.concatenate(covs)
    metrics = scenario_metrics(star, model, allcov, draws, thresholds=[threshold], distance_prior=prior)
    label = next(iter(metrics.probabilities))
    columns = {Metric(q, s): metrics.values[Metric(q, s)] for q in OUTPUTS for s in STATISTICS}
    columns[Metric.probability(label)] = metrics.probabilities[label]
    if jac is not None:
        lin = np.sqrt(np.maximum(np.einsum("mi,kij,mj->km", jac, allcov, jac), 0.0))  # (K, 3)
        columns.update({Metric(q, "linear_sigma"): lin[:, j] for j, q in enumerate(OUTPUTS)})
    ess = metrics.effective_size
    if prior is not None and ess.min() < _min_effective_size(draws.n):
        warnings.warn(
            f"gain curves under the {prior.name} prior: the smallest effective sample size of the reweighted "
            f"draws is {ess.min():.0f} of {draws.n:,}; the curves are noisy there (use more draws)",
            PerierrWarning,
            stacklevel=2,
        )
    current = MetricTable((m, float(v[0])) for m, v in columns.items())
    curves, start, sizes = {}, 1, {"today": float(ess[0])}
    for name in names:
        sl = slice(start, start + grids[name].size)
        curves[name] = MetricTable((m, v[sl]) for m, v in columns.items())
        sizes[name] = ess[sl]
        start = sl.stop
    settings = {"n": draws.n, "seed": draws.seed, "common_random_numbers": True, "n_points": int(n_points)}
    if prior is not None:
        settings.update(distance_prior=metrics.prior, prior_method="reweight (common draws)")
    return GainCurves(
        tuple(names),
        {nm: np.asarray(to_catalogue(nm, g, dec=dec)) for nm, g in grids.items()},
        {nm: UNIT_LABELS[nm] for nm in names},
        {nm: float(to_catalogue(nm, star.sigma[INDEX[nm]], dec=dec)) for nm in names},
        curves, current, label, settings, sizes,
    )
