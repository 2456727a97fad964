"""The JSON document, field by field, against the values given and against independent computations.

The invented star has a different value in every field (no two observables, errors or correlations
alike), so a swapped pair of fields (pmra/pmdec, ra/dec, a value and its error, two correlations) changes
the document and fails a check. The document is produced twice, by ``perierr.analyze(...).to_dict()``
and by the command line ``perierr run STAR --json OUT`` on the same star file and seed, and both must be
the same strict JSON. The run uses the straight-line model (``--model straight_line``): its formulas, written
out below, are the independent reference of every number; the orbit model's own checks are in
``tests/models/orbit`` and ``test_model_difference.py``.

Independent references: the straight-line formulas (Matthews 1994, QJRAS 35, 1) with astropy's
constants, astropy unit conversions, numpy "hazen" quantiles (Hyndman & Fan 1996, definition 5, the
definition the README states), scipy.stats moments, the binomial standard error of a proportion, the
distribution-free binomial interval of a quantile (Conover 1999, Sect. 3.2), and a brute-force Shapley
value over all 720 orders of the six inputs (Shapley 1953; Song, Nelson & Staum 2016 for the cost).
"""

import io
import json
import math
import warnings

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from brute_force import mean_over_orderings
from scipy import stats
from straight_line_reference import lma

from perierr import ObservedStar, analyze, read_star_file
from perierr.cli import main
from perierr.errors import PerierrWarning
from perierr.report import to_json

OBSERVABLES = ("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity")
OUTPUTS = ("time_myr", "distance_pc", "speed_kms")
UNITS = {"time_myr": "Myr", "distance_pc": "pc", "speed_kms": "km/s"}
K_KMS = (1.0 * u.au / u.yr).to_value(u.km / u.s)  # astropy: 1 au/yr in km/s
C_MYR = (1.0 * u.pc / (u.km / u.s)).to_value(u.Myr)  # astropy: Myr per pc/(km/s)
AU_PER_PC = (1.0 * u.pc).to_value(u.au)

# every value distinct; the ten correlations distinct and jointly positive definite (checked by perierr)
STAR = {
    "name": "invented Merlin-3",
    "source_id": "4711000000000000003",
    "ref_epoch": 2016.0,
    "ra": 201.3705, "dec": -27.6214, "parallax": 48.012, "pmra": 0.710, "pmdec": -1.200, "radial_velocity": -31.2,
    "ra_error": 0.021, "dec_error": 0.017, "parallax_error": 0.031, "pmra_error": 0.035, "pmdec_error": 0.029,
    "radial_velocity_error": 0.6,
    "ra_dec_corr": 0.11, "ra_parallax_corr": -0.12, "ra_pmra_corr": 0.13, "ra_pmdec_corr": -0.14,
    "dec_parallax_corr": 0.15, "dec_pmra_corr": -0.16, "dec_pmdec_corr": 0.17,
    "parallax_pmra_corr": -0.21, "parallax_pmdec_corr": 0.18, "pmra_pmdec_corr": -0.34,
    "mass": 0.83, "mass_error": 0.07,
}
CORRS = [k for k in STAR if k.endswith("_corr")]
SEED, N = 11, 20_000
LEVELS = (0.025, 0.975)
WITHIN = ("0.09 pc", "20000 au", "0.1 pc")


def toml_text(fields):
    lines = []
    for key, value in fields.items():
        lines.append(f"{key} = {json.dumps(value)}")  # TOML strings and floats are JSON-compatible here
    return "\n".join(lines) + "\n"


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    """(result, document from the API, document from the CLI) for the invented star."""
    path = tmp_path_factory.mktemp("json") / "merlin-3.toml"
    path.write_text(toml_text(STAR))
    out = path.with_suffix(".json")
    argv = ["run", str(path), "--json", str(out), "--samples", str(N), "--seed", str(SEED), "--model",
            "straight_line", "--within", ",".join(WITHIN), "--levels", ",".join(map(str, LEVELS))]
    assert main(argv, out=io.StringIO()) == 0
    cli_doc = json.loads(out.read_text())
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PerierrWarning)
        star = read_star_file(path)
        result = analyze(star, model="straight_line", n_samples=N, seed=SEED, levels=LEVELS, thresholds=WITHIN)
    # the star is clean but for the Galactic tide, which the straight line ignores (it moves d_ph by ~1,700 au)
    assert [str(w.message).split(":")[0] for w in caught] == ["the Galactic tide matters for this star"]
    api_doc = json.loads(to_json(result.to_dict()))
    return result, api_doc, cli_doc


def corr_pair(name):
    """The two observables of a correlation column, e.g. "ra_pmdec_corr" -> ("ra", "pmdec")."""
    pairs = [(a, b) for a in OBSERVABLES[:5] for b in OBSERVABLES[:5] if name == f"{a}_{b}_corr"]
    assert len(pairs) == 1, name
    return pairs[0]


def catalogue_covariance():
    """Covariance in perierr's internal units built here from the catalogue fields (ra variance of alpha)."""
    cosd = math.cos(math.radians(STAR["dec"]))
    sigma = np.array([STAR["ra_error"] / 3.6e6 / cosd, STAR["dec_error"] / 3.6e6] +
                     [STAR[f"{n}_error"] for n in OBSERVABLES[2:]])
    corr = np.eye(6)
    for name in CORRS:
        i, j = (OBSERVABLES.index(n) for n in corr_pair(name))
        corr[i, j] = corr[j, i] = STAR[name]
    return sigma, corr


def brute_force_shapley(grad, sigma, corr):
    """Shapley shares of Var(g.X) over all 6! orders; cost c(u) = Var(Y) - Var(Y | X_u) (Song et al. 2016).

    Written here in standardized coordinates Z = X / sigma (a = g sigma): Var(Y | Z_u) = a' (R - R_.u
    R_uu^-1 R_u.) a (Gaussian conditioning, textbook).
    """
    a = grad * sigma
    k = a.size
    total = a @ corr @ a

    def explained(u):
        if not u:
            return 0.0
        u = list(u)
        cu = corr[:, u]
        left = corr - cu @ np.linalg.inv(corr[np.ix_(u, u)]) @ cu.T
        return total - a @ left @ a

    return mean_over_orderings(k, explained) / total


# ----------------------------------------------------------------------------------------------- the tests
def test_cli_and_api_write_the_same_document(run):
    _, api_doc, cli_doc = run
    assert cli_doc == api_doc
    assert set(api_doc) == {"perierr_version", "model", "inputs", "linearized", "monte_carlo", "budget", "warnings",
                            "calibration", "notes", "orbit_nominal_comparison", "encounter"}  # fmt: skip
    assert api_doc["model"]["name"] == "straight_line"
    assert [m.split(":")[0] for m in api_doc["warnings"]] == ["the Galactic tide matters for this star"]
    assert api_doc["notes"] == []


def test_orbit_nominal_comparison_block(run):
    # a straight-line run carries the orbit model at the nominal inputs: straight-line values from the
    # formulas here, the difference orbit minus straight line, and the straight-line Monte Carlo half-widths
    # (q84 - q16)/2 from numpy "hazen" quantiles of the formulas on the draws; the orbit values themselves are
    # checked against an independent integration in test_model_difference.py
    result, doc, _ = run
    block = doc["orbit_nominal_comparison"]
    assert set(block) == {*OUTPUTS, "flagged"} and block["flagged"] is False
    nominal = lma(result.star.mean)[0]
    draws = lma(result.monte_carlo.samples.values)
    for k, q in enumerate(OUTPUTS):
        entry = block[q]
        assert set(entry) == {"straight_line", "orbit", "difference", "half_width"}
        assert entry["straight_line"] == pytest.approx(nominal[k], rel=1e-12)
        assert entry["difference"] == pytest.approx(entry["orbit"] - entry["straight_line"], rel=1e-12, abs=1e-15)
        lo, hi = np.quantile(draws[:, k], [0.16, 0.84], method="hazen")
        assert entry["half_width"] == pytest.approx(0.5 * (hi - lo), rel=1e-9)


def test_inputs_block_field_by_field(run):
    _, doc, _ = run
    inputs = doc["inputs"]
    assert set(inputs) == set(STAR) | {"held_exact"}
    for key in ("name", "source_id", "ref_epoch", "mass", "mass_error") + OBSERVABLES:
        assert inputs[key] == STAR[key], key  # stored as given
    for key in ("ra_error", "dec_error", "parallax_error", "pmra_error", "pmdec_error", "radial_velocity_error"):
        assert inputs[key] == pytest.approx(STAR[key], rel=1e-12), key  # through the covariance and back
    for key in CORRS:
        assert inputs[key] == pytest.approx(STAR[key], rel=1e-12, abs=1e-15), key
    assert inputs["held_exact"] == []


def test_inputs_block_names_what_is_held_exact(tmp_path):
    fields = {k: v for k, v in STAR.items() if k not in ("ra_error", "dec_error", "mass", "mass_error")}
    fields["pmdec_error"] = 0.0
    exact = ("ra", "dec", "pmdec")
    fields = {k: v for k, v in fields.items() if not (k in CORRS and any(p in exact for p in corr_pair(k)))}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        doc = analyze(ObservedStar.from_mapping(fields), n_samples=500, seed=1).to_dict()
    assert doc["inputs"]["held_exact"] == ["ra", "dec", "pmdec"]
    assert doc["inputs"]["ra_error"] == 0.0 and doc["inputs"]["pmdec_error"] == 0.0
    assert doc["inputs"]["mass"] is None and doc["inputs"]["mass_error"] is None
    assert doc["notes"] == ["ra_error not given: held exact", "dec_error not given: held exact",
                            "pmdec_error = 0: pmdec held exact"]


def test_linearized_block_field_by_field(run):
    result, doc, _ = run
    lin = doc["linearized"]
    assert set(lin) == set(OUTPUTS) | {"correlations", "jacobian", "distance_au"}
    nominal = lma(np.array([STAR[n] for n in OBSERVABLES]))[0]
    for k, q in enumerate(OUTPUTS):
        assert lin[q] == {"value": float(result.linear.value[k]), "sigma": float(result.linear.sigma[k]),
                          "unit": UNITS[q]}
        assert lin[q]["value"] == pytest.approx(nominal[k], rel=1e-12)  # independent straight line
    assert lin["distance_au"]["value"] == pytest.approx(lin["distance_pc"]["value"] * AU_PER_PC, rel=1e-15)
    assert lin["distance_au"]["sigma"] == pytest.approx(lin["distance_pc"]["sigma"] * AU_PER_PC, rel=1e-15)
    cov = result.linear.cov
    for i, j in ((0, 1), (0, 2), (1, 2)):
        want = cov[i, j] / math.sqrt(cov[i, i] * cov[j, j])
        assert lin["correlations"][f"{OUTPUTS[i]}|{OUTPUTS[j]}"] == pytest.approx(want, rel=1e-12, abs=1e-15)
    # the Jacobian block, by name, against central finite differences of the independent straight line;
    # compared as J_ij sigma_j (output units), to 1e-6 of the output's sigma (the FD truncation error)
    sigma, corr = catalogue_covariance()
    x0 = np.array([STAR[n] for n in OBSERVABLES])
    for j, name in enumerate(OBSERVABLES):
        h = 1e-3 * sigma[j]
        up, down = x0.copy(), x0.copy()
        up[j] += h
        down[j] -= h
        fd = (lma(up)[0] - lma(down)[0]) / (2 * h)
        for k, q in enumerate(OUTPUTS):
            assert lin["jacobian"][q][name] == float(result.linear.jacobian[k, j])
            assert abs(lin["jacobian"][q][name] - fd[k]) * sigma[j] < 1e-6 * lin[q]["sigma"], (q, name)
    # and sigma = sqrt(J Sigma J^T) with the covariance built here from the catalogue fields
    jac = np.array([[lin["jacobian"][q][n] for n in OBSERVABLES] for q in OUTPUTS])
    cov6 = corr * np.outer(sigma, sigma)
    for k, q in enumerate(OUTPUTS):
        assert lin[q]["sigma"] == pytest.approx(math.sqrt(jac[k] @ cov6 @ jac[k]), rel=1e-12)


def test_monte_carlo_block_field_by_field(run):
    result, doc, _ = run
    mc = doc["monte_carlo"]
    assert mc["n"] == N and mc["seed"] == SEED and mc["method"] == "gaussian"
    assert mc["effective_size"] == N and mc["n_nonpositive_parallax"] == 0 and mc["n_flagged"] == 0
    assert mc["model_info"] == {"model": "straight_line"}
    outputs = lma(result.monte_carlo.samples.values)  # recomputed from the draws
    levels = (0.025, 0.05, 0.16, 0.5, 0.84, 0.95, 0.975)
    keys = ("q02.5", "q05", "q16", "q50", "q84", "q95", "q97.5")
    for k, q in enumerate(OUTPUTS):
        block, summary, x = mc[q], result.monte_carlo.summaries[q], outputs[:, k]
        fields = {"median", "mean", "std", "mc_error", "skewness", "n", "effective_size", "unit"}
        assert set(block) == fields | set(keys)
        # the document is the summary ...
        assert block["median"] == summary.median and block["mean"] == summary.mean and block["std"] == summary.std
        assert block["skewness"] == summary.skewness
        for lev, key in zip(levels, keys):
            assert block[key] == summary.quantiles[lev] and block["mc_error"][key] == summary.quantile_se[lev]
        # ... and the summary is what the draws say
        assert block["unit"] == UNITS[q] and block["n"] == N and block["effective_size"] == N
        scale = np.std(x)
        for lev, key in zip(levels, keys):
            assert block[key] == pytest.approx(np.quantile(x, lev, method="hazen"), abs=1e-12 * scale)
            s = math.sqrt(lev * (1 - lev) / N)  # binomial interval of the quantile (Conover 1999)
            lo, hi = np.quantile(x, [lev - s, lev + s], method="hazen")
            assert block["mc_error"][key] == pytest.approx(0.5 * (hi - lo), abs=1e-12 * scale)
        assert block["median"] == block["q50"] == pytest.approx(np.median(x), abs=1e-12 * scale)
        assert block["mean"] == pytest.approx(np.mean(x), abs=1e-12 * scale)
        assert block["std"] == pytest.approx(np.std(x, ddof=1), rel=1e-10)
        assert block["skewness"] == pytest.approx(stats.skew(x), rel=1e-8)
        assert block["mc_error"]["mean"] == pytest.approx(np.std(x, ddof=1) / math.sqrt(N), rel=1e-10)
        # SE of a standard deviation, any distribution: s sqrt((kurtosis - 1) / n) / 2 (delta method, textbook)
        kurt = stats.kurtosis(x, fisher=False)
        assert block["mc_error"]["std"] == pytest.approx(0.5 * np.std(x, ddof=1) * math.sqrt((kurt - 1) / N), rel=1e-8)


def test_threshold_probabilities_field_by_field(run):
    result, doc, _ = run
    d = lma(result.monte_carlo.samples.values)[:, 1]
    entries = doc["monte_carlo"]["thresholds"]
    assert [e["threshold"] for e in entries] == list(WITHIN)
    for entry, label in zip(entries, WITHIN):
        limit = u.Quantity(label).to_value(u.pc)  # astropy unit conversion
        count = int(np.count_nonzero(d < limit))
        p = count / N
        se = math.sqrt(p * (1 - p) / N)  # binomial standard error of a proportion
        assert 0 < count < N
        assert entry["distance_pc"] == pytest.approx(limit, rel=1e-15)
        assert entry["count"] == count and entry["probability"] == p
        assert entry["mc_error"] == pytest.approx(se, rel=1e-12)
        assert entry["upper95"] == pytest.approx(min(1.0, p + 2 * se), rel=1e-12)
        assert entry["lower95"] == pytest.approx(max(0.0, p - 2 * se), rel=1e-12)


def test_budget_block_field_by_field(run):
    result, doc, _ = run
    budget = doc["budget"]
    assert budget["inputs"] == list(OBSERVABLES)
    assert set(budget) == set(OUTPUTS) | {"inputs", "covariance_contributions", "method"}
    sigma, corr = catalogue_covariance()
    cov6 = corr * np.outer(sigma, sigma)
    for k, q in enumerate(OUTPUTS):
        shares = budget[q]
        assert list(shares) == list(OBSERVABLES)
        assert shares == result.budget.share(q)
        assert sum(shares.values()) == pytest.approx(1.0, abs=1e-12)
        grad = result.linear.jacobian[k]
        want = brute_force_shapley(grad, sigma, corr)
        for j, name in enumerate(OBSERVABLES):
            assert shares[name] == pytest.approx(want[j], abs=1e-10), (q, name)
        # the radial velocity is independent of the astrometry: its share is J^2 sigma^2 / Var
        # (Iooss & Prieur 2019, independent input), as the README states
        var = grad @ cov6 @ grad
        assert shares["radial_velocity"] == pytest.approx(grad[5] ** 2 * sigma[5] ** 2 / var, abs=1e-12)
        # covariance contributions J_i (Sigma J^T)_i / Var
        contrib = budget["covariance_contributions"][q]
        assert contrib == result.budget.share(q, "covariance")
        for j, name in enumerate(OBSERVABLES):
            assert contrib[name] == pytest.approx(grad[j] * (cov6 @ grad)[j] / var, abs=1e-12), (q, name)


def test_calibration_block_and_the_zero_point_share():
    star = ObservedStar.from_mapping(STAR)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        result = analyze(star, n_samples=1000, seed=3, parallax_offset=(-0.017, 0.005),
                         error_inflation={"pmra": 1.1})
    doc = json.loads(to_json(result.to_dict()))
    cal = doc["calibration"]
    assert cal["parallax_zero_point"]["value_mas"] == -0.017 and cal["parallax_zero_point"]["error_mas"] == 0.005
    assert cal["error_inflation"] == {n: (1.1 if n == "pmra" else 1.0) for n in OBSERVABLES}
    assert cal["catalogue_parallax_mas"] == STAR["parallax"]
    assert cal["catalogue_parallax_error_mas"] == pytest.approx(STAR["parallax_error"], rel=1e-12)
    # the inputs block is the star after calibration (Analysis docstring): corrected parallax = parallax - Z
    # (Lindegren et al. 2021, A&A 649, A4), the zero-point error added in quadrature, pmra's error inflated
    inputs = doc["inputs"]
    assert inputs["parallax"] == pytest.approx(STAR["parallax"] + 0.017, rel=1e-15)
    assert inputs["parallax_error"] == pytest.approx(math.hypot(STAR["parallax_error"], 0.005), rel=1e-12)
    assert inputs["pmra_error"] == pytest.approx(1.1 * STAR["pmra_error"], rel=1e-12)
    assert inputs["pmdec_error"] == pytest.approx(STAR["pmdec_error"], rel=1e-12)
    # the zero-point is an independent budget input: its share is J_plx^2 sigma_Z^2 / Var
    budget = doc["budget"]
    assert budget["inputs"] == list(OBSERVABLES) + ["parallax_zero_point"]
    grad = result.linear.jacobian[1]
    var = grad @ result.star.cov @ grad  # the calibrated covariance holds sigma_plx^2 + sigma_Z^2
    share = budget["distance_pc"]["parallax_zero_point"]
    assert share == pytest.approx(grad[2] ** 2 * 0.005**2 / var, rel=1e-9)
    assert sum(budget["distance_pc"].values()) == pytest.approx(1.0, abs=1e-12)


def test_prior_block():
    star = ObservedStar.from_mapping({**STAR, "parallax": 2.0, "parallax_error": 0.5})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        # the straight line: the test is about the prior block (the orbit model is slow for a 25 % parallax error)
        result = analyze(star, model="straight_line", n_samples=20_000, seed=4, distance_prior="edsd:L=1350pc",
                         prior_method="reweight")  # fmt: skip
    doc = json.loads(to_json(result.to_dict()))
    prior = doc["prior"]
    assert prior["name"] == "edsd" and prior["parameters"] == {"L_pc": 1350.0} and prior["method"] == "reweight"
    w = result.monte_carlo.samples.weights
    kish = w.sum() ** 2 / np.dot(w, w)  # Kish 1965, Survey Sampling, Sect. 11.7
    assert prior["effective_size"] == pytest.approx(kish, rel=1e-12)
    assert doc["monte_carlo"]["effective_size"] == pytest.approx(kish, rel=1e-12)
    assert doc["monte_carlo"]["method"] == "reweight"
    assert any("posterior summaries" in m for m in doc["warnings"])


def test_encounter_block_against_the_formulas(run):
    # the encounter block: every quantity that does not need the mass draws from the straight-line formulas on the
    # same draws (numpy "hazen" quantiles), P(inside) by counting, the Sun's impulse 2 G M / (d v) (impulse
    # approximation, Binney & Tremaine 2008 Sect. 7.2, from memory) against masses drawn here from scipy's
    # truncated normal on the same d and v, within the Monte Carlo errors
    result, doc, _ = run
    block = doc["encounter"]
    assert set(block) == {"quantities", "inside_oort_radius", "budget", "mass", "magnitude", "passage", "missing",
                          "caution", "comet_positions"}  # fmt: skip
    assert block["comet_positions"] == []
    assert set(block["quantities"]) == {"peak_proper_motion", "sun_impulse", "strength_m_vd", "strength_m_vd2",
                                        "comet_impulse:20000 au", "comet_impulse:100000 au"}  # fmt: skip
    assert block["mass"] == {"mass_msun": 0.83, "mass_error_msun": 0.07, "draws": "normal truncated at 0"}
    assert block["magnitude"] == {} and len(block["missing"]) == 1 and "magnitude" in block["missing"][0]
    assert "not impact hazards" in block["caution"] and "comet-dynamics" in block["caution"]
    draws = lma(result.monte_carlo.samples.values)
    d, v = draws[:, 1], draws[:, 2]
    # peak proper motion: v / d in arcsec/yr through astropy (a transverse speed at a distance)
    mu = ((v * u.km / u.s) / (d * u.pc)).to_value(u.arcsec / u.yr, equivalencies=u.dimensionless_angles())
    got = block["quantities"]["peak_proper_motion"]
    assert got["unit"] == "arcsec/yr"
    for level in ("q05", "q16", "q50", "q84", "q95"):
        want = np.quantile(mu, float(level[1:]) / 100, method="hazen")
        assert got[level if level != "q50" else "median"] == pytest.approx(want, rel=1e-9), level
    for entry, r_au in zip(block["inside_oort_radius"], (20000.0, 100000.0)):
        assert entry["probability"] == pytest.approx(np.mean(d * AU_PER_PC < r_au), abs=1e-15)
        assert entry["count"] == int(np.sum(d * AU_PER_PC < r_au))
    gm = (const.G * u.Msun).to_value(u.pc * (u.km / u.s) ** 2)  # astropy constants
    m = stats.truncnorm.rvs(-0.83 / 0.07, np.inf, loc=0.83, scale=0.07, size=d.size, random_state=99)
    impulse = 2 * gm * m / (d * v) * 1000.0  # m/s
    got = block["quantities"]["sun_impulse"]
    error = math.hypot(got["mc_error"]["q50"], got["mc_error"]["q50"])  # two independent sets of mass draws
    assert got["median"] == pytest.approx(np.median(impulse), abs=4 * error)
    # the strength proxies are the impulse over 2 G (and over d once more) for the same draws: exact ratios
    ratio = block["quantities"]["strength_m_vd"]["median"] / got["median"]
    assert ratio == pytest.approx(1.0 / (2 * gm * 1000.0), rel=1e-9)
    budget = block["budget"]
    assert budget["inputs"] == [*OBSERVABLES, "mass"]
    # the star passes at ~19,000 au: the near-side comet at 20,000 au (its impulse diverges at d_ph = r) has a
    # reason instead of shares, every other row sums to 1
    assert set(budget["comet_impulse:20000 au"]) == {"reason"} and budget["sigma"]["comet_impulse:20000 au"] is None
    assert "undefined" in budget["comet_impulse:20000 au"]["reason"]
    for name in set(block["quantities"]) - {"comet_impulse:20000 au"}:
        assert sum(budget[name].values()) == pytest.approx(1.0, abs=1e-9), name
    assert budget["peak_proper_motion"]["mass"] == 0.0  # v/d does not depend on the mass
