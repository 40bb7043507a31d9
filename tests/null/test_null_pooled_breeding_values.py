"""Simulated breeding values reproduce A, draws are checked, and pooling picks the right animals."""

import numpy as np
import pytest

from null_helpers import mrode_p1, mrode_p2
from ped2g.null.pooled_breeding_values import check_draws, simulate_pooled
from ped2g.rng import generator
from ped2g.simulate.breeding_values import simulate_breeding_values

from textbook import P1_A as MRODE_P1_A  # Mrode (2014) Table 2.1 A (see tests/textbook.py)


def test_simulated_breeding_values_have_covariance_a_kron_g():
    # docs/methods.md §3: cov(u_i, u_k) = a_ik G, e.g. var(u_6) = 1.125 G, cov(u_5, u_6) = 0.6875 G.
    ped = mrode_p1()
    G = np.array([[1.0, 0.4], [0.4, 0.8]])
    S = 40000
    u, _ = simulate_pooled([ped, mrode_p2()], [np.arange(6), np.arange(8)],
                           np.broadcast_to(G, (S, 2, 2, 2)),
                           [generator(7, "p1"), generator(7, "p2")], need_phi=False)
    x = u[:, :6].reshape(S, 12)  # animal-major: covariance kron(A, G)
    emp = x.T @ x / S  # known mean zero
    target = np.kron(MRODE_P1_A, G)
    se = np.sqrt((np.outer(np.diag(target), np.diag(target)) + target ** 2) / S)
    assert np.max(np.abs(emp - target) / se) < 4.5
    # the second population's animals are independent of the first's
    cross = u[:, :6, 0].T @ u[:, 6:, 0] / S
    assert np.max(np.abs(cross)) < 4.5 * np.sqrt(1.125 * 1.25 / S)


def test_pooled_rows_are_the_phenotyped_animals_of_each_population():
    # Same streams -> the pooled rows equal the simulator's own rows of the chosen animals.
    p1, p2 = mrode_p1(), mrode_p2()
    G = np.stack([np.eye(2), 2 * np.eye(2)])[None].repeat(3, axis=0)
    members = [np.array([2, 4, 5]), np.array([0, 7])]
    u, phi = simulate_pooled([p1, p2], members, G, [generator(1, "a"), generator(1, "b")])
    U1, f1 = simulate_breeding_values(p1, G[:, 0], generator(1, "a"), return_mendelian=True)
    U2, f2 = simulate_breeding_values(p2, G[:, 1], generator(1, "b"), return_mendelian=True)
    np.testing.assert_array_equal(u, np.concatenate([U1[:, members[0]], U2[:, members[1]]], axis=1))
    np.testing.assert_array_equal(phi, np.concatenate([f1[:, members[0]], f2[:, members[1]]], axis=1))


def test_singular_draw_is_simulated_in_its_span():
    # G = v v' has rank 1: every breeding value must be a multiple of v. The eigen square root
    # turns round-off eigenvalues (~ eps * |v|^2) into components of size sqrt(eps) * |v| ~ 3e-8
    # off the span, so the bound is set at 1e-6, far below the size of the values themselves.
    v = np.array([1.0, -2.0, 0.5])
    G = np.outer(v, v)[None, None]
    u, _ = simulate_pooled([mrode_p1()], [np.arange(6)], G, [generator(3, "x")], need_phi=False)
    resid = u[0] - np.outer(u[0] @ v / (v @ v), v)
    assert np.max(np.abs(resid)) < 1e-6
    assert np.max(np.abs(u)) > 0.1


def test_check_draws_sorts_positive_definite_singular_and_invalid():
    good = np.array([[2.0, 0.3], [0.3, 1.0]])
    singular = np.array([[1.0, 2.0], [2.0, 4.0]])
    negative = np.array([[1.0, 2.0], [2.0, 1.0]])  # eigenvalues 3 and -1
    nan = np.array([[1.0, np.nan], [np.nan, 1.0]])
    G = np.stack([np.stack([good, singular]), np.stack([negative, nan])])
    check = check_draws(G)
    np.testing.assert_array_equal(check.singular, [[False, True], [False, False]])
    np.testing.assert_array_equal(check.invalid, [[False, False], [True, True]])
    zero = check_draws(np.zeros((1, 1, 2, 2)))
    assert zero.singular.all() and not zero.invalid.any()


@pytest.mark.parametrize("scale", [1.0, 1e-6, 1e6])
def test_check_draws_is_scale_free(scale):
    G = scale * np.array([[1.0, 1.0], [1.0, 1.0 + 1e-12]])[None, None]
    assert check_draws(G).singular.all()
