"""Lines of greatest genetic variation (g_max) and Schluter's angle to divergence.

``g_max`` is the leading eigenvector of G; ``lambda_1 / tr G`` is the share of genetic variance
along it (Schluter 1996). The divergence among populations is ``d_max``, the leading eigenvector
of the among-population covariance of trait means (``(1/(m-1)) sum_i (mu_i - mu_bar)(mu_i -
mu_bar)'``; for two populations ``d_max`` is the difference of their means). The angle is

.. math:: \\theta = \\arccos(|g_{max} \\cdot d_{max}|) \\in [0^\\circ, 90^\\circ]

(absolute value because eigenvector signs are arbitrary); the angle between the g_max of two
populations is computed the same way. For the divergence angle both vectors are taken in one common
coordinate system, the pooled scale of each draw (:func:`ped2g.compare.scale.pooled_factors`),
so g_max here may differ slightly from the g_max of each population's own standardised G.

Random-direction reference: for a fixed d and a uniform random unit vector in R^t,
``cos^2 theta ~ Beta(1/2, (t-1)/2)``; the mean angle is 45 deg for t = 2 and exactly 1 rad for t = 3.

Cautions: when ``lambda_1`` and ``lambda_2`` are close g_max is unstable across draws; the relative
eigen-gap ``(lambda_1 - lambda_2) / lambda_1`` is reported. The divergence of means mixes genetic
divergence with environmental differences among populations.
"""

from __future__ import annotations

import numpy as np
from scipy import integrate, stats

from .matrices import align_signs, eigh_descending


def leading_axis(G: np.ndarray) -> dict[str, np.ndarray]:
    """g_max, its share of the genetic variance and the relative eigen-gap, for G of shape (..., t, t).

    Returns
    -------
    dict
        ``vector`` (..., t) (sign arbitrary), ``share`` (...) = ``lambda_1 / tr G``,
        ``eigengap`` (...) = ``(lambda_1 - lambda_2) / lambda_1``.
    """
    w, v = eigh_descending(np.asarray(G, dtype=float))
    return {"vector": v[..., :, 0], "share": w[..., 0] / w.sum(-1),
            "eigengap": (w[..., 0] - w[..., 1]) / w[..., 0]}


def divergence_axis(means: np.ndarray) -> np.ndarray:
    """Leading eigenvector of the among-population covariance of means, shape (S, m, t) -> (S, t).

    For two populations this is ``(mu_1 - mu_2) / |mu_1 - mu_2|`` up to sign. Draws whose means are
    identical give NaN.
    """
    means = np.asarray(means, dtype=float)
    c = means - means.mean(axis=1, keepdims=True)
    D = np.einsum("smi,smj->sij", c, c) / (means.shape[1] - 1)
    w, v = eigh_descending(D)
    return np.where((w[..., :1] > 0), v[..., :, 0], np.nan)


def angle(vectors: np.ndarray, direction: np.ndarray) -> np.ndarray:
    """``arccos(|u . d| / (|u| |d|))`` in degrees, broadcasting over leading axes."""
    u = vectors / np.linalg.norm(vectors, axis=-1, keepdims=True)
    d = direction / np.linalg.norm(direction, axis=-1, keepdims=True)
    cos = np.abs(np.einsum("...i,...i->...", u, d))
    return np.degrees(np.arccos(np.clip(cos, 0.0, 1.0)))


def pair_angles(vectors: np.ndarray) -> np.ndarray:
    """Angle (degrees, 0-90) between the g_max of every pair: vectors (S, m, t) -> (S, m, m)."""
    u = vectors / np.linalg.norm(vectors, axis=-1, keepdims=True)
    cos = np.abs(np.einsum("smi,sri->smr", u, u))
    return np.degrees(np.arccos(np.clip(cos, 0.0, 1.0)))


def signed_vectors(vectors: np.ndarray, reference: np.ndarray) -> np.ndarray:
    """g_max vectors flipped to point the way of a reference vector (e.g. the posterior-mean g_max)."""
    return align_signs(vectors, reference)


def random_angle_reference(t: int, mass: float = 0.95) -> dict[str, float]:
    """Angle between a fixed axis and a uniform random unit vector in R^t (degrees).

    Returns
    -------
    dict
        ``mean``: ``E theta = integral_0^1 arccos(c) f(c) dc`` with ``c = |cos theta|`` and
        ``c^2 ~ Beta(1/2, (t-1)/2)`` (numerical quadrature); ``lower``: the angle that a random
        direction undercuts with probability ``1 - mass``,
        ``arccos(sqrt(Beta.ppf(mass; 1/2, (t-1)/2)))``.
    """
    if t < 2:
        raise ValueError("angles need at least 2 traits")
    dist = stats.beta(0.5, 0.5 * (t - 1))
    # E arccos(sqrt(X)) for X ~ Beta; integrate over x to keep the integrand smooth in c.
    mean, _ = integrate.quad(lambda x: np.arccos(np.sqrt(x)) * dist.pdf(x), 0.0, 1.0, limit=200)
    lower = float(np.degrees(np.arccos(np.sqrt(dist.ppf(mass)))))
    return {"mean": float(np.degrees(mean)), "lower": lower}
