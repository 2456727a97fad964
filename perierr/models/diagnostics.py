"""Typed diagnostics of a forward model's evaluation: which method ran, fallbacks, map errors, focusing.

:class:`ModelDiagnostics` is the one source of a :class:`~perierr.models.base.Perihelion`'s diagnostics:
the faces (text report, reading warnings) read its attributes, and ``Perihelion.info`` — whose scalar part
is the ``model_info`` block of the JSON document — is its :meth:`ModelDiagnostics.to_dict`, with the keys
and values the models have always written. Every field is optional (None: the model did not report it);
keys a model reports that are not fields here are kept, in order, in ``extra``.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields, replace

import numpy as np

__all__ = ["FocusingDiagnostics", "ModelDiagnostics"]


@dataclass(frozen=True)
class FocusingDiagnostics:
    """How much the two-body focusing by the star's mass changed the answer (over the evaluated rows).

    Attributes
    ----------
    mass_msun, mass_error_msun : float
        Nominal mass of the star and its error [Msun].
    median_delta_distance_pc, max_abs_delta_distance_pc : float
        Median and largest absolute change of d_ph [pc].
    median_relative_delta_distance : float
        Median of the change of d_ph divided by the unfocused d_ph.
    median_delta_speed_kms, max_delta_speed_kms : float or None
        Median and largest change of v_ph [km/s] over the rows where it is finite (None if there is none).
    n_head_on : int
        Rows with an exactly head-on path (pericentre 0, infinite speed there).
    """

    mass_msun: float
    mass_error_msun: float
    median_delta_distance_pc: float
    max_abs_delta_distance_pc: float
    median_relative_delta_distance: float
    median_delta_speed_kms: float | None
    max_delta_speed_kms: float | None
    n_head_on: int

    def to_dict(self) -> dict:
        """The ``focusing`` block of the model diagnostics."""
        return {f.name: getattr(self, f.name) for f in fields(self)}


#: Diagnostics that hold one entry per evaluated row (arrays, or a mapping of arrays).
_PER_ROW = ("straight_line", "focusing_delta_distance_pc", "focusing_delta_speed_kms", "focusing_mass_msun")


@dataclass(frozen=True, repr=False)
class ModelDiagnostics:
    """What a forward model reports about one evaluation; None means "not reported".

    Fields are listed in the order they appear in ``to_dict()``.

    Attributes
    ----------
    model : str
        Name of the model that ran (``"straight_line"``, ``"orbit"``).
    window_myr : list of float
        Orbit model: search window [Myr].
    grid_nodes : int
        Orbit model: nodes of the tabulation grid.
    n_map_leaves, n_checked : int
        Orbit model: leaves of the draw cloud whose polynomial maps answered draws, and their check draws
        (compared with direct integration).
    map_error_au_max, map_error_time_myr_max : float
        Largest map error found by the check, in d_ph [au] and t_ph [Myr].
    map_error_model : str
        How the map error is predicted for the unchecked draws.
    map_error_coefficient_max : float
        Largest coefficient of that prediction.
    integration_scheme : str
        Integrator of the draws integrated directly (training, checks, fallback).
    integration_error_au : float
        Richardson's estimate of that integration's error [au].
    map_span_myr : list of float
        Time span the maps were fitted over [Myr].
    fallback_samples : int
        Draws integrated directly because the map could not be trusted for them.
    fallback_reason : str
        Why they were.
    sparse_samples : int
        Draws in parts of the cloud too sparse for a map of their own (integrated directly).
    multimodal_leaves : int
        Orbit model: leaves of the map whose draws may have several minima of the separation in their span
        (their search starts at each draw's smallest separation on the grid).
    method : str
        Orbit model: ``"direct"``, ``"leaf_maps"``, ``"leaf_maps+direct_fallback"`` or
        ``"straight line beyond the potential"``.
    n_outside_window, n_not_converged : int
        Perihelia outside the search window, and searches that did not converge (both flagged).
    straight_line : dict
        Orbit model: the straight-line answer of the same rows (arrays ``time_myr``, ``distance_pc``,
        ``speed_kms``, one entry per row).
    model_difference_median : dict
        Median orbit-minus-straight-line difference of each output.
    n_beyond_potential : int
        Rows beyond the potential's validity (given the straight-line answer, flagged).
    max_distance_pc : float
        The distance beyond which that happens [pc].
    focusing : FocusingDiagnostics
        The focusing wrapper's summary.
    focusing_delta_distance_pc, focusing_delta_speed_kms : ndarray
        Per-row change of d_ph [pc] and v_ph [km/s] by focusing.
    focusing_mass_msun : ndarray
        The star's mass focusing used for each row [M_sun] (the encounter effects use the same ones).
    extra : dict
        Any other key a model reported, in its order (after the fields above in ``to_dict()``).
    order : tuple of str
        Keys ``to_dict()`` gives first, in this order (e.g. the order of a mapping read by :meth:`from_info`);
        the other reported keys follow in the order above. Empty: the order above.
    """

    model: str | None = None
    window_myr: list | None = None
    grid_nodes: int | None = None
    n_map_leaves: int | None = None
    n_checked: int | None = None
    map_error_au_max: float | None = None
    map_error_time_myr_max: float | None = None
    map_error_model: str | None = None
    map_error_coefficient_max: float | None = None
    integration_scheme: str | None = None
    integration_error_au: float | None = None
    map_span_myr: list | None = None
    fallback_samples: int | None = None
    fallback_reason: str | None = None
    sparse_samples: int | None = None
    multimodal_leaves: int | None = None
    method: str | None = None
    n_outside_window: int | None = None
    n_not_converged: int | None = None
    straight_line: dict | None = None
    model_difference_median: dict | None = None
    n_beyond_potential: int | None = None
    max_distance_pc: float | None = None
    focusing: FocusingDiagnostics | None = None
    focusing_delta_distance_pc: np.ndarray | None = None
    focusing_delta_speed_kms: np.ndarray | None = None
    focusing_mass_msun: np.ndarray | None = None
    extra: dict = field(default_factory=dict)
    order: tuple = field(default=(), compare=False)

    def __repr__(self) -> str:
        """Only the reported fields (per-row arrays by their length)."""
        parts = []
        for f in fields(self):
            value = getattr(self, f.name)
            if value is None or (f.name in ("extra", "order") and not value):
                continue
            if f.name in _PER_ROW:
                value = f"<{len(next(iter(value.values())) if isinstance(value, dict) else value)} rows>"
            else:
                value = repr(value)
            parts.append(f"{f.name}={value}")
        return f"ModelDiagnostics({', '.join(parts)})"

    @classmethod
    def from_info(cls, info) -> ModelDiagnostics:
        """The record of a plain diagnostics mapping (models that write ``Perihelion(..., info={...})``).

        Keys that are fields become fields (a ``focusing`` mapping with exactly the fields of
        :class:`FocusingDiagnostics` becomes one); any other key, and a field key whose value is None, is
        kept in ``extra``, so ``to_dict()`` gives back every key and value.
        """
        known = {f.name for f in fields(cls)} - {"extra", "order"}
        typed, extra = {}, {}
        info = dict(info or {})
        for key, value in info.items():
            if key == "focusing" and isinstance(value, dict):
                try:
                    value = FocusingDiagnostics(**value)
                except TypeError:
                    extra[key] = value
                    continue
            if key in known and value is not None:
                typed[key] = value
            else:
                extra[key] = value
        return cls(**typed, extra=extra, order=tuple(info))

    def to_dict(self) -> dict:
        """The JSON-facing mapping (``Perihelion.info``): every reported field by name, then ``extra``.

        Arrays are included as they are; :func:`perierr.propagate.montecarlo.scalar_info` keeps the JSON-able
        scalar part.
        """
        out = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if f.name in ("extra", "order") or value is None:
                continue
            out[f.name] = value.to_dict() if isinstance(value, FocusingDiagnostics) else value
        out.update(self.extra)
        if self.order:
            first = {key: out[key] for key in self.order if key in out}
            out = {**first, **{key: value for key, value in out.items() if key not in first}}
        return out

    def aligned(self, valid) -> ModelDiagnostics:
        """Per-row diagnostics spread to one entry per element of ``valid`` (NaN where it is False).

        Parameters
        ----------
        valid : ndarray of bool, shape (n,)
            True for the rows that were evaluated, in order.
        """
        valid = np.asarray(valid, dtype=bool)
        changes = {}
        for name in _PER_ROW:
            value = getattr(self, name)
            if isinstance(value, dict):
                changes[name] = {k: _spread(v, valid) for k, v in value.items()}
            elif value is not None:
                changes[name] = _spread(value, valid)
        return replace(self, **changes) if changes else self


def _spread(values, valid) -> np.ndarray:
    """``values`` (one per True of ``valid``) at the True places of an array shaped like ``valid``; NaN elsewhere."""
    values = np.asarray(values)
    n_rows = int(np.count_nonzero(valid))
    if values.shape != (n_rows,):
        raise ValueError(f"a per-row diagnostic has shape {values.shape}; expected ({n_rows},), one entry per row")
    out = np.full(valid.shape, np.nan)
    out[valid] = values
    return out
