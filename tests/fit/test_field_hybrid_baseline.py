"""The hybrid candidate for field designs (benchmarks/baselines/field_hybrid.py): its Gibbs step
draws the extra levels and the missing cells from their exact conditional distribution.

Oracle: the conditional distribution of a multivariate normal (exact identity; e.g. Anderson 2003,
*An Introduction to Multivariate Statistical Analysis*, Thm 2.5.1 [M]): with every random effect
``u`` ~ N(0, Gamma) and the observed cells ``y_O = X b + W_O u + e_O``,
``E[u | y_O] = Gamma W_O' V_OO^-1 (y_O - X_O b)``, ``V_OO = W_O Gamma W_O' + R~_OO``, built densely
from the relationship matrix here. The step's empirical means over many draws must match within
Monte Carlo error; a step that ignored the maternal levels' covariance or used R instead of R_oo for
records with missing cells would miss by many standard errors.
"""

import sys
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests" / "fit"))

import field_study  # noqa: E402
from benchmarks.baselines import field_hybrid  # noqa: E402

DRAWS = 3000


def _dense_conditional(data, G, R, covs, beta):
    """(E[u | y_O] for each effect's levels, E[y_M | y_O]) on the standardised scale."""
    from ped2g.pedigree.relationships import relationship_matrix

    t = data.n_traits
    n = data.n_records
    A = relationship_matrix(data.pedigree)
    blocks = [np.kron(A, G)] + [np.kron(np.eye(e.n_levels), C) for e, C in zip(data.random, covs)]
    sizes = [b.shape[0] for b in blocks]
    Gamma = np.zeros((sum(sizes), sum(sizes)))
    off = np.concatenate([[0], np.cumsum(sizes)])
    for b, lo in zip(blocks, off):
        Gamma[lo:lo + b.shape[0], lo:lo + b.shape[0]] = b
    W = np.zeros((n * t, sum(sizes)))
    for r in range(n):
        for k in range(t):
            W[r * t + k, off[0] + data.record_animal[r] * t + k] = 1.0
            for c, e in enumerate(data.random):
                if e.level[r] >= 0:
                    W[r * t + k, off[1 + c] + e.level[r] * t + k] = 1.0
    Rfull = np.kron(np.eye(n), R)
    obs = ~data.missing.ravel()
    mu = (data.X @ beta).ravel()
    V_oo = W[obs] @ Gamma @ W[obs].T + Rfull[np.ix_(obs, obs)]
    gain = np.linalg.solve(V_oo, data.y.ravel()[obs] - mu[obs])
    u_mean = Gamma @ W[obs].T @ gain
    V_mo = W[~obs] @ Gamma @ W[obs].T + Rfull[np.ix_(~obs, obs)]
    y_missing = mu[~obs] + V_mo @ gain
    levels = [u_mean[off[1 + c]:off[2 + c]].reshape(-1, t) for c in range(len(data.random))]
    return levels, y_missing


@pytest.fixture(scope="module")
def study():
    data, cfg, truth = field_study.design(seed=3, animals=120, founders=20, phenotyped=80)
    data = field_study.simulate(data, truth, np.random.default_rng(3))
    maternal = next(e for e in data.random if e.name == "maternal")
    assert data.missing.any() and (~maternal.known).any()   # both cases the step must handle
    t = data.n_traits
    G = 0.35 * np.eye(t) + 0.05
    R = 0.3 * np.eye(t) + 0.08
    covs = [0.2 * np.eye(t) + 0.03 * (c + 1) for c in range(len(data.random))]
    beta = np.random.default_rng(0).normal(size=(data.X.shape[1], t)) * 0.3
    return data, G, R, covs, beta


def test_level_draw_matches_the_dense_conditional_means(study):
    data, G, R, covs, beta = study
    core = field_hybrid.LevelDraw(data)
    rng = np.random.default_rng(5)
    draws = [core.draw(G, R, beta, np.array(covs), rng) for _ in range(DRAWS)]
    want_levels, want_missing = _dense_conditional(data, G, R, covs, beta)
    for c, eff in enumerate(data.random):
        got = np.array([d[1][c] for d in draws])
        se = got.std(axis=0) / np.sqrt(DRAWS)
        z = (got.mean(axis=0) - want_levels[c]) / se
        assert np.max(np.abs(z)) < 5.0, eff.name
    completed = np.array([d[0] + sum(e.take(u) for e, u in zip(data.random, d[1])) for d in draws])
    got = completed.reshape(DRAWS, -1)[:, data.missing.ravel()]
    z = (got.mean(axis=0) - want_missing) / (got.std(axis=0) / np.sqrt(DRAWS))
    assert np.max(np.abs(z)) < 5.0
    # the observed cells are kept as they are
    np.testing.assert_allclose(completed[0][~data.missing], data.y[~data.missing], atol=1e-12)


def test_level_draw_of_one_effect_leaves_the_others_and_the_missing_cells(study):
    """Drawing only the cohort's levels: the records returned are the observed ones net of the
    cohort draw, missing cells at 0 (the likelihood then drops them)."""
    data, G, R, covs, beta = study
    cohort = [e.name for e in data.random].index("cohort")
    core = field_hybrid.LevelDraw(data, drawn=[cohort], impute=False)
    adjusted, levels = core.draw(G, R, beta, np.array(covs), np.random.default_rng(1))
    assert len(levels) == 1 and levels[0].shape == (data.random[cohort].n_levels, data.n_traits)
    expect = np.where(data.missing, 0.0, data.y) - data.random[cohort].take(levels[0])
    np.testing.assert_allclose(adjusted, expect, atol=1e-12)
