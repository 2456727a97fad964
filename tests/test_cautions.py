"""Every caution perierr promises, asserted on a constructed case where it must appear and one where it must not.

The cautions are the reading warnings of ``perierr.analysis`` (listed in the README under "Read with care"),
the unit-slip warnings and held-exact notes of ``perierr.star``, and the prior and calibration warnings of
``perierr.priors``. Where a caution has a threshold, one case sits just above it and one just below, and
which side a case is on is decided by a value computed here, independently of perierr (straight-line
formulas written out below with astropy's constants, scipy.stats, numpy quantiles). A threshold moved by a
factor of 2 (or 100) therefore fails a test. Where a caution prints numbers, the printed numbers are
compared with the independent values.

All stars are invented. Some cases use small test models (subclasses of the documented ``ForwardModel``
seam, not physics) to put a Monte Carlo statistic exactly where a threshold test needs it. Unless a test says
otherwise the runs use the straight-line model, whose formulas are written out below as the independent
reference (and which is fast for the weak-parallax cases). The model-difference caution (straight line
against the Galactic orbit) has its own file, ``test_model_difference.py``.
"""

import math
import warnings

import astropy.units as u
import numpy as np
import pytest
from scipy import integrate, optimize, stats
from straight_line_reference import InfiniteDistance, lma

from perierr import ObservedStar, analyze
from perierr.errors import PerierrWarning
from perierr.models import StraightLine, make_model
from perierr.models.base import ForwardModel, Perihelion
from perierr.priors import UniformDensity, posterior_samples
from perierr.report import format_analysis

# astropy: km/s of 1 au/yr (proper motion 1 mas/yr at 1 mas of parallax), and Myr per pc/(km/s)
K_KMS = (1.0 * u.au / u.yr).to_value(u.km / u.s)
C_MYR = (1.0 * u.pc / (u.km / u.s)).to_value(u.Myr)
DEFAULT_LEVELS = (0.05, 0.16, 0.5, 0.84, 0.95)


# ---------------------------------------------------------------------------------------------- helpers
def linear_sigma(star):
    """First-order sigma of (t, d, v): central finite differences of :func:`lma`, then J Sigma J^T."""
    mean, sig = np.array(star.mean), np.sqrt(np.diag(star.cov))
    jac = np.zeros((3, 6))
    for k in range(6):
        if sig[k] == 0:
            continue
        h = 1e-4 * sig[k]
        up, down = mean.copy(), mean.copy()
        up[k] += h
        down[k] -= h
        jac[:, k] = (lma(up)[0] - lma(down)[0]) / (2 * h)
    return np.sqrt(np.diag(jac @ star.cov @ jac.T))


def invented(**over):
    """A well-measured invented star on a close pass (t_ph ~ 0.65 Myr, d_ph ~ 0.09 pc)."""
    fields = dict(
        name="invented Tern-7", ra=201.37, dec=-27.62, parallax=48.0, parallax_error=0.03,
        pmra=0.71, pmra_error=0.035, pmdec=-1.2, pmdec_error=0.03,
        radial_velocity=-31.2, radial_velocity_error=0.6, ra_error=0.02, dec_error=0.02,
    )
    fields.update(over)
    return ObservedStar.from_values(**fields)


def run(star, **kw):
    # the straight line: its formulas (lma, below) are this file's reference; the default orbit model would
    # also be slow for the weak-parallax stars here
    kw.setdefault("model", "straight_line")
    kw.setdefault("n_samples", 20_000)
    kw.setdefault("seed", 1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return analyze(star, **kw)


def hits(messages, phrase):
    return [m for m in messages if phrase in m]


def one(messages, phrase):
    found = hits(messages, phrase)
    assert len(found) == 1, (phrase, messages)
    return found[0]


def hazen(x, p):
    # Hyndman & Fan 1996 definition 5 (numpy method="hazen"): the quantile definition the README states
    return np.quantile(x, p, method="hazen")


class Rescaled(ForwardModel):
    """Test model: the straight line with every draw's deviation from the nominal multiplied by ``factor``.

    Its Jacobian is the straight line's, so Monte Carlo std / linear sigma = factor (up to MC noise).
    """

    name = "rescaled_straight_line_test"

    def __init__(self, factor):
        self.factor = factor

    def evaluate(self, observables, *, reference=None):
        out = lma(observables)
        if reference is not None:
            nominal = lma(reference)[0]
            out = nominal + self.factor * (out - nominal)
        return Perihelion(out[:, 0], out[:, 1], out[:, 2], info={"model": self.name})

    def jacobian(self, point):
        return StraightLine().jacobian(point)


class ShapedDistance(ForwardModel):
    """Test model: straight-line t and v; d = d0 + scale * shape(z), z the standardized radial velocity draw."""

    name = "shaped_distance_test"

    def __init__(self, star, shape, scale=0.003):
        self.rv0, self.srv = float(star.mean[5]), float(np.sqrt(star.cov[5, 5]))
        self.d0 = float(lma(star.mean)[0, 1])
        self.shape, self.scale = shape, scale

    def distance(self, values):
        z = (np.atleast_2d(values)[:, 5] - self.rv0) / self.srv
        return self.d0 + self.scale * self.shape(z)

    def evaluate(self, observables, *, reference=None):
        out = lma(observables)
        return Perihelion(out[:, 0], self.distance(observables), out[:, 2], info={"model": self.name})


class WithInfo(ForwardModel):
    """Test model: the straight line, with model diagnostics (direct-integration counts) set by the test."""

    name = "diagnostics_test"

    def __init__(self, **info):
        self.extra = info

    def evaluate(self, observables, *, reference=None):
        out = lma(observables)
        info = {"model": self.name, **(self.extra if reference is not None else {})}
        return Perihelion(out[:, 0], out[:, 1], out[:, 2], info=info)


# ------------------------------------------------------------------------------------------ clean star
def clean_star():
    """An invented fast nearby star (5 pc, t_ph ~ 0.1 Myr): nothing to caution, the Galactic tide included."""
    return invented(parallax=200.0, parallax_error=0.1, pmra=3.0, pmra_error=0.3, pmdec=-2.0, pmdec_error=0.3,
                    radial_velocity=-50.0, radial_velocity_error=1.0)  # fmt: skip


@pytest.mark.parametrize("model", ["straight_line", "orbit"])
def test_clean_star_has_no_caution_and_no_note(model):
    a = run(clean_star(), model=model)
    assert a.warnings == [] and a.star.notes == ()
    doc = a.to_dict()
    assert doc["warnings"] == [] and doc["notes"] == []
    assert "Read with care" not in format_analysis(a)


# ----------------------------------------------------------------------- fractional parallax error > 20 %
@pytest.mark.parametrize("error, fires", [(2.1, True), (1.9, False)])
def test_fractional_parallax_error_above_20_percent(error, fires):
    # Threshold 20 %: Bailer-Jones 2015 (PASP 127, 994), Sect. 4. Cases at 21 % and 19 %.
    star = invented(parallax=10.0, parallax_error=error)
    a = run(star, n_samples=2000)
    found = hits(a.warnings, "the fractional parallax error is")
    assert bool(found) == fires == (error / 10.0 > 0.2)
    if fires:
        assert f"the fractional parallax error is {error / 10.0:.0%} (> 20%)" in found[0]
        assert "1/parallax is a biased distance" in found[0] and "--distance-prior" in found[0]
        assert "Read with care" in format_analysis(a) and found[0] in format_analysis(a)
        # under a distance prior the intervals no longer invert the parallax: the caution is not given
        p = run(star, n_samples=2000, distance_prior="edsd:L=1kpc")
        assert not hits(p.warnings, "the fractional parallax error is")


# ---------------------------------------------------------------------------------------- skewed d_ph
def lognormal_shape(s):
    return lambda z: (np.exp(s * z) - 1.0) / s


def split_shape(upper):
    return lambda z: np.where(z < 0, z, upper * z)


# (shape, why): skewness of a lognormal is (e^s2 + 2) sqrt(e^s2 - 1) (textbook): 1.09 at s = 0.34, 0.88 at
# s = 0.28, with a quantile ratio e^s inside (0.67, 1.5); a split normal has the ratio of its two scales
# and |skewness| < 0.6 for the ratios used (computed here, not assumed).
SKEW_CASES = [
    ("skewness 1.09", lognormal_shape(0.34), True),
    ("skewness 0.88", lognormal_shape(0.28), False),
    ("skewness -1.09", lambda z: -lognormal_shape(0.34)(z), True),
    ("skewness -0.88", lambda z: -lognormal_shape(0.28)(z), False),
    ("ratio 1.6", split_shape(1.6), True),
    ("ratio 1.4", split_shape(1.4), False),
    ("ratio 0.62", split_shape(0.62), True),
    ("ratio 0.72", split_shape(0.72), False),
]


@pytest.mark.parametrize("label, shape, fires", SKEW_CASES, ids=[c[0] for c in SKEW_CASES])
def test_skewed_distance_distribution(label, shape, fires):
    # The caution fires when |skewness| > 1 or the upper/lower half-width ratio (q84 - q50)/(q50 - q16)
    # leaves (0.67, 1.5) (common practice, no source). Skewness: scipy.stats.skew (moment estimator
    # m3 / m2^1.5); quantiles: numpy "hazen". Each case moves one statistic across its bound and keeps the
    # other well inside, so a bound moved by a factor of 2 changes the outcome of one case.
    star = invented()
    model = ShapedDistance(star, shape)
    a = run(star, model=model)
    d = model.distance(a.monte_carlo.samples.values)  # recomputed from the draws, not read from perierr
    skew = stats.skew(d)
    q16, q50, q84 = hazen(d, [0.16, 0.5, 0.84])
    ratio = (q84 - q50) / (q50 - q16)
    if label.startswith("skewness"):
        assert 0.67 + 0.02 < ratio < 1.5 - 0.05, ratio  # only the skewness decides
        assert abs(abs(skew) - 1.0) > 0.05, skew
    else:
        assert abs(skew) < 0.8, skew  # only the ratio decides
        assert min(abs(ratio - 0.67), abs(ratio - 1.5)) > 0.03, ratio
    assert (abs(skew) > 1.0 or not 0.67 < ratio < 1.5) == fires
    found = hits(a.warnings, "the Monte Carlo distribution of d_ph is skewed")
    assert bool(found) == fires
    if fires:
        assert f"(skewness {skew:.2f}, upper/lower half-width ratio {ratio:.2f})" in found[0], found[0]
        assert "quote the quantiles, not +/- sigma" in found[0]


def test_skewed_distance_on_a_weak_parallax_star():
    # d_ph ~ r^2 ~ parallax^-2 for a star moving nearly radially: skewness about 9 sigma_plx / plx to first
    # order (delta method, common practice, no source) = 2.7 at 30 %
    a = run(invented(parallax=10.0, parallax_error=3.0), n_samples=5000)
    assert hits(a.warnings, "the Monte Carlo distribution of d_ph is skewed")
    assert not hits(run(invented()).warnings, "is skewed")


# -------------------------------------------------------------------------- d_ph comparable to its sigma
@pytest.mark.parametrize("pmra, fires", [(0.19, True), (0.21, False)])
def test_distance_comparable_to_its_linear_sigma(pmra, fires):
    # d_ph ~ |mu| when v_t << |v_r| and the proper motion is the only poorly known input, so
    # d_ph / sigma_d ~ mu / sigma_mu = 1.9 or 2.1 around the threshold 2 (common practice, no source).
    star = invented(pmra=pmra, pmra_error=0.1, pmdec=0.0, pmdec_error=0.001, radial_velocity_error=0.01)
    a = run(star, n_samples=2000)
    d_nom, d_sig = lma(star.mean)[0, 1], linear_sigma(star)[1]
    assert abs(d_nom / d_sig - 10 * pmra) < 0.02  # the intended side of 2
    found = hits(a.warnings, "is comparable to its linear sigma")
    assert bool(found) == fires == (d_nom < 2 * d_sig)
    if fires:
        assert f"d_ph ({d_nom:.3g} pc) is comparable to its linear sigma ({d_sig:.3g} pc)" in found[0], found[0]
        assert "the star heads almost straight at the Sun" in found[0]
        assert "use the Monte Carlo quantiles" in found[0]


def test_distance_comparable_to_sigma_says_when_the_distance_is_the_cause():
    # fractional parallax error 30 % (> 20 %): sigma_d / d ~ 2 x 0.3 since d ~ r^2 (delta method)
    star = invented(parallax=10.0, parallax_error=3.0)
    a = run(star, n_samples=2000)
    d_nom, d_sig = lma(star.mean)[0, 1], linear_sigma(star)[1]
    assert d_nom < 2 * d_sig
    msg = one(a.warnings, "is comparable to its linear sigma")
    assert f"d_ph ({d_nom:.3g} pc) is comparable to its linear sigma ({d_sig:.3g} pc)" in msg
    assert "the distance is poorly known" in msg


# --------------------------------------------------------------------- Monte Carlo sigma vs linear sigma
@pytest.mark.parametrize("factor, fires", [(1.3, True), (1.2, False), (0.85, False), (0.75, True), (1.0, False)])
def test_monte_carlo_sigma_differs_from_linear_sigma(factor, fires):
    # Threshold: MC std / linear sigma outside (0.8, 1.25) (common practice, no source). The test model
    # stretches every draw's deviation by `factor`, so the ratio is factor x (MC std / linear sigma of the
    # straight line) = factor x (1 +- 0.5 %) for this nearly linear star at N = 20,000.
    star = invented()
    a = run(star, model=Rescaled(factor))
    out = Rescaled(factor).evaluate(a.monte_carlo.samples.values, reference=star.mean).as_array()
    s_mc = out.std(axis=0, ddof=1)
    s_lin = linear_sigma(star)
    for k, q in enumerate(("time_myr", "distance_pc", "speed_kms")):
        ratio = s_mc[k] / s_lin[k]
        assert (not 0.8 < ratio < 1.25) == fires
        assert min(abs(ratio - 0.8), abs(ratio - 1.25)) > 0.02, (q, ratio)
        found = hits(a.warnings, f"{q}: Monte Carlo std")
        assert bool(found) == fires
        if fires:
            want = f"{q}: Monte Carlo std {s_mc[k]:.3g} differs from the linear sigma {s_lin[k]:.3g} by more than 20 %"
            assert want in found[0], found[0]
            assert "not linear over the error ellipsoid" in found[0]


def test_monte_carlo_sigma_differs_on_a_weak_parallax_star():
    a = run(invented(parallax=10.0, parallax_error=3.0), n_samples=5000)
    assert hits(a.warnings, "distance_pc: Monte Carlo std")
    assert not hits(run(invented()).warnings, "Monte Carlo std")


# ----------------------------------------------------------------------------------- large MC errors
def worst_relative_error(outputs):
    """Largest quantile MC error / ((q84 - q16)/2) over outputs and the default levels.

    MC error of the q quantile: half the distance between the quantiles at q -+ sqrt(q (1 - q) / n), the
    distribution-free binomial interval (Conover 1999, Practical Nonparametric Statistics, Sect. 3.2).
    """
    n = outputs.shape[0]
    worst = 0.0
    for x in outputs.T:
        half = 0.5 * (hazen(x, 0.84) - hazen(x, 0.16))
        for q in DEFAULT_LEVELS:
            s = math.sqrt(q * (1 - q) / n)
            lo, hi = hazen(x, [max(q - s, 0.0), min(q + s, 1.0)])
            worst = max(worst, 0.5 * (hi - lo) / half)
    return worst


@pytest.mark.parametrize("n, fires", [(1000, True), (6000, False)])
def test_large_monte_carlo_errors(n, fires):
    # threshold 5 % of (q84 - q16)/2 (common practice, no source); for a Gaussian output the q05 error is
    # about 2.1 / sqrt(n) of it (asymptotic quantile error, Stuart & Ord eq. 10.29): 6.7 % at n = 1000,
    # 2.7 % at n = 6000. The error estimate is itself noisy (about 20 %), so the test checks where the
    # seeded case landed: between 5 and 10 % when it fires, between 2.5 and 5 % when not, so a threshold
    # twice or half as large changes the outcome.
    a = run(invented(), n_samples=n)
    worst = worst_relative_error(lma(a.monte_carlo.samples.values))
    assert 0.05 < worst < 0.1 if fires else 0.025 < worst < 0.05
    found = hits(a.warnings, "Monte Carlo errors are large")
    assert bool(found) == fires == (worst > 0.05)
    if fires:
        assert f"a quantile's MC error reaches {worst:.0%} of (q84 - q16)/2" in found[0], found[0]
        assert "draw more samples" in found[0]


# ------------------------------------------------------------------------- many direct orbit integrations
@pytest.mark.parametrize(
    "info, fires",
    [({"fallback_samples": 101}, True), ({"fallback_samples": 100}, False),
     ({"fallback_samples": 60, "sparse_samples": 41}, True), ({"fallback_samples": 30}, False)],
)  # fmt: skip
def test_many_direct_integrations_threshold(info, fires):
    # threshold: more than 10 % of the draws (common practice, no source); draws of sparse parts of the cloud
    # count too
    a = run(invented(), model=WithInfo(**info), n_samples=1000)
    n_direct = info["fallback_samples"] + info.get("sparse_samples", 0)
    found = hits(a.warnings, "needed direct orbit integration")
    assert bool(found) == fires == (n_direct > 0.1 * 1000)
    if fires:
        assert found[0].startswith(f"{n_direct:,} draws ({n_direct / 1000:.0%}) needed direct orbit integration")
        assert found[0].endswith("this only cost time, those answers come from direct integration")


def test_many_direct_integrations_in_the_orbit_model():
    # a map tolerance of 1e-12 au sends almost every draw to direct integration; the default keeps them on the
    # map (600 draws: enough for a leaf map of their own)
    star = invented()
    a = run(star, model=make_model("orbit", map_tolerance_au=1e-12), n_samples=600)
    info = a.monte_carlo.perihelion.info
    n_direct = info["fallback_samples"] + info["sparse_samples"]
    assert n_direct > 60
    msg = one(a.warnings, "needed direct orbit integration")
    assert msg.startswith(f"{n_direct:,} draws ({n_direct / 600:.0%})")
    clean = run(star, model=make_model("orbit"), n_samples=600)
    assert clean.monte_carlo.perihelion.info["fallback_samples"] <= 60
    assert not hits(clean.warnings, "direct orbit integration")


# ---------------------------------------------------------------------------------- draws with parallax <= 0
def test_draws_with_nonpositive_parallax_are_reported():
    star = invented(parallax=2.0, parallax_error=1.5)
    a = run(star)
    n_bad = int(np.count_nonzero(a.monte_carlo.samples.values[:, 2] <= 0))
    # P(parallax <= 0) = Phi(-2 / 1.5) (scipy.stats.norm); 4.5 binomial standard errors
    p = stats.norm.cdf(-2.0 / 1.5)
    assert abs(n_bad / 20_000 - p) < 4.5 * math.sqrt(p * (1 - p) / 20_000)
    msg = one(a.warnings, "have parallax <= 0")
    assert msg.startswith(f"{n_bad} of 20000 samples ({n_bad / 20_000:.2%}) have parallax <= 0")
    assert "count as not passing within any threshold" in msg


@pytest.mark.parametrize("seed, n_bad", [(0, 1), (5, 0)])
def test_a_single_nonpositive_parallax_draw_is_reported(seed, n_bad):
    # parallax 3.85 sigma from zero: about one draw in 20,000 (seeds chosen for exactly one and for none)
    star = invented(parallax=1.0, parallax_error=0.26, pmra=0.3, pmra_error=0.01, pmdec=0.2, pmdec_error=0.01)
    a = run(star, seed=seed)
    assert int(np.count_nonzero(a.monte_carlo.samples.values[:, 2] <= 0)) == n_bad
    found = hits(a.warnings, "have parallax <= 0")
    assert bool(found) == bool(n_bad)
    if n_bad:
        assert found[0].startswith("1 of 20000 samples (0.01%) have parallax <= 0")


# ----------------------------------------------------------------------------------------- head-on path
def head_on_star(ratio):
    """Invented star whose nominal straight-line d_ph is ``ratio`` times its distance (d/r = v_t / v)."""
    r = 1000.0 / 48.0
    mu = ratio * 31.2 * 1000.0 / (K_KMS * r)  # v_t = ratio x |v_r| for v_t << |v_r|
    return invented(pmra=mu, pmdec=0.0)


@pytest.mark.parametrize("ratio, fires", [(0.0, True), (0.7e-9, True), (1.5e-9, False)])
def test_head_on_nominal_path(ratio, fires):
    # the caution's bound is d_ph <= 1e-9 x distance (rounding level of a head-on path; common practice)
    star = head_on_star(ratio)
    assert lma(star.mean)[0, 1] / (1000.0 / 48.0) == pytest.approx(ratio, rel=1e-6, abs=1e-30)
    a = run(star, n_samples=2000)
    found = hits(a.warnings, "the nominal path passes through the Sun")
    assert bool(found) == fires
    if fires:
        assert "(d_ph = 0)" in found[0] and "use the Monte Carlo quantiles" in found[0]
    assert not hits(run(invented()).warnings, "passes through the Sun")


def test_head_on_caution_numbers_exactly_head_on():
    # exactly head-on (proper motion 0): d_ph = 0 and its linear sigma and budget are shown as zero
    a = run(head_on_star(0.0), n_samples=2000)
    assert a.linear.value[1] == 0.0 and a.linear.sigma[1] == 0.0
    assert np.all(a.budget.shapley[1] == 0.0)


def test_head_on_caution_claims_zero_sigma_and_it_is_zero():
    a = run(head_on_star(0.7e-9), n_samples=2000)
    assert hits(a.warnings, "shown as zero")
    assert a.linear.sigma[1] == 0.0


# ---------------------------------------------------------------------------------------- flagged draws
def test_flagged_draws_are_reported():
    # an orbit-model window of +-0.1 Myr around now cannot hold a perihelion 0.65 Myr ahead: every draw flagged
    star = invented()
    a = run(star, model=make_model("orbit", horizon_myr=(-0.1, 0.1)), n_samples=100)
    n_flag = int(np.count_nonzero(a.monte_carlo.perihelion.flags))
    assert n_flag == 100 == a.monte_carlo.perihelion.diagnostics.n_outside_window
    assert one(a.warnings, "flagged by the model") == (
        "100 samples were flagged by the model: 100 with their perihelion beyond the edge of the search window, "
        "extrapolated along a straight line from there (pass a longer horizon: --horizon, or horizon_myr)"
    )
    clean = run(star, model=make_model("orbit"), n_samples=100)
    assert not np.any(clean.monte_carlo.perihelion.flags)
    assert not hits(clean.warnings, "flagged")


# --------------------------------------------------------------------------------- median not finite
@pytest.mark.parametrize("fraction, fires", [(0.6, True), (0.4, False)])
def test_median_distance_not_finite(fraction, fires):
    # a model may return an unbounded distance (inf) for some draws; the caution fires when the median is one.
    # The summaries' moments then meet inf - inf (see the xfail test below), hence the errstate.
    with np.errstate(invalid="ignore"):
        a = run(invented(), model=InfiniteDistance(fraction), n_samples=1000)
    assert bool(hits(a.warnings, "the median perihelion distance is not finite")) == fires
    assert math.isfinite(a.monte_carlo.summaries["distance_pc"].median) != fires


def test_infinite_distances_give_no_runtime_warning():
    a = run(invented(), model=InfiniteDistance(0.6), n_samples=1000)
    d = a.monte_carlo.summaries["distance_pc"]
    assert not math.isnan(d.std)
    # the moments are labelled, not silently NaN: the note counts the infinite draws
    n_inf = int(np.count_nonzero(~np.isfinite(a.monte_carlo.perihelion.distance_pc)))
    assert d.note.startswith(f"{n_inf:,} of 1,000 draws are infinite") and d.to_dict()["note"] == d.note


# ------------------------------------------------------------------------------------ held exact inputs
def test_inputs_held_exact_are_noted_and_held():
    with warnings.catch_warnings():
        warnings.simplefilter("error", PerierrWarning)  # a note, not a warning
        star = ObservedStar.from_values(
            name="invented Tern-8", ra=201.37, dec=-27.62, parallax=48.0, parallax_error=0.03, pmra=0.71,
            pmra_error=0.035, pmdec=-1.2, pmdec_error=0.03, radial_velocity=-31.2, radial_velocity_error=0.0,
        )
    assert star.notes == (
        "ra_error not given: held exact",
        "dec_error not given: held exact",
        "radial_velocity_error = 0: radial_velocity held exact",
    )
    a = run(star, n_samples=2000)
    assert a.to_dict()["notes"] == list(star.notes)
    assert a.to_dict()["inputs"]["held_exact"] == ["ra", "dec", "radial_velocity"]
    text = format_analysis(a)
    assert "Read with care" in text and all(n in text for n in star.notes)
    # held exact means exactly that: every draw has the catalogue value, and the input has no budget share
    draws = a.monte_carlo.samples.values
    assert np.all(draws[:, [0, 1, 5]] == star.mean[[0, 1, 5]])
    assert all(a.budget.share("distance_pc")[n] == 0.0 for n in ("ra", "dec", "radial_velocity"))
    assert invented().notes == ()


# ------------------------------------------------------------------------------------------ unit slips
def fields(**over):
    f = dict(ra=20.0, dec=10.0, ra_error=0.02, dec_error=0.03, parallax=25.0, parallax_error=0.05, pmra=40.0,
             pmra_error=0.05, pmdec=-30.0, pmdec_error=0.05, radial_velocity=-20.0, radial_velocity_error=0.5)
    f.update(over)
    return f


def slip_messages(**over):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        star = ObservedStar.from_mapping(fields(**over))
    messages = [str(w.message) for w in caught if issubclass(w.category, PerierrWarning)]
    assert list(star.notes) == messages  # every warning is also a note the report shows
    return messages


@pytest.mark.parametrize(
    "plx, err, fires",
    [(0.05, 0.0009, True), (0.05, 0.0011, False), (0.99, 0.0005, True), (1.01, 0.0005, False)],
)
def test_parallax_in_arcsec_slip(plx, err, fires):
    # a parallax < 1 with an error < 1e-3 looks like arcsec (1 mas = 1e-3 arcsec; common practice, no source)
    found = hits(slip_messages(parallax=plx, parallax_error=err), "looks like arcsec")
    assert bool(found) == fires
    if fires:
        assert found[0] == (f"parallax = {plx} with parallax_error = {err} looks like arcsec; "
                            "perierr reads bare numbers in mas (pass a Quantity to be explicit)")


@pytest.mark.parametrize("name", ["parallax", "pmra", "pmdec", "radial_velocity"])
@pytest.mark.parametrize(
    "value, err, fires",
    [(0.02, 2.1, True), (0.02, 1.9, False), (0.005, 0.9, False), (0.005, 1.1, True)],
)
def test_error_over_100_times_the_value(name, value, err, fires):
    # an error over 100 times the value (and above 1) suggests mixed units (common practice, no source); radial
    # velocities near zero are valid and errors of a few km/s normal, so the caution never fires for them
    # (issue 10: it fired falsely on near-zero radial velocities)
    found = hits(slip_messages(**{name: value, f"{name}_error": err}), "is over 100 times")
    fires = fires and name != "radial_velocity"
    assert bool(found) == fires == (name != "radial_velocity" and err > 100 * value and err > 1.0)
    if fires:
        assert found == [f"{name}_error = {err} is over 100 times {name} = {value}; check the units of both"]


def test_unit_slip_names_the_row_of_a_table():
    from astropy.table import Table

    table = Table(rows=[fields(), fields(parallax=0.05, parallax_error=0.0009)], names=list(fields()))
    from perierr import read_catalogue

    with pytest.warns(PerierrWarning, match=r"^row 1: parallax = 0.05 with parallax_error = 0.0009 looks like arcsec"):
        stars = read_catalogue(table)
    assert stars[0].notes == () and stars[1].notes[0].startswith("row 1: parallax = 0.05")


# ------------------------------------------------------------------------------------------------ priors
def only_parallax(plx, eplx):
    """An invented star whose parallax is its only uncertain input."""
    return ObservedStar.from_values(
        name="invented Tern-9", ra=201.37, dec=-27.62, parallax=plx, parallax_error=eplx, pmra=0.71, pmra_error=0.0,
        pmdec=-1.2, pmdec_error=0.0, radial_velocity=-31.2, radial_velocity_error=0.0,
    )


@pytest.mark.parametrize("eplx, fires", [(1.05, True), (0.95, False)])
def test_parallax_below_its_error_under_a_prior(eplx, fires):
    # the prior dominates when the parallax is below its error (Bailer-Jones 2015, Sect. 4)
    a = run(invented(parallax=1.0, parallax_error=eplx), distance_prior="edsd:L=1kpc", n_samples=2000)
    found = hits(a.warnings, "is dominated by the edsd prior")
    assert bool(found) == fires
    if fires:
        assert found[0].startswith(f"the parallax is below its error (1 < {eplx:.3g} mas): the distance")
        assert "{'L_pc': 1000.0}" in found[0]


@pytest.mark.slow  # about a second or more: left out of mutation runs (DEVELOPERS.md)
def test_nonpositive_parallax_under_a_prior_and_mcmc_delivery():
    # parallax <= 0: MCMC under the prior; no linear columns. 12,000 draws asked, the thinned chain (about
    # one draw per autocorrelation time, capped at 10,000 effective) delivers fewer, and says so.
    a = run(only_parallax(-0.3, 0.4), distance_prior="edsd:L=1kpc", n_samples=12_000, seed=2)
    assert a.linear is None and a.budget is None
    msg = one(a.warnings, "dominated by the edsd prior")
    assert msg.startswith("the parallax is <= 0: the distance, and with it the perihelion, is dominated")
    assert one(a.warnings, "no linearized columns or linear budget").endswith("the posterior under the distance prior")
    got = a.monte_carlo.n
    assert got < 12_000 and a.prior.n_delivered == got
    msg = one(a.warnings, "MCMC delivered")
    assert msg.startswith(f"MCMC delivered {got:,} of the 12,000 draws asked for")
    assert f"effective size {a.monte_carlo.samples.effective_size:,.0f}" in msg
    # asking for fewer than the chain delivers: no note
    small = run(only_parallax(-0.3, 0.4), distance_prior="edsd:L=1kpc", n_samples=1000, seed=2)
    assert small.monte_carlo.n >= 1000 and not hits(small.warnings, "MCMC delivered")
    assert not hits(run(invented()).warnings, "no linearized columns")


def test_prior_notes_and_the_cautions_a_prior_replaces():
    star = invented(parallax=10.0, parallax_error=3.0)
    plain = run(star, n_samples=5000)
    prior = run(star, n_samples=5000, distance_prior="edsd:L=1kpc", prior_method="reweight")
    none = run(star, n_samples=5000, distance_prior="none")
    note = "under the distance prior the Monte Carlo columns are posterior summaries"
    assert hits(prior.warnings, note) and not hits(plain.warnings, note) and not hits(none.warnings, note)
    # without a prior the 30 % parallax error and the nonlinearity are cautioned; under a prior they are not
    for phrase in ("the fractional parallax error is 30% (> 20%)", "distance_pc: Monte Carlo std"):
        assert hits(plain.warnings, phrase) and hits(none.warnings, phrase) and not hits(prior.warnings, phrase)


@pytest.mark.parametrize("r_max, fires", [(105.5, True), (110.0, False)])
def test_reweighting_effective_size_below_threshold(r_max, fires):
    # prior_method="reweight" warns when the Kish effective size (sum w)^2 / sum w^2 (Kish 1965, Survey
    # Sampling, Sect. 11.7) is below min(1000, n / 10) = 200 for n = 2000; a uniform prior to r_max cuts
    # the draws: Kish size 148 at 105.5 pc, 281 at 110 pc
    star = only_parallax(8.0, 1.0)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        s = posterior_samples(star, UniformDensity(r_max), n=2000, seed=3, method="reweight")
    w = s.weights
    kish = w.sum() ** 2 / np.dot(w, w)
    assert abs(kish - 200) > 50
    found = [str(c.message) for c in caught if "reweighting kept an effective sample size" in str(c.message)]
    assert bool(found) == fires == (kish < 200)
    if fires:
        assert found[0].startswith(f"reweighting kept an effective sample size of {kish:.0f} (< 200) out of 2000 draws")
    a = run(star, n_samples=2000, seed=3, distance_prior=UniformDensity(r_max), prior_method="reweight")
    assert bool(hits(a.warnings, "reweighting kept an effective sample size")) == fires


def posterior_median_parallax(w, s, r_max):
    """Median parallax of N(w, s) x r^2 P(r) dr with a uniform space density to r_max, by scipy quadrature.

    In parallax p: density ~ N(p; w, s) p^-4 for p > 1000 / r_max (change of variables r = 1000 / p).
    """
    lo, hi = 1000.0 / r_max, w + 12 * s

    def f(p):
        return stats.norm.pdf(p, w, s) * p**-4.0

    total = integrate.quad(f, lo, hi)[0]
    med = optimize.brentq(lambda x: integrate.quad(f, lo, x)[0] / total - 0.5, lo, hi, xtol=1e-12)
    return med, f(med) / total


@pytest.mark.parametrize("r_max, fires", [(90.0, True), (95.0, False)])
def test_prior_data_conflict(r_max, fires):
    # threshold: the posterior median parallax more than 3 sigma from the measured one (common practice,
    # no source). A uniform prior to r_max < 1000 / parallax pushes it up: 3.29 sigma at 90 pc, 2.73 at
    # 95 pc (scipy quadrature).
    w, s = 8.0, 1.0
    med, dens = posterior_median_parallax(w, s, r_max)
    z = (med - w) / s
    assert abs(z - 3.0) > 0.2 and (z > 3.0) == fires
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        samples = posterior_samples(only_parallax(w, s), UniformDensity(r_max), n=1_000_000, seed=3,
                                    method="reweight", min_effective_size=100)
    # MC error of the weighted median: sqrt(1/4 / n_eff) / density (asymptotic order statistics,
    # Stuart & Ord eq. 10.29, with the Kish size); 4.5 standard errors
    se = math.sqrt(0.25 / samples.effective_size) / dens / s
    assert samples.info["prior_tension_sigma"] == pytest.approx(z, abs=4.5 * se)
    found = [str(c.message) for c in caught if "prior-data conflict" in str(c.message)]
    assert bool(found) == fires
    if fires:
        z_mc = samples.info["prior_tension_sigma"]
        med_mc = w + z_mc * s
        assert found[0].startswith(f"prior-data conflict: the posterior median parallax {med_mc:.4g} mas lies "
                                   f"{abs(z_mc):.1f} sigma from the measured 8 +/- 1 mas")
        assert f"{z:.1f} sigma" in found[0]


# ------------------------------------------------------------------------------------------ calibration
@pytest.mark.parametrize("factor, fires", [(0.99, True), (1.0, False), (1.01, False)])
def test_error_inflation_below_one(factor, fires):
    a = run(invented(), n_samples=2000, error_inflation={"parallax": factor})
    found = hits(a.warnings, "error inflation factors below 1 shrink the errors of")
    assert bool(found) == fires
    if fires:
        assert found[0] == "error inflation factors below 1 shrink the errors of parallax"
    notes = a.to_dict()["notes"]
    assert (f"parallax error inflated by a factor {factor:g}" in notes) == (factor != 1.0)
    assert a.star.sigma[2] == pytest.approx(0.03 * factor, rel=1e-12)


def test_zero_point_note_prints_the_corrected_parallax_and_error():
    # Lindegren et al. 2021 (A&A 649, A4) convention: corrected parallax = parallax - Z; errors add in quadrature
    a = run(invented(), n_samples=2000, parallax_offset=(-0.017, 0.005))
    note = one(a.to_dict()["notes"], "parallax corrected for a zero-point")
    err = math.hypot(0.03, 0.005)
    assert note == (f"parallax corrected for a zero-point of -0.017 ± 0.005 mas: 48 -> {48 + 0.017:.6g} mas, "
                    f"error 0.03 -> {err:.4g} mas")
    assert a.star.mean[2] == pytest.approx(48.017, rel=1e-15) and a.star.sigma[2] == pytest.approx(err, rel=1e-12)
    assert not hits(run(invented()).to_dict()["notes"], "zero-point")


@pytest.mark.parametrize("target, met", [(0.001, False), (0.05, True)])
def test_adaptive_target_not_met(target, met):
    a = run(invented(), n_samples=1000, target_error=target, max_samples=5000)
    found = hits(a.warnings, "Monte Carlo error target")
    assert bool(found) == (not met) == (not a.monte_carlo.convergence["met"])
    if not met:
        assert a.monte_carlo.n == 5000
        worst = worst_relative_error(lma(a.monte_carlo.samples.values))
        assert found[0] == (f"Monte Carlo error target {target} not met with the cap of 5000 samples "
                            f"(worst relative quantile error {worst:.3g}); raise max_samples")


def test_every_caution_reaches_the_text_report_and_the_json():
    # a star with several cautions at once: each message is in the report's "Read with care" and the JSON
    a = run(invented(parallax=2.0, parallax_error=1.5), n_samples=2000)
    assert len(a.warnings) >= 4
    text, doc = format_analysis(a), a.to_dict()
    assert doc["warnings"] == a.warnings
    block = text.split("Read with care", 1)[1]
    for message in a.warnings:
        assert message in block
    assert "have parallax <= 0" in block
