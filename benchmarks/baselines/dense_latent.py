"""The latent animal model through a dense Cholesky factor of A (benchmark baseline only).

Same model, priors and record likelihood as :mod:`ped2g.fit.latent`, but the breeding values are
``a = L_A W L_G'`` with ``A = L_A L_A'`` the dense Cholesky factorisation of the relationship
matrix (the textbook non-centred form). Building A costs O(n^2) memory and its factor O(n^3)
time; every gradient costs O(n^2 t). This is what the pedigree recursion of the latent engine
avoids.
"""

from __future__ import annotations

import time

import numpy as np

from ped2g.fit import latent
from ped2g.fit.data import FitData
from ped2g.pedigree.relationships import relationship_matrix


def dense_bytes(n: int) -> int:
    """Memory of one dense n x n float64 matrix."""
    return 8 * n * n


def build_model(data: FitData, model_config: dict) -> tuple[object, float]:
    """The dense-factor latent model, and the seconds spent forming and factorising A."""
    import pymc as pm
    import pytensor.tensor as pt

    lay = latent.generation_layout(data.pedigree)
    start = time.perf_counter()
    A = relationship_matrix(data.pedigree, subset=lay["order"])  # generation order
    chol_A = np.linalg.cholesky(A)
    del A
    setup = time.perf_counter() - start

    def animal_effect(w, chol_G, layout):
        L = pm.Data("chol_A", chol_A)
        return pt.dot(L, pt.dot(w, chol_G.T))

    return latent.build_model(data, model_config, animal_effect=animal_effect), setup
