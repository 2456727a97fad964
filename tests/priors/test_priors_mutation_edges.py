"""Edges of the prior block (perierr/priors/info.py) written for the mutation run of the priors group.

``PriorInfo.from_samples`` sorts a sampler's ``info`` into typed fields and ``extra``; ``to_dict`` writes the
JSON ``prior`` block. The references are their documented contracts (docstrings of PriorInfo, from_samples and
to_dict): the prior supplies name and parameters, the samples the method; keys that are not fields, or whose
value is None, are kept in ``extra``; the block lists name, parameters, every reported diagnostic, then the
method.
"""

import numpy as np
import pytest

from perierr.priors import ExponentialDensity
from perierr.priors.info import PriorInfo
from perierr.sampling.gaussian import Samples


def samples_with(info, method="mcmc"):
    """Ten invented draws carrying a sampler's info block."""
    return Samples(np.zeros((10, 6)), method=method, seed=3, info=dict(info))


def test_from_samples_sorts_known_unknown_and_none_valued_keys():
    prior = ExponentialDensity(1350.0)
    info = {"effective_size": 812.5, "burn_in": 40, "thin": None, "chain_note": "invented", "n_steps": 2000}
    block = PriorInfo.from_samples(prior, samples_with(info))
    assert (block.name, block.parameters, block.method) == ("edsd", {"L_pc": 1350.0}, "mcmc")
    assert (block.effective_size, block.burn_in, block.n_steps) == (812.5, 40, 2000)
    # a known key with the value None is not reported as a field: it is kept in extra, as an unknown key is
    assert block.thin is None
    assert block.extra == {"thin": None, "chain_note": "invented"}


def test_info_keys_named_like_the_block_s_own_fields_do_not_replace_them():
    # from_samples docstring: the prior supplies name and parameters, the samples supply method; the sampler's
    # info cannot overwrite them (they are not sampler diagnostics), so they end in extra
    prior = ExponentialDensity(1000.0)
    info = {"name": "other", "parameters": {}, "method": "other", "extra": {"a": 1}, "max_weight": 0.01}
    block = PriorInfo.from_samples(prior, samples_with(info, method="reweight"))
    assert (block.name, block.parameters, block.method) == ("edsd", {"L_pc": 1000.0}, "reweight")
    assert block.max_weight == 0.01
    assert block.extra == {"name": "other", "parameters": {}, "method": "other", "extra": {"a": 1}}


def test_to_dict_lists_name_parameters_diagnostics_extra_then_method():
    block = PriorInfo(
        "edsd", {"L_pc": 1350.0}, "mcmc", effective_size=812.5, n_walkers=32, extra={"chain_note": "invented"}
    )
    out = block.to_dict()
    assert list(out) == ["name", "parameters", "effective_size", "n_walkers", "chain_note", "method"]
    assert out == {
        "name": "edsd",
        "parameters": {"L_pc": 1350.0},
        "effective_size": 812.5,
        "n_walkers": 32,
        "chain_note": "invented",
        "method": "mcmc",
    }
    # no field named "extra" in the block, also when extra is empty
    assert "extra" not in PriorInfo("none", {}, "gaussian").to_dict()
    assert PriorInfo("none", {}, "gaussian").to_dict() == {"name": "none", "parameters": {}, "method": "gaussian"}


@pytest.mark.parametrize("method", ["reweight", "gaussian"])
def test_round_trip_of_a_sampler_block(method):
    prior = ExponentialDensity(500.0)
    info = {"effective_size": 100.0, "n_drawn": 200, "n_zero_weight": 3, "custom": [1, 2]}
    out = PriorInfo.from_samples(prior, samples_with(info, method=method)).to_dict()
    assert out == {
        "name": "edsd",
        "parameters": {"L_pc": 500.0},
        "effective_size": 100.0,
        "n_drawn": 200,
        "n_zero_weight": 3,
        "custom": [1, 2],
        "method": method,
    }


def test_a_bad_length_shows_an_example_with_its_unit():
    # project rule: an error names the field, the value and what was expected; lengths take a unit and a bare
    # number is in pc (parse module docstring), the example being 1.35 kpc = 1350 pc (astropy.units)
    from perierr.errors import InputError

    with pytest.raises(InputError) as err:
        ExponentialDensity("a long way")
    assert err.value.field == "L"
    assert "expected a length in pc" in err.value.expected and "'1.35 kpc'" in err.value.expected
    assert ExponentialDensity("1.35 kpc").length_scale == pytest.approx(1350.0, rel=1e-12)
    assert ExponentialDensity("1350").length_scale == 1350.0


def test_a_mapping_names_a_prior_and_its_parameters():
    # resolve_prior docstring: a mapping {"name": ..., parameters...} is read like the text form
    from perierr.errors import InputError
    from perierr.priors import GeneralizedGamma, resolve_prior

    prior = resolve_prior({"name": "ggd", "alpha": 1.5, "beta": 2, "L": "1 kpc"})
    assert isinstance(prior, GeneralizedGamma)
    assert prior.parameters == {"alpha": 1.5, "beta": 2.0, "L_pc": 1000.0}
    # a mapping without the parameters is the bare name, which the parser then refuses by name
    with pytest.raises(InputError) as err:
        resolve_prior({"name": "edsd"})
    assert err.value.value == "edsd"
    assert "missing parameter(s) L for edsd" in err.value.expected


def test_edsd_and_generalized_gamma_have_no_density_at_infinite_distance():
    # both densities fall as exp(-r/L) (Bailer-Jones 2015, eq. 18; Bailer-Jones et al. 2021, eq. 3), so their
    # limit at r -> inf is 0 and the log density is -inf, not inf - inf = NaN
    from perierr.priors.densities import ExponentialDensity, GeneralizedGamma

    for prior in (ExponentialDensity(1350.0), GeneralizedGamma(1.5, 2.5, 900.0)):
        got = prior.log_density(np.array([np.inf, 1.0e300, 100.0]))
        assert got[0] == -np.inf
        assert got[1] < -1e290 and np.isfinite(got[2])  # finite but vanishing far out, not NaN
        assert prior.density(np.inf) == 0.0
