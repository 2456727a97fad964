"""The forward-model seam: anything that maps observables to a perihelion.

A forward model takes observables of shape ``(n, 6)`` in the fixed order
(ra [deg], dec [deg], parallax [mas], pmra [mas/yr], pmdec [mas/yr],
radial_velocity [km/s]) and returns a :class:`Perihelion` with arrays of shape
``(n,)``. Every propagation method, budget and report works through this
interface only, so a new model is a new small file.
"""

from __future__ import annotations

import abc
import inspect
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ..units import OUTPUTS
from .diagnostics import ModelDiagnostics

__all__ = ["ForwardModel", "ModelDiagnostics", "Nuisance", "Perihelion", "accepts_progress", "with_progress"]


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


@dataclass(frozen=True, init=False)
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
    diagnostics : ModelDiagnostics
        Model diagnostics (which method ran, fallbacks, map errors, focusing).

    Parameters
    ----------
    time_myr, distance_pc, speed_kms, flags
        As above.
    info : dict, optional
        Diagnostics as a plain mapping, for models that do not build a
        :class:`ModelDiagnostics` (read with :meth:`ModelDiagnostics.from_info`).
    diagnostics : ModelDiagnostics, optional
        The typed record; give it or ``info``, not both.
    """

    time_myr: np.ndarray
    distance_pc: np.ndarray
    speed_kms: np.ndarray
    flags: np.ndarray | None
    diagnostics: ModelDiagnostics

    def __init__(self, time_myr, distance_pc, speed_kms, flags=None, info=None, *, diagnostics=None):
        if info is not None and diagnostics is not None:
            raise ValueError("Perihelion takes the diagnostics once: give info (a mapping) or diagnostics, not both")
        if diagnostics is None:
            diagnostics = ModelDiagnostics.from_info(info)
        for name, value in (("time_myr", time_myr), ("distance_pc", distance_pc), ("speed_kms", speed_kms),
                            ("flags", flags), ("diagnostics", diagnostics)):  # fmt: skip
            object.__setattr__(self, name, value)

    @property
    def info(self) -> dict:
        """The diagnostics as a mapping (``diagnostics.to_dict()``, a fresh dict): the JSON-facing form."""
        return self.diagnostics.to_dict()

    def as_array(self) -> np.ndarray:
        """Stack the outputs into shape ``(n, 3)`` in the order of ``OUTPUTS``."""
        return np.stack([self.time_myr, self.distance_pc, self.speed_kms], axis=-1)

    def output(self, name: str) -> np.ndarray:
        """Return one output array by its name (one of ``OUTPUTS``)."""
        if name not in OUTPUTS:
            raise KeyError(f"unknown output {name!r}; expected one of {OUTPUTS}")
        return getattr(self, name)

    def aligned(self, valid) -> Perihelion:
        """These rows (one per True of ``valid``) spread to one row per element of ``valid``.

        Rows where ``valid`` is False get NaN outputs and a False flag (they
        were not evaluated, so nothing is flagged); per-row diagnostics are
        spread the same way.

        Parameters
        ----------
        valid : ndarray of bool, shape (n,)
        """
        valid = np.asarray(valid, dtype=bool)

        def spread(x):
            out = np.full(valid.shape, np.nan)
            out[valid] = x
            return out

        flags = None
        if self.flags is not None:
            flags = np.zeros(valid.shape, dtype=bool)
            flags[valid] = self.flags
        return Perihelion(
            spread(self.time_myr),
            spread(self.distance_pc),
            spread(self.speed_kms),
            flags,
            diagnostics=self.diagnostics.aligned(valid),
        )


class ForwardModel(abc.ABC):
    """Base class of forward models from observables to perihelion.

    Subclasses implement :meth:`evaluate`; they may override :meth:`jacobian`
    with an analytic form (the default is central finite differences) and
    :meth:`describe` to record their parameters in every output.

    Two arguments, each with one meaning:

    * ``reference`` is only a hint of the point a model may build an
      approximation around (the models here do not need it); it never
      changes what is computed, only how.
    * randomness enters only through :meth:`evaluate_draws`, whose explicit
      ``rng`` draws the model's nuisance parameters (the star's mass under
      focusing) for a Monte Carlo batch; :meth:`evaluate` keeps them at their
      nominal values and :meth:`evaluate_nuisance` takes them as given
      standard-normal deviates.

    ``progress``, where given, is a callable ``progress(done, total)`` the
    model calls as rows finish (``done`` never decreasing, ``done == total``
    last); it only reports, never changes what is computed. A model whose
    ``evaluate`` does not take it still works: :func:`with_progress` then
    reports the batch once, when it is done.
    """

    #: Short identifier written to the JSON ``model`` field.
    name: str = "abstract"

    @abc.abstractmethod
    def evaluate(self, observables, *, reference=None, progress=None) -> Perihelion:
        """Perihelion of every row of ``observables``, nuisance parameters at their nominal values.

        Parameters
        ----------
        observables : array_like, shape (n, 6)
            Rows of (ra, dec, parallax, pmra, pmdec, radial_velocity) in
            internal units. Parallaxes must be positive.
        reference : array_like, shape (6,), optional
            The nominal observables the rows scatter around: a hint a model
            may build an approximation around (the models here do not need
            it); it never changes what is computed.
        progress : callable, optional
            ``progress(done, total)``, called as rows finish (at least once,
            with ``done == total``, at the end).
        """

    def evaluate_draws(self, observables, rng=None, *, reference=None, progress=None) -> Perihelion:
        """Perihelion of a Monte Carlo batch: each row with its own draw of the nuisance parameters.

        Parameters
        ----------
        observables : array_like, shape (n, 6)
            As in :meth:`evaluate`.
        rng : numpy.random.Generator or None
            Draws the model's nuisance parameters, one per row (the only
            randomness a model uses). None keeps them at their nominal values,
            as :meth:`evaluate` does.
        reference, progress : optional
            As in :meth:`evaluate`.

        Notes
        -----
        The default (a model without nuisance parameters) is :meth:`evaluate`;
        a model with nuisance parameters overrides it.
        """
        return with_progress(self.evaluate, observables, reference=reference, progress=progress)

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


def accepts_progress(method: Callable) -> bool:
    """Whether a model's ``evaluate`` or ``evaluate_draws`` names a ``progress`` parameter.

    Only a parameter of that name counts: a ``**kwargs`` may be passed on to a method that does not take it.
    """
    try:
        return "progress" in inspect.signature(method).parameters
    except (TypeError, ValueError):  # a callable without an inspectable signature
        return False


def with_progress(method: Callable, observables, *args, progress=None, **kwargs) -> Perihelion:
    """Call a model's ``evaluate`` or ``evaluate_draws``, with ``progress`` when it takes one.

    A method without a ``progress`` keyword (a model written before it existed)
    is called without it, and ``progress(n, n)`` reports the whole batch when
    it returns, so a caller always sees ``done == total`` at the end.

    Parameters
    ----------
    method : callable
        A bound ``evaluate`` or ``evaluate_draws``.
    observables : array_like, shape (n, 6)
    *args, **kwargs
        Passed on (``rng``, ``reference``).
    progress : callable, optional
        ``progress(done, total)``.
    """
    if progress is None:
        return method(observables, *args, **kwargs)
    if accepts_progress(method):
        return method(observables, *args, progress=progress, **kwargs)
    out = method(observables, *args, **kwargs)
    n = int(np.size(out.time_myr))
    progress(n, n)
    return out


def _fd_steps(point: np.ndarray) -> np.ndarray:
    """Finite-difference steps in internal units, scaled to each observable."""
    # about 0.1 mas in position, 1e-5 relative elsewhere (with a floor)
    pos = 1e-7 * np.ones(2)
    rest = 1e-6 * np.maximum(np.abs(point[2:]), 1e-2)
    return np.concatenate([pos, rest])
