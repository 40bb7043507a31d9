"""Tables of the report, checked against textbook values and exact identities."""

from types import SimpleNamespace

import arviz as az
import numpy as np
import pandas as pd
import pytest

from ped2g.contracts.fit_folder import posterior_dataset
from ped2g.report import tables
from ped2g.report.loaders import FitInputs

from report_study import MRODE_PEDIGREE

CHECKS = {"max_rhat": 1.01, "min_ess": 100, "max_divergences": 0}


def _fit(G, population="p", traits=("a", "b"), pedigree=None, parameters=None, diagnostics=None):
    G = np.asarray(G, dtype=float)
    R = np.broadcast_to(np.eye(len(traits)), G.shape).copy()
    mean = np.zeros(G.shape[:-1])
    ds = posterior_dataset(population, list(traits), G, R, G + R, mean)
    return FitInputs(population=population, path=None, idata=az.InferenceData(posterior=ds),
                     parameters=parameters, diagnostics=diagnostics, pedigree_used=pedigree)


def _inputs(*fits):
    return SimpleNamespace(fits={f.population: f for f in fits}, populations=[f.population for f in fits])


def test_pedigree_summary_of_mrode_table_2_1():
    # Mrode (2014) Table 2.1 / p. 25: animals 1, 2 are the founders (4 has a known sire), four
    # generations (1,2 -> 3,4 -> 5 -> 6), F5 = F6 = 0.125.
    ped = MRODE_PEDIGREE.drop(columns=["generation"])  # exercise the generation count from parents
    out = tables.pedigree_by_population(_inputs(_fit(np.ones((1, 2, 2, 2)) * np.eye(2), pedigree=ped)))
    row = out.iloc[0]
    assert row["animals"] == 6
    assert row["founders"] == 2
    assert row["generations"] == 4
    assert row["phenotyped"] == 4
    assert row["inbred_animals"] == 2
    assert row["max_inbreeding"] == pytest.approx(0.125)
    assert row["mean_inbreeding"] == pytest.approx(0.25 / 6)


def test_phenotype_counts_by_hand():
    pheno = pd.DataFrame({"population": ["x", "x", "x", "y"], "a": [1.0, np.nan, 3.0, 4.0],
                          "b": [1.0, 2.0, np.nan, np.nan]})
    out = tables.phenotype_counts(pheno, ["x", "y"], ["a", "b"]).set_index("population")
    assert out.loc["x", "records"] == 3
    assert out.loc["x", "a_n"] == 2
    assert out.loc["x", "a_missing_percent"] == pytest.approx(100 / 3)
    assert out.loc["y", "b_missing_percent"] == pytest.approx(100.0)
    assert out.loc["x", "complete_records"] == 1
    assert out.loc["y", "complete_records"] == 0


def test_estimates_interval_matches_deterministic_hpd():
    # docs/methods.md §4.1 check value (computed): for the draws 0..99 the 90% HPD is [0, 89];
    # the median of 0..99 is 49.5 and the mean 49.5 (exact).
    x = np.arange(100.0)
    G = np.zeros((1, 100, 2, 2))
    G[0, :, 0, 0] = x
    G[0, :, 1, 1] = 1.0
    est = tables.estimates(_inputs(_fit(G)), mass=0.9)
    row = est[(est["quantity"] == "G") & (est["trait"] == "a") & (est["trait2"] == "a")].iloc[0]
    assert (row["hpd_lower"], row["hpd_upper"]) == (0.0, 89.0)
    assert row["median"] == 49.5 and row["mean"] == 49.5
    # rg holds only the pairs i < j, h2 one row per trait.
    assert set(est["quantity"]) == {"G", "R", "P", "rg", "h2"}
    assert len(est[est["quantity"] == "rg"]) == 1
    assert len(est[est["quantity"] == "G"]) == 3


def test_estimate_matrix_fills_upper_triangle():
    rng = np.random.default_rng(1)
    G = np.einsum("sij,skj->sik", *(2 * [rng.normal(size=(50, 2, 2))])) + np.eye(2)
    est = tables.estimates(_inputs(_fit(G[None])), mass=0.95)
    m = tables.estimate_matrix(est, "p", "G", ["a", "b"])
    assert m.loc["b", "a"] == "" and m.loc["a", "b"] != ""
    rg = tables.estimate_matrix(est, "p", "rg", ["a", "b"])
    assert rg.loc["a", "a"] == "1" and rg.loc["b", "b"] == "1"


def test_diagnostics_flag_a_shifted_chain():
    # Vehtari et al. (2021), docs/methods.md §4.2: one chain shifted by 1 SD gives R-hat ~1.10 > 1.01,
    # while i.i.d. chains give R-hat ~1.00.
    rng = np.random.default_rng(2)
    good = rng.normal(size=(4, 500))
    bad = good.copy()
    bad[0] += 1.0
    G_good = np.zeros((4, 500, 2, 2))
    G_good[..., 0, 0] = 5 + good
    G_good[..., 1, 1] = 5 + rng.normal(size=(4, 500))
    G_bad = G_good.copy()
    G_bad[..., 0, 0] = 5 + bad
    fits = _inputs(_fit(G_good, "ok", diagnostics={"checks": {"divergences": 0}}),
                   _fit(G_bad, "shifted", diagnostics={"checks": {"divergences": 2}}))
    summary, detail, sources = tables.diagnostics(fits, CHECKS)
    summary = summary.set_index("population")
    assert bool(summary.loc["ok", "passed"])
    assert not bool(summary.loc["shifted", "passed"])
    assert summary.loc["shifted", "divergences"] == 2
    row = detail[(detail["population"] == "shifted") & (detail["parameter"] == "G[a,a]")].iloc[0]
    assert row["r_hat"] > 1.05
    assert "R-hat" in row["miss"]
    assert sources["ok"].startswith("computed")
    # constant elements (G[a,b] = 0 and R = I here) are not sampled parameters: left out
    assert set(detail["parameter"]) == {"G[a,a]", "G[b,b]"}
    mask = tables.summary_misses(summary.reset_index(), CHECKS)
    assert mask.loc[1, "max_r_hat"] and mask.loc[1, "divergences"] and not mask.loc[0, "max_r_hat"]


def test_diagnostics_prefer_parameters_csv_and_unknown_divergences_fail():
    params = pd.DataFrame({"parameter": ["G[a,a]"], "r_hat": [1.3], "ess_bulk": [900.0], "ess_tail": [900.0]})
    G = np.broadcast_to(np.eye(2), (2, 10, 2, 2)).copy()
    summary, detail, sources = tables.diagnostics(_inputs(_fit(G, parameters=params)), CHECKS)
    assert sources["p"] == "read from parameters.csv"
    assert detail["r_hat"].tolist() == [1.3]
    # no diagnostics.json and no sample_stats: divergences unknown, so the fit cannot pass
    assert summary.loc[0, "divergences"] is None and not summary.loc[0, "passed"]


def test_compare_overlap_rule():
    # Two closed intervals [l1, u1], [l2, u2] overlap exactly when l1 <= u2 and l2 <= u1.
    frame = pd.DataFrame({"statistic": ["s"] * 3, "population": ["a", "b", "c"],
                          "estimate": [0.5, 0.5, 0.5], "lower": [0.0, 0.0, 0.0], "upper": [1.0, 1.0, 1.0],
                          "null_estimate": [1.5, 1.5, -2], "null_lower": [1.0, 1.1, -3.0],
                          "null_upper": [2.0, 2.0, -0.01]})
    out = tables.compare_display(frame)
    assert out["intervals_overlap"].tolist() == ["yes", "no", "no"]
    compact = tables.compare_compact(out, 0.95)
    assert compact["compared"].tolist() == ["a", "b", "c"]
    assert compact["95% HPD"].iloc[0] == "[0, 1.00]"
    assert "observed − null, 95% HPD" not in compact  # no paired differences given
    frame["diff_hpd_lower"], frame["diff_hpd_upper"] = [-1.5, -1.6, 0.2], [-0.5, -0.4, 2.5]
    compact = tables.compare_compact(tables.compare_display(frame), 0.95)
    assert compact["observed − null, 95% HPD"].tolist() == ["[-1.50, -0.500]", "[-1.60, -0.400]",
                                                             "[0.200, 2.50]"]


def test_row_labels_name_pairs_indices_and_traits():
    # Canonical columns after the loader's renaming: axis (component or trait), axis2.
    frame = pd.DataFrame({"population": ["a", "a", np.nan, "c"], "population2": ["b", np.nan, np.nan, np.nan],
                          "axis": [np.nan, 2.0, 1.0, "1"], "axis2": [np.nan, np.nan, "wing", "2"],
                          "statistic": ["s", "s", "s", "s"]})
    assert tables.row_labels(frame) == ["a and b", "a, component 2", "component 1, wing",
                                        "c, component 1, component 2"]
    frame["method"] = "tensor"
    assert tables.row_labels(frame)[3] == "c, eigentensor 1, eigenvector 2"


def test_generations_agree_between_the_pedigree_stage_and_the_fits_on_mrode_table_2_1():
    # Mrode (2014) Table 2.1 (docs/methods.md §1.7, P1), counted by hand: founders 1 and 2 are the
    # first generation; 3 (1 x 2) and 4 (1 x ?) the second; 5 (4 x 3) the third; 6 (5 x 2) the
    # fourth: 4 generations. A founders-only pedigree has 1.
    from ped2g.pedigree.clean import clean_pedigree
    from ped2g.pedigree.summary import summarise

    raw = MRODE_PEDIGREE[["id", "sire", "dam"]].astype(str)
    ped, changes = clean_pedigree(raw)
    stage = dict(tables.record_items(summarise(ped, changes)))
    [label] = [k for k in stage if k.startswith("generations")]
    assert stage[label] == "4"
    assert "max_generation" not in " ".join(stage)  # no internal name on the page
    fits = tables.pedigree_by_population(_inputs(_fit(np.ones((1, 2, 2, 2)) * np.eye(2),
                                                      pedigree=ped.to_frame())))
    assert fits.loc[0, "generations"] == 4
    founders_only, none = clean_pedigree(pd.DataFrame({"id": ["a", "b"], "sire": ["", ""], "dam": ["", ""]}))
    assert dict(tables.record_items(summarise(founders_only, none)))[label] == "1"
    assert tables.pedigree_by_population(_inputs(_fit(np.ones((1, 2, 2, 2)) * np.eye(2),
                                                      pedigree=founders_only.to_frame())))["generations"].tolist() == [1]


def test_settings_rows_are_plain_key_values():
    from ped2g.config import validate

    config = validate({"traits": ["wing", "mass"], "random": [{"name": "brood", "column": "nest"}]})
    rows = dict(tables.config_items(config))
    # every config key as its dotted path; lists joined with commas; null in words
    assert rows["compare.null_model.refit.chains"] == str(config["compare"]["null_model"]["refit"]["chains"])
    assert rows["traits"] == "wing, mass"
    assert rows["data.missing_parent"] == ", ".join(c if c else "blank" for c in config["data"]["missing_parent"])
    assert rows["compare.subspace_dims"].startswith("default (half the number of traits")
    assert rows["model.fixed_covariances"].startswith("none")
    assert rows["random"] == "name: brood; column: nest"
    assert rows["compare.interval_mass"] == "0.95"  # as written, not 0.950
    for key, value in rows.items():
        assert not set("{}[]'") & set(value + key), (key, value)
