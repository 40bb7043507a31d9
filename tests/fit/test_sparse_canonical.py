"""The sparse engine's canonical route (ped2g.fit.sparse_mme.canonical_logp_and_grad, docs/methods.md
§2.14): with no extra effect and every cell observed, one transformation W (W R W' = I,
W G W' = diagonal) splits the t-trait animal model into t one-trait models.

Oracles: the dense multivariate-normal log-density (scipy.stats.multivariate_normal) [C]; central
differences of that dense log-density for the gradients [C]; the exact posterior covariance of the
breeding values, the dense inverse of the coefficient matrix (numpy.linalg.inv) [C]; and the
general route of the same kernel module, itself checked against dense scipy in test_sparse_mme.py.
"""

import numpy as np
import pytensor
import pytensor.tensor as pt
import pytest
from scipy import stats

from ped2g.fit import sparse_mme as sm
from ped2g.pedigree.relationships import relationship_matrix

from test_sparse_mme import random_cov, small_pedigree


def complete_study(t, seed=5):
    rng = np.random.default_rng(seed)
    ped = small_pedigree(seed=seed)
    rec = np.concatenate([np.arange(4, ped.n), rng.integers(4, ped.n, 8)])     # 8 repeated records
    obs = np.ones((len(rec), t), dtype=bool)
    return dict(ped=ped, rec=rec, design=sm.build_design(ped, rec, obs, [], keep_general=True), G=random_cov(rng, t),
                R=random_cov(rng, t), resid=rng.normal(size=(len(rec), t)))


def dense_logpdf(s, G, R):
    nr = len(s["rec"])
    Z = np.zeros((nr, s["ped"].n))
    Z[np.arange(nr), s["rec"]] = 1.0
    V = np.kron(Z @ relationship_matrix(s["ped"]) @ Z.T, G) + np.kron(np.eye(nr), R)
    return stats.multivariate_normal(np.zeros(V.shape[0]), V).logpdf(s["resid"].ravel())


def test_the_route_applies_only_without_extra_effects_and_missing_cells():
    s = complete_study(3)
    assert s["design"].canonical and s["design"].univariate.t == 1
    ped, rec = s["ped"], s["rec"]
    obs = np.ones((len(rec), 3), dtype=bool)
    obs[0, 1] = False
    assert not sm.build_design(ped, rec, obs, []).canonical
    level = np.arange(len(rec)) % 3
    assert not sm.build_design(ped, rec, np.ones((len(rec), 3), bool), [(level, 3)]).canonical
    assert not sm.build_design(ped, rec, np.ones((len(rec), 1), bool), []).canonical


def test_a_canonical_design_without_the_general_route_gives_the_same_values():
    """By default a canonical design skips the t-trait structures a fit never uses: same log-likelihood,
    gradients and breeding values as the design that keeps them, and a clear refusal of the general
    route."""
    s = complete_study(3)
    full = s["design"]
    lean = sm.build_design(s["ped"], s["rec"], np.ones((len(s["rec"]), 3), bool), [])
    assert lean.canonical and not lean.general and full.general
    assert lean.n_unknowns == full.n_unknowns == 3 * s["ped"].n
    for a, b in zip(sm.logp_and_grad(lean, s["resid"], s["G"], s["R"])[:4],
                    sm.logp_and_grad(full, s["resid"], s["G"], s["R"])[:4]):
        np.testing.assert_array_equal(a, b)
    noise = np.random.default_rng(1).standard_normal((1, full.n_unknowns))
    args = (s["resid"][None], s["G"][None], s["R"][None], None, noise)
    np.testing.assert_array_equal(sm.effects(lean, *args)[0], sm.effects(full, *args)[0])
    with pytest.raises(ValueError, match="keep_general=True"):
        sm.logp_and_grad(lean, s["resid"], s["G"], s["R"], canonical=False)


@pytest.mark.parametrize("t", [2, 3, 4])
def test_canonical_log_likelihood_equals_dense_normal_and_the_general_route(t):
    s = complete_study(t)
    d = s["design"]
    value, d_resid, dG, dR, _ = sm.logp_and_grad(d, s["resid"], s["G"], s["R"])
    assert value == pytest.approx(dense_logpdf(s, s["G"], s["R"]), abs=1e-8)
    general = sm.logp_and_grad(d, s["resid"], s["G"], s["R"], canonical=False)
    assert value == pytest.approx(general[0], abs=1e-10)
    for a, b in zip((d_resid, dG, dR), general[1:4]):
        np.testing.assert_allclose(a, b, rtol=1e-9, atol=1e-10)


def test_canonical_gradients_equal_central_differences_of_the_dense_density():
    # d/dG as the kernels define it: each entry G[k, l] varied on its own (the matrix is then
    # symmetrised by the density), so the symmetric parts are compared.
    t = 3
    s = complete_study(t, seed=9)
    _, d_resid, dG, dR, _ = sm.logp_and_grad(s["design"], s["resid"], s["G"], s["R"])
    h = 1e-6
    for name, grad in (("G", dG), ("R", dR)):
        fd = np.zeros((t, t))
        for k in range(t):
            for l in range(k + 1):
                E = np.zeros((t, t))
                E[k, l] = E[l, k] = h
                shifted = {sign: {"G": s["G"], "R": s["R"]} for sign in (1, -1)}
                for sign in (1, -1):
                    shifted[sign][name] = s[name] + sign * E
                fd[k, l] = fd[l, k] = (dense_logpdf(s, **shifted[1]) - dense_logpdf(s, **shifted[-1])) / (2 * h)
        sym = grad + grad.T - np.diag(np.diag(grad))
        np.testing.assert_allclose(sym, fd, rtol=1e-5, atol=1e-6)
    e = np.zeros_like(s["resid"])
    e[3, 1] = h
    plus, minus = dict(s, resid=s["resid"] + e), dict(s, resid=s["resid"] - e)
    fd = (dense_logpdf(plus, s["G"], s["R"]) - dense_logpdf(minus, s["G"], s["R"])) / (2 * h)
    assert d_resid[3, 1] == pytest.approx(fd, rel=1e-5, abs=1e-7)


def test_canonical_breeding_values_have_the_exact_conditional_mean_and_covariance():
    # Mean: the general route's BLUP (1e-12). Covariance: the block of the dense inverse of the
    # coefficient matrix for two animals, against 20,000 canonical draws (Monte Carlo error of a
    # covariance estimate ~ sd^2 sqrt(2/S): 4 of those allowed).
    t = 2
    s = complete_study(t, seed=3)
    d = s["design"]
    G, R = s["G"], s["R"]
    general = sm.build_design(s["ped"], s["rec"], np.ones((len(s["rec"]), t), bool), [], canonical=False)
    mean = sm.effects(d, s["resid"][None], G[None], R[None])[0][0]
    np.testing.assert_allclose(mean, sm.effects(general, s["resid"][None], G[None], R[None])[0][0], atol=1e-12)
    C = sm.coefficient_matrix(general, G, R).toarray()
    Cinv = np.empty_like(C)
    Cinv[np.ix_(general.perm, general.perm)] = np.linalg.inv(C)      # original (block * t + k) order
    S = 20000
    rng = np.random.default_rng(0)
    draws, ok = sm.effects(d, np.repeat(s["resid"][None], S, 0), np.repeat(G[None], S, 0), np.repeat(R[None], S, 0),
                           noise=rng.standard_normal((S, d.n_unknowns)))
    assert ok.all()
    np.testing.assert_allclose(draws.mean(axis=0), mean, atol=4 * np.sqrt(np.diag(Cinv).max() / S))
    for a, b in ((0, 0), (12, 12), (12, 20)):
        emp = np.cov(np.concatenate([draws[:, a], draws[:, b]], axis=1).T)[:t, t:]
        exact = Cinv[a * t:(a + 1) * t, b * t:(b + 1) * t]
        tol = 4 * np.sqrt(2.0 / S) * np.diag(Cinv).max()
        np.testing.assert_allclose(emp, exact, atol=tol)


@pytest.mark.parametrize("mode", ["FAST_COMPILE", "NUMBA"])
def test_the_op_takes_the_canonical_kernel(mode):
    from ped2g.fit.sparse_likelihood_op import sparse_mme_logp

    s = complete_study(3)
    d = s["design"]
    res, g, r, cv = pt.dmatrix("res"), pt.dmatrix("g"), pt.dmatrix("r"), pt.dtensor3("cv")
    lp = sparse_mme_logp(res, g, r, cv, [pytensor.shared(a) for a in d.likelihood_inputs()], canonical=True)
    f = pytensor.function([res, g, r, cv], [lp, *pytensor.grad(lp, [res, g, r])], mode=mode)
    got = f(s["resid"], s["G"], s["R"], np.zeros((0, 3, 3)))
    want = sm.logp_and_grad(d, s["resid"], s["G"], s["R"], canonical=False)
    assert got[0] == pytest.approx(want[0], abs=1e-10)
    for a, b in zip(got[1:], want[1:4]):
        np.testing.assert_allclose(a, b, rtol=1e-9, atol=1e-10)


def test_the_engine_says_which_route_it_takes():
    from ped2g.fit import sparse

    from test_latent_vs_marginal import small_study as study

    engine = sparse.SparseEngine(memory=8e9)
    ok, why = engine.applies(study(n=150, missing=0.0), {})
    assert ok and "canonical route" in why and "2 one-trait systems" in why
    # with missing cells: auto keeps the canonical route through the Gibbs step; nuts drops them
    # exactly on the general route
    ok, why = sparse.SparseEngine(memory=8e9).applies(study(n=150, missing=0.1), {})
    assert ok and "canonical route" in why and "Gibbs step" in why
    ok, why = sparse.SparseEngine(memory=8e9).applies(study(n=150, missing=0.1), {"missing_values": "nuts"})
    assert ok and "canonical" not in why and "dropped exactly" in why
