"""Observables <-> Cartesian against astropy, and the analytic derivative."""

import astropy.coordinates as coord
import astropy.units as u
import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from perierr import units as c
from perierr.frames import cartesian_jacobian, cartesian_to_observables, observables_to_cartesian
from tests.conftest import random_observables


def test_cartesian_matches_astropy_skycoord():
    # Reference: astropy.coordinates SkyCoord (ICRS) -> Cartesian position and velocity.
    rng = np.random.default_rng(11)
    obs = random_observables(rng, 500)
    sc = coord.SkyCoord(
        ra=obs[:, 0] * u.deg, dec=obs[:, 1] * u.deg, distance=(1000 / obs[:, 2]) * u.pc,
        pm_ra_cosdec=obs[:, 3] * u.mas / u.yr, pm_dec=obs[:, 4] * u.mas / u.yr,
        radial_velocity=obs[:, 5] * u.km / u.s, frame="icrs",
    )
    pos = sc.cartesian.xyz.to_value(u.pc).T
    vel = sc.velocity.d_xyz.to_value(u.km / u.s).T
    mine = observables_to_cartesian(obs)
    # 1e-9 relative to each vector's norm (components can pass through zero)
    assert np.all(np.linalg.norm(mine[:, :3] - pos, axis=1) <= 1e-9 * np.linalg.norm(pos, axis=1))
    assert np.all(np.linalg.norm(mine[:, 3:] - vel, axis=1) <= 1e-9 * np.linalg.norm(vel, axis=1))


def test_unit_constants_against_iau_and_hipparcos():
    # IAU 2012 au (exact 149597870.7 km) per Julian year (31557600 s): km/s per arcsec/yr at 1 pc.
    assert_allclose(c.KMS_PER_MASYR_AT_1MAS, 149597870.7 / 31557600.0, rtol=1e-15)
    # Hipparcos catalogue Vol. 1 (ESA 1997) quotes A_v = 4.740470446 km yr / s (older au): 4e-9 apart.
    assert_allclose(c.KMS_PER_MASYR_AT_1MAS, 4.740470446, rtol=1e-8)
    # 1 pc / (1 km/s) in Myr: IAU pc = 648000/pi au; Julian Myr.
    pc_km = 648000.0 / np.pi * 149597870.7
    assert_allclose(c.MYR_PER_PC_PER_KMS, pc_km / (31557600.0 * 1e6), rtol=1e-14)
    assert_allclose(c.MYR_PER_PC_PER_KMS, 0.9777922216807891, rtol=1e-12)
    assert_allclose(c.AU_PER_PC, 648000.0 / np.pi, rtol=1e-15)


def test_jacobian_matches_central_differences():
    # Analytic derivative vs numerical derivative (the check used by the `uncertainties` test suite).
    rng = np.random.default_rng(3)
    obs = random_observables(rng, 40)
    jac = cartesian_jacobian(obs)
    steps = np.array([1e-6, 1e-6, 1e-6, 1e-5, 1e-5, 1e-5]) * np.maximum(np.abs(obs).mean(axis=0), 1.0)
    for j in range(6):
        dp, dm = obs.copy(), obs.copy()
        dp[:, j] += steps[j]
        dm[:, j] -= steps[j]
        num = (observables_to_cartesian(dp) - observables_to_cartesian(dm)) / (2 * steps[j])
        scale = np.abs(num).max(axis=1, keepdims=True) + 1e-12
        assert np.all(np.abs(jac[:, :, j] - num) <= 1e-6 * scale), f"column {j}"


@settings(max_examples=200, deadline=None)
@given(
    ra=st.floats(0, 359.999), dec=st.floats(-89.9, 89.9), plx=st.floats(0.5, 800),
    pmra=st.floats(-3000, 3000), pmdec=st.floats(-3000, 3000), rv=st.floats(-300, 300),
)
def test_round_trip_is_identity(ra, dec, plx, pmra, pmdec, rv):
    # Property: cartesian_to_observables inverts observables_to_cartesian.
    obs = np.array([ra, dec, plx, pmra, pmdec, rv])
    back = cartesian_to_observables(observables_to_cartesian(obs))
    dra = (back[0] - ra + 180.0) % 360.0 - 180.0
    assert abs(dra) * np.cos(np.radians(dec)) < 1e-9
    assert_allclose(back[1:], obs[1:], rtol=1e-9, atol=1e-8)
