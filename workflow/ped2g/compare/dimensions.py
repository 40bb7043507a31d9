"""Effective number of dimensions of G.

* Kirkpatrick (2009): ``n_D = sum_i lambda_i / lambda_1``, between 1 (rank one) and t (isotropic).
* Participation ratio: ``(sum_i lambda_i)^2 / sum_i lambda_i^2``, also between 1 and t.

Both depend on how the traits are scaled; they are computed on the G actually compared (the
configured scale).
"""

from __future__ import annotations

import numpy as np


def effective_dimensions(G: np.ndarray) -> dict[str, np.ndarray]:
    """``n_D`` and the participation ratio of every matrix, G of shape (..., t, t) -> (...)."""
    w = np.linalg.eigvalsh(np.asarray(G, dtype=float))
    total = w.sum(-1)
    return {"kirkpatrick": total / w[..., -1], "participation_ratio": total ** 2 / (w ** 2).sum(-1)}
