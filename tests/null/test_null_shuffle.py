"""The shuffle keeps every animal once and every population size (docs/methods.md §5.1, §5.5)."""

import numpy as np
import pytest
from scipy import stats

from ped2g.null.shuffle import block_bounds, dummy_labels, shuffle_permutations


def test_every_row_is_a_permutation_and_sizes_are_kept():
    rng = np.random.default_rng(1)
    sizes = [7, 3, 12]
    perm = shuffle_permutations(50, 22, rng)
    assert perm.shape == (50, 22)
    np.testing.assert_array_equal(np.sort(perm, axis=1), np.broadcast_to(np.arange(22), (50, 22)))
    labels = dummy_labels(perm, sizes)
    counts = np.stack([(labels == j).sum(axis=1) for j in range(3)], axis=1)
    np.testing.assert_array_equal(counts, np.broadcast_to(sizes, (50, 3)))
    # labels and blocks agree: the animal at shuffled position k is in the block holding k
    bounds = block_bounds(sizes)
    for s in (0, 49):
        for j in range(3):
            assert np.all(labels[s, perm[s, bounds[j]:bounds[j + 1]]] == j)


def test_draws_get_different_independent_permutations():
    perm = shuffle_permutations(200, 30, np.random.default_rng(2))
    assert len({tuple(r) for r in perm}) == 200


def test_each_animal_joins_each_dummy_population_in_proportion_to_its_size():
    # Uniform permutations: P(animal i in dummy j) = n_j / N. Chi-square goodness of fit
    # (scipy.stats.chisquare) for one animal over 4000 draws; seeded, so deterministic.
    sizes = [5, 15, 30]
    labels = dummy_labels(shuffle_permutations(4000, 50, np.random.default_rng(3)), sizes)
    for animal in (0, 17, 49):
        observed = np.bincount(labels[:, animal], minlength=3)
        expected = 4000 * np.array(sizes) / 50
        assert stats.chisquare(observed, expected).pvalue > 1e-3


def test_chunks_continue_the_same_stream():
    whole = shuffle_permutations(9, 13, np.random.default_rng(4))
    rng = np.random.default_rng(4)
    parts = np.concatenate([shuffle_permutations(4, 13, rng), shuffle_permutations(5, 13, rng)])
    np.testing.assert_array_equal(whole, parts)


def test_bad_sizes_raise():
    with pytest.raises(ValueError, match="positive integers"):
        block_bounds([3, 0])
    with pytest.raises(ValueError, match="pooled size"):
        dummy_labels(np.zeros((2, 5), dtype=int), [2, 2])
