"""'ped2g fit' end to end on a small invented study: every output file, in its documented form.

The study has repeated records, a brood (common-environment) effect and a permanent-environment
effect of the animal. Checks are exact identities of the outputs (P = G + R + the extra
covariances; h2 =
diag(G)/diag(P); parameters.csv summarises the same draws; the pruned pedigree lists every
phenotyped animal) and the checks logic (a too-short run misses the thresholds, ends with
status 1 and leaves no posterior.nc).
"""

import json

import numpy as np
import pandas as pd
import pytest
import xarray as xr
import yaml

from cli_runner import run_cli
from ped2g.contracts.fit_folder import load_fit
from ped2g.simulate.study import StudySettings, simulate_study

pytestmark = pytest.mark.slow


_run = run_cli


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    root = tmp_path_factory.mktemp("fitrun")
    s = StudySettings(populations=("north",), traits=("mass", "wing", "tail"), animals=260, founders=30,
                      phenotyped=150, records_per_animal=2, permanent_fraction=0.1, brood_fraction=0.1,
                      duplicate_rows=0, absent_parents=0, stray_whitespace=0)
    st = simulate_study(s, seed=5)
    st.pedigree.to_csv(root / "ped.csv", index=False)
    st.phenotypes.to_csv(root / "phen.csv", index=False)
    cfg = {"data": {"pedigree": str(root / "ped.csv"), "phenotypes": str(root / "phen.csv")},
           "traits": ["mass", "wing", "tail"], "fixed": {"sex": "categorical"},
           "random": [{"name": "brood", "column": "brood"}, {"name": "permanent", "column": "id"}],
           # the marginal engine's Gibbs route for missing values, with extra random effects (auto
           # would take the sparse engine for these effects, and sample few missing cells by NUTS)
           "model": {"engine": "marginal", "missing_values": "gibbs"},
           "sampling": {"chains": 2, "warmup": 150, "draws": 150, "seed": 4},
           "checks": {"on_failure": "flag"}}
    (root / "config.yaml").write_text(yaml.safe_dump(cfg))
    status = _run(["fit", "--config", str(root / "config.yaml"), "--population", "north",
                   "--out", str(root / "out"), "--no-progress"])
    return root, status, st


def test_outputs_exist_and_agree(study):
    root, status, st = study
    assert status == 0
    out = root / "out"
    for name in ("posterior.nc", "parameters.csv", "breeding_values.csv", "pedigree_used.csv", "diagnostics.json"):
        assert (out / name).is_file(), name
    fit = load_fit(out)
    assert fit.traits == ["mass", "wing", "tail"]
    post = xr.open_dataset(out / "posterior.nc", group="posterior", engine="h5netcdf")
    extra = (post["cov_brood"] + post["cov_permanent"]).stack(s=("chain", "draw")).transpose("s", ...).values
    np.testing.assert_allclose(fit.P, fit.G + fit.R + extra, rtol=1e-12)
    diag = json.loads((out / "diagnostics.json").read_text())
    # The study has missing trait values and asks for the Gibbs step, which runs on PyMC's
    # sampler whatever sampling.sampler asks for; the diagnostics say so.
    assert diag["missing_trait_values"] > 0 and diag["missing_values"] == "gibbs"
    assert diag["engine"] == "marginal" and diag["sampling"]["sampler"] == "pymc"
    assert diag["sampling"]["requested_sampler"] == "nutpie"
    assert diag["sampling"]["compound_steps"] == ["MissingValueStep", "NUTS"]
    assert diag["sampling"]["numba_opt_level"] == 1   # the marginal engine compiles at LLVM level 1
    assert diag["sampling"]["gradient_evaluations"] > 0
    assert diag["records"] == st.phenotypes.shape[0]
    assert set(diag["checks"]["checked"]) >= {"G[mass,mass]", "R[tail,wing]", "h2[wing]"}
    params = pd.read_csv(out / "parameters.csv")
    row = params.set_index("parameter").loc["G[wing,mass]"]
    assert row["mean"] == pytest.approx(fit.G[:, 1, 0].mean(), rel=1e-5)
    assert row["hpd_lower"] <= row["mean"] <= row["hpd_upper"]
    h2 = params.set_index("parameter").loc["h2[tail]", "mean"]
    assert h2 == pytest.approx(np.mean(fit.G[:, 2, 2] / fit.P[:, 2, 2]), rel=1e-5)
    used = pd.read_csv(out / "pedigree_used.csv", dtype=str, keep_default_na=False)
    assert set(st.phenotypes["id"]) == set(used.loc[used["phenotyped"] == "1", "id"])
    assert diag["random_effects"] == ["brood", "permanent"]
    bv = pd.read_csv(out / "breeding_values.csv")
    assert list(bv.columns[:4]) == ["id", "phenotyped", "mass_mean", "mass_sd"]
    assert len(bv) == len(used)
    # The population mean in original units lies near the simulated population's record mean.
    rec_mean = st.phenotypes["wing"].mean()
    assert abs(fit.mean[:, 1].mean() - rec_mean) < 0.5 * st.phenotypes["wing"].std()


def test_short_run_misses_checks_and_stops(study, tmp_path):
    root, _, _ = study
    cfg = yaml.safe_load((root / "config.yaml").read_text())
    cfg["sampling"] = {"chains": 2, "warmup": 10, "draws": 10, "seed": 4}
    cfg["checks"] = {"on_failure": "stop"}
    (tmp_path / "config.yaml").write_text(yaml.safe_dump(cfg))
    status = _run(["fit", "--config", str(tmp_path / "config.yaml"), "--population", "north",
                   "--out", str(tmp_path / "out"), "--no-progress"])
    assert status == 1
    assert not (tmp_path / "out" / "posterior.nc").exists()
    diag = json.loads((tmp_path / "out" / "diagnostics.json").read_text())
    assert diag["checks"]["passed"] is False and diag["checks"]["missed"]
