"""Small result folders for the report tests, written in the stages' documented formats.

The study is invented (three populations of an imaginary songbird measured for wing, mass and
tarsus). Draws are seeded; nothing here is a real study's data.
"""

from __future__ import annotations

import json
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd
import xarray as xr
import yaml
from scipy import stats

from ped2g.contracts.compare_tables import as_table
from ped2g.fit.outputs import parameter_table
from ped2g.contracts.fit_folder import posterior_dataset

TRAITS = ["wing", "mass", "tarsus"]
POPULATIONS = ["north", "south", "east"]
UNITS = {"wing": "mm", "mass": "g", "tarsus": "mm"}
CHAINS, DRAWS = 4, 60

# Mrode (2014) Table 2.1 six-animal pedigree (docs/methods.md §1.7 P1): F from Mrode p. 25.
MRODE_PEDIGREE = pd.DataFrame({
    "id": ["1", "2", "3", "4", "5", "6"],
    "sire": ["", "", "1", "1", "4", "5"],
    "dam": ["", "", "2", "", "3", "2"],
    "generation": [0, 0, 1, 1, 2, 3],
    "inbreeding": [0.0, 0.0, 0.0, 0.0, 0.125, 0.125],
    "phenotyped": [0, 0, 1, 1, 1, 1],
})


def _wishart_draws(rng: np.random.Generator, scale: np.ndarray, df: int) -> np.ndarray:
    w = stats.wishart(df=df, scale=scale / df)
    return w.rvs(size=CHAINS * DRAWS, random_state=rng).reshape(CHAINS, DRAWS, *scale.shape)


def write_fit(folder: Path, population: str, seed: int, bad_chain: bool = False,
              parameters: bool = True, divergences: int = 0) -> None:
    """A fake fit folder: posterior.nc (with sample_stats), parameters.csv, diagnostics.json,
    pedigree_used.csv."""
    rng = np.random.default_rng(seed)
    G0 = np.array([[4.0, 1.2, 0.8], [1.2, 9.0, -1.5], [0.8, -1.5, 2.5]]) * (1 + 0.2 * (seed % 3))
    R0 = np.diag([3.0, 8.0, 2.0])
    G = _wishart_draws(rng, G0, 200)
    R = _wishart_draws(rng, R0, 200)
    if bad_chain:
        G[0] *= 1.6  # one chain stuck elsewhere: R-hat far above 1.01
    P = G + R
    mean = rng.normal([70.0, 20.0, 19.0], 0.1, size=(CHAINS, DRAWS, 3))
    ds = posterior_dataset(population, TRAITS, G, R, P, mean)
    diverging = np.zeros((CHAINS, DRAWS), dtype=bool)
    diverging.flat[:divergences] = True
    stats_ds = xr.Dataset({"diverging": (("chain", "draw"), diverging)},
                          coords={"chain": ds["chain"], "draw": ds["draw"]})
    folder.mkdir(parents=True, exist_ok=True)
    az.InferenceData(posterior=ds, sample_stats=stats_ds).to_netcdf(str(folder / "posterior.nc"))
    if parameters:
        # the fit stage's own table (parameter, quantity, ..., r_hat, fixed)
        parameter_table(ds).to_csv(folder / "parameters.csv", index=False, float_format="%.6g")
    (folder / "diagnostics.json").write_text(json.dumps(
        {"population": population, "engine": "marginal", "engine_reason": "invented",
         "preparation_notes": [f"{population}: 2 phenotyped animals were missing from the pedigree "
                               "and were added as founders"] if population == "north" else [],
         "sampling": {"chains": CHAINS, "draws": DRAWS, "sampling_seconds": 10.5 + seed, "seed": 7},
         "checks": {"divergences": divergences},
         "wall_seconds": 12.5 + seed,
         "assumptions": ["Additive genetic effects only (invented assumption text)."]}))
    ped = MRODE_PEDIGREE.copy()
    ped["id"] = [f"{population}_{i}" if i else "" for i in ped["id"]]
    for col in ("sire", "dam"):
        ped[col] = [f"{population}_{v}" if v else "" for v in ped[col]]
    ped.to_csv(folder / "pedigree_used.csv", index=False)


def _interval(rng, centre, width):
    est = centre + rng.normal(0, width / 8)
    return est, est - width / 2, est + width / 2


def write_compare(folder: Path, seed: int = 3) -> None:
    """Tidy comparison tables in the contract's shape (values invented; the columns not given
    here are empty)."""
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    pairs = [(a, b) for i, a in enumerate(POPULATIONS) for b in POPULATIONS[i + 1:]]

    def rows(method, statistic, keys, centre, width, null_centre=None):
        out = []
        for key in keys:
            est, lo, hi = _interval(rng, centre, width)
            row = {"method": method, "statistic": statistic, **key, "median": est,
                   "hpd_lower": lo, "hpd_upper": hi}
            if null_centre is not None:
                n, nlo, nhi = _interval(rng, null_centre, width)
                row.update(null_median=n, null_hpd_lower=nlo, null_hpd_upper=nhi,
                           p_obs_gt_null=float(rng.uniform()))
            out.append(row)
        return out

    pair_keys = [{"population": a, "population2": b} for a, b in pairs]
    pop_keys = [{"population": p} for p in POPULATIONS]
    idx_keys = [{"axis": k} for k in (1, 2, 3)]
    tables = {
        "skewers": rows("skewers", "mean_vector_correlation", pair_keys, 0.85, 0.1, 0.95),
        "subspace": rows("subspace", "eigenvalue_H", idx_keys, 2.5, 0.4, 2.9),
        "tensor": rows("tensor", "variance_along_eigentensor", [{"axis": 1}, {"axis": 2}], 1.0, 0.5, 0.3)
        + rows("tensor", "loading", [{"axis": 1, "axis2": t} for t in TRAITS], 0.5, 0.2)
        + rows("tensor", "coordinate", [{"axis": 1, **k} for k in pop_keys], 2.0, 1.0),
        "gmax": rows("gmax", "angle_to_divergence", pop_keys, 40.0, 20.0, 57.0),
        "evolvability": rows("evolvability", "mean_evolvability", pop_keys, 0.4, 0.1, 0.4)
        + rows("evolvability", "mean_autonomy", pop_keys, 0.6, 0.1, 0.6),
        "distance": rows("distance", "riemannian_distance", pair_keys, 1.2, 0.4, 0.5),
    }
    for name, data in tables.items():
        as_table(pd.DataFrame(data)).to_csv(folder / f"{name}.csv", index=False)


def run_stages(config: Path, results: Path, null: bool = True) -> None:
    """Run the real ``ped2g null`` and ``ped2g compare`` on the fake fits (in this process)."""
    from ped2g.cli import main

    fits = [str(results / "fits" / p) for p in POPULATIONS]
    if null:
        assert main(["null", "--config", str(config), "--fits", *fits, "--out", str(results / "null")]) == 0
    args = ["compare", "--config", str(config), "--fits", *fits, "--out", str(results / "compare")]
    if null:
        args += ["--null", str(results / "null")]
    assert main(args) == 0


def make_study(root: Path, *, null: bool = True, compare: str | None = "stages", bad: str | None = "south",
               missing_parameters: str | None = "east") -> dict[str, Path]:
    """Write config, raw tables and a results folder under ``root``; return their paths.

    ``compare``: "stages" runs the real null and compare stages (null only if ``null``);
    "synthetic" writes invented comparison tables (only some of the contract's columns filled)
    and a stand-in null; None writes no comparison.
    """
    root.mkdir(parents=True, exist_ok=True)
    data = root / "data"
    data.mkdir(exist_ok=True)
    raw_ped = pd.DataFrame({"id": ["a1", "a2", "a3"], "sire": ["0", "0", "a1"], "dam": ["0", "0", "a2"]})
    raw_ped.to_csv(data / "pedigree.csv", index=False)
    rng = np.random.default_rng(11)
    pheno = pd.DataFrame({
        "id": [f"x{i}" for i in range(30)],
        "population": np.repeat(POPULATIONS, 10),
        "wing": rng.normal(70, 2, 30).round(1),
        "mass": rng.normal(20, 3, 30).round(1),
        "tarsus": rng.normal(19, 1, 30).round(1),
    }).astype(str)
    pheno.loc[[0, 1, 12], "mass"] = "NA"
    pheno.loc[[25], "tarsus"] = ""
    pheno.to_csv(data / "phenotypes.csv", index=False)
    config = {
        "data": {"pedigree": str(data / "pedigree.csv"), "phenotypes": str(data / "phenotypes.csv")},
        "populations": POPULATIONS,
        "traits": TRAITS,
        "fixed": {"sex": "categorical"},
        "sampling": {"chains": CHAINS, "warmup": 50, "draws": DRAWS, "seed": 7},
        "checks": {"min_ess": 100, "max_rhat": 1.05},
        "report": {"title": "Invented songbird study", "units": UNITS},
    }
    config_path = root / "config.yaml"
    config_path.write_text(yaml.safe_dump(config))
    results = root / "results"
    (results / "pedigree").mkdir(parents=True)
    (results / "pedigree" / "summary.json").write_text(json.dumps(
        {"animals": 18, "founders": 6, "max_generation": 3, "mean_inbreeding": 0.0417, "seconds": 0.4}))
    pd.DataFrame({"row": [3, 7], "id": ["a3", "a9"], "problem": ["parent listed after offspring",
                                                                 "dam also used as sire"],
                  "action": ["reordered", "set dam unknown"]}).to_csv(
        results / "pedigree" / "changes.csv", index=False)
    for k, pop in enumerate(POPULATIONS):
        write_fit(results / "fits" / pop, pop, seed=k + 1, bad_chain=(pop == bad),
                  parameters=(pop != missing_parameters), divergences=3 if pop == bad else 0)
    if compare == "stages":
        run_stages(config_path, results, null=null)
    elif compare == "synthetic":
        if null:
            (results / "null").mkdir()
            xr.Dataset({"G": (("draw", "population"), np.ones((4, 3)))}).to_netcdf(
                results / "null" / "null_G.nc", engine="h5netcdf")
            (results / "null" / "summary.json").write_text(json.dumps(
                {"estimator": "mendelian", "draws": 240, "seconds": 3.2}))
        write_compare(results / "compare")
    return {"root": root, "config": config_path, "results": results, "out": root / "report"}
