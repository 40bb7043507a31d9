"""Krzanowski's common subspace of several G matrices.

For population i let ``A_i`` (t x k) hold the leading k eigenvectors of ``G_i`` as orthonormal
columns. Krzanowski (1979) forms

.. math:: H = \\sum_{i=1}^{m} A_i A_i', \\qquad H h_j = \\lambda_j h_j,\\quad m \\ge \\lambda_1 \\ge \\dots \\ge \\lambda_t \\ge 0

``tr H = m k``. The angle between a unit vector h and population i's subspace has
``cos delta_i(h) = |A_i' h|``, and ``sum_i cos^2 delta_i(h_j) = lambda_j``: ``lambda_j = m`` means
``h_j`` lies in every population's subspace. For two populations with ``2k <= t`` the non-zero
eigenvalues of H are ``1 +- cos theta_p`` for the principal angles ``theta_p`` between the two
subspaces (Bjorck & Golub 1973).

Posterior use (after Aguirre et al. 2014): the eigenvalues of H on every draw, observed and null;
and, for fixed reference axes ``h_j`` (the eigenvectors of H built from the posterior-mean G
matrices), the angle between every population's subspace and each ``h_j`` on every draw.

Cautions: if ``k_i + k_j > t`` two subspaces must share at least ``k_i + k_j - t`` dimensions, which
forces eigenvalues of H towards m whatever the biology; keep ``k <= t/2``. If the k-th and
(k+1)-th eigenvalues of a G are close its k-subspace is ill-determined; the relative eigen-gap
``(lambda_k - lambda_{k+1}) / lambda_1`` is reported for every draw.
"""

from __future__ import annotations

import numpy as np

from ..errors import UserError
from .matrices import eigh_descending


def default_dims(t: int) -> int:
    """Half the number of traits, rounded down, at least 1."""
    return max(1, t // 2)


def check_dims(k: int | None, t: int) -> tuple[int, str | None]:
    """Resolve the subspace dimension and say when it is too large to be informative.

    Returns
    -------
    k : int
    warning : str or None
        A message when ``2k > t`` (two subspaces must then overlap).

    Raises
    ------
    UserError
        When ``k`` is not below the number of traits (every subspace would be the whole space).
    """
    k = default_dims(t) if k is None else int(k)
    if not 1 <= k < t:
        raise UserError(f"key 'compare.subspace_dims': {k} must be at least 1 and smaller than the "
                        f"number of traits ({t}); leave it null for half the traits ({default_dims(t)})")
    warning = None
    if 2 * k > t:
        warning = (f"compare.subspace_dims = {k} with {t} traits: any two {k}-dimensional subspaces "
                   f"share at least {2 * k - t} dimension(s), which pushes eigenvalues of H towards "
                   f"the number of populations whatever the biology; use at most {t // 2}")
    return k, warning


def leading_subspaces(G: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Leading k eigenvectors of every G and the relative eigen-gap after the k-th eigenvalue.

    Returns
    -------
    A : numpy.ndarray, shape (..., t, k)
    gap : numpy.ndarray, shape (...)
        ``(lambda_k - lambda_{k+1}) / lambda_1``.
    """
    w, v = eigh_descending(G)
    return v[..., :, :k], (w[..., k - 1] - w[..., k]) / w[..., 0]


def projection_sum(A: np.ndarray) -> np.ndarray:
    """``H = sum_i A_i A_i'`` over the population axis (second to last of the leading axes).

    ``A`` has shape (S, m, t, k); returns shape (S, t, t). Independent of eigenvector signs.
    """
    return np.einsum("smik,smjk->sij", A, A)


def common_subspace(G: np.ndarray, k: int) -> dict[str, np.ndarray]:
    """Krzanowski's H for every draw.

    Parameters
    ----------
    G
        Shape (S, m, t, t), symmetric.
    k
        Leading eigenvectors per population.

    Returns
    -------
    dict
        ``A`` (S, m, t, k), ``H`` (S, t, t), ``eigenvalues`` (S, t) largest first,
        ``eigengap`` (S, m).
    """
    A, gap = leading_subspaces(np.asarray(G, dtype=float), k)
    H = projection_sum(A)
    return {"A": A, "H": H, "eigenvalues": np.linalg.eigvalsh(H)[..., ::-1], "eigengap": gap}


def reference_axes(G_ref: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues and eigenvectors (columns, largest first) of H built from one set of G's.

    ``G_ref`` has shape (m, t, t), e.g. the posterior-mean G of every population. Each eigenvector
    is signed so that its largest-magnitude element is positive.
    """
    A, _ = leading_subspaces(np.asarray(G_ref, dtype=float), k)
    w, h = eigh_descending(np.einsum("mik,mjk->ij", A, A))
    pivot = h[np.argmax(np.abs(h), axis=0), np.arange(h.shape[1])]
    return w, h * np.where(pivot < 0, -1.0, 1.0)


def angles_to_axes(A: np.ndarray, axes: np.ndarray) -> np.ndarray:
    """Angle (degrees) between each population's subspace and each fixed unit axis.

    ``cos delta_i(h_j) = |A_i' h_j|``. ``A`` has shape (S, m, t, k), ``axes`` (t, n) with unit
    columns; returns shape (S, m, n).
    """
    cos = np.linalg.norm(np.einsum("smik,ij->smkj", A, axes), axis=2)
    return np.degrees(np.arccos(np.clip(cos, 0.0, 1.0)))
