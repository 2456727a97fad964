"""The masses focusing uses, draw by draw, as its diagnostics record them (the encounter's impulses read them).

Outside references: scipy.stats.truncnorm with the same generator state (the normal truncated at zero that the
focusing docstring names), and the Kepler hyperbola's conservation of angular momentum q v_q = b v (Murray &
Dermott 1999, Sect. 2.5) to tie each recorded mass to the focused row it produced.
"""

import numpy as np
import pytest
from scipy.stats import truncnorm

from perierr.models import StraightLine
from perierr.models.base import Perihelion
from perierr.models.focusing import Focused, hyperbolic_perihelion

#: Invented observables of three draws (deg, deg, mas, mas/yr, mas/yr, km/s): slow, close passes.
ROWS = np.array([
    [10.0, 20.0, 300.0, 0.5, -0.3, -5.0],
    [11.0, 21.0, 310.0, 0.4, -0.2, -4.0],
    [12.0, 22.0, 320.0, 0.6, -0.4, -6.0],
])  # fmt: skip


def test_recorded_masses_are_the_truncated_normal_draws_of_the_generator():
    model = Focused(StraightLine(), mass_msun=0.3, mass_error_msun=0.2)
    out = model.evaluate_draws(ROWS, np.random.default_rng(5))
    want = truncnorm.rvs(-0.3 / 0.2, np.inf, loc=0.3, scale=0.2, size=3, random_state=np.random.default_rng(5))
    got = out.diagnostics.focusing_mass_msun
    assert got.dtype == np.float64 and got.shape == (3,)
    np.testing.assert_allclose(got, want, rtol=0, atol=0)
    # each recorded mass is the one that focused its row: q and v_q from the closed form with that mass
    raw = StraightLine().evaluate(ROWS)
    q, vq = hyperbolic_perihelion(raw.distance_pc, raw.speed_kms, got)
    np.testing.assert_allclose(out.distance_pc, q, rtol=1e-14)
    np.testing.assert_allclose(out.speed_kms, vq, rtol=1e-14)


def test_a_scalar_or_integer_mass_is_recorded_as_floats_one_per_row():
    model = Focused(StraightLine(), mass_msun=1.0)
    raw = StraightLine().evaluate(ROWS)
    for masses in (2, [1, 2, 3]):
        out = model.focus(raw, masses)
        got = out.diagnostics.focusing_mass_msun
        assert got.dtype == np.float64, masses
        np.testing.assert_array_equal(got, np.broadcast_to(np.asarray(masses, dtype=float), (3,)))
        # a copy of its own: changing the record does not change the caller's array
        got[0] = -1.0
    given = np.array([1.0, 2.0, 3.0])
    out = model.focus(raw, given)
    out.diagnostics.focusing_mass_msun[0] = 9.0
    assert given[0] == 1.0


def test_invalid_draws_get_no_mass_when_spread_out():
    # Perihelion.aligned spreads per-row diagnostics: the rows never evaluated (parallax <= 0) get NaN
    model = Focused(StraightLine(), mass_msun=0.5, mass_error_msun=0.0)
    out = model.evaluate(ROWS[:2])
    spread = out.aligned(np.array([True, False, True]))
    got = spread.diagnostics.focusing_mass_msun
    assert got[0] == pytest.approx(0.5) and np.isnan(got[1]) and got[2] == pytest.approx(0.5)
    assert isinstance(spread, Perihelion)
