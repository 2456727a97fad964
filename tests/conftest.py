import numpy as np
import pytest

from perierr import ObservedStar


def random_observables(rng, n, *, max_dist_pc=200.0):
    """Invented random stars in internal units (deg, mas, mas/yr, km/s)."""
    ra = rng.uniform(0, 360, n)
    dec = np.degrees(np.arcsin(rng.uniform(-0.999, 0.999, n)))
    dist = rng.uniform(2.0, max_dist_pc, n)
    plx = 1000.0 / dist
    pmra = rng.normal(0, 200, n)
    pmdec = rng.normal(0, 200, n)
    rv = rng.normal(0, 40, n)
    return np.stack([ra, dec, plx, pmra, pmdec, rv], axis=-1)


@pytest.fixture
def close_star():
    """An invented star heading for a close pass (the demo's Kestrel-4, rounded)."""
    return ObservedStar.from_values(
        name="invented close star",
        ra=201.37, dec=-27.62, parallax=48.0, parallax_error=0.03,
        pmra=0.71, pmra_error=0.035, pmdec=-1.2, pmdec_error=0.03,
        radial_velocity=-31.2, radial_velocity_error=0.6,
        ra_error=0.02, dec_error=0.02, parallax_pmra_corr=-0.2, pmra_pmdec_corr=-0.3,
    )



@pytest.fixture(autouse=True)
def _close_figures():
    """Close the figures a test opened (the faces return them to the caller, who owns them)."""
    yield
    import sys

    if "matplotlib.pyplot" in sys.modules:  # only where a test drew something: no import cost elsewhere
        sys.modules["matplotlib.pyplot"].close("all")
