"""Under a shared G the refitting null's p-values are uniform (slow: many small fits).

A tiny invented design (two populations of 90 phenotyped animals, two traits, one fixed effect,
10% missing cells) is simulated 16 times with one G shared by both populations; each study is
analysed as the workflow does (tests/null/refit_calibration.py) with 19 null replicates. For a
calibrated test the rank of the observed estimate among the replicates is uniform, so the
randomised p-value ``p - U / (R + 1)`` is uniform on (0, 1) (an exact property of Monte Carlo
tests under exchangeability; Davison & Hinkley 1997, section 4.2, recalled from memory). It is
checked with scipy's Kolmogorov-Smirnov test for one row per study of each pairwise and
whole-set statistic (rows of one study are dependent, so each test takes one row per study).
The old breeding-value null failed exactly this: its p-values piled up near 0.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats

from ped2g.config import validate
from ped2g.fit.prepare import prepare
from ped2g.pedigree.clean import clean_pedigree
from ped2g.simulate.study import StudySettings, simulate_study
from refit_calibration import run, true_parameters

pytestmark = pytest.mark.slow

STUDIES, REPLICATES = 16, 19


@pytest.fixture(scope="module")
def rows():
    settings = StudySettings(populations=("a", "b"), designs=("reference", "reference"), traits=("x", "y"),
                             animals=130, founders=20, years=4, phenotyped=90, duplicate_rows=0,
                             absent_parents=0, stray_whitespace=0, missing_value_fraction=0.1)
    st = simulate_study(settings, seed=5)
    raw = st.pedigree.fillna("").astype(str)
    raw.index = range(2, 2 + len(raw))
    ped, _ = clean_pedigree(raw, missing=("NA", ""))
    phen = st.phenotypes.fillna("").astype(str)
    phen.index = range(2, 2 + len(phen))
    cfg = validate({"traits": ["x", "y"], "fixed": {"sex": "categorical"},
                    "compare": {"skewers": 200, "null_model": {"refit": {"chains": 1, "warmup": 100, "draws": 150}}}})
    data = {p: prepare(cfg, phen, ped, p) for p in ("a", "b")}
    Gs, params = true_parameters(data, st.truth, shared=True)
    return run(data, cfg, Gs, params, STUDIES, REPLICATES, seed=3, progress=lambda *_: None)


@pytest.mark.parametrize("method,statistic", [("distance", "riemannian"), ("skewers", "correlation"),
                                              ("gmax", "angle_between"), ("tensor", "variance")])
def test_p_values_are_uniform_under_a_shared_G(rows, method, statistic):
    sel = rows[(rows.method == method) & (rows.statistic == statistic)]
    per_study = sel.groupby("study").head(1)
    assert len(per_study) == STUDIES
    u = np.random.default_rng(0).uniform(size=len(per_study))
    p = per_study["p_value"].to_numpy() - u / (REPLICATES + 1)
    assert ((p > 0) & (p < 1)).all()
    result = scipy.stats.kstest(p, "uniform")
    assert result.pvalue > 0.001, (method, statistic, np.sort(per_study["p_value"].to_numpy()))


def test_clustered_se_reduces_to_the_binomial_se_and_ignores_duplicated_rows():
    """The calibration script's study-clustered SE (tests/null/refit_calibration.py): with one row
    per study it is the usual SE of a proportion, sqrt(p (1 - p) / (S - 1)) (exact identity), and
    copying every study's row k times (rows of a study perfectly dependent) must not shrink it, as
    a binomial SE over the rows would by sqrt(k)."""
    import pandas as pd
    from refit_calibration import clustered_se

    hit = pd.Series([1, 0, 0, 1, 0, 0, 0, 0, 0, 1] * 2, dtype=float)
    study = pd.Series(np.arange(20))
    p = hit.mean()
    assert clustered_se(hit, study) == pytest.approx(np.sqrt(p * (1 - p) / 19), rel=1e-12)
    k = 3
    assert clustered_se(pd.Series(np.repeat(hit.to_numpy(), k)), pd.Series(np.repeat(study.to_numpy(), k))) \
        == pytest.approx(clustered_se(hit, study), rel=1e-12)


def test_elongation_gives_the_leading_share_and_the_closed_form_mean_autonomy():
    # Exact identity (derived here, not recalled): for G = diag(l1, l2) and a unit gradient at angle
    # theta, 1/a = (c^2/l1 + s^2/l2)(c^2 l1 + s^2 l2) = 1 + k sin^2(2 theta)/4 with k = (r - 1)^2/r,
    # r = l1/l2, and the mean of 1/(1 + b sin^2 phi) over a uniform angle is 1/sqrt(1 + b)
    # (a standard integral), so the mean autonomy is 2 sqrt(l1 l2)/(l1 + l2). The function averages
    # over 2,000 random gradients, so the check allows 4 Monte Carlo SEs.
    from refit_calibration import elongation

    sd = np.array([2.0, 0.5])                        # the phenotypic SDs undo the scale exactly
    for l1, l2 in [(4.0, 1.0), (1.0, 1.0), (9.0, 0.5)]:
        G = np.diag([l1, l2]) * np.outer(sd, sd)
        out = elongation(G, sd)
        assert out["leading_share"] == pytest.approx(max(l1, l2) / (l1 + l2), rel=1e-12)
        theta = np.random.default_rng(0).uniform(0, 2 * np.pi, 2000)
        a = 1 / ((np.cos(theta) ** 2 / l1 + np.sin(theta) ** 2 / l2) * (np.cos(theta) ** 2 * l1 + np.sin(theta) ** 2 * l2))
        assert out["autonomy"] == pytest.approx(2 * np.sqrt(l1 * l2) / (l1 + l2), abs=4 * a.std() / np.sqrt(2000) + 1e-12)
