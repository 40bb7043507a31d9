"""The latent engine: pedigree recursion, exact missing-trait likelihood, Mrode's BLUP solutions.

External checks, each named beside its test:
* Mrode (2014), p. 25: the matrix T = (I - P)^-1 and D of the six-animal pedigree of Table 2.1
  (docs/methods.md §1.7, P1), and A = T D T' (printed A entries for animals 1, 4, 5 on p. 32).
* Mrode (2014), p. 74: BLUP solutions of the beef-calf example, univariate and bivariate
  (fixtures in tests/fit/mrode.py).
* scipy.stats.multivariate_normal as the reference for the log-density of the observed traits.
"""

import arviz as az
import numpy as np
import pymc as pm
import pytest
from scipy import stats

from ped2g.fit import latent
from ped2g.fit.data import FitData, RandomEffect
from ped2g.fit.prepare import prepare
from ped2g.pedigree.core import Pedigree
from ped2g.pedigree.recursion import down
from ped2g.pedigree.relationships import inbreeding

from mrode import assert_matches_solutions, config, pedigree, phenotypes
# T and D of Mrode (2014), p. 25 (docs/methods.md §1.7, P1) [V], from tests/textbook.py.
from textbook import P1_D as D_MRODE
from textbook import P1_T as T_MRODE


def six_animals() -> Pedigree:
    """Mrode (2014) Table 2.1: 1, 2 founders; 3 = 1x2; 4 = 1x?; 5 = 4x3; 6 = 5x2."""
    sire = np.array([-1, -1, 0, 0, 3, 4])
    dam = np.array([-1, -1, 1, -1, 2, 1])
    gen = np.array([0, 0, 1, 1, 2, 3])
    return Pedigree(ids=np.array([str(i) for i in range(1, 7)], dtype=object), sire=sire, dam=dam,
                    generation=gen, inbreeding=inbreeding(sire, dam))




def test_pedigree_product_is_mrode_T():
    ped = six_animals()
    np.testing.assert_allclose(ped.mendelian, D_MRODE, atol=1e-12)  # Mrode p. 25
    # Column k of T is T applied to the unit vector e_k (leading axis = k, one trait).
    columns = down(ped, np.eye(6)[:, :, None])[..., 0]
    np.testing.assert_allclose(columns.T, T_MRODE, atol=1e-12)


def test_pedigree_product_gives_relationships():
    # A = T D T' (Mrode 2014, p. 25); printed block for animals 1, 4, 5 on p. 32.
    ped = six_animals()
    cols = down(ped, (np.eye(6) * np.sqrt(ped.mendelian))[:, :, None])[..., 0]
    A = cols.T @ cols  # cols[k] = column k of T D^1/2
    np.testing.assert_allclose(A[np.ix_([0, 3, 4], [0, 3, 4])],
                               [[1, 0.5, 0.5], [0.5, 1, 0.625], [0.5, 0.625, 1.125]], atol=1e-12)
    np.testing.assert_allclose(np.diag(A), 1 + ped.inbreeding, atol=1e-12)


def test_generation_layout_orders_parents_first():
    ped = six_animals()
    lay = latent.generation_layout(ped)
    np.testing.assert_array_equal(lay["order"][lay["rank"]], np.arange(6))
    pos = np.arange(6)
    for par in (lay["sire"], lay["dam"]):
        known = par < 6
        assert np.all(par[known] < lay["bounds"][np.searchsorted(lay["bounds"], pos[known], side="right") - 1])
    np.testing.assert_allclose(lay["sqrt_b"] ** 2, D_MRODE[lay["order"]])


def test_breeding_values_have_covariance_G_kron_A():
    """Exact identity: summing a a' over the unit vectors of vec(W) gives G kron A (docs/methods.md §0.2)."""
    ped = six_animals()
    G = np.array([[2.0, 0.6], [0.6, 1.0]])
    n, t = 6, 2
    lay = latent.generation_layout(ped)
    W = np.eye(n * t).reshape(n * t, n, t)  # draw k = unit vector k (rows in generation order)
    idata = az.from_dict(posterior={"w_animal": W[None], "G": np.broadcast_to(G, (1, n * t, t, t))})
    data = FitData(population="p", traits=["x", "z"], pedigree=ped, phenotyped=np.ones(n, bool),
                   record_animal=np.arange(n), y=np.zeros((n, t)), y_center=np.zeros(t), y_scale=np.ones(t),
                   X=np.ones((n, 1)), x_names=["intercept"])
    a = latent.breeding_values(data, idata, np.random.default_rng(0))
    vec = a.transpose(0, 2, 1).reshape(n * t, n * t)  # trait-major vec of each draw
    cols = down(ped, (np.eye(n) * np.sqrt(ped.mendelian))[:, :, None])[..., 0]
    A = cols.T @ cols  # cols[k] = column k of T D^1/2
    np.testing.assert_allclose(vec.T @ vec, np.kron(G, A), atol=1e-12)
    assert lay["order"].shape == (n,)


def _toy_data(rng, with_missing=True, random_effect=True):
    ped = six_animals()
    t = 3
    rec = np.array([2, 3, 4, 5, 5, 4, 3])  # repeated records on animals 4, 5, 6
    y = rng.standard_normal((len(rec), t))
    if with_missing:
        y[0, 1] = np.nan
        y[3, 0] = y[3, 2] = np.nan
        y[5, 2] = np.nan
    X = np.column_stack([np.ones(len(rec)), rng.standard_normal(len(rec))])
    random = [RandomEffect("pe", "id", level=np.array([0, 1, 2, 3, 3, 2, 1]), levels=list("abcd"))] \
        if random_effect else []
    return FitData(population="p", traits=["x", "z", "q"], pedigree=ped, phenotyped=np.isin(np.arange(6), rec),
                   record_animal=rec, y=y, y_center=np.zeros(t), y_scale=np.ones(t), X=X,
                   x_names=["intercept", "cov"], random=random)


def test_log_density_matches_scipy_on_observed_traits():
    """The model's joint log-density equals one computed independently with scipy.stats
    (observed traits only, repeated records, an extra random effect)."""
    rng = np.random.default_rng(11)
    data = _toy_data(rng)
    G = np.array([[1.0, 0.3, 0.1], [0.3, 0.8, -0.2], [0.1, -0.2, 0.6]])
    R = np.array([[0.7, 0.2, 0.0], [0.2, 0.9, 0.1], [0.0, 0.1, 0.5]])
    cfg = {"priors": {"fixed_sd": 3.0, "sd_scale": 1.0, "lkj_eta": 2.0},
           "fixed_covariances": {"G": G.tolist(), "R": R.tolist()}}
    model = latent.build_model(data, cfg)
    point = model.initial_point()
    point["w_animal"] = rng.standard_normal((6, 3))
    point["beta"] = rng.standard_normal((2, 3))
    v = rng.standard_normal((4, 3))
    # The random effect's covariance is estimated: evaluate it at a known value of its factor.
    names = [k for k in point if k.startswith("cov_pe")]
    assert names, "extra random effect has no covariance parameters"
    point[names[0]] = 0.3 * rng.standard_normal(point[names[0]].shape)
    got = model.compile_logp(sum=False)(point | {"v_pe": v})
    # Independent computation, term by term.
    cov_pe = model.replace_rvs_by_values([model["cov_pe"]])[0]
    C = np.asarray(model.compile_fn(cov_pe, inputs=model.value_vars, on_unused_input="ignore")(point | {"v_pe": v}))
    assert not np.allclose(C, np.eye(3))  # a non-trivial covariance
    lay = latent.generation_layout(data.pedigree)
    m = lay["sqrt_b"][:, None] * point["w_animal"] @ np.linalg.cholesky(G).T
    a = down(data.pedigree, m[lay["rank"]])
    u = v @ np.linalg.cholesky(C).T
    mu = data.X @ point["beta"] + a[data.record_animal] + u[data.random[0].level]
    expect_records = 0.0
    for r in range(data.n_records):
        o = ~np.isnan(data.y[r])
        expect_records += stats.multivariate_normal(mu[r, o], R[np.ix_(o, o)]).logpdf(data.y[r, o])
    by_name = dict(zip([v.name for v in model.free_RVs] + [p.name for p in model.potentials], got))
    np.testing.assert_allclose(by_name["records"], expect_records, rtol=1e-10)
    np.testing.assert_allclose(np.sum(by_name["w_animal"]), stats.norm.logpdf(point["w_animal"]).sum(), rtol=1e-12)


def map_breeding_values(data, model):
    # A tight optimiser tolerance: scipy's default L-BFGS-B stopping rule leaves the sex effects
    # about 5e-3 short of the optimum (the wide prior makes the problem badly scaled).
    point = pm.find_MAP(model=model, progressbar=False, maxeval=50000, seed=1, method="BFGS", tol=1e-12)
    idata = az.from_dict(posterior={k: np.asarray(point[k])[None, None] for k in ("w_animal", "G", "beta")})
    return idata, latent.breeding_values(data, idata, np.random.default_rng(0))[0]


@pytest.mark.parametrize("example", ["E3", "E1", "E2"])
def test_mrode_blup_posterior_mode(example):
    """Mrode (2014) p. 74: with G and R held at the book's values and a very wide prior on the sex
    effects, the posterior is Gaussian, so its mode is the BLUE/BLUP of the mixed model equations."""
    cfg = config(example)
    data = prepare(cfg, phenotypes(), pedigree(), "demo")
    model = latent.build_model(data, cfg["model"])
    idata, bv = map_breeding_values(data, model)
    assert_matches_solutions(data, idata.posterior["beta"].values[0, 0], bv, example)


def test_applicable_everywhere():
    ok, why = latent.applicable(_toy_data(np.random.default_rng(0)))
    assert ok and "latent" in why
