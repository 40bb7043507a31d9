"""Priors shared by both engines, on the standardised scale (each trait's phenotypic SD = 1).

Covariance matrices (G, R and each extra random effect's) all get the same prior, the
separation strategy of Barnard, McCulloch & Meng (2000, *Statistica Sinica* 10:1281-1311) [M]::

    Sigma = diag(s) Omega diag(s),   s_j ~ HalfNormal(sd_scale)  or  HalfStudentT(3, sd_scale),
    Omega ~ LKJ(eta)                 (Lewandowski, Kurowicka & Joe 2009, *J. Multivar. Anal.* 100:1989)

sampled through the Cholesky factor of Sigma (``pymc.LKJCholeskyCov``). Because the traits are
standardised, ``sd_scale`` is relative to each trait's phenotypic SD.

The same prior can be sampled with *signed* scales (``covariance_prior(..., signed_sd=True)``,
docs/methods.md §2.4): ``Sigma = diag(a) W W' diag(a)`` with ``a_j`` on the whole real line under
the symmetric parent of the SD prior (Normal or Student-t, so ``|a_j|`` has the half-normal or
half-t law) and ``W`` the Cholesky factor of a correlation matrix built from canonical partial
correlations ``z = tanh(x)`` (Lewandowski, Kurowicka & Joe 2009, their section 3.2). Under LKJ(eta) the
partial correlations are independent, ``z`` in column ``k`` (0-based) distributed as
``2 Beta(b_k, b_k) - 1`` with ``b_k = eta - 1 + (t - k)/2``. Flipping the sign of ``a_j`` flips
row and column ``j`` of the correlation matrix, which LKJ leaves unchanged, so ``Sigma`` has
exactly the prior above. What changes is the geometry NUTS sees: an SD whose posterior reaches
zero is an ordinary crossing of ``a_j = 0`` instead of a long tail of ``log s_j``. With
``model.fixed_covariances`` G and R are held at given matrices (original units, converted here).

Fixed effects: ``beta[x, j] ~ Normal(0, fixed_sd)`` independently (standardised scale).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pymc as pm
import pytensor.tensor as pt

from ..config import with_defaults
from ..errors import UserError

SD_FAMILIES = ("half_normal", "half_t")
HALF_T_NU = 3.0


def _sd_dist(priors: dict[str, Any], n: int):
    scale = float(priors["sd_scale"])
    family = priors["sd_family"]
    if family == "half_normal":
        return pm.HalfNormal.dist(sigma=scale, shape=n)
    if family == "half_t":
        return pm.HalfStudentT.dist(nu=HALF_T_NU, sigma=scale, shape=n)
    raise UserError(f"config key 'model.priors.sd_family' is {family!r}; allowed: {', '.join(SD_FAMILIES)}")


def covariance_prior(name: str, n_traits: int, priors: dict[str, Any], fixed: np.ndarray | None = None,
                     signed_sd: bool = False) -> tuple[pt.TensorVariable, pt.TensorVariable]:
    """Create the covariance matrix ``name`` in the current PyMC model.

    Parameters
    ----------
    name
        Name of the Deterministic holding the (t, t) matrix ("G", "R", "cov_maternal", ...).
    n_traits
        t.
    priors
        ``config["model"]["priors"]`` (keys sd_scale, sd_family, lkj_eta).
    fixed
        A (t, t) matrix on the standardised scale to hold the covariance at; None estimates it.
    signed_sd
        Sample the same prior through signed scales and canonical partial correlations (module
        docstring) instead of log-SDs and ``pymc.LKJCholeskyCov``.

    Returns
    -------
    (cov, chol)
        The covariance matrix and a lower-triangular factor with ``chol @ chol.T == cov``.
    """
    priors = with_defaults(priors, "model", "priors")
    if fixed is not None:
        fixed = np.asarray(fixed, dtype=float)
        chol_np = np.linalg.cholesky(fixed)
        cov = pm.Deterministic(name, pt.as_tensor_variable(fixed))
        return cov, pt.as_tensor_variable(chol_np)
    if signed_sd:
        return _signed_covariance(name, n_traits, priors)
    if n_traits == 1:
        sd = _register_sd(name, priors)
        chol = sd.reshape((1, 1))
        cov = pm.Deterministic(name, chol * chol)
        return cov, chol
    chol, _, _ = pm.LKJCholeskyCov(f"{name}_chol", n=n_traits, eta=float(priors["lkj_eta"]),
                                   sd_dist=_sd_dist(priors, n_traits), compute_corr=True,
                                   store_in_trace=False)
    cov = pm.Deterministic(name, chol @ chol.T)
    return cov, chol


def _register_sd(name: str, priors: dict[str, Any]) -> pt.TensorVariable:
    scale = float(priors["sd_scale"])
    family = priors["sd_family"]
    if family == "half_normal":
        return pm.HalfNormal(f"{name}_sd", sigma=scale, shape=1)
    if family == "half_t":
        return pm.HalfStudentT(f"{name}_sd", nu=HALF_T_NU, sigma=scale, shape=1)
    raise UserError(f"config key 'model.priors.sd_family' is {family!r}; allowed: {', '.join(SD_FAMILIES)}")


def _signed_sd(name: str, n: int, priors: dict[str, Any]) -> pt.TensorVariable:
    """Scales ``a`` (n,) whose absolute values have the SD prior; started at 1, where the log-SD
    parametrisation starts too."""
    scale = float(priors["sd_scale"])
    family = priors["sd_family"]
    start = np.ones(n)
    if family == "half_normal":
        return pm.Normal(f"{name}_sd_signed", mu=0.0, sigma=scale, shape=n, initval=start)
    if family == "half_t":
        return pm.StudentT(f"{name}_sd_signed", nu=HALF_T_NU, mu=0.0, sigma=scale, shape=n, initval=start)
    raise UserError(f"config key 'model.priors.sd_family' is {family!r}; allowed: {', '.join(SD_FAMILIES)}")


def partial_correlation_shapes(n: int, eta: float) -> np.ndarray:
    """``b`` of each canonical partial correlation under LKJ(eta), in the order of
    ``numpy.tril_indices(n, -1)``: ``eta - 1 + (n - k)/2`` for column ``k`` (module docstring)."""
    _, cols = np.tril_indices(n, -1)
    return eta - 1.0 + (n - cols) / 2.0


def _log_cosh(x):
    return pt.abs(x) + pt.log1p(pt.exp(-2.0 * pt.abs(x))) - np.log(2.0)


def correlation_free_logp(value, b):
    """Log-density of ``x = atanh(z)`` with ``z`` distributed as ``2 Beta(b, b) - 1``:
    ``b log(1 - z^2) - (2b - 1) log 2 - log B(b, b)``, with ``1 - z^2 = cosh(x)^-2``."""
    b = pt.cast(b, "float64")   # a Python float would become a float32 constant
    return (-2.0 * b * _log_cosh(value) - (2.0 * b - 1.0) * np.log(2.0)
            - (2.0 * pt.gammaln(b) - pt.gammaln(2.0 * b)))


def _correlation_free_random(b, rng=None, size=None):
    b = np.asarray(b, dtype=float)
    shape = b.shape if size is None else (*tuple(size), *b.shape[-1:])   # size: batch dimensions only
    z = 2.0 * rng.beta(b, b, size=shape) - 1.0
    return np.arctanh(np.clip(z, -1 + 1e-16, 1 - 1e-16))


def correlation_cholesky(x, n: int) -> pt.TensorVariable:
    """The Cholesky factor ``W`` (n, n) of a correlation matrix from the free values ``x`` of its
    canonical partial correlations (order of ``numpy.tril_indices(n, -1)``):
    ``W[i, k] = z_ik prod_{m<k} sqrt(1 - z_im^2)`` and ``W[i, i] = prod_{m<i} sqrt(1 - z_im^2)``."""
    rows, cols = np.tril_indices(n, -1)
    z = pt.set_subtensor(pt.eye(n)[rows, cols], pt.tanh(x))
    rest = pt.set_subtensor(pt.ones((n, n))[rows, cols], 1.0 / pt.cosh(x))   # sqrt(1 - z^2)
    rest = pt.set_subtensor(rest[np.arange(n), np.arange(n)], 0.0)
    before = pt.concatenate([pt.ones((n, 1)), pt.cumprod(rest, axis=1)[:, :-1]], axis=1)
    return z * before


def _signed_covariance(name: str, n: int, priors: dict[str, Any]) -> tuple[pt.TensorVariable, pt.TensorVariable]:
    a = _signed_sd(name, n, priors)
    if n == 1:
        chol = a.reshape((1, 1))
    else:
        b = partial_correlation_shapes(n, float(priors["lkj_eta"]))
        x = pm.CustomDist(f"{name}_corr_free", b, logp=correlation_free_logp, random=_correlation_free_random,
                          shape=len(b), signature="(k)->(k)")
        chol = a[:, None] * correlation_cholesky(x, n)
    cov = pm.Deterministic(name, chol @ chol.T)
    return cov, chol


def fixed_effects_prior(n_x: int, n_traits: int, priors: dict[str, Any]) -> pt.TensorVariable:
    """The fixed effects ``beta`` (p, t), Normal(0, fixed_sd) on the standardised scale."""
    sd = float(with_defaults(priors, "model", "priors")["fixed_sd"])
    return pm.Normal("beta", mu=0.0, sigma=sd, shape=(n_x, n_traits))


def fixed_covariances(model_config: dict[str, Any], y_scale: np.ndarray,
                      traits: list[str]) -> dict[str, np.ndarray] | None:
    """``model.fixed_covariances`` converted to the standardised scale, checked.

    ``Sigma_std = Sigma / (s s')`` with s the phenotypic SDs (``FitData.y_scale``).

    Raises
    ------
    UserError
        If a matrix has the wrong shape, is not symmetric or is not positive definite.
    """
    given = model_config.get("fixed_covariances")
    if given is None:
        return None
    t = len(traits)
    scale = np.outer(y_scale, y_scale)
    out = {}
    for key in ("G", "R"):
        try:
            m = np.asarray(given[key], dtype=float)
        except (TypeError, ValueError):
            raise UserError(f"config key 'model.fixed_covariances.{key}' must be a {t}x{t} matrix of numbers "
                            f"(one row per trait: {', '.join(traits)})") from None
        if m.shape != (t, t):
            raise UserError(f"config key 'model.fixed_covariances.{key}' has shape {m.shape}; it must be "
                            f"{t}x{t}, one row and column per trait ({', '.join(traits)})")
        if not np.allclose(m, m.T, rtol=1e-10, atol=1e-12):
            raise UserError(f"config key 'model.fixed_covariances.{key}' is not symmetric")
        if np.linalg.eigvalsh(m)[0] <= 0:
            raise UserError(f"config key 'model.fixed_covariances.{key}' is not positive definite")
        out[key] = m / scale
    return out


def shared_priors(data, model_config: dict[str, Any], signed_sd: bool = False) -> tuple[pt.TensorVariable, ...]:
    """The priors every engine declares alike, in the current PyMC model (docs/methods.md §2.4):
    ``G`` and ``R`` (fixed by ``model.fixed_covariances`` when given) with their Cholesky factors,
    and the fixed effects ``beta`` of ``data``'s design; ``signed_sd`` as in :func:`covariance_prior`.
    Returns ``(G, chol_G, R, chol_R, beta)``."""
    t = data.n_traits
    priors = with_defaults(model_config, "model")["priors"]
    fixed = fixed_covariances(model_config, data.y_scale, data.traits)
    G, chol_G = covariance_prior("G", t, priors, None if fixed is None else fixed["G"], signed_sd)
    R, chol_R = covariance_prior("R", t, priors, None if fixed is None else fixed["R"], signed_sd)
    beta = fixed_effects_prior(len(data.x_names), t, priors)
    return G, chol_G, R, chol_R, beta
