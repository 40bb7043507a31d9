"""Records whose level of an extra random effect is unknown get no contribution from it.

``RandomEffect.level == -1`` marks an unknown level (docs/methods.md §2.13). Every check compares
with the same model written out densely, where those records simply have a row of zeros in the
incidence matrix ``Z_c`` (built here by hand, not by the package):

* the marginal engine's log-likelihood equals scipy.stats.multivariate_normal of all records with
  mean ``X b + Z_c u`` and covariance ``K (x) G + I (x) R`` (general-purpose reference library;
  exact identity);
* the latent engine's log-density of the records equals a sum of scipy.stats.multivariate_normal
  log-densities of the observed traits of each record (same reference);
* the marginal engine's conditional-mean breeding values equal the dense Gaussian conditional mean
  ``(A[:, p] Z' (x) G) V^-1 (y - X b - Z_c u)`` (Henderson's BLUP as a Gaussian conditional; exact
  identity of dense linear algebra);
* the Gibbs step for missing cells gives the same draw as the equivalent design in which the
  unknown records share an extra level whose value is held at zero (exact identity of the model);
* the refitting null's simulated records never carry a level effect on a record of an unknown
  level (with G = R = 0 those records equal their fixed part exactly).
"""

import arviz as az
import numpy as np
import pytensor
import pytest
from scipy import stats

from ped2g.fit import augment, latent, marginal
from ped2g.fit.data import UNKNOWN_LEVEL, RandomEffect
from ped2g.pedigree.recursion import down
from ped2g.pedigree.relationships import relationship_matrix

from test_latent import _toy_data
from test_marginal import random_cov, small_data


def dense_incidence(level: np.ndarray, n_levels: int) -> np.ndarray:
    """Z_c by hand: a 1 in the record's level column, nothing for an unknown level."""
    Z = np.zeros((len(level), n_levels))
    for r, lev in enumerate(level):
        if lev != UNKNOWN_LEVEL:
            Z[r, lev] = 1.0
    return Z


def with_unknown_levels(data, rows):
    eff = data.random[0]
    level = eff.level.copy()
    level[rows] = UNKNOWN_LEVEL
    data.random = [RandomEffect(eff.name, eff.column, level, eff.levels)]
    return data


def test_random_effect_helpers_leave_unknown_records_out():
    eff = RandomEffect("pen", "pen", np.array([1, -1, 0, 1, -1]), ["a", "b"])
    u = np.array([[1.0, 2.0], [3.0, 4.0]])
    np.testing.assert_array_equal(eff.incidence(), dense_incidence(eff.level, 2))
    np.testing.assert_array_equal(eff.take(u), dense_incidence(eff.level, 2) @ u)
    # with leading (draw) axes as well
    np.testing.assert_array_equal(eff.take(np.stack([u, 2 * u]))[1], 2 * dense_incidence(eff.level, 2) @ u)
    assert eff.n_unknown == 2 and eff.known.tolist() == [True, False, True, True, False]


@pytest.mark.parametrize("missing", [0.0, 0.2])
def test_marginal_loglik_with_unknown_levels_equals_dense_normal(missing):
    rng = np.random.default_rng(21)
    data = with_unknown_levels(small_data(rng, repeated=True, with_random=True, missing=missing), [0, 4, 7, 12])
    assert data.random[0].n_unknown == 4
    t = data.n_traits
    model = marginal.build_model(data, {"priors": {}, "missing_values": "nuts"})
    G, R, C = random_cov(rng, t), random_cov(rng, t), random_cov(rng, t)
    beta = rng.normal(size=(2, t))
    z = rng.normal(size=(3, t))
    L = np.linalg.cholesky(C)
    inputs = {model["G"]: G, model["R"]: R, model["beta"]: beta, model["pen_z"]: z,
              model["cov_pen_chol"]: L[np.tril_indices(t)]}   # packed lower triangle, row by row
    Y = data.y.copy()
    if data.missing.any():
        fill = rng.normal(size=int(data.missing.sum()))
        start = 0
        for j in range(t):     # the order of 'missing': trait by trait, record order within
            rows = np.flatnonzero(data.missing[:, j])
            Y[rows, j] = fill[start:start + len(rows)]
            start += len(rows)
        inputs[model["missing"]] = fill
    loglik = [p for p in model.potentials if p.name == "loglik"][0]
    got = pytensor.function(list(inputs), loglik, on_unused_input="ignore")(*inputs.values())
    mean = data.X @ beta + dense_incidence(data.random[0].level, 3) @ (z @ L.T)
    K = relationship_matrix(data.pedigree, subset=data.record_animal)
    V = np.kron(K, G) + np.kron(np.eye(data.n_records), R)
    want = stats.multivariate_normal(mean.ravel(), V).logpdf(Y.ravel())   # scipy reference
    assert got == pytest.approx(want, rel=1e-10, abs=1e-8)


def test_latent_log_density_with_unknown_levels_matches_scipy():
    rng = np.random.default_rng(5)
    data = _toy_data(rng)
    data.random[0].level[[1, 4]] = UNKNOWN_LEVEL
    G = np.array([[1.0, 0.3, 0.1], [0.3, 0.8, -0.2], [0.1, -0.2, 0.6]])
    R = np.array([[0.7, 0.2, 0.0], [0.2, 0.9, 0.1], [0.0, 0.1, 0.5]])
    model = latent.build_model(data, {"priors": {"fixed_sd": 3.0, "sd_scale": 1.0, "lkj_eta": 2.0},
                                      "fixed_covariances": {"G": G.tolist(), "R": R.tolist()}})
    point = model.initial_point()
    point["w_animal"] = rng.standard_normal((6, 3))
    point["beta"] = rng.standard_normal((2, 3))
    point["v_pe"] = rng.standard_normal((4, 3))
    name = [k for k in point if k.startswith("cov_pe")][0]
    point[name] = 0.3 * rng.standard_normal(point[name].shape)
    got = dict(zip([v.name for v in model.free_RVs] + [p.name for p in model.potentials],
                   model.compile_logp(sum=False)(point)))["records"]
    cov_pe = model.replace_rvs_by_values([model["cov_pe"]])[0]
    C = np.asarray(model.compile_fn(cov_pe, inputs=model.value_vars, on_unused_input="ignore")(point))
    lay = latent.generation_layout(data.pedigree)
    a = down(data.pedigree, (lay["sqrt_b"][:, None] * point["w_animal"] @ np.linalg.cholesky(G).T)[lay["rank"]])
    u = point["v_pe"] @ np.linalg.cholesky(C).T
    mu = data.X @ point["beta"] + a[data.record_animal] + dense_incidence(data.random[0].level, 4) @ u
    want = 0.0
    for r in range(data.n_records):
        o = ~np.isnan(data.y[r])
        want += stats.multivariate_normal(mu[r, o], R[np.ix_(o, o)]).logpdf(data.y[r, o])   # scipy reference
    np.testing.assert_allclose(got, want, rtol=1e-10)


def test_marginal_breeding_values_with_unknown_levels_equal_dense_conditional_mean():
    rng = np.random.default_rng(13)
    data = with_unknown_levels(small_data(rng, repeated=True, with_random=True, missing=0.0, t=2), [1, 2, 9])
    t, n_all, n = 2, data.pedigree.n, data.n_records
    G, R, C = random_cov(rng, t), random_cov(rng, t), random_cov(rng, t)
    beta = rng.normal(size=(2, t))
    z = rng.normal(size=(3, t))
    idata = az.from_dict(posterior={"G": G[None, None], "R": R[None, None], "beta": beta[None, None],
                                    "pen_z": z[None, None], "cov_pen": C[None, None]})
    got = marginal.breeding_values(data, idata, np.random.default_rng(0), conditional_mean=True)[0]
    A = relationship_matrix(data.pedigree)
    Z = np.zeros((n, n_all))
    Z[np.arange(n), data.record_animal] = 1.0
    Say = np.kron(A @ Z.T, G)
    V = np.kron(Z @ A @ Z.T, G) + np.kron(np.eye(n), R)
    u = z @ np.linalg.cholesky(C).T
    resid = data.y - data.X @ beta - dense_incidence(data.random[0].level, 3) @ u
    want = (Say @ np.linalg.solve(V, resid.ravel())).reshape(n_all, t)
    np.testing.assert_allclose(got, want, atol=1e-10)


def test_gibbs_draw_with_unknown_levels_equals_a_zero_level_design():
    rng = np.random.default_rng(17)
    data = with_unknown_levels(small_data(rng, repeated=True, with_random=True, missing=0.3), [0, 3, 5, 11])
    t = data.n_traits
    G, R, C = random_cov(rng, t), random_cov(rng, t), random_cov(rng, t)
    beta = rng.normal(size=(2, t))
    u = rng.normal(size=(3, t)) @ np.linalg.cholesky(C).T
    eff = data.random[0]
    # The same records with the unknown ones on a fourth level whose value is held at zero.
    import copy
    padded = copy.copy(data)
    padded.random = [RandomEffect("pen", "pen", np.where(eff.level < 0, 3, eff.level), eff.levels + ["zero"])]
    draws = []
    for d, extras in ((data, [u]), (padded, [np.vstack([u, np.zeros((1, t))])])):
        rot = marginal.rotation(d)
        core = augment.MissingValueDraw(d, rot.U, rot.lam, rot.rot_X, rot.rot_Z)
        _, z0 = core.initial()
        draws.append(core.draw(z0, G, R, beta, extras, np.random.default_rng(3)))
    np.testing.assert_allclose(draws[0][0], draws[1][0], rtol=0, atol=1e-10)
    np.testing.assert_allclose(draws[0][1], draws[1][1], rtol=0, atol=1e-10)
    # and the reference design differs from one where the unknown records took the last level
    wrong = copy.copy(data)
    wrong.random = [RandomEffect("pen", "pen", np.where(eff.level < 0, 2, eff.level), eff.levels)]
    rot = marginal.rotation(wrong)
    core = augment.MissingValueDraw(wrong, rot.U, rot.lam, rot.rot_X, rot.rot_Z)
    _, z0 = core.initial()
    assert not np.allclose(core.draw(z0, G, R, beta, [u], np.random.default_rng(3))[0], draws[0][0])


def test_simulated_records_of_unknown_levels_get_no_level_effect():
    from ped2g.null.refit import DesignParameters, simulate_records

    rng = np.random.default_rng(2)
    data = with_unknown_levels(small_data(rng, repeated=True, with_random=True, missing=0.0, t=2), [0, 6, 13])
    n, t = data.n_records, 2
    mu = data.X @ rng.normal(size=(2, t))
    zero = np.zeros((t, t))
    params = DesignParameters(mu=mu, R=zero, covariances=[np.array([[1.0, 0.2], [0.2, 0.5]])])
    for seed in range(20):
        Y = simulate_records(data, zero, params, np.random.default_rng(seed))
        unknown = ~data.random[0].known
        # G = R = 0: a record is its fixed part plus its level's effect, or exactly its fixed
        # part when its level is unknown.
        np.testing.assert_array_equal(Y[unknown], mu[unknown])
        assert np.all(np.abs(Y[~unknown] - mu[~unknown]) > 0)
