"""Riemannian (Foerstner) distance between covariance matrices.

.. math:: d(A, B) = \\sqrt{\\sum_i \\ln^2 \\lambda_i(A^{-1} B)}

(Foerstner & Moonen 2003; Mitteroecker & Bookstein 2009). With ``A = L L'`` (Cholesky) the
eigenvalues of ``A^-1 B`` are those of the symmetric ``L^-1 B L^-T``. The distance is symmetric,
satisfies the triangle inequality, and is invariant under ``A, B -> X A X', X B X'`` for any
invertible X - so it does not depend on the units of the traits, and variance- and mean-scaling
change it only through differences in the scaling factors between populations. It needs
positive-definite matrices; the caller leaves out draws that are not.
"""

from __future__ import annotations

import numpy as np


def riemannian_distance(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """``d(A, B)`` for positive-definite matrices broadcasting over leading axes."""
    L = np.linalg.cholesky(np.asarray(A, dtype=float))
    X = np.linalg.solve(L, np.asarray(B, dtype=float))          # L^-1 B
    M = np.linalg.solve(L, np.swapaxes(X, -1, -2))              # L^-1 B' L^-T = L^-1 B L^-T
    lam = np.linalg.eigvalsh(0.5 * (M + np.swapaxes(M, -1, -2)))
    return np.sqrt((np.log(lam) ** 2).sum(-1))


def pairwise_distances(G: np.ndarray) -> np.ndarray:
    """Distance between every pair of populations on every draw: (S, m, t, t) -> (S, m, m)."""
    G = np.asarray(G, dtype=float)
    return riemannian_distance(G[:, :, None], G[:, None, :])
