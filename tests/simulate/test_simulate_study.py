"""Checks of the invented-study generator.

External references named beside each check:
* Offspring on mid-parent regression slope = h² (Falconer & Mackay 1996, *Introduction to
  Quantitative Genetics*, 4th edn, ch. 10 [M: recalled from memory]; equivalently cov(parent,
  offspring) = ½ V_A, docs/methods.md §1.8 [V: K. Holsinger, EEB348 course notes on covariances among relatives]).
* Sample covariance of independent N(0, Σ) vectors: var of an element = (σ_aa σ_bb + σ_ab²)/n
  (Wishart second moments; Anderson 2003, *An Introduction to Multivariate Statistical Analysis*,
  3rd edn, §7.3 [M: recalled]); used for every Monte Carlo tolerance (5 standard errors).
* Eigen-decompositions by numpy.linalg.eigh (reference library) for the design identities.
"""

import numpy as np
import pandas as pd
import pytest

from ped2g.errors import UserError
from ped2g.simulate.study import DESIGNS, StudySettings, simulate_study

SMALL = StudySettings(populations=("north", "south"), traits=("x", "y", "z"), animals=150,
                      founders=20, years=5, phenotyped=100, duplicate_rows=3, absent_parents=2,
                      stray_whitespace=3)


def _cov_z(X, Sigma):
    n = X.shape[0]
    M = X.T @ X / n
    se = np.sqrt((np.outer(np.diag(Sigma), np.diag(Sigma)) + Sigma**2) / n)
    return (M - Sigma) / se


def _residuals(study, pop, traits):
    """Record minus intercept, sex effect and true breeding value (one record per animal)."""
    truth = study.truth["populations"][pop]
    ph = study.phenotypes[study.phenotypes.population == pop]
    bv = study.animals.set_index("id").loc[ph["id"], [f"bv_{t}" for t in traits]].to_numpy()
    mu = np.array([truth["intercept"][t] for t in traits])
    sex = np.array([truth["sex_effect"][t] for t in traits])
    return ph[traits].to_numpy() - mu - (ph["sex"].to_numpy() == "M")[:, None] * sex - bv, ph


def test_same_seed_same_study_and_other_seed_differs():
    a = simulate_study(SMALL, seed=4)
    b = simulate_study(SMALL, seed=4)
    c = simulate_study(SMALL, seed=5)
    pd.testing.assert_frame_equal(a.pedigree, b.pedigree)
    pd.testing.assert_frame_equal(a.phenotypes, b.phenotypes)
    assert a.truth == b.truth
    assert not a.phenotypes["x"].equals(c.phenotypes["x"])


def test_population_data_do_not_depend_on_other_populations():
    clean = dict(duplicate_rows=0, absent_parents=0, stray_whitespace=0)
    both = simulate_study(StudySettings(**{**SMALL.__dict__, **clean}), seed=9)
    alone = simulate_study(StudySettings(**{**SMALL.__dict__, **clean, "populations": ("north",)}), seed=9)
    pd.testing.assert_frame_equal(both.phenotypes[both.phenotypes.population == "north"].reset_index(drop=True),
                                  alone.phenotypes.reset_index(drop=True))


def test_table_sizes_and_field_data_features():
    s = SMALL
    st = simulate_study(s, seed=1)
    ped, ph, truth = st.pedigree, st.phenotypes, st.truth
    m = len(s.populations)
    assert len(ped) == m * s.animals - s.absent_parents + s.duplicate_rows
    assert len(ph) == m * s.phenotyped * s.records_per_animal
    assert int(ped.duplicated().sum()) == s.duplicate_rows
    assert sorted(ped[ped.duplicated()]["id"].str.strip()) == truth["data_features"]["duplicate_rows"]
    padded = ped.map(lambda v: v != v.strip()).to_numpy()
    # duplicates copy a padded row as it is, so count the distinct padded cells
    assert len({(r.id, r.sire, r.dam) for r in ped[padded.any(axis=1)].itertuples()}) <= s.stray_whitespace
    assert padded.sum() >= s.stray_whitespace
    ids = set(ped["id"].str.strip())
    parents = (set(ped["sire"].str.strip()) | set(ped["dam"].str.strip())) - set(s.missing_parent_codes)
    assert sorted(parents - ids) == truth["data_features"]["absent_parents"]
    assert len(truth["data_features"]["absent_parents"]) == s.absent_parents
    assert not set(ph["id"]) & set(truth["data_features"]["absent_parents"])  # no row, no records
    assert set(ph["id"]) <= ids
    # every written parent is the true parent or an unknown code
    true = st.animals.set_index("id")
    rows = ped.drop_duplicates().assign(id=lambda f: f["id"].str.strip())
    for col in ("sire", "dam"):
        written = rows[col].str.strip()
        known = ~written.isin(s.missing_parent_codes)
        assert (written[known].to_numpy() == true.loc[rows["id"][known], col].to_numpy()).all()
    for pop in s.populations:
        p = truth["populations"][pop]
        assert p["phenotyped_animals"] == s.phenotyped and p["records"] == s.phenotyped


def test_unknown_parents_and_missing_values_at_their_rates():
    s = StudySettings(populations=("a",), traits=("x", "y", "z", "w"), animals=3000, founders=100,
                      years=8, phenotyped=2500, unknown_parent_fraction=0.15,
                      missing_value_fraction=0.05, duplicate_rows=0, absent_parents=0,
                      stray_whitespace=0)
    st = simulate_study(s, seed=2)
    n_links = 2 * (s.animals - s.founders)
    hidden = st.truth["data_features"]["unknown_parent_links"]["a"]
    written = st.pedigree.set_index("id").loc[st.animals.id[st.animals.sire != ""]]
    assert hidden == int(written[["sire", "dam"]].isin(s.missing_parent_codes).to_numpy().sum())
    p = s.unknown_parent_fraction  # binomial: 5 standard deviations
    assert abs(hidden - n_links * p) < 5 * np.sqrt(n_links * p * (1 - p))
    values = st.phenotypes[list(s.traits)].to_numpy()
    n_cells, missing = values.size, int(np.isnan(values).sum())
    assert missing == st.truth["populations"]["a"]["missing_trait_values"]
    q = s.missing_value_fraction
    assert abs(missing - n_cells * q) < 5 * np.sqrt(n_cells * q * (1 - q))
    assert not np.isnan(values).all(axis=1).any()  # every record keeps a value


def test_truth_identities():
    st = simulate_study(StudySettings(traits=("x", "y", "z"), animals=120, founders=20, years=4,
                                      phenotyped=80, brood_fraction=0.1, permanent_fraction=0.05,
                                      records_per_animal=2), seed=3)
    for pop, p in st.truth["populations"].items():
        G, R, C, E, P = (np.array(p[k]) for k in ("G", "R", "brood", "permanent", "P"))
        np.testing.assert_allclose(P, G + R + C + E, rtol=1e-9)
        h2 = np.array(list(p["heritability"].values()))
        np.testing.assert_allclose(h2, np.diag(G) / np.diag(P), rtol=1e-5)
        assert np.linalg.eigvalsh(G)[0] > 0 and np.linalg.eigvalsh(R)[0] > 0
        mean = np.array(list(p["mean"].values()))
        assert np.all(mean > 0)
    assert "brood" in st.phenotypes.columns and len(st.phenotypes) == 3 * 80 * 2


def _reference_axes(truth, pop):
    G = np.array(truth["populations"][pop]["G_reference_scale"])
    lam, vec = np.linalg.eigh(G)
    return lam[::-1], vec[:, ::-1], G


def test_designs_differ_exactly_as_described():
    s = StudySettings(animals=80, founders=20, years=3, phenotyped=40, reduction=0.3,
                      rotation_degrees=35.0)
    truth = simulate_study(s, seed=1).truth
    pops = s.populations
    assert [truth["populations"][p]["design"] for p in pops] == list(DESIGNS)
    lam0, E0, G0 = _reference_axes(truth, pops[0])
    lam1, _, G1 = _reference_axes(truth, pops[1])
    lam2, E2, G2 = _reference_axes(truth, pops[2])
    a = s.reduced_axis
    # reduced: variance along e_a is reduction * λ_a, the other eigen-axes are untouched
    assert E0[:, a] @ G1 @ E0[:, a] == pytest.approx(s.reduction * lam0[a], rel=1e-5)
    for k in range(len(lam0)):
        if k != a:
            np.testing.assert_allclose(G1 @ E0[:, k], lam0[k] * E0[:, k], atol=1e-5)
    # rotated: same eigenvalues, leading axis = cos θ e1 + sin θ e2
    np.testing.assert_allclose(lam2, lam0, rtol=1e-5)
    th = np.radians(s.rotation_degrees)
    target = np.cos(th) * E0[:, 0] + np.sin(th) * E0[:, 1]
    assert abs(E2[:, 0] @ target) == pytest.approx(1.0, abs=1e-6)
    assert np.degrees(np.arccos(abs(E2[:, 0] @ E0[:, 0]))) == pytest.approx(35.0, abs=1e-3)


def test_common_G_design_for_a_null_scenario():
    s = StudySettings(designs=("reference", "reference", "reference"), animals=80, founders=20,
                      years=3, phenotyped=40)
    pops = simulate_study(s, seed=1).truth["populations"]
    Gs = [np.array(p["G"]) for p in pops.values()]
    np.testing.assert_array_equal(Gs[0], Gs[1])
    np.testing.assert_array_equal(Gs[0], Gs[2])


def test_given_G_and_R_are_used():
    G = {"a": [[2.0, 0.5], [0.5, 1.0]], "b": [[1.0, 0.0], [0.0, 3.0]]}
    R = [[1.0, 0.2], [0.2, 1.5]]
    s = StudySettings(populations=("a", "b"), traits=("u", "v"), G=G, R=R, animals=60, founders=10,
                      years=3, phenotyped=30, absent_parents=0)
    truth = simulate_study(s, seed=2).truth
    np.testing.assert_array_equal(truth["populations"]["b"]["G"], G["b"])
    np.testing.assert_array_equal(truth["populations"]["a"]["R"], R)


def test_founder_breeding_values_residuals_and_sex_effect_follow_the_truth():
    """Founders' BVs ~ N(0, G); record - μ - sex - u ~ N(0, R) independently (5 SE, Wishart moments)."""
    s = StudySettings(populations=("a", "b"), animals=30000, founders=10000, years=3,
                      phenotyped=25000, duplicate_rows=0, absent_parents=0, stray_whitespace=0,
                      missing_value_fraction=0.0)
    st = simulate_study(s, seed=21)
    traits = list(s.traits)
    for pop in s.populations:
        p = st.truth["populations"][pop]
        an = st.animals[(st.animals.population == pop) & (st.animals.sire == "")
                        & (st.animals.dam == "")]
        assert len(an) == s.founders
        G = np.array(p["G"])
        assert np.max(np.abs(_cov_z(an[[f"bv_{t}" for t in traits]].to_numpy(), G))) < 5
        res, rec = _residuals(st, pop, traits)
        R = np.array(p["R"])  # rounding to 3 decimals adds variance 1e-6/12, far below 1 SE
        assert np.max(np.abs(_cov_z(res, R))) < 5
        # the record carries the breeding value with coefficient 1: OLS slope of (record - μ -
        # sex effect) on u is 1 (u independent of the residual; Gauss-Markov), 5 SE
        u = st.animals.set_index("id").loc[rec.id, [f"bv_{t}" for t in traits]].to_numpy()
        slope = ((res + u) * u).sum(0) / (u * u).sum(0)
        assert np.all(np.abs(slope - 1) < 5 * np.sqrt(np.diag(R) / (u * u).sum(0))), slope
        # male - female difference of (record - u) equals the sex effect (two-sample t, 5 SE)
        ph = st.phenotypes[st.phenotypes.population == pop]
        bv = st.animals.set_index("id").loc[ph["id"], [f"bv_{t}" for t in traits]].to_numpy()
        y = ph[traits].to_numpy() - bv
        male = ph["sex"].to_numpy() == "M"
        diff = y[male].mean(0) - y[~male].mean(0)
        se = np.sqrt(np.diag(R) * (1 / male.sum() + 1 / (~male).sum()))
        sex = np.array([p["sex_effect"][t] for t in traits])
        assert np.all(np.abs(diff - sex) < 5 * se)


def test_repeated_records_and_brood_effects_follow_the_truth():
    """Two records of one animal: cov of residuals = permanent-environment matrix, cov of the
    difference = 2R; two brood mates: cov of residuals = brood matrix (independent units, 5 SE)."""
    s = StudySettings(populations=("a",), traits=("x", "y"), animals=6000, founders=400, years=4,
                      phenotyped=5000, records_per_animal=2, permanent_fraction=0.2,
                      brood_fraction=0.15, duplicate_rows=0, absent_parents=0, stray_whitespace=0,
                      missing_value_fraction=0.0, sex_effect=0.0)
    st = simulate_study(s, seed=22)
    p = st.truth["populations"]["a"]
    R, E, C = (np.array(p[k]) for k in ("R", "permanent", "brood"))
    res, ph = _residuals(st, "a", ["x", "y"])
    ph = ph.assign(r0=res[:, 0], r1=res[:, 1])
    first = ph.groupby("id", sort=False).nth(0)
    second = ph.groupby("id", sort=False).nth(1)
    assert (first["id"].to_numpy() == second["id"].to_numpy()).all()
    assert (second["year"].to_numpy() == first["year"].to_numpy() + 1).all()
    r1, r2 = first[["r0", "r1"]].to_numpy(), second[["r0", "r1"]].to_numpy()
    # record residual = brood + permanent + e; the difference of two records cancels brood and permanent
    assert np.max(np.abs(_cov_z(r1 - r2, 2 * R))) < 5
    # cross-moment of the two records of an animal: E[r1 r2'] = C + E (brood and permanent shared)
    n = len(r1)
    cross = r1.T @ r2 / n
    V = C + E + R
    se = np.sqrt((np.outer(np.diag(V), np.diag(V)) + (C + E) ** 2) / n)
    assert np.max(np.abs(cross - (C + E)) / se) < 5
    # two different animals of one brood share only the brood effect
    one = first.reset_index(drop=True)
    pairs = one.groupby("brood").head(2)
    sizes = pairs.groupby("brood")["id"].transform("size")
    pairs = pairs[sizes == 2]
    a = pairs.groupby("brood").nth(0)[["r0", "r1"]].to_numpy()
    b = pairs.groupby("brood").nth(1)[["r0", "r1"]].to_numpy()
    assert len(a) > 500
    cross = a.T @ b / len(a)
    se = np.sqrt((np.outer(np.diag(V), np.diag(V)) + C**2) / len(a))
    assert np.max(np.abs(cross - C) / se) < 5


def test_offspring_on_midparent_regression_slope_is_heritability():
    """Falconer & Mackay (1996, ch. 10) [M]: b(offspring on mid-parent) = h² without selection."""
    h2 = 0.4
    s = StudySettings(populations=("a",), traits=("x",), heritability=(h2,), animals=16000,
                      founders=4000, years=3, max_breeding_age=1, phenotyped=16000,
                      unknown_parent_fraction=0.0, missing_value_fraction=0.0, duplicate_rows=0,
                      absent_parents=0, stray_whitespace=0, sex_effect=0.0)
    st = simulate_study(s, seed=23)
    y = st.phenotypes.set_index("id")["x"]
    an = st.animals[st.animals.sire != ""]
    # one offspring per full-sib family keeps the observations independent
    an = an.drop_duplicates(["sire", "dam"])
    mid = 0.5 * (y.loc[an.sire].to_numpy() + y.loc[an.dam].to_numpy())
    off = y.loc[an.id].to_numpy()
    X = np.column_stack([np.ones_like(mid), mid])
    beta, rss, *_ = np.linalg.lstsq(X, off, rcond=None)
    sigma2 = rss[0] / (len(off) - 2)
    se = np.sqrt(sigma2 * np.linalg.inv(X.T @ X)[1, 1])
    assert len(off) > 3000
    assert abs(beta[1] - h2) < 4 * se, (beta[1], se)


@pytest.mark.parametrize("kwargs, message", [
    ({"designs": ("reference", "wobbly", "rotated")}, r"'designs' has 'wobbly'; allowed: reference, reduced, rotated"),
    ({"designs": ("reference",)}, r"'designs' needs one entry per population \(3\)"),
    ({"phenotyped": 900}, r"'phenotyped' must be between 1 and animals minus absent_parents"),
    ({"reduced_axis": 4}, r"'reduced_axis' must be an integer from 0 to 3"),
    ({"traits": ("x",), "designs": ("rotated",), "populations": ("a",)}, r"'rotated' needs at least two traits"),
    ({"trait_means": (1.0, -2.0, 3.0, 4.0)}, r"'trait_means' must all be positive"),
    ({"G": {"ostrel": [[1.0]]}}, r"'G' must give a matrix for each population"),
    ({"heritability": (0.5, 0.5, 0.5, 0.5), "brood_fraction": 0.6}, r"must stay below 1"),
    ({"traits": ("x", "sex")}, r"'traits' must not use the column names"),
    ({"founders": 2}, r"'founders' must be at least 4"),
])
def test_bad_settings_end_in_one_clear_line(kwargs, message):
    with pytest.raises(UserError, match=message):
        StudySettings(**kwargs)


def test_settings_from_mapping_lists_allowed_keys():
    with pytest.raises(UserError, match=r"unknown setting 'animal' \(allowed: populations, designs"):
        StudySettings.from_mapping({"animal": 10})
    s = StudySettings.from_mapping({"traits": ["a", "b"], "animals": 90, "phenotyped": 60})
    assert s.traits == ("a", "b") and s.animals == 90


def test_too_few_breeding_animals_is_reported():
    with pytest.raises(UserError, match=r"no breeding (males|females) in season \d+; raise 'founders' or 'max_breeding_age'"):
        # one offspring per season and breeding only at age 1: season 2 has a single adult
        simulate_study(StudySettings(populations=("a",), founders=4, animals=7, years=3,
                                     max_breeding_age=1, phenotyped=5, absent_parents=0,
                                     duplicate_rows=0, stray_whitespace=0), seed=1)


def test_raw_pedigree_is_cleaned_by_the_pedigree_stage(tmp_path):
    """The written flaws are exactly what the pedigree stage finds and repairs."""
    from ped2g.pedigree.clean import read_raw_pedigree

    st = simulate_study(SMALL, seed=6)
    path = tmp_path / "pedigree.csv"
    st.pedigree.to_csv(path, index=False)
    ped, changes = read_raw_pedigree(path, missing=SMALL.missing_parent_codes)
    assert ped.n == len(SMALL.populations) * SMALL.animals  # absent parents are back as founders
    problems = changes["problem"].value_counts()
    assert problems.get("duplicate row", 0) == SMALL.duplicate_rows
    added = changes[changes["problem"].str.contains("has no row of its own")]
    assert sorted(added["id"]) == st.truth["data_features"]["absent_parents"]
    stripped = changes[changes["problem"].str.startswith("white space")]
    assert len(stripped) == SMALL.stray_whitespace
    # parentage after cleaning = the true parentage minus the links written as unknown
    true = st.animals.set_index("id")
    clean = ped.to_frame().set_index("id").loc[true.index]
    for col in ("sire", "dam"):
        shown = clean[col] != ""
        assert (clean.loc[shown, col] == true.loc[shown, col]).all()
    hidden = int(((clean["sire"] == "") & (true["sire"] != "")).sum()
                 + ((clean["dam"] == "") & (true["dam"] != "")).sum())
    assert hidden == sum(st.truth["data_features"]["unknown_parent_links"].values())
