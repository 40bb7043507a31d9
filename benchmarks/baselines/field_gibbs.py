"""A blocked Gibbs sampler for field designs on the sparse mixed-model equations (benchmark
candidate and reference; docs/methods.md §2.12).

Same model and priors as every engine (docs/methods.md §2.1, §2.4; standardised scale). One
iteration updates, in turn:

1. **every random-effect level at once** (breeding values and each extra effect's levels) from
   ``N(C^-1 r, C^-1)`` given the fixed effects and all covariances, with the missing cells
   integrated out: one sparse ``L D L'`` factorisation of Henderson's coefficient matrix and a
   solve with a perturbed right-hand side (:func:`ped2g.fit.sparse_mme.effects`; no selected
   inverse, which is most of a gradient's cost in the sparse engine);
2. the missing trait cells of each record from their normal distribution given its observed cells,
   the levels, the fixed effects and R (data augmentation, so that step 3 sees complete residuals);
3. each covariance matrix (G from ``U' A^-1 U``, each extra effect's from ``U_c' U_c``, R from the
   complete residuals) by :class:`CovarianceStep`: independence Metropolis-Hastings whose proposal
   is the covariance's exact conditional distribution under a reference inverse-Wishart prior and
   whose acceptance ratio is the ratio of the model's prior (half-normal or half-t standard
   deviations with an LKJ correlation, :func:`log_prior_density`) to the reference prior, so the
   chain targets the model's prior exactly. With many levels the likelihood dominates and almost
   every proposal is accepted; with few (a cohort effect over some years) several proposals are
   tried per iteration (:data:`COVARIANCE_STEPS`);
4. the fixed effects from their normal distribution given the levels and R (observed cells only).

Every step draws from an exact conditional distribution or leaves it invariant, so the chain
targets the model's posterior with no tuning; warm-up is burn-in only. Step 1 and the missing-cell
draws are the classic data-augmentation scheme (Garcia-Cortes & Sorensen 1996 [M] for drawing all
levels by solving the equations with a perturbed right-hand side; Sorensen & Gianola 2002 [M]).

Measured against the sparse engine on the field design of benchmarks/field_design_benchmark.py
(``--engines gibbs``; benchmarks/README.md): G and the permanent-environment covariance mix
slowly given the levels, and it gave 0.30 effective samples per second against the sparse
engine's 1.04, so the workflow does not use it.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np
from benchmarks.baselines.gibbs import _impute
from ped2g.config import with_defaults
from ped2g.fit import sparse_mme
from ped2g.fit.data import FitData

#: Independence Metropolis-Hastings proposals per covariance matrix and iteration.
COVARIANCE_STEPS = 8
HALF_T_NU = 3.0


# ------------------------------------------------------------------------------------------------
# the prior on a covariance matrix, as a density of the matrix
# ------------------------------------------------------------------------------------------------

def log_prior_density(Sigma: np.ndarray, priors: dict) -> float:
    """Log density (up to a constant) of the covariance matrix ``Sigma`` under the separation prior
    of :mod:`ped2g.fit.priors`: standard deviations ``s`` half-normal or half-t (``sd_scale``),
    correlation ``Omega`` LKJ(``lkj_eta``), independent.

    With ``Sigma = diag(s) Omega diag(s)`` the map from (s, the off-diagonal of Omega) to the
    distinct elements of Sigma has Jacobian determinant ``2^t prod_j s_j^t``, so
    ``log p(Sigma) = log p(s) + (eta - 1) log|Omega| - t sum_j log s_j`` (+ const); -inf if Sigma is
    not positive definite.
    """
    Sigma = np.asarray(Sigma, dtype=float)
    t = Sigma.shape[0]
    d = np.diag(Sigma)
    if np.any(d <= 0):
        return -np.inf
    s = np.sqrt(d)
    Omega = Sigma / np.outer(s, s)
    sign, logdet = np.linalg.slogdet(Omega)
    if sign <= 0:
        return -np.inf
    scale = float(priors["sd_scale"])
    if priors["sd_family"] == "half_normal":
        lp = -0.5 * float(np.sum((s / scale) ** 2))
    else:
        lp = -0.5 * (HALF_T_NU + 1.0) * float(np.sum(np.log1p((s / scale) ** 2 / HALF_T_NU)))
    return lp + (float(priors["lkj_eta"]) - 1.0) * logdet - t * float(np.sum(np.log(s)))


def _log_inverse_wishart_kernel(Sigma_inv: np.ndarray, logdet: float, psi: np.ndarray, nu: float) -> float:
    """``log IW(Sigma; psi, nu)`` up to a constant: ``-(nu + t + 1)/2 log|Sigma| - tr(psi Sigma^-1)/2``."""
    t = psi.shape[0]
    return -0.5 * (nu + t + 1.0) * logdet - 0.5 * float(np.sum(psi * Sigma_inv))


def inverse_wishart(psi: np.ndarray, nu: float, rng: np.random.Generator) -> np.ndarray:
    """One draw from the inverse-Wishart distribution IW(psi, nu) (mean ``psi / (nu - t - 1)``):
    ``Sigma = W^-1`` with ``W ~ Wishart(psi^-1, nu)`` by the Bartlett decomposition (Smith & Hocking
    1972, *Appl. Stat.* 21:341 [M])."""
    t = psi.shape[0]
    L = np.linalg.cholesky(np.linalg.inv(psi))
    A = np.zeros((t, t))
    A[np.diag_indices(t)] = np.sqrt(rng.chisquare(nu - np.arange(t)))
    il = np.tril_indices(t, -1)
    A[il] = rng.standard_normal(len(il[0]))
    LA = L @ A
    W = LA @ LA.T
    Sigma = np.linalg.inv(W)
    return 0.5 * (Sigma + Sigma.T)


@dataclass
class CovarianceStep:
    """Draws one covariance matrix given its scatter matrix ``S`` over ``n`` independent rows.

    Target: ``p(Sigma | S) ∝ prior(Sigma) |Sigma|^(-n/2) exp(-tr(Sigma^-1 S)/2)``. Proposal: the
    exact conditional under the reference prior IW(``psi0``, ``nu0``), that is IW(S + psi0, n + nu0);
    accepted with probability ``min(1, w(Sigma*) / w(Sigma))``, ``w = prior / reference prior``.
    The reference need not be proper, only the proposal: ``nu0 = 1`` and ``psi0 = sd_scale^2 I / 100``
    (acceptance measured on a 3-trait covariance of small variance: 0.41 with 9 levels, 0.76 with 40,
    0.93 with 500; ``nu0 = t + 1``, ``psi0 = sd_scale^2 I`` gave 0.07, 0.34 and 0.71).
    """

    t: int
    priors: dict
    proposals: int = 0
    accepted: int = 0
    psi0: np.ndarray = field(init=False)
    nu0: float = field(init=False)

    def __post_init__(self):
        self.psi0 = 0.01 * float(self.priors["sd_scale"]) ** 2 * np.eye(self.t)
        self.nu0 = 1.0

    def _log_weight(self, Sigma: np.ndarray, nu0: float) -> float:
        sign, logdet = np.linalg.slogdet(Sigma)
        if sign <= 0:
            return -np.inf
        ref = _log_inverse_wishart_kernel(np.linalg.inv(Sigma), logdet, self.psi0, nu0)
        return log_prior_density(Sigma, self.priors) - ref

    def draw(self, current: np.ndarray, S: np.ndarray, n: int, rng: np.random.Generator,
             steps: int = COVARIANCE_STEPS) -> np.ndarray:
        psi = S + self.psi0
        psi = 0.5 * (psi + psi.T)
        nu0 = max(self.nu0, self.t - n)    # the proposal must be proper: n + nu0 > t - 1
        nu = n + nu0
        w_cur = self._log_weight(current, nu0)
        for _ in range(steps):
            prop = inverse_wishart(psi, nu, rng)
            w_prop = self._log_weight(prop, nu0)
            self.proposals += 1
            if math.log(rng.uniform()) < w_prop - w_cur:
                current, w_cur = prop, w_prop
                self.accepted += 1
        return current

    @property
    def acceptance(self) -> float:
        return self.accepted / self.proposals if self.proposals else float("nan")


# ------------------------------------------------------------------------------------------------
# the sampler
# ------------------------------------------------------------------------------------------------

class _Patterns:
    """Records of each pattern of observed traits, with their observed and missing traits and X'X
    (for the fixed-effect step)."""

    def __init__(self, missing: np.ndarray, X: np.ndarray):
        pats, inverse = np.unique(missing, axis=0, return_inverse=True)
        inverse = np.ravel(inverse)
        self.groups = []
        for k, pat in enumerate(pats):
            rows = np.flatnonzero(inverse == k)
            self.groups.append((rows, np.flatnonzero(pat), np.flatnonzero(~pat), X[rows].T @ X[rows]))


@dataclass
class ChainResult:
    """Draws of one chain (kept iterations only) and what the run measured."""

    G: np.ndarray
    R: np.ndarray
    covs: np.ndarray        # (draws, n_c, t, t)
    beta: np.ndarray        # (draws, p, t)
    seconds: float
    iterations: int
    acceptance: dict[str, float]


class BlockGibbs:
    """The blocked Gibbs sampler for one data set (module docstring).

    Parameters
    ----------
    data : FitData
    model_config : dict
        ``config["model"]`` (priors; ``fixed_covariances`` holds G and R).
    design : sparse_mme.Design, optional
        The data's sparse design (computed when not given).
    """

    def __init__(self, data: FitData, model_config: dict, design: sparse_mme.Design | None = None):
        from ped2g.fit.priors import fixed_covariances
        from ped2g.pedigree.relationships import relationship_inverse

        self.data = data
        self.design = design if design is not None else sparse_mme.design_for(data)
        self.priors = with_defaults(model_config, "model")["priors"]
        self.fixed = fixed_covariances(model_config, data.y_scale, data.traits)
        self.t = data.n_traits
        self.X = np.asarray(data.X, dtype=float)
        self.missing = np.asarray(data.missing, dtype=bool)
        self.observed = ~self.missing
        self.y0 = np.where(self.missing, 0.0, np.asarray(data.y, dtype=float))
        self.Ainv = relationship_inverse(data.pedigree).tocsr()
        self.animal = np.asarray(data.record_animal, dtype=np.int64)
        self.levels = [np.asarray(e.level, dtype=np.int64) for e in data.random]
        self.n_levels = [int(e.n_levels) for e in data.random]
        self.offsets = self.design.block_offsets
        self.patterns = _Patterns(self.missing, self.X)
        self.beta_precision0 = 1.0 / float(self.priors["fixed_sd"]) ** 2

    def _location(self, blocks: np.ndarray) -> np.ndarray:
        """``W u`` per record (n, t): the animal's breeding value plus each known level's effect."""
        out = blocks[self.animal].copy()
        for c, level in enumerate(self.levels):
            known = level >= 0
            out[known] += blocks[self.offsets[1 + c] + level[known]]
        return out

    def _draw_beta(self, Y: np.ndarray, R: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        """Fixed effects (p, t) given ``Y = y - W u`` (observed cells) and R: normal with precision
        ``I / fixed_sd^2 + sum_r (x_r x_r') (x) P_r`` (``P_r``: inverse of R over record r's
        observed traits, zero-padded), vec in row-major order of (p, t)."""
        p, t = self.X.shape[1], self.t
        prec = self.beta_precision0 * np.eye(p * t)
        PY = np.zeros_like(Y)
        for rows, m, o, XtX in self.patterns.groups:
            P = np.zeros((t, t))
            P[np.ix_(o, o)] = np.linalg.inv(R[np.ix_(o, o)])
            prec += np.kron(XtX, P)
            PY[rows] = Y[rows] @ P
        lin = (self.X.T @ PY).ravel()
        L = np.linalg.cholesky(prec)
        mean = np.linalg.solve(prec, lin)
        z = rng.standard_normal(p * t)
        return (mean + np.linalg.solve(L.T, z)).reshape(p, t)

    def initial(self, rng: np.random.Generator) -> dict:
        """A dispersed starting point on the standardised scale (covariances at a random share of
        the phenotypic variance, fixed effects zero)."""
        t = self.t
        share = rng.uniform(0.1, 0.5, size=2 + len(self.levels))
        G = share[0] * np.eye(t) if self.fixed is None else self.fixed["G"]
        R = share[1] * np.eye(t) if self.fixed is None else self.fixed["R"]
        covs = np.array([share[2 + c] * np.eye(t) for c in range(len(self.levels))]).reshape(-1, t, t)
        return {"G": G, "R": R, "covs": covs, "beta": np.zeros((self.X.shape[1], t))}

    def run(self, iterations: int, warmup: int, rng: np.random.Generator, start: dict | None = None,
            callback=None, time_budget: float | None = None) -> ChainResult:
        """One chain: ``warmup`` burn-in iterations, then ``iterations`` kept.

        ``callback(iteration)`` is called after each iteration (progress); ``time_budget`` stops the
        chain early (keeping what was drawn) after that many seconds.
        """
        t = self.t
        state = start if start is not None else self.initial(rng)
        G, R, covs, beta = (np.array(state[k], dtype=float) for k in ("G", "R", "covs", "beta"))
        steps = {"G": CovarianceStep(t, self.priors), "R": CovarianceStep(t, self.priors),
                 **{f"cov_{e.name}": CovarianceStep(t, self.priors) for e in self.data.random}}
        keep = {"G": [], "R": [], "covs": [], "beta": []}
        n_u = self.design.n_unknowns
        begin = time.perf_counter()
        done = 0
        for it in range(warmup + iterations):
            resid = (self.y0 - self.X @ beta) * self.observed
            blocks, ok = sparse_mme.effects(self.design, resid[None], G[None], R[None],
                                            covs[None] if len(covs) else None,
                                            rng.standard_normal((1, n_u)))
            if not ok[0]:
                raise FloatingPointError("the coefficient matrix is not positive definite")
            blocks = blocks[0]
            location = self._location(blocks)
            if self.fixed is None:
                U = blocks[:self.design.n_animals]
                S_G = U.T @ (self.Ainv @ U)
                G = steps["G"].draw(G, 0.5 * (S_G + S_G.T), len(U), rng)
                E = (self.y0 - self.X @ beta - location) * self.observed
                _impute(E, np.zeros_like(E), self.missing, R, rng)    # residuals: mean 0
                R = steps["R"].draw(R, E.T @ E, len(E), rng)
            for c, eff in enumerate(self.data.random):
                Uc = blocks[self.offsets[1 + c]:self.offsets[2 + c]]
                covs[c] = steps[f"cov_{eff.name}"].draw(covs[c], Uc.T @ Uc, len(Uc), rng)
            beta = self._draw_beta((self.y0 - location) * self.observed, R, rng)
            done += 1
            if it >= warmup:
                keep["G"].append(G); keep["R"].append(R); keep["covs"].append(covs.copy()); keep["beta"].append(beta)
            if callback is not None:
                callback(it)
            if time_budget is not None and time.perf_counter() - begin > time_budget:
                break
        seconds = time.perf_counter() - begin
        n_c = len(self.levels)
        return ChainResult(G=np.array(keep["G"]).reshape(-1, t, t), R=np.array(keep["R"]).reshape(-1, t, t),
                           covs=np.array(keep["covs"]).reshape(len(keep["G"]), n_c, t, t),
                           beta=np.array(keep["beta"]).reshape(-1, self.X.shape[1], t),
                           seconds=seconds, iterations=done,
                           acceptance={k: s.acceptance for k, s in steps.items()})
