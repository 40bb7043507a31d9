"""Inbreeding, A and A-inverse against textbook worked examples, facts of the trade and exact
identities. Sources are named beside each check; [recalled] marks a value recalled from memory."""

from __future__ import annotations

from fractions import Fraction as Fr

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ped2g.pedigree.relationships import (
    relationship_inverse,
    inbreeding,
    log_det_relationship,
    relationship_matrix,
)
from pedigree_oracles import make_pedigree, random_parents, tabular_relationship
from textbook import P1_A

TOL = 1e-9


def frac_matrix(rows):
    return np.array([[float(Fr(x)) for x in row] for row in rows])


# Mrode (2014) Table 2.1, six animals (sire x dam): 3 = 1x2, 4 = 1x?, 5 = 4x3, 6 = 5x2.
P1 = [("1", None, None), ("2", None, None), ("3", "1", "2"), ("4", "1", None),
      ("5", "4", "3"), ("6", "5", "2")]


def test_six_animal_example_inbreeding_and_mendelian_coefficients():
    # Mrode (2014) p. 25: F5 = 0.125 (and F6 = 0.125 by the tabular method, a_66 = 1.125);
    # D = diag(1, 1, 0.5, 0.75, 0.5, 0.469), d_66 = 0.5 - 0.25 * (0.125 + 0) = 0.46875.
    ped = make_pedigree(P1)
    np.testing.assert_allclose(ped.inbreeding, [0, 0, 0, 0, 0.125, 0.125], atol=TOL)
    np.testing.assert_allclose(ped.mendelian, [1, 1, 0.5, 0.75, 0.5, 0.46875], atol=TOL)


def test_six_animal_example_relationship_matrix():
    # Mrode (2014) p. 32 prints the block for animals {1, 4, 5}; the full table is the
    # textbook's Table 2.1 A [recalled; every entry also follows by hand from the recursion].
    expected = P1_A
    ped = make_pedigree(P1)
    np.testing.assert_allclose(relationship_matrix(ped), expected, atol=TOL)
    np.testing.assert_allclose(relationship_matrix(ped, [0, 3, 4]),
                               [[1, 0.5, 0.5], [0.5, 1, 0.625], [0.5, 0.625, 1.125]], atol=TOL)
    np.testing.assert_allclose(relationship_matrix(ped, ["6", "2"]),
                               [[1.125, 0.625], [0.625, 1.0]], atol=TOL)


def test_six_animal_example_relationship_inverse():
    # Henderson's rules with inbreeding as in Mrode (2014) p. 27; the exact fractions are the
    # textbook's printed decimals (1.833, 0.500, -1, -0.667, 2.033, 0.533, -1.067, ...)
    # [decimals recalled], and the matrix must also equal inv(A) of the printed A (p. 32).
    expected = frac_matrix([
        ["11/6", "1/2", "-1", "-2/3", "0", "0"],
        ["1/2", "61/30", "-1", "0", "8/15", "-16/15"],
        ["-1", "-1", "5/2", "1/2", "-1", "0"],
        ["-2/3", "0", "1/2", "11/6", "-1", "0"],
        ["0", "8/15", "-1", "-1", "38/15", "-16/15"],
        ["0", "-16/15", "0", "0", "-16/15", "32/15"],
    ])
    ped = make_pedigree(P1)
    ainv = relationship_inverse(ped)
    np.testing.assert_allclose(ainv.toarray(), expected, atol=TOL)
    np.testing.assert_allclose(ainv.toarray(), ainv.toarray().T, atol=0)
    # log det A = sum log b (exact identity, det T = 1); compare with numpy's slogdet.
    sign, logdet = np.linalg.slogdet(relationship_matrix(ped))
    assert sign == 1
    assert log_det_relationship(ped) == pytest.approx(logdet, abs=TOL)


def test_eight_animal_example_relationship_inverse():
    # Mrode (2014) Example 3.1 pedigree, A-inverse printed on p. 58 (to 3 decimals; written
    # here as the exact fractions 11/6 = 1.833, 2/3 = 0.667 that the rules give).
    ped = make_pedigree([("1", None, None), ("2", None, None), ("3", None, None),
                         ("4", "1", None), ("5", "3", "2"), ("6", "1", "2"),
                         ("7", "4", "5"), ("8", "3", "6")])
    expected = frac_matrix([
        ["11/6", "1/2", "0", "-2/3", "0", "-1", "0", "0"],
        ["1/2", "2", "1/2", "0", "-1", "-1", "0", "0"],
        ["0", "1/2", "2", "0", "-1", "1/2", "0", "-1"],
        ["-2/3", "0", "0", "11/6", "1/2", "0", "-1", "0"],
        ["0", "-1", "-1", "1/2", "5/2", "0", "-1", "0"],
        ["-1", "-1", "1/2", "0", "0", "5/2", "0", "-1"],
        ["0", "0", "0", "-1", "-1", "0", "2", "0"],
        ["0", "0", "-1", "0", "0", "-1", "0", "2"],
    ])
    np.testing.assert_allclose(relationship_inverse(ped).toarray(), expected, atol=TOL)
    np.testing.assert_allclose(ped.inbreeding, 0, atol=TOL)


def test_inbred_parents_example():
    # KVL population-genetics notes, tabular-method example: 2, 3, 4 = 1 x ?; 5 = 3x2;
    # 6 = 3x4; 7 = 5x6. F = (0, 0, 0, 0, 1/8, 1/8, 7/32); a_26 = 0.25, a_27 = 0.4375,
    # a_57 = a_67 = 0.78125. The parents of 7 are themselves inbred.
    ped = make_pedigree([("1", None, None), ("2", "1", None), ("3", "1", None),
                         ("4", "1", None), ("5", "3", "2"), ("6", "3", "4"), ("7", "5", "6")])
    np.testing.assert_allclose(ped.inbreeding, [0, 0, 0, 0, 0.125, 0.125, 0.21875], atol=TOL)
    a = relationship_matrix(ped)
    assert a[1, 5] == pytest.approx(0.25, abs=TOL)
    assert a[1, 6] == pytest.approx(0.4375, abs=TOL)
    assert a[4, 6] == pytest.approx(0.78125, abs=TOL)
    assert a[5, 6] == pytest.approx(0.78125, abs=TOL)
    np.testing.assert_allclose(relationship_inverse(ped).toarray() @ a, np.eye(7), atol=TOL)


def test_full_sib_mating_example():
    # KVL notes, animal-model page: 5 = 1x2, 6 = 1x2, 7 = 3x4, 8 = 5x6 (full-sib mating).
    # a_88 = 1.25 (F8 = 0.25), a_58 = a_68 = 0.75, and the printed A-inverse rows below.
    ped = make_pedigree([("1", None, None), ("2", None, None), ("3", None, None),
                         ("4", None, None), ("5", "1", "2"), ("6", "1", "2"),
                         ("7", "3", "4"), ("8", "5", "6")])
    a = relationship_matrix(ped)
    assert ped.inbreeding[7] == pytest.approx(0.25, abs=TOL)
    assert a[7, 7] == pytest.approx(1.25, abs=TOL)
    assert a[4, 7] == pytest.approx(0.75, abs=TOL)
    assert a[5, 7] == pytest.approx(0.75, abs=TOL)
    expected = np.array([
        [2, 1, 0, 0, -1, -1, 0, 0],
        [1, 2, 0, 0, -1, -1, 0, 0],
        [0, 0, 1.5, 0.5, 0, 0, -1, 0],
        [0, 0, 0.5, 1.5, 0, 0, -1, 0],
        [-1, -1, 0, 0, 2.5, 0.5, 0, -1],
        [-1, -1, 0, 0, 0.5, 2.5, 0, -1],
        [0, 0, -1, -1, 0, 0, 2, 0],
        [0, 0, 0, 0, -1, -1, 0, 2],
    ], dtype=float)
    np.testing.assert_allclose(relationship_inverse(ped).toarray(), expected, atol=TOL)


def test_selfing():
    # Derived by hand (exact): 2 = 1 selfed. F2 = 1/2, A = [[1, 1], [1, 1.5]],
    # A-inverse = [[3, -2], [-2, 2]] (b2 = 1/2, alpha = 2, contributions accumulated).
    ped = make_pedigree([("1", None, None), ("2", "1", "1")])
    np.testing.assert_allclose(ped.inbreeding, [0, 0.5], atol=TOL)
    np.testing.assert_allclose(relationship_matrix(ped), [[1, 1], [1, 1.5]], atol=TOL)
    np.testing.assert_allclose(relationship_inverse(ped).toarray(), [[3, -2], [-2, 2]], atol=TOL)


def test_repeated_selfing_approaches_one():
    # Exact identity: selfing a line gives F_t = (1 + F_{t-1}) / 2, so F_t = 1 - 2^-t.
    rows = [("0", None, None)] + [(str(t), str(t - 1), str(t - 1)) for t in range(1, 21)]
    ped = make_pedigree(rows)
    np.testing.assert_allclose(ped.inbreeding, 1 - 0.5 ** np.arange(21), atol=TOL)


# Facts of the trade, common practice (Wright 1922; Falconer & Mackay 1996, ch. 9 [recalled]; K. Holsinger's
# course notes (EEB348) on covariances among relatives for parent-offspring, full and half sibs).
FAMILY = [("gs", None, None), ("gd", None, None), ("gs2", None, None), ("gd2", None, None),
          ("s", "gs", "gd"), ("d", None, None), ("fs1", "s", "d"), ("fs2", "s", "d"),
          ("d2", None, None), ("hs", "s", "d2"), ("u", "gs", "gd"), ("m", None, None),
          ("c1", "fs1", "m"), ("m2", None, None), ("c2", "u", "m2"), ("c3", "fs2", "m2")]


@pytest.mark.parametrize(("a", "b", "value"), [
    ("s", "fs1", 0.5),      # parent-offspring: 1/2
    ("fs1", "fs2", 0.5),    # full sibs: 1/2
    ("fs1", "hs", 0.25),    # half sibs: 1/4
    ("c1", "c3", 0.125),    # first cousins: 1/8
    ("gs", "fs1", 0.25),    # grandparent-grandchild: 1/4 [recalled]
    ("u", "fs1", 0.25),     # uncle-nephew: 1/4 [recalled]
    ("c2", "fs1", 0.125),   # first cousins (child of an uncle): 1/8
    ("c2", "c1", 0.0625),   # first cousins once removed: 1/16
    ("d", "d2", 0.0),       # unrelated founders: 0
])
def test_coefficients_of_relationship(a, b, value):
    ped = make_pedigree(FAMILY)
    assert relationship_matrix(ped, [a, b])[0, 1] == pytest.approx(value, abs=TOL)


def test_double_first_cousins():
    # Double first cousins: a = 1/4 [recalled: Falconer & Mackay 1996].
    ped = make_pedigree([("p1", None, None), ("p2", None, None), ("q1", None, None),
                         ("q2", None, None), ("a", "p1", "p2"), ("b", "q1", "q2"),
                         ("c", "p1", "p2"), ("d", "q1", "q2"), ("x", "a", "b"), ("y", "d", "c")])
    assert relationship_matrix(ped, ["x", "y"])[0, 1] == pytest.approx(0.25, abs=TOL)


@pytest.mark.parametrize(("rows", "expected"), [
    # full-sib mating: F = 1/4
    ([("1", None, None), ("2", None, None), ("3", "1", "2"), ("4", "1", "2"), ("x", "3", "4")],
     0.25),
    # half-sib mating: F = 1/8 [recalled]
    ([("1", None, None), ("2", None, None), ("3", None, None), ("4", "1", "2"),
      ("5", "1", "3"), ("x", "4", "5")], 0.125),
    # parent x offspring mating: F = 1/4 [recalled]
    ([("1", None, None), ("2", None, None), ("3", "1", "2"), ("x", "1", "3")], 0.25),
    # selfing of a non-inbred parent: F = 1/2
    ([("1", None, None), ("x", "1", "1")], 0.5),
])
def test_inbreeding_of_close_matings(rows, expected):
    assert make_pedigree(rows).inbreeding[-1] == pytest.approx(expected, abs=TOL)


@settings(max_examples=60, deadline=None)
@given(n=st.integers(1, 40), seed=st.integers(0, 2**32 - 1), selfing=st.booleans(),
       p_unknown=st.floats(0.0, 0.9))
def test_random_pedigrees_match_the_tabular_method(n, seed, selfing, p_unknown):
    # Exact identities on random pedigrees: F = diag(A) - 1, A-inverse @ A = I,
    # log det A = sum log b, and every block of A equals the tabular method's.
    rng = np.random.default_rng(seed)
    sire, dam = random_parents(rng, n, p_unknown, selfing)
    a_tab = tabular_relationship(sire, dam)
    f = inbreeding(sire, dam)
    np.testing.assert_allclose(f, np.diag(a_tab) - 1, atol=TOL)
    ped = make_pedigree([(str(i), str(s) if s >= 0 else None, str(d) if d >= 0 else None)
                         for i, (s, d) in enumerate(zip(sire, dam))])
    np.testing.assert_allclose(relationship_inverse(ped).toarray() @ a_tab, np.eye(n), atol=1e-8)
    np.testing.assert_allclose(relationship_matrix(ped), a_tab, atol=TOL)
    subset = rng.permutation(n)[: max(1, n // 3)]
    np.testing.assert_allclose(relationship_matrix(ped, subset, memory_budget=64),
                               a_tab[np.ix_(subset, subset)], atol=TOL)
    assert log_det_relationship(ped) == pytest.approx(np.linalg.slogdet(a_tab)[1], abs=1e-8)


def test_inbreeding_rejects_offspring_before_parents():
    with pytest.raises(ValueError, match="parents before offspring"):
        inbreeding([-1, 2, -1], [-1, -1, -1])


def test_deep_inbred_pedigree_matches_column_method():
    # A small closed population over many generations (parents among the previous 40 animals,
    # families of full sibs): F from Meuwissen & Luo must equal diag(T D T') - 1 computed by the
    # column sweeps of relationship_matrix (a different algorithm), an exact identity.
    rng = np.random.default_rng(11)
    n = 2500
    sire = np.full(n, -1, dtype=np.int64)
    dam = np.full(n, -1, dtype=np.int64)
    for i in range(40, n, 2):
        s, d = rng.integers(i - 40, i, size=2)
        sire[i:i + 2], dam[i:i + 2] = s, d  # two full sibs
    ped = make_pedigree([(str(i), str(s) if s >= 0 else None, str(d) if d >= 0 else None)
                         for i, (s, d) in enumerate(zip(sire, dam))])
    assert ped.inbreeding.max() > 0.5          # genuinely deep inbreeding
    a = relationship_matrix(ped)
    np.testing.assert_allclose(ped.inbreeding, np.diag(a) - 1, atol=1e-9)
    ainv = relationship_inverse(ped)
    np.testing.assert_allclose(ainv @ a[:, :50], np.eye(n)[:, :50], atol=1e-8)
