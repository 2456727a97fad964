"""Direct integration of star orbits relative to the Sun, and the perihelion search.

The Sun and each star are test particles in the same potential. The star is
followed relative to the Sun, ``s = x_star - x_sun``, with

    ds/dt = w,   dw/dt = a(x_sun + s) - a(x_sun),

integrated together with the Sun's own orbit (no cancellation of Galactic
coordinates). Time inside this module is in units of pc / (km/s)
(0.9778 Myr), so positions stay in pc and velocities in km/s.

The perihelion search works on a time grid: states and their time
derivatives are tabulated at the grid nodes, the relative position between
two nodes is the quintic Hermite interpolant (positions, velocities and
accelerations at both ends), and Newton's method solves ``s . w = 0`` (the
minimum of |s|) to far below the grid step, from each of the few lowest
valleys on the grid (the global minimum is the smallest of them).

References
----------
Hairer, E., Norsett, S. P. & Wanner, G. 1993, Solving Ordinary Differential
Equations I, 2nd ed., Sect. II.5 (DOP853) and II.6 (dense output, Hermite
interpolation); Press, W. H. et al. 2007, Numerical Recipes, 3rd ed., Sect. 9.4
(Newton-Raphson).
"""

from __future__ import annotations

import numpy as np
from scipy.integrate import solve_ivp

__all__ = [
    "relative_derivative",
    "integrate_relative",
    "hermite",
    "newton_perihelion",
    "grid_minimum_start",
    "valley_starts",
    "global_perihelion",
    "quintic_coefficients",
]


def relative_derivative(potential, sun, rel) -> tuple[np.ndarray, np.ndarray]:
    """Time derivatives of the Sun's state and of relative star states.

    Parameters
    ----------
    potential : Potential
    sun : ndarray, shape (..., 6)
        Galactocentric position [pc] and velocity [km/s] of the Sun.
    rel : ndarray, shape (..., n, 6)
        Star states relative to the Sun (same axes).

    Returns
    -------
    dsun : ndarray, shape (..., 6)
    drel : ndarray, shape (..., n, 6)
        Derivatives per unit time of pc / (km/s).
    """
    a_sun = potential.acceleration(sun[..., :3])
    a_star = potential.acceleration(sun[..., None, :3] + rel[..., :3])
    dsun = np.concatenate([sun[..., 3:], a_sun], axis=-1)
    drel = np.concatenate([rel[..., 3:], a_star - a_sun[..., None, :]], axis=-1)
    return dsun, drel


def _solve_both_ways(fun, y0, nodes, rtol, atol):
    """Integrate ``y' = fun(t, y)`` from t = 0 to every node (both signs)."""
    out = np.empty((len(nodes), y0.size))
    zero = int(np.flatnonzero(nodes == 0.0)[0])
    out[zero] = y0
    for sel in (np.arange(zero + 1, len(nodes)), np.arange(zero - 1, -1, -1)):
        if sel.size == 0:
            continue
        sol = solve_ivp(
            fun, (0.0, nodes[sel[-1]]), y0, method="DOP853", t_eval=nodes[sel],
            rtol=rtol, atol=atol,
        )  # fmt: skip
        if not sol.success:
            raise RuntimeError(f"orbit integration failed: {sol.message}")
        out[sel] = sol.y.T
    return out


def integrate_relative(potential, sun_state, rel_states, nodes, *, rtol, atol):
    """Tabulate Sun-relative orbits of many stars on a time grid.

    Parameters
    ----------
    potential : Potential
    sun_state : ndarray, shape (6,)
        The Sun's Galactocentric state at t = 0 [pc, km/s].
    rel_states : ndarray, shape (n, 6)
        Star states relative to the Sun at t = 0.
    nodes : ndarray, shape (m,)
        Increasing grid times [pc/(km/s)], containing 0 exactly.
    rtol, atol : float
        DOP853 tolerances.

    Returns
    -------
    states, derivs : ndarray, shape (m, n, 6)
        Relative states and their time derivatives at the nodes.
    sun : ndarray, shape (m, 6)
        The Sun's state at the nodes.
    """
    n = rel_states.shape[0]

    def fun(_t, y):
        dsun, drel = relative_derivative(potential, y[:6], y[6:].reshape(n, 6))
        return np.concatenate([dsun, drel.ravel()])

    y0 = np.concatenate([sun_state, rel_states.ravel()])
    table = _solve_both_ways(fun, y0, nodes, rtol, atol)
    sun = table[:, :6]
    states = table[:, 6:].reshape(len(nodes), n, 6)
    _, derivs = relative_derivative(potential, sun, states)
    return states, derivs, sun


def hermite(t, t0, t1, p0, m0, p1, m1):
    """Cubic Hermite interpolant and its time derivative.

    Parameters
    ----------
    t, t0, t1 : ndarray, shape (n,)
        Evaluation time and interval ends.
    p0, m0, p1, m1 : ndarray, shape (n, ...)
        Values and derivatives at the interval ends.

    Returns
    -------
    p, dp : ndarray, shape (n, ...)
    """
    h = t1 - t0
    u = (t - t0) / h
    shape = (-1,) + (1,) * (p0.ndim - 1)
    u, h = u.reshape(shape), h.reshape(shape)
    u2, u3 = u * u, u * u * u
    p = (
        (2 * u3 - 3 * u2 + 1) * p0 + (u3 - 2 * u2 + u) * h * m0
        + (3 * u2 - 2 * u3) * p1 + (u3 - u2) * h * m1
    )  # fmt: skip
    dp = (
        (6 * u2 - 6 * u) * p0 / h + (3 * u2 - 4 * u + 1) * m0
        + (6 * u - 6 * u2) * p1 / h + (3 * u2 - 2 * u) * m1
    )  # fmt: skip
    return p, dp


def grid_minimum_start(nodes, states) -> np.ndarray:
    """Grid time of the smallest separation of each star, shape (n,).

    ``states`` has shape (m, n, 6); this is the global minimum over the grid,
    the start of the Newton refinement.
    """
    d2 = np.sum(states[..., :3] ** 2, axis=-1)
    return nodes[np.argmin(d2, axis=0)]


def valley_starts(nodes, states, count=3) -> np.ndarray:
    """Grid times of the ``count`` lowest valleys of each star's separation, shape (count, n).

    A valley: a node below both neighbours, or an end of the grid the separation falls towards. Two valleys
    of nearly equal depth on the grid can swap once refined between the nodes, so the search refines each
    of the lowest few (:func:`global_perihelion`). Rows with fewer valleys repeat their lowest.
    """
    d2 = np.sum(states[..., :3] ** 2, axis=-1)  # (m, n)
    m = d2.shape[0]
    valley = np.ones(d2.shape, dtype=bool)
    if m >= 3:
        valley[1:-1] = (d2[1:-1] < d2[:-2]) & (d2[1:-1] <= d2[2:])
        valley[0], valley[-1] = d2[0] < d2[1], d2[-1] < d2[-2]
    masked = np.where(valley, d2, np.inf)
    lowest = np.argmin(d2, axis=0)
    masked[lowest, np.arange(d2.shape[1])] = -np.inf  # the grid's global minimum always comes first
    k = min(count, m)
    order = np.argsort(masked, axis=0, kind="stable")[:k]  # (k, n)
    picked = np.take_along_axis(masked, order, axis=0)
    order = np.where(np.isfinite(picked) | (picked == -np.inf), order, lowest[None, :])
    return nodes[order]


def global_perihelion(nodes, node_values, starts, *, coefficients=False):
    """Newton from each row of ``starts`` (k, n); per star the refined minimum with the smallest separation.

    Returns t, state, outside, converged as :func:`newton_perihelion`.
    """
    best = None
    for t0 in np.atleast_2d(starts):  # the few candidate valleys
        res = newton_perihelion(nodes, node_values, t0, coefficients=coefficients)
        if best is None:
            best = [np.array(r, copy=True) for r in res]
            continue
        d_new = np.einsum("ij,ij->i", res[1][:, :3], res[1][:, :3])
        d_old = np.einsum("ij,ij->i", best[1][:, :3], best[1][:, :3])
        better = d_new < d_old
        for b, r in zip(best, res, strict=True):
            b[better] = r[better]
    return tuple(best)


def _cubic(t0, t1, p0, m0, p1, m1):
    """Power-basis coefficients of the Hermite cubic in u = (t - t0) / h."""
    h = (t1 - t0)[:, None]
    c2 = 3.0 * (p1 - p0) - h * (2.0 * m0 + m1)
    c3 = 2.0 * (p0 - p1) + h * (m0 + m1)
    return p0, h * m0, c2, c3, h


def quintic_coefficients(h, p0, v0, a0, p1, v1, a1):
    """Power-basis coefficients (c0..c5) in u = (t - t0) / h of the quintic Hermite interpolant.

    It matches position, velocity and acceleration at both ends of an interval of width ``h``; its error
    is of order h^6 times the sixth derivative, against h^4 for the cubic through positions and
    velocities (Hairer, Norsett & Wanner 1993, Sect. II.6). Arrays broadcast; ``h`` against their
    leading axes.
    """
    v0, v1 = h * v0, h * v1
    a0, a1 = h * h * a0, h * h * a1
    dp = p1 - p0
    c3 = 10.0 * dp - 6.0 * v0 - 4.0 * v1 - 0.5 * (3.0 * a0 - a1)
    c4 = -15.0 * dp + 8.0 * v0 + 7.0 * v1 + 0.5 * (3.0 * a0 - 2.0 * a1)
    c5 = 6.0 * dp - 3.0 * (v0 + v1) - 0.5 * (a0 - a1)
    return p0, v0, 0.5 * a0, c3, c4, c5


def newton_perihelion(nodes, node_values, t_start, *, max_iter=30, tol=1e-7, coefficients=False):
    """Refine the time of minimum separation with Newton's method on Hermite interpolants.

    Parameters
    ----------
    nodes : ndarray, shape (m,)
        Grid times [pc/(km/s)].
    node_values : callable
        ``node_values(k, rows) -> (state0, deriv0, state1, deriv1)``, each of
        shape (len(rows), 6): relative states and their time derivatives of
        stars ``rows`` at node indices ``k`` and ``k + 1``.
        The separation between nodes is the quintic Hermite interpolant of
        the positions through their velocities and accelerations.
        With ``coefficients=True`` it returns instead power-basis coefficients
        in u = (t - t_k) / h_k: (18, len(rows)), c0..c5 of the position's
        quintic (:func:`quintic_coefficients`), or (24, len(rows)), c0..c3 of
        the Hermite cubics of position and velocity (:func:`_cubic`).
    t_start : ndarray, shape (n,)
        Starting times (clamped to the grid).
    max_iter : int
    tol : float
        Convergence threshold on the last Newton step, relative to max(1, |t|);
        the step is applied, and Newton's quadratic convergence leaves an error
        of order (a / v) step^2, far below 1e-12.
    coefficients : bool
        See ``node_values``.

    Returns
    -------
    t : ndarray, shape (n,)
        Perihelion time, or the window edge for ``outside``.
    state : ndarray, shape (n, 6)
        Relative state there.
    outside : ndarray of bool, shape (n,)
        The separation still decreases at the window edge: the perihelion is
        outside the window.
    converged : ndarray of bool, shape (n,)
    """
    m = len(nodes)
    t = np.clip(np.asarray(t_start, dtype=float), nodes[0], nodes[-1])
    n = t.size
    coefs = _coefficient_source(nodes, node_values, coefficients)
    k = np.clip(np.searchsorted(nodes, t, side="right") - 1, 0, m - 2)
    c = np.ascontiguousarray(coefs(k, np.arange(n)))
    h = nodes[k + 1] - nodes[k]
    outside = np.zeros(n, dtype=bool)
    done = np.zeros(n, dtype=bool)
    act = np.arange(n)
    for _ in range(max_iter):
        if act.size == 0:
            break
        every = 2 * act.size > n  # compute on every row rather than gather most of them
        if every:
            ca, ha, ka, t_old = c, h, k, t
        else:
            ca, ha, ka, t_old = np.take(c, act, axis=1), h[act], k[act], t[act]
        f, fp = _separation_rate(ca, (t_old - nodes[ka]) / ha, ha)
        if every and act.size < n:
            f, fp, ha, ka, t_old = f[act], fp[act], ha[act], ka[act], t_old[act]
        t_new, edge, finished = _newton_step(nodes, t_old, f, fp, ha, tol)
        t[act] = t_new
        _move_to_new_intervals(nodes, coefs, act, ka, t_new, finished, k, h, c)
        if finished.any():
            outside[act[edge]] = True
            done[act[finished]] = True
            act = act[~finished]
    u = (t - nodes[k]) / h
    if c.shape[0] == 18:
        pos, vel = _quintic_state(c, u, h)
        state = np.concatenate([pos, vel])
    else:
        state = c[:6] + u * (c[6:12] + u * (c[12:18] + u * c[18:]))
    return t, state.T, outside, done


def _coefficient_source(nodes, node_values, coefficients):
    """``coefs(k, rows)``: interpolant coefficients, components in rows, samples in columns.

    From node values, the quintic of the positions (18 rows: c0..c5 of x, y, z) built with the
    accelerations (the last three components of the derivatives); given coefficients are either that or
    the cubics of positions and velocities (24 rows).
    """

    def coefs(kk, rows):
        if coefficients:
            return node_values(kk, rows)
        s0, d0, s1, d1 = node_values(kk, rows)
        h = (nodes[kk + 1] - nodes[kk])[:, None]
        parts = quintic_coefficients(h, s0[:, :3], s0[:, 3:], d0[:, 3:], s1[:, :3], s1[:, 3:], d1[:, 3:])
        return np.concatenate(parts, axis=1).T

    return coefs


def _separation_rate(ca, u, ha):
    """``f = x . v`` and its time derivative ``v . v + x . a`` from interpolant coefficients at ``u``.

    ``ca``: (24, n) cubics of position and velocity, or (18, n) quintics of the position.
    """
    if ca.shape[0] == 18:
        x, v, acc = _quintic_state(ca, u, ha, second=True)
        f = x[0] * v[0] + x[1] * v[1] + x[2] * v[2]
        fp = v[0] * v[0] + v[1] * v[1] + v[2] * v[2] + x[0] * acc[0] + x[1] * acc[1] + x[2] * acc[2]
        return f, fp
    # Horner in place: position and velocity, and the acceleration
    p = ca[18:] * u
    p += ca[12:18]
    p *= u
    p += ca[6:12]
    p *= u
    p += ca[:6]
    acc = ca[21:] * (3.0 * u)
    acc += 2.0 * ca[15:18]
    acc *= u
    acc += ca[9:12]
    acc /= ha
    x, v = p[:3], p[3:]
    f = x[0] * v[0] + x[1] * v[1] + x[2] * v[2]
    fp = v[0] * v[0] + v[1] * v[1] + v[2] * v[2] + x[0] * acc[0] + x[1] * acc[1] + x[2] * acc[2]
    return f, fp


def _quintic_state(ca, u, ha, *, second=False):
    """Position, velocity (and acceleration) from quintic coefficients (18, n) at ``u`` (Horner)."""
    p = ca[15:18] * u
    dp = ca[15:18] * (5.0 * u)
    ddp = ca[15:18] * (20.0 * u) if second else None
    for i in (4, 3, 2):
        c = ca[3 * i : 3 * i + 3]
        p += c
        p *= u
        dp += i * c
        dp *= u
        if second and i > 2:
            ddp += (i * (i - 1)) * c
            ddp *= u
    p += ca[3:6]
    p *= u
    p += ca[0:3]
    dp += ca[3:6]
    v = dp / ha
    if not second:
        return p, v
    ddp += 2.0 * ca[6:9]
    return p, v, ddp / (ha * ha)


def _newton_step(nodes, t_old, f, fp, ha, tol):
    """New times (clamped to the grid), rows stuck at a window edge, and rows finished (converged or at an edge)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        step = np.where(fp > 0, -f / fp, -np.sign(f) * 0.5 * ha)
    t_new = np.clip(t_old + step, nodes[0], nodes[-1])
    edge = (((t_new == nodes[0]) & (f > 0)) | ((t_new == nodes[-1]) & (f < 0))) & (
        t_old == t_new
    )
    conv = np.abs(step) <= tol * np.maximum(1.0, np.abs(t_old))
    return t_new, edge, conv | edge


def _move_to_new_intervals(nodes, coefs, act, ka, t_new, finished, k, h, c):
    """In place: unfinished rows whose time left their grid interval get its index, width and coefficients."""
    k_new = np.clip(np.searchsorted(nodes, t_new, side="right") - 1, 0, len(nodes) - 2)
    move = (k_new != ka) & ~finished
    if move.any():
        rows = act[move]
        k[rows] = k_new[move]
        h[rows] = nodes[k[rows] + 1] - nodes[k[rows]]
        c[:, rows] = coefs(k[rows], rows)
