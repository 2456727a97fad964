"""Preposterior analysis: the probability that a new measurement settles the question.

The what-if planner (:mod:`perierr.plan.whatif`) assumes that the new value
lands on today's mean and only the covariance shrinks. Here the new value is
not known yet, so it is drawn from today's *predictive* distribution, and the
answer after the measurement is computed for each possible value:

1. **Futures.** A new independent measurement of input i with standard error
   s observes ``y = x_i + s eps``. Draw ``x`` from today's posterior (the
   Gaussian N(mean, Sigma); under a distance prior, Gaussian draws weighted by
   the prior and resampled by their weights) and ``eps ~ N(0, 1)``: K futures
   ``y_k``. Several measurements are independent observations of the same
   ``x``, each with its own ``eps``.
2. **Future posteriors.** The catalogue likelihood times the new one is
   Gaussian, N(mean'_k, Sigma'), by the Kalman update (applied in turn for
   several measurements)::

       mean'_k = mean + Sigma e_i (y_k - mean_i) / (Sigma_ii + s^2)
       Sigma'  = Sigma - Sigma e_i e_i^T Sigma / (Sigma_ii + s^2)

   (:func:`~perierr.plan.update.update_covariance`). Under a prior the future
   posterior is the prior times that Gaussian: its draws are weighted by the
   prior (:func:`~perierr.sampling.reweight.log_weights`). Every future uses the
   same standard normals ``z`` (n_inner, 6) mapped through ``mean'_k + z L'^T``
   (common random numbers), so futures differ by their values, not by noise.
3. **Statistics per future.** P_k = P(d_ph < D), the 90 % widths of t_ph,
   d_ph, v_ph (weighted quantiles under a prior), means, and whether the goal
   is settled (for a decisive goal: P_k < alpha or P_k > 1 - alpha).

The probability that the new data settle the question is the fraction of
settled futures (binomial Monte Carlo error ``sqrt(p (1 - p) / K)``; each P_k
itself resolves probabilities to about ``1 / n_inner``). Beside it, labelled,
the planner's "lands on today's mean" answer: the future whose new value equals
today's mean.

Draws with parallax <= 0 never pass a threshold; without a prior they are left
out of quantiles and means (as :func:`~perierr.plan.whatif.scenario_metrics`),
under a prior they have zero weight.

References
----------
Raiffa, H. & Schlaifer, R. 1961, Applied Statistical Decision Theory, Ch. 4
(preposterior analysis); Kalman, R. E. 1960, J. Basic Eng. 82, 35 (the update).
The average of the future posterior means is today's posterior mean (law of
total expectation), which the tests check.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError, PerierrWarning
from ..sampling.gaussian import draw_gaussian, psd_factor, require_draws, resolve_seed
from ..sampling.reweight import log_weights
from ..star import ObservedStar
from ..star.checks import require_positive_parallax
from ..thresholds import DEFAULT_THRESHOLDS, parse_thresholds
from ..units import AU_PER_PC, DEC, OUTPUTS, PARALLAX
from .goals import Goal, decide_goal
from .update import Measurement, make_measurement, update_covariance

__all__ = ["FutureOutcomes", "PosteriorAnswer", "Preposterior", "preposterior"]

#: Goal used when none is given: is the star passing within 20,000 au?
DEFAULT_DECISION = "20000 au"

#: Fewest futures accepted (the binomial error of P(settle) is at most 0.5 / sqrt(K)).
MIN_FUTURES = 20

#: Fewest inner draws per future posterior.
MIN_INNER = 100

#: Rows per model call (the futures are processed in chunks of about this many draws).
CHUNK_ROWS = 1_000_000

#: Gaussian draws of today's posterior resampled under a prior: at least this many, and 50 per future.
POOL_MIN = 100_000

_LEVELS = (0.05, 0.95)


@dataclass(frozen=True)
class PosteriorAnswer:
    """Statistics of one posterior (today's, or the one if the new value lands on today's mean).

    Attributes
    ----------
    label : str
        ``"today"`` or ``"lands on today's mean"``.
    value : float
        The goal's statistic: P(d_ph < D) for a decisive goal, else the 90 % width or sigma of its output.
    settled : bool
        Whether the goal is met.
    width90 : dict
        Output name -> width of the central 90 % interval (output units).
    mean : dict
        Output name -> posterior mean (output units).
    std : dict
        Output name -> posterior standard deviation (output units).
    mean_se : dict
        Output name -> Monte Carlo error of ``mean`` from the inner draws (delta method of self-normalized
        importance sampling, ``sqrt(sum w^2 (x - mean)^2) / sum w``; ``std / sqrt(n)`` without a prior).
    probabilities : dict
        Threshold label -> P(d_ph < D).
    effective_size : float
        Kish effective number of inner draws (n_inner without a prior, less the draws with parallax <= 0).
    """

    label: str
    value: float
    settled: bool
    width90: dict
    mean: dict
    std: dict
    mean_se: dict
    probabilities: dict
    effective_size: float

    def to_dict(self) -> dict:
        """Plain dict for JSON."""
        return {
            "label": self.label,
            "value": self.value,
            "settled": self.settled,
            "width90": dict(self.width90),
            "distance_au_width90": self.width90["distance_pc"] * AU_PER_PC,
            "mean": dict(self.mean),
            "std": dict(self.std),
            "mean_se": dict(self.mean_se),
            "probabilities": dict(self.probabilities),
            "effective_size": self.effective_size,
        }


@dataclass(frozen=True)
class FutureOutcomes:
    """The K possible futures of one set of new measurements (one precision setting).

    Attributes
    ----------
    measurements : tuple of Measurement
        In the order of ``OBSERVABLES`` (then precision), whatever order they were given in.
    y : ndarray, shape (K, M)
        The future values of the measured inputs (internal units), one column per measurement.
    value : ndarray, shape (K,)
        The goal's statistic in each future (P_k for a decisive goal).
    settled : ndarray of bool, shape (K,)
    width90, mean, std, mean_se : dict
        Output name -> ndarray (K,): the 90 % width, the posterior mean, standard deviation and the inner Monte
        Carlo error of the mean in each future (as in :class:`PosteriorAnswer`; the inner draws are common to
        the futures, so their errors are correlated).
    probabilities : dict
        Threshold label -> ndarray (K,), P(d_ph < D) in each future.
    effective_size : ndarray, shape (K,)
        Kish effective number of inner draws in each future.
    on_mean : PosteriorAnswer
        The planner's convention beside it: the new value lands on today's mean.
    p_settle : float
        Fraction of futures that settle the goal.
    p_settle_se : float
        Its binomial Monte Carlo error ``sqrt(p (1 - p) / K)``.
    """

    measurements: tuple
    y: np.ndarray
    value: np.ndarray
    settled: np.ndarray
    width90: dict
    mean: dict
    std: dict
    mean_se: dict
    probabilities: dict
    effective_size: np.ndarray
    on_mean: PosteriorAnswer
    p_settle: float
    p_settle_se: float

    @property
    def n_future(self) -> int:
        """Number of futures K."""
        return int(self.value.shape[0])

    def width_summary(self, output: str = "distance_pc") -> dict:
        """Distribution of the future 90 % width over the futures: median, 5 % and 95 % points, mean."""
        w = self.width90[output]
        w = w[np.isfinite(w)]
        if w.size == 0:
            return {"median": math.nan, "q05": math.nan, "q95": math.nan, "expected": math.nan}
        lo, med, hi = np.quantile(w, [0.05, 0.5, 0.95], method="hazen")
        return {"median": float(med), "q05": float(lo), "q95": float(hi), "expected": float(w.mean())}

    def expected_width(self, output: str = "distance_pc") -> float:
        """Mean of the future 90 % width over the futures (output units)."""
        return self.width_summary(output)["expected"]

    def to_dict(self, today: PosteriorAnswer | None = None) -> dict:
        """Plain dict for JSON: summaries over the futures (not every future); gains against ``today``."""
        widths = {}
        for q in OUTPUTS:
            ws = self.width_summary(q)
            if today is not None:
                now = today.width90[q]
                ws["expected_gain"] = 1.0 - ws["expected"] / now if now > 0 else None
            widths[q] = ws
        probs = {}
        for label, p in self.probabilities.items():
            lo, med, hi = np.quantile(p, [0.05, 0.5, 0.95], method="hazen")
            probs[label] = {"expected": float(p.mean()), "median": float(med), "q05": float(lo), "q95": float(hi)}
        return {
            "measure": [m.to_dict() for m in self.measurements],
            "p_settle": self.p_settle,
            "p_settle_se": self.p_settle_se,
            "future_value": {
                "expected": float(np.mean(self.value)),
                "median": float(np.median(self.value)),
                "q05": float(np.quantile(self.value, 0.05, method="hazen")),
                "q95": float(np.quantile(self.value, 0.95, method="hazen")),
            },
            "width90": widths,
            "probabilities": probs,
            "effective_size_min": float(np.min(self.effective_size)),
            "lands_on_mean": self.on_mean.to_dict(),
        }


@dataclass(frozen=True)
class Preposterior:
    """How likely new measurements are to settle a goal, with today's answer beside it.

    Attributes
    ----------
    star : str
        The star's name.
    goal : Goal
    today : PosteriorAnswer
        Today's answer on the same inner draws (``today.settled``: already settled?).
    outcomes : tuple of FutureOutcomes
        One per precision setting (one unless ``precisions`` was given).
    thresholds_pc : dict
        Threshold label -> distance [pc].
    seed : int
        The integer seed; passing it back reproduces the result.
    n_future, n_inner : int
    settings : dict
        Model, prior, predictive sampling and chunking details.
    """

    star: str
    goal: Goal
    today: PosteriorAnswer
    outcomes: tuple
    thresholds_pc: dict
    seed: int
    n_future: int
    n_inner: int
    settings: dict = field(default_factory=dict)

    @property
    def p_settle(self) -> float:
        """P(the new data settle the goal) for the first (usually only) precision setting."""
        return self.outcomes[0].p_settle

    @property
    def p_settle_se(self) -> float:
        """Its binomial Monte Carlo error."""
        return self.outcomes[0].p_settle_se

    @property
    def inner_resolution(self) -> float:
        """``1 / n_inner``: the finest step of a future's probability P_k."""
        return 1.0 / self.n_inner

    def expected_gain(self, output: str = "distance_pc", index: int = 0) -> float:
        """``1 - E[width'] / width_today`` of an output's 90 % width for precision setting ``index``."""
        now = self.today.width90[output]
        return 1.0 - self.outcomes[index].expected_width(output) / now if now > 0 else math.nan

    def headline(self, index: int = 0) -> str:
        """One sentence for precision setting ``index``."""
        out = self.outcomes[index]
        what = " and ".join(m.label for m in out.measurements)
        already = " (already settled today)" if self.today.settled else ""
        return (
            f"measure {what}: P(the new data settle '{self.goal.describe()}') = {out.p_settle:.2f} "
            f"+- {out.p_settle_se:.2f}{already}; if the value lands on today's mean: "
            f"{'settled' if out.on_mean.settled else 'not settled'} ({self.goal.format(out.on_mean.value)})"
        )

    def to_dict(self) -> dict:
        """The JSON block: goal, today, each precision setting's futures and the lands-on-mean answer."""
        return {
            "kind": "preposterior",
            "star": self.star,
            "goal": self.goal.to_dict(),
            "today": self.today.to_dict(),
            "outcomes": [o.to_dict(self.today) for o in self.outcomes],
            "headline": [self.headline(i) for i in range(len(self.outcomes))],
            "thresholds_pc": dict(self.thresholds_pc),
            "n_future": self.n_future,
            "n_inner": self.n_inner,
            "inner_resolution": self.inner_resolution,
            "note": (
                f"P(settle) is the fraction of {self.n_future} futures drawn from today's predictive distribution "
                f"(binomial error shown); each future's probability is resolved to about 1/{self.n_inner}"
            ),
            "seed": self.seed,
            "settings": dict(self.settings),
        }


# ----------------------------------------------------------------------------------------------- input checks


def _count(field_name, value, minimum) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise InputError(field_name, value, f"expected a whole number >= {minimum}")
    return int(value)


def _resolve_goal(goal, alpha) -> Goal:
    if goal is None:
        return decide_goal(DEFAULT_DECISION, 0.05 if alpha is None else _alpha(alpha))
    if not isinstance(goal, Goal):
        raise InputError("goal", goal, "expected a Goal (perierr.plan.decide_goal or spread_goal) or None")
    if alpha is None:
        return goal
    if goal.kind != "decide":
        raise InputError("alpha", alpha, f"only a 'decide' goal takes alpha (this goal is {goal.kind!r})")
    return Goal("decide", threshold=goal.threshold, threshold_pc=goal.threshold_pc, alpha=_alpha(alpha))


def _alpha(alpha) -> float:
    try:
        a = float(alpha)
    except (TypeError, ValueError):
        a = math.nan
    if not 0.0 < a < 0.5:
        raise InputError("alpha", alpha, "expected a probability between 0 and 0.5 (exclusive), e.g. 0.05")
    return a


def _measurements(measurements, dec, *, names_allowed: bool) -> list:
    if isinstance(measurements, Mapping):
        return [make_measurement(k, v, dec=dec) for k, v in measurements.items()]
    if isinstance(measurements, (Measurement, str)):
        measurements = [measurements]
    out = []
    for m in measurements:
        if isinstance(m, Measurement):
            out.append(m)
        elif isinstance(m, str) and names_allowed:  # an input name: its precision comes from ``precisions``
            out.append(make_measurement(m, 0.0, dec=dec))
        elif isinstance(m, str):
            raise InputError("measurements", m, "an input name needs its precision: give precisions=..., "
                             "a Measurement or {input: precision}")
        else:
            raise InputError("measurements", m, "expected Measurement objects, input names or {input: precision}")
    if not out:
        raise InputError("measurements", measurements, "expected at least one new measurement")
    return out


def _precision_rows(base: list, precisions, dec) -> list:
    """One list of Measurements per precision setting (catalogue units in ``precisions``)."""
    if precisions is None:
        return [base]
    try:
        arr = np.asarray(precisions, dtype=float)
    except (TypeError, ValueError):
        raise InputError("precisions", precisions, "expected numbers (catalogue units)") from None
    m = len(base)
    if arr.ndim == 0:
        arr = arr.reshape(1, 1)
    elif arr.ndim == 1:
        arr = arr[:, None] if m == 1 else arr[None, :]
    if arr.ndim != 2 or arr.shape[1] != m or arr.shape[0] < 1:
        raise InputError(
            "precisions", np.shape(precisions), f"expected shape (P,) for one measurement or (P, {m}) for {m}"
        )
    if not np.all(np.isfinite(arr)) or np.any(arr < 0):
        raise InputError("precisions", arr.tolist(), "expected finite standard errors >= 0 (0 = exact)")
    return [[make_measurement(b.name, float(v), dec=dec) for b, v in zip(base, row)] for row in arr]


# -------------------------------------------------------------------------------------------------- the work


def _row_quantiles(x, w, probs) -> np.ndarray:
    """Weighted quantiles of each row of ``x`` (c, n): the definition of :func:`perierr.summary.weighted_quantiles`.

    Linear interpolation of the mid-point weighted CDF over the draws of positive weight, sorted stably
    (numpy's ``method="hazen"`` with equal weights). Rows without weight give NaN.
    """
    xs = np.where(w > 0, x, np.inf)
    order = np.argsort(xs, axis=1)
    sx = np.take_along_axis(xs, order, axis=1)
    if np.any((sx[:, 1:] == sx[:, :-1]) & np.isfinite(sx[:, 1:])):  # ties: their order sets the CDF (stable)
        order = np.argsort(xs, axis=1, kind="stable")
        sx = np.take_along_axis(xs, order, axis=1)
    xs = sx
    ws = np.take_along_axis(w, order, axis=1)
    csum = np.cumsum(ws, axis=1)
    total = csum[:, -1:]
    m = np.count_nonzero(ws > 0, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        cdf = np.where(ws > 0, (csum - 0.5 * ws) / total, np.inf)
        rows = np.arange(x.shape[0])
        out = np.empty((x.shape[0], len(probs)))
        for q, p in enumerate(probs):  # a few levels
            j = np.count_nonzero(cdf < p, axis=1)
            lo = np.maximum(j - 1, 0)
            hi = np.maximum(np.minimum(j, m - 1), 0)
            c_lo, c_hi = cdf[rows, lo], cdf[rows, hi]
            frac = np.where(c_hi > c_lo, (p - c_lo) / (c_hi - c_lo), 0.0)
            x_lo, x_hi = xs[rows, lo], xs[rows, hi]
            out[:, q] = np.where(m > 0, x_lo + frac * (x_hi - x_lo), np.nan)
    return out


def _statistics(model, means, which, zl, *, prior, thresholds, reference, rng):
    """Statistics of the posteriors ``means[r] + zl[which[r]]`` (rows r), chunked over rows.

    Returns arrays over rows: width90 (R, 3), mean (R, 3), std (R, 3), the error of the mean (R, 3),
    probabilities (R, T), effective size (R,).
    """
    n_rows, n = means.shape[0], zl.shape[1]
    width = np.empty((n_rows, 3))
    avg = np.empty((n_rows, 3))
    std = np.empty((n_rows, 3))
    mse = np.empty((n_rows, 3))
    probs = np.empty((n_rows, len(thresholds)))
    ess = np.empty(n_rows)
    per_chunk = max(1, CHUNK_ROWS // n)
    for start in range(0, n_rows, per_chunk):
        stop = min(n_rows, start + per_chunk)
        x = zl[which[start:stop]]  # (c, n, 6), a copy
        x += means[start:stop, None, :]
        plx = x[..., PARALLAX]
        ok = plx > 0
        flat = x.reshape(-1, 6)
        keep = ok.reshape(-1)
        if keep.all():
            res = np.asarray(model.evaluate_draws(flat, rng, reference=reference).as_array(), dtype=float)
        else:
            res = np.full((flat.shape[0], 3), np.nan)
            if keep.any():
                res[keep] = model.evaluate_draws(flat[keep], rng, reference=reference).as_array()
        res = res.reshape(stop - start, n, 3)
        ok &= np.all(np.isfinite(res), axis=-1)
        every = bool(ok.all())
        if prior is None:
            w = ok.astype(float)
        else:
            logw = log_weights(plx.reshape(-1), prior).reshape(plx.shape)
            logw = np.where(ok, logw, -np.inf)
            top = np.max(logw, axis=1, keepdims=True)
            with np.errstate(invalid="ignore"):
                w = np.where(np.isfinite(top), np.exp(logw - np.where(np.isfinite(top), top, 0.0)), 0.0)
        ww = w * w
        wsum = w.sum(axis=1)
        wwsum = ww.sum(axis=1)
        safe = np.where(wsum > 0, wsum, 1.0)
        ess[start:stop] = np.where(wsum > 0, wsum**2 / np.maximum(wwsum, 1e-300), 0.0)
        v = res if every else np.where(ok[..., None], res, 0.0)
        mu = np.einsum("cn,cnj->cj", w, v) / safe[:, None]
        sq = v - mu[:, None, :]
        sq *= sq
        dev2 = np.einsum("cn,cnj->cj", w, sq)
        with np.errstate(invalid="ignore", divide="ignore"):
            # delta method of self-normalized importance sampling (Owen 2013, Monte Carlo theory, Sect. 9.2)
            mse[start:stop] = np.sqrt(np.einsum("cn,cnj->cj", ww, sq)) / np.where(wsum > 0, wsum, np.nan)[:, None]
            # reliability-weights variance: the ddof=1 standard deviation when the weights are equal
            denom = wsum - wwsum / safe
            std[start:stop] = np.sqrt(np.where(denom[:, None] > 0, dev2 / denom[:, None], np.nan))
        avg[start:stop] = np.where(wsum[:, None] > 0, mu, np.nan)
        if every and prior is None:  # equal weights: numpy's hazen quantiles, the same definition
            lo, hi = np.quantile(res, _LEVELS, axis=1, method="hazen")
            width[start:stop] = hi - lo
        else:
            for j in range(3):
                lo, hi = _row_quantiles(res[..., j], w, _LEVELS).T
                width[start:stop, j] = hi - lo
        d = res[..., 1] if every else np.where(ok, res[..., 1], np.inf)
        # without a prior every draw counts (those with parallax <= 0 never pass); under one, the weights
        norm = float(n) if prior is None else safe
        for t, pc in enumerate(thresholds):
            probs[start:stop, t] = np.einsum("cn,cn->c", w, d < pc) / norm
    return width, avg, std, mse, probs, ess


def _predictive_x(star, k, prior, rng):
    """K draws of today's posterior of the observables, and a note of how they were made."""
    if prior is None:
        return draw_gaussian(star.mean, star.cov, k, rng), {"predictive": "gaussian"}
    pool_n = max(POOL_MIN, 50 * k)
    pool = draw_gaussian(star.mean, star.cov, pool_n, rng)
    logw = log_weights(pool[:, PARALLAX], prior)
    top = logw.max()
    if not np.isfinite(top):
        raise InputError(
            "distance prior", prior.name,
            f"no Gaussian draw of the parallax lies where the prior is non-zero ({prior.parameters})",
        )
    w = np.exp(logw - top)
    w /= w.sum()
    pick = rng.choice(pool_n, size=k, replace=True, p=w)
    info = {"predictive": "gaussian draws weighted by the prior, resampled", "pool": pool_n,
            "pool_effective_size": float(1.0 / np.dot(w, w))}  # fmt: skip
    return pool[pick], info


def _future_means(mean, cov, ms, y) -> tuple:
    """Kalman-updated means (K, 6) for values ``y`` (K, M) and the updated covariance (measurements in turn)."""
    mu = np.broadcast_to(np.asarray(mean, dtype=float), (y.shape[0], mean.shape[0])).copy()
    s = np.array(cov, dtype=float)
    for col, m in enumerate(ms):  # a few measurements
        denom = s[m.index, m.index] + m.precision**2
        gain = s[:, m.index] / denom if denom > 0 else np.zeros(s.shape[0])
        mu += (y[:, col] - mu[:, m.index])[:, None] * gain[None, :]
        s = update_covariance(s, m.index, m.precision)
    return mu, s


def preposterior(
    star: ObservedStar,
    model,
    measurements,
    *,
    goal: Goal | None = None,
    precisions=None,
    n_future: int = 200,
    n_inner: int = 2000,
    seed: int | np.random.Generator | None = None,
    prior=None,
    alpha: float | None = None,
    thresholds=DEFAULT_THRESHOLDS,
) -> Preposterior:
    """Probability that new measurements settle a goal, over the values they may return.

    Parameters
    ----------
    star : ObservedStar
    model : ForwardModel or str
        A forward model (any object whose ``evaluate_draws(observables, rng, reference=...)`` returns
        something with ``as_array()`` of shape (n, 3)), or a name for :func:`perierr.models.make_model`.
    measurements : sequence of Measurement, mapping or sequence of str
        The new measurements (:func:`~perierr.plan.update.make_measurement`), or ``{input: precision}`` in
        catalogue units, or input names when ``precisions`` gives the precisions. Several measurements are
        independent observations made together; their order does not matter.
    goal : Goal, optional
        What settles the question (:func:`~perierr.plan.goals.decide_goal` or
        :func:`~perierr.plan.goals.spread_goal`); default ``decide_goal("20000 au")``.
    precisions : array_like, optional
        Precision settings to compare, catalogue units (mas, mas/yr, km/s): shape (P,) for one measurement,
        (P, M) for M (columns in the order of ``measurements``; build a grid with ``numpy.meshgrid``).
        Replaces the measurements' own precisions. Every setting uses the same draws.
    n_future : int
        Futures K drawn from today's predictive distribution (at least 20).
    n_inner : int
        Draws of each future posterior (at least 100); common to every future.
    seed : int, numpy.random.Generator or None
        See :func:`perierr.sampling.gaussian.resolve_seed`; the integer is recorded.
    prior : DistancePrior, str or None
        A distance prior (:func:`perierr.priors.resolve_prior`), e.g. ``"edsd:L=1350pc"``; None: the Gaussian.
    alpha : float, optional
        Replaces a decisive goal's alpha (0 < alpha < 0.5).
    thresholds : sequence
        Distances for the reported P(d_ph < D) (the goal's threshold is added).

    Returns
    -------
    Preposterior

    Raises
    ------
    InputError
        Naming the field: an unknown input, a negative precision, too few futures or inner draws, alpha outside
        (0, 0.5), a goal that is not a Goal, a prior that does not overlap the parallax.

    Notes
    -----
    Draw order of ``numpy.random.default_rng(seed)``: the inner standard normals (n_inner, 6), today's posterior
    draws for the futures, then the measurement noises (K, M); the model's nuisance draws (focusing masses)
    take ``default_rng([seed, 1])`` (one stream for the call, so unlike the observables' draws they are not
    common to the futures). The measurements are put in the order of ``OBSERVABLES`` first, so their order in
    the call does not change the draws. Futures are evaluated in chunks of about ``CHUNK_ROWS`` model rows.

    Examples
    --------
    >>> from perierr.demo import demo_path
    >>> from perierr.star.reading import read_star_file
    >>> from perierr.plan import decide_goal, make_measurement
    >>> star = read_star_file(demo_path("kestrel-4.toml"))
    >>> res = preposterior(star, "straight_line", [make_measurement("radial_velocity", 0.3)],
    ...                    goal=decide_goal("20000 au"), n_future=50, n_inner=500, seed=1)
    >>> 0.0 <= res.p_settle <= 1.0
    True
    """
    from ..models import make_model
    from ..priors import NoPrior, resolve_prior

    if isinstance(model, str):
        model = make_model(model)
    if not callable(getattr(model, "evaluate_draws", None)):
        raise InputError("model", model, "expected a forward model (with evaluate_draws) or a model name")
    require_positive_parallax(star.mean[PARALLAX], method="the preposterior planner")
    k = _count("n_future", n_future, MIN_FUTURES)
    n = require_draws(n_inner, field="n_inner", minimum=MIN_INNER)
    goal = _resolve_goal(goal, alpha)
    dec = float(star.mean[DEC])
    base = _measurements(measurements, dec, names_allowed=precisions is not None)
    settings_rows = _precision_rows(base, precisions, dec)
    for row in settings_rows:
        row.sort(key=lambda m: (m.index, m.precision))
    pri = resolve_prior(prior)
    pri = None if isinstance(pri, NoPrior) else pri
    pairs = parse_thresholds(list(thresholds))
    if goal.kind == "decide" and goal.threshold not in {label for label, _ in pairs}:
        pairs.append((goal.threshold, goal.threshold_pc))
    labels = [label for label, _ in pairs]
    pcs = [pc for _, pc in pairs]

    seed = resolve_seed(seed)
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((n, 6))
    x, pred_info = _predictive_x(star, k, pri, rng)
    eps = rng.standard_normal((k, len(base)))

    mean = np.array(star.mean)
    # rows: today, then per setting p: lands-on-mean and the K futures
    means, which, covs, ys = [mean[None, :]], [np.zeros(1, dtype=int)], [np.array(star.cov)], []
    for p, row in enumerate(settings_rows, start=1):
        y = np.stack([x[:, m.index] + m.precision * eps[:, c] for c, m in enumerate(row)], axis=1)
        mu, cov1 = _future_means(mean, star.cov, row, y)
        means += [mean[None, :], mu]
        which.append(np.full(k + 1, p))
        covs.append(cov1)
        ys.append(y)
    zl = np.stack([z @ psd_factor(c).T for c in covs])  # (P + 1, n, 6)
    from ..propagate.montecarlo import nuisance_rng

    width, avg, std, mse, probs, ess = _statistics(
        model, np.concatenate(means), np.concatenate(which), zl,
        prior=pri, thresholds=pcs, reference=mean, rng=nuisance_rng(seed),
    )  # fmt: skip

    if goal.kind == "decide":
        value = probs[:, labels.index(goal.threshold)]
    else:
        value = (width if goal.kind == "width90" else std)[:, OUTPUTS.index(goal.output)]
    settled = np.asarray(goal.met(value), dtype=bool) & np.isfinite(value)

    def answer(r, label):
        return PosteriorAnswer(
            label, float(value[r]), bool(settled[r]),
            {q: float(width[r, j]) for j, q in enumerate(OUTPUTS)},
            {q: float(avg[r, j]) for j, q in enumerate(OUTPUTS)},
            {q: float(std[r, j]) for j, q in enumerate(OUTPUTS)},
            {q: float(mse[r, j]) for j, q in enumerate(OUTPUTS)},
            {lab: float(probs[r, t]) for t, lab in enumerate(labels)},
            float(ess[r]),
        )  # fmt: skip

    outcomes = []
    for p, row in enumerate(settings_rows):
        first = 1 + p * (k + 1)
        fut = slice(first + 1, first + 1 + k)
        frac = float(np.mean(settled[fut]))
        outcomes.append(FutureOutcomes(
            tuple(row), ys[p], value[fut].copy(), settled[fut].copy(),
            {q: width[fut, j].copy() for j, q in enumerate(OUTPUTS)},
            {q: avg[fut, j].copy() for j, q in enumerate(OUTPUTS)},
            {q: std[fut, j].copy() for j, q in enumerate(OUTPUTS)},
            {q: mse[fut, j].copy() for j, q in enumerate(OUTPUTS)},
            {lab: probs[fut, t].copy() for t, lab in enumerate(labels)},
            ess[fut].copy(), answer(first, "lands on today's mean"),
            frac, math.sqrt(frac * (1.0 - frac) / k),
        ))  # fmt: skip
    if pri is not None:  # reweighted answers rest on their effective number of draws: say when it is small
        few = min(1000.0, n / 10)
        worst = float(np.min(ess))
        pool = pred_info.get("pool_effective_size", math.inf)
        if worst < few or pool < min(1000.0, 5.0 * k):
            warnings.warn(PerierrWarning(
                f"the chance that the new data settle '{goal.describe()}' rests on few effective draws under the "
                f"prior: {worst:,.0f} of {n:,} for the answers, {pool:,.0f} for today's predictive distribution "
                "(more draws, --future-draws, or a less informative prior)"), stacklevel=2)  # fmt: skip
    describe = getattr(model, "describe", None)
    settings = {
        "model": describe() if callable(describe) else type(model).__name__,
        "prior": None if pri is None else pri.to_dict(),
        "common_random_numbers": True,
        "chunk_rows": CHUNK_ROWS,
        **pred_info,
    }
    return Preposterior(
        star.name, goal, answer(0, "today"), tuple(outcomes), dict(zip(labels, pcs)), seed, k, n, settings
    )
