"""The fit-folder contract between the fit stage and later stages (ped2g.contracts.fit_folder)."""

import arviz as az
import numpy as np
import pandas as pd
import pytest

from ped2g.errors import UserError
from ped2g.contracts.fit_folder import (derived_from_covariances, load_fit, load_fit_set,
                             posterior_dataset, thin_indices)


def write_fake_fit(folder, population, traits, chains=2, draws=30, seed=0):
    """A small fit folder with random positive-definite G, R (test fixture, not a real fit)."""
    rng = np.random.default_rng(seed)
    t = len(traits)
    a = rng.normal(size=(chains, draws, t, t + 2))
    G = a @ np.swapaxes(a, -1, -2) / (t + 2)
    R = np.broadcast_to(np.eye(t), G.shape).copy()
    mean = rng.normal(10, 1, size=(chains, draws, t))
    ds = posterior_dataset(population, traits, G, R, G + R, mean)
    folder.mkdir(parents=True, exist_ok=True)
    az.InferenceData(posterior=ds).to_netcdf(folder / "posterior.nc")
    pd.DataFrame({"id": ["a", "b", "c"], "sire": ["", "", "a"], "dam": ["", "", "b"],
                  "generation": [0, 0, 1], "inbreeding": [0.0, 0.0, 0.0],
                  "phenotyped": [0, 1, 1]}).to_csv(folder / "pedigree_used.csv", index=False)
    return G


def test_h2_and_rg_follow_their_definitions():
    G = np.array([[4.0, 2.0], [2.0, 9.0]])
    P = np.array([[8.0, 1.0], [1.0, 18.0]])
    h2, rg = derived_from_covariances(G, P)
    np.testing.assert_allclose(h2, [0.5, 0.5])  # docs/methods.md §6 check values
    np.testing.assert_allclose(rg, [[1.0, 2.0 / 6.0], [2.0 / 6.0, 1.0]])


def test_round_trip_pools_chains_in_order(tmp_path):
    G = write_fake_fit(tmp_path / "A", "A", ["x", "y"], chains=2, draws=30)
    fit = load_fit(tmp_path / "A")
    assert fit.population == "A" and fit.traits == ["x", "y"]
    assert fit.G.shape == (60, 2, 2)
    np.testing.assert_allclose(fit.G[:30], G[0])
    np.testing.assert_allclose(fit.G[30:], G[1])
    assert fit.phenotyped == ["b", "c"]
    assert list(fit.chain[:30]) == [0] * 30


def test_fit_set_pairs_draws_and_thins(tmp_path):
    write_fake_fit(tmp_path / "A", "A", ["x", "y"], draws=30, seed=1)
    write_fake_fit(tmp_path / "B", "B", ["x", "y"], draws=20, seed=2)
    fs = load_fit_set([tmp_path / "A", tmp_path / "B"], max_draws=10)
    assert fs.G.shape == (10, 2, 2, 2)
    assert fs.populations == ["A", "B"]
    assert len(fs.draw_index) == 10 and fs.draw_index.max() <= 39


def test_thin_indices():
    assert list(thin_indices(5, None)) == [0, 1, 2, 3, 4]
    idx = thin_indices(1000, 100)
    assert len(idx) == 100 and idx[0] == 0 and idx[-1] == 999


def test_fit_sets_refuse_mismatches(tmp_path):
    write_fake_fit(tmp_path / "A", "A", ["x", "y"])
    write_fake_fit(tmp_path / "B", "B", ["y", "x"])
    write_fake_fit(tmp_path / "C", "C", ["x", "z"])
    with pytest.raises(UserError, match="at least two"):
        load_fit_set([tmp_path / "A"])
    with pytest.raises(UserError, match="another order"):
        load_fit_set([tmp_path / "A", tmp_path / "B"])
    with pytest.raises(UserError, match="differ"):
        load_fit_set([tmp_path / "A", tmp_path / "C"])
    with pytest.raises(UserError, match="both of population 'A'"):
        load_fit_set([tmp_path / "A", tmp_path / "A"])


def test_foreign_files_are_refused(tmp_path):
    (tmp_path / "X").mkdir()
    (tmp_path / "X" / "posterior.nc").write_bytes(b"not netcdf at all")
    with pytest.raises(UserError, match="not an ArviZ netCDF"):
        load_fit(tmp_path / "X")
    with pytest.raises(UserError, match="no posterior.nc"):
        load_fit(tmp_path / "missing")
    # A valid InferenceData that ped2g did not write.
    (tmp_path / "Y").mkdir()
    az.from_dict(posterior={"mu": np.zeros((2, 5))}).to_netcdf(tmp_path / "Y" / "posterior.nc")
    with pytest.raises(UserError, match="not written by ped2g"):
        load_fit(tmp_path / "Y")
