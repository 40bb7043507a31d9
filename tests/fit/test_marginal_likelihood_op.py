"""Checks of the marginal engine's likelihood Op (records with covariances lam_i G + R).

Oracle: scipy.stats.multivariate_normal (a general-purpose reference library), and exact
identities (central finite differences for gradients).
"""

import numpy as np
import pytensor
import pytensor.tensor as pt
import pytest
from scipy import stats

from ped2g.fit.marginal_likelihood_op import scaled_pair_logp


def _random_covs(rng, n, k):
    a = rng.normal(size=(n, k, k))
    return a @ np.swapaxes(a, -1, -2) + 0.5 * np.eye(k)


@pytest.mark.parametrize("mode", ["FAST_COMPILE", "NUMBA"])
@pytest.mark.parametrize("k", [1, 3, 4])
def test_scaled_pair_matches_dense_and_gradient_finite_when_g_proportional_to_r(k, mode):
    # G = 0.5 R: every record's covariance is (0.5 lam + 1) R; eigenvalue-based forms have
    # degenerate eigenvalues here. Value against scipy; gradients (residuals, G, R) against
    # central finite differences of the same function; both Python and numba implementations.
    rng = np.random.default_rng(5)
    n = 20
    lam = rng.uniform(0.1, 3.0, size=n)
    R0 = _random_covs(rng, 1, k)[0]
    r0 = rng.normal(size=(n, k))
    g = pt.dmatrix("g")
    rr = pt.dmatrix("rr")
    res = pt.dmatrix("res")
    logp = scaled_pair_logp([res[:, j] for j in range(k)], lam, g, rr)
    f = pytensor.function([res, g, rr], [logp, *pytensor.grad(logp, [res, g, rr])], mode=mode)
    for G0 in (0.5 * R0, _random_covs(rng, 1, k)[0]):
        val, dres, dg, dr = f(r0, G0, R0)
        want = sum(stats.multivariate_normal(np.zeros(k), lam[i] * G0 + R0).logpdf(r0[i]) for i in range(n))
        assert val == pytest.approx(want, rel=1e-12)
        assert np.all(np.isfinite(dg)) and np.all(np.isfinite(dr))
        h = 1e-6
        for which, analytic in ((1, dg), (2, dr)):
            for j in range(k):
                for l in range(k):
                    e = np.zeros((k, k)); e[j, l] = h
                    args_up = [r0, G0, R0]; args_dn = [r0, G0, R0]
                    args_up[which] = args_up[which] + e; args_dn[which] = args_dn[which] - e
                    num = (f(*args_up)[0] - f(*args_dn)[0]) / (2 * h)
                    assert analytic[j, l] == pytest.approx(num, rel=1e-5, abs=1e-6)
        for i, j in ((0, 0), (7, k - 1), (n - 1, k // 2)):
            e = np.zeros((n, k)); e[i, j] = h
            num = (f(r0 + e, G0, R0)[0] - f(r0 - e, G0, R0)[0]) / (2 * h)
            assert dres[i, j] == pytest.approx(num, rel=1e-5, abs=1e-6)


def test_scaled_pair_is_minus_infinity_where_a_covariance_is_not_positive_definite():
    lam = np.array([1.0, 2.0])
    G = np.array([[1.0, 0.0], [0.0, -3.0]])    # lam_2 G + R has a negative diagonal entry
    R = np.eye(2)
    logp = scaled_pair_logp(pt.as_tensor_variable(np.zeros((2, 2))), lam, G, R)
    assert logp.eval() == -np.inf
