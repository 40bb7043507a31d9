"""Genetic covariance tensor: rank, proportional sets, the two-population identity (docs/methods.md §7.3)."""

import numpy as np
from scipy import stats

from ped2g.compare import tensor

from conftest import random_spd


def eig_of(G: np.ndarray, **kw) -> dict:
    t = G.shape[-1]
    return tensor.eigentensors(tensor.covariance_tensor(G[None])[0], t, **kw)


def test_vector_map_preserves_the_frobenius_inner_product_and_inverts():
    rng = np.random.default_rng(0)
    A, B = random_spd(rng, 4, (2,))
    assert abs(tensor.to_vector(A) @ tensor.to_vector(B) - np.trace(A @ B)) < 1e-12
    np.testing.assert_allclose(tensor.from_vector(tensor.to_vector(A), 4), A, atol=1e-15)
    assert tensor.element_pairs(3) == [(0, 0), (1, 1), (2, 2), (0, 1), (0, 2), (1, 2)]


def test_number_of_nonzero_eigenvalues_is_min_m_minus_one_q():
    rng = np.random.default_rng(1)
    for m, t in [(5, 3), (12, 3), (2, 4), (4, 2)]:
        w = eig_of(random_spd(rng, t, (m,)))["eigenvalues"]
        n_nonzero = int((w > 1e-10 * w[0]).sum())
        assert n_nonzero == min(m - 1, t * (t + 1) // 2), (m, t)


def test_proportional_set_has_one_eigentensor_aligned_with_the_common_matrix():
    rng = np.random.default_rng(2)
    G0 = random_spd(rng, 3)
    G = np.array([c * G0 for c in (0.5, 1, 1.5, 2, 3)])
    out = eig_of(G)
    assert (out["eigenvalues"][1:] < 1e-10 * out["eigenvalues"][0]).all()
    cos = abs(np.trace(out["E"][0] @ G0)) / np.linalg.norm(G0)
    assert abs(cos - 1) < 1e-12


def test_two_populations_first_eigenvalue_is_half_squared_frobenius_distance():
    rng = np.random.default_rng(3)
    G1, G2 = random_spd(rng, 4, (2,))
    out = eig_of(np.array([G1, G2]))
    D = G1 - G2
    assert abs(out["eigenvalues"][0] - np.sum(D * D) / 2) < 1e-12
    E1 = out["E"][0]
    np.testing.assert_allclose(np.abs(np.sum(E1 * D)) / np.linalg.norm(D), 1.0, atol=1e-12)


def test_eigentensor_properties():
    # docs/methods.md §7.3: orthonormal under tr(AB); variance of coordinates = eigenvalue; trace
    # identity; reconstruction; sum of squared eigentensor eigenvalues = 1.
    rng = np.random.default_rng(4)
    m, t = 5, 3
    G = random_spd(rng, t, (m,))
    out = eig_of(G)
    E = out["E"]
    gram = np.einsum("kij,lij->kl", E, E)
    np.testing.assert_allclose(gram, np.eye(len(E)), atol=1e-12)
    c = tensor.coordinates(G[None], E)[0]                           # (m, n)
    np.testing.assert_allclose(c.var(axis=0, ddof=1), out["eigenvalues"], atol=1e-12)
    np.testing.assert_allclose(out["eigenvalues"].sum(), G.var(axis=0, ddof=1).sum(), rtol=1e-12)
    recon = G.mean(0) + np.einsum("mk,kij->mij", c - c.mean(0), E)
    np.testing.assert_allclose(recon, G, atol=1e-12)
    np.testing.assert_allclose((out["epsilon"] ** 2).sum(-1), 1.0, atol=1e-12)
    assert (np.diff(np.abs(out["epsilon"]), axis=-1) <= 1e-15).all()
    for k in range(len(E)):
        for j in range(t):
            v = out["e"][k, :, j]
            np.testing.assert_allclose(E[k] @ v, out["epsilon"][k, j] * v, atol=1e-12)


def test_projection_on_own_eigentensors_returns_eigenvalues_and_vector_variance():
    rng = np.random.default_rng(5)
    G = random_spd(rng, 3, (2, 4))
    S = tensor.covariance_tensor(G)
    out = tensor.eigentensors(S[0], 3)
    np.testing.assert_allclose(tensor.project(S[:1], out["vectors"])[0], out["eigenvalues"], atol=1e-12)
    var = tensor.variance_along(G, out["e"])                          # (S, m, n, t)
    manual = np.einsum("a,ab,b->", out["e"][1, :, 2], G[1, 3], out["e"][1, :, 2])
    assert abs(var[1, 3, 1, 2] - manual) < 1e-12


def test_eigenvalues_invariant_to_a_common_rotation():
    rng = np.random.default_rng(6)
    G = random_spd(rng, 4, (6,))
    Q = stats.special_ortho_group.rvs(4, random_state=7)
    w = eig_of(G)["eigenvalues"]
    w_rot = eig_of(Q @ G @ Q.T)["eigenvalues"]
    np.testing.assert_allclose(w_rot, w, atol=1e-12)
