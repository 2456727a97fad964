"""Second-order state-transition map of Sun-relative orbits.

A reference orbit ``y(t)`` (relative to the Sun) is integrated with its
first- and second-order variational equations. A nearby orbit that starts at
``y(0) + delta`` is then, to second order,

    y(t) + Phi1(t) delta + 1/2 Phi2(t)[delta, delta],

with ``Phi1' = A Phi1`` and
``Phi2'^i_ab = A^i_j Phi2^j_ab + f^i_jk Phi1^j_a Phi1^k_b`` where ``A`` is the
Jacobian of the equations of motion (the potential's Hessian) and ``f^i_jk``
their second derivatives (the potential's third derivatives). Everything is
tabulated on a time grid as a linear map from the 28 features
``(1, delta_a, delta_a delta_b [a <= b])`` to the state and its time
derivative, so mapping a sample costs one small matrix product per node.

References
----------
Park, R. S. & Scheeres, D. J. 2006, J. Guid. Control Dyn. 29, 1367 (higher
order state-transition tensors); Hairer, Norsett & Wanner 1993, Solving
Ordinary Differential Equations I, Sect. I.14 (variational equations).
"""

from __future__ import annotations

import numpy as np

from .integrate import _solve_both_ways, relative_derivative

__all__ = ["N_FEATURES", "features", "variational_tables", "MapTables"]

_IA, _IB = np.triu_indices(6)
#: Number of map features: constant, 6 linear, 21 quadratic monomials.
N_FEATURES = 1 + 6 + _IA.size
_NVAR = 6 + 36 + 216


def features(delta) -> np.ndarray:
    """Map features of initial offsets.

    Parameters
    ----------
    delta : ndarray, shape (n, 6)
        Offsets from the reference initial state [pc, km/s].

    Returns
    -------
    ndarray, shape (n, 28)
    """
    n = delta.shape[0]
    out = np.empty((n, N_FEATURES))
    out[:, 0] = 1.0
    out[:, 1:7] = delta
    col = 7
    for a in range(6):  # loop over the 6 coordinates, vectorized over samples
        out[:, col : col + 6 - a] = delta[:, a : a + 1] * delta[:, a:]
        col += 6 - a
    return out


def _derivative(potential, sun, y):
    """Derivatives of Sun (B, 6) and variational states (B, K, 258)."""
    s = y[..., :6]
    p1 = y[..., 6:42].reshape(y.shape[:-1] + (6, 6))
    p2 = y[..., 42:].reshape(y.shape[:-1] + (6, 6, 6))
    xg = sun[..., None, :3] + s[..., :3]
    a_sun = potential.acceleration(sun[..., :3])
    a_star, hes, third = potential.derivatives(xg)
    acc = a_star - a_sun[..., None, :]
    jac = -hes  # d a / d x
    ten = -third  # d2 a / dx dx
    ds = np.concatenate([s[..., 3:], acc], axis=-1)
    dp1 = np.concatenate([p1[..., 3:, :], jac @ p1[..., :3, :]], axis=-2)
    px = p1[..., :3, :]
    low = np.einsum("...ij,...jab->...iab", jac, p2[..., :3, :, :])
    tmp = np.einsum("...ijl,...ja->...ial", ten, px)  # (..., 3, 6, 3)
    low = low + tmp @ px[..., None, :, :]
    dp2 = np.concatenate([p2[..., 3:, :, :], low], axis=-3)
    dsun = np.concatenate([sun[..., 3:], a_sun], axis=-1)
    flat = np.concatenate(
        [ds, dp1.reshape(ds.shape[:-1] + (36,)), dp2.reshape(ds.shape[:-1] + (216,))], axis=-1
    )
    return dsun, flat


class MapTables:
    """Tabulated second-order maps of K reference orbits on a time grid.

    Attributes
    ----------
    nodes : ndarray, shape (m,)
        Grid times [pc/(km/s)].
    refs : ndarray, shape (K, 6)
        Reference initial states relative to the Sun.
    table : ndarray, shape (K, m, 28, 12)
        Feature -> (state, time derivative) coefficients at each node.
    extra : tuple of ndarray or None
        States and derivatives, shape (m, E, 6) each, of states integrated
        directly in the same call.
    """

    def __init__(self, nodes, refs, table):
        self.nodes = nodes
        self.refs = refs
        self.table = table
        self.extra = None  # (states, derivs) of directly integrated extra states
        # node k and k+1 side by side, state (6) and acceleration (3) only, since
        # the derivative of the position is the velocity: (K, m-1, 28, 18)
        sa = np.concatenate([table[..., :6], table[..., 9:12]], axis=-1)
        self._pairs = np.concatenate([sa[:, :-1], sa[:, 1:]], axis=-1)

    def node_values(self, ref_index, feats):
        """Return a callable for :func:`newton_perihelion` over samples.

        Parameters
        ----------
        ref_index : ndarray of int, shape (n,)
            Reference orbit of each sample.
        feats : ndarray, shape (n, 28)
            Features of each sample's offset from its reference.

        Returns
        -------
        callable
            ``values(k, rows) -> (state_k, deriv_k, state_k1, deriv_k1)``.
        """
        m = len(self.nodes)

        def values(k, rows):
            key = ref_index[rows] * m + k
            if key.size and np.all(key == key[0]):  # one group: no sorting or gathers
                b, kk = divmod(int(key[0]), m)
                full = rows.size == feats.shape[0] and rows[0] == 0 and rows[-1] == rows.size - 1
                f = feats if full else feats[rows]
                out = f @ self._pairs[b, kk]
                return _split(out)
            order = np.argsort(key, kind="stable")
            sk = key[order]
            cuts = np.flatnonzero(np.diff(sk)) + 1
            fs = feats[rows[order]]  # one gather, groups contiguous
            res = np.empty((rows.size, 18))
            for lo, hi in zip(np.r_[0, cuts], np.r_[cuts, rows.size], strict=True):
                b, kk = divmod(int(sk[lo]), m)
                np.matmul(fs[lo:hi], self._pairs[b, kk], out=res[lo:hi])
            out = np.empty_like(res)
            out[order] = res  # one scatter
            return _split(out)

        return values


def _split(out):
    """(n, 18) products -> state_k, deriv_k, state_k1, deriv_k1, each (n, 6)."""
    s0, s1 = out[:, :6], out[:, 9:15]
    d0 = np.concatenate([s0[:, 3:], out[:, 6:9]], axis=1)
    d1 = np.concatenate([s1[:, 3:], out[:, 15:]], axis=1)
    return s0, d0, s1, d1


def variational_tables(potential, sun_state, refs, nodes, *, rtol, atol, extra=None):
    """Integrate reference orbits with their variational equations and tabulate the maps.

    Parameters
    ----------
    potential : Potential
    sun_state : ndarray, shape (6,)
        The Sun's Galactocentric state at t = 0.
    refs : ndarray, shape (K, 6)
        Reference initial states relative to the Sun (all integrated in one
        solver call).
    nodes : ndarray, shape (m,)
        Increasing grid times containing 0 [pc/(km/s)].
    rtol, atol : float
        DOP853 tolerances.
    extra : ndarray, shape (E, 6), optional
        Further relative states integrated directly in the same solver call
        (the samples that check the map).

    Returns
    -------
    MapTables
        With, if ``extra`` is given, the attribute ``extra`` = (states,
        derivs), each of shape (m, E, 6), as from
        :func:`~perierr.models.orbit.integrate.integrate_relative`.
    """
    refs = np.atleast_2d(np.asarray(refs, dtype=float))
    k = refs.shape[0]
    y0 = np.zeros((k, _NVAR))
    y0[:, :6] = refs
    y0[:, 6:42] = np.eye(6).ravel()
    extra = np.zeros((0, 6)) if extra is None else np.asarray(extra, dtype=float)
    ne, nv = extra.shape[0], k * _NVAR

    def fun(_t, y):
        sun = y[:6]
        dsun, dy = _derivative(potential, sun, y[6 : 6 + nv].reshape(k, _NVAR))
        if not ne:
            return np.concatenate([dsun, dy.ravel()])
        _, de = relative_derivative(potential, sun, y[6 + nv :].reshape(ne, 6))
        return np.concatenate([dsun, dy.ravel(), de.ravel()])

    y_init = np.concatenate([sun_state, y0.ravel(), extra.ravel()])
    sol = _solve_both_ways(fun, y_init, nodes, rtol, atol)
    sun = sol[:, :6]
    ys = sol[:, 6 : 6 + nv].reshape(len(nodes), k, _NVAR)
    _, dys = _derivative(potential, sun, ys)
    table = np.empty((k, len(nodes), N_FEATURES, 12))
    for col, arr in ((0, ys), (6, dys)):
        arr = np.moveaxis(arr, 1, 0)  # (K, m, 258)
        p1 = arr[..., 6:42].reshape(k, len(nodes), 6, 6)
        p2 = arr[..., 42:].reshape(k, len(nodes), 6, 6, 6)
        p2 = 0.5 * (p2 + np.swapaxes(p2, -1, -2))
        coef = np.where(_IA == _IB, 0.5, 1.0)
        table[..., 0, col : col + 6] = arr[..., :6]
        table[..., 1:7, col : col + 6] = np.swapaxes(p1, -1, -2)
        quad = p2[..., :, _IA, _IB] * coef  # (K, m, 6, 21)
        table[..., 7:, col : col + 6] = np.swapaxes(quad, -1, -2)
    tables = MapTables(nodes, refs, table)
    if ne:
        es = sol[:, 6 + nv :].reshape(len(nodes), ne, 6)
        tables.extra = (es, relative_derivative(potential, sun, es)[1])
    return tables
