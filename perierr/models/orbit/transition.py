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
    delta = np.asarray(delta, dtype=float)
    d = np.ascontiguousarray(delta.T)  # (6, n)
    # built as (28, n) rows and returned transposed: node_cubic multiplies the
    # contiguous rows without a copy
    out = np.empty((N_FEATURES, delta.shape[0]))
    out[0] = 1.0
    out[1:7] = d
    for j, (a, b) in enumerate(zip(_IA, _IB, strict=True)):  # the 21 monomials
        np.multiply(d[a], d[b], out=out[7 + j])
    return out.T


def _derivative(potential, sun, y):
    """Derivatives of Sun (B, 6) and variational states (B, K, 258)."""
    xg = sun[..., None, :3] + y[..., :3]
    a_sun = potential.acceleration(sun[..., :3])
    return _variational_rhs(sun, a_sun, *potential.derivatives(xg), y)


def _variational_rhs(sun, a_sun, a_star, hes, third, y):
    """Time derivatives from the potential's derivatives at the reference positions.

    ``sun`` (..., 6) with its acceleration ``a_sun`` (..., 3); ``a_star``,
    ``hes`` and ``third`` of shapes (..., K, 3), (..., K, 3, 3) and
    (..., K, 3, 3, 3) at the reference positions; ``y`` (..., K, 258).
    Returns the Sun's (..., 6) and the variational states' (..., K, 258).
    """
    s = y[..., :6]
    p1 = y[..., 6:42].reshape(y.shape[:-1] + (6, 6))
    p2 = y[..., 42:].reshape(y.shape[:-1] + (6, 6, 6))
    acc = a_star - a_sun[..., None, :]
    jac = -hes  # d a / d x
    ten = -third  # d2 a / dx dx
    out = np.empty(y.shape)
    out[..., :3] = s[..., 3:]
    out[..., 3:6] = acc
    d1 = out[..., 6:42].reshape(p1.shape)
    d1[..., :3, :] = p1[..., 3:, :]
    d1[..., 3:, :] = jac @ p1[..., :3, :]
    px = p1[..., :3, :]
    d2 = out[..., 42:].reshape(p2.shape)
    d2[..., :3, :, :] = p2[..., 3:, :, :]
    low = np.einsum("...ij,...jab->...iab", jac, p2[..., :3, :, :])
    tmp = np.einsum("...ijl,...ja->...ial", ten, px)  # (..., 3, 6, 3)
    d2[..., 3:, :, :] = low + tmp @ px[..., None, :, :]
    dsun = np.concatenate([sun[..., 3:], a_sun], axis=-1)
    return dsun, out


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
        # power-basis coefficients of the Hermite cubic of every interval, as
        # linear maps of the features: (K, m-1, 28, 24) for (c0, c1, c2, c3)
        # of the state in u = (t - t_k) / h_k (see integrate.cubic_coefficients)
        p0, m0 = table[:, :-1, :, :6], table[:, :-1, :, 6:]
        p1, m1 = table[:, 1:, :, :6], table[:, 1:, :, 6:]
        h = np.diff(nodes)[None, :, None, None]
        self._cubics = np.concatenate(
            [p0, h * m0, 3.0 * (p1 - p0) - h * (2.0 * m0 + m1), 2.0 * (p0 - p1) + h * (m0 + m1)],
            axis=-1,
        )

    def node_cubic(self, ref_index, feats):
        """Return a callable for :func:`newton_perihelion` (``coefficients=True``).

        Parameters
        ----------
        ref_index : ndarray of int, shape (n,)
            Reference orbit of each sample.
        feats : ndarray, shape (n, 28)
            Features of each sample's offset from its reference.

        Returns
        -------
        callable
            ``cubic(k, rows) -> (24, n_rows)``: the coefficients (c0, c1, c2,
            c3), 6 rows each, of the Hermite cubic on interval ``k``.
        """
        n_int = len(self.nodes) - 1
        cubics = np.ascontiguousarray(np.swapaxes(self._cubics, -1, -2).reshape(-1, 24, N_FEATURES))
        feats_t = feats.T  # (28, n), contiguous when built by features()

        def cubic(k, rows):
            key = ref_index[rows] * n_int + k
            f = feats_t if rows.size == feats_t.shape[1] else feats_t[:, rows]
            counts = np.bincount(key) if key.size else np.zeros(1, dtype=int)
            groups = np.flatnonzero(counts)
            if groups.size <= 8:
                # the largest group for every row, then the few others by mask
                main = int(np.argmax(counts))
                out = _product(cubics[main], f)
                for g in groups[groups != main]:
                    idx = np.flatnonzero(key == g)
                    out[:, idx] = _product(cubics[g], f[:, idx])
                return out
            order = np.argsort(key, kind="stable")
            sk = key[order]
            cuts = np.flatnonzero(np.diff(sk)) + 1
            fs = np.ascontiguousarray(f[:, order])  # one gather, groups contiguous
            res = np.empty((24, rows.size))
            for lo, hi in zip(np.r_[0, cuts], np.r_[cuts, rows.size], strict=True):
                res[:, lo:hi] = _product(cubics[sk[lo]], fs[:, lo:hi])
            out = np.empty_like(res)
            out[:, order] = res  # one scatter
            return out

        return cubic


#: Columns per matrix product: small enough (24 x 28 x 384 multiply-adds) that
#: OpenBLAS runs it on the calling thread; its thread start-up costs
#: milliseconds when the other cores are busy.
_BLOCK = 384


def _product(a, f):
    """``a @ f`` for a (24, 28) matrix and (28, n) features, in column blocks."""
    n = f.shape[1]
    if n <= _BLOCK:
        return a @ f
    out = np.empty((a.shape[0], n))
    for lo in range(0, n, _BLOCK):  # loop over blocks of samples, each vectorized
        np.matmul(a, f[:, lo : lo + _BLOCK], out=out[:, lo : lo + _BLOCK])
    return out


def variational_tables(potential, sun_state, refs, nodes, *, rtol, atol, extra=None):
    """Integrate reference orbits with their variational equations and tabulate the maps.

    Used by the orbit model's Jacobian (linear propagation) around the nominal star.

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
        Further relative states integrated directly in the same solver call.

    Returns
    -------
    MapTables
        With, if ``extra`` is given, the attribute ``extra`` = (states,
        derivs), each of shape (m, E, 6), as from
        :func:`~perierr.models.orbit.integrate.integrate_relative`.
    """
    refs = np.atleast_2d(np.asarray(refs, dtype=float))
    extra = np.zeros((0, 6)) if extra is None else np.asarray(extra, dtype=float)
    k, ne = refs.shape[0], extra.shape[0]
    y_init = _initial_state(sun_state, refs, extra)
    ys, dys, extra_states = _solve_dop853(potential, y_init, nodes, k, ne, rtol, atol)
    tables = MapTables(nodes, refs, _feature_table(ys, dys))
    if ne:
        tables.extra = extra_states
    return tables


def _initial_state(sun_state, refs, extra) -> np.ndarray:
    """The Sun, the K reference states with identity Phi1 and zero Phi2, then the extra states, as one vector."""
    k = refs.shape[0]
    y0 = np.zeros((k, _NVAR))
    y0[:, :6] = refs
    y0[:, 6:42] = np.eye(6).ravel()
    return np.concatenate([sun_state, y0.ravel(), extra.ravel()])


def _solve_dop853(potential, y_init, nodes, k, ne, rtol, atol):
    """Adaptive DOP853 to every node; the variational states and derivatives (m, K, 258) and the extra ones."""
    nv, m = k * _NVAR, len(nodes)

    def fun(_t, y):
        sun = y[:6]
        dsun, dy = _derivative(potential, sun, y[6 : 6 + nv].reshape(k, _NVAR))
        if not ne:
            return np.concatenate([dsun, dy.ravel()])
        _, de = relative_derivative(potential, sun, y[6 + nv :].reshape(ne, 6))
        return np.concatenate([dsun, dy.ravel(), de.ravel()])

    sol = _solve_both_ways(fun, y_init, nodes, rtol, atol)
    sun = sol[:, :6]
    ys = sol[:, 6 : 6 + nv].reshape(m, k, _NVAR)
    _, dys = _derivative(potential, sun, ys)
    extra_states = None
    if ne:
        es = sol[:, 6 + nv :].reshape(m, ne, 6)
        extra_states = (es, relative_derivative(potential, sun, es)[1])
    return ys, dys, extra_states


def _feature_table(ys, dys) -> np.ndarray:
    """Feature -> (state, derivative) coefficients (K, m, 28, 12) from variational states (m, K, 258)."""
    m, k = ys.shape[:2]
    table = np.empty((k, m, N_FEATURES, 12))
    coef = np.where(_IA == _IB, 0.5, 1.0)
    for col, arr in ((0, ys), (6, dys)):
        arr = np.moveaxis(arr, 1, 0)  # (K, m, 258)
        p1 = arr[..., 6:42].reshape(k, m, 6, 6)
        p2 = arr[..., 42:].reshape(k, m, 6, 6, 6)
        quad = 0.5 * (p2[..., :, _IA, _IB] + p2[..., :, _IB, _IA]) * coef  # (K, m, 6, 21)
        table[..., 0, col : col + 6] = arr[..., :6]
        table[..., 1:7, col : col + 6] = np.swapaxes(p1, -1, -2)
        table[..., 7:, col : col + 6] = np.swapaxes(quad, -1, -2)
    return table
