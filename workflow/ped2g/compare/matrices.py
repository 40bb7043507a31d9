"""Shared matrix helpers for the comparison methods, vectorised over leading axes.

Every function takes arrays whose last two axes are a t x t matrix and broadcasts over the rest
(draws first, then populations), as ``numpy.linalg`` does.
"""

from __future__ import annotations

import numpy as np

#: Relative tolerance of the positive-definiteness test: ``lambda_min > PD_TOL * lambda_max``.
PD_TOL = 1e-10


def symmetrise(G: np.ndarray) -> np.ndarray:
    """Return ``(G + G') / 2`` over the last two axes."""
    G = np.asarray(G, dtype=float)
    return 0.5 * (G + np.swapaxes(G, -1, -2))


def eigh_descending(G: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues (largest first) and matching eigenvectors (columns) of symmetric matrices.

    Returns
    -------
    values : numpy.ndarray, shape (..., t)
    vectors : numpy.ndarray, shape (..., t, t)
        ``vectors[..., :, k]`` belongs to ``values[..., k]``. Signs are arbitrary.
    """
    w, v = np.linalg.eigh(G)
    return w[..., ::-1], v[..., :, ::-1]


def positive_definite(G: np.ndarray, tol: float = PD_TOL) -> np.ndarray:
    """Boolean mask of the matrices that are positive definite.

    A symmetric matrix counts as positive definite when its smallest eigenvalue exceeds
    ``tol`` times its largest (and the largest is positive); non-finite matrices never do.
    """
    G = np.asarray(G, dtype=float)
    finite = np.isfinite(G).all(axis=(-1, -2))
    safe = np.where(finite[..., None, None], G, 0.0)
    w = np.linalg.eigvalsh(symmetrise(safe))
    return finite & (w[..., -1] > 0) & (w[..., 0] > tol * w[..., -1])


def align_signs(vectors: np.ndarray, reference: np.ndarray) -> np.ndarray:
    """Flip vectors (last axis) so that their dot product with ``reference`` is not negative."""
    dot = np.einsum("...i,...i->...", vectors, reference)
    sign = np.where(dot < 0, -1.0, 1.0)
    return vectors * sign[..., None]


def chunk_size(n_draws: int, bytes_per_draw: float, budget_bytes: float) -> int:
    """How many draws to process at once so that an intermediate stays within ``budget_bytes``."""
    return int(max(1, min(n_draws, budget_bytes // max(bytes_per_draw, 1.0))))
