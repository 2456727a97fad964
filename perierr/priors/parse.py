"""A compact text syntax for distance priors, and :func:`resolve_prior`.

Syntax: ``NAME`` or ``NAME:key=value,key=value``. Lengths take a unit
(``L=1.35kpc``, ``r_max=500 pc``); a bare number is in pc.

=====================  =====================================  ==========================
name (aliases)         parameters                             example
=====================  =====================================  ==========================
``none``               --                                     ``none``
``edsd`` (``exp``)     ``L``                                  ``edsd:L=1350pc``
``ggd`` (``gg``,       ``alpha``, ``beta``, ``L``             ``ggd:alpha=1.5,beta=2,L=1kpc``
``generalized_gamma``)
``uniform``            ``r_max``                              ``uniform:r_max=2kpc``
``table``              ``file`` (two columns: pc, density)    ``table:file=prior.txt``
=====================  =====================================  ==========================
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from ..errors import InputError
from .densities import (
    CustomPrior,
    DistancePrior,
    ExponentialDensity,
    GeneralizedGamma,
    NoPrior,
    TablePrior,
    UniformDensity,
)

__all__ = ["PRIOR_SYNTAX", "parse_prior", "resolve_prior"]

_KINDS = {
    "none": ((), lambda p: NoPrior()),
    "edsd": (("L",), lambda p: ExponentialDensity(p["L"])),
    "ggd": (("alpha", "beta", "L"), lambda p: GeneralizedGamma(p["alpha"], p["beta"], p["L"])),
    "uniform": (("r_max",), lambda p: UniformDensity(p["r_max"])),
    "table": (("file",), lambda p: TablePrior.from_file(p["file"])),
}
_ALIASES = {
    "exp": "edsd", "gg": "ggd", "generalized_gamma": "ggd", "gamma": "ggd",
    "uniform_density": "uniform", "exponential": "edsd",
}

#: One line per accepted prior, used in error messages and CLI help.
PRIOR_SYNTAX = (
    "none | edsd:L=<length> | ggd:alpha=<a>,beta=<b>,L=<length> | "
    "uniform:r_max=<length> | table:file=<path with columns pc, density> "
    "(lengths like 1350pc or 1.35kpc; bare numbers are pc)"
)


def parse_prior(spec: str) -> DistancePrior:
    """Build a prior from its text form, e.g. ``"edsd:L=1350pc"``.

    Raises
    ------
    InputError
        Unknown name, unknown/missing/bad parameter; the message lists what is
        accepted.
    """
    text = spec.strip()
    head, _, rest = text.partition(":")
    key = head.strip().lower().replace("-", "_")
    key = _ALIASES.get(key, key)
    if key not in _KINDS:
        raise InputError("distance prior", spec, f"unknown prior {head.strip()!r}; accepted: {PRIOR_SYNTAX}")
    wanted, build = _KINDS[key]
    params = {}
    if rest.strip():
        for item in rest.split(","):
            name, eq, value = item.partition("=")
            name = name.strip()
            if not eq or not name or not value.strip():
                raise InputError("distance prior", spec,
                                 f"expected key=value pairs after ':' (got {item.strip()!r}); accepted: {PRIOR_SYNTAX}")
            if name not in wanted:
                raise InputError("distance prior", spec,
                                 f"unknown parameter {name!r} for {key}; it takes {', '.join(wanted) or 'none'}")
            if name in params:
                raise InputError("distance prior", spec, f"parameter {name!r} given twice")
            params[name] = value.strip()
    missing = [w for w in wanted if w not in params]
    if missing:
        raise InputError("distance prior", spec,
                         f"missing parameter(s) {', '.join(missing)} for {key}; accepted: {PRIOR_SYNTAX}")
    return build(params)


def resolve_prior(spec) -> DistancePrior:
    """Turn what a user passed as ``distance_prior`` into a prior object.

    Parameters
    ----------
    spec : DistancePrior, str, callable, mapping, (distance, density) pair or None
        A prior object; a text spec (:func:`parse_prior`); a vectorized
        callable density (:class:`CustomPrior`); a mapping
        ``{"name": "edsd", "L": 1350}``; a pair of arrays (a table); None
        (no prior).
    """
    if spec is None:
        return NoPrior()
    if isinstance(spec, DistancePrior):
        return spec
    if isinstance(spec, str):
        return parse_prior(spec)
    if isinstance(spec, Mapping):
        data = dict(spec)
        name = data.pop("name", None)
        if not isinstance(name, str):
            raise InputError("distance prior", spec, f"a mapping needs a 'name'; accepted: {PRIOR_SYNTAX}")
        body = ",".join(f"{k}={v}" for k, v in data.items())
        return parse_prior(f"{name}:{body}" if body else name)
    if callable(spec):
        return CustomPrior(spec)
    if isinstance(spec, (tuple, list)) and len(spec) == 2:
        return TablePrior(np.asarray(spec[0], dtype=float), np.asarray(spec[1], dtype=float))
    raise InputError(
        "distance prior", repr(spec),
        f"expected a prior object, a callable density, a (distance, density) table or text: {PRIOR_SYNTAX}",
    )
