"""The sparse engine's Gibbs step for missing cells on the canonical route
(ped2g.fit.sparse_augment, docs/methods.md §2.14).

Oracles: the conditional distribution of the missing cells given the observed ones under the
dense multivariate normal of the same model, ``V = Z A Z' (x) G + I (x) R`` -- the conditional of a
partitioned normal, an exact identity (Anderson, *An Introduction to Multivariate Statistical
Analysis*, 3rd ed. 2003, Thm 2.5.1 [recalled from memory]); the breeding values' conditional mean
``(A Z' (x) G) V^-1 (y - X b)`` (Henderson's BLUP with known covariances [C: elementary]); the
exact route (cells dropped) on the same data, posterior means within Monte Carlo error (ArviZ
``mcse``, Vehtari et al. 2021 [M]).
"""

import numpy as np
import pytest
import xarray as xr

from ped2g.fit import augment, sparse
from ped2g.fit.sparse_augment import SparseMissingDraw, complete_design
from ped2g.pedigree.relationships import relationship_matrix

from test_latent_vs_marginal import assert_posteriors_agree, small_study

G = np.array([[0.6, 0.25], [0.25, 0.45]])
R = np.array([[0.5, 0.2], [0.2, 0.7]])
BETA = np.array([[0.1, -0.2], [0.4, 0.3]])


def dense_joint(data):
    """Mean (record-major) and covariance of vec(Y') under the model with G, R and BETA."""
    A = relationship_matrix(data.pedigree)
    K = A[np.ix_(data.record_animal, data.record_animal)]
    V = np.kron(K, G) + np.kron(np.eye(data.n_records), R)
    return (data.X @ BETA).ravel(), V, A


def exact_conditional(data):
    mean, V, _ = dense_joint(data)
    miss = data.missing.ravel()
    y = np.where(data.missing, 0.0, data.y).ravel()
    # the flat order of the step: trait by trait, record order within a trait
    order = np.concatenate([np.flatnonzero(data.missing[:, j]) * data.n_traits + j for j in range(data.n_traits)])
    obs = np.flatnonzero(~miss)
    B = V[np.ix_(order, obs)] @ np.linalg.inv(V[np.ix_(obs, obs)])
    mu = mean[order] + B @ (y[obs] - mean[obs])
    cov = V[np.ix_(order, order)] - B @ V[np.ix_(obs, order)]
    return mu, cov


def batch_means(x: np.ndarray, batches: int = 40) -> tuple[np.ndarray, np.ndarray]:
    """Mean of each column and its Monte Carlo standard error by batch means."""
    m = len(x) // batches
    b = x[: m * batches].reshape(batches, m, -1).mean(axis=1)
    return x.mean(axis=0), b.std(axis=0, ddof=1) / np.sqrt(batches)


def test_gibbs_step_draws_missing_cells_from_their_exact_conditional():
    data = small_study(seed=5, n=50, missing=0.3)
    design = complete_design(data)
    assert design.canonical
    core = SparseMissingDraw(data, design)
    mu, cov = exact_conditional(data)
    rng = np.random.default_rng(7)
    missing, y_c = core.initial()
    draws = []
    for it in range(6200):
        missing, y_c = core.draw(y_c, G, R, BETA, [], rng)
        if it >= 200:
            draws.append(missing)
    x = np.array(draws)
    assert x.shape[1] == len(mu) >= 10
    mean, se = batch_means(x)
    assert np.all(np.abs(mean - mu) <= 4.5 * se), np.max(np.abs(mean - mu) / se)
    # second moments about the exact mean: their expectation is the exact conditional variance
    sq = (x - mu) ** 2
    m2, se2 = batch_means(sq)
    assert np.all(np.abs(m2 - np.diag(cov)) <= 4.5 * se2), np.max(np.abs(m2 - np.diag(cov)) / se2)
    # and one covariance between two cells of the same record, where R couples them
    rows = np.concatenate([np.flatnonzero(data.missing[:, j]) for j in range(2)])
    same = [(i, k) for i in range(len(rows)) for k in range(i + 1, len(rows)) if rows[i] == rows[k]]
    if same:
        i, k = same[0]
        cross, se_c = batch_means(((x[:, i] - mu[i]) * (x[:, k] - mu[k]))[:, None])
        assert abs(cross[0] - cov[i, k]) <= 4.5 * se_c[0]
    # the completed records keep every observed cell
    np.testing.assert_array_equal(y_c[~data.missing], data.y[~data.missing])


def test_breeding_value_means_equal_dense_blup_on_the_completed_records():
    data = small_study(seed=6, n=50, missing=0.3)
    design = complete_design(data)
    core = SparseMissingDraw(data, design)
    rng = np.random.default_rng(3)
    filled = rng.normal(size=int(data.missing.sum()))
    post = xr.Dataset({"G": (("chain", "draw", "t1", "t2"), G[None, None]),
                       "R": (("chain", "draw", "t1", "t2"), R[None, None]),
                       "beta": (("chain", "draw", "x", "t1"), BETA[None, None]),
                       "missing": (("chain", "draw", "m"), filled[None, None])})

    class Idata:
        posterior = post

    got = sparse.breeding_values(data, Idata(), rng, conditional_mean=True, design=design)[0]
    mean, V, A = dense_joint(data)
    y_c = core.completed(filled)
    cov_uy = np.kron(A[:, data.record_animal], G)                      # Cov(vec u', vec y')
    want = (cov_uy @ np.linalg.solve(V, y_c.ravel() - mean)).reshape(-1, 2)
    np.testing.assert_allclose(got, want, rtol=1e-8, atol=1e-10)


def test_the_route_follows_the_config_and_the_design():
    data = small_study(seed=5, n=50, missing=0.3)
    full = small_study(seed=5, n=50, missing=0.0)
    cfg = {"missing_values": "gibbs"}
    assert sparse.missing_route(full, cfg)[0] == "none"
    # auto takes the Gibbs step where it applies (measured faster, benchmarks/README.md); nuts keeps
    # the exact route with NUTS alone
    assert sparse.missing_route(data, {"missing_values": "auto"})[0] == "gibbs"
    assert sparse.missing_route(data, {"missing_values": "nuts"})[0] == "masked"
    assert sparse.missing_route(data, cfg)[0] == "gibbs"
    eng = sparse.SparseEngine()
    ok, why = eng.applies(data, cfg)
    assert ok and "canonical route" in why and "Gibbs step" in why
    built = eng.build(data, {**cfg, "priors": {"sd_scale": 1.0, "lkj_eta": 2.0, "fixed_sd": 10.0}})
    assert built.missing_values == "gibbs" and len(built.extra_steps) == 1
    assert {v.name for v in built.extra_steps[0].vars} == {augment.MISSING_NAME, augment.ROTATED_NAME}
    assert sparse.data_values(data, cfg) == {}
    ok, why = eng.applies(data, {"missing_values": "nuts"})
    assert ok and "canonical" not in why and "dropped exactly" in why


def test_gibbs_is_declined_with_an_extra_random_effect():
    from dataclasses import replace

    from ped2g.fit.data import RandomEffect

    data = small_study(seed=5, n=50, missing=0.3)
    level = np.arange(data.n_records) % 4
    data = replace(data, random=[RandomEffect(name="pen", column="pen", level=level,
                                              levels=[str(i) for i in range(4)])])
    route, why = sparse.missing_route(data, {"missing_values": "gibbs"})
    assert route == "masked" and "extra random effects" in why
    assert sparse.missing_route(data, {"missing_values": "auto"})[0] == "masked"


@pytest.mark.slow
def test_gibbs_route_and_exact_route_agree_within_monte_carlo_error():
    import nutpie

    from ped2g.fit import sample

    data = small_study(n=150, missing=0.15)       # 120 records, 2 traits
    cfg = {"priors": {"sd_scale": 1.0, "lkj_eta": 2.0, "fixed_sd": 10.0}, "fixed_covariances": None,
           "missing_values": "gibbs"}
    eng = sparse.SparseEngine()
    built = eng.build(data, cfg)
    assert built.missing_values == "gibbs"
    run = sample.run(built.model, {"chains": 2, "warmup": 300, "draws": 600, "seed": 21}, "p", progress=False,
                     extra_steps=built.extra_steps)
    assert run.info["sampler"] == "pymc" and run.info["compound_steps"][0] == "MissingValueStep"
    # the missing cells are kept (breeding values need them); the completed records are not
    assert "missing" in run.idata.posterior and augment.ROTATED_NAME not in run.idata.posterior
    post_g = run.idata
    compiled = nutpie.compile_pymc_model(sparse.build_model(data, {**cfg, "missing_values": "nuts"}),
                                         backend="numba", var_names=["G", "R", "beta"])
    post_m = nutpie.sample(compiled, chains=2, tune=300, draws=600, seed=22, cores=2, progress_bar=False)
    assert_posteriors_agree(post_g, post_m)
