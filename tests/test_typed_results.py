"""Typed results: prior, calibration and model-diagnostics records, quantile look-up, Monte Carlo outputs aligned
with the draws, planner metrics and ranked candidates, and the explicit randomness of the forward models.

Each record's ``to_dict()`` is checked against the JSON form written out here (the README's contract: the keys
and values the document has always had, in their order), and the numbers against independent computations:
the straight-line formulas (Matthews 1994, QJRAS 35, 1) with astropy's constants, the two-body hyperbola
(Murray & Dermott 1999, Sect. 2.5), numpy "hazen" quantiles (Hyndman & Fan 1996, definition 5, the definition
the README states), scipy's truncated normal, and the binomial proportion.
"""

import math
import warnings

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from scipy import stats

from perierr import ObservedStar, analyze, monte_carlo
from perierr.budget import LinearBudget
from perierr.errors import InputError, PerierrWarning
from perierr.models import ModelDiagnostics, Perihelion, StraightLine
from perierr.models.focusing import Focused
from perierr.plan import common_draws, decide_goal, rank_measurements, scenario_metrics, spread_goal
from perierr.plan.curves import gain_curves
from perierr.plan.metrics import Metric, MetricTable
from perierr.propagate import propagate_samples
from perierr.report.text import format_analysis
from perierr.sampling.gaussian import Samples
from perierr.summary import summarize
from tests.test_json_contract import lma  # the straight line written in that test, from its formulas

G = const.G.to_value(u.pc * (u.km / u.s) ** 2 / u.Msun)  # astropy (IAU 2015 nominal values)

BASE = {
    "name": "invented Tern-8", "ref_epoch": 2016.0,
    "ra": 123.4, "dec": 21.5, "parallax": 48.0, "pmra": 0.71, "pmdec": -1.2, "radial_velocity": -31.2,
    "ra_error": 0.02, "dec_error": 0.017, "parallax_error": 0.031, "pmra_error": 0.035, "pmdec_error": 0.029,
    "radial_velocity_error": 0.6, "parallax_pmra_corr": -0.21,
}


def star(**changes):
    return ObservedStar.from_mapping({**BASE, **changes})


def quiet(fn, *args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return fn(*args, **kwargs)


def hyperbola_pericentre(b, v, mass):
    """Two-body pericentre q = |a| (e - 1), |a| = mu / v^2, e = sqrt(1 + b^2 v^4 / mu^2) (Murray & Dermott 1999)."""
    mu = G * (1.0 + mass)
    return mu / v**2 * (np.sqrt(1.0 + b**2 * v**4 / mu**2) - 1.0)


# ------------------------------------------------------------------------------------------------ prior block
def old_prior_block(prior_name, parameters, samples):
    """The prior block as the JSON contract has always built it: name, parameters, the sampler's info, method."""
    block = {"name": prior_name, "parameters": parameters, **samples.info}
    block["method"] = samples.method
    return block


@pytest.mark.parametrize(
    ("changes", "method", "spec"),
    [
        ({"parallax": 2.0, "parallax_error": 0.5}, "reweight", "reweight"),
        ({"parallax": -0.5, "parallax_error": 0.9}, "auto", "mcmc"),  # a parallax <= 0 switches to MCMC
    ],
)
def test_prior_info_to_dict_is_the_old_block(changes, method, spec):
    # the straight line: the test is about the prior block (the orbit model is slow for these weak parallaxes)
    a = quiet(analyze, star(**changes), model="straight_line", n_samples=2000, seed=4,
              distance_prior="edsd:L=1350pc", prior_method=method)  # fmt: skip
    samples = a.monte_carlo.samples
    want = old_prior_block("edsd", {"L_pc": 1350.0}, samples)
    got = a.to_dict()["prior"]
    assert got == want and list(got) == list(want)  # every key and value, in the same order
    assert a.prior.method == spec and a.prior.name == "edsd" and a.prior.parameters == {"L_pc": 1350.0}
    if spec == "reweight":
        w = samples.weights
        # Kish 1965, Survey Sampling, Sect. 11.7: (sum w)^2 / sum w^2
        assert a.prior.effective_size == pytest.approx(w.sum() ** 2 / np.dot(w, w), rel=1e-12)
        assert a.prior.n_drawn == 2000 and a.prior.n_zero_weight == 2000 - samples.n
    else:
        assert a.prior.switched_to_mcmc == "nominal parallax <= 0"
        assert a.prior.n_requested == 2000 and a.prior.n_delivered == samples.n == a.monte_carlo.n
        assert a.prior.thin == math.ceil(max(a.prior.autocorrelation_time.values()))  # thin = ceil(tau)
    text = format_analysis(a)
    assert f"Distance prior: edsd (L_pc = 1350); posterior by {spec}" in text


# ------------------------------------------------------------------------------------------ calibration block
def test_calibration_info_to_dict_is_the_old_block():
    s = star()
    a = quiet(analyze, s, n_samples=1000, seed=3, parallax_offset=(-0.017, 0.005), error_inflation={"pmra": 1.1})
    want = {
        "parallax_zero_point": {
            "value_mas": -0.017, "error_mas": 0.005,
            "convention": "corrected parallax = catalogue parallax - zero point",
        },
        "error_inflation": {"ra": 1.0, "dec": 1.0, "parallax": 1.0, "pmra": 1.1, "pmdec": 1.0, "radial_velocity": 1.0},
        "catalogue_parallax_mas": BASE["parallax"],
        "catalogue_parallax_error_mas": float(s.sigma[2]),
    }
    got = a.to_dict()["calibration"]
    assert got == want and list(got) == list(want)
    assert got["catalogue_parallax_error_mas"] == pytest.approx(BASE["parallax_error"], rel=1e-12)
    cal = a.calibration
    assert cal.active and cal.inflated == {"pmra": 1.1}
    assert (cal.zero_point_mas, cal.zero_point_error_mas) == (-0.017, 0.005)
    assert "Calibration: parallax zero-point -0.017 ± 0.005 mas" in format_analysis(a)
    plain = quiet(analyze, s, n_samples=500, seed=3)
    assert not plain.calibration.active and "Calibration:" not in format_analysis(plain)


# --------------------------------------------------------------------------------------------- quantile look-up
def test_quantile_lookup_tolerance_and_message():
    x = np.random.default_rng(8).normal(size=3001)
    s = summarize(x, levels=(0.025, 2 / 3))
    # numpy hazen quantiles are the reference (the README's definition)
    assert s.quantile(2 / 3) == pytest.approx(np.quantile(x, 2 / 3, method="hazen"), rel=1e-12)
    assert s.quantile(0.025) == pytest.approx(np.quantile(x, 0.025, method="hazen"), rel=1e-12)
    # one tolerance, 1e-9 (summary.LEVEL_TOLERANCE): float noise in a level finds the stored level ...
    assert s.quantile(0.5 - 0.95 / 2) == s.quantiles[0.025]
    assert s.quantile(0.025 + 9e-10) == s.quantile(0.025 - 9e-10) == s.quantiles[0.025]
    assert s.quantile_error(2 / 3 + 5e-10) == s.quantile_se[round(2 / 3, 12)]
    # ... a level farther away does not, and the error names the level and the levels there are
    with pytest.raises(KeyError, match=r"quantile 0\.025000002 was not computed \(have 0\.025, 0\.5, 0\.666667\); "
                                       r"pass it in levels="):
        s.quantile(0.025 + 2e-9)
    with pytest.raises(KeyError, match="quantile 0.3 was not computed"):
        s.quantile_error(0.3)
    # the dict keeps working with the levels as stored
    assert s.quantiles[0.5] == s.median == s.quantile(0.5)


# ----------------------------------------------------------------------------------- aligned Monte Carlo outputs
def test_monte_carlo_outputs_are_aligned_with_the_draws():
    weak = star(parallax=2.0, parallax_error=0.9)
    thresholds = ("20 pc", "40 pc", "100 pc")
    mc = quiet(monte_carlo, weak, StraightLine(), n=20_000, seed=5, thresholds=thresholds)
    x = mc.samples.values
    kept = x[:, 2] > 0
    assert 100 < np.count_nonzero(~kept) < 1000  # P(parallax <= 0) = Phi(-2/0.9) = 1.3 % (scipy.stats.norm)
    ph = mc.perihelion
    for arr in (ph.time_myr, ph.distance_pc, ph.speed_kms):
        assert arr.shape == (mc.n,)
        np.testing.assert_array_equal(np.isnan(arr), ~kept)  # NaN exactly where parallax <= 0
    np.testing.assert_array_equal(mc.valid, kept)
    assert mc.n_valid == int(kept.sum()) and mc.n_nonpositive_parallax == int((~kept).sum())
    want = lma(x[kept])  # the straight line on the valid rows, written here
    np.testing.assert_allclose(ph.as_array()[kept], want, rtol=1e-12)
    for k, q in enumerate(("time_myr", "distance_pc", "speed_kms")):
        s, y = mc.summaries[q], want[:, k]
        assert s.n == y.size
        for lev in (0.05, 0.16, 0.5, 0.84, 0.95):
            assert s.quantile(lev) == pytest.approx(np.quantile(y, lev, method="hazen"), rel=1e-12)
        assert s.mean == pytest.approx(np.mean(y), rel=1e-12)
        assert s.std == pytest.approx(np.std(y, ddof=1), rel=1e-10)
    for t, label in zip(mc.thresholds, thresholds):
        # invalid draws never pass but stay in the denominator: P = count / n (binomial proportion)
        count = int(np.count_nonzero(want[:, 1] < u.Quantity(label).to_value(u.pc)))
        assert t.count == count and t.probability == count / mc.n
    y, w = mc.valid_values(ph.distance_pc)
    np.testing.assert_allclose(y, want[:, 1], rtol=1e-12)
    assert w is None
    assert mc.interval("distance_pc", 0.9) == pytest.approx(tuple(np.quantile(want[:, 1], [0.05, 0.95],
                                                                              method="hazen")), rel=1e-12)
    assert mc.to_dict()["n_nonpositive_parallax"] == int((~kept).sum())


def test_weighted_aligned_summaries_match_numpy_on_the_valid_rows():
    weak = star(parallax=2.0, parallax_error=0.9)
    rng = np.random.default_rng(12)
    x = rng.multivariate_normal(weak.mean, weak.cov, size=6000)
    w = rng.uniform(0.2, 3.0, size=x.shape[0])
    res = propagate_samples(Samples(x, weights=w, method="reweight"), StraightLine(), thresholds=("40 pc",))
    kept = x[:, 2] > 0
    assert (~kept).sum() > 20
    np.testing.assert_array_equal(np.isnan(res.perihelion.distance_pc), ~kept)
    d = lma(x[kept])[:, 1]
    s = res.summaries["distance_pc"]
    assert s.mean == pytest.approx(np.average(d, weights=w[kept]), rel=1e-12)  # weighted mean (definition)
    assert s.effective_size == pytest.approx(w[kept].sum() ** 2 / np.dot(w[kept], w[kept]), rel=1e-12)  # Kish
    passing = np.zeros(x.shape[0], bool)
    passing[kept] = d < 40.0
    assert res.thresholds[0].probability == pytest.approx(w[passing].sum() / w.sum(), rel=1e-12)
    vals, wk = res.valid_values(res.perihelion.distance_pc)
    np.testing.assert_allclose(vals, d, rtol=1e-12)
    np.testing.assert_array_equal(wk, w[kept])


def test_per_row_diagnostics_are_aligned_too():
    # focusing at the nominal mass (no mass error): the per-row change of d_ph is the two-body pericentre minus
    # the straight-line impact parameter, NaN where the draw was not evaluated
    weak = star(parallax=2.0, parallax_error=0.9, radial_velocity=-1.0, radial_velocity_error=0.3)
    model = Focused(StraightLine(), mass_msun=0.5)
    mc = quiet(monte_carlo, weak, model, n=4000, seed=2)
    kept = mc.valid
    assert (~kept).any()
    diag = mc.perihelion.diagnostics
    b, v = lma(mc.samples.values[kept])[:, 1:].T
    dd = diag.focusing_delta_distance_pc
    assert dd.shape == (mc.n,)
    np.testing.assert_array_equal(np.isnan(dd), ~kept)
    # compared to 1e-11 of the largest d_ph: the difference q - b cancels most of the digits
    np.testing.assert_allclose(dd[kept], hyperbola_pericentre(b, v, 0.5) - b, rtol=0, atol=1e-11 * b.max())
    assert diag.focusing.mass_msun == 0.5 and diag.focusing.mass_error_msun == 0.0
    assert mc.to_dict()["model_info"]["focusing"] == diag.focusing.to_dict()


# ------------------------------------------------------------------------------------------- model diagnostics
def test_model_diagnostics_round_trip_a_plain_mapping():
    # a model that writes its diagnostics as a mapping keeps every key and value, in order (JSON contract)
    info = {"model": "toy", "method": "toy", "fallback_samples": 3, "steps": 12, "none": None,
            "focusing": {"weird": 1}, "per_sample": np.arange(3.0)}
    ph = Perihelion(np.zeros(3), np.ones(3), np.ones(3), info=info)
    assert list(ph.info) == list(info)
    assert all(ph.info[k] is info[k] for k in info)
    assert ph.diagnostics.method == "toy" and ph.diagnostics.fallback_samples == 3
    assert ph.diagnostics.extra == {"steps": 12, "none": None, "focusing": {"weird": 1},
                                    "per_sample": info["per_sample"]}
    with pytest.raises(ValueError, match="not both"):
        Perihelion(np.zeros(3), np.ones(3), np.ones(3), info=info, diagnostics=ModelDiagnostics(model="toy"))


def test_orbit_map_diagnostics_keep_the_old_key_order():
    from perierr.models.orbit import OrbitModel

    s = star(parallax=100.0, parallax_error=0.2, radial_velocity=-20.0, radial_velocity_error=0.5)
    x = np.random.default_rng(1).multivariate_normal(s.mean, s.cov, size=300)
    ph = OrbitModel().evaluate(x)
    # the order the orbit model writes (the map path)
    head = ["model", "window_myr", "grid_nodes", "n_map_leaves", "n_checked", "map_error_au_max",
            "map_error_time_myr_max", "map_error_model", "map_error_coefficient_max", "integration_scheme",
            "integration_error_au", "map_span_myr", "multimodal_leaves", "fallback_samples"]
    tail = ["sparse_samples", "method", "n_outside_window", "n_not_converged", "straight_line",
            "model_difference_median"]
    keys = list(ph.info)
    assert keys[: len(head)] == head and keys[-len(tail):] == tail
    d = ph.diagnostics
    assert d.method.startswith("leaf_maps") and d.n_map_leaves >= 1
    # its straight-line block is the straight line of the same rows (Matthews 1994)
    np.testing.assert_allclose(d.straight_line["distance_pc"], lma(x)[:, 1], rtol=1e-9)


# ------------------------------------------------------------------------------------- randomness is explicit
def test_focusing_masses_come_from_the_runs_own_stream():
    # analyze(focusing=True) draws the masses with numpy.random.default_rng([seed, 1]) (nuisance_rng); written
    # here with scipy's truncated normal and the two-body hyperbola on the straight-line impact parameters
    slow = star(parallax=200.0, parallax_error=0.5, pmra=2.0, pmdec=0.5, radial_velocity=-1.0,
                radial_velocity_error=0.3, mass=0.5, mass_error=0.2)
    a = quiet(analyze, slow, model="straight_line", n_samples=3000, seed=17, focusing=True)
    x = a.monte_carlo.samples.values
    masses = stats.truncnorm.rvs(-0.5 / 0.2, np.inf, loc=0.5, scale=0.2, size=x.shape[0],
                                 random_state=np.random.default_rng([17, 1]))
    b, v = lma(x)[:, 1:].T
    np.testing.assert_allclose(a.monte_carlo.perihelion.distance_pc, hyperbola_pericentre(b, v, masses),
                               rtol=1e-6, atol=1e-15)
    again = quiet(analyze, slow, model="straight_line", n_samples=3000, seed=17, focusing=True)
    np.testing.assert_array_equal(again.monte_carlo.perihelion.distance_pc, a.monte_carlo.perihelion.distance_pc)
    # evaluate never draws: the nominal mass whatever the reference
    model = Focused(StraightLine(), mass_msun=0.5, mass_error_msun=0.2)
    np.testing.assert_allclose(model.evaluate(x[:5], reference=slow.mean).distance_pc,
                               hyperbola_pericentre(b[:5], v[:5], 0.5), rtol=1e-6, atol=1e-15)


# ------------------------------------------------------------------------------------------ planner records
def test_metric_records_and_their_json_keys():
    assert Metric("distance_pc", "width90").key == "distance_pc.width90"
    assert Metric.probability("1 pc").key == "p:1 pc"
    for key in ("time_myr.std", "speed_kms.median", "distance_pc.linear_sigma", "p:20000 au"):
        assert Metric.parse(key).key == key
    assert Metric.parse("distance_pc.width90") == Metric("distance_pc", "width90")
    assert spread_goal("sigma", "t_ph", 0.01).metric == Metric("time_myr", "std")
    goal = decide_goal("1 pc")
    assert goal.metric == Metric.probability("1 pc") and goal.metric_key == "p:1 pc"
    for bad in ("distance_pc.width80", "d_ph.width90", "p:", "width90"):
        with pytest.raises(InputError, match="metric"):
            Metric.parse(bad)
    table = MetricTable({Metric("distance_pc", "std"): 2.0})
    assert table["distance_pc.std"] == table[Metric("distance_pc", "std")] == 2.0
    assert "distance_pc.std" in table and "nonsense" not in table
    assert table.by_key() == {"distance_pc.std": 2.0}
    # the Mapping contract (Python docs, collections.abc.Mapping.get): a key it does not hold gives the default
    assert table.get("nonsense") is None and table.get("distance_pc.width90", 7.0) == 7.0
    with pytest.raises(KeyError):
        table["nonsense"]


def test_scenario_metrics_by_record_match_numpy():
    s = star()
    draws = common_draws(2000, seed=3)
    m = scenario_metrics(s, StraightLine(), s.cov[None], draws, thresholds=["20 pc"])
    d = lma(draws.samples(s.mean, s.cov))[:, 1]
    lo, hi = np.quantile(d, [0.05, 0.95], method="hazen")  # perierr's quantile definition
    assert m.metric(Metric("distance_pc", "width90"))[0] == pytest.approx(hi - lo, rel=1e-12)
    assert m.metric("distance_pc.width90")[0] == m.metric(Metric("distance_pc", "width90"))[0]
    assert m.metric(Metric.probability("20 pc"))[0] == np.mean(d < 20.0)


def test_gain_curves_json_keys_unchanged():
    s = star()
    c = gain_curves(s, StraightLine(), inputs=["radial_velocity"], n_points=3, n=500, seed=1)
    keys = [f"{q}.{k}" for q in ("time_myr", "distance_pc", "speed_kms") for k in ("width90", "std", "median")]
    keys += ["p:20000 au"] + [f"{q}.linear_sigma" for q in ("time_myr", "distance_pc", "speed_kms")]
    doc = c.to_dict()
    assert list(doc["current"]) == keys
    assert list(doc["inputs"]["radial_velocity"]) == ["precision", "unit", "today_sigma"] + keys
    assert doc["current"]["distance_pc.width90"] == c.current[Metric("distance_pc", "width90")]
    np.testing.assert_array_equal(c.gain("radial_velocity"), c.gain("radial_velocity", "distance_pc.width90"))


def test_ranked_candidates_to_dict_keeps_the_old_rows():
    stars = [star(), star(name="invented Tern-9", radial_velocity_error=3.0)]
    r = rank_measurements(stars, StraightLine(), {"radial_velocity": 0.2}, n=1000, seed=1)
    assert isinstance(r.rows, tuple) and r.metric == Metric("distance_pc", "width90")
    doc = r.to_dict()
    assert doc["metric"] == "distance_pc.width90"
    for row in doc["candidates"]:
        assert list(row) == ["star", "input", "precision", "unit", "current", "improved", "gain", "rank"]
        assert row["gain"] == 1.0 - row["improved"] / row["current"]
    # today's width for the second star, by numpy on the common draws (the ranking's definition)
    draws = common_draws(1000, seed=1)
    d = lma(draws.samples(stars[1].mean, stars[1].cov))[:, 1]
    width = np.diff(np.quantile(d, [0.05, 0.95], method="hazen"))[0]
    second = [c for c in r.rows if c.star == "invented Tern-9"][0]
    assert second.current == pytest.approx(width, rel=1e-12)
    assert [c.rank for c in r.rows] == [1, 2]


# --------------------------------------------------------------------------------------------------- budgets
def test_every_linear_budget_names_its_columns():
    shares = np.full((3, 6), 1 / 6)
    with pytest.raises(TypeError):
        LinearBudget(shares, shares, np.ones(3))
    with pytest.raises(ValueError, match=r"shape \(3, 6\) for 7 inputs"):
        LinearBudget(shares, shares, np.ones(3), tuple("abcdefg"))
