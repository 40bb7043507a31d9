"""Checks of the breeding-value simulator against textbook relationship matrices and exact identities.

Sources named beside each check:
* Mrode (2014), *Linear Models for the Prediction of Animal Breeding Values*, 3rd edn, Table 2.1
  pedigree, pp. 25-32 (A, F, D), as reproduced in docs/methods.md §1.7 (pedigree P1).
* KVL population-genetics notes, tabular-method example with inbred parents (docs/methods.md §1.7, P3).
* The tabular (recursive) method of Emik & Terrill (1949) as given in Mrode (2014) §2.2, coded
  independently below as the oracle for random pedigrees.
* scipy.linalg.cholesky as the reference Cholesky factor.
"""

import numpy as np
import pytest
import scipy.linalg

from ped2g.errors import UserError
from ped2g.pedigree.core import Pedigree
from ped2g.simulate.breeding_values import covariance_factor, simulate_breeding_values
# Mrode (2014) Table 2.1 pedigree, its F (p. 25) and A (p. 32 block; see tests/textbook.py).
from textbook import P1_A, P1_DAM, P1_F, P1_SIRE
from textbook import tabular_relationship as _tabular_A

G2 = np.array([[2.0, 0.6], [0.6, 1.0]])



def _generation(sire, dam):
    gen = np.zeros(len(sire), dtype=np.int64)
    for i in range(len(sire)):
        parents = [gen[p] for p in (sire[i], dam[i]) if p >= 0]
        gen[i] = 1 + max(parents) if parents else 0
    return gen


def _pedigree(sire, dam, F):
    sire = np.asarray(sire, dtype=np.int64)
    dam = np.asarray(dam, dtype=np.int64)
    return Pedigree(ids=np.array([str(i + 1) for i in range(len(sire))], dtype=object), sire=sire,
                    dam=dam, generation=_generation(sire, dam), inbreeding=np.asarray(F, dtype=float))


def _zscores_of_covariance(X, Sigma):
    """(sample second moment - Sigma) / SE for zero-mean normal X (S, k): var(x_a x_b) = s_aa s_bb + s_ab^2."""
    S = X.shape[0]
    M = X.T @ X / S
    se = np.sqrt((np.outer(np.diag(Sigma), np.diag(Sigma)) + Sigma**2) / S)
    return (M - Sigma) / se


def test_tabular_oracle_reproduces_mrode_table():
    # The test's own oracle against the printed pedigree P1 (docs/methods.md §1.7).
    np.testing.assert_allclose(_tabular_A(P1_SIRE, P1_DAM), P1_A, atol=1e-12)


def test_p1_variance_and_covariance_of_breeding_values_follow_A():
    """var(u_6) = 1.125 G and cov(u_5, u_6) = 0.6875 G (Mrode 2014 Table 2.1 pedigree; docs/methods.md §3)."""
    ped = _pedigree(P1_SIRE, P1_DAM, P1_F)
    S = 200_000
    U = simulate_breeding_values(ped, G2, np.random.default_rng(11), n_draws=S)
    assert U.shape == (S, 6, 2)
    var6 = U[:, 5].T @ U[:, 5] / S
    cov56 = U[:, 4].T @ U[:, 5] / S
    # 5 standard errors of a sample second moment of normals (see _zscores_of_covariance).
    for got, a, a_i, a_j in ((var6, 1.125, 1.125, 1.125), (cov56, 0.6875, 1.125, 1.125)):
        Sigma_ij = a * G2
        se = np.sqrt((a_i * a_j * np.outer(np.diag(G2), np.diag(G2)) + Sigma_ij**2) / S)
        assert np.all(np.abs(got - Sigma_ij) < 5 * se), (got, Sigma_ij)


def test_vec_convention_trait_major_is_kron_G_A():
    """docs/methods.md §0.2: cov(vec U) = G ⊗ A with vec = ravel(order='F'); animal-major gives A ⊗ G."""
    ped = _pedigree(P1_SIRE, P1_DAM, P1_F)
    S = 200_000
    U = simulate_breeding_values(ped, G2, np.random.default_rng(12), n_draws=S)
    trait_major = U.transpose(0, 2, 1).reshape(S, -1)  # == U[s].ravel(order="F") for every s
    np.testing.assert_array_equal(trait_major[7], U[7].ravel(order="F"))
    z = _zscores_of_covariance(trait_major, np.kron(G2, P1_A))
    assert np.max(np.abs(z)) < 5.0
    animal_major = U.reshape(S, -1)
    z = _zscores_of_covariance(animal_major, np.kron(P1_A, G2))
    assert np.max(np.abs(z)) < 5.0
    # and the two conventions are really different matrices here
    assert np.max(np.abs(np.kron(G2, P1_A) - np.kron(P1_A, G2))) > 0.5


def test_inbred_parents_p3():
    """P3 (KVL notes): F_7 = 0.21875 with inbred parents; a_57 = a_67 = 0.78125, a_27 = 0.4375."""
    sire = [-1, 0, 0, 0, 2, 2, 4]
    dam = [-1, -1, -1, -1, 1, 3, 5]
    F = [0, 0, 0, 0, 0.125, 0.125, 0.21875]
    ped = _pedigree(sire, dam, F)
    S = 400_000
    U = simulate_breeding_values(ped, np.array([[1.0]]), np.random.default_rng(13), n_draws=S)[..., 0]
    M = U.T @ U / S
    A = _tabular_A(np.array(sire), np.array(dam))
    assert A[4, 6] == pytest.approx(0.78125) and A[1, 6] == pytest.approx(0.4375)
    assert A[6, 6] == pytest.approx(1.21875)
    se = np.sqrt((np.outer(np.diag(A), np.diag(A)) + A**2) / S)
    assert np.max(np.abs(M - A) / se) < 5.0


def _random_pedigree(rng, n=40, founders=6, selfing=True):
    sire = np.full(n, -1)
    dam = np.full(n, -1)
    for i in range(founders, n):
        sire[i] = rng.integers(0, i) if rng.random() > 0.15 else -1
        dam[i] = rng.integers(0, i) if rng.random() > 0.15 else -1
    if selfing:
        sire[n - 1] = dam[n - 1] = n - 2  # one selfed animal
    return sire, dam


def test_random_pedigree_with_inbreeding_and_selfing_matches_tabular_A():
    rng = np.random.default_rng(5)
    sire, dam = _random_pedigree(rng)
    A = _tabular_A(sire, dam)
    F = np.diag(A) - 1.0
    assert F.max() > 0.4  # the selfed animal is strongly inbred
    ped = _pedigree(sire, dam, F)
    S = 100_000
    U = simulate_breeding_values(ped, np.array([[1.0]]), np.random.default_rng(14), n_draws=S)[..., 0]
    M = U.T @ U / S
    se = np.sqrt((np.outer(np.diag(A), np.diag(A)) + A**2) / S)
    assert np.max(np.abs(M - A) / se) < 5.5  # 820 distinct entries: 5.5 SE keeps false alarms < 1e-5


def test_mendelian_deviations_are_exact_and_independent():
    """u_i - (u_s + u_d)/2 = φ_i exactly, i.e. (I - P) U = Φ (A = T D T', T = (I - P)^-1; Mrode p. 25)."""
    rng = np.random.default_rng(6)
    sire, dam = _random_pedigree(rng)
    A = _tabular_A(sire, dam)
    ped = _pedigree(sire, dam, np.diag(A) - 1.0)
    G3 = np.array([[1.0, 0.3, -0.2], [0.3, 2.0, 0.5], [-0.2, 0.5, 0.7]])
    U, phi = simulate_breeding_values(ped, G3, np.random.default_rng(15), n_draws=5000,
                                      return_mendelian=True)
    parent_sum = np.zeros_like(U)
    for parent in (sire, dam):
        known = parent >= 0
        parent_sum[:, known] += U[:, parent[known]]
    np.testing.assert_allclose(U - 0.5 * parent_sum, phi, atol=1e-12)
    # φ_i / sqrt(b_i) are N(0, G): the Mendelian-sampling estimator (1/n) Σ φφ'/b recovers G.
    w = phi / np.sqrt(ped.mendelian)[None, :, None]
    X = w.reshape(-1, 3)
    z = _zscores_of_covariance(X, G3)
    assert np.max(np.abs(z)) < 5.0


def test_one_G_per_draw_scales_exactly():
    """With the same generator state, G_s = c_s G gives U_s = sqrt(c_s) U_s(G) (Cholesky of cG = sqrt(c) chol G)."""
    ped = _pedigree(P1_SIRE, P1_DAM, P1_F)
    c = np.array([0.5, 1.0, 4.0, 9.0])
    base = simulate_breeding_values(ped, G2, np.random.default_rng(3), n_draws=4)
    stack = simulate_breeding_values(ped, c[:, None, None] * G2, np.random.default_rng(3))
    np.testing.assert_allclose(stack, np.sqrt(c)[:, None, None] * base, rtol=1e-12, atol=1e-12)


def test_shapes_and_argument_errors():
    ped = _pedigree(P1_SIRE, P1_DAM, P1_F)
    assert simulate_breeding_values(ped, G2, np.random.default_rng(0)).shape == (1, 6, 2)
    with pytest.raises(UserError, match="n_draws = 3 but G holds 2 draws"):
        simulate_breeding_values(ped, np.stack([G2, G2]), np.random.default_rng(0), n_draws=3)
    with pytest.raises(UserError, match=r"shape \(t, t\) or \(draws, t, t\)"):
        simulate_breeding_values(ped, np.ones((2, 2, 2, 2)), np.random.default_rng(0))
    with pytest.raises(UserError, match="not symmetric"):
        simulate_breeding_values(ped, np.array([[1.0, 0.5], [0.0, 1.0]]), np.random.default_rng(0))
    with pytest.raises(UserError, match="at least 1"):
        simulate_breeding_values(ped, G2, np.random.default_rng(0), n_draws=0)
    flat = Pedigree(ids=ped.ids, sire=ped.sire, dam=ped.dam, generation=np.zeros(6, dtype=np.int64),
                    inbreeding=ped.inbreeding)
    with pytest.raises(UserError, match="animal 3 is not in a later generation than its parent"):
        simulate_breeding_values(flat, G2, np.random.default_rng(0))


def test_covariance_factor_is_cholesky_for_positive_definite():
    rng = np.random.default_rng(7)
    X = rng.standard_normal((5, 4, 10))
    G = X @ X.transpose(0, 2, 1) / 10
    L = covariance_factor(G)
    for k in range(5):
        np.testing.assert_allclose(L[k], scipy.linalg.cholesky(G[k], lower=True), atol=1e-12)


def test_covariance_factor_singular_and_broadcast():
    rng = np.random.default_rng(8)
    v = rng.standard_normal((2, 3, 4, 2))
    G = v @ v.swapaxes(-1, -2)  # rank 2 of 4: PSD-singular
    G[0, 1] = np.eye(4) * 3.0  # one positive-definite matrix among them
    L = covariance_factor(G)
    assert L.shape == (2, 3, 4, 4)
    np.testing.assert_allclose(L @ L.swapaxes(-1, -2), G, atol=1e-10)
    np.testing.assert_allclose(L[0, 1], np.sqrt(3.0) * np.eye(4), atol=1e-12)
    # a zero matrix (no genetic variance) is allowed and gives zero breeding values
    ped = _pedigree(P1_SIRE, P1_DAM, P1_F)
    assert np.all(simulate_breeding_values(ped, np.zeros((2, 2)), np.random.default_rng(0)) == 0)


def test_covariance_factor_rejects_non_covariances():
    with pytest.raises(UserError, match="not positive semi-definite"):
        covariance_factor(np.array([[1.0, 2.0], [2.0, 1.0]]))
    with pytest.raises(UserError, match="NaN or infinite"):
        covariance_factor(np.array([[1.0, np.nan], [np.nan, 1.0]]))
    with pytest.raises(UserError, match="square matrix"):
        covariance_factor(np.ones((2, 3)))
