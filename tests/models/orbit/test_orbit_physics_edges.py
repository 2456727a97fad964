"""Edges of the orbit model's building blocks: potentials, presets, Sun, grid, integrators, map tables.

Every check compares with something outside the code under test: closed forms written here (harmonic motion,
the classical Runge-Kutta stability function, Hermite cubics, straight-line and polynomial relative orbits),
scipy's DOP853, astropy's Galactocentric frame, and the rules stated in the docstrings.
"""

import math
import re

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import brentq
from scipy.special import gammainc

from perierr.models.orbit.grid import window_and_nodes
from perierr.models.orbit.integrate import (
    _solve_both_ways,
    grid_minimum_start,
    hermite,
    integrate_relative,
    newton_perihelion,
    relative_derivative,
)
from perierr.models.orbit.potentials import (
    G_PC_KMS2_PER_MSUN,
    NFW,
    CompositePotential,
    Hernquist,
    MiyamotoNagai,
    Plummer,
    Potential,
    PotentialParameterError,
    PowerLawCutoff,
)
from perierr.models.orbit.presets import get_potential, normalize_by_force_fraction
from perierr.models.orbit.sun import SolarParameterError, get_solar_parameters
from perierr.models.orbit.transition import MapTables, _derivative, features, variational_tables
from perierr.units import MYR_PER_PC_PER_KMS

from .test_potentials import _fd_grad as _fd  # central differences along the three axes (textbook numerics)

# ---------------------------------------------------------------- potentials: parameters and descriptions

VALID = {
    Plummer: {"mass_msun": 1e10, "b_pc": 700.0},
    Hernquist: {"mass_msun": 3e10, "a_pc": 500.0},
    NFW: {"mass_msun": 4.4e11, "a_pc": 16000.0},
    PowerLawCutoff: {"mass_msun": 4.5e9, "alpha": 1.8, "rc_pc": 1900.0},
    MiyamotoNagai: {"mass_msun": 6.8e10, "a_pc": 3000.0, "b_pc": 280.0},
}
POSITIVE_FIELDS = [(cls, f) for cls, kw in VALID.items() for f in kw if f != "alpha"]


@pytest.mark.parametrize("bad", [0.0, -2.5, float("nan"), float("inf")])
@pytest.mark.parametrize(("cls", "field"), POSITIVE_FIELDS, ids=[f"{c.__name__}-{f}" for c, f in POSITIVE_FIELDS])
def test_bad_shape_parameters_name_the_component_field_and_value(cls, field, bad):
    # project rule: a bad value raises a clear error naming the owner, the field and the value; scales and masses
    # must be finite and positive (the formulas divide by them; zero mass is no potential)
    kwargs = dict(VALID[cls], **{field: bad})
    expected = f"{field} = {float(bad)!r}: expected a finite positive number (a parameter of {cls.__name__})"
    with pytest.raises(PotentialParameterError, match=re.escape(expected)):
        cls(**kwargs)


def test_power_law_slope_range_is_closed_below_and_open_above():
    # Bovy 2015, Sect. 3.5: the closed-form potential needs 0 <= alpha < 2 (docstring of PowerLawCutoff);
    # at alpha = 0 the enclosed mass is M P(3/2, r^2/rc^2) (regularised lower incomplete gamma)
    for alpha in (0.0, 0.5, 1.0, 1.999):
        pot = PowerLawCutoff(mass_msun=1e9, alpha=alpha, rc_pc=1000.0)
        assert pot.alpha == alpha
    flat = PowerLawCutoff(mass_msun=1e9, alpha=0.0, rc_pc=1000.0)
    r = 700.0
    acc = flat.acceleration(np.array([r, 0.0, 0.0]))[0]
    assert acc == pytest.approx(-G_PC_KMS2_PER_MSUN * 1e9 * gammainc(1.5, (r / 1000.0) ** 2) / r**2, rel=1e-13)
    for alpha in (2.0, -0.1, 3.0):
        expected = re.escape(f"alpha = {alpha!r}: expected 0 <= alpha < 2 (PowerLawCutoff)")
        with pytest.raises(PotentialParameterError, match=expected):
            PowerLawCutoff(mass_msun=1e9, alpha=alpha, rc_pc=1000.0)


def test_describe_gives_type_and_parameters_of_every_component():
    # JSON contract: each component describes itself as {"type": class name, **its parameters}, a sum as
    # {"type": "composite", "components": [...]}; the values are the constructor's
    for cls, kw in VALID.items():
        assert cls(**kw).describe() == {"type": cls.__name__, **kw}
    a, b = Plummer(**VALID[Plummer]), MiyamotoNagai(**VALID[MiyamotoNagai])
    assert (a + b).describe() == {
        "type": "composite",
        "components": [{"type": "Plummer", **VALID[Plummer]}, {"type": "MiyamotoNagai", **VALID[MiyamotoNagai]}],
    }


def test_composite_needs_potentials_and_scales_all_parts():
    expected = re.escape("components = (): expected a non-empty tuple of Potential objects")
    with pytest.raises(PotentialParameterError, match=expected):
        CompositePotential(())
    with pytest.raises(PotentialParameterError, match="components = "):
        CompositePotential((Plummer(**VALID[Plummer]), "disk"))
    # a scaled sum is the sum of the scaled parts (Phi is linear in the masses): Phi(2 M) = 2 Phi(M)
    pot = Plummer(**VALID[Plummer]) + MiyamotoNagai(**VALID[MiyamotoNagai])
    x = np.array([[5000.0, -2000.0, 300.0], [100.0, 50.0, -20.0]])
    doubled = pot.scaled(2.0)
    assert isinstance(doubled, CompositePotential)
    assert np.allclose(doubled.potential(x), 2.0 * pot.potential(x), rtol=1e-14, atol=0)
    assert doubled.components[1].mass_msun == 2.0 * VALID[MiyamotoNagai]["mass_msun"]


def test_fused_derivatives_of_a_disk_plus_one_sphere_match_finite_differences():
    # a sum with fewer than two spherical parts takes each part's own fused derivatives: compare the Hessian and
    # the third derivatives with central differences of the lower derivative (truncation ~ h^2 Phi'''' / 6 with
    # h = 1e-5 r, far below the scale lengths)
    pot = MiyamotoNagai(**VALID[MiyamotoNagai]) + Hernquist(**VALID[Hernquist])
    rng = np.random.default_rng(11)
    for x in rng.uniform(-9000.0, 9000.0, size=(3, 3)):
        acc, hes, third = pot.derivatives(x)
        h = 1e-5 * np.linalg.norm(x)
        assert np.allclose(acc, -_fd(pot.potential, x, h), rtol=1e-6, atol=1e-9 * np.abs(acc).max())
        assert np.allclose(hes, -_fd(pot.acceleration, x, h), rtol=1e-6, atol=1e-8 * np.abs(hes).max())
        assert np.allclose(third, _fd(pot.hessian, x, h), rtol=1e-5, atol=1e-7 * np.abs(third).max())


def test_circular_speed_of_a_plummer_sphere_on_an_array_of_radii():
    # Plummer 1911 / Binney & Tremaine 2008 eq. 2.44b: v_c^2 = G M r^2 / (r^2 + b^2)^(3/2)
    m, b = 1e10, 700.0
    r = np.array([[100.0, 700.0], [3000.0, 12000.0]])
    vc = Plummer(mass_msun=m, b_pc=b).circular_speed(r)
    assert vc.shape == r.shape
    assert np.allclose(vc, np.sqrt(G_PC_KMS2_PER_MSUN * m * r**2 / (r**2 + b**2) ** 1.5), rtol=1e-13, atol=0)


# ---------------------------------------------------------------- presets


def test_mwpotential2014_describe_and_references():
    # Bovy 2015, ApJS 216, 29, Table 1 (from memory): R0 = 8 kpc, v_c = 220 km/s, bulge alpha = 1.8 and
    # r_c = 1.9 kpc, Miyamoto-Nagai a = 3 kpc and b = 0.28 kpc, NFW a = 16 kpc
    desc = get_potential().describe()
    assert desc["name"] == "MWPotential2014"
    assert desc["normalization"] == {"radius_pc": 8000.0, "v_circ_kms": 220.0}
    ref = "Bovy 2015, ApJS 216, 29, Table 1"
    assert desc["references"] == {
        "R0, v_c": ref,
        "bulge alpha, r_c, force fraction 0.05": ref,
        "disk a, b, force fraction 0.60": ref,
        "halo scale radius, force fraction 0.35": ref,
    }
    types = [(c["type"], c.get("alpha"), c.get("rc_pc"), c.get("a_pc"), c.get("b_pc")) for c in desc["components"]]
    assert types == [
        ("PowerLawCutoff", 1.8, 1900.0, None, None),
        ("MiyamotoNagai", None, None, 3000.0, 280.0),
        ("NFW", None, None, 16000.0, None),
    ]


def test_force_fraction_normalisation_needs_one_fraction_per_component():
    shapes = (Plummer(mass_msun=1.0, b_pc=500.0), NFW(mass_msun=1.0, a_pc=10000.0))
    expected = re.escape("fractions = (1.0,): expected as many fractions as components (2)")
    with pytest.raises(PotentialParameterError, match=expected):
        normalize_by_force_fraction(shapes, (1.0,), 8000.0, 220.0)
    expected = re.escape("fractions = (): expected as many fractions as components (0), at least one")
    with pytest.raises(PotentialParameterError, match=expected):
        normalize_by_force_fraction((), (), 8000.0, 220.0)
    # definition: the parts supply 30 % and 70 % of v_c^2 / R at R
    pot = normalize_by_force_fraction(shapes, (0.3, 0.7), 8000.0, 200.0)
    fr = [-c.acceleration(np.array([8000.0, 0.0, 0.0]))[0] * 8000.0 / 200.0**2 for c in pot.components]
    assert fr == pytest.approx([0.3, 0.7], rel=1e-13)


# ---------------------------------------------------------------- the Sun


def test_solar_parameter_sets_record_name_and_references():
    # the default set is Bovy 2015's; references as cited in sun.py (values checked elsewhere)
    bovy = get_solar_parameters()
    assert bovy.name == "bovy2015"
    assert bovy.references == {
        "r0_pc": "Bovy 2015, ApJS 216, 29",
        "z_pc": "Bennett & Bovy 2019, MNRAS 482, 1417",
        "v_circ_kms": "Bovy 2015, ApJS 216, 29",
        "u_kms, v_kms, w_kms": "Schoenrich, Binney & Dehnen 2010, MNRAS 403, 1829",
    }
    astro = get_solar_parameters("astropy_v4")
    assert astro.references == {
        "r0_pc": "GRAVITY Collaboration 2018, A&A 615, L15 (distance 8.122 kpc)",
        "z_pc": "Bennett & Bovy 2019, MNRAS 482, 1417",
        "v_circ_kms, u_kms, w_kms": "Drimmel & Poggio 2018, RNAAS 2, 210 (total solar velocity)",
    }
    assert bovy.as_dict()["references"] == bovy.references


def test_solar_parameters_replace_and_validation():
    base = get_solar_parameters("bovy2015")
    mod = base.replace(z_pc=50.0, v_kms=5.0)
    assert mod.name == "bovy2015+modified"
    assert (mod.r0_pc, mod.z_pc, mod.v_kms, mod.u_kms) == (8000.0, 50.0, 5.0, 11.1)
    assert base.replace(r0_pc=8200.0, name="mine").name == "mine"
    with pytest.raises(SolarParameterError, match=re.escape("solar parameter = ['r0', 'zz']: unknown")):
        base.replace(r0=1.0, zz=2.0)
    with pytest.raises(SolarParameterError, match=re.escape("w_kms = nan: expected a finite number")):
        base.replace(w_kms=float("nan"))
    for r0 in (0.0, 0):
        expected = re.escape(f"r0_pc = {float(r0)!r}: expected a positive distance in pc")
        with pytest.raises(SolarParameterError, match=expected):
            base.replace(r0_pc=r0)
    assert base.replace(r0_pc=0.5).r0_pc == 0.5  # any positive radius is allowed


def test_frame_puts_the_sun_at_its_radius_and_height():
    # astropy Galactocentric (Astropy Collaboration 2022): with galcen_distance d = sqrt(r0^2 + z^2) and z_sun,
    # the Sun sits at (-r0, 0, z); its velocity is galcen_v_sun = (U, v_c + V, W)
    import astropy.coordinates as coord
    import astropy.units as u

    sp = get_solar_parameters("bovy2015").replace(z_pc=55.0, r0_pc=8100.0)
    rot, sun = sp.frame()
    assert np.allclose(sun[:3], [-8100.0, 0.0, 55.0], rtol=0, atol=1e-8)
    assert np.allclose(sun[3:], [11.1, 232.24, 7.25], rtol=0, atol=1e-10)
    # the rotation maps ICRS axes as astropy's frame does (a point 1 kpc from the Sun along ICRS x)
    frame = coord.Galactocentric(
        galcen_distance=math.hypot(8100.0, 55.0) * u.pc, z_sun=55.0 * u.pc,
        galcen_v_sun=coord.CartesianDifferential([11.1, 232.24, 7.25] * (u.km / u.s)),
    )  # fmt: skip
    p = coord.ICRS(coord.CartesianRepresentation([300.0, -200.0, 100.0] * u.pc)).transform_to(frame)
    assert np.allclose(p.cartesian.xyz.to_value(u.pc) - sun[:3], rot @ [300.0, -200.0, 100.0], atol=1e-8)


# ---------------------------------------------------------------- grid rules

C = MYR_PER_PC_PER_KMS  # Myr per pc/(km/s), from astropy units (0.9778)


def _check_nodes(nodes, lo, hi, step):
    # docstring: increasing, containing 0 once, from lo to hi [Myr], equal spacing on each side of at most step
    t = nodes * C
    assert np.all(np.diff(t) > 0) and np.count_nonzero(t == 0.0) == 1
    assert t[0] == pytest.approx(lo, abs=1e-12) and t[-1] == pytest.approx(hi, abs=1e-12)
    neg, pos = t[t <= 0], t[t >= 0]
    for side, width in ((neg, -lo), (pos, hi)):
        n = math.ceil(width / step) if width > 0 else 0
        assert side.size == n + 1
        if n:
            assert np.allclose(np.diff(side), width / n, rtol=1e-12)


@pytest.mark.parametrize(
    ("horizon", "speed", "step", "travel", "expected_step"),
    [
        ((-3.2, 1.1), 10.0, 0.5, 10.0, 0.5),  # the time step binds
        ((-3.2, 1.1), 100.0, 0.5, 10.0, 10.0 / 100.0 * C),  # 10 pc of travel binds
        ((-2.0, 0.0), 0.5, 5.0, 2.0, 2.0 / 0.5 * C),  # slow: 2 pc at 0.5 km/s
        ((0.0, 2.5), 1e-6, 0.7, 1.0, 0.7),  # speed floored at 1e-3 km/s
    ],
)
def test_grid_nodes_follow_the_step_rule(horizon, speed, step, travel, expected_step):
    (lo, hi), nodes = window_and_nodes(horizon, speed, grid_step_myr=step, grid_travel_pc=travel)
    assert (lo, hi) == horizon
    _check_nodes(nodes, lo, hi, expected_step)


# ---------------------------------------------------------------- a harmonic potential, all closed forms


class _Harmonic(Potential):
    """Isotropic harmonic potential Phi = w^2 |x|^2 / 2: relative orbits are s(t) = s0 cos wt + w0 sin wt / w.

    Implements only what the base class requires (no own ``derivatives``).
    """

    def __init__(self, omega):
        self.omega = omega

    @staticmethod
    def _positions(x):
        x = np.asarray(x)
        if x.dtype.kind != "f" or x.shape[-1:] != (3,):
            raise TypeError(f"positions of shape (..., 3) expected, got {x!r}")
        return x

    def potential(self, x):
        return 0.5 * self.omega**2 * np.sum(self._positions(x) ** 2, axis=-1)

    def acceleration(self, x):
        return -(self.omega**2) * self._positions(x)

    def hessian(self, x):
        x = self._positions(x)
        return np.broadcast_to(self.omega**2 * np.eye(3), x.shape[:-1] + (3, 3)).copy()

    def third_derivatives(self, x):
        return np.zeros(self._positions(x).shape[:-1] + (3, 3, 3))

    def scaled(self, factor):
        return _Harmonic(self.omega * math.sqrt(factor))

    def describe(self):
        return {"type": "harmonic", "omega": self.omega}


OMEGA = 0.3


def _harmonic_flow(t):
    """6x6 flow matrix of s'' = -w^2 s at time t (closed form)."""
    c, s = np.cos(OMEGA * t), np.sin(OMEGA * t)
    eye = np.eye(3)
    return np.block([[c * eye, s / OMEGA * eye], [-OMEGA * s * eye, c * eye]])


_A = np.block([[np.zeros((3, 3)), np.eye(3)], [-(OMEGA**2) * np.eye(3), np.zeros((3, 3))]])
SUN0 = np.array([1.0, -0.5, 0.2, 0.1, 0.3, -0.2])  # near the centre: no rounding from large coordinates


def test_variational_tables_of_harmonic_motion_match_the_closed_form():
    # relative motion in a harmonic potential is linear: state = flow(t) s0, Phi1 = flow(t), Phi2 = 0
    # (Park & Scheeres 2006 for the map; the flow of s'' = -w^2 s from any mechanics textbook); the directly
    # integrated extra states follow the same closed form, their derivatives are (w, -w^2 s)
    nodes = np.array([-4.0, -1.5, 0.0, 1.0, 3.5])
    refs = [[20, -10, 5, 1, 2, -1], [-30, 4, 8, -2, 0, 3]]  # integers on purpose: taken as floats
    extra = np.array([[7.0, 1.0, -2.0, 0.5, -0.4, 0.2], [-3.0, 6.0, 1.0, 0.0, 1.0, -1.0]])
    tab = variational_tables(_Harmonic(OMEGA), SUN0, refs, nodes, rtol=1e-12, atol=1e-12, extra=extra)
    assert tab.refs.dtype == np.float64 and np.array_equal(tab.refs, np.array(refs, dtype=float))
    flows = np.stack([_harmonic_flow(t) for t in nodes])  # (m, 6, 6)
    refs_f = np.asarray(refs, dtype=float)
    for kk in range(2):
        states = flows @ refs_f[kk]
        assert np.allclose(tab.table[kk, :, 0, :6], states, rtol=0, atol=1e-9)
        assert np.allclose(tab.table[kk, :, 0, 6:], states @ _A.T, rtol=0, atol=1e-9)
        assert np.allclose(tab.table[kk, :, 1:7, :6], np.swapaxes(flows, 1, 2), rtol=0, atol=1e-10)
        assert np.allclose(tab.table[kk, :, 1:7, 6:], np.swapaxes(_A @ flows, 1, 2), rtol=0, atol=1e-10)
        assert np.abs(tab.table[kk, :, 7:, :]).max() < 1e-12
    es, ed = tab.extra
    assert es.shape == (5, 2, 6) and ed.shape == (5, 2, 6)
    assert np.allclose(es, np.einsum("mij,ej->mei", flows, extra), rtol=0, atol=1e-9)
    assert np.allclose(ed, np.einsum("ij,mej->mei", _A, es), rtol=0, atol=1e-12)
    no_extra = variational_tables(_Harmonic(OMEGA), SUN0, refs, nodes, rtol=1e-12, atol=1e-12)
    assert no_extra.extra is None


def test_derivatives_keep_batch_shapes():
    # documented shapes: the Sun's derivative is (..., 6) = (velocity, acceleration) for a batch of Suns too
    pot = _Harmonic(OMEGA)
    sun = np.array([SUN0, 2.0 * SUN0])
    rel = np.arange(24.0).reshape(2, 2, 6)
    dsun, drel = relative_derivative(pot, sun, rel)
    expected_sun = np.hstack([sun[:, 3:], -(OMEGA**2) * sun[:, :3]])
    assert dsun.shape == (2, 6) and np.allclose(dsun, expected_sun, rtol=1e-15, atol=0)
    assert np.allclose(drel, rel @ _A.T, rtol=1e-12, atol=1e-13)
    y = np.zeros((2, 1, 258))
    y[..., :6] = rel[:, :1]
    dsun2, dy = _derivative(pot, sun, y)
    assert dsun2.shape == (2, 6) and np.allclose(dsun2, expected_sun, rtol=1e-15, atol=0)
    assert np.allclose(dy[..., :6], rel[:, :1] @ _A.T, rtol=1e-12, atol=1e-13)


def test_solve_both_ways_is_dop853_to_every_node_with_the_given_tolerances():
    # scipy's DOP853 run here from t = 0 to the nodes on each side (Hairer et al. 1993, Sect. II.5); loose rtol
    # and tight atol on small values, so that the method and both tolerances change the numbers
    def fun(_t, y):
        return np.array([y[1], -4.0 * y[0] * (1.0 + y[0] ** 2)])

    y0 = np.array([1e-3, 2e-3])
    for nodes in (np.array([-3.0, -1.0, -0.5, 0.0]), np.array([-2.0, 0.0, 0.7, 2.5])):
        got = _solve_both_ways(fun, y0, nodes, 1e-3, 1e-12)
        for sel in (nodes > 0, nodes < 0):
            if sel.any():
                t_eval = nodes[sel] if nodes[sel][0] > 0 else nodes[sel][::-1]
                ref = solve_ivp(fun, (0.0, t_eval[-1]), y0, method="DOP853", t_eval=t_eval, rtol=1e-3, atol=1e-12)
                assert np.allclose(got[sel], ref.y.T[:: 1 if t_eval[0] > 0 else -1], rtol=1e-13, atol=0)
        assert np.array_equal(got[nodes == 0.0][0], y0)


def test_integrate_relative_follows_harmonic_motion_backwards_only():
    # closed form s(t) = flow(t) s0; a grid that ends at now integrates only backwards
    nodes = np.array([-6.0, -3.0, -1.0, 0.0])
    rel = np.array([[1e-6, -2e-6, 3e-6, 1e-7, 0.0, -2e-7]])
    states, derivs, sun = integrate_relative(_Harmonic(OMEGA), SUN0, rel, nodes, rtol=1e-11, atol=1e-18)
    exact = np.stack([_harmonic_flow(t) @ rel[0] for t in nodes])
    assert np.allclose(states[:, 0], exact, rtol=0, atol=1e-15)
    assert np.allclose(derivs[:, 0], exact @ _A.T, rtol=0, atol=1e-15)
    assert sun.shape == (4, 6) and np.array_equal(sun[3], SUN0)


# ---------------------------------------------------------------- fixed-step RK4 closed form


# ---------------------------------------------------------------- Hermite cubics and the perihelion search


def _poly_state(t):
    """An invented curved relative orbit, exactly cubic in t: position, velocity, acceleration."""
    c = np.array([[0.9, -0.3, 0.4], [-1.0, 0.2, 0.5], [0.6, 0.7, -0.8], [0.05, -0.1, 0.08]])
    t = np.asarray(t, dtype=float)[..., None]
    pos = c[0] + c[1] * t + c[2] * t**2 + c[3] * t**3
    vel = c[1] + 2 * c[2] * t + 3 * c[3] * t**2
    acc = 2 * c[2] + 6 * c[3] * t
    return pos, vel, acc


def test_hermite_reproduces_cubics_and_their_derivatives():
    # cubic Hermite interpolation is exact for cubic polynomials (Hairer et al. 1993, Sect. II.6)
    t0 = np.array([-1.0, 0.0, 0.5, 2.0])
    t1 = t0 + np.array([0.5, 1.0, 0.25, 3.0])
    t = t0 + np.array([0.1, 0.9, 0.5, 0.3]) * (t1 - t0)
    p0, m0, a0 = _poly_state(t0)
    p1, m1, a1 = _poly_state(t1)
    # (n, 6) rows: position and velocity together, as the search tabulates them
    s0, d0 = np.hstack([p0, m0]), np.hstack([m0, a0])
    s1, d1 = np.hstack([p1, m1]), np.hstack([m1, a1])
    p, dp = hermite(t, t0, t1, s0, d0, s1, d1)
    pe, ve, ae = _poly_state(t)
    assert np.allclose(p[:, :3], pe, rtol=0, atol=1e-13) and np.allclose(dp[:, :3], ve, rtol=0, atol=1e-13)
    assert np.allclose(dp[:, 3:], ae, rtol=0, atol=1e-12)
    p, dp = hermite(t, t0, t1, p0[:, 0], m0[:, 0], p1[:, 0], m1[:, 0])  # (n,) values
    assert np.allclose(p, pe[:, 0], rtol=0, atol=1e-13) and np.allclose(dp, ve[:, 0], rtol=0, atol=1e-13)


def test_grid_minimum_start_uses_positions_only():
    nodes = np.array([-1.0, 0.0, 1.0])
    states = np.zeros((3, 2, 6))
    states[:, 0, 0] = [3.0, 1.0, 2.0]
    states[:, 0, 3] = [0.0, 50.0, 0.0]  # large velocity at the closest node does not matter
    states[:, 1, 2] = [0.5, 1.0, 2.0]
    assert grid_minimum_start(nodes, states).tolist() == [0.0, -1.0]


def _node_values_of(fun, nodes):
    def node_values(kk, rows):
        p0, v0, a0 = fun(nodes[kk], rows)
        p1, v1, a1 = fun(nodes[kk + 1], rows)
        return np.hstack([p0, v0]), np.hstack([v0, a0]), np.hstack([p1, v1]), np.hstack([v1, a1])

    return node_values


def _poly_rows(t, rows):
    # each row is the polynomial orbit shifted in time by 1.3 * row
    return _poly_state(np.asarray(t) - 1.3 * np.asarray(rows))


def _poly_perihelia(rows):
    # roots of d|s|^2/dt / 2 = s . s' (degree 5) where |s|^2 has a local minimum (numpy roots, exact cubic)
    c = np.array([[0.9, -0.3, 0.4], [-1.0, 0.2, 0.5], [0.6, 0.7, -0.8], [0.05, -0.1, 0.08]])
    pos = [np.polynomial.Polynomial(c[:, j]) for j in range(3)]
    f = sum(p * p.deriv() for p in pos)
    roots = [r.real for r in f.roots() if abs(r.imag) < 1e-12 and f.deriv()(r.real) > 0]
    return sorted(roots), f


def test_newton_finds_the_perihelion_of_a_curved_cubic_orbit_to_machine_precision():
    # the relative orbit is an exact cubic, so the Hermite tables are exact and the minimum of |s| solves the
    # quintic s . s' = 0; Newton converges quadratically (Press et al. 2007, Sect. 9.4): error far below 1e-12
    roots, _ = _poly_perihelia(None)
    t_star = roots[0]
    nodes = np.linspace(-3.0, 9.0, 25)  # step 0.5
    rows = np.arange(5)
    truth = t_star + 1.3 * rows
    # starts in other intervals than the perihelion, below and above; integer starts must work as floats
    starts = np.array([int(round(v)) for v in truth + np.array([0.7, -0.6, 0.4, -0.3, 0.45])])
    t, state, outside, conv = newton_perihelion(nodes, _node_values_of(_poly_rows, nodes), starts)
    assert np.allclose(t, truth, rtol=0, atol=1e-12)
    assert conv.all() and not outside.any()
    pe, ve, _ = _poly_rows(t, rows)
    assert np.allclose(state, np.hstack([pe, ve]), rtol=0, atol=1e-12)


def test_newton_in_the_first_and_last_intervals():
    # the exact cubic orbit again, with its perihelion in the first interval (start in the third) and in the
    # last interval (start in the first)
    t_star = _poly_perihelia(None)[0][0]
    first, last = t_star - 0.3 + 0.6 * np.arange(4), t_star + 0.2 - 0.6 * np.arange(4)[::-1]
    for nodes, start in ((first, t_star + 1.2), (last, t_star - 1.6)):
        t, _, outside, conv = newton_perihelion(nodes, _node_values_of(_poly_rows, nodes), np.array([start]))
        assert abs(t[0] - t_star) < 1e-12 and conv.all() and not outside.any()


def _line(t0_star, w, b):
    """Straight-line relative orbit s(t) = b + w (t - t0*) with b perpendicular to w (closed form)."""

    def fun(t, rows):
        t = np.asarray(t, dtype=float)[..., None]
        return b + w * (t - t0_star), np.broadcast_to(w, t.shape[:-1] + (3,)), np.zeros(t.shape[:-1] + (3,))

    return fun


def test_newton_reports_perihelia_outside_the_window_at_once():
    # straight lines: the perihelion at t* before / after the window is reported at the nearer edge, flagged
    # outside; starts outside the grid are clamped into it, so one iteration suffices
    w, b = np.array([0.3, 0.1, 0.0]), np.array([-0.1, 0.3, 0.2])  # small: s . w of order 0.1 at the edges
    nodes = np.linspace(0.0, 4.0, 9)
    for t_star, start, edge in ((-1.0, -5.0, 0.0), (-1.0, -0.2, 0.0), (6.0, 9.0, 4.0), (6.0, 4.5, 4.0)):
        t, state, outside, conv = newton_perihelion(
            nodes, _node_values_of(_line(t_star, w, b), nodes), np.array([start]), max_iter=1
        )
        assert t[0] == edge and outside[0] and conv[0]
        assert np.allclose(state[0, :3], b + w * (edge - t_star), rtol=0, atol=1e-14)


def test_newton_convergence_criterion_is_relative_to_max_one_abs_t():
    # one Newton step on a straight line lands exactly on t*; it counts as converged when the step is at most
    # tol * max(1, |t|) (docstring)
    w, b = np.array([1.0, 0.0, 0.0]), np.array([0.0, 1.0, 0.0])
    cases = [  # (grid, start, t*, tol, converged after one step)
        (np.array([-1.0, 1.0]), 0.0, 1.5e-7, 1e-7, False),  # step 1.5 tol at |t| < 1
        (np.array([-1.0, 1.0]), 0.0, 0.25, 0.25, True),  # step exactly tol
        (np.array([999.0, 1001.0]), 1000.0, 1000.0 + 5e-5, 1e-7, True),  # step 5e-5 <= 1e-7 * 1000
    ]
    for grid, start, t_star, tol, ok in cases:
        t, _, outside, conv = newton_perihelion(
            grid, _node_values_of(_line(t_star, w, b), grid), np.array([start]), max_iter=1, tol=tol
        )
        assert conv[0] == ok and not outside[0]
        assert t[0] == pytest.approx(t_star, abs=1e-12 * max(1.0, abs(t_star)))


def test_newton_at_a_stationary_separation_inside_and_at_the_edges():
    # a start exactly at the perihelion (s . w = 0) converges there without being flagged outside, also at the
    # grid ends; a step that rounds away at |t| = 50 is converged too (not an edge); no floating-point
    # warnings or errors on the way
    w, b = np.array([1.0, 0.0, 0.0]), np.array([0.0, 0.5, 0.0])
    nodes = np.linspace(0.0, 50.0, 51)
    for t_star, start in ((20.0, 20.0), (0.0, 0.0), (50.0, 50.0), (50.0 - 3e-15, 50.0), (3e-15, 0.0)):
        with np.errstate(all="raise"):
            t, _, outside, conv = newton_perihelion(
                nodes, _node_values_of(_line(t_star, w, b), nodes), np.array([start])
            )
        assert conv[0] and not outside[0] and abs(t[0] - t_star) < 1e-14


def _coefficient_rows(x0, v0, dv):
    """Power-basis coefficients (24, 1) of an interval where the position is constant and the velocity is
    v0 + dv u: rows c0 (6), c1 (6), c2 (6), c3 (6) of (position, velocity)."""
    c = np.zeros((24, 1))
    c[0:3, 0], c[3:6, 0], c[9:12, 0] = x0, v0, dv
    return c


def _constant_cubic(x0, v0, dv):
    def node_cubic(kk, rows):
        return np.repeat(_coefficient_rows(x0, v0, dv), len(rows), 1)

    return node_cubic


def test_newton_takes_half_steps_downhill_where_the_separation_is_not_convex():
    # where d^2|s|^2/dt^2 / 2 = v.v + s.a <= 0 Newton's step is not a descent; the search then moves half an
    # interval towards decreasing separation per iteration (safeguarded Newton, Press et al. 2007, Sect. 9.4):
    # here s . v > 0 and v.v + s.a = v^2 - 5 < 0 everywhere, so after k iterations from the last node
    # t = 200 - k (intervals of 2)
    nodes = np.arange(0.0, 201.0, 2.0)
    walk = _constant_cubic([10.0, 0.0, 0.0], [2.0, 0.0, 0.0], [-1.0, 0.0, 0.0])
    t, _, outside, conv = newton_perihelion(nodes, walk, np.array([200.0]), coefficients=True)
    assert t[0] == 200.0 - 30.0 and not conv[0] and not outside[0]
    t, _, _, conv = newton_perihelion(nodes, walk, np.array([200.0]), max_iter=4, coefficients=True)
    assert t[0] == 196.0 and not conv[0]
    # at the last node (u = 1, v = 1, a = dv / 2): v.v + s.a exactly 0 counts as not convex, half an interval
    # back; with v.v + s.a = 0.5 > 0 the Newton step is -s.v / 0.5 = -2; all without floating-point warnings
    for v0, dv, expected in ((3.0, -2.0, 199.0), (2.0, -1.0, 198.0)):
        with np.errstate(all="raise"):
            t, _, _, _ = newton_perihelion(nodes, _constant_cubic([1.0, 0.0, 0.0], [v0, 0.0, 0.0], [dv, 0.0, 0.0]),
                                           np.array([200.0]), max_iter=1, coefficients=True)  # fmt: skip
        assert t[0] == expected
    # zero separation and zero relative velocity (0 / 0 for Newton): the perihelion is where the search starts
    with np.errstate(all="raise"):
        t, state, outside, conv = newton_perihelion(nodes, _constant_cubic([0.0] * 3, [0.0] * 3, [0.0] * 3),
                                                    np.array([37.0]), coefficients=True)  # fmt: skip
    assert t[0] == 37.0 and conv[0] and not outside[0] and not state.any()


_E1 = np.array([2.0, -1.0, 2.0]) / 3.0
_E2 = np.array([1.0, 2.0, 0.0]) / math.sqrt(5.0)
_E2 = _E2 - (_E2 @ _E1) * _E1
_E2 /= np.linalg.norm(_E2)


def _ellipse(t, rows=None):
    """Harmonic relative orbit s = cos t e1 + 0.6 sin t e2 (a = -s), closest at t = pi/2 + k pi."""
    t = np.asarray(t, dtype=float)[..., None]
    pos = np.cos(t) * _E1 + 0.6 * np.sin(t) * _E2
    vel = -np.sin(t) * _E1 + 0.6 * np.cos(t) * _E2
    return pos, vel, -pos


def _ellipse_interval(nodes, k):
    """f(t) = x.v and f'(t) = v.v + x.a of the quintic Hermite interpolant of the position on interval k.

    The quintic through position, velocity and acceleration at both ends, written out from its defining
    conditions here (six linear equations solved with numpy), independently of the package's coefficients.
    """
    h = nodes[k + 1] - nodes[k]
    p0, v0, a0 = _ellipse(nodes[k])
    p1, v1, a1 = _ellipse(nodes[k + 1])
    # rows: p(0), p'(0), p''(0), p(1), p'(1), p''(1) of sum c_i u^i, derivatives in u
    lhs = np.array([[1, 0, 0, 0, 0, 0], [0, 1, 0, 0, 0, 0], [0, 0, 2, 0, 0, 0],
                    [1, 1, 1, 1, 1, 1], [0, 1, 2, 3, 4, 5], [0, 0, 2, 6, 12, 20]], dtype=float)
    rhs = np.stack([p0, h * v0, h * h * a0, p1, h * v1, h * h * a1])
    cx = np.linalg.solve(lhs, rhs)  # (6, 3)

    def fun(t):
        u = (t - nodes[k]) / h
        x = sum(c * u**i for i, c in enumerate(cx))
        v = sum(i * c * u ** (i - 1) for i, c in enumerate(cx) if i) / h
        a = sum(i * (i - 1) * c * u ** (i - 2) for i, c in enumerate(cx) if i > 1) / (h * h)
        return x @ v, v @ v + x @ a

    return fun


def test_one_newton_iteration_is_a_newton_step_on_the_interval_holding_the_start():
    # the interval k with t_k <= t < t_(k+1) (the last one for the grid end; starts are grid nodes in practice,
    # from grid_minimum_start); Newton's step t - f / f' with f and f' from the quintic of that interval
    # (definitions in the docstrings; Press et al. 2007, Sect. 9.4). f' > 0 on (pi/4, 3 pi/4) for this ellipse.
    nodes = 0.75 + 0.5 * np.arange(4)
    starts = np.array([1.0, 1.25, 1.6, 1.75, 2.1, 2.25, 0.9])  # 1.25, 1.75, 2.25 are nodes
    t, _, _, _ = newton_perihelion(nodes, _node_values_of(_ellipse, nodes), starts, max_iter=1)
    for t0, got in zip(starts, t, strict=True):
        k = min(int(np.flatnonzero(nodes <= t0)[-1]), len(nodes) - 2)
        f, fp = _ellipse_interval(nodes, k)(t0)
        assert fp > 0 and got == pytest.approx(np.clip(t0 - f / fp, nodes[0], nodes[-1]), abs=1e-13)  # kept inside


def test_newton_follows_the_perihelion_into_the_first_interval():
    # the root of f = x.v on the first interval's quintic (scipy brentq), reached from the second interval
    nodes = 1.4 + 0.5 * np.arange(6)  # the true perihelion pi/2 lies in the first interval
    t_ref = brentq(lambda tt: _ellipse_interval(nodes, 0)(tt)[0], nodes[0], nodes[1], xtol=1e-15)
    assert abs(t_ref - math.pi / 2) < 1e-3
    t, state, outside, conv = newton_perihelion(nodes, _node_values_of(_ellipse, nodes), np.array([2.2, 1.5]))
    # f and f' come from the same quintic: Newton converges quadratically to its root; the last accepted
    # step (<= 1e-7) leaves far below 1e-10
    assert np.allclose(t, t_ref, rtol=0, atol=1e-10) and conv.all() and not outside.any()


# ---------------------------------------------------------------- map tables: coefficients per sample


def _hermite_power_basis(p0, m0, p1, m1, h):
    # Hermite cubic in u = (t - t0) / h in the power basis (Hairer et al. 1993, Sect. II.6)
    return p0, h * m0, 3 * (p1 - p0) - h * (2 * m0 + m1), 2 * (p0 - p1) + h * (m0 + m1)


@pytest.mark.parametrize(("n", "n_refs"), [(5, 1), (0, 1), (700, 3), (384, 2), (40, 2)])
def test_node_cubic_equals_the_per_sample_hermite_coefficients(n, n_refs):
    # brute force: for each sample the features map the node states and derivatives, whose Hermite cubic on the
    # sample's interval has the power-basis coefficients above; few groups, many groups (> 8), no samples, and
    # more samples than one matrix block
    rng = np.random.default_rng(n + n_refs)
    nodes = np.cumsum(rng.uniform(0.5, 1.5, 7)) - 3.0
    table = rng.normal(size=(n_refs, 7, 28, 12))
    tab = MapTables(nodes, np.zeros((n_refs, 6)), table)
    assert tab.extra is None
    delta = rng.normal(size=(n, 6))
    feats = features(delta)
    ref_index = rng.integers(0, n_refs, n)
    kk = rng.integers(0, 6, n) if n != 40 else np.arange(n) % 2
    cubic = tab.node_cubic(ref_index, feats)
    for rows in (np.arange(n), np.arange(n)[::3]):
        got = cubic(kk[rows], rows)
        assert got.shape == (24, rows.size)
        if rows.size == 0:
            continue
        st = np.einsum("nfc,nf->nc", table[ref_index[rows], kk[rows]], feats[rows])
        st1 = np.einsum("nfc,nf->nc", table[ref_index[rows], kk[rows] + 1], feats[rows])
        h = (nodes[kk[rows] + 1] - nodes[kk[rows]])[:, None]
        expected = np.hstack(_hermite_power_basis(st[:, :6], st[:, 6:], st1[:, :6], st1[:, 6:], h)).T
        assert np.allclose(got, expected, rtol=1e-12, atol=1e-12)
    # features: 1, the offsets, then the 21 products d_a d_b with a <= b in row-major order
    if n:
        iu = np.triu_indices(6)
        assert np.allclose(feats, np.hstack([np.ones((n, 1)), delta, delta[:, iu[0]] * delta[:, iu[1]]]), rtol=0,
                           atol=1e-15)  # fmt: skip
