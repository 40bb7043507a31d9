"""The scale on which G matrices are compared: original, variance- or mean-standardised.

Standardising trait i by a factor ``f_i`` turns G into

.. math:: G^{*} = \\operatorname{diag}(1/f)\\, G\\, \\operatorname{diag}(1/f),
   \\qquad G^{*}_{ij} = G_{ij} / (f_i f_j)

* ``original``: ``f = 1`` (no change).
* ``variance``: ``f_i = sqrt(P_ii)``, the phenotypic standard deviation of the same posterior
  draw, so the diagonal of the standardised G is the heritability (Houle 1992).
* ``mean``: ``f_i = mu_i``, the trait mean of the same posterior draw, so the diagonal is the
  mean-scaled additive variance ``I_A = V_A / mu^2`` (Houle 1992; Hansen, Pelabon & Houle 2011).
  Meaningful only for ratio-scale traits with positive means; refused otherwise.

Each observed G is standardised with its own population's P or means, draw by draw. A null G
belongs to a dummy population that mixes animals of every population, so it is standardised by
the *pooled* factor of the observed draw it was simulated from: the square root of the average
phenotypic variance across populations (``variance``) or the average mean (``mean``). The same
pooled factor puts all populations' means on one scale for the divergence vector of
:mod:`ped2g.compare.gmax`. Means are treated as known constants of each draw (their uncertainty
enters only through the draws themselves).
"""

from __future__ import annotations

import numpy as np

from ..errors import UserError

SCALES = ("original", "variance", "mean")


def _check_scale(scale: str) -> None:
    if scale not in SCALES:
        raise UserError(f"key 'compare.scale': '{scale}' is not one of {', '.join(SCALES)}")


def scale_factors(P: np.ndarray, mean: np.ndarray, scale: str, populations: list[str] | None = None,
                  traits: list[str] | None = None) -> np.ndarray:
    """Per-draw, per-population standardising factor of every trait.

    Parameters
    ----------
    P
        Phenotypic covariance draws, shape (S, m, t, t), original units.
    mean
        Trait mean draws, shape (S, m, t), original units.
    scale
        One of ``original``, ``variance``, ``mean``.
    populations, traits
        Names used in error messages.

    Returns
    -------
    numpy.ndarray, shape (S, m, t)

    Raises
    ------
    UserError
        For ``mean`` when a trait's mean is not positive in some draw, and for ``variance`` when a
        phenotypic variance is not positive, naming the population and trait.
    """
    _check_scale(scale)
    mean = np.asarray(mean, dtype=float)
    if scale == "original":
        return np.ones_like(mean)
    if scale == "variance":
        values = np.diagonal(np.asarray(P, dtype=float), axis1=-2, axis2=-1)
        what = "phenotypic variance"
        advice = "check the fit"
    else:
        values = mean
        what = "mean"
        advice = ("mean-standardisation needs ratio-scale traits with positive means; "
                  "set compare.scale to 'variance' or 'original'")
    bad = ~(np.isfinite(values) & (values > 0))
    if bad.any():
        _, j, i = np.argwhere(bad)[0]
        pop = populations[j] if populations else f"#{j + 1}"
        trait = traits[i] if traits else f"#{i + 1}"
        n_bad = int(bad[:, j, i].sum())
        raise UserError(f"compare.scale is '{scale}' but trait '{trait}' of population '{pop}' has a "
                        f"{what} that is not positive in {n_bad} of {values.shape[0]} draws; {advice}")
    return np.sqrt(values) if scale == "variance" else values


def pooled_factors(P: np.ndarray, mean: np.ndarray, scale: str) -> np.ndarray:
    """The standardising factor shared by all populations of a draw, shape (S, t).

    ``variance``: ``sqrt(mean_j P_j,ii)``; ``mean``: ``mean_j mu_j,i``; ``original``: 1.
    Call :func:`scale_factors` first so that bad values have already been refused.
    """
    _check_scale(scale)
    mean = np.asarray(mean, dtype=float)
    if scale == "original":
        return np.ones(mean.shape[:1] + mean.shape[2:])
    if scale == "variance":
        return np.sqrt(np.diagonal(np.asarray(P, dtype=float), axis1=-2, axis2=-1).mean(axis=1))
    return mean.mean(axis=1)


def standardise(G: np.ndarray, factors: np.ndarray) -> np.ndarray:
    """``G_ij / (f_i f_j)`` with ``factors`` broadcasting against G's leading axes, shape (..., t)."""
    f = np.asarray(factors, dtype=float)
    return np.asarray(G, dtype=float) / (f[..., :, None] * f[..., None, :])
