"""Shuffling the pooled animals of all populations into dummy populations of the original sizes.

For each draw an independent uniform random permutation of the ``N = sum(n_j)`` pooled animals
is cut into consecutive blocks of sizes ``n_1, ..., n_m``: block ``j`` is dummy population ``j``.
Every animal lands in exactly one dummy population and every population keeps its size
(docs/methods.md §5.1 step 2; Aguirre et al. 2014, Heredity 112:21-29).
"""

from __future__ import annotations

import numpy as np


def block_bounds(sizes: list[int] | np.ndarray) -> np.ndarray:
    """Start and end positions of each population's block in the pooled order.

    Returns
    -------
    numpy.ndarray of int, shape (m + 1,)
        ``bounds[j]:bounds[j+1]`` are the positions of population ``j``.
    """
    sizes = np.asarray(sizes, dtype=np.int64)
    if sizes.ndim != 1 or np.any(sizes < 1):
        raise ValueError(f"population sizes must be positive integers, got {sizes.tolist()}")
    return np.concatenate([[0], np.cumsum(sizes)])


def shuffle_permutations(n_draws: int, n_pooled: int, rng: np.random.Generator) -> np.ndarray:
    """One independent uniform random permutation of ``range(n_pooled)`` per draw.

    Row ``s`` of the result lists the pooled animals in their shuffled order; cut it with
    :func:`block_bounds` into the dummy populations. Successive calls on the same generator
    continue the same sequence of permutations, so the result does not depend on how the
    draws are chunked.

    Returns
    -------
    numpy.ndarray of int64, shape (n_draws, n_pooled)
    """
    base = np.broadcast_to(np.arange(n_pooled, dtype=np.int64), (n_draws, n_pooled))
    return rng.permuted(base, axis=1)


def dummy_labels(perm: np.ndarray, sizes: list[int] | np.ndarray) -> np.ndarray:
    """The dummy population of every pooled animal in every draw.

    Returns
    -------
    numpy.ndarray of int, shape perm.shape
        ``labels[s, i]`` is the dummy population that pooled animal ``i`` joined in draw ``s``.
    """
    bounds = block_bounds(sizes)
    if perm.shape[-1] != bounds[-1]:
        raise ValueError(f"permutation length {perm.shape[-1]} differs from the pooled size {bounds[-1]}")
    block_of_position = np.repeat(np.arange(len(bounds) - 1), np.diff(bounds))
    labels = np.empty_like(perm)
    np.put_along_axis(labels, perm, np.broadcast_to(block_of_position, perm.shape), axis=-1)
    return labels
