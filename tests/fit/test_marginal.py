"""Checks of the marginal engine against dense linear algebra (exact identities).

* The rotated log-likelihood equals scipy's multivariate normal log-density of all records with
  covariance K (x) G + I (x) R (record-major), K = Z A_pp Z' (general-purpose reference library),
  with the missing cells as NUTS parameters and with the completed records of the Gibbs route.
* The Gibbs step for missing values leaves the exact conditional distribution of the missing
  cells given the observed ones invariant (dense Gaussian conditioning formula).
* The breeding values drawn by pathwise conditioning have the mean and covariance of the exact
  Gaussian conditional, Cov(a | y) = S_aa - S_ay V^-1 S_ya (dense formula).
"""

import arviz as az
import numpy as np
import pytest
from scipy import stats

from ped2g.fit import marginal
from ped2g.fit.data import FitData, RandomEffect
from ped2g.pedigree.core import Pedigree
from ped2g.pedigree.relationships import inbreeding, relationship_matrix


def small_data(rng, repeated=False, with_random=False, missing=0.2, t=3):
    n_anim = 14
    sire = np.array([-1, -1, -1, -1, 0, 0, 2, 2, 4, 4, 6, 4, 8, 10])
    dam = np.array([-1, -1, -1, -1, 1, 3, 1, 3, 5, 7, 7, 7, 9, 11])
    gen = np.zeros(n_anim, dtype=np.int64)
    for i in range(n_anim):
        ps = [p for p in (sire[i], dam[i]) if p >= 0]
        gen[i] = 1 + max(gen[p] for p in ps) if ps else 0
    ped = Pedigree(ids=np.array([f"a{i}" for i in range(n_anim)], dtype=object), sire=sire, dam=dam,
                   generation=gen, inbreeding=inbreeding(sire, dam))
    rec = np.arange(4, n_anim)
    if repeated:
        rec = np.concatenate([rec, rec[:5]])
    n = len(rec)
    y = rng.normal(size=(n, t))
    y[rng.random((n, t)) < missing] = np.nan
    y[np.all(np.isnan(y), axis=1), 0] = 0.3
    X = np.column_stack([np.ones(n), rng.normal(size=n)])
    phen = np.zeros(n_anim, bool)
    phen[rec] = True
    random = [RandomEffect("pen", "pen", rng.integers(0, 3, size=n), ["p0", "p1", "p2"])] if with_random else []
    return FitData(population="x", traits=[f"t{j}" for j in range(t)], pedigree=ped, phenotyped=phen,
                   record_animal=rec, y=y, y_center=np.zeros(t), y_scale=np.ones(t), X=X,
                   x_names=["intercept", "cov"], random=random)


def random_cov(rng, t):
    a = rng.normal(size=(t, t))
    return a @ a.T / t + 0.3 * np.eye(t)


@pytest.mark.parametrize("repeated,with_random", [(False, False), (True, True)])
def test_loglik_equals_dense_normal(repeated, with_random):
    rng = np.random.default_rng(7)
    data = small_data(rng, repeated, with_random)
    t = data.n_traits
    model = marginal.build_model(data, {"priors": {}, "missing_values": "nuts"})
    G, R, C = random_cov(rng, t), random_cov(rng, t), random_cov(rng, t)
    beta = rng.normal(size=(2, t))
    miss = data.missing
    fill = rng.normal(size=int(miss.sum()))
    import pytensor
    loglik = [p for p in model.potentials if p.name == "loglik"][0]
    inputs = {model["G"]: G, model["R"]: R, model["beta"]: beta}
    Y = data.y.copy()
    start = 0
    # fill order: trait by trait, records in order within a trait
    for j in range(t):
        rows = np.flatnonzero(miss[:, j])
        Y[rows, j] = fill[start:start + len(rows)]
        start += len(rows)
    inputs[model["missing"]] = fill
    mean = data.X @ beta
    if with_random:
        z = rng.normal(size=(3, t))
        L = np.linalg.cholesky(C)
        inputs[model["pen_z"]] = z
        inputs[model["cov_pen"]] = C
        mean = mean + (z @ L.T)[data.random[0].level]
    if with_random:
        # cov_pen enters the graph through its Cholesky factor, packed lower triangle row by row
        # (PyMC's LKJCholeskyCov layout): give the factor instead of the matrix.
        inputs.pop(model["cov_pen"])
        inputs[model["cov_pen_chol"]] = L[np.tril_indices(t)]
    f = pytensor.function(list(inputs), loglik, on_unused_input="ignore")
    got = f(*inputs.values())
    K = relationship_matrix(data.pedigree, subset=data.record_animal)
    V = np.kron(K, G) + np.kron(np.eye(data.n_records), R)
    want = stats.multivariate_normal(mean.ravel(), V).logpdf(Y.ravel())
    assert got == pytest.approx(want, rel=1e-10)


def test_gibbs_route_loglik_equals_dense_normal():
    # With model.missing_values: gibbs the likelihood is that of the completed records, entered
    # as U'Y_c; the same dense reference with the cells filled in.
    import pytensor

    from ped2g.fit import augment

    rng = np.random.default_rng(8)
    data = small_data(rng, repeated=True, with_random=False)
    t = data.n_traits
    model = marginal.build_model(data, {"priors": {}, "missing_values": "gibbs"})
    assert augment.ROTATED_NAME in model.named_vars and len(marginal.extra_steps(model, data)) == 1
    G, R = random_cov(rng, t), random_cov(rng, t)
    beta = rng.normal(size=(2, t))
    Y = np.where(data.missing, rng.normal(size=data.y.shape), data.y)
    rot = marginal.rotation(data)
    loglik = [p for p in model.potentials if p.name == "loglik"][0]
    inputs = {model["G"]: G, model["R"]: R, model["beta"]: beta, model[augment.ROTATED_NAME]: rot.U.T @ Y}
    got = pytensor.function(list(inputs), loglik, on_unused_input="ignore")(*inputs.values())
    K = relationship_matrix(data.pedigree, subset=data.record_animal)
    V = np.kron(K, G) + np.kron(np.eye(data.n_records), R)
    want = stats.multivariate_normal((data.X @ beta).ravel(), V).logpdf(Y.ravel())
    assert got == pytest.approx(want, rel=1e-10)


@pytest.mark.parametrize("with_random", [False, True])
def test_gibbs_step_keeps_the_exact_conditional_of_missing_cells(with_random):
    # Run the Gibbs draw (genetic effects, then missing cells) many times with theta fixed: its
    # stationary distribution must be p(Y_M | Y_O, theta), here computed densely as the Gaussian
    # conditional mu_M + V_MO V_OO^-1 (y_O - mu_O), V_MM - V_MO V_OO^-1 V_OM.
    from ped2g.fit import augment

    rng = np.random.default_rng(4)
    data = small_data(rng, repeated=True, with_random=with_random, missing=0.3, t=3)
    t, n = data.n_traits, data.n_records
    G, R, C = random_cov(rng, t), random_cov(rng, t), random_cov(rng, t)
    beta = rng.normal(size=(2, t))
    extras = [rng.normal(size=(3, t)) @ np.linalg.cholesky(C).T] if with_random else []
    rot = marginal.rotation(data)
    core = augment.MissingValueDraw(data, rot.U, rot.lam, rot.rot_X, rot.rot_Z)
    mean = data.X @ beta
    if with_random:
        mean = mean + extras[0][data.random[0].level]
    K = relationship_matrix(data.pedigree, subset=data.record_animal)
    V = np.kron(K, G) + np.kron(np.eye(n), R)          # record-major, like Y.ravel()
    m = data.missing.ravel()
    y = np.where(data.missing, 0.0, data.y).ravel()
    cmean = mean.ravel()[m] + V[np.ix_(m, ~m)] @ np.linalg.solve(V[np.ix_(~m, ~m)], y[~m] - mean.ravel()[~m])
    ccov = V[np.ix_(m, m)] - V[np.ix_(m, ~m)] @ np.linalg.solve(V[np.ix_(~m, ~m)], V[np.ix_(~m, m)])
    # flat order of the draw: trait by trait, record order within a trait -> record-major order
    flat_rows = np.concatenate([np.flatnonzero(data.missing[:, j]) * t + j for j in range(t)])
    order = np.argsort(flat_rows)
    _, z = core.initial()
    S, thin, burn = 8000, 4, 50
    draw_rng = np.random.default_rng(9)
    out = np.empty((S, int(m.sum())))
    for s in range(S * thin + burn):
        missing, z = core.draw(z, G, R, beta, extras, draw_rng)
        if s >= burn and (s - burn) % thin == 0:
            out[(s - burn) // thin] = missing[order]
    # Thinned by 4 the draws are close to independent (lag-1 autocorrelation of the unthinned
    # chain is at most about 0.5 here). Tolerances: 5 standard errors of a mean, sd / sqrt(S),
    # and of a covariance, sqrt((V_ii V_jj + V_ij^2) / S) (normal theory).
    sd = np.sqrt(np.diag(ccov))
    assert np.all(np.abs(out.mean(0) - cmean) < 5 * sd / np.sqrt(S)), np.abs(out.mean(0) - cmean) / sd
    se_cov = np.sqrt((np.outer(sd ** 2, sd ** 2) + ccov ** 2) / S)
    z_cov = np.abs(np.cov(out.T) - ccov) / se_cov
    assert z_cov.max() < 5, z_cov.max()


def test_breeding_value_draws_match_exact_conditional():
    rng = np.random.default_rng(3)
    data = small_data(rng, repeated=True, missing=0.0, t=2)
    t, n_all = 2, data.pedigree.n
    G, R = random_cov(rng, t), random_cov(rng, t)
    beta = rng.normal(size=(2, t))
    S = 6000
    idata = az.from_dict(posterior={"G": np.broadcast_to(G, (1, S, t, t)), "R": np.broadcast_to(R, (1, S, t, t)),
                                    "beta": np.broadcast_to(beta, (1, S, 2, t))})
    draws = marginal.breeding_values(data, idata, np.random.default_rng(1), chunk=1000)
    mean_only = marginal.breeding_values(data, idata, np.random.default_rng(1), max_draws=1,
                                         conditional_mean=True)[0]
    A = relationship_matrix(data.pedigree)
    Z = np.zeros((data.n_records, n_all))
    Z[np.arange(data.n_records), data.record_animal] = 1.0
    Saa = np.kron(A, G)
    Say = Saa @ np.kron(Z.T, np.eye(t))
    V = np.kron(Z @ A @ Z.T, G) + np.kron(np.eye(data.n_records), R)
    resid = (data.y - data.X @ beta).ravel()
    cmean = Say @ np.linalg.solve(V, resid)
    ccov = Saa - Say @ np.linalg.solve(V, Say.T)
    np.testing.assert_allclose(mean_only.ravel(), cmean, atol=1e-10)
    flat = draws.reshape(S, -1)
    sd = np.sqrt(np.diag(ccov))
    # Monte Carlo: the mean within 4.5 standard errors, the covariance within 0.06 (S = 6000).
    assert np.all(np.abs(flat.mean(0) - cmean) < 4.5 * sd / np.sqrt(S) + 1e-12)
    np.testing.assert_allclose(np.cov(flat.T), ccov, atol=0.06)


def test_long_eigendecomposition_is_announced_before_and_timed_after(caplog, monkeypatch):
    # The LAPACK call holds the interpreter, so a long one is announced before and timed after.
    # Expected time: 17.5 s at n = 8,000 scaled by n^3 (the measurement in the module docstring).
    import logging

    data = small_data(np.random.default_rng(0))
    assert marginal.eigendecomposition_seconds(16000) == pytest.approx(8 * 17.5)
    with caplog.at_level(logging.INFO, logger="ped2g.fit"):
        marginal.rotation(data)
        assert not caplog.records          # 10 records: far below the threshold
        monkeypatch.setattr(marginal, "EIGEN_ANNOUNCE_SECONDS", 0.0)
        marginal.rotation(data)
    lines = [r.getMessage() for r in caplog.records]
    assert len(lines) == 2
    assert lines[0].startswith("population x: eigendecomposition of the 10 x 10 record relationships")
    assert lines[1].startswith("population x: eigendecomposition done in ")
