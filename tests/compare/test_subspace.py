"""Krzanowski's common subspace: identities with principal angles (scipy) and exact cases."""

import numpy as np
import pytest
from scipy import linalg, stats

from ped2g.compare import subspace
from ped2g.errors import UserError

from conftest import random_spd


def test_two_subspaces_give_one_plus_minus_cos_principal_angles():
    # Non-zero eigenvalues of H are 1 +- cos(theta_p) for the principal angles theta_p between
    # the two subspaces (docs/methods.md §7.2), checked against scipy.linalg.subspace_angles.
    rng = np.random.default_rng(0)
    for t, k in [(7, 3), (6, 3), (5, 2)]:
        G = random_spd(rng, t, (1, 2))
        out = subspace.common_subspace(G, k)
        A1, A2 = out["A"][0, 0], out["A"][0, 1]
        cos = np.cos(linalg.subspace_angles(A1, A2))
        expected = np.sort(np.concatenate([1 + cos, 1 - cos, np.zeros(t - 2 * k)]))[::-1]
        np.testing.assert_allclose(out["eigenvalues"][0], expected, rtol=0, atol=1e-12)


def test_identical_matrices_give_m_k_times_then_zero():
    rng = np.random.default_rng(1)
    G0 = random_spd(rng, 6)
    G = np.broadcast_to(G0, (2, 4, 6, 6))
    w = subspace.common_subspace(G, 2)["eigenvalues"]
    np.testing.assert_allclose(w, np.tile([4, 4, 0, 0, 0, 0], (2, 1)), atol=1e-12)


def test_complementary_subspaces_give_all_ones():
    Q = stats.special_ortho_group.rvs(4, random_state=2)
    G1 = Q @ np.diag([5.0, 4.0, 1.0, 0.5]) @ Q.T
    G2 = Q @ np.diag([0.5, 1.0, 4.0, 5.0]) @ Q.T
    w = subspace.common_subspace(np.array([[G1, G2]]), 2)["eigenvalues"]
    np.testing.assert_allclose(w, np.ones((1, 4)), atol=1e-12)


def test_sum_of_squared_cosines_equals_eigenvalue_and_trace():
    # sum_i cos^2 delta_i(h_j) = lambda_j and tr H = m k (docs/methods.md §7.2, exact identities).
    rng = np.random.default_rng(3)
    G = random_spd(rng, 5, (3, 4))
    out = subspace.common_subspace(G, 2)
    for s in range(3):
        w, h = np.linalg.eigh(out["H"][s])
        ang = subspace.angles_to_axes(out["A"][s:s + 1], h)[0]
        np.testing.assert_allclose((np.cos(np.radians(ang)) ** 2).sum(0), w, atol=1e-12)
    np.testing.assert_allclose(np.trace(out["H"], axis1=1, axis2=2), 4 * 2, atol=1e-12)
    assert (out["eigenvalues"] > -1e-12).all() and (out["eigenvalues"] < 4 + 1e-12).all()


def test_invariant_to_rotation_and_to_rescaling_each_population():
    rng = np.random.default_rng(4)
    G = random_spd(rng, 5, (3, 3))
    Q = stats.special_ortho_group.rvs(5, random_state=5)
    base = subspace.common_subspace(G, 2)["eigenvalues"]
    rot = subspace.common_subspace(Q @ G @ Q.T, 2)["eigenvalues"]
    scaled = subspace.common_subspace(G * np.array([1.0, 3.0, 0.2])[None, :, None, None], 2)["eigenvalues"]
    np.testing.assert_allclose(rot, base, atol=1e-12)
    np.testing.assert_allclose(scaled, base, atol=1e-12)


def test_reference_axes_are_the_eigenvectors_of_H():
    rng = np.random.default_rng(6)
    G = random_spd(rng, 4, (3,))
    w, h = subspace.reference_axes(G, 2)
    H = subspace.common_subspace(G[None], 2)["H"][0]
    np.testing.assert_allclose(H @ h, h * w, atol=1e-12)
    assert (np.abs(h).argmax(0) == np.argmax(h, axis=0)).all()   # largest element positive


def test_dims_default_warning_and_refusal():
    assert subspace.check_dims(None, 8) == (4, None)
    assert subspace.check_dims(None, 3) == (1, None)
    k, warn = subspace.check_dims(5, 8)
    assert k == 5 and "share at least 2 dimension" in warn
    with pytest.raises(UserError, match="compare.subspace_dims.*smaller than the number of traits"):
        subspace.check_dims(8, 8)
