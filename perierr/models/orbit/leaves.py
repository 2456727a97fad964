"""Leaves of the draw cloud, each with a polynomial map from a draw's initial state to its orbit.

The draws of a Monte Carlo run spread in every direction that changes their orbit: distance, radial
velocity, proper motion and, through the speed, the time of perihelion. The cloud is cut into leaves by
recursive halving along its widest direction in the scaled offsets ``u = (delta_s, delta_w * (|t_lin| + 1))``
[pc] (a velocity offset matters as the distance it moves the star by the time of perihelion), until a
leaf is narrower than a target radius or too small to be worth a map (its draws are then integrated
directly).

Inside a leaf, a draw's relative state and its time derivative at every grid node are a smooth function
of its initial offset from the leaf's centre: linear (straight-line motion and the linear Galactic tide)
plus small higher-order terms (the tide's change over the leaf). Each leaf fits them with a polynomial in
its principal coordinates, linear in all six and of degree ``order`` in the ``k`` widest, by least squares
on draws integrated directly; a draw's orbit near any node is then one small matrix product.

References
----------
Bentley, J. L. 1975, Commun. ACM 18, 509 (k-d trees: halving along one coordinate at the median);
Golub, G. H. & Van Loan, C. F. 2013, Matrix Computations, 4th ed., Sect. 5.3 (least squares by QR/SVD).
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import combinations_with_replacement

import numpy as np
import scipy.linalg

__all__ = ["Leaf", "partition", "make_leaf", "n_features", "leaf_features"]


@dataclass
class Leaf:
    """One leaf: its draws and the coordinates its polynomial map uses.

    Attributes
    ----------
    rows : ndarray of int
        Indices of the leaf's draws.
    center : ndarray, shape (6,)
        Mean relative state of the draws [pc, km/s].
    axes : ndarray, shape (6, 6)
        ``x = (state - center) @ axes``: principal coordinates, each scaled so that the leaf's draws lie
        within [-1, 1].
    k : int
        Number of principal coordinates (the widest) that get the terms of degree 2 and more.
    order : int
        Degree of the polynomial in those.
    """

    rows: np.ndarray
    center: np.ndarray
    axes: np.ndarray
    k: int
    order: int

    def coordinates(self, rel) -> np.ndarray:
        """Principal coordinates ``x`` (n, 6) of relative states (n, 6)."""
        return (rel - self.center) @ self.axes

    def features(self, rel) -> np.ndarray:
        """Polynomial features (n, F) of relative states."""
        return leaf_features(self.coordinates(rel), self.k, self.order)


def n_features(k: int, order: int) -> int:
    """Number of features: constant, 6 linear terms, monomials of degree 2..order in ``k`` coordinates."""
    return 7 + len(_monomials(k, order))


def _monomials(k, order):
    """Index tuples of every monomial of degree 2..order in ``k`` coordinates."""
    return [c for d in range(2, order + 1) for c in combinations_with_replacement(range(k), d)]


def leaf_features(x, k: int, order: int) -> np.ndarray:
    """Features (n, F) of principal coordinates ``x`` (n, 6): 1, x_0..x_5, monomials of degree 2..order.

    Examples
    --------
    >>> leaf_features(np.array([[2.0, 3.0, 0.0, 0.0, 0.0, 0.0]]), 2, 2)[0, 7:].tolist()
    [4.0, 6.0, 9.0]
    """
    x = np.asarray(x, dtype=float)
    mono = _monomials(k, order)
    out = np.empty((x.shape[0], 7 + len(mono)))
    out[:, 0] = 1.0
    out[:, 1:7] = x
    col = 7
    # products built from the lower-degree columns: x_a x_b, then (x_a x_b) x_c, ...
    index = {(a,): 1 + a for a in range(6)}
    for c in mono:  # loop over the few monomials, vectorized over draws
        np.multiply(out[:, index[c[:-1]]], x[:, c[-1]], out=out[:, col])
        index[c] = col
        col += 1
    return out


def scaled_offsets(rel, center, t_lin) -> np.ndarray:
    """``u = (delta_s, delta_w * (|t_lin| + 1))`` [pc] of relative states from ``center``."""
    delta = rel - center
    delta[:, 3:] *= (np.abs(t_lin) + 1.0)[:, None]
    return delta


def partition(u, rows, max_radius: float, min_size: int) -> list:
    """Halve the draws ``rows`` along the widest coordinate of ``u`` until each part is narrow or small.

    Parameters
    ----------
    u : ndarray, shape (n, 6)
        Scaled offsets of all draws [pc].
    rows : ndarray of int
        The draws to cut.
    max_radius : float
        A part whose draws all lie within this distance [pc] of their mean in ``u`` is not cut.
    min_size : int
        Nor is a part whose halves would hold fewer draws than this.

    Returns
    -------
    list of ndarray of int
        Row indices of each part.

    Examples
    --------
    >>> u = np.zeros((8, 6)); u[:, 0] = np.arange(8.0)
    >>> [p.tolist() for p in partition(u, np.arange(8), 1.0, 2)]
    [[6, 7], [4, 5], [2, 3], [0, 1]]
    """
    parts, todo = [], [np.asarray(rows)]
    while todo:  # loop over parts (a few hundred at most), each vectorized over its draws
        part = todo.pop()
        up = u[part]
        dev = up - up.mean(axis=0)
        if part.size < 2 * min_size or np.sqrt(np.max(np.einsum("ij,ij->i", dev, dev))) <= max_radius:
            parts.append(part)
            continue
        axis = int(np.argmax(np.ptp(up, axis=0)))
        order = np.argsort(up[:, axis], kind="stable")
        half = part.size // 2
        todo += [part[order[:half]], part[order[half:]]]
    return parts


def make_leaf(rel, rows, t_lin, *, order: int, max_k: int, spread_floor: float = 1e-3) -> Leaf:
    """The leaf of draws ``rows``: centre, principal axes scaled to [-1, 1], and the nonlinear coordinates.

    The principal axes are those of the scaled offsets (velocity offsets times the leaf's median
    ``|t_lin| + 1``), so that position and velocity directions are weighed by their effect on the orbit.
    Coordinates whose spread is below ``spread_floor`` times the widest one keep only their linear term.
    """
    r = rel[rows]
    center = r.mean(axis=0)
    tscale = float(np.mean(np.abs(t_lin[rows]))) + 1.0
    scale = np.array([1.0, 1.0, 1.0, tscale, tscale, tscale])
    d = (r - center) * scale
    # principal directions from the 6 x 6 covariance (eigenvalues ascending: reversed, widest first)
    evals, evecs = np.linalg.eigh(d.T @ d / max(1, d.shape[0]))
    rot = evecs[:, ::-1]
    sv = np.sqrt(np.clip(evals[::-1], 0.0, None))
    proj = d @ rot
    extent = np.max(np.abs(proj), axis=0)
    extent = np.where(extent > 0, extent, 1.0)
    axes = (scale[:, None] * rot) / extent[None, :]
    spread = sv / sv[0] if sv[0] > 0 else np.zeros_like(sv)
    k = int(min(max_k, np.count_nonzero(spread >= spread_floor)))
    return Leaf(rows=np.asarray(rows), center=center, axes=axes, k=max(k, 1), order=order)


def fit_leaf(leaf: Leaf, x, targets) -> np.ndarray:
    """Least-squares coefficients (F, p) of the leaf's polynomial from training coordinates ``x`` and targets (T, p).

    By QR factorization of the (T, F) features (well conditioned: the coordinates lie in [-1, 1]); the
    pseudo-inverse when they are rank-deficient.
    """
    a = leaf_features(x, leaf.k, leaf.order)
    q, r = np.linalg.qr(a)
    diag = np.abs(np.diag(r))
    if diag.size and diag.min() > 1e-10 * diag.max():
        return scipy.linalg.solve_triangular(r, q.T @ targets)
    return np.linalg.pinv(a) @ targets
