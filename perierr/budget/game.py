"""The Shapley game shared by every budget: subsets, weights, groups, conditional Gaussians.

Players are the budget's inputs (the six observables, and where they apply the
parallax zero-point and the star's mass). A subset of players is a bitmask:
bit ``i`` set means player ``i`` is in the subset; the ``2**k`` subsets are
indexed by their mask. The value of a subset is an array over outputs; the
Shapley value of player ``i`` is::

    Sh_i = sum over u not containing i of  |u|! (k - |u| - 1)! / k!  * (v(u + i) - v(u))

which this module evaluates as one matrix product with a weight matrix built
once per ``k``.

Gaussian inputs are handled in **standardized coordinates**: ``Z = (X - mu) / sigma``
with correlation matrix ``R``. Shapley effects do not depend on the units of
the inputs, and neither does anything computed here: the raw covariance of a
catalogue solution mixes deg^2 (about 1e-16) with mas^2 and (km/s)^2, and a
pseudo-inverse of it would treat the position directions as null. In
correlation coordinates every eigenvalue lies between 0 and k, so one absolute
cut-off (:data:`RANK_TOL`), the same for every subset, separates real
directions from rounding. An input
held exact (zero variance) becomes an independent dummy with unit variance and
zero gradient; perfectly correlated inputs give a singular ``R``, which the
rank-aware solve (an eigen-decomposition pseudo-inverse) handles.

References
----------
Shapley, L. S. 1953, in Contributions to the Theory of Games II, 307 (the value).
Song, E., Nelson, B. L. & Staum, J. 2016, SIAM/ASA J. Uncertainty Quantification 4,
1060 (Shapley effects of correlated inputs; the two equivalent games).
Owen, A. B. & Prieur, C. 2017, SIAM/ASA JUQ 5, 986 (Gaussian inputs).
"""

from __future__ import annotations

import math
from functools import cache

import numpy as np

from ..errors import InputError
from ..sampling.gaussian import psd_factor

__all__ = [
    "RANK_TOL",
    "conditional_map",
    "explained_variance",
    "group_masks",
    "members",
    "shapley_matrix",
    "shapley_values",
    "standardize",
]

#: Eigenvalue cut-off of the rank-aware solve in correlation coordinates, the same for
#: every subset: directions of a correlation (sub-)matrix with eigenvalue below it are
#: treated as exact linear relations (perfectly correlated inputs). One cut-off for all
#: subsets keeps the game consistent: a relation kept in one subset is kept in all.
RANK_TOL = 1e-10

#: Largest number of players: 2**k subsets are enumerated.
MAX_PLAYERS = 12


@cache
def members(k: int) -> np.ndarray:
    """Membership table of all subsets, shape (2**k, k), bool (row = mask)."""
    masks = np.arange(2**k)
    return (masks[:, None] >> np.arange(k)) & 1 == 1


@cache
def shapley_matrix(k: int) -> np.ndarray:
    """Weights M, shape (2**k, k), with ``Sh_i = sum_mask M[mask, i] v(mask)``.

    Exact permutation weights ``|u|! (k - |u| - 1)! / k!``; read-only.
    """
    if not 1 <= k <= MAX_PLAYERS:
        raise InputError("players", k, f"expected 1 to {MAX_PLAYERS} budget inputs")
    inside = members(k)
    size = inside.sum(axis=1)
    m = np.zeros((2**k, k))
    for i in range(k):
        bit = 1 << i
        without = np.flatnonzero(~inside[:, i])  # subsets u not containing i
        w = np.array([math.factorial(s) * math.factorial(k - s - 1) for s in size[without]]) / math.factorial(k)
        m[without | bit, i] += w
        m[without, i] -= w
    m.setflags(write=False)
    return m


def shapley_values(values) -> np.ndarray:
    """Shapley values of every player from the values of all subsets.

    Parameters
    ----------
    values : array_like, shape (2**k, ...)
        Value of each subset, indexed by bitmask; ``values[0]`` (the empty set)
        is normally 0.

    Returns
    -------
    ndarray, shape (k, ...)
        Shapley values; they sum to ``values[-1] - values[0]`` (efficiency).
    """
    v = np.asarray(values, dtype=float)
    k = v.shape[0].bit_length() - 1
    if v.shape[0] != 2**k:
        raise InputError("values", v.shape, "expected 2^k rows, one per subset bitmask")
    return np.tensordot(shapley_matrix(k).T, v, axes=(1, 0))


def group_masks(players, groups: dict) -> tuple:
    """Input-level bitmask of every union of groups.

    Parameters
    ----------
    players : sequence of str
        The game's players (inputs), in column order.
    groups : dict
        Group name -> sequence of player names; the groups must partition the players.

    Returns
    -------
    names : tuple of str
        The group names (players of the group game).
    masks : ndarray of int, shape (2**len(names),)
        ``masks[g]`` is the input-level mask of the union of the groups in ``g``,
        so ``values[masks]`` is the group game.
    """
    players = tuple(players)
    names = tuple(groups)
    seen = []
    group_bits = []
    for name in names:
        bits = 0
        for member in groups[name]:
            if member not in players:
                raise InputError("groups", member, f"expected input names from {players}")
            if member in seen:
                raise InputError("groups", member, "each input must belong to exactly one group")
            seen.append(member)
            bits |= 1 << players.index(member)
        group_bits.append(bits)
    if len(seen) != len(players):
        missing = [p for p in players if p not in seen]
        raise InputError("groups", missing, f"the groups must cover all {len(players)} inputs (a partition)")
    inside = members(len(names))
    masks = (inside * np.array(group_bits, dtype=np.int64)).sum(axis=1)
    return names, masks


def standardize(cov) -> tuple:
    """Standard deviations and correlation matrix of (stacks of) covariances.

    Parameters
    ----------
    cov : array_like, shape (..., k, k)

    Returns
    -------
    sigma : ndarray, shape (..., k)
        Standard deviations (0 for inputs held exact).
    corr : ndarray, shape (..., k, k)
        Correlation matrix; an input with zero variance gets unit variance and
        no correlation (an independent dummy: with zero gradient it carries no
        share, and conditioning on it changes nothing).
    """
    s = np.asarray(cov, dtype=float)
    var = np.diagonal(s, axis1=-2, axis2=-1)
    sigma = np.sqrt(np.clip(var, 0.0, None))
    exact = sigma == 0
    safe = np.where(exact, 1.0, sigma)
    corr = s / (safe[..., :, None] * safe[..., None, :])
    corr = np.where(exact[..., :, None] | exact[..., None, :], 0.0, corr)
    k = s.shape[-1]
    diag = np.arange(k)
    corr[..., diag, diag] = 1.0
    return sigma, 0.5 * (corr + np.swapaxes(corr, -1, -2))


def _pinv_psd(a) -> np.ndarray:
    """Rank-aware pseudo-inverse of (stacks of) symmetric PSD matrices of order one."""
    w, v = np.linalg.eigh(a)
    keep = w > RANK_TOL
    inv = np.where(keep, 1.0 / np.where(keep, w, 1.0), 0.0)
    return (v * inv[..., None, :]) @ np.swapaxes(v, -1, -2)


def explained_variance(gradient, corr) -> np.ndarray:
    """``Var(E[Y | Z_w])`` for every subset w of standardized Gaussian inputs.

    For ``Y = g . Z`` with ``Z ~ N(0, R)``: ``E[Y | Z_w] = b_w^T R_ww^+ Z_w`` with
    ``b = R g``, so the explained variance is ``b_w^T R_ww^+ b_w``. Its Shapley
    values equal those of ``E[Var(Y | X_-u)]`` (Song, Nelson & Staum 2016,
    Theorem 1), the linear Shapley effects.

    Parameters
    ----------
    gradient : array_like, shape (..., m, k)
        Gradient of each of m outputs with respect to the standardized inputs
        (``J * sigma``).
    corr : array_like, shape (..., k, k)
        Correlation matrix, as from :func:`standardize`.

    Returns
    -------
    ndarray, shape (..., 2**k, m)
        Row ``mask`` is the variance explained by the subset ``mask``; the last
        row is ``Var(Y) = g^T R g``.
    """
    g = np.asarray(gradient, dtype=float)
    r = np.asarray(corr, dtype=float)
    lead = np.broadcast_shapes(g.shape[:-2], r.shape[:-2])
    g = np.broadcast_to(g, lead + g.shape[-2:])
    r = np.broadcast_to(r, lead + r.shape[-2:])
    k = r.shape[-1]
    b = r @ np.swapaxes(g, -1, -2)  # (..., k, m)
    inside = members(k)
    size = inside.sum(axis=1)
    out = np.zeros(lead + (2**k, g.shape[-2]))
    for n in range(1, k + 1):
        masks = np.flatnonzero(size == n)
        idx = np.nonzero(inside[masks])[1].reshape(masks.size, n)  # players of each subset, ascending
        sub = r[..., idx[:, :, None], idx[:, None, :]]  # (..., s, n, n)
        bw = b[..., idx, :]  # (..., s, n, m)
        out[..., masks, :] = np.einsum("...sim,...sij,...sjm->...sm", bw, _pinv_psd(sub), bw)
    return out


def conditional_map(corr, mask: int) -> tuple:
    """Conditional Gaussian of the standardized inputs in ``mask`` given the others.

    Parameters
    ----------
    corr : array_like, shape (k, k)
        Correlation matrix.
    mask : int
        Bitmask of the subset u drawn conditionally.

    Returns
    -------
    u, rest : ndarray of int
        Players in u and outside it.
    gain : ndarray, shape (|u|, |rest|)
        ``E[Z_u | Z_rest] = gain @ Z_rest``.
    factor : ndarray, shape (|u|, |u|)
        Lower-triangular factor of ``Cov(Z_u | Z_rest)``.
    """
    r = np.asarray(corr, dtype=float)
    inside = members(r.shape[0])[mask]
    u, rest = np.flatnonzero(inside), np.flatnonzero(~inside)
    if rest.size == 0:
        return u, rest, np.zeros((u.size, 0)), psd_factor(r)
    cross = r[np.ix_(u, rest)]
    gain = cross @ _pinv_psd(r[np.ix_(rest, rest)])
    cond = r[np.ix_(u, u)] - gain @ cross.T
    return u, rest, gain, psd_factor(0.5 * (cond + cond.T))
