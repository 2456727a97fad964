"""Invented stars from a field mapping and quiet straight-line analyses, for the encounter tests."""

import warnings

import perierr
from perierr import ObservedStar
from perierr.errors import PerierrWarning


def star_of(fields, **changes):
    """The star of ``fields`` with ``changes``; a field set to None is left out."""
    data = {**fields, **changes}
    return ObservedStar.from_values(**{k: v for k, v in data.items() if v is not None})


def run(star, *, n=20_000, seed=11, **kw):
    """A straight-line analysis (no model comparison), its cautions silenced."""
    kw.setdefault("model", "straight_line")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return perierr.analyze(star, n_samples=n, seed=seed, compare=False, **kw)
