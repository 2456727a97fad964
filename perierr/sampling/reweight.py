"""Importance reweighting of Gaussian draws to the posterior under a distance prior.

The Gaussian draws of the six observables are samples of the posterior under
a flat prior in parallax. Written in distance r = 1000 / parallax, their
density carries the Jacobian ``|d parallax / d r| = 1000 / r^2``. The
posterior under a prior P(r) is the same Gaussian likelihood times P(r), so
each draw gets the importance weight

    w_i  proportional to  P(r_i) r_i^2 ,

which undoes the implied ``1 / r^2`` and applies the prior. Draws with
parallax <= 0 have no distance and weight zero; they, and draws outside the
prior's support, are removed and counted in ``info``. The quality of the
weights is the Kish effective sample size ``(sum w)^2 / sum w^2``
(Kish 1965, Survey Sampling, Sect. 11.7; Owen 2013, Monte Carlo theory,
methods and examples, Sect. 9.3).
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..units import MAS_PC, PARALLAX
from .gaussian import Samples, draw_gaussian, resolve_seed

__all__ = ["importance_weights", "log_weights", "reweight"]



def log_weights(parallax, prior) -> np.ndarray:
    """Unnormalized log importance weights ``ln P(r) + 2 ln r`` of parallax draws.

    Parameters
    ----------
    parallax : array_like, shape (n,)
        Sampled parallaxes [mas]; entries <= 0 get ``-inf``.
    prior : DistancePrior

    Returns
    -------
    ndarray, shape (n,)
    """
    plx = np.asarray(parallax, dtype=float)
    if plx.size and plx.min() > 0:  # common case: no mask, one pass fewer
        return prior.log_weight(MAS_PC / plx)
    out = np.full(plx.shape, -np.inf)
    pos = plx > 0
    r = MAS_PC / plx[pos]
    out[pos] = prior.log_weight(r)
    return out


def importance_weights(parallax, prior) -> tuple:
    """Normalized importance weights of parallax draws, and which draws carry one.

    Returns
    -------
    weights : ndarray, shape (m,), or None
        Positive weights summing to 1 for the kept draws; None when no draw
        has a positive weight.
    keep : ndarray of bool, shape (n,), or None
        Kept draws; None when every draw is kept.
    """
    logw = log_weights(parallax, prior)
    top = logw.max()
    if not np.isfinite(top):
        return None, None
    keep = None
    if not np.isfinite(logw.min()):
        keep = np.isfinite(logw)
        logw = logw[keep]
    logw -= top
    w = np.exp(logw, out=logw)
    w /= w.sum()
    return w, keep


def reweight(
    star, prior, *, n: int = 100_000, seed: int | np.random.Generator | None = None, rng=None
) -> Samples:
    """Gaussian draws of a star's observables, weighted to the posterior.

    Parameters
    ----------
    star : ObservedStar
    prior : DistancePrior
    n : int
        Draws before removing the zero-weight ones.
    seed : int, numpy.random.Generator or None
        Seed of ``numpy.random.default_rng``; the integer is recorded
        (see :func:`perierr.sampling.gaussian.resolve_seed`).
    rng : numpy.random.Generator, optional
        Use this generator instead (``seed`` is then only recorded).

    Returns
    -------
    Samples
        ``method="reweight"``; ``weights`` sum to 1; ``info`` holds
        ``effective_size`` (Kish), ``n_drawn``, ``n_zero_weight`` and
        ``max_weight`` (largest normalized weight).

    Raises
    ------
    InputError
        When no draw has positive weight (the prior and the parallax do not
        overlap): use ``method="mcmc"``.
    """
    if int(n) < 100:
        raise InputError("n_samples", n, "expected at least 100 samples")
    seed = resolve_seed(seed)
    if rng is None:
        rng = np.random.default_rng(seed)
    values = draw_gaussian(star.mean, star.cov, int(n), rng)
    w, keep = importance_weights(values[:, PARALLAX], prior)
    if w is None:
        raise InputError(
            "distance prior", prior.name,
            f"no Gaussian draw of the parallax lies where the prior is non-zero "
            f"({prior.parameters}); importance reweighting cannot work, use method='mcmc'",
        )
    if keep is not None:
        # compress along the contiguous axis of the (6, n) draws: half the time of values[keep],
        # and the result keeps their column-major layout (faster column access in the models)
        values = np.compress(keep, values.T, axis=1).T
    ess = float(1.0 / np.dot(w, w))
    info = {
        "effective_size": ess,
        "n_drawn": int(n),
        "n_zero_weight": int(n - values.shape[0]),
        "max_weight": float(w.max()),
    }
    return Samples(values, weights=w, method="reweight", seed=seed, info=info)
