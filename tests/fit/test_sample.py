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


def test_blas_threads_share_the_cpus_between_parallel_chains(monkeypatch):
    # Chains that sample at once share the CPUs: with 2 CPUs two chains get one BLAS thread each
    # (the oversubscription measured in benchmarks/README.md), one chain keeps both, and never 0.
    monkeypatch.setattr(sample, "available_cpus", lambda: 2)
    assert [sample.blas_threads(c) for c in (1, 2, 4)] == [2, 1, 1]
    monkeypatch.setattr(sample, "available_cpus", lambda: 8)
    assert [sample.blas_threads(c) for c in (1, 2, 4, 0)] == [8, 4, 2, 8]


def test_blas_thread_limit_holds_inside_and_is_lifted_after():
    # Read back through threadpoolctl (the general-purpose library that sets it): every BLAS
    # library loaded here (numpy's and scipy's OpenBLAS in a pip install) runs one thread inside.
    import scipy.linalg  # noqa: F401  (loads scipy's BLAS too)
    from threadpoolctl import threadpool_info

    before = {i["filepath"]: i["num_threads"] for i in threadpool_info() if i["user_api"] == "blas"}
    assert before, "no BLAS library is loaded"
    with sample.blas_thread_limit(1):
        inside = {i["filepath"]: i["num_threads"] for i in threadpool_info() if i["user_api"] == "blas"}
    after = {i["filepath"]: i["num_threads"] for i in threadpool_info() if i["user_api"] == "blas"}
    assert set(inside.values()) == {1}
    assert after == before


def _blas_threads_of_a_fresh_process(queue):
    import numpy  # noqa: F401  (loads numpy's BLAS in this new process)
    from threadpoolctl import threadpool_info

    queue.put(sorted({i["num_threads"] for i in threadpool_info() if i["user_api"] == "blas"}))


def test_blas_thread_limit_reaches_chain_processes_started_fresh():
    # PyMC forks its chain processes on Linux (the limit is inherited) but starts them fresh on
    # macOS (forkserver), where the BLAS is loaded anew: the limit must then come through the
    # environment. A spawned process, which shares nothing with this one, reads it back.
    import multiprocessing

    ctx = multiprocessing.get_context("spawn")
    queue = ctx.Queue()
    before = {name: os.environ.get(name) for name in sample.BLAS_THREAD_VARIABLES}
    with sample.blas_thread_limit(1):
        child = ctx.Process(target=_blas_threads_of_a_fresh_process, args=(queue,))
        child.start()
        threads = queue.get(timeout=120)
        child.join()
    assert threads == [1]
    for name in sample.BLAS_THREAD_VARIABLES:      # and the variables are restored after
        assert os.environ.get(name) == before[name]


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


class _Clock:
    def __init__(self):
        self.now = 0.0

    def __call__(self):
        return self.now


def test_progress_log_writes_one_line_per_interval_with_rate_and_time_left(caplog):
    # A fake clock and nutpie-style reports (iterations done, warm-up flag, divergences per
    # chain). Expected values by hand from the definitions: draws/s = iterations of all chains /
    # seconds since the first report; time left = iterations still to do / that rate.
    import logging

    clock = _Clock()
    log = logging.getLogger("ped2g.test_progress")
    tracker = sample.ProgressLog(log, "population north", chains=2, warmup=100, draws=100, interval=10.0,
                                 clock=clock)
    reports = [(0.0, "0|0,true,0;0,true,0;"),            # first report: the clock starts
               (5.0, "20|10,true,0;10,true,0;"),         # 5 s < interval: no line
               (10.0, "90|50,true,1;40,true,0;"),        # line 1: 90 / 10 = 9.0 draws/s, 310 left
               (15.0, "140|70,true,1;70,true,0;"),       # no line
               (20.0, "240|130,false,1;110,false,2;"),   # line 2: 12.0 draws/s, 160 left
               (29.9, "330|170,false,1;160,false,2;")]   # 9.9 s after line 2: no line
    with caplog.at_level(logging.INFO, logger="ped2g.test_progress"):
        for t, text in reports:
            clock.now = t
            tracker.nutpie_callback(text)
    lines = [r.getMessage() for r in caplog.records if r.name == "ped2g.test_progress"]
    assert lines == [
        "population north: warm-up, iteration 40 of 200 (slowest of 2 chains), 9.0 draws/s, 1 divergent "
        "transitions so far (warm-up included), about 34 s left",          # 310 / 9 = 34.4 s
        "population north: sampling, iteration 110 of 200 (slowest of 2 chains), 12.0 draws/s, 3 divergent "
        "transitions so far (warm-up included), about 13 s left",          # 160 / 12 = 13.3 s
    ]


@pytest.mark.parametrize("sampler", ["nutpie", "pymc"])
def test_progress_lines_appear_at_the_interval_when_not_on_a_terminal(sampler, caplog, monkeypatch):
    import logging

    import pymc as pm

    monkeypatch.setattr(sample, "stderr_is_terminal", lambda: False)
    with pm.Model() as model:
        pm.Normal("x", 0.0, 1.0, shape=400)
    # measured here: nutpie ~0.4 s for 2 x 3,000 iterations on a loaded machine but 0.19 s for
    # 2 x 1,500 on a quiet one, PyMC ~1.5 s for 2 x 800 (0.75 s for 2 x 400 on a quiet machine
    # after the other tests of this file): sampling must last several intervals
    interval = 0.03 if sampler == "nutpie" else 0.2
    n = 3000 if sampler == "nutpie" else 800
    settings = {"sampler": sampler, "chains": 2, "warmup": n, "draws": n, "seed": 1}
    log = logging.getLogger("ped2g.test_progress")
    with caplog.at_level(logging.INFO, logger="ped2g.test_progress"):
        run = sample.run(model, settings, "tiny", progress=True, log=log, progress_interval=interval)
    records = [r for r in caplog.records if r.name == "ped2g.test_progress"]
    seconds = run.info["sampling_seconds"]
    assert seconds > 4 * interval, seconds          # long enough for several lines
    # never more often than the interval (1 ms for the two clocks' resolution), at most one per interval
    gaps = np.diff([r.created for r in records])
    assert np.all(gaps >= interval - 1e-3), gaps
    assert 2 <= len(records) <= seconds / interval + 1, (len(records), seconds)
    text = [r.getMessage() for r in records]
    assert all(line.startswith("population tiny: ") and "draws/s" in line and "divergent transitions so far" in line
               and (" left" in line or "not known yet" in line) for line in text), text
    assert "warm-up, iteration" in text[0]
    assert run.idata.posterior["x"].shape == (2, n, 400)


def test_no_progress_lines_under_a_visible_progress_bar(caplog, monkeypatch):
    import logging

    import pymc as pm

    monkeypatch.setattr(sample, "stderr_is_terminal", lambda: True)
    with pm.Model() as model:
        pm.Normal("x", 0.0, 1.0, shape=400)
    settings = {"sampler": "nutpie", "chains": 2, "warmup": 1500, "draws": 1500, "seed": 1}
    log = logging.getLogger("ped2g.test_progress")
    with caplog.at_level(logging.INFO, logger="ped2g.test_progress"):
        sample.run(model, settings, "tiny", progress=True, log=log, progress_interval=0.01)
    assert not [r for r in caplog.records if r.name == "ped2g.test_progress"]


def test_compound_mass_adaptation_switch(monkeypatch):
    """PyMC's default windowed variance adaptation unless the gradient-based one is asked for
    (a benchmark option, measured in benchmarks/README.md); an unknown name is an error."""
    import pymc as pm
    from pymc.step_methods.hmc import quadpotential

    with pm.Model() as model:
        pm.Normal("x", shape=3)
    values = model.value_vars
    start = {"x": np.array([1.0, 2.0, 3.0])}
    assert sample._compound_potential(values, start, 300) is None
    monkeypatch.setattr(sample, "COMPOUND_MASS_ADAPTATION", "gradient")
    pot = sample._compound_potential(values, start, 300)
    assert isinstance(pot, quadpotential.QuadPotentialDiagAdaptExp)
    assert pot._use_grads and pot._stop_adaptation == 250   # as pm.sample's "jitter+adapt_diag_grad"
    monkeypatch.setattr(sample, "COMPOUND_MASS_ADAPTATION", "windowed")
    with pytest.raises(ValueError, match="windowed"):
        sample._compound_potential(values, start, 300)
