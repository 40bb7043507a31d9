"""Building the null G draws: simulate, pool, shuffle and estimate, one chunk of draws at a time.

This is the whole of ``ped2g null`` without the file handling, so tests, the calibration check
and the benchmark call the same code as the command.
"""

from __future__ import annotations

import logging
import time

import numpy as np

from ..errors import UserError
from ..pedigree.core import Pedigree
from ..contracts.fit_folder import FitSet
from ..rng import generator
from .estimators import ESTIMATORS, mendelian_estimator, sample_covariance_estimator
from .shuffle import shuffle_permutations
from .pooled_breeding_values import simulate_pooled

#: Arrays of ``draws x animals x traits`` doubles alive at once, per animal: the simulator's
#: breeding values and Mendelian deviations of one pedigree, and the pooled array and its
#: shuffled (and centred) copies.
_PEDIGREE_COPIES = 3
_POOLED_COPIES = 4


def read_pedigrees(fits: FitSet) -> list[Pedigree]:
    """Read every fit's ``pedigree_used.csv``; one clear line if one is not a ped2g pedigree."""
    peds = []
    for fit in fits.fits:
        try:
            peds.append(Pedigree.read_csv(fit.pedigree_used))
        except (KeyError, ValueError, TypeError) as err:
            raise UserError(f"pedigree {fit.pedigree_used} is not a pedigree written by 'ped2g fit' "
                            f"({type(err).__name__}: {err}); rerun 'ped2g fit' for population "
                            f"'{fit.population}'") from None
    return peds


def pooled_members(fits: FitSet, peds: list[Pedigree], estimator: str) -> tuple[list[np.ndarray], int]:
    """Positions of each population's phenotyped animals in its pedigree, and how many ids recur.

    Returns
    -------
    members : list of numpy.ndarray of int
        Per population, the positions (pedigree order) of the animals that are pooled.
    shared : int
        Number of phenotyped identifiers that appear in more than one population's fit.

    Raises
    ------
    UserError
        If a phenotyped animal is missing from its pedigree, or a population has too few
        phenotyped animals for the estimator (1 for 'mendelian', 2 for 'sample').
    """
    minimum = 2 if estimator == "sample" else 1
    members = []
    seen: dict[str, int] = {}
    for fit, ped in zip(fits.fits, peds):
        index = ped.index
        missing = [a for a in fit.phenotyped if a not in index]
        if missing:
            raise UserError(f"fit {fit.path}: phenotyped animal '{missing[0]}' is not in "
                            f"{fit.pedigree_used}; rerun 'ped2g fit' for population '{fit.population}'")
        pos = np.unique(np.array([index[a] for a in fit.phenotyped], dtype=np.int64))
        if pos.size < minimum:
            raise UserError(f"fit {fit.path}: population '{fit.population}' has {pos.size} phenotyped "
                            f"animals in {fit.pedigree_used} (column 'phenotyped'); the {estimator} "
                            f"null needs at least {minimum}")
        members.append(pos)
        for a in set(fit.phenotyped):
            seen[a] = seen.get(a, 0) + 1
    return members, sum(1 for c in seen.values() if c > 1)


def chunk_size(peds: list[Pedigree], sizes: list[int], n_traits: int, memory_mb: float) -> int:
    """Draws per chunk so the big arrays stay within ``memory_mb`` megabytes.

    Memory per draw ~ ``8 t (3 max_j n_j_pedigree + 4 N_pooled) + 16 N_pooled`` bytes (the
    simulator's arrays for one pedigree at a time, the pooled, shuffled and centred arrays, and
    the permutation with its labels).
    """
    largest = max(p.n for p in peds)
    pooled = sum(sizes)
    per_draw = 8 * n_traits * (_PEDIGREE_COPIES * largest + _POOLED_COPIES * pooled) + 16 * pooled
    return max(1, int(memory_mb * 1e6 // per_draw))


def build_null(G: np.ndarray, peds: list[Pedigree], members: list[np.ndarray], estimator: str,
               seed: int, populations: list[str], chunk: int,
               progress: logging.Logger | None = None) -> np.ndarray:
    """Null G draws for dummy populations of the original sizes.

    For each draw s (in chunks of ``chunk`` draws): simulate breeding values down pedigree j
    with ``G[s, j]`` (stream ``generator(seed, "null", population_j)``), pool the animals
    ``members[j]`` of every population, shuffle them with an independent permutation per draw
    (stream ``generator(seed, "null", "shuffle")``) into blocks of the original sizes, and
    estimate each block's G with ``estimator`` (docs/methods.md §5.1).

    Because every stream is consumed in draw order, the result does not depend on ``chunk``.

    Parameters
    ----------
    G
        Shape (S, m, t, t): the observed posterior draws (checked with
        :func:`ped2g.null.pooled_breeding_values.check_draws`).
    peds, members, populations
        Per population: pedigree, positions of the pooled animals, name.
    estimator
        One of ``ESTIMATORS``: 'mendelian' or 'sample'.

    Returns
    -------
    numpy.ndarray, shape (S, m, t, t)
    """
    if estimator not in ESTIMATORS:
        raise UserError(f"key 'compare.null_model.estimator': {estimator!r} is not one of {list(ESTIMATORS)}")
    S, m, t, _ = G.shape
    if not (len(peds) == len(members) == len(populations) == m):
        raise ValueError("peds, members and populations must have one entry per population of G")
    sizes = [len(mem) for mem in members]
    N = sum(sizes)
    rngs = [generator(seed, "null", str(p)) for p in populations]
    shuffle_rng = generator(seed, "null", "shuffle")
    out = np.empty((S, m, t, t))
    chunk = max(1, int(chunk))
    started = time.perf_counter()
    next_report = 0.1
    for a in range(0, S, chunk):
        b = min(S, a + chunk)
        u, phi = simulate_pooled(peds, members, G[a:b], rngs, need_u=estimator == "sample",
                                 need_phi=estimator == "mendelian")
        perm = shuffle_permutations(b - a, N, shuffle_rng)
        if estimator == "mendelian":
            b_pool = np.concatenate([ped.mendelian[mem] for ped, mem in zip(peds, members)])
            out[a:b] = mendelian_estimator(phi, b_pool, perm, sizes)
        else:
            out[a:b] = sample_covariance_estimator(u, perm, sizes)
        del u, phi, perm
        if progress is not None and b / S >= next_report:
            progress.info("null draws %d/%d (%.0f%%), %.1f s", b, S, 100 * b / S,
                          time.perf_counter() - started)
            while next_report <= b / S:
                next_report += 0.1
    return out
