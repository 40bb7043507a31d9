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


# --- signed scales and canonical partial correlations (docs/methods.md §2.4) ----------------------

def _numeric_jacobian(f, x, h=1e-6):
    """Central differences of f: R^m -> R^k at x, (k, m)."""
    cols = []
    for i in range(len(x)):
        e = np.zeros(len(x))
        e[i] = h
        cols.append((f(x + e) - f(x - e)) / (2 * h))
    return np.stack(cols, axis=1)


def _compiled(fn_of_tensor):
    import pytensor
    import pytensor.tensor as pt

    x = pt.dvector("x")
    return pytensor.function([x], fn_of_tensor(x), mode="FAST_COMPILE")


@pytest.mark.parametrize("b", [0.7, 1.0, 2.5, 4.0])
def test_each_free_partial_correlation_density_integrates_to_one(b):
    # The normalising constant, against scipy's quadrature: z = tanh(x) has density
    # (1 - z^2)^(b - 1) / (2^(2b - 1) B(b, b)) on (-1, 1), so x's density integrates to 1; and for
    # b = 1 (uniform z) it is (1 - z^2) / 2 at every x.
    from scipy.integrate import quad

    from ped2g.fit.priors import correlation_free_logp

    import pytensor.tensor as pt

    x = pt.dscalar("x")
    f = _compiled_scalar(correlation_free_logp(x, b), x)
    total, _ = quad(lambda v: np.exp(f(v)), -40.0, 40.0, epsabs=1e-13, epsrel=1e-12, limit=200)
    assert total == pytest.approx(1.0, abs=1e-8)
    if b == 1.0:
        assert np.exp(f(0.4)) == pytest.approx((1 - np.tanh(0.4) ** 2) / 2, rel=1e-12)


def _compiled_scalar(expr, x):
    import pytensor

    return pytensor.function([x], expr, mode="FAST_COMPILE")


@pytest.mark.parametrize("t,eta", [(2, 1.0), (3, 1.0), (3, 2.5), (4, 0.7)])
def test_partial_correlation_density_is_the_lkj_density(t, eta):
    # Change of variables, an exact identity: the density of the free values x equals the LKJ
    # log-density at Omega(x) (pymc.LKJCorr, Lewandowski et al. 2009) plus log |d Omega_offdiag / dx|,
    # the Jacobian taken by central differences rather than from the formula in the code. Compared
    # through differences between points: in PyMC 5.28 the LKJ normalising constant enters with the
    # opposite sign (LKJCorr's log-density at n = 2, eta = 1 is +log 2, where the uniform density on
    # (-1, 1) gives -log 2); the constant is checked by the quadrature test above.
    import pytensor.tensor as pt

    from ped2g.fit.priors import correlation_cholesky, correlation_free_logp, partial_correlation_shapes

    k = t * (t - 1) // 2
    b = partial_correlation_shapes(t, eta)
    omega = _compiled(lambda x: (lambda W: W @ W.T)(correlation_cholesky(x, t)))
    logp_x = _compiled(lambda x: correlation_free_logp(x, pt.as_tensor_variable(b)).sum())
    upper = np.triu_indices(t, 1)
    lkj = pm.LKJCorr.dist(n=t, eta=eta)
    rng = np.random.default_rng(t)
    ours, reference = [], []
    for _ in range(4):
        x = rng.normal(scale=0.8, size=k)
        Om = omega(x)
        np.testing.assert_allclose(np.diag(Om), 1.0, atol=1e-12)
        assert np.linalg.eigvalsh(Om)[0] > 0
        jac = _numeric_jacobian(lambda v: omega(v)[upper], x)
        reference.append(float(pm.logp(lkj, Om[upper]).eval()) + np.linalg.slogdet(jac)[1])
        ours.append(float(logp_x(x)))
    np.testing.assert_allclose(np.diff(ours), np.diff(reference), atol=1e-6)


@pytest.mark.parametrize("family", ["half_normal", "half_t"])
def test_signed_scales_give_sigma_the_same_density_as_the_log_sd_prior(family):
    # The density of Sigma under the signed parametrisation (2^t sign-symmetric preimages, each with
    # density p(a, x) / |d vech Sigma / d(a, x)|) equals its density under pymc.LKJCholeskyCov with the
    # half-normal or half-t SDs (PyMC's log-density of the packed Cholesky factor L, divided by
    # |d vech Sigma / d vech L|). Both Jacobians by central differences: an exact identity, up to the
    # LKJ normalising constant (compared through differences between points).
    import pytensor
    import pytensor.tensor as pt

    t, priors = 3, {"sd_scale": 0.8, "sd_family": family, "lkj_eta": 1.5}
    with pm.Model() as model:
        cov, _ = covariance_prior("S", t, priors, signed_sd=True)
    values = model.value_vars            # [S_sd_signed, S_corr_free]
    logp = model.compile_logp(jacobian=False)
    sigma_fn = pytensor.function(values, model.replace_rvs_by_values([cov])[0], mode="FAST_COMPILE")
    lower = np.tril_indices(t)

    def sigma_of(v):
        return sigma_fn(v[:t], v[t:])[lower]

    sd = (pm.HalfNormal.dist(sigma=0.8, shape=t) if family == "half_normal"
          else pm.HalfStudentT.dist(nu=3, sigma=0.8, shape=t))
    old = pm.LKJCholeskyCov.dist(n=t, eta=1.5, sd_dist=sd, compute_corr=False)
    packed = pt.dvector("packed")
    old_logp = pytensor.function([packed], pm.logp(old, packed), mode="FAST_COMPILE")

    def sigma_of_packed(p):
        L = np.zeros((t, t))
        L[lower] = p
        return (L @ L.T)[lower]

    rng = np.random.default_rng(7)
    ours, reference = [], []
    for a in ([0.5, -1.2, 0.05], [-0.3, 0.9, -0.02], [1.4, 0.2, 0.6]):
        x = rng.normal(scale=0.7, size=3)
        v = np.concatenate([a, x])
        new = logp({"S_sd_signed": np.array(a), "S_corr_free": x}) + t * np.log(2.0)
        new -= np.linalg.slogdet(_numeric_jacobian(sigma_of, v))[1]
        S = sigma_fn(np.array(a), x)
        L = np.linalg.cholesky(S)
        p = L[lower]
        ours.append(float(new))
        reference.append(float(old_logp(p)) - np.linalg.slogdet(_numeric_jacobian(sigma_of_packed, p))[1])
    # through differences between points (PyMC's LKJ normalising constant, see above)
    np.testing.assert_allclose(np.diff(ours), np.diff(reference), atol=1e-5)


def test_signed_prior_draws_have_the_stated_sd_and_correlation_spread():
    # As the first test above (E[sd] = s sqrt(2/pi); correlation margin Beta(b, b), b = eta - 1 + t/2),
    # for the signed parametrisation; and a univariate matrix is the square of one signed scale.
    t, scale, eta = 3, 0.7, 2.0
    with pm.Model():
        cov, chol = covariance_prior("G", t, {"sd_scale": scale, "lkj_eta": eta}, signed_sd=True)
        one, _ = covariance_prior("R", 1, {"sd_scale": scale}, signed_sd=True)
    draws = pm.draw(cov, draws=20000, random_seed=3)
    sd = np.sqrt(np.diagonal(draws, axis1=1, axis2=2))
    assert sd.mean() == pytest.approx(scale * np.sqrt(2 / np.pi), rel=0.02)
    b = eta - 1 + t / 2
    for i, j in [(0, 1), (1, 2), (0, 2)]:
        corr = draws[:, i, j] / (sd[:, i] * sd[:, j])
        assert corr.var() == pytest.approx(1 / (2 * b + 1), rel=0.05)
        assert abs(corr.mean()) < 0.02
    r = np.sqrt(pm.draw(one, draws=20000, random_seed=4)[:, 0, 0])
    assert r.mean() == pytest.approx(scale * np.sqrt(2 / np.pi), rel=0.02)
