"""Random skewers: exact identities, a quadrature value and the random-direction reference."""

import numpy as np
import pytest
from scipy import integrate, stats

from ped2g.compare import skewers

from conftest import circle_skewers, random_spd


def random_rotation(rng: np.random.Generator, t: int) -> np.ndarray:
    return stats.special_ortho_group.rvs(t, random_state=rng)


def test_unit_skewers_are_unit_vectors():
    B = skewers.unit_skewers(500, 4, np.random.default_rng(0))
    assert B.shape == (500, 4)
    np.testing.assert_allclose(np.linalg.norm(B, axis=1), 1.0, rtol=0, atol=1e-14)


def test_proportional_matrices_give_one_for_every_skewer():
    # Exact identity (docs/methods.md §7.1): responses of c*G are parallel to those of G.
    rng = np.random.default_rng(1)
    G = random_spd(rng, 4, (5,))
    pair = np.stack([G, 2.5 * G], axis=1)
    B = skewers.unit_skewers(300, 4, rng)
    out = skewers.skewer_statistics(pair, B)
    np.testing.assert_allclose(out["correlation"][:, 0, 1], 1.0, rtol=0, atol=1e-12)
    # arccos near 1 loses half the digits: an error of 1e-16 in r is ~1e-6 degrees.
    np.testing.assert_allclose(out["angle"][:, 0, 1], 0.0, atol=1e-5)
    np.testing.assert_allclose(out["magnitude_ratio"][:, 0, 1], 1 / 2.5, rtol=1e-12)
    np.testing.assert_allclose(out["magnitude_ratio"][:, 1, 0], 2.5, rtol=1e-12)


def test_orthogonal_rank_one_matrices_give_zero():
    # docs/methods.md §7.1: diag(1, 0) and diag(0, 1) respond along perpendicular axes.
    G = np.array([[[[1.0, 0], [0, 0]], [[0, 0], [0, 1.0]]]])
    out = skewers.skewer_statistics(G, skewers.unit_skewers(100, 2, np.random.default_rng(2)))
    assert abs(out["correlation"][0, 0, 1]) < 1e-12
    np.testing.assert_allclose(out["angle"][0, 0, 1], 90.0, atol=1e-10)


def test_identity_versus_diag_1_4_matches_quadrature():
    # rbar = (1/2pi) int_0^2pi (cos^2 + 4 sin^2) / sqrt(cos^2 + 16 sin^2) dtheta = 0.902780
    # (docs/methods.md §7.1, a computed value), recomputed here with scipy.integrate.quad.
    f = lambda th: (np.cos(th) ** 2 + 4 * np.sin(th) ** 2) / np.sqrt(np.cos(th) ** 2 + 16 * np.sin(th) ** 2)
    exact = integrate.quad(f, 0, 2 * np.pi, epsabs=1e-13, epsrel=1e-13)[0] / (2 * np.pi)
    assert round(exact, 6) == 0.902780
    G = np.array([[np.eye(2), np.diag([1.0, 4.0])]])
    out = skewers.skewer_statistics(G, circle_skewers(2048))
    np.testing.assert_allclose(out["correlation"][0, 0, 1], exact, rtol=0, atol=1e-12)
    # Random skewers agree within Monte Carlo error (sd of r over skewers < 0.1; 5 standard errors).
    out = skewers.skewer_statistics(G, skewers.unit_skewers(40_000, 2, np.random.default_rng(3)))
    assert abs(out["correlation"][0, 0, 1] - exact) < 5 * 0.1 / np.sqrt(40_000)


def test_random_correlation_for_three_traits_is_uniform():
    # docs/methods.md §7.1: for t = 3, r ~ Uniform(-1, 1) exactly (Archimedes' hat-box theorem).
    r = np.linspace(-1, 1, 41)
    np.testing.assert_allclose(skewers.random_correlation_cdf(r, 3), (r + 1) / 2, atol=1e-14)
    rng = np.random.default_rng(4)
    u, v = skewers.unit_skewers(20_000, 3, rng), skewers.unit_skewers(20_000, 3, rng)
    sample = np.einsum("ni,ni->n", u, v)
    assert stats.kstest(sample, stats.uniform(-1, 2).cdf).pvalue > 1e-3
    # The same Monte Carlo sample also fits the general CDF, for t = 8 as well.
    u, v = skewers.unit_skewers(20_000, 8, rng), skewers.unit_skewers(20_000, 8, rng)
    sample = np.einsum("ni,ni->n", u, v)
    assert stats.kstest(sample, lambda x: skewers.random_correlation_cdf(x, 8)).pvalue > 1e-3


@pytest.mark.parametrize("t, mean_abs, upper", [
    (2, 2 / np.pi, np.cos(0.05 * np.pi)),   # docs/methods.md §7.1, closed forms for t = 2
    (3, 0.5, 0.9),                          # docs/methods.md §7.1, uniform case
])
def test_random_reference_values_closed_forms(t, mean_abs, upper):
    ref = skewers.random_reference(t, 1000, 0.95)
    assert abs(ref["mean_abs_correlation"] - mean_abs) < 1e-12
    assert abs(ref["correlation_upper"] - upper) < 1e-12
    assert abs(ref["mean_correlation_upper"] - stats.norm.ppf(0.95) / np.sqrt(1000 * t)) < 1e-15


def test_random_reference_values_eight_traits_by_quadrature():
    # Independent route: integrate the density (1 - r^2)^((t-3)/2) numerically (scipy.integrate)
    # and solve for the 95% point (scipy.optimize.brentq); docs/methods.md §7.1 prints E|r| = 0.29103 and
    # r* = 0.58220 for t = 8 (five decimals, so agreement to 1e-5).
    from scipy import optimize
    t = 8
    dens = lambda r: (1 - r * r) ** ((t - 3) / 2)
    norm = integrate.quad(dens, -1, 1, epsabs=1e-14)[0]
    mean_abs = 2 * integrate.quad(lambda r: r * dens(r), 0, 1, epsabs=1e-14)[0] / norm
    upper = optimize.brentq(lambda c: integrate.quad(dens, c, 1, epsabs=1e-14)[0] / norm - 0.05, 0, 1, xtol=1e-14)
    ref = skewers.random_reference(t, 1000, 0.95)
    assert abs(ref["mean_abs_correlation"] - mean_abs) < 1e-10
    assert abs(ref["correlation_upper"] - upper) < 1e-10
    assert abs(ref["mean_abs_correlation"] - 0.29103) < 1e-5
    assert abs(ref["correlation_upper"] - 0.58220) < 1e-5


def test_common_rotation_of_trait_space_leaves_statistics_unchanged():
    rng = np.random.default_rng(5)
    G = random_spd(rng, 4, (6, 3))
    B = skewers.unit_skewers(200, 4, rng)
    Q = random_rotation(rng, 4)
    base = skewers.skewer_statistics(G, B)
    rot = skewers.skewer_statistics(Q @ G @ Q.T, B @ Q.T)
    for name in ("correlation", "angle", "magnitude_ratio", "response_magnitude"):
        np.testing.assert_allclose(rot[name], base[name], rtol=1e-10, atol=1e-10)


def test_rescaling_one_population_changes_only_magnitudes():
    rng = np.random.default_rng(6)
    G = random_spd(rng, 3, (4, 2))
    B = skewers.unit_skewers(150, 3, rng)
    base = skewers.skewer_statistics(G, B)
    scaled = skewers.skewer_statistics(G * np.array([1.0, 7.0])[None, :, None, None], B)
    np.testing.assert_allclose(scaled["correlation"], base["correlation"], rtol=1e-12)
    np.testing.assert_allclose(scaled["magnitude_ratio"][:, 0, 1], base["magnitude_ratio"][:, 0, 1] / 7, rtol=1e-12)


def test_zero_response_skewer_is_dropped_and_counted():
    G = np.array([[np.diag([1.0, 0.0]), np.eye(2)]])
    B = np.array([[0.0, 1.0], [1.0, 0.0], [np.sqrt(0.5), np.sqrt(0.5)]])
    out = skewers.skewer_statistics(G, B)
    assert out["dropped"][0].tolist() == [1, 0]
    # Remaining skewers: (1,0) gives r = 1; (s,s) gives responses (s,0) and (s,s): r = 1/sqrt(2).
    np.testing.assert_allclose(out["correlation"][0, 0, 1], (1 + np.sqrt(0.5)) / 2, rtol=1e-12)


def test_chunking_does_not_change_results():
    rng = np.random.default_rng(7)
    G = random_spd(rng, 3, (50, 3))
    B = skewers.unit_skewers(100, 3, rng)
    whole = skewers.skewer_statistics(G, B, budget_bytes=1e9)
    pieces = skewers.skewer_statistics(G, B, budget_bytes=1e4)
    for name in whole:
        np.testing.assert_array_equal(whole[name], pieces[name])
