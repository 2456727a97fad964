"""One error hierarchy: perierr's refusals are PerierrError (input faults InputError); anything else is a bug.

The command line reports perierr's errors as bad input (status 2) and every other exception, a stray
ValueError or TypeError included, as an internal error (status 70), as documented in perierr/cli.py.
"""

import importlib
import inspect
import io
import pkgutil

import numpy as np
import pytest

import perierr
from perierr.cli import EXIT_BUG, EXIT_INPUT, main
from perierr.demo import demo_path
from perierr.errors import InputError, PerierrError

STAR = str(demo_path("kestrel-4.toml"))

#: The exception classes of perierr that are about what the user gave (their docstrings say so).
INPUT_ERRORS = {"FocusingError", "OrbitOptionError", "PotentialParameterError", "SolarParameterError"}


def perierr_exceptions() -> dict:
    """Every exception class (not warnings) defined in a module of perierr, by name."""
    found = {}
    for info in pkgutil.walk_packages(perierr.__path__, prefix="perierr."):
        module = importlib.import_module(info.name)
        for name, obj in inspect.getmembers(module, inspect.isclass):
            if issubclass(obj, Exception) and not issubclass(obj, Warning) and obj.__module__ == info.name:
                found[name] = obj
    return found


def test_every_perierr_exception_is_a_perierr_error():
    # the hierarchy of perierr/errors.py: one base, input faults under InputError (also a ValueError, as
    # before, so `except ValueError` in callers keeps working)
    found = perierr_exceptions()
    assert set(found) == {"PerierrError", "InputError", "ChainTooShortError"} | INPUT_ERRORS
    assert all(issubclass(cls, PerierrError) for cls in found.values())
    assert all(issubclass(found[name], InputError) for name in INPUT_ERRORS)
    assert issubclass(InputError, ValueError) and issubclass(found["ChainTooShortError"], RuntimeError)


@pytest.mark.parametrize(
    ("make", "field", "value"),
    [
        (lambda: perierr.make_model("orbit", method="fast"), "method", "fast"),
        (lambda: perierr.make_model("orbit", sun="nowhere"), "sun", "nowhere"),
        (lambda: perierr.make_model("orbit", horizon=3), "horizon", 3),
        (lambda: perierr.make_model("warp_drive"), "model", "warp_drive"),
        (lambda: perierr.make_model("straight_line", star_mass_error_msun=0.1), "star_mass_error_msun", 0.1),
        (lambda: perierr.get_solar_parameters("bovy2015").replace(r0_pc=-8000.0), "r0_pc", -8000.0),
    ],
)
def test_option_errors_name_field_and_value(make, field, value):
    # InputError's contract (perierr/errors.py): the field, the value as given, what was expected
    with pytest.raises(InputError) as info:
        make()
    assert info.value.field == field and info.value.value == value
    assert str(info.value).startswith(f"{field} = {value!r}: ")


@pytest.mark.parametrize("seed", [-1, True, 1.5, "7", np.random.RandomState(1)])
def test_a_bad_seed_is_an_input_error(seed):
    # a seed is an integer >= 0, a numpy Generator or None (perierr.sampling.gaussian.resolve_seed)
    from perierr.sampling.gaussian import resolve_seed

    with pytest.raises(InputError, match=r"^seed = .*: expected a non-negative integer, a numpy.random.Generator"):
        resolve_seed(seed)


def test_a_prior_excluding_every_distance_is_refused_by_name(close_star):
    # issue: a uniform prior out to 0.0005 pc (about 100 au) excludes every distance a star can have; the
    # MCMC start used to divide by a zero total and end in "cannot convert float NaN to integer". The
    # star's parallax (48 mas, 0.03 mas error) puts it at 1000/48 = 20.8 pc (the parallax definition).
    with pytest.raises(InputError) as info:
        perierr.analyze(close_star, distance_prior="uniform:r_max=0.0005pc", n_samples=2000, seed=1)
    assert info.value.field == "distance prior" and info.value.value == {"r_max_pc": 0.0005}
    assert "below 0.001 pc" in str(info.value)


@pytest.mark.filterwarnings("ignore::RuntimeWarning:emcee")
def test_a_prior_leaving_the_walkers_no_room_is_refused():
    # a density that is non-zero only in the last 1e-12 of its support (0.002 pc): the walkers start at its
    # edge and never move, so emcee's autocorrelation time is NaN (was "cannot convert float NaN to integer")
    from perierr.priors.densities import CustomPrior
    from perierr.sampling.mcmc import ChainTooShortError, sample_posterior_mcmc

    star = perierr.ObservedStar.from_values(
        ra=10.0, dec=5.0, parallax=0.2, parallax_error=0.1, pmra=1.0, pmra_error=0.1, pmdec=1.0,
        pmdec_error=0.1, radial_velocity=-20.0, radial_velocity_error=1.0,
    )
    prior = CustomPrior(lambda r: np.where(r >= 0.002 * (1 - 1e-12), 1.0, 0.0), r_max=0.002)
    with pytest.raises(ChainTooShortError, match=r"did not move in 500 steps .*check the prior's support"):
        sample_posterior_mcmc(star, prior, n_effective=200, seed=1, max_steps=1000)


def run_cli(argv, capsys):
    out = io.StringIO()
    code = main(argv, out=out)
    return code, out.getvalue(), capsys.readouterr().err


def test_cli_refuses_the_excluding_prior_with_status_2(capsys):
    code, out, err = run_cli(["run", STAR, "--samples", "2000", "--seed", "1",
                              "--distance-prior", "uniform:r_max=0.0005pc"], capsys)
    assert code == EXIT_INPUT
    assert err.startswith("perierr: error: distance prior = {'r_max_pc': 0.0005}: ")
    assert "NaN" not in err


@pytest.mark.parametrize(
    ("exc", "code", "text"),
    [
        (ValueError("a stray value error"), EXIT_BUG, "internal error (ValueError: a stray value error)"),
        (TypeError("a stray type error"), EXIT_BUG, "internal error (TypeError: a stray type error)"),
        (InputError("parallax", -1.0, "expected a positive parallax"), EXIT_INPUT,
         "error: parallax = -1.0: expected a positive parallax"),
        (PerierrError("a refusal"), EXIT_INPUT, "error: a refusal"),
    ],
)
def test_only_perierr_errors_are_input_faults(exc, code, text, capsys, monkeypatch):
    # perierr/cli.py: status 2 for perierr's own refusals, 70 ("a perierr bug") for any other exception
    def fail(*args, **kwargs):
        raise exc

    monkeypatch.setattr("perierr.cli.analyze", fail)
    got, out, err = run_cli(["run", STAR, "--samples", "1000"], capsys)
    assert got == code
    assert err.strip() == f"perierr: {text}" or (code == EXIT_BUG and err.startswith(f"perierr: {text}"))
