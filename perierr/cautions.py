"""Cautions as data: one record type, one list of checks, one way out.

A :class:`Caution` says where a number could mislead a reader (``severity =
"caution"``) or records a fact about how the input was read (``"note"``, e.g.
an input held exact). Readers, calibration and :func:`perierr.analyze` collect
them on their results; the faces show each once (the text report's "Read with
care", the JSON ``warnings`` and ``notes``), and at the Python API boundary
:func:`emit` turns the cautions a call created into :class:`PerierrWarning`
warnings, once.

The checks of a finished analysis are small functions of a :class:`Reading`,
listed in :data:`READING_CHECKS` in the order reports print them; the checks
that need only the star and its linearization (:data:`LINEAR_CHECKS`) are
shared with the planner, so ``perierr plan`` warns exactly where ``perierr
run`` does.

The sentence every report ends with (:data:`HAZARD`) lives here too.
"""

from __future__ import annotations

import math
import sys
import warnings
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from functools import partial

import numpy as np

from .errors import PerierrWarning
from .models.straight import HEAD_ON_RELATIVE
from .units import MAS_PC, OUTPUTS, PARALLAX

__all__ = [
    "BIASED_PARALLAX_FRACTION",
    "HAZARD",
    "LINEAR_CHECKS",
    "READING_CHECKS",
    "Caution",
    "Reading",
    "emit",
    "is_head_on",
    "linear_cautions",
    "messages",
    "note",
    "reading_cautions",
    "unique",
]

#: Fractional parallax error above which 1/parallax is a biased distance
#: (Bailer-Jones 2015, PASP 127, 994, Sect. 4).
BIASED_PARALLAX_FRACTION = 0.2

#: What perierr's predictions are not; every report ends with it, once.
HAZARD = (
    "perierr predicts statistical encounters from measured motions, not impact hazards: its numbers are not an "
    "impact-hazard assessment for comets or the Oort cloud."
)

SEVERITIES = ("note", "caution")


@dataclass(frozen=True)
class Caution:
    """One thing a reader should know about a result.

    Parameters
    ----------
    code : str
        Stable identifier of the check, e.g. ``"biased-parallax"``.
    message : str
        The sentence shown to the reader (without a row prefix).
    severity : {"note", "caution"}
        ``"note"``: a fact about how the input was read; ``"caution"``: a
        number could mislead.
    subject : str
        What it is about: an input field, an output (``"distance_pc"``),
        ``"monte_carlo"``, ``"model"`` or ``"prior"``.
    row : int, optional
        Table row the caution belongs to (0-based).
    """

    code: str
    message: str
    severity: str = "caution"
    subject: str = "result"
    row: int | None = None

    def __post_init__(self):
        if self.severity not in SEVERITIES:
            raise ValueError(f"severity {self.severity!r}: expected one of {SEVERITIES}")

    def __str__(self) -> str:
        return self.message if self.row is None else f"row {self.row}: {self.message}"

    def to_dict(self) -> dict:
        """Plain dict for JSON."""
        out = {"code": self.code, "severity": self.severity, "subject": self.subject, "message": self.message}
        if self.row is not None:
            out["row"] = self.row
        return out


def note(code: str, message: str, subject: str = "input", row: int | None = None) -> Caution:
    """A fact about how the input was read (severity ``"note"``)."""
    return Caution(code, message, "note", subject, row)


def unique(cautions: Iterable[Caution]) -> tuple:
    """The cautions with each message once, in order (a lower layer may have said what a check says again)."""
    seen, out = set(), []
    for c in cautions:
        if str(c) not in seen:
            seen.add(str(c))
            out.append(c)
    return tuple(out)


def messages(cautions: Iterable[Caution]) -> list:
    """The text of each caution, in order, each once."""
    return list(dict.fromkeys(str(c) for c in cautions))


def _first_frame_outside_perierr() -> int:
    """The ``stacklevel`` that points a warning at the caller of perierr's public function."""
    frame, level = sys._getframe(1), 1
    while frame is not None and frame.f_globals.get("__name__", "").split(".")[0] == "perierr":
        frame, level = frame.f_back, level + 1
    return level


def emit(cautions: Iterable[Caution]) -> None:
    """Warn once (:class:`PerierrWarning`) for each caution of severity ``"caution"``.

    Called by public functions on the cautions they created; the warning points
    at the user's code, however deep inside perierr the call happened.
    """
    level = _first_frame_outside_perierr()
    for text in messages(c for c in cautions if c.severity == "caution"):
        warnings.warn(text, PerierrWarning, stacklevel=level)


def from_warnings(caught, code: str = "computation", subject: str = "result") -> list:
    """Cautions for the :class:`PerierrWarning` warnings a lower layer raised inside a public call."""
    return [Caution(code, str(w.message), "caution", subject) for w in caught if issubclass(w.category, PerierrWarning)]


# ------------------------------------------------------------------ checks on the star and its linearization
def biased_parallax(star, linear=None) -> Caution | None:
    """A fractional parallax error above :data:`BIASED_PARALLAX_FRACTION` (without a distance prior)."""
    frac = star.fractional_parallax_error
    if frac > BIASED_PARALLAX_FRACTION:
        return Caution(
            "biased-parallax",
            f"the fractional parallax error is {frac:.0%} (> {BIASED_PARALLAX_FRACTION:.0%}): "
            "1/parallax is a biased distance and the intervals assume an implicit prior; "
            "use a distance prior (--distance-prior)",
            subject="parallax",
        )
    return None


def is_head_on(distance_pc, parallax_mas) -> bool:
    """Whether a nominal d_ph counts as zero: below :data:`HEAD_ON_RELATIVE` of the star's distance."""
    return distance_pc <= HEAD_ON_RELATIVE * MAS_PC / parallax_mas


def head_on(star, linear) -> Caution | None:
    """The nominal path passes through the Sun, where d_ph has no derivative."""
    if is_head_on(linear.value[1], star.mean[PARALLAX]):
        return Caution(
            "head-on",
            "the nominal path passes through the Sun (d_ph = 0), where d_ph is not differentiable: "
            "its linearized sigma and linear budget are undefined (shown as zero); use the Monte Carlo quantiles",
            subject="distance_pc",
        )
    return None


def distance_within_sigma(star, linear) -> Caution | None:
    """d_ph below twice its linear sigma: a linearized distance error means nothing there."""
    d_nom, d_sig = linear.value[1], linear.sigma[1]
    if d_sig > 0 and d_nom < 2.0 * d_sig:
        why = (
            "the distance is poorly known"
            if star.fractional_parallax_error > BIASED_PARALLAX_FRACTION
            else "the star heads almost straight at the Sun"
        )
        return Caution(
            "distance-within-sigma",
            f"d_ph ({d_nom:.3g} pc) is comparable to its linear sigma ({d_sig:.3g} pc): {why} and a "
            "linearized distance error is meaningless; use the Monte Carlo quantiles",
            subject="distance_pc",
        )
    return None


#: Checks of ``(star, linear)`` in the order reports print them (no distance prior).
LINEAR_CHECKS: tuple = (biased_parallax, head_on, distance_within_sigma)


def linear_cautions(star, linear) -> list:
    """Every :data:`LINEAR_CHECKS` caution that applies (no distance prior)."""
    return _run(LINEAR_CHECKS, star, linear)


# ------------------------------------------------------------------ checks on a finished analysis
@dataclass(frozen=True)
class Reading:
    """What the checks of a finished analysis look at."""

    star: object
    linear: object  # LinearResult or None (nominal parallax <= 0)
    mc: object  # MonteCarloResult
    with_prior: bool


def _biased_parallax(r: Reading) -> Caution | None:
    return None if r.with_prior else biased_parallax(r.star)


def _skewed_distance(r: Reading) -> Caution | None:
    d = r.mc.summaries["distance_pc"]
    if not d.std > 1e-12 * abs(d.median):  # a spread below rounding has no shape
        return None
    asym = (d.quantiles[0.84] - d.median) / max(d.median - d.quantiles[0.16], 1e-300)
    if abs(d.skewness) > 1.0 or not 0.67 < asym < 1.5:
        return Caution(
            "skewed-distance",
            f"the Monte Carlo distribution of d_ph is skewed (skewness {d.skewness:.2f}, "
            f"upper/lower half-width ratio {asym:.2f}): quote the quantiles, not +/- sigma",
            subject="distance_pc",
        )
    return None


def _no_linearization(r: Reading) -> Caution | None:
    if r.linear is not None:
        return None
    return Caution(
        "no-linearization",
        "no linearized columns or linear budget: the nominal parallax is <= 0 and cannot be "
        "inverted; the Monte Carlo columns are the posterior under the distance prior",
        subject="parallax",
    )


def _head_on(r: Reading) -> Caution | None:
    return None if r.linear is None else head_on(r.star, r.linear)


def _distance_within_sigma(r: Reading) -> Caution | None:
    return None if r.linear is None else distance_within_sigma(r.star, r.linear)


def _prior_columns(r: Reading) -> Caution | None:
    if r.linear is None or not r.with_prior:
        return None
    return Caution(
        "posterior-columns",
        "under the distance prior the Monte Carlo columns are posterior summaries; the "
        "linearized columns and the linear budget invert the nominal parallax and ignore the prior",
        subject="prior",
    )


def _nonlinear(k: int, r: Reading) -> Caution | None:
    """Monte Carlo std and linear sigma of output ``k`` differ by more than 20 % (no prior: a prior moves it)."""
    if r.linear is None or r.with_prior:
        return None
    q = OUTPUTS[k]
    s_lin, s_mc = r.linear.sigma[k], r.mc.summaries[q].std
    tiny = 1e-12 * abs(r.mc.summaries[q].median)  # spreads below rounding are not compared
    if s_lin > tiny and s_mc > tiny and not 0.8 < s_mc / s_lin < 1.25:
        return Caution(
            "nonlinear",
            f"{q}: Monte Carlo std {s_mc:.3g} differs from the linear sigma {s_lin:.3g} by "
            f"more than 20 %: the model is not linear over the error ellipsoid",
            subject=q,
        )
    return None


def _large_mc_error(r: Reading) -> Caution | None:
    worst = r.mc.worst_relative_error()
    if worst > 0.05:
        return Caution(
            "large-mc-error",
            f"Monte Carlo errors are large: a quantile's MC error reaches {worst:.0%} of (q84 - q16)/2; "
            "draw more samples (--samples, or --target-error without a prior)",
            subject="monte_carlo",
        )
    return None


def _direct_integrations(r: Reading) -> Caution | None:
    info = r.mc.perihelion.info
    n_direct = int(info.get("fallback_samples", 0) or 0) + int(info.get("beyond_span_samples", 0) or 0)
    size = r.mc.n_valid
    if n_direct > 0.1 * max(size, 1):
        return Caution(
            "direct-integration",
            f"{n_direct:,} draws ({n_direct / size:.0%}) needed direct orbit "
            "integration: the state-transition map could not cover the spread of the draws (slow but exact)",
            subject="model",
        )
    return None


def _nonpositive_parallax(r: Reading) -> Caution | None:
    n_bad = r.mc.n_nonpositive_parallax
    if n_bad:
        return Caution(
            "nonpositive-parallax",
            f"{n_bad} of {r.mc.n} samples ({n_bad / r.mc.n:.2%}) have parallax <= 0: they are left "
            "out of the quantiles and count as not passing within any threshold",
            subject="parallax",
        )
    return None


def _model_flags(r: Reading) -> Caution | None:
    flags = r.mc.perihelion.flags
    if flags is not None and np.any(flags):
        return Caution(
            "model-flags", f"{int(np.count_nonzero(flags))} samples were flagged by the model (see model info)",
            subject="model",
        )
    return None


def _long_straight_line(r: Reading) -> Caution | None:
    t = abs(r.mc.summaries["time_myr"].median)
    if t > 10 and r.mc.perihelion.info.get("model") == "straight_line":
        return Caution(
            "long-straight-line",
            f"|t_ph| is about {t:.0f} Myr: over such times the Galactic tide bends both paths "
            "and straight lines are unreliable; use the orbit model",
            subject="model",
        )
    return None


def _nonfinite_distance(r: Reading) -> Caution | None:
    if not math.isfinite(r.mc.summaries["distance_pc"].median):
        return Caution("nonfinite-distance", "the median perihelion distance is not finite", subject="distance_pc")
    return None


#: Checks of a finished analysis, in the order reports print them.
READING_CHECKS: tuple = (
    _biased_parallax,
    _skewed_distance,
    _no_linearization,
    _head_on,
    _distance_within_sigma,
    _prior_columns,
    *(partial(_nonlinear, k) for k in range(len(OUTPUTS))),
    _large_mc_error,
    _direct_integrations,
    _nonpositive_parallax,
    _model_flags,
    _long_straight_line,
    _nonfinite_distance,
)


def reading_cautions(star, linear, mc, with_prior: bool) -> list:
    """Every :data:`READING_CHECKS` caution that applies to a finished analysis."""
    return _run(READING_CHECKS, Reading(star, linear, mc, with_prior))


def _run(checks: Iterable[Callable], *args) -> list:
    return [c for c in (check(*args) for check in checks) if c is not None]
