"""Where the orbit model evaluates: search window, tabulation grid, map span, distance bins.

Times are in pc/(km/s) unless the name says Myr (see
:data:`perierr.units.MYR_PER_PC_PER_KMS`); positions in pc.
"""

from __future__ import annotations

import math

import numpy as np

from ...units import MYR_PER_PC_PER_KMS as _C

__all__ = ["rownorm", "window_and_nodes", "map_span", "distance_bins"]


def rownorm(a):
    """Euclidean norm of each row of a 2-d array (faster than numpy.linalg.norm)."""
    return np.sqrt(np.einsum("ij,ij->i", a, a))


def window_and_nodes(t_lin, speed, *, horizon_myr, max_horizon_myr, grid_step_myr, grid_travel_pc):
    """Search window [Myr] and grid nodes for straight-line times and the largest speed.

    Parameters
    ----------
    t_lin : ndarray, shape (n,)
        Straight-line perihelion times [pc/(km/s)].
    speed : float
        Largest relative speed [km/s].
    horizon_myr : None or (float, float)
        None: the range of ``t_lin`` widened on each side by 25 % of the time
        plus half the range plus 0.3 Myr, containing now, capped at
        ``max_horizon_myr``; else the window itself.
    max_horizon_myr, grid_step_myr, grid_travel_pc : float
        See :class:`~perierr.models.orbit.model.OrbitModel`.

    Returns
    -------
    (lo, hi) : tuple of float
        The window [Myr].
    nodes : ndarray, shape (m,)
        Increasing grid times containing 0 [pc/(km/s)].
    """
    if horizon_myr is None:
        tl = t_lin * _C
        cap = max_horizon_myr
        t_min, t_max = float(np.min(tl)), float(np.max(tl))
        pad = 0.5 * (t_max - t_min) + 0.3
        lo = max(-cap, min(0.0, t_min - pad - 0.25 * abs(t_min)))
        hi = min(cap, max(0.0, t_max + pad + 0.25 * abs(t_max)))
    else:
        lo, hi = horizon_myr
    step = min(grid_step_myr, grid_travel_pc / max(float(speed), 1e-3) * _C)
    parts = [np.zeros(1)]
    if lo < 0:
        n = math.ceil(-lo / step)
        parts.insert(0, np.linspace(lo, 0.0, n + 1)[:-1])
    if hi > 0:
        n = math.ceil(hi / step)
        parts.append(np.linspace(0.0, hi, n + 1)[1:])
    return (lo, hi), np.concatenate(parts) / _C


def map_span(t_lin, nodes):
    """Grid nodes the map needs: the straight-line times, widened, and now.

    Returns the nodes and whether the span was cut below and above the window
    (perihelia found at a cut edge are integrated directly). The widening is
    a quarter of the range plus a tenth of the largest time, out to the next
    node on each side, and always includes the nodes next to now.
    """
    lo_t, hi_t = float(np.min(t_lin)), float(np.max(t_lin))
    pad = 0.25 * (hi_t - lo_t) + 0.1 * max(abs(lo_t), abs(hi_t))
    m = len(nodes)
    zero = int(np.searchsorted(nodes, 0.0))
    # at least the nodes next to now, so that there is an interval on each side
    i0 = min(max(0, zero - 1), int(np.searchsorted(nodes, min(0.0, lo_t - pad), side="right")) - 1)
    i1 = max(min(m, zero + 2), int(np.searchsorted(nodes, max(0.0, hi_t + pad))) + 1)
    i0, i1 = max(0, i0), min(m, i1)
    return nodes[i0:i1], i0 > 0, i1 < m


def distance_bins(rel, ref_rel, *, bin_width_pc, min_bin_samples):
    """Distance bins of samples around the reference, one reference orbit each.

    Parameters
    ----------
    rel : ndarray, shape (n, 6)
        Sample states relative to the Sun.
    ref_rel : ndarray, shape (6,)
        The nominal state; its bin always gets it as reference.
    bin_width_pc : float
    min_bin_samples : int
        Sparser bins are not mapped.

    Returns
    -------
    bidx : ndarray of int, shape (n,)
        Reference index of each row (0 for sparse rows).
    refs : ndarray, shape (K, 6)
        Reference states: the nominal one, and the mean state of other bins.
    sparse : ndarray of bool, shape (n,)
        Rows in bins with fewer than ``min_bin_samples`` samples.
    """
    dist = rownorm(rel[:, :3])
    dref = np.linalg.norm(ref_rel[:3])
    labels = np.rint((dist - dref) / bin_width_pc).astype(np.int64)
    uniq, inv, counts = np.unique(labels, return_inverse=True, return_counts=True)
    keep = (counts >= min_bin_samples) | (uniq == 0)
    sparse = ~keep[inv]
    new_index = np.cumsum(keep) - 1
    bidx = new_index[inv]
    nk = int(keep.sum())
    bk, rk = bidx[~sparse], rel[~sparse]
    sums = np.stack([np.bincount(bk, weights=rk[:, j], minlength=nk) for j in range(6)], 1)
    refs = sums / np.maximum(np.bincount(bk, minlength=nk), 1)[:, None]
    refs[uniq[keep] == 0] = ref_rel
    return np.where(sparse, 0, bidx), refs, sparse
