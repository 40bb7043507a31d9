"""The latent and marginal engines sample the same posterior (slow).

Both engines encode the same model and priors; only the treatment of the breeding values differs
(sampled through the pedigree recursion versus integrated out exactly). On one small simulated
data set with missing trait values, the posterior means of every element of G and R and of the
fixed effects must agree within Monte Carlo error: |difference| <= 4 x the combined Monte Carlo
standard error (ArviZ ``mcse``, Vehtari et al. 2021), with the SDs agreeing within 25%. The
marginal engine runs both ways of handling the missing cells (Gibbs step; NUTS parameters).
"""

import numpy as np
import pytest

from ped2g.fit import latent, marginal
from ped2g.fit.data import FitData
from ped2g.pedigree.core import Pedigree
from ped2g.pedigree.relationships import inbreeding
from ped2g.simulate.breeding_values import simulate_breeding_values


def small_study(seed: int = 3, n: int = 300, t: int = 2, missing: float = 0.1) -> FitData:
    rng = np.random.default_rng(seed)
    cohorts = np.repeat(np.arange(5), n // 5)
    sire = -np.ones(n, np.int64)
    dam = -np.ones(n, np.int64)
    for c in range(1, 5):
        kids = np.flatnonzero(cohorts == c)
        parents = np.flatnonzero(cohorts == c - 1)
        sire[kids] = rng.choice(parents[:8], len(kids))
        dam[kids] = rng.choice(parents[8:], len(kids))
    gen = np.zeros(n, np.int64)
    for i in range(n):
        if sire[i] >= 0:
            gen[i] = 1 + max(gen[sire[i]], gen[dam[i]])
    ped = Pedigree(ids=np.array([f"z{i}" for i in range(n)], dtype=object), sire=sire, dam=dam,
                   generation=gen, inbreeding=inbreeding(sire, dam))
    G = np.array([[0.5, 0.25], [0.25, 0.4]])
    R = np.array([[0.5, 0.1], [0.1, 0.6]])
    a = np.asarray(simulate_breeding_values(ped, G, rng)).reshape(n, t)
    rec = np.flatnonzero(cohorts > 0)
    x = (rng.random(len(rec)) < 0.5).astype(float)
    y = 0.4 * x[:, None] + a[rec] + rng.standard_normal((len(rec), t)) @ np.linalg.cholesky(R).T
    y[rng.random(y.shape) < missing] = np.nan
    y[np.isnan(y).all(axis=1), 0] = 0.0
    c, s = np.nanmean(y, 0), np.nanstd(y, 0, ddof=1)
    return FitData(population="p", traits=["u", "v"], pedigree=ped, phenotyped=np.isin(np.arange(n), rec),
                   record_animal=rec, y=(y - c) / s, y_center=c, y_scale=s,
                   X=np.column_stack([np.ones(len(rec)), x]), x_names=["intercept", "sex[M]"])


def _sample(model, chains, tune, draws, seed, **kw):
    import nutpie

    compiled = nutpie.compile_pymc_model(model, backend="numba", var_names=["G", "R", "beta"])
    return nutpie.sample(compiled, chains=chains, tune=tune, draws=draws, seed=seed, cores=2,
                         progress_bar=False, **kw)


@pytest.fixture(scope="module")
def latent_posterior():
    cfg = {"priors": {"sd_scale": 1.0, "lkj_eta": 2.0, "fixed_sd": 10.0}, "fixed_covariances": None}
    return _sample(latent.build_model(small_study(), cfg), 4, 500, 500, 12, low_rank_modified_mass_matrix=True)


@pytest.mark.slow
@pytest.mark.parametrize("missing_values", ["gibbs", "nuts"])
def test_engines_agree_within_monte_carlo_error(missing_values, latent_posterior):
    from ped2g.fit import sample

    data = small_study()
    cfg = {"priors": {"sd_scale": 1.0, "lkj_eta": 2.0, "fixed_sd": 10.0}, "fixed_covariances": None,
           "missing_values": missing_values}
    model = marginal.build_model(data, cfg)
    if missing_values == "nuts":
        post_m = _sample(model, 2, 300, 500, 11)
    else:
        run = sample.run(model, {"chains": 2, "warmup": 300, "draws": 500, "seed": 11}, "p", progress=False,
                         extra_steps=marginal.extra_steps(model, data))
        assert run.info["sampler"] == "pymc" and run.info["compound_steps"][0] == "MissingValueStep"
        # the missing cells are kept (breeding values need them); the rotated records are not
        assert "missing" in run.idata.posterior and "rot_y_completed" not in run.idata.posterior
        post_m = run.idata
    assert_posteriors_agree(latent_posterior, post_m)



def assert_posteriors_agree(post_a, post_b, names=("G", "R", "beta")):
    """Posterior means within 4 Monte Carlo standard errors of their difference (ArviZ ``mcse``)
    and posterior SDs within 25% of each other, element by element."""
    import arviz as az

    for name in names:
        a, b = post_a.posterior[name], post_b.posterior[name]
        diff = (a.mean(("chain", "draw")) - b.mean(("chain", "draw"))).values
        mcse = np.sqrt(az.mcse(post_a, var_names=[name])[name].values ** 2
                       + az.mcse(post_b, var_names=[name])[name].values ** 2)
        assert np.all(np.abs(diff) <= 4 * mcse), (name, diff, mcse)
        ratio = (a.std(("chain", "draw")) / b.std(("chain", "draw"))).values
        assert np.all(np.abs(ratio - 1) < 0.25), (name, ratio)
