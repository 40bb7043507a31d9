"""The evolvability family (Hansen & Houle 2008), averaged over random selection gradients.

For a unit selection gradient beta::

    evolvability              e(beta) = beta' G beta
    respondability            r(beta) = |G beta|
    conditional evolvability  c(beta) = 1 / (beta' G^-1 beta)
    autonomy                  a(beta) = c(beta) / e(beta)       in (0, 1]
    integration               i(beta) = 1 - a(beta)

With ``G = V diag(lambda) V'`` and ``y = V' beta`` these are ``e = sum y_i^2 lambda_i``,
``r^2 = sum y_i^2 lambda_i^2`` and ``1/c = sum y_i^2 / lambda_i``, so one projection per skewer
gives all of them. Averages are over beta uniform on the sphere: the mean evolvability is exact,
``e_bar = tr(G) / t``; the others are Monte Carlo means over the fixed skewer set shared by every
draw (observed and null). ``i_bar = 1 - a_bar``.

Conditional evolvability and autonomy need a positive-definite G; draws that are not are left
out (and counted) by the caller rather than handled with a pseudo-inverse. Hansen & Houle
recommend mean-scaled G (compare.scale: mean) for these measures, so that they are comparable
across traits and populations.
"""

from __future__ import annotations

import numpy as np

from .matrices import chunk_size


def _chunk(G: np.ndarray, B: np.ndarray) -> dict[str, np.ndarray]:
    lam, V = np.linalg.eigh(G)                                  # (s, m, t), (s, m, t, t)
    y2 = (B @ V) ** 2                                           # (s, m, N, t): (v_i . beta)^2
    powers = np.stack([lam, lam ** 2, 1.0 / lam], axis=-1)      # (s, m, t, 3)
    sums = y2 @ powers                                          # (s, m, N, 3)
    e = sums[..., 0]
    r = np.sqrt(sums[..., 1])
    with np.errstate(divide="ignore", invalid="ignore"):
        c = 1.0 / sums[..., 2]
        a = c / e
    t = G.shape[-1]
    return {"evolvability": np.trace(G, axis1=-2, axis2=-1) / t,
            "conditional_evolvability": c.mean(-1), "respondability": r.mean(-1),
            "autonomy": a.mean(-1), "integration": 1.0 - a.mean(-1)}


def evolvability_means(G: np.ndarray, B: np.ndarray, budget_bytes: float = 256e6) -> dict[str, np.ndarray]:
    """Mean evolvability measures of every G over the skewers ``B``.

    Parameters
    ----------
    G
        Shape (S, m, t, t), symmetric positive definite.
    B
        Unit selection gradients, shape (N, t).
    budget_bytes
        Rough memory limit; the draw axis is processed in chunks.

    Returns
    -------
    dict of numpy.ndarray, each (S, m)
        ``evolvability`` (exact ``tr G / t``), ``conditional_evolvability``, ``respondability``,
        ``autonomy``, ``integration``.
    """
    G = np.asarray(G, dtype=float)
    B = np.asarray(B, dtype=float)
    S, m, t, _ = G.shape
    step = chunk_size(S, 8.0 * 5 * m * B.shape[0] * t, budget_bytes)
    parts = [_chunk(G[a:a + step], B) for a in range(0, S, step)]
    return {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}
