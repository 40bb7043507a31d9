"""Missing trait values on the sparse engine's canonical route: a Gibbs step between NUTS steps
(docs/methods.md §2.14).

The canonical route splits a t-trait animal model into t one-trait models, which needs every cell
of every record observed. With missing cells the sparse engine can either drop them exactly (each
record then enters with the inverse of R restricted to its observed traits, on the general route:
one factorisation of the whole t n-unknown system per gradient) or keep the canonical route on
*completed* records ``Y_c`` and draw the missing cells between NUTS transitions, as the marginal
engine's missing-value step does (:mod:`ped2g.fit.augment`). One iteration, theta = (G, R, beta):

    1. draw the breeding values from p(u | theta, Y_c) = N(C^-1 r, C^-1), one canonical trait at a
       time (:func:`ped2g.fit.sparse_mme.effects`: a factorisation, a solve and a triangular
       solve with noise per trait, no selected inverse);
    2. draw each missing cell from p(Y_M | u, theta, Y_O): records are independent given u, so
       each residual's missing part given its observed part is a conditional normal
       (:func:`ped2g.fit.augment.draw_missing_cells`);
    3. one NUTS transition for theta with p(theta | Y_c) by the canonical route (breeding values
       integrated out).

Steps 1-2 draw Y_M from p(Y_M | theta, Y_O) and step 3 leaves p(theta | Y_O, Y_M) invariant: the
partially collapsed Gibbs sampler of :mod:`ped2g.fit.augment` with the records in their own basis
instead of the eigenbasis. The missing information slows mixing somewhat (little with 10% of cells
missing); in exchange each gradient costs t one-trait factorisations instead of one of t n
unknowns (8.6 times faster at 100,000 animals and 4 traits, benchmarks/README.md).
"""

from __future__ import annotations

import numpy as np

from . import augment, sparse_mme
from .data import FitData


class SparseMissingDraw:
    """The numerical core of the Gibbs step (no PyMC), with the interface of
    :class:`ped2g.fit.augment.MissingValueDraw`: draws Y_M and returns the completed records.

    Parameters
    ----------
    data : FitData
    design : the canonical design of ``data``'s records with every cell observed
        (:func:`complete_design`).
    """

    def __init__(self, data: FitData, design: sparse_mme.Design):
        if not design.canonical:
            raise ValueError("the missing-value step of the sparse engine needs the canonical design")
        miss = data.missing
        self.design = design
        self.t = data.n_traits
        self.n_animals = data.pedigree.n
        self.rows = np.flatnonzero(miss.any(axis=1))
        self.y0 = np.where(miss, 0.0, data.y)
        self.y_rows = self.y0[self.rows]
        self.X = np.asarray(data.X, dtype=float)
        self.X_rows = self.X[self.rows]
        self.animal_rows = np.asarray(data.record_animal)[self.rows]
        self.mask_rows = miss[self.rows]
        self.patterns = augment._patterns(miss, self.rows)
        # The order of the flat vector of missing cells: trait by trait, record order within a
        # trait (as in the marginal engine, so the posterior's ``missing`` reads the same).
        self.flat_index = [np.flatnonzero(self.mask_rows[:, j]) for j in range(self.t)]

    def flatten(self, Y_rows: np.ndarray) -> np.ndarray:
        return np.concatenate([Y_rows[idx, j] for j, idx in enumerate(self.flat_index)])

    def initial(self) -> tuple[np.ndarray, np.ndarray]:
        """Missing cells at 0 (the trait means on the standardised scale) and the completed records."""
        return np.zeros(int(self.mask_rows.sum())), self.y0.copy()

    def completed(self, missing: np.ndarray) -> np.ndarray:
        """The records with the flat vector ``missing`` put into their missing cells."""
        y = self.y0.copy()
        start = 0
        for j, idx in enumerate(self.flat_index):
            y[self.rows[idx], j] = missing[start:start + len(idx)]
            start += len(idx)
        return y

    def draw(self, y_completed: np.ndarray, G: np.ndarray, R: np.ndarray, beta: np.ndarray,
             extras: list[np.ndarray], rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
        """One draw of Y_M given theta and the current completed records; returns (missing cells as
        a flat vector, new completed records). ``extras`` must be empty (the canonical route has no
        extra random effect). Where G or R is not positive definite to working precision the
        records are returned unchanged."""
        if extras:
            raise ValueError("the canonical route has no extra random effects")
        resid = np.asarray(y_completed, dtype=float) - self.X @ beta
        noise = rng.standard_normal((1, self.design.n_unknowns))
        blocks, ok = sparse_mme.effects(self.design, resid[None], np.asarray(G)[None], np.asarray(R)[None],
                                        None, noise)
        if not ok[0]:
            current = np.asarray(y_completed)[self.rows]
            return self.flatten(current), np.array(y_completed, dtype=float)
        u = blocks[0, : self.n_animals]
        mean = self.X_rows @ beta + u[self.animal_rows]
        filled = augment.draw_missing_cells(self.y_rows, mean, R, self.patterns, rng)
        new = np.array(self.y0)
        new[self.rows] = np.where(self.mask_rows, filled, self.y_rows)
        return self.flatten(filled), new


def complete_design(data: FitData) -> sparse_mme.Design:
    """The sparse design of ``data``'s records as if every cell were observed (canonical for t > 1
    with no extra random effect)."""
    return sparse_mme.build_design(data.pedigree, data.record_animal,
                                   np.ones((data.n_records, data.n_traits), dtype=bool),
                                   [(eff.level, eff.n_levels) for eff in data.random])
