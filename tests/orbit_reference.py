"""Test-only reference perihelia in a Galactic potential, independent of perierr's orbit code.

The Sun and every star are test particles in galpy's MWPotential2014 (Bovy 2015, ApJS 216, 29; forces
from galpy 1.12 ``evaluateRforces``/``evaluatezforces``), started from galpy's ICRS -> Galactocentric
transformation with the solar parameters of perierr's default set "bovy2015" (R0 = 8 kpc, z_sun = 20.8 pc,
v_c = 220 km/s, solar motion of Schönrich, Binney & Dehnen 2010), and integrated together in Galactocentric
coordinates with scipy's DOP853 (Hairer, Nørsett & Wanner 1993) with dense output. The perihelion of each
star is the minimum of its squared separation from the Sun: on a grid, then refined by parabolas through
three points at shrinking spacings on the dense-output interpolant. No constant, frame, force or search of
perierr is used.
"""

import astropy.units as u
import numpy as np
from galpy.orbit import Orbit
from galpy.potential import MWPotential2014, evaluateRforces, evaluatezforces
from scipy.integrate import solve_ivp

GALPY_KW = dict(ro=8.0, vo=220.0, zo=0.0208, solarmotion="schoenrich")

#: Myr per pc/(km/s), from astropy's units.
MYR = float((1.0 * u.pc / (u.km / u.s)).to_value(u.Myr))


def initial_states(obs):
    """The Sun (row 0) and the stars (rows 1..n) in galpy's Galactocentric frame: x, y, z [pc], v [km/s]."""
    obs = np.atleast_2d(obs)
    stars = Orbit([[o[0], o[1], 1.0 / o[2], o[3], o[4], o[5]] for o in obs], radec=True, **GALPY_KW)
    sun = Orbit(**GALPY_KW)

    def xv(o):
        cols = [np.atleast_1d(f()) for f in (o.x, o.y, o.z, o.vx, o.vy, o.vz)]
        return np.stack(cols, axis=-1) * np.array([1000.0, 1000.0, 1000.0, 1.0, 1.0, 1.0])

    return np.concatenate([xv(sun), xv(stars)])


def acceleration(pos):
    """MWPotential2014 acceleration [(km/s)^2/pc] at Galactocentric positions (k, 3) [pc]."""
    big_r = np.hypot(pos[:, 0], pos[:, 1])
    unit = 220.0**2 / 8000.0  # galpy's natural force unit vo^2 / ro
    fr = evaluateRforces(MWPotential2014, big_r / 8000.0, pos[:, 2] / 8000.0) * unit
    fz = evaluatezforces(MWPotential2014, big_r / 8000.0, pos[:, 2] / 8000.0) * unit
    return np.stack([fr * pos[:, 0] / big_r, fr * pos[:, 1] / big_r, fz], axis=-1)


def _relative(obs, t_end_myr, rtol):
    """``rel(t_myr, rows)``: star-minus-Sun states (len(rows), 6) at one time per row, from dense output."""
    y0 = initial_states(obs)
    k = y0.shape[0]

    def fun(_t, y):
        yy = y.reshape(k, 6)
        return np.concatenate([yy[:, 3:], acceleration(yy[:, :3])], axis=1).ravel()

    sol = solve_ivp(fun, (0.0, t_end_myr / MYR), y0.ravel(), method="DOP853", rtol=rtol, atol=1e-10,
                    dense_output=True)  # fmt: skip
    assert sol.success, sol.message

    def rel(t_myr):
        """States at each time of ``t_myr`` (n,) for star i at t_myr[i] (the diagonal of all bodies x times)."""
        y = sol.sol(np.asarray(t_myr, dtype=float) / MYR).T.reshape(-1, k, 6)  # (n_times, k, 6)
        rows = np.arange(k - 1)
        return y[rows, rows + 1] - y[rows, 0]

    return sol, rel, k


def perihelia(obs, t_lo_myr, t_hi_myr, *, n_grid=2001, rtol=1e-12, chunk=200):
    """(t [Myr], d [pc], v [km/s]) of each row of ``obs`` (n, 6), searched in ``[t_lo_myr, t_hi_myr]`` (t > 0).

    The grid minimum of the squared separation (``n_grid`` points) is refined by parabolas through three
    points 1e-3, 1e-5 and 1e-7 Myr apart; the minimum must lie inside the interval (asserted).
    """
    obs = np.atleast_2d(obs)
    out = []
    grid = np.linspace(t_lo_myr, t_hi_myr, n_grid)
    for start in range(0, obs.shape[0], chunk):
        sol, rel, k = _relative(obs[start : start + chunk], t_hi_myr, rtol)
        y = sol.sol(grid / MYR).T.reshape(n_grid, k, 6)
        d2 = np.sum((y[:, 1:, :3] - y[:, :1, :3]) ** 2, axis=-1)  # (n_grid, n)
        i = np.argmin(d2, axis=0)
        assert np.all((i > 0) & (i < n_grid - 1)), "a perihelion at the edge of the search interval"
        t = grid[i]
        for step in (1e-3, 1e-5, 1e-7):
            y0, y1, y2 = (np.sum(rel(t + s)[:, :3] ** 2, axis=1) for s in (-step, 0.0, step))
            t = t + step * 0.5 * (y0 - y2) / (y0 - 2 * y1 + y2)
        state = rel(t)
        out.append(np.stack([t, np.linalg.norm(state[:, :3], axis=1), np.linalg.norm(state[:, 3:], axis=1)], -1))
    return np.concatenate(out)
