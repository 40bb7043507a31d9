"""Riemannian (Foerstner) distance: exact values and metric properties (docs/methods.md §7.7)."""

import numpy as np
import pytest
from scipy import linalg

from ped2g.compare.distance import pairwise_distances, riemannian_distance

from conftest import random_spd


@pytest.mark.parametrize("t", [1, 3, 8])
def test_identity_versus_twice_identity(t):
    assert riemannian_distance(np.eye(t), 2 * np.eye(t)) == pytest.approx(np.sqrt(t) * np.log(2), abs=1e-14)


def test_known_values():
    # docs/methods.md §7.7: d(I, 2I) = 1.200566 for t = 3; d(diag(1,4), I) = ln 4.
    assert round(float(riemannian_distance(np.eye(3), 2 * np.eye(3))), 6) == 1.200566
    assert riemannian_distance(np.diag([1.0, 4.0]), np.eye(2)) == pytest.approx(np.log(4), abs=1e-14)


def test_matches_generalised_eigenvalues_from_scipy():
    rng = np.random.default_rng(0)
    A, B = random_spd(rng, 5, (2,))
    lam = linalg.eigh(B, A, eigvals_only=True)
    assert riemannian_distance(A, B) == pytest.approx(np.sqrt((np.log(lam) ** 2).sum()), rel=1e-12)


def test_metric_properties_on_random_sets():
    rng = np.random.default_rng(1)
    G = random_spd(rng, 4, (20, 3))
    D = pairwise_distances(G)
    np.testing.assert_allclose(D, np.swapaxes(D, 1, 2), atol=1e-12)               # symmetry
    np.testing.assert_allclose(np.diagonal(D, axis1=1, axis2=2), 0.0, atol=1e-7)   # d(A, A) = 0
    assert (D[:, 0, 2] <= D[:, 0, 1] + D[:, 1, 2] + 1e-12).all()                   # triangle
    X = rng.standard_normal((4, 4))                                                 # affine invariance
    np.testing.assert_allclose(pairwise_distances(X @ G @ X.T), D, atol=1e-9)
    np.testing.assert_allclose(pairwise_distances(np.linalg.inv(G)), D, atol=1e-9)  # d(A^-1, B^-1)
