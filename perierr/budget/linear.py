"""Linearized error budget: each input's share of an output's variance, in closed form.

Two shares per input are reported:

* **Shapley effects** of the linearized Gaussian model: the average, over all
  orders of learning the inputs, of the variance explained when input i is
  learnt. Non-negative and summing to 1 also for correlated inputs (Song,
  Nelson & Staum 2016; Owen & Prieur 2017). With independent inputs they
  reduce to ``J_i^2 sigma_i^2 / Var``.
* **Covariance contributions** ``J_i (Sigma J^T)_i / Var``: they sum to 1 but
  can be negative when correlations cancel, which makes them hard to read as
  "what to re-observe"; they are shown for comparison.

Everything is computed in standardized coordinates (see :mod:`.game`), so the
shares do not depend on the units the inputs are given in, and for stacks of
stars at once: ``jacobian`` of shape (..., m, k) and ``cov`` of shape (..., k, k).

References
----------
Song, E., Nelson, B. L. & Staum, J. 2016, SIAM/ASA JUQ 4, 1060.
Owen, A. B. & Prieur, C. 2017, SIAM/ASA JUQ 5, 986.
Iooss, B. & Prieur, C. 2019, Int. J. Uncertainty Quantification 9, 493.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from ..errors import InputError, PerierrWarning
from ..units import OBSERVABLES, OUTPUTS
from .game import explained_variance, shapley_values, standardize

__all__ = ["LinearBudget", "extend_inputs", "linear_budget", "linear_costs", "linear_shapley"]

#: Shares within this of 0 or 1 are rounding, not information (the exact game is monotone).
_ROUNDING = 1e-12

#: Fraction of an output's variance that may lie along dropped (near-exact) relations
#: before its budget is called undefined.
_LOST = 1e-6

#: Stars per block of the batched computation (about 200 kB per star for eight inputs).
_CHUNK = 512


@dataclass(frozen=True)
class LinearBudget:
    """Shares of Var(t_ph), Var(d_ph), Var(v_ph) per input (linearized).

    Attributes
    ----------
    shapley : ndarray, shape (3, k)
        Shapley shares (rows: outputs in ``OUTPUTS`` order; columns: ``inputs``);
        each row sums to 1 (a row of zeros for an output with zero variance).
    covariance : ndarray, shape (3, k)
        Covariance contributions; rows sum to 1, entries may be negative.
    variance : ndarray, shape (3,)
        Linear variance of each output.
    inputs : tuple of str
        Names of the k inputs: the six observables, then any extra inputs
        (``parallax_zero_point``, ``mass``). Every budget names its columns.
    """

    shapley: np.ndarray
    covariance: np.ndarray
    variance: np.ndarray
    inputs: tuple

    def __post_init__(self):
        object.__setattr__(self, "inputs", tuple(self.inputs))
        for name in ("shapley", "covariance"):
            shape = np.shape(getattr(self, name))
            if shape != (len(OUTPUTS), len(self.inputs)):
                raise ValueError(f"{name}: a budget table of shape {shape} for {len(self.inputs)} inputs; expected "
                                 f"({len(OUTPUTS)}, {len(self.inputs)}), a row per output and a column per input")

    def share(self, output: str, kind: str = "shapley") -> dict:
        """Shares of one output as ``{input: share}``; ``kind`` is "shapley" or "covariance"."""
        tables = {"shapley": self.shapley, "covariance": self.covariance}
        if kind not in tables:
            raise InputError("kind", kind, "expected 'shapley' or 'covariance'")
        if output not in OUTPUTS:
            raise InputError("output", output, f"expected one of {OUTPUTS}")
        return dict(zip(self.inputs, tables[kind][OUTPUTS.index(output)].tolist()))

    def dominant(self, output: str = "distance_pc") -> str | None:
        """The input with the largest Shapley share of an output (None where the budget is undefined)."""
        row = self.shapley[OUTPUTS.index(output)]
        if np.isnan(row).any() or not row.any():
            return None
        return self.inputs[int(np.argmax(row))]

    def to_dict(self) -> dict:
        """``{output: {input: share}}``, the covariance contributions, and the input names."""
        out = {q: self.share(q) for q in OUTPUTS}
        out["covariance_contributions"] = {q: self.share(q, "covariance") for q in OUTPUTS}
        out["inputs"] = list(self.inputs)
        out["method"] = "linearized Shapley effects (closed form, Gaussian inputs, correlation coordinates)"
        return out


def _standardized(jacobian, cov):
    j = np.asarray(jacobian, dtype=float)
    s = np.asarray(cov, dtype=float)
    if s.shape[-1] != s.shape[-2] or j.shape[-1] != s.shape[-1]:
        raise InputError("jacobian", j.shape, f"expected (..., m, k) matching a covariance of shape {s.shape}")
    sigma, corr = standardize(s)
    return j * sigma[..., None, :], corr


def linear_shapley(jacobian, cov) -> np.ndarray:
    """Shapley shares of ``Y = J X`` with Gaussian ``X ~ N(mu, cov)``, for stacks of stars.

    Parameters
    ----------
    jacobian : array_like, shape (..., m, k)
        One row per output, in any units consistent with ``cov``.
    cov : array_like, shape (..., k, k)
        Covariance of the inputs (PSD; zero variances and perfect correlations
        allowed). Leading axes broadcast against those of ``jacobian``.

    Returns
    -------
    ndarray, shape (..., m, k)
        Shares of each output's variance, in [0, 1], rows summing to 1; an
        output with zero variance gets a row of zeros. A row is NaN where the
        budget is undefined: the output's variance lies along a direction in
        which two or more inputs are correlated to within :data:`.game.RANK_TOL`
        of an exact relation (the output depends on their tiny difference);
        :func:`linear_budget` warns about it.
    """
    g, corr = _standardized(jacobian, cov)
    lead = np.broadcast_shapes(g.shape[:-2], corr.shape[:-2])
    g = np.broadcast_to(g, lead + g.shape[-2:]).reshape((-1,) + g.shape[-2:])
    corr = np.broadcast_to(corr, lead + corr.shape[-2:]).reshape((-1,) + corr.shape[-2:])
    out = np.empty(g.shape)
    for start in range(0, g.shape[0], _CHUNK):  # bounded memory: 2**k subset solves per star
        block = slice(start, start + _CHUNK)
        out[block] = _shares(g[block], corr[block])
    return out.reshape(lead + g.shape[-2:])


def _shares(g, corr) -> np.ndarray:
    """Shares for a stack (s, m, k) of standardized gradients and correlation matrices."""
    values = explained_variance(g, corr)  # (s, 2**k, m)
    effects = np.moveaxis(shapley_values(np.moveaxis(values, -2, 0)), 0, -1)  # (s, m, k)
    total = values[..., -1, :]
    direct = np.einsum("...mi,...ij,...mj->...m", g, corr, g)
    positive = total > 0
    shares = effects / np.where(positive, total, 1.0)[..., None]
    shares = clip_rounding(np.where(positive[..., None], shares, 0.0))
    lost = direct - total > _LOST * np.maximum(direct, 0.0)
    return np.where(lost[..., None], np.nan, shares)


def clip_rounding(shares) -> np.ndarray:
    """Set shares within rounding (1e-12) of 0 or 1 to exactly 0 or 1; other values are kept."""
    s = np.asarray(shares, dtype=float)
    s = np.where(np.abs(s) < _ROUNDING, 0.0, s)
    return np.where(np.abs(s - 1) < _ROUNDING, 1.0, s)


def linear_costs(jacobian, cov) -> np.ndarray:
    """Closed-form costs ``c(u) = E[Var(Y | X_-u)]`` of the linear Gaussian model.

    Parameters
    ----------
    jacobian : array_like, shape (m, k)
    cov : array_like, shape (k, k)

    Returns
    -------
    ndarray, shape (2**k, m)
        Indexed by the bitmask of u; row 0 is 0 and the last row is Var(Y), in
        output units squared.
    """
    g, corr = _standardized(jacobian, cov)
    values = explained_variance(g, corr)
    full = values.shape[-2] - 1
    complement = full ^ np.arange(full + 1)
    return np.clip(values[..., -1:, :] - values[..., complement, :], 0.0, None)


def extend_inputs(jacobian, cov, columns, variances) -> tuple:
    """Append inputs independent of the others to a Jacobian and covariance.

    Parameters
    ----------
    jacobian : array_like, shape (m, k)
    cov : array_like, shape (k, k)
    columns : array_like, shape (m, e)
        Derivative of each output with respect to each new input.
    variances : array_like, shape (e,)
        Variance of each new input.

    Returns
    -------
    jacobian : ndarray, shape (m, k + e)
    cov : ndarray, shape (k + e, k + e)
    """
    j = np.asarray(jacobian, dtype=float)
    s = np.asarray(cov, dtype=float)
    c = np.asarray(columns, dtype=float).reshape(j.shape[0], -1)
    v = np.asarray(variances, dtype=float).ravel()
    k, e = s.shape[0], v.size
    out = np.zeros((k + e, k + e))
    out[:k, :k] = s
    out[k:, k:] = np.diag(v)
    return np.concatenate([j, c], axis=1), out


def linear_budget(jacobian, cov, *, inputs=OBSERVABLES) -> LinearBudget:
    """Linearized budget of the three outputs.

    Parameters
    ----------
    jacobian : array_like, shape (3, k)
        d output / d input at the nominal point (internal units).
    cov : array_like, shape (k, k)
        Covariance of the inputs (internal units).
    inputs : sequence of str
        Names of the k inputs (default: the six observables).

    Returns
    -------
    LinearBudget
    """
    j = np.asarray(jacobian, dtype=float)
    s = np.asarray(cov, dtype=float)
    inputs = tuple(inputs)
    if j.shape != (len(OUTPUTS), len(inputs)) or s.shape != (len(inputs), len(inputs)):
        raise InputError(
            "jacobian",
            j.shape,
            f"expected ({len(OUTPUTS)}, {len(inputs)}) for inputs {inputs} and a matching covariance",
        )
    g, corr = _standardized(j, s)
    var = np.einsum("mi,ij,mj->m", g, corr, g)
    safe = np.where(var > 0, var, 1.0)
    contrib = np.where(var[:, None] > 0, g * (g @ corr) / safe[:, None], 0.0)
    shapley = linear_shapley(j, s)
    undefined = [q for q, row in zip(OUTPUTS, shapley) if np.isnan(row).any()]
    if undefined:
        warnings.warn(
            f"the Shapley budget of {', '.join(undefined)} is undefined: the output depends on the tiny "
            "difference of inputs correlated to within 1e-10 of an exact relation; check the correlations "
            "(the covariance contributions are still given)",
            PerierrWarning,
            stacklevel=2,
        )
    return LinearBudget(shapley, contrib, np.einsum("mi,ij,mj->m", j, s, j), inputs)
