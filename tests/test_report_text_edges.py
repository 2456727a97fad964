"""The text report's numbers at their edges: tiny probabilities, extra levels in au, draws on both sides of now.

References: the Particle Data Group's rounding rule (Phys. Rev. D 98, 030001 (2018), Introduction 5.3; tested in
tests/test_rounding.py), the binomial standard error sqrt(p (1 - p) / n) (common practice, no source), astropy's
au per pc, and counts recounted here from the draws the result carries. Stars are invented.
"""

import warnings

import astropy.units as u
import numpy as np
import pytest

from perierr import ObservedStar, analyze
from perierr.errors import PerierrWarning
from perierr.report import format_analysis

AU_PER_PC_ASTROPY = (1 * u.pc).to_value(u.au)


def invented(**over):
    """An invented star on a close pass (t_ph ~ 0.65 Myr, d_ph ~ 0.09 pc)."""
    fields = dict(
        name="invented Plover-2", ra=201.37, dec=-27.62, parallax=48.0, parallax_error=0.03,
        pmra=0.71, pmra_error=0.035, pmdec=-1.2, pmdec_error=0.03,
        radial_velocity=-31.2, radial_velocity_error=0.6,
    )  # fmt: skip
    fields.update(over)
    return ObservedStar.from_values(**fields)


def run(star, **kw):
    kw.setdefault("model", "straight_line")
    kw.setdefault("seed", 4)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return analyze(star, compare=False, **kw)


def test_a_probability_from_three_draws_keeps_its_digits_and_says_its_count():
    n = 100_000
    star = invented()
    d = np.sort(np.asarray(run(star, n_samples=n).monte_carlo.perihelion.distance_pc))
    threshold = float(0.5 * (d[2] + d[3]))  # exactly three draws pass (the same seed gives the same draws)
    a = run(star, n_samples=n, thresholds=[f"{threshold!r} pc"])
    line = [ln for ln in format_analysis(a).splitlines() if ln.strip().startswith(f"{threshold!r} pc")][0]
    # p = 3e-5, se = sqrt(p (1 - p) / n) = 1.73e-5: in percent 0.0030 ± 0.0017 (173: two digits, PDG)
    assert line.split(f"{threshold!r} pc")[1].strip() == "0.0030% ± 0.0017% (3 of 100,000 draws)"
    assert "0.00% ± 0.00%" not in format_analysis(a)


def test_extra_quantile_levels_are_given_in_au_as_well():
    a = run(invented(), n_samples=20_000, levels=(0.025, 0.16, 0.5, 0.84, 0.975))
    text = format_analysis(a)
    block = text.split("other quantiles")[1].splitlines()
    au_row = [ln for ln in block if ln.strip().startswith("distance [au]")][0]
    s = a.monte_carlo.summaries["distance_pc"]
    q025 = s.quantile(0.025) * AU_PER_PC_ASTROPY
    shown = float(au_row.split("2.5 %:")[1].split()[0].replace(",", ""))
    # rounded to a tenth of the half-width (q84 - q16)/2 in au, as the pc row
    half = 0.5 * (s.quantile(0.84) - s.quantile(0.16)) * AU_PER_PC_ASTROPY
    assert shown == pytest.approx(q025, abs=half / 10)
    err = float(au_row.split("2.5 %:")[1].split("(")[1].split(")")[0])
    assert err == pytest.approx(s.quantile_error(0.025) * AU_PER_PC_ASTROPY, rel=0.05)


def test_draws_on_the_other_side_of_now_are_counted_when_not_negligible():
    # radial velocity 0.2 +- 2 km/s: the closest approach is about now, some draws in the past, some in the future
    a = run(invented(radial_velocity=0.2, radial_velocity_error=2.0), n_samples=20_000)
    t = np.asarray(a.monte_carlo.perihelion.time_myr)
    median_future = np.median(t) >= 0
    other = np.mean(t < 0) if median_future else np.mean(t >= 0)
    assert 0.05 < other < 0.5
    side = "past" if median_future else "future"
    assert f"{other:.1%} of the draws have their perihelion in the {side}" in format_analysis(a)
    # a clean star (all draws in the future) has no such line
    assert "of the draws have their perihelion in the" not in format_analysis(run(invented(), n_samples=20_000))


def test_all_the_weight_passing_reads_as_a_bound_not_a_zero_error():
    # an invented star with a tiny parallax under a short distance prior: the reweighting gives zero weight to the
    # draws outside the prior's support (parallax <= 0), so P(d_ph < 10^6 pc) is exactly 1 by weight while not
    # every draw passed; the face gives the 95 % bound of "all passed" with the Kish effective size (Kish 1965),
    # 0.05^(1/n_eff), instead of failing on a zero Monte Carlo error
    star = ObservedStar.from_values(
        ra=201.3705, dec=-27.6214, parallax=0.001, parallax_error=0.3, pmra=0.01, pmra_error=0.035, pmdec=0.01,
        pmdec_error=0.029, radial_velocity=-250.0, radial_velocity_error=0.6, name="far (invented)",
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        a = analyze(star, model="straight_line", n_samples=20_000, seed=1, distance_prior="edsd:L=100pc",
                    prior_method="reweight", thresholds=("1pc", "1000000pc"))  # fmt: skip
    t = a.monte_carlo.thresholds[1]
    assert t.probability == 1.0 and t.count < a.monte_carlo.n  # the premise: zero weights among the failures
    n_eff = a.monte_carlo.samples.effective_size
    text = format_analysis(a)
    assert f"> {0.05 ** (1 / n_eff):.4%} (95 % bound; all the weight passed)" in text
