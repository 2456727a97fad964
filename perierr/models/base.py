"""The forward-model seam: anything that maps observables to a perihelion.

A forward model takes observables of shape ``(n, 6)`` in the fixed order
(ra [deg], dec [deg], parallax [mas], pmra [mas/yr], pmdec [mas/yr],
radial_velocity [km/s]) and returns a :class:`Perihelion` with arrays of shape
``(n,)``. Every propagation method, budget and report works through this
interface only, so a new model is a new small file.
"""

from __future__ import annotations

import abc
from dataclasses import dataclass, field

import numpy as np

from ..units import OUTPUTS

__all__ = ["ForwardModel", "Nuisance", "Perihelion"]


@dataclass(frozen=True)
class Nuisance:
    """An uncertain model parameter that is an input of its own (e.g. the star's mass under focusing).

    Attributes
    ----------
    name : str
        Its name in budgets and reports.
    gradient : ndarray, shape (3,)
        d (t_ph, d_ph, v_ph) / d parameter at the nominal point.
    variance : float
        Its variance (independent of the observables).
    """

    name: str
    gradient: np.ndarray
    variance: float


@dataclass(frozen=True)
class Perihelion:
    """Perihelion time, distance and speed for a batch of stars or samples.

    Attributes
    ----------
    time_myr : ndarray, shape (n,)
        Time of closest approach relative to the reference epoch [Myr];
        negative is in the past.
    distance_pc : ndarray, shape (n,)
        Closest-approach distance to the Sun [pc].
    speed_kms : ndarray, shape (n,)
        Relative speed at closest approach [km/s].
    flags : ndarray of bool, shape (n,), optional
        True where the model could not locate the perihelion properly (for
        example it lies outside an orbit model's search window). Flagged
        values are kept, never clipped or dropped.
    info : dict
        Model diagnostics (which method ran, fallbacks, map errors).
    """

    time_myr: np.ndarray
    distance_pc: np.ndarray
    speed_kms: np.ndarray
    flags: np.ndarray | None = None
    info: dict = field(default_factory=dict)

    def as_array(self) -> np.ndarray:
        """Stack the outputs into shape ``(n, 3)`` in the order of ``OUTPUTS``."""
        return np.stack([self.time_myr, self.distance_pc, self.speed_kms], axis=-1)

    def output(self, name: str) -> np.ndarray:
        """Return one output array by its name (one of ``OUTPUTS``)."""
        if name not in OUTPUTS:
            raise KeyError(f"unknown output {name!r}; expected one of {OUTPUTS}")
        return getattr(self, name)


class ForwardModel(abc.ABC):
    """Base class of forward models from observables to perihelion.

    Subclasses implement :meth:`evaluate`; they may override :meth:`jacobian`
    with an analytic form (the default is central finite differences) and
    :meth:`describe` to record their parameters in every output.
    """

    #: Short identifier written to the JSON ``model`` field.
    name: str = "abstract"

    @abc.abstractmethod
    def evaluate(self, observables, *, reference=None) -> Perihelion:
        """Perihelion of every row of ``observables``.

        Parameters
        ----------
        observables : array_like, shape (n, 6)
            Rows of (ra, dec, parallax, pmra, pmdec, radial_velocity) in
            internal units. Parallaxes must be positive.
        reference : array_like, shape (6,), optional
            The nominal observables the rows scatter around. Models that
            linearize around a nominal orbit use it; others ignore it.
        """

    def jacobian(self, point) -> np.ndarray:
        """Derivatives of (t_ph, d_ph, v_ph) with respect to the observables.

        Parameters
        ----------
        point : array_like, shape (6,)

        Returns
        -------
        ndarray, shape (3, 6)
            Units: Myr, pc and km/s per internal unit of each observable.
        """
        point = np.asarray(point, dtype=float)
        steps = _fd_steps(point)
        rows = np.concatenate([point + np.diag(steps), point - np.diag(steps)])
        out = self.evaluate(rows, reference=point).as_array()
        return ((out[:6] - out[6:]) / (2 * steps[:, None])).T

    def describe(self) -> dict:
        """Name and parameters of the model, for outputs."""
        return {"name": self.name}

    def nuisance(self, point) -> tuple:
        """Uncertain parameters of the model at ``point``, as :class:`Nuisance` records (none by default).

        Linear propagation adds their variance and budgets give each a share.
        """
        return ()

    def evaluate_nuisance(self, observables, deviates, *, reference=None) -> Perihelion:
        """Evaluate with given standard-normal deviates of the nuisance parameters, shape (n, e).

        A model with nuisance parameters maps each column to its parameter's
        distribution (the same one its Monte Carlo draws from); the default has
        none and ignores ``deviates``.
        """
        return self.evaluate(observables, reference=reference)


def _fd_steps(point: np.ndarray) -> np.ndarray:
    """Finite-difference steps in internal units, scaled to each observable."""
    # about 0.1 mas in position, 1e-5 relative elsewhere (with a floor)
    pos = 1e-7 * np.ones(2)
    rest = 1e-6 * np.maximum(np.abs(point[2:]), 1e-2)
    return np.concatenate([pos, rest])
