"""'ped2g fit' with model.engine: sparse, then 'ped2g null-refit' on its fit, on a small field study.

The study (tests/fit/field_study.py): repeated records, a maternal effect on the dam column with
some dams unknown (blank), a permanent-environment effect on the id column, a cohort effect on
the year column and missing cells. Checks: the fit folder passes its contract
(ped2g.contracts.fit_folder.check_fit_folder); P = G + R + every extra covariance draw by draw
(the model's identity, docs/methods.md §2.2); diagnostics.json names the engine and why; the
refitting null compiles the sparse model once and swaps each replicate's records in.
"""

import json

import numpy as np
import pytest
import xarray as xr
import yaml

from cli_runner import run_cli
from ped2g.contracts.fit_folder import check_fit_folder, load_fit
from ped2g.contracts.refit_null import read_refits

import field_study

pytestmark = pytest.mark.slow


_run = run_cli


def test_sparse_fit_and_refit_on_a_field_design(tmp_path, capsys):
    ped, phen, _ = field_study.tables(seed=3, animals=160, founders=25, phenotyped=80)
    assert (phen["dam"] == "").any() and phen[list(field_study.TRAITS)].isna().any().any()
    assert phen["id"].duplicated().any()
    ped.to_csv(tmp_path / "ped.csv", index=False)
    phen.to_csv(tmp_path / "phen.csv", index=False)
    cfg = {"data": {"pedigree": str(tmp_path / "ped.csv"), "phenotypes": str(tmp_path / "phen.csv")},
           "traits": list(field_study.TRAITS), "fixed": {"sex": "categorical"}, "random": field_study.RANDOM,
           "model": {"engine": "sparse"},
           "sampling": {"chains": 2, "warmup": 100, "draws": 100, "seed": 4},
           "compare": {"null_model": {"pilot_replicates": 0, "refit": {"chains": 1, "warmup": 60, "draws": 60}}},
           "checks": {"on_failure": "flag"}}
    (tmp_path / "config.yaml").write_text(yaml.safe_dump(cfg))
    out = tmp_path / "out"
    status = _run(["fit", "--config", str(tmp_path / "config.yaml"), "--population", "north",
                   "--out", str(out), "--no-progress"])
    assert status == 0
    check_fit_folder(out)
    diag = json.loads((out / "diagnostics.json").read_text())
    assert diag["engine"] == "sparse" and diag["engine_reason"].startswith("requested in the config")
    assert "random-effect unknowns" in diag["engine_reason"]
    assert diag["random_effects"] == ["maternal", "permanent", "cohort"]
    assert diag["missing_values"] == "masked" and diag["missing_trait_values"] > 0
    assert any("'maternal' (column dam)" in n and "unknown level" in n for n in diag["preparation_notes"])
    assert diag["sampling"]["gradient_evaluations"] > 0
    fit = load_fit(out)
    post = xr.open_dataset(out / "posterior.nc", group="posterior", engine="h5netcdf")
    extra = sum(post[f"cov_{e['name']}"] for e in field_study.RANDOM)
    extra = extra.stack(s=("chain", "draw")).transpose("s", ...).values
    np.testing.assert_allclose(fit.P, fit.G + fit.R + extra, rtol=1e-12)
    assert np.all(np.linalg.eigvalsh(fit.G) > 0)

    capsys.readouterr()
    status = _run(["null-refit", "--config", str(tmp_path / "config.yaml"), "--fits", str(out),
                   "--population", "north", "--count", "2", "--out", str(tmp_path / "refit.nc")])
    assert status == 0
    log = capsys.readouterr().err
    assert "compiled the sparse engine's model once for every replicate" in log
    refits = read_refits([tmp_path / "refit.nc"], ["north"], list(field_study.TRAITS))
    assert refits.G.shape[:1] == (2,) and np.all(np.isfinite(refits.G))
    # two replicates with different simulated records give different draws
    assert not np.allclose(refits.G[0], refits.G[1])
