"""Faster than light at any plausible distance: refused even when the parallax is within its noise."""

from __future__ import annotations

import numpy as np
import pytest

from perierr.errors import InputError
from perierr.star import ObservedStar
from perierr.units import KMS_PER_MASYR_AT_1MAS, SPEED_OF_LIGHT_KMS

BASE = {"ra": 122.0, "dec": 0.0, "parallax": 1.0, "pmra": 0.0, "pmdec": 0.0, "radial_velocity": 0.0,
        "ra_error": 0.0, "dec_error": 0.0, "parallax_error": 2.0, "pmra_error": 0.0, "pmdec_error": 0.0,
        "radial_velocity_error": 1.0}  # fmt: skip


def test_a_proper_motion_too_fast_even_at_parallax_plus_five_sigma_is_refused_naming_it():
    # v_t = 4.74047 km/s x mu [mas/yr] / parallax [mas] (common practice, no source); at the largest plausible
    # parallax 1 + 5 x 2 = 11 mas, mu = c x 11 / 4.74047 x 1.01 is still faster than light (c from astropy)
    mu = SPEED_OF_LIGHT_KMS * 11.0 / KMS_PER_MASYR_AT_1MAS * 1.01
    with pytest.raises(InputError) as err:
        ObservedStar.from_mapping({**BASE, "pmdec": mu})
    assert err.value.field == "pmdec" and "faster than light" in err.value.expected
    # just below c at that parallax: kept (the parallax within its noise says nothing more)
    star = ObservedStar.from_mapping({**BASE, "pmdec": mu / 1.02})
    assert star.mean[4] == pytest.approx(mu / 1.02, rel=1e-15)


def test_the_vectorized_screen_refuses_the_same_row():
    from perierr.catalogue.chunk import Chunk
    from perierr.catalogue.screening import screen_chunk

    mu = SPEED_OF_LIGHT_KMS * 11.0 / KMS_PER_MASYR_AT_1MAS * np.array([1.01, 1 / 1.02])
    values = {k: np.full(2, v, dtype=float) for k, v in BASE.items()}
    values["pmdec"] = mu
    cols = screen_chunk(Chunk(np.arange(2), values))
    assert cols["status"][0] == "out_of_range" and cols["reason"][0].startswith("pmdec")
    assert cols["status"][1] != "out_of_range"
