"""Plain-text report of an :class:`~perierr.analysis.Analysis`.

Numbers are rounded to the precision their uncertainty supports (two
significant digits of the error).
"""

from __future__ import annotations

import math

import numpy as np

from ..cautions import DIRECT_FRACTION, HAZARD, SHOWER, map_tolerance, messages
from ..units import AU_PER_PC, INDEX, INTERNAL_LABELS, OBSERVABLES, OUTPUT_TITLES, OUTPUTS
from .rounding import round_interval
from .shares import format_share, input_label

__all__ = ["format_analysis", "format_value"]


def _decimals(err: float) -> int:
    if not err > 0 or not math.isfinite(err):
        return 4
    return max(0, min(10, 1 - int(math.floor(math.log10(err)))))


def format_value(value: float, err: float, *, signed: bool = False) -> str:
    """``value`` with as many decimals as two significant digits of ``err`` allow."""
    spec = f"{'+' if signed else ''}.{_decimals(err)}f"
    return format(value, spec)


def _row(label, nominal, sigma, s, scale=1.0, signed=False):
    q = s.quantile
    err = max(sigma * scale if sigma is not None else 0.0, (q(0.84) - q(0.16)) * 0.5 * scale) / 10
    f = lambda x: format_value(x * scale, err, signed=signed)  # noqa: E731
    lin = "" if nominal is None else f"{f(nominal):>11} ± {format_value(sigma * scale, err):<9}"
    return f"  {label:<15}{lin:<24}{f(s.median):>11}   {f(q(0.16))} … {f(q(0.84))}   {f(q(0.05))} … {f(q(0.95))}"


def format_analysis(analysis, *, hazard: bool = True) -> str:
    """Render an analysis as a readable multi-line report.

    Parameters
    ----------
    analysis : Analysis
    hazard : bool
        End with :data:`perierr.cautions.HAZARD`; a face that prints several
        reports says it once, at the end.
    """
    a = analysis
    mc = a.monte_carlo
    lines = _header_lines(a) + [""] + _input_lines(a.star) + [""]
    lines += _perihelion_lines(a.linear, mc)
    lines += _model_lines(mc.perihelion.diagnostics, a.model, mc.n_valid)
    lines += _monte_carlo_lines(mc) + [""]
    lines += _threshold_lines(mc)
    if a.budget is not None:
        lines += [""] + _budget_lines(a.budget)
    if a.encounter is not None:
        lines += [""] + encounter_lines(a.encounter, mc.n)
    if a.comparison:
        lines += [""] + _comparison_lines(a.comparison)
    if a.orbit_comparison:
        lines += [""] + _orbit_comparison_lines(a.orbit_comparison)
    if a.prior is not None:
        lines += [""] + _prior_lines(a.prior)
    if a.calibration is not None and a.calibration.active:
        lines += [""] + _calibration_lines(a.calibration)
    lines += _caution_lines(a.all_cautions)
    if hazard:
        lines += ["", HAZARD]
    return "\n".join(lines)


def _header_lines(a) -> list:
    """The title line: star, epoch and model."""
    star = a.star
    model_name = a.model.get("description", a.model.get("name", "?"))
    epoch = f"J{star.ref_epoch:g}" if star.ref_epoch is not None else "epoch not given"
    return [f"perierr · closest approach to the Sun of {star.name} ({epoch}; model: {model_name})"]


def _input_lines(star) -> list:
    """The input section: each observable with its catalogue error."""
    lines = ["Input (catalogue units)"]
    cat = star.catalogue_errors()
    for name in OBSERVABLES:
        value, err = star.mean[INDEX[name]], cat[f"{name}_error"]
        shown = f"{value:.7f}" if name in ("ra", "dec") else format_value(value, err)
        unit = INTERNAL_LABELS[name] + ("  (error in mas)" if name in ("ra", "dec") else "")
        lines.append(f"  {name:<16}{shown:>14} ± {err:<10.4g} {unit}")
    if star.fractional_parallax_error < math.inf:
        lines.append(f"  fractional parallax error {star.fractional_parallax_error:.2%}")
    if star.mass is not None:
        err = star.mass_error or 0.0
        lines.append(f"  {'mass':<16}{star.mass:>14g} ± {err:<10g} M_sun" + ("  (held exact)" if not err else ""))
    if star.magnitude is not None:
        err = star.magnitude_error or 0.0
        band = f" ({star.magnitude_band})" if star.magnitude_band else ""
        lines.append(f"  {'magnitude':<16}{star.magnitude:>14g} ± {err:<10g} mag{band}" +
                     ("  (held exact)" if not err else ""))
    return lines


def _perihelion_lines(lin, mc) -> list:
    """The perihelion table: linear and Monte Carlo values, notes and extra quantiles."""
    head = f"  {'':<15}{'nominal ± linear 1σ':<24}{'MC median':>11}   {'16 % … 84 %':<23}   5 % … 95 %"
    lines = ["Perihelion (time relative to the epoch; negative = past)", head]
    for k, q in enumerate(OUTPUTS):
        nominal = None if lin is None else lin.value[k]
        sigma = None if lin is None else lin.sigma[k]
        lines.append(_row(OUTPUT_TITLES[q], nominal, sigma, mc.summaries[q], signed=q == "time_myr"))
        if q == "distance_pc":
            lines.append(_row("distance [au]", nominal, sigma, mc.summaries[q], scale=AU_PER_PC))
    notes = {}  # each note once, with the outputs it concerns
    for q in OUTPUTS:
        if mc.summaries[q].note:
            notes.setdefault(mc.summaries[q].note, []).append(OUTPUT_TITLES[q])
    lines += [f"  {', '.join(titles)}: {note}" for note, titles in notes.items()]
    return lines + _side_lines(mc) + _extra_quantile_lines(mc)


#: Share of the draws on the other side of now below which the report does not mention it.
SIDE_FRACTION = 0.001


def _side_lines(mc) -> list:
    """The share of draws whose perihelion is on the other side of now than the median's, when not negligible."""
    t = np.asarray(mc.perihelion.time_myr, dtype=float)[mc.valid]
    if t.size == 0:
        return []
    w = None if mc.samples.weights is None else np.asarray(mc.samples.weights, dtype=float)[mc.valid]
    past = float(np.average(t < 0, weights=w))
    future = mc.summaries["time_myr"].median >= 0
    other = past if future else 1.0 - past
    if other < SIDE_FRACTION:
        return []
    side, rest = ("past", "future") if future else ("future", "past")
    return [f"  {other:.1%} of the draws have their perihelion in the {side} (the rest in the {rest})"]


def _extra_quantile_lines(mc) -> list:
    """Quantiles asked for beyond the five the table shows, with their MC errors."""
    extra = [q for q in mc.levels if q not in (0.05, 0.16, 0.5, 0.84, 0.95)]
    if not extra:
        return []
    lines = ["  other quantiles (MC error in brackets):"]
    rows = [(q, OUTPUT_TITLES[q], 1.0) for q in OUTPUTS]
    rows.insert(OUTPUTS.index("distance_pc") + 1, ("distance_pc", "distance [au]", AU_PER_PC))
    for q, title, scale in rows:
        s = mc.summaries[q]
        err = 0.5 * (s.quantile(0.84) - s.quantile(0.16)) * scale / 10
        cells = ", ".join(
            f"{100 * lv:g} %: {format_value(s.quantile(lv) * scale, err)} ({s.quantile_error(lv) * scale:.2g})"
            for lv in extra
        )
        lines.append(f"    {title:<15}{cells}")
    return lines


def _monte_carlo_lines(mc) -> list:
    """The Monte Carlo line: draws, seed, worst MC error, weights and non-positive parallaxes."""
    worst = mc.worst_relative_error()
    lines = [
        f"  Monte Carlo: {mc.n:,} draws ({mc.samples.method}), seed {mc.samples.seed}; every quantile's "
        f"MC error ≤ {worst:.2%} of its (q84 − q16)/2"
    ]
    if mc.samples.weights is not None:
        lines.append(f"  effective sample size {mc.samples.effective_size:,.0f}")
    if mc.n_nonpositive_parallax:
        lines.append(
            f"  {mc.n_nonpositive_parallax:,} draws with parallax <= 0 (counted as never passing within any threshold)"
        )
    return lines


def _threshold_lines(mc) -> list:
    """The chance of passing within each threshold, or a 95 % bound when no or every draw passed."""
    lines = ["Chance that the star passes within"]
    for t in mc.thresholds:
        kind, value, why = probability_parts(t, mc.n)
        if kind == "upper":
            text = f"  < {value} (95 % bound; {why})"
        elif kind == "lower":
            text = f"  > {value} (95 % bound; {why})"
        else:
            text = _probability(t, mc, value)
        lines.append(f"  {t.label:<12} {text}")
    return lines


def probability_parts(t, n: int) -> tuple:
    """How a threshold probability reads: ``(kind, value, why)``, the one rule of every face.

    ``("upper", "0.0030%", "no draw passed")`` when nothing passed (no draw, or only draws of zero weight),
    ``("lower", "99.9970%", "every draw passed")`` when everything did (a 95 % bound then, as the Monte Carlo
    error is zero), else ``("value", Rounded, "")``: the probability in percent to the place its Monte Carlo error
    supports (PDG rounding, :func:`perierr.report.rounding.round_interval`).
    """
    if t.count == 0 or t.probability <= 0.0:
        return "upper", f"{t.upper95:.4%}", "no draw passed" if t.count == 0 else "no draw of non-zero weight passed"
    if t.count == n or t.probability >= 1.0:
        return "lower", f"{t.lower95:.4%}", "every draw passed" if t.count == n else "all the weight passed"
    if not (math.isfinite(t.se) and t.se > 0):  # cannot happen for 0 < P < 1 with a finite effective size
        return "upper" if t.probability < 0.5 else "lower", f"{t.probability:.4%}", "no Monte Carlo error"
    return "value", round_interval(100 * t.probability, 100 * t.se), ""


def _probability(t, mc, r) -> str:
    """``15.21% ± 0.11%``: the probability to the place its Monte Carlo error supports (PDG rounding).

    The count of draws follows when few passed or few did not (the error is then rough).
    """
    text = f"{r.value:>7}% ± {r.plus}%"
    if mc.samples.weights is None and min(t.count, mc.n - t.count) < 100:
        text += f" ({t.count:,} of {mc.n:,} draws)"
    return text


def _budget_lines(b) -> list:
    """The error budget: each input's variance share for distance and time."""
    lines = [
        "Who sets the error: share of the variance (linearized Shapley; covariance term in brackets)",
        f"  {'input':<17}{'distance':>18}{'time':>18}",
    ]
    sd, st = b.share("distance_pc"), b.share("time_myr")
    cd, ct = b.share("distance_pc", "covariance"), b.share("time_myr", "covariance")
    for name in b.inputs:
        cells = (
            format_share(sd[name], bounded=True), format_share(cd[name]),
            format_share(st[name], bounded=True), format_share(ct[name]),
        )  # fmt: skip
        lines.append(f"  {input_label(name):<17}{cells[0]:>8} ({cells[1]:>6}){cells[2]:>9} ({cells[3]:>6})")
    lines.append(
        f"  largest share: {_dominant(b, 'distance_pc')} for the distance, {_dominant(b, 'time_myr')} for the time"
    )
    return lines


def encounter_lines(enc, n: int) -> list:
    """What the encounter does and what an observer sees: medians, 5-95 % intervals, the largest budget share.

    Parameters
    ----------
    enc : EncounterEffects
    n : int
        Draws of the run (for the probabilities' resolution).
    """
    from ..encounter import quantity_title, three_digits

    band = enc.magnitude.get("band")
    head = f"  {'':<50}{'MC median':>11}   {'5 % … 95 %':<25}largest share"
    lines = ["What the encounter does and what an observer sees (impulse approximation; each draw)", head]
    for name, s in enc.summaries.items():
        q = s.quantile
        err = (q(0.84) - q(0.16)) / 20
        if not (math.isfinite(err) and err > 0):
            err = abs(s.median) * 1e-3
        # each number to the place its own Monte Carlo error allows (a far quantile of a heavy tail has a large one)
        low, median, high = (_significant(q(level), max(err, s.quantile_error(level))) for level in (0.05, 0.5, 0.95))
        share = "" if enc.budget is None or name not in enc.budget.quantities else _top_share(enc.budget, name)
        lines.append(f"  {quantity_title(name, band):<50}{median:>11}   {low + ' … ' + high:<25}{share}")
    for t in enc.inside:
        kind, value, why = probability_parts(t, n)
        shown = f"< {value} (95 % bound; {why})" if kind == "upper" else (
            f"> {value} (95 % bound; {why})" if kind == "lower" else f"{value.value}% ± {value.plus}%")
        lines.append(f"  {'P(inside the Oort radius ' + t.label + ')':<50}{shown}")
    for p in enc.positions:
        lines.append(f"  comet at {p['name'].replace('position', 'position ')}: {p['distance_au']:,.0f} au toward "
                     f"RA {p['ra_deg']:.4f}°, Dec {p['dec_deg']:+.4f}° (heliocentric ICRS)")
    if enc.passage:
        lines.append(f"  passage time d/v: median {three_digits(enc.passage['median_passage_yr'])} yr")
    lines += [f"  not given: {why}" for why in enc.missing]
    if enc.budget is not None:
        lines += [f"  shares of the {quantity_title(q, band)}: {why}" for q, why in enc.budget.undefined.items()]
        extra = [name for name in ("mass", "magnitude") if name in enc.budget.inputs]
        among = f", the star's {' and '.join(extra)} among the inputs" if extra else ""
        itself = " (the peak magnitude itself)" if "peak_magnitude" in enc.budget.quantities else ""
        lines.append(f"  shares: linearized, of log10 of each quantity{itself}{among}")
    return lines + [f"  {SHOWER}"]


def _significant(x, err) -> str:
    """``x`` to the place two significant digits of ``err`` allow; very large or small numbers in e-notation.

    ``1.1e-05`` with an error of 3e-8 reads ``1.1042e-05`` (the digits the error supports, trailing zeros kept).
    """
    if not math.isfinite(x):
        return str(x)
    if x != 0 and (abs(x) >= 1e6 or abs(x) < 1e-3):
        top = math.floor(math.log10(abs(x)))
        place = math.floor(math.log10(err)) - 1 if err > 0 and math.isfinite(err) else top - 3
        digits = min(12, max(1, top - place))
        return f"{x:.{digits}e}"
    return format_value(x, err)


def _top_share(budget, name) -> str:
    who = budget.dominant(name)
    if who is None:
        if name in budget.undefined:
            return "see below"
        return "no spread" if budget.sigma[budget.quantities.index(name)] == 0 else "undefined"
    return f"{input_label(who)} {format_share(budget.share(name)[who], bounded=True)}"


def _comparison_lines(comparison) -> list:
    """The comparison with straight-line motion on the same draws, probabilities included."""
    lines = ["Against straight-line motion on the same draws (this model minus straight line)"]
    lines += _difference_lines(comparison, "median", "difference_of_medians")
    for t in comparison.get("thresholds", ()):
        label, p, dp = f"P(< {t['label']})", t["probability"], 100 * t["difference"]
        lines.append(f"  {label:<15} {p:.2%} on straight lines, difference {dp:+.2f} points")
    return lines


def _difference_lines(comparison, value_key, difference_key) -> list:
    """One line per output (and d_ph in au): its value under ``value_key`` and the difference beside it."""
    lines = []
    for q in OUTPUTS:
        c = comparison[q]
        lines.append(f"  {OUTPUT_TITLES[q]:<15} {value_key} {c[value_key]:.6g}, difference {c[difference_key]:+.4g}")
        if q == "distance_pc":
            lines.append(
                f"  {'distance [au]':<15} {value_key} {c[value_key] * AU_PER_PC:,.0f}, "
                f"difference {c[difference_key] * AU_PER_PC:+,.0f}"
            )
    return lines


def _orbit_comparison_lines(comparison) -> list:
    """The orbit model at the nominal inputs beside a straight-line run: what the Galactic tide changes."""
    lines = ["The orbit model at the nominal inputs (what the Galactic tide changes; orbit minus straight line)"]
    lines += _difference_lines(comparison, "orbit", "difference")
    if comparison.get("flagged"):
        lines.append("  (the orbit model flagged this answer: its perihelion lies outside its search window)")
    return lines


def _caution_lines(cautions) -> list:
    """The cautions section, empty when there is nothing to say."""
    shown = messages(cautions)
    if not shown:
        return []
    return ["", "Read with care"] + [f"  - {message}" for message in shown]


def _dominant(budget, output: str) -> str:
    name = budget.dominant(output)
    return "undefined" if name is None else input_label(name)


def _model_lines(diag, description, n) -> list:
    """How the model ran (methods other than the straight line), in words, and what focusing changed.

    Parameters
    ----------
    diag : ModelDiagnostics
    description : dict
        ``describe()`` of the model (its map tolerance and method option).
    n : int
        Draws the model evaluated.
    """
    out = []
    if diag.method and diag.model != "straight_line":
        parts = [f"method {diag.method}"]
        if diag.n_map_leaves is not None:
            parts.append(f"{diag.n_map_leaves} map " + ("leaf" if diag.n_map_leaves == 1 else "leaves"))
        if diag.window_myr is not None:
            parts.append(f"search window {diag.window_myr[0]:+.4g} … {diag.window_myr[1]:+.4g} Myr")
        out.append(f"  model: {diag.model} ({', '.join(parts)})")
        out += [f"  {sentence}" for sentence in _diagnostic_sentences(diag, description, n)]
    focus = diag.focusing
    if focus is not None:
        out.append(
            f"  gravitational focusing ({focus.mass_msun:g} ± {focus.mass_error_msun:g} M_sun) moved d_ph by "
            f"{focus.median_delta_distance_pc * AU_PER_PC:+.3g} au and v_ph by "
            f"{focus.median_delta_speed_kms:+.3g} km/s (medians over the draws)"
        )
    return out


def _diagnostic_sentences(diag, description, n) -> list:
    """The orbit model's diagnostics in words, each with what it means and what to do."""
    out = []
    tolerance, method = map_tolerance(description)
    worst = diag.map_error_au_max
    if worst is not None and tolerance is not None:
        checked = f"{diag.n_checked:,} " if diag.n_checked is not None else ""
        head = f"map check: against direct integration of {checked}draws its largest error was {worst:.3g} au"
        if not worst > tolerance:
            out.append(f"{head}, within the tolerance of {tolerance:g} au")
        elif method == "map":
            out.append(
                f'{head}, above the tolerance of {tolerance:g} au, and method "map" kept the mapped answers: '
                'd_ph may be off by that much; use method "auto" (the default)'
            )
        else:
            out.append(
                f"{head}, above the tolerance of {tolerance:g} au: the map fits some draws poorly, so every draw "
                "predicted above the tolerance (twice the check's largest error) was integrated directly"
            )
    fallback, sparse = int(diag.fallback_samples or 0), int(diag.sparse_samples or 0)
    if fallback + sparse:
        why = []
        if fallback:
            why.append(f"{fallback:,} where the map could not be trusted or did not reach")
        if sparse:
            why.append(f"{sparse:,} in parts of the cloud too sparse for a map of their own, or much faster than "
                       "the rest")
        text = (
            f"direct integration: {fallback + sparse:,} draws ({(fallback + sparse) / max(n, 1):.1%}) were "
            f"integrated directly instead of through the map ({'; '.join(why)}); this only costs time, those "
            "answers come from direct integration"
        )
        if fallback + sparse > DIRECT_FRACTION * n:
            text += "; for speed use fewer draws (--samples) or, for a weak parallax, a distance prior"
        out.append(text)
    if diag.n_outside_window:
        k = diag.n_outside_window
        out.append(
            f"search window: {k:,} draws ({k / max(n, 1):.1%}) have their perihelion beyond its edge: their "
            "separation still shrinks there (going away from now), so their perihelion was extrapolated along a "
            'straight line from the edge (flagged); pass a longer horizon (--horizon MYR, or make_model("orbit", '
            "horizon_myr=...)) to find it"
        )
    if diag.n_not_converged:
        out.append(
            f"perihelion search: {diag.n_not_converged:,} draws did not converge (flagged); a smaller grid step "
            '(grid_step_myr) or method "direct" may help'
        )
    if diag.n_beyond_potential:
        out.append(
            f"beyond the potential: {diag.n_beyond_potential:,} draws lie farther than {diag.max_distance_pc:g} pc "
            "or move faster than any bound orbit; they take the straight-line answer (flagged)"
        )
    return out


def _calibration_lines(cal) -> list:
    """The calibration section: the zero-point applied and the inflated errors."""
    out = [
        f"Calibration: parallax zero-point {cal.zero_point_mas:+.4g} ± {cal.zero_point_error_mas:.2g} mas "
        "(corrected = catalogue − zero-point)"
    ]
    if cal.inflated:
        out.append("  errors inflated: " + ", ".join(f"{k} ×{f:g}" for k, f in cal.inflated.items()))
    return out


def _prior_lines(prior) -> list:
    """The distance-prior section of a ``PriorInfo``: what was assumed and how far to trust the sampling."""
    params = ", ".join(
        f"{k} = {v:g}" if isinstance(v, float) else f"{k} = {v}" for k, v in (prior.parameters or {}).items()
    )
    method = prior.method
    out = [f"Distance prior: {prior.name}" + (f" ({params})" if params else "") + f"; posterior by {method}"]
    ess = prior.effective_size
    if method == "reweight" and ess is not None:
        out.append(
            f"  importance weights: effective sample size {ess:,.0f} of {prior.n_drawn or 0:,} draws "
            f"(largest weight {prior.max_weight or 0:.2g})"
        )
    elif method == "mcmc":
        tau = prior.autocorrelation_time or {}
        acc = prior.acceptance_fraction or 0.0
        out.append(
            f"  emcee: {prior.n_walkers} walkers × {prior.n_steps} steps, burn-in "
            f"{prior.burn_in}, thin {prior.thin}, acceptance {acc:.2f}"
        )
        if tau:
            out.append(f"  autocorrelation time ≤ {max(tau.values()):.1f} steps; effective sample size {ess:,.0f}")
        if prior.switched_to_mcmc:
            out.append(f"  switched to MCMC: {prior.switched_to_mcmc}")
    elif ess is not None:
        out.append(f"  effective sample size {ess:,.0f}")
    return out
