"""Named random streams (ped2g.rng)."""

import numpy as np

from ped2g.rng import generator, seed_sequence


def test_same_names_give_the_same_stream_whatever_the_order():
    a_first = generator(7, "null", "popA").normal(size=5)
    generator(7, "null", "popB").normal(size=5)  # another stream used in between
    a_again = generator(7, "null", "popA").normal(size=5)
    np.testing.assert_array_equal(a_first, a_again)


def test_different_names_or_seeds_give_different_streams():
    base = generator(7, "fit", "popA").normal(size=5)
    assert not np.array_equal(base, generator(7, "fit", "popB").normal(size=5))
    assert not np.array_equal(base, generator(8, "fit", "popA").normal(size=5))
    assert not np.array_equal(base, generator(7, "null", "popA").normal(size=5))


def test_streams_are_children_of_the_run_seed():
    seq = seed_sequence(11, "compare")
    assert seq.entropy == 11
    assert len(seq.spawn_key) == 1
