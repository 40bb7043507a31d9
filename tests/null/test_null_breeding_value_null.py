"""build_null: reproducible, independent of chunking, and the shuffle really mixes populations."""

import numpy as np
import pytest

from null_helpers import random_pedigree
from ped2g.errors import UserError
from ped2g.null.breeding_value_null import build_null, chunk_size


def _setup(S=12):
    rng = np.random.default_rng(31)
    peds = [random_pedigree(rng, 80, founders=10, generations=3, prefix=p) for p in "xyz"]
    members = [np.arange(20, 80), np.arange(30, 80), np.arange(5, 80)]
    G = np.stack([np.stack([k * np.eye(2) for k in (1.0, 2.0, 3.0)])] * S)
    return peds, members, G


@pytest.mark.parametrize("estimator", ["mendelian", "sample"])
def test_result_does_not_depend_on_chunk_size(estimator):
    peds, members, G = _setup()
    whole = build_null(G, peds, members, estimator, 5, ["x", "y", "z"], chunk=12)
    for chunk in (1, 5):
        np.testing.assert_array_equal(build_null(G, peds, members, estimator, 5, ["x", "y", "z"],
                                                 chunk=chunk), whole)


def test_same_seed_same_numbers_other_seed_other_numbers():
    peds, members, G = _setup()
    a = build_null(G, peds, members, "mendelian", 5, ["x", "y", "z"], chunk=4)
    b = build_null(G, peds, members, "mendelian", 5, ["x", "y", "z"], chunk=4)
    c = build_null(G, peds, members, "mendelian", 6, ["x", "y", "z"], chunk=4)
    np.testing.assert_array_equal(a, b)
    assert not np.allclose(a, c)
    assert a.shape == (12, 3, 2, 2)
    np.testing.assert_array_equal(a, np.swapaxes(a, -1, -2))


def test_dummy_populations_share_the_size_weighted_mixture_of_g():
    # Populations simulated with G = 1 I, 2 I, 3 I and n = 60, 50, 75 pooled animals: after the
    # shuffle every dummy population's expected Mendelian estimate is the size-weighted mean
    # (60*1 + 50*2 + 75*3)/185 I (exact expectation; checked within Monte Carlo error).
    peds, members, G = _setup(S=600)
    out = build_null(G, peds, members, "mendelian", 9, ["x", "y", "z"], chunk=200)
    mix = (60 * 1 + 50 * 2 + 75 * 3) / 185
    diag = out[:, :, [0, 1], [0, 1]]  # (S, m, 2)
    se = diag.std(axis=0, ddof=1) / np.sqrt(len(out))
    assert np.max(np.abs(diag.mean(axis=0) - mix) / se) < 4.0
    off = out[:, :, 0, 1]
    assert np.max(np.abs(off.mean(axis=0)) / (off.std(axis=0, ddof=1) / np.sqrt(len(out)))) < 4.0


def test_unknown_estimator_is_a_user_error():
    peds, members, G = _setup(S=2)
    with pytest.raises(UserError, match=r"compare.null_model.estimator.*\['mendelian', 'sample'\]"):
        build_null(G, peds, members, "wishart", 1, ["x", "y", "z"], chunk=2)


def test_chunk_size_follows_the_memory_budget():
    peds, members, _ = _setup()
    sizes = [len(m) for m in members]
    small, big = chunk_size(peds, sizes, 8, 1.0), chunk_size(peds, sizes, 8, 100.0)
    assert 1 <= small < big
    per_draw = 8 * 8 * (3 * 80 + 4 * sum(sizes)) + 16 * sum(sizes)
    assert big == int(100e6 // per_draw)
