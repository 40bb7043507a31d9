"""The latent engine's record likelihood Op (observed traits of every record, one R).

Oracles: scipy.stats.multivariate_normal on each record's observed sub-vector (the marginal of a
normal is the normal of the sub-vector and sub-matrix: an exact identity); central finite
differences for the gradients, in PyTensor's Python mode and in its numba backend.
"""

import numpy as np
import pytensor
import pytensor.tensor as pt
import pytest
from scipy import stats

from ped2g.fit.observed_normal_op import observed_normal_logp_and_grad, observed_normal_op, observed_patterns


def _case(k, n=40, seed=2):
    rng = np.random.default_rng(seed)
    a = rng.normal(size=(k, k))
    R = a @ a.T + 0.5 * np.eye(k)
    resid = rng.normal(size=(n, k))
    observed = rng.random((n, k)) > 0.3
    observed[0] = True
    observed[1] = False
    observed[1, 0] = True
    observed[2] = False            # a record with nothing observed contributes 0
    resid = np.where(observed, resid, 50.0)   # missing cells hold any finite value
    return R, resid, observed


def _scipy(R, resid, observed):
    total = 0.0
    for r, o in zip(resid, observed):
        if o.any():
            total += stats.multivariate_normal(np.zeros(o.sum()), R[np.ix_(o, o)]).logpdf(r[o])
    return total


@pytest.mark.parametrize("k", [1, 3, 5])
def test_value_is_the_density_of_the_observed_traits(k):
    R, resid, observed = _case(k)
    patterns, index = observed_patterns(observed)
    np.testing.assert_array_equal(patterns[index].astype(bool), observed)
    total, d_resid, dR = observed_normal_logp_and_grad(resid, R, index, patterns)
    np.testing.assert_allclose(total, _scipy(R, resid, observed), rtol=1e-12)
    assert np.all(d_resid[~observed] == 0.0)      # the missing cells do not enter
    np.testing.assert_allclose(dR, dR.T, rtol=0, atol=0)


@pytest.mark.parametrize("mode", ["FAST_COMPILE", "NUMBA"])
def test_gradients_match_finite_differences(mode):
    k = 3
    R0, resid0, observed = _case(k, n=25, seed=7)
    patterns, index = observed_patterns(observed)
    resid, R = pt.matrix("resid", dtype="float64"), pt.matrix("R", dtype="float64")
    logp = observed_normal_op(resid, R, index, patterns)[0]
    fn = pytensor.function([resid, R], [logp, *pytensor.grad(logp, [resid, R])], mode=mode)
    value, g_resid, g_R = fn(resid0, R0)
    np.testing.assert_allclose(value, _scipy(R0, resid0, observed), rtol=1e-12)
    eps = 1e-6
    for j in range(k):
        for l in range(k):
            up, down = R0.copy(), R0.copy()
            up[j, l] += eps
            down[j, l] -= eps
            numeric = (fn(resid0, up)[0] - fn(resid0, down)[0]) / (2 * eps)
            np.testing.assert_allclose(g_R[j, l], numeric, rtol=1e-5, atol=1e-7)
    for i, j in [(0, 0), (0, 2), (1, 0), (1, 1), (5, 2), (24, 1)]:
        up, down = resid0.copy(), resid0.copy()
        up[i, j] += eps
        down[i, j] -= eps
        numeric = (fn(up, R0)[0] - fn(down, R0)[0]) / (2 * eps)
        np.testing.assert_allclose(g_resid[i, j], numeric, rtol=1e-5, atol=1e-7)


def test_not_positive_definite_gives_minus_infinity():
    R, resid, observed = _case(3)
    R_bad = R.copy()
    R_bad[1, 1] = -1.0
    patterns, index = observed_patterns(observed)
    total, d_resid, dR = observed_normal_logp_and_grad(resid, R_bad, index, patterns)
    assert total == -np.inf
    assert np.all(np.isfinite(d_resid)) and np.all(np.isfinite(dR))
