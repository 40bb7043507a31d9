"""``ped2g compare`` end to end on small fake fits: outputs, pairing with the null, bad input."""

from __future__ import annotations

import json
import logging
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from ped2g.cli import main
from ped2g.contracts.breeding_value_null import write_null
from ped2g.contracts.compare_tables import COLUMNS
from ped2g.contracts.compare_tables import METHOD_ORDER as METHODS
from ped2g.contracts.fit_folder import load_fit_set

from conftest import random_spd, write_config, write_fit


def run(*argv: str) -> int:
    return main(["compare", *map(str, argv)])


def error_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err          # one line, no traceback
    assert err[0].startswith("ped2g compare: error: ")
    return err[0]


def test_writes_every_table_without_null(tmp_path, fit_folders):
    cfg = write_config(tmp_path / "c.yaml")
    assert run("--config", cfg, "--fits", *fit_folders, "--out", tmp_path / "out") == 0
    out = tmp_path / "out"
    assert sorted(p.stem for p in out.glob("*.csv")) == sorted(
        [*METHODS, "references", "loadings", "draw_checks"])
    for method in METHODS:
        table = pd.read_csv(out / f"{method}.csv", keep_default_na=False, na_values=[""])
        assert list(table.columns) == COLUMNS
        assert len(table) > 0
        assert table["null_mean"].isna().all() and table["p_obs_gt_null"].isna().all()
        assert table["mean"].notna().all()
        assert (table["scale"] == "variance").all() and (table["interval_mass"] == 0.9).all()
    skew = pd.read_csv(out / "skewers.csv")
    corr = skew[skew.statistic == "correlation"]
    assert sorted(zip(corr.population, corr.population2)) == sorted(
        [("north", "south"), ("north", "east"), ("south", "east")])
    ds = xr.open_dataset(out / "draws.nc", engine="h5netcdf")
    assert ds.attrs["ped2g_kind"] == "compare" and ds.attrs["scale"] == "variance"
    assert ds["skewers_correlation"].dims == ("draw", "population", "population2")
    assert ds.sizes["draw"] == 40 and ds["reference_skewers"].shape == (200, 3)
    assert not any(name.startswith("null_") for name in ds.data_vars)
    refs = pd.read_csv(out / "references.csv")
    assert set(refs.method) >= {"skewers", "gmax", "subspace", "tensor"}
    loadings = pd.read_csv(out / "loadings.csv")
    assert set(loadings.reference) >= {"subspace_axis", "eigentensor", "gmax_posterior_mean"}


def test_same_seed_same_numbers(tmp_path, fit_folders):
    cfg = write_config(tmp_path / "c.yaml")
    run("--config", cfg, "--fits", *fit_folders, "--out", tmp_path / "a")
    run("--config", cfg, "--fits", *fit_folders, "--out", tmp_path / "b")
    for method in METHODS:
        pd.testing.assert_frame_equal(pd.read_csv(tmp_path / "a" / f"{method}.csv"),
                                      pd.read_csv(tmp_path / "b" / f"{method}.csv"))


def test_null_equal_to_observed_gives_zero_difference(tmp_path, fit_folders):
    # A null whose G equal the observed ones (populations stored in another order): every paired
    # difference is exactly 0 and no observed value exceeds its null partner.
    fits = load_fit_set(fit_folders)
    order = [2, 0, 1]
    write_null(tmp_path / "null_G.nc", fits.G[:, order], [fits.populations[i] for i in order],
               fits.traits, fits.draw_index, {"estimator": "mendelian"})
    cfg = write_config(tmp_path / "c.yaml", scale="original")
    assert run("--config", cfg, "--fits", *fit_folders, "--null", tmp_path / "null_G.nc",
               "--out", tmp_path / "out") == 0
    for method in METHODS:
        table = pd.read_csv(tmp_path / "out" / f"{method}.csv")
        assert (table["n_pairs"] == 40).all(), method
        np.testing.assert_allclose(table["diff_mean"], 0.0, atol=1e-9)
        assert (table["p_obs_gt_null"] <= 0.5).all(), method
        np.testing.assert_allclose(table["null_mean"], table["mean"], rtol=1e-9, atol=1e-12)
    ds = xr.open_dataset(tmp_path / "out" / "draws.nc", engine="h5netcdf")
    assert ds["null_skewers_correlation"].dims == ("null_draw", "population", "population2")


def test_null_is_standardised_by_the_pooled_scale_of_its_draw(tmp_path, fit_folders):
    # Variance scale: an observed G is divided by its own population's phenotypic SDs, a null G by
    # sqrt of the populations' average phenotypic variance of the same draw (ped2g.compare.scale).
    fits = load_fit_set(fit_folders)
    write_null(tmp_path / "null_G.nc", fits.G, fits.populations, fits.traits, fits.draw_index,
               {"estimator": "mendelian"})
    cfg = write_config(tmp_path / "c.yaml", scale="variance")
    assert run("--config", cfg, "--fits", *fit_folders, "--null", tmp_path / "null_G.nc",
               "--out", tmp_path / "out") == 0
    ev = pd.read_csv(tmp_path / "out" / "evolvability.csv").query("statistic == 'evolvability'")
    p_own = np.diagonal(fits.P, axis1=-2, axis2=-1)                          # (S, m, t)
    p_pool = p_own.mean(axis=1, keepdims=True)
    g = np.diagonal(fits.G, axis1=-2, axis2=-1)
    np.testing.assert_allclose(ev["mean"], (g / p_own).mean(-1).mean(0), rtol=1e-10)
    np.testing.assert_allclose(ev["null_mean"], (g / p_pool).mean(-1).mean(0), rtol=1e-10)


def test_null_is_paired_by_draw_index(tmp_path, fit_folders):
    # The null holds, in reverse order, 1.5 times the G of the observed draws; statistics that
    # scale with G (mean evolvability) must be compared with their own draw.
    fits = load_fit_set(fit_folders)
    cfg = write_config(tmp_path / "c.yaml", scale="original")
    write_null(tmp_path / "null_G.nc", 1.5 * fits.G[::-1], fits.populations, fits.traits,
               fits.draw_index[::-1], {"estimator": "mendelian"})
    assert run("--config", cfg, "--fits", *fit_folders, "--null", tmp_path / "null_G.nc",
               "--out", tmp_path / "out") == 0
    ev = pd.read_csv(tmp_path / "out" / "evolvability.csv")
    e = ev[ev.statistic == "evolvability"]
    assert (e["p_obs_gt_null"] == 0.0).all()
    np.testing.assert_allclose(e["diff_mean"], -0.5 * e["mean"], rtol=1e-9)


def test_rescaling_trait_units_leaves_variance_scaled_results_unchanged(tmp_path):
    # Changing a trait's units (x -> c x) multiplies G, P and means by the same factors; the
    # variance-standardised comparison must not notice.
    rng = np.random.default_rng(3)
    D = np.diag([10.0, 0.1, 1.0])
    base, scaled = [], []
    for j, pop in enumerate(["a1", "b2"]):
        G = random_spd(rng, 3, (20,))
        P = G + np.eye(3)
        mean = 5.0 + j + rng.random((20, 3))
        base.append(write_fit(tmp_path / "base" / pop, pop, ["a", "b", "c"], G, mean, P))
        scaled.append(write_fit(tmp_path / "scaled" / pop, pop, ["a", "b", "c"], D @ G @ D, mean @ D, D @ P @ D))
    cfg = write_config(tmp_path / "c.yaml", skewers=50)
    assert run("--config", cfg, "--fits", *base, "--out", tmp_path / "o1") == 0
    assert run("--config", cfg, "--fits", *scaled, "--out", tmp_path / "o2") == 0
    for method in METHODS:
        a = pd.read_csv(tmp_path / "o1" / f"{method}.csv")
        b = pd.read_csv(tmp_path / "o2" / f"{method}.csv")
        np.testing.assert_allclose(a["mean"], b["mean"], rtol=1e-8, atol=1e-10, err_msg=method)


def test_non_positive_definite_draws_are_left_out_and_counted(tmp_path, fit_folders, caplog):
    rng = np.random.default_rng(4)
    G = random_spd(rng, 3, (40,))
    G[[3, 17]] = np.diag([1.0, 1.0, -0.2])                      # two draws not positive definite
    bad = write_fit(tmp_path / "fits" / "west", "west", ["a", "b", "c"], G,
                    mean=np.full((40, 3), 12.0))
    cfg = write_config(tmp_path / "c.yaml")
    logger = logging.getLogger("ped2g.compare")        # ped2g's loggers do not propagate to root
    logger.addHandler(caplog.handler)
    try:
        assert run("--config", cfg, "--fits", *fit_folders, bad, "--out", tmp_path / "out") == 0
    finally:
        logger.removeHandler(caplog.handler)
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["not_positive_definite"]["observed:west"] == 2
    checks = pd.read_csv(tmp_path / "out" / "draw_checks.csv")
    row = checks[(checks.source == "observed") & (checks.population == "west")]
    assert row["n_not_positive_definite"].item() == 2
    assert checks[checks.population != "west"]["n_not_positive_definite"].eq(0).all()
    ev = pd.read_csv(tmp_path / "out" / "evolvability.csv")
    assert ev.loc[ev.population == "west", "n_draws"].eq(38).all()
    assert ev.loc[ev.population == "north", "n_draws"].eq(40).all()
    dist = pd.read_csv(tmp_path / "out" / "distance.csv")
    with_west = (dist.population == "west") | (dist.population2 == "west")
    assert dist.loc[with_west, "n_draws"].eq(38).all() and dist.loc[~with_west, "n_draws"].eq(40).all()
    sub = pd.read_csv(tmp_path / "out" / "subspace.csv")
    assert sub.loc[sub.statistic == "eigenvalue", "n_draws"].eq(38).all()   # set-level statistic
    assert "not positive definite" in caplog.text and "west: 2 of 40" in caplog.text


def test_all_draws_not_positive_definite_is_an_error(tmp_path, fit_folders, capsys):
    G = np.broadcast_to(np.diag([1.0, -1.0, 1.0]), (40, 3, 3)).copy()
    bad = write_fit(tmp_path / "fits" / "west", "west", ["a", "b", "c"], G, P=np.broadcast_to(3 * np.eye(3), G.shape))
    cfg = write_config(tmp_path / "c.yaml")
    assert run("--config", cfg, "--fits", *fit_folders, bad, "--out", tmp_path / "out") == 2
    assert "population 'west': none of its 40 draws is positive definite" in error_line(capsys)
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("traits, message", [
    (["a", "c", "b"], "another order"),
    (["a", "b", "z"], "differ from"),
])
def test_fits_with_other_traits_are_refused(tmp_path, fit_folders, capsys, traits, message):
    other = write_fit(tmp_path / "fits" / "west", "west", traits, random_spd(np.random.default_rng(5), 3, (40,)))
    cfg = write_config(tmp_path / "c.yaml")
    assert run("--config", cfg, "--fits", fit_folders[0], other, "--out", tmp_path / "out") == 2
    assert message in error_line(capsys)
    assert not (tmp_path / "out").exists()


def test_one_population_is_refused(tmp_path, fit_folders, capsys):
    cfg = write_config(tmp_path / "c.yaml")
    assert run("--config", cfg, "--fits", fit_folders[0], "--out", tmp_path / "out") == 2
    assert "at least two populations" in error_line(capsys)


def test_file_that_is_not_a_fit_is_refused(tmp_path, fit_folders, capsys):
    fake = tmp_path / "fake"
    fake.mkdir()
    xr.Dataset({"x": ("a", [1.0])}).to_netcdf(fake / "posterior.nc", engine="h5netcdf")
    cfg = write_config(tmp_path / "c.yaml")
    assert run("--config", cfg, "--fits", fit_folders[0], fake, "--out", tmp_path / "out") == 2
    assert "is not an ArviZ netCDF file written by ped2g's fit stage" in error_line(capsys)


def test_null_from_other_draws_is_refused(tmp_path, fit_folders, capsys):
    fits = load_fit_set(fit_folders)
    write_null(tmp_path / "null_G.nc", fits.G, fits.populations, fits.traits, fits.draw_index + 100,
               {"estimator": "mendelian"})
    cfg = write_config(tmp_path / "c.yaml")
    assert run("--config", cfg, "--fits", *fit_folders, "--null", tmp_path / "null_G.nc",
               "--out", tmp_path / "out") == 2
    assert "rerun 'ped2g null' with this config and these fits" in error_line(capsys)


def test_null_with_other_populations_is_refused(tmp_path, fit_folders, capsys):
    fits = load_fit_set(fit_folders)
    write_null(tmp_path / "null_G.nc", fits.G, ["north", "south", "elsewhere"], fits.traits,
               fits.draw_index, {"estimator": "mendelian"})
    cfg = write_config(tmp_path / "c.yaml")
    assert run("--config", cfg, "--fits", *fit_folders, "--null", tmp_path / "null_G.nc",
               "--out", tmp_path / "out") == 2
    assert "populations (north, south, elsewhere) that differ" in error_line(capsys)


def test_mean_scale_with_negative_means_is_refused(tmp_path, capsys):
    rng = np.random.default_rng(6)
    folders = [write_fit(tmp_path / p, p, ["a", "b", "c"], random_spd(rng, 3, (10,)),
                         mean=np.tile([1.0, -2.0 if p == "q" else 2.0, 3.0], (10, 1)))
               for p in ("p", "q")]
    cfg = write_config(tmp_path / "c.yaml", scale="mean")
    assert run("--config", cfg, "--fits", *folders, "--out", tmp_path / "out") == 2
    line = error_line(capsys)
    assert "trait 'b' of population 'q'" in line and "set compare.scale" in line


def test_too_many_subspace_dims_is_refused(tmp_path, fit_folders, capsys):
    cfg = write_config(tmp_path / "c.yaml", subspace_dims=3)
    assert run("--config", cfg, "--fits", *fit_folders, "--out", tmp_path / "out") == 2
    assert "compare.subspace_dims" in error_line(capsys)


def test_bad_memory_budget_is_refused(tmp_path, fit_folders, capsys):
    cfg = write_config(tmp_path / "c.yaml")
    assert run("--config", cfg, "--fits", *fit_folders, "--out", tmp_path / "out", "--memory", "0") == 2
    assert "--memory" in error_line(capsys)


def test_mean_scale_divides_by_each_draws_means(tmp_path, fit_folders):
    # Mean-standardised: the mean evolvability of a population is mean_s tr(G / mu mu') / t
    # (Houle 1992's I_A averaged over traits), computed here directly from the fits.
    cfg = write_config(tmp_path / "c.yaml", scale="mean")
    assert run("--config", cfg, "--fits", *fit_folders, "--out", tmp_path / "out") == 0
    fits = load_fit_set(fit_folders)
    ia = np.diagonal(fits.G, axis1=-2, axis2=-1) / fits.mean ** 2           # (S, m, t)
    ev = pd.read_csv(tmp_path / "out" / "evolvability.csv").query("statistic == 'evolvability'")
    assert ev["population"].tolist() == fits.populations
    np.testing.assert_allclose(ev["mean"], ia.mean(-1).mean(0), rtol=1e-10)
    assert (ev["scale"] == "mean").all()
