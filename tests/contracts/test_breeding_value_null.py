"""null_G.nc round trip and refusal of files that are not ped2g's null."""

import numpy as np
import pytest
import xarray as xr

from ped2g.errors import UserError
from ped2g.contracts.breeding_value_null import NULL_FILE, read_null, write_null


def _draws(rng, S=5, m=3, t=2):
    X = rng.standard_normal((S, m, t, t))
    return X @ np.swapaxes(X, -1, -2)


def test_round_trip_keeps_values_names_and_attributes(tmp_path):
    rng = np.random.default_rng(11)
    G = _draws(rng)
    path = write_null(tmp_path / NULL_FILE, G, ["north", "south", "east"], ["wing", "tarsus"],
                      np.array([0, 2, 4, 6, 8]), {"estimator": "mendelian", "seed": 7,
                                                  "non_pd_draws": [0, 1, 0]})
    G2, pops, traits, idx, attrs = read_null(path)
    np.testing.assert_array_equal(G2, G)
    assert pops == ["north", "south", "east"]
    assert traits == ["wing", "tarsus"]
    np.testing.assert_array_equal(idx, [0, 2, 4, 6, 8])
    assert attrs["estimator"] == "mendelian" and attrs["seed"] == 7
    assert attrs["ped2g_kind"] == "null"
    # the folder works as well as the file
    assert read_null(tmp_path)[1] == pops


def test_missing_file_is_a_user_error(tmp_path):
    with pytest.raises(UserError, match="null file not found"):
        read_null(tmp_path / "nothing.nc")


def test_not_netcdf_is_a_user_error(tmp_path):
    bad = tmp_path / NULL_FILE
    bad.write_text("id,sire,dam\n1,,\n")
    with pytest.raises(UserError, match="not a netCDF file"):
        read_null(bad)


def test_other_netcdf_is_refused(tmp_path):
    path = tmp_path / "other.nc"
    xr.Dataset({"G": (("draw",), np.zeros(3))}).to_netcdf(path, engine="h5netcdf")
    with pytest.raises(UserError, match="not written by 'ped2g null'"):
        read_null(path)


def test_wrong_shapes_are_programming_errors():
    from ped2g.contracts.breeding_value_null import null_dataset

    with pytest.raises(ValueError, match="draw_index"):
        null_dataset(np.zeros((4, 2, 2, 2)), ["a", "b"], ["x", "y"], np.arange(3))
