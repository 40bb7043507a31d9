"""Simulating the breeding values the null is built from, chunk by chunk of posterior draws.

For draw s of population j, breeding values go down j's own pedigree with that draw's G
(docs/methods.md §5.1 step 1, §3): ``u_i = (u_sire + u_dam)/2 + phi_i``, ``phi_i ~ N(0, b_i G_j^(s))``, so
``U_j ~ MatrixNormal(0, A_j, G_j^(s))``. The recursion itself is
:func:`ped2g.simulate.breeding_values.simulate_breeding_values`; this module checks the draws,
picks out the phenotyped animals of every population and pools them in population order.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..pedigree.core import Pedigree
from ..simulate.breeding_values import NEGATIVE_TOL, PD_TOL, simulate_breeding_values


@dataclass
class DrawCheck:
    """Which G draws are positive definite, singular or not covariance matrices.

    Attributes
    ----------
    singular : numpy.ndarray of bool, shape (S, m)
        Positive semi-definite but singular (smallest eigenvalue within round-off of 0).
    invalid : numpy.ndarray of bool, shape (S, m)
        Not a covariance matrix: clearly negative eigenvalue, or NaN / infinite entries.
    """

    singular: np.ndarray
    invalid: np.ndarray


def check_draws(G: np.ndarray) -> DrawCheck:
    """Classify G draws by their eigenvalues (docs/methods.md §0.3: test, record, never repair silently).

    With eigenvalues ``l_min <= ... <= l_max`` of the symmetrised draw: positive definite when
    ``l_min > PD_TOL * l_max``; singular when ``-NEGATIVE_TOL * l_max <= l_min <= PD_TOL * l_max``;
    invalid when ``l_min < -NEGATIVE_TOL * l_max`` or any entry is not finite. The tolerances are
    those of :func:`ped2g.simulate.breeding_values.covariance_factor`, which simulates singular
    draws with the eigen square root (eigenvalues clipped at 0) instead of a Cholesky factor.
    """
    G = np.asarray(G, dtype=float)
    finite = np.all(np.isfinite(G), axis=(-2, -1))
    safe = np.where(finite[..., None, None], G, 0.0)
    ev = np.linalg.eigvalsh(0.5 * (safe + np.swapaxes(safe, -1, -2)))
    lo, hi = ev[..., 0], np.maximum(ev[..., -1], 0.0)
    invalid = ~finite | (lo < -NEGATIVE_TOL * hi)
    singular = ~invalid & (lo <= PD_TOL * hi)
    return DrawCheck(singular=singular, invalid=invalid)


def simulate_pooled(peds: list[Pedigree], members: list[np.ndarray], G: np.ndarray,
                    rngs: list[np.random.Generator], need_u: bool = True,
                    need_phi: bool = True) -> tuple[np.ndarray | None, np.ndarray | None]:
    """Simulate every population's breeding values and pool the phenotyped animals.

    Parameters
    ----------
    peds
        The m pedigrees (each population's own, parents before offspring).
    members
        Per population, the positions in its pedigree of the animals that are pooled
        (the phenotyped ones).
    G
        Shape (S, m, t, t): the draws of every population's G for this chunk (checked with
        :func:`check_draws` beforehand; no invalid draws).
    rngs
        One generator per population, e.g. ``ped2g.rng.generator(seed, "null", population)``;
        consuming them chunk after chunk continues the same streams.
    need_u, need_phi
        Which pooled arrays to return (the other is ``None``) to save memory.

    Returns
    -------
    u, phi : numpy.ndarray, shape (S, N, t), or None
        Breeding values and Mendelian-sampling deviations of the N = sum(n_j) pooled animals,
        population after population, each population's animals in pedigree order.
    """
    S, m, t, _ = G.shape
    N = sum(len(mem) for mem in members)
    u_pool = np.empty((S, N, t)) if need_u else None
    phi_pool = np.empty((S, N, t)) if need_phi else None
    start = 0
    for j in range(m):  # loop over populations (few), never over draws
        U, phi = simulate_breeding_values(peds[j], G[:, j], rngs[j], return_mendelian=True)
        stop = start + len(members[j])
        if u_pool is not None:
            u_pool[:, start:stop] = U[:, members[j]]
        if phi_pool is not None:
            phi_pool[:, start:stop] = phi[:, members[j]]
        del U, phi
        start = stop
    return u_pool, phi_pool
