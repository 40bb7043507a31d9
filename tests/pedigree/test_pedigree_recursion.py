"""The pedigree's one recursion: down (breeding values from Mendelian samples) and up (its transpose).

External checks:
* Exact identity with the tabular method (Emik & Terrill 1949; Mrode 2014, section 2.2; the
  oracle in tests/textbook.py shares no code with ped2g): with L the matrix whose column k is
  down applied to the k-th unit vector (L = T = (I - P)^-1) and D = diag(b), A = L D L', and
  down(w) = L w for any w, densely.
* Exact identity: up(v) = L' v, with L formed densely as above and transposed by numpy.
* Mrode (2014), p. 25: T of the six-animal pedigree of Table 2.1 (tests/textbook.py, P1_T).
"""

import numpy as np

from ped2g.pedigree.core import Pedigree
from ped2g.pedigree.recursion import down, up
from ped2g.pedigree.relationships import inbreeding

from pedigree_oracles import random_parents
from textbook import P1_DAM, P1_SIRE, P1_T, tabular_relationship


def _pedigree(sire, dam) -> Pedigree:
    sire, dam = np.asarray(sire, dtype=np.int64), np.asarray(dam, dtype=np.int64)
    gen = np.zeros(len(sire), dtype=np.int64)
    for i in range(len(sire)):
        gen[i] = 1 + max(gen[p] if p >= 0 else -1 for p in (sire[i], dam[i]))
    return Pedigree(ids=[f"a{i}" for i in range(len(sire))], sire=sire, dam=dam, generation=gen,
                    inbreeding=inbreeding(sire, dam))


def _dense_L(ped: Pedigree) -> np.ndarray:
    # column k of L is down(e_k); leading axis of the batch = k, one column each
    return down(ped, np.eye(ped.n)[:, :, None])[..., 0].T


def test_down_is_mrode_T():
    ped = _pedigree(P1_SIRE, P1_DAM)
    np.testing.assert_allclose(_dense_L(ped), P1_T, atol=1e-15)


def test_down_gives_A_and_L_w_on_a_random_pedigree():
    rng = np.random.default_rng(21)
    sire, dam = random_parents(rng, 80, p_unknown=0.3)
    ped = _pedigree(sire, dam)
    L = _dense_L(ped)
    A = tabular_relationship(sire, dam)
    np.testing.assert_allclose(L @ np.diag(ped.mendelian) @ L.T, A, atol=1e-12)
    w = rng.standard_normal((3, ped.n, 2))             # leading draw axis, two traits
    np.testing.assert_allclose(down(ped, w), np.einsum("ij,sjt->sit", L, w), atol=1e-12)


def test_up_is_the_transpose():
    rng = np.random.default_rng(22)
    sire, dam = random_parents(rng, 60, p_unknown=0.2)
    ped = _pedigree(sire, dam)
    L = _dense_L(ped)
    v = rng.standard_normal((ped.n, 3))
    np.testing.assert_allclose(up(ped, v), L.T @ v, atol=1e-12)
    np.testing.assert_allclose(up(ped, v[None]), (L.T @ v)[None], atol=1e-12)


def test_in_place_down_overwrites_its_input_with_the_same_values():
    rng = np.random.default_rng(23)
    sire, dam = random_parents(rng, 40, p_unknown=0.4)
    ped = _pedigree(sire, dam)
    m = rng.standard_normal((2, ped.n, 3))
    expected = down(ped, m)
    out = down(ped, m, in_place=True)
    assert np.shares_memory(out, m)
    np.testing.assert_array_equal(out, expected)
