"""Credible intervals (ped2g.intervals) against exact values."""

import numpy as np
import pytest
from scipy import stats

from ped2g.intervals import equal_tailed, hpd


def test_hpd_of_evenly_spaced_values():
    # Deterministic case (docs/methods.md §4.1, computed): x = 0..99, mass 0.9 -> the first
    # shortest window of 90 points, [0, 89].
    lo, hi = hpd(np.arange(100.0), 0.9)
    assert (lo, hi) == (0.0, 89.0)


def test_hpd_of_exponential_matches_exact_interval():
    # Exact HPD of Exponential(1) at mass 0.95 is (0, ln 20): the density is decreasing, so the
    # interval starts at 0 and holds 95% mass (exact identity).
    x = np.random.default_rng(3).exponential(size=200_000)
    lo, hi = hpd(x, 0.95)
    assert lo == pytest.approx(0.0, abs=1e-3)
    assert hi == pytest.approx(np.log(20.0), abs=0.03)


def test_hpd_equals_equal_tailed_for_symmetric_normal():
    # For N(0, 1) both intervals are ±Φ⁻¹(0.975) (scipy.stats.norm as reference).
    x = np.random.default_rng(4).standard_normal(400_000)
    z = stats.norm.ppf(0.975)
    for lo, hi in (hpd(x, 0.95), equal_tailed(x, 0.95)):
        assert lo == pytest.approx(-z, abs=0.02)
        assert hi == pytest.approx(z, abs=0.02)


def test_hpd_is_vectorised_over_leading_axes():
    rng = np.random.default_rng(5)
    draws = rng.normal(size=(3, 4, 500)) + np.arange(4)[None, :, None]
    lo, hi = hpd(draws, 0.8)
    assert lo.shape == (3, 4)
    for i in range(3):
        for j in range(4):
            l1, h1 = hpd(draws[i, j], 0.8)
            assert (lo[i, j], hi[i, j]) == (l1, h1)
    # The interval holds the requested share of the draws.
    inside = ((draws >= lo[..., None]) & (draws <= hi[..., None])).mean(-1)
    assert np.all(inside >= 0.8)


def test_equal_tailed_matches_numpy_quantiles_on_axis():
    x = np.random.default_rng(6).gamma(2.0, size=(5, 1000))
    lo, hi = equal_tailed(x, 0.9, axis=1)
    np.testing.assert_allclose(lo, np.quantile(x, 0.05, axis=1))
    np.testing.assert_allclose(hi, np.quantile(x, 0.95, axis=1))


@pytest.mark.parametrize("mass", [0.0, 1.0, 1.5])
def test_mass_outside_unit_interval_is_refused(mass):
    with pytest.raises(ValueError, match="interval mass"):
        hpd(np.arange(10.0), mass)
