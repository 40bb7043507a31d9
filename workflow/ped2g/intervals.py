"""Credible intervals of posterior draws, vectorised over any leading axes.

* HPD: the shortest single interval holding ceil(mass * S) of the S sorted draws (Chen & Shao
  1999); on ties the lowest such interval.
* Equal-tailed: the (1 - mass)/2 and (1 + mass)/2 quantiles.
"""

from __future__ import annotations

import numpy as np


def hpd(draws: np.ndarray, mass: float = 0.95, axis: int = -1) -> tuple[np.ndarray, np.ndarray]:
    """Highest posterior density interval along ``axis``.

    Parameters
    ----------
    draws
        Posterior draws; NaNs are not allowed (drop them first).
    mass
        Probability mass of the interval, in (0, 1).

    Returns
    -------
    (lower, upper)
        Arrays of the shape of ``draws`` without ``axis``.
    """
    if not 0.0 < mass < 1.0:
        raise ValueError(f"interval mass must be in (0, 1), got {mass}")
    x = np.sort(np.moveaxis(np.asarray(draws, dtype=float), axis, -1), axis=-1)
    s = x.shape[-1]
    if s == 0:
        raise ValueError("no draws")
    k = min(int(np.ceil(mass * s)), s)
    widths = x[..., k - 1:] - x[..., : s - k + 1]
    start = np.argmin(widths, axis=-1)[..., None]
    lower = np.take_along_axis(x, start, axis=-1)[..., 0]
    upper = np.take_along_axis(x, start + k - 1, axis=-1)[..., 0]
    return lower, upper


def equal_tailed(draws: np.ndarray, mass: float = 0.95, axis: int = -1) -> tuple[np.ndarray, np.ndarray]:
    """Equal-tailed interval: the (1-mass)/2 and (1+mass)/2 quantiles along ``axis``."""
    if not 0.0 < mass < 1.0:
        raise ValueError(f"interval mass must be in (0, 1), got {mass}")
    q = np.quantile(np.asarray(draws, dtype=float), [(1 - mass) / 2, (1 + mass) / 2], axis=axis)
    return q[0], q[1]
