"""Edges of the model layer left open after the restructuring: ModelDiagnostics, Perihelion.aligned,
make_model's focusing options, the focusing wrapper and the straight-line Jacobian's head-on test.

Written for the mutation run of the frames_models group; the reference of each check is named next to it
(closed forms written here, astropy constants, the documented rules in the docstrings). All stars are invented.
"""

import importlib
import math
import warnings

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

import perierr.models as pm
from perierr.errors import InputError
from perierr.models import FocusingDiagnostics, ModelDiagnostics, StraightLine, make_model
from perierr.models.base import ForwardModel, Perihelion
from perierr.models.focusing import Focused, FocusingError
from perierr.models.straight import perihelion_cartesian_jacobian

# astropy: G M_sun in pc (km/s)^2, the gravitational parameter of one solar mass
G_ASTROPY = float((const.G * const.M_sun).to_value(u.pc * u.km**2 / u.s**2))
# astropy: Myr to travel 1 pc at 1 km/s
MYR_PER_PC_PER_KMS = float((1.0 * u.pc / (u.km / u.s)).to_value(u.Myr))


def _pericentre(b, v, mass):
    """Two-body hyperbola (Murray & Dermott 1999, Sect. 2.5, from memory): q = sqrt(b^2 + (mu/v^2)^2) - mu/v^2."""
    mu = G_ASTROPY * (1.0 + np.asarray(mass, dtype=float))
    a = mu / np.asarray(v, dtype=float) ** 2
    return np.sqrt(np.asarray(b, dtype=float) ** 2 + a * a) - a


# ----------------------------------------------------------------------------- make_model and lazy submodules


def test_a_mass_error_without_a_mass_is_refused_naming_the_field():
    # documented rule (make_model docstring): star_mass_error_msun only goes with star_mass_msun
    with pytest.raises(InputError) as exc:
        make_model("straight_line", star_mass_error_msun=0.3)
    assert exc.value.field == "star_mass_error_msun"
    assert exc.value.value == 0.3
    assert "star_mass_msun" in exc.value.expected


def test_the_heavy_submodules_load_on_request_and_other_names_are_attribute_errors():
    # PEP 562 module __getattr__: called for names the module does not have; orbit and focusing are the
    # documented lazily loaded submodules (perierr/models/__init__.py docstring)
    for name in ("orbit", "focusing"):
        assert pm.__getattr__(name) is importlib.import_module(f"perierr.models.{name}")
    # the standard AttributeError text of a module without the name (Python data model, from memory)
    with pytest.raises(AttributeError, match=r"^module 'perierr\.models' has no attribute 'no_such_model'$"):
        pm.__getattr__("no_such_model")
    with pytest.raises(AttributeError):
        pm.no_such_model  # noqa: B018


# ----------------------------------------------------------------------------- ModelDiagnostics


def test_unknown_keys_named_extra_or_order_survive_the_round_trip():
    # documented rule (from_info): any key that is not a field is kept, so to_dict() gives back every key and
    # value in the mapping's order; "extra" and "order" are bookkeeping, not reported fields
    info = {"order": "as given", "model": "demo", "extra": 3, "n_checked": 7}
    d = ModelDiagnostics.from_info(info)
    assert d.model == "demo" and d.n_checked == 7
    assert d.extra == {"order": "as given", "extra": 3}
    assert list(d.to_dict().items()) == list(info.items())


def test_mapping_fields_other_than_focusing_stay_typed():
    # documented rule (from_info): keys that are fields become fields; only a "focusing" mapping is read as
    # FocusingDiagnostics
    rows = {"time_myr": np.array([1.0, 2.0]), "distance_pc": np.array([0.5, 0.7]), "speed_kms": np.array([3.0, 4.0])}
    median = {"time_myr": 0.1, "distance_pc": -0.02, "speed_kms": 0.0}
    d = ModelDiagnostics.from_info({"model": "orbit", "straight_line": rows, "model_difference_median": median})
    assert d.straight_line is rows
    assert d.model_difference_median is median
    assert d.extra == {}
    # the per-row mapping is then spread by aligned()
    spread = d.aligned([True, False, True]).straight_line
    assert_array_equal(spread["distance_pc"], [0.5, np.nan, 0.7])


def test_repr_shows_only_reported_fields_and_per_row_arrays_by_length():
    # documented rule (__repr__ docstring): only the reported fields, per-row arrays by their length
    assert repr(ModelDiagnostics()) == "ModelDiagnostics()"
    rows = {"time_myr": np.zeros(3), "distance_pc": np.zeros(3), "speed_kms": np.zeros(3)}
    d = ModelDiagnostics(
        model="orbit", n_checked=5, straight_line=rows, focusing_delta_distance_pc=np.zeros(4),
        extra={"note": "x"}, order=("n_checked", "model"),
    )  # fmt: skip
    assert repr(d) == (
        "ModelDiagnostics(model='orbit', n_checked=5, straight_line=<3 rows>, focusing_delta_distance_pc=<4 rows>, "
        "extra={'note': 'x'}, order=('n_checked', 'model'))"
    )


# ----------------------------------------------------------------------------- Perihelion.aligned


def _rows_with_diagnostics():
    diag = ModelDiagnostics(
        model="orbit",
        straight_line={"time_myr": np.array([-1.0, -2.0]), "distance_pc": np.array([0.3, 0.4]),
                       "speed_kms": np.array([20.0, 30.0])},
        focusing_delta_distance_pc=np.array([-1e-6, -2e-6]),
        focusing_delta_speed_kms=np.array([0.01, 0.02]),
    )  # fmt: skip
    return diag


def test_aligned_spreads_outputs_flags_and_per_row_diagnostics_over_a_0_1_mask():
    # documented rule (Perihelion.aligned): rows go to the True places of the mask, NaN outputs and a False
    # flag elsewhere; per-row diagnostics are spread the same way. A 0/1 list is read as booleans.
    p = Perihelion(np.array([-1.5, -2.5]), np.array([0.25, 0.35]), np.array([21.0, 31.0]),
                   flags=np.array([True, False]), diagnostics=_rows_with_diagnostics())  # fmt: skip
    mask = [1, 0, 0, 1]
    out = p.aligned(mask)
    assert_array_equal(out.time_myr, [-1.5, np.nan, np.nan, -2.5])
    assert_array_equal(out.distance_pc, [0.25, np.nan, np.nan, 0.35])
    assert_array_equal(out.speed_kms, [21.0, np.nan, np.nan, 31.0])
    assert out.flags.dtype == bool
    assert_array_equal(out.flags, [True, False, False, False])
    assert out.diagnostics.model == "orbit"
    assert_array_equal(out.diagnostics.straight_line["time_myr"], [-1.0, np.nan, np.nan, -2.0])
    assert_array_equal(out.diagnostics.straight_line["speed_kms"], [20.0, np.nan, np.nan, 30.0])
    assert_array_equal(out.diagnostics.focusing_delta_distance_pc, [-1e-6, np.nan, np.nan, -2e-6])
    assert_array_equal(out.diagnostics.focusing_delta_speed_kms, [0.01, np.nan, np.nan, 0.02])
    # ModelDiagnostics.aligned on its own reads the same mask the same way
    assert_array_equal(_rows_with_diagnostics().aligned(mask).straight_line["distance_pc"],
                       [0.3, np.nan, np.nan, 0.4])  # fmt: skip


def test_aligned_without_flags_keeps_none():
    # documented rule (Perihelion attributes): flags are optional; no flags stay no flags
    p = Perihelion(np.array([1.0]), np.array([2.0]), np.array([3.0]))
    out = p.aligned(np.array([False, True]))
    assert out.flags is None
    assert_array_equal(out.distance_pc, [np.nan, 2.0])


# ----------------------------------------------------------------------------- the focusing wrapper


def test_unparsable_masses_are_focusing_errors_naming_the_field():
    # documented rule (FocusingError is the InputError of focusing options): expected a finite mass >= 0
    for kwargs, field in (({"mass_msun": "heavy"}, "mass_msun"), ({"mass_msun": 1.0, "mass_error_msun": None},
                                                                  "mass_error_msun")):  # fmt: skip
        with pytest.raises(FocusingError) as exc:
            Focused(StraightLine(), **kwargs)
        assert exc.value.field == field


class _Jittered(ForwardModel):
    """A base model with a nuisance of its own: impact parameter 1 pc scaled by a uniform draw per row."""

    name = "jittered"

    def evaluate(self, observables, *, reference=None):
        n = np.atleast_2d(observables).shape[0]
        return Perihelion(np.zeros(n), np.ones(n), np.full(n, 25.0))

    def evaluate_draws(self, observables, rng=None, *, reference=None):
        p = self.evaluate(observables)
        if rng is None:
            return p
        return Perihelion(p.time_myr, p.distance_pc * (1.0 + rng.uniform(size=p.distance_pc.size)), p.speed_kms)


def test_the_wrapped_models_draws_come_first_from_the_same_generator():
    # documented rule (Focused.evaluate_draws): the wrapped model draws first from rng, then the masses
    # (a normal truncated at 0, scipy.stats.truncnorm); pericentres from the two-body closed form above
    from scipy.stats import truncnorm

    n, seed = 5, 20261202
    model = Focused(_Jittered(), mass_msun=1.5, mass_error_msun=0.4)
    got = model.evaluate_draws(np.zeros((n, 6)), np.random.default_rng(seed))
    replay = np.random.default_rng(seed)
    b = 1.0 + replay.uniform(size=n)
    mass = truncnorm.rvs(-1.5 / 0.4, np.inf, loc=1.5, scale=0.4, size=n, random_state=replay)
    # closed form in double precision: b ~ 1 pc, mu/v^2 ~ 1.7e-5 pc, so rounding is ~1e-15 relative
    assert_allclose(got.distance_pc, _pericentre(b, 25.0, mass), rtol=1e-12, atol=0)


def test_zero_distance_rows_count_as_no_relative_change():
    # documented rule (FocusingDiagnostics): median of change/unfocused d_ph; a head-on row (b = 0) keeps
    # q = 0 (closed form above), so its change is 0 and it counts as a relative change of 0
    raw = Perihelion(np.zeros(5), np.array([0.0, 0.0, 0.0, 1.0, 2.0]), np.full(5, 30.0))
    out = Focused(StraightLine(), mass_msun=1.0).focus(raw, 1.0)
    summary = out.diagnostics.focusing
    assert isinstance(summary, FocusingDiagnostics)
    assert summary.n_head_on == 3
    # three of five relative changes are 0 and the others are negative: the median is exactly 0
    assert summary.median_relative_delta_distance == 0.0
    assert_allclose(summary.median_delta_distance_pc, 0.0, atol=0)
    assert_allclose(summary.max_abs_delta_distance_pc, 2.0 - _pericentre(2.0, 30.0, 1.0), rtol=1e-9)


# ----------------------------------------------------------------------------- straight line: at rest, head-on


def test_a_star_at_rest_is_reported_now_with_a_plus_zero_time():
    # documented rule (StraightLine.evaluate): no relative motion, report now: t = 0, d = 1000/plx, v = 0;
    # the time is +0.0 (a JSON "0.0", not "-0.0")
    p = StraightLine().evaluate(np.array([[10.0, 20.0, 4.0, 0.0, 0.0, 0.0]]))
    assert p.time_myr[0] == 0.0 and not np.signbit(p.time_myr[0])
    assert_allclose(p.distance_pc, [250.0], rtol=1e-15)  # 1000 mas pc / 4 mas (definition of the parsec)
    assert_array_equal(p.flags, [True])


def _expected_time_row(x, v):
    """d t_ph / d(x, v) of t_ph = -(x.v)/|v|^2 (closed form, in Myr per pc and per km/s)."""
    vv = v @ v
    return np.concatenate([-v / vv, -x / vv + 2.0 * (x @ v) * v / vv**2]) * MYR_PER_PC_PER_KMS


def test_the_head_on_threshold_is_relative_to_each_stars_distance():
    # documented rule (HEAD_ON_RELATIVE = 1e-9): d_ph below 1e-9 of the star's distance is head-on, its
    # d_ph row is zero; above, the row is (u, t_ph u) with u the unit separation (closed form)
    near = np.array([10.0, 5e-9, 0.0, -20.0, 0.0, 0.0])      # d_ph / |x| = 5e-10: head-on
    off = np.array([10.0, 5e-8, 0.0, -20.0, 0.0, 0.0])       # d_ph / |x| = 5e-9: not head-on
    far = np.array([1000.0, 30.0, 0.0, -20.0, 0.0, 0.0])     # another star of the same batch
    jac = perihelion_cartesian_jacobian(np.stack([near, off, far]))
    assert_array_equal(jac[0, 1], np.zeros(6))
    # off: closest point (0, 5e-8, 0) at t = 0.5 pc/(km/s): u = (0, 1, 0)
    assert_allclose(jac[1, 1], [0.0, 1.0, 0.0, 0.0, 0.5, 0.0], rtol=1e-12, atol=1e-15)
    # far: closest point (0, 30, 0) at t = 50 pc/(km/s)
    assert_allclose(jac[2, 1], [0.0, 1.0, 0.0, 0.0, 50.0, 0.0], rtol=1e-12, atol=1e-15)
    for k, xv in enumerate((near, off, far)):
        assert_allclose(jac[k, 0], _expected_time_row(xv[:3], xv[3:]), rtol=1e-12)
    # one star alone gives the same rows as in the batch
    assert_allclose(perihelion_cartesian_jacobian(off), jac[1], rtol=0, atol=0)


def test_a_star_at_the_sun_or_a_vanishing_separation_gives_a_zero_distance_row_quietly():
    # documented rule: an exactly head-on path has no d_ph derivative, its row is zero (never NaN or inf).
    # x = 0 (star at the Sun) and a separation so small that |closest|^2 underflows to 0 (IEEE 754 doubles)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        for xv in ([0.0, 0.0, 0.0, 10.0, 5.0, -3.0], [1e-170, 0.0, 0.0, 0.0, 4.0, 0.0]):
            xv = np.array(xv)
            jac = perihelion_cartesian_jacobian(xv)
            assert_array_equal(jac[1], np.zeros(6))
            assert_allclose(jac[0], _expected_time_row(xv[:3], xv[3:]), rtol=1e-12, atol=0)
            assert_allclose(jac[2, 3:], xv[3:] / math.sqrt(xv[3:] @ xv[3:]), rtol=1e-15)
