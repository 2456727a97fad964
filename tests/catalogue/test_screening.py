"""Stage 1 of a catalogue run (perierr.catalogue.screening), vectorized over rows.

Every catalogue here is invented: random stars drawn in the test (no real star), with bad rows of
every kind planted among the good ones. The references are outside the vectorized code: the
single-star path (ObservedStar.from_mapping + linearize, one row at a time), astropy's frames,
scipy's folded normal and numpy's own comparisons.
"""

import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import Distance, SkyCoord
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from perierr.catalogue.chunk import Chunk
from perierr.catalogue.screening import (
    STATUSES,
    Cut,
    p_within,
    parse_cut,
    passes,
    screen_chunk,
    screen_columns,
    threshold_columns,
    threshold_label,
)
from perierr.cautions import is_head_on
from perierr.errors import InputError
from perierr.models import StraightLine
from perierr.propagate.linear import linearize
from perierr.star import MASKED, ObservedStar
from perierr.star.fields import ASTROMETRIC, CORRELATIONS
from perierr.star.observed import check_psd
from perierr.units import AU_PER_PC

THRESHOLDS = ("20000 au", "0.5 pc", "1 pc", "2 pc")
NUMERIC = (
    "time_myr", "time_sigma_myr", "distance_pc", "distance_sigma_pc", "distance_au", "distance_sigma_au",
    "speed_kms", "speed_sigma_kms", "parallax_fraction",
)  # fmt: skip
#: correlation columns left out of the invented table (an absent column means 0)
ABSENT = ("ra_pmra_corr", "dec_pmdec_corr", "ra_pmdec_corr")


# --------------------------------------------------------------------------------------- invented catalogues


def invented_table(rng, n, *, correlations=True):
    """An invented catalogue in catalogue units: dict of float arrays (NaN = empty), realistic errors."""
    t = {
        "ra": rng.uniform(0, 360, n),
        "dec": np.degrees(np.arcsin(rng.uniform(-0.999, 0.999, n))),
        "parallax": 10 ** rng.uniform(-0.5, 2.3, n),
        "pmra": rng.normal(0, 60, n),
        "pmdec": rng.normal(0, 60, n),
        "radial_velocity": rng.normal(0, 40, n),
        "ra_error": 10 ** rng.uniform(-2.5, -0.5, n),
        "dec_error": 10 ** rng.uniform(-2.5, -0.5, n),
        "pmra_error": 10 ** rng.uniform(-2, -0.3, n),
        "pmdec_error": 10 ** rng.uniform(-2, -0.3, n),
        "radial_velocity_error": 10 ** rng.uniform(-1, 0.7, n),
        "mass": rng.uniform(0.1, 2.0, n),
        "mass_error": rng.uniform(0.0, 0.2, n),
        "ref_epoch": np.full(n, 2016.0),
    }
    t["parallax_error"] = t["parallax"] * 10 ** rng.uniform(-3.5, -0.3, n)
    if correlations:  # a valid correlation matrix per row: normalized W W^T
        w = rng.normal(size=(n, 5, 9))
        cov = w @ np.swapaxes(w, 1, 2)
        s = np.sqrt(np.einsum("nii->ni", cov))
        corr = cov / (s[:, :, None] * s[:, None, :])
        for name in ABSENT:  # absent columns are 0: zero them, then shrink towards I (smallest eigenvalue >= 0.05)
            a, b = _pair(name)
            corr[:, a, b] = corr[:, b, a] = 0.0
        low = np.linalg.eigvalsh(corr)[:, 0]
        alpha = np.where(low < 0.05, 0.95 / (1.0 - low), 1.0)[:, None, None]
        corr = alpha * corr + (1.0 - alpha) * np.eye(5)
        for name in CORRELATIONS:
            a, b = _pair(name)
            t[name] = corr[:, a, b]
        for name in ABSENT:
            del t[name]
    return t


def _pair(name):
    body = name[: -len("_corr")]
    for a in ASTROMETRIC:
        if body.startswith(a + "_") and body[len(a) + 1 :] in ASTROMETRIC:
            return ASTROMETRIC.index(a), ASTROMETRIC.index(body[len(a) + 1 :])
    raise KeyError(name)


def _set(values, text, name, i, x):
    values[name][i] = x


def _text(values, text, name, i):
    values[name][i] = np.nan
    text.setdefault(name, np.zeros(values[name].size, dtype=bool))[i] = True


def _many(**fields):
    def plant(values, text, i):
        for name, x in fields.items():
            _set(values, text, name, i, x)

    return plant


def _unreadable(name):
    return lambda values, text, i: _text(values, text, name, i)


#: Every kind of bad row (and a few good but unusual ones), planted into an invented row.
FAULTS = {
    "missing parallax": _many(parallax=np.nan),
    "missing pmdec_error": _many(pmdec_error=np.nan),
    "missing radial velocity": _many(radial_velocity=np.nan),
    "missing radial velocity error": _many(radial_velocity_error=np.nan),
    "empty ra_error (held exact, ok)": _many(ra_error=np.nan),
    "zero pmdec_error (held exact, ok)": _many(pmdec_error=0.0),
    "unreadable pmra": _unreadable("pmra"),
    "unreadable ra_error": _unreadable("ra_error"),
    "unreadable radial velocity": _unreadable("radial_velocity"),
    "unreadable correlation": _unreadable("parallax_pmra_corr"),
    "unreadable mass": _unreadable("mass"),
    "unreadable ref_epoch": _unreadable("ref_epoch"),
    "infinite pmdec": _many(pmdec=np.inf),
    "infinite correlation": _many(pmra_pmdec_corr=-np.inf),
    "infinite mass_error": _many(mass_error=np.inf),
    "infinite ref_epoch": _many(ref_epoch=np.inf),
    "negative error": _many(pmra_error=-0.1),
    "huge error": _many(parallax_error=1e151),
    "declination beyond the pole": _many(dec=95.0),
    "ra of 360": _many(ra=360.0),
    "tiny positive parallax": _many(parallax=1e-13, parallax_error=1e-15),
    "tiny negative parallax": _many(parallax=-1e-13),
    "huge parallax": _many(parallax=2e5, parallax_error=0.1),
    "too slow": _many(pmra=0.0, pmdec=0.0, radial_velocity=1e-13, parallax=10.0, parallax_error=0.01),
    "faster than light (rv)": _many(radial_velocity=4e5, parallax=10.0, parallax_error=0.01),
    "faster than light (pm)": _many(pmra=1e9, parallax=1.0, parallax_error=0.01),
    "masked correlation": _many(ra_dec_corr=np.nan),
    "correlation above 1": _many(dec_parallax_corr=1.3),
    "ra error at the pole": _many(dec=90.0, ra_error=0.1),
    "ra held exact at the pole (ok)": _many(dec=-90.0, ra_error=0.0),
    "not positive semi-definite": _many(ra_dec_corr=0.9, ra_parallax_corr=0.9, dec_parallax_corr=-0.9),
    "zero mass": _many(mass=0.0),
    "negative mass": _many(mass=-1.0),
    "negative mass error": _many(mass_error=-0.1),
    "covariance overflow": _many(dec=90.0 - 1e-9, ra_error=1e150),
    "negative parallax": _many(parallax=-0.3, parallax_error=0.5),
    "zero parallax": _many(parallax=0.0),
    "no motion": _many(pmra=0.0, pmdec=0.0, radial_velocity=0.0),
    "sigma overflow": _many(radial_velocity_error=1e150, parallax=0.01, parallax_error=0.001),
    "head-on (ok)": _many(pmra=0.0, pmdec=0.0),
}


def planted_catalogue(seed, n):
    """An invented table with every fault at least once (n >= len(FAULTS)), then random faults (0-2 a row)."""
    rng = np.random.default_rng(seed)
    values = invented_table(rng, n)
    text = {}
    kinds = list(FAULTS)
    for i in range(n):
        if i < len(kinds):
            picks = [kinds[i]]
        else:
            picks = list(rng.choice(kinds, size=rng.choice([0, 0, 1, 1, 2]), replace=False))
        for kind in picks:
            FAULTS[kind](values, text, i)
    return values, text


def make_chunk(values, text=None, rows=None):
    n = len(next(iter(values.values())))
    rows = np.arange(n, dtype=np.int64) if rows is None else rows
    return Chunk(rows, {k: np.asarray(v, dtype=float) for k, v in values.items()}, dict(text or {}))


def row_mapping(chunk, i):
    """Row i as the mapping an astropy Table row gives the single-star path (masked cells, text cells)."""
    out = {}
    for name, v in chunk.values.items():
        if name in chunk.unreadable and chunk.unreadable[name][i]:
            out[name] = "n/a?"  # text that is not a number
        elif np.isnan(v[i]):
            out[name] = MASKED
        else:
            out[name] = float(v[i])
    return out


def single_star(mapping, i):
    """The single-star path: the star and its linear result, or the InputError it raises."""
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")  # PerierrWarnings about unit slips etc. (the cautions are not compared)
        try:
            star = ObservedStar.from_mapping(mapping, row=i, strict=False)
            return star, linearize(star, StraightLine())
        except InputError as exc:
            return exc


def status_of(exc):
    """The stage-1 status that names the single-star path's refusal (classified from its message)."""
    expected = str(exc.expected)
    if exc.field in ("radial_velocity", "radial_velocity_error") and expected.startswith("missing"):
        return "no_radial_velocity"
    if expected.startswith("missing") or exc.value == "masked":
        return "missing_value"
    if expected.startswith("expected a number"):
        return "unreadable_value"
    if exc.field == "correlations":
        return "not_positive_semidefinite"
    if exc.field == "parallax" and isinstance(exc.value, float) and exc.value <= 0:
        return "nonpositive_parallax"
    if "does not move" in expected:
        return "not_finite"
    return "out_of_range"


def assert_same(a, b, *, rtol=0.0):
    """Two stage-1 results equal: text exactly, numbers to rtol (NaN where NaN)."""
    assert a.keys() == b.keys()
    for name in a:
        if a[name].dtype.kind in "fc":
            np.testing.assert_allclose(a[name], b[name], rtol=rtol, atol=0, equal_nan=True, err_msg=name)
        else:
            np.testing.assert_array_equal(a[name], b[name], err_msg=name)


# --------------------------------------------------------------------------------------- 1. the single-star path


def pairs_catalogue(seed):
    """An invented table with every pair of faults planted together in one row (the precedence of every pair)."""
    kinds = list(FAULTS)
    pairs = [(a, b) for i, a in enumerate(kinds) for b in kinds[i + 1 :]]
    values = invented_table(np.random.default_rng(seed), len(pairs))
    text = {}
    for i, pair in enumerate(pairs):
        for kind in pair:
            FAULTS[kind](values, text, i)
    return values, text


@pytest.mark.parametrize(
    ("build", "block_rows"), [(lambda: planted_catalogue(12, 300), 64), (lambda: pairs_catalogue(4), 65_536)]
)
def test_every_row_as_the_single_star_path_says(build, block_rows):
    values, text = build()
    n = len(values["ra"])
    chunk = make_chunk(values, text, rows=np.arange(n, dtype=np.int64) + 1000)
    out = screen_chunk(chunk, thresholds=THRESHOLDS, block_rows=block_rows)
    assert out["row"].tolist() == list(range(1000, 1000 + n))
    seen = set()
    for i in range(n):
        ref = single_star(row_mapping(chunk, i), i)
        status, reason = out["status"][i], out["reason"][i]
        seen.add(status)
        if isinstance(ref, InputError):
            # the first refusal of the single-star path decides: same status, same field named first
            assert status == status_of(ref), (i, reason, str(ref))
            assert reason.startswith(f"{ref.field} = "), (i, reason, str(ref))
            assert all(np.isnan(out[c][i]) for c in NUMERIC)
            continue
        star, lin = ref
        if not (np.all(np.isfinite(lin.value)) and np.all(np.isfinite(lin.sigma))):
            assert status == "not_finite" and reason.startswith("perihelion = "), (i, reason)
            continue
        assert status == "ok" and reason == "", (i, reason)
        # values and sigmas: the same formulas, batched; rounding only (1e-10 relative)
        got = np.array([out[c][i] for c in ("time_myr", "distance_pc", "speed_kms")])
        sig = np.array([out[c][i] for c in ("time_sigma_myr", "distance_sigma_pc", "speed_sigma_kms")])
        np.testing.assert_allclose(got, lin.value, rtol=1e-10, atol=0)
        np.testing.assert_allclose(sig, lin.sigma, rtol=1e-10, atol=0)
        np.testing.assert_allclose(out["distance_au"][i], lin.value[1] * AU_PER_PC, rtol=1e-12)
        np.testing.assert_allclose(out["distance_sigma_au"][i], lin.sigma[1] * AU_PER_PC, rtol=1e-10)
        np.testing.assert_allclose(out["parallax_fraction"][i], star.fractional_parallax_error, rtol=1e-12)
        assert out["head_on"][i] == is_head_on(lin.value[1], star.mean[2])
    assert seen == set(STATUSES)  # every status occurs among the planted rows
    assert out["head_on"].sum() >= 1


def test_psd_verdict_at_the_tolerance_equals_check_psd():
    # correlation matrices with a chosen smallest eigenvalue e around the tolerance -1e-10 of check_psd:
    # R' = (R + s I) / (1 + s) keeps a unit diagonal and has smallest eigenvalue (l + s) / (1 + s) = e
    rng = np.random.default_rng(5)
    targets = np.array([-1e-3, -3e-10, -1.5e-10, -1.2e-10, -0.8e-10, -0.6e-10, -0.5e-10, -0.3e-10, 0.0, 1e-12, 1e-3])
    n = targets.size * 4
    values = invented_table(rng, n, correlations=False)
    w = rng.normal(size=(n, 5, 3))  # rank 3: a singular R, so that e is reached by a small shift
    r = w @ np.swapaxes(w, 1, 2)
    sd = np.sqrt(np.einsum("nii->ni", r))
    r = r / (sd[:, :, None] * sd[:, None, :])
    low = np.linalg.eigvalsh(r)[:, 0]
    e = np.repeat(targets, 4)
    shift = (e - low) / (1 - e)
    r = (r + shift[:, None, None] * np.eye(5)) / (1 + shift)[:, None, None]
    for name in CORRELATIONS:
        a, b = _pair(name)
        values[name] = r[:, a, b]
    chunk = make_chunk(values)
    out = screen_chunk(chunk)
    for i in range(n):
        full = np.eye(6)
        for name in CORRELATIONS:
            a, b = _pair(name)
            full[a, b] = full[b, a] = values[name][i]
        try:
            check_psd(full, what="correlation matrix")  # the single-star path's rule
            expected = "ok"
        except InputError:
            expected = "not_positive_semidefinite"
        assert out["status"][i] == expected, (e[i], out["reason"][i])
    assert (out["status"] == "ok").sum() > 0 and (out["status"] == "not_positive_semidefinite").sum() > 0


# --------------------------------------------------------------------------------------- 2. astropy


def test_straight_line_against_astropy():
    rng = np.random.default_rng(3)
    n = 60
    values = invented_table(rng, n)
    out = screen_chunk(make_chunk(values))
    assert np.all(out["status"] == "ok")
    # heliocentric phase space from astropy's ICRS frame (distance 1000/parallax pc)
    c = SkyCoord(
        ra=values["ra"] * u.deg, dec=values["dec"] * u.deg, distance=Distance(parallax=values["parallax"] * u.mas),
        pm_ra_cosdec=values["pmra"] * u.mas / u.yr, pm_dec=values["pmdec"] * u.mas / u.yr,
        radial_velocity=values["radial_velocity"] * u.km / u.s, frame="icrs",
    )  # fmt: skip
    r = c.cartesian.xyz.to_value(u.pc).T
    v = c.velocity.d_xyz.to_value(u.km / u.s).T
    # straight-line closest approach (Matthews 1994, QJRAS 35, 1): t = -r.v / |v|^2, d = |r + v t|
    t = -np.sum(r * v, axis=1) / np.sum(v * v, axis=1)
    d = np.linalg.norm(r + v * t[:, None], axis=1)
    t_myr = (t * u.pc / (u.km / u.s)).to_value(u.Myr)
    np.testing.assert_allclose(out["time_myr"], t_myr, rtol=1e-9)
    np.testing.assert_allclose(out["distance_pc"], d, rtol=1e-9)
    np.testing.assert_allclose(out["speed_kms"], np.linalg.norm(v, axis=1), rtol=1e-9)
    np.testing.assert_allclose(out["distance_au"], (d * u.pc).to_value(u.au), rtol=1e-9)


# --------------------------------------------------------------------------------------- 3. P(d < D)


def test_p_within_is_the_folded_normal():
    rng = np.random.default_rng(8)
    d = np.concatenate([rng.uniform(0, 3, 200), [0.0, 0.5, 5.0]])
    s = np.concatenate([10 ** rng.uniform(-3, 0.5, 200), [0.2, 1e-9, 0.01]])
    for threshold in (0.1, 0.5, 1.0, 2.0):
        # scipy.stats.foldnorm: the distribution of |X|, X ~ N(c scale, scale); its cdf computes
        # ndtr(x - c) + ndtr(x + c) - 1, so the comparison is absolute (1e-13)
        ref = stats.foldnorm.cdf(threshold, d / s, scale=s)
        np.testing.assert_allclose(p_within(d, s, threshold), ref, rtol=0, atol=1e-13)
    # sigma 0: a step at D (P(|d| < D) for an exact d); NaN stays NaN
    np.testing.assert_array_equal(p_within([0.4, 0.5, 0.6, np.nan], [0, 0, 0, 0], 0.5), [1.0, 0.0, 0.0, np.nan])
    # the screen's columns are the same formula of its own distance and sigma
    rng = np.random.default_rng(9)
    out = screen_chunk(make_chunk(invented_table(rng, 100)), thresholds=THRESHOLDS)
    for column, pc in threshold_columns(THRESHOLDS):
        ref = stats.foldnorm.cdf(pc, out["distance_pc"] / out["distance_sigma_pc"], scale=out["distance_sigma_pc"])
        np.testing.assert_allclose(out[column], ref, rtol=0, atol=1e-13)


def test_threshold_labels():
    # the column tag of each threshold (rule of threshold_label's docstring; common practice, no source)
    assert [threshold_label(t) for t in ("20000 au", "1 pc", "0.5 pc", 2.0, 3 * u.lyr, "1e6 au")] == [
        "20000au", "1pc", "0p5pc", "2pc", "3lyr", "1000000au",
    ]  # fmt: skip
    cols = threshold_columns(["20000 au", 1 * u.pc])
    assert [c for c, _ in cols] == ["p_within_20000au", "p_within_1pc"]
    np.testing.assert_allclose(cols[0][1], (20000 * u.au).to_value(u.pc), rtol=1e-15)  # astropy's au and pc
    with pytest.raises(InputError) as info:
        threshold_columns(["1 pc", "1pc"])
    assert info.value.field == "threshold"
    with pytest.raises(InputError) as info:
        screen_chunk(make_chunk(invented_table(np.random.default_rng(1), 3)), thresholds=["-1 pc"])
    assert info.value.field == "threshold"
    assert list(screen_columns(["1 pc"]))[-2:] == ["p_within_1pc", "head_on"]


# --------------------------------------------------------------------------------------- 4. invariants


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), perm_seed=st.integers(0, 2**32 - 1))
def test_permuting_rows_permutes_the_output(seed, perm_seed):
    values, text = planted_catalogue(seed, 60)
    chunk = make_chunk(values, text)
    perm = np.random.default_rng(perm_seed).permutation(60)
    whole = screen_chunk(chunk, thresholds=THRESHOLDS)
    shuffled = screen_chunk(chunk.take(perm), thresholds=THRESHOLDS)
    assert_same(shuffled, {k: v[perm] for k, v in whole.items()})  # exactly: each row on its own


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**32 - 1))
def test_same_catalogue_in_other_units(seed):
    # the same invented stars with parallaxes in arcsec, proper motions in arcsec/yr and radial velocities in
    # m/s, converted to catalogue units by astropy before the chunk is built: the same answer (rounding of the
    # conversions only, 1e-12)
    values, text = planted_catalogue(seed, 60)
    other = dict(values)
    for name, unit in (("parallax", u.arcsec), ("parallax_error", u.arcsec), ("pmra", u.arcsec / u.yr),
                       ("pmdec", u.arcsec / u.yr), ("radial_velocity", u.m / u.s)):  # fmt: skip
        catalogue_unit = u.mas if "parallax" in name else (u.km / u.s if name == "radial_velocity" else u.mas / u.yr)
        given_in_other = (values[name] * catalogue_unit).to(unit)
        other[name] = given_in_other.to_value(catalogue_unit)
    a = screen_chunk(make_chunk(values, text), thresholds=THRESHOLDS)
    b = screen_chunk(make_chunk(other, text), thresholds=THRESHOLDS)
    np.testing.assert_array_equal(a["status"], b["status"])
    for name in NUMERIC:
        # values 1e-12; sigmas 1e-9: the analytic Jacobian forms d|v|/dv_r = r.v / |v| as a dot product, whose
        # relative rounding is 1e-16 |v| / |v_r| (1e-12 for a star with v_r / |v| = 1e-4)
        rtol = 1e-9 if "sigma" in name else 1e-12
        np.testing.assert_allclose(a[name], b[name], rtol=rtol, atol=0, equal_nan=True, err_msg=name)
    # probabilities, absolutely: a relative change e of d or sigma moves P by up to about e d / sigma, and d / sigma
    # reaches 1e3 among these rows, so 1e-12 in the inputs allows 1e-9 in P
    for name, _ in threshold_columns(THRESHOLDS):
        np.testing.assert_allclose(a[name], b[name], rtol=0, atol=1e-9, equal_nan=True, err_msg=name)


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), cut=st.integers(0, 60), block=st.integers(1, 70))
def test_splitting_a_chunk_changes_nothing(seed, cut, block):
    values, text = planted_catalogue(seed, 60)
    chunk = make_chunk(values, text)
    whole = screen_chunk(chunk, thresholds=THRESHOLDS)
    first = screen_chunk(chunk.take(np.arange(cut)), thresholds=THRESHOLDS, block_rows=block)
    second = screen_chunk(chunk.take(np.arange(cut, 60)), thresholds=THRESHOLDS)
    assert_same({k: np.concatenate([first[k], second[k]]) for k in whole}, whole)


# --------------------------------------------------------------------------------------- 5. the cut


@pytest.fixture(scope="module")
def screened():
    values, text = planted_catalogue(21, 200)
    return screen_chunk(make_chunk(values, text), thresholds=THRESHOLDS)


def test_cut_units_and_precedence(screened):
    ok = screened["status"] == "ok"
    d_pc, t, v = screened["distance_pc"], screened["time_myr"], screened["speed_kms"]
    with np.errstate(invalid="ignore"):
        # a bare number is in the column's unit; a unit is converted by astropy (au, pc, kyr, m/s, %)
        np.testing.assert_array_equal(parse_cut("distance_pc < 2")(screened), ok & (d_pc < 2))
        au_in_pc = (1.0 * u.au).to_value(u.pc)
        np.testing.assert_array_equal(parse_cut("distance_pc < 3e5 au")(screened), ok & (d_pc < 3e5 * au_in_pc))
        np.testing.assert_array_equal(
            parse_cut("distance_au <= 2 pc")(screened), ok & (screened["distance_au"] <= (2 * u.pc).to_value(u.au))
        )
        np.testing.assert_array_equal(parse_cut("time_myr > -500 kyr")(screened), ok & (t > -0.5))
        np.testing.assert_array_equal(parse_cut("speed_kms >= 30000 m / s")(screened), ok & (v >= 30.0))
        p = screened["p_within_1pc"]
        np.testing.assert_array_equal(parse_cut("p_within_1pc > 5 %")(screened), ok & (p > 0.05))
        # 'and' binds tighter than 'or' (common practice, no source)
        got = parse_cut("distance_pc < 1 or time_myr > 0 and speed_kms < 20")(screened)
        np.testing.assert_array_equal(got, ok & ((d_pc < 1) | ((t > 0) & (v < 20))))
        got = parse_cut("time_myr > 0 and speed_kms < 20 or distance_pc < 1")(screened)
        np.testing.assert_array_equal(got, ok & (((t > 0) & (v < 20)) | (d_pc < 1)))
    assert 0 < got.sum() < ok.sum()


def test_cut_text_and_terms():
    cut = parse_cut("  distance_pc<2pc   AND time_myr >= -5 Myr OR p_within_20000au>+0.01 ")
    assert isinstance(cut, Cut)
    assert cut.text == "distance_pc < 2 pc and time_myr >= -5 Myr or p_within_20000au > 0.01"
    assert [[(c.column, c.op, c.value) for c in clause] for clause in cut.clauses] == [
        [("distance_pc", "<", 2.0), ("time_myr", ">=", -5.0)], [("p_within_20000au", ">", 0.01)],
    ]  # fmt: skip
    assert parse_cut(cut.text).text == cut.text  # the normal form reads back to itself
    assert cut.columns == ("distance_pc", "time_myr", "p_within_20000au")


@pytest.mark.parametrize(
    "text",
    [
        "", "   ", "distance_pc", "distance_pc < ", "distance_pc << 2", "distance_pc = 2", "distance < 2 pc",
        "distance_pc < 2 parsnips", "distance_pc < 2 km / s", "p_within_1pc < 1 pc", "distance_pc < 2 and",
        "distance_pc < abc", "__import__('os') < 1", "p_within_3pc > 0.1", "distance_pc < 2 pc; time_myr < 0",
    ],
)  # fmt: skip
def test_malformed_cuts_are_refused(text):
    with pytest.raises(InputError) as info:
        parse_cut(text, thresholds=THRESHOLDS)
    assert info.value.field == "cut" and info.value.value == text
    message = str(info.value)
    assert "distance_au" in message or "convert" in message or "not a unit" in message


def test_cut_on_other_columns_and_status(screened):
    # a cut naming a threshold this screen lacks is refused when applied, with the columns listed
    with pytest.raises(InputError, match="p_within_5pc") as info:
        parse_cut("p_within_5pc > 0.1", thresholds=["5 pc"])(screened)
    assert info.value.field == "cut" and "distance_sigma_au" in str(info.value)
    # rows that are not ok never pass, even with numbers that would
    cols = {"status": np.array(["ok", "not_finite", "out_of_range", "ok"], dtype=object),
            "distance_pc": np.array([0.1, 0.1, 0.1, 9.0])}  # fmt: skip
    assert parse_cut("distance_pc < 1 or distance_pc >= 1")(cols).tolist() == [True, False, False, True]
    assert passes(cols).tolist() == [True, False, False, True]
    assert passes(cols, parse_cut("distance_pc > 1")).tolist() == [False, False, False, True]


# --------------------------------------------------------------------------------------- 6. mostly no rv


def test_most_rows_without_radial_velocity():
    rng = np.random.default_rng(77)
    n = 3000
    values = invented_table(rng, n)
    no_rv = rng.random(n) < 0.9
    which = rng.random(n) < 0.8  # most empty rv cells, some empty rv errors
    values["radial_velocity"][no_rv & which] = np.nan
    values["radial_velocity_error"][no_rv & ~which] = np.nan
    out = screen_chunk(make_chunk(values), thresholds=THRESHOLDS, block_rows=1000)
    assert out["row"].tolist() == list(range(n))  # every row comes back, in order
    np.testing.assert_array_equal(out["status"], np.where(no_rv, "no_radial_velocity", "ok"))
    assert out["reason"][np.flatnonzero(no_rv & which)[0]].startswith("radial_velocity = empty")
    assert out["reason"][np.flatnonzero(no_rv & ~which)[0]].startswith("radial_velocity_error = empty")
    assert np.all(np.isnan(out["distance_pc"][no_rv])) and np.all(np.isfinite(out["distance_pc"][~no_rv]))
    # a table without the radial velocity columns at all: every row says so
    del values["radial_velocity"], values["radial_velocity_error"]
    out = screen_chunk(make_chunk(values))
    assert set(out["status"]) == {"no_radial_velocity"} and len(out["status"]) == n
    assert "the column is absent" in out["reason"][0]
    # an empty block: every column, no rows
    empty = screen_chunk(make_chunk({k: v[:0] for k, v in values.items()}), thresholds=THRESHOLDS)
    assert list(empty) == list(screen_columns(THRESHOLDS)) and all(len(v) == 0 for v in empty.values())
