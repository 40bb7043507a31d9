"""The report's input layer: where files are, the report's names for the contract's columns,
clear refusals."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from ped2g.contracts.compare_tables import as_table
from ped2g.errors import UserError
from ped2g.report import loaders
from report_study import POPULATIONS, write_fit


@pytest.fixture
def results(tmp_path):
    root = tmp_path / "project" / "results"
    for k, pop in enumerate(POPULATIONS[:2]):
        write_fit(root / "fits" / pop, pop, seed=k + 1)
    return root


def test_results_root_accepts_the_folder_or_its_parent(results):
    assert loaders.results_root(results) == results
    assert loaders.results_root(results.parent) == results


def test_fit_folders_follow_the_config_order_or_sort(results):
    assert list(loaders.fit_folders(results, [])) == sorted(POPULATIONS[:2])
    assert list(loaders.fit_folders(results, ["south", "north"])) == ["south", "north"]
    with pytest.raises(UserError, match=r"lists 'east'.*run 'ped2g fit' for population 'east'"):
        loaders.fit_folders(results, ["north", "east"])


def test_a_fit_folder_without_posterior_is_not_silently_skipped(results):
    folder = results / "fits" / "north"
    (folder / "posterior.nc").unlink()
    with pytest.raises(UserError, match=r"north has no posterior\.nc; its diagnostics\.json says why"):
        loaders.fit_folders(results, [])
    (results / "fits" / ".north.tmp-1").mkdir()  # a temporary folder of a running stage is ignored
    (folder / "diagnostics.json").unlink()
    with pytest.raises(UserError, match=r"fits/north has no posterior\.nc; run 'ped2g fit' for it, or remove"):
        loaders.fit_folders(results, [])


def test_posterior_not_written_by_ped2g_is_refused(results):
    bad = results / "fits" / "north" / "posterior.nc"
    xr.Dataset({"x": ("a", np.arange(3.0))}).to_netcdf(bad, engine="h5netcdf")
    with pytest.raises(UserError, match="has no posterior G, R and P; rerun 'ped2g fit'"):
        loaders.read_posterior(bad.parent)
    bad.write_text("not a netCDF file")
    with pytest.raises(UserError, match="not an ArviZ netCDF file written by ped2g"):
        loaders.read_posterior(bad.parent)


def test_damaged_json_is_one_clear_line(results):
    (results / "pedigree").mkdir()
    (results / "pedigree" / "summary.json").write_text("{not json")
    with pytest.raises(UserError, match=r"pedigree summary .*summary\.json is not valid JSON"):
        loaders.read_pedigree_summary(results)


def test_compare_tables_get_the_report_names_and_skip_auxiliary_files(results):
    folder = results / "compare"
    folder.mkdir()
    as_table(pd.DataFrame({"method": ["gmax"], "statistic": ["share"], "population": ["north"],
                  "mean": [0.5], "median": [0.4], "hpd_lower": [0.3], "hpd_upper": [0.6],
                  "null_median": [0.2], "null_hpd_lower": [0.1], "null_hpd_upper": [0.3],
                  "hpd_overlap": [True]})).to_csv(folder / "gmax.csv", index=False)
    pd.DataFrame({"reference": ["subspace_axis"], "value": [1.0]}).to_csv(folder / "loadings.csv", index=False)
    pd.DataFrame({"method": ["x"], "quantity": ["q"], "value": [1.0]}).to_csv(folder / "references.csv", index=False)
    tables = loaders.read_compare_tables(results)
    assert list(tables) == ["gmax"]
    frame = tables["gmax"]
    # the median is preferred over the mean as the point estimate
    assert frame.loc[0, "estimate"] == 0.4
    assert frame.loc[0, "null_estimate"] == 0.2 and frame.loc[0, "lower"] == 0.3
    extras = loaders.read_compare_extras(results)
    assert extras["loadings"]["reference"].tolist() == ["subspace_axis"]
    assert extras["draw_checks"] is None and extras["summary"] is None


def test_compare_method_order(results):
    folder = results / "compare"
    folder.mkdir()
    for name in ("distance", "zeta", "skewers", "tensor"):
        as_table(pd.DataFrame({"method": [name], "statistic": ["s"], "median": [1.0]})).to_csv(
            folder / f"{name}.csv", index=False)
    assert list(loaders.read_compare_tables(results)) == ["skewers", "tensor", "distance", "zeta"]


@pytest.mark.parametrize("old,new", [("median", "estimate"), ("hpd_lower", "lower"), ("population", "pop")])
def test_a_renamed_comparison_column_is_refused(results, old, new):
    # Names another program might use are not accepted in place of the contract's
    # (ped2g.contracts.compare_tables.COLUMNS).
    folder = results / "compare"
    folder.mkdir()
    frame = as_table(pd.DataFrame({"method": ["gmax"], "statistic": ["share"], "median": [0.4]}))
    frame.rename(columns={old: new}).to_csv(folder / "gmax.csv", index=False)
    with pytest.raises(UserError, match=rf"gmax\.csv has .*{new}.*rerun 'ped2g compare'"):
        loaders.read_compare_tables(results)


def test_phenotype_table_needs_the_trait_columns(tmp_path):
    path = tmp_path / "phen.csv"
    pd.DataFrame({"population": ["a"], "wing": ["1.5"]}).to_csv(path, index=False)
    with pytest.raises(UserError, match=r"phenotype table .*no trait 'mass' column 'mass'"):
        loaders.read_phenotypes(path, "population", ["wing", "mass"])
    frame = loaders.read_phenotypes(path, "population", ["wing"])
    assert frame["wing"].tolist() == [1.5]
    assert loaders.read_phenotypes(tmp_path / "absent.csv", "population", ["wing"]) is None


def test_read_results_lists_the_files_it_read(results):
    inputs = loaders.read_results(results, [])
    assert inputs.populations == sorted(POPULATIONS[:2])
    names = {p.name for p in inputs.files_read}
    assert {"posterior.nc", "parameters.csv", "diagnostics.json", "pedigree_used.csv"} <= names
    assert inputs.compare == {} and inputs.null_summary is None and not inputs.null_present
    assert inputs.fits["north"].divergences() == 0
