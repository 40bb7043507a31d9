"""``ped2g null`` end to end on small fit folders, and its one-line refusals of bad input."""

import json

import numpy as np
import pytest

from null_helpers import random_covariances, random_pedigree, write_fit
from ped2g.cli import main
from ped2g.contracts.breeding_value_null import read_null

TRAITS = ["wing", "tarsus"]


def _config(tmp_path, estimator=None, max_draws=None):
    lines = ["sampling: {seed: 3}"]
    compare = []
    if estimator:
        compare.append(f"null_model: {{estimator: {estimator}}}")
    if max_draws:
        compare.append(f"max_draws: {max_draws}")
    if compare:
        lines.append("compare: {" + ", ".join(compare) + "}")
    path = tmp_path / "config.yaml"
    path.write_text("\n".join(lines) + "\n")
    return path


def _fits(tmp_path, n_pops=2, S=20, traits=TRAITS, seed=0):
    rng = np.random.default_rng(seed)
    dirs = []
    for j in range(n_pops):
        ped = random_pedigree(rng, 60, founders=8, generations=3, prefix=f"p{j}_")
        phen = np.r_[np.zeros(8), np.ones(52)]
        dirs.append(write_fit(tmp_path / f"fit_{j}", f"pop{j}", traits,
                              random_covariances(rng, S, len(traits)), ped, phen))
    return dirs


def _run(tmp_path, fits, config, out=None):
    out = out or tmp_path / "null"
    argv = ["null", "--config", str(config), "--fits", *map(str, fits), "--out", str(out)]
    return main(argv), out


def _one_error_line(capsys):
    err = capsys.readouterr().err.strip().splitlines()
    errors = [ln for ln in err if "error:" in ln]
    assert len(errors) == 1 and "Traceback" not in "\n".join(err)
    return errors[0]


@pytest.mark.parametrize("estimator", [None, "sample"])
def test_writes_null_and_summary(tmp_path, estimator):
    fits = _fits(tmp_path, n_pops=3)
    status, out = _run(tmp_path, fits, _config(tmp_path, estimator, max_draws=10))
    assert status == 0
    G, pops, traits, draw_index, attrs = read_null(out / "null_G.nc")
    assert G.shape == (10, 3, 2, 2) and pops == ["pop0", "pop1", "pop2"] and traits == TRAITS
    np.testing.assert_array_equal(draw_index, np.unique(np.linspace(0, 19, 10).round().astype(int)))
    used = estimator or "mendelian"
    assert attrs["estimator"] == used and "unbiased" in attrs["default_reason"]
    assert attrs["seed"] == 3
    assert np.all(np.linalg.eigvalsh(G) > 0)
    summary = json.loads((out / "summary.json").read_text())
    assert summary["estimator"] == used and summary["draws"] == 10
    assert summary["animals_pooled"] == {"pop0": 52, "pop1": 52, "pop2": 52}
    assert summary["animals_simulated"] == {"pop0": 60, "pop1": 60, "pop2": 60}
    assert all(0 < c <= 1.5 for c in summary["c_population"].values())
    assert summary["cautions"] and summary["run_seconds"] >= 0


def test_same_config_same_numbers(tmp_path):
    fits = _fits(tmp_path)
    config = _config(tmp_path)
    _run(tmp_path, fits, config, tmp_path / "a")
    _run(tmp_path, fits, config, tmp_path / "b")
    np.testing.assert_array_equal(read_null(tmp_path / "a")[0], read_null(tmp_path / "b")[0])


def test_singular_draws_are_counted_not_repaired(tmp_path):
    rng = np.random.default_rng(4)
    ped = random_pedigree(rng, 40, founders=6, generations=2, prefix="s")
    G = random_covariances(rng, 10, 2)
    G[3] = np.outer([1.0, 2.0], [1.0, 2.0])
    fits = [write_fit(tmp_path / "f0", "a", TRAITS, G, ped),
            write_fit(tmp_path / "f1", "b", TRAITS, random_covariances(rng, 10, 2), ped)]
    status, out = _run(tmp_path, fits, _config(tmp_path))
    assert status == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["singular_draws"] == {"a": 1, "b": 0}
    assert read_null(out)[4]["singular_draws"].tolist() == [1, 0]


def test_indefinite_draws_are_refused_with_counts(tmp_path, capsys):
    rng = np.random.default_rng(5)
    ped = random_pedigree(rng, 40, founders=6, generations=2, prefix="s")
    G = random_covariances(rng, 10, 2)
    G[[2, 7]] = np.array([[1.0, 2.0], [2.0, 1.0]])
    fits = [write_fit(tmp_path / "f0", "a", TRAITS, random_covariances(rng, 10, 2), ped),
            write_fit(tmp_path / "f1", "b", TRAITS, G, ped)]
    status, out = _run(tmp_path, fits, _config(tmp_path))
    assert status == 2 and not out.exists()
    line = _one_error_line(capsys)
    assert "not covariance matrices" in line and "b: 2 of 10 draws" in line


def test_different_traits_are_refused(tmp_path, capsys):
    fits = _fits(tmp_path)
    rng = np.random.default_rng(6)
    fits[1] = write_fit(tmp_path / "other", "pop9", ["wing", "bill"], random_covariances(rng, 20, 2),
                        random_pedigree(rng, 30, founders=5, generations=2))
    status, out = _run(tmp_path, fits, _config(tmp_path))
    assert status == 2 and not out.exists()
    assert "differ from" in _one_error_line(capsys)


def test_different_trait_order_is_refused(tmp_path, capsys):
    fits = _fits(tmp_path)
    rng = np.random.default_rng(6)
    fits[1] = write_fit(tmp_path / "other", "pop9", TRAITS[::-1], random_covariances(rng, 20, 2),
                        random_pedigree(rng, 30, founders=5, generations=2))
    status, _ = _run(tmp_path, fits, _config(tmp_path))
    assert status == 2 and "another order" in _one_error_line(capsys)


def test_one_population_is_refused(tmp_path, capsys):
    status, _ = _run(tmp_path, _fits(tmp_path)[:1], _config(tmp_path))
    assert status == 2 and "at least two populations" in _one_error_line(capsys)


def test_foreign_fit_file_is_refused(tmp_path, capsys):
    fits = _fits(tmp_path)
    (fits[1] / "posterior.nc").write_text("not a netcdf file\n")
    status, _ = _run(tmp_path, fits, _config(tmp_path))
    assert status == 2 and "not an ArviZ netCDF file" in _one_error_line(capsys)


def test_population_without_phenotyped_animals_is_refused(tmp_path, capsys):
    rng = np.random.default_rng(7)
    ped = random_pedigree(rng, 30, founders=5, generations=2, prefix="q")
    fits = _fits(tmp_path)
    fits[0] = write_fit(tmp_path / "empty", "pop0", TRAITS, random_covariances(rng, 20, 2), ped,
                        np.zeros(30))
    status, _ = _run(tmp_path, fits, _config(tmp_path))
    line = _one_error_line(capsys)
    assert status == 2 and "0 phenotyped animals" in line and "pedigree_used.csv" in line


def test_unknown_estimator_in_config_is_refused(tmp_path, capsys):
    status, _ = _run(tmp_path, _fits(tmp_path), _config(tmp_path, estimator="wishart"))
    line = _one_error_line(capsys)
    assert status == 2 and "compare.null_model.estimator" in line and "mendelian" in line


def test_bad_memory_budget_is_refused(tmp_path, capsys):
    fits = _fits(tmp_path)
    argv = ["null", "--config", str(_config(tmp_path)), "--fits", *map(str, fits),
            "--out", str(tmp_path / "n"), "--memory", "0"]
    assert main(argv) == 2 and "--memory" in _one_error_line(capsys)


def test_broken_pedigree_file_is_refused(tmp_path, capsys):
    fits = _fits(tmp_path)
    (fits[0] / "pedigree_used.csv").write_text("id,phenotyped\nx,1\n")
    status, _ = _run(tmp_path, fits, _config(tmp_path))
    line = _one_error_line(capsys)
    assert status == 2 and "pedigree_used.csv" in line and "rerun 'ped2g fit'" in line
