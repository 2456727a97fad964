"""Linearized (Jacobian) propagation: Sigma_out = J Sigma J^T."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..models.base import ForwardModel
from ..star import ObservedStar
from ..star.checks import require_motion, require_positive_parallax
from ..units import OBSERVABLES, OUTPUT_LABELS, OUTPUTS, PARALLAX

__all__ = ["LinearResult", "linearize"]


@dataclass(frozen=True)
class LinearResult:
    """First-order propagation of the input covariance through a model.

    Attributes
    ----------
    value : ndarray, shape (3,)
        The model at the nominal inputs: t_ph [Myr], d_ph [pc], v_ph [km/s].
    jacobian : ndarray, shape (3, 6)
        d output / d observable in internal units.
    cov : ndarray, shape (3, 3)
        ``J Sigma J^T`` plus ``g g^T var`` of each nuisance parameter of the model.
    nuisance : tuple of Nuisance
        The model's uncertain parameters (e.g. the star's mass under focusing).
    """

    value: np.ndarray
    jacobian: np.ndarray
    cov: np.ndarray
    nuisance: tuple = ()

    @property
    def sigma(self) -> np.ndarray:
        """Linear standard errors of the three outputs, shape (3,)."""
        return np.sqrt(np.diag(self.cov))

    @property
    def corr(self) -> np.ndarray:
        """Correlation matrix of the three outputs, shape (3, 3)."""
        s = self.sigma
        safe = np.where((s > 0) & np.isfinite(s), s, 1.0)
        with np.errstate(invalid="ignore", over="ignore"):
            out = self.cov / np.outer(safe, safe)
        # an infinite or undefined variance (inputs beyond the float range) leaves its correlations undefined
        out[~np.isfinite(s), :] = np.nan
        out[:, ~np.isfinite(s)] = np.nan
        np.fill_diagonal(out, 1.0)
        return out

    def as_correlated(self) -> tuple:
        """The three outputs as correlated numbers of the ``uncertainties`` package.

        Built with ``uncertainties.correlated_values(value, cov)``, so their
        covariance is this result's ``cov`` and any formula of them carries the
        linear error through, correlations included (first order, like the rest
        of this result).

        Returns
        -------
        tuple of uncertainties.UFloat
            ``(time_myr, distance_pc, speed_kms)`` in Myr, pc and km/s. They
            depend on three new independent variables (the eigen-directions of
            ``cov``), not on the six inputs.

        Examples
        --------
        >>> import perierr
        >>> star = perierr.ObservedStar.from_values(
        ...     ra=201.3705, dec=-27.6214, parallax=48.012, parallax_error=0.031,
        ...     pmra=0.710, pmra_error=0.035, pmdec=-1.200, pmdec_error=0.029,
        ...     radial_velocity=-31.2, radial_velocity_error=0.6, pmra_pmdec_corr=-0.34,
        ... )
        >>> t, d, v = perierr.linearize(star, perierr.StraightLine()).as_correlated()
        >>> print(f"{d * 206264.806:.0f} au")
        18956+/-603 au
        >>> print(f"{d / v:.3e}")  # pc / (km/s), with the d-v correlation
        (2.946+/-0.136)e-03
        """
        from uncertainties import correlated_values  # only when asked for: it is not needed to compute anything

        return tuple(correlated_values(self.value.tolist(), self.cov))

    def to_dict(self) -> dict:
        """``{Q: {"value", "sigma", "unit"}}`` plus the output correlations."""
        out = {
            q: {"value": float(v), "sigma": float(s), "unit": OUTPUT_LABELS[q]}
            for q, v, s in zip(OUTPUTS, self.value, self.sigma)
        }
        c = self.corr
        out["correlations"] = {f"{OUTPUTS[i]}|{OUTPUTS[j]}": float(c[i, j]) for i in range(3) for j in range(i + 1, 3)}
        if not np.all(np.isfinite(c)):
            out["correlations"]["note"] = ("undefined (NaN) where an output's linear variance is infinite or not "
                                           "finite (inputs beyond the float range)")
        out["jacobian"] = {q: dict(zip(OBSERVABLES, row.tolist())) for q, row in zip(OUTPUTS, self.jacobian)}
        return out


def linearize(star: ObservedStar, model: ForwardModel) -> LinearResult:
    """Propagate the star's covariance to first order through ``model``.

    Parameters
    ----------
    star : ObservedStar
    model : ForwardModel

    Returns
    -------
    LinearResult
    """
    require_positive_parallax(star.mean[PARALLAX], method="linearized propagation")
    require_motion(star.mean)
    # the nominal value: no reference, so models evaluate this one row on its own (no map around it);
    # evaluate() keeps nuisance parameters (e.g. the focusing mass) at their nominal values
    value = model.evaluate(star.mean[None, :]).as_array()[0]
    jac = np.asarray(model.jacobian(star.mean), dtype=float)
    nuisance = tuple(model.nuisance(star.mean))
    cov = jac @ star.cov @ jac.T
    for p in nuisance:
        cov = cov + p.variance * np.outer(p.gradient, p.gradient)
    return LinearResult(value=value, jacobian=jac, cov=cov, nuisance=nuisance)
