"""The null's G estimators and the relatedness deflation c = 1 + Fbar - abar."""

import itertools

import numpy as np
import pytest

from null_helpers import mrode_p1, mrode_p2, random_pedigree, tabular_a
from ped2g.null.estimators import (dummy_covariances, mendelian_estimator, pooled_deflation,
                                   relatedness_deflation, relationship_quadratic,
                                   sample_covariance_estimator)
from ped2g.null.shuffle import shuffle_permutations
from ped2g.pedigree.relationships import relationship_matrix
from ped2g.simulate.breeding_values import simulate_breeding_values

# A-inverse of Mrode (2014) Example 3.1 (8 animals, none inbred), printed on p. 58 to three
# decimals; the entries 1.833 and -0.667 are the exact rule values 11/6 and -2/3 (Henderson's
# rules for one known parent, Mrode p. 27).
MRODE_P2_AINV = np.array([
    [11 / 6, 0.5, 0, -2 / 3, 0, -1, 0, 0],
    [0.5, 2.0, 0.5, 0, -1, -1, 0, 0],
    [0, 0.5, 2.0, 0, -1, 0.5, 0, -1],
    [-2 / 3, 0, 0, 11 / 6, 0.5, 0, -1, 0],
    [0, -1, -1, 0.5, 2.5, 0, -1, 0],
    [-1, -1, 0.5, 0, 0, 2.5, 0, -1],
    [0, 0, 0, -1, -1, 0, 2, 0],
    [0, 0, -1, 0, 0, -1, 0, 2],
])


def c_from_matrix(A):
    """c = (tr A - 1'A1/n)/(n-1), straight from its definition."""
    n = len(A)
    return (np.trace(A) - A.sum() / n) / (n - 1)


def test_deflation_of_mrode_p2_is_0_7411():
    # Oracle 1: A = inverse of the A-inverse printed in Mrode (2014) p. 58.
    # Oracle 2: ped2g's relationship matrix. Value 0.7411 from docs/methods.md §5.5 [C].
    ped = mrode_p2()
    c = relatedness_deflation(ped, np.arange(8))
    assert c == pytest.approx(c_from_matrix(np.linalg.inv(MRODE_P2_AINV)), abs=1e-12)
    assert c == pytest.approx(c_from_matrix(relationship_matrix(ped)), abs=1e-12)
    assert c == pytest.approx(0.7411, abs=5e-5)
    # 1 + Fbar - abar form: no inbreeding here, so c = 1 - abar.
    A = np.linalg.inv(MRODE_P2_AINV)
    abar = (A.sum() - np.trace(A)) / (8 * 7)
    assert c == pytest.approx(1 - abar, abs=1e-12)


def test_quadratic_form_matches_tabular_a_on_an_inbred_pedigree():
    # x'Ax = sum b_i (T'x)_i^2 (A = TDT', Mrode 2014 p. 25) against the tabular A.
    rng = np.random.default_rng(3)
    ped = random_pedigree(rng, 120, founders=10, generations=5)
    assert ped.inbreeding.max() > 0  # the check covers inbred animals
    A = tabular_a(ped.sire, ped.dam)
    for _ in range(5):
        x = rng.standard_normal(ped.n)
        assert relationship_quadratic(ped, x) == pytest.approx(x @ A @ x, rel=1e-12)
    subset = rng.choice(ped.n, 40, replace=False)
    assert relatedness_deflation(ped, subset) == pytest.approx(
        c_from_matrix(A[np.ix_(subset, subset)]), abs=1e-12)


def test_quadratic_form_with_selfing():
    # Selfing: founder 1, 2 = 1x1: A = [[1, 1], [1, 1.5]] (docs/methods.md §1.7 P5, derived [C]).
    from null_helpers import pedigree_from_parents

    ped = pedigree_from_parents([-1, 0], [-1, 0])
    x = np.array([0.3, -1.2])
    assert relationship_quadratic(ped, x) == pytest.approx(x @ np.array([[1, 1], [1, 1.5]]) @ x)


def test_pooled_deflation_is_the_mean_over_every_possible_dummy_population():
    # Exact identity: enumerate every subset of size k of the pool (two unrelated pedigrees),
    # average c of the block of A; it equals 1 + Fbar_pool - abar_pool.
    p1, p2 = mrode_p1(), mrode_p2()
    A1, A2 = tabular_a(p1.sire, p1.dam), tabular_a(p2.sire, p2.dam)
    A = np.zeros((14, 14))
    A[:6, :6], A[6:, 6:] = A1, A2
    expected = pooled_deflation([p1, p2], [np.arange(6), np.arange(8)])
    for k in (2, 5, 9):
        cs = [c_from_matrix(A[np.ix_(s, s)]) for s in itertools.combinations(range(14), k)]
        assert np.mean(cs) == pytest.approx(expected, abs=1e-12)


def test_mendelian_estimator_is_the_known_breeding_value_estimate():
    # Exact identity: Phi' D^-1 Phi = U' A^-1 U since A^-1 = (I-P)' D^-1 (I-P) and Phi = (I-P) U
    # (Henderson 1976; Mrode 2014 p. 27). One population, every animal, no shuffle needed.
    rng = np.random.default_rng(5)
    ped = random_pedigree(rng, 60, founders=8, generations=3)
    G = np.array([[2.0, 0.5], [0.5, 1.0]])
    U, phi = simulate_breeding_values(ped, G, rng, n_draws=3, return_mendelian=True)
    perm = np.broadcast_to(np.arange(ped.n), (3, ped.n))
    est = mendelian_estimator(phi, ped.mendelian, perm, [ped.n])[:, 0]
    Ainv = np.linalg.inv(tabular_a(ped.sire, ped.dam))
    direct = np.einsum("sia,ij,sjb->sab", U, Ainv, U) / ped.n
    np.testing.assert_allclose(est, direct, rtol=1e-10, atol=1e-12)


def test_sample_estimator_matches_numpy_cov_per_dummy_population():
    # Reference library: numpy.cov (divisor n - 1) on the gathered animals.
    rng = np.random.default_rng(8)
    u = rng.standard_normal((4, 11, 3))
    sizes = [5, 6]
    perm = shuffle_permutations(4, 11, rng)
    est = sample_covariance_estimator(u, perm, sizes)
    for s in range(4):
        np.testing.assert_allclose(est[s, 0], np.cov(u[s, perm[s, :5]].T), atol=1e-12)
        np.testing.assert_allclose(est[s, 1], np.cov(u[s, perm[s, 5:]].T), atol=1e-12)


def test_uncentred_moments_match_a_plain_sum():
    rng = np.random.default_rng(9)
    x = rng.standard_normal((2, 7, 2))
    perm = shuffle_permutations(2, 7, rng)
    est = dummy_covariances(x, perm, [3, 4], centre=False)
    rows = x[1, perm[1, 3:]]
    np.testing.assert_allclose(est[1, 1], rows.T @ rows / 4, atol=1e-12)


def test_mendelian_recovers_g_and_sample_recovers_c_g_on_a_large_pedigree():
    # docs/methods.md §5.5: estimator (b) recovers G within Monte Carlo error; estimator (a) recovers
    # c G with c = 1 + Fbar - abar (§6.2). One population, so the shuffle keeps every animal.
    rng = np.random.default_rng(21)
    ped = random_pedigree(rng, 2000, founders=20, generations=6, p_unknown=0.0, breeders=10)
    G = np.array([[1.0, 0.6, -0.2], [0.6, 2.0, 0.3], [-0.2, 0.3, 0.5]])
    S = 300
    U, phi = simulate_breeding_values(ped, G, rng, n_draws=S, return_mendelian=True)
    perm = np.broadcast_to(np.arange(ped.n), (S, ped.n))
    mend = mendelian_estimator(phi, ped.mendelian, perm, [ped.n])[:, 0]
    samp = sample_covariance_estimator(U, perm, [ped.n])[:, 0]
    c = relatedness_deflation(ped, np.arange(ped.n))
    assert c < 0.9  # a related population, so the two estimators really differ

    def z_scores(draws, target):
        se = draws.std(axis=0, ddof=1) / np.sqrt(len(draws))
        return np.abs(draws.mean(axis=0) - target) / se

    assert z_scores(mend, G).max() < 4.0
    assert z_scores(samp, c * G).max() < 4.0
    assert z_scores(samp, G)[np.diag_indices(3)].min() > 10.0  # the deflation is real


def test_bad_arguments_raise():
    x = np.zeros((2, 4, 2))
    perm = np.broadcast_to(np.arange(4), (2, 4))
    with pytest.raises(ValueError, match="add up to"):
        dummy_covariances(x, perm, [2, 3], centre=True)
    with pytest.raises(ValueError, match="at least 2 animals"):
        sample_covariance_estimator(x, perm, [1, 3])
    with pytest.raises(ValueError, match="must be positive"):
        mendelian_estimator(x, np.array([1.0, 0.5, 0.0, 1.0]), perm, [2, 2])
