"""The distance-prior block of an analysis: which prior, how the posterior was sampled, how well.

:class:`PriorInfo` is typed; :meth:`PriorInfo.to_dict` is the ``prior`` block of the JSON document, with the
keys the samplers write in ``Samples.info`` (:mod:`.posterior`, :mod:`.reweight`, :mod:`.mcmc`).
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields

__all__ = ["PriorInfo"]


@dataclass(frozen=True)
class PriorInfo:
    """A distance prior and the diagnostics of the posterior sampling; None means "not reported".

    Attributes
    ----------
    name : str
        The prior's name (``"edsd"``, ``"none"`` ...).
    parameters : dict
        Its parameters (JSON-able).
    method : str
        How the posterior was sampled: ``"gaussian"`` (no prior), ``"reweight"`` or ``"mcmc"``.
    effective_size : float
        Effective sample size (Kish for weights; walkers x kept steps / autocorrelation time for MCMC).
    note : str
        Why the prior had no effect (no prior, or parallax_error = 0).
    n_drawn, n_zero_weight : int
        Reweighting: Gaussian draws made, and draws outside the prior's support.
    max_weight : float
        Reweighting: largest normalized weight.
    autocorrelation_time : dict
        MCMC: sampled parameter -> integrated autocorrelation time [steps].
    burn_in, thin, n_steps, n_walkers : int
        MCMC: steps discarded, thinning, steps run, walkers.
    acceptance_fraction : float
        MCMC: mean acceptance fraction.
    sampled_parameters : list of str
        MCMC: the sampler's coordinates.
    switched_to_mcmc : str
        Why the automatic choice switched from reweighting to MCMC.
    reweight_effective_size : float
        The effective size reweighting reached before the switch.
    n_requested, n_delivered : int
        MCMC: draws asked for and delivered (the chain is thinned).
    prior_tension_sigma : float
        Posterior median parallax minus the measured one, in parallax errors (informative parallaxes).
    extra : dict
        Any other diagnostic a sampler reported, in its order.
    """

    name: str
    parameters: dict
    method: str
    effective_size: float | None = None
    note: str | None = None
    n_drawn: int | None = None
    n_zero_weight: int | None = None
    max_weight: float | None = None
    autocorrelation_time: dict | None = None
    burn_in: int | None = None
    thin: int | None = None
    n_steps: int | None = None
    n_walkers: int | None = None
    acceptance_fraction: float | None = None
    sampled_parameters: list | None = None
    switched_to_mcmc: str | None = None
    reweight_effective_size: float | None = None
    n_requested: int | None = None
    n_delivered: int | None = None
    prior_tension_sigma: float | None = None
    extra: dict = field(default_factory=dict)

    @classmethod
    def from_samples(cls, prior, samples) -> PriorInfo:
        """The block of a prior and the posterior samples drawn under it.

        Parameters
        ----------
        prior : DistancePrior
            Supplies ``name`` and ``parameters``.
        samples : Samples
            Supplies ``method`` and the diagnostics in ``info``; keys that are
            not fields (or whose value is None) are kept in ``extra``.
        """
        known = {f.name for f in fields(cls)} - {"name", "parameters", "method", "extra"}
        typed = {k: v for k, v in samples.info.items() if k in known and v is not None}
        extra = {k: v for k, v in samples.info.items() if k not in typed}
        return cls(prior.name, prior.parameters, samples.method, **typed, extra=extra)

    def to_dict(self) -> dict:
        """The ``prior`` block: name, parameters, every reported diagnostic, then the method."""
        out = {"name": self.name, "parameters": self.parameters}
        for f in fields(self)[3:]:
            value = getattr(self, f.name)
            if f.name != "extra" and value is not None:
                out[f.name] = value
        out.update(self.extra)
        out["method"] = self.method
        return out
