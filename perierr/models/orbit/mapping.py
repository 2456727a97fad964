"""Samples through the state-transition map of a few reference orbits, checked and with direct fallback.

The steps of :meth:`OrbitModel._map <perierr.models.orbit.model.OrbitModel>`: bin the samples by
distance (one reference orbit per dense bin), pick the samples farthest from their reference to check
the map, tabulate the reference orbits' second-order maps (:mod:`.transition`) with the check samples
integrated directly in the same call, apply the map, bound its error from the checks, and integrate
directly the samples of sparse bins and those the check does not trust.
"""

from __future__ import annotations

import numpy as np

from ...units import AU_PER_PC
from ...units import MYR_PER_PC_PER_KMS as _C
from .grid import distance_bins, map_span, rownorm
from .integrate import grid_minimum_start, newton_perihelion
from .transition import features, variational_tables

__all__ = ["map_perihelia"]

#: The reference orbits and checks use fixed-step RK4 with steps halved while its
#: estimated position error exceeds this fraction of ``map_tolerance_au``.
_RK4_ERROR_FRACTION = 0.3


def map_perihelia(model, rel_all, ref_rel, nodes, t_lin_all, *, span=map_span, features=features):
    """Perihelia of Sun-relative states through the map built around ``ref_rel``.

    Parameters
    ----------
    model : OrbitModel
        Its potential, solar state and map settings; its ``_direct`` integrates rows directly.
    rel_all : ndarray, shape (n, 6)
        Sun-relative states [pc, km/s].
    ref_rel : ndarray, shape (6,)
        The reference point's relative state.
    nodes : ndarray, shape (m,)
        Grid times [pc/(km/s)].
    t_lin_all : ndarray, shape (n,)
        Straight-line perihelion times [pc/(km/s)].
    span, features : callable
        :func:`.grid.map_span` and :func:`.transition.features` (passed in so that the model module's
        names are the ones used).

    Returns
    -------
    t, state, outside, conv, diag
        As from :func:`~perierr.models.orbit.integrate.newton_perihelion`, and the map's diagnostics.
    """
    bidx, refs, sparse = distance_bins(
        rel_all, ref_rel, bin_width_pc=model.bin_width_pc, min_bin_samples=model.min_bin_samples
    )
    mapped = np.flatnonzero(~sparse)
    if mapped.size == 0:  # every distance bin too sparse for a reference orbit (few, widely spread draws)
        return _all_direct(model, rel_all, nodes)
    rel, t_lin, bidx = rel_all[mapped], t_lin_all[mapped], bidx[mapped]
    found, redo, diag = _mapped_rows(model, rel, t_lin, bidx, refs, nodes, span, features)
    _redo_directly(model, rel, nodes, redo, found, diag, rel_all.shape[0])
    n_sparse = int(sparse.sum())
    diag["sparse_bin_samples"] = n_sparse
    return (*_with_sparse_rows(model, rel_all, nodes, mapped, sparse, found), diag)


def _all_direct(model, rel_all, nodes):
    """Every row integrated directly, with the diagnostics that say why."""
    t, state, outside, conv = model._direct(rel_all, nodes)
    n = rel_all.shape[0]
    diag = {
        "n_reference_orbits": 0,
        "n_checked": 0,
        "fallback_samples": 0,
        "sparse_bin_samples": n,
        "beyond_span_samples": 0,
        "fallback_reason": f"all {n} samples integrated directly: no distance bin held enough "
        "samples for a reference orbit",
    }
    return t, state, outside, conv, diag


def _mapped_rows(model, rel, t_lin, bidx, refs, nodes, span, features):
    """Rows of dense bins through the map, the checks' direct results in place; (arrays, rows to redo, diag)."""
    kref = refs.shape[0]
    delta = rel - refs[bidx]
    score = _offset_score(delta, t_lin)
    check = _check_rows(score, bidx, kref, model.n_check)
    # the map is tabulated only over the grid span the perihelia need
    sub, cut_lo, cut_hi = span(t_lin, nodes)
    tables = _reference_tables(model, refs, sub, rel[check])
    int_err_au = tables.integration_error_pc * AU_PER_PC
    t, state, outside, conv = _apply_map(tables, refs, sub, t_lin, bidx, features(np.zeros((kref, 6))), features(delta))
    tc, sc, oc, cc = _direct_check(tables, sub)
    # perihelia at a cut edge of the span lie beyond it: integrated directly below
    beyond = _beyond_span(outside, t, sub, cut_lo, cut_hi)
    beyond_c = _beyond_span(oc, tc, sub, cut_lo, cut_hi)
    err_au = np.abs(rownorm(sc[:, :3]) - rownorm(state[check, :3])) * AU_PER_PC
    err_t = np.abs(tc - t[check]) * _C
    err_au[beyond_c | beyond[check]] = 0.0
    err_t[beyond_c | beyond[check]] = 0.0
    coef, predicted = _error_bound(err_au, score, check, bidx, kref, int_err_au)
    diag = _map_diagnostics(kref, check, err_au, err_t, coef, int_err_au)
    # checked samples keep their direct result
    t[check], state[check], outside[check], conv[check] = tc, sc, oc, cc
    beyond[check] = beyond_c
    redo = ~conv
    if model.method == "auto":
        redo |= predicted > model.map_tolerance_au
        redo[check] = False
    redo |= beyond
    diag["map_span_myr"] = [float(tables.nodes[0] * _C), float(tables.nodes[-1] * _C)]
    diag["beyond_span_samples"] = int(beyond.sum())
    return (t, state, outside, conv), redo, diag


def _offset_score(delta, t_lin):
    """Distance of each sample from its reference orbit: position offset plus velocity offset times the time."""
    return rownorm(delta[:, :3]) + rownorm(delta[:, 3:]) * (np.abs(t_lin) + 1.0)


def _check_rows(score, bidx, kref, n_check):
    """The samples that check the map: the ``n_check`` of each bin farthest from their reference orbit."""
    picks = []
    for b in range(kref):  # loop over the few reference orbits
        rows_b = np.flatnonzero(bidx == b) if kref > 1 else np.arange(bidx.size)
        if rows_b.size > n_check:
            top = np.argpartition(-score[rows_b], n_check - 1)[:n_check]
            rows_b = rows_b[top]
        picks.append(rows_b)
    return np.concatenate(picks)


def _reference_tables(model, refs, nodes, extra):
    """Reference orbits with variational equations and the check samples, in one fixed-step RK4 call."""
    return variational_tables(
        model.potential, model._sun_state, refs, nodes, rtol=model.rtol, atol=model.atol,
        extra=extra, scheme="rk4",
        max_error_pc=_RK4_ERROR_FRACTION * model.map_tolerance_au / AU_PER_PC,
    )  # fmt: skip


def _apply_map(tables, refs, nodes, t_lin, bidx, ref_feats, feats):
    """Perihelia of the mapped samples, Newton started at straight-line times shifted by their reference's."""
    kref = refs.shape[0]
    # each reference's own perihelion from its grid global minimum, to
    # shift the samples' straight-line starting times
    ref_vals = tables.node_cubic(np.arange(kref), ref_feats)
    grid_states = np.moveaxis(tables.table[:, :, 0, :6], 1, 0)  # (m, K, 6)
    t_ref, _, _, _ = newton_perihelion(nodes, ref_vals, grid_minimum_start(nodes, grid_states), coefficients=True)
    v_ref = refs[:, 3:]
    t_lin_ref = -np.sum(refs[:, :3] * v_ref, axis=1) / np.sum(v_ref * v_ref, axis=1)
    start = t_lin + (t_ref - t_lin_ref)[bidx]
    return newton_perihelion(nodes, tables.node_cubic(bidx, feats), start, coefficients=True)


def _direct_check(tables, nodes):
    """Perihelia of the check samples from their direct integration (``tables.extra``)."""
    est, eder = tables.extra

    def check_values(k, rows):
        return est[k, rows], eder[k, rows], est[k + 1, rows], eder[k + 1, rows]

    return newton_perihelion(nodes, check_values, grid_minimum_start(nodes, est))


def _beyond_span(outside, t, nodes, cut_lo, cut_hi):
    """Rows whose perihelion sits at a cut edge of the map's span (so lies beyond it)."""
    return outside & (((t == nodes[0]) & cut_lo) | ((t == nodes[-1]) & cut_hi))


def _error_bound(err_au, score, check, bidx, kref, int_err_au):
    """Per-reference coefficient c and the predicted map error ``c * score^3`` plus the integration error [au]."""
    # the second-order map's error grows as the cube of the offset: bound it
    # per reference orbit by c * score^3 with c the largest ratio on the checks
    coef = np.zeros(kref)
    sc3 = score[check] ** 3
    ratio = np.divide(err_au, sc3, out=np.zeros_like(err_au), where=sc3 > 1e-9)
    np.maximum.at(coef, bidx[check], ratio)
    return coef, coef[bidx] * score**3 + int_err_au


def _map_diagnostics(kref, check, err_au, err_t, coef, int_err_au) -> dict:
    """The map's diagnostics from the check (the first keys of the JSON block, in their order)."""
    return {
        "n_reference_orbits": int(kref),
        "n_checked": int(check.size),
        "map_error_au_max": float(err_au.max()),
        "map_error_time_myr_max": float(err_t.max()),
        "map_error_model": "error_au <= c * score_pc^3, c per reference orbit from the checks",
        "map_error_coefficient_max": float(coef.max()),
        "integration_scheme": "fixed-step RK4 on the grid (reference orbits and checks)",
        "integration_error_au": int_err_au,
    }


def _redo_directly(model, rel, nodes, redo, found, diag, n_all) -> None:
    """In place: integrate the ``redo`` rows directly on the full grid and record how many and why."""
    n_redo = int(redo.sum())
    diag["fallback_samples"] = n_redo
    if n_redo:
        t, state, outside, conv = found
        rows = np.flatnonzero(redo)
        t[rows], state[rows], outside[rows], conv[rows] = model._direct(rel[rows], nodes)
        diag["fallback_reason"] = (
            f"{n_redo} of {n_all} samples integrated directly: predicted map "
            f"error above {model.map_tolerance_au} au, perihelion beyond the map's grid "
            "span, or Newton not converged"
        )


def _with_sparse_rows(model, rel_all, nodes, mapped, sparse, found):
    """All rows: the mapped ones from ``found``, those of sparse bins integrated directly."""
    t, state, outside, conv = found
    n = rel_all.shape[0]
    t_all, state_all = np.empty(n), np.empty((n, 6))
    out_all, conv_all = np.empty(n, dtype=bool), np.empty(n, dtype=bool)
    t_all[mapped], state_all[mapped], out_all[mapped], conv_all[mapped] = (t, state, outside, conv)
    if sparse.any():
        rows = np.flatnonzero(sparse)
        t_all[rows], state_all[rows], out_all[rows], conv_all[rows] = model._direct(rel_all[rows], nodes)
    return t_all, state_all, out_all, conv_all
