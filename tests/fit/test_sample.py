"""Both samplers reach the known Gaussian posterior, and a seed gives the same draws.

With G and R held at Mrode's (2014) values (Example 3.1, univariate WWG) the posterior of the
sex effects is Gaussian with mean = the BLUE printed on p. 74 (male 4.358, female 3.404; see
tests/fit/mrode.py). The sampled posterior mean must lie within 4 Monte Carlo standard errors
(posterior SD / sqrt(ESS)) plus the book's rounding (5e-4).
"""

import os

import arviz as az
import numpy as np
import pytest

from ped2g.fit import marginal, sample
from ped2g.fit.prepare import prepare

from mrode import SOLUTIONS, config, pedigree, phenotypes


@pytest.mark.parametrize("sampler", ["nutpie", "pymc"])
def test_sampler_reaches_blue(sampler):
    cfg = config("E1")
    cfg["model"]["priors"]["fixed_sd"] = 1.0e3
    data = prepare(cfg, phenotypes(), pedigree(), "demo")
    model = marginal.build_model(data, cfg["model"])
    settings = {"sampler": sampler, "chains": 2, "warmup": 300, "draws": 500, "seed": 3}
    run = sample.run(model, settings, "demo", progress=False)
    beta = run.idata.posterior["beta"].values  # (chain, draw, p, t)
    female = data.y_center[0] + data.y_scale[0] * beta[..., 0, 0]
    male = female + data.y_scale[0] * beta[..., data.x_names.index("sex[M]"), 0]
    for draws, want in ((male, SOLUTIONS["E1"]["WWG"][0]), (female, SOLUTIONS["E1"]["WWG"][1])):
        mcse = draws.std() / np.sqrt(float(az.ess(draws)))
        assert abs(draws.mean() - want) < 4 * mcse + 5e-4, (draws.mean(), want, mcse)
    assert run.info["gradient_evaluations"] > 0 and run.info["sampler"] == sampler
    if sampler == "nutpie":
        again = sample.run(model, settings, "demo", progress=False, compiled=run.info["compiled"])
        np.testing.assert_array_equal(again.idata.posterior["beta"].values, beta)
        other = sample.run(model, settings, "elsewhere", progress=False, compiled=run.info["compiled"])
        assert not np.array_equal(other.idata.posterior["beta"].values, beta)


def test_engine_sampler_options_reach_nutpie():
    # The latent engine asks nutpie for its low-rank mass-matrix adaptation (latent.NUTPIE_OPTIONS);
    # the option must reach the sampler and be recorded, and still reach the Gaussian posterior.
    from ped2g.fit import latent

    cfg = config("E1")
    cfg["model"]["priors"]["fixed_sd"] = 1.0e3
    data = prepare(cfg, phenotypes(), pedigree(), "demo")
    model = marginal.build_model(data, cfg["model"])
    settings = {"sampler": "nutpie", "chains": 2, "warmup": 300, "draws": 500, "seed": 3}
    run = sample.run(model, settings, "demo", progress=False, nutpie_options=latent.NUTPIE_OPTIONS)
    assert run.info["nutpie_options"] == {"low_rank_modified_mass_matrix": True}
    beta = run.idata.posterior["beta"].values
    female = data.y_center[0] + data.y_scale[0] * beta[..., 0, 0]
    mcse = female.std() / np.sqrt(float(az.ess(female)))
    assert abs(female.mean() - SOLUTIONS["E1"]["WWG"][1]) < 4 * mcse + 5e-4


def test_numba_optimisation_level_is_set_inside_and_restored(monkeypatch):
    from numba.core import config as numba_config

    monkeypatch.delenv("NUMBA_OPT", raising=False)
    numba_config.reload_config()
    default = int(numba_config.OPT)
    with sample.numba_optimisation(1):
        assert int(numba_config.OPT) == 1
    assert int(numba_config.OPT) == default
    monkeypatch.setenv("NUMBA_OPT", "2")            # a user's own setting survives the block
    numba_config.reload_config()
    with sample.numba_optimisation(1):
        assert int(numba_config.OPT) == 1
    assert int(numba_config.OPT) == 2
    with sample.numba_optimisation(None):            # None leaves numba alone
        assert int(numba_config.OPT) == 2
    monkeypatch.delenv("NUMBA_OPT")
    numba_config.reload_config()


def test_exact_numba_math_turns_fast_math_off_here_and_in_child_processes(monkeypatch):
    import pytensor

    monkeypatch.setenv("PYTENSOR_FLAGS", "floatX=float64")
    fast = pytensor.config.numba__fastmath
    with sample.exact_numba_math():
        assert pytensor.config.numba__fastmath is False
        # chain processes read their flags from the environment
        assert os.environ["PYTENSOR_FLAGS"] == "floatX=float64,numba__fastmath=False"
    assert pytensor.config.numba__fastmath == fast
    assert os.environ["PYTENSOR_FLAGS"] == "floatX=float64"
    monkeypatch.delenv("PYTENSOR_FLAGS")
    with sample.exact_numba_math():
        assert os.environ["PYTENSOR_FLAGS"] == "numba__fastmath=False"
    assert "PYTENSOR_FLAGS" not in os.environ
