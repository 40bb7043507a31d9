"""Recovery: 90% HPD intervals of G cover the simulator's true G at close to the nominal rate.

See tests/fit/recovery.py for the design: 500 phenotyped animals of a 600-animal pedigree, so
that the intervals are dominated by the data (with 200 records all 48 intervals covered the
truth in a trial run: prior-influenced intervals are conservative for a fixed truth). With 8
replicates x 6 G elements = 48 intervals (correlated within a replicate), coverage between 0.75
and 0.99 is required: far below 0.9 means over-confident intervals or a biased engine; 48 of 48
would suggest intervals far too wide.
"""

import pytest

from recovery import coverage, prior_calibration

pytestmark = pytest.mark.slow


def test_hpd_coverage_of_true_g():
    hits = coverage(replicates=8, seed=3, warmup=300, draws=300, animals=600, phenotyped=500)
    rate = hits.mean()
    assert 0.75 <= rate <= 0.99, rate


def test_calibration_with_truths_from_the_prior():
    # Exact in expectation: coverage 0.9 and mean posterior rank of the truth 0.5. With 12
    # replicates x 6 elements: coverage in [0.75, 0.99]; each element's mean rank over 12
    # replicates has SD about 0.08 under uniform ranks, so |mean rank - 0.5| < 0.25 (3 SD).
    hits, ranks = prior_calibration(replicates=12, seed=5)
    assert 0.75 <= hits.mean() <= 0.99, hits.mean()
    assert abs(ranks.mean(axis=0) - 0.5).max() < 0.25, ranks.mean(axis=0)
