"""The benchmark's reference Gibbs sampler solves and samples Henderson's equations correctly.

External checks, each named beside its test:
* Mrode (2014), p. 74: BLUE of the sex effects and BLUP of the 8 animals (fixtures in
  tests/fit/mrode.py), from the sampler's own mixed-model-equation solve.
* Exact identities: draws by the perturbed right-hand side have mean C^-1 r and covariance C^-1
  (C inverted densely with numpy as the reference); the imputation of missing cells follows the
  conditional normal written through the precision matrix (an independent formula).
"""

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from benchmarks.baselines import gibbs  # noqa: E402
from ped2g.fit.prepare import prepare  # noqa: E402

from mrode import COVARIANCES, assert_matches_solutions, config, pedigree, phenotypes  # noqa: E402


def _mrode(example):
    cfg = config(example)
    data = prepare(cfg, phenotypes(), pedigree(), "demo")
    G, R = (np.asarray(m, float) / np.outer(data.y_scale, data.y_scale) for m in COVARIANCES[example])
    return data, G, R


@pytest.mark.parametrize("example", ["E3", "E1", "E2"])
def test_mme_solve_reproduces_mrode(example):
    """Mrode (2014) p. 74, tolerance 1e-3 (the book prints three decimals)."""
    data, G, R = _mrode(example)
    mme = gibbs.MixedModelEquations(data)
    B, U = mme.solve(data.y, G, R)
    assert_matches_solutions(data, B, U, example)


def test_perturbed_solve_draws_have_mean_and_covariance_of_the_conditional():
    """theta = C^-1 (r + h), h ~ N(0, C)  =>  theta ~ N(C^-1 r, C^-1)  (exact identity)."""
    data, G, R = _mrode("E3")
    mme = gibbs.MixedModelEquations(data)
    C = mme.coefficient_matrix(G, R).toarray()
    Cinv = np.linalg.inv(C)
    mean = Cinv @ mme.right_hand_side(data.y, R)
    rng = np.random.default_rng(2024)
    n = 6000
    draws = np.empty((n, len(mean)))
    for k in range(n):
        B, U = mme.draw(data.y, G, R, rng)
        draws[k] = np.vstack([B, U]).ravel(order="F")
    sd = np.sqrt(np.diag(Cinv))
    z = (draws.mean(0) - mean) / (sd / np.sqrt(n))
    assert np.max(np.abs(z)) < 4.5, np.max(np.abs(z))
    cov = np.cov(draws, rowvar=False)
    se = np.sqrt((np.outer(np.diag(Cinv), np.diag(Cinv)) + Cinv ** 2) / n)  # normal theory
    assert np.max(np.abs(cov - Cinv) / se) < 5.0


def test_imputation_follows_conditional_normal():
    """Conditional of the missing cells, checked against the precision-matrix form
    Cov = (Q_mm)^-1, mean = mu_m - (Q_mm)^-1 Q_mo (y_o - mu_o), Q = R^-1 (exact identity)."""
    rng = np.random.default_rng(7)
    R = np.array([[1.0, 0.5, 0.2], [0.5, 2.0, -0.3], [0.2, -0.3, 1.5]])
    n = 40000
    mu = np.tile([0.3, -1.0, 2.0], (n, 1))
    Y = np.tile([1.0, 0.0, 1.0], (n, 1))
    missing = np.zeros((n, 3), bool)
    missing[:, 1] = True
    gibbs._impute(Y, mu, missing, R, rng)
    Q = np.linalg.inv(R)
    o, m = [0, 2], [1]
    cond_var = 1.0 / Q[1, 1]
    cond_mean = mu[0, 1] - cond_var * Q[np.ix_(m, o)] @ (np.array([1.0, 1.0]) - mu[0, o])
    assert abs(Y[:, 1].mean() - cond_mean[0]) < 4.5 * np.sqrt(cond_var / n)
    assert abs(Y[:, 1].var() / cond_var - 1) < 4.5 * np.sqrt(2 / n)
    np.testing.assert_array_equal(Y[:, [0, 2]], 1.0)  # observed cells untouched


def test_gibbs_rejects_extra_random_effects():
    from ped2g.fit.data import RandomEffect
    data, _, _ = _mrode("E1")
    data.random = [RandomEffect("pen", "pen", np.zeros(data.n_records, np.int64), ["a"])]
    with pytest.raises(ValueError, match="animal effect only"):
        gibbs.MixedModelEquations(data)


def test_dense_baseline_has_the_latent_engines_density():
    """With parents before offspring, the Cholesky factor of A is T D^1/2 (Mrode 2014, p. 25-26),
    so the dense-factor model and the recursion give the same log-density at every point."""
    from benchmarks.baselines import dense_latent
    from ped2g.fit import latent

    data, _, _ = _mrode("E3")
    cfg = {"priors": {"sd_scale": 1.0, "lkj_eta": 2.0, "fixed_sd": 10.0}, "fixed_covariances": None}
    recursion = latent.build_model(data, cfg)
    dense, setup = dense_latent.build_model(data, cfg)
    assert setup >= 0
    rng = np.random.default_rng(5)
    point = recursion.initial_point()
    for _ in range(3):
        values = {k: rng.standard_normal(np.shape(v)) for k, v in point.items()}
        np.testing.assert_allclose(dense.compile_logp()(values), recursion.compile_logp()(values), rtol=1e-10)


def test_canonical_levels_draw_each_block_from_its_exact_conditional():
    """The canonical Gibbs reference's two blocks on Mrode (2014)'s bivariate example E3: U given B and
    B given U follow the conditionals of N(C^-1 r, C^-1) (exact identity for a Gaussian with precision
    C: ``x_1 | x_2 ~ N(C_11^-1 (r_1 - C_12 x_2), C_11^-1)``; C built densely by the joint baseline)."""
    data, G, R = _mrode("E3")
    joint = gibbs.MixedModelEquations(data)
    blocks = gibbs.CanonicalLevels(data)
    assert blocks.design.canonical
    p, q, t = joint.p, joint.q, data.n_traits
    C = joint.coefficient_matrix(G, R).toarray()
    r = joint.right_hand_side(data.y, R)
    idx = np.arange((p + q) * t).reshape(t, p + q)      # trait-major: vec([B; U])
    b_idx, u_idx = idx[:, :p].ravel(), idx[:, p:].ravel()
    rng = np.random.default_rng(11)
    B0 = rng.normal(size=(p, t))
    U0 = rng.normal(size=(q, t))
    n = 6000
    for fixed, free, fixed_value in ((b_idx, u_idx, B0), (u_idx, b_idx, U0)):
        cov = np.linalg.inv(C[np.ix_(free, free)])
        mean = cov @ (r[free] - C[np.ix_(free, fixed)] @ fixed_value.ravel(order="F"))
        draws = np.empty((n, len(free)))
        for k in range(n):
            x = (blocks.draw_levels(data.y, B0, G, R, rng) if free is u_idx
                 else blocks.draw_fixed(data.y, U0, R, rng))
            draws[k] = x.ravel(order="F")
        sd = np.sqrt(np.diag(cov))
        z = (draws.mean(0) - mean) / (sd / np.sqrt(n))
        assert np.max(np.abs(z)) < 4.5, np.max(np.abs(z))
        se = np.sqrt((np.outer(np.diag(cov), np.diag(cov)) + cov ** 2) / n)   # normal theory
        assert np.max(np.abs(np.cov(draws, rowvar=False) - cov) / se) < 5.0
