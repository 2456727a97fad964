"""Monte Carlo propagation: draw, push through the model, summarize.

Samples whose parallax is <= 0 cannot be inverted; they are counted and
reported, carry an unbounded (infinite) perihelion distance in the threshold
probabilities, and are left out of the quantiles, which therefore describe the
samples at a finite distance.

The outputs stay aligned with the samples: ``MonteCarloResult.perihelion`` has
one row per draw, NaN (flag False) where the parallax is <= 0, and
``MonteCarloResult.valid`` marks the draws that were evaluated. Plain arrays
with a mask rather than numpy masked arrays: the arrays go straight into numpy
and the model code, and :meth:`MonteCarloResult.valid_values` is the one place
that selects the draws a summary describes.

Randomness: the draws come from ``numpy.random.default_rng(seed)``; the
model's nuisance parameters (the star's mass under focusing) from a stream of
their own, :func:`nuisance_rng` of the same seed, handed to
:meth:`~perierr.models.base.ForwardModel.evaluate_draws`.

Progress: a ``progress(done, total)`` callable (e.g.
:class:`perierr.progress.TerminalProgress`) is called with ``done = 0`` before
the draws go through the model, then handed to the model, which calls it as
chunks finish and with ``done == total`` at the end; ``total`` counts the
evaluated draws (parallax > 0). The adaptive mode evaluates every draw again
in each round, so each round is a pass of its own.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from ..errors import InputError, PerierrWarning
from ..models.base import ForwardModel, Perihelion, with_progress
from ..sampling.gaussian import Samples, draw_gaussian, require_draws, resolve_seed
from ..star import ObservedStar
from ..star.checks import require_motion, require_positive_parallax
from ..summary import DEFAULT_LEVELS, canonical_level, summarize, threshold_probability
from ..thresholds import DEFAULT_THRESHOLDS, parse_thresholds
from ..units import OUTPUT_LABELS, OUTPUTS, PARALLAX

if TYPE_CHECKING:
    from astropy.units import Quantity

__all__ = [
    "DEFAULT_THRESHOLDS", "MonteCarloResult", "evaluate_aligned", "monte_carlo", "nuisance_rng", "propagate_samples",
]  # fmt: skip


@dataclass(frozen=True)
class MonteCarloResult:
    """Outcome of a Monte Carlo propagation.

    Attributes
    ----------
    samples : Samples
        The input draws (with weights, for reweighted samples).
    perihelion : Perihelion
        Outputs aligned with the samples, one row per draw: NaN (and flag
        False) for the draws with parallax <= 0, which were not evaluated.
    valid : ndarray of bool, shape (n,)
        True for the draws with parallax > 0 (the rows the summaries describe).
    summaries : dict
        Output name -> :class:`~perierr.summary.OutputSummary`.
    thresholds : list of ThresholdProbability
    levels : tuple of float
    convergence : dict
        For the adaptive mode: target, achieved worst relative error, rounds.
    """

    samples: Samples
    perihelion: Perihelion
    valid: np.ndarray
    summaries: dict
    thresholds: list
    levels: tuple
    convergence: dict = field(default_factory=dict)

    @property
    def n(self) -> int:
        """Number of samples drawn."""
        return self.samples.n

    @property
    def n_valid(self) -> int:
        """Samples with parallax > 0 (the ones the summaries describe)."""
        return int(np.count_nonzero(self.valid))

    @property
    def n_nonpositive_parallax(self) -> int:
        """Samples with parallax <= 0 (counted, not silently dropped)."""
        return self.n - self.n_valid

    def valid_values(self, x) -> tuple:
        """The draws a summary describes: ``x`` and the weights over the samples with parallax > 0.

        Parameters
        ----------
        x : array_like, shape (n,)
            Aligned with the samples (e.g. ``perihelion.distance_pc``, or
            another model evaluated on the same draws).

        Returns
        -------
        values : ndarray, shape (n_valid,)
        weights : ndarray, shape (n_valid,), or None
        """
        return _kept(np.asarray(x), self.valid, self.samples.weights)

    def interval(self, output: str = "distance_pc", level: float = 0.9) -> tuple:
        """Central ``level`` interval of an output, from the kept samples."""
        x, w = self.valid_values(self.perihelion.output(output))
        s = summarize(x, levels=(0.5 - level / 2, 0.5 + level / 2), weights=w)
        return s.quantile(0.5 - level / 2), s.quantile(0.5 + level / 2)

    def worst_relative_error(self) -> float:
        """Largest quantile MC error relative to the output's (q84 - q16) / 2."""
        worst = 0.0
        for s in self.summaries.values():
            half = 0.5 * (s.quantiles.get(0.84, s.median) - s.quantiles.get(0.16, s.median))
            if half > 0:
                worst = max(worst, max(s.quantile_se.values()) / half)
        return worst

    def to_dict(self) -> dict:
        """JSON block: ``n``, ``seed`` and one summary per output."""
        out = {
            "n": self.n,
            "seed": self.samples.seed,
            "method": self.samples.method,
            "effective_size": self.samples.effective_size,
            "n_nonpositive_parallax": self.n_nonpositive_parallax,
        }
        for q in OUTPUTS:
            out[q] = self.summaries[q].to_dict()
        out["thresholds"] = [t.to_dict() for t in self.thresholds]
        flags = self.perihelion.flags
        out["n_flagged"] = 0 if flags is None else int(np.count_nonzero(flags))
        out["model_info"] = scalar_info(self.perihelion.info)
        if self.convergence:
            out["convergence"] = dict(self.convergence)
        return out


def nuisance_rng(seed) -> np.random.Generator:
    """The generator of a run's nuisance draws (focusing masses): a stream of its own, fixed by the run's seed.

    ``numpy.random.default_rng([seed, 1])``; the draws of the observables use
    ``default_rng(seed)``. None (no seed) gives a fresh, unrecorded stream.
    """
    return np.random.default_rng(None if seed is None else [seed, 1])


def evaluate_aligned(model: ForwardModel, values, *, reference=None, rng=None, progress=None) -> tuple:
    """The model on every draw with parallax > 0, aligned with the draws.

    Parameters
    ----------
    model : ForwardModel
    values : ndarray, shape (n, 6)
        The draws.
    reference : array_like, shape (6,), optional
        The point to linearize around (see :meth:`ForwardModel.evaluate`).
    rng : numpy.random.Generator, optional
        Draws of the model's nuisance parameters (see :meth:`ForwardModel.evaluate_draws`).
    progress : callable, optional
        ``progress(done, total)`` over the evaluated draws (module docstring).

    Returns
    -------
    perihelion : Perihelion
        One row per draw; NaN outputs (flag False) where the parallax is <= 0.
    valid : ndarray of bool, shape (n,)
        True where the parallax is > 0.
    """
    compact, valid = _evaluate_valid(model, values, reference, rng, progress)
    return (compact if valid.all() else compact.aligned(valid)), valid


def _evaluate_valid(model, values, reference, rng, progress=None) -> tuple:
    """The model on the draws with parallax > 0 only (one row each, in order), and the mask of those draws."""
    valid = values[:, PARALLAX] > 0
    if valid.all():
        return _evaluate_draws(model, values, reference, rng, progress), valid
    # compress the (6, n) layout when the draws have it: about twice as fast as boolean indexing,
    # and it keeps each observable contiguous for the model
    rows = np.compress(valid, values.T, axis=1).T
    if rows.shape[0] == 0:
        raise InputError(
            "parallax",
            float(np.max(values[:, PARALLAX])) if values.shape[0] else None,
            "every sample has parallax <= 0 (this is the largest), so no perihelion can be computed by "
            "inverting parallaxes; use a distance prior",
        )
    return _evaluate_draws(model, rows, reference, rng, progress), valid


def _evaluate_draws(model, rows, reference, rng, progress) -> Perihelion:
    """``model.evaluate_draws`` on the rows, reporting ``progress`` from 0 to every row (module docstring)."""
    if progress is not None:
        progress(0, rows.shape[0])
    return with_progress(model.evaluate_draws, rows, rng, reference=reference, progress=progress)


def _kept(x, valid, weights) -> tuple:
    """``x`` and ``weights`` over the True rows of ``valid`` (no copy when every row is valid)."""
    if valid.all():
        return x, weights
    return x[valid], None if weights is None else weights[valid]


def propagate_samples(
    samples: Samples,
    model: ForwardModel,
    *,
    reference=None,
    rng=None,
    levels=DEFAULT_LEVELS,
    thresholds=DEFAULT_THRESHOLDS,
    progress: Callable[[int, int], None] | None = None,
) -> MonteCarloResult:
    """Push samples through a forward model and summarize the outputs.

    Parameters
    ----------
    samples : Samples
    model : ForwardModel
    reference : array_like, shape (6,), optional
        Nominal observables: the point models linearize around.
    rng : numpy.random.Generator, optional
        Draws of the model's nuisance parameters, one per sample (e.g. the
        star's mass under focusing); None keeps them at their nominal values.
        :func:`monte_carlo` passes :func:`nuisance_rng` of its seed.
    levels : sequence of float
        Quantile levels to report (the defaults are always included).
    thresholds : sequence
        Distances for P(d_ph < D); see :func:`perierr.thresholds.parse_thresholds`.
    progress : callable, optional
        ``progress(done, total)``, called as the model finishes draws (module docstring).
    """
    compact, valid = _evaluate_valid(model, samples.values, reference, rng, progress)
    all_valid = bool(valid.all())
    w_all = samples.weights
    w = None if w_all is None or all_valid else w_all[valid]
    levels = tuple(sorted(set(DEFAULT_LEVELS) | {canonical_level(q) for q in levels}))
    # the summaries describe the valid draws: the model's own rows, before they are spread out
    summaries = {
        q: summarize(compact.output(q), name=q, unit=OUTPUT_LABELS[q], levels=levels, weights=w_all if all_valid else w)
        for q in OUTPUTS
    }
    ph = compact if all_valid else compact.aligned(valid)
    # the aligned distances serve the thresholds as they are: NaN (parallax <= 0) is never below a threshold
    probs = [
        threshold_probability(ph.distance_pc, pc, label=label, weights=w_all)
        for label, pc in parse_thresholds(thresholds)
    ]
    return MonteCarloResult(samples, ph, valid, summaries, probs, levels)


def monte_carlo(
    star: ObservedStar,
    model: ForwardModel,
    *,
    n: int = 100_000,
    seed: int | np.random.Generator | None = None,
    levels: Sequence[float] = DEFAULT_LEVELS,
    thresholds: Sequence[str | float | Quantity] = DEFAULT_THRESHOLDS,
    target_error: float | None = None,
    max_samples: int = 10_000_000,
    progress: Callable[[int, int], None] | None = None,
) -> MonteCarloResult:
    """Monte Carlo propagation of a star's Gaussian errors through a model.

    Parameters
    ----------
    star : ObservedStar
    model : ForwardModel
    n : int
        Number of draws (the first round, in the adaptive mode).
    seed : int, numpy.random.Generator or None
        Seed of the ``numpy.random.Generator``; None picks one, a Generator gives one, and the
        integer is recorded (see :func:`perierr.sampling.gaussian.resolve_seed`).
        The model's nuisance draws use :func:`nuisance_rng` of the same seed.
    levels, thresholds
        See :func:`propagate_samples`.
    target_error : float, optional
        Adaptive mode: keep drawing until every reported quantile's Monte Carlo
        error is below ``target_error`` times the output's (q84 - q16) / 2.
    max_samples : int
        Cap on the adaptive mode; a warning says when the target was not met.
    progress : callable, optional
        ``progress(done, total)``, called as the model finishes draws (module
        docstring; each round of the adaptive mode is a pass of its own).

    Returns
    -------
    MonteCarloResult
    """
    require_positive_parallax(star.mean[PARALLAX], method="Monte Carlo by parallax inversion")
    require_motion(star.mean)
    n = require_draws(n)
    if target_error is not None:
        if isinstance(max_samples, (int, np.integer)) and max_samples < n:
            raise InputError("max_samples", max_samples, f"expected at least n = {n} (the first round's draws)")
        max_samples = require_draws(max_samples, field="max_samples", minimum=n)
    seed = resolve_seed(seed)
    rng = np.random.default_rng(seed)
    values = draw_gaussian(star.mean, star.cov, n, rng)
    nuisance = nuisance_rng(seed)  # one stream for every round of the adaptive mode

    def run(vals):
        samples = Samples(vals, seed=seed)
        return propagate_samples(
            samples, model, reference=star.mean, rng=nuisance, levels=levels, thresholds=thresholds, progress=progress
        )

    result = run(values)
    if target_error is None:
        return result
    if not target_error > 0:
        raise InputError("target_error", target_error, "expected a positive fraction, e.g. 0.01")
    rounds = 1
    worst = result.worst_relative_error()
    while worst > target_error and values.shape[0] < max_samples:
        need = math.ceil(values.shape[0] * 1.2 * (worst / target_error) ** 2)
        extra = min(max(need, values.shape[0] + 1000), max_samples) - values.shape[0]
        values = np.concatenate([values, draw_gaussian(star.mean, star.cov, extra, rng)])
        result = run(values)
        worst = result.worst_relative_error()
        rounds += 1
    met = worst <= target_error
    if not met:
        warnings.warn(
            f"Monte Carlo error target {target_error} not met with the cap of {max_samples} "
            f"samples (worst relative quantile error {worst:.3g}); raise max_samples",
            PerierrWarning,
            stacklevel=2,
        )
    convergence = {"target_error": target_error, "achieved": worst, "rounds": rounds, "met": met}
    return MonteCarloResult(
        result.samples,
        result.perihelion,
        result.valid,
        result.summaries,
        result.thresholds,
        result.levels,
        convergence,
    )


def scalar_info(info: dict) -> dict:
    """The JSON-able scalar part of a model's diagnostics: scalars and lists of at most 16 (no arrays)."""
    out = {}
    for key, value in info.items():
        if isinstance(value, dict):
            inner = scalar_info(value)
            if inner:
                out[key] = inner
        elif isinstance(value, (str, bool, int, float, np.integer, np.floating, np.bool_)) or value is None:
            out[key] = value.item() if isinstance(value, np.generic) else value
        elif (
            isinstance(value, (list, tuple))
            and len(value) <= 16
            and all(isinstance(v, (str, int, float, np.integer, np.floating)) for v in value)
        ):
            out[key] = [v.item() if isinstance(v, np.generic) else v for v in value]
    return out
