"""Random skewers: how similarly two G matrices respond to the same selection gradients.

For unit selection gradients (skewers) ``beta_k`` the response of population i is
``dz_ik = G_i beta_k`` (Lande's equation). For populations i and j (Cheverud 1996; Cheverud &
Marroig 2007)::

    r_ij,k     = dz_ik . dz_jk / (|dz_ik| |dz_jk|)            vector correlation
    theta_ij,k = arccos r_ij,k                                 angle (degrees here)
    rbar_ij    = (1/N) sum_k r_ij,k                            the random-skewers similarity
    ratio_ij   = exp((1/N) sum_k log(|dz_ik| / |dz_jk|))       geometric-mean magnitude ratio

Skewers are drawn uniformly on the unit sphere as ``z / |z|`` with ``z ~ N(0, I_t)``. (Cheverud &
Marroig normalised uniform-(-1, 1) elements, which is not uniform on the sphere; we use the
Gaussian construction.) One fixed set serves every draw, observed and null, so the spread of
``rbar`` across draws reflects uncertainty in G only.

A skewer whose response is (numerically) zero, ``|dz| < 1e-12 lambda_max(G)``, has no direction;
it is left out of that draw's averages and counted.

Random-direction reference (two independent uniform unit vectors in R^t): ``r^2 ~ Beta(1/2,
(t-1)/2)``, density proportional to ``(1 - r^2)^((t-3)/2)``, ``E r = 0``, ``Var r = 1/t``, ``E|r| =
Gamma(t/2) / (sqrt(pi) Gamma((t+1)/2))``; for t = 3 r is uniform on (-1, 1). This reference only
says whether responses are more aligned than random directions; almost any two biological G
matrices pass it. Whether the G matrices *differ* is judged against the randomisation null.
"""

from __future__ import annotations

import numpy as np
from scipy import special, stats

from .matrices import chunk_size

#: Relative size below which a response counts as zero.
ZERO_RESPONSE_TOL = 1e-12


def unit_skewers(n: int, t: int, rng: np.random.Generator) -> np.ndarray:
    """``n`` unit vectors uniform on the sphere in R^t, shape (n, t): ``z / |z|``, ``z ~ N(0, I)``."""
    if n < 1 or t < 1:
        raise ValueError(f"need n >= 1 skewers and t >= 1 traits, got n={n}, t={t}")
    z = rng.standard_normal((n, t))
    return z / np.linalg.norm(z, axis=1, keepdims=True)


def _chunk(G: np.ndarray, B: np.ndarray) -> dict[str, np.ndarray]:
    s, m = G.shape[:2]
    Z = B @ np.swapaxes(G, -1, -2)                                # responses (s, m, N, t)
    norm = np.sqrt(np.einsum("smnt,smnt->smn", Z, Z))             # (s, m, N)
    lam_max = np.abs(np.linalg.eigvalsh(G)).max(axis=-1)          # (s, m)
    valid = norm > ZERO_RESPONSE_TOL * lam_max[..., None]
    safe = np.where(valid, norm, 1.0)
    Z *= np.where(valid, 1.0 / safe, 0.0)[..., None]              # unit responses (0 if dropped)
    Zn = Z
    logn = np.log(safe)
    rbar = np.ones((s, m, m))
    angle = np.zeros((s, m, m))
    log_ratio = np.zeros((s, m, m))
    with np.errstate(invalid="ignore", divide="ignore"):
        for i in range(m):                                        # pairs, not draws
            for j in range(i + 1, m):
                both = valid[:, i] & valid[:, j]                  # (s, N)
                count = both.sum(-1)
                r = np.einsum("snt,snt->sn", Zn[:, i], Zn[:, j])
                rbar[:, i, j] = rbar[:, j, i] = np.where(both, r, 0.0).sum(-1) / count
                theta = np.degrees(np.arccos(np.clip(r, -1.0, 1.0)))
                angle[:, i, j] = angle[:, j, i] = np.where(both, theta, 0.0).sum(-1) / count
                lr = np.where(both, logn[:, i] - logn[:, j], 0.0).sum(-1) / count
                log_ratio[:, i, j], log_ratio[:, j, i] = lr, -lr
        magnitude = np.where(valid, norm, 0.0).sum(-1) / valid.sum(-1)
    return {"correlation": rbar, "angle": angle, "magnitude_ratio": np.exp(log_ratio),
            "response_magnitude": magnitude, "dropped": (~valid).sum(-1)}


def skewer_statistics(G: np.ndarray, B: np.ndarray,
                      budget_bytes: float = 256e6) -> dict[str, np.ndarray]:
    """Random-skewers statistics of every pair of populations on every draw.

    Parameters
    ----------
    G
        Shape (S, m, t, t), symmetric.
    B
        Unit skewers, shape (N, t).
    budget_bytes
        Rough memory limit for intermediates; the draw axis is processed in chunks to keep it.

    Returns
    -------
    dict of numpy.ndarray
        ``correlation`` (S, m, m): mean vector correlation ``rbar_ij``;
        ``angle`` (S, m, m): mean angle between responses, degrees;
        ``magnitude_ratio`` (S, m, m): geometric mean of ``|dz_i| / |dz_j|``;
        ``response_magnitude`` (S, m): mean ``|dz_i|``;
        ``dropped`` (S, m): skewers left out for a zero response.
    """
    G = np.asarray(G, dtype=float)
    B = np.asarray(B, dtype=float)
    S, m, t, _ = G.shape
    per_draw = 8.0 * (4 * m * B.shape[0] * t + 8 * B.shape[0])
    step = chunk_size(S, per_draw, budget_bytes)
    parts = [_chunk(G[a:a + step], B) for a in range(0, S, step)]
    return {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}


def random_correlation_cdf(r: np.ndarray, t: int) -> np.ndarray:
    """CDF of the correlation of two independent uniform unit vectors in R^t.

    ``F(r) = 1/2 + sign(r)/2 * I_{r^2}(1/2, (t-1)/2)`` with ``I`` the regularised incomplete beta
    function, because ``r`` is symmetric and ``r^2 ~ Beta(1/2, (t-1)/2)``.
    """
    r = np.asarray(r, dtype=float)
    if t < 2:
        raise ValueError("random-direction correlations need at least 2 traits")
    return 0.5 + 0.5 * np.sign(r) * special.betainc(0.5, 0.5 * (t - 1), np.clip(r * r, 0.0, 1.0))


def random_reference(t: int, n_skewers: int, mass: float = 0.95) -> dict[str, float]:
    """Reference values of random directions for the skewer statistics in R^t.

    Returns
    -------
    dict
        ``mean_abs_correlation``: ``E|r| = Gamma(t/2) / (sqrt(pi) Gamma((t+1)/2))``;
        ``correlation_upper``: one-sided upper ``mass`` point of a single random correlation,
        ``sqrt(Beta.ppf(2 mass - 1; 1/2, (t-1)/2))``;
        ``mean_correlation_upper``: the same for the mean over ``n_skewers`` independent skewers,
        by the normal approximation ``z_mass / sqrt(N t)`` (the mean has variance ``1/(N t)``);
        ``mean_angle``: 90 degrees.
    """
    if t < 2:
        raise ValueError("random-direction references need at least 2 traits")
    mean_abs = float(np.exp(special.gammaln(t / 2) - special.gammaln((t + 1) / 2)) / np.sqrt(np.pi))
    upper = float(np.sqrt(stats.beta.ppf(2 * mass - 1, 0.5, 0.5 * (t - 1))))
    mean_upper = float(stats.norm.ppf(mass) / np.sqrt(n_skewers * t))
    return {"mean_abs_correlation": mean_abs, "correlation_upper": upper,
            "mean_correlation_upper": mean_upper, "mean_angle": 90.0}
