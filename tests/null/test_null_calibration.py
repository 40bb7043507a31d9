"""Calibration of the null (slow): on populations that share one G, observed-versus-null
statistics are flagged at no more than the nominal 5 % rate, and a real difference is flagged.

The observed posteriors are exact conjugate posteriors given the true breeding values (a
stand-in for MCMC fits; see calibration.py for what it is and why it is a fair, favourable test).
"""

import numpy as np
import pytest
from scipy import stats

from calibration import G0, flag_rates

pytestmark = pytest.mark.slow

NOMINAL = 0.05


def _significantly_above(flags: np.ndarray, rate: float) -> float:
    """One-sided binomial p-value (scipy.stats.binomtest) of a flag rate above ``rate``."""
    return stats.binomtest(int(flags.sum()), flags.size, rate, alternative="greater").pvalue


def test_shared_g_is_flagged_at_no_more_than_the_nominal_rate():
    flags = flag_rates(30, seed=3)
    for criterion, f in flags.items():
        # 30 studies x 6 statistics; fail if the rate is significantly above 5 % (p < 0.01)
        assert _significantly_above(f, NOMINAL) > 0.01, (criterion, f.mean(axis=0))
        assert f.mean() <= NOMINAL, (criterion, f.mean())


def test_a_real_difference_is_flagged():
    # Power check, so the calibration test above could fail: the last population's G is twice
    # G0, which the tensor's leading eigenvalue (a scale-sensitive statistic) must flag in
    # nearly every study. Random skewers and Krzanowski's H are scale-free and do not see it.
    flags = flag_rates(10, seed=4, last_g=2.0 * G0)
    assert flags["hpd_no_overlap"][:, 0].mean() >= 0.8
    assert flags["paired"][:, 0].mean() >= 0.8
