"""Breeding values simulated down a pedigree, for many replicate draws at once.

Each animal's breeding value is the mid-parent value plus a Mendelian-sampling deviation,

    u_i = ½ (u_sire(i) + u_dam(i)) + φ_i,      φ_i ~ N(0, b_i G),

with an unknown parent contributing 0 and ``b_i`` the Mendelian-sampling coefficient of
:func:`ped2g.pedigree.core.mendelian_coefficients` (½ − ¼(F_s + F_d) with both parents known,
¾ − ¼ F_p with one, 1 with none; Mrode 2014, *Linear Models for the Prediction of Animal
Breeding Values*, 3rd edn, p. 25; Quaas 1976, *Biometrics* 32:949–953). Because the φ_i are
independent, ``U = T Φ`` with ``T = (I − P)⁻¹`` and therefore

    cov(u_i, u_j) = a_ij G,   i.e.   U ~ MatrixNormal(0, A, G),

where A is the additive relationship matrix including inbreeding (A = T D T', D = diag(b);
Mrode 2014, p. 25). Stacking trait-major, ``vec(U) = U.ravel(order="F")`` has covariance
``G ⊗ A`` (``numpy.kron(G, A)``); animal-major, ``U.ravel()`` has covariance ``A ⊗ G``.

The recursion is the pedigree's one pass down (:func:`ped2g.pedigree.recursion.down`), in place
on the Mendelian deviations. Memory is that of the result, ``S · n · t · 8`` bytes (twice that
when the Mendelian deviations are returned); call it on chunks of draws to bound it.

Assumptions: an infinitesimal additive model (many loci of small effect, no dominance or
epistasis), a base population of unrelated, non-inbred founders whose breeding values have
covariance G, and no selection. Inbreeding enters only through the Mendelian coefficients b_i,
so the pedigree's inbreeding coefficients must be correct.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from ..errors import UserError
from ..pedigree.core import Pedigree
from ..pedigree.recursion import down

__all__ = ["covariance_factor", "simulate_breeding_values"]

#: Relative tolerance of the positive-definiteness test (docs/methods.md §0.3: smallest eigenvalue must
#: exceed ``tol`` times the largest for Cholesky to be used).
PD_TOL = 1e-10
#: Relative tolerance for a negative eigenvalue that is still treated as rounding error.
NEGATIVE_TOL = 1e-8


def _as_covariance(G: ArrayLike, what: str) -> np.ndarray:
    G = np.asarray(G, dtype=float)
    if G.ndim < 2 or G.shape[-1] != G.shape[-2]:
        raise UserError(f"{what} must be a square matrix (or a stack of them), got shape {G.shape}")
    if G.shape[-1] == 0:
        raise UserError(f"{what} has no traits (shape {G.shape}); give at least one trait")
    if not np.all(np.isfinite(G)):
        raise UserError(f"{what} contains NaN or infinite values; give finite covariances")
    asym = np.max(np.abs(G - np.swapaxes(G, -1, -2)), initial=0.0)
    scale = np.max(np.abs(G), initial=0.0)
    if asym > 1e-8 * max(scale, 1e-300):
        raise UserError(f"{what} is not symmetric (largest |G - G'| = {asym:.3g}); "
                        "give a symmetric covariance matrix")
    return 0.5 * (G + np.swapaxes(G, -1, -2))


def covariance_factor(G: ArrayLike) -> np.ndarray:
    """A square root ``L`` of a covariance matrix, ``L @ L.T == G``, broadcast over leading axes.

    Parameters
    ----------
    G : array_like, shape (..., t, t)
        Symmetric positive semi-definite covariance matrices (symmetrised first).

    Returns
    -------
    numpy.ndarray, shape (..., t, t)
        For each positive-definite matrix (smallest eigenvalue > ``1e-10`` × the largest) the
        lower-triangular Cholesky factor; for a positive semi-definite, singular matrix the
        symmetric eigen square root ``V diag(sqrt(max(λ, 0))) V'`` (docs/methods.md §0.3).

    Raises
    ------
    UserError
        If G is not square, not finite, not symmetric, or has an eigenvalue below
        ``-1e-8`` × its largest (not a covariance matrix).
    """
    G = _as_covariance(G, "covariance matrix G")
    lam, vec = np.linalg.eigh(G)
    top = np.maximum(lam[..., -1], 0.0)
    if np.any(lam[..., 0] < -NEGATIVE_TOL * np.maximum(top, 1e-300)):
        worst = float(np.min(lam[..., 0] / np.where(top > 0, top, 1.0)))
        raise UserError(
            "covariance matrix G is not positive semi-definite (smallest eigenvalue is "
            f"{worst:.3g} times the largest); give a valid covariance matrix"
        )
    pd = lam[..., 0] > PD_TOL * top
    L = np.empty_like(G)
    if np.all(pd):
        return np.linalg.cholesky(G)
    flat_G = G.reshape(-1, *G.shape[-2:])
    flat_L = L.reshape(-1, *G.shape[-2:])
    flat_pd = pd.reshape(-1)
    if np.any(flat_pd):
        flat_L[flat_pd] = np.linalg.cholesky(flat_G[flat_pd])
    sing = ~flat_pd
    lam_s = np.clip(lam.reshape(-1, G.shape[-1])[sing], 0.0, None)
    vec_s = vec.reshape(-1, *G.shape[-2:])[sing]
    flat_L[sing] = np.einsum("sij,sj,skj->sik", vec_s, np.sqrt(lam_s), vec_s)
    return L


def simulate_breeding_values(
    ped: Pedigree,
    G: ArrayLike,
    rng: np.random.Generator,
    n_draws: int | None = None,
    return_mendelian: bool = False,
) -> np.ndarray | tuple[np.ndarray, np.ndarray]:
    """Simulate breeding values down a pedigree for ``S`` independent draws.

    ``u_i = ½(u_sire + u_dam) + φ_i`` with ``φ_i ~ N(0, b_i G)`` (unknown parent → 0), so that
    ``cov(u_i, u_j) = a_ij G`` (Mrode 2014, p. 25). Trait-major stacking of one draw,
    ``U[s].ravel(order="F")``, has covariance ``numpy.kron(G, A)``.

    Parameters
    ----------
    ped : Pedigree
        A clean pedigree (parents before offspring) with its inbreeding coefficients.
    G : array_like, shape (t, t) or (S, t, t)
        The additive genetic covariance matrix, one for all draws or one per draw.
    rng : numpy.random.Generator
        The random stream (see :func:`ped2g.rng.generator`).
    n_draws : int, optional
        Number of draws S. With a single G it defaults to 1; with a stack of G it must be
        omitted or equal ``len(G)``.
    return_mendelian : bool
        Also return the Mendelian-sampling deviations φ.

    Returns
    -------
    U : numpy.ndarray, shape (S, n, t)
        Breeding values, animals in pedigree order.
    phi : numpy.ndarray, shape (S, n, t)
        The Mendelian-sampling deviations (only when ``return_mendelian``); ``φ_i / sqrt(b_i)``
        are independent N(0, G) vectors.

    Notes
    -----
    The random numbers are drawn as one ``rng.standard_normal((S, n, t))`` block, so the same
    generator state gives the same values whatever G is; for ``G' = c G`` the result is exactly
    ``sqrt(c)`` times the result for G. Cost: one matrix product and one pass down the pedigree.
    """
    G = _as_covariance(G, "covariance matrix G")
    if G.ndim == 2:
        S = 1 if n_draws is None else int(n_draws)
    elif G.ndim == 3:
        S = G.shape[0]
        if n_draws is not None and int(n_draws) != S:
            raise UserError(f"n_draws = {n_draws} but G holds {S} draws; omit n_draws or make them agree")
    else:
        raise UserError(f"G must have shape (t, t) or (draws, t, t), got {G.shape}")
    if S < 1:
        raise UserError(f"n_draws must be at least 1, got {S}")
    L = covariance_factor(G)
    t = G.shape[-1]
    n = ped.n
    b = np.asarray(ped.mendelian, dtype=float)
    if np.any(b <= 0) or np.any(b > 1):
        raise UserError("pedigree has Mendelian-sampling coefficients outside (0, 1]; "
                        "check its inbreeding coefficients (each F must be in [0, 1))")
    z = rng.standard_normal((S, n, t))
    # φ = sqrt(b) · z L'  (each row z_i ~ N(0, I) becomes L z_i ~ N(0, G)).
    phi = np.matmul(z, np.swapaxes(L, -1, -2), out=z)
    phi *= np.sqrt(b)[None, :, None]
    gen = np.asarray(ped.generation)
    for parent in (np.asarray(ped.sire, dtype=np.int64), np.asarray(ped.dam, dtype=np.int64)):
        known = np.flatnonzero(parent >= 0)
        late = known[gen[parent[known]] >= gen[known]]
        if late.size:
            raise UserError(
                f"pedigree generation numbers are inconsistent: animal {ped.ids[late[0]]} is not in "
                "a later generation than its parent; rebuild the pedigree with 'ped2g pedigree'")
    U = down(ped, phi, in_place=not return_mendelian)
    if return_mendelian:
        return U, phi
    return U
