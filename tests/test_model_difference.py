"""The model-difference caution (perierr.cautions.model_difference): straight lines against Galactic orbits.

It fires when the straight line moves a median of t_ph, d_ph or v_ph by more than 0.25 of the half-width
(q84 - q16)/2, or a probability P(d_ph < D) by more than 0.05, at any |t_ph| (thresholds: common practice,
no source; their reasons are beside the constants in perierr/cautions.py).

Two invented stars carry the physics: one at 33 pc with t_ph ~ 3.3 Myr and d_ph ~ 0.25 pc, where the Galactic
tide moves the perihelion by about 2,000 au, and a fast nearby star (5 pc, t_ph ~ 0.1 Myr) where it moves it
by a few au. Every number a caution quotes is checked against values computed here independently of
perierr: straight-line perihelia from the linear-motion formulas (Matthews 1994, QJRAS 35, 1) with astropy's
constants, orbits from galpy's MWPotential2014 forces integrated with scipy (tests/orbit_reference.py), numpy
"hazen" quantiles (Hyndman & Fan 1996, definition 5, the definition the README states). The thresholds
themselves are checked with small test models (subclasses of the ForwardModel seam, not physics) that put
the difference just above and just below them.
"""

import re
import warnings

import astropy.units as u
import numpy as np
import pytest
from orbit_reference import perihelia
from straight_line_reference import InfiniteDistance, lma

from perierr import ObservedStar, analyze, read_star_file
from perierr.cautions import MODEL_MEDIAN_FRACTION, MODEL_PROBABILITY_CHANGE, reading_cautions
from perierr.demo import demo_path
from perierr.errors import PerierrWarning
from perierr.models import StraightLine
from perierr.models.base import ForwardModel, Perihelion
from perierr.propagate import linearize, monte_carlo
from perierr.report import format_analysis

K_KMS = (1.0 * u.au / u.yr).to_value(u.km / u.s)  # astropy: 1 au/yr in km/s
C_MYR = (1.0 * u.pc / (u.km / u.s)).to_value(u.Myr)  # astropy: Myr per pc/(km/s)
AU = (1.0 * u.pc).to_value(u.au)
N, SEED = 1000, 1


def hazen(x, p):
    return np.quantile(x, p, method="hazen")


def half_width(x):
    return 0.5 * (hazen(x, 0.84) - hazen(x, 0.16))


def tide_star():
    """Invented: 33 pc, a slow approach (t_ph ~ 3.3 Myr) to d_ph ~ 0.25 pc; the tide moves d_ph by ~2,000 au."""
    return ObservedStar.from_values(
        name="invented Tide-1", ra=120.0, dec=40.0, parallax=30.0, parallax_error=0.02, pmra=0.4, pmra_error=0.02,
        pmdec=-0.3, pmdec_error=0.02, radial_velocity=-10.0, radial_velocity_error=0.3,
    )  # fmt: skip


def fast_star():
    """Invented: 5 pc, 50 km/s towards the Sun (t_ph ~ 0.1 Myr); the tide moves d_ph by a few au only."""
    return ObservedStar.from_values(
        name="invented Swift-2", ra=201.37, dec=-27.62, parallax=200.0, parallax_error=0.1, pmra=3.0,
        pmra_error=0.3, pmdec=-2.0, pmdec_error=0.3, radial_velocity=-50.0, radial_velocity_error=1.0,
    )  # fmt: skip


def run(star, **kw):
    kw.setdefault("n_samples", N)
    kw.setdefault("seed", SEED)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return analyze(star, **kw)


def differences(a):
    """The model-difference cautions of an analysis."""
    return [c.message for c in a.cautions if c.code == "model-difference"]


NUM = r"([+-]?[\d.]+(?:e[+-]?\d+)?)"
AU_NUM = r"([+-]?[\d,]+)"


def au(text):
    return float(text.replace(",", ""))


# -------------------------------------------------------------------------------- the tide matters
@pytest.fixture(scope="module")
def tide():
    """(orbit analysis, straight-line analysis, independent orbit and straight-line perihelia of the draws)."""
    a = run(tide_star(), thresholds=("0.26 pc",))
    x = a.monte_carlo.samples.values
    orbit = perihelia(x, 2.5, 4.2)  # t_ph = 3.26 +- 0.1 Myr for every draw
    return a, run(tide_star(), model="straight_line", thresholds=("0.26 pc",)), orbit, lma(x)


def test_the_default_run_says_where_straight_lines_mislead(tide):
    a, _, orbit, straight = tide
    assert a.model["name"] == "orbit"  # the default model
    # the independent values: the tide moves the median d_ph by thousands of au, beyond the threshold
    d_orbit, d_straight = np.median(orbit[:, 1]), np.median(straight[:, 1])  # = the hazen median
    hw = half_width(orbit[:, 1])
    assert abs(d_straight - d_orbit) * AU > 1000
    ratio = abs(d_straight - d_orbit) / hw
    assert ratio > MODEL_MEDIAN_FRACTION
    for k in (0, 2):  # t_ph and v_ph move by less than the threshold: not quoted
        assert abs(np.median(orbit[:, k]) - np.median(straight[:, k])) / half_width(orbit[:, k]) < 0.2
    p_orbit, p_straight = np.mean(orbit[:, 1] < 0.26), np.mean(straight[:, 1] < 0.26)
    assert abs(p_orbit - p_straight) > MODEL_PROBABILITY_CHANGE

    (msg,) = differences(a)
    assert msg.startswith("straight lines would mislead for this star: on the same draws they give median d_ph")
    assert "t_ph" not in msg and "v_ph" not in msg
    pattern = (rf"median d_ph {NUM} pc \({AU_NUM} au\) instead of {NUM} pc \({AU_NUM} au\) "
               rf"\({NUM} pc = {AU_NUM} au, {NUM} × the half-width \(q84 − q16\)/2\)")  # fmt: skip
    s_pc, s_au, o_pc, o_au, diff_pc, diff_au, quoted_ratio = re.search(pattern, msg).groups()
    # four significant digits of pc, whole au (the orbit model's own error is far below an au here)
    assert float(s_pc) == pytest.approx(d_straight, rel=6e-4) and au(s_au) == pytest.approx(d_straight * AU, abs=1)
    assert float(o_pc) == pytest.approx(d_orbit, rel=6e-4) and au(o_au) == pytest.approx(d_orbit * AU, abs=1)
    assert au(diff_au) == pytest.approx((d_straight - d_orbit) * AU, abs=1.5)
    assert float(diff_pc) == pytest.approx(d_straight - d_orbit, rel=6e-4)
    assert float(quoted_ratio) == pytest.approx(ratio, abs=0.011)
    straight_p, orbit_p = re.search(rf"P\(d_ph < 0.26 pc\) = {NUM}% instead of {NUM}%", msg).groups()
    assert float(straight_p) == pytest.approx(100 * p_straight, abs=0.051)
    assert float(orbit_p) == pytest.approx(100 * p_orbit, abs=0.051 + 100 / N)  # one draw may sit at 0.26 pc
    assert msg.endswith("quote the orbit model's answer, not a straight-line one (screens included)")


def test_the_comparison_block_holds_the_straight_line_answer_on_the_same_draws(tide):
    a, _, orbit, straight = tide
    c = a.comparison
    for k, q in enumerate(("time_myr", "distance_pc", "speed_kms")):
        assert c[q]["median"] == pytest.approx(np.median(straight[:, k]), rel=1e-12)
        assert c[q]["half_width"] == pytest.approx(half_width(orbit[:, k]), rel=1e-4)
    (row,) = c["thresholds"]
    assert row["label"] == "0.26 pc" and row["probability"] == np.mean(straight[:, 1] < 0.26)
    assert row["difference"] == pytest.approx(row["model_probability"] - row["probability"], abs=1e-15)
    text = format_analysis(a)
    assert f"  {'P(< 0.26 pc)':<15} {row['probability']:.2%} on straight lines" in text
    assert a.to_dict()["straight_line_comparison"] == c


def test_a_straight_line_run_says_what_the_orbit_model_would_change(tide):
    _, s, _, _ = tide
    star = tide_star()
    nominal_straight = lma(star.mean)[0]
    nominal_orbit = perihelia(star.mean, 2.5, 4.2)[0]
    hw = half_width(lma(s.monte_carlo.samples.values)[:, 1])  # of the straight-line draws
    diff = nominal_orbit[1] - nominal_straight[1]
    assert abs(diff) / hw > MODEL_MEDIAN_FRACTION
    (msg,) = differences(s)
    assert msg.startswith("the Galactic tide matters for this star: the orbit model at the nominal inputs gives d_ph")
    pattern = (rf"d_ph {NUM} pc \({AU_NUM} au\) instead of {NUM} pc \({AU_NUM} au\) \({NUM} pc = {AU_NUM} au, "
               rf"{NUM} × the half-width \(q84 − q16\)/2 of these straight-line draws\)")  # fmt: skip
    o_pc, o_au, s_pc, s_au, d_pc, d_au, ratio = re.search(pattern, msg).groups()
    assert float(o_pc) == pytest.approx(nominal_orbit[1], rel=6e-4)
    assert au(o_au) == pytest.approx(nominal_orbit[1] * AU, abs=1)
    assert float(s_pc) == pytest.approx(nominal_straight[1], rel=6e-4)
    assert au(s_au) == pytest.approx(nominal_straight[1] * AU, abs=1)
    assert au(d_au) == pytest.approx(diff * AU, abs=1.5) and float(d_pc) == pytest.approx(diff, rel=6e-4)
    assert float(ratio) == pytest.approx(abs(diff) / hw, abs=0.011)
    assert msg.endswith("rerun with the orbit model (the default: drop --model straight_line)")
    block = s.to_dict()["orbit_nominal_comparison"]
    assert block["distance_pc"]["orbit"] == pytest.approx(nominal_orbit[1], abs=0.05 / AU)  # 0.05 au
    assert block["time_myr"]["orbit"] == pytest.approx(nominal_orbit[0], abs=1e-6)


def test_the_readme_demo_star_is_moved_by_the_tide_as_the_readme_says():
    # README, "Straight lines or Galactic orbits": the tide moves the demo star's d_ph from about 18,960 au to
    # about 20,660 au over its 0.65 Myr approach; the nominal values here are independent of perierr
    star = read_star_file(demo_path("kestrel-4.toml"))
    t, d, _ = perihelia(star.mean, 0.3, 1.0)[0]
    assert d * AU == pytest.approx(20_652, abs=1) and t == pytest.approx(0.6526, abs=1e-4)
    assert lma(star.mean)[0, 1] * AU == pytest.approx(18_956, abs=1)


# ---------------------------------------------------------------------------- the tide does not matter
def test_silent_for_a_fast_nearby_star():
    star = fast_star()
    a = run(star)
    x = a.monte_carlo.samples.values
    orbit, straight = perihelia(x, 0.07, 0.13), lma(x)
    for k in range(3):  # independent: every median moves by less than half the threshold (d_ph: 5 au, 0.05)
        off = abs(np.median(orbit[:, k]) - np.median(straight[:, k])) / half_width(orbit[:, k])
        assert off < 0.5 * MODEL_MEDIAN_FRACTION, k
    assert differences(a) == []
    s = run(star, model="straight_line")
    nominal = abs(perihelia(star.mean, 0.07, 0.13)[0, 1] - lma(star.mean)[0, 1])
    assert nominal / half_width(lma(s.monte_carlo.samples.values)[:, 1]) < 0.5 * MODEL_MEDIAN_FRACTION
    assert differences(s) == [] and s.orbit_comparison  # computed, and silent


# -------------------------------------------------------------------------- the thresholds themselves
class Shifted(ForwardModel):
    """Test model: the straight line with d_ph moved by a constant ``shift`` [pc] (and a name of its own)."""

    name = "shifted_test"

    def __init__(self, shift):
        self.shift = shift

    def evaluate(self, observables, *, reference=None):
        out = lma(observables)
        return Perihelion(out[:, 0], out[:, 1] + self.shift, out[:, 2], info={"model": self.name})

    def jacobian(self, point):
        return StraightLine().jacobian(point)


@pytest.mark.parametrize("fraction, fires", [(0.26, True), (0.24, False)])
def test_median_threshold(fraction, fires):
    # a constant shift of d_ph by `fraction` half-widths: it moves the median by exactly that, not the width;
    # a threshold at 1000 pc keeps the probability rule out of it
    star = fast_star()
    x = run(star, model="straight_line").monte_carlo.samples.values
    shift = fraction * half_width(lma(x)[:, 1])
    a = run(star, model=Shifted(shift), thresholds=("1000 pc",))
    found = differences(a)
    assert bool(found) == fires
    if fires:
        d = np.median(lma(x)[:, 1])
        assert f"median d_ph {d:.4g} pc ({d * AU:,.0f} au) instead of {d + shift:.4g} pc" in found[0]
        assert f"{fraction:.2f} × the half-width (q84 − q16)/2)" in found[0]
        assert "quote the shifted_test model's answer" in found[0]


@pytest.mark.parametrize("fraction, fires", [(0.06, True), (0.04, False)])
def test_probability_threshold(fraction, fires):
    # a fraction of the draws never comes close: P(d_ph < 1 pc) drops by exactly that fraction (every straight
    # line passes within 1 pc), while the median moves to the straight line's 0.5 / (1 - fraction) quantile,
    # below the median threshold
    star = fast_star()
    a = run(star, model=InfiniteDistance(fraction), thresholds=("1 pc",))
    d = lma(a.monte_carlo.samples.values)[:, 1]
    assert np.all(d < 1.0)
    moved = abs(hazen(d, 0.5 / (1 - fraction)) - hazen(d, 0.5)) / half_width(d)
    assert moved < MODEL_MEDIAN_FRACTION
    found = differences(a)
    assert bool(found) == fires
    if fires:
        assert found[0].endswith(
            f"P(d_ph < 1 pc) = 100.0% instead of {100 * (1 - fraction):.1f}%. The Galactic tide matters here: "
            "quote the infinite_distance_test model's answer, not a straight-line one (screens included)"
        )
        assert "median d_ph" not in found[0]


@pytest.mark.parametrize("star, fires", [(tide_star, True), (fast_star, False)])
def test_without_the_orbit_at_hand_long_straight_lines_are_told_to_use_it(star, fires):
    # the checks given only a straight-line Monte Carlo (no comparison): |t_ph| above 1 Myr is enough to say so
    s = star()
    mc = monte_carlo(s, StraightLine(), n=N, seed=SEED)
    found = [c for c in reading_cautions(s, linearize(s, StraightLine()), mc, False) if c.code == "model-difference"]
    t = abs(np.median(lma(mc.samples.values)[:, 0]))
    assert bool(found) == fires == (t > 1.0)
    if fires:
        assert found[0].message.startswith(f"|t_ph| is about {t:.2g} Myr and straight lines ignore the Galactic tide")


# ------------------------------------------------------------------------------------------- the planner
def test_the_planner_gives_the_same_caution_on_its_draws():
    from perierr.plan import common_draws, plan

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        p = plan(tide_star(), n=N, seed=SEED, curves=False, budget=False, thresholds=("0.26 pc",))
    assert p.model["name"] == "orbit"  # the planner's default model
    (msg,) = [c.message for c in p.cautions if c.code == "model-difference"]
    x = common_draws(N, SEED).samples(tide_star().mean, tide_star().cov)
    d_straight = np.median(lma(x)[:, 1])
    assert f"median d_ph {d_straight:.4g} pc ({d_straight * AU:,.0f} au) instead of" in msg
    assert p.to_dict()["straight_line_comparison"]["distance_pc"]["median"] == pytest.approx(d_straight, rel=1e-12)
