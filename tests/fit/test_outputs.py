"""Checks of the output conversions and the convergence checks.

* Back-transformation: exact identities (G = diag(s) G_std diag(s); P = G + R + C; fixed
  effects per unit of the covariate; population mean = fitted values averaged over records).
* Convergence checks on synthetic chains with known behaviour (docs/methods.md §4.2 [C]):
  i.i.d. normal chains pass; a chain shifted by 1 SD gives R-hat about 1.10 and must miss.
"""

import arviz as az
import numpy as np
import pytest

from ped2g.fit import outputs
from ped2g.fit.data import FitData, RandomEffect
from ped2g.pedigree.core import Pedigree


def tiny_data(rng, n=6, t=2):
    ped = Pedigree(ids=np.array([f"a{i}" for i in range(n)], dtype=object), sire=-np.ones(n, np.int64),
                   dam=-np.ones(n, np.int64), generation=np.zeros(n, np.int64), inbreeding=np.zeros(n))
    X = np.column_stack([np.ones(n), rng.normal(size=n)])
    return FitData(population="p", traits=["u", "v"], pedigree=ped, phenotyped=np.ones(n, bool),
                   record_animal=np.arange(n), y=rng.normal(size=(n, t)), y_center=np.array([5.0, -2.0]),
                   y_scale=np.array([2.0, 0.5]), X=X, x_names=["intercept", "age"], x_scale=np.array([1.0, 4.0]),
                   random=[RandomEffect("pen", "pen", np.zeros(n, np.int64), ["x"])])


def test_original_units_identities():
    rng = np.random.default_rng(2)
    data = tiny_data(rng)
    C, D = 2, 5
    G = rng.normal(size=(C, D, 2, 2)); G = G @ np.swapaxes(G, -1, -2)
    R = rng.normal(size=(C, D, 2, 2)); R = R @ np.swapaxes(R, -1, -2)
    K = rng.normal(size=(C, D, 2, 2)); K = K @ np.swapaxes(K, -1, -2)
    beta = rng.normal(size=(C, D, 2, 2))
    idata = az.from_dict(posterior={"G": G, "R": R, "cov_pen": K, "beta": beta})
    post = outputs.build_posterior(data, idata)
    ss = np.outer(data.y_scale, data.y_scale)
    np.testing.assert_allclose(post["G"].values, G * ss)
    np.testing.assert_allclose(post["P"].values, (G + R + K) * ss)
    np.testing.assert_allclose(post["h2"].values, np.diagonal(G, axis1=-2, axis2=-1) / np.diagonal(G + R + K, axis1=-2, axis2=-1))
    fixed = post["fixed"].values
    np.testing.assert_allclose(fixed[..., 0, :], data.y_center + data.y_scale * beta[..., 0, :])
    np.testing.assert_allclose(fixed[..., 1, :], data.y_scale * beta[..., 1, :] / 4.0)
    fitted = np.einsum("rp,cdpt->cdrt", data.X, beta).mean(axis=2)
    np.testing.assert_allclose(post["mean"].values, data.y_center + data.y_scale * fitted)


def _table_for(draws_g):
    chains, draws = draws_g.shape
    G = np.zeros((chains, draws, 1, 1)); G[..., 0, 0] = draws_g
    R = np.ones_like(G)
    from ped2g.contracts.fit_folder import posterior_dataset
    post = posterior_dataset("p", ["u"], G, R, G + R, np.zeros((chains, draws, 1)))
    return outputs.parameter_table(post, 0.9)


def test_checks_pass_iid_and_miss_shifted_chain():
    rng = np.random.default_rng(0)
    good = 5.0 + rng.normal(size=(4, 1000))
    table = _table_for(good)
    res = outputs.check_convergence(table, {"max_rhat": 1.01, "min_ess": 400, "max_divergences": 0}, 0, 4)
    assert res["passed"], res["missed"]
    assert "R[u,u]" not in res["checked"]  # held fixed (constant): not checked
    bad = good.copy(); bad[0] += 1.0
    res = outputs.check_convergence(_table_for(bad), {"max_rhat": 1.01, "min_ess": 400, "max_divergences": 0}, 3, 4)
    assert not res["passed"] and not res["divergences_ok"]
    missed = {m["parameter"] for m in res["missed"]}
    assert "G[u,u]" in missed
    msg = outputs.failure_message("p", res)
    assert "G[u,u]" in msg and "R-hat" in msg and "3 divergent" in msg and "target_accept" in msg
    assert "on_failure: flag" in msg
    # a fit kept with on_failure: flag is not told to set what is already set
    assert "on_failure" not in outputs.failure_message("p", res, stopped=False)
