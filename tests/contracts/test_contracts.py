"""Every contract between stages: a tiny fit folder, null and compare folder through writer and
reader, values compared with the arrays written (exact identity: what goes in comes out)."""

from __future__ import annotations

import importlib
import json
import pkgutil

import numpy as np
import pandas as pd
import pytest

import ped2g.contracts
from ped2g.contracts import breeding_value_null, compare_tables, fit_folder, refit_null
from ped2g.errors import UserError

TRAITS = ["wing", "mass"]


def test_every_contract_imports_and_names_its_files():
    names = [m.name for m in pkgutil.iter_modules(ped2g.contracts.__path__)]
    assert sorted(names) == ["breeding_value_null", "compare_tables", "fit_folder", "refit_null"]
    for name in names:
        module = importlib.import_module(f"ped2g.contracts.{name}")
        assert module.__doc__ and "read" in module.__doc__


def _wishart(rng, shape):
    X = rng.standard_normal((*shape, 2, 5))
    return X @ np.swapaxes(X, -1, -2)


def _write_fit(folder, population, rng, chains=2, draws=6):
    """A fit folder as the fit stage leaves it, written with the contract's own builder."""
    import arviz as az

    from ped2g.fit.outputs import parameter_table

    G, R = _wishart(rng, (chains, draws)), _wishart(rng, (chains, draws))
    mean = rng.standard_normal((chains, draws, 2))
    post = fit_folder.posterior_dataset(population, TRAITS, G, R, G + R, mean)
    folder.mkdir(parents=True)
    az.InferenceData(posterior=post).to_netcdf(str(folder / fit_folder.POSTERIOR_FILE), engine="h5netcdf")
    parameter_table(post).to_csv(folder / fit_folder.PARAMETERS_FILE, index=False)
    (folder / fit_folder.DIAGNOSTICS_FILE).write_text(json.dumps(
        {"population": population, "traits": TRAITS, "engine": "latent", "engine_reason": "test",
         "missing_values": "none", "sampling": {"divergences": 0}, "checks": {"passed": True, "divergences": 0},
         "on_failure": "stop"}))
    pd.DataFrame({"id": ["a", "b", "c"], "sire": ["", "", "a"], "dam": ["", "", "b"],
                  "phenotyped": [0, 1, 1]}).to_csv(folder / fit_folder.PEDIGREE_USED_FILE, index=False)
    pd.DataFrame({"id": ["a"]}).to_csv(folder / fit_folder.BREEDING_VALUES_FILE, index=False)
    return G, R, mean


def test_fit_folder_round_trip(tmp_path):
    rng = np.random.default_rng(1)
    G, R, mean = _write_fit(tmp_path / "north", "north", rng)
    fit_folder.check_fit_folder(tmp_path / "north")
    fit = fit_folder.load_fit(tmp_path / "north")
    assert fit.population == "north" and fit.traits == TRAITS and fit.phenotyped == ["b", "c"]
    np.testing.assert_array_equal(fit.G, G.reshape(-1, 2, 2))        # chain-major pooling
    np.testing.assert_array_equal(fit.mean, mean.reshape(-1, 2))
    idata = fit_folder.read_inference_data(tmp_path / "north")
    np.testing.assert_array_equal(idata.posterior["R"].values, R)
    assert fit_folder.read_diagnostics(tmp_path / "north")["missing_values"] == "none"
    assert list(fit_folder.read_parameters(tmp_path / "north").columns) == list(fit_folder.PARAMETER_COLUMNS)


def test_fit_folder_writer_check_refuses_a_renamed_column_or_key(tmp_path):
    rng = np.random.default_rng(2)
    _write_fit(tmp_path / "north", "north", rng)
    path = tmp_path / "north" / fit_folder.PARAMETERS_FILE
    pd.read_csv(path).rename(columns={"r_hat": "rhat"}).to_csv(path, index=False)
    with pytest.raises(ValueError, match="rhat"):
        fit_folder.check_fit_folder(tmp_path / "north")
    with pytest.raises(UserError, match="no column r_hat"):
        fit_folder.read_parameters(tmp_path / "north")
    _write_fit(tmp_path / "south", "south", rng)
    diag = tmp_path / "south" / fit_folder.DIAGNOSTICS_FILE
    record = json.loads(diag.read_text())
    record["missing"] = record.pop("missing_values")
    diag.write_text(json.dumps(record))
    with pytest.raises(ValueError, match="missing_values"):
        fit_folder.check_fit_folder(tmp_path / "south")


def test_breeding_value_null_round_trip_is_named(tmp_path):
    rng = np.random.default_rng(3)
    G = _wishart(rng, (4, 3))
    breeding_value_null.write_null(tmp_path / breeding_value_null.NULL_FILE, G, ["a", "b", "c"], TRAITS,
                                   np.array([0, 3, 5, 7]), {"estimator": "mendelian"})
    null = breeding_value_null.read_null(tmp_path)
    np.testing.assert_array_equal(null.G, G)
    assert null.populations == ["a", "b", "c"] and null.traits == TRAITS
    assert null.draw_index.tolist() == [0, 3, 5, 7] and null.attrs["estimator"] == "mendelian"


def test_refit_null_round_trip(tmp_path):
    from ped2g.null.refit import Replicate

    rng = np.random.default_rng(4)

    def replicate():
        G = _wishart(rng, (5,))
        return Replicate(G=G, P=2 * G, mean=rng.standard_normal((5, 2)), rhat_max=1.0, ess_bulk_min=50.0,
                         ess_tail_min=40.0, divergences=0, seconds=1.5)

    written = {}
    for pop in ("a", "b"):
        written[pop] = [replicate(), replicate()]
        refit_null.write_chunk(tmp_path / f"{pop}.nc", pop, TRAITS, [0, 1], written[pop],
                               {"engine": "latent", "shared_G": np.eye(2).ravel().tolist(), "seed": 1,
                                "chains": 1, "warmup": 5, "draws": 5})
    null = refit_null.read_refits([tmp_path], ["a", "b"], TRAITS)
    assert null.replicates.tolist() == [0, 1] and null.G.shape == (2, 5, 2, 2, 2)
    np.testing.assert_array_equal(null.G[1, :, 0], written["a"][1].G)
    np.testing.assert_array_equal(null.mean[0, :, 1], written["b"][0].mean)
    with pytest.raises(ValueError, match="refits for"):
        refit_null.write_chunk(tmp_path / "c.nc", "c", TRAITS, [0, 1], written["a"][:1], {})


def test_pilot_files_are_read_for_the_correction_and_refused_when_stale(tmp_path):
    from ped2g.null.refit import Replicate

    rng = np.random.default_rng(5)
    G_bar = np.array([[2.0, 0.3], [0.3, 1.0]])
    attrs = {"engine": "marginal", "shared_G": G_bar.ravel().tolist(), "seed": 1, "chains": 1, "warmup": 5,
             "draws": 5}
    written = []
    for pop in ("a", "b"):
        reps = [Replicate(G=_wishart(rng, (5,)), P=np.eye(2)[None].repeat(5, 0) * 9, mean=np.zeros((5, 2)),
                          rhat_max=1.0, ess_bulk_min=5.0, ess_tail_min=5.0, divergences=0, seconds=1.0)
                for _ in range(3)]
        written += [r.G.mean(axis=0) for r in reps]
        refit_null.write_chunk(tmp_path / "pilot" / f"{pop}.nc", pop, TRAITS, [0, 1, 2], reps, attrs,
                               kind=refit_null.PILOT_KIND)
    means = refit_null.read_pilots([tmp_path / "pilot"], ["a", "b"], TRAITS, G_bar)
    np.testing.assert_allclose(np.mean(means, axis=0), np.mean(written, axis=0), rtol=1e-12)
    assert len(means) == 6
    with pytest.raises(UserError, match="another shared G"):
        refit_null.read_pilots([tmp_path / "pilot"], ["a", "b"], TRAITS, 1.01 * G_bar)
    with pytest.raises(UserError, match="no pilot refits for population.* c"):
        refit_null.read_pilots([tmp_path / "pilot"], ["a", "b", "c"], TRAITS, G_bar)
    # a pilot file is not a replicate file, and the other way round
    with pytest.raises(UserError, match="not written by 'ped2g null-refit'"):
        refit_null.read_refits([tmp_path / "pilot"], ["a", "b"], TRAITS)
    refit_null.write_chunk(tmp_path / "refits" / "a.nc", "a", TRAITS, [0], [reps[0]], attrs)
    with pytest.raises(UserError, match="--pilot"):
        refit_null.read_pilots([tmp_path / "refits"], ["a"], TRAITS, G_bar)


def _tables():
    rows = {m: compare_tables.as_table(pd.DataFrame({"method": [m], "statistic": ["s"], "median": [0.5],
                                                      "mean": [0.4]}))
            for m in compare_tables.METHOD_ORDER}
    return rows


def test_compare_tables_round_trip(tmp_path):
    tables = _tables()
    compare_tables.check_tables(tables)
    for name, frame in tables.items():
        frame.to_csv(tmp_path / f"{name}.csv", index=False)
    pd.DataFrame({"reference": ["x"], "value": [1.0]}).to_csv(tmp_path / "loadings.csv", index=False)
    read = compare_tables.read_tables(tmp_path)
    assert tuple(read) == compare_tables.METHOD_ORDER
    for name, frame in read.items():
        assert list(frame.columns) == list(compare_tables.COLUMNS)
        assert frame.loc[0, "median"] == 0.5 and frame.loc[0, "method"] == name
    extras = compare_tables.read_extras(tmp_path)
    assert extras["loadings"]["value"].tolist() == [1.0] and extras["summary"] is None


def test_compare_tables_refuse_a_renamed_column_on_both_sides(tmp_path):
    tables = _tables()
    tables["gmax"] = tables["gmax"].rename(columns={"hpd_upper": "upper"})
    with pytest.raises(ValueError, match="hpd_upper"):
        compare_tables.check_tables(tables)
    tables["gmax"].to_csv(tmp_path / "gmax.csv", index=False)
    with pytest.raises(UserError, match="no column hpd_upper"):
        compare_tables.read_tables(tmp_path)


def test_compare_tables_writer_check_needs_the_method_order():
    tables = _tables()
    reordered = {m: tables[m] for m in reversed(compare_tables.METHOD_ORDER)}
    with pytest.raises(ValueError, match="in order"):
        compare_tables.check_tables(reordered)
