"""Standardisation of G (docs/methods.md §6)."""

import numpy as np
import pytest

from ped2g.compare import scale
from ped2g.errors import UserError


def test_mean_and_variance_standardisation_example():
    # docs/methods.md §6: G = [[4,2],[2,9]], mu = (2,3) -> [[1, 1/3],[1/3, 1]]; P = diag(8, 18) ->
    # heritabilities (0.5, 0.5) on the diagonal.
    G = np.array([[[[4.0, 2.0], [2.0, 9.0]]]])
    P = np.array([[np.diag([8.0, 18.0])]])
    mu = np.array([[[2.0, 3.0]]])
    Gm = scale.standardise(G, scale.scale_factors(P, mu, "mean"))
    np.testing.assert_allclose(Gm[0, 0], [[1, 1 / 3], [1 / 3, 1]], atol=1e-15)
    Gv = scale.standardise(G, scale.scale_factors(P, mu, "variance"))
    np.testing.assert_allclose(np.diagonal(Gv[0, 0]), [0.5, 0.5], atol=1e-15)
    np.testing.assert_array_equal(scale.standardise(G, scale.scale_factors(P, mu, "original")), G)
    # Mean-scaled gradients: (beta o mu)' G_mu (beta o mu) = beta' G beta.
    beta = np.array([0.3, -0.7])
    bm = beta * mu[0, 0]
    assert bm @ Gm[0, 0] @ bm == pytest.approx(beta @ G[0, 0] @ beta, rel=1e-14)


def test_pooled_factors():
    P = np.stack([np.diag([1.0, 4.0]), np.diag([9.0, 16.0])])[None]
    mu = np.array([[[1.0, 2.0], [3.0, 6.0]]])
    np.testing.assert_allclose(scale.pooled_factors(P, mu, "variance"), [[np.sqrt(5), np.sqrt(10)]])
    np.testing.assert_allclose(scale.pooled_factors(P, mu, "mean"), [[2.0, 4.0]])
    np.testing.assert_allclose(scale.pooled_factors(P, mu, "original"), [[1.0, 1.0]])


def test_non_positive_means_are_refused_with_names():
    P = np.broadcast_to(np.eye(2), (3, 2, 2, 2))
    mu = np.ones((3, 2, 2))
    mu[1, 1, 0] = -0.5
    with pytest.raises(UserError, match=r"trait 'x' of population 'b' has a mean that is not positive "
                                        r"in 1 of 3 draws.*'variance' or 'original'"):
        scale.scale_factors(P, mu, "mean", ["a", "b"], ["x", "y"])
    with pytest.raises(UserError, match="'log' is not one of original, variance, mean"):
        scale.scale_factors(P, mu, "log")
