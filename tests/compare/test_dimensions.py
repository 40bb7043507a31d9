"""Effective number of dimensions (docs/methods.md §7.6)."""

import numpy as np
import pytest
from scipy import stats

from ped2g.compare.dimensions import effective_dimensions


def test_values():
    Q = stats.special_ortho_group.rvs(4, random_state=0)
    # docs/methods.md §7.6: lambda = (4, 2, 1, 1) -> n_D = 2, participation ratio 64/22 = 2.909.
    out = effective_dimensions(Q @ np.diag([4.0, 2, 1, 1]) @ Q.T)
    assert out["kirkpatrick"] == pytest.approx(2.0, abs=1e-12)
    assert out["participation_ratio"] == pytest.approx(64 / 22, abs=1e-12)
    iso = effective_dimensions(2.5 * np.eye(6))
    assert iso["kirkpatrick"] == pytest.approx(6) and iso["participation_ratio"] == pytest.approx(6)
    v = np.array([1.0, 2.0, 2.0])
    one = effective_dimensions(np.outer(v, v))
    assert one["kirkpatrick"] == pytest.approx(1, abs=1e-12)
    assert one["participation_ratio"] == pytest.approx(1, abs=1e-12)
