"""The encounter effects in the text report and on the command line (``--oort-radii``, ``--comet``).

Outside references: astropy units and constants for the conversions, astropy's ``Distance.distmod`` for the
distance modulus, the impulse approximation 2 G M / (b v) (Binney & Tremaine 2008, Galactic Dynamics, 2nd ed.,
Sect. 7.2; from memory). The stars are invented.
"""

import io
import json
import math
import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.constants import G
from astropy.coordinates import Distance, SkyCoord
from straight_line_reference import lma

from perierr import ObservedStar, analyze, read_star_file
from perierr.cautions import HAZARD, SHOWER
from perierr.cli import EXIT_INPUT, main
from perierr.demo import demo_path
from perierr.errors import InputError, PerierrWarning
from perierr.report.text import format_analysis

STAR = str(demo_path("kestrel-4.toml"))
N, SEED = 5_000, 3


def run_cli(args, capsys):
    out = io.StringIO()
    code = main(args, out=out)
    return code, out.getvalue(), capsys.readouterr().err


@pytest.fixture(scope="module")
def result():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return analyze(read_star_file(STAR), model="straight_line", n_samples=N, seed=SEED)


def test_text_report_shows_each_quantity_once_with_the_caution_once(result):
    text = format_analysis(result)
    section = text.split("What the encounter does")[1].split("\n\n")[0]
    for title in ("peak proper motion [arcsec/yr]", "impulse on the Sun [m/s]", "peak magnitude [G]",
                  "impulse on a comet at 20000 au, near side [m/s]", "P(inside the Oort radius 100000 au)"):
        assert sum(line.strip().startswith(title) for line in section.splitlines()) == 1, title
    assert text.count(SHOWER) == 1 and text.count(HAZARD) == 1
    # the peak magnitude's median as printed is the summary's, and it is the distance modulus of the draws
    # (astropy Distance.distmod: 5 log10(d / 10 pc)) from today's 8.61 mag: m_peak = m + mu(d_ph) - mu(d_now)
    s = result.encounter.summaries["peak_magnitude"]
    values = result.monte_carlo.samples.values
    d_ph = lma(values)[:, 1]
    modulus = Distance(d_ph, u.pc).distmod - Distance(parallax=values[:, 2] * u.mas).distmod
    assert s.median == pytest.approx(8.61 + np.median(modulus.value), abs=4 * 0.003 + 4 * s.quantile_error(0.5))
    line = next(x for x in section.splitlines() if "peak magnitude [G]" in x)
    assert f"{s.median:.4f}" in line


def test_budget_reason_when_a_radius_lies_within_reach_of_d_ph(result):
    # the demo star passes at ~19,000 au (straight lines): the near-side comet at 20,000 au has no linear budget
    budget = result.encounter.budget
    assert set(budget.undefined) == {"comet_impulse:20000 au"}
    assert np.isnan(list(budget.share("comet_impulse:20000 au").values())).all()
    assert budget.dominant("comet_impulse:100000 au") == "mass"
    text = format_analysis(result)
    assert "shares of the impulse on a comet at 20000 au, near side [m/s]: undefined" in text


def test_cli_oort_radii_and_comet_positions_reach_the_json(tmp_path, capsys):
    out = tmp_path / "r.json"
    code, text, err = run_cli(["run", STAR, "--model", "straight_line", "--samples", str(N), "--seed", str(SEED),
                               "--oort-radii", "50000au,0.3pc", "--comet", "30000 au,201.37,-27.62",
                               "--json", str(out)], capsys)  # fmt: skip
    assert code == 0, err
    block = json.loads(out.read_text())["encounter"]
    assert [t["threshold"] for t in block["inside_oort_radius"]] == ["50000au", "0.3pc"]
    names = set(block["quantities"])
    assert {"comet_impulse:50000au", "comet_impulse:0.3pc", "comet_impulse:position1"} <= names
    # a comet at 30,000 au toward the star's present direction: the star comes nearly radially, so the comet lies
    # almost on the line of the star's motion, where the impulse approximation gives it the Sun's own kick: the
    # differential impulse is a small fraction of the Sun's (the transverse offset is r sin(angle) ~ 10 % of d)
    quantities = block["quantities"]
    assert quantities["comet_impulse:position1"]["median"] < 0.05 * quantities["sun_impulse"]["median"]
    # 0.3 pc in au through astropy: the probability is the fraction of draws inside it (all of them here)
    assert block["inside_oort_radius"][1]["distance_pc"] == pytest.approx((0.3 * u.pc).to_value(u.pc))
    assert "Oort radius 0.3pc" in text


@pytest.mark.parametrize(
    ("option", "value", "words"),
    [("--oort-radii", "-5au", "oort_radii"), ("--oort-radii", "fast", "oort_radii"),
     ("--comet", "30000,1,2", "comet_positions"), ("--comet", "30000 au,1,95", "comet_positions"),
     ("--comet", "3 km/s,1,2", "comet_positions")],
)  # fmt: skip
def test_cli_refuses_bad_encounter_options_naming_the_field(option, value, words, capsys):
    code, _, err = run_cli(["run", STAR, "--model", "straight_line", "--samples", "1000", option, value], capsys)
    assert code == EXIT_INPUT
    assert words in err and value.split(",")[0] in err
    assert err.count("\n") == 1  # one line, no traceback


def test_sun_impulse_median_from_the_closed_form_with_astropy_constants(result):
    # each draw's impulse is 2 G M / (d v) with its own mass (G M_sun from astropy): the nominal star's impulse
    # lies between the 5 % and 95 % quantiles, and the median equals the median of the mass-free part
    # 2 G / (d v) times the nominal mass to well within 2 % (the mass, 0.68 +- 0.04 M_sun, is independent and
    # nearly symmetric: the product's median moves by a fraction of a per cent; MC error ~0.1 %)
    gm = (u.Msun * G).to_value(u.pc * (u.km / u.s) ** 2)
    t, d, v = lma(result.star.mean)[0]
    nominal = 2 * gm * 0.68 / (d * v) * 1000
    s = result.encounter.summaries["sun_impulse"]
    assert s.quantile(0.05) < nominal < s.quantile(0.95)
    draws = lma(result.monte_carlo.samples.values)
    mass_free = np.median(2 * gm / (draws[:, 1] * draws[:, 2]) * 1000) * 0.68
    assert math.isclose(s.median, mass_free, rel_tol=0.02)


# ------------------------------------------------------------------------------------ what a reader is told

#: An invented, well-measured star passing at about 1,900 au (straight lines), with a mass and a V magnitude.
PASSER = dict(
    name="invented passer", ra=150.3, dec=-12.4, parallax=30.0, parallax_error=0.02, pmra=0.42, pmra_error=0.01,
    pmdec=-0.30, pmdec_error=0.01, radial_velocity=-28.0, radial_velocity_error=0.2, ra_error=0.02,
    dec_error=0.02, mass=0.7, mass_error=0.05, mag=10.2, mag_error=0.02, mag_band="V",
)  # fmt: skip


def passer(**changes):
    data = {**PASSER, **changes}
    return ObservedStar.from_mapping({k: v for k, v in data.items() if v is not None})


def quiet(star, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        return analyze(star, model="straight_line", n_samples=N, seed=SEED, compare=False, **kw)


def test_comet_positions_are_recorded_in_the_json_and_the_report():
    # a comet at 30,000 au toward (ra, dec) = (10, 20) deg: its ICRS position written back agrees with astropy's
    # SkyCoord (spherical -> Cartesian), and the report names it beside its impulse
    a = quiet(passer(), comet_positions=["30000 au,10,20"])
    (p,) = a.to_dict()["encounter"]["comet_positions"]
    want = SkyCoord(ra=10 * u.deg, dec=20 * u.deg, distance=30000 * u.au).cartesian.xyz.to_value(u.au)
    np.testing.assert_allclose(p["xyz_au"], want, rtol=1e-12)
    assert (p["name"], p["distance_au"], p["ra_deg"], p["dec_deg"]) == pytest.approx(("position1", 30000, 10, 20))
    text = format_analysis(a)
    assert "comet at position 1: 30,000 au toward RA 10.0000°, Dec +20.0000° (heliocentric ICRS)" in text
    assert "shares of the impulse on a comet at position 1 [m/s]: undefined for a comet at a given position" in text


def test_a_mass_or_magnitude_without_its_error_is_said_to_be_held_exact():
    # common practice, no source: an input without an error is held exact, and the reader must be told
    a = quiet(passer(mass_error=None, mag_error=None))
    codes = {c.code for c in a.cautions}
    assert {"mass-exact", "magnitude-exact"} <= codes
    assert a.encounter.budget.share("sun_impulse")["mass"] == 0.0
    text = format_analysis(a)
    assert "mass                       0.7 ± 0          M_sun  (held exact)" in text


def test_a_bad_mass_in_a_table_row_drops_the_mass_with_a_caution_and_a_star_file_refuses_it():
    with pytest.raises(InputError) as exc:
        passer(mass=-1.0)
    assert exc.value.field == "mass"
    with pytest.warns(PerierrWarning, match="read without a mass"):
        star = ObservedStar.from_mapping({**PASSER, "mass": -1.0}, strict=False)
    assert star.mass is None and star.mass_error is None
    (c,) = [c for c in star.cautions if c.code == "mass-dropped"]
    assert c.subject == "mass" and "-1.0" in c.message


def test_no_slow_passage_caution_without_impulses():
    # a far, slow star (passage d/v ~ 10 Myr, far beyond a tenth of a 20,000 au comet's 2.8 Myr period (Kepler's
    # third law)): the caution concerns the impulses, so it is raised with a mass and not without one
    slow = dict(parallax=5.0, parallax_error=0.01, pmra=20.0, pmdec=5.0, radial_velocity=-3.0)
    assert "slow-passage" in {c.code for c in quiet(passer(**slow)).cautions}
    assert "slow-passage" not in {c.code for c in quiet(passer(**slow, mass=None, mass_error=None)).cautions}


def test_the_peak_magnitude_does_not_change_when_a_mass_is_added():
    # the magnitudes have a stream of their own: the same seed gives the same peak magnitude with or without a mass
    with_mass = quiet(passer()).encounter.summaries["peak_magnitude"]
    without = quiet(passer(mass=None, mass_error=None)).encounter.summaries["peak_magnitude"]
    assert with_mass == without


def test_a_head_on_star_has_no_unexplained_nan_in_the_table():
    # every draw at d_ph = 0: impulses +inf, peak magnitude -inf (the closed forms' limits); the interval's
    # distances are 0 (both ends at the same infinity), and LaTeX writes the infinities
    from perierr.report.tables import latex_rows, result_table

    star = passer(pmra=0.0, pmdec=0.0, pmra_error=0.0, pmdec_error=0.0, ra_error=0.0, dec_error=0.0)
    a = quiet(star)
    table = result_table(a)
    for stem in ("sun_impulse", "peak_magnitude", "peak_proper_motion"):
        for column in (stem, f"{stem}_minus", f"{stem}_plus"):
            assert not np.isnan(table[column].value).any(), column
    row = latex_rows(a, encounter=True)
    assert r"$-\infty$" in row and r"$\infty$" in row


def test_radii_given_as_quantities_are_labelled_in_lower_case():
    from perierr.encounter import parse_radii

    assert parse_radii([20000 * u.AU, 0.5 * u.pc]) == ((("20000 au"), pytest.approx(20000 / 206264.80624709636)),
                                                        ("0.5 pc", 0.5))  # IAU au per pc, from memory


def test_focusing_on_a_row_whose_mass_was_dropped_names_the_value_given():
    # a table row with mass = -1: read without a mass (a caution), and focusing, which needs one, says so naming -1
    with pytest.warns(PerierrWarning, match="read without a mass"):
        star = ObservedStar.from_mapping({**PASSER, "mass": -1.0}, strict=False)
    with pytest.raises(InputError) as exc:
        quiet(star, focusing=True)
    assert exc.value.field == "mass" and exc.value.value == "-1.0"
    assert "focusing needs a valid mass" in exc.value.expected and "positive mass" in exc.value.expected
    # without focusing the row is analysed and the missing line names the dropped value
    enc = quiet(star).encounter
    assert enc.missing[0] == ("impulses and strength proxies: the mass was not read (mass = -1.0: expected a positive "
                              "mass in M_sun)")
    with pytest.warns(PerierrWarning, match="expected an error >= 0"):
        star = ObservedStar.from_mapping({**PASSER, "mass_error": -0.2}, strict=False)
    assert star.mass is None


def test_radius_labels_keep_the_unit_and_every_digit():
    from perierr.encounter import parse_radii

    # 1e-4 Mpc is 100 pc (astropy): the label keeps "Mpc" (lower case would read as millipc)
    (label, pc), = parse_radii([1e-4 * u.Mpc])
    assert label == "0.0001 Mpc" and pc == pytest.approx((1e-4 * u.Mpc).to_value(u.pc), rel=1e-12)
    assert parse_radii([label])[0][1] == pytest.approx(pc, rel=1e-12)
    # two radii that differ beyond six digits get two labels (each reads back as its own value)
    labels = [lbl for lbl, _ in parse_radii([20000.001 * u.au, 20000.002 * u.au])]
    assert labels == ["20000.001 au", "20000.002 au"]


def test_tiny_values_are_printed_to_the_digits_their_error_supports():
    from perierr.report.text import _significant

    # two significant digits of the error (common practice, no source): 1.1042e-05 +- 3e-8
    assert _significant(1.10423e-5, 3e-8) == "1.1042e-05"
    assert _significant(4.79e-4, 2e-6) == "4.790e-04"  # trailing zero kept
    assert _significant(2.5e7, 1.2e5) == "2.500e+07"


def test_the_same_radius_spelt_twice_is_refused_and_medians_read_to_three_digits():
    from perierr.encounter import parse_radii, three_digits

    with pytest.raises(InputError) as exc:
        parse_radii(["20000 au", "2e4 au"])  # one radius (astropy reads both as 20,000 au), two spellings
    assert exc.value.field == "oort_radii" and "repeated" in exc.value.expected
    # three significant digits (common practice, no source), thousands separated
    assert [three_digits(x) for x in (872_674.3, 45.678, 100.0, 99.94)] == ["873,000", "45.7", "100", "99.9"]
    assert parse_radii([20000 * u.au])[0][0] == "20000 au"
