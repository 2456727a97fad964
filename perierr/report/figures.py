"""Figures of one analysis for papers and talks (matplotlib, corner).

Design: one idea per figure, readable in print (line styles and hatching do not rely on colour alone), the
colour-blind-safe palette of Okabe & Ito (2008, "Color Universal Design"), labels with units, PNG or PDF chosen
by the file's suffix, written atomically. Figures are returned as ``matplotlib.figure.Figure`` for further
editing; nothing is shown on screen.

* :func:`distance_figure`: the distribution of d_ph with its intervals and thresholds;
* :func:`corner_figure`: the joint distribution of t_ph, d_ph, v_ph (and the six inputs) over the draws;
* :func:`separation_figure`: the star's distance from the Sun over time with its bands
  (:func:`separation_bands` gives the numbers drawn);
* :func:`budget_figure`: the error budget of one output, linear and (given one) global shares side by side.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..models import StraightLine, make_model
from ..sampling.gaussian import resolve_seed
from ..summary import weighted_quantiles
from ..units import (
    AU_PER_PC,
    DEC,
    ERROR_LABELS,
    INTERNAL_LABELS,
    MAS_PC,
    MAS_PER_DEG,
    MYR_PER_PC_PER_KMS,
    OBSERVABLES,
    OUTPUT_LABELS,
    OUTPUT_TITLES,
    OUTPUTS,
    PARALLAX,
    RA,
)
from .files import atomic_path
from .rounding import latex_interval
from .shares import input_label

__all__ = [
    "BAND_LEVELS", "CONTOUR_LEVELS", "FIGURE_NAMES", "PALETTE", "SeparationBands", "budget_figure", "corner_figure",
    "distance_figure", "figure_paths", "separation_bands", "separation_figure", "write_figures",
]  # fmt: skip

#: Okabe & Ito (2008) colours: black, orange, sky blue, bluish green, yellow, blue, vermillion, reddish purple.
PALETTE = ("#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7")

#: Probability inside the 1- and 2-sigma ellipses of a 2-D Gaussian, 1 - exp(-k^2 / 2): the corner contours.
CONTOUR_LEVELS = (1.0 - np.exp(-0.5), 1.0 - np.exp(-2.0))

_FORMATS = (".png", ".pdf")
_UNITS = ("au", "pc")

#: Symbols of the outputs and inputs in figure labels (mathtext); units come from perierr.units.
_SYMBOLS = {
    "time_myr": r"$t_\mathrm{ph}$", "distance_pc": r"$d_\mathrm{ph}$", "speed_kms": r"$v_\mathrm{ph}$",
    "ra": r"$\Delta\alpha^*$", "dec": r"$\Delta\delta$", "parallax": r"$\varpi$", "pmra": r"$\mu_{\alpha^*}$",
    "pmdec": r"$\mu_\delta$", "radial_velocity": r"$v_r$",
}  # fmt: skip


def _pyplot():
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    return plt


def _name(analysis) -> str:
    """The star's name as figure text: ``$`` escaped, so matplotlib shows it as written (no math mode)."""
    return str(analysis.star.name or "star").replace("$", r"\$")


def _check_path(path) -> None:
    """Refuse a file name whose format the figures cannot be written in (before any drawing)."""
    if path is not None and Path(path).suffix.lower() not in _FORMATS:
        raise InputError("figure", str(path), "expected a file name ending in .png or .pdf")


def _check_unit(unit) -> float:
    """The factor from pc to ``unit`` ("au" or "pc"), or an InputError."""
    if unit not in _UNITS:
        raise InputError("unit", unit, "expected 'au' or 'pc'")
    return AU_PER_PC if unit == "au" else 1.0


def _save(fig, path):
    if path is not None:
        with atomic_path(path) as tmp:
            fig.savefig(tmp, dpi=150, format=Path(path).suffix.lower().lstrip("."))


def distance_figure(analysis, path=None, *, unit: str = "au"):
    """The perihelion distance's distribution, with the median, the 16-84 % and 5-95 % intervals and thresholds.

    Parameters
    ----------
    analysis : Analysis
    path : str or Path, optional
        Save there (``.png`` or ``.pdf``).
    unit : {"au", "pc"}

    Returns
    -------
    matplotlib.figure.Figure
    """
    if unit not in ("au", "pc"):
        raise InputError("unit", unit, "expected 'au' or 'pc'")
    _check_path(path)
    plt = _pyplot()
    mc = analysis.monte_carlo
    scale = AU_PER_PC if unit == "au" else 1.0
    d = np.asarray(mc.perihelion.distance_pc, dtype=float)[mc.valid] * scale
    w = None if mc.samples.weights is None else np.asarray(mc.samples.weights, dtype=float)[mc.valid]
    s = mc.summaries["distance_pc"]
    q = {lv: s.quantile(lv) * scale for lv in (0.05, 0.16, 0.5, 0.84, 0.95)}
    lo, hi = (float(v) for v in weighted_quantiles(d, [0.001, 0.999], w))
    span = hi - lo
    if not span > 0:
        raise InputError("distance", f"{q[0.5]:.6g} {unit}", "draws that spread in d_ph (every draw gives the same "
                         "perihelion distance: there is no distribution to draw)")  # fmt: skip
    fig, ax = plt.subplots(figsize=(6.4, 4.0), constrained_layout=True)
    bins = np.linspace(max(lo - 0.1 * span, 0.0), hi + 0.1 * span, 60)
    # a density of the whole distribution (divided by the total weight, not by the part inside the plotted range)
    density = np.histogram(d, bins=bins, weights=w)[0] / (float(d.size if w is None else w.sum()) * np.diff(bins))
    ax.stairs(density, bins, fill=True, color=PALETTE[2])
    ax.stairs(density, bins, color=PALETTE[5], linewidth=0.5)
    ax.axvspan(q[0.05], q[0.95], color=PALETTE[1], alpha=0.15, hatch="//", label="5-95 %")
    ax.axvspan(q[0.16], q[0.84], color=PALETTE[1], alpha=0.30, label="16-84 %")
    ax.axvline(q[0.5], color=PALETTE[0], lw=1.5, label=f"median {q[0.5]:,.5g} {unit}")
    for k, t in enumerate(mc.thresholds):
        x = t.distance_pc * scale
        if bins[0] <= x <= bins[-1]:
            ax.axvline(x, color=PALETTE[6], lw=1.2, ls=(0, (4, 2 + k)), label=f"{t.label}: P = {t.probability:.3g}")
    ax.set_xlabel(f"perihelion distance d_ph [{unit}]")
    ax.set_ylabel(f"probability density [1/{unit}]")
    weighted = "" if w is None else f", weighted: effective size {mc.samples.effective_size:,.0f}"
    ax.set_title(f"{_name(analysis)}: {OUTPUT_TITLES['distance_pc'].split(' [')[0]} at perihelion "
                 f"({mc.n_valid:,} draws{weighted})", fontsize="medium")
    ax.legend(fontsize="small", frameon=False)
    _save(fig, path)
    return fig


# ---------------------------------------------------------------------------------------------- corner


def _valid_weights(mc):
    """Weights of the valid draws (those the summaries describe), or None for equal weights."""
    return None if mc.samples.weights is None else np.asarray(mc.samples.weights, dtype=float)[mc.valid]


def _central(x, weights, summary=None, scale=1.0) -> tuple:
    """(q16, median, q84): the summary's own quantiles where there is one (perierr's intervals), else the draws'."""
    if summary is not None:
        try:
            return tuple(float(summary.quantile(lv)) * scale for lv in (0.16, 0.5, 0.84))
        except KeyError:  # an analysis run with levels= that left them out
            pass
    return tuple(float(v) for v in weighted_quantiles(x, [0.16, 0.5, 0.84], weights))


def _interval_title(symbol: str, unit: str, q16: float, q50: float, q84: float) -> str:
    """``symbol = median +plus -minus unit``, rounded by the Particle Data Group rule (report.rounding)."""
    if q50 - q16 > 0 and q84 - q50 > 0:
        return f"{symbol} = {latex_interval(q50, q50 - q16, q84 - q50)} {unit}"
    return f"{symbol} = {q50:.6g} {unit}"  # the quantiles coincide: no interval to round by


def _corner_columns(analysis, scale: float, unit: str, inputs: bool) -> list:
    """(name, draws, unit, summary, scale) of each column: the outputs, then the inputs as offsets where useful."""
    mc = analysis.monte_carlo
    cols = []
    for q in OUTPUTS:
        f, lab = (scale, unit) if q == "distance_pc" else (1.0, OUTPUT_LABELS[q])
        cols.append((q, np.asarray(mc.perihelion.output(q), dtype=float)[mc.valid] * f, lab, mc.summaries[q], f))
    if inputs:
        draws = np.asarray(mc.samples.values, dtype=float)[mc.valid]
        mean = np.asarray(analysis.star.mean, dtype=float)
        for k, name in enumerate(OBSERVABLES):
            x, lab = draws[:, k], INTERNAL_LABELS[name]
            # positions as offsets from the catalogue position in mas (alpha* = alpha cos dec): deg would show
            # nothing but the leading digits
            if k == RA:
                x = ((x - mean[RA] + 180.0) % 360.0 - 180.0) * np.cos(np.radians(mean[DEC])) * MAS_PER_DEG
                lab = ERROR_LABELS[name]
            elif k == DEC:
                x, lab = (x - mean[DEC]) * MAS_PER_DEG, ERROR_LABELS[name]
            cols.append((name, x, lab, None, 1.0))
    return cols


def _has_spread(x) -> bool:
    """Whether the draws of a column differ by more than rounding (corner cannot bin a column without range)."""
    return bool(np.ptp(x) > 1e-12 * max(float(np.max(np.abs(x))), np.finfo(float).tiny))


def corner_figure(analysis, path=None, *, inputs: bool = False, unit: str = "au"):
    """The joint distribution of t_ph, d_ph and v_ph over the Monte Carlo draws (a corner plot).

    Histograms of each output on the diagonal, titled with perierr's own interval (the median and the
    16-84 % interval of ``analysis.monte_carlo.summaries``, rounded by the Particle Data Group rule of
    :mod:`perierr.report.rounding`); pairwise 2-D distributions below it with contours enclosing
    :data:`CONTOUR_LEVELS` of the draws (39 %, solid, and 86 %, dashed: the 1- and 2-sigma ellipses of a 2-D
    Gaussian), named in the legend. Reweighted draws (a distance prior) are weighted everywhere. Drawn with
    the ``corner`` package (Foreman-Mackey 2016, JOSS 1, 24).

    Parameters
    ----------
    analysis : Analysis
    path : str or Path, optional
        Save there (``.png`` or ``.pdf``).
    inputs : bool
        Append the six inputs: ra and dec as offsets from the catalogue position in mas
        (Delta alpha* = Delta alpha cos dec), the others in their internal units.
    unit : {"au", "pc"}
        Unit of d_ph.

    Returns
    -------
    matplotlib.figure.Figure
        ``K x K`` axes, K = 3 (9 with the inputs); a column whose draws do not vary (an input held exact, an
        output the errors do not reach) is left out and named in the legend's title.

    Raises
    ------
    InputError
        For a unit or file name it cannot use, or when no column varies.
    """
    scale = _check_unit(unit)
    _check_path(path)
    _pyplot()  # the backend, before corner imports pyplot
    import corner
    from matplotlib.colors import to_rgba
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    mc = analysis.monte_carlo
    w = _valid_weights(mc)
    kept, fixed = [], []
    for name, x, lab, summary, f in _corner_columns(analysis, scale, unit, inputs):
        if _has_spread(x):
            kept.append((name, x, lab, _central(x, w, summary, f)))
        else:
            fixed.append(f"{_SYMBOLS[name]} = {x[0]:.6g} {lab}")
    if not kept:
        raise InputError("monte_carlo", "draws without spread", "draws in which an output or an input varies")
    data = np.column_stack([x for _, x, _, _ in kept])
    ranges = []
    for j in range(data.shape[1]):
        lo, hi = (float(v) for v in weighted_quantiles(data[:, j], [0.002, 0.998], w))
        if not hi > lo:  # most draws equal, a few apart: the whole range
            lo, hi = float(data[:, j].min()), float(data[:, j].max())
        pad = 0.08 * (hi - lo)
        ranges.append((lo - pad, hi + pad))
    n_eff = mc.samples.effective_size if w is not None else data.shape[0]
    bins = int(np.clip(np.sqrt(n_eff) / 2.5, 15, 40))
    fig = corner.corner(
        data, bins=bins, range=ranges, weights=w, color=PALETTE[5],
        labels=[f"{_SYMBOLS[n]} [{lab}]" for n, _, lab, _ in kept], label_kwargs={"fontsize": "medium"},
        # corner draws the single points without their weights: for reweighted draws they would show the Gaussian
        # proposal, not the posterior, so only the weighted contours are drawn then
        levels=CONTOUR_LEVELS, smooth=0.8, plot_datapoints=w is None, plot_density=False, fill_contours=True,
        # corner draws the contours in increasing density: the 86 % line first, then the 39 % one
        contour_kwargs={"colors": PALETTE[0], "linestyles": ["--", "-"], "linewidths": [1.0, 1.3]},
        contourf_kwargs={"colors": [(1.0, 1.0, 1.0, 0.0), to_rgba(PALETTE[2], 0.45), to_rgba(PALETTE[5], 0.6)]},
        data_kwargs={"color": PALETTE[5], "alpha": float(np.clip(1200.0 / data.shape[0], 0.04, 0.3)), "ms": 1.5},
        hist_kwargs={"color": PALETTE[5], "linewidth": 1.3}, max_n_ticks=4, use_math_text=True,
    )  # fmt: skip
    k = len(kept)
    axes = np.array(fig.axes).reshape(k, k)
    for i, (name, _, lab, (q16, q50, q84)) in enumerate(kept):
        ax = axes[i, i]
        ax.axvspan(q16, q84, facecolor=to_rgba(PALETTE[1], 0.3), edgecolor=PALETTE[1], hatch="///", lw=0, zorder=0)
        ax.axvline(q50, color=PALETTE[0], lw=1.2)
        ax.set_title(_interval_title(_SYMBOLS[name], lab, q16, q50, q84), fontsize="medium")
    fig.subplots_adjust(top=1.0 - 0.7 / fig.get_figheight())
    handles = [
        Line2D([], [], color=PALETTE[0], lw=1.2, label="median"),
        Patch(facecolor=to_rgba(PALETTE[1], 0.3), edgecolor=PALETTE[1], hatch="///", label="16-84 % (title)"),
    ]
    if k > 1:
        handles += [
            Line2D([], [], color=PALETTE[0], lw=1.3, ls="-", label=f"{100 * CONTOUR_LEVELS[0]:.0f} % of draws inside"),
            Line2D([], [], color=PALETTE[0], lw=1.0, ls="--", label=f"{100 * CONTOUR_LEVELS[1]:.0f} % of draws inside"),
        ]  # fmt: skip
    about = [_name(analysis), f"{mc.n_valid:,} draws, model {analysis.model.get('name', '?')}"]
    if w is not None:
        about.append(f"weighted ({mc.samples.method}), effective size {mc.samples.effective_size:,.0f}")
    if inputs:
        about.append(r"$\Delta\alpha^* = \Delta\alpha\,\cos\delta$ from the catalogue position")
    if fixed:
        about.append("no spread, not shown: " + ", ".join(fixed))
    size = max(10.0, 5.0 + 1.6 * k)  # points: corner's figure grows with k, the legend with it
    fig.legend(handles=handles, loc="upper right", bbox_to_anchor=(0.98, 0.98), frameon=False,
               fontsize=size, title="\n".join(about), title_fontsize=size, alignment="right")  # fmt: skip
    _save(fig, path)
    return fig


# ---------------------------------------------------------------------------------------------- separation

#: Quantile levels of the separation bands: 5-95 %, 16-84 % and the median.
BAND_LEVELS = (0.05, 0.16, 0.5, 0.84, 0.95)


@dataclass(frozen=True)
class SeparationBands:
    """The numbers :func:`separation_figure` draws.

    Attributes
    ----------
    times_myr : ndarray, shape (m,)
        Times from the epoch [Myr], increasing; 0 among them.
    levels : tuple of float
        :data:`BAND_LEVELS`.
    quantiles : ndarray, shape (5, m)
        Weighted quantiles of the separation at each time over the tracks, in ``unit``.
    tracks : ndarray, shape (k, m)
        The separation of each drawn track [``unit``].
    weights : ndarray, shape (k,), or None
        The tracks' weights (reweighted draws), None for equal weights.
    rows : ndarray of int, shape (k,)
        The draws the tracks follow (rows of ``analysis.monte_carlo.samples.values``).
    straight_median : ndarray, shape (m,), or None
        For a model other than the straight line: the median separation of the same draws on straight lines.
    unit : str
    model : str
        The name of the model the tracks follow (focusing left out, see
        :func:`perierr.models.tracks.separation_tracks`).
    seed : int
        The seed of the choice of draws (passing it back gives the same tracks).
    """

    times_myr: np.ndarray
    levels: tuple
    quantiles: np.ndarray
    tracks: np.ndarray
    weights: np.ndarray | None
    rows: np.ndarray
    straight_median: np.ndarray | None
    unit: str
    model: str
    seed: int


def _tracks_model(analysis, model=None):
    """The model whose tracks to draw: ``model``, or the one that ran, rebuilt from ``analysis.model``.

    Focusing is left out (it bends the path only near perihelion, :func:`perierr.models.tracks.separation_tracks`).
    An orbit model is rebuilt from its potential and solar parameter set names and its DOP853 tolerances, and
    accepted only if the rebuilt model describes its potential and Sun exactly as the one that ran.
    """
    from ..models.tracks import _unwrapped

    desc = dict(analysis.model)
    while "base" in desc:  # a Focused model's description wraps the one it focuses
        desc = dict(desc["base"])
    name = desc.get("name")
    if model is not None:
        base = _unwrapped(model)
        if getattr(base, "name", None) != name:
            raise InputError("model", getattr(model, "name", type(model).__name__),
                             f"the model that ran ({name!r}), as its analysis.model says")  # fmt: skip
        return base
    if name == "straight_line":
        return StraightLine()
    if name == "orbit":
        pot, sun = desc.get("potential", {}), desc.get("sun", {})
        tol = desc.get("integrator", {})
        try:
            rebuilt = make_model("orbit", potential=pot.get("name"), sun=sun.get("name"),
                                 rtol=tol.get("rtol", 1e-10), atol=tol.get("atol", 1e-10))  # fmt: skip
        except InputError:  # a custom potential or Sun: not rebuildable by name
            rebuilt = None
        if rebuilt is not None:
            again = rebuilt.describe()
            if again["potential"] == pot and again["sun"] == sun:
                return rebuilt
    raise InputError(
        "model", name, "a model that can be rebuilt from analysis.model (the straight line, or the orbit model with "
        "a named potential and solar parameter set); pass model= the ForwardModel that ran",
    )  # fmt: skip


def _columns_quantiles(tracks, levels, weights) -> np.ndarray:
    """Weighted quantiles (:func:`perierr.summary.weighted_quantiles`) of every column of ``tracks``: (len(levels), m).

    One call per time column (a few hundred), each vectorized over the tracks.
    """
    return np.stack([weighted_quantiles(col, levels, weights) for col in tracks.T], axis=1)


def _time_grid(analysis, n: int = 241) -> np.ndarray:
    """Times [Myr]: the t_ph 5-95 % interval and now with margins, denser across the t_ph interval; 0 included."""
    s = analysis.monte_carlo.summaries
    t05, t95 = s["time_myr"].quantile(0.05), s["time_myr"].quantile(0.95)
    d_med, v_med = s["distance_pc"].median, s["speed_kms"].median
    plx = float(analysis.star.mean[PARALLAX])
    now = MAS_PC / plx if plx > 0 else d_med
    crossing = MYR_PER_PC_PER_KMS * now / v_med if v_med > 0 else max(abs(t05), abs(t95), 1.0)
    lo, hi = min(0.0, t05), max(0.0, t95)
    margin = max(0.15 * (hi - lo), 0.3 * crossing)
    dip = 3.0 * MYR_PER_PC_PER_KMS * d_med / v_med if v_med > 0 else 0.0  # a track's dip lasts about d_ph / v_ph
    dense = np.linspace(max(lo - margin, t05 - dip), min(hi + margin, t95 + dip), n)
    return np.unique(np.concatenate([np.linspace(lo - margin, hi + margin, n), dense, [0.0]]))


def separation_bands(analysis, *, n_tracks: int = 400, unit: str = "pc", seed=None, model=None) -> SeparationBands:
    """The star's separation from the Sun over time: quantiles over tracks of a random subset of the draws.

    Parameters
    ----------
    analysis : Analysis
    n_tracks : int
        Draws to follow (all valid draws if fewer), chosen at random without replacement.
    unit : {"pc", "au"}
    seed : int, numpy.random.Generator or None
        The choice of draws (:func:`perierr.sampling.gaussian.resolve_seed`; recorded in the result).
    model : ForwardModel, optional
        The model that ran, when it cannot be rebuilt from ``analysis.model`` (a custom potential).

    Returns
    -------
    SeparationBands
        Pointwise quantiles: at each time, the separations of the tracks (weighted like the draws). Tracks
        pass their closest points at different times, so the median curve dips less deep than the median
        d_ph when the spread of t_ph times v_ph exceeds d_ph; every quantile of the curve is at least the
        same quantile of the tracks' d_ph.
    """
    from ..models.tracks import separation_tracks

    scale = _check_unit(unit)
    if isinstance(n_tracks, bool) or not isinstance(n_tracks, int | np.integer) or n_tracks < 2:
        raise InputError("n_tracks", n_tracks, "expected an integer >= 2")
    base = _tracks_model(analysis, model)
    seed = resolve_seed(seed)
    mc = analysis.monte_carlo
    valid = np.flatnonzero(mc.valid)
    rng = np.random.default_rng(seed)
    rows = np.sort(rng.choice(valid, size=min(int(n_tracks), valid.size), replace=False))
    weights = None if mc.samples.weights is None else np.asarray(mc.samples.weights, dtype=float)[rows]
    draws = np.asarray(mc.samples.values, dtype=float)[rows]
    times = _time_grid(analysis)
    tracks = separation_tracks(base, draws, times) * scale
    straight = None
    if not isinstance(base, StraightLine):
        straight = _columns_quantiles(separation_tracks(StraightLine(), draws, times) * scale, [0.5], weights)[0]
    quantiles = _columns_quantiles(tracks, BAND_LEVELS, weights)
    return SeparationBands(times, BAND_LEVELS, quantiles, tracks, weights, rows, straight, unit, base.name, seed)


def separation_figure(analysis, path=None, *, n_tracks: int = 400, unit: str = "pc", seed=None, model=None,
                      log: bool | None = None):  # fmt: skip
    """The star's distance from the Sun against time, with its 16-84 % and 5-95 % bands.

    Tracks of a random subset of the Monte Carlo draws under the model that ran (:func:`separation_bands`),
    their pointwise median and bands, a few single tracks, now (t = 0) and the perihelion (median t_ph and
    d_ph with their 16-84 % intervals, from all the draws) marked; for a model other than the straight line,
    the straight lines' median of the same draws, dashed, for comparison.

    Parameters
    ----------
    analysis : Analysis
    path : str or Path, optional
        Save there (``.png`` or ``.pdf``).
    n_tracks : int
        Draws to follow.
    unit : {"pc", "au"}
    seed : int, numpy.random.Generator or None
        The choice of draws.
    model : ForwardModel, optional
        The model that ran, when it cannot be rebuilt from ``analysis.model``.
    log : bool, optional
        A logarithmic distance axis (the pass shows at its own scale); None: when the curves span more than a
        factor of ten.

    Returns
    -------
    matplotlib.figure.Figure
    """
    scale = _check_unit(unit)
    _check_path(path)
    bands = separation_bands(analysis, n_tracks=n_tracks, unit=unit, seed=seed, model=model)
    plt = _pyplot()
    t, q = bands.times_myr, bands.quantiles
    fig, ax = plt.subplots(figsize=(8.4, 4.2), constrained_layout=True)
    # a few single tracks, drawn in proportion to their weights so that they show the weighted cloud
    p = None if bands.weights is None else bands.weights / bands.weights.sum()
    k = min(25, len(bands.tracks), len(bands.tracks) if p is None else int(np.count_nonzero(p)))
    shown = np.random.default_rng([bands.seed, 2]).choice(len(bands.tracks), size=k, replace=False, p=p)
    for track in bands.tracks[shown]:
        ax.plot(t, track, color=PALETTE[0], lw=0.4, alpha=0.25, zorder=1)
    ax.plot([], [], color=PALETTE[0], lw=0.4, alpha=0.5, label="single draws")
    ax.fill_between(t, q[0], q[4], facecolor=_rgba(PALETTE[2], 0.35), edgecolor=PALETTE[2], hatch="////",
                    lw=0, zorder=2, label="5-95 % at each time")  # fmt: skip
    ax.fill_between(t, q[1], q[3], facecolor=_rgba(PALETTE[5], 0.45), lw=0, zorder=3, label="16-84 % at each time")
    ax.plot(t, q[2], color=PALETTE[0], lw=1.6, zorder=4, label=f"median at each time ({bands.model.replace('_', ' ')})")
    if bands.straight_median is not None:
        ax.plot(t, bands.straight_median, color=PALETTE[1], lw=1.0, ls="--", zorder=4, label="median, straight lines")
    s = analysis.monte_carlo.summaries
    tq = [s["time_myr"].quantile(lv) for lv in (0.16, 0.5, 0.84)]
    dq = [s["distance_pc"].quantile(lv) * scale for lv in (0.16, 0.5, 0.84)]
    ax.errorbar(tq[1], dq[1], xerr=[[tq[1] - tq[0]], [tq[2] - tq[1]]], yerr=[[dq[1] - dq[0]], [dq[2] - dq[1]]],
                fmt="D", ms=5, color=PALETTE[6], mec=PALETTE[0], mew=0.6, capsize=3, zorder=5,
                label=r"perihelion: $t_\mathrm{ph}$, $d_\mathrm{ph}$ (median, 16-84 %)")  # fmt: skip
    epoch = analysis.star.ref_epoch
    ax.axvline(0.0, color=PALETTE[3], lw=1.2, ls=":", zorder=4,
               label="now" + (f" (epoch J{epoch:g})" if epoch is not None else ""))  # fmt: skip
    if log is None:  # a logarithmic axis when the curves span more than a decade: the pass shows at its scale
        log = bool(np.max(q[4]) > 10.0 * np.min(q[0]))
    if log:
        from matplotlib.ticker import FuncFormatter

        ax.set_yscale("log")
        # plain numbers (0.1, 1, 100,000) rather than powers of ten
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:,.0f}" if v >= 1 else f"{v:g}"))
    else:
        ax.set_ylim(bottom=0.0)
    ax.set_xlim(t[0], t[-1])
    ax.set_xlabel(f"time from the epoch [{OUTPUT_LABELS['time_myr']}]")
    ax.set_ylabel(f"distance from the Sun [{unit}]")
    mc = analysis.monte_carlo
    ax.set_title(f"{_name(analysis)}: {len(bands.rows):,} of {mc.n_valid:,} draws followed"
                 + (" (weighted)" if bands.weights is not None else ""), fontsize="medium")  # fmt: skip
    ax.legend(fontsize="small", frameon=False, loc="upper left", bbox_to_anchor=(1.01, 1.0))  # off the curves
    _save(fig, path)
    return fig


def _rgba(color, alpha):
    """``matplotlib.colors.to_rgba`` (imported on use: matplotlib loads only with a figure)."""
    from matplotlib.colors import to_rgba

    return to_rgba(color, alpha)


def budget_figure(analysis, path=None, *, output: str = "distance_pc", global_budget=None):
    """The error budget of one output as horizontal bars: each input's Shapley share of the variance.

    Parameters
    ----------
    analysis : Analysis
    path : str or Path, optional
        Save there (``.png`` or ``.pdf``).
    output : {"distance_pc", "time_myr", "speed_kms"}
    global_budget : GlobalBudget, optional
        A Monte Carlo budget of the same star (:func:`perierr.budget.global_budget`): its variance shares
        (solid bars, with their bootstrap intervals as error bars) beside the linear shares of the same inputs
        (hatched bars; ``global_budget.linear_variance``, the closed form over the global budget's inputs, so
        that both bars of an input share one game). Without it, the analysis's linear budget alone.

    Returns
    -------
    matplotlib.figure.Figure
    """
    if global_budget is not None:
        return _budget_pair(analysis, path, output, global_budget)
    if analysis.budget is None:
        raise InputError("budget", "none", "an analysis with a linear budget (the linearization failed or was off)")
    _check_path(path)
    shares = analysis.budget.share(output)
    plt = _pyplot()
    names = list(shares)
    values = np.array([shares[n] for n in names]) * 100
    order = np.argsort(values)
    fig, ax = plt.subplots(figsize=(6.4, 0.45 * len(names) + 1.2), constrained_layout=True)
    ax.barh(np.arange(len(names)), values[order], color=PALETTE[5], edgecolor=PALETTE[0], linewidth=0.5)
    ax.set_yticks(np.arange(len(names)), [input_label(names[i]) for i in order])
    for y, v in enumerate(values[order]):
        ax.text(v, y, f" {v:.1f} %", va="center", fontsize="small")
    ax.set_xlim(0, max(100.0, values.max() * 1.15))
    ax.set_xlabel(f"share of the variance of the {OUTPUT_TITLES[output].split(' [')[0]} [%] (linearized Shapley)")
    ax.set_title(f"{_name(analysis)}: who sets the error", fontsize="medium")
    _save(fig, path)
    return fig


def _percent(value: float) -> str:
    """A percentage to one decimal, never ``-0.0 %`` (a share that rounds to zero is zero)."""
    r = round(float(value), 1)
    return f"{r + 0.0 if r != 0 else 0.0:.1f} %"


def _budget_pair(analysis, path, output, budget):
    """Linear (hatched) and global (solid, bootstrap error bars) variance shares of each input, side by side."""
    est = budget.variance
    if output not in est.outputs:
        raise InputError("output", output, f"an output of the global budget: {', '.join(est.outputs)}")
    _check_path(path)
    plt = _pyplot()
    j = est.outputs.index(output)
    names = list(est.players)
    glob = np.asarray(est.shares[j], dtype=float) * 100
    low, high = np.asarray(est.low[j], dtype=float) * 100, np.asarray(est.high[j], dtype=float) * 100
    lin = np.asarray(budget.linear_variance[j], dtype=float) * 100
    order = np.argsort(glob)  # the largest global share on top
    y = np.arange(len(names))
    fig, ax = plt.subplots(figsize=(6.4, 0.6 * len(names) + 1.4), constrained_layout=True)
    ax.barh(y + 0.2, lin[order], height=0.38, facecolor=_rgba(PALETTE[2], 0.5), edgecolor=PALETTE[0],
            hatch="///", linewidth=0.5, label="linearized (closed form)")  # fmt: skip
    # the error bars: distances from each share to its interval's ends (a share outside its bootstrap interval,
    # possible for a bias-corrected estimate, gets a zero-length bar on that side)
    err = np.vstack([np.maximum(glob - low, 0.0), np.maximum(high - glob, 0.0)])[:, order]
    ax.barh(y - 0.2, glob[order], height=0.38, facecolor=PALETTE[5], edgecolor=PALETTE[0], linewidth=0.5,
            xerr=err, error_kw={"ecolor": PALETTE[0], "elinewidth": 1.0, "capsize": 3},
            label=f"global (Monte Carlo), {100 * est.confidence:.0f} % bootstrap interval")  # fmt: skip
    ax.set_yticks(y, [input_label(names[i]) for i in order])
    for yy, v, g, end in zip(y, lin[order], glob[order], np.maximum(glob, high)[order]):
        ax.text(max(v, 0.0), yy + 0.2, f" {_percent(v)}", va="center", fontsize="x-small")
        ax.text(max(end, 0.0), yy - 0.2, f"  {_percent(g)}", va="center", fontsize="x-small", color=PALETTE[5])
    top = max(100.0, float(np.nanmax(np.concatenate([lin, high]))) * 1.15)
    ax.set_xlim(min(0.0, float(np.nanmin(np.concatenate([glob, low]))) * 1.15), top)
    ax.axvline(0.0, color=PALETTE[0], lw=0.6)
    ax.set_xlabel(f"share of the variance of the {OUTPUT_TITLES[output].split(' [')[0]} [%] (Shapley)")
    ax.set_title(f"{_name(analysis)}: who sets the error, linearized and global", fontsize="medium")
    ax.legend(fontsize="small", frameon=False, loc="lower right")
    _save(fig, path)
    return fig


# ---------------------------------------------------------------------------------------------- all of them

#: The figures :func:`write_figures` draws, in order, by the word added to the pattern's name.
FIGURE_NAMES = ("distance", "corner", "separation", "budget")


def figure_paths(pattern, *, option: str = "figures") -> list:
    """The files :func:`write_figures` writes for a pattern: ``figs/k4.png`` -> ``figs/k4-distance.png``, ...

    Parameters
    ----------
    pattern : str or Path
        A file name ending in ``.png`` or ``.pdf``; each figure's name adds ``-<figure>`` to its stem.
    option : str
        The name of the field in an error message (e.g. the command-line option that gave the pattern).

    Returns
    -------
    list of Path
        One per entry of :data:`FIGURE_NAMES`, in that order.
    """
    p = Path(pattern)
    if p.suffix.lower() not in _FORMATS:
        raise InputError(option, str(pattern), "expected a file name ending in .png or .pdf (the figures' pattern)")
    return [p.with_name(f"{p.stem}-{name}{p.suffix}") for name in FIGURE_NAMES]


def write_figures(analysis, pattern, *, seed=None, option: str = "figures") -> list:
    """Draw and write every figure of an analysis (:data:`FIGURE_NAMES`) with default settings.

    Parameters
    ----------
    analysis : Analysis
    pattern : str or Path
        See :func:`figure_paths`.
    seed : int, numpy.random.Generator or None
        The choice of draws of the separation figure.
    option : str
        The field named in an error about the pattern.

    Returns
    -------
    list of Path
        The files written, in order; the budget figure is left out when the analysis has no linear budget.
    """
    paths = dict(zip(FIGURE_NAMES, figure_paths(pattern, option=option)))
    plt = _pyplot()
    draw = {
        "distance": lambda p: distance_figure(analysis, p),
        "corner": lambda p: corner_figure(analysis, p),
        "separation": lambda p: separation_figure(analysis, p, seed=seed),
        "budget": lambda p: budget_figure(analysis, p),
    }
    figures = {}
    try:  # every figure is drawn before any is written: a figure that cannot be drawn leaves no file behind
        for name in paths:
            if name == "budget" and analysis.budget is None:
                continue
            figures[name] = draw[name](None)
        for name, fig in figures.items():
            _save(fig, paths[name])
    finally:
        for fig in figures.values():
            plt.close(fig)  # free the figures (a command draws several)
    return [paths[name] for name in figures]
