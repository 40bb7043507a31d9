"""The blocked Gibbs candidate for field designs (benchmarks/baselines/field_gibbs.py) targets the
model's posterior.

External checks, each named beside its test:
* PyMC's own log-density of ``LKJCholeskyCov`` (reference library) with the Jacobian of
  ``Sigma = L L'``, ``2^t prod_j L_jj^(t - j + 1)`` (Muirhead 1982, *Aspects of Multivariate
  Statistical Theory*, Thm 2.1.9 [M]): the prior density of a covariance matrix.
* scipy.stats.invwishart's mean (reference library): the inverse-Wishart draws.
* Numerical quadrature (scipy.integrate.quad): the posterior mean of one variance under the
  half-normal prior, which the Metropolis-Hastings covariance step must reproduce.
* Exact identity: with G and R held, the fixed effects' posterior mean under a nearly flat prior is
  the generalised least-squares estimate (:func:`ped2g.fit.sparse_mme.generalised_least_squares`).
"""

import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate, stats

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from benchmarks.baselines import field_gibbs  # noqa: E402

PRIORS = dict(sd_scale=0.7, sd_family="half_normal", lkj_eta=1.0, fixed_sd=10.0)


def _random_covariance(rng, t):
    M = rng.standard_normal((t, t + 2))
    return M @ M.T / (t + 2)


@pytest.mark.parametrize("t", [1, 2, 3, 4])
@pytest.mark.parametrize("family,eta", [("half_normal", 1.0), ("half_t", 2.5)])
def test_prior_density_matches_pymc(t, family, eta):
    """Differences of log densities between two matrices (constants cancel) agree to 1e-9."""
    import pymc as pm

    priors = {**PRIORS, "sd_family": family, "lkj_eta": eta}
    sd = (pm.HalfNormal.dist(sigma=0.7, shape=t) if family == "half_normal"
          else pm.HalfStudentT.dist(nu=3, sigma=0.7, shape=t))
    rng = np.random.default_rng(t)
    ours, theirs = [], []
    for _ in range(2):
        S = _random_covariance(rng, t)
        L = np.linalg.cholesky(S)
        if t == 1:
            lp = float(pm.logp(sd, np.sqrt(S[0])).eval().sum())
        else:
            dist = pm.LKJCholeskyCov.dist(n=t, eta=eta, sd_dist=sd, compute_corr=False)
            lp = float(pm.logp(dist, L[np.tril_indices(t)]).eval())
        jacobian = t * np.log(2.0) + sum((t - j) * np.log(L[j, j]) for j in range(t))
        ours.append(field_gibbs.log_prior_density(S, priors))
        theirs.append(lp - jacobian)
    assert ours[0] - ours[1] == pytest.approx(theirs[0] - theirs[1], abs=1e-9)


def test_prior_density_refuses_non_positive_definite():
    assert field_gibbs.log_prior_density(np.array([[1.0, 2.0], [2.0, 1.0]]), PRIORS) == -np.inf


def test_inverse_wishart_mean_matches_scipy():
    """Mean of 20,000 draws within 4 Monte Carlo SEs of scipy's closed-form mean, element by element."""
    rng = np.random.default_rng(3)
    psi = _random_covariance(rng, 3) * 8
    nu = 12.0
    draws = np.array([field_gibbs.inverse_wishart(psi, nu, rng) for _ in range(20000)])
    se = draws.std(axis=0) / np.sqrt(len(draws))
    assert np.all(np.abs(draws.mean(axis=0) - stats.invwishart(df=nu, scale=psi).mean()) < 4 * se)


def test_covariance_step_targets_the_half_normal_posterior():
    """One variance, n = 5 rows, half-normal prior on its SD: the chain's mean equals the mean by
    quadrature of p(v | S) ∝ p_s(sqrt v) / (2 sqrt v) v^(-n/2) exp(-S / 2v), within 4 SEs."""
    rng = np.random.default_rng(11)
    n, S = 5, 2.3
    priors = {**PRIORS, "sd_scale": 0.5}

    def density(v):
        return stats.halfnorm(scale=0.5).pdf(np.sqrt(v)) / (2 * np.sqrt(v)) * v ** (-n / 2) * np.exp(-S / (2 * v))

    norm = integrate.quad(density, 0, np.inf)[0]
    exact = integrate.quad(lambda v: v * density(v), 0, np.inf)[0] / norm
    step = field_gibbs.CovarianceStep(1, priors)
    current = np.array([[0.3]])
    draws = []
    for _ in range(20000):
        current = step.draw(current, np.array([[S]]), n, rng, steps=1)
        draws.append(current[0, 0])
    draws = np.array(draws)
    import arviz as az

    se = draws.std() / np.sqrt(float(az.ess(draws[None])))
    assert abs(draws.mean() - exact) < 4 * se
    assert 0.2 < step.acceptance <= 1.0


@pytest.mark.slow
def test_fixed_effects_average_to_generalised_least_squares():
    """G and R held, no extra effects: the Gibbs chain's fixed effects average to the GLS estimate
    (the prior SD of 10 phenotypic SDs moves it by far less than the Monte Carlo error)."""
    import arviz as az

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    import field_study
    from ped2g.fit import sparse_mme

    data, cfg, truth = field_study.design(seed=3, random=[], animals=200, founders=30, phenotyped=120)
    data = field_study.simulate(data, truth, np.random.default_rng(3))
    scale = np.outer(data.y_scale, data.y_scale)
    model = {**cfg["model"], "fixed_covariances": {"G": truth["G"].tolist(), "R": truth["R"].tolist()}}
    sampler = field_gibbs.BlockGibbs(data, model)
    result = sampler.run(3000, 100, np.random.default_rng(4))
    design = sparse_mme.design_for(data)
    gls = sparse_mme.generalised_least_squares(design, np.where(data.missing, 0.0, data.y), data.X,
                                               truth["G"] / scale, truth["R"] / scale)
    beta = result.beta.reshape(len(result.beta), -1)
    ess = np.array([float(az.ess(beta[None, :, k])) for k in range(beta.shape[1])])
    se = beta.std(axis=0) / np.sqrt(ess)
    assert np.all(np.abs(beta.mean(axis=0) - gls.ravel()) < 4 * se)
    assert np.allclose(result.G, truth["G"] / scale)
