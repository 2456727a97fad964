"""A ranked, costed target list: which star to re-observe, in what, how precisely, for how many hours.

For every (star x input x candidate precision) the list gives

* the hours of the new measurement from a cost model (:class:`~perierr.plan.cost.PhotonLimitedCost` or
  :class:`~perierr.plan.cost.TableCost`) at the star's magnitude;
* today's 90 % width of d_ph and P(d_ph < D) for the decisive goal's distance D;
* the width if the new value lands on today's mean (the planner's convention), the gain
  ``1 - after / today`` and the gain per hour;
* P(settle), the chance that the new data settle the decisive question "does it pass within D?"
  (:func:`perierr.plan.preposterior.preposterior`: the new value drawn from today's predictive
  distribution), with its binomial Monte Carlo error, and its uplift over today
  (``P(settle) - settled today``: a star already settled has nothing to win).

Ranking (``rank_by``):

``"gain"`` (default)
    gain per hour where the row has finite hours; the width of d_ph is what a measurement buys
    for every star, decided or not.
``"settle"``
    P(settle) uplift per hour: the gain in the chance of an answer to the decisive question. Not P(settle)
    itself, which would put first the stars already settled today.

Rows are ordered in groups: priced rows (finite hours) by the key per hour; then rows without hours (no cost
model, no cost for that input, no magnitude) by the key itself; then rows whose precision is not reachable
(infinite hours); then rows whose analysis failed. Within a group, ties (equal keys, NaN last) are broken by
the order of the stars as given, then of the inputs as given, then of the precisions as given.

Seeds: each star's draws come from ``star_seed(run seed, key)`` (:func:`perierr.catalogue.treatment.star_seed`,
a :class:`numpy.random.SeedSequence` of the run seed and the star's ``source_id``, else its name), so a star's
numbers do not depend on its place in the list; every input of a star uses its seed (today's answer is
the same in each of its rows). Every star keeps its rows: a star whose analysis fails (e.g. a parallax <= 0
without a prior) has rows with status ``failed`` and the reason.

Few draws: under a distance prior the draws are weighted, and today's answer can rest on few of them. Each row
carries ``effective_size``, the Kish effective number of today's draws (:class:`~perierr.plan.preposterior.
PosteriorAnswer`), and a ``caution`` when it is below ``min(1000, n / 10)`` (:func:`few_draws_limit`): the
widths and probabilities of that star are then uncertain beyond their stated Monte Carlo errors (use more
draws, ``n``).

Cost: a cost model (:class:`~perierr.plan.cost.PhotonLimitedCost`, :class:`~perierr.plan.cost.TableCost`) or
a plain callable ``cost(input, precision) -> hours`` (wrapped by :func:`perierr.plan.cost.as_cost_model`).

perierr predicts statistical encounters, not impact hazards.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError, PerierrError
from ..sampling.gaussian import resolve_seed
from ..star import ObservedStar
from ..units import AU_PER_PC, PARALLAX
from .goals import Goal, decide_goal
from .update import UNIT_LABELS, input_name, make_measurement

__all__ = ["RANK_BY", "STATUSES", "TargetList", "UnreadStar", "few_draws_limit", "parse_candidates", "rank_targets"]

#: Ranking keys (module docstring).
RANK_BY = ("gain", "settle")

#: Row statuses, in the order their groups are ranked (``failed`` last).
STATUSES = ("ok", "unpriced", "no-cost", "no-magnitude", "unreachable", "failed")

_GROUP = {"ok": 0, "unpriced": 1, "no-cost": 1, "no-magnitude": 1, "unreachable": 2, "failed": 3}


def few_draws_limit(n: int) -> float:
    """The effective number of draws below which a star's row carries a caution: ``min(1000, n / 10)``.

    Common practice, no source: a tenth of the draws, and a thousand effective draws put the Monte Carlo error
    of a 5 % tail near 0.7 % (binomial, sqrt(0.05 x 0.95 / 1000)).
    """
    return min(1000.0, n / 10.0)


@dataclass(frozen=True)
class UnreadStar:
    """A star that could not be read (a bad table row): it keeps its rows in the list, status ``failed``.

    Attributes
    ----------
    name : str
    reason : str
        Why it was not read (the reader's message).
    source_id : str or None
    """

    name: str
    reason: str
    source_id: str | None = None


@dataclass(frozen=True)
class TargetList:
    """The ranked target list.

    Attributes
    ----------
    table : astropy.table.QTable
        One row per (star x input x precision), best first (column ``rank``). Columns: ``rank``, ``star``,
        ``source_id``, ``input``, ``precision`` and ``precision_unit`` (the input's catalogue unit),
        ``magnitude`` [mag] and ``magnitude_band``, ``hours`` [h], ``today_width90`` [au],
        ``today_p_within`` (P(d_ph < D) today), ``today_settled``, ``after_width90`` [au] (the new value on
        today's mean), ``gain``, ``gain_per_hour`` [1/h], ``p_settle``, ``p_settle_se``, ``settle_gain``
        (``p_settle - today_settled``), ``settle_gain_per_hour`` [1/h], ``effective_size`` (Kish effective
        number of today's draws), ``status``, ``reason``, ``caution`` (few effective draws; empty when none),
        ``seed``, ``star_index`` (the star's place in the input). ``meta["perierr"]``: the settings (:attr:`settings`).
    goal : Goal
        The decisive goal.
    rank_by : str
        ``"gain"`` or ``"settle"``.
    cost : dict or None
        The cost model's ``to_dict()``.
    settings : dict
        Model, prior, calibration, draws, futures, run seed, perierr version.
    """

    table: object
    goal: Goal
    rank_by: str
    cost: dict | None = None
    settings: dict = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.table)

    def to_dict(self) -> dict:
        """Plain dict for JSON: the settings and one dict per row (values in the table's units)."""
        rows = []
        for row in self.table:
            item = {}
            for name in self.table.colnames:
                v = row[name]
                v = v.value if hasattr(v, "unit") else v
                item[name] = v.item() if hasattr(v, "item") else v
            rows.append(item)
        return {"goal": self.goal.to_dict(), "rank_by": self.rank_by, "cost_model": self.cost,
                "settings": dict(self.settings), "rows": rows}  # fmt: skip


def parse_candidates(texts) -> dict:
    """``["radial_velocity=0.3,0.1", "parallax=0.02"]`` -> ``{"radial_velocity": [0.3, 0.1], "parallax": [0.02]}``.

    Precisions are in the input's catalogue unit (a value may carry its unit: ``parallax=0.02 mas``); an input
    named twice gets the precisions of both. Raises InputError (field ``--measure``) for a malformed item.
    """
    out: dict = {}
    for text in texts:
        name, sep, values = str(text).partition("=")
        if not sep or not values.strip():
            raise InputError("--measure", text, "expected INPUT=PREC[,PREC...], e.g. radial_velocity=0.3,0.1")
        try:
            key = input_name(name)
        except InputError as exc:
            raise InputError("--measure", text, exc.expected) from None
        items = [v.strip() for v in values.split(",")]
        if not all(items):
            raise InputError("--measure", text, "an empty precision; expected INPUT=PREC[,PREC...]")
        out.setdefault(key, []).extend(items)
    return out


def _candidates(measurements) -> list:
    """[(input, [precision in catalogue units, ...]), ...] in the order given; each precision > 0, once."""
    if isinstance(measurements, Mapping):
        items = list(measurements.items())
    else:
        raise InputError("measurements", measurements, "expected {input: precision or [precisions]}")
    if not items:
        raise InputError("measurements", "none", "expected at least one input to measure, e.g. "
                         "{'radial_velocity': [0.3, 0.1]}")  # fmt: skip
    out, seen = [], set()
    for name, values in items:
        key = input_name(name)
        if key in seen:
            raise InputError("measurements", name, f"{key} named twice; give all its precisions at once")
        seen.add(key)
        values = [values] if isinstance(values, (str, int, float)) or hasattr(values, "unit") else list(values)
        precs = []
        for v in values:
            m = make_measurement(key, v)
            if not m.value > 0:
                raise InputError(f"{key} precision", m.value, f"expected a precision > 0 in {m.unit} (an exact "
                                 "measurement cannot be bought)")  # fmt: skip
            if m.value not in precs:
                precs.append(m.value)
        if not precs:
            raise InputError(f"{key} precision", values, "expected at least one precision")
        out.append((key, precs))
    return out


def _star_key(star) -> str:
    sid = getattr(star, "source_id", None)
    return str(sid) if sid not in (None, "") else f"name:{star.name}"


def _needs_magnitude(cost, name) -> bool:
    ask = getattr(cost, "needs_magnitude", None)
    return True if ask is None else bool(ask(name))


def _hours(cost, star, name, precision) -> tuple:
    """(hours, status, reason) of one candidate."""
    if cost is None:
        return math.nan, "unpriced", "no cost model given"
    if not cost.covers(name):
        return math.nan, "no-cost", f"the cost model has no entry for {name}"
    magnitude = getattr(star, "magnitude", None)
    if _needs_magnitude(cost, name) and magnitude is None:
        why = "the cost model needs the star's magnitude (phot_g_mean_mag or mag)"
        dropped = [c.message for c in getattr(star, "cautions", ()) if c.code == "magnitude-dropped"]
        return math.nan, "no-magnitude", why + (f"; {dropped[0]}" if dropped else "")
    hours = float(cost.hours(name, precision, magnitude))
    if not math.isfinite(hours):
        return math.inf, "unreachable", f"{name} to {precision:g} {UNIT_LABELS[name]} is beyond the cost " \
            "model's best precision"
    return hours, "ok", ""


def _resolve_goal(goal, alpha) -> Goal:
    if goal is None:
        goal = decide_goal("20000 au")
    elif isinstance(goal, str):
        goal = decide_goal(goal)
    if not isinstance(goal, Goal) or goal.kind != "decide":
        raise InputError("goal", goal, "expected a decisive goal (perierr.plan.decide_goal('20000 au'))")
    if alpha is not None:
        goal = decide_goal(goal.threshold, alpha)
    return goal


def rank_targets(
    stars: Sequence,
    measurements: Mapping,
    cost=None,
    *,
    goal: Goal | str | None = None,
    alpha: float | None = None,
    model="orbit",
    n: int = 2000,
    futures: int = 200,
    seed: int | np.random.Generator | None = None,
    distance_prior=None,
    parallax_offset=None,
    error_inflation=None,
    focusing: bool = False,
    rank_by: str = "gain",
    progress=None,
) -> TargetList:
    """Rank every (star x input x precision) by what it buys per telescope hour.

    Parameters
    ----------
    stars : sequence of ObservedStar (or UnreadStar)
        The candidate stars; an :class:`UnreadStar` keeps failed rows in the list.
    measurements : mapping
        Input -> new precision or precisions in catalogue units (mas, mas/yr, km/s; ra of alpha*), e.g.
        ``{"radial_velocity": [0.3, 0.1], "parallax": 0.02}`` (or :func:`parse_candidates` of the CLI's text).
    cost : PhotonLimitedCost, TableCost, callable or None
        Prices each candidate (``covers``, ``hours``, ``to_dict``; ``needs_magnitude`` if the hours do not
        always depend on the magnitude), or a plain callable ``cost(input, precision) -> hours`` (precision in
        the input's catalogue unit; it prices every input and needs no magnitude). None: no hours, rows ranked
        by the key itself.
    goal : Goal or str, optional
        The decisive question (``decide_goal``); default ``decide_goal("20000 au")``.
    alpha : float, optional
        Replaces the goal's alpha (0 < alpha < 0.5).
    model : ForwardModel or str
        Default the orbit model.
    n : int
        Draws answering each future (and today's answer), at least 100.
    futures : int
        Future values of each measurement drawn from today's predictive distribution (at least 20).
    seed : int, numpy.random.Generator or None
        The run seed (:func:`perierr.sampling.gaussian.resolve_seed`); each star's seed derives from it and
        the star's identifier (module docstring).
    distance_prior : str, DistancePrior or None
        As in :func:`perierr.analyze` (the nominal parallax must still be > 0 for the futures).
    parallax_offset, error_inflation, focusing
        As in :func:`perierr.analyze`, applied to each star first (:func:`perierr.plan.whatif.prepare`).
    rank_by : {"gain", "settle"}
        The ranking key (module docstring).
    progress : callable, optional
        ``progress(done, total)`` after each star.

    Returns
    -------
    TargetList

    Examples
    --------
    >>> from perierr.demo import demo_path
    >>> from perierr.star import read_star_file
    >>> star = read_star_file(demo_path("kestrel-4.toml"))
    >>> res = rank_targets([star], {"radial_velocity": [0.3, 0.1]}, model="straight_line", n=200, futures=20, seed=1)
    >>> res.table["rank"].tolist(), res.table["precision"].tolist()
    ([1, 2], [0.1, 0.3])
    """
    from .._version import __version__
    from ..catalogue.treatment import star_seed
    from ..models import make_model
    from .cost import as_cost_model
    from .preposterior import preposterior
    from .whatif import prepare, resolve_plan_prior

    stars = list(stars)
    if not stars:
        raise InputError("stars", "none", "expected at least one star")
    for k, s in enumerate(stars):
        if not isinstance(s, (ObservedStar, UnreadStar)):
            raise InputError("stars", type(s).__name__, f"expected ObservedStar objects (item {k})")
    if rank_by not in RANK_BY:
        raise InputError("rank_by", rank_by, f"expected one of {', '.join(RANK_BY)}")
    cands = _candidates(measurements)
    cost = as_cost_model(cost)  # before any work: a plain callable is wrapped, anything else refused
    goal = _resolve_goal(goal, alpha)
    base_model = make_model(model) if isinstance(model, str) else model
    prior = resolve_plan_prior(distance_prior)
    run_seed = resolve_seed(seed)
    rows = []
    for k, star in enumerate(stars):
        rows += _star_rows(k, star, cands, cost, goal, base_model, n, futures, run_seed, prior,
                           dict(parallax_offset=parallax_offset, error_inflation=error_inflation, focusing=focusing),
                           preposterior, prepare, star_seed)  # fmt: skip
        if progress is not None:
            progress(k + 1, len(stars))
    _rank(rows, rank_by)
    settings = {
        "perierr_version": __version__,
        "model": base_model.describe(),
        "goal": goal.to_dict(),
        "rank_by": rank_by,
        "n_inner": int(n),
        "n_future": int(futures),
        "seed": run_seed,
        "star_seeds": "SeedSequence(run seed, source_id or name) (perierr.catalogue.treatment.star_seed)",
        "distance_prior": None if prior is None else prior.to_dict(),
        "parallax_offset": None if parallax_offset is None else str(parallax_offset),
        "error_inflation": None if error_inflation is None else str(error_inflation),
        "focusing": bool(focusing),
        "after": "the new value lands on today's mean (the planner's convention)",
        "p_settle": "fraction of futures drawn from today's predictive distribution that settle the goal",
        "few_draws": f"caution when today's Kish effective number of draws is below min(1000, n/10) = "
                     f"{few_draws_limit(n):g}",
    }
    cost_dict = None if cost is None else cost.to_dict()
    return TargetList(_table(rows, goal, settings, cost_dict), goal, rank_by, cost_dict, settings)


def _star_rows(k, star, cands, cost, goal, model, n, futures, run_seed, prior, calib, preposterior, prepare,
               star_seed) -> list:  # fmt: skip
    """The rows of one star: one preposterior per input (every precision on the same draws)."""
    seed = star_seed(run_seed, _star_key(star))
    magnitude = getattr(star, "magnitude", None)
    base = {"star_index": k, "star": star.name, "source_id": star.source_id or "", "seed": seed,
            "magnitude": math.nan if magnitude is None else magnitude,
            "magnitude_band": getattr(star, "magnitude_band", None) or ""}  # fmt: skip
    failed = star.reason if isinstance(star, UnreadStar) else None
    prepared = None
    if failed is None:
        try:
            prepared, wrapped, _ = prepare(star, model, **calib)
        except PerierrError as exc:
            failed = str(exc)
    if failed is None and not prepared.mean[PARALLAX] > 0:
        failed = (f"parallax = {prepared.mean[PARALLAX]:g} mas <= 0: the futures of a new measurement are drawn "
                  "around a positive nominal parallax, with or without a distance prior (perierr plan "
                  "--distance-prior gives the what-if of such a star)")
    rows = []
    for j, (name, precs) in enumerate(cands):
        pp = None
        reason = failed
        if failed is None:
            try:
                pp = preposterior(prepared, wrapped, [name], precisions=[[p] for p in precs], goal=goal,
                                  n_future=futures, n_inner=n, seed=seed, prior=prior)  # fmt: skip
            except PerierrError as exc:
                reason = str(exc)
        for i, p in enumerate(precs):
            row = dict(base, input=name, input_index=j, precision=p, precision_index=i,
                       precision_unit=str(UNIT_LABELS[name]))
            if pp is None:
                row.update(_empty(), hours=math.nan, status="failed", reason=reason)
                rows.append(row)
                continue
            hours, status, why = _hours(cost, star, name, p)
            out = pp.outcomes[i]
            today_w = pp.today.width90["distance_pc"]
            after_w = out.on_mean.width90["distance_pc"]
            gain = 1.0 - after_w / today_w if today_w > 0 else 0.0
            settled = float(pp.today.settled)
            priced = status == "ok" and hours > 0
            ess = float(pp.today.effective_size)
            few = few_draws_limit(n)
            caution = "" if ess >= few else (
                f"today's answer rests on {ess:.0f} effective draws of {n} (below {few:g}): its widths and "
                "probabilities are uncertain beyond their Monte Carlo errors; use more draws")  # fmt: skip
            row.update(
                hours=hours, status=status, reason=why,
                today_width90=today_w * AU_PER_PC, today_p_within=pp.today.value, today_settled=bool(settled),
                after_width90=after_w * AU_PER_PC, gain=gain, gain_per_hour=gain / hours if priced else math.nan,
                p_settle=out.p_settle, p_settle_se=out.p_settle_se, settle_gain=out.p_settle - settled,
                settle_gain_per_hour=(out.p_settle - settled) / hours if priced else math.nan,
                effective_size=ess, caution=caution,
            )  # fmt: skip
            rows.append(row)
    return rows


def _empty() -> dict:
    nan = math.nan
    return dict(today_width90=nan, today_p_within=nan, today_settled=False, after_width90=nan, gain=nan,
                gain_per_hour=nan, p_settle=nan, p_settle_se=nan, settle_gain=nan, settle_gain_per_hour=nan,
                effective_size=nan, caution="")


def _rank(rows, rank_by) -> None:
    """Sort ``rows`` in place (module docstring) and number them from 1."""
    key = "gain" if rank_by == "gain" else "settle_gain"

    def order(r):
        group = _GROUP[r["status"]]
        value = r[key + "_per_hour"] if group == 0 else r[key]
        missing = not math.isfinite(value)
        return (group, missing, 0.0 if missing else -value, r["star_index"], r["input_index"], r["precision_index"])

    rows.sort(key=order)
    for i, r in enumerate(rows, 1):
        r["rank"] = i


#: Table columns: name -> unit (None: no unit).
COLUMNS = {
    "rank": None, "star": None, "source_id": None, "input": None, "precision": None, "precision_unit": None,
    "magnitude": "mag", "magnitude_band": None, "hours": "h", "today_width90": "au", "today_p_within": None,
    "today_settled": None, "after_width90": "au", "gain": None, "gain_per_hour": "1 / h", "p_settle": None,
    "p_settle_se": None, "settle_gain": None, "settle_gain_per_hour": "1 / h", "effective_size": None,
    "status": None, "reason": None, "caution": None, "seed": None, "star_index": None,
}  # fmt: skip


def _table(rows, goal, settings, cost_dict):
    import astropy.units as u
    from astropy.table import QTable

    from ..cautions import HAZARD

    table = QTable()
    for name, unit in COLUMNS.items():
        values = [r[name] for r in rows]
        if name in ("rank", "star_index"):
            col = np.array(values, dtype=np.int64)
        elif name == "seed":
            col = np.array(values, dtype=np.uint64).astype(np.int64)  # seeds are below 2**63
        elif name == "today_settled":
            col = np.array(values, dtype=bool)
        elif unit is None and name not in ("precision", "today_p_within", "gain", "p_settle", "p_settle_se",
                                           "settle_gain", "effective_size"):
            col = np.array([str(v) for v in values], dtype=str) if values else np.array([], dtype=str)
        else:
            col = np.array(values, dtype=float)
        table[name] = col * u.Unit(unit) if unit is not None else col
    table.meta["perierr"] = {
        **settings,
        "p_within": f"P(d_ph < {goal.threshold})",
        "precision": "new standard error of the input, in precision_unit (the input's catalogue unit)",
        "cost_model": cost_dict,
        "caution": HAZARD,
    }
    return table
