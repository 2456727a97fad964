"""The planner's statistics as records: which output, which statistic, which threshold.

A :class:`Metric` names one statistic of one scenario: the 90 % width, the
standard deviation, the median or the linear sigma of an output, or the
probability P(d_ph < D) of a distance threshold. Code compares records;
:attr:`Metric.key` gives the strings the JSON documents use
(``"distance_pc.width90"``, ``"p:20000 au"``), and :meth:`Metric.parse` reads
them back. :class:`MetricTable` is a mapping keyed by records that also accepts
those strings.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

from ..errors import InputError
from ..units import OUTPUTS

__all__ = ["Metric", "MetricTable", "OUTPUT_STATISTICS", "PROBABILITY"]

#: Statistics of one output, in the order the planner reports them.
OUTPUT_STATISTICS = ("width90", "std", "median", "linear_sigma")

#: The kind of a threshold probability P(d_ph < D).
PROBABILITY = "probability"

_EXPECTED = "'<output>.<statistic>' (statistic one of width90, std, median, linear_sigma) or 'p:<threshold>'"


@dataclass(frozen=True)
class Metric:
    """One statistic the planner computes per scenario.

    Attributes
    ----------
    output : str
        One of ``OUTPUTS``; ``"distance_pc"`` for a probability.
    kind : str
        One of :data:`OUTPUT_STATISTICS` or :data:`PROBABILITY`.
    threshold : str or None
        The threshold's label (e.g. ``"1 pc"``) for a probability, else None.
    """

    output: str
    kind: str
    threshold: str | None = None

    def __post_init__(self):
        if self.kind == PROBABILITY:
            if self.output != "distance_pc" or not self.threshold:
                raise InputError("metric", self, "a probability is P(d_ph < threshold): give the threshold's label")
        elif self.kind not in OUTPUT_STATISTICS:
            raise InputError("metric", self.kind, f"expected a statistic from {OUTPUT_STATISTICS} or {PROBABILITY!r}")
        elif self.output not in OUTPUTS or self.threshold is not None:
            raise InputError("metric", self.output, f"expected an output from {OUTPUTS} (and no threshold)")

    @classmethod
    def probability(cls, threshold: str) -> Metric:
        """P(d_ph < threshold), ``threshold`` a label as :func:`perierr.thresholds.parse_thresholds` gives it."""
        return cls("distance_pc", PROBABILITY, str(threshold))

    @property
    def key(self) -> str:
        """The string the JSON documents use: ``"<output>.<statistic>"`` or ``"p:<threshold>"``."""
        return f"p:{self.threshold}" if self.kind == PROBABILITY else f"{self.output}.{self.kind}"

    @classmethod
    def parse(cls, text: str) -> Metric:
        """The record of a key (``"distance_pc.width90"``, ``"p:1 pc"``)."""
        text = str(text)
        if text.startswith("p:"):
            if not text[2:].strip():
                raise InputError("metric", text, _EXPECTED)
            return cls.probability(text[2:])
        output, dot, kind = text.partition(".")
        if not dot or output not in OUTPUTS or kind not in OUTPUT_STATISTICS:
            raise InputError("metric", text, _EXPECTED)
        return cls(output, kind)

    @classmethod
    def coerce(cls, value) -> Metric:
        """A record as it is, or one parsed from its key."""
        return value if isinstance(value, Metric) else cls.parse(value)


class MetricTable(Mapping):
    """A read-only mapping ``Metric -> value`` (in insertion order) that also takes keys as strings.

    Parameters
    ----------
    items : mapping or iterable of (Metric, value)
    """

    def __init__(self, items=()):
        self._data = dict(items)
        for m in self._data:
            if not isinstance(m, Metric):
                raise TypeError(f"MetricTable keys are Metric records, got {m!r}")

    def __getitem__(self, key):
        try:
            metric = Metric.coerce(key)
        except InputError:  # a key that names no statistic is absent, as in any mapping (and .get gives the default)
            raise KeyError(key) from None
        return self._data[metric]

    def __contains__(self, key):
        try:
            return Metric.coerce(key) in self._data
        except InputError:
            return False

    def __iter__(self):
        return iter(self._data)

    def __len__(self):
        return len(self._data)

    def __repr__(self):
        return f"MetricTable({{{', '.join(f'{m.key!r}: {v!r}' for m, v in self._data.items())}}})"

    def by_key(self, convert=lambda v: v) -> dict:
        """``{metric.key: convert(value)}``: the JSON form."""
        return {m.key: convert(v) for m, v in self._data.items()}
