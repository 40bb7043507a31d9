"""g_max, its share of variance and Schluter's angle (docs/methods.md §7.4)."""

import numpy as np
import pytest
from scipy import stats

from ped2g.compare import gmax
from ped2g.compare.skewers import unit_skewers


def test_angle_examples():
    # docs/methods.md §7.4: G = [[2,1],[1,2]], d = (1,0) -> 45 deg; d along g_max -> 0 deg.
    G = np.array([[2.0, 1.0], [1.0, 2.0]])
    g = gmax.leading_axis(G)["vector"]
    assert abs(gmax.angle(g, np.array([1.0, 0.0])) - 45.0) < 1e-12
    assert gmax.angle(g, np.array([3.0, 3.0])) < 1e-6
    # Invariant to rescaling G or d, and to the sign of either.
    g2 = gmax.leading_axis(7.5 * G)["vector"]
    assert abs(gmax.angle(-g2, np.array([-4.0, 0.0])) - 45.0) < 1e-12


def test_share_and_eigengap():
    out = gmax.leading_axis(np.diag([3.0, 1.0]))
    assert out["share"] == pytest.approx(0.75, abs=1e-15)
    assert out["eigengap"] == pytest.approx(2 / 3, abs=1e-15)


def test_divergence_axis_of_two_populations_is_the_mean_difference():
    means = np.array([[[1.0, 2.0, 3.0], [2.0, 0.0, 3.5]]])
    d = gmax.divergence_axis(means)[0]
    diff = means[0, 0] - means[0, 1]
    np.testing.assert_allclose(abs(d @ diff) / np.linalg.norm(diff), 1.0, atol=1e-12)
    assert np.isnan(gmax.divergence_axis(np.ones((1, 2, 3)))).all()


@pytest.mark.parametrize("t, mean", [(2, 45.0), (3, np.degrees(1.0))])
def test_random_angle_reference_exact_cases(t, mean):
    # docs/methods.md §7.4: 45 deg for t = 2; exactly 1 rad for t = 3 (|cos| is uniform).
    assert abs(gmax.random_angle_reference(t)["mean"] - mean) < 1e-9


def test_random_angle_reference_eight_traits_against_monte_carlo():
    # docs/methods.md §7.4 gives ~72.55 deg for t = 8 (computed value); Monte Carlo with 200,000 random
    # directions (sd of the angle < 15 deg, 5 standard errors) and the lower 5% point.
    ref = gmax.random_angle_reference(8, 0.95)
    assert abs(ref["mean"] - 72.55) < 0.01
    u = unit_skewers(200_000, 8, np.random.default_rng(0))
    theta = gmax.angle(u, np.eye(8)[0])
    assert abs(theta.mean() - ref["mean"]) < 5 * 15 / np.sqrt(200_000)
    assert abs((theta < ref["lower"]).mean() - 0.05) < 5 * np.sqrt(0.05 * 0.95 / 200_000)


def test_angle_invariant_to_a_common_rotation():
    rng = np.random.default_rng(1)
    X = rng.standard_normal((4, 4))
    G = X @ X.T + np.eye(4)
    d = rng.standard_normal(4)
    Q = stats.special_ortho_group.rvs(4, random_state=2)
    a = gmax.angle(gmax.leading_axis(G)["vector"], d)
    b = gmax.angle(gmax.leading_axis(Q @ G @ Q.T)["vector"], Q @ d)
    assert abs(a - b) < 1e-9


def test_angle_between_populations_is_the_rotation_angle():
    # Rotating a 2 x 2 G with distinct eigenvalues by theta turns g_max by theta (exact).
    G = np.diag([3.0, 1.0])
    angles = [0.0, 20.0, 60.0, 90.0]
    mats = []
    for a in angles:
        c, s = np.cos(np.radians(a)), np.sin(np.radians(a))
        Q = np.array([[c, -s], [s, c]])
        mats.append(Q @ G @ Q.T)
    vec = gmax.leading_axis(np.array(mats)[None])["vector"]
    out = gmax.pair_angles(vec)[0]
    np.testing.assert_allclose(out[0], angles, atol=1e-6)
    np.testing.assert_allclose(out, out.T, atol=1e-12)
    assert abs(out[1, 2] - 40.0) < 1e-6
