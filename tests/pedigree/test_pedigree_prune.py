"""Exact pruning: the relationships among kept animals are unchanged (checked against the
tabular method, Mrode 2014 section 2.2, an independent implementation in pedigree_oracles)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ped2g.errors import UserError
from ped2g.pedigree.prune import prune
from pedigree_oracles import make_pedigree, random_parents, tabular_relationship


def test_hand_example():
    # f1, f2, m founders; a = f1 x f2; x = a x m; y = a x ?; keep x and y.
    # m, then f1 and f2 each have one offspring link and are dropped; a (two links) stays,
    # now as a founder. a_xy = 1/4 (half sibs) before and after.
    ped = make_pedigree([("f1", None, None), ("f2", None, None), ("m", None, None),
                         ("a", "f1", "f2"), ("x", "a", "m"), ("y", "a", None),
                         ("z", "x", "m")])
    small = prune(ped, ["x", "y"])
    assert list(small.ids) == ["a", "x", "y"]
    assert small.sire.tolist() == [-1, 0, 0] and small.dam.tolist() == [-1, -1, -1]
    assert small.generation.tolist() == [0, 1, 1]
    a = tabular_relationship(small.sire, small.dam)
    assert a[1, 2] == pytest.approx(0.25, abs=1e-12)


def test_selfing_founder_is_kept():
    # A founder whose only offspring is by selfing has two links: dropping it would lose F = 1/2.
    ped = make_pedigree([("p", None, None), ("s", "p", "p")])
    small = prune(ped, ["s"])
    assert list(small.ids) == ["p", "s"]
    assert small.inbreeding[1] == pytest.approx(0.5, abs=1e-12)


def test_unknown_ids_are_refused():
    ped = make_pedigree([("p", None, None), ("s", "p", None)])
    with pytest.raises(UserError, match=r"1 animal\(s\) to keep are not in the pedigree: 'q'"):
        prune(ped, ["s", "q"])


@settings(max_examples=80, deadline=None)
@given(n=st.integers(1, 45), seed=st.integers(0, 2**32 - 1), selfing=st.booleans(),
       p_unknown=st.floats(0.0, 0.8), share=st.floats(0.05, 1.0))
def test_pruning_is_exact(n, seed, selfing, p_unknown, share):
    rng = np.random.default_rng(seed)
    sire, dam = random_parents(rng, n, p_unknown, selfing)
    ped = make_pedigree([(f"i{k}", f"i{s}" if s >= 0 else None, f"i{d}" if d >= 0 else None)
                         for k, (s, d) in enumerate(zip(sire, dam))])
    keep = sorted(rng.choice(n, size=max(1, int(share * n)), replace=False).tolist())
    keep_ids = [f"i{k}" for k in keep]
    small = prune(ped, keep_ids)
    pos = {name: i for i, name in enumerate(small.ids)}
    assert set(keep_ids) <= set(pos)
    # the relationship matrix among the kept animals is unchanged (exactness)
    a_before = tabular_relationship(ped.sire, ped.dam)[np.ix_(keep, keep)]
    where = [pos[x] for x in keep_ids]
    a_after = tabular_relationship(small.sire, small.dam)[np.ix_(where, where)]
    np.testing.assert_allclose(a_after, a_before, atol=1e-12)
    np.testing.assert_allclose(small.inbreeding[where], ped.inbreeding[keep], atol=1e-12)
    # a valid pedigree: parents first, generation = 1 + max(parents' generations)
    idx = np.arange(small.n)
    assert np.all(small.sire < idx) and np.all(small.dam < idx)
    for i in range(small.n):
        g = [small.generation[p] + 1 for p in (small.sire[i], small.dam[i]) if p >= 0]
        assert small.generation[i] == (max(g) if g else 0)
    # nothing uninformative left: every dropped-able animal is gone
    links = np.bincount(np.concatenate([small.sire[small.sire >= 0], small.dam[small.dam >= 0]]),
                        minlength=small.n)
    wanted = np.isin(small.ids, keep_ids)
    founder = (small.sire < 0) & (small.dam < 0)
    assert not np.any(~wanted & (links == 0))
    assert not np.any(~wanted & founder & (links == 1))
