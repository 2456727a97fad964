"""Potential components and the MWPotential2014 preset against outside sources."""

import math

import numpy as np
import pytest
from galpy.potential import MWPotential2014 as GALPY_MW2014
from galpy.potential import evaluatePotentials, evaluateRforces, evaluatezforces, vcirc
from hypothesis import given, settings
from hypothesis import strategies as st

from perierr.models.orbit.potentials import (
    G_PC_KMS2_PER_MSUN,
    NFW,
    CompositePotential,
    Hernquist,
    MiyamotoNagai,
    Plummer,
    PotentialParameterError,
    PowerLawCutoff,
)
from perierr.models.orbit.presets import get_potential

COMPONENTS = [
    PowerLawCutoff(mass_msun=4.5e9, alpha=1.8, rc_pc=1900.0),
    MiyamotoNagai(mass_msun=6.8e10, a_pc=3000.0, b_pc=280.0),
    NFW(mass_msun=4.4e11, a_pc=16000.0),
    Plummer(mass_msun=1e10, b_pc=700.0),
    Hernquist(mass_msun=3e10, a_pc=500.0),
]
IDS = [type(c).__name__ for c in COMPONENTS]

# invented positions near the solar circle and beyond [pc]
POINTS = np.array(
    [[8000.0, 0.0, 20.8], [-7990.0, 130.0, -45.0], [3000.0, -5000.0, 800.0], [500.0, 400.0, 300.0]]
)


def _fd_grad(f, x, h):
    out = []
    for k in range(3):
        e = np.zeros(3)
        e[k] = h
        out.append((f(x + e) - f(x - e)) / (2 * h))
    return np.stack(out, axis=-1)


@pytest.mark.parametrize("comp", COMPONENTS, ids=IDS)
def test_force_is_minus_gradient_of_potential(comp):
    # central finite differences of the potential (textbook numerics; truncation
    # ~h^2 Phi''' / 6, with h = 1e-5 r well below the scale lengths)
    for x in POINTS:
        fd = -_fd_grad(comp.potential, x, 1e-5 * np.linalg.norm(x))
        acc = comp.acceleration(x)
        assert np.allclose(acc, fd, rtol=1e-6, atol=1e-9 * np.abs(acc).max())


@pytest.mark.parametrize("comp", COMPONENTS, ids=IDS)
def test_hessian_and_third_derivatives_vs_finite_differences(comp):
    # finite differences of the analytic lower derivative (textbook numerics)
    for x in POINTS:
        hes = comp.hessian(x)
        fd_h = -_fd_grad(comp.acceleration, x, 1e-5 * np.linalg.norm(x))
        assert np.allclose(hes, fd_h, rtol=1e-6, atol=1e-8 * np.abs(hes).max())
        third = comp.third_derivatives(x)
        fd_t = _fd_grad(comp.hessian, x, 1e-5 * np.linalg.norm(x))
        assert np.allclose(third, fd_t, rtol=1e-5, atol=1e-7 * np.abs(third).max())


@pytest.mark.parametrize("comp", COMPONENTS, ids=IDS)
def test_laplacian_equals_four_pi_g_rho(comp):
    # Poisson's equation (Binney & Tremaine 2008, eq. 2.10) with each density in
    # closed form from its paper; the Miyamoto-Nagai density is eq. (2.69b) of
    # Binney & Tremaine 2008 / Miyamoto & Nagai 1975.
    for x in POINTS:
        r = np.linalg.norm(x)
        lap = np.trace(comp.hessian(x))
        if isinstance(comp, MiyamotoNagai):
            a, b, m = comp.a_pc, comp.b_pc, comp.mass_msun
            big_r2 = x[0] ** 2 + x[1] ** 2
            zeta = math.sqrt(x[2] ** 2 + b * b)
            rho = (b * b * m / (4 * math.pi)) * (a * big_r2 + (a + 3 * zeta) * (a + zeta) ** 2)
            rho /= (big_r2 + (a + zeta) ** 2) ** 2.5 * zeta**3
        elif isinstance(comp, Plummer):
            rho = (
                3
                * comp.mass_msun
                / (4 * math.pi * comp.b_pc**3)
                * (1 + (r / comp.b_pc) ** 2) ** -2.5
            )
        elif isinstance(comp, Hernquist):
            a = comp.a_pc
            rho = comp.mass_msun * a / (2 * math.pi * r * (r + a) ** 3)
        elif isinstance(comp, NFW):
            s = r / comp.a_pc
            rho = comp.mass_msun / (4 * math.pi * comp.a_pc**3 * s * (1 + s) ** 2)
        else:
            # Bovy 2015 Sect. 3.5: rho ~ r^-alpha exp(-(r/rc)^2); total mass
            # 2 pi rho0 rc^(3-alpha) Gamma((3-alpha)/2)
            al, rc = comp.alpha, comp.rc_pc
            rho0 = comp.mass_msun / (2 * math.pi * rc ** (3 - al) * math.gamma(1.5 - al / 2))
            rho = rho0 * r**-al * math.exp(-((r / rc) ** 2))
        assert lap == pytest.approx(4 * math.pi * G_PC_KMS2_PER_MSUN * rho, rel=1e-10, abs=1e-18)


def test_plummer_and_hernquist_closed_forms():
    # Binney & Tremaine 2008, Table 2.1: Plummer Phi = -GM/sqrt(r^2+b^2),
    # Hernquist Phi = -GM/(r+a); enclosed mass of Hernquist M r^2/(r+a)^2.
    x = np.array([300.0, -400.0, 1200.0])
    r = 1300.0
    p, h = COMPONENTS[3], COMPONENTS[4]
    assert p.potential(x) == pytest.approx(
        -G_PC_KMS2_PER_MSUN * 1e10 / math.hypot(r, 700.0), rel=1e-14
    )
    acc = np.linalg.norm(h.acceleration(x))
    assert acc == pytest.approx(G_PC_KMS2_PER_MSUN * 3e10 / (r + 500.0) ** 2, rel=1e-13)


def test_mwpotential2014_circular_speed_and_fractions():
    # Bovy 2015, ApJS 216, 29, Table 1: v_c(8 kpc) = 220 km/s; force fractions
    # 0.05 / 0.60 / 0.35 at R0.
    preset = get_potential("MWPotential2014")
    assert float(preset.potential.circular_speed(8000.0)) == pytest.approx(220.0, rel=1e-12)
    fr = [float(c.circular_speed(8000.0)) ** 2 / 220.0**2 for c in preset.potential.components]
    assert fr == pytest.approx([0.05, 0.60, 0.35], rel=1e-12)


def test_mwpotential2014_matches_galpy():
    # galpy 1.12 MWPotential2014 in natural units (ro = 8 kpc, vo = 220 km/s):
    # forces in vo^2/ro, potentials in vo^2; compare potential differences since
    # the additive constant of the bulge is convention.
    pot = get_potential().potential
    unit_f = 220.0**2 / 8000.0
    for x in POINTS[:3]:
        big_r, z = math.hypot(x[0], x[1]), x[2]
        acc = pot.acceleration(x)
        fr_gal = evaluateRforces(GALPY_MW2014, big_r / 8000.0, z / 8000.0) * unit_f
        fz_gal = evaluatezforces(GALPY_MW2014, big_r / 8000.0, z / 8000.0) * unit_f
        fr_me = (acc[0] * x[0] + acc[1] * x[1]) / big_r
        assert fr_me == pytest.approx(fr_gal, rel=1e-9)
        assert acc[2] == pytest.approx(fz_gal, rel=1e-9, abs=1e-12)
    x1, x2 = POINTS[0], POINTS[2]
    dphi = pot.potential(x1) - pot.potential(x2)
    g1 = evaluatePotentials(GALPY_MW2014, 8000.0 / 8000.0, 20.8 / 8000.0)
    g2 = evaluatePotentials(GALPY_MW2014, math.hypot(3000.0, 5000.0) / 8000.0, 0.1)
    assert dphi == pytest.approx((g1 - g2) * 220.0**2, rel=1e-9)
    # galpy vcirc at R = 1.2 ro
    assert float(pot.circular_speed(9600.0)) == pytest.approx(
        vcirc(GALPY_MW2014, 1.2) * 220.0, rel=1e-10
    )


@settings(max_examples=40, deadline=None)
@given(
    st.floats(-3.0, 3.0),
    st.floats(-3.0, 3.0),
    st.floats(0.0, 2 * math.pi),
    st.floats(500.0, 20000.0),
)
def test_axisymmetry_and_hessian_symmetry(theta1, theta2, phi, radius):
    # invariants of an axisymmetric potential (textbook): Phi depends on R and z
    # only; second and third derivatives are symmetric in their indices.
    pot = get_potential().potential
    z = radius * math.sin(theta1) * 0.3
    x1 = np.array([radius, 0.0, z])
    x2 = np.array([radius * math.cos(phi), radius * math.sin(phi), z])
    assert pot.potential(x2) == pytest.approx(pot.potential(x1), rel=1e-12)
    hes = pot.hessian(x2)
    assert np.allclose(hes, hes.T, rtol=1e-12, atol=1e-20)
    third = pot.third_derivatives(x2)
    assert np.allclose(third, np.transpose(third, (1, 0, 2)), rtol=1e-12, atol=1e-22)
    assert np.allclose(third, np.transpose(third, (2, 1, 0)), rtol=1e-12, atol=1e-22)


def test_composition_and_bad_parameters():
    # sum rule (definition): forces of a composite add; bad values raise naming the parameter
    a, b = COMPONENTS[3], COMPONENTS[4]
    comp = a + b
    assert isinstance(comp, CompositePotential)
    x = POINTS[1]
    assert np.allclose(comp.acceleration(x), a.acceleration(x) + b.acceleration(x), rtol=1e-15)
    with pytest.raises(PotentialParameterError, match="b_pc"):
        Plummer(mass_msun=1.0, b_pc=-1.0)
    with pytest.raises(PotentialParameterError, match="alpha"):
        PowerLawCutoff(mass_msun=1.0, alpha=2.5, rc_pc=1.0)
    with pytest.raises(PotentialParameterError, match="potential = 'nope': not a known preset"):
        get_potential("nope")


@pytest.mark.parametrize("comp", COMPONENTS, ids=IDS)
def test_fused_derivatives_equal_the_separate_ones(comp):
    # the one-pass method used by the variational equations (identity check of
    # the same formulas, verified above against finite differences)
    acc, hes, third = comp.derivatives(POINTS)
    assert np.allclose(acc, comp.acceleration(POINTS), rtol=1e-13, atol=0)
    assert np.allclose(hes, comp.hessian(POINTS), rtol=1e-12, atol=1e-20)
    assert np.allclose(third, comp.third_derivatives(POINTS), rtol=1e-12, atol=1e-22)


def test_composite_fused_derivatives_share_the_spherical_tensors():
    # the sum shares one tensor construction for its spherical parts; it must
    # equal the sum of each component's own separate formulas (identity check,
    # the formulas are verified above against finite differences)
    comp = COMPONENTS[0] + COMPONENTS[1] + COMPONENTS[2] + COMPONENTS[3]
    acc, hes, third = comp.derivatives(POINTS)
    parts = COMPONENTS[:4]
    assert np.allclose(acc, sum(c.acceleration(POINTS) for c in parts), rtol=1e-13, atol=0)
    assert np.allclose(hes, sum(c.hessian(POINTS) for c in parts), rtol=1e-12, atol=1e-20)
    assert np.allclose(third, sum(c.third_derivatives(POINTS) for c in parts), rtol=1e-12, atol=1e-22)
