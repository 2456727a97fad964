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
from .units import AU_PER_PC, MAS_PC, OUTPUTS, PARALLAX

__all__ = [
    "BIASED_PARALLAX_FRACTION",
    "DIRECT_FRACTION",
    "HAZARD",
    "SHOWER",
    "LINEAR_CHECKS",
    "MODEL_MEDIAN_FRACTION",
    "MODEL_PROBABILITY_CHANGE",
    "READING_CHECKS",
    "TIDE_TIME_MYR",
    "Caution",
    "Reading",
    "emit",
    "is_head_on",
    "linear_cautions",
    "map_tolerance",
    "messages",
    "model_difference",
    "note",
    "reading_cautions",
    "unique",
]

#: Fractional parallax error above which 1/parallax is a biased distance
#: (Bailer-Jones 2015, PASP 127, 994, Sect. 4).
BIASED_PARALLAX_FRACTION = 0.2

#: The model-difference caution fires when the straight line moves a median of t_ph, d_ph or v_ph by more than
#: this fraction of the (q84 - q16)/2 of the answer (common practice, no source): a shift of a quarter of a
#: Gaussian sigma turns a 5 % tail into 8 %, more than the rounding of any quoted interval.
MODEL_MEDIAN_FRACTION = 0.25

#: ... or a probability P(d_ph < D) by more than this (absolute; common practice, no source): the planner's
#: decisiveness level (``--alpha``, 0.05), so a change this large can turn a settled question into an open one.
MODEL_PROBABILITY_CHANGE = 0.05

#: Without the orbit model's answer at hand, a straight-line run is told to use the orbit model beyond this
#: |t_ph| [Myr]: within a Myr the Galactic tide moves a perihelion a few tens of pc away by thousands of au
#: (the README's demo star: 1,700 au in 0.65 Myr).
TIDE_TIME_MYR = 1.0

#: Direct orbit integrations above this fraction of the draws are worth a caution (they cost time only).
DIRECT_FRACTION = 0.1

#: Symbols of the outputs in sentences.
_SYMBOL = {"time_myr": "t_ph", "distance_pc": "d_ph", "speed_kms": "v_ph"}

#: What perierr's predictions are not; every report ends with it, once.
HAZARD = (
    "perierr predicts statistical encounters from measured motions, not impact hazards: its numbers are not an "
    "impact-hazard assessment for comets or the Oort cloud."
)

#: What the encounter effects (impulses, strength, Oort radii) are not; shown wherever they are.
SHOWER = (
    "The impulses, strength proxies and Oort-radius probabilities are statistical predictions of a passing "
    "star's pull, not impact hazards; how many comets it sends inward needs dedicated comet-dynamics studies."
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
    comparison: dict | None = None  # the straight line on the same draws (perierr.comparison), other models
    orbit_comparison: dict | None = None  # the orbit model at the nominal inputs, straight-line runs
    model: dict | None = None  # describe() of the model that ran


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
    diag = r.mc.perihelion.diagnostics
    n_direct = int(diag.fallback_samples or 0) + int(diag.sparse_samples or 0)
    size = r.mc.n_valid
    if n_direct > DIRECT_FRACTION * max(size, 1):
        return Caution(
            "direct-integration",
            f"{n_direct:,} draws ({n_direct / size:.0%}) needed direct orbit integration: the maps of the draw "
            "cloud could not cover its spread; this only cost time, those answers come from direct integration",
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
    if flags is None or not np.any(flags):
        return None
    n_flagged, diag = int(np.count_nonzero(flags)), r.mc.perihelion.diagnostics
    why = []
    if diag.n_outside_window:
        why.append(
            f"{diag.n_outside_window:,} with their perihelion beyond the edge of the search window, extrapolated "
            "along a straight line from there (pass a longer horizon: --horizon, or horizon_myr)"
        )
    if diag.n_not_converged:
        why.append(f"{diag.n_not_converged:,} whose perihelion search did not converge")
    text = f"{n_flagged} samples were flagged by the model"
    return Caution("model-flags", text + (": " + "; ".join(why) if why else " (see model info)"), subject="model")


def map_tolerance(model: dict | None) -> tuple:
    """The orbit model's ``map_tolerance_au`` and ``method`` option from its description (None if it has none)."""
    while model is not None and "map_tolerance_au" not in model:
        model = model.get("base")  # a wrapper (focusing) describes the wrapped model under "base"
    return (None, None) if model is None else (model["map_tolerance_au"], model.get("method"))


def _map_error(r: Reading) -> Caution | None:
    """A map error above the tolerance that ``method="map"`` kept (``"auto"`` integrates those draws directly)."""
    worst = r.mc.perihelion.diagnostics.map_error_au_max
    tolerance, method = map_tolerance(r.model)
    if worst is None or tolerance is None or method != "map" or not worst > tolerance:
        return None
    return Caution(
        "map-error",
        f"the orbit maps' check against direct integration found errors up to {worst:.3g} au, above "
        f'its tolerance of {tolerance:g} au, and method "map" keeps the mapped answers: d_ph may be off by that '
        'much; use method "auto" (the default), which integrates such draws directly',
        subject="model",
    )


def model_difference(r: Reading) -> Caution | None:
    """The straight line and the orbit model disagree by more than the thresholds, at any |t_ph|.

    With a model other than the straight line, the straight line on the same draws (``r.comparison``) is
    judged: a median of t_ph, d_ph or v_ph off by more than :data:`MODEL_MEDIAN_FRACTION` of the model's
    (q84 - q16)/2, or a P(d_ph < D) off by more than :data:`MODEL_PROBABILITY_CHANGE`. With the straight line,
    the orbit model at the nominal inputs (``r.orbit_comparison``) is judged by the first rule against the
    straight-line interval; without it, straight lines beyond :data:`TIDE_TIME_MYR` are told to use the orbit
    model.
    """
    if r.comparison:
        return _straight_line_differs(r)
    if r.orbit_comparison:
        return _orbit_differs(r)
    t = abs(r.mc.summaries["time_myr"].median)
    if r.mc.perihelion.diagnostics.model == "straight_line" and t > TIDE_TIME_MYR:
        return Caution(
            "model-difference",
            f"|t_ph| is about {t:.2g} Myr and straight lines ignore the Galactic tide, which moves perihelia by "
            "thousands of au within a Myr; use the orbit model (the default: drop --model straight_line)",
            subject="model",
        )
    return None


def _beyond(difference: float, half: float, scale: float) -> bool:
    """A difference beyond :data:`MODEL_MEDIAN_FRACTION` of the half-width (beyond rounding for a zero width)."""
    if half > 0:
        return abs(difference) > MODEL_MEDIAN_FRACTION * half
    return abs(difference) > 1e-9 * abs(scale)


def _value(q: str, x: float, *, signed: bool = False) -> str:
    """An output value with its unit in a sentence (distances in pc and au; times always signed)."""
    sign = "+" if signed or q == "time_myr" else ""
    if q == "distance_pc":
        au = f"{x * AU_PER_PC:{sign},.0f} au"
        return f"{x:{sign}.4g} pc = {au}" if signed else f"{x:.4g} pc ({au})"
    return f"{x:{sign}.4g} {'Myr' if q == 'time_myr' else 'km/s'}"


def _scale(difference: float, half: float) -> str:
    if half > 0:
        return f"{abs(difference) / half:.2f} × the half-width (q84 − q16)/2"
    return "while the interval has no width"


def _straight_line_differs(r: Reading) -> Caution | None:
    c, parts = r.comparison, []
    for q in OUTPUTS:
        e = c[q]
        model_median = r.mc.summaries[q].median
        off = e["median"] - model_median  # straight line minus the model
        if _beyond(off, e["half_width"], model_median):
            parts.append(
                f"median {_SYMBOL[q]} {_value(q, e['median'])} instead of {_value(q, model_median)} "
                f"({_value(q, off, signed=True)}, {_scale(off, e['half_width'])})"
            )
    for t in c.get("thresholds", ()):
        if abs(t["difference"]) > MODEL_PROBABILITY_CHANGE:
            parts.append(f"P(d_ph < {t['label']}) = {t['probability']:.1%} instead of {t['model_probability']:.1%}")
    if not parts:
        return None
    name = r.mc.perihelion.diagnostics.model or "chosen"
    return Caution(
        "model-difference",
        f"straight lines would mislead for this star: on the same draws they give {'; '.join(parts)}. The "
        f"Galactic tide matters here: quote the {name} model's answer, not a straight-line one (screens included)",
        subject="model",
    )


def _orbit_differs(r: Reading) -> Caution | None:
    c, parts = r.orbit_comparison, []
    for q in OUTPUTS:
        e = c[q]
        if _beyond(e["difference"], e["half_width"], e["straight_line"]):
            parts.append(
                f"{_SYMBOL[q]} {_value(q, e['orbit'])} instead of {_value(q, e['straight_line'])} "
                f"({_value(q, e['difference'], signed=True)}, {_scale(e['difference'], e['half_width'])} of "
                "these straight-line draws)"
            )
    if not parts:
        return None
    return Caution(
        "model-difference",
        f"the Galactic tide matters for this star: the orbit model at the nominal inputs gives {'; '.join(parts)}, "
        "so these straight-line answers, threshold probabilities included, may mislead; rerun with the orbit "
        "model (the default: drop --model straight_line)",
        subject="model",
    )


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
    _map_error,
    model_difference,
    _nonfinite_distance,
)


def reading_cautions(star, linear, mc, with_prior: bool, **more) -> list:
    """Every :data:`READING_CHECKS` caution that applies to a finished analysis.

    ``more``: the optional fields of :class:`Reading` (``comparison``, ``orbit_comparison``, ``model``).
    """
    return _run(READING_CHECKS, Reading(star, linear, mc, with_prior, **more))


def _run(checks: Iterable[Callable], *args) -> list:
    return [c for c in (check(*args) for check in checks) if c is not None]
