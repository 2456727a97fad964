"""Draws through polynomial maps fitted on leaves of the cloud, checked on random draws, with direct fallback.

The steps of the orbit model's map (:class:`~perierr.models.orbit.model.OrbitModel`, ``method`` "auto" or
"map"), over the search window (``horizon_myr``, by default +-``max_horizon_myr``):

1. cut the draws into leaves (:func:`.leaves.partition`); a few draws much faster than the rest are set
   aside (integrated directly on a grid of their own) so that they do not make the grid finer for all;
2. scan: integrate each leaf's probes (its centre, its extreme draws along each principal coordinate and
   random check draws its fit will not see) over the whole window on the grid (:func:`.draws.integrate_draws`,
   one vectorized call for all leaves); the valleys of their separations (nodes below both neighbours, or a
   window edge the separation still falls towards) give the leaf's span, the part of the grid that holds
   every draw's global minimum, and, when a probe has more than one valley, the regions each draw's search
   must look at;
3. integrate the leaf's training draws (extremes and random draws) and check draws from now over its span,
   with RK4 steps halved until Richardson's estimate of their error is small (``_Grid.substeps``);
4. fit the leaf's polynomial map of the states at every node of its span (:func:`.leaves.fit_leaf`, the
   lowest degree the check trusts), apply it to every draw of the leaf and refine each perihelion with
   Newton's method on the quintic Hermite interpolants (:func:`.integrate.newton_perihelion`), started at the
   straight-line time shifted by the centre's, or, for leaves with several valleys, from each of the lowest
   valleys of the draw's mapped separation over the whole span (the smallest refined minimum wins);
5. compare map and direct integration on the check draws; the error, modelled per leaf as growing with the
   distance from the leaf's centre, decides: a leaf with more than a few draws it does not trust is cut
   finer and done again (up to ``_ROUNDS`` times); the draws still not trusted, and those whose search ends
   at a span edge inside the window, are integrated directly over the whole window.
"""

from __future__ import annotations

import numpy as np

from ...units import AU_PER_PC
from ...units import MYR_PER_PC_PER_KMS as _C
from .draws import SunOrbit, integrate_draws
from .grid import rownorm, window_and_nodes
from .integrate import global_perihelion, newton_perihelion, quintic_coefficients, valley_starts
from .leaves import fit_leaf, leaf_features, make_leaf, n_features, partition, scaled_offsets

__all__ = ["map_perihelia", "direct_rk4"]

#: Rounds of cutting leaves finer where the check does not trust the map.
_ROUNDS = 3
#: A leaf is cut finer when more than this fraction of its draws is not trusted.
_REDO_FRACTION = 0.05
#: Draws whose map is applied in one matrix product (bounds the memory of the features).
_APPLY_CHUNK = 50_000
#: Draws faster than this factor times the speed quantile below are integrated directly on a grid of their
#: own, so that a few fast outliers do not make the grid finer for all (quantile of a subsample this large).
_FAST_FACTOR, _SPEED_QUANTILE, _QUANTILE_SAMPLE = 2.0, 0.995, 20_000
#: A leaf's map takes the lowest polynomial degree whose check error is below this fraction of the tolerance.
_ORDER_MARGIN = 0.2
#: The RK4 steps are halved until their estimated error is below this fraction of the tolerance.
_RK4_FRACTION = 0.1
#: Nodes added on each side of a leaf's span, and the span's widening relative to its time.
_SPAN_PAD_NODES, _SPAN_PAD_FRACTION = 3, 0.05
#: Floats of tabulated states a batch of leaves may hold (about 200 MB for states and derivatives).
_BATCH_FLOATS = 12_500_000
#: Floats of mapped positions a multi-valley scan may hold at once (about 100 MB).
_SCAN_FLOATS = 12_500_000
#: The map's predicted error is this factor times the largest error its check found.
_ERROR_SAFETY = 2.0


def map_perihelia(model, rel_all, t_lin_all, progress=None):
    """Perihelia of Sun-relative states through leaf maps; t, state, outside, conv and the diagnostics.

    Parameters
    ----------
    model : OrbitModel
        Its potential, solar state, window and map settings.
    rel_all : ndarray, shape (n, 6)
        Sun-relative states [pc, km/s].
    t_lin_all : ndarray, shape (n,)
        Straight-line perihelion times [pc/(km/s)].
    progress : callable, optional
        ``progress(done, total)`` after each round of leaves and each chunk of direct integrations.
    """
    n = rel_all.shape[0]
    out = _Results(n)
    report = _Progress(progress, n)
    order, max_k = model.map_order, 6 if model.map_order <= 2 else 4
    n_train = (3 * n_features(max_k, order)) // 2 + 8
    min_size = smallest_leaf(model)
    window = model.window()
    speed_all = rownorm(rel_all[:, 3:])
    sub = speed_all[:: max(1, n // _QUANTILE_SAMPLE)]  # a systematic subsample is enough for a quantile
    fast = speed_all > _FAST_FACTOR * float(np.quantile(sub, _SPEED_QUANTILE))
    main = np.flatnonzero(~fast)
    diag = _Diagnostics(window)
    grid = _Grid(model, window, float(speed_all[main].max()) if main.size else 1.0)
    diag.nodes = len(grid.nodes)
    u = scaled_offsets(rel_all, rel_all[main[:: max(1, main.size // _QUANTILE_SAMPLE)]].mean(axis=0), t_lin_all)
    pending = partition(u, main, model.leaf_radius_pc, min_size) if main.size else []
    rng = np.random.default_rng(0)  # which draws train and check a leaf: fixed, so the answer is reproducible
    radius = model.leaf_radius_pc
    to_direct = []
    for round_ in range(_ROUNDS):  # a few rounds, each over all its leaves at once
        last = round_ + 1 == _ROUNDS
        small = [rows for rows in pending if rows.size < min_size]
        diag.small += sum(rows.size for rows in small)
        to_direct += small
        pending = [rows for rows in pending if rows.size >= min_size]
        if not pending:
            break
        leaves = [make_leaf(rel_all, rows, t_lin_all, order=order, max_k=max_k) for rows in pending]
        results = _map_round(model, grid, rel_all, t_lin_all, leaves, n_train, rng)
        radius *= 0.5
        pending = []
        for leaf, (found, bad, stats) in zip(leaves, results, strict=True):
            if not last and bad.sum() > _REDO_FRACTION * leaf.rows.size and leaf.rows.size >= 2 * min_size:
                # cut finer, and again: velocity offsets now count for what they move the star by over the
                # leaf's whole span (a leaf can hold draws whose closest approach is far from the others')
                t_far = max(abs(stats["span"][0]), abs(stats["span"][1])) + 1.0
                u_leaf = scaled_offsets(rel_all[leaf.rows], leaf.center, np.full(leaf.rows.size, t_far - 1.0))
                u[leaf.rows] = u_leaf
                pending += partition(u, leaf.rows, radius, min_size)
                continue
            diag.leaf(stats)  # the leaves of the final cut (not those cut finer) enter the diagnostics
            out.put(leaf.rows, *found)
            if model.method == "map":  # checked, never replaced
                bad = np.zeros_like(bad)
            report.add(leaf.rows.size - int(bad.sum()))
            if bad.any():
                diag.fallback += int(bad.sum())
                to_direct.append(leaf.rows[bad])
    rows = np.concatenate(to_direct + pending) if to_direct or pending else np.zeros(0, dtype=np.int64)
    if rows.size:  # the draws the map does not take, over the whole window
        out.put(rows, *grid.direct(rel_all[rows], report, diag))
    if fast.any():
        rows = np.flatnonzero(fast)
        f_grid = _Grid(model, window, float(speed_all[rows].max()))
        diag.nodes = max(diag.nodes, len(f_grid.nodes))
        diag.small += int(rows.size)
        out.put(rows, *f_grid.direct(rel_all[rows], report, diag))
    return out.t, out.state, out.outside, out.conv, diag.to_dict(model, n)


class _Grid:
    """The window's grid and the Sun's orbit on it (one for the draws of ordinary speed, one for the fast)."""

    def __init__(self, model, window, speed):
        _, self.nodes = window_and_nodes(window, speed, grid_step_myr=model.grid_step_myr,
                                         grid_travel_pc=model.grid_travel_pc)
        self.sun = SunOrbit(model.potential, model._sun_state, self.nodes[0], self.nodes[-1])
        self.coarse = self.sun.track(self.nodes, 1)
        self.tolerance_au = _RK4_FRACTION * model.map_tolerance_au
        self._tracks = {1: self.coarse}

    def track(self, substeps):
        if substeps not in self._tracks:
            self._tracks[substeps] = self.sun.track(self.nodes, substeps)
        return self._tracks[substeps]

    def substeps(self, probes, lo=None, hi=None):
        """The fewest RK4 sub-steps (1, 2, 4, 8) whose Richardson error estimate on the probes is small enough.

        The error of ``s`` sub-steps is estimated from the probes integrated with ``s`` and ``2 s``:
        ``|y_s - y_2s| * 16 / 15`` (RK4 is fourth order). Returns (s, estimate [au]).
        """
        valid = _valid_mask(self.nodes, probes.shape[0], lo, hi)[..., None]  # entries integrated to

        def positions(track):
            # entries outside each probe's range are left undefined by integrate_draws: zero them
            return np.where(valid, integrate_draws(track, probes, lo, hi)[0][..., :3], 0.0)

        st_c = positions(self.track(1))
        for s in (1, 2, 4, 8):
            st_f = positions(self.track(2 * s))
            err = float(np.max(rownorm((st_c - st_f).reshape(-1, 3)), initial=0.0)) * AU_PER_PC * 16.0 / 15.0
            if err <= self.tolerance_au or s == 8:
                return s, err
            st_c = st_f
        raise AssertionError("unreachable")  # pragma: no cover

    def direct(self, rel, report, diag):
        """Direct integration over the whole window and the global minimum; t, state, outside, conv."""
        s, err = self.substeps(rel[:: max(1, rel.shape[0] // 4)][:4])
        diag.int_err = max(diag.int_err, err)
        return direct_rk4(self.track(s), rel, report)


def _valid_mask(nodes, n, lo, hi):
    """(m, n) True at the nodes each draw was integrated to (from now to ``lo`` and to ``hi``)."""
    if lo is None:
        return np.ones((len(nodes), n), dtype=bool)
    idx = np.arange(len(nodes))[:, None]
    zero = int(np.flatnonzero(nodes == 0.0)[0])
    return (idx >= np.minimum(lo, zero)[None, :]) & (idx <= np.maximum(hi, zero)[None, :])


def smallest_leaf(model) -> int:
    """Fewest draws a leaf map is built for (fewer rows are integrated directly)."""
    order, max_k = model.map_order, 6 if model.map_order <= 2 else 4
    n_train = (3 * n_features(max_k, order)) // 2 + 8
    return max(model.min_leaf_samples, 2 * (n_train + model.n_check + 2))


class _Results:
    """Per-draw perihelion arrays, filled leaf by leaf."""

    def __init__(self, n):
        self.t, self.state = np.full(n, np.nan), np.full((n, 6), np.nan)
        self.outside, self.conv = np.zeros(n, dtype=bool), np.zeros(n, dtype=bool)

    def put(self, rows, t, state, outside, conv):
        self.t[rows], self.state[rows], self.outside[rows], self.conv[rows] = t, state, outside, conv


class _Progress:
    """Counts draws done and calls the user's ``progress(done, total)``."""

    def __init__(self, fn, total):
        self.fn, self.total, self.done = fn, total, 0

    def add(self, count):
        self.done = min(self.total, self.done + int(count))
        if self.fn is not None:
            self.fn(self.done, self.total)


class _Diagnostics:
    """What the map found, gathered over leaves and rounds."""

    def __init__(self, window):
        self.leaves = self.checked = self.small = self.fallback = self.multimodal = self.nodes = 0
        self.err_au, self.err_t, self.coef, self.int_err = 0.0, 0.0, 0.0, 0.0
        self.window = window
        self.span_lo, self.span_hi = np.inf, -np.inf

    def leaf(self, stats):
        """Count a leaf whose map is used, with its check's statistics."""
        self.leaves += 1
        self.checked += stats["checked"]
        self.multimodal += int(stats["multimodal"])
        self.err_au, self.err_t = max(self.err_au, stats["err_au"]), max(self.err_t, stats["err_t"])
        self.coef, self.int_err = max(self.coef, stats["coef"]), max(self.int_err, stats["int_err"])
        self.span_lo, self.span_hi = min(self.span_lo, stats["span"][0]), max(self.span_hi, stats["span"][1])

    @staticmethod
    def scheme() -> str:
        return (f"fixed-step RK4 on the grid, sub-steps halved until Richardson's estimate is below "
                f"{_RK4_FRACTION} of the map tolerance")

    def to_dict(self, model, n) -> dict:
        diag = {
            "window_myr": [float(self.window[0]), float(self.window[1])],
            "grid_nodes": self.nodes,
            "n_map_leaves": self.leaves,
            "n_checked": self.checked,
            "map_error_au_max": self.err_au,
            "map_error_time_myr_max": self.err_t,
            "map_error_model": (f"error_au <= max(e, c * r^{model.map_order + 1}) per leaf of the cloud: e twice the "
                                "largest error (in d_ph, and in position at any node) on random check draws and "
                                "the two farthest from the centre, r a draw's largest principal coordinate, "
                                "c = e / r_check^(order + 1) with r_check the farthest check draw's"),
            "map_error_coefficient_max": self.coef,
            "integration_scheme": self.scheme(),
            "integration_error_au": self.int_err,
            "map_span_myr": [float(self.span_lo * _C), float(self.span_hi * _C)] if self.leaves else [],
            "multimodal_leaves": self.multimodal,
            "fallback_samples": self.fallback,
            "sparse_samples": self.small,
        }
        if self.fallback or self.small:
            diag["fallback_reason"] = (
                f"{self.fallback + self.small} of {n} samples integrated directly: {self.small} in parts of the "
                f"cloud too sparse for a map, {self.fallback} where the check did not trust the map to "
                f"{model.map_tolerance_au} au"
            )
        return diag


def _map_round(model, grid, rel_all, t_lin_all, leaves, n_train, rng):
    """Fit and apply the maps of ``leaves``, a batch at a time (bounded memory).

    Returns per leaf ((t, state, outside, conv), mask of draws not trusted, its check statistics).
    """
    per_leaf = 12 * len(grid.nodes) * (n_train + model.n_check + 3)  # floats of one leaf's integrations
    batch = max(1, _BATCH_FLOATS // per_leaf)
    results = []
    for lo in range(0, len(leaves), batch):  # loop over batches of leaves
        results += _map_batch(model, grid, rel_all, t_lin_all, leaves[lo : lo + batch], n_train, rng)
    return results


def _map_batch(model, grid, rel_all, t_lin_all, leaves, n_train, rng):
    """:func:`_map_round` for one batch of leaves: their integrations in one call each."""
    nodes, zero = grid.nodes, grid.coarse.zero
    coords = [leaf.coordinates(rel_all[leaf.rows]) for leaf in leaves]
    picks = [_pick(x, n_train, model.n_check, rng) for x in coords]  # local (extremes, random, check)
    # 1. the scan: probes over the whole window
    probes = [np.vstack([leaf.center, rel_all[leaf.rows[ex]], rel_all[leaf.rows[ch]]])
              for leaf, (ex, _, ch) in zip(leaves, picks, strict=True)]
    p_off = np.cumsum([0] + [p.shape[0] for p in probes])
    p_states, _ = integrate_draws(grid.coarse, np.vstack(probes))
    spans, regions, shifts = [], [], []
    for j, leaf in enumerate(leaves):  # loop over leaves: their spans from their probes
        span, reg, shift = _span(nodes, p_states[:, p_off[j] : p_off[j + 1]], leaf, t_lin_all[leaf.rows])
        spans.append(span)
        regions.append(reg)
        shifts.append(shift)
    del p_states
    lo = np.array([min(a, zero) for a, _ in spans])
    hi = np.array([max(b, zero) for _, b in spans])
    # 2. RK4 sub-steps from each leaf's centre and farthest check draws over its span
    far = [np.vstack([leaf.center, rel_all[leaf.rows[ch[-2:]]]]) for leaf, (_, _, ch) in zip(leaves, picks,
                                                                                            strict=True)]
    sizes = [f.shape[0] for f in far]
    s, int_err = grid.substeps(np.vstack(far), np.repeat(lo, sizes), np.repeat(hi, sizes))
    # 3. training (extremes, random), check draws and centre of every leaf, from now over its span
    blocks = [np.vstack([rel_all[leaf.rows[np.concatenate([ex, tr])]], rel_all[leaf.rows[ch]], leaf.center])
              for leaf, (ex, tr, ch) in zip(leaves, picks, strict=True)]
    sizes = [blk.shape[0] for blk in blocks]
    states, derivs = integrate_draws(grid.track(s), np.vstack(blocks), np.repeat(lo, sizes), np.repeat(hi, sizes))
    offsets = np.cumsum([0] + sizes)
    results = []
    for j, leaf in enumerate(leaves):  # loop over leaves, each vectorized over its draws
        a, b = spans[j]
        cols = slice(offsets[j], offsets[j + 1])
        found, bad, stats = _map_leaf(model, nodes[a : b + 1], states[a : b + 1, cols], derivs[a : b + 1, cols],
                                      t_lin_all[leaf.rows] + shifts[j], leaf, coords[j], picks[j], regions[j])
        # a perihelion at a span edge inside the window lies beyond the span: not trusted
        t_l = found[0]
        bad |= ((t_l == nodes[a]) & (a > 0)) | ((t_l == nodes[b]) & (b < len(nodes) - 1))
        stats.update(int_err=int_err, span=(nodes[a], nodes[b]))
        results.append((found, bad, stats))
    return results


def _span(nodes, states, leaf, t_lin):
    """A leaf's span (first, last node), its valley regions (None: one valley each) and its start shift.

    ``states`` (m, P, 6): the leaf's probes over the whole window: its centre, its extreme draws, its check
    draws. The span holds the
    probes' valleys and the leaf's straight-line times shifted by the centre's orbit-minus-straight-line
    time, widened by ``_SPAN_PAD_NODES`` nodes and ``_SPAN_PAD_FRACTION`` of the time.
    """
    m = len(nodes)
    d = np.sqrt(np.sum(states[..., :3] ** 2, axis=-1))  # (m, P)
    valley = np.zeros(d.shape, dtype=bool)
    if m >= 3:
        valley[1:-1] = (d[1:-1] < d[:-2]) & (d[1:-1] <= d[2:])
        valley[0], valley[-1] = d[0] < d[1], d[-1] < d[-2]
    # a valley matters when a draw of the leaf could come closer there than the probes' largest closest
    # approach. A draw's position is, to first order, linear in its coordinates, so its projection on the
    # centre's direction lies between the probes' (extremes and random draws) lowest and highest
    # projections, widened by half their range; the distance is at least the projection
    lowest = np.argmin(d, axis=0)
    reach = float(d[lowest, np.arange(d.shape[1])].max())
    unit = states[:, :1, :3] / np.maximum(d[:, :1, None], 1e-300)
    proj = np.sum(states[..., :3] * unit, axis=-1)  # (m, P)
    bound = proj.min(axis=1) - 0.5 * (proj.max(axis=1) - proj.min(axis=1))
    relevant = np.flatnonzero(valley.any(axis=1) & (bound <= reach))
    several = relevant.size > 1 and bool(np.any(np.diff(relevant) > 2 * _SPAN_PAD_NODES))
    w_c = leaf.center[3:]
    shift = float(nodes[lowest[0]]) + float(np.dot(leaf.center[:3], w_c)) / max(float(np.dot(w_c, w_c)), 1e-300)
    starts = np.clip(t_lin + shift, nodes[0], nodes[-1])
    marks = [relevant, lowest]
    marks.append(np.searchsorted(nodes, [starts.min(), starts.max()]).clip(0, m - 1))
    at = np.unique(np.concatenate(marks))
    pad = _SPAN_PAD_FRACTION * np.abs(nodes[at])
    lo_n = np.searchsorted(nodes, nodes[at] - pad) - _SPAN_PAD_NODES
    hi_n = np.searchsorted(nodes, nodes[at] + pad) + _SPAN_PAD_NODES
    a, b = max(0, int(lo_n.min())), min(m - 1, int(hi_n.max()))
    regions = None
    if several:  # clusters of valley nodes, merged where they overlap once widened
        order = np.argsort(lo_n)
        regions = []
        for lo_k, hi_k in zip(lo_n[order], hi_n[order], strict=True):
            lo_k, hi_k = max(a, int(lo_k)) - a, min(b, int(hi_k)) - a
            if regions and lo_k <= regions[-1][1] + 1:
                regions[-1] = (regions[-1][0], max(regions[-1][1], hi_k))
            else:
                regions.append((lo_k, hi_k))
    return (a, b), regions, shift


def _map_leaf(model, nodes, states, derivs, t_start, leaf, x, pick, regions):
    """Fit and apply one leaf's map over its span.

    ``states``/``derivs`` (m, P, 6) hold the leaf's training draws, then its check draws, then its centre,
    integrated directly on ``nodes`` (the span); ``regions``: node ranges of the span where the draws'
    searches start (None: at ``t_start``). Returns ((t, state, outside, conv) of its draws, the mask of draws
    not trusted, the check's statistics).
    """
    ex, tr, ch = pick
    train = np.concatenate([ex, tr])
    n_t = train.size
    targets = np.moveaxis(np.concatenate([states[:, :n_t], derivs[:, :n_t]], axis=-1), 1, 0).reshape(n_t, -1)
    # the check: direct integration (its global minimum in the span, which holds the window's) of draws the
    # fit did not see
    t_c, s_c, o_c, c_c = _direct_perihelia(nodes, states[:, n_t:-1], derivs[:, n_t:-1])
    # the lowest polynomial degree that the check trusts well within the tolerance (the cheapest map)
    for order in range(1, model.map_order + 1):  # loop over the few degrees
        leaf.order = order
        coef = fit_leaf(leaf, x[train], targets).reshape(-1, len(nodes), 12)
        quintics = _interval_quintics(coef, nodes)
        t_m, s_m, _, _ = _apply(leaf, x[ch], t_start[ch], quintics, nodes, regions, coef)
        err = np.abs(rownorm(s_m[:, :3]) - rownorm(s_c[:, :3])) * AU_PER_PC
        if err.max(initial=0.0) <= _ORDER_MARGIN * model.map_tolerance_au:
            break
    if regions is not None or _minimum_moves(leaf, x[train], t_start[train], states[:, :n_t], derivs[:, :n_t],
                                             nodes, quintics):
        regions = [(0, len(nodes) - 1)]  # several minima: every draw scans the whole span
    t_l, s_l, o_l, c_l = _apply(leaf, x, t_start, quintics, nodes, regions, coef)
    err = np.abs(rownorm(s_l[ch, :3]) - rownorm(s_c[:, :3])) * AU_PER_PC
    err_nodes = 0.0
    if regions is not None:
        # several minima: the fit's position error at every node of the span on the check draws decides
        # between valleys
        pos = np.einsum("nf,fmc->mnc", leaf_features(x[ch], leaf.k, leaf.order), coef[:, :, :3])
        err_nodes = float(np.max(rownorm((pos - states[:, n_t:-1, :3]).reshape(-1, 3)), initial=0.0)) * AU_PER_PC
    # error model: the largest check error (at perihelion, or at any node for several minima), with a safety
    # factor, growing as
    # the fit's remainder (score^(order+1)) beyond the farthest check draw
    score = np.max(np.abs(x), axis=1)
    found_err = max(float(err.max(initial=0.0)), err_nodes)  # what the check found (reported)
    floor = _ERROR_SAFETY * found_err
    reach = float(score[ch].max(initial=0.0))
    p = leaf.order + 1
    c_leaf = floor / reach**p if reach > 0 else 0.0
    stats = {"err_au": found_err, "err_t": float(np.max(np.abs(t_l[ch] - t_c), initial=0.0)) * _C, "coef": c_leaf,
             "checked": int(ch.size), "multimodal": regions is not None}
    t_l[ch], s_l[ch], o_l[ch], c_l[ch] = t_c, s_c, o_c, c_c  # the check draws keep their direct answer
    bad = (np.maximum(floor, c_leaf * score**p) > model.map_tolerance_au) | ~c_l
    bad[ch] = False
    return (t_l, s_l, o_l, c_l), bad, stats


def _pick(x, n_train, n_check, rng):
    """Local indices of a leaf's extremes, random training draws and check draws.

    The extremes (largest and smallest of each principal coordinate) train the fit; the check draws are
    random draws the fit does not see, and the two farthest from the centre among the rest.
    """
    n = x.shape[0]
    extremes = np.unique(np.concatenate([np.argmax(x, axis=0), np.argmin(x, axis=0)]))
    free = np.ones(n, dtype=bool)
    free[extremes] = False
    perm = rng.permutation(np.flatnonzero(free))
    k_tr = max(0, n_train - extremes.size)
    train, remaining = perm[:k_tr], perm[k_tr:]
    score = np.max(np.abs(x[remaining]), axis=1)
    far_pos = np.argpartition(-score, 1)[:2] if remaining.size > 2 else np.arange(remaining.size)
    keep = np.ones(remaining.size, dtype=bool)
    keep[far_pos] = False
    check = np.concatenate([remaining[keep][:n_check], remaining[far_pos]])
    return extremes, train, check


def _interval_quintics(coef, nodes):
    """Per interval, the (18, F) map from features to the quintic Hermite coefficients (c0..c5) of the position.

    ``coef`` (F, m, 12) maps features to position, velocity, velocity and acceleration at each node.
    """
    h = np.diff(nodes)[None, :, None]
    parts = quintic_coefficients(h, coef[:, :-1, :3], coef[:, :-1, 3:6], coef[:, :-1, 9:],
                                 coef[:, 1:, :3], coef[:, 1:, 3:6], coef[:, 1:, 9:])
    c = np.concatenate(parts, axis=-1)  # (F, m-1, 18)
    return np.ascontiguousarray(np.transpose(c, (1, 2, 0)))  # (m-1, 18, F)


def _quintic_source(quintics, feats):
    """``cubic(k, rows) -> (18, len(rows))`` for :func:`newton_perihelion` (``coefficients=True``)."""
    feats_t = np.ascontiguousarray(feats.T)

    def cubic(k, rows):
        out = np.empty((quintics.shape[1], rows.size))
        order = np.argsort(k, kind="stable")
        sk = k[order]
        cuts = np.flatnonzero(np.diff(sk)) + 1
        for lo, hi in zip(np.r_[0, cuts], np.r_[cuts, sk.size], strict=True):  # loop over grid intervals
            sel = order[lo:hi]
            out[:, sel] = quintics[sk[lo]] @ feats_t[:, rows[sel]]
        return out

    return cubic


def _apply(leaf, x, t_start, quintics, nodes, regions, coef):
    """Perihelia of draws with principal coordinates ``x`` through the leaf's map, in chunks.

    Newton starts at ``t_start`` or, with valley ``regions`` (leaves whose draws may have several minima),
    from each of the lowest valleys of the draw's mapped separation over every node of the span (the global
    minimum is the smallest). Returns t, state, outside, conv.
    """
    n = x.shape[0]
    t, state = np.empty(n), np.empty((n, 6))
    outside, conv = np.empty(n, dtype=bool), np.empty(n, dtype=bool)
    chunk = _APPLY_CHUNK if regions is None else max(256, _SCAN_FLOATS // (3 * len(nodes)))
    for lo in range(0, n, chunk):  # loop over chunks of draws, bounding the features' memory
        sl = slice(lo, min(n, lo + chunk))
        feats = leaf_features(x[sl], leaf.k, leaf.order)
        source = _quintic_source(quintics, feats)
        if regions is not None:
            starts = valley_starts(nodes, np.einsum("nf,fmc->mnc", feats, coef[:, :, :3]))
            t[sl], state[sl], outside[sl], conv[sl] = global_perihelion(nodes, source, starts, coefficients=True)
        else:
            t0 = np.clip(t_start[sl], nodes[0], nodes[-1])
            t[sl], state[sl], outside[sl], conv[sl] = newton_perihelion(nodes, source, t0, coefficients=True)
    return t, state, outside, conv


def _minimum_moves(leaf, x, t_start, st, de, nodes, quintics):
    """True when Newton from the usual start misses the grid's global minimum for a training draw."""
    t_dir, _, _, _ = _direct_perihelia(nodes, st, de)
    feats = leaf_features(x, leaf.k, leaf.order)
    t0 = np.clip(t_start, nodes[0], nodes[-1])
    t_map, _, _, _ = newton_perihelion(nodes, _quintic_source(quintics, feats), t0, coefficients=True)
    if nodes.size < 2:
        return False  # one node: both stay on it
    # a miss of one whole step (opposite ends of a two-node span) is a miss
    return bool(np.any(np.abs(t_map - t_dir) >= np.max(np.diff(nodes))))


def _direct_perihelia(nodes, states, derivs):
    """Perihelia from directly integrated states and derivatives (m, n, 6): Newton from the lowest valleys."""

    def values(k, rows):
        return states[k, rows], derivs[k, rows], states[k + 1, rows], derivs[k + 1, rows]

    return global_perihelion(nodes, values, valley_starts(nodes, states))


def direct_rk4(track, rel, report=None):
    """Direct fixed-step RK4 integration over the track's grid and the global minimum; t, state, outside, conv."""
    n, m = rel.shape[0], len(track.nodes)
    t, state = np.empty(n), np.empty((n, 6))
    outside, conv = np.empty(n, dtype=bool), np.empty(n, dtype=bool)
    chunk = max(64, int(8_000_000 // (12 * m)))  # states and derivatives of a chunk: ~100 MB
    for lo in range(0, n, chunk):  # loop over chunks of draws, each vectorized
        sl = slice(lo, min(n, lo + chunk))
        states, derivs = integrate_draws(track, rel[sl])
        t[sl], state[sl], outside[sl], conv[sl] = _direct_perihelia(track.nodes, states, derivs)
        if report is not None:
            report.add(sl.stop - sl.start)
    return t, state, outside, conv
