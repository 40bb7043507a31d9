"""The calibrated test's arithmetic: p-values with the +1 correction, deviations, Holm.

Outside sources: Holm's adjustment against statsmodels' ``multipletests(method="holm")`` (a
general-purpose reference library); the +1 corrected Monte Carlo p-value (Davison & Hinkley 1997,
section 4.2, recalled from memory) checked on hand-counted examples.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.multitest import multipletests

from ped2g.compare import calibrated
from ped2g.compare.calibrated import (READING_RULE, calibrated_columns, families, holm, p_values,
                                      required_replicates)


def test_p_values_count_replicates_at_least_as_extreme_plus_one():
    null = np.array([[1.0, 1.0, 1.0], [2.0, 2.0, 2.0], [3.0, 3.0, 3.0], [4.0, 4.0, 4.0]])
    obs = np.array([3.0, 3.0, 3.0])
    p, n = p_values(obs, null, np.array(["greater", "less", "deviation"]))
    # greater: #{3, 4} = 2 -> 3/5; less: #{1, 2, 3} = 3 -> 4/5; deviation sizes count like greater
    np.testing.assert_allclose(p, [3 / 5, 4 / 5, 3 / 5])
    assert n.tolist() == [4, 4, 4]
    p, _ = p_values(np.array([10.0, 0.0]), null[:, :2], np.array(["greater", "less"]))
    np.testing.assert_allclose(p, [1 / 5, 1 / 5])   # never 0: the smallest is 1 / (R + 1)


def test_p_values_leave_out_replicates_without_an_estimate():
    null = np.array([[1.0], [np.nan], [5.0]])
    p, n = p_values(np.array([4.0]), null, np.array(["greater"]))
    assert n[0] == 2 and p[0] == pytest.approx(2 / 3)


def test_holm_equals_statsmodels_within_each_family():
    rng = np.random.default_rng(0)
    p = rng.uniform(size=12) ** 2
    family = np.array(["a"] * 5 + ["b"] * 4 + ["c"] * 3)
    ours = holm(p, family)
    for fam in "abc":
        sel = family == fam
        ref = multipletests(p[sel], method="holm")[1]
        np.testing.assert_allclose(ours[sel], ref, rtol=1e-12)


def test_deviation_rows_test_the_distance_from_the_mean_over_populations():
    table = pd.DataFrame({"method": ["evolvability"] * 3 + ["distance"] * 3,
                          "statistic": ["evolvability"] * 3 + ["riemannian"] * 3,
                          "population": ["a", "b", "c", "a", "a", "b"],
                          "population2": ["", "", "", "b", "c", "c"],
                          "axis": [""] * 6, "axis2": [""] * 6,
                          "mean": [1.0, 2.0, 6.0, 0.5, 0.7, 0.9]})
    fam = families(table).to_numpy()
    kinds = np.array(["deviation"] * 3 + ["greater"] * 3)
    np.testing.assert_allclose(calibrated.tested_values(table["mean"].to_numpy(), kinds, fam), [2, 1, 3, 0.5, 0.7, 0.9])
    # a null where population c is never special: only c's deviation is extreme
    rng = np.random.default_rng(1)
    null = np.column_stack([rng.normal(3, 0.1, 199), rng.normal(3, 0.1, 199), rng.normal(3, 0.1, 199),
                            rng.normal(1, 1, 199), rng.normal(1, 1, 199), rng.normal(1, 1, 199)])
    out = calibrated_columns(table, null, alpha=0.05, mass=0.95)
    assert out["family_size"].tolist() == [3, 3, 3, 3, 3, 3]
    assert out.loc[2, "p_value"] == pytest.approx(1 / 200)       # no replicate as extreme
    assert out.loc[2, "p_adjusted"] == pytest.approx(3 * 1 / 200)
    assert out["supported"].tolist() == [True, True, True, False, False, False]


def test_rows_that_do_not_compare_G_get_no_test():
    table = pd.DataFrame({"method": ["gmax"], "statistic": ["eigengap"], "population": ["a"],
                          "population2": [""], "axis": [""], "axis2": [""], "mean": [0.3]})
    out = calibrated_columns(table, np.zeros((50, 1)), alpha=0.05, mass=0.9)
    assert np.isnan(out.loc[0, "p_value"]) and out.loc[0, "test"] == "" and pd.isna(out.loc[0, "supported"])


def test_replicates_needed_let_the_largest_family_reach_alpha():
    # three populations, four traits: H's four eigenvalues are the largest family; Holm's smallest
    # adjusted p, 4 / (R + 1), must be at most 0.05: R + 1 >= 80
    assert required_replicates(3, 4, 2, 0.05) == 79
    assert required_replicates(2, 2, 1, 0.05) == 39       # two traits or two deviations
    assert required_replicates(6, 4, 5, 0.05) == 299      # 15 pairs
    for m, t, k, a in [(3, 4, 2, 0.05), (4, 8, 3, 0.1), (2, 3, 1, 0.01), (3, 3, 2, 0.07)]:
        R = required_replicates(m, t, k, a)
        worst = max(m * (m - 1) // 2, m, t, k)
        assert worst / (R + 1) <= a * (1 + 1e-12) and a < worst / R   # the fewest that can reach alpha


def test_rule_is_at_or_below_alpha_so_the_level_is_exact():
    # Monte Carlo test (Davison & Hinkley 1997, section 4.2 [M]): with R = 39 replicates and a
    # uniform rank, p = k / 40 takes each of 1/40 ... 40/40 with probability 1/40, so rejecting at
    # p <= 0.05 has level exactly 2/40 = 0.05 [exact identity]; "p < 0.05" would give 1/40.
    from ped2g.compare.calibrated import at_or_below

    p = np.arange(1, 41) / 40
    assert at_or_below(p, 0.05).mean() == pytest.approx(0.05)
    # Holm's product 3 x (1/60) is 0.05 up to rounding and counts as reaching 0.05
    assert at_or_below(np.array([3 * (1 / 60)]), 0.05).all()
    assert not at_or_below(np.array([0.0501, np.nan]), 0.05).any()


def test_reading_rule_names_its_level():
    assert "alpha = 0.05" in READING_RULE.format(alpha=0.05)


def test_the_readme_states_the_reading_rule_in_the_same_words():
    from pathlib import Path

    readme = " ".join((Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8").split())
    assert " ".join(READING_RULE.format(alpha=0.05).split()) in readme


def test_planned_replicates_default_and_refusal():
    from ped2g.compare.calibrated import planned_replicates
    from ped2g.errors import UserError

    assert planned_replicates(3, 4, 0.05, None) == 99       # needs 79, at least 99
    assert planned_replicates(6, 4, 0.05, None) == 299      # 15 pairs: R + 1 >= 300
    assert planned_replicates(2, 2, 0.05, 40) == 40
    assert planned_replicates(2, 2, 0.05, 39) == 39
    with pytest.raises(UserError, match="needs at least 39"):
        planned_replicates(2, 2, 0.05, 38)
