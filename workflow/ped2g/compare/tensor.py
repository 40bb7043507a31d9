"""The fourth-order genetic covariance tensor of several G matrices.

Each symmetric t x t matrix maps to a vector of its ``q = t(t+1)/2`` distinct elements with
``sqrt(2)`` on the off-diagonal ones (diagonal first, then the upper triangle row by row)::

    v(G) = (G_11, ..., G_tt, sqrt2 G_12, sqrt2 G_13, ..., sqrt2 G_(t-1)t)

so that ``v(A) . v(B) = tr(AB)``. The covariance tensor ``Sigma_ijkl = cov(G_ij, G_kl)`` across the
m populations is held as the q x q matrix (Basser & Pajevic 2007; Hine et al. 2009)

.. math:: S = \\frac{1}{m-1} \\sum_i (v_i - \\bar v)(v_i - \\bar v)'

whose blocks carry the factors 1 (variance-variance), sqrt(2) (variance-covariance) and 2
(covariance-covariance). Its eigenvectors ``s_k`` map back to symmetric *eigentensors* ``E_k``
(off-diagonal entries divided by sqrt(2)), orthonormal under ``<A, B> = tr(AB)``; ``lambda_k`` is
the among-population variance along ``E_k``; at most ``min(m - 1, q)`` eigenvalues are non-zero.
Population i's coordinate is ``c_ik = <G_i, E_k>`` (uncentred). The eigenvector ``e_kj`` of
``E_k`` with the largest ``|epsilon_kj|`` is the trait combination whose genetic variance differs
most along that eigentensor; ``e_kj' G_i e_kj`` is reported for every population.

Posterior use (after Aguirre et al. 2014): eigentensors drawn per posterior sample cannot be
matched across samples, so they are fixed from the posterior-mean S; every draw, observed and
null, is then projected on them: ``alpha_k = s_k' S^(s) s_k``. Only the leading
``min(m - 1, q)`` eigentensors are kept (one draw's S has no more non-zero eigenvalues).

Cautions: traits on very different scales dominate S, so compare standardised G matrices; the
null's alpha depends on the null's overall scale (see the null's estimator); repeated eigenvalues
make single eigentensors arbitrary within their eigenspace.
"""

from __future__ import annotations

import numpy as np

from .matrices import eigh_descending


def n_elements(t: int) -> int:
    """``q = t(t+1)/2``."""
    return t * (t + 1) // 2


def element_pairs(t: int) -> list[tuple[int, int]]:
    """The (i, j) trait pair of every element of :func:`to_vector`, in order."""
    iu = np.triu_indices(t, 1)
    return [(i, i) for i in range(t)] + list(zip(iu[0].tolist(), iu[1].tolist()))


def to_vector(G: np.ndarray) -> np.ndarray:
    """``v(G)``: diagonal, then ``sqrt(2)`` times the upper triangle; shape (..., q)."""
    G = np.asarray(G, dtype=float)
    t = G.shape[-1]
    iu = np.triu_indices(t, 1)
    return np.concatenate([np.diagonal(G, axis1=-2, axis2=-1), np.sqrt(2.0) * G[..., iu[0], iu[1]]], -1)


def from_vector(v: np.ndarray, t: int) -> np.ndarray:
    """Inverse of :func:`to_vector`: symmetric matrices of shape (..., t, t)."""
    v = np.asarray(v, dtype=float)
    out = np.zeros(v.shape[:-1] + (t, t))
    idx = np.arange(t)
    out[..., idx, idx] = v[..., :t]
    iu = np.triu_indices(t, 1)
    off = v[..., t:] / np.sqrt(2.0)
    out[..., iu[0], iu[1]] = off
    out[..., iu[1], iu[0]] = off
    return out


def covariance_tensor(G: np.ndarray) -> np.ndarray:
    """The q x q matrix S of every draw: G of shape (S, m, t, t) gives shape (S, q, q).

    Divisor ``m - 1`` (the same for observed and null, so comparisons do not depend on it).
    """
    V = to_vector(G)
    Vc = V - V.mean(axis=-2, keepdims=True)
    return np.einsum("smi,smj->sij", Vc, Vc) / (V.shape[-2] - 1)


def eigentensors(S_ref: np.ndarray, t: int, n_keep: int | None = None) -> dict[str, np.ndarray]:
    """Eigen-decomposition of one S into eigentensors and their leading eigenvectors.

    Parameters
    ----------
    S_ref
        Shape (q, q), e.g. the posterior mean of S.
    t
        Number of traits.
    n_keep
        Keep the leading ``n_keep`` eigentensors (all when None).

    Returns
    -------
    dict
        ``eigenvalues`` (n,), ``vectors`` (q, n) the ``s_k`` as columns, each signed so that its
        largest-magnitude element is positive; ``E`` (n, t, t) eigentensors; ``epsilon`` (n, t)
        eigenvalues of each eigentensor ordered by decreasing magnitude; ``e`` (n, t, t) matching
        eigenvectors, ``e[k, :, j]`` belongs to ``epsilon[k, j]``, signed like ``vectors``.
    """
    w, s = eigh_descending(np.asarray(S_ref, dtype=float))
    n = len(w) if n_keep is None else int(n_keep)
    w, s = w[:n], s[:, :n]
    pivot = s[np.argmax(np.abs(s), axis=0), np.arange(n)]
    s = s * np.where(pivot < 0, -1.0, 1.0)
    E = from_vector(s.T, t)
    eps, e = np.linalg.eigh(E)
    order = np.argsort(-np.abs(eps), axis=-1, kind="stable")
    eps = np.take_along_axis(eps, order, axis=-1)
    e = np.take_along_axis(e, order[:, None, :], axis=-1)
    piv = np.take_along_axis(e, np.argmax(np.abs(e), axis=1)[:, None, :], axis=1)[:, 0, :]
    e = e * np.where(piv < 0, -1.0, 1.0)[:, None, :]
    return {"eigenvalues": w, "vectors": s, "E": E, "epsilon": eps, "e": e}


def project(S_draws: np.ndarray, vectors: np.ndarray) -> np.ndarray:
    """Variance along fixed eigentensors: ``alpha_k = s_k' S^(s) s_k``, shape (S, n)."""
    return np.einsum("ik,sij,jk->sk", vectors, S_draws, vectors)


def coordinates(G: np.ndarray, E: np.ndarray) -> np.ndarray:
    """Uncentred coordinates ``c_ik = <G_i, E_k> = tr(G_i E_k)``: (S, m, t, t), (n, t, t) -> (S, m, n)."""
    return np.einsum("smij,kij->smk", G, E)


def variance_along(G: np.ndarray, e: np.ndarray) -> np.ndarray:
    """Genetic variance ``e_kj' G_i e_kj`` along eigentensor eigenvectors: -> (S, m, n, t)."""
    return np.einsum("akn,smab,bkn->smkn", e.transpose(1, 0, 2), G, e.transpose(1, 0, 2))
