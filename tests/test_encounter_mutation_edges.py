"""Edges of perierr.encounter that its other tests leave open (written against the survivors of a mutmut run).

Every check names its outside reference beside it: astropy (units, SkyCoord, constants), scipy (the truncated
normal's inverse CDF), numpy by hand (finite differences, Hazen quantiles, the ``default_rng([seed, key])``
streams), Kepler's third law, and the module docstring's closed forms. The texts a reader sees (reasons,
cautions, JSON keys) are checked word for word. Stars are invented; straight lines and small draws only.
Each test computes its own run (no shared fixture), so that a mutation-test run ties each test to the
functions it reaches.
"""

import math
import warnings
from types import SimpleNamespace

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import CartesianRepresentation, SkyCoord
from encounter_runs import run as shared_run
from encounter_runs import star_of
from scipy import stats

import perierr
from perierr.budget.inputs import budget_inputs
from perierr.calibration import Calibration
from perierr.cautions import SHOWER
from perierr.encounter import (
    _budget,
    _described,
    _differential_impulse,
    _geometry,
    _passage,
    encounter_effects,
    encounter_rng,
    parse_positions,
    parse_radii,
    quantity_words,
)
from perierr.errors import InputError
from perierr.models.focusing import Focused

LN10 = math.log(10.0)
#: pc per au and yr per pc/(km/s), by astropy units
AU_PC = float((1 * u.au).to_value(u.pc))
YR_PER_PC_KMS = float((1 * u.pc / (u.km / u.s)).to_value(u.yr))

OBSERVABLES = ("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity")

#: An invented, well-measured passer (about 17,000 au at 28 km/s) without correlations: with independent inputs
#: a linear Shapley share is the first-order share (g_i^2 var_i / sum; Owen 2014, SIAM/ASA JUQ 2, 245; from memory).
PASSER = dict(
    name="invented edge passer", ra=150.3, dec=-12.4, parallax=30.0, parallax_error=0.02,
    pmra=0.42, pmra_error=0.01, pmdec=-0.30, pmdec_error=0.01, radial_velocity=-28.0, radial_velocity_error=0.2,
    ra_error=0.02, dec_error=0.02, mass=0.7, mass_error=0.05, phot_g_mean_mag=10.2, phot_g_mean_mag_error=0.02,
)  # fmt: skip

#: A weak parallax (20 %), for a distance prior (weighted draws).
WEAK = dict(
    name="invented weak edge passer", ra=40.0, dec=22.0, parallax=5.0, parallax_error=1.0,
    pmra=0.05, pmra_error=0.02, pmdec=0.03, pmdec_error=0.02, radial_velocity=-40.0, radial_velocity_error=0.5,
    mass=1.1, mass_error=0.1, phot_g_mean_mag=12.0, phot_g_mean_mag_error=0.01,
)  # fmt: skip

MISSING_MASS = "impulses and strength proxies: give the star's mass (mass, mass_error in M_sun)"
MISSING_MAG = "peak magnitude: give the star's apparent magnitude (phot_g_mean_mag, or mag and mag_band)"
REASON_POSITION = (
    "undefined for a comet at a given position: its offset from the star's path moves with every input "
    "(read its interval)"
)
REASON_THROUGH_SUN = "undefined, as the nominal path goes through the Sun (d_ph = 0): no logarithm to take"
REASON_REACH = (
    "undefined, as the radius lies within 3 linear sigmas of d_ph, where this impulse diverges: read its "
    "interval, not a linear budget"
)
METHOD = (
    "linearized Shapley effects at the nominal inputs, of log10 of each quantity (peak magnitude: the magnitude "
    "itself); the mass and the magnitude are inputs independent of the astrometry"
)


def run(star, *, n=2_000, **kw):
    """The shared quiet straight-line analysis, with fewer draws by default."""
    return shared_run(star, n=n, **kw)


def hazen(x, q, w=None):
    """Quantiles by Hazen's definition (Hyndman & Fan 1996, def. 5); weighted: plotting positions (C_k - w_k/2) / W."""
    x = np.asarray(x, dtype=float)
    if w is None:
        return np.quantile(x, q, method="hazen")
    order = np.argsort(x, kind="stable")
    xs, ws = x[order], np.asarray(w, dtype=float)[order]
    return np.interp(q, (np.cumsum(ws) - 0.5 * ws) / ws.sum(), xs)


# ---------------------------------------------------------------------------------------------- the budget


def log_quantities(d, v, plx, mass, mag, radius_pc):
    """log10 of each quantity (peak magnitude itself), by the module docstring's closed forms (constants dropped:
    they do not move a gradient): M/(d v), M/(v d^2), v/d, M r/(v d |d - r|), m + 5 log10(d plx / 1000)."""
    return {
        "peak_proper_motion": math.log10(v / d),
        "sun_impulse": math.log10(mass / (d * v)),
        "strength_m_vd": math.log10(mass / (v * d)),
        "strength_m_vd2": math.log10(mass / (v * d * d)),
        "comet_impulse:100000 au": math.log10(mass * radius_pc / (v * d * abs(d - radius_pc))),
        "peak_magnitude": mag + 5.0 * math.log10(d * plx / 1000.0),
    }


def brute_gradient(model_at, point, zero_point, mass, mag, steps):
    """Central differences (numpy) of every log quantity over (6 observables, Z, M, m), exact steps.

    The parallax the model sees is the catalogue's minus the zero-point (corrected parallax = parallax - Z, the
    convention of Lindegren et al. 2021 for Gaia's zero-point; from memory); the magnitude's distance is the
    corrected one too.
    """
    base = np.concatenate([point, [zero_point, mass, mag]])

    def f(p):
        obs = p[:6].copy()
        obs[2] = p[2] - (p[6] - zero_point)
        ph = model_at(p[7]).evaluate(obs[None, :])
        return log_quantities(float(ph.distance_pc[0]), float(ph.speed_kms[0]), obs[2], p[7], p[8],
                              100_000 * AU_PC)  # fmt: skip

    grads = {}
    for i, h in enumerate(steps):
        up, down = base.copy(), base.copy()
        up[i] += h
        down[i] -= h
        span = up[i] - down[i]  # the exact step between the two floats
        fu, fd = f(up), f(down)
        for name in fu:
            grads.setdefault(name, np.zeros(len(steps)))[i] = (fu[name] - fd[name]) / span
    return grads


def test_budget_with_a_zero_point_matches_brute_force_gradients():
    # inputs: the 6 observables, the zero-point, the mass (appended: not a model nuisance), the magnitude
    a = run(star_of(PASSER), parallax_offset=(0.02, 0.01), oort_radii=["100000 au"])
    b = a.encounter.budget
    assert b.inputs == OBSERVABLES + ("parallax_zero_point", "mass", "magnitude")
    _, cov7, inputs7 = budget_inputs(a.star, a.linear, calibration=Calibration.from_user((0.02, 0.01)))
    assert inputs7 == OBSERVABLES + ("parallax_zero_point",)
    var = np.concatenate([np.diag(cov7), [0.05**2, 0.02**2]])
    assert np.count_nonzero(cov7 - np.diag(np.diag(cov7))) == 0  # independent inputs (no correlation given)
    assert var[6] == pytest.approx(0.01**2, rel=1e-12)  # the zero-point's own variance
    line = perierr.make_model("straight_line")
    grads = brute_gradient(lambda m: line, np.asarray(a.star.mean, dtype=float), 0.0, 0.7, 10.2,
                           0.01 * np.sqrt(var))  # fmt: skip
    sigma = dict(zip(b.quantities, b.sigma))
    for name, g in grads.items():
        total = float(np.sum(g * g * var))
        # sigma: sqrt(g C g); shares of independent inputs: g_i^2 var_i / total (Owen 2014; from memory)
        assert sigma[name] == pytest.approx(math.sqrt(total), rel=1e-5), name
        np.testing.assert_allclose(list(b.share(name).values()), g * g * var / total, rtol=1e-4, atol=1e-9,
                                   err_msg=name)  # fmt: skip
    assert b.to_dict()["sigma"]["peak_magnitude"] == pytest.approx(math.sqrt(np.sum(grads["peak_magnitude"] ** 2
                                                                                  * var)), rel=1e-5)


def test_budget_under_focusing_counts_the_mass_once_through_both_paths():
    # under focusing the mass is already the model's nuisance: one "mass" column whose gradient is the path
    # through the focused d_ph, v_ph plus the direct d log10 M / dM = 1 / (M ln 10) (central differences)
    a = run(star_of(PASSER, mass_error=0.3), focusing=True, n=1_000,
            oort_radii=["100000 au"])  # fmt: skip
    b = a.encounter.budget
    assert b.inputs == OBSERVABLES + ("mass", "magnitude")
    var = np.concatenate([np.diag(np.asarray(a.star.cov, dtype=float)), [0.3**2, 0.02**2]])
    grads = brute_gradient(lambda m: Focused(perierr.make_model("straight_line"), mass_msun=m),
                           np.asarray(a.star.mean, dtype=float), 0.0, 0.7, 10.2, 0.01 * np.sqrt(
                               np.concatenate([var[:6], [1.0], var[6:]])))  # fmt: skip
    grads = {k: np.delete(g, 6) for k, g in grads.items()}  # no zero-point here
    for name in ("sun_impulse", "strength_m_vd2", "comet_impulse:100000 au", "peak_proper_motion"):
        g = grads[name]
        total = float(np.sum(g * g * var))
        np.testing.assert_allclose(list(b.share(name).values()), g * g * var / total, rtol=1e-4, atol=1e-9,
                                   err_msg=name)  # fmt: skip


def fake(d, v, *, sigma_d=0.01, magnitude=None, magnitude_error=None, parallax=10.0):
    """A star and a linearization by hand: the budget's inputs are (t, d, v) themselves (Jacobian = identity)."""
    mean = np.array([0.0, 0.0, parallax, 0.0, 0.0, 0.0])
    star = SimpleNamespace(mean=mean, magnitude=magnitude, magnitude_error=magnitude_error)
    linear = SimpleNamespace(value=(0.0, d, v), sigma=(1.0, sigma_d, 1.0))
    return star, linear


def test_budget_by_hand_at_a_slow_speed_and_with_an_exact_magnitude():
    # Jacobian = identity over inputs (t, d, v): a row is the gradient of log10 of the closed form itself;
    # d log10(M/(d v)) = (-1/(d ln10), -1/(v ln10), 1/(M ln10)) (calculus); v = 0.5 km/s is a valid, slow speed
    d, v, mass = 0.2, 0.5, 0.8
    star, linear = fake(d, v, magnitude=9.0)  # magnitude given without an error: held exact
    cov = np.diag([1.0, 0.01**2, 0.03**2])
    b = _budget(star, linear, (np.eye(3), cov, ("t", "d", "v")), ("sun_impulse", "peak_magnitude"), (),
                (mass, 0.1))  # fmt: skip
    assert b.inputs == ("t", "d", "v", "mass", "magnitude")
    g = np.array([0.0, -1 / (d * LN10), -1 / (v * LN10), 1 / (mass * LN10), 0.0])
    var = np.array([1.0, 0.01**2, 0.03**2, 0.1**2, 0.0])
    np.testing.assert_allclose(b.shapley[0], g * g * var / np.sum(g * g * var), rtol=1e-12, atol=1e-15)
    assert b.sigma[0] == pytest.approx(math.sqrt(np.sum(g * g * var)), rel=1e-12)
    # the peak magnitude m + 5 log10(d plx / 1000): d m_peak / dd = 5 / (d ln10); the exact magnitude gets 0
    assert b.share("peak_magnitude")["magnitude"] == 0.0
    assert b.sigma[1] == pytest.approx(5 / (d * LN10) * 0.01, rel=1e-12)


def test_budget_direct_parallax_terms_by_hand():
    # peak magnitude m + 5 log10(d plx / 1000) with d independent of the inputs here (Jacobian zero): the row is
    # the direct derivative 5 / (plx ln10) on the parallax and minus that on the zero-point (corrected parallax
    # = parallax - Z); the magnitude 1 (calculus)
    plx = 12.5
    star, linear = fake(0.3, 20.0, magnitude=8.0, magnitude_error=0.1, parallax=plx)
    inputs = ("parallax", "parallax_zero_point")
    jac = np.zeros((3, 2))
    jac[1] = [0.004, -0.004]  # d_ph moves with the parallax and against the zero-point
    cov = np.diag([0.02**2, 0.01**2])
    b = _budget(star, linear, (jac, cov, inputs), ("peak_magnitude",), (), None)
    dm_dd = 5 / (0.3 * LN10)
    g = np.array([dm_dd * 0.004 + 5 / (plx * LN10), -dm_dd * 0.004 - 5 / (plx * LN10), 1.0])
    var = np.array([0.02**2, 0.01**2, 0.1**2])
    assert b.inputs == inputs + ("magnitude",)
    np.testing.assert_allclose(b.shapley[0], g * g * var / np.sum(g * g * var), rtol=1e-12)
    assert b.sigma[0] == pytest.approx(math.sqrt(np.sum(g * g * var)), rel=1e-12)


def test_budget_rows_undefined_with_their_reasons_and_the_json_form():
    # d_ph = 0: no logarithm (log10 0); a given position: no linear budget; a near-side radius exactly
    # LINEAR_REACH = 3 sigmas from d_ph is "within" them (the module docstring: within 3 linear sigmas);
    # every row after an undefined one is still there
    star, linear = fake(1.0, 10.0, sigma_d=0.25, magnitude=9.0, magnitude_error=0.1)
    radii = (("r1", 0.25), ("r2", 4.0))
    names = ("peak_proper_motion", "comet_impulse:r1", "comet_impulse:r2", "comet_impulse:position1",
             "peak_magnitude")  # fmt: skip
    cov = np.diag([1.0, 0.25**2, 0.5**2])
    b = _budget(star, linear, (np.eye(3), cov, ("t", "d", "v")), names, radii, (1.0, 0.1))
    assert b.quantities == names
    assert b.undefined == {"comet_impulse:r1": REASON_REACH, "comet_impulse:position1": REASON_POSITION}
    assert b.sigma.dtype == float and np.isnan(b.sigma[[1, 3]]).all() and np.isfinite(b.sigma[[0, 2, 4]]).all()
    # |d - r| = 3 sigma for r2 is 3 / 0.25 = 12 sigmas: defined; its gradient by calculus of
    # log10(M r / (v d |d - r|)): d: -(1/d + 1/(d - r)) / ln10, v: -1/(v ln10), M: 1/(M ln10)
    g = np.array([0.0, -(1 / 1.0 + 1 / (1.0 - 4.0)) / LN10, -1 / (10.0 * LN10), 1 / LN10, 0.0])
    var = np.array([1.0, 0.25**2, 0.5**2, 0.1**2, 0.1**2])
    assert b.sigma[2] == pytest.approx(math.sqrt(np.sum(g * g * var)), rel=1e-12)
    out = b.to_dict()
    assert set(out) == set(names) | {"inputs", "sigma", "method"}
    assert out["comet_impulse:r1"] == {"reason": REASON_REACH}
    assert out["comet_impulse:position1"] == {"reason": REASON_POSITION}
    assert out["comet_impulse:r2"] == pytest.approx(dict(zip(b.inputs, g * g * var / np.sum(g * g * var))),
                                                    rel=1e-12)  # fmt: skip
    assert out["inputs"] == ["t", "d", "v", "mass", "magnitude"]
    assert out["sigma"]["comet_impulse:r1"] is None and out["sigma"]["comet_impulse:position1"] is None
    assert out["sigma"]["comet_impulse:r2"] == pytest.approx(math.sqrt(np.sum(g * g * var)), rel=1e-12)
    assert out["sigma"]["peak_proper_motion"] == pytest.approx(math.hypot(0.25 / LN10, 0.5 / (10 * LN10)),
                                                               rel=1e-12)  # fmt: skip
    assert out["method"] == METHOD


@pytest.mark.parametrize(("d", "v", "mass"), [(0.0, 10.0, 1.0), (0.2, 0.0, 1.0), (0.2, 10.0, 0.0)])
def test_budget_without_a_logarithm_is_undefined(d, v, mass):
    # log10 of M / (d v) does not exist when d, v or M is 0 (calculus): NaN rows, never an exception
    star, linear = fake(d, v)
    b = _budget(star, linear, (np.eye(3), np.eye(3), ("t", "d", "v")), ("sun_impulse", "strength_m_vd"), (),
                (mass, 0.1))  # fmt: skip
    assert np.isnan(b.shapley).all() and np.isnan(b.sigma).all()
    assert set(b.undefined) == {"sun_impulse", "strength_m_vd"}
    if d == 0.0:  # the reason a reader sees for a path through the Sun
        assert b.undefined["sun_impulse"] == REASON_THROUGH_SUN
        assert b.to_dict()["sun_impulse"] == {"reason": REASON_THROUGH_SUN}


# ---------------------------------------------------------------------------------------------- what a reader reads


def test_mass_magnitude_blocks_missing_texts_and_the_json_keys():
    a = run(star_of(PASSER), comet_positions=["30000 au,10,20"])
    enc = a.encounter
    assert enc.mass == {"mass_msun": 0.7, "mass_error_msun": 0.05, "draws": "normal truncated at 0"}
    assert enc.magnitude == {"magnitude": 10.2, "magnitude_error": 0.02, "band": "G"}
    assert enc.missing == ()
    out = enc.to_dict()
    assert list(out) == ["quantities", "comet_positions", "inside_oort_radius", "budget", "mass", "magnitude",
                         "passage", "missing", "caution"]  # fmt: skip
    assert out["budget"] == enc.budget.to_dict() and out["budget"]["method"] == METHOD
    assert out["mass"] == enc.mass and out["magnitude"] == enc.magnitude and out["missing"] == []
    assert out["passage"] == enc.passage and set(out["passage"]) == {"median_passage_yr", "comet_period_yr"}
    assert out["caution"] == SHOWER
    none = run(star_of(PASSER, mass=None, mass_error=None, phot_g_mean_mag=None, phot_g_mean_mag_error=None),
               comet_positions=["30000 au,10,20"]).encounter  # fmt: skip
    assert none.missing == (MISSING_MASS, MISSING_MAG)
    assert none.to_dict()["missing"] == [MISSING_MASS, MISSING_MAG]
    # no impulse, but the comet the user named is still described (the missing line says why it has no impulse)
    assert [p["name"] for p in none.positions] == ["position1"] and len(none.to_dict()["comet_positions"]) == 1
    assert none.to_dict()["mass"] == {} and none.to_dict()["magnitude"] == {}


def test_exact_mass_and_magnitude_are_said_to_be_held_exact():
    enc = run(star_of(PASSER, mass_error=0.0, phot_g_mean_mag_error=0.0)).encounter
    assert enc.mass == {"mass_msun": 0.7, "mass_error_msun": 0.0, "draws": "none (the mass is held exact)"}
    notes = {c.code: c for c in enc.cautions}
    for what in ("mass", "magnitude"):
        c = notes[f"{what}-exact"]
        assert (c.severity, c.subject) == ("note", what)
        assert c.message == (f"the star's {what} is held exact (no error given): the encounter's intervals and "
                             "budget leave out its uncertainty")  # fmt: skip
    assert "slow-passage" not in notes  # d/v of a few thousand years against periods of Myr (Kepler's third law)


def test_passage_times_by_hand_and_the_slow_passage_caution():
    # a far, slow star: d/v ~ 10 Myr, above a tenth of the orbital periods at both radii (Kepler's third law:
    # P [yr] = a [au]^1.5 for a comet of negligible mass around the Sun)
    slow = dict(parallax=5.0, parallax_error=0.01, pmra=20.0, pmdec=5.0, radial_velocity=-3.0)
    a = run(star_of(PASSER, **slow))
    mc, enc = a.monte_carlo, a.encounter
    d, v = mc.valid_values(mc.perihelion.distance_pc)[0], mc.valid_values(mc.perihelion.speed_kms)[0]
    t = (d * u.pc / (v * u.km / u.s)).to_value(u.yr)  # astropy units
    median = float(hazen(t, 0.5))
    assert enc.passage["median_passage_yr"] == pytest.approx(median, rel=1e-12)
    assert enc.passage["comet_period_yr"] == pytest.approx({"20000 au": 20000**1.5, "100000 au": 100000**1.5},
                                                           rel=1e-12)  # fmt: skip
    (c,) = [c for c in enc.cautions if c.code == "slow-passage"]
    assert (c.severity, c.subject) == ("caution", "encounter")
    # the median of draws, to three significant digits (common practice, no source)
    shown = f"{float(f'{median:.3g}'):,.0f}"
    assert c.message == (f"the passage (d_ph/v_ph, median {shown} yr) is not short against the orbital "
                         "period of a comet at 20000 au, 100000 au: the impulse approximation overstates the kick "
                         "there")  # fmt: skip
    # a fast passage (d/v of a few thousand years): no caution
    fast = run(star_of(PASSER))
    assert "slow-passage" not in {c.code for c in fast.encounter.cautions}
    t_fast = (fast.monte_carlo.perihelion.distance_pc * u.pc / (fast.monte_carlo.perihelion.speed_kms * u.km
                                                                 / u.s)).to_value(u.yr)  # fmt: skip
    assert fast.encounter.passage["median_passage_yr"] == pytest.approx(float(hazen(t_fast, 0.5)), rel=1e-12)


def test_passage_by_hand_on_given_draws():
    # d/v in yr by astropy units; only draws with a finite d and v > 0 count; a draw of weight 100 against two
    # of weight 1 holds the weighted median (Hazen plotting positions, weighted)
    radii = (("20000 au", 20_000 * AU_PC),)
    d = np.array([1.0, 2.0, 3.0]) / YR_PER_PC_KMS * 1e4  # 10,000, 20,000 and 30,000 yr at 1 km/s
    v = np.ones(3)
    w = np.array([1.0, 1.0, 100.0])
    out, cautions = _passage(d, v, w, radii, with_impulses=True)
    t = (d * u.pc / (v * u.km / u.s)).to_value(u.yr)
    assert out["median_passage_yr"] == pytest.approx(float(hazen(t, 0.5, w)), rel=1e-12)
    assert out["median_passage_yr"] > 29_000  # the heavy draw, not the unweighted 20,000
    assert cautions == []  # 29,800 yr < 0.1 x 20000^1.5 = 282,843 yr
    # a non-finite distance or a speed of 0 (or below 1 km/s, still valid) never enters the median
    dd = np.array([math.inf, d[0], d[1], math.nan, d[2]])
    vv = np.array([1.0, 0.5, 0.5, 1.0, 0.0])
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        out2, _ = _passage(dd, vv, None, radii, with_impulses=True)
    t2 = (dd[1:3] * u.pc / (vv[1:3] * u.km / u.s)).to_value(u.yr)
    assert out2["median_passage_yr"] == pytest.approx(float(np.median(t2)), rel=1e-12)
    assert _passage(dd[[0, 4]], vv[[0, 4]], None, radii) == ({}, [])  # nothing to time: no passage, no caution


def test_slow_passage_caution_by_default_and_at_the_boundary():
    # the caution is raised for a passage *above* 0.1 of the period (module docstring), with impulses by default
    from perierr.units import AU_PER_PC, MYR_PER_PC_PER_KMS, YR_PER_MYR

    radii = (("1000 au", 1_000 / AU_PER_PC),)
    period = (1_000 / AU_PER_PC * AU_PER_PC) ** 1.5  # Kepler's third law, 1000^1.5 yr (to rounding)
    assert period == pytest.approx(1_000**1.5, rel=1e-12)
    slow = np.array([0.5 * period / YR_PER_PC_KMS])
    out, cautions = _passage(slow, np.ones(1), None, radii)
    assert [c.code for c in cautions] == ["slow-passage"]
    assert "comet at 1000 au:" in cautions[0].message
    # exactly at the boundary (a distance whose d/v in yr is 0.1 P to the last bit): no caution
    target = 0.1 * period
    x = target / (MYR_PER_PC_PER_KMS * YR_PER_MYR)
    for _ in range(64):
        got = x / 1.0 * MYR_PER_PC_PER_KMS * YR_PER_MYR
        if got == target:
            break
        x = np.nextafter(x, math.inf if got < target else -math.inf)
    out, cautions = _passage(np.array([x]), np.ones(1), None, radii)
    assert out["median_passage_yr"] == target and cautions == []
    assert out["median_passage_yr"] == pytest.approx(0.1 * 1_000**1.5, rel=1e-12)


def test_weighted_passage_and_summaries_under_a_distance_prior():
    # weighted draws (a distance prior): the summaries and the passage use the weights (weighted Hazen by numpy)
    a = run(star_of(WEAK), n=2_000, distance_prior="edsd:L=1000pc", levels=(0.025, 0.975))
    mc, enc = a.monte_carlo, a.encounter
    d, w = mc.valid_values(mc.perihelion.distance_pc)
    v = mc.valid_values(mc.perihelion.speed_kms)[0]
    assert w is not None
    t = (d * u.pc / (v * u.km / u.s)).to_value(u.yr)
    assert enc.passage["median_passage_yr"] == pytest.approx(float(hazen(t, 0.5, w)), rel=1e-9)
    assert abs(float(hazen(t, 0.5, w)) / float(hazen(t, 0.5)) - 1) > 1e-6  # the weights matter here
    mu = (v * u.km / u.s / (d * u.pc)).to_value(u.arcsec / u.yr, equivalencies=u.dimensionless_angles())
    s = enc.summaries["peak_proper_motion"]
    for q in (0.025, 0.5, 0.975):
        assert s.quantile(q) == pytest.approx(float(hazen(mu, q, w)), rel=1e-9)
    assert s.effective_size == pytest.approx(w.sum() ** 2 / np.sum(w * w), rel=1e-9)  # Kish
    for name, summary in enc.summaries.items():
        assert summary.name == name
        unit = u.Unit(summary.unit)  # astropy reads each unit label
        kind = name.partition(":")[0]
        expected = {"sun_impulse": u.m / u.s, "comet_impulse": u.m / u.s, "peak_magnitude": u.mag,
                    "peak_proper_motion": u.arcsec / u.yr, "strength_m_vd": u.Msun / (u.km / u.s * u.pc),
                    "strength_m_vd2": u.Msun / (u.km / u.s * u.pc**2)}[kind]  # fmt: skip
        assert unit.is_equivalent(expected) and unit.to(expected) == pytest.approx(1.0, rel=1e-12), name


# ---------------------------------------------------------------------------------------------- streams


def test_mass_and_magnitude_draws_are_the_documented_streams():
    # masses: the normal truncated at 0 by scipy's inverse CDF on default_rng([seed, 3]).random(n); magnitudes:
    # m + sigma * default_rng([seed, 4]).standard_normal(n) (numpy by hand); quantiles by Hazen
    seed, n = 29, 1_000
    a = run(star_of(PASSER), n=n, seed=seed)
    mc, enc = a.monte_carlo, a.encounter
    d, v = mc.perihelion.distance_pc, mc.perihelion.speed_kms
    uni = np.random.default_rng([seed, 3]).random(n)
    tn = stats.truncnorm(-0.7 / 0.05, np.inf, loc=0.7, scale=0.05)
    mass = tn.ppf(tn.cdf(0.0) + uni * (1 - tn.cdf(0.0)))
    s = enc.summaries["strength_m_vd"]
    np.testing.assert_allclose([s.quantile(0.05), s.median, s.quantile(0.95)],
                               hazen(mass / (v * d), [0.05, 0.5, 0.95]), rtol=1e-9)  # fmt: skip
    mag = 10.2 + 0.02 * np.random.default_rng([seed, 4]).standard_normal(n)
    peak = mag + 5 * np.log10(d * mc.samples.values[:, 2] / 1000.0)
    s = enc.summaries["peak_magnitude"]
    np.testing.assert_allclose([s.quantile(0.05), s.median, s.quantile(0.95)], hazen(peak, [0.05, 0.5, 0.95]),
                               rtol=0, atol=1e-9)  # fmt: skip


def test_encounter_rng_without_a_seed_is_fresh():
    # None: fresh OS entropy (numpy default_rng(None)); two streams of 4 doubles agree with probability ~2^-200
    a, b = encounter_rng(None, "mass").random(4), encounter_rng(None, "magnitude").random(4)
    assert ((a >= 0) & (a < 1)).all() and not np.array_equal(a, b)
    assert np.array_equal(encounter_rng(5, "magnitude").random(3), np.random.default_rng([5, 4]).random(3))


def test_no_budget_without_a_linearization():
    a = run(star_of(PASSER), n=500)
    assert encounter_effects(a.star, a.monte_carlo).budget is None
    enc = encounter_effects(a.star, a.monte_carlo, linear=a.linear)  # a linearization but no budget inputs
    assert enc.budget is None and enc.to_dict()["budget"] is None


# ---------------------------------------------------------------------------------------------- positions


@pytest.mark.parametrize(
    ("ra", "dec"), [(10.0, 20.0), (100.0, -35.0), (200.0, 60.0), (300.0, -80.0), (359.9999, 5.0), (0.0, -45.0),
                    (0.0, 90.0), (123.0, -90.0), (45.0, 70.0)],
)  # fmt: skip
def test_described_positions_against_skycoord(ra, dec):
    # astropy SkyCoord (ICRS, spherical <-> Cartesian) for positions in every quadrant, the poles, RA near 360
    text = f"42000 au,{ra},{dec}"
    x = parse_positions(text)  # one text, not in a list
    assert x.shape == (1, 3)
    c = SkyCoord(ra=ra * u.deg, dec=dec * u.deg, distance=42_000 * u.au)
    np.testing.assert_allclose(x[0] / AU_PC, c.cartesian.xyz.to_value(u.au), rtol=1e-12, atol=1e-9)
    (p,) = _described(x)
    assert p["name"] == "position1" and p["distance_au"] == pytest.approx(42_000, rel=1e-12)
    np.testing.assert_allclose(p["xyz_au"], c.cartesian.xyz.to_value(u.au), rtol=1e-12, atol=1e-9)
    assert p["dec_deg"] == pytest.approx(dec, abs=1e-9)
    if abs(dec) < 90:  # at a pole the RA is undefined
        back = SkyCoord(CartesianRepresentation(*(p["xyz_au"] * u.au)), frame="icrs")
        assert p["ra_deg"] == pytest.approx(back.ra.deg, abs=1e-9) and 0 <= p["ra_deg"] < 360
        assert p["ra_deg"] == pytest.approx(ra, abs=1e-9)


@pytest.mark.parametrize("xyz", [[-3e4, -4e4, -1e4], [3e4, -4e4, 2e4], [-3e4, 4e4, 0.0]])
def test_described_bare_au_positions_against_skycoord(xyz):
    (p,) = _described(parse_positions([xyz]))
    c = SkyCoord(CartesianRepresentation(*(np.array(xyz) * u.au)), frame="icrs")
    assert p["ra_deg"] == pytest.approx(c.ra.deg, abs=1e-9)
    assert p["dec_deg"] == pytest.approx(c.dec.deg, abs=1e-9)
    assert p["distance_au"] == pytest.approx(float(np.linalg.norm(xyz)), rel=1e-12)


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_a_tiny_position_on_the_polar_axis_is_at_the_pole(sign):
    # (0, 0, z) points to dec = +-90 deg (spherical coordinates; astropy SkyCoord agrees); 3e-161 pc is so small
    # that its squared length is subnormal and |z| / |x| rounds above 1: still the pole, never a domain error
    x = parse_positions([[0.0, 0.0, sign * 3e-161]] * u.pc)
    (p,) = _described(x)
    assert p["dec_deg"] == sign * 90.0
    c = SkyCoord(CartesianRepresentation(0 * u.au, 0 * u.au, sign * u.au), frame="icrs")
    assert p["dec_deg"] == pytest.approx(c.dec.deg, abs=1e-12)


def test_positions_read_in_every_accepted_form():
    # astropy units: km -> pc; bare numbers in au (also as numeric texts, e.g. from a table); an integer Quantity
    want = np.array([[20_000.0, -5_000.0, 1_000.0]]) * AU_PC
    km = (np.array([[20_000.0, -5_000.0, 1_000.0]]) * u.au).to(u.km)
    np.testing.assert_allclose(parse_positions(km), want, rtol=1e-12)
    np.testing.assert_allclose(parse_positions([["20000", "-5000", "1000"]]), want, rtol=1e-12)
    np.testing.assert_allclose(parse_positions(np.array([20_000, -5_000, 1_000])), want, rtol=1e-12)  # 1-D, 3
    ints = parse_positions(u.Quantity([[1, 2, 3]], u.pc, dtype=int))
    assert ints.dtype == np.float64 and ints.tolist() == [[1.0, 2.0, 3.0]]
    none = parse_positions(None)
    assert none.shape == (0, 3) and none.dtype == np.float64  # (k, 3) with k = 0


@pytest.mark.parametrize(
    ("positions", "value", "expected"),
    [
        (["50000 au,10"], "50000 au,10",
         "expected 'R,RA,DEC': a distance with its unit and the ICRS direction in deg, e.g. '50000 au,266.4,-28.9'"),
        (["50000 au,ten,20"], "50000 au,ten,20",
         "expected 'R,RA,DEC': a distance with its unit and the ICRS direction in deg, e.g. '50000 au,266.4,-28.9'"),
        (["50000,10,20"], "50000", "expected a value with its unit, e.g. '50000 au'"),
        (["3 km/s,1,2"], "3 km/s", "expected a distance in pc (a number in pc or a quantity such as '50000 au')"),
        (["abc au,1,2"], "abc au", "expected a distance in pc (a number in pc or a quantity such as '50000 au')"),
        (["0 au,10,20"], "0 au,10,20", "expected a distance > 0, a finite right ascension and |dec| <= 90 deg"),
        (["5 au,inf,20"], "5 au,inf,20", "expected a distance > 0, a finite right ascension and |dec| <= 90 deg"),
        ([[1.0, 2.0]], [[1.0, 2.0]],
         "expected finite heliocentric ICRS positions, shape (k, 3), in au or as a Quantity of lengths, or texts "
         "'R,RA,DEC' such as '50000 au,266.4,-28.9'"),
        ([[1.0, 2.0, 3.0], [1.0]], repr([[1.0, 2.0, 3.0], [1.0]]),
         "expected finite heliocentric ICRS positions, shape (k, 3), in au or as a Quantity of lengths, or texts "
         "'R,RA,DEC' such as '50000 au,266.4,-28.9'"),
        ([[0.0, 0.0, 0.0]], [[0.0, 0.0, 0.0]], "expected positions away from the Sun (|x| > 0)"),
    ],
)  # fmt: skip
def test_bad_positions_messages_name_the_field_and_the_value(positions, value, expected):
    # RULES: InputError(field, value, expected) naming what the reader gave and what is accepted
    with pytest.raises(InputError) as exc:
        parse_positions(positions)
    assert (exc.value.field, exc.value.value, exc.value.expected) == ("comet_positions", value, expected)


def test_radii_as_one_quantity_array_and_their_labels():
    # astropy units: an array Quantity is several radii, labelled in lower case
    got = parse_radii(u.Quantity([20_000, 100_000], u.au))
    assert [label for label, _ in got] == ["20000 au", "100000 au"]
    np.testing.assert_allclose([pc for _, pc in got], [20_000 * AU_PC, 100_000 * AU_PC], rtol=1e-12)
    assert parse_radii(np.int64(2)) == (("2 pc", 2.0),)  # a numpy integer is one radius in pc


def test_quantity_words_of_each_comet():
    assert quantity_words("comet_impulse:20000 au") == "impulse on a comet at 20000 au, near side"
    assert quantity_words("comet_impulse:position2") == "impulse on a comet at position 2"


# ---------------------------------------------------------------------------------------------- geometry


def test_differential_impulse_is_infinite_when_the_sun_is_hit_without_warnings():
    # d = 0: the Sun's impulse 2 G M / (d v) is infinite and the comet's finite, so their difference is infinite
    # (the closed form's limit); computed without RuntimeWarnings (numpy errstate)
    b_hat = np.array([[0.6, 0.48, 0.64]])  # a unit vector (0.36 + 0.2304 + 0.4096 = 1), every component nonzero
    v_hat = np.array([[0.8, -0.36, -0.48]])  # unit, orthogonal to b_hat (0.48 - 0.1728 - 0.3072 = 0)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        got = _differential_impulse(np.array([1.0]), np.array([0.0]), np.array([20.0]), b_hat, v_hat,
                                    [0.1, 0.2, -0.05])  # fmt: skip
    assert got[0] == math.inf


def test_geometry_of_a_star_heading_at_the_sun_has_no_nan():
    # ra = dec = 0, no proper motion: the straight line goes through the Sun; no closest-point direction exists,
    # and no NaN or RuntimeWarning comes out (RULES: never a silent NaN); the motion is along -x (astropy)
    obs = np.array([[0.0, 0.0, 50.0, 0.0, 0.0, -30.0]])
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        b_hat, v_hat = _geometry(obs)
    assert np.isfinite(b_hat).all() and np.linalg.norm(b_hat) == 0.0
    c = SkyCoord(ra=0 * u.deg, dec=0 * u.deg, distance=20 * u.pc, pm_ra_cosdec=0 * u.mas / u.yr,
                 pm_dec=0 * u.mas / u.yr, radial_velocity=-30 * u.km / u.s)  # fmt: skip
    vel = c.velocity.d_xyz.to_value(u.km / u.s)
    np.testing.assert_allclose(v_hat[0], vel / np.linalg.norm(vel), atol=1e-12)


# ---------------------------------------------------------------------------------------------- a model's own focusing


class _SummaryOnlyFocusing(perierr.models.straight.StraightLine):
    """Straight lines whose diagnostics carry a focusing summary but no per-draw masses (a user's model may write
    only ``info={"focusing": {...}}``, read by :meth:`ModelDiagnostics.from_info`)."""

    def evaluate(self, observables, *, reference=None, progress=None):
        ph = super().evaluate(observables, reference=reference, progress=progress)
        summary = {"mass_msun": 3.0, "mass_error_msun": 0.0, "median_delta_distance_pc": 0.0,
                   "max_abs_delta_distance_pc": 0.0, "median_relative_delta_distance": 0.0,
                   "median_delta_speed_kms": 0.0, "max_delta_speed_kms": 0.0, "n_head_on": 0}  # fmt: skip
        return perierr.models.base.Perihelion(ph.time_myr, ph.distance_pc, ph.speed_kms, ph.flags,
                                              info={"focusing": summary})  # fmt: skip


def test_a_focusing_summary_without_per_draw_masses_leaves_the_star_s_mass_draws():
    # no masses drawn by the model: the encounter draws the star's own (the normal truncated at 0, by scipy's
    # inverse CDF on default_rng([seed, 3]).random(n), numpy by hand), not the summary's 3 M_sun
    seed, n = 8, 1_000
    a = run(star_of(PASSER), n=n, seed=seed, model=_SummaryOnlyFocusing())
    ph = a.monte_carlo.perihelion
    assert ph.diagnostics.focusing is not None and ph.diagnostics.focusing_mass_msun is None
    enc = a.encounter
    assert enc.mass == {"mass_msun": 0.7, "mass_error_msun": 0.05, "draws": "normal truncated at 0"}
    tn = stats.truncnorm(-0.7 / 0.05, np.inf, loc=0.7, scale=0.05)
    uni = np.random.default_rng([seed, 3]).random(n)
    mass = tn.ppf(tn.cdf(0.0) + uni * (1 - tn.cdf(0.0)))
    s = enc.summaries["strength_m_vd"]
    np.testing.assert_allclose(s.median, hazen(mass / (ph.speed_kms * ph.distance_pc), 0.5), rtol=1e-9)


# ---------------------------------------------------------------------------------------------- fixed after review


def test_a_comet_at_a_given_position_of_a_head_on_star_gets_an_infinite_kick_without_warnings():
    # d_ph = 0 on every draw: the Sun's impulse 2 G M / (d v) is infinite (the closed form's limit), the comet's own
    # is finite, so their difference is infinite; a comet on the star's path gets the infinite one itself
    star = star_of(PASSER, pmra=0.0, pmdec=0.0, pmra_error=0.0, pmdec_error=0.0, ra_error=0.0, dec_error=0.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        enc = run(star, n=500, comet_positions=[[20000.0, 0.0, 0.0]]).encounter
    s = enc.summaries["comet_impulse:position1"]
    assert s.median == math.inf and s.quantile(0.05) == math.inf
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        on_path = _differential_impulse(np.array([1.0]), np.array([0.1]), np.array([20.0]), np.array([[1.0, 0, 0]]),
                                        np.array([[0.0, 1, 0]]), [0.1, 0.0, 0.0])  # fmt: skip
    assert on_path[0] == math.inf


def test_a_zero_mass_leaves_the_mass_free_budgets_defined():
    # a Focused model accepts a mass of 0: the impulses are 0 (no logarithm), the peak proper motion and magnitude
    # do not depend on the mass and keep their budget (shares summing to 1)
    model = Focused(perierr.make_model("straight_line"), mass_msun=0.0)
    b = run(star_of(PASSER), n=1_000, model=model).encounter.budget
    assert sum(b.share("peak_proper_motion").values()) == pytest.approx(1.0, abs=1e-12)
    assert sum(b.share("peak_magnitude").values()) == pytest.approx(1.0, abs=1e-12)
    assert b.undefined["sun_impulse"] == "undefined, as the star's mass is 0: no logarithm of a zero impulse"
    assert "peak_proper_motion" not in b.undefined


def test_a_zero_mass_kicks_nobody_even_on_a_path_through_the_sun():
    # the impulse approximation with M = 0: no kick at all (2 G M / (b v) = 0 for every b), a float array
    got = _differential_impulse(np.array([0.0, 0.0]), np.array([0.0, 0.1]), np.array([20.0, 20.0]),
                                np.array([[0.0, 0, 0], [1.0, 0, 0]]), np.array([[0.0, 1, 0], [0.0, 1, 0]]),
                                [0.1, 0.0, 0.0])  # fmt: skip
    assert got.dtype == np.float64
    np.testing.assert_array_equal(got, [0.0, 0.0])
