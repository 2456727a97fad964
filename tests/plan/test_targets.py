"""The ranked, costed target list: every row kept, ranks deterministic, numbers independent of the star order."""

import math
import warnings

import numpy as np
import pytest
from astropy.table import Table
from hypothesis import given, settings
from hypothesis import strategies as st

from perierr import ObservedStar
from perierr.errors import InputError
from perierr.plan.cost import PhotonLimitedCost, Reference, TableCost
from perierr.plan.targets import UnreadStar, parse_candidates, rank_targets

KMS_PER_MASYR_AT_1KPC = 4.740470463533348  # km/s per (mas/yr x kpc): 1 au / Julian year (from memory)

FAST = dict(model="straight_line", n=400, futures=20, seed=11)


def _star(name, *, plx=48.0, pmra=0.7, pmdec=-1.2, rv=-31.2, source_id=None, corr=True, **extra):
    fields = dict(name=name, ra=201.37, dec=-27.62, parallax=plx, parallax_error=0.03, pmra=pmra, pmra_error=0.035,
                  pmdec=pmdec, pmdec_error=0.03, radial_velocity=rv, radial_velocity_error=0.6, ra_error=0.02,
                  dec_error=0.02, **extra)
    if corr:
        fields.update(ra_pmra_corr=0.4, parallax_pmra_corr=-0.2)
    if source_id is not None:
        fields["source_id"] = source_id
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return ObservedStar.from_values(**fields)


def _rank(stars, measure, cost=None, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return rank_targets(stars, measure, cost, **{**FAST, **kw})


def _by_key(table):
    return {(str(r["star"]), str(r["input"]), float(r["precision"])): r for r in table}


def test_every_row_is_kept_with_status_and_reason():
    stars = [_star("near (invented)", mag=9.0), _star("negative parallax (invented)", plx=-0.4, mag=9.0),
             UnreadStar("row 7", "not read (parallax missing)")]
    res = _rank(stars, {"radial_velocity": [0.3, 0.1], "parallax": 0.02},
                PhotonLimitedCost({"radial_velocity": Reference(1.0, 12.0, 1.0, 0.01)}))
    t = res.table
    assert len(t) == 3 * 3
    status = {(str(r["star"]), str(r["input"]), float(r["precision"])): str(r["status"]) for r in t}
    assert status[("near (invented)", "radial_velocity", 0.1)] == "ok"
    assert status[("near (invented)", "parallax", 0.02)] == "no-cost"
    assert [str(r["status"]) for r in t if str(r["star"]) != "near (invented)"] == ["failed"] * 6
    reasons = {str(r["star"]): str(r["reason"]) for r in t if str(r["status"]) == "failed"}
    assert "parallax" in reasons["negative parallax (invented)"] and "not read" in reasons["row 7"]
    assert t["rank"].tolist() == list(range(1, 10))
    assert [str(s) for s in t["status"][-6:]] == ["failed"] * 6  # failures rank last, in star order
    assert t["star"][-6] == "negative parallax (invented)" and t["star"][-1] == "row 7"


def test_hours_follow_the_photon_limited_formula():
    ref = Reference(sigma=1.0, magnitude=12.0, hours=1.0, floor=0.05)
    res = _rank([_star("bright (invented)", mag=10.0, mag_band="V")], {"rv": [0.3, 0.04]},
                PhotonLimitedCost({"radial_velocity": ref}, overhead_hours=0.25))
    rows = _by_key(res.table)
    # t = t_ref (s_ref / s)^2 10^(0.4 (m - m_ref)) + overhead (common practice, no source)
    expected = 1.0 * (1.0 / 0.3) ** 2 * 10 ** (0.4 * (10.0 - 12.0)) + 0.25
    ok = rows[("bright (invented)", "radial_velocity", 0.3)]
    assert ok["hours"].value == pytest.approx(expected, rel=1e-12)
    assert ok["gain_per_hour"].value == pytest.approx(ok["gain"] / expected, rel=1e-12)
    floor = rows[("bright (invented)", "radial_velocity", 0.04)]
    assert math.isinf(floor["hours"].value) and floor["status"] == "unreachable"
    assert floor["rank"] == 2  # after the priced row, whatever its gain
    assert floor["gain"] > ok["gain"]


def test_a_star_without_magnitude_keeps_its_numbers_and_says_why_it_has_no_hours():
    cost = PhotonLimitedCost({"radial_velocity": Reference(1.0, 12.0, 1.0)})
    res = _rank([_star("no magnitude (invented)")], {"radial_velocity": 0.2}, cost)
    row = res.table[0]
    assert row["status"] == "no-magnitude" and "magnitude" in str(row["reason"])
    assert math.isnan(row["hours"].value) and 0.0 < row["gain"] < 1.0
    # a table cost without a magnitude column does not need one
    table = TableCost.from_table(Table({"input": ["radial_velocity"], "precision": [0.5], "hours": [3.0]}))
    res = _rank([_star("no magnitude (invented)")], {"radial_velocity": 0.6}, table)
    assert res.table[0]["status"] == "ok" and res.table[0]["hours"].value == pytest.approx(3.0, rel=1e-12)


def test_today_width_agrees_with_the_straight_line_closed_form():
    star = _star("closed form (invented)", corr=False)
    res = _rank([star], {"radial_velocity": 0.1}, n=4000)
    # d_ph = d v_t / v with v_t = 4.74 mu / plx (linear motion approximation; common practice, no source),
    # on independent numpy draws of the (uncorrelated) inputs
    rng = np.random.default_rng(5)
    k = 200_000
    plx = rng.normal(48.0, 0.03, k)
    mu = np.hypot(rng.normal(0.7, 0.035, k), rng.normal(-1.2, 0.03, k))
    vr = rng.normal(-31.2, 0.6, k)
    vt = KMS_PER_MASYR_AT_1KPC * mu / plx
    d_au = (1000.0 / plx) * vt / np.hypot(vt, vr) * 206264.80624709636  # au per pc (IAU 2012, from memory)
    lo, hi = np.quantile(d_au, [0.05, 0.95])
    assert res.table[0]["today_width90"].value == pytest.approx(hi - lo, rel=0.08)


def test_a_star_with_nothing_to_gain_ranks_last():
    # under straight lines the position has no influence: measuring ra (uncorrelated with the rest) buys nothing
    idle = _star("far and still (invented)", plx=5.0, corr=False)
    busy = _star("near (invented)")
    res = _rank([idle, busy], {"ra": 0.001, "radial_velocity": 0.2})
    last = res.table[-1]
    assert (str(last["star"]), str(last["input"])) == ("far and still (invented)", "ra")
    assert abs(last["gain"]) < 1e-9
    assert last["today_p_within"] == pytest.approx(0.0, abs=1e-12) and bool(last["today_settled"])
    assert last["p_settle"] == pytest.approx(float(last["today_settled"]), abs=1e-12)
    assert last["settle_gain"] == pytest.approx(0.0, abs=1e-12)
    others = res.table[:-1]
    assert np.all(np.asarray(others["gain"]) > 1e-6)


def test_ties_are_broken_by_star_order_then_input_order():
    a = _star("twin A (invented)", source_id="TWIN-1")
    b = _star("twin B (invented)", source_id="TWIN-1")  # the same identifier: the same seed, the same numbers
    measure = {"radial_velocity": 0.2, "pmra": 0.01}
    for order in ([a, b], [b, a]):
        res = _rank(order, measure)
        rv = [r for r in res.table if r["input"] == "radial_velocity"]
        assert rv[0]["gain"] == rv[1]["gain"] and rv[0]["p_settle"] == rv[1]["p_settle"]
        assert [str(r["star"]) for r in rv] == [s.name for s in order]
        assert rv[1]["rank"] == rv[0]["rank"] + 1
    # with equal gains (no cost, nothing to gain), the input order decides
    idle = _star("idle (invented)", plx=5.0, corr=False)
    res = _rank([idle], {"dec": 0.001, "ra": 0.001})
    assert [str(x) for x in res.table["input"]] == ["dec", "ra"]
    res = _rank([idle], {"ra": 0.001, "dec": 0.001})
    assert abs(res.table["gain"][0]) < 1e-9


def test_rank_by_settle_orders_by_the_uplift_per_hour():
    cost = PhotonLimitedCost({"radial_velocity": Reference(1.0, 12.0, 1.0), "parallax": Reference(0.05, 12.0, 2.0)})
    stars = [_star("edge (invented)", rv=-31.2, mag=8.0), _star("far (invented)", plx=8.0, mag=8.0)]
    res = _rank(stars, {"radial_velocity": [0.3, 0.1], "parallax": 0.01}, cost, rank_by="settle")
    key = np.asarray(res.table["settle_gain_per_hour"].value)
    assert np.all(np.diff(key) <= 1e-15)
    assert res.settings["rank_by"] == "settle"
    p, se = float(res.table["p_settle"][0]), float(res.table["p_settle_se"][0])
    assert se == pytest.approx(math.sqrt(p * (1 - p) / 20), abs=1e-12)  # binomial error with K = 20 futures


def test_weak_parallax_star_under_an_edsd_prior_end_to_end():
    weak = _star("weak parallax (invented)", plx=1.6, mag=13.0)
    weak = ObservedStar(weak.mean, np.diag([1e-12, 1e-12, 0.5**2, 0.05**2, 0.05**2, 2.0**2]), name=weak.name,
                        magnitude=13.0, magnitude_band="G")
    cost = PhotonLimitedCost({"parallax": Reference(0.05, 12.0, 2.0, 0.005)})
    res = _rank([weak, _star("near (invented)", mag=9.0)], {"parallax": [0.1, 0.02]}, cost,
                distance_prior="edsd:L=1000pc")
    rows = [r for r in res.table if r["star"] == "weak parallax (invented)"]
    assert len(rows) == 2 and all(r["status"] == "ok" for r in rows)
    better = _by_key(res.table)[("weak parallax (invented)", "parallax", 0.02)]
    assert 0.0 < better["gain"] < 1.0 and 0.0 <= better["p_settle"] <= 1.0
    assert better["hours"].value == pytest.approx(2.0 * (0.05 / 0.02) ** 2 * 10 ** 0.4, rel=1e-12)
    assert res.settings["distance_prior"]["name"] == "edsd"


def test_bad_candidates_are_refused():
    with pytest.raises(InputError, match="--measure"):
        parse_candidates(["radial_velocity"])
    with pytest.raises(InputError, match="--measure"):
        parse_candidates(["speed=0.1"])
    assert parse_candidates(["rv=0.3,0.1", "plx=0.02 mas"]) == {"radial_velocity": ["0.3", "0.1"],
                                                                "parallax": ["0.02 mas"]}
    with pytest.raises(InputError, match="> 0"):
        _rank([_star("x")], {"radial_velocity": 0.0})
    with pytest.raises(InputError, match="rank_by"):
        _rank([_star("x")], {"radial_velocity": 0.1}, rank_by="hours")


STARS = [_star("alpha (invented)", mag=9.0), _star("beta (invented)", pmra=3.0, mag=10.0),
         _star("gamma (invented)", plx=20.0, rv=-12.0, mag=11.0)]
COST = PhotonLimitedCost({"radial_velocity": Reference(1.0, 12.0, 1.0)})
MEASURE = {"radial_velocity": [0.3, 0.1], "parallax": 0.01}
COLUMNS = ("today_width90", "after_width90", "gain", "p_settle", "today_p_within", "hours", "seed")
REFERENCE = _by_key(_rank(STARS, MEASURE, COST).table)


@settings(max_examples=5, deadline=None, derandomize=True, database=None)
@given(st.permutations(range(3)))
def test_permuting_the_stars_permutes_the_rows(order):
    res = _rank([STARS[k] for k in order], MEASURE, COST)
    assert len(res.table) == len(REFERENCE) == 9
    for key, row in _by_key(res.table).items():
        for c in COLUMNS:
            a, b = row[c], REFERENCE[key][c]
            a, b = float(getattr(a, "value", a)), float(getattr(b, "value", b))
            assert a == b or (math.isnan(a) and math.isnan(b)), (key, c)
    ranked = [(str(r["star"]), str(r["input"]), float(r["precision"])) for r in res.table if r["status"] == "ok"]
    expected = sorted(REFERENCE, key=lambda k: REFERENCE[k]["rank"])
    assert ranked == [k for k in expected if REFERENCE[k]["status"] == "ok"]


def test_a_plain_callable_cost_is_wrapped():
    calls = []

    def hours(name, precision):  # invented: 2 h at 1 km/s, photon-limited in the precision
        calls.append(name)
        return 2.0 / precision**2

    res = _rank([_star("callable (invented)")], {"radial_velocity": [0.5, 0.25]}, hours)
    rows = _by_key(res.table)
    for p in (0.5, 0.25):
        row = rows[("callable (invented)", "radial_velocity", p)]
        assert row["status"] == "ok"  # no magnitude needed
        assert row["hours"].value == pytest.approx(2.0 / p**2, rel=1e-12)
        assert row["gain_per_hour"].value == pytest.approx(row["gain"] / (2.0 / p**2), rel=1e-12)
    assert set(calls) == {"radial_velocity"}
    assert res.cost["name"].endswith("hours") and "callable" in res.cost["model"]


def test_a_cost_that_is_neither_a_model_nor_callable_is_refused_before_the_work():
    progress = []
    with pytest.raises(InputError) as err:
        _rank([_star("x (invented)")], {"radial_velocity": 0.1}, 5.0, progress=lambda *a: progress.append(a))
    assert err.value.field == "cost" and progress == []


def test_effective_size_without_a_prior_is_every_draw():
    # equal weights: Kish's effective size (sum w)^2 / sum w^2 is n (Kish 1965, Survey Sampling)
    res = _rank([_star("plain (invented)")], {"radial_velocity": 0.2}, n=400)
    row = res.table[0]
    assert row["effective_size"] == pytest.approx(400.0, abs=1e-9) and str(row["caution"]) == ""


def test_few_effective_draws_under_a_prior_get_a_caution():
    from scipy import integrate, stats

    weak = ObservedStar(np.array([201.37, -27.62, 1.6, 0.7, -1.2, -31.2]),
                        np.diag([1e-12, 1e-12, 0.5**2, 0.05**2, 0.05**2, 2.0**2]), name="weak (invented)")
    n = 4000
    res = _rank([weak], {"parallax": 0.1}, n=n, distance_prior="uniform:r_max=413pc")
    row = res.table[0]
    # reference: Gaussian parallax draws weighted by a uniform space density (r^2) times the Jacobian
    # |dr/dplx| ~ r^2 (change of variables; common practice, no source), so w ~ r^4 for r < r_max; Kish's
    # n (E w)^2 / E w^2 by scipy quadrature (about 190 of 4000)
    lo = 1000.0 / 413.0

    def moment(k):
        return integrate.quad(lambda p: stats.norm.pdf(p, 1.6, 0.5) * (1000.0 / p) ** (4 * k), lo, np.inf)[0]

    expected = n * moment(1) ** 2 / moment(2)
    assert row["effective_size"] == pytest.approx(expected, rel=0.25)
    assert row["effective_size"] < min(1000, n / 10)
    assert "effective draws of 4000" in str(row["caution"])
    from perierr.report.targets_text import format_targets

    text = format_targets(res)
    assert "Rows resting on few draws" in text and "min(1000, n/10) = 400" in text
