"""Tidy summaries: intervals (checked against ped2g.intervals and numpy), pairing with the null."""

import numpy as np
import pandas as pd
import xarray as xr

from ped2g.compare.summarise import paired_comparison, summarise_statistic
from ped2g.contracts.compare_tables import COLUMNS
from ped2g.intervals import equal_tailed, hpd


def labelled(values: np.ndarray, dims: tuple[str, ...], pairs: str = "") -> xr.DataArray:
    coords = {d: [f"p{i}" for i in range(n)] if d.startswith("population") else np.arange(1, n + 1)
              for d, n in zip(dims[1:], values.shape[1:])}
    arr = xr.DataArray(values, dims=dims, coords=coords)
    arr.attrs.update(method="demo", statistic="value", description="a test statistic", pairs=pairs)
    return arr


def test_observed_columns_match_direct_computation():
    rng = np.random.default_rng(0)
    x = rng.exponential(size=(400, 3))
    rows = summarise_statistic(labelled(x, ("draw", "population")), None, None, 0.9, "variance")
    assert list(rows.columns) == COLUMNS
    lo, hi = hpd(x, 0.9, axis=0)
    elo, ehi = equal_tailed(x, 0.9, axis=0)
    np.testing.assert_allclose(rows["hpd_lower"], lo)
    np.testing.assert_allclose(rows["hpd_upper"], hi)
    np.testing.assert_allclose(rows["et_lower"], elo)
    np.testing.assert_allclose(rows["et_upper"], ehi)
    np.testing.assert_allclose(rows["mean"], x.mean(0))
    np.testing.assert_allclose(rows["median"], np.median(x, 0))
    np.testing.assert_allclose(rows["sd"], x.std(0, ddof=1))
    assert rows["population"].tolist() == ["p0", "p1", "p2"]
    assert rows["null_mean"].isna().all() and rows["p_obs_gt_null"].isna().all()
    assert (rows["scale"] == "variance").all() and (rows["n_draws"] == 400).all()


def test_left_out_draws_are_ignored_cell_by_cell():
    rng = np.random.default_rng(1)
    x = rng.normal(size=(200, 2))
    x[:30, 1] = np.nan
    rows = summarise_statistic(labelled(x, ("draw", "axis")), None, None, 0.95, "original")
    assert rows["n_draws"].tolist() == [200, 170]
    lo, hi = hpd(x[30:, 1], 0.95)
    assert rows.loc[1, "hpd_lower"] == lo and rows.loc[1, "hpd_upper"] == hi
    assert rows.loc[1, "mean"] == x[30:, 1].mean()


def test_pairs_are_kept_once():
    x = np.zeros((5, 3, 3))
    rows = summarise_statistic(labelled(x, ("draw", "population", "population2"), "upper"), None, None,
                               0.9, "mean")
    assert list(zip(rows["population"], rows["population2"])) == [("p0", "p1"), ("p0", "p2"), ("p1", "p2")]


def test_paired_probability_uses_the_pairing():
    obs = np.arange(10.0)[:, None]
    # Null draw i comes from observed draw pair[i]; each null value is just below its own pair.
    pair = np.array([9, 0, 5, 5, 2])
    null = obs[pair] - 0.5
    out = paired_comparison(obs, null, pair, 0.9)
    assert out["p_obs_gt_null"][0] == 1.0 and out["n_pairs"][0] == 5
    assert out["diff_mean"][0] == 0.5
    # The same null values compared without the pairing would not all be below.
    shuffled = paired_comparison(obs, null, np.arange(5), 0.9)
    assert shuffled["p_obs_gt_null"][0] == 0.4


def test_null_columns_and_overlap():
    rng = np.random.default_rng(2)
    obs = labelled(rng.normal(5.0, 0.1, size=(300, 2)), ("draw", "axis"))
    null = labelled(np.column_stack([rng.normal(0.0, 0.1, 300), rng.normal(5.0, 0.1, 300)]), ("draw", "axis"))
    rows = summarise_statistic(obs, null, np.arange(300), 0.95, "variance")
    assert rows["hpd_overlap"].tolist() == [False, True]
    assert rows.loc[0, "p_obs_gt_null"] == 1.0
    assert 0.3 < rows.loc[1, "p_obs_gt_null"] < 0.7
    assert pd.notna(rows["null_hpd_lower"]).all()


def test_statistic_of_the_whole_draw_gives_one_row():
    x = np.arange(20.0)
    rows = summarise_statistic(labelled(x, ("draw",)), labelled(x - 1, ("draw",)), np.arange(20), 0.9, "original")
    assert len(rows) == 1 and rows.loc[0, "population"] == "" and rows.loc[0, "axis"] == ""
    assert rows.loc[0, "p_obs_gt_null"] == 1.0 and rows.loc[0, "mean"] == 9.5


def test_labels_follow_the_array_layout():
    x = np.zeros((4, 2, 3))
    x[:, 1, 2] = 7.0
    rows = summarise_statistic(labelled(x, ("draw", "population", "axis")), None, None, 0.9, "original")
    hit = rows[rows["mean"] == 7.0]
    assert hit["population"].tolist() == ["p1"] and hit["axis"].tolist() == [3]
