"""Checks of the shared covariance and fixed-effect priors."""

import numpy as np
import pymc as pm
import pytest

from ped2g.errors import UserError
from ped2g.fit.priors import covariance_prior, fixed_covariances


def test_prior_draws_have_the_stated_sd_and_correlation_spread():
    # Half-normal(s) SDs: E[sd] = s sqrt(2/pi) (exact identity). LKJ(eta) in dimension t: the
    # marginal of a correlation is Beta(b, b) on (-1, 1) with b = eta - 1 + t/2 (Lewandowski et
    # al. 2009), so Var = 1 / (2 b + 1) (exact identity).
    t, scale, eta = 3, 0.7, 2.0
    with pm.Model() as model:
        cov, chol = covariance_prior("G", t, {"sd_scale": scale, "lkj_eta": eta})
    draws = pm.draw(cov, draws=20000, random_seed=1)
    sd = np.sqrt(np.diagonal(draws, axis1=1, axis2=2))
    assert sd.mean() == pytest.approx(scale * np.sqrt(2 / np.pi), rel=0.02)
    corr = draws[:, 0, 1] / (sd[:, 0] * sd[:, 1])
    b = eta - 1 + t / 2
    assert corr.var() == pytest.approx(1 / (2 * b + 1), rel=0.05)
    assert "G" in model.named_vars


def test_univariate_and_fixed():
    with pm.Model():
        cov, _ = covariance_prior("R", 1, {"sd_scale": 1.0, "sd_family": "half_t"})
        fixed, chol = covariance_prior("G", 2, {}, fixed=np.array([[2.0, 0.5], [0.5, 1.0]]))
    assert pm.draw(cov, random_seed=2).shape == (1, 1)
    np.testing.assert_allclose((chol @ chol.T).eval(), fixed.eval())


def test_fixed_covariances_are_standardised_and_checked():
    traits = ["a", "b"]
    out = fixed_covariances({"fixed_covariances": {"G": [[4, 2], [2, 9]], "R": [[4, 0], [0, 9]]}},
                            np.array([2.0, 3.0]), traits)
    np.testing.assert_allclose(out["G"], [[1, 1 / 3], [1 / 3, 1]])
    with pytest.raises(UserError, match="fixed_covariances.G' has shape"):
        fixed_covariances({"fixed_covariances": {"G": [[1]], "R": [[1, 0], [0, 1]]}}, np.ones(2), traits)
    with pytest.raises(UserError, match="not positive definite"):
        fixed_covariances({"fixed_covariances": {"G": [[1, 2], [2, 1]], "R": [[1, 0], [0, 1]]}}, np.ones(2), traits)
