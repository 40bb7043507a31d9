"""The pedigree product Ops (T m down the pedigree, T' g up it) used by the latent engine.

External checks:
* Mrode (2014), p. 25: T = (I - P)^-1 of the six-animal pedigree of Table 2.1 (tests/textbook.py,
  P1) and A = T D T' (P1_A).
* Exact identity: T m = solve(I - P, m) and T' g = solve((I - P)', g), with numpy.linalg.solve as
  the reference, on a random parents-first pedigree with unknown parents and inbreeding.
* Gradients against central finite differences (the products are linear, so the differences are
  exact up to rounding), in PyTensor's Python mode and in its numba backend.
"""

import numpy as np
import pytensor
import pytensor.tensor as pt
import pytest

from ped2g.fit.pedigree_op import down_product, up_product
from ped2g.pedigree.recursion import down_matrix as down_pedigree
from ped2g.pedigree.recursion import up_matrix as up_pedigree

from pedigree.pedigree_oracles import random_parents   # tests/pedigree/ (tests/ is on the path)
from textbook import P1_A, P1_D, P1_DAM, P1_SIRE, P1_T


def _with_sentinel(parents, n):
    return np.where(parents >= 0, parents, n).astype(np.int64)


def _dense_i_minus_p(sire, dam):
    n = len(sire)
    P = np.zeros((n, n))
    for i in range(n):
        for par in (sire[i], dam[i]):
            if par >= 0:
                P[i, par] += 0.5
    return np.eye(n) - P


def test_down_and_up_give_mrode_T_and_A():
    n = len(P1_SIRE)
    sire, dam = _with_sentinel(P1_SIRE, n), _with_sentinel(P1_DAM, n)
    np.testing.assert_allclose(down_pedigree(np.eye(n), sire, dam), P1_T, atol=1e-15)    # T I = T
    np.testing.assert_allclose(up_pedigree(np.eye(n), sire, dam), P1_T.T, atol=1e-15)   # T' I = T'
    TD = down_pedigree(np.diag(np.sqrt(P1_D)), sire, dam)
    np.testing.assert_allclose(TD @ TD.T, P1_A, atol=1e-12)


def test_products_solve_the_pedigree_system():
    rng = np.random.default_rng(8)
    n, t = 60, 3
    sire_raw, dam_raw = random_parents(rng, n, p_unknown=0.3)
    sire, dam = _with_sentinel(sire_raw, n), _with_sentinel(dam_raw, n)
    M = _dense_i_minus_p(sire_raw, dam_raw)
    m = rng.normal(size=(n, t))
    np.testing.assert_allclose(down_pedigree(m, sire, dam), np.linalg.solve(M, m), rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(up_pedigree(m, sire, dam), np.linalg.solve(M.T, m), rtol=1e-12, atol=1e-12)


def test_a_parent_after_its_offspring_is_refused():
    sire = np.array([3, 3, 3], dtype=np.int64)   # 3 = unknown
    dam = np.array([3, 0, 3], dtype=np.int64)
    down_pedigree(np.ones((3, 1)), sire, dam)   # parents first: fine
    bad_dam = np.array([3, 2, 3], dtype=np.int64)  # animal 1's dam is animal 2
    for kernel in (down_pedigree, up_pedigree):
        with pytest.raises(ValueError, match="parent does not come before"):
            kernel(np.ones((3, 1)), sire, bad_dam)


@pytest.mark.parametrize("mode", ["FAST_COMPILE", "NUMBA"])
def test_gradients_match_finite_differences(mode):
    # f(m) = sum(h * sin(Op(m))): a non-linear outer function, so the gradient through each Op
    # (the other Op applied to the outer gradient) is checked with every entry of m.
    rng = np.random.default_rng(4)
    n, t = 25, 2
    sire_raw, dam_raw = random_parents(rng, n, p_unknown=0.25)
    sire, dam = _with_sentinel(sire_raw, n), _with_sentinel(dam_raw, n)
    h = rng.normal(size=(n, t))
    m0 = rng.normal(size=(n, t))
    for op in (down_product, up_product):
        m = pt.matrix("m", dtype="float64")
        f = pt.sum(h * pt.sin(op(m, sire, dam)))
        fn = pytensor.function([m], [f, pytensor.grad(f, m)], mode=mode)
        value, grad = fn(m0)
        eps = 1e-6
        numeric = np.empty_like(m0)
        for i in range(n):
            for j in range(t):
                up, down = m0.copy(), m0.copy()
                up[i, j] += eps
                down[i, j] -= eps
                numeric[i, j] = (fn(up)[0] - fn(down)[0]) / (2 * eps)
        np.testing.assert_allclose(grad, numeric, rtol=1e-6, atol=1e-8)
        kernel = up_pedigree if op.transpose else down_pedigree
        np.testing.assert_allclose(value, np.sum(h * np.sin(kernel(m0, sire, dam))), rtol=1e-13)
