"""Progress reports, the adaptive round size and the linear note on undefined correlations (perierr.propagate).

Written to kill surviving mutants of perierr.propagate.linear and perierr.propagate.montecarlo. Expected values
come from outside the package: the closed-form straight-line perihelion (t = -(r.v)/|v|^2, d = |r + v t|; common
practice, no source) with astropy's constants, numpy counts of the draws, the progress contract written in the
docstrings (montecarlo module, ForwardModel) and the first-order correlation C_ij / (sigma_i sigma_j). All stars
are invented.
"""

import json

import astropy.units as u
import numpy as np
import pytest

from perierr import StraightLine, linearize, monte_carlo
from perierr.models.base import ForwardModel, Perihelion
from perierr.propagate.montecarlo import evaluate_aligned
from perierr.sampling.gaussian import draw_gaussian
from tests.propagate.test_propagate_edges import invented_star  # an invented star with correlated errors

MAS_PER_DEG = 3.6e6  # definition of the milliarcsecond
K_AU_YR = (1 * u.au / u.yr).to_value(u.km / u.s)  # 1 au/yr in km/s (astropy)
MYR_PER_PC_KMS = (1 * u.pc / (u.km / u.s)).to_value(u.Myr)  # 1 pc / (km/s) in Myr (astropy)



def closed_form(x):
    """Straight-line (t [Myr], d [pc]) from Cartesian r, v: t = -(r.v)/|v|^2, d = |r + v t| (common practice).

    r = (1000 / parallax) pc along (ra, dec); v = v_r r_hat + k mu r (k = 1 au/yr in km/s, astropy) along the
    unit vectors of increasing ra and dec.
    """
    a, d = np.radians(x[:, 0]), np.radians(x[:, 1])
    dist = 1000.0 / x[:, 2]
    r_hat = np.stack([np.cos(d) * np.cos(a), np.cos(d) * np.sin(a), np.sin(d)], axis=-1)
    e_a = np.stack([-np.sin(a), np.cos(a), np.zeros_like(a)], axis=-1)
    e_d = np.stack([-np.sin(d) * np.cos(a), -np.sin(d) * np.sin(a), np.cos(d)], axis=-1)
    v = x[:, 5, None] * r_hat + (K_AU_YR * dist / 1000.0)[:, None] * (x[:, 3, None] * e_a + x[:, 4, None] * e_d)
    r = dist[:, None] * r_hat
    t = -np.einsum("ij,ij->i", r, v) / np.einsum("ij,ij->i", v, v)  # pc / (km/s)
    return t * MYR_PER_PC_KMS, np.linalg.norm(r + v * t[:, None], axis=1)


class Recorder:
    """A ``progress(done, total)`` callable that keeps every call (two positional arguments, as documented)."""

    def __init__(self):
        self.calls = []

    def __call__(self, done, total):
        self.calls.append((done, total))


def passes(calls):
    """Split the calls into passes, each starting at done == 0 (montecarlo module docstring)."""
    out = []
    for done, total in calls:
        if done == 0:
            out.append([])
        out[-1].append((done, total))
    return out


def assert_one_pass(calls, total):
    """The documented pass: (0, total) first, done never decreasing, (total, total) last, total fixed."""
    # montecarlo module docstring: progress is called with done = 0 before the draws go through the model, then
    # by the model as chunks finish and with done == total at the end; total counts the evaluated draws
    assert calls[0] == (0, total)
    assert calls[-1] == (total, total)
    assert all(t == total for _, t in calls)
    done = [d for d, _ in calls]
    assert done == sorted(done)


# --- progress ------------------------------------------------------------------------------------------------------


def test_monte_carlo_progress_counts_the_draws_with_positive_parallax():
    star = invented_star(parallax=2.0, parallax_error=1.0)  # parallax 2 sigma from 0: about 2 % of draws <= 0
    rec = Recorder()
    res = monte_carlo(star, StraightLine(), n=2000, seed=5, progress=rec)
    kept = res.samples.values[:, 2] > 0
    n_kept = int(np.count_nonzero(kept))
    assert 0 < 2000 - n_kept < 200  # the case under test: some, not all, draws at parallax <= 0
    assert len(passes(rec.calls)) == 1
    assert_one_pass(rec.calls, n_kept)
    # the outputs of the evaluated draws: closed form to 1e-9 relative (float rounding only)
    t, d = closed_form(res.samples.values[kept])
    np.testing.assert_allclose(res.perihelion.distance_pc[kept], d, rtol=1e-9)
    np.testing.assert_allclose(res.perihelion.time_myr[kept], t, rtol=1e-9)


def test_evaluate_aligned_progress_when_every_draw_is_kept():
    star = invented_star()
    x = draw_gaussian(star.mean, star.cov, 1500, np.random.default_rng(17))
    assert np.all(x[:, 2] > 0)  # parallax 40 sigma from 0: every draw is kept
    rec = Recorder()
    ph, valid = evaluate_aligned(StraightLine(), x, reference=star.mean, progress=rec)
    assert valid.all() and valid.shape == (1500,)
    assert_one_pass(rec.calls, 1500)
    t, d = closed_form(x)
    np.testing.assert_allclose(ph.distance_pc, d, rtol=1e-9)
    np.testing.assert_allclose(ph.time_myr, t, rtol=1e-9)


def test_evaluate_aligned_progress_when_some_draws_are_not_kept():
    star = invented_star(parallax=2.0, parallax_error=1.0)
    x = draw_gaussian(star.mean, star.cov, 1500, np.random.default_rng(18))
    kept = x[:, 2] > 0
    assert 0 < np.count_nonzero(~kept) < 150
    rec = Recorder()
    ph, valid = evaluate_aligned(StraightLine(), x, reference=star.mean, progress=rec)
    np.testing.assert_array_equal(valid, kept)
    assert_one_pass(rec.calls, int(np.count_nonzero(kept)))
    np.testing.assert_allclose(ph.distance_pc[kept], closed_form(x[kept])[1], rtol=1e-9)
    assert np.all(np.isnan(ph.distance_pc[~kept]))


# --- the adaptive mode -----------------------------------------------------------------------------------------


def test_an_adaptive_round_adds_at_least_1000_draws_and_reports_a_pass_of_its_own():
    # monte_carlo's adaptive rule (written in the function): the next round has max(need, n + 1000) draws in all,
    # need = ceil(1.2 n (worst / target)^2), capped at max_samples. With a first-round error 1 % above the target,
    # need = ceil(1.2 * 1000 * 1.0201) = 1225 < 2000, so the second round has exactly 2000 draws; with 2x the
    # draws the errors shrink by about 1/sqrt(2) (Monte Carlo 1/sqrt(n) law), below the target.
    star = invented_star()
    first = monte_carlo(star, StraightLine(), n=1000, seed=31)
    target = first.worst_relative_error() / 1.01
    rec = Recorder()
    res = monte_carlo(star, StraightLine(), n=1000, seed=31, target_error=target, progress=rec)
    assert res.n == 2000
    assert res.convergence["rounds"] == 2 and res.convergence["met"]
    assert res.worst_relative_error() <= target
    # the first round's draws come first and are the non-adaptive run's (same seed, one stream)
    np.testing.assert_array_equal(res.samples.values[:1000], first.samples.values)
    # each round is a pass of its own over every draw (module docstring)
    rounds = passes(rec.calls)
    assert len(rounds) == 2
    assert_one_pass(rounds[0], 1000)
    assert_one_pass(rounds[1], 2000)


# --- linear: undefined correlations ----------------------------------------------------------------------------


class _HugeTime(ForwardModel):
    """outputs = A x with a time row of 1e200 per mas of parallax: its linear variance overflows to inf."""

    name = "toy_huge_time"
    A = np.array([[0, 0, 1e200, 0, 0, 0], [0, 3.0, 0, 1.0, 0, 0], [0, 0, 0, 0, 1.0, -1.0]])

    def evaluate(self, observables, *, reference=None):
        y = np.asarray(observables, dtype=float) @ self.A.T
        return Perihelion(y[:, 0], y[:, 1], y[:, 2])

    def jacobian(self, point):
        return self.A


def test_linear_note_says_which_correlations_are_undefined():
    star = invented_star()
    with np.errstate(over="ignore"):
        res = linearize(star, _HugeTime())
    cov = _HugeTime.A[1:, :] @ np.array(star.cov) @ _HugeTime.A[1:, :].T  # the finite block (d, v), closed form
    assert np.isinf(res.cov[0, 0])  # 1e400 * 0.25: beyond the float range
    d = res.to_dict()
    corr = d["correlations"]
    # first-order correlation C_dv / (sigma_d sigma_v) (definition); those of the infinite variance are NaN
    # (LinearResult.corr: an infinite variance leaves its correlations undefined)
    assert corr["distance_pc|speed_kms"] == pytest.approx(cov[0, 1] / np.sqrt(cov[0, 0] * cov[1, 1]), rel=1e-12)
    assert np.isnan(corr["time_myr|distance_pc"]) and np.isnan(corr["time_myr|speed_kms"])
    # the JSON says so in words, naming the NaN it writes and the reason (LinearResult.to_dict)
    assert corr["note"] == (
        "undefined (NaN) where an output's linear variance is infinite or not finite (inputs beyond the float range)"
    )
    assert set(corr) == {"time_myr|distance_pc", "time_myr|speed_kms", "distance_pc|speed_kms", "note"}
    json.dumps(d)  # NaN is written as JSON's NaN token by the standard library
    # a finite covariance has no note
    assert "note" not in linearize(star, StraightLine()).to_dict()["correlations"]
