"""Counts in the pedigree summary, on a pedigree small enough to count by hand."""

from __future__ import annotations

import pandas as pd
import pytest

from ped2g.pedigree.summary import summarise
from pedigree_oracles import make_pedigree


def test_counts_by_hand():
    # s1 x d1 -> o1, o2 (full sibs); s1 x d2 -> o3; s1 x ? -> o4; s2 x d2 -> o5;
    # ? x d1 -> o6; o1 x o2 -> g (full-sib mating: F = 1/4, Wright 1922 / Mrode 2014 p. 25
    # recursion).
    ped = make_pedigree([
        ("s1", None, None), ("s2", None, None), ("d1", None, None), ("d2", None, None),
        ("o1", "s1", "d1"), ("o2", "s1", "d1"), ("o3", "s1", "d2"), ("o4", "s1", None),
        ("o5", "s2", "d2"), ("o6", None, "d1"), ("g", "o1", "o2"),
    ])
    changes = pd.DataFrame({"row": [3, 5, 9], "id": ["a", "b", "c"],
                            "problem": ["duplicate row", "duplicate row", "sire has no row of its own"],
                            "action": ["dropped", "dropped", "added"]})
    out = summarise(ped, changes)
    assert out["animals"] == 11
    assert out["founders"] == out["no_parent_known"] == 4
    assert out["both_parents_known"] == 5       # o1, o2, o3, o5, g
    assert out["one_parent_known"] == 2         # o4, o6
    assert out["max_generation"] == 2
    assert out["full_sib_families"] == 1        # (s1, d1)
    assert out["paternal_half_sib_families"] == 1   # s1 (dams d1, d2, unknown); s2 has one
    assert out["maternal_half_sib_families"] == 2   # d1 (s1, unknown), d2 (s1, s2)
    assert out["half_sib_families"] == 3
    assert out["inbred_animals"] == 1
    assert out["max_inbreeding"] == pytest.approx(0.25, abs=1e-12)
    assert out["mean_inbreeding"] == pytest.approx(0.25 / 11, abs=1e-12)
    assert out["changes"] == {"duplicate row": 2, "sire has no row of its own": 1}
    assert out["changes_total"] == 3


def test_empty_changes_and_no_families():
    ped = make_pedigree([("a", None, None), ("b", "a", None)])
    out = summarise(ped, pd.DataFrame(columns=["row", "id", "problem", "action"]))
    assert out["changes"] == {} and out["full_sib_families"] == 0
    assert out["paternal_half_sib_families"] == 0 and out["inbred_animals"] == 0
