"""The sparse engine (ped2g.fit.sparse, docs/methods.md §2.14) behind the engine interface.

Oracles: the kernel of ped2g.fit.sparse_mme, itself checked against dense scipy in
test_sparse_mme.py [C]; Mrode (2014) p. 74 [V: via tests/fit/mrode.py]; the marginal engine on the
same data and priors, posterior means within Monte Carlo error (ArviZ ``mcse``, Vehtari et al.
2021 [M]) as in test_latent_vs_marginal.py.
"""

import numpy as np
import pytensor
import pytensor.tensor as pt
import pytest

from ped2g.fit import engine, sparse, sparse_mme

from test_sparse_mme import small_study


@pytest.mark.parametrize("mode", ["FAST_COMPILE", "NUMBA"])
def test_op_outputs_and_gradient_equal_the_kernel(mode):
    from ped2g.fit.sparse_likelihood_op import sparse_mme_logp

    s = small_study(3)
    d = s["design"]
    res, g, r, cv = pt.dmatrix("res"), pt.dmatrix("g"), pt.dmatrix("r"), pt.dtensor3("cv")
    lp = sparse_mme_logp(res, g, r, cv, [pytensor.shared(a) for a in d.inputs()])
    f = pytensor.function([res, g, r, cv], [lp, *pytensor.grad(lp, [res, g, r, cv])], mode=mode)
    got = f(s["resid"], s["G"], s["R"], np.stack(s["covs"]))
    want = sparse_mme.logp_and_grad(d, s["resid"], s["G"], s["R"], s["covs"])
    assert got[0] == pytest.approx(want[0], rel=1e-13)
    for a, b in zip(got[1:], want[1:]):
        np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-12)


def test_auto_keeps_the_marginal_engine_within_memory_but_sparse_runs_by_name():
    from ped2g.fit.prepare import prepare

    from mrode import config, pedigree, phenotypes

    data = prepare(config("E1"), phenotypes(), pedigree(), "demo")
    name, eng, _ = engine.choose(data, "sparse", {})
    assert name == "sparse" and isinstance(eng, sparse.SparseEngine)
    # Mrode's calves fit in memory: auto keeps the marginal engine
    assert engine.choose(data, "auto", {})[0] == "marginal"
    assert "sparse" in engine.ENGINES and engine.AUTO_ORDER[0] == "sparse"


@pytest.mark.parametrize("example", ["E3", "E1"])
def test_engine_breeding_values_reproduce_mrode(example):
    # With G, R and the fixed effects at their generalised-least-squares values, the engine's
    # conditional means are the BLUP: Mrode (2014) p. 74 [V], tolerance 1e-3.
    import arviz as az

    from ped2g.fit.prepare import prepare
    from ped2g.fit.priors import fixed_covariances

    from mrode import assert_matches_solutions, config, pedigree, phenotypes

    cfg = config(example)
    data = prepare(cfg, phenotypes(), pedigree(), "demo")
    fixed = fixed_covariances(cfg["model"], data.y_scale, data.traits)
    eng = sparse.SparseEngine()
    beta = sparse_mme.generalised_least_squares(eng.design(data), data.y, data.X, fixed["G"], fixed["R"])
    idata = az.from_dict(posterior={"G": fixed["G"][None, None], "R": fixed["R"][None, None],
                                    "beta": beta[None, None]})
    bv = eng.breeding_values(data, idata, np.random.default_rng(0), conditional_mean=True)
    assert bv.shape == (1, data.pedigree.n, data.n_traits)
    assert_matches_solutions(data, beta, bv[0], example)
    draws = eng.breeding_values(data, idata, np.random.default_rng(1))
    assert np.all(np.isfinite(draws)) and not np.allclose(draws, bv)


@pytest.mark.slow
@pytest.mark.parametrize("missing", [0.1, 0.0])
def test_sparse_and_marginal_engines_agree_within_monte_carlo_error(missing):
    import nutpie

    from ped2g.fit import marginal

    from test_latent_vs_marginal import assert_posteriors_agree, small_study as study

    data = study(n=150, missing=missing)      # 120 records, 2 traits
    # with every cell observed the sparse engine takes its canonical route
    assert sparse_mme.design_for(data).canonical == (missing == 0.0)
    cfg = {"priors": {"sd_scale": 1.0, "lkj_eta": 2.0, "fixed_sd": 10.0}, "fixed_covariances": None,
           "missing_values": "nuts"}
    posts = []
    for build, seed in ((marginal.build_model, 11), (sparse.build_model, 12)):
        compiled = nutpie.compile_pymc_model(build(data, cfg), backend="numba", var_names=["G", "R", "beta"])
        posts.append(nutpie.sample(compiled, chains=2, tune=300, draws=500, seed=seed, cores=2,
                                   progress_bar=False))
    post_m, post_s = posts
    assert_posteriors_agree(post_s, post_m)


@pytest.mark.parametrize("a3", [0.3, 1e-3, 1e-5])
def test_likelihood_and_gradient_stay_exact_as_a_signed_scale_nears_zero(a3):
    # The sparse engine samples signed scales (docs/methods.md §2.4), so a maternal SD near zero is an
    # ordinary point. There the mixed-model equations carry the inverse of a nearly singular
    # covariance; the log-likelihood must still equal the dense multivariate-normal evaluation
    # (scipy.stats.multivariate_normal, via test_sparse_mme.dense_logpdf) [C], and its gradient with
    # respect to the signed scales must equal central differences of that dense evaluation.
    from ped2g.fit.priors import correlation_cholesky
    from ped2g.fit.sparse_likelihood_op import sparse_mme_logp

    from test_sparse_mme import dense_logpdf

    s = small_study(3)
    d = s["design"]
    x = np.array([0.4, -0.2, 0.3])           # free partial correlations, order (1,0), (2,0), (2,1)
    a_var, x_var = pt.dvector("a"), pt.dvector("x")
    chol = a_var[:, None] * correlation_cholesky(x_var, 3)
    maternal = chol @ chol.T
    covs = pt.stack([maternal, pt.as_tensor_variable(s["covs"][1])])
    lp = sparse_mme_logp(pt.as_tensor_variable(s["resid"]), pt.as_tensor_variable(s["G"]),
                         pt.as_tensor_variable(s["R"]), covs, [pytensor.shared(v) for v in d.inputs()])
    f = pytensor.function([a_var, x_var], [lp, pytensor.grad(lp, a_var), maternal], mode="FAST_COMPILE")

    def dense(a):
        return dense_logpdf(s, s["resid"], s["G"], s["R"], [f(a, x)[2], s["covs"][1]])

    a = np.array([0.5, -0.4, a3])
    value, grad, _ = f(a, x)
    assert value == pytest.approx(dense(a), abs=1e-8)
    # the third scale's sign flipped with the partial correlations of the third trait: the same matrix
    assert f(a * [1, 1, -1], x * [1, -1, -1])[0] == pytest.approx(value, abs=1e-10)
    h = 1e-5
    for j in range(3):
        e = np.zeros(3)
        e[j] = h
        fd = (dense(a + e) - dense(a - e)) / (2 * h)
        assert grad[j] == pytest.approx(fd, abs=1e-6)
